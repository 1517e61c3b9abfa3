// A byte trie from pieces to ids: the unigram lattice walks it from every position, BPE asks it
// whether two symbols make a piece, and the normalizer and BPE find user-defined symbols in it.
#pragma once

#include <cstdint>
#include <string_view>
#include <utility>
#include <vector>

namespace sprig::tokenizer {

class PieceTrie {
 public:
  // `entries` are (piece, id) with distinct non-empty pieces.
  explicit PieceTrie(const std::vector<std::pair<std::string_view, int32_t>>& entries);
  PieceTrie() = default;

  static constexpr uint32_t kRoot = 0;
  static constexpr uint32_t kNone = UINT32_MAX;

  // The child of `node` along `byte`, or kNone.
  uint32_t Child(uint32_t node, uint8_t byte) const {
    if (node == kRoot) return root_children_[byte];
    const Node& n = nodes_[node];
    for (uint32_t e = n.first_edge; e < n.first_edge + n.edge_count; ++e) {
      if (edge_labels_[e] == byte) return edge_targets_[e];
      if (edge_labels_[e] > byte) break;  // labels are sorted
    }
    return kNone;
  }
  // The id of the piece ending at `node`, or -1.
  int32_t IdAt(uint32_t node) const { return nodes_[node].id; }

  // The id of `piece` itself, or -1.
  int32_t Find(std::string_view piece) const;
  // The length of the longest piece that starts `text`, or 0.
  size_t LongestPrefix(std::string_view text) const;
  bool empty() const { return nodes_.size() <= 1; }

 private:
  struct Node {
    int32_t id = -1;
    uint32_t first_edge = 0;
    uint32_t edge_count = 0;
  };
  std::vector<Node> nodes_;
  std::vector<uint8_t> edge_labels_;
  std::vector<uint32_t> edge_targets_;
  // The root's children are the most visited: one direct table instead of a search.
  std::vector<uint32_t> root_children_ = std::vector<uint32_t>(256, kNone);
};

}  // namespace sprig::tokenizer
