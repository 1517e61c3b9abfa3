// The tokenizer section: a TokenizerSpec as little-endian bytes (schema/README.md, "Tokenizer
// section"), and the complete check of such bytes when they are read back.
#pragma once

#include <cstddef>
#include <cstdint>

#include "tokenizer/tokenizer.h"

namespace sprig::tokenizer {

inline constexpr char kSectionMagic[4] = {'S', 'P', 'T', 'K'};
inline constexpr uint16_t kSectionVersion = 1;
inline constexpr uint16_t kSectionHeaderSize = 64;
// Bounds that keep a hostile section from asking for absurd memory: far above any real model.
inline constexpr uint32_t kMaxPieces = 1u << 22;

// Flag bits of the header's flags byte.
enum SectionFlag : uint8_t {
  kAddDummyPrefix = 1,
  kRemoveExtraWhitespaces = 2,
  kEscapeWhitespaces = 4,
  kTreatWhitespaceAsSuffix = 8,
  kByteFallback = 16,
};

// Reads and checks a section: layout, then the spec's own rules (CheckSpec). Messages start
// with "tokenizer section" and name the field.
Result<TokenizerSpec> ParseSection(const uint8_t* data, size_t size, uint32_t vocab_size);

// The rules a spec must follow whatever it came from: pieces distinct, non-empty, valid UTF-8;
// types known; one unknown piece at unk_id; special ids on pieces of their type; byte pieces
// well-formed and all 256 present with byte fallback (and none without).
Status CheckSpec(const TokenizerSpec& spec);

}  // namespace sprig::tokenizer
