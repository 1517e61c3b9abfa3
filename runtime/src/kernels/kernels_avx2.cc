// The AVX2 path (with FMA and F16C). Compiled with -mavx2 -mfma -mf16c; runs only when the
// dispatcher has seen those features.
#include <immintrin.h>

#include "kernels/kernels_internal.h"
#include "kernels/kernels_quantized.h"
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

// int8 activations: 32 bytes at a time. vpmaddubsw multiplies unsigned by signed bytes and
// adds pairs into int16 with saturation, so the sign moves from the weight onto the activation:
// |w|·(x·sign w) = x·w, with |w| <= 128 as an unsigned byte (abs of -128 is 0x80, read as 128:
// correct even for a -128 no packer writes) and |x·sign w| <= 127 (x is quantised to
// [-127, 127]). A pair sum is then at most 2·128·127 = 32512 < 32767: it never saturates.
// vpmaddwd by ones widens the pairs into int32 lanes, exactly.
struct Avx2QuantizedOps {
  static int32_t Sum(__m256i v) {
    __m128i s = _mm_add_epi32(_mm256_castsi256_si128(v), _mm256_extracti128_si256(v, 1));
    s = _mm_add_epi32(s, _mm_shuffle_epi32(s, 0x4e));
    s = _mm_add_epi32(s, _mm_shuffle_epi32(s, 0xb1));
    return _mm_cvtsi128_si32(s);
  }
  static int32_t Dot(const int8_t* x, const int8_t* w, size_t n) {
    const __m256i ones = _mm256_set1_epi16(1);
    __m256i acc = _mm256_setzero_si256();
    size_t i = 0;
    for (; i + 32 <= n; i += 32) {
      const __m256i wv = _mm256_loadu_si256(reinterpret_cast<const __m256i*>(w + i));
      const __m256i xv = _mm256_loadu_si256(reinterpret_cast<const __m256i*>(x + i));
      const __m256i pairs = _mm256_maddubs_epi16(_mm256_abs_epi8(wv), _mm256_sign_epi8(xv, wv));
      acc = _mm256_add_epi32(acc, _mm256_madd_epi16(pairs, ones));
    }
    return Sum(acc) + ScalarQuantizedOps::Dot(x + i, w + i, n - i);
  }
  // R activation rows against four weight rows (gemv: R = 1; gemm_rows: R = kGemmRows):
  // sums[a·4 + r] = Dot(x[a], w[r], n), with Dot's sign trick. Each weight vector is loaded
  // and made absolute once for the R activation rows, and the 4·R sums are reduced four at a
  // time. A tail of 16 bytes or more takes one half-width step (a leaf's fc2 has in = leaf
  // width, often 16), the last bytes the scalar form. Integer sums: the same bits as Dot.
  template <int R>
  static void DotBlock(const int8_t* const* x, const int8_t* const* w, size_t n, int32_t* sums) {
    const __m256i ones = _mm256_set1_epi16(1);
    __m256i acc[R][4];
#pragma GCC unroll 4
    for (int a = 0; a < R; ++a) {
#pragma GCC unroll 4
      for (int r = 0; r < 4; ++r) acc[a][r] = _mm256_setzero_si256();
    }
    // One step over 32 bytes from `load(p)`; a zero byte adds nothing.
    auto step = [&](auto load, size_t i) {
      __m256i xv[R];
#pragma GCC unroll 4
      for (int a = 0; a < R; ++a) xv[a] = load(x[a] + i);
#pragma GCC unroll 4
      for (int r = 0; r < 4; ++r) {
        const __m256i wv = load(w[r] + i);
        const __m256i magnitude = _mm256_abs_epi8(wv);
#pragma GCC unroll 4
        for (int a = 0; a < R; ++a) {
          const __m256i pairs = _mm256_maddubs_epi16(magnitude, _mm256_sign_epi8(xv[a], wv));
          acc[a][r] = _mm256_add_epi32(acc[a][r], _mm256_madd_epi16(pairs, ones));
        }
      }
    };
    size_t i = 0;
    for (; i + 32 <= n; i += 32) {
      step([](const int8_t* p) { return _mm256_loadu_si256(reinterpret_cast<const __m256i*>(p)); },
           i);
    }
    if (i + 16 <= n) {
      step(
          [](const int8_t* p) {
            return _mm256_zextsi128_si256(_mm_loadu_si128(reinterpret_cast<const __m128i*>(p)));
          },
          i);
      i += 16;
    }
#pragma GCC unroll 4
    for (int a = 0; a < R; ++a) {
      ReduceFour(acc[a][0], acc[a][1], acc[a][2], acc[a][3], sums + a * 4);
      if (i == n) continue;
      for (int r = 0; r < 4; ++r)
        sums[a * 4 + r] += ScalarQuantizedOps::Dot(x[a] + i, w[r] + i, n - i);
    }
  }

  // sums = the sums of the lanes of v0, v1, v2 and v3: integer sums, exact in any order.
  static void ReduceFour(__m256i v0, __m256i v1, __m256i v2, __m256i v3, int32_t* sums) {
    // After two rounds of pairwise sums each 128-bit half holds one partial sum of v0 .. v3.
    const __m256i pairs = _mm256_hadd_epi32(_mm256_hadd_epi32(v0, v1), _mm256_hadd_epi32(v2, v3));
    const __m128i total =
        _mm_add_epi32(_mm256_castsi256_si128(pairs), _mm256_extracti128_si256(pairs, 1));
    _mm_storeu_si128(reinterpret_cast<__m128i*>(sums), total);
  }

  static float MaxAbs(const float* x, size_t n) {
    return SimdKernels<Avx2Traits>::MaxAbs(x, n);
  }
  // 32 values at a time: divide, round to nearest even (the MXCSR default), clamp, then narrow
  // int32 -> int16 -> int8 with saturating packs (in range already) and undo their lane order.
  static void Divide(const float* x, float scale, int8_t* q, size_t n) {
    const __m256 s = _mm256_set1_ps(scale);
    const __m256 low = _mm256_set1_ps(-127.0f), high = _mm256_set1_ps(127.0f);
    auto convert = [&](const float* p) {
      const __m256 v = _mm256_round_ps(_mm256_div_ps(_mm256_loadu_ps(p), s),
                                       _MM_FROUND_TO_NEAREST_INT | _MM_FROUND_NO_EXC);
      return _mm256_cvtps_epi32(_mm256_min_ps(_mm256_max_ps(v, low), high));
    };
    size_t i = 0;
    for (; i + 32 <= n; i += 32) {
      const __m256i ab = _mm256_packs_epi32(convert(x + i), convert(x + i + 8));
      const __m256i cd = _mm256_packs_epi32(convert(x + i + 16), convert(x + i + 24));
      const __m256i bytes = _mm256_permutevar8x32_epi32(_mm256_packs_epi16(ab, cd),
                                                        _mm256_setr_epi32(0, 4, 1, 5, 2, 6, 3, 7));
      _mm256_storeu_si256(reinterpret_cast<__m256i*>(q + i), bytes);
    }
    ScalarQuantizedOps::Divide(x + i, scale, q + i, n - i);
  }
};

constexpr KernelTable kAvx2Table =
    WithInt8Activations<Avx2QuantizedOps>(SimdKernels<Avx2Traits>::MakeTable(KernelPath::kAvx2));

}  // namespace

const KernelTable& Avx2Kernels() {
  return kAvx2Table;
}

}  // namespace sprig::kernels
