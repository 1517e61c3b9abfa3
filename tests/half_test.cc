// Tests of numeric/half.h: f16 and bf16 conversions against NumPy and PyTorch, and the array
// converters of every kernel path against the scalar functions.
//
// The references run at test time: the inputs are written as raw bytes to a temporary file,
// tests/python/half_reference.py converts them with numpy.float16 or torch.bfloat16 and writes
// raw bits back.
#include <gtest/gtest.h>

#include <bit>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <limits>
#include <random>
#include <string>
#include <vector>

#include "kernels/convert.h"
#include "kernels/kernels.h"
#include "numeric/half.h"
#include "support/test_util.h"

namespace sprig {
namespace {

using numeric::BFloat16ToFloat;
using numeric::DoubleToBFloat16;
using numeric::DoubleToHalf;
using numeric::FloatToBFloat16;
using numeric::FloatToHalf;
using numeric::HalfToFloat;

bool IsHalfNan(uint16_t h) {
  return (h & 0x7c00) == 0x7c00 && (h & 0x03ff) != 0;
}
bool IsBFloat16Nan(uint16_t b) {
  return (b & 0x7f80) == 0x7f80 && (b & 0x007f) != 0;
}
uint32_t Bits(float f) {
  return std::bit_cast<uint32_t>(f);
}

// float(x), defined for every double: beyond float's range the result is the infinity of
// that sign (a plain cast would be undefined behaviour there).
float RoundToFloat(double x) {
  if (std::isnan(x) || std::fabs(x) <= std::numeric_limits<float>::max()) return float(x);
  return std::copysign(std::numeric_limits<float>::infinity(), float(x > 0 ? 1 : -1));
}
bool ExactInFloat(double x) {
  return std::fabs(x) <= std::numeric_limits<float>::max() && double(float(x)) == x;
}

// A fresh directory under the system temporary directory, removed with its contents.
class TempDir {
 public:
  std::filesystem::path path() const { return sprig::testing::FsPath(dir_.path()); }

