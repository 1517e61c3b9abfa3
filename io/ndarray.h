// NdArray: an n-dimensional array read from (or to be written to) a .npy, .npz or .safetensors
// file. The bytes are little-endian, C order (row-major), densely packed. They either live in
// a read-only mapping of the source file (no copy) or in a buffer the array owns; `keepalive`
// holds whichever it is, so an NdArray stays valid after its archive is gone.
#pragma once

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

namespace sprig::io {

// clang-format off
enum class ElementType : uint8_t {
  kF64, kF32, kF16, kBF16,
  kI64, kI32, kI16, kI8,
  kU64, kU32, kU16, kU8,
  kBool,
};
// clang-format on

// Bytes per element.
size_t ElementSize(ElementType t);
// NumPy-style name: "float32", "bfloat16", "int64", ...
const char* ElementTypeName(ElementType t);
bool IsFloating(ElementType t);

struct NdArray {
  std::string name;
  ElementType type = ElementType::kF32;
  std::vector<uint64_t> shape;
  // nbytes() bytes, little-endian, C order. Not necessarily aligned to the element size (an
  // .npz member or a safetensors tensor may start at any byte), so read it with memcpy.
  const uint8_t* data = nullptr;
  std::shared_ptr<const void> keepalive;

  uint64_t elements() const;
  uint64_t nbytes() const { return elements() * ElementSize(type); }

  // An array that owns a copy of `bytes`.
  static NdArray Owned(std::string name, ElementType type, std::vector<uint64_t> shape,
                       std::vector<uint8_t> bytes);
  // An array over memory the caller keeps alive for as long as the array is used.
  static NdArray Borrowed(std::string name, ElementType type, std::vector<uint64_t> shape,
                          const void* data);
};

}  // namespace sprig::io
