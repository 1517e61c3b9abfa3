// Tests of the int8-activation kernels (Int8ActivationKernels in kernels/kernels.h) on every
// path this CPU offers. Their results are exact integers turned into floats by one shared
// expression, so every path must equal the scalar path bit for bit; the scalar path is checked
// against the definitions: the quantisation rule of kernels.h (symmetric, s = max|x|/127, round
// half to even as IEEE 754's default rounding, clamp to ±127) and integer sums in int64.
#include <gtest/gtest.h>

#include <cmath>
#include <cstdint>
#include <random>
#include <string>
#include <vector>

#include "kernels/kernels.h"

namespace sprig::kernels {
namespace {

// Lengths around every vector width (16, 32 and 64 bytes; 4, 8 and 16 floats) and longer.
constexpr size_t kLengths[] = {0,  1,  3,  4,  7,  8,  15,  16,  17,
                               31, 32, 33, 63, 64, 65, 127, 768, 1000};

std::vector<int8_t> RandomBytes(size_t n, uint32_t seed, int low = -127, int high = 127) {
  std::mt19937 rng(seed);
  std::uniform_int_distribution<int> value(low, high);
  std::vector<int8_t> v(n);
  for (int8_t& b : v) b = static_cast<int8_t>(value(rng));
  return v;
}

std::vector<float> RandomFloats(size_t n, uint32_t seed) {
  std::mt19937 rng(seed);
  std::normal_distribution<float> normal(0.0f, 3.0f);
  std::vector<float> v(n);
  for (float& x : v) x = normal(rng);
  return v;
}

// An output as docs/storage-types.md defines it, written out here rather than through the
// kernels' helper: the scale product rounded to float, then scale·float(sum) + bias in double
// (exact product, one rounding) and rounded to float.
float Output(float scale, double sum, float bias) {
  const double product = static_cast<double>(scale) * static_cast<double>(static_cast<float>(sum));
  return static_cast<float>(product + static_cast<double>(bias));
}

int64_t ExactDot(const int8_t* x, const int8_t* w, size_t n) {
  int64_t sum = 0;
  for (size_t i = 0; i < n; ++i) sum += int64_t{x[i]} * int64_t{w[i]};
  return sum;
}

std::string Describe(KernelPath path, const std::string& what) {
  return std::string(ToString(path)) + ": " + what;
}

TEST(QuantizedKernels, EveryPathHasTheBlock) {
  for (KernelPath path : AvailablePaths()) {
    const Int8ActivationKernels& q = Kernels(path).int8_activations;
    EXPECT_TRUE(q.quantize && q.dot && q.gemv && q.gemm_rows) << ToString(path);
  }
}

TEST(QuantizedKernels, QuantizeFollowsTheRuleOnEveryPath) {
  for (size_t n : kLengths) {
    std::vector<float> x = RandomFloats(n, uint32_t(10 + n));
    std::vector<int8_t> reference(n);
    const float scale =
        Kernels(KernelPath::kScalar).int8_activations.quantize(x.data(), reference.data(), n);
    float max_abs = 0.0f;
    for (float v : x) max_abs = std::max(max_abs, std::fabs(v));
    ASSERT_EQ(scale, max_abs / 127.0f) << n;
    for (size_t i = 0; i < n; ++i) {
      // Round to nearest: within half a step, and the largest value lands on ±127.
      EXPECT_LE(std::fabs(double(x[i]) - double(scale) * reference[i]), 0.5 * scale * (1 + 1e-6))
          << n << " " << i;
      EXPECT_GE(reference[i], -127);
      if (std::fabs(x[i]) == max_abs) {
        EXPECT_EQ(std::abs(int(reference[i])), 127);
      }
    }
    for (KernelPath path : AvailablePaths()) {
      std::vector<int8_t> q(n, 99);
      EXPECT_EQ(Kernels(path).int8_activations.quantize(x.data(), q.data(), n), scale)
          << Describe(path, "n=" + std::to_string(n));
      EXPECT_EQ(q, reference) << Describe(path, "n=" + std::to_string(n));
    }
  }
}

TEST(QuantizedKernels, QuantizeRoundsHalfToEvenAndZeroRowsToZero) {
  // max|x| = 127 makes the scale exactly 1, so x / s = x: the ties are exact.
  std::vector<float> x = {127.0f, 2.5f, 3.5f, -2.5f, -0.5f, 0.5f, 1.5f, -127.0f, 126.5f};
  x.resize(40, -3.5f);  // past one vector of every path
  const std::vector<int8_t> expected_head = {127, 2, 4, -2, 0, 0, 2, -127, 126};
  for (KernelPath path : AvailablePaths()) {
    std::vector<int8_t> q(x.size());
    EXPECT_EQ(Kernels(path).int8_activations.quantize(x.data(), q.data(), x.size()), 1.0f);
    EXPECT_EQ(std::vector<int8_t>(q.begin(), q.begin() + 9), expected_head) << ToString(path);
    for (size_t i = 9; i < q.size(); ++i) EXPECT_EQ(q[i], -4) << ToString(path) << " " << i;
    std::vector<float> zeros(37, 0.0f);
    std::vector<int8_t> zq(zeros.size(), 5);
    EXPECT_EQ(Kernels(path).int8_activations.quantize(zeros.data(), zq.data(), zq.size()), 0.0f);
    EXPECT_EQ(zq, std::vector<int8_t>(zeros.size(), 0)) << ToString(path);
  }
}

TEST(QuantizedKernels, DotIsExactOnEveryPath) {
  for (size_t n : kLengths) {
    // Weights over the whole int8 range, -128 included: a file is untrusted, and the sign
    // trick of the x86 paths must stay exact for it too.
    const std::vector<int8_t> x = RandomBytes(n, uint32_t(100 + n));
    const std::vector<int8_t> w = RandomBytes(n, uint32_t(200 + n), -128, 127);
    const int64_t exact = ExactDot(x.data(), w.data(), n);
    for (KernelPath path : AvailablePaths()) {
      EXPECT_EQ(Kernels(path).int8_activations.dot(x.data(), w.data(), n), exact)
          << Describe(path, "n=" + std::to_string(n));
    }
  }
}

TEST(QuantizedKernels, DotOfExtremesCannotSaturateOrOverflow) {
  // Every pair at its largest magnitude, both signs: a saturating int16 pair sum would clip
  // 2·127·128 = 32512 only if the sign trick were wrong, and the longest allowed row reaches
  // 127·128·2^17 = 2,130,706,432, just under 2^31.
  for (size_t n : {size_t{31}, size_t{64}, size_t{1000}, kMaxQuantizedLength}) {
    for (int sign : {1, -1}) {
      const std::vector<int8_t> x(n, static_cast<int8_t>(-127 * sign));
      const std::vector<int8_t> w(n, -128);
      std::vector<int8_t> mixed_w(n);
      for (size_t i = 0; i < n; ++i) mixed_w[i] = i % 2 ? 127 : -127;
      for (KernelPath path : AvailablePaths()) {
        const Int8ActivationKernels& k = Kernels(path).int8_activations;
        EXPECT_EQ(k.dot(x.data(), w.data(), n), ExactDot(x.data(), w.data(), n))
            << Describe(path, "n=" + std::to_string(n));
        EXPECT_EQ(k.dot(x.data(), mixed_w.data(), n), ExactDot(x.data(), mixed_w.data(), n))
            << Describe(path, "alternating n=" + std::to_string(n));
        // gemv over five such rows (a block of four and one more), unscaled: each output is
        // its exact sum (the four-row form's partial sums wrap around int32 on the way).
        std::vector<int8_t> rows;
        for (int r = 0; r < 5; ++r)
          rows.insert(rows.end(), (r % 2 ? mixed_w : w).begin(), (r % 2 ? mixed_w : w).end());
        const std::vector<float> ones(5, 1.0f);
        std::vector<float> y(5);
        k.gemv(rows.data(), ones.data(), x.data(), 1.0f, nullptr, y.data(), 5, n);
        for (int r = 0; r < 5; ++r) {
          const float exact = static_cast<float>(ExactDot(x.data(), rows.data() + r * n, n));
          EXPECT_EQ(y[r], exact) << Describe(
              path, "gemv row " + std::to_string(r) + " n=" + std::to_string(n));
        }
      }
    }
  }
}

TEST(QuantizedKernels, GemvAndGemmRowsEqualTheDefinitionOnEveryPath) {
  for (size_t in : {size_t{1}, size_t{17}, size_t{64}, size_t{100}, size_t{768}}) {
    for (size_t out : {size_t{1}, size_t{3}, size_t{9}}) {
      const size_t rows = 5;
      // -128 included, as in a file that is untrusted.
      const std::vector<int8_t> w = RandomBytes(out * in, uint32_t(in * 31 + out), -128, 127);
      const std::vector<float> w_scales = RandomFloats(out, uint32_t(in + out));
      const std::vector<float> bias = RandomFloats(out, uint32_t(7 * out));
      const std::vector<float> x = RandomFloats(rows * in, uint32_t(in * 7 + out));
      // The definition: quantise each row (by the scalar reference, checked above), then the
      // exact integer sum through the one output expression.
      std::vector<int8_t> qx(rows * in);
      std::vector<float> x_scales(rows);
      for (size_t r = 0; r < rows; ++r) {
        x_scales[r] = Kernels(KernelPath::kScalar)
                          .int8_activations.quantize(x.data() + r * in, qx.data() + r * in, in);
      }
      std::vector<float> expected(rows * out);
      for (size_t r = 0; r < rows; ++r) {
        for (size_t o = 0; o < out; ++o) {
          const int64_t sum = ExactDot(qx.data() + r * in, w.data() + o * in, in);
          expected[r * out + o] =
              Output(x_scales[r] * w_scales[o], static_cast<double>(sum), bias[o]);
        }
      }
      for (KernelPath path : AvailablePaths()) {
        const Int8ActivationKernels& k = Kernels(path).int8_activations;
        const std::string what = "in=" + std::to_string(in) + " out=" + std::to_string(out);
        std::vector<float> y(rows * out);
        k.gemm_rows(w.data(), w_scales.data(), qx.data(), x_scales.data(), bias.data(), y.data(),
                    rows, out, in);
        EXPECT_EQ(y, expected) << Describe(path, "gemm_rows " + what);
        for (size_t r = 0; r < rows; ++r) {
          std::vector<float> one(out);
          k.gemv(w.data(), w_scales.data(), qx.data() + r * in, x_scales[r], bias.data(),
                 one.data(), out, in);
          EXPECT_EQ(
              one, std::vector<float>(expected.begin() + r * out, expected.begin() + (r + 1) * out))
              << Describe(path, "gemv " + what);
        }
        // Without a bias the output is the scaled sum alone.
        std::vector<float> unbiased(out);
        k.gemv(w.data(), w_scales.data(), qx.data(), x_scales[0], nullptr, unbiased.data(), out,
               in);
        for (size_t o = 0; o < out; ++o) {
          const float sum = static_cast<float>(ExactDot(qx.data(), w.data() + o * in, in));
          EXPECT_EQ(unbiased[o], Output(x_scales[0] * w_scales[o], sum, 0.0f))
              << Describe(path, "gemv without bias " + what);
        }
      }
    }
  }
}

}  // namespace
}  // namespace sprig::kernels
