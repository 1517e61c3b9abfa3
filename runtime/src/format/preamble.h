// The fixed 64-byte preamble at the start of every .sprig file (schema/README.md, "Preamble").
#pragma once

#include <cstddef>
#include <cstdint>

#include "sprig/status.h"

namespace sprig::format {

inline constexpr uint8_t kMagic[8] = {'S', 'P', 'R', 'I', 'G', 0x00, 0x0D, 0x0A};
// The newest format version this build reads; a file is written with the oldest version whose
// readers compute its model correctly (RequiredFormatVersion, format/header_config.h).
inline constexpr uint32_t kFormatVersion = 2;
inline constexpr uint32_t kPreambleSize = 64;
inline constexpr uint32_t kByteOrderMark = 0x01020304;
inline constexpr uint64_t kPageSize = 4096;     // section alignment
inline constexpr uint64_t kPartAlignment = 64;  // tensor and record-part alignment
inline constexpr uint64_t kMaxHeaderSize = uint64_t{1} << 30;

struct Preamble {
  uint32_t version = kFormatVersion;
  uint64_t header_offset = kPreambleSize;
  uint64_t header_size = 0;
  uint64_t file_size = 0;
  uint32_t header_crc32 = 0;
};

// Serialises to exactly kPreambleSize bytes, little-endian, with its own trailing crc32.
void EncodePreamble(const Preamble& p, uint8_t out[kPreambleSize]);

// Parses and checks magic, version, byte-order mark, preamble crc and that the header lies
// within `actual_file_size`. `source` names the file in messages.
Result<Preamble> DecodePreamble(const uint8_t* bytes, uint64_t available, uint64_t actual_file_size,
                                const char* source);

// zlib crc32 of a byte range (the checksum used everywhere in the format).
uint32_t Crc32(const void* data, size_t size);
uint32_t Crc32Extend(uint32_t crc, const void* data, size_t size);

inline uint64_t AlignUp(uint64_t v, uint64_t a) {
  return (v + a - 1) / a * a;
}

}  // namespace sprig::format
