// SentencePiece's precompiled character map: the normalization rules a model carries, as
// <uint32 trie size><Darts-clone double-array trie><NUL-terminated replacement strings>. The
// trie maps a source string to the offset of its replacement.
#pragma once

#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

#include "sprig/status.h"

namespace sprig::tokenizer {

class CharsMap {
 public:
  // Checks the blob completely (sizes, every leaf's value offset) so that lookups cannot leave
  // it; messages name `field`. An empty blob is the identity.
  static Result<CharsMap> Parse(std::string_view blob, const std::string& field);
  CharsMap() = default;

  bool empty() const { return units_.empty(); }
  // The longest rule matching a prefix of `text`: its length (0 when none) and replacement.
  size_t LongestMatch(std::string_view text, std::string_view* replacement) const;

 private:
  std::vector<uint32_t> units_;
  std::string replacements_;  // ends with NUL, checked at Parse
};

}  // namespace sprig::tokenizer
