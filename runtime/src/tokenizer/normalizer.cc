#include "tokenizer/normalizer.h"

#include "tokenizer/utf8.h"

namespace sprig::tokenizer {

// The order of SentencePiece: a user-defined symbol first (kept as written), then the longest
// rule of the map, then the character itself; a malformed byte becomes U+FFFD and consumes one
// byte only, so the text after it is read as it would be alone.
std::string_view Normalizer::NormalizePrefix(std::string_view input, size_t* consumed) const {
  if (const size_t length = user_symbols_.LongestPrefix(input); length > 0) {
    *consumed = length;
    return input.substr(0, length);
  }
  std::string_view replacement;
  if (const size_t length = charsmap_.LongestMatch(input, &replacement); length > 0) {
    *consumed = length;
    return replacement;
  }
  const size_t length = ValidCharLength(input);
  if (length == 0) {
    *consumed = 1;
    return kReplacementCharacter;
  }
  *consumed = length;
  return input.substr(0, length);
}

void Normalizer::AppendSpace(std::string& out) const {
  if (options_.escape_whitespaces) {
    out.append(kSpaceSymbol);
  } else {
    out.push_back(' ');
  }
}

std::string Normalizer::Normalize(std::string_view input) const {
  std::string out;
  size_t consumed = 0;
  if (options_.remove_extra_whitespaces) {
    // Leading units that normalize to exactly one space are dropped.
    while (!input.empty() && NormalizePrefix(input, &consumed) == " ")
      input.remove_prefix(consumed);
  }
  if (input.empty()) return out;
  out.reserve(input.size() * 3);
  if (!options_.treat_whitespace_as_suffix && options_.add_dummy_prefix) AppendSpace(out);

  bool previous_space = options_.remove_extra_whitespaces;
  while (!input.empty()) {
    std::string_view unit = NormalizePrefix(input, &consumed);
    input.remove_prefix(consumed);
    // A space after a space (of this unit or the one before) is dropped.
    while (previous_space && !unit.empty() && unit.front() == ' ') unit.remove_prefix(1);
    if (!unit.empty()) {
      for (char c : unit) {
        if (c == ' ' && options_.escape_whitespaces) {
          out.append(kSpaceSymbol);
        } else {
          out.push_back(c);
        }
      }
      previous_space = unit.back() == ' ';
    }
    if (!options_.remove_extra_whitespaces) previous_space = false;
  }

  if (options_.remove_extra_whitespaces) {
    const std::string_view space = options_.escape_whitespaces ? kSpaceSymbol : " ";
    while (std::string_view(out).ends_with(space)) out.erase(out.size() - space.size());
  }
  if (options_.treat_whitespace_as_suffix && options_.add_dummy_prefix) AppendSpace(out);
  return out;
}

}  // namespace sprig::tokenizer
