// A fast scan for NaN and infinity in floating-point tensor data, read as raw bits.
#pragma once

#include <cstdint>
#include <optional>

#include "io/ndarray.h"

namespace sprig::convert {

enum class NonFiniteKind : uint8_t { kNaN, kPositiveInfinity, kNegativeInfinity };

struct NonFiniteValue {
  uint64_t index = 0;  // flat (C order) index of the element
  NonFiniteKind kind = NonFiniteKind::kNaN;
};

// "NaN", "+Inf", "-Inf".
const char* ToString(NonFiniteKind kind);

// The first NaN or infinity among `count` little-endian elements of `type` at `data` (no
// alignment needed), or nullopt when all are finite. Only float64, float32, float16 and
// bfloat16 can hold such values; for every other type the result is nullopt. Runs at memory
// speed (several GB/s on one core).
std::optional<NonFiniteValue> FindNonFinite(io::ElementType type, const uint8_t* data,
                                            uint64_t count);

}  // namespace sprig::convert
