// The vector kernels, written once over xsimd and instantiated per instruction set.
//
// Include this header only from a kernels_<isa>.cc file, each of which is compiled with its
// instruction set enabled. Everything here has internal linkage (an unnamed namespace): two
// files compiled with different flags must never share an out-of-line copy of a function, or
// the linker could keep, say, the AVX-512 copy for code that runs on an AVX2 machine. xsimd's
// templates are instantiated per arch type, so their symbols differ per file too; an optimised
// build leaves no other shared out-of-line function (checked with nm), but at -O0 a few
// non-arch helpers (xsimd::constants::*, std::numeric_limits) are emitted out of line. The
// dispatcher (kernels.cc) and other baseline files never include this header.
//
// An instantiation is parameterised by a Traits struct supplied by the including file:
//   using Arch = xsimd::<arch>;                 // e.g. xsimd::fma3<xsimd::avx2>
//   static constexpr int kGemmRows, kGemmCols;  // gemm_rows register block (rows x outputs)
//   static constexpr int kGemvCols;             // gemv register block (outputs)
//   static I Widen(const uint16_t* p);          // L uint16 -> L int32 lanes (zero-extended)
//   static void Narrow(I v, uint16_t* p);       // L int32 lanes in [0, 0xffff] -> L uint16
//   static F LoadHalf(const uint16_t* p);       // L f16 -> L float (hardware or HalfEmulation)
//   static void StoreHalf(F v, uint16_t* p);    // L float -> L f16, round to nearest even
//   static void Reduce(const F* acc, size_t count, float* sums);  // sums[i] = Σ lanes of acc[i]
// and optionally
//   static I WidenBytes(const int8_t* p);       // L int8 -> L int32 lanes (sign-extended)
// (without it, int8 weights are widened through a small buffer, which is correct but slower).
// F, I are xsimd::batch<float|int32_t, Arch> and L = F::size.
#pragma once

#include <cstddef>
#include <cstdint>
#include <cstring>
#include <type_traits>

#include <xsimd/xsimd.hpp>

#include "kernels/kernels.h"

namespace sprig::kernels {
namespace {

// Local stand-ins for std::min, std::max and std::sqrt: in an unoptimised build those are
// out-of-line functions that baseline files share, the ODR hazard described above.
template <typename T>
constexpr T Min(T a, T b) {
  return b < a ? b : a;
}
template <typename T>
constexpr T Max(T a, T b) {
  return a < b ? b : a;
}
inline float Sqrt(float x) {
  return __builtin_sqrtf(x);
}

// f16 <-> float in integer vector arithmetic, for instruction sets without conversion
// instructions. Bit-identical to numeric::HalfToFloat / FloatToHalf (including NaN quieting);
// relies on the default floating-point environment (round to nearest, no flush-to-zero).
template <class Arch>
struct HalfEmulation {
  using F = xsimd::batch<float, Arch>;
  using I = xsimd::batch<int32_t, Arch>;

  // `h` holds one f16 bit pattern per lane.
  static F ToFloat(I h) {
    const I sign = (h & I(0x8000)) << 16;
    const I shifted = (h & I(0x7fff)) << 13;  // exponent and mantissa in float position
    const I exponent = shifted & I(0x0f800000);
    const I normal = shifted + I(0x38000000);  // rebias: (127 - 15) << 23
    // Subnormal: give the value the exponent of 2^-14, then subtract 2^-14 as floats, which
    // renormalises exactly (both operands are normal, so no denormal arithmetic is involved).
    const I subnormal = xsimd::bitwise_cast<I>(xsimd::bitwise_cast<F>(normal + I(0x00800000)) -
                                               xsimd::bitwise_cast<F>(I(0x38800000)));
    // Infinity and NaN: exponent field 31 -> 255; a NaN also gets the quiet bit.
    const I mantissa = shifted & I(0x007fe000);
    const I special =
        (normal + I(0x38000000)) | xsimd::select(mantissa != I(0), I(0x00400000), I(0));
    const I magnitude = xsimd::select(exponent == I(0x0f800000), special,
                                      xsimd::select(exponent == I(0), subnormal, normal));
    return xsimd::bitwise_cast<F>(magnitude | sign);
  }

