#include "io/ndarray.h"

#include <utility>

namespace sprig::io {

size_t ElementSize(ElementType t) {
  switch (t) {
    case ElementType::kF64:
    case ElementType::kI64:
    case ElementType::kU64:
      return 8;
    case ElementType::kF32:
    case ElementType::kI32:
    case ElementType::kU32:
      return 4;
    case ElementType::kF16:
    case ElementType::kBF16:
    case ElementType::kI16:
    case ElementType::kU16:
      return 2;
    case ElementType::kI8:
    case ElementType::kU8:
    case ElementType::kBool:
      return 1;
  }
  return 1;
}

const char* ElementTypeName(ElementType t) {
  switch (t) {
    case ElementType::kF64:
      return "float64";
    case ElementType::kF32:
      return "float32";
    case ElementType::kF16:
      return "float16";
    case ElementType::kBF16:
      return "bfloat16";
    case ElementType::kI64:
      return "int64";
    case ElementType::kI32:
      return "int32";
    case ElementType::kI16:
      return "int16";
    case ElementType::kI8:
      return "int8";
    case ElementType::kU64:
      return "uint64";
    case ElementType::kU32:
      return "uint32";
    case ElementType::kU16:
      return "uint16";
    case ElementType::kU8:
      return "uint8";
    case ElementType::kBool:
      return "bool";
  }
  return "unknown";
}

bool IsFloating(ElementType t) {
  return t == ElementType::kF64 || t == ElementType::kF32 || t == ElementType::kF16 ||
         t == ElementType::kBF16;
}

uint64_t NdArray::elements() const {
  uint64_t n = 1;
  for (uint64_t d : shape) n *= d;
  return n;
}

NdArray NdArray::Owned(std::string name, ElementType type, std::vector<uint64_t> shape,
                       std::vector<uint8_t> bytes) {
  NdArray a;
  a.name = std::move(name);
  a.type = type;
  a.shape = std::move(shape);
  auto owned = std::make_shared<std::vector<uint8_t>>(std::move(bytes));
  a.data = owned->data();
  a.keepalive = std::move(owned);
  return a;
}

NdArray NdArray::Borrowed(std::string name, ElementType type, std::vector<uint64_t> shape,
                          const void* data) {
  NdArray a;
  a.name = std::move(name);
  a.type = type;
  a.shape = std::move(shape);
  a.data = static_cast<const uint8_t*>(data);
  return a;
}

}  // namespace sprig::io
