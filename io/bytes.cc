#include "io/bytes.h"

namespace sprig::io {

std::string ShapeText(const std::vector<uint64_t>& shape) {
  std::string s = "[";
  for (size_t i = 0; i < shape.size(); ++i) {
    if (i) s += ", ";
    s += std::to_string(shape[i]);
  }
  return s + "]";
}

std::string HexPrefix(const uint8_t* data, uint64_t size, uint64_t max) {
  static const char kDigits[] = "0123456789abcdef";
  std::string s;
  for (uint64_t i = 0; i < size && i < max; ++i) {
    if (i) s += ' ';
    s += kDigits[data[i] >> 4];
    s += kDigits[data[i] & 15];
  }
  return s;
}

}  // namespace sprig::io
