// Array conversions between float32 and the half-precision storage types on the fastest kernel
// path of this CPU (ActiveKernels(), e.g. F16C on AVX2). Each result is bit-identical to the
// scalar conversion of numeric/half.h applied element by element, on every path.
// `src` and `dst` must not overlap. Thread-safe.
#pragma once

#include <cstddef>
#include <cstdint>

namespace sprig::kernels {

void ConvertFloatToHalf(const float* src, uint16_t* dst, size_t n);
void ConvertHalfToFloat(const uint16_t* src, float* dst, size_t n);
void ConvertFloatToBFloat16(const float* src, uint16_t* dst, size_t n);
void ConvertBFloat16ToFloat(const uint16_t* src, float* dst, size_t n);

}  // namespace sprig::kernels
