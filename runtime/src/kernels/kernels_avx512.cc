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
#include "kernels/kernels_quantized.h"
#include "kernels/kernels_simd.h"
#include "platform/cpu.h"

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

// int8 activations, 64 bytes at a time; the tail is a masked load, whose zeros add nothing.
// Both forms move the sign from the weight onto the activation, |w|·(x·sign w) = x·w, because
// the instructions multiply unsigned by signed bytes: |w| <= 128 is exact as an unsigned byte
// (even for a -128) and x·sign w stays in [-127, 127] (x is quantised to it; negating a -127
// cannot wrap). (The other way, an offset x + 128 with a correction 128·Σw, would need Σw per
// row, and its pair sums, up to 2·255·128, would saturate vpmaddubsw.)
struct Avx512QuantizedBase {
  static __mmask64 TailMask(size_t count) {
    return count >= 64 ? ~__mmask64{0} : (__mmask64{1} << count) - 1;
  }
  // The activation bytes negated where w < 0 (where w = 0 the product with |w| is 0 anyway).
  static __m512i SignedActivation(__m512i xv, __m512i wv) {
    return _mm512_mask_sub_epi8(xv, _mm512_movepi8_mask(wv), _mm512_setzero_si512(), xv);
  }
  static float MaxAbs(const float* x, size_t n) { return SimdKernels<Avx512Traits>::MaxAbs(x, n); }
  // 16 values at a time: divide, clamp, round to nearest even and narrow with a saturating
  // int32 -> int8 conversion (in range already). Clamping before rounding gives the same
  // integers as rounding first: the bounds are integers.
  static void Divide(const float* x, float scale, int8_t* q, size_t n) {
    const __m512 s = _mm512_set1_ps(scale);
    const __m512 low = _mm512_set1_ps(-127.0f), high = _mm512_set1_ps(127.0f);
    size_t i = 0;
    for (; i + 16 <= n; i += 16) {
      const __m512 v =
          _mm512_min_ps(_mm512_max_ps(_mm512_div_ps(_mm512_loadu_ps(x + i), s), low), high);
      const __m512i ints =
          _mm512_cvt_roundps_epi32(v, _MM_FROUND_TO_NEAREST_INT | _MM_FROUND_NO_EXC);
      _mm_storeu_si128(reinterpret_cast<__m128i*>(q + i), _mm512_cvtsepi32_epi8(ints));
    }
    ScalarQuantizedOps::Divide(x + i, scale, q + i, n - i);
  }
};

// AVX-512 BW: vpmaddubsw (pair sums <= 2·128·127 = 32512: no saturation), vpmaddwd by ones.
struct Avx512QuantizedOps : Avx512QuantizedBase {
  static int32_t Dot(const int8_t* x, const int8_t* w, size_t n) {
    const __m512i ones = _mm512_set1_epi16(1);
    __m512i acc = _mm512_setzero_si512();
    for (size_t i = 0; i < n; i += 64) {
      const __mmask64 mask = TailMask(n - i);
      const __m512i wv = _mm512_maskz_loadu_epi8(mask, w + i);
      const __m512i xv = _mm512_maskz_loadu_epi8(mask, x + i);
      const __m512i pairs = _mm512_maddubs_epi16(_mm512_abs_epi8(wv), SignedActivation(xv, wv));
      acc = _mm512_add_epi32(acc, _mm512_madd_epi16(pairs, ones));
    }
    return _mm512_reduce_add_epi32(acc);
  }
};

// AVX-512 VNNI: vpdpbusd adds four unsigned-by-signed byte products to each int32 lane with no
// intermediate rounding or saturation (its saturating twin is vpdpbusds); each lane gains at
// most 4·128·127 per step, and the total stays below 2^31 for n <= kMaxQuantizedLength.
struct Avx512VnniQuantizedOps : Avx512QuantizedBase {
  __attribute__((target("avx512vnni"))) static int32_t Dot(const int8_t* x, const int8_t* w,
                                                           size_t n) {
    __m512i acc = _mm512_setzero_si512();
    for (size_t i = 0; i < n; i += 64) {
      const __mmask64 mask = TailMask(n - i);
      const __m512i wv = _mm512_maskz_loadu_epi8(mask, w + i);
      const __m512i xv = _mm512_maskz_loadu_epi8(mask, x + i);
      acc = _mm512_dpbusd_epi32(acc, _mm512_abs_epi8(wv), SignedActivation(xv, wv));
    }
    return _mm512_reduce_add_epi32(acc);
  }