  // Returns one f16 bit pattern per lane.
  static I FromFloat(F value) {
    const I bits = xsimd::bitwise_cast<I>(value);
    const I sign = (bits >> 16) & I(0x8000);  // arithmetic shift is fine: bit 31 lands on 15
    const I magnitude = bits & I(0x7fffffff);
    // Normal results: rebias, then round to nearest even by adding just under half an ulp plus
    // the ulp's low bit; a carry moves into the exponent and, past 65504, into infinity.
    const I odd = (magnitude >> 13) & I(1);
    const I normal = (magnitude - I(0x38000000) + I(0x0fff) + odd) >> 13;
    // Subnormal results: adding 0.5 places the f16 subnormal grid (2^-24) on float's ulp at
    // 0.5, so the FPU's own round-to-nearest-even does the rounding.
    const I subnormal =
        xsimd::bitwise_cast<I>(xsimd::bitwise_cast<F>(magnitude) + F(0.5f)) - I(0x3f000000);
    const I nan = I(0x7e00) | ((magnitude >> 13) & I(0x03ff));
    const I result =
        xsimd::select(magnitude > I(0x7f800000), nan,
                      xsimd::select(magnitude >= I(0x47800000), I(0x7c00),
                                    xsimd::select(magnitude < I(0x38800000), subnormal, normal)));
    return result | sign;
  }
};

// Horizontal sums of `count` vectors: sums[i] = Σ lanes of acc[i]. xsimd::haddp transposes L
// vectors at a time, cheaper than L separate reductions. Not for AVX-512: xsimd 8.1's AVX-512
// haddp returns its sums in a permuted order, so that path has its own Reduce.
//
// Every vector's sum is formed the same way whether it sits in a full group or in the
// remainder (which is reduced as a zero-padded group): a row's result then does not depend on
// the register block it landed in, so gemv equals gemm_rows and a batch's results do not
// depend on how it was split.
template <class Arch>
void ReduceWithHaddp(const xsimd::batch<float, Arch>* acc, size_t count, float* sums) {
  using F = xsimd::batch<float, Arch>;
  constexpr size_t L = F::size;
  size_t i = 0;
  for (; i + L <= count; i += L) xsimd::haddp(acc + i).store_unaligned(sums + i);
  if (i < count) {
    F group[L];
    alignas(64) float out[L];
    for (size_t j = 0; j < L; ++j) group[j] = i + j < count ? acc[i + j] : F(0.0f);
    xsimd::haddp(group).store_aligned(out);
    for (size_t j = 0; i + j < count; ++j) sums[i + j] = out[j];
  }
}

struct FloatTag {
  using Storage = float;
};
struct HalfTag {
  using Storage = uint16_t;
};
struct BFloat16Tag {
  using Storage = uint16_t;
};
struct Int8Tag {
  using Storage = int8_t;
};

constexpr float kSqrtHalf = 0.70710678118654752440f;       // 1/√2
constexpr float kSqrtTwoOverPi = 0.79788456080286535588f;  // √(2/π)

template <class Traits>
struct SimdKernels {
  using Arch = typename Traits::Arch;
  using F = xsimd::batch<float, Arch>;
  using I = xsimd::batch<int32_t, Arch>;
  static constexpr size_t L = F::size;

  // ---- Loads of L weights as floats ----

  static F Load(const float* p, FloatTag) { return F::load_unaligned(p); }
  static F Load(const uint16_t* p, HalfTag) { return Traits::LoadHalf(p); }
  static F Load(const uint16_t* p, BFloat16Tag) {
    return xsimd::bitwise_cast<F>(Traits::Widen(p) << 16);
  }
  // int8 weights become exact float integers in [-128, 127]; the row's scale is applied to the
  // finished sum, so the inner loop is the float loop with a different load.
  static F Load(const int8_t* p, Int8Tag) { return xsimd::to_float(WidenBytes(p)); }
  static I WidenBytes(const int8_t* p) {
    if constexpr (requires(const int8_t* q) { Traits::WidenBytes(q); }) {
      return Traits::WidenBytes(p);
    } else {
      alignas(64) int32_t lanes[L];
      for (size_t i = 0; i < L; ++i) lanes[i] = p[i];
      return I::load_aligned(lanes);
    }
  }

  // Loads count < L values, the rest of the lanes zero.
  template <class Tag>
  static F LoadPartial(const typename Tag::Storage* p, size_t count, Tag tag) {
    alignas(64) typename Tag::Storage buffer[L] = {};
    std::memcpy(buffer, p, count * sizeof(buffer[0]));
    return Load(buffer, tag);
  }

  // ---- dot, axpy ----

