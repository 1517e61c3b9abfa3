#include "tokenizer/utf8.h"

namespace sprig::tokenizer {
namespace {

bool IsTrail(uint8_t byte) {
  return (byte & 0xC0) == 0x80;
}

// Length, payload bits of the lead byte and smallest code point of a sequence led by `lead`;
// length 0 for a byte that leads nothing.
struct Lead {
  size_t length;
  uint32_t bits;
  uint32_t minimum;
};

Lead LeadOf(uint8_t lead) {
  if (lead < 0x80) return {1, lead, 0};
  if ((lead & 0xE0) == 0xC0) return {2, lead & 0x1Fu, 0x80};
  if ((lead & 0xF0) == 0xE0) return {3, lead & 0x0Fu, 0x800};
  if ((lead & 0xF8) == 0xF0) return {4, lead & 0x07u, 0x10000};
  return {0, 0, 0};
}

bool IsValidCodePoint(uint32_t cp) {
  return cp < 0xD800 || (cp >= 0xE000 && cp <= 0x10FFFF);
}

}  // namespace

size_t ValidCharLength(std::string_view text) {
  if (text.empty()) return 0;
  const Lead lead = LeadOf(static_cast<uint8_t>(text[0]));
  if (lead.length == 0 || lead.length > text.size()) return 0;
  uint32_t cp = lead.bits;
  for (size_t i = 1; i < lead.length; ++i) {
    const auto byte = static_cast<uint8_t>(text[i]);
    if (!IsTrail(byte)) return 0;
    cp = (cp << 6) | (byte & 0x3Fu);
  }
  // Overlong forms and surrogates are refused, as SentencePiece's decoder refuses them.
  if (cp < lead.minimum || !IsValidCodePoint(cp)) return 0;
  return lead.length;
}

bool CouldComplete(std::string_view text) {
  if (text.empty()) return false;
  const Lead lead = LeadOf(static_cast<uint8_t>(text[0]));
  if (lead.length <= text.size()) return false;
  uint32_t low = lead.bits;
  for (size_t i = 1; i < text.size(); ++i) {
    const auto byte = static_cast<uint8_t>(text[i]);
    if (!IsTrail(byte)) return false;
    low = (low << 6) | (byte & 0x3Fu);
  }
  // The missing bytes can add any payload: the code points reachable form [low, high].
  const size_t missing_bits = 6 * (lead.length - text.size());
  low <<= missing_bits;
  const uint32_t high = low | ((1u << missing_bits) - 1);
  if (high < lead.minimum || low > 0x10FFFF) return false;
  // Only the surrogates are excluded inside; a range wider than them always keeps a valid one.
  return !(low >= 0xD800 && high <= 0xDFFF);
}

bool IsValidUtf8(std::string_view text) {
  while (!text.empty()) {
    const size_t length = ValidCharLength(text);
    if (length == 0) return false;
    text.remove_prefix(length);
  }
  return true;
}

void MoveDecidedBytes(std::string& pending, std::string& out, bool replace_invalid, bool final) {
  std::string_view rest = pending;
  while (!rest.empty()) {
    const size_t length = ValidCharLength(rest);
    if (length > 0) {
      out.append(rest.data(), length);
      rest.remove_prefix(length);
      continue;
    }
    if (!final && CouldComplete(rest)) break;
    if (replace_invalid) {
      out.append(kReplacementCharacter);
    } else {
      out.push_back(rest[0]);
    }
    rest.remove_prefix(1);
  }
  pending.erase(0, pending.size() - rest.size());
}

}  // namespace sprig::tokenizer
