// The NEON path for AArch64 (compiled only there). Advanced SIMD is part of the base
// architecture, including the f16 <-> f32 conversions.
#include <arm_neon.h>

#include "kernels/kernels_internal.h"
#include "kernels/kernels_quantized.h"
#include "kernels/kernels_simd.h"

namespace sprig::kernels {
namespace {

struct NeonTraits {
  using Arch = xsimd::neon64;
  using F = xsimd::batch<float, Arch>;
  using I = xsimd::batch<int32_t, Arch>;
  // 32 vector registers, as on AVX-512: 4x6 accumulators, six weight vectors and a row vector.
  static constexpr int kGemmRows = 4;
  static constexpr int kGemmCols = 6;
  static constexpr int kGemvCols = 8;

  static I Widen(const uint16_t* p) { return vreinterpretq_s32_u32(vmovl_u16(vld1_u16(p))); }
  static void Narrow(I v, uint16_t* p) { vst1_u16(p, vmovn_u32(vreinterpretq_u32_s32(v))); }
  static F LoadHalf(const uint16_t* p) { return vcvt_f32_f16(vreinterpret_f16_u16(vld1_u16(p))); }
  // FCVTN rounds by FPCR (round to nearest even by default) and quiets NaNs, as F16C does.
  static void StoreHalf(F v, uint16_t* p) { vst1_u16(p, vreinterpret_u16_f16(vcvt_f16_f32(v))); }
  static void Reduce(const F* acc, size_t count, float* sums) {
    ReduceWithHaddp<Arch>(acc, count, sums);
  }
};

// int8 activations, 16 bytes at a time. NEON multiplies signed by signed bytes, so no sign
// trick is needed. With the dot-product extension in the target (__ARM_FEATURE_DOTPROD, e.g.
// -march=armv8.2-a+dotprod), sdot adds four byte products to each int32 lane; otherwise
// smull gives exact int16 products (|x·w| <= 127·128 = 16256 < 32767) and sadalp adds their
// pairs into int32 lanes. Both are exact, so both equal the scalar sum.
struct NeonQuantizedOps {
  static int32_t Dot(const int8_t* x, const int8_t* w, size_t n) {
    int32x4_t acc = vdupq_n_s32(0);
    size_t i = 0;
    for (; i + 16 <= n; i += 16) {
      const int8x16_t xv = vld1q_s8(x + i), wv = vld1q_s8(w + i);
#if defined(__ARM_FEATURE_DOTPROD)
      acc = vdotq_s32(acc, xv, wv);
#else
      acc = vpadalq_s16(acc, vmull_s8(vget_low_s8(xv), vget_low_s8(wv)));
      acc = vpadalq_s16(acc, vmull_high_s8(xv, wv));
#endif
    }
    return vaddvq_s32(acc) + ScalarQuantizedOps::Dot(x + i, w + i, n - i);
  }
  static float MaxAbs(const float* x, size_t n) {
    return SimdKernels<NeonTraits>::MaxAbs(x, n);
  }
  // 16 values at a time: divide, clamp, convert rounding to nearest even (fcvtns, whatever
  // FPCR says), then narrow with saturation (in range already).
  static void Divide(const float* x, float scale, int8_t* q, size_t n) {
    const float32x4_t s = vdupq_n_f32(scale);
    const float32x4_t low = vdupq_n_f32(-127.0f), high = vdupq_n_f32(127.0f);
    auto convert = [&](const float* p) {
      return vcvtnq_s32_f32(vminq_f32(vmaxq_f32(vdivq_f32(vld1q_f32(p), s), low), high));
    };
    size_t i = 0;
    for (; i + 16 <= n; i += 16) {
      const int16x8_t ab = vcombine_s16(vqmovn_s32(convert(x + i)), vqmovn_s32(convert(x + i + 4)));
      const int16x8_t cd =
          vcombine_s16(vqmovn_s32(convert(x + i + 8)), vqmovn_s32(convert(x + i + 12)));
      vst1q_s8(q + i, vcombine_s8(vqmovn_s16(ab), vqmovn_s16(cd)));
    }
    ScalarQuantizedOps::Divide(x + i, scale, q + i, n - i);
  }
};

constexpr KernelTable kNeonTable =
    WithInt8Activations<NeonQuantizedOps>(SimdKernels<NeonTraits>::MakeTable(KernelPath::kNeon));

}  // namespace

const KernelTable& NeonKernels() {
  return kNeonTable;
}

}  // namespace sprig::kernels
