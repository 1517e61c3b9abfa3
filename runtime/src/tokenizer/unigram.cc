#include "tokenizer/unigram.h"

#include <algorithm>

#include "tokenizer/utf8.h"

namespace sprig::tokenizer {
namespace {

// The best path ending at a byte position: its score, where its last piece starts, and that
// piece's id. The score is kept as a float, as SentencePiece keeps it.
struct BestPath {
  int32_t id = -1;
  float score = 0;
  int64_t starts_at = -1;
};

// SentencePiece's penalty of an unknown character below the lowest normal piece.
constexpr float kUnknownPenalty = 10.0f;

}  // namespace

std::vector<Segment> EncodeUnigram(const Vocabulary& vocabulary, std::string_view normalized) {
  std::vector<Segment> segments;
  if (normalized.empty()) return segments;
  const size_t size = normalized.size();
  const float unknown_score = vocabulary.min_score() - kUnknownPenalty;
  const PieceTrie& trie = vocabulary.pieces();
  std::vector<BestPath> best(size + 1);

  size_t starts_at = 0;
  while (starts_at < size) {
    const float score_so_far = best[starts_at].score;
    const size_t char_length = OneCharLength(normalized.substr(starts_at));
    bool has_single_char_piece = false;
    uint32_t node = PieceTrie::kRoot;
    for (size_t end = starts_at; end < size;) {
      node = trie.Child(node, static_cast<uint8_t>(normalized[end]));
      if (node == PieceTrie::kNone) break;
      ++end;
      const int32_t id = trie.IdAt(node);
      if (id < 0 || vocabulary.type(id) == PieceType::kUnused) continue;
      const size_t length = end - starts_at;
      // SentencePiece computes the candidate in double (the user-defined bonus is a double
      // expression, so the conditional is), compares it with the stored float and stores it
      // rounded: repeating that keeps its ties. The bonus makes a user-defined symbol win.
      const double score =
          vocabulary.type(id) == PieceType::kUserDefined
              ? static_cast<double>(static_cast<float>(length) * vocabulary.max_score()) - 0.1
              : static_cast<double>(vocabulary.score(id));
      const double candidate = score + static_cast<double>(score_so_far);
      BestPath& target = best[end];
      if (target.starts_at == -1 || candidate > static_cast<double>(target.score)) {
        target.score = static_cast<float>(candidate);
        target.starts_at = static_cast<int64_t>(starts_at);
        target.id = id;
      }
      if (length == char_length) has_single_char_piece = true;
    }
    if (!has_single_char_piece) {
      // The unknown candidate is a float sum in SentencePiece.
      BestPath& target = best[starts_at + char_length];
      const float candidate = unknown_score + score_so_far;
      if (target.starts_at == -1 || candidate > target.score) {
        target.score = candidate;
        target.starts_at = static_cast<int64_t>(starts_at);
        target.id = vocabulary.unk_id();
      }
    }
    starts_at += char_length;
  }

  for (size_t end = size; end > 0;) {
    const BestPath& path = best[end];
    const auto begin = static_cast<size_t>(path.starts_at);
    segments.emplace_back(normalized.substr(begin, end - begin), path.id);
    end = begin;
  }
  std::reverse(segments.begin(), segments.end());
  return segments;
}

}  // namespace sprig::tokenizer