  // R activation rows against four weight rows (gemv: R = 1; gemm_rows: R = kGemmRows):
  // sums[a·4 + r] = Dot(x[a], w[r], n). Here the activation is offset instead of each weight's
  // sign moved onto it: x + 128 (x XOR 0x80 read as unsigned, in [1, 255]; a masked-off lane
  // meets a zero weight) times w sums to Σx·w + 128·Σw, and a vpdpbusd of ones against w gives
  // Σw, once for all R activation rows. Either sum may wrap around in int32, but the arithmetic
  // is exact modulo 2^32 and |Σx·w| <= 127·128·n < 2^31, so the difference is the exact sum, as
  // Dot gives it. Per 64 bytes: four weight loads and R offset activations feed 4·R + 4
  // vpdpbusd, where Dot's sign trick takes two loads and four more operations per product
  // vector; the sums are reduced four at a time.
  template <int R>
  __attribute__((target("avx512vnni"))) static void DotBlock(const int8_t* const* x,
                                                             const int8_t* const* w, size_t n,
                                                             int32_t* sums) {
    const __m512i flip = _mm512_set1_epi8(static_cast<char>(0x80));
    const __m512i ones = _mm512_set1_epi8(1);
    // Every loop over a register array is unrolled: GCC keeps an array it indexes in a loop in
    // memory, with a store after every vpdpbusd.
    __m512i acc[R][4], weight_sum[4];
#pragma GCC unroll 4
    for (int r = 0; r < 4; ++r) weight_sum[r] = _mm512_setzero_si512();
#pragma GCC unroll 4
    for (int a = 0; a < R; ++a) {
#pragma GCC unroll 4
      for (int r = 0; r < 4; ++r) acc[a][r] = _mm512_setzero_si512();
    }
    for (size_t i = 0; i < n; i += 64) {
      const __mmask64 mask = TailMask(n - i);
      __m512i offset_x[R];
#pragma GCC unroll 4
      for (int a = 0; a < R; ++a) {
        offset_x[a] = _mm512_xor_si512(_mm512_maskz_loadu_epi8(mask, x[a] + i), flip);
      }
#pragma GCC unroll 4
      for (int r = 0; r < 4; ++r) {
        const __m512i wv = _mm512_maskz_loadu_epi8(mask, w[r] + i);
        weight_sum[r] = _mm512_dpbusd_epi32(weight_sum[r], ones, wv);
#pragma GCC unroll 4
        for (int a = 0; a < R; ++a) acc[a][r] = _mm512_dpbusd_epi32(acc[a][r], offset_x[a], wv);
      }
    }
#pragma GCC unroll 4
    for (int r = 0; r < 4; ++r) weight_sum[r] = _mm512_slli_epi32(weight_sum[r], 7);
#pragma GCC unroll 4
    for (int a = 0; a < R; ++a) {
      ReduceFour(_mm512_sub_epi32(acc[a][0], weight_sum[0]),
                 _mm512_sub_epi32(acc[a][1], weight_sum[1]),
                 _mm512_sub_epi32(acc[a][2], weight_sum[2]),
                 _mm512_sub_epi32(acc[a][3], weight_sum[3]), sums + a * 4);
    }
  }

  // sums = the sums of the lanes of v0, v1, v2 and v3: integer sums, exact in any order.
  static void ReduceFour(__m512i v0, __m512i v1, __m512i v2, __m512i v3, int32_t* sums) {
    const __m512i v01 =
        _mm512_add_epi32(_mm512_unpacklo_epi32(v0, v1), _mm512_unpackhi_epi32(v0, v1));
    const __m512i v23 =
        _mm512_add_epi32(_mm512_unpacklo_epi32(v2, v3), _mm512_unpackhi_epi32(v2, v3));
    // Each 128-bit lane now holds one partial sum of v0, v1, v2, v3 in that order.
    const __m512i lanes =
        _mm512_add_epi32(_mm512_unpacklo_epi64(v01, v23), _mm512_unpackhi_epi64(v01, v23));
    const __m256i halves =
        _mm256_add_epi32(_mm512_castsi512_si256(lanes), _mm512_extracti64x4_epi64(lanes, 1));
    const __m128i quarters =
        _mm_add_epi32(_mm256_castsi256_si128(halves), _mm256_extracti128_si256(halves, 1));
    _mm_storeu_si128(reinterpret_cast<__m128i*>(sums), quarters);
  }
};

constexpr KernelTable kAvx512Table = WithInt8Activations<Avx512QuantizedOps>(
    SimdKernels<Avx512Traits>::MakeTable(KernelPath::kAvx512));
constexpr KernelTable kAvx512VnniTable = WithInt8Activations<Avx512VnniQuantizedOps>(
    SimdKernels<Avx512Traits>::MakeTable(KernelPath::kAvx512));

}  // namespace

// VNNI is not part of the path's requirements (the first AVX-512 cores lack it): the table with
// vpdpbusd is handed out only where the CPU has it. Its results equal the other's bit for bit.
const KernelTable& Avx512Kernels() {
  return platform::DetectCpu().avx512vnni ? kAvx512VnniTable : kAvx512Table;
}

}  // namespace sprig::kernels
