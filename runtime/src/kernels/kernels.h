// Compute kernels: the few vector routines every layer is built from, in one implementation per
// instruction set, chosen at run time.
//
// A KernelTable is a struct of function pointers. There is one table per KernelPath: kScalar is
// plain C++ (always present, the reference every other path is tested against), the others are
// the same algorithms written once over xsimd and compiled per instruction set in their own
// files (kernels_sse42.cc, kernels_avx2.cc, kernels_avx512.cc, kernels_neon.cc). Only files
// compiled for an instruction set ever execute its instructions; this file's dispatcher is
// baseline code.
//
// Conventions for every kernel: activations and results are float32, accumulation is float32,
// weights are stored as float32, f16 or bf16 (raw uint16_t bits, see numeric/half.h), or int8
// with one float32 scale per row, in the PyTorch nn.Linear layout W[out, in] (row-major, one
// output per row). Weights are converted to float32 a vector at a time, in registers, as they are
// used; no kernel expands a whole matrix or record first. Pointers need no
// alignment. n, rows, out or in may be 0 (nothing is read; outputs of a 0-length reduction are
// the bias or 0). Outputs must not overlap inputs unless a kernel says so.
//
// Results of different paths agree to rounding: vector paths sum in a different order and use
// vector erf/exp/tanh, so they are not bit-identical to the scalar path (the converters are).
// Tables are immutable; every function is thread-safe.
#pragma once

#include <cassert>
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <string_view>
#include <vector>

#include "sprig/config.h"
#include "sprig/status.h"

