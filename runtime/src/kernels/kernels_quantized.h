// The int8-activation kernels' loops (Int8ActivationKernels in kernels.h), written once over a
// small Ops struct that each path supplies:
//   static float MaxAbs(const float* x, size_t n);            // max_i |x[i]|, 0 for n = 0
//   static void Divide(const float* x, float scale, int8_t* q, size_t n);
//                                                              // q[i] = QuantizeValue(x[i], scale)
//   static int32_t Dot(const int8_t* x, const int8_t* w, size_t n);  // exact Σ x[i]·w[i]
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

  static void Gemv(const int8_t* w, const float* w_scales, const int8_t* x, float x_scale,
                   const float* bias, float* y, size_t out, size_t in) {
    for (size_t o = 0; o < out; ++o) {
      y[o] = QuantizedOutput(Ops::Dot(x, w + o * in, in), x_scale, w_scales[o], bias, o);
    }
  }

  // Row by row over the whole weight matrix: meant for the small groups of rows that reach a
  // leaf or an expert, whose weights stay in cache between rows.
  static void GemmRows(const int8_t* w, const float* w_scales, const int8_t* x,
                       const float* x_scales, const float* bias, float* y, size_t rows, size_t out,
                       size_t in) {
    for (size_t r = 0; r < rows; ++r) {
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
