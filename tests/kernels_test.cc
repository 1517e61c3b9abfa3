// Tests of kernels/kernels.h: every kernel on every path this CPU offers, against the scalar
// reference path and against sums computed in double precision, over random data (fixed seeds)
// and edge shapes; activations against their published formulas and against PyTorch.
//
// Tolerances. A float32 sum Σ t_i computed in any order differs from the exact sum by roughly
// √n·2^-24·Σ|t_i| for data like these (about 4e-6·Σ|t_i| at n = 4099; the worst case is n·2^-24).
// Results of reductions must be within kSumTolerance = 1e-5·Σ|t_i| of the double-precision
// value, and two paths within twice that of each other. Dropping or repeating any one term of
// a random sum of n <= 4099 terms moves it by about Σ|t_i|/n >= 2.4e-4·Σ|t_i|, so such a bug
// cannot pass. Elementwise kernels are held to a few float ulps of the double value.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <limits>
#include <numbers>
#include <random>
#include <string>
#include <vector>

#include "kernels/kernels.h"
#include "numeric/half.h"
#include "support/test_util.h"

namespace sprig::kernels {
namespace {

constexpr double kSumTolerance = 1e-5;
constexpr size_t kLengths[] = {1, 2, 3, 7, 8, 9, 15, 16, 17, 31, 33, 63, 64, 65, 127, 1000, 4099};
constexpr size_t kRowCounts[] = {1, 2, 3, 4, 5, 6, 7, 8, 9, 16, 33};
constexpr DType kWeightTypes[] = {DType::kF32, DType::kF16, DType::kBF16, DType::kI8};
constexpr Activation kActivations[] = {Activation::kRelu, Activation::kGelu, Activation::kGeluTanh,
                                       Activation::kSilu};

std::vector<float> RandomVector(size_t n, uint32_t seed, float scale = 1.0f, float offset = 0.0f) {
  std::mt19937 rng(seed);
  std::normal_distribution<float> normal(offset, scale);
  std::vector<float> v(n);
  for (float& x : v) x = normal(rng);
  return v;
}

// Weights in one storage type, with the float values that storage decodes to. i8 weights are
// quantised in rows of `cols` values by the rule of schema/README.md (scale = max|w| / 127,
// q = round half to even of w / scale); they decode to scale·q.
struct StoredWeights {
  StoredWeights(DType storage, const std::vector<float>& values, size_t cols = 0) : type(storage) {
    if (type == DType::kF32) {
      f32 = values;
      decoded = values;
      return;
    }
    if (type == DType::kI8) {
      Quantize(values, cols == 0 ? values.size() : cols);
      return;
    }
    bits.resize(values.size());
    decoded.resize(values.size());
    for (size_t i = 0; i < values.size(); ++i) {
      bits[i] = type == DType::kF16 ? numeric::FloatToHalf(values[i])
                                    : numeric::FloatToBFloat16(values[i]);
      decoded[i] =
          type == DType::kF16 ? numeric::HalfToFloat(bits[i]) : numeric::BFloat16ToFloat(bits[i]);
    }
  }
  const void* data() const {
    if (type == DType::kI8) return q.data();
    return type == DType::kF32 ? static_cast<const void*>(f32.data()) : bits.data();
  }
  // The i8 row scales (null for the floating types, which ignore them).
  const float* scales() const { return type == DType::kI8 ? row_scales.data() : nullptr; }

  void Quantize(const std::vector<float>& values, size_t cols) {
    q.resize(values.size());
    decoded.resize(values.size());
    for (size_t r = 0; r * cols < values.size(); ++r) {
      float max_abs = 0.0f;
      for (size_t i = 0; i < cols; ++i)
        max_abs = std::max(max_abs, std::fabs(values[r * cols + i]));
      const float scale = max_abs / 127.0f;
      row_scales.push_back(scale);
      for (size_t i = r * cols; i < (r + 1) * cols; ++i) {
        q[i] = static_cast<int8_t>(scale > 0 ? std::nearbyint(values[i] / scale) : 0.0f);
        decoded[i] = scale * static_cast<float>(q[i]);
      }
    }
  }

  DType type;
  std::vector<float> f32;
  std::vector<uint16_t> bits;
  std::vector<int8_t> q;
  std::vector<float> row_scales;
  std::vector<float> decoded;
};

// Exact-enough reference of Σ x[i]·w[i] and its condition, Σ |x[i]·w[i]|.
struct ReferenceSum {
  double value = 0.0;
  double magnitude = 0.0;
  void Add(double term) {
    value += term;
    magnitude += std::fabs(term);
  }
};

ReferenceSum DotReference(const float* x, const float* w, size_t n, const float* bias_or_null) {
  ReferenceSum sum;
  for (size_t i = 0; i < n; ++i) sum.Add(double(x[i]) * double(w[i]));
  if (bias_or_null != nullptr) sum.Add(*bias_or_null);
  return sum;
}

// Counts results outside tolerance, reporting the first few.
class Checker {
 public:
  explicit Checker(std::string what) : what_(std::move(what)) {}
  ~Checker() { EXPECT_EQ(failures_, 0) << what_ << ": " << failures_ << " results out of bounds"; }