  template <class Tag>
  static float Dot(const float* x, const typename Tag::Storage* w, size_t n) {
    // Four independent accumulators hide the latency of the fused multiply-add.
    F a0(0.0f), a1(0.0f), a2(0.0f), a3(0.0f);
    size_t i = 0;
    for (; i + 4 * L <= n; i += 4 * L) {
      a0 = xsimd::fma(F::load_unaligned(x + i), Load(w + i, Tag{}), a0);
      a1 = xsimd::fma(F::load_unaligned(x + i + L), Load(w + i + L, Tag{}), a1);
      a2 = xsimd::fma(F::load_unaligned(x + i + 2 * L), Load(w + i + 2 * L, Tag{}), a2);
      a3 = xsimd::fma(F::load_unaligned(x + i + 3 * L), Load(w + i + 3 * L, Tag{}), a3);
    }
    for (; i + L <= n; i += L) a0 = xsimd::fma(F::load_unaligned(x + i), Load(w + i, Tag{}), a0);
    if (i < n) {
      a1 = xsimd::fma(LoadPartial(x + i, n - i, FloatTag{}), LoadPartial(w + i, n - i, Tag{}), a1);
    }
    return xsimd::hadd((a0 + a1) + (a2 + a3));
  }

  // ---- dot_rows: one weight row against several input rows ----

  // Input rows per block: with four accumulators per row, R·4 accumulators and four weight
  // vectors must fit the register file (16 registers below AVX-512, 32 with it).
  static constexpr int kDotRows = L >= 16 ? 4 : 2;

  // Dot's arithmetic for R rows at once: each row's accumulators see the same fused
  // multiply-adds in the same order, and the same final sum, as Dot gives it alone. With
  // kOwnWeights each row reads its own weight row ws[r] (dot_pairs: R independent dot products
  // side by side); without, all rows read ws[0], loaded (and converted) once for all of them.
  template <class Tag, int R, bool kOwnWeights>
  static void DotBlock(const typename Tag::Storage* const* ws, const float* const* xs, size_t n,
                       float* sums) {
    using W = typename Tag::Storage;
    auto weights = [&](int r) -> const W* { return ws[kOwnWeights ? r : 0]; };
    F acc[R][4];
#pragma GCC unroll 16
    for (int r = 0; r < R; ++r) acc[r][0] = acc[r][1] = acc[r][2] = acc[r][3] = F(0.0f);
    size_t i = 0;
    for (; i + 4 * L <= n; i += 4 * L) {
      F wv[4];
      if constexpr (!kOwnWeights) {
#pragma GCC unroll 4
        for (int j = 0; j < 4; ++j) wv[j] = Load(weights(0) + i + j * L, Tag{});
      }
#pragma GCC unroll 16
      for (int r = 0; r < R; ++r) {
        if constexpr (kOwnWeights) {
#pragma GCC unroll 4
          for (int j = 0; j < 4; ++j) wv[j] = Load(weights(r) + i + j * L, Tag{});
        }
#pragma GCC unroll 4
        for (int j = 0; j < 4; ++j) {
          acc[r][j] = xsimd::fma(F::load_unaligned(xs[r] + i + j * L), wv[j], acc[r][j]);
        }
      }
    }
    // The tails: a shared weight vector is loaded (and converted) once for all rows.
    for (; i + L <= n; i += L) {
      const F shared = kOwnWeights ? F(0.0f) : Load(weights(0) + i, Tag{});
      for (int r = 0; r < R; ++r) {
        const F wv = kOwnWeights ? Load(weights(r) + i, Tag{}) : shared;
        acc[r][0] = xsimd::fma(F::load_unaligned(xs[r] + i), wv, acc[r][0]);
      }
    }
    if (i < n) {
      const F shared = kOwnWeights ? F(0.0f) : LoadPartial(weights(0) + i, n - i, Tag{});
      for (int r = 0; r < R; ++r) {
        const F wv = kOwnWeights ? LoadPartial(weights(r) + i, n - i, Tag{}) : shared;
        acc[r][1] = xsimd::fma(LoadPartial(xs[r] + i, n - i, FloatTag{}), wv, acc[r][1]);
      }
    }
    for (int r = 0; r < R; ++r) {
      sums[r] = xsimd::hadd((acc[r][0] + acc[r][1]) + (acc[r][2] + acc[r][3]));
    }
  }

  template <class Tag>
  static void DotRows(const typename Tag::Storage* w, const float* const* xs, size_t count,
                      size_t n, float* sums) {
    const typename Tag::Storage* const ws[1] = {w};
    size_t r = 0;
    for (; r + kDotRows <= count; r += kDotRows) {
      DotBlock<Tag, kDotRows, false>(ws, xs + r, n, sums + r);
    }
    for (; r < count; ++r) DotBlock<Tag, 1, false>(ws, xs + r, n, sums + r);
  }