namespace sprig::kernels {

enum class KernelPath : uint8_t { kScalar, kSse42, kAvx2, kAvx512, kNeon };

// Kernels for one weight storage type W (float for f32, uint16_t bits for f16 and bf16).
template <typename W>
struct WeightKernels {
  // Returns Σ_i x[i]·w[i], i < n.
  float (*dot)(const float* x, const W* w, size_t n);
  // y[o] = Σ_i w[o·in + i]·x[i] + bias[o], o < out. `bias` may be null (zero).
  void (*gemv)(const W* w, const float* x, const float* bias, float* y, size_t out, size_t in);
  // Y[r, o] = Σ_i X[r, i]·W[o, i] + bias[o] for r < rows: X is [rows, in], Y is [rows, out],
  // both row-major and contiguous. Meant for small row counts (a leaf or expert evaluated over
  // the group of rows routed to it); `bias` may be null.
  void (*gemm_rows)(const W* w, const float* x, const float* bias, float* y, size_t rows,
                    size_t out, size_t in);
  // y[i] += a·w[i], i < n.
  void (*axpy)(float a, const W* w, float* y, size_t n);
  // y[i] += Σ_r a[r]·w_r[i] for i < n, r < count, where rows[r] points at row w_r (of type W).
  // Each y[i] receives the terms in the order r = 0, 1, ...: the result equals `count` axpy
  // calls in that order, bit for bit, but y is read and written once instead of `count` times.
  void (*axpy_rows)(const float* a, const void* const* rows, size_t count, float* y, size_t n);
};

// Kernels for int8 weights with one float32 scale per row: W[o, i] = scales[o]·q[o, i]
// (schema/README.md, "int8 storage"). dot and axpy see one row and leave the scale to the
// caller; gemv and gemm_rows apply scales[o] to each output before adding its bias.
struct Int8Kernels {
  // Returns Σ_i x[i]·q[i], i < n (unscaled).
  float (*dot)(const float* x, const int8_t* q, size_t n);
  // y[o] = scales[o]·Σ_i q[o·in + i]·x[i] + bias[o]. `bias` may be null.
  void (*gemv)(const int8_t* q, const float* scales, const float* x, const float* bias, float* y,
               size_t out, size_t in);
  // Y[r, o] = scales[o]·Σ_i X[r, i]·q[o, i] + bias[o], as WeightKernels::gemm_rows.
  void (*gemm_rows)(const int8_t* q, const float* scales, const float* x, const float* bias,
                    float* y, size_t rows, size_t out, size_t in);
  // y[i] += a·q[i], i < n (unscaled: pass a·scale).
  void (*axpy)(float a, const int8_t* q, float* y, size_t n);
  // As WeightKernels::axpy_rows over int8 rows, unscaled: pass a[r]·scale_r.
  void (*axpy_rows)(const float* a, const void* const* rows, size_t count, float* y, size_t n);
};

// int8 activations (the opt-in compute mode "i8", never the default): an activation row is
// quantised once, then multiplied with int8 weight rows in integer arithmetic.
//
// Quantisation, symmetric with one scale per row: s = max_i |x[i]| / 127 (rounded to float),
// q[i] = round_to_nearest_even(x[i] / s) clamped to [-127, 127]; a row of zeros has s = 0 and
// q = 0. Rounding to nearest gives |x[i] - s·q[i]| <= s/2 (tools/sprig/verify_check.h bounds a
// logit's error with it). x must be finite.
//
// Dot products are exact: Σ q_x[i]·q_w[i] accumulates in int32, which cannot overflow for
// n <= kMaxQuantizedLength (|q_x| <= 127, |q_w| <= 128: 128·127·2^17 < 2^31). The float output
// is formed by one expression on every path, QuantizedOutput below, so every path gives the
// same bits as the scalar reference, and a row's result does not depend on its batch or on the
// thread count.
inline constexpr size_t kMaxQuantizedLength = size_t{1} << 17;

struct Int8ActivationKernels {
  // Quantises x[0, n) into q[0, n) and returns the scale s (rule above).
  float (*quantize)(const float* x, int8_t* q, size_t n);
  // Returns Σ_i x[i]·w[i], i < n, exactly (n <= kMaxQuantizedLength).
  int32_t (*dot)(const int8_t* x, const int8_t* w, size_t n);
  // y[o] = QuantizedOutput(Σ_i x[i]·w[o·in + i], x_scale, w_scales[o], bias, o), o < out:
  // the int8 weight rows W[o] = w_scales[o]·w[o, :] against a row quantised with x_scale.
  // `bias` may be null.
  void (*gemv)(const int8_t* w, const float* w_scales, const int8_t* x, float x_scale,
               const float* bias, float* y, size_t out, size_t in);
  // Y[r, o] as gemv for each row r < rows of X [rows, in] with its scale x_scales[r]; Y is
  // [rows, out]. Equal to `rows` gemv calls, bit for bit.
  void (*gemm_rows)(const int8_t* w, const float* w_scales, const int8_t* x, const float* x_scales,
                    const float* bias, float* y, size_t rows, size_t out, size_t in);
};

// The one float expression of an int8-activation output: s = s_x·s_w rounded to float, then
// float(double(s)·double(float(sum)) + bias[o]) (bias null: 0). Both factors have at most 24
// significant bits, so their product is exact in double: the sum with the bias rounds once in
// double and once more to float, and a compiler that contracts the multiply and the add into a
// fused multiply-add gets the same bits. No C library function is involved (the fmaf of some C
// libraries is not correctly rounded), so every path, compiler and system gives the same bits.
// Internal linkage: each file compiled for its instruction set keeps its own copy.
static inline float QuantizedOutput(int32_t sum, float x_scale, float w_scale, const float* bias,
                                    size_t o) {
  const double scale = static_cast<double>(x_scale * w_scale);
  const double product = scale * static_cast<double>(static_cast<float>(sum));
  return static_cast<float>(product + (bias != nullptr ? static_cast<double>(bias[o]) : 0.0));
}

// Kernels for the batched routed layers, where one weight row meets several input rows (the
// rows of a batch that reach the same tree node). Each result equals the single-row kernel's,
// bit for bit, on every path, so a row's result does not depend on its batch; the weight row is
// loaded (and converted) once for a block of input rows instead of once per row.
struct SharedRowKernels {
  // sums[r] = dot(x_r, w, n) of the same path and type, for r < count, where xs[r] points at
  // x_r. i8 sums are unscaled, as Int8Kernels::dot.
  void (*dot_rows_f32)(const float* w, const float* const* xs, size_t count, size_t n, float* sums);
  void (*dot_rows_f16)(const uint16_t* w, const float* const* xs, size_t count, size_t n,
                       float* sums);
  void (*dot_rows_bf16)(const uint16_t* w, const float* const* xs, size_t count, size_t n,
                        float* sums);
  void (*dot_rows_i8)(const int8_t* w, const float* const* xs, size_t count, size_t n, float* sums);
  // sums[r] = dot(x_r, w_r, n) of the same path and type, for r < count: each input row with its
  // own weight row (ws[r], of the type's storage), computed side by side so that their loads
  // and sums overlap (the deep levels of a batched descent, where each row reaches its own
  // node). i8 sums are unscaled.
  void (*dot_pairs_f32)(const void* const* ws, const float* const* xs, size_t count, size_t n,
                        float* sums);
  void (*dot_pairs_f16)(const void* const* ws, const float* const* xs, size_t count, size_t n,
                        float* sums);
  void (*dot_pairs_bf16)(const void* const* ws, const float* const* xs, size_t count, size_t n,
                         float* sums);
  void (*dot_pairs_i8)(const void* const* ws, const float* const* xs, size_t count, size_t n,
                       float* sums);
};

struct KernelTable {
  KernelPath path;
  WeightKernels<float> f32;
  WeightKernels<uint16_t> f16;
  WeightKernels<uint16_t> bf16;
  Int8Kernels i8;

