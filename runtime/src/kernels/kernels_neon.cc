// The NEON path for AArch64 (compiled only there). Advanced SIMD is part of the base
// architecture, including the f16 <-> f32 conversions.
#include <arm_neon.h>

#include "kernels/kernels_internal.h"
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

constexpr KernelTable kNeonTable = SimdKernels<NeonTraits>::MakeTable(KernelPath::kNeon);

}  // namespace

const KernelTable& NeonKernels() {
  return kNeonTable;
}

}  // namespace sprig::kernels