  template <class Tag>
  static void DotPairs(const void* const* ws, const float* const* xs, size_t count, size_t n,
                       float* sums) {
    using W = typename Tag::Storage;
    const W* rows[kDotRows];
    size_t r = 0;
    for (; r + kDotRows <= count; r += kDotRows) {
      for (int j = 0; j < kDotRows; ++j) rows[j] = static_cast<const W*>(ws[r + j]);
      DotBlock<Tag, kDotRows, true>(rows, xs + r, n, sums + r);
    }
    for (; r < count; ++r) {
      rows[0] = static_cast<const W*>(ws[r]);
      DotBlock<Tag, 1, true>(rows, xs + r, n, sums + r);
    }
  }

  template <class Tag>
  static void Axpy(float a, const typename Tag::Storage* w, float* y, size_t n) {
    const F av(a);
    size_t i = 0;
    for (; i + L <= n; i += L) {
      xsimd::fma(av, Load(w + i, Tag{}), F::load_unaligned(y + i)).store_unaligned(y + i);
    }
    if (i < n) {
      alignas(64) float out[L];
      xsimd::fma(av, LoadPartial(w + i, n - i, Tag{}), LoadPartial(y + i, n - i, FloatTag{}))
          .store_aligned(out);
      std::memcpy(y + i, out, (n - i) * sizeof(float));
    }
  }

  // Four vectors of y at a time stay in registers while every row adds its term, so y is
  // loaded and stored once and the rows' loads run side by side. Each element still receives
  // fma(a[r], w_r, y) in the order of r, exactly as `count` Axpy calls would give it.
  template <class Tag>
  static void AxpyRows(const float* a, const void* const* rows, size_t count, float* y, size_t n) {
    using W = typename Tag::Storage;
    size_t i = 0;
    for (; i + 4 * L <= n; i += 4 * L) {
      F y0 = F::load_unaligned(y + i), y1 = F::load_unaligned(y + i + L);
      F y2 = F::load_unaligned(y + i + 2 * L), y3 = F::load_unaligned(y + i + 3 * L);
      for (size_t r = 0; r < count; ++r) {
        const W* w = static_cast<const W*>(rows[r]) + i;
        const F ar(a[r]);
        y0 = xsimd::fma(ar, Load(w, Tag{}), y0);
        y1 = xsimd::fma(ar, Load(w + L, Tag{}), y1);
        y2 = xsimd::fma(ar, Load(w + 2 * L, Tag{}), y2);
        y3 = xsimd::fma(ar, Load(w + 3 * L, Tag{}), y3);
      }
      y0.store_unaligned(y + i);
      y1.store_unaligned(y + i + L);
      y2.store_unaligned(y + i + 2 * L);
      y3.store_unaligned(y + i + 3 * L);
    }
    for (; i + L <= n; i += L) {
      F acc = F::load_unaligned(y + i);
      for (size_t r = 0; r < count; ++r) {
        acc = xsimd::fma(F(a[r]), Load(static_cast<const W*>(rows[r]) + i, Tag{}), acc);
      }
      acc.store_unaligned(y + i);
    }
    if (i < n) {
      F acc = LoadPartial(y + i, n - i, FloatTag{});
      for (size_t r = 0; r < count; ++r) {
        acc =
            xsimd::fma(F(a[r]), LoadPartial(static_cast<const W*>(rows[r]) + i, n - i, Tag{}), acc);
      }
      alignas(64) float out[L];
      acc.store_aligned(out);
      std::memcpy(y + i, out, (n - i) * sizeof(float));
    }
  }

  // ---- gemv and gemm_rows: one register-blocked micro-kernel ----

  // Sums of R rows of X against C rows of W, over `in`: sums[r·C + c] = X[r]·W[c]. Each step
  // loads C weight vectors once and reuses them for all R rows, so weights (the large operand,
  // and the one that may need converting) are read once per block of rows.
  template <class Tag, int R, int C>
  static void Block(const typename Tag::Storage* w, const float* x, size_t in, float* sums) {
    F acc[R * C];
#pragma GCC unroll 16
    for (int j = 0; j < R * C; ++j) acc[j] = F(0.0f);
    size_t k = 0;
    for (; k + L <= in; k += L) {
      F wv[C];
#pragma GCC unroll 16
      for (int c = 0; c < C; ++c) wv[c] = Load(w + c * in + k, Tag{});
#pragma GCC unroll 16
      for (int r = 0; r < R; ++r) {
        const F xv = F::load_unaligned(x + r * in + k);
#pragma GCC unroll 16
        for (int c = 0; c < C; ++c) acc[r * C + c] = xsimd::fma(xv, wv[c], acc[r * C + c]);
      }
    }
    if (k < in) {
      const size_t rest = in - k;
      F wv[C];
      for (int c = 0; c < C; ++c) wv[c] = LoadPartial(w + c * in + k, rest, Tag{});
      for (int r = 0; r < R; ++r) {
        const F xv = LoadPartial(x + r * in + k, rest, FloatTag{});
        for (int c = 0; c < C; ++c) acc[r * C + c] = xsimd::fma(xv, wv[c], acc[r * C + c]);
      }
    }
    ReducePadded<R * C>(acc, sums);
  }

