// Little-endian loads and stores, overflow-checked arithmetic and small formatting helpers
// shared by the container readers and writers. Internal to io/.
#pragma once

#include <bit>
#include <cstdint>
#include <cstring>
#include <string>
#include <vector>

namespace sprig::io {

// Arrays are handed out in the files' little-endian byte order as native values.
static_assert(std::endian::native == std::endian::little, "sprig assumes a little-endian host");

// Every array is capped at this many bytes: far more than any model this engine runs, and
// small enough that a hostile header cannot make us reserve absurd amounts of memory.
inline constexpr uint64_t kMaxArrayBytes = uint64_t{64} << 30;

inline uint16_t LoadLE16(const uint8_t* p) {
  return uint16_t(p[0] | (p[1] << 8));
}
inline uint32_t LoadLE32(const uint8_t* p) {
  return uint32_t(p[0]) | (uint32_t(p[1]) << 8) | (uint32_t(p[2]) << 16) | (uint32_t(p[3]) << 24);
}
inline uint64_t LoadLE64(const uint8_t* p) {
  return uint64_t(LoadLE32(p)) | (uint64_t(LoadLE32(p + 4)) << 32);
}

inline void AppendLE16(std::string& out, uint16_t v) {
  out.push_back(char(v & 0xff));
  out.push_back(char(v >> 8));
}
inline void AppendLE32(std::string& out, uint32_t v) {
  for (int i = 0; i < 4; ++i) out.push_back(char((v >> (8 * i)) & 0xff));
}
inline void AppendLE64(std::string& out, uint64_t v) {
  for (int i = 0; i < 8; ++i) out.push_back(char((v >> (8 * i)) & 0xff));
}

// a + b and a * b, or false when the result does not fit in 64 bits.
inline bool CheckedAdd(uint64_t a, uint64_t b, uint64_t* out) {
  return !__builtin_add_overflow(a, b, out);
}
inline bool CheckedMul(uint64_t a, uint64_t b, uint64_t* out) {
  return !__builtin_mul_overflow(a, b, out);
}

// True when [offset, offset + length) lies within [0, size).
inline bool RangeWithin(uint64_t offset, uint64_t length, uint64_t size) {
  return offset <= size && length <= size - offset;
}

// Element count of `shape` times `element_size`, or false on overflow.
inline bool ShapeBytes(const std::vector<uint64_t>& shape, uint64_t element_size, uint64_t* out) {
  uint64_t n = element_size;
  for (uint64_t d : shape) {
    if (!CheckedMul(n, d, &n)) return false;
  }
  *out = n;
  return true;
}

// A shape for messages: "[3, 4]"; "[]" for a scalar.
std::string ShapeText(const std::vector<uint64_t>& shape);

// Up to `max` leading bytes as hex, e.g. "68 65 6c 6c 6f".
std::string HexPrefix(const uint8_t* data, uint64_t size, uint64_t max = 8);

}  // namespace sprig::io
