// UTF-8 as SentencePiece reads it: a character is valid when it is the shortest form of a
// code point up to U+10FFFF that is not a surrogate; anything else counts as one bad byte.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <string_view>

namespace sprig::tokenizer {

inline constexpr std::string_view kReplacementCharacter = "\xEF\xBF\xBD";  // U+FFFD
inline constexpr std::string_view kSpaceSymbol = "\xE2\x96\x81";           // U+2581

// The length a lead byte announces (1 for ASCII and for stray continuation bytes, 4 for
// 0xF0..0xFF), clipped to what is left: SentencePiece's way of stepping over characters.
inline size_t OneCharLength(std::string_view text) {
  static constexpr uint8_t kLength[16] = {1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 2, 2, 3, 4};
  const size_t length = kLength[static_cast<uint8_t>(text[0]) >> 4];
  return length < text.size() ? length : text.size();
}

// The byte length of the valid character at the start of `text`, or 0 when it is not one
// (including a character cut short by the end of `text`).
size_t ValidCharLength(std::string_view text);

// True when `text` (shorter than its lead byte announces) can still become a valid character
// with more bytes: a decoder must wait for them rather than replace it.
bool CouldComplete(std::string_view text);

// True when all of `text` is valid UTF-8.
bool IsValidUtf8(std::string_view text);

// Moves the characters of `pending` that are decided into `out`: valid ones as they are, a bad
// byte as U+FFFD (`replace_invalid`) or as itself. Unless `final`, an unfinished character that
// can still become valid stays in `pending`.
void MoveDecidedBytes(std::string& pending, std::string& out, bool replace_invalid, bool final);

}  // namespace sprig::tokenizer