  // Traits::Reduce over N vectors padded with zero vectors to a whole number of its groups (4 or
  // 8 vectors), so that it never takes its remainder path, whose copy through a run-time sized
  // group costs more than the sums when N is small (a leaf's fc2 has in = leaf width). Every
  // sum is formed as the remainder path would form it: each lane sum reads its own vector only.
  template <int N>
  static void ReducePadded(const F* acc, float* sums) {
    constexpr int kPadded = (N + 7) / 8 * 8;
    if constexpr (kPadded == N) {
      Traits::Reduce(acc, N, sums);
    } else {
      F padded[kPadded];
      float padded_sums[kPadded];
#pragma GCC unroll 32
      for (int j = 0; j < kPadded; ++j) padded[j] = j < N ? acc[j] : F(0.0f);
      Traits::Reduce(padded, kPadded, padded_sums);
#pragma GCC unroll 32
      for (int j = 0; j < N; ++j) sums[j] = padded_sums[j];
    }
  }

  // Block for a run-time shape rows <= R, cols <= C (the edges of the output).
  template <class Tag, int R, int C>
  static void EdgeBlock(size_t rows, size_t cols, const typename Tag::Storage* w, const float* x,
                        size_t in, float* sums) {
    if constexpr (R > 1) {
      if (rows < size_t(R)) return EdgeBlock<Tag, R - 1, C>(rows, cols, w, x, in, sums);
    }
    if constexpr (C > 1) {
      if (cols < size_t(C)) return EdgeBlock<Tag, R, C - 1>(rows, cols, w, x, in, sums);
    }
    Block<Tag, R, C>(w, x, in, sums);
  }

  // The rows of X kept hot in cache while all of W streams past once. Half of a typical 1-2 MB
  // L2, so that W's blocks and Y fit beside it.
  static constexpr size_t kRowTileBytes = 512 * 1024;

  // One output: the block's sum, scaled for int8 rows (`scales` null for the float types, whose
  // results then stay exactly sum + bias), plus the bias.
  static float Finish(float sum, const float* scales, const float* bias, size_t o) {
    if (scales != nullptr) sum *= scales[o];
    return sum + (bias != nullptr ? bias[o] : 0.0f);
  }

  template <class Tag>
  static void GemmRowsScaled(const typename Tag::Storage* w, const float* scales, const float* x,
                             const float* bias, float* y, size_t rows, size_t out, size_t in) {
    // One row (a leaf or expert reached by one row of a batch): gemv's wider blocks, with the
    // same bits (a sum depends on its own accumulator only, whatever block it sits in).
    if (rows == 1) return GemvScaled<Tag>(w, scales, x, bias, y, out, in);
    constexpr size_t R = Traits::kGemmRows;
    constexpr size_t C = Traits::kGemmCols;
    const size_t row_bytes = Max<size_t>(in, 1) * sizeof(float);
    const size_t tile = Max<size_t>(R, kRowTileBytes / row_bytes / R * R);
    float sums[R * C];
    for (size_t r0 = 0; r0 < rows; r0 += tile) {
      const size_t r_end = Min(rows, r0 + tile);
      for (size_t o = 0; o < out; o += C) {
        const size_t cols = Min(C, out - o);
        for (size_t r = r0; r < r_end; r += R) {
          const size_t block_rows = Min(R, r_end - r);
          EdgeBlock<Tag, int(R), int(C)>(block_rows, cols, w + o * in, x + r * in, in, sums);
          for (size_t i = 0; i < block_rows; ++i) {
            for (size_t c = 0; c < cols; ++c) {
              y[(r + i) * out + o + c] = Finish(sums[i * cols + c], scales, bias, o + c);
            }
          }
        }
      }
    }
  }

