// What both segmentation algorithms read: the checked spec and the lookups built from it.
#pragma once

#include <array>
#include <cstdint>
#include <string>
#include <string_view>
#include <unordered_map>
#include <utility>
#include <vector>

#include "tokenizer/piece_trie.h"
#include "tokenizer/tokenizer.h"

namespace sprig::tokenizer {

// A segment of the normalized text and its id, as the algorithms return them.
using Segment = std::pair<std::string_view, int32_t>;

class Vocabulary {
 public:
  // `spec` must have passed the section's checks (distinct non-empty pieces, one unknown).
  explicit Vocabulary(const TokenizerSpec& spec);
  // The lookups hold views of the spec's strings: a Vocabulary stays where it was built.
  Vocabulary(const Vocabulary&) = delete;
  Vocabulary& operator=(const Vocabulary&) = delete;

  const TokenizerSpec& spec() const { return spec_; }
  PieceType type(int32_t id) const { return spec_.types[id]; }
  float score(int32_t id) const { return spec_.scores[id]; }
  int32_t unk_id() const { return spec_.unk_id; }
  // Normal, user-defined and unused pieces: what segmentation may produce.
  const PieceTrie& pieces() const { return pieces_; }
  const PieceTrie& user_symbols() const { return user_symbols_; }
  // SentencePiece's lookup of a piece: reserved pieces (control, unknown, byte) first, then the
  // others, then the unknown id.
  int32_t IdOf(std::string_view piece) const;
  int32_t byte_id(uint8_t byte) const { return byte_ids_[byte]; }
  // The smallest and largest score of the normal pieces, as SentencePiece's unigram takes them
  // (the largest starts from FLT_MIN, the smallest positive float, not from the lowest).
  float min_score() const { return min_score_; }
  float max_score() const { return max_score_; }

 private:
  TokenizerSpec spec_;
  PieceTrie pieces_;
  PieceTrie user_symbols_;
  std::unordered_map<std::string_view, int32_t> reserved_;
  std::array<int32_t, 256> byte_ids_{};
  float min_score_ = 0, max_score_ = 0;
};

// The byte a piece `<0xXX>` stands for (upper-case hex, as SentencePiece writes it), or -1.
int ByteOfPiece(std::string_view piece);

}  // namespace sprig::tokenizer
