// The portable reference path: plain loops, written to be obviously correct. Every vector path
// is tested against these, and they run wherever no vector path is available.
#include <cmath>

#include "kernels/kernels_internal.h"
#include "kernels/kernels_quantized.h"
#include "numeric/half.h"

namespace sprig::kernels {
namespace {

// Tags naming how a uint16_t weight is decoded (both storage types share the bit type).
struct HalfWeights {
  static float Decode(uint16_t w) { return numeric::HalfToFloat(w); }
};
struct BFloat16Weights {
  static float Decode(uint16_t w) { return numeric::BFloat16ToFloat(w); }
};
struct FloatWeights {
  static float Decode(float w) { return w; }
};
struct Int8Weights {
  static float Decode(int8_t q) { return static_cast<float>(q); }
};

template <typename Tag, typename W>
float Dot(const float* x, const W* w, size_t n) {
  float sum = 0.0f;
  for (size_t i = 0; i < n; ++i) sum += x[i] * Tag::Decode(w[i]);
  return sum;
}

template <typename Tag, typename W>
void DotRows(const W* w, const float* const* xs, size_t count, size_t n, float* sums) {
  for (size_t r = 0; r < count; ++r) sums[r] = Dot<Tag>(xs[r], w, n);
}

template <typename Tag, typename W>
void DotPairs(const void* const* ws, const float* const* xs, size_t count, size_t n, float* sums) {
  for (size_t r = 0; r < count; ++r) sums[r] = Dot<Tag>(xs[r], static_cast<const W*>(ws[r]), n);
}

template <typename Tag, typename W>
void Gemv(const W* w, const float* x, const float* bias, float* y, size_t out, size_t in) {
  for (size_t o = 0; o < out; ++o) {
    y[o] = Dot<Tag>(x, w + o * in, in) + (bias != nullptr ? bias[o] : 0.0f);
  }
}

template <typename Tag, typename W>
void GemmRows(const W* w, const float* x, const float* bias, float* y, size_t rows, size_t out,
              size_t in) {
  for (size_t r = 0; r < rows; ++r) Gemv<Tag>(w, x + r * in, bias, y + r * out, out, in);
}

template <typename Tag, typename W>
void Axpy(float a, const W* w, float* y, size_t n) {
  for (size_t i = 0; i < n; ++i) y[i] += a * Tag::Decode(w[i]);
}

template <typename Tag, typename W>
void AxpyRows(const float* a, const void* const* rows, size_t count, float* y, size_t n) {
  for (size_t r = 0; r < count; ++r) Axpy<Tag>(a[r], static_cast<const W*>(rows[r]), y, n);
}

// int8 rows: the unscaled sum of the row, times its scale, plus the bias.
void GemvInt8(const int8_t* q, const float* scales, const float* x, const float* bias, float* y,
              size_t out, size_t in) {
  for (size_t o = 0; o < out; ++o) {
    y[o] = scales[o] * Dot<Int8Weights>(x, q + o * in, in) + (bias != nullptr ? bias[o] : 0.0f);
  }
}

void GemmRowsInt8(const int8_t* q, const float* scales, const float* x, const float* bias, float* y,
                  size_t rows, size_t out, size_t in) {
  for (size_t r = 0; r < rows; ++r) GemvInt8(q, scales, x + r * in, bias, y + r * out, out, in);
}

// The activations below use forms that equal the textbook ones but avoid cancellation where
// the result is tiny: 1 + erf(z) = erfc(-z), and 0.5·(1 + tanh(u)) = sigmoid(2u) = 1/(1 + e^-2u).
constexpr float kSqrtHalf = 0.70710678118654752440f;       // 1/√2
constexpr float kSqrtTwoOverPi = 0.79788456080286535588f;  // √(2/π)

// e^x and erfc(x) of a float, evaluated in double and rounded once. The float functions of C
// libraries differ in their last bits (glibc's, MinGW-w64's, each architecture's), and the
// scalar path must give the same bits wherever it runs. A double result within an ulp of double
// precision rounds to the correctly rounded float except when the exact value lies within
// 2^-29 float ulps of a rounding boundary, so every system whose double functions are that
// accurate gives the same float, the correctly rounded one, but in those rare cases.
float ExpRoundedOnce(float x) {
  return static_cast<float>(std::exp(static_cast<double>(x)));
}
float ErfcRoundedOnce(float x) {
  return static_cast<float>(std::erfc(static_cast<double>(x)));
}

float Relu(float x) {
  return x < 0.0f ? 0.0f : x;
}
float Gelu(float x) {
  return 0.5f * x * ErfcRoundedOnce(-x * kSqrtHalf);
}
float GeluTanh(float x) {
  const float u = kSqrtTwoOverPi * (x + 0.044715f * x * x * x);
  return x / (1.0f + ExpRoundedOnce(-2.0f * u));
}
float Silu(float x) {
  return x / (1.0f + ExpRoundedOnce(-x));
}

float Apply(Activation act, float x) {
  switch (act) {
    case Activation::kRelu:
      return Relu(x);
    case Activation::kGelu:
      return Gelu(x);
    case Activation::kGeluTanh:
      return GeluTanh(x);
    case Activation::kSilu:
      return Silu(x);
  }
  return x;
}

void Activate(Activation act, float* x, size_t n) {
  for (size_t i = 0; i < n; ++i) x[i] = Apply(act, x[i]);
}

void GatedActivate(Activation act, const float* gate, const float* up, float* h, size_t n) {
  for (size_t i = 0; i < n; ++i) h[i] = Apply(act, gate[i]) * up[i];
}

void Softmax(float* x, size_t n) {
  if (n == 0) return;
  float max = x[0];
  for (size_t i = 1; i < n; ++i) max = x[i] > max ? x[i] : max;
  float sum = 0.0f;
  for (size_t i = 0; i < n; ++i) {
    x[i] = ExpRoundedOnce(x[i] - max);
    sum += x[i];
  }
  const float inv = 1.0f / sum;
  for (size_t i = 0; i < n; ++i) x[i] *= inv;
}

void LayerNorm(const float* x, const float* weight, const float* bias, float eps, float* y,
               size_t n) {
  if (n == 0) return;
  float sum = 0.0f;
  for (size_t i = 0; i < n; ++i) sum += x[i];
  const float mean = sum / float(n);
  // Two passes: the variance of the centred values does not cancel like E[x²] - mean².
  float squares = 0.0f;
  for (size_t i = 0; i < n; ++i) squares += (x[i] - mean) * (x[i] - mean);
  const float inv_std = 1.0f / std::sqrt(squares / float(n) + eps);
  for (size_t i = 0; i < n; ++i) {
    const float w = weight != nullptr ? weight[i] : 1.0f;
    const float b = bias != nullptr ? bias[i] : 0.0f;
    y[i] = (x[i] - mean) * inv_std * w + b;
  }
}

void RmsNorm(const float* x, const float* weight, float eps, float* y, size_t n) {
  if (n == 0) return;
  float squares = 0.0f;
  for (size_t i = 0; i < n; ++i) squares += x[i] * x[i];
  const float inv_rms = 1.0f / std::sqrt(squares / float(n) + eps);
  for (size_t i = 0; i < n; ++i) y[i] = x[i] * inv_rms * (weight != nullptr ? weight[i] : 1.0f);
}

bool AllFinite(const float* x, size_t n) {
  for (size_t i = 0; i < n; ++i) {
    if (!std::isfinite(x[i])) return false;
  }
  return true;
}

void FloatToHalfArray(const float* src, uint16_t* dst, size_t n) {
  for (size_t i = 0; i < n; ++i) dst[i] = numeric::FloatToHalf(src[i]);
}
void HalfToFloatArray(const uint16_t* src, float* dst, size_t n) {
  for (size_t i = 0; i < n; ++i) dst[i] = numeric::HalfToFloat(src[i]);
}
void FloatToBFloat16Array(const float* src, uint16_t* dst, size_t n) {
  for (size_t i = 0; i < n; ++i) dst[i] = numeric::FloatToBFloat16(src[i]);
}
void BFloat16ToFloatArray(const uint16_t* src, float* dst, size_t n) {
  for (size_t i = 0; i < n; ++i) dst[i] = numeric::BFloat16ToFloat(src[i]);
}

template <typename Tag, typename W>
constexpr WeightKernels<W> MakeWeightKernels() {
  return {&Dot<Tag, W>, &Gemv<Tag, W>, &GemmRows<Tag, W>, &Axpy<Tag, W>, &AxpyRows<Tag, W>};
}

constexpr KernelTable kScalarTable = WithInt8Activations<ScalarQuantizedOps>({
    KernelPath::kScalar,
    MakeWeightKernels<FloatWeights, float>(),
    MakeWeightKernels<HalfWeights, uint16_t>(),
    MakeWeightKernels<BFloat16Weights, uint16_t>(),
    {&Dot<Int8Weights, int8_t>, &GemvInt8, &GemmRowsInt8, &Axpy<Int8Weights, int8_t>,
     &AxpyRows<Int8Weights, int8_t>},
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
    {&DotRows<FloatWeights, float>, &DotRows<HalfWeights, uint16_t>,
     &DotRows<BFloat16Weights, uint16_t>, &DotRows<Int8Weights, int8_t>,
     &DotPairs<FloatWeights, float>, &DotPairs<HalfWeights, uint16_t>,
     &DotPairs<BFloat16Weights, uint16_t>, &DotPairs<Int8Weights, int8_t>},
});

}  // namespace

const KernelTable& ScalarKernels() {
  return kScalarTable;
}

}  // namespace sprig::kernels