  template <class Tag>
  static void GemvScaled(const typename Tag::Storage* w, const float* scales, const float* x,
                         const float* bias, float* y, size_t out, size_t in) {
    constexpr size_t C = Traits::kGemvCols;
    float sums[C];
    // No software prefetch: the matrix is read front to back, which the hardware prefetchers
    // follow. Requesting the block two ahead, line by line, made a 768 × 3,072 f32 gemv 1.7×
    // slower (the prefetch instructions wait behind the misses already in flight) and a dense
    // layer of width 3,072 at batch 1 1.4× slower (measured on AVX-512, one thread).
    for (size_t o = 0; o < out; o += C) {
      const size_t cols = Min(C, out - o);
      EdgeBlock<Tag, 1, int(C)>(1, cols, w + o * in, x, in, sums);
      for (size_t c = 0; c < cols; ++c) y[o + c] = Finish(sums[c], scales, bias, o + c);
    }
  }

  template <class Tag>
  static void GemmRows(const typename Tag::Storage* w, const float* x, const float* bias, float* y,
                       size_t rows, size_t out, size_t in) {
    GemmRowsScaled<Tag>(w, nullptr, x, bias, y, rows, out, in);
  }

  template <class Tag>
  static void Gemv(const typename Tag::Storage* w, const float* x, const float* bias, float* y,
                   size_t out, size_t in) {
    GemvScaled<Tag>(w, nullptr, x, bias, y, out, in);
  }

  // ---- activations ----

  static F Apply(F x, std::integral_constant<Activation, Activation::kRelu>) {
    return xsimd::select(x < F(0.0f), F(0.0f), x);
  }
  // Same forms as the scalar path: 0.5·x·erfc(-x/√2) = 0.5·x·(1 + erf(x/√2)) and
  // x·sigmoid(2u) = 0.5·x·(1 + tanh(u)), which avoid cancellation for negative x.
  static F Apply(F x, std::integral_constant<Activation, Activation::kGelu>) {
    return F(0.5f) * x * xsimd::erfc(-x * F(kSqrtHalf));
  }
  static F Apply(F x, std::integral_constant<Activation, Activation::kGeluTanh>) {
    const F u = F(kSqrtTwoOverPi) * (x + F(0.044715f) * x * x * x);
    return x / (F(1.0f) + xsimd::exp(F(-2.0f) * u));
  }
  static F Apply(F x, std::integral_constant<Activation, Activation::kSilu>) {
    return x / (F(1.0f) + xsimd::exp(-x));
  }

  template <Activation A>
  static void Map(float* x, size_t n) {
    constexpr std::integral_constant<Activation, A> act;
    size_t i = 0;
    for (; i + L <= n; i += L) Apply(F::load_unaligned(x + i), act).store_unaligned(x + i);
    if (i < n) {
      alignas(64) float out[L];
      Apply(LoadPartial(x + i, n - i, FloatTag{}), act).store_aligned(out);
      std::memcpy(x + i, out, (n - i) * sizeof(float));
    }
  }

  template <Activation A>
  static void GatedMap(const float* gate, const float* up, float* h, size_t n) {
    constexpr std::integral_constant<Activation, A> act;
    size_t i = 0;
    for (; i + L <= n; i += L) {
      (Apply(F::load_unaligned(gate + i), act) * F::load_unaligned(up + i)).store_unaligned(h + i);
    }
    if (i < n) {
      alignas(64) float out[L];
      (Apply(LoadPartial(gate + i, n - i, FloatTag{}), act) *
       LoadPartial(up + i, n - i, FloatTag{}))
          .store_aligned(out);
      std::memcpy(h + i, out, (n - i) * sizeof(float));
    }
  }

  static void Activate(Activation act, float* x, size_t n) {
    switch (act) {
      case Activation::kRelu:
        return Map<Activation::kRelu>(x, n);
      case Activation::kGelu:
        return Map<Activation::kGelu>(x, n);
      case Activation::kGeluTanh:
        return Map<Activation::kGeluTanh>(x, n);
      case Activation::kSilu:
        return Map<Activation::kSilu>(x, n);
    }
  }

  static void GatedActivate(Activation act, const float* gate, const float* up, float* h,
                            size_t n) {
    switch (act) {
      case Activation::kRelu:
        return GatedMap<Activation::kRelu>(gate, up, h, n);
      case Activation::kGelu:
        return GatedMap<Activation::kGelu>(gate, up, h, n);
      case Activation::kGeluTanh:
        return GatedMap<Activation::kGeluTanh>(gate, up, h, n);
      case Activation::kSilu:
        return GatedMap<Activation::kSilu>(gate, up, h, n);
    }
  }