  // `got` must be within rel·magnitude of `exact`, and within 2·rel·magnitude of `scalar`.
  void Check(float got, float scalar, double exact, double magnitude, double rel, size_t index) {
    const double bound = rel * magnitude + 1e-30;
    const bool ok = std::fabs(got - exact) <= bound && std::fabs(double(got) - scalar) <= 2 * bound;
    if (!ok && ++failures_ <= 5) {
      ADD_FAILURE() << what_ << " [" << index << "]: got " << got << ", scalar path " << scalar
                    << ", exact " << exact << ", bound " << bound;
    }
  }

 private:
  std::string what_;
  int failures_ = 0;
};

std::string Describe(KernelPath path, DType type, const std::string& detail) {
  return std::string(ToString(path)) + "/" + ToString(type) + " " + detail;
}

// ---- dispatch ----

TEST(KernelDispatch, NamesRoundTrip) {
  for (KernelPath path : {KernelPath::kScalar, KernelPath::kSse42, KernelPath::kAvx2,
                          KernelPath::kAvx512, KernelPath::kNeon}) {
    Result<KernelPath> parsed = ParseKernelPath(ToString(path));
    ASSERT_TRUE(parsed.ok()) << ToString(path);
    EXPECT_EQ(*parsed, path);
  }
  Result<KernelPath> bad = ParseKernelPath("avx3");
  ASSERT_FALSE(bad.ok());
  EXPECT_EQ(bad.status().code(), Status::Code::kInvalidArgument);
  EXPECT_NE(bad.status().message().find("avx3"), std::string::npos);
}

TEST(KernelDispatch, AvailablePathsAndTables) {
  const std::vector<KernelPath> paths = AvailablePaths();
  ASSERT_FALSE(paths.empty());
  EXPECT_EQ(paths.front(), KernelPath::kScalar);
  EXPECT_EQ(DetectBestPath(), paths.back());
  for (KernelPath path : paths) {
    EXPECT_TRUE(IsPathAvailable(path));
    EXPECT_EQ(Kernels(path).path, path);
  }
#if defined(__x86_64__)
  EXPECT_FALSE(IsPathAvailable(KernelPath::kNeon));
  EXPECT_EQ(Kernels(KernelPath::kNeon).path, KernelPath::kScalar);  // never an unusable table
#endif
#if defined(__aarch64__)
  // Source: the Arm Architecture Reference Manual (from memory) requires Advanced SIMD of AArch64
  // cores meant for standard software, and QEMU's emulated core has it, so run-time detection
  // must pick neon; no x86 path is ever offered.
  EXPECT_EQ(DetectBestPath(), KernelPath::kNeon);
  for (KernelPath x86 : {KernelPath::kSse42, KernelPath::kAvx2, KernelPath::kAvx512}) {
    EXPECT_FALSE(IsPathAvailable(x86)) << ToString(x86);
    EXPECT_EQ(Kernels(x86).path, KernelPath::kScalar);
  }
#endif
}

// The first path this machine cannot run (neon on x86, the x86 paths elsewhere).
KernelPath UnavailablePath() {
  for (KernelPath path : {KernelPath::kNeon, KernelPath::kSse42, KernelPath::kAvx512}) {
    if (!IsPathAvailable(path)) return path;
  }
  return KernelPath::kScalar;
}

TEST(KernelDispatch, ResolveRefusesWhatTheCpuLacks) {
  Result<KernelPath> best = ResolvePath(nullptr);
  ASSERT_TRUE(best.ok());
  EXPECT_EQ(*best, DetectBestPath());
  ASSERT_TRUE(ResolvePath("").ok());
  Result<KernelPath> scalar = ResolvePath("scalar");
  ASSERT_TRUE(scalar.ok());
  EXPECT_EQ(*scalar, KernelPath::kScalar);

  Result<KernelPath> unknown = ResolvePath("fastest");
  ASSERT_FALSE(unknown.ok());
  EXPECT_NE(unknown.status().message().find("SPRIG_KERNEL_PATH"), std::string::npos);

  const KernelPath missing = UnavailablePath();
  ASSERT_NE(missing, KernelPath::kScalar);
  Result<KernelPath> refused = ResolvePath(ToString(missing));
  ASSERT_FALSE(refused.ok());
  EXPECT_NE(refused.status().message().find("does not support"), std::string::npos);
}

// Sets SPRIG_KERNEL_PATH for one scope and restores it afterwards.
class ScopedKernelPathEnv {
 public:
  explicit ScopedKernelPathEnv(const char* value) {
    const char* old = std::getenv("SPRIG_KERNEL_PATH");
    if (old != nullptr) old_ = old;
    had_old_ = old != nullptr;
    sprig::testing::SetEnv("SPRIG_KERNEL_PATH", value);
  }
  ~ScopedKernelPathEnv() {
    if (had_old_) {
      sprig::testing::SetEnv("SPRIG_KERNEL_PATH", old_);
    } else {
      sprig::testing::UnsetEnv("SPRIG_KERNEL_PATH");
    }
  }

