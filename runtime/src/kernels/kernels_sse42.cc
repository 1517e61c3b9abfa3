// The SSE4.2 path, for x86-64 machines without AVX2. Compiled with -msse4.2; there is no F16C,
// so f16 is converted in integer arithmetic (HalfEmulation) and multiply-adds are not fused.
#include <immintrin.h>

#include <cstring>

#include "kernels/kernels_internal.h"
#include "kernels/kernels_quantized.h"
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

// int8 activations, 16 bytes at a time, with the sign moved onto the activation as on AVX2
// (kernels_avx2.cc says why pmaddubsw cannot saturate).
struct Sse42QuantizedOps {
  static int32_t Dot(const int8_t* x, const int8_t* w, size_t n) {
    const __m128i ones = _mm_set1_epi16(1);
    __m128i acc = _mm_setzero_si128();
    size_t i = 0;
    for (; i + 16 <= n; i += 16) {
      const __m128i wv = _mm_loadu_si128(reinterpret_cast<const __m128i*>(w + i));
      const __m128i xv = _mm_loadu_si128(reinterpret_cast<const __m128i*>(x + i));
      const __m128i pairs = _mm_maddubs_epi16(_mm_abs_epi8(wv), _mm_sign_epi8(xv, wv));
      acc = _mm_add_epi32(acc, _mm_madd_epi16(pairs, ones));
    }
    acc = _mm_add_epi32(acc, _mm_shuffle_epi32(acc, 0x4e));
    acc = _mm_add_epi32(acc, _mm_shuffle_epi32(acc, 0xb1));
    return _mm_cvtsi128_si32(acc) + ScalarQuantizedOps::Dot(x + i, w + i, n - i);
  }
  static float MaxAbs(const float* x, size_t n) { return SimdKernels<Sse42Traits>::MaxAbs(x, n); }
  static void Divide(const float* x, float scale, int8_t* q, size_t n) {
    const __m128 s = _mm_set1_ps(scale);
    const __m128 low = _mm_set1_ps(-127.0f), high = _mm_set1_ps(127.0f);
    auto convert = [&](const float* p) {
      const __m128 v = _mm_round_ps(_mm_div_ps(_mm_loadu_ps(p), s),
                                    _MM_FROUND_TO_NEAREST_INT | _MM_FROUND_NO_EXC);
      return _mm_cvtps_epi32(_mm_min_ps(_mm_max_ps(v, low), high));
    };
    size_t i = 0;
    for (; i + 16 <= n; i += 16) {
      const __m128i ab = _mm_packs_epi32(convert(x + i), convert(x + i + 4));
      const __m128i cd = _mm_packs_epi32(convert(x + i + 8), convert(x + i + 12));
      _mm_storeu_si128(reinterpret_cast<__m128i*>(q + i), _mm_packs_epi16(ab, cd));
    }
    ScalarQuantizedOps::Divide(x + i, scale, q + i, n - i);
  }
};

constexpr KernelTable kSse42Table =
    WithInt8Activations<Sse42QuantizedOps>(SimdKernels<Sse42Traits>::MakeTable(KernelPath::kSse42));

}  // namespace

const KernelTable& Sse42Kernels() {
  return kSse42Table;
}

}  // namespace sprig::kernels