  // ---- softmax and norms ----

  static float MaxElement(const float* x, size_t n) {
    float max = x[0];
    size_t i = 0;
    if (n >= L) {
      F m = F::load_unaligned(x);
      for (i = L; i + L <= n; i += L) m = xsimd::max(m, F::load_unaligned(x + i));
      alignas(64) float lanes[L];
      m.store_aligned(lanes);
      for (size_t j = 0; j < L; ++j) max = Max(max, lanes[j]);
    }
    for (; i < n; ++i) max = Max(max, x[i]);
    return max;
  }

  static float Sum(const float* x, size_t n) {
    F acc(0.0f);
    size_t i = 0;
    for (; i + L <= n; i += L) acc += F::load_unaligned(x + i);
    float sum = xsimd::hadd(acc);
    for (; i < n; ++i) sum += x[i];
    return sum;
  }

  // Σ (x[i] - center)².
  static float SquaredDeviations(const float* x, float center, size_t n) {
    const F c(center);
    F acc(0.0f);
    size_t i = 0;
    for (; i + L <= n; i += L) {
      const F d = F::load_unaligned(x + i) - c;
      acc = xsimd::fma(d, d, acc);
    }
    float sum = xsimd::hadd(acc);
    for (; i < n; ++i) sum += (x[i] - center) * (x[i] - center);
    return sum;
  }

  static void Softmax(float* x, size_t n) {
    if (n == 0) return;
    const F max(MaxElement(x, n));
    F acc(0.0f);
    size_t i = 0;
    for (; i + L <= n; i += L) {
      const F e = xsimd::exp(F::load_unaligned(x + i) - max);
      e.store_unaligned(x + i);
      acc += e;
    }
    float sum = xsimd::hadd(acc);
    if (i < n) {
      alignas(64) float out[L];
      xsimd::exp(LoadPartial(x + i, n - i, FloatTag{}) - max).store_aligned(out);
      for (size_t j = 0; j < n - i; ++j) {
        x[i + j] = out[j];
        sum += out[j];
      }
    }
    const F inv(1.0f / sum);
    for (i = 0; i + L <= n; i += L) (F::load_unaligned(x + i) * inv).store_unaligned(x + i);
    for (; i < n; ++i) x[i] *= 1.0f / sum;
  }

  // y = (x - center)·scale·weight + bias; weight and bias may be null.
  static void ScaleShift(const float* x, float center, float scale, const float* weight,
                         const float* bias, float* y, size_t n) {
    const F c(center), s(scale);
    size_t i = 0;
    for (; i + L <= n; i += L) {
      F v = (F::load_unaligned(x + i) - c) * s;
      if (weight != nullptr) v *= F::load_unaligned(weight + i);
      if (bias != nullptr) v += F::load_unaligned(bias + i);
      v.store_unaligned(y + i);
    }
    for (; i < n; ++i) {
      float v = (x[i] - center) * scale;
      if (weight != nullptr) v *= weight[i];
      if (bias != nullptr) v += bias[i];
      y[i] = v;
    }
  }

  static void LayerNorm(const float* x, const float* weight, const float* bias, float eps, float* y,
                        size_t n) {
    if (n == 0) return;
    const float mean = Sum(x, n) / float(n);
    // Two passes: the variance of the centred values does not cancel like E[x²] - mean².
    const float variance = SquaredDeviations(x, mean, n) / float(n);
    ScaleShift(x, mean, 1.0f / Sqrt(variance + eps), weight, bias, y, n);
  }

  static void RmsNorm(const float* x, const float* weight, float eps, float* y, size_t n) {
    if (n == 0) return;
    const float mean_square = SquaredDeviations(x, 0.0f, n) / float(n);
    ScaleShift(x, 0.0f, 1.0f / Sqrt(mean_square + eps), weight, nullptr, y, n);
  }

  // ---- array converters ----

  static void StoreBFloat16(F value, uint16_t* dst) {
    const I bits = xsimd::bitwise_cast<I>(value);
    // Round to nearest even on the dropped 16 bits (wrapping vector adds; NaN lanes replaced).
    const I rounded = ((bits + I(0x7fff) + ((bits >> 16) & I(1))) >> 16) & I(0xffff);
    const I nan = ((bits >> 16) & I(0xffff)) | I(0x0040);
    const auto is_nan = (bits & I(0x7fffffff)) > I(0x7f800000);
    Traits::Narrow(xsimd::select(is_nan, nan, rounded), dst);
  }

