#include "format/preamble.h"

#include <zlib.h>

#include <bit>
#include <cstring>
#include <string>

namespace sprig::format {
namespace {

void PutU32(uint8_t* p, uint32_t v) {
  for (int i = 0; i < 4; ++i) p[i] = static_cast<uint8_t>(v >> (8 * i));
}
void PutU64(uint8_t* p, uint64_t v) {
  for (int i = 0; i < 8; ++i) p[i] = static_cast<uint8_t>(v >> (8 * i));
}
uint32_t GetU32(const uint8_t* p) {
  uint32_t v = 0;
  for (int i = 0; i < 4; ++i) v |= uint32_t{p[i]} << (8 * i);
  return v;
}
uint64_t GetU64(const uint8_t* p) {
  uint64_t v = 0;
  for (int i = 0; i < 8; ++i) v |= uint64_t{p[i]} << (8 * i);
  return v;
}

// Byte offsets of the preamble's fields (schema/README.md).
constexpr size_t kOffVersion = 8, kOffPreambleSize = 12, kOffHeaderOffset = 16, kOffHeaderSize = 24,
                 kOffFileSize = 32, kOffHeaderCrc = 40, kOffBom = 44, kOffPreambleCrc = 60;

}  // namespace

uint32_t Crc32Extend(uint32_t crc, const void* data, size_t size) {
  const auto* p = static_cast<const Bytef*>(data);
  // zlib's length type is uInt; feed large ranges in pieces.
  while (size > 0) {
    const uInt n = static_cast<uInt>(size > (1u << 30) ? (1u << 30) : size);
    crc = static_cast<uint32_t>(crc32(crc, p, n));
    p += n;
    size -= n;
  }
  return crc;
}

uint32_t Crc32(const void* data, size_t size) {
  return Crc32Extend(0, data, size);
}

void EncodePreamble(const Preamble& p, uint8_t out[kPreambleSize]) {
  std::memset(out, 0, kPreambleSize);
  std::memcpy(out, kMagic, sizeof(kMagic));
  PutU32(out + kOffVersion, p.version);
  PutU32(out + kOffPreambleSize, kPreambleSize);
  PutU64(out + kOffHeaderOffset, p.header_offset);
  PutU64(out + kOffHeaderSize, p.header_size);
  PutU64(out + kOffFileSize, p.file_size);
  PutU32(out + kOffHeaderCrc, p.header_crc32);
  PutU32(out + kOffBom, kByteOrderMark);
  PutU32(out + kOffPreambleCrc, Crc32(out, kOffPreambleCrc));
}

Result<Preamble> DecodePreamble(const uint8_t* b, uint64_t available, uint64_t actual_file_size,
                                const char* source) {
  const std::string src = source;
  if (std::endian::native != std::endian::little) {
    return Status::NotSupported(src +
                                ": this build runs on a big-endian CPU, and .sprig files "
                                "are little-endian; big-endian hosts are not supported");
  }
  if (available < sizeof(kMagic) || std::memcmp(b, kMagic, sizeof(kMagic)) != 0) {
    return Status::Corruption(src +
                              " is not a .sprig file (its first 8 bytes are not the "
                              "sprig magic \"SPRIG\\0\\r\\n\")");
  }
  if (available < kPreambleSize) {
    return Status::Corruption(src + " is truncated: it ends inside the 64-byte preamble (" +
                              std::to_string(available) + " bytes)");
  }
  Preamble p;
  p.version = GetU32(b + kOffVersion);
  if (p.version > kFormatVersion) {
    return Status::NotSupported(src + " uses .sprig format version " + std::to_string(p.version) +
                                ", newer than this build reads (version " +
                                std::to_string(kFormatVersion) + "); upgrade sprig to open it");
  }
  if (p.version == 0) {
    return Status::Corruption(src + ": the preamble's format version is 0, which is not valid");
  }
  if (GetU32(b + kOffPreambleCrc) != Crc32(b, kOffPreambleCrc)) {
    return Status::Corruption(src +
                              ": the preamble's checksum does not match (the file is "
                              "damaged)");
  }
  if (GetU32(b + kOffBom) != kByteOrderMark) {
    return Status::Corruption(src + ": the preamble's byte-order mark is not 0x01020304");
  }
  if (GetU32(b + kOffPreambleSize) != kPreambleSize) {
    return Status::Corruption(src + ": the preamble size field is not 64");
  }
  p.header_offset = GetU64(b + kOffHeaderOffset);
  p.header_size = GetU64(b + kOffHeaderSize);
  p.file_size = GetU64(b + kOffFileSize);
  p.header_crc32 = GetU32(b + kOffHeaderCrc);
  if (p.file_size != actual_file_size) {
    return Status::Corruption(src + " is " + std::to_string(actual_file_size) +
                              " bytes but its preamble says " + std::to_string(p.file_size) +
                              " (the file is truncated or has bytes appended)");
  }
  if (p.header_offset < kPreambleSize || p.header_size == 0 || p.header_size > kMaxHeaderSize ||
      p.header_offset > actual_file_size || p.header_size > actual_file_size - p.header_offset) {
    return Status::Corruption(src + ": the header range (offset " +
                              std::to_string(p.header_offset) + ", size " +
                              std::to_string(p.header_size) + ") lies outside the file");
  }
  // FlatBuffers aligns 8-byte fields relative to the buffer's start, so the buffer itself must
  // start 8-byte aligned in the (page-aligned) mapping for those reads to be aligned.
  if (p.header_offset % 8 != 0) {
    return Status::Corruption(src + ": the header offset " + std::to_string(p.header_offset) +
                              " is not a multiple of 8");
  }
  return p;
}

}  // namespace sprig::format