 private:
  bool had_old_ = false;
  std::string old_;
};

TEST(KernelDispatch, EnvironmentSelectsOrIsRefused) {
  {
    ScopedKernelPathEnv env("scalar");
    EXPECT_EQ(BestAvailablePath(), KernelPath::kScalar);
  }
  {
    ScopedKernelPathEnv env(ToString(UnavailablePath()));
    EXPECT_EQ(BestAvailablePath(), DetectBestPath());  // refused, with a warning to the log
  }
  for (KernelPath path : AvailablePaths()) {
    ScopedKernelPathEnv env(ToString(path));
    EXPECT_EQ(BestAvailablePath(), path);
  }
  const KernelPath active = ActiveKernels().path;
  EXPECT_TRUE(IsPathAvailable(active));
}

// ---- dot, axpy ----

TEST(KernelDot, EveryPathEveryTypeMatchesReference) {
  for (DType type : kWeightTypes) {
    for (size_t n : kLengths) {
      const std::vector<float> x = RandomVector(n, uint32_t(1000 + n));
      const StoredWeights w(type, RandomVector(n, uint32_t(2000 + n)));
      const ReferenceSum exact = DotReference(x.data(), w.decoded.data(), n, nullptr);
      const float scalar =
          Dot(Kernels(KernelPath::kScalar), type, x.data(), w.data(), n, w.scales());
      for (KernelPath path : AvailablePaths()) {
        Checker check(Describe(path, type, "dot n=" + std::to_string(n)));
        check.Check(Dot(Kernels(path), type, x.data(), w.data(), n, w.scales()), scalar,
                    exact.value, exact.magnitude, kSumTolerance, 0);
      }
    }
  }
}

TEST(KernelDot, EmptyIsZeroAndTypedEntriesMatchErased) {
  const float x = 1.0f;
  const float w = 2.0f;
  const uint16_t h = numeric::FloatToHalf(2.0f);
  for (KernelPath path : AvailablePaths()) {
    const KernelTable& k = Kernels(path);
    EXPECT_EQ(k.f32.dot(&x, &w, 0), 0.0f);
    EXPECT_EQ(k.f16.dot(&x, &h, 0), 0.0f);
    EXPECT_EQ(k.f32.dot(&x, &w, 1), 2.0f);
    EXPECT_EQ(k.f16.dot(&x, &h, 1), 2.0f);
    EXPECT_EQ(Dot(k, DType::kF16, &x, &h, 1), 2.0f);
  }
}

// dot_rows promises each row's dot, bit for bit, on every path (the batched path tree relies on
// it for results that do not depend on the batch), whatever the number of rows and wherever a
// row falls in the register blocks; and the scalar path's dot_rows is its dot.
TEST(KernelDotRows, EqualsDotOfEachRowOnEveryPath) {
  for (DType type : kWeightTypes) {
    for (size_t count : {0, 1, 2, 3, 4, 5, 7, 8, 9, 13}) {
      for (size_t n : kLengths) {
        const uint32_t seed = uint32_t(count * 7919 + n);
        const StoredWeights w(type, RandomVector(n, seed));
        std::vector<std::vector<float>> x;
        std::vector<const float*> xs;
        for (size_t r = 0; r < count; ++r) x.push_back(RandomVector(n, uint32_t(seed + 1 + r)));
        for (size_t r = 0; r < count; ++r) xs.push_back(x[r].data());
        for (KernelPath path : AvailablePaths()) {
          const KernelTable& k = Kernels(path);
          std::vector<float> sums(count + 1, 12345.0f);  // the last one must stay untouched
          DotRows(k, type, w.data(), xs.data(), count, n, sums.data(), w.scales());
          const std::string what = Describe(
              path, type, "dot_rows count=" + std::to_string(count) + " n=" + std::to_string(n));
          for (size_t r = 0; r < count; ++r) {
            ASSERT_EQ(sums[r], Dot(k, type, x[r].data(), w.data(), n, w.scales()))
                << what << " row " << r;
          }
          EXPECT_EQ(sums[count], 12345.0f) << what;
        }
      }
    }
  }
}

// dot_pairs promises each pair's dot, bit for bit, on every path (the batched descent computes
// the deep levels' nodes as pairs), wherever a pair falls in the register blocks.
TEST(KernelDotPairs, EqualsDotOfEachPairOnEveryPath) {
  for (DType type : kWeightTypes) {
    for (size_t count : {0, 1, 2, 3, 4, 5, 7, 8, 9}) {
      for (size_t n : kLengths) {
        const uint32_t seed = uint32_t(count * 6151 + n);
        std::vector<StoredWeights> w;
        std::vector<std::vector<float>> x;
        std::vector<const void*> ws;
        std::vector<const float*> xs, scales;
        for (size_t r = 0; r < count; ++r) {
          w.emplace_back(type, RandomVector(n, uint32_t(seed + 2 * r)));
          x.push_back(RandomVector(n, uint32_t(seed + 2 * r + 1)));
        }
        for (size_t r = 0; r < count; ++r) {
          ws.push_back(w[r].data());
          xs.push_back(x[r].data());
          scales.push_back(w[r].scales());
        }
        for (KernelPath path : AvailablePaths()) {
          const KernelTable& k = Kernels(path);
          std::vector<float> sums(count + 1, 12345.0f);  // the last one must stay untouched
          DotPairs(k, type, ws.data(), xs.data(), count, n, sums.data(), scales.data());
          const std::string what = Describe(
              path, type, "dot_pairs count=" + std::to_string(count) + " n=" + std::to_string(n));
          for (size_t r = 0; r < count; ++r) {
            ASSERT_EQ(sums[r], Dot(k, type, x[r].data(), w[r].data(), n, w[r].scales()))
                << what << " pair " << r;
          }
          EXPECT_EQ(sums[count], 12345.0f) << what;
        }
      }
    }
  }
}

TEST(KernelAxpy, EveryPathEveryTypeMatchesReference) {
  const float a = -1.75f;
  for (DType type : kWeightTypes) {
    for (size_t n : kLengths) {
      const std::vector<float> y0 = RandomVector(n, uint32_t(3000 + n));
      const StoredWeights w(type, RandomVector(n, uint32_t(4000 + n)));
      std::vector<float> scalar = y0;
      Axpy(Kernels(KernelPath::kScalar), type, a, w.data(), scalar.data(), n, w.scales());
      for (KernelPath path : AvailablePaths()) {
        // y + a·w is one or two roundings (fused or not): within 2 ulps of the exact value.
        std::vector<float> y = y0;
        y.push_back(12345.0f);  // a guard element that must stay untouched
        Axpy(Kernels(path), type, a, w.data(), y.data(), n, w.scales());
        Checker check(Describe(path, type, "axpy n=" + std::to_string(n)));
        for (size_t i = 0; i < n; ++i) {
          const double product = double(a) * w.decoded[i];
          check.Check(y[i], scalar[i], y0[i] + product, std::fabs(y0[i]) + std::fabs(product),
                      2.4e-7, i);
        }
        EXPECT_EQ(y[n], 12345.0f);
      }
    }
  }
}

TEST(KernelAxpyRows, EqualsAxpyInOrderOnEveryPath) {
  // axpy_rows promises the result of `count` axpy calls in row order, bit for bit, on every
  // path; and so within the axpy bounds of the double-precision sum.
  for (DType type : kWeightTypes) {
    for (size_t count : {0, 1, 2, 3, 12, 23}) {
      for (size_t n : kLengths) {
        const uint32_t seed = uint32_t(count * 10007 + n);
        const std::vector<float> y0 = RandomVector(n, seed);
        std::vector<StoredWeights> rows;
        std::vector<const void*> pointers;
        std::vector<float> a;
        for (size_t r = 0; r < count; ++r) {
          rows.emplace_back(type, RandomVector(n, uint32_t(seed + 1 + r)));
          a.push_back(RandomVector(1, uint32_t(seed + 100 + r))[0]);
        }
        for (size_t r = 0; r < count; ++r) pointers.push_back(rows[r].data());
        for (KernelPath path : AvailablePaths()) {
          const KernelTable& k = Kernels(path);
          std::vector<float> one_by_one = y0;
          std::vector<float> scaled = a;  // i8: the caller folds each row's scale into a[r]
          for (size_t r = 0; r < count; ++r) {
            if (type == DType::kI8) scaled[r] *= rows[r].scales()[0];
            Axpy(k, type, a[r], rows[r].data(), one_by_one.data(), n, rows[r].scales());
          }
          std::vector<float> y = y0;
          y.push_back(12345.0f);  // a guard element that must stay untouched
          AxpyRows(k, type, scaled.data(), pointers.data(), count, y.data(), n);
          const std::string what = Describe(
              path, type, "axpy_rows count=" + std::to_string(count) + " n=" + std::to_string(n));
          for (size_t i = 0; i < n; ++i) {
            ASSERT_EQ(y[i], one_by_one[i]) << what << " [" << i << "]";
            double exact = y0[i], magnitude = std::fabs(y0[i]);
            for (size_t r = 0; r < count; ++r) {
              const double term = double(a[r]) * rows[r].decoded[i];
              exact += term;
              magnitude += std::fabs(term);
            }
            // One rounding of at most 2^-24 relative per addition, and for i8 two more per row
            // (a·scale and the decoded scale·q): a common-practice bound, far below the size
            // of any one term a dropped or repeated row would move y[i] by.
            EXPECT_LE(std::fabs(y[i] - exact), (3 * count + 1) * 6.0e-8 * magnitude + 1e-30)
                << what;
          }
          EXPECT_EQ(y[n], 12345.0f) << what;
        }
      }
    }
  }
}

// ---- checks ----

TEST(KernelAllFinite, EveryPathFindsEveryInfinityAndNaN) {
  // IEEE 754-2008 §3.4: a binary32 value is an infinity or a NaN exactly when its biased
  // exponent field is all ones; everything else (zeros of both signs, subnormals, the largest
  // finite value) is finite.
  const float specials[] = {
      std::numeric_limits<float>::infinity(), -std::numeric_limits<float>::infinity(),
      std::numeric_limits<float>::quiet_NaN(), -std::numeric_limits<float>::quiet_NaN(),
      std::numeric_limits<float>::signaling_NaN()};
  const float finite[] = {0.0f,
                          -0.0f,
                          std::numeric_limits<float>::denorm_min(),
                          std::numeric_limits<float>::max(),
                          -std::numeric_limits<float>::max(),
                          std::numeric_limits<float>::min()};
  for (KernelPath path : AvailablePaths()) {
    const KernelTable& k = Kernels(path);
    EXPECT_TRUE(k.all_finite(nullptr, 0)) << ToString(path);
    for (size_t n : kLengths) {
      std::vector<float> x = RandomVector(n, uint32_t(5000 + n), 1e30f);
      for (size_t i = 0; i < n; ++i) x[i] = i % 7 == 0 ? finite[i % std::size(finite)] : x[i];
      EXPECT_TRUE(k.all_finite(x.data(), n)) << ToString(path) << " n=" << n;
      // One special at the first, a middle and the last position, the rest finite.
      for (size_t at : {size_t{0}, n / 2, n - 1}) {
        for (float special : specials) {
          std::vector<float> bad = x;
          bad[at] = special;
          EXPECT_FALSE(k.all_finite(bad.data(), n))
              << ToString(path) << " n=" << n << " at " << at << " value " << special;
        }
      }
    }
  }
}

// ---- gemv, gemm_rows ----

// Checks Y[rows, out] = X·Wᵀ + bias for one path against the double reference and `scalar`.
void CheckProducts(const std::string& what, const std::vector<float>& y,
                   const std::vector<float>& scalar, const std::vector<float>& x,
                   const StoredWeights& w, const std::vector<float>* bias, size_t rows, size_t out,
                   size_t in) {
  Checker check(what);
  for (size_t r = 0; r < rows; ++r) {
    for (size_t o = 0; o < out; ++o) {
      const ReferenceSum exact = DotReference(x.data() + r * in, w.decoded.data() + o * in, in,
                                              bias != nullptr ? bias->data() + o : nullptr);
      check.Check(y[r * out + o], scalar[r * out + o], exact.value, exact.magnitude, kSumTolerance,
                  r * out + o);
    }
  }
}

TEST(KernelGemv, EveryPathEveryTypeMatchesReference) {
  for (DType type : kWeightTypes) {
    for (size_t out : {1, 2, 3, 5, 7, 8, 9, 16, 17, 33}) {
      for (size_t in : kLengths) {
        const uint32_t seed = uint32_t(out * 10007 + in);
        const std::vector<float> x = RandomVector(in, seed);
        const StoredWeights w(type, RandomVector(out * in, seed + 1), in);
        const std::vector<float> bias = RandomVector(out, seed + 2);
        for (bool with_bias : {false, true}) {
          const float* b = with_bias ? bias.data() : nullptr;
          std::vector<float> scalar(out);
          Gemv(Kernels(KernelPath::kScalar), type, w.data(), x.data(), b, scalar.data(), out, in,
               w.scales());
          for (KernelPath path : AvailablePaths()) {
            std::vector<float> y(out + 1, 12345.0f);
            Gemv(Kernels(path), type, w.data(), x.data(), b, y.data(), out, in, w.scales());
            CheckProducts(Describe(path, type,
                                   "gemv out=" + std::to_string(out) + " in=" + std::to_string(in) +
                                       (with_bias ? " bias" : "")),
                          y, scalar, x, w, with_bias ? &bias : nullptr, 1, out, in);
            EXPECT_EQ(y[out], 12345.0f);
          }
        }
      }
    }
  }
}

TEST(KernelGemmRows, EveryPathEveryTypeMatchesReference) {
  for (DType type : kWeightTypes) {
    for (size_t rows : kRowCounts) {
      for (size_t out : {1, 2, 3, 4, 5, 8, 9, 17}) {
        for (size_t in : {1, 2, 3, 7, 8, 9, 16, 17, 33, 64, 65, 127, 1000}) {
          const uint32_t seed = uint32_t(rows * 1000003 + out * 1009 + in);
          const std::vector<float> x = RandomVector(rows * in, seed);
          const StoredWeights w(type, RandomVector(out * in, seed + 1), in);
          const std::vector<float> bias = RandomVector(out, seed + 2);
          const bool with_bias = (rows + out) % 2 == 0;
          const float* b = with_bias ? bias.data() : nullptr;
          std::vector<float> scalar(rows * out);
          GemmRows(Kernels(KernelPath::kScalar), type, w.data(), x.data(), b, scalar.data(), rows,
                   out, in, w.scales());
          for (KernelPath path : AvailablePaths()) {
            std::vector<float> y(rows * out + 1, 12345.0f);
            GemmRows(Kernels(path), type, w.data(), x.data(), b, y.data(), rows, out, in,
                     w.scales());
            CheckProducts(Describe(path, type,
                                   "gemm_rows rows=" + std::to_string(rows) +
                                       " out=" + std::to_string(out) + " in=" + std::to_string(in)),
                          y, scalar, x, w, with_bias ? &bias : nullptr, rows, out, in);
            EXPECT_EQ(y[rows * out], 12345.0f);
          }
        }
      }
    }
  }
}

TEST(KernelGemmRows, LargeShapesSpanSeveralRowTiles) {
  // 150 rows of 4099 inputs are larger than the row tile a vector path keeps in cache.
  constexpr size_t kRows = 150, kOut = 7, kIn = 4099;
  const std::vector<float> x = RandomVector(kRows * kIn, 5);
  const std::vector<float> bias = RandomVector(kOut, 6);
  for (DType type : kWeightTypes) {
    const StoredWeights w(type, RandomVector(kOut * kIn, 7), kIn);
    std::vector<float> scalar(kRows * kOut);
    GemmRows(Kernels(KernelPath::kScalar), type, w.data(), x.data(), bias.data(), scalar.data(),
             kRows, kOut, kIn, w.scales());
    for (KernelPath path : AvailablePaths()) {
      std::vector<float> y(kRows * kOut);
      GemmRows(Kernels(path), type, w.data(), x.data(), bias.data(), y.data(), kRows, kOut, kIn,
               w.scales());
      CheckProducts(Describe(path, type, "gemm_rows 150x7x4099"), y, scalar, x, w, &bias, kRows,
                    kOut, kIn);
    }
  }
}

TEST(KernelGemmRows, EmptyShapes) {
  const float x[4] = {1, 2, 3, 4};
  const float w[4] = {1, 1, 1, 1};
  const float bias[2] = {0.5f, -0.5f};
  for (KernelPath path : AvailablePaths()) {
    const KernelTable& k = Kernels(path);
    float y[4] = {9, 9, 9, 9};
    k.f32.gemm_rows(w, x, bias, y, 0, 2, 2);  // no rows: nothing written
    k.f32.gemm_rows(w, x, bias, y, 2, 0, 2);  // no outputs: nothing written
    k.f32.gemv(w, x, bias, y, 0, 2);
    EXPECT_EQ(y[0], 9.0f);
    EXPECT_EQ(y[3], 9.0f);
    k.f32.gemm_rows(w, x, bias, y, 2, 2, 0);  // no inputs: the bias
    EXPECT_EQ(y[0], 0.5f);
    EXPECT_EQ(y[1], -0.5f);
    EXPECT_EQ(y[2], 0.5f);
    EXPECT_EQ(y[3], -0.5f);
    k.f32.gemv(w, x, nullptr, y, 2, 0);
    EXPECT_EQ(y[0], 0.0f);
    EXPECT_EQ(y[1], 0.0f);
  }
}

// ---- activations ----

// The published definitions, in double. GELU: Hendrycks & Gimpel 2016, exact form
// 0.5·x·(1 + erf(x/√2)) and tanh approximation 0.5·x·(1 + tanh(√(2/π)·(x + 0.044715·x³)));
// SiLU: x·σ(x). These lose relative accuracy where 1 + erf or 1 + tanh cancels (x < -6 or so);
// the tolerance below allows for that with an absolute term.
double ReferenceActivation(Activation act, double x) {
  switch (act) {
    case Activation::kRelu:
      return x < 0 ? 0.0 : x;
    case Activation::kGelu:
      return 0.5 * x * (1.0 + std::erf(x / std::sqrt(2.0)));
    case Activation::kGeluTanh: {
      const double u = std::sqrt(2.0 / std::numbers::pi) * (x + 0.044715 * x * x * x);
      return 0.5 * x * (1.0 + std::tanh(u));
    }
    case Activation::kSilu:
      return x / (1.0 + std::exp(-x));
  }
  return x;
}

// Float results must be within (16 + 4x²) float ulps of the definition. The x² term is the
// conditioning of the tails, not slack in the kernels: erfc(z) magnifies the rounding of its
// argument z = -x/√2 by about 2z² = x², and σ(2u) that of u by about 2|u| (both appear even
// when every operation is correctly rounded). The absolute terms cover the double reference's
// own cancellation (≈ 1e-16·|x|) and results that underflow in float.
double ActivationBound(double reference, double x) {
  return (16.0 + 4.0 * x * x) * std::ldexp(1.0, -24) * std::fabs(reference) + 1e-15 * std::fabs(x) +
         1e-30;
}

std::vector<float> ActivationInputs(size_t n, uint32_t seed) {
  std::vector<float> x = RandomVector(n, seed, 4.0f);
  // Also the far tails, where exp overflows and erf saturates.
  for (size_t i = 0; i < n; i += 7) x[i] *= 8.0f;
  return x;
}

TEST(KernelActivation, EveryPathMatchesDefinition) {
  for (Activation act : kActivations) {
    for (size_t n : kLengths) {
      const std::vector<float> input = ActivationInputs(n, uint32_t(n + 77));
      for (KernelPath path : AvailablePaths()) {
        std::vector<float> x = input;
        x.push_back(12345.0f);
        Kernels(path).activate(act, x.data(), n);
        EXPECT_EQ(x[n], 12345.0f);
        int failures = 0;
        for (size_t i = 0; i < n; ++i) {
          const double ref = ReferenceActivation(act, input[i]);
          if (!(std::fabs(x[i] - ref) <= ActivationBound(ref, input[i])) && ++failures <= 3) {
            ADD_FAILURE() << ToString(path) << " " << ToString(act) << "(" << input[i]
                          << ") = " << x[i] << ", expected " << ref;
          }
        }
        EXPECT_EQ(failures, 0) << ToString(path) << " " << ToString(act) << " n=" << n;
      }
    }
  }
}

TEST(KernelActivation, SpecialValues) {
  constexpr float kInf = std::numeric_limits<float>::infinity();
  for (KernelPath path : AvailablePaths()) {
    const KernelTable& k = Kernels(path);
    // Nine values: on 4- and 8-lane paths some land in full vectors and some in the tail.
    std::vector<float> x = {0.0f,   -0.0f,   kInf,
                            -kInf,  1e-30f,  -1e-30f,
                            100.0f, -100.0f, std::numeric_limits<float>::quiet_NaN()};
    for (Activation act : kActivations) {
      std::vector<float> y = x;
      k.activate(act, y.data(), y.size());
      SCOPED_TRACE(std::string(ToString(path)) + " " + ToString(act));
      EXPECT_EQ(y[0], 0.0f);
      EXPECT_EQ(y[1], 0.0f);
      EXPECT_EQ(y[2], kInf);
      if (act == Activation::kRelu) {
        EXPECT_EQ(y[3], 0.0f);
      }
      EXPECT_EQ(y[6], 100.0f);
      EXPECT_LE(std::fabs(y[7]), 1e-30f);  // σ(-100), Φ(-100): far below float's range
      EXPECT_TRUE(std::isnan(y[8]));
    }
  }
}

TEST(KernelActivation, GatedMatchesDefinitionAndMayAlias) {
  for (Activation act : kActivations) {
    for (size_t n : kLengths) {
      const std::vector<float> gate = ActivationInputs(n, uint32_t(n + 5));
      const std::vector<float> up = RandomVector(n, uint32_t(n + 6));
      for (KernelPath path : AvailablePaths()) {
        std::vector<float> h(n), aliased = gate;
        Kernels(path).gated_activate(act, gate.data(), up.data(), h.data(), n);
        Kernels(path).gated_activate(act, aliased.data(), up.data(), aliased.data(), n);
        int failures = 0;
        for (size_t i = 0; i < n; ++i) {
          const double ref = ReferenceActivation(act, gate[i]) * up[i];
          // act(g) within ActivationBound of its value, times up, plus the product's rounding.
          const double bound =
              ActivationBound(ReferenceActivation(act, gate[i]), gate[i]) * std::fabs(up[i]) +
              6e-8 * std::fabs(ref);
          if (!(std::fabs(h[i] - ref) <= bound) && ++failures <= 3) {
            ADD_FAILURE() << ToString(path) << " gated " << ToString(act) << "(" << gate[i] << ")·"
                          << up[i] << " = " << h[i] << ", expected " << ref;
          }
          if (h[i] != aliased[i] && !(std::isnan(h[i]) && std::isnan(aliased[i]))) ++failures;
        }
        EXPECT_EQ(failures, 0) << ToString(path) << " " << ToString(act) << " n=" << n;
      }
    }
  }
}

// Runs a Python script (given as text) with /usr/bin/python3 on `input` written as raw float32;
// the script writes raw float64 results. Returns an empty vector on failure.
std::vector<double> RunPython(const std::string& script, const std::vector<float>& input,
                              size_t outputs_per_input) {
  const sprig::testing::TempDir temp;
  const std::filesystem::path dir = sprig::testing::FsPath(temp.path());
  {
    std::ofstream(dir / "script.py") << script;
    std::ofstream in(dir / "in.bin", std::ios::binary);
    in.write(reinterpret_cast<const char*>(input.data()),
             std::streamsize(input.size() * sizeof(float)));
  }
  const char* python_env = std::getenv("SPRIG_PYTHON");
  std::string command = python_env != nullptr && *python_env ? python_env : "/usr/bin/python3";
  for (const char* name : {"script.py", "in.bin", "out.bin"}) {
    command.append(" '").append((dir / name).string()).append("'");
  }
  std::vector<double> output(input.size() * outputs_per_input);
  if (std::system(command.c_str()) == 0) {
    std::ifstream out(dir / "out.bin", std::ios::binary);
    out.read(reinterpret_cast<char*>(output.data()),
             std::streamsize(output.size() * sizeof(double)));
    if (out.gcount() != std::streamsize(output.size() * sizeof(double))) output.clear();
  } else {
    output.clear();
  }
  if (output.empty()) ADD_FAILURE() << "python reference failed: " << command;
  return output;
}

TEST(KernelActivation, MatchesPyTorch) {
  // Source: PyTorch (Debian python3-torch): torch.nn.functional.gelu(approximate='none' and
  // 'tanh') and silu, in float64 and float32, on a grid of inputs.
  const char* script = R"(
import sys
import numpy as np
import torch
F = torch.nn.functional
x = torch.from_numpy(np.fromfile(sys.argv[1], dtype='<f4'))
results = []
for t in (x.double(), x):
    results += [F.gelu(t, approximate='none'), F.gelu(t, approximate='tanh'), F.silu(t)]
np.concatenate([r.double().numpy() for r in results]).astype('<f8').tofile(sys.argv[2])
)";
  std::vector<float> grid;
  for (int i = -1000; i <= 1000; ++i) grid.push_back(float(i) / 100.0f);
  for (float v : {-100.0f, -30.0f, -20.0f, -15.0f, 15.0f, 20.0f, 30.0f, 100.0f, 1e-6f, -1e-6f}) {
    grid.push_back(v);
  }
  const size_t n = grid.size();
  const std::vector<double> torch = RunPython(script, grid, 6);
  ASSERT_EQ(torch.size(), 6 * n);
  const Activation acts[] = {Activation::kGelu, Activation::kGeluTanh, Activation::kSilu};
  for (KernelPath path : AvailablePaths()) {
    for (int a = 0; a < 3; ++a) {
      std::vector<float> y = grid;
      Kernels(path).activate(acts[a], y.data(), n);
      int failures = 0;
      for (size_t i = 0; i < n; ++i) {
        const double t64 = torch[a * n + i];
        const double t32 = torch[(3 + a) * n + i];
        // float64 torch is the definition: hold ours to it tightly. float32 torch rounds
        // 1 + erf / 1 + tanh to float, an absolute error near 2^-24·|x| where that cancels.
        const bool ok =
            std::fabs(y[i] - t64) <= ActivationBound(t64, grid[i]) &&
            std::fabs(y[i] - t32) <= 1e-6 * std::fabs(t32) + 2.4e-7 * std::fabs(grid[i]);
        if (!ok && ++failures <= 3) {
          ADD_FAILURE() << ToString(path) << " " << ToString(acts[a]) << "(" << grid[i]
                        << ") = " << y[i] << ", torch float64 " << t64 << ", float32 " << t32;
        }
      }
      EXPECT_EQ(failures, 0) << ToString(path) << " " << ToString(acts[a]);
    }
  }
}

// ---- softmax and norms ----

TEST(KernelSoftmax, EveryPathMatchesReference) {
  for (size_t n : kLengths) {
    for (float scale : {1.0f, 30.0f}) {  // 30: large logits, where a naive exp overflows
      const std::vector<float> input = RandomVector(n, uint32_t(n + 11), scale, 5.0f);
      const double max = *std::max_element(input.begin(), input.end());
      std::vector<double> exact(n);
      double sum = 0.0;
      for (size_t i = 0; i < n; ++i) sum += exact[i] = std::exp(input[i] - max);
      for (double& e : exact) e /= sum;
      std::vector<float> scalar = input;
      Kernels(KernelPath::kScalar).softmax(scalar.data(), n);
      for (KernelPath path : AvailablePaths()) {
        std::vector<float> x = input;
        Kernels(path).softmax(x.data(), n);
        // Each output is exp (a few ulps) over a sum of n positive terms.
        Checker check(std::string(ToString(path)) + " softmax n=" + std::to_string(n));
        double total = 0.0;
        for (size_t i = 0; i < n; ++i) {
          check.Check(x[i], scalar[i], exact[i], exact[i], kSumTolerance, i);
          total += x[i];
        }
        EXPECT_NEAR(total, 1.0, kSumTolerance);
      }
    }
  }
}

TEST(KernelNorm, LayerNormMatchesReference) {
  constexpr float kEps = 1e-5f;
  for (size_t n : kLengths) {
    const std::vector<float> input = RandomVector(n, uint32_t(n + 21), 2.0f, 3.0f);
    const std::vector<float> weight = RandomVector(n, uint32_t(n + 22));
    const std::vector<float> bias = RandomVector(n, uint32_t(n + 23));
    double mean = 0.0, var = 0.0;
    for (float v : input) mean += v;
    mean /= double(n);
    for (float v : input) var += (v - mean) * (v - mean);
    var /= double(n);
    const double inv_std = 1.0 / std::sqrt(var + kEps);
    for (bool affine : {true, false}) {
      const float* w = affine ? weight.data() : nullptr;
      const float* b = affine ? bias.data() : nullptr;
      std::vector<float> scalar(n);
      Kernels(KernelPath::kScalar).layer_norm(input.data(), w, b, kEps, scalar.data(), n);
      for (KernelPath path : AvailablePaths()) {
        std::vector<float> y = input;  // in place
        Kernels(path).layer_norm(y.data(), w, b, kEps, y.data(), n);
        Checker check(std::string(ToString(path)) + " layer_norm n=" + std::to_string(n));
        for (size_t i = 0; i < n; ++i) {
          const double wi = affine ? weight[i] : 1.0, bi = affine ? bias[i] : 0.0;
          const double exact = (input[i] - mean) * inv_std * wi + bi;
          // Mean and 1/std carry the sums' relative error into every output.
          const double magnitude =
              (std::fabs(input[i] - mean) + std::fabs(mean)) * inv_std * std::fabs(wi) +
              std::fabs(bi);
          check.Check(y[i], scalar[i], exact, magnitude, kSumTolerance, i);
        }
      }
    }
  }
}

TEST(KernelNorm, RmsNormMatchesReference) {
  constexpr float kEps = 1e-6f;
  for (size_t n : kLengths) {
    const std::vector<float> input = RandomVector(n, uint32_t(n + 31), 2.0f, 1.0f);
    const std::vector<float> weight = RandomVector(n, uint32_t(n + 32));
    double squares = 0.0;
    for (float v : input) squares += double(v) * v;
    const double inv_rms = 1.0 / std::sqrt(squares / double(n) + kEps);
    for (bool scaled : {true, false}) {
      const float* w = scaled ? weight.data() : nullptr;
      std::vector<float> scalar(n);
      Kernels(KernelPath::kScalar).rms_norm(input.data(), w, kEps, scalar.data(), n);
      for (KernelPath path : AvailablePaths()) {
        std::vector<float> y(n);
        Kernels(path).rms_norm(input.data(), w, kEps, y.data(), n);
        Checker check(std::string(ToString(path)) + " rms_norm n=" + std::to_string(n));
        for (size_t i = 0; i < n; ++i) {
          const double wi = scaled ? weight[i] : 1.0;
          const double exact = input[i] * inv_rms * wi;
          check.Check(y[i], scalar[i], exact, std::fabs(exact), kSumTolerance, i);
        }
      }
    }
  }
}

TEST(KernelNorm, EmptyIsANoOp) {
  float x = 3.0f;
  for (KernelPath path : AvailablePaths()) {
    const KernelTable& k = Kernels(path);
    k.softmax(&x, 0);
    k.layer_norm(&x, nullptr, nullptr, 1e-5f, &x, 0);
    k.rms_norm(&x, nullptr, 1e-5f, &x, 0);
    k.activate(Activation::kGelu, &x, 0);
    EXPECT_EQ(x, 3.0f);
  }
}

}  // namespace
}  // namespace sprig::kernels
