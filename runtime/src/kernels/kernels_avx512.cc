// The AVX-512 path (F, BW, DQ, VL, with FMA and F16C). Compiled with those flags; runs only when
// the dispatcher has seen those features.
#include <immintrin.h>

// GCC 12 reports -W(maybe-)uninitialized inside <avx512fintrin.h> wherever a conversion intrinsic
// is inlined: the header builds its "undefined" pass-through operands as `__m512i __Y = __Y;`.
// The value is never used, so the warnings are silenced for this file only.
#if defined(__GNUC__) && !defined(__clang__)
#pragma GCC diagnostic ignored "-Wuninitialized"
#pragma GCC diagnostic ignored "-Wmaybe-uninitialized"
#endif

#include "kernels/kernels_internal.h"
#include "kernels/kernels_simd.h"

namespace sprig::kernels {
namespace {

struct Avx512Traits {
  // avx512dq rather than avx512bw: xsimd 8.1's avx512bw integer select does not compile without
  // optimisation (its intrinsic macros cannot cast a batch), and nothing here needs 8- or 16-bit
  // lanes. The file is still compiled with, and dispatched on, AVX-512 BW.
  using Arch = xsimd::avx512dq;
  using F = xsimd::batch<float, Arch>;
  using I = xsimd::batch<int32_t, Arch>;
  // Block shapes chosen by measurement (bench/kernels_bench.cc). 32 vector registers: 4x6
  // accumulators, six weight vectors and a row vector (3x8 would need 33 and spill).
  static constexpr int kGemmRows = 4;
  static constexpr int kGemmCols = 6;
  static constexpr int kGemvCols = 8;

  static I Widen(const uint16_t* p) {
    return _mm512_cvtepu16_epi32(_mm256_loadu_si256(reinterpret_cast<const __m256i*>(p)));
  }
  static I WidenBytes(const int8_t* p) {
    return _mm512_cvtepi8_epi32(_mm_loadu_si128(reinterpret_cast<const __m128i*>(p)));
  }
  static void Narrow(I v, uint16_t* p) {
    _mm256_storeu_si256(reinterpret_cast<__m256i*>(p), _mm512_cvtepi32_epi16(v));
  }
  static F LoadHalf(const uint16_t* p) {
    return _mm512_cvtph_ps(_mm256_loadu_si256(reinterpret_cast<const __m256i*>(p)));
  }
  static void StoreHalf(F v, uint16_t* p) {
    _mm256_storeu_si256(reinterpret_cast<__m256i*>(p),
                        _mm512_cvtps_ph(v, _MM_FROUND_TO_NEAREST_INT));
  }
  // Eight vectors at a time: fold each to 256 bits, then two rounds of hadd and one
  // cross-lane add leave the eight sums in order in one 256-bit vector.
  // The remainder is reduced as a zero-padded group of eight, so that every vector's sum is
  // formed the same way wherever it sits (see ReduceWithHaddp).
  static void Reduce(const F* acc, size_t count, float* sums) {
    size_t i = 0;
    for (; i + 8 <= count; i += 8) ReduceEight(acc + i, sums + i);
    if (i < count) {
      F group[8];
      float out[8];
      for (size_t j = 0; j < 8; ++j) group[j] = i + j < count ? acc[i + j] : F(0.0f);
      ReduceEight(group, out);
      for (size_t j = 0; i + j < count; ++j) sums[i + j] = out[j];
    }
  }
  static void ReduceEight(const F* acc, float* sums) {
    __m256 h[8];
    for (int j = 0; j < 8; ++j) {
      const __m512 v = acc[j];
      h[j] = _mm256_add_ps(_mm512_castps512_ps256(v), _mm512_extractf32x8_ps(v, 1));
    }
    const __m256 s0123 = _mm256_hadd_ps(_mm256_hadd_ps(h[0], h[1]), _mm256_hadd_ps(h[2], h[3]));
    const __m256 s4567 = _mm256_hadd_ps(_mm256_hadd_ps(h[4], h[5]), _mm256_hadd_ps(h[6], h[7]));
    const __m256 low_lanes = _mm256_permute2f128_ps(s0123, s4567, 0x20);
    const __m256 high_lanes = _mm256_permute2f128_ps(s0123, s4567, 0x31);
    _mm256_storeu_ps(sums, _mm256_add_ps(low_lanes, high_lanes));
  }
};

constexpr KernelTable kAvx512Table = SimdKernels<Avx512Traits>::MakeTable(KernelPath::kAvx512);

}  // namespace

const KernelTable& Avx512Kernels() {
  return kAvx512Table;
}

}  // namespace sprig::kernels
