// The int8-activation kernels' loops (Int8ActivationKernels in kernels.h), written once over a
// small Ops struct that each path supplies:
//   static float MaxAbs(const float* x, size_t n);            // max_i |x[i]|, 0 for n = 0
//   static void Divide(const float* x, float scale, int8_t* q, size_t n);
//                                                              // q[i] = QuantizeValue(x[i], scale)
//   static int32_t Dot(const int8_t* x, const int8_t* w, size_t n);  // exact Σ x[i]·w[i]
// and, optionally, a blocked form that gemv (R = 1) and gemm_rows (R = kGemmRows) then use
// for blocks of four outputs:
//   template <int R> static void DotBlock(const int8_t* const* x, const int8_t* const* w,
//                                         size_t n, int32_t* sums);
//                                                // sums[a·4 + r] = Dot(x[a], w[r], n), a < R
// The scalar forms below are the reference; a vector path implements the same functions with
// its instructions (MaxAbs once for all of them, SimdKernels::MaxAbs in kernels_simd.h) and
// uses the scalar forms for its tails, so every path gives the same bits
// (integer sums are exact in any order; the maximum is exact in any order; the division and
// the rounding are IEEE operations, correctly rounded on every path).
//
// Like kernels_simd.h, everything here has internal linkage: a file compiled for an
// instruction set must never share an out-of-line copy of a function with baseline code.
#pragma once

#include <cmath>
#include <cstddef>
#include <cstdint>
#include <cstring>

#include "kernels/kernels.h"

namespace sprig::kernels {
namespace {

// x / scale rounded to the nearest integer, ties to even (nearbyint in the default rounding
// mode, as the vector conversions round), then clamped to [-127, 127].
inline int8_t QuantizeValue(float x, float scale) {
  float v = std::nearbyint(x / scale);
  v = v < -127.0f ? -127.0f : v;
  v = v > 127.0f ? 127.0f : v;
  return static_cast<int8_t>(v);
}

struct ScalarQuantizedOps {
  static float MaxAbs(const float* x, size_t n) {
    float max_abs = 0.0f;
    for (size_t i = 0; i < n; ++i) {
      const float a = std::fabs(x[i]);
      max_abs = a > max_abs ? a : max_abs;
    }
    return max_abs;
  }
  static void Divide(const float* x, float scale, int8_t* q, size_t n) {
    for (size_t i = 0; i < n; ++i) q[i] = QuantizeValue(x[i], scale);
  }
  static int32_t Dot(const int8_t* x, const int8_t* w, size_t n) {
    int32_t sum = 0;
    for (size_t i = 0; i < n; ++i) sum += int32_t{x[i]} * int32_t{w[i]};
    return sum;
  }
};

template <typename Ops>
struct QuantizedLoops {
  static float Quantize(const float* x, int8_t* q, size_t n) {
    const float max_abs = Ops::MaxAbs(x, n);
    if (max_abs == 0.0f) {
      if (n > 0) std::memset(q, 0, n);
      return 0.0f;
    }
    const float scale = max_abs / 127.0f;
    Ops::Divide(x, scale, q, n);
    return scale;
  }

  // The outputs o .. o + count of one activation row from their exact sums: a loop over arrays
  // (with the bias test outside it), which vectorises; the same expression, the same bits.
  static void Outputs(const int32_t* sums, float x_scale, const float* w_scales, const float* bias,
                      float* y, size_t o, size_t count) {
    if (bias == nullptr) {
      for (size_t j = 0; j < count; ++j) {
        y[o + j] = QuantizedOutput(sums[j], x_scale, w_scales[o + j], nullptr, 0);
      }
    } else {
      for (size_t j = 0; j < count; ++j) {
        y[o + j] = QuantizedOutput(sums[j], x_scale, w_scales[o + j], bias, o + j);
      }
    }
  }

  static constexpr bool kBlocked = requires(const int8_t* const* p, int32_t* sums) {
    Ops::template DotBlock<1>(p, p, size_t{0}, sums);
  };
  // Activation rows per pass of gemm_rows: 2 on AVX-512 VNNI keeps the block's 8 + 4 sums in
  // registers; with 3 or 4, GCC 12 stores an accumulator after every vpdpbusd.
  static constexpr int kGemmRows = 2;

  // All `out` outputs of activation rows x[0 .. R), four outputs at a time through
  // Ops::DotBlock<R> where the path has it, the rest through Ops::Dot.
  template <int R>
  static void Rows(const int8_t* w, const float* w_scales, const int8_t* const* x,
                   const float* x_scales, const float* bias, float* const* y, size_t out,
                   size_t in) {
    constexpr size_t kChunk = 64;  // outputs whose sums are formed before they are scaled
    int32_t sums[R][kChunk];
    for (size_t o0 = 0; o0 < out; o0 += kChunk) {
      const size_t count = out - o0 < kChunk ? out - o0 : kChunk;
      size_t j = 0;
      if constexpr (kBlocked) {
        for (; j + 4 <= count; j += 4) {
          const size_t o = o0 + j;
          const int8_t* const rows[4] = {w + o * in, w + (o + 1) * in, w + (o + 2) * in,
                                         w + (o + 3) * in};
          int32_t block[R * 4];
          Ops::template DotBlock<R>(x, rows, in, block);
          for (int a = 0; a < R; ++a) {
            for (int r = 0; r < 4; ++r) sums[a][j + r] = block[a * 4 + r];
          }
        }
      }
      for (; j < count; ++j) {
        for (int a = 0; a < R; ++a) sums[a][j] = Ops::Dot(x[a], w + (o0 + j) * in, in);
      }
      for (int a = 0; a < R; ++a) Outputs(sums[a], x_scales[a], w_scales, bias, y[a], o0, count);
    }
  }

  static void Gemv(const int8_t* w, const float* w_scales, const int8_t* x, float x_scale,
                   const float* bias, float* y, size_t out, size_t in) {
    const int8_t* const xs[1] = {x};
    float* const ys[1] = {y};
    Rows<1>(w, w_scales, xs, &x_scale, bias, ys, out, in);
  }

  // Meant for the small groups of rows that reach a leaf or an expert: where the path has the
  // blocked form, kGemmRows activation rows share each pass over the weights (and each weight
  // row's Σw); every output is the same exact sum as gemv's, so the bits do not depend on the
  // blocking.
  static void GemmRows(const int8_t* w, const float* w_scales, const int8_t* x,
                       const float* x_scales, const float* bias, float* y, size_t rows, size_t out,
                       size_t in) {
    size_t r = 0;
    if constexpr (kBlocked) {
      for (; r + kGemmRows <= rows; r += kGemmRows) {
        const int8_t* xs[kGemmRows];
        float* ys[kGemmRows];
        for (int a = 0; a < kGemmRows; ++a) {
          xs[a] = x + (r + a) * in;
          ys[a] = y + (r + a) * out;
        }
        Rows<kGemmRows>(w, w_scales, xs, x_scales + r, bias, ys, out, in);
      }
    }
    for (; r < rows; ++r) {
      Gemv(w, w_scales, x + r * in, x_scales[r], bias, y + r * out, out, in);
    }
  }

  static constexpr Int8ActivationKernels Make() { return {&Quantize, &Ops::Dot, &Gemv, &GemmRows}; }
};

// `table` with its int8-activation block set from Ops.
template <typename Ops>
constexpr KernelTable WithInt8Activations(KernelTable table) {
  table.int8_activations = QuantizedLoops<Ops>::Make();
  return table;
}

}  // namespace
}  // namespace sprig::kernels
