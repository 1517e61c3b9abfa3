#include "kernels/convert.h"

#include "kernels/kernels.h"

namespace sprig::kernels {

void ConvertFloatToHalf(const float* src, uint16_t* dst, size_t n) {
  ActiveKernels().f32_to_f16(src, dst, n);
}

void ConvertHalfToFloat(const uint16_t* src, float* dst, size_t n) {
  ActiveKernels().f16_to_f32(src, dst, n);
}

void ConvertFloatToBFloat16(const float* src, uint16_t* dst, size_t n) {
  ActiveKernels().f32_to_bf16(src, dst, n);
}

void ConvertBFloat16ToFloat(const uint16_t* src, float* dst, size_t n) {
  ActiveKernels().bf16_to_f32(src, dst, n);
}

}  // namespace sprig::kernels