  // x[i] = act(x[i]), in place. relu(x) = max(x, 0) (NaN stays NaN); gelu is the exact form
  // 0.5·x·(1 + erf(x/√2)); gelu_tanh is 0.5·x·(1 + tanh(√(2/π)·(x + 0.044715·x³))); silu is
  // x·sigmoid(x).
  void (*activate)(Activation act, float* x, size_t n);
  // h[i] = act(gate[i])·up[i]. `h` may be `gate` or `up`.
  void (*gated_activate)(Activation act, const float* gate, const float* up, float* h, size_t n);
  // x = softmax(x) in place, computed as exp(x - max x) / Σ exp(x - max x).
  void (*softmax)(float* x, size_t n);
  // y = (x - mean)/sqrt(var + eps)·weight + bias with the biased variance. `weight` and `bias`
  // may be null (1 and 0); `y` may be `x`.
  void (*layer_norm)(const float* x, const float* weight, const float* bias, float eps, float* y,
                     size_t n);
  // y = x/sqrt(mean(x²) + eps)·weight. `weight` may be null (1); `y` may be `x`.
  void (*rms_norm)(const float* x, const float* weight, float eps, float* y, size_t n);

  // True when no x[i] is an infinity or a NaN (every path gives the same answer).
  bool (*all_finite)(const float* x, size_t n);

  // Array converters, bit-identical on every path to numeric::FloatToHalf and friends.
  void (*f32_to_f16)(const float* src, uint16_t* dst, size_t n);
  void (*f16_to_f32)(const uint16_t* src, float* dst, size_t n);
  void (*f32_to_bf16)(const float* src, uint16_t* dst, size_t n);
  void (*bf16_to_f32)(const uint16_t* src, float* dst, size_t n);

  // Batched tree layers (see SharedRowKernels).
  SharedRowKernels shared;

