// SentencePiece's normalizer: the character map's rules, whitespace handling (leading,
// trailing and repeated spaces removed, the dummy prefix, spaces escaped as U+2581) and
// user-defined symbols, which pass through unnormalised.
#pragma once

#include <string>
#include <string_view>

#include "tokenizer/charsmap.h"
#include "tokenizer/piece_trie.h"

namespace sprig::tokenizer {

struct NormalizerOptions {
  bool add_dummy_prefix = true, remove_extra_whitespaces = true, escape_whitespaces = true;
  bool treat_whitespace_as_suffix = false;
};

class Normalizer {
 public:
  // `user_symbols` holds the user-defined pieces (may be empty); both must outlive this.
  Normalizer(const CharsMap& charsmap, const PieceTrie& user_symbols, NormalizerOptions options)
      : charsmap_(charsmap), user_symbols_(user_symbols), options_(options) {}

  std::string Normalize(std::string_view input) const;

 private:
  // The normalized form of the text's first unit and the input bytes it consumed.
  std::string_view NormalizePrefix(std::string_view input, size_t* consumed) const;
  void AppendSpace(std::string& out) const;

  const CharsMap& charsmap_;
  const PieceTrie& user_symbols_;
  NormalizerOptions options_;
};

}  // namespace sprig::tokenizer
