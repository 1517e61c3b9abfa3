// Fuzz target: the mapping file (docs/mapping.md). Any text must parse or be refused with a
// Status; a mapping that parses is applied to a fixed set of arrays (indexed names, fused and
// small tensors of each element size), and must make arrays whose bytes all lie inside memory
// it owns or borrows: every byte of every result is touched, so AddressSanitizer sees a range
// that runs past its source.
#include <cstdint>
#include <cstdlib>
#include <string>
#include <vector>

#include "converter/config/mapping.h"
#include "fuzz_support.h"

namespace {

sprig::io::NdArray Array(const std::string& name, sprig::io::ElementType type,
                         std::vector<uint64_t> shape) {
  uint64_t n = 1;
  for (uint64_t d : shape) n *= d;
  std::vector<uint8_t> bytes(n * sprig::io::ElementSize(type));
  for (size_t i = 0; i < bytes.size(); ++i) bytes[i] = static_cast<uint8_t>(i * 7);
  return sprig::io::NdArray::Owned(name, type, std::move(shape), std::move(bytes));
}

// Names the seeds' patterns match ("h.{i}.w", "moe.{l}.experts.{e}.w1", "in_proj", ...).
const std::vector<sprig::io::NdArray>& Arrays() {
  using sprig::io::ElementType;
  static const std::vector<sprig::io::NdArray> arrays = [] {
    std::vector<sprig::io::NdArray> a;
    for (int i = 0; i < 3; ++i) {
      a.push_back(Array("h." + std::to_string(i) + ".w", ElementType::kF32, {2, 3}));
    }
    a.push_back(Array("h.10.w", ElementType::kF16, {3, 2}));
    // Layer 0 has experts 0 to 3, layer 1 experts 0 and 1: two complete stacks.
    for (int e = 0; e < 6; ++e) {
      const std::string name = e < 4 ? "moe.0.experts." + std::to_string(e) + ".w1"
                                     : "moe.1.experts." + std::to_string(e - 4) + ".w1";
      a.push_back(Array(name, ElementType::kBF16, {2, 2, 3}));
    }
    a.push_back(Array("in_proj", ElementType::kF64, {12, 4}));
    a.push_back(Array("bias", ElementType::kF32, {6}));
    a.push_back(Array("scalar", ElementType::kF32, {}));
    a.push_back(Array("empty", ElementType::kF32, {0, 5}));
    a.push_back(Array("7", ElementType::kU8, {3, 1, 2}));
    return a;
  }();
  return arrays;
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  const std::string text(reinterpret_cast<const char*>(data), size);
  auto mapping = sprig::convert::ParseMapping(text, "map.json");
  if (!mapping.ok()) {
    if (mapping.status().message().empty()) std::abort();  // every refusal says why
    return 0;
  }
  auto mapped = sprig::convert::ApplyMapping(*mapping, Arrays());
  if (!mapped.ok()) {
    if (mapped.status().message().empty()) std::abort();
    return 0;
  }
  for (const sprig::convert::MappedTensor& m : *mapped) {
    if (m.array == nullptr || m.name.empty()) std::abort();
    sprig::fuzz::Touch(m.array->data, m.array->nbytes());
  }
  return 0;
}