  // int8 activations with int8 weights (see Int8ActivationKernels). Set by every path's
  // table; the default member initializer only keeps the tables' aggregate lists short.
  Int8ActivationKernels int8_activations = {};
};

// "scalar", "sse42", "avx2", "avx512", "neon".
const char* ToString(KernelPath path);
// The inverse of ToString; an unknown name is InvalidArgument.
Result<KernelPath> ParseKernelPath(std::string_view name);

// True when `path` is compiled into this build and this CPU (and OS) supports it: sse42 needs
// SSE4.2; avx2 needs AVX2, FMA and F16C; avx512 needs AVX-512 F, BW, DQ and VL; neon needs
// Advanced SIMD (on every AArch64 laptop, desktop and server core).
bool IsPathAvailable(KernelPath path);
// Every available path, kScalar first, in the order of the enum.
std::vector<KernelPath> AvailablePaths();
// The fastest available path, from the CPU's features alone.
KernelPath DetectBestPath();

// The path a request names: null or "" means DetectBestPath(); otherwise the named path, which
// must be available (InvalidArgument names the request and what this CPU offers).
Result<KernelPath> ResolvePath(const char* requested);

// The path used by ActiveKernels(): ResolvePath(getenv("SPRIG_KERNEL_PATH")). A request this
// CPU cannot honour is refused: DetectBestPath() is used, with a warning to the log callback.
KernelPath BestAvailablePath();

// The table of `path`. Precondition: IsPathAvailable(path); otherwise the scalar table is
// returned (never code this CPU cannot run).
const KernelTable& Kernels(KernelPath path);
// The table of BestAvailablePath(), chosen once on first use.
const KernelTable& ActiveKernels();

// Type-erased access for layers that hold a storage type and a raw weight pointer. For kI8,
// `scales` points at the float32 scale of the first row passed (row o's scale is scales[o]);
// it is ignored for the floating types and may be null there.
inline float Dot(const KernelTable& k, DType type, const float* x, const void* w, size_t n,
                 const float* scales = nullptr) {
  switch (type) {
    case DType::kF16:
      return k.f16.dot(x, static_cast<const uint16_t*>(w), n);
    case DType::kBF16:
      return k.bf16.dot(x, static_cast<const uint16_t*>(w), n);
    case DType::kI8:
      assert(scales != nullptr);
      return scales[0] * k.i8.dot(x, static_cast<const int8_t*>(w), n);
    default:
      return k.f32.dot(x, static_cast<const float*>(w), n);
  }
}

inline void Gemv(const KernelTable& k, DType type, const void* w, const float* x, const float* bias,
                 float* y, size_t out, size_t in, const float* scales = nullptr) {
  switch (type) {
    case DType::kF16:
      return k.f16.gemv(static_cast<const uint16_t*>(w), x, bias, y, out, in);
    case DType::kBF16:
      return k.bf16.gemv(static_cast<const uint16_t*>(w), x, bias, y, out, in);
    case DType::kI8:
      assert(scales != nullptr);
      return k.i8.gemv(static_cast<const int8_t*>(w), scales, x, bias, y, out, in);
    default:
      return k.f32.gemv(static_cast<const float*>(w), x, bias, y, out, in);
  }
}

inline void GemmRows(const KernelTable& k, DType type, const void* w, const float* x,
                     const float* bias, float* y, size_t rows, size_t out, size_t in,
                     const float* scales = nullptr) {
  switch (type) {
    case DType::kF16:
      return k.f16.gemm_rows(static_cast<const uint16_t*>(w), x, bias, y, rows, out, in);
    case DType::kBF16:
      return k.bf16.gemm_rows(static_cast<const uint16_t*>(w), x, bias, y, rows, out, in);
    case DType::kI8:
      assert(scales != nullptr);
      return k.i8.gemm_rows(static_cast<const int8_t*>(w), scales, x, bias, y, rows, out, in);
    default:
      return k.f32.gemm_rows(static_cast<const float*>(w), x, bias, y, rows, out, in);
  }
}

inline void Axpy(const KernelTable& k, DType type, float a, const void* w, float* y, size_t n,
                 const float* scales = nullptr) {
  switch (type) {
    case DType::kF16:
      return k.f16.axpy(a, static_cast<const uint16_t*>(w), y, n);
    case DType::kBF16:
      return k.bf16.axpy(a, static_cast<const uint16_t*>(w), y, n);
    case DType::kI8:
      assert(scales != nullptr);
      return k.i8.axpy(a * scales[0], static_cast<const int8_t*>(w), y, n);
    default:
      return k.f32.axpy(a, static_cast<const float*>(w), y, n);
  }
}

// sums[r] = Dot(k, type, xs[r], w, n, scales) for r < count (SharedRowKernels), bit for bit.
inline void DotRows(const KernelTable& k, DType type, const void* w, const float* const* xs,
                    size_t count, size_t n, float* sums, const float* scales = nullptr) {
  switch (type) {
    case DType::kF16:
      return k.shared.dot_rows_f16(static_cast<const uint16_t*>(w), xs, count, n, sums);
    case DType::kBF16:
      return k.shared.dot_rows_bf16(static_cast<const uint16_t*>(w), xs, count, n, sums);
    case DType::kI8:
      assert(scales != nullptr);
      k.shared.dot_rows_i8(static_cast<const int8_t*>(w), xs, count, n, sums);
      // The same product as Dot's: scale times the unscaled sum.
      for (size_t r = 0; r < count; ++r) sums[r] = scales[0] * sums[r];
      return;
    default:
      return k.shared.dot_rows_f32(static_cast<const float*>(w), xs, count, n, sums);
  }
}

// sums[r] = Dot(k, type, xs[r], ws[r], n, scales[r]) for r < count (SharedRowKernels), bit for
// bit; `scales` (one pointer per pair) is read for kI8 only.
inline void DotPairs(const KernelTable& k, DType type, const void* const* ws,
                     const float* const* xs, size_t count, size_t n, float* sums,
                     const float* const* scales = nullptr) {
  switch (type) {
    case DType::kF16:
      return k.shared.dot_pairs_f16(ws, xs, count, n, sums);
    case DType::kBF16:
      return k.shared.dot_pairs_bf16(ws, xs, count, n, sums);
    case DType::kI8:
      assert(scales != nullptr);
      k.shared.dot_pairs_i8(ws, xs, count, n, sums);
      // The same product as Dot's: scale times the unscaled sum.
      for (size_t r = 0; r < count; ++r) sums[r] = scales[r][0] * sums[r];
      return;
    default:
      return k.shared.dot_pairs_f32(ws, xs, count, n, sums);
  }
}

// y += Σ_r a[r]·row_r over `count` rows of `type` (WeightKernels::axpy_rows). For kI8 each a[r]
// must already include its row's scale.
inline void AxpyRows(const KernelTable& k, DType type, const float* a, const void* const* rows,
                     size_t count, float* y, size_t n) {
  switch (type) {
    case DType::kF16:
      return k.f16.axpy_rows(a, rows, count, y, n);
    case DType::kBF16:
      return k.bf16.axpy_rows(a, rows, count, y, n);
    case DType::kI8:
      return k.i8.axpy_rows(a, rows, count, y, n);
    default:
      return k.f32.axpy_rows(a, rows, count, y, n);
  }
}

}  // namespace sprig::kernels