  // Applies `convert` (L source values -> L destination values) over the array; the tail goes
  // through zero-padded buffers.
  template <class Src, class Dst, class Convert>
  static void MapArray(const Src* src, Dst* dst, size_t n, Convert convert) {
    size_t i = 0;
    for (; i + L <= n; i += L) convert(src + i, dst + i);
    if (i < n) {
      alignas(64) Src in[L] = {};
      alignas(64) Dst out[L];
      std::memcpy(in, src + i, (n - i) * sizeof(Src));
      convert(in, out);
      std::memcpy(dst + i, out, (n - i) * sizeof(Dst));
    }
  }

  static void FloatToHalfArray(const float* src, uint16_t* dst, size_t n) {
    MapArray(src, dst, n,
             [](const float* s, uint16_t* d) { Traits::StoreHalf(F::load_unaligned(s), d); });
  }
  static void HalfToFloatArray(const uint16_t* src, float* dst, size_t n) {
    MapArray(src, dst, n,
             [](const uint16_t* s, float* d) { Traits::LoadHalf(s).store_unaligned(d); });
  }
  static void FloatToBFloat16Array(const float* src, uint16_t* dst, size_t n) {
    MapArray(src, dst, n,
             [](const float* s, uint16_t* d) { StoreBFloat16(F::load_unaligned(s), d); });
  }
  static void BFloat16ToFloatArray(const uint16_t* src, float* dst, size_t n) {
    MapArray(src, dst, n,
             [](const uint16_t* s, float* d) { Load(s, BFloat16Tag{}).store_unaligned(d); });
  }

  // ---- checks ----

  // max_i |x[i]|, 0 for n = 0: the scale of the int8-activation kernels (kernels_quantized.h,
  // whose Ops of every vector path call this). The maximum is exact in any order and the tail's
  // zero lanes cannot raise it, so every path gives ScalarQuantizedOps::MaxAbs's value.
  static float MaxAbs(const float* x, size_t n) {
    F max(0.0f);
    size_t i = 0;
    for (; i + L <= n; i += L) max = xsimd::max(max, xsimd::abs(F::load_unaligned(x + i)));
    if (i < n) max = xsimd::max(max, xsimd::abs(LoadPartial(x + i, n - i, FloatTag{})));
    alignas(64) float lanes[L];
    max.store_aligned(lanes);
    float result = 0.0f;
    for (float lane : lanes) result = lane > result ? lane : result;
    return result;
  }

  // A float is an infinity or a NaN exactly when its exponent bits are all ones.
  static bool AllFinite(const float* x, size_t n) {
    const I exponent(0x7f800000);
    xsimd::batch_bool<int32_t, Arch> bad(false);
    size_t i = 0;
    for (; i + L <= n; i += L) {
      bad = bad | ((xsimd::bitwise_cast<I>(F::load_unaligned(x + i)) & exponent) == exponent);
    }
    if (i < n) {
      const I tail = xsimd::bitwise_cast<I>(LoadPartial(x + i, n - i, FloatTag{}));
      bad = bad | ((tail & exponent) == exponent);  // the zero lanes are finite
    }
    return !xsimd::any(bad);
  }

  // ---- the table ----

  template <class Tag>
  static constexpr WeightKernels<typename Tag::Storage> MakeWeightKernels() {
    return {&Dot<Tag>, &Gemv<Tag>, &GemmRows<Tag>, &Axpy<Tag>, &AxpyRows<Tag>};
  }

  static constexpr KernelTable MakeTable(KernelPath path) {
    return {
        path,
        MakeWeightKernels<FloatTag>(),
        MakeWeightKernels<HalfTag>(),
        MakeWeightKernels<BFloat16Tag>(),
        Int8Kernels{&Dot<Int8Tag>, &GemvScaled<Int8Tag>, &GemmRowsScaled<Int8Tag>, &Axpy<Int8Tag>,
                    &AxpyRows<Int8Tag>},
        &Activate,
        &GatedActivate,
        &Softmax,
        &LayerNorm,
        &RmsNorm,
        &AllFinite,
        &FloatToHalfArray,
        &HalfToFloatArray,
        &FloatToBFloat16Array,
        &BFloat16ToFloatArray,
        {&DotRows<FloatTag>, &DotRows<HalfTag>, &DotRows<BFloat16Tag>, &DotRows<Int8Tag>,
         &DotPairs<FloatTag>, &DotPairs<HalfTag>, &DotPairs<BFloat16Tag>, &DotPairs<Int8Tag>},
    };
  }
};

}  // namespace
}  // namespace sprig::kernels
