#include "tokenizer/section.h"

#include <cmath>
#include <cstring>
#include <string_view>
#include <unordered_map>

#include "base/status_macros.h"
#include "tokenizer/utf8.h"
#include "tokenizer/vocabulary.h"

namespace sprig::tokenizer {
namespace {

void PutLe(std::string& out, uint64_t value, int bytes) {
  for (int i = 0; i < bytes; ++i) out.push_back(static_cast<char>((value >> (8 * i)) & 0xFF));
}

uint64_t GetLe(const uint8_t* p, int bytes) {
  uint64_t value = 0;
  for (int i = bytes - 1; i >= 0; --i) value = (value << 8) | p[i];
  return value;
}

size_t TypesPadding(size_t count) {
  return (4 - count % 4) % 4;
}

Status Bad(const std::string& what) {
  return Status::Corruption("tokenizer section: " + what);
}

uint8_t FlagsOf(const TokenizerSpec& spec) {
  return static_cast<uint8_t>((spec.add_dummy_prefix ? kAddDummyPrefix : 0) |
                              (spec.remove_extra_whitespaces ? kRemoveExtraWhitespaces : 0) |
                              (spec.escape_whitespaces ? kEscapeWhitespaces : 0) |
                              (spec.treat_whitespace_as_suffix ? kTreatWhitespaceAsSuffix : 0) |
                              (spec.byte_fallback ? kByteFallback : 0));
}

// The header's fields, as read.
struct Header {
  uint64_t section_size;
  uint8_t algorithm, flags;
  uint32_t piece_count;
  int32_t unk_id, bos_id, eos_id, pad_id;
  uint32_t piece_text_size, unk_surface_size, charsmap_size;
};

Result<Header> ReadHeader(const uint8_t* data, size_t size, uint32_t vocab_size) {
  if (size < kSectionHeaderSize) {
    return Bad("its " + std::to_string(size) + " bytes are fewer than the " +
               std::to_string(kSectionHeaderSize) + "-byte header");
  }
  if (std::memcmp(data, kSectionMagic, 4) != 0) return Bad("magic is not \"SPTK\"");
  const auto version = static_cast<uint16_t>(GetLe(data + 4, 2));
  if (version == 0 || version > kSectionVersion) {
    return Bad("version " + std::to_string(version) + " is not one this build reads (1)");
  }
  if (GetLe(data + 6, 2) != kSectionHeaderSize) return Bad("header_size is not 64");
  Header h{};
  h.section_size = GetLe(data + 8, 8);
  if (h.section_size != size) {
    return Bad("section_size says " + std::to_string(h.section_size) + " bytes, the section has " +
               std::to_string(size));
  }
  h.algorithm = data[16];
  h.flags = data[17];
  if (h.algorithm != 1 && h.algorithm != 2) {
    return Bad("algorithm " + std::to_string(h.algorithm) + " is neither 1 (unigram) nor 2 (BPE)");
  }
  if (h.flags & ~0x1Fu) return Bad("flags has unknown bits set");
  if (GetLe(data + 18, 2) != 0) return Bad("reserved bytes 18-19 are not zero");
  h.piece_count = static_cast<uint32_t>(GetLe(data + 20, 4));
  if (h.piece_count != vocab_size) {
    return Bad("piece_count is " + std::to_string(h.piece_count) +
               " but the config's vocab_size is " + std::to_string(vocab_size));
  }
  if (h.piece_count == 0 || h.piece_count > kMaxPieces) {
    return Bad("piece_count " + std::to_string(h.piece_count) + " is not in 1.." +
               std::to_string(kMaxPieces));
  }
  h.unk_id = static_cast<int32_t>(GetLe(data + 24, 4));
  h.bos_id = static_cast<int32_t>(GetLe(data + 28, 4));
  h.eos_id = static_cast<int32_t>(GetLe(data + 32, 4));
  h.pad_id = static_cast<int32_t>(GetLe(data + 36, 4));
  h.piece_text_size = static_cast<uint32_t>(GetLe(data + 40, 4));
  h.unk_surface_size = static_cast<uint32_t>(GetLe(data + 44, 4));
  h.charsmap_size = static_cast<uint32_t>(GetLe(data + 48, 4));
  for (size_t i = 52; i < kSectionHeaderSize; ++i) {
    if (data[i] != 0) return Bad("reserved bytes 52-63 are not zero");
  }
  // Sizes are 32-bit and the count bounded, so this sum cannot overflow 64 bits.
  const uint64_t n = h.piece_count;
  const uint64_t expected = kSectionHeaderSize + 4 * n + n + TypesPadding(n) + 4 * n +
                            h.piece_text_size + h.unk_surface_size + h.charsmap_size;
  if (expected != size) {
    return Bad("piece_count, piece_text_size, unk_surface_size and charsmap_size add up to " +
               std::to_string(expected) + " bytes, the section has " + std::to_string(size));
  }
  return h;
}

// The columns after the header: scores, types, piece ends, then the strings.
Status ReadBody(const uint8_t* data, const Header& h, TokenizerSpec& spec) {
  const size_t n = h.piece_count;
  const uint8_t* p = data + kSectionHeaderSize;
  spec.scores.resize(n);
  for (size_t i = 0; i < n; ++i) {
    const auto bits = static_cast<uint32_t>(GetLe(p + 4 * i, 4));
    std::memcpy(&spec.scores[i], &bits, 4);
  }
  p += 4 * n;
  spec.types.resize(n);
  for (size_t i = 0; i < n; ++i) spec.types[i] = static_cast<PieceType>(p[i]);
  for (size_t i = 0; i < TypesPadding(n); ++i) {
    if (p[n + i] != 0) return Bad("the padding after types is not zero");
  }
  p += n + TypesPadding(n);
  const uint8_t* ends = p;
  p += 4 * n;
  const char* text = reinterpret_cast<const char*>(p);
  spec.pieces.resize(n);
  uint64_t begin = 0;
  for (size_t i = 0; i < n; ++i) {
    const uint64_t end = GetLe(ends + 4 * i, 4);
    if (end <= begin || end > h.piece_text_size) {
      return Bad("piece_ends[" + std::to_string(i) + "] is " + std::to_string(end) +
                 ", not after the previous end (" + std::to_string(begin) + ") within " +
                 std::to_string(h.piece_text_size) + " bytes of piece text");
    }
    spec.pieces[i].assign(text + begin, end - begin);
    begin = end;
  }
  if (begin != h.piece_text_size) {
    return Bad("the last of piece_ends is " + std::to_string(begin) + ", not piece_text_size " +
               std::to_string(h.piece_text_size));
  }
  p += h.piece_text_size;
  spec.unk_surface.assign(reinterpret_cast<const char*>(p), h.unk_surface_size);
  p += h.unk_surface_size;
  spec.precompiled_charsmap.assign(reinterpret_cast<const char*>(p), h.charsmap_size);
  return Status::Ok();
}

Status CheckSpecialId(const TokenizerSpec& spec, int32_t id, const char* field, PieceType type) {
  if (id == -1) return Status::Ok();
  if (id < 0 || static_cast<size_t>(id) >= spec.pieces.size() || spec.types[id] != type) {
    return Bad(std::string(field) + " " + std::to_string(id) + " is not the id of a " +
               (type == PieceType::kUnknown ? "unknown" : "control") + " piece");
  }
  return Status::Ok();
}

Status CheckPieces(const TokenizerSpec& spec) {
  std::unordered_map<std::string_view, size_t> seen;
  size_t unknown_count = 0, byte_count = 0;
  for (size_t i = 0; i < spec.pieces.size(); ++i) {
    const std::string& piece = spec.pieces[i];
    const std::string name = "piece " + std::to_string(i);
    if (piece.empty()) return Bad(name + " is empty");
    if (piece.find('\0') != std::string::npos) return Bad(name + " holds a NUL byte");
    if (!IsValidUtf8(piece)) return Bad(name + " is not valid UTF-8");
    if (auto [it, inserted] = seen.emplace(piece, i); !inserted) {
      return Bad(name + " repeats piece " + std::to_string(it->second));
    }
    const auto type = static_cast<uint8_t>(spec.types[i]);
    if (type < 1 || type > 6)
      return Bad("types[" + std::to_string(i) + "] is " + std::to_string(type));
    if (!std::isfinite(spec.scores[i]))
      return Bad("scores[" + std::to_string(i) + "] is not finite");
    if (spec.types[i] == PieceType::kUnknown) ++unknown_count;
    if (spec.types[i] == PieceType::kByte) {
      if (ByteOfPiece(piece) < 0) return Bad(name + " has type byte but is not <0xXX>");
      ++byte_count;
    }
  }
  if (unknown_count != 1) {
    return Bad("there are " + std::to_string(unknown_count) + " unknown pieces, not one");
  }
  if (spec.byte_fallback && byte_count != 256) {
    return Bad("byte_fallback is set but there are " + std::to_string(byte_count) +
               " byte pieces, not 256");
  }
  if (!spec.byte_fallback && byte_count != 0) return Bad("byte pieces without byte_fallback");
  return Status::Ok();
}

}  // namespace

Status CheckSpec(const TokenizerSpec& spec) {
  const size_t n = spec.pieces.size();
  if (spec.scores.size() != n || spec.types.size() != n) {
    return Bad("pieces, scores and types differ in length");
  }
  if (n == 0 || n > kMaxPieces) return Bad("piece_count " + std::to_string(n) + " is out of range");
  if (spec.algorithm != Algorithm::kUnigram && spec.algorithm != Algorithm::kBpe) {
    return Bad("algorithm is neither unigram nor BPE");
  }
  SPRIG_RETURN_IF_ERROR(CheckPieces(spec));
  if (spec.unk_id == -1) return Bad("unk_id is -1; the unknown piece must have an id");
  SPRIG_RETURN_IF_ERROR(CheckSpecialId(spec, spec.unk_id, "unk_id", PieceType::kUnknown));
  SPRIG_RETURN_IF_ERROR(CheckSpecialId(spec, spec.bos_id, "bos_id", PieceType::kControl));
  SPRIG_RETURN_IF_ERROR(CheckSpecialId(spec, spec.eos_id, "eos_id", PieceType::kControl));
  SPRIG_RETURN_IF_ERROR(CheckSpecialId(spec, spec.pad_id, "pad_id", PieceType::kControl));
  if (!IsValidUtf8(spec.unk_surface)) return Bad("unk_surface is not valid UTF-8");
  return Status::Ok();
}

std::string SerializeSection(const TokenizerSpec& spec) {
  const size_t n = spec.pieces.size();
  std::string text;
  for (const std::string& piece : spec.pieces) text += piece;
  std::string out;
  out.append(kSectionMagic, 4);
  PutLe(out, kSectionVersion, 2);
  PutLe(out, kSectionHeaderSize, 2);
  const uint64_t size = kSectionHeaderSize + 9 * n + TypesPadding(n) + text.size() +
                        spec.unk_surface.size() + spec.precompiled_charsmap.size();
  PutLe(out, size, 8);
  out.push_back(static_cast<char>(spec.algorithm));
  out.push_back(static_cast<char>(FlagsOf(spec)));
  PutLe(out, 0, 2);
  PutLe(out, n, 4);
  for (int32_t id : {spec.unk_id, spec.bos_id, spec.eos_id, spec.pad_id}) {
    PutLe(out, static_cast<uint32_t>(id), 4);
  }
  PutLe(out, text.size(), 4);
  PutLe(out, spec.unk_surface.size(), 4);
  PutLe(out, spec.precompiled_charsmap.size(), 4);
  out.append(kSectionHeaderSize - out.size(), '\0');
  for (float score : spec.scores) {
    uint32_t bits;
    std::memcpy(&bits, &score, 4);
    PutLe(out, bits, 4);
  }
  for (PieceType type : spec.types) out.push_back(static_cast<char>(type));
  out.append(TypesPadding(n), '\0');
  uint64_t end = 0;
  for (const std::string& piece : spec.pieces) PutLe(out, end += piece.size(), 4);
  out += text;
  out += spec.unk_surface;
  out += spec.precompiled_charsmap;
  return out;
}

Result<TokenizerSpec> ParseSection(const uint8_t* data, size_t size, uint32_t vocab_size) {
  SPRIG_ASSIGN_OR_RETURN(const Header h, ReadHeader(data, size, vocab_size));
  TokenizerSpec spec;
  spec.algorithm = static_cast<Algorithm>(h.algorithm);
  spec.add_dummy_prefix = (h.flags & kAddDummyPrefix) != 0;
  spec.remove_extra_whitespaces = (h.flags & kRemoveExtraWhitespaces) != 0;
  spec.escape_whitespaces = (h.flags & kEscapeWhitespaces) != 0;
  spec.treat_whitespace_as_suffix = (h.flags & kTreatWhitespaceAsSuffix) != 0;
  spec.byte_fallback = (h.flags & kByteFallback) != 0;
  spec.unk_id = h.unk_id;
  spec.bos_id = h.bos_id;
  spec.eos_id = h.eos_id;
  spec.pad_id = h.pad_id;
  SPRIG_RETURN_IF_ERROR(ReadBody(data, h, spec));
  SPRIG_RETURN_IF_ERROR(CheckSpec(spec));
  return spec;
}

}  // namespace sprig::tokenizer
