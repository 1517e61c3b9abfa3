#include "numeric/half.h"

#include <bit>

namespace sprig::numeric {
namespace {

// Describes a binary floating-point format by its field widths.
template <typename UInt, int kExponentBits, int kMantissaBits>
struct Format {
  using Bits = UInt;
  static constexpr int kExp = kExponentBits;
  static constexpr int kMant = kMantissaBits;
  static constexpr int kBias = (1 << (kExponentBits - 1)) - 1;
  static constexpr int kMaxExpField = (1 << kExponentBits) - 1;  // infinities and NaNs
};

using Binary64 = Format<uint64_t, 11, 52>;
using Binary32 = Format<uint32_t, 8, 23>;
using Binary16 = Format<uint16_t, 5, 10>;
using BFloat16 = Format<uint16_t, 8, 7>;

// Rounds a value of the wider format Src to the narrower Dst, to nearest with ties to even, in
// integer arithmetic so the result never depends on the FPU's modes. One rounding step only.
template <typename Src, typename Dst>
uint16_t Narrow(typename Src::Bits bits) {
  using SrcBits = typename Src::Bits;
  constexpr int kSignShift = Src::kExp + Src::kMant;
  constexpr uint16_t kInfinity = uint16_t(Dst::kMaxExpField << Dst::kMant);
  constexpr uint16_t kQuietBit = uint16_t(1u << (Dst::kMant - 1));
  constexpr int kMinNormalExp = 1 - Dst::kBias;

  const uint16_t sign = uint16_t((bits >> kSignShift) << (Dst::kExp + Dst::kMant));
  const int exp_field = int((bits >> Src::kMant) & SrcBits(Src::kMaxExpField));
  const SrcBits mantissa = bits & ((SrcBits(1) << Src::kMant) - 1);

  if (exp_field == Src::kMaxExpField) {
    if (mantissa == 0) return sign | kInfinity;
    // NaN: keep the top of the payload and force the quiet bit (so it cannot become infinity).
    return sign | kInfinity | kQuietBit | uint16_t(mantissa >> (Src::kMant - Dst::kMant));
  }
  // value = significand * 2^(exponent - Src::kMant), with the implicit bit for normal numbers.
  const int exponent = exp_field == 0 ? 1 - Src::kBias : exp_field - Src::kBias;
  const SrcBits significand = exp_field == 0 ? mantissa : (mantissa | (SrcBits(1) << Src::kMant));
  if (exponent > Dst::kBias) return sign | kInfinity;

  // Drop `shift` low bits of the significand. A normal result keeps Dst::kMant fraction bits and
  // `base` holds its exponent field minus one: the significand's implicit bit adds the one back
  // (and a rounding carry out of the fraction correctly bumps the exponent, up to infinity).
  // A subnormal result counts units of the smallest subnormal, 2^(kMinNormalExp - Dst::kMant).
  int shift;
  uint16_t base;
  if (exponent >= kMinNormalExp) {
    shift = Src::kMant - Dst::kMant;
    base = uint16_t((exponent + Dst::kBias - 1) << Dst::kMant);
  } else {
    shift = Src::kMant - Dst::kMant + (kMinNormalExp - exponent);
    base = 0;
  }
  // Below half the smallest subnormal (the significand has at most Src::kMant + 1 bits).
  if (shift > Src::kMant + 1) return sign;
  SrcBits quotient = significand >> shift;
  const SrcBits remainder = significand & ((SrcBits(1) << shift) - 1);
  const SrcBits half = SrcBits(1) << (shift - 1);
  if (remainder > half || (remainder == half && (quotient & 1) != 0)) ++quotient;
  return sign | uint16_t(base + quotient);
}

}  // namespace

uint16_t FloatToHalf(float value) {
  return Narrow<Binary32, Binary16>(std::bit_cast<uint32_t>(value));
}

uint16_t DoubleToHalf(double value) {
  return Narrow<Binary64, Binary16>(std::bit_cast<uint64_t>(value));
}

uint16_t FloatToBFloat16(float value) {
  return Narrow<Binary32, BFloat16>(std::bit_cast<uint32_t>(value));
}

uint16_t DoubleToBFloat16(double value) {
  return Narrow<Binary64, BFloat16>(std::bit_cast<uint64_t>(value));
}

float HalfToFloat(uint16_t bits) {
  const uint32_t sign = uint32_t(bits & 0x8000u) << 16;
  const uint32_t exp_field = (bits >> 10) & 0x1fu;
  uint32_t mantissa = bits & 0x3ffu;
  uint32_t result;
  if (exp_field == 0x1f) {
    // Infinity, or NaN with the payload kept and the quiet bit set (as F16C does).
    result = sign | 0x7f800000u | (mantissa << 13) | (mantissa != 0 ? 0x00400000u : 0u);
  } else if (exp_field != 0) {
    result = sign | ((exp_field - 15 + 127) << 23) | (mantissa << 13);
  } else if (mantissa == 0) {
    result = sign;
  } else {
    // Subnormal: normalise so the leading one becomes the implicit bit.
    int exponent = -14;
    while ((mantissa & 0x400u) == 0) {
      mantissa <<= 1;
      --exponent;
    }
    result = sign | (uint32_t(exponent + 127) << 23) | ((mantissa & 0x3ffu) << 13);
  }
  return std::bit_cast<float>(result);
}

float BFloat16ToFloat(uint16_t bits) {
  return std::bit_cast<float>(uint32_t(bits) << 16);
}

void ConvertDoubleToHalf(const double* src, uint16_t* dst, size_t n) {
  for (size_t i = 0; i < n; ++i) dst[i] = DoubleToHalf(src[i]);
}

void ConvertDoubleToBFloat16(const double* src, uint16_t* dst, size_t n) {
  for (size_t i = 0; i < n; ++i) dst[i] = DoubleToBFloat16(src[i]);
}

}  // namespace sprig::numeric
