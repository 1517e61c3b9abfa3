// The SSE4.2 path, for x86-64 machines without AVX2. Compiled with -msse4.2; there is no F16C,
// so f16 is converted in integer arithmetic (HalfEmulation) and multiply-adds are not fused.
#include <immintrin.h>

#include <cstring>

#include "kernels/kernels_internal.h"
#include "kernels/kernels_simd.h"

namespace sprig::kernels {
namespace {

struct Sse42Traits {
  using Arch = xsimd::sse4_2;
  using F = xsimd::batch<float, Arch>;
  using I = xsimd::batch<int32_t, Arch>;
  // 16 vector registers, as on AVX2.
  static constexpr int kGemmRows = 3;
  static constexpr int kGemmCols = 3;
  static constexpr int kGemvCols = 4;

  static I Widen(const uint16_t* p) {
    return _mm_cvtepu16_epi32(_mm_loadl_epi64(reinterpret_cast<const __m128i*>(p)));
  }
  static I WidenBytes(const int8_t* p) {
    int32_t four;
    std::memcpy(&four, p, sizeof(four));  // exactly L = 4 bytes, no over-read
    return _mm_cvtepi8_epi32(_mm_cvtsi32_si128(four));
  }
  static void Narrow(I v, uint16_t* p) {
    _mm_storel_epi64(reinterpret_cast<__m128i*>(p), _mm_packus_epi32(v, v));
  }
  static F LoadHalf(const uint16_t* p) { return HalfEmulation<Arch>::ToFloat(Widen(p)); }
  static void StoreHalf(F v, uint16_t* p) { Narrow(HalfEmulation<Arch>::FromFloat(v), p); }
  static void Reduce(const F* acc, size_t count, float* sums) {
    ReduceWithHaddp<Arch>(acc, count, sums);
  }
};

constexpr KernelTable kSse42Table = SimdKernels<Sse42Traits>::MakeTable(KernelPath::kSse42);

}  // namespace

const KernelTable& Sse42Kernels() {
  return kSse42Table;
}

}  // namespace sprig::kernels
