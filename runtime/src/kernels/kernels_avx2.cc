// The AVX2 path (with FMA and F16C). Compiled with -mavx2 -mfma -mf16c; runs only when the
// dispatcher has seen those features.
#include <immintrin.h>

#include "kernels/kernels_internal.h"
#include "kernels/kernels_simd.h"

namespace sprig::kernels {
namespace {

struct Avx2Traits {
  using Arch = xsimd::fma3<xsimd::avx2>;
  using F = xsimd::batch<float, Arch>;
  using I = xsimd::batch<int32_t, Arch>;
  // Block shapes chosen by measurement (bench/kernels_bench.cc). 16 vector registers: 3x3
  // accumulators and three weight vectors; the row vector is folded into the FMA as a memory
  // operand. gemv streams eight weight rows at once.
  static constexpr int kGemmRows = 3;
  static constexpr int kGemmCols = 3;
  static constexpr int kGemvCols = 8;

  static I Widen(const uint16_t* p) {
    return _mm256_cvtepu16_epi32(_mm_loadu_si128(reinterpret_cast<const __m128i*>(p)));
  }
  static I WidenBytes(const int8_t* p) {
    return _mm256_cvtepi8_epi32(_mm_loadl_epi64(reinterpret_cast<const __m128i*>(p)));
  }
  static void Narrow(I v, uint16_t* p) {
    const __m256i bits = v;
    const __m128i packed =
        _mm_packus_epi32(_mm256_castsi256_si128(bits), _mm256_extracti128_si256(bits, 1));
    _mm_storeu_si128(reinterpret_cast<__m128i*>(p), packed);
  }
  static F LoadHalf(const uint16_t* p) {
    return _mm256_cvtph_ps(_mm_loadu_si128(reinterpret_cast<const __m128i*>(p)));
  }
  static void StoreHalf(F v, uint16_t* p) {
    _mm_storeu_si128(reinterpret_cast<__m128i*>(p), _mm256_cvtps_ph(v, _MM_FROUND_TO_NEAREST_INT));
  }
  static void Reduce(const F* acc, size_t count, float* sums) {
    ReduceWithHaddp<Arch>(acc, count, sums);
  }
};

constexpr KernelTable kAvx2Table = SimdKernels<Avx2Traits>::MakeTable(KernelPath::kAvx2);

}  // namespace

const KernelTable& Avx2Kernels() {
  return kAvx2Table;
}

}  // namespace sprig::kernels
