#include "tokenizer/piece_trie.h"

#include <algorithm>

namespace sprig::tokenizer {

// Built breadth first from the sorted pieces: the children of a node are the distinct next
// bytes of the pieces that share its prefix, which sorting makes a contiguous, ordered range.
PieceTrie::PieceTrie(const std::vector<std::pair<std::string_view, int32_t>>& entries) {
  std::vector<std::pair<std::string_view, int32_t>> sorted = entries;
  std::sort(sorted.begin(), sorted.end());
  struct Range {
    size_t begin, end, depth;
  };
  std::vector<Range> pending = {{0, sorted.size(), 0}};
  nodes_.emplace_back();
  for (size_t node = 0; node < pending.size(); ++node) {
    Range range = pending[node];
    // The piece that ends here sorts first among those sharing the prefix.
    if (range.begin < range.end && sorted[range.begin].first.size() == range.depth) {
      nodes_[node].id = sorted[range.begin].second;
      ++range.begin;
    }
    nodes_[node].first_edge = static_cast<uint32_t>(edge_labels_.size());
    size_t i = range.begin;
    while (i < range.end) {
      const auto byte = static_cast<uint8_t>(sorted[i].first[range.depth]);
      size_t j = i + 1;
      while (j < range.end && static_cast<uint8_t>(sorted[j].first[range.depth]) == byte) ++j;
      const auto child = static_cast<uint32_t>(pending.size());
      pending.push_back({i, j, range.depth + 1});
      nodes_.emplace_back();
      edge_labels_.push_back(byte);
      edge_targets_.push_back(child);
      if (node == kRoot) root_children_[byte] = child;
      i = j;
    }
    nodes_[node].edge_count = static_cast<uint32_t>(edge_labels_.size()) - nodes_[node].first_edge;
  }
}

int32_t PieceTrie::Find(std::string_view piece) const {
  if (nodes_.empty()) return -1;
  uint32_t node = kRoot;
  for (char c : piece) {
    node = Child(node, static_cast<uint8_t>(c));
    if (node == kNone) return -1;
  }
  return IdAt(node);
}

size_t PieceTrie::LongestPrefix(std::string_view text) const {
  if (nodes_.empty()) return 0;
  size_t longest = 0;
  uint32_t node = kRoot;
  for (size_t i = 0; i < text.size(); ++i) {
    node = Child(node, static_cast<uint8_t>(text[i]));
    if (node == kNone) break;
    if (IdAt(node) >= 0) longest = i + 1;
  }
  return longest;
}

}  // namespace sprig::tokenizer