 private:
  sprig::testing::TempDir dir_;
};

std::string PythonPath() {
  const char* python = std::getenv("SPRIG_PYTHON");
  return python != nullptr && *python != '\0' ? python : "/usr/bin/python3";
}

// The shell command running half_reference.py; every argument single-quoted.
std::string ReferenceCommand(const std::string& mode, const std::string& in_path,
                             const std::string& out_path) {
  std::string command;
  for (const std::string& arg :
       {PythonPath(), std::string(SPRIG_SOURCE_DIR) + "/tests/python/half_reference.py", mode,
        in_path, out_path}) {
    command.append(command.empty() ? "'" : " '").append(arg).append("'");
  }
  return command;
}

// Converts `input` with half_reference.py in `mode`; returns an empty vector (and records a
// test failure) when the script cannot run.
template <typename Out, typename In>
std::vector<Out> Reference(const std::string& mode, const std::vector<In>& input) {
  TempDir dir;
  if (dir.path().empty()) {
    ADD_FAILURE() << "cannot create a temporary directory";
    return {};
  }
  const auto in_path = dir.path() / "in.bin";
  const auto out_path = dir.path() / "out.bin";
  {
    std::ofstream in(in_path, std::ios::binary);
    in.write(reinterpret_cast<const char*>(input.data()),
             std::streamsize(input.size() * sizeof(In)));
  }
  const std::string command = ReferenceCommand(mode, in_path.string(), out_path.string());
  if (std::system(command.c_str()) != 0) {
    ADD_FAILURE() << "reference script failed: " << command;
    return {};
  }
  std::vector<Out> output(input.size());
  std::ifstream out(out_path, std::ios::binary);
  out.read(reinterpret_cast<char*>(output.data()), std::streamsize(output.size() * sizeof(Out)));
  if (out.gcount() != std::streamsize(output.size() * sizeof(Out))) {
    ADD_FAILURE() << "reference script wrote " << out.gcount() << " bytes, expected "
                  << output.size() * sizeof(Out);
    return {};
  }
  return output;
}

std::vector<uint16_t> AllPatterns() {
  std::vector<uint16_t> patterns(65536);
  for (uint32_t i = 0; i < 65536; ++i) patterns[i] = uint16_t(i);
  return patterns;
}

void AddWithNeighbours(std::vector<float>& values, float v) {
  values.push_back(v);
  values.push_back(std::nextafter(v, std::numeric_limits<float>::infinity()));
  values.push_back(std::nextafter(v, -std::numeric_limits<float>::infinity()));
}

void AddSpecials(std::vector<float>& values) {
  constexpr float kInf = std::numeric_limits<float>::infinity();
  for (float v : {0.0f, -0.0f, kInf, -kInf, std::numeric_limits<float>::max(),
                  std::numeric_limits<float>::min(), std::numeric_limits<float>::denorm_min(),
                  -std::numeric_limits<float>::denorm_min()}) {
    values.push_back(v);
  }
  // Quiet and signalling NaNs of both signs, with and without payload.
  for (uint32_t bits : {0x7fc00000u, 0xffc00000u, 0x7f800001u, 0xff800001u, 0x7fa00000u,
                        0x7fffffffu, 0x7fc01234u, 0x7f802000u}) {
    values.push_back(std::bit_cast<float>(bits));
  }
}

// Every finite f16 value, the midpoint to the next one (including 65520, the midpoint to the
// overflow threshold), each ± 1 float ulp; specials; random bit patterns, both uniform over all
// floats and concentrated in the f16 range.
std::vector<float> HalfTestFloats() {
  std::vector<float> values;
  for (uint32_t h = 0; h < 0x7c00; ++h) {
    const float v = HalfToFloat(uint16_t(h));
    const double next = h + 1 < 0x7c00 ? HalfToFloat(uint16_t(h + 1)) : 65536.0;
    const float midpoint = float((double(v) + next) / 2);  // exact: needs 12 significant bits
    for (float sign : {1.0f, -1.0f}) {
      AddWithNeighbours(values, sign * v);
      AddWithNeighbours(values, sign * midpoint);
    }
  }
  AddSpecials(values);
  std::mt19937 rng(20240611);
  for (int i = 0; i < 300000; ++i) values.push_back(std::bit_cast<float>(uint32_t(rng())));
  std::uniform_int_distribution<uint32_t> exponent(127 - 27, 127 + 16);
  for (int i = 0; i < 300000; ++i) {
    const uint32_t bits = (rng() & 0x807fffffu) | (exponent(rng) << 23);
    values.push_back(std::bit_cast<float>(bits));
  }
  return values;
}

// ---- f16 ----

TEST(HalfFloat16, EveryPatternRoundTripsThroughFloat) {
  for (uint32_t i = 0; i < 65536; ++i) {
    const uint16_t h = uint16_t(i);
    const float f = HalfToFloat(h);
    if (IsHalfNan(h)) {
      EXPECT_TRUE(std::isnan(f)) << std::hex << h;
      EXPECT_EQ(FloatToHalf(f), h | 0x0200) << std::hex << h;  // quieted, payload kept
    } else {
      EXPECT_EQ(FloatToHalf(f), h) << std::hex << h;
    }
  }
}

TEST(HalfFloat16, WideningMatchesNumpy) {
  // Source: numpy.float16 (IEEE 754-2008 binary16), f16 -> f32 for all 65,536 patterns.
  const std::vector<uint16_t> input = AllPatterns();
  const std::vector<uint32_t> expected = Reference<uint32_t>("f16_to_f32", input);
  ASSERT_EQ(expected.size(), input.size());
  for (size_t i = 0; i < input.size(); ++i) {
    const uint32_t ours = Bits(HalfToFloat(input[i]));
    if (IsHalfNan(input[i])) {
      // NumPy keeps a signalling NaN signalling; we quiet it, as F16C does.
      EXPECT_EQ(ours, expected[i] | 0x00400000u) << std::hex << input[i];
    } else {
      EXPECT_EQ(ours, expected[i]) << std::hex << input[i];
    }
  }
}

TEST(HalfFloat16, NarrowingMatchesNumpy) {
  // Source: numpy.float16 (IEEE 754-2008 binary16), f32 -> f16, round to nearest even.
  const std::vector<float> input = HalfTestFloats();
  const std::vector<uint16_t> expected = Reference<uint16_t>("f32_to_f16", input);
  ASSERT_EQ(expected.size(), input.size());
  size_t mismatches = 0;
  for (size_t i = 0; i < input.size(); ++i) {
    const uint16_t ours = FloatToHalf(input[i]);
    if (std::isnan(input[i])) {
      // NumPy keeps a signalling NaN's payload as it is (bumping it to 1 if it truncates to 0);
      // we set the quiet bit instead, as F16C does. Both must be NaNs of the input's sign.
      EXPECT_TRUE(IsHalfNan(expected[i]) && IsHalfNan(ours) && (ours & 0x0200) != 0 &&
                  (ours & 0x8000) == (expected[i] & 0x8000))
          << std::hex << Bits(input[i]) << ": ours 0x" << ours << ", numpy 0x" << expected[i];
    } else if (ours != expected[i]) {
      ++mismatches;
      if (mismatches < 10) {
        ADD_FAILURE() << "f32 0x" << std::hex << Bits(input[i]) << ": ours 0x" << ours
                      << ", numpy 0x" << expected[i];
      }
    }
  }
  EXPECT_EQ(mismatches, 0u) << "of " << input.size() << " values";
}

TEST(HalfFloat16, RangeAndTies) {
  // Source: IEEE 754-2008 binary16 (max 65504 = 0x7bff, smallest subnormal 2^-24 = 0x0001,
  // overflow threshold 65520, ties to even); all of these are also in the numpy check above.
  EXPECT_EQ(FloatToHalf(65504.0f), 0x7bff);
  EXPECT_EQ(FloatToHalf(std::nextafter(65520.0f, 0.0f)), 0x7bff);
  EXPECT_EQ(FloatToHalf(65520.0f), 0x7c00);  // tie between 65504 and 65536: even is infinity
  EXPECT_EQ(FloatToHalf(-65520.0f), 0xfc00);
  EXPECT_EQ(FloatToHalf(std::ldexp(1.0f, -24)), 0x0001);
  EXPECT_EQ(FloatToHalf(std::ldexp(1.0f, -25)), 0x0000);  // tie between 0 and 2^-24
  EXPECT_EQ(FloatToHalf(std::nextafter(std::ldexp(1.0f, -25), 1.0f)), 0x0001);
  EXPECT_EQ(FloatToHalf(std::ldexp(3.0f, -25)), 0x0002);         // tie between 1 and 2 units: even
  EXPECT_EQ(FloatToHalf(std::ldexp(1.0f, -14)), 0x0400);         // smallest normal
  EXPECT_EQ(FloatToHalf(1.0f + std::ldexp(1.0f, -11)), 0x3c00);  // tie: even is 1.0
  EXPECT_EQ(FloatToHalf(1.0f + std::ldexp(3.0f, -11)), 0x3c02);  // tie: even is up
  EXPECT_EQ(FloatToHalf(-0.0f), 0x8000);
  EXPECT_EQ(HalfToFloat(0x7bff), 65504.0f);
  EXPECT_EQ(HalfToFloat(0x0001), std::ldexp(1.0f, -24));
  EXPECT_TRUE(std::isinf(HalfToFloat(0x7c00)));
}

TEST(HalfFloat16, DoubleRoundsOnceLikeNumpy) {
  // Source: numpy float64.astype(float16), which rounds once from float64.
  std::vector<double> input;
  for (uint32_t h = 0; h < 0x7c00; h += 3) {
    const double v = HalfToFloat(uint16_t(h));
    const double next = h + 1 < 0x7c00 ? HalfToFloat(uint16_t(h + 1)) : 65536.0;
    const double midpoint = (v + next) / 2;
    // Offsets far below a float ulp: rounding through float would make these exact ties.
    for (double offset : {0.0, std::ldexp(midpoint, -30), -std::ldexp(midpoint, -30),
                          std::ldexp(midpoint, -45), -std::ldexp(midpoint, -45)}) {
      input.push_back(midpoint + offset);
      input.push_back(-(midpoint + offset));
    }
    input.push_back(v);
  }
  std::mt19937_64 rng(7);
  std::uniform_real_distribution<double> exponent(-27.0, 17.0);
  for (int i = 0; i < 100000; ++i) input.push_back(std::exp2(exponent(rng)) * (i % 2 ? 1 : -1));
  for (int i = 0; i < 20000; ++i) input.push_back(std::bit_cast<double>(uint64_t(rng())));
  for (double v :
       {0.0, -0.0, 65504.0, 65520.0, std::nextafter(65520.0, 0.0), 1e300, -1e300,
        std::ldexp(1.0, -25), std::nextafter(std::ldexp(1.0, -25), 1.0), 1e-320,
        std::numeric_limits<double>::infinity(), std::numeric_limits<double>::quiet_NaN()}) {
    input.push_back(v);
  }

  const std::vector<uint16_t> expected = Reference<uint16_t>("f64_to_f16", input);
  ASSERT_EQ(expected.size(), input.size());
  size_t mismatches = 0;
  size_t double_rounding_cases = 0;
  for (size_t i = 0; i < input.size(); ++i) {
    const uint16_t ours = DoubleToHalf(input[i]);
    if (std::isnan(input[i])) {
      EXPECT_TRUE(IsHalfNan(expected[i]) && IsHalfNan(ours) && (ours & 0x0200) != 0);
      continue;
    }
    if (ours != expected[i]) {
      if (++mismatches < 10) {
        ADD_FAILURE() << "f64 " << input[i] << ": ours 0x" << std::hex << ours << ", numpy 0x"
                      << expected[i];
      }
    }
    if (ours != FloatToHalf(RoundToFloat(input[i]))) ++double_rounding_cases;
  }
  EXPECT_EQ(mismatches, 0u) << "of " << input.size() << " values";
  // The set must contain cases where rounding through float would have been wrong.
  EXPECT_GT(double_rounding_cases, 1000u);
}

// ---- bf16 ----

TEST(HalfBFloat16, NarrowingMatchesTorch) {
  // Source: PyTorch torch.bfloat16 (torch.tensor(x, dtype=torch.float32).to(torch.bfloat16)).
  std::vector<float> input;
  AddSpecials(input);
  std::mt19937 rng(99);
  for (int i = 0; i < 200000; ++i) input.push_back(std::bit_cast<float>(uint32_t(rng())));
  for (int i = 0; i < 50000; ++i) {
    // Exact ties (both parities of the kept bit), and one below and above a tie.
    const uint32_t high = rng() & 0xffff0000u;
    for (uint32_t low : {0x8000u, 0x7fffu, 0x8001u}) {
      input.push_back(std::bit_cast<float>(high | low));
    }
  }
  for (int i = 0; i < 20000; ++i) {  // subnormals
    input.push_back(std::bit_cast<float>(uint32_t(rng() & 0x807fffffu)));
  }
  for (uint32_t bits : {0x7f7f8000u, 0x7f7fffffu, 0x7f7f7fffu, 0x7f7e8000u, 0x00008000u,
                        0x00018000u, 0x3f808000u, 0x3f818000u}) {
    input.push_back(std::bit_cast<float>(bits));
  }

  const std::vector<uint16_t> expected = Reference<uint16_t>("f32_to_bf16", input);
  ASSERT_EQ(expected.size(), input.size());
  size_t mismatches = 0;
  for (size_t i = 0; i < input.size(); ++i) {
    const uint16_t ours = FloatToBFloat16(input[i]);
    if (std::isnan(input[i])) {
      // torch returns one canonical NaN; ours keeps sign and payload. Both must be NaN.
      EXPECT_TRUE(IsBFloat16Nan(expected[i]) && IsBFloat16Nan(ours)) << std::hex << Bits(input[i]);
      continue;
    }
    if (ours != expected[i] && ++mismatches < 10) {
      ADD_FAILURE() << "f32 0x" << std::hex << Bits(input[i]) << ": ours 0x" << ours << ", torch 0x"
                    << expected[i];
    }
  }
  EXPECT_EQ(mismatches, 0u) << "of " << input.size() << " values";
}

TEST(HalfBFloat16, WideningMatchesTorch) {
  // Source: PyTorch torch.bfloat16 -> torch.float32 for all 65,536 patterns.
  const std::vector<uint16_t> input = AllPatterns();
  const std::vector<uint32_t> expected = Reference<uint32_t>("bf16_to_f32", input);
  ASSERT_EQ(expected.size(), input.size());
  for (size_t i = 0; i < input.size(); ++i) {
    const uint32_t ours = Bits(BFloat16ToFloat(input[i]));
    if (IsBFloat16Nan(input[i])) {
      EXPECT_TRUE(std::isnan(std::bit_cast<float>(expected[i])) &&
                  std::isnan(BFloat16ToFloat(input[i])));
      EXPECT_EQ(FloatToBFloat16(BFloat16ToFloat(input[i])), input[i] | 0x0040);
    } else {
      EXPECT_EQ(ours, expected[i]) << std::hex << input[i];
      EXPECT_EQ(FloatToBFloat16(BFloat16ToFloat(input[i])), input[i]) << std::hex << input[i];
    }
  }
}

TEST(HalfBFloat16, DoubleRoundsOnce) {
  std::vector<double> input;
  for (uint32_t b = 0; b < 0x7f80; b += 7) {
    const double v = BFloat16ToFloat(uint16_t(b));
    const double next = b + 1 < 0x7f80 ? BFloat16ToFloat(uint16_t(b + 1)) : std::ldexp(1.0, 128);
    const double midpoint = (v + next) / 2;
    for (double offset : {0.0, std::ldexp(midpoint, -30), -std::ldexp(midpoint, -30),
                          std::ldexp(midpoint, -50), -std::ldexp(midpoint, -50)}) {
      input.push_back(midpoint + offset);
      input.push_back(-(midpoint + offset));
    }
    input.push_back(v);
  }
  std::mt19937_64 rng(11);
  std::uniform_real_distribution<double> exponent(-136.0, 128.5);
  for (int i = 0; i < 20000; ++i) input.push_back(std::exp2(exponent(rng)) * (i % 2 ? 1 : -1));
  for (double v : {0.0, -0.0, 1e300, -1e300, 1e-300, std::ldexp(1.0, -134), std::ldexp(3.0, -134),
                   1.0 + std::ldexp(1.0, -8) + std::ldexp(1.0, -30)}) {
    input.push_back(v);
  }

  // Source: exact rational arithmetic (Python fractions) over the torch.bfloat16 value grid:
  // the correctly rounded result, to nearest with ties to even.
  const std::vector<uint16_t> exact = Reference<uint16_t>("f64_to_bf16_exact", input);
  // Source: PyTorch float64 .to(torch.bfloat16), which rounds through float32 first, so it is
  // only the reference where the float32 step is exact.
  const std::vector<uint16_t> torch = Reference<uint16_t>("f64_to_bf16", input);
  ASSERT_EQ(exact.size(), input.size());
  ASSERT_EQ(torch.size(), input.size());
  size_t mismatches = 0;
  size_t exact_in_float = 0;
  size_t torch_double_rounded = 0;
  for (size_t i = 0; i < input.size(); ++i) {
    const uint16_t ours = DoubleToBFloat16(input[i]);
    if (ours != exact[i] && ++mismatches < 10) {
      ADD_FAILURE() << "f64 " << input[i] << ": ours 0x" << std::hex << ours << ", exact 0x"
                    << exact[i];
    }
    if (ExactInFloat(input[i])) {
      ++exact_in_float;
      EXPECT_EQ(ours, torch[i]) << "f64 " << input[i];
    } else if (exact[i] != torch[i]) {
      ++torch_double_rounded;
    }
  }
  EXPECT_EQ(mismatches, 0u) << "of " << input.size() << " values";
  EXPECT_GT(exact_in_float, 5000u);
  EXPECT_GT(torch_double_rounded, 1000u);  // the cases single rounding exists for

  EXPECT_EQ(DoubleToBFloat16(std::numeric_limits<double>::infinity()), 0x7f80);
  EXPECT_EQ(DoubleToBFloat16(-std::numeric_limits<double>::infinity()), 0xff80);
  EXPECT_TRUE(IsBFloat16Nan(DoubleToBFloat16(std::numeric_limits<double>::quiet_NaN())));
}

// ---- array converters ----

std::vector<float> ConverterTestFloats() {
  std::vector<float> values = HalfTestFloats();
  // A sweep over the whole float range with an odd stride, for the bf16 and emulated paths.
  for (uint64_t bits = 0; bits < (uint64_t(1) << 32); bits += 4093) {
    values.push_back(std::bit_cast<float>(uint32_t(bits)));
  }
  return values;
}

// Runs `convert` over `src` at several offsets and lengths, so that every tail length of every
// vector width is exercised.
template <typename Src, typename Dst, typename Convert>
std::vector<Dst> ConvertInPieces(const std::vector<Src>& src, Convert convert) {
  std::vector<Dst> dst(src.size());
  size_t i = 0;
  size_t piece = 0;
  while (i < src.size()) {
    const size_t n = std::min(src.size() - i, piece < 70 ? piece : 4099);
    convert(src.data() + i, dst.data() + i, n);
    i += n;
    piece = (piece + 1) % 80;
  }
  return dst;
}

TEST(HalfBulk, ConvertersOfEveryPathMatchScalar) {
  const std::vector<float> floats = ConverterTestFloats();
  const std::vector<uint16_t> patterns = AllPatterns();
  std::vector<uint16_t> half_ref(floats.size()), bf16_ref(floats.size());
  for (size_t i = 0; i < floats.size(); ++i) {
    half_ref[i] = FloatToHalf(floats[i]);
    bf16_ref[i] = FloatToBFloat16(floats[i]);
  }
  for (kernels::KernelPath path : kernels::AvailablePaths()) {
    SCOPED_TRACE(kernels::ToString(path));
    const kernels::KernelTable& k = kernels::Kernels(path);
    EXPECT_EQ(k.path, path);
    EXPECT_EQ((ConvertInPieces<float, uint16_t>(floats, k.f32_to_f16)), half_ref);
    EXPECT_EQ((ConvertInPieces<float, uint16_t>(floats, k.f32_to_bf16)), bf16_ref);
    const std::vector<float> widened_half =
        ConvertInPieces<uint16_t, float>(patterns, k.f16_to_f32);
    const std::vector<float> widened_bf16 =
        ConvertInPieces<uint16_t, float>(patterns, k.bf16_to_f32);
    for (size_t i = 0; i < patterns.size(); ++i) {
      ASSERT_EQ(Bits(widened_half[i]), Bits(HalfToFloat(patterns[i]))) << std::hex << patterns[i];
      ASSERT_EQ(Bits(widened_bf16[i]), Bits(BFloat16ToFloat(patterns[i])))
          << std::hex << patterns[i];
    }
  }
}

TEST(HalfBulk, PublicConvertersMatchScalar) {
  const std::vector<float> floats = HalfTestFloats();
  std::vector<uint16_t> bits(floats.size());
  kernels::ConvertFloatToHalf(floats.data(), bits.data(), floats.size());
  for (size_t i = 0; i < floats.size(); ++i) ASSERT_EQ(bits[i], FloatToHalf(floats[i]));
  kernels::ConvertFloatToBFloat16(floats.data(), bits.data(), floats.size());
  for (size_t i = 0; i < floats.size(); ++i) ASSERT_EQ(bits[i], FloatToBFloat16(floats[i]));

  const std::vector<uint16_t> patterns = AllPatterns();
  std::vector<float> widened(patterns.size());
  kernels::ConvertHalfToFloat(patterns.data(), widened.data(), patterns.size());
  for (size_t i = 0; i < patterns.size(); ++i) {
    ASSERT_EQ(Bits(widened[i]), Bits(HalfToFloat(patterns[i])));
  }
  kernels::ConvertBFloat16ToFloat(patterns.data(), widened.data(), patterns.size());
  for (size_t i = 0; i < patterns.size(); ++i) {
    ASSERT_EQ(Bits(widened[i]), Bits(BFloat16ToFloat(patterns[i])));
  }

  std::vector<double> doubles(floats.begin(), floats.end());
  doubles.push_back(1.0 + std::ldexp(1.0, -11) + std::ldexp(1.0, -40));
  std::vector<uint16_t> narrowed(doubles.size());
  numeric::ConvertDoubleToHalf(doubles.data(), narrowed.data(), doubles.size());
  for (size_t i = 0; i < doubles.size(); ++i) ASSERT_EQ(narrowed[i], DoubleToHalf(doubles[i]));
  numeric::ConvertDoubleToBFloat16(doubles.data(), narrowed.data(), doubles.size());
  for (size_t i = 0; i < doubles.size(); ++i) ASSERT_EQ(narrowed[i], DoubleToBFloat16(doubles[i]));
}

}  // namespace
}  // namespace sprig
