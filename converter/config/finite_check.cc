#include "converter/config/finite_check.h"

#include <algorithm>
#include <bit>
#include <cstring>

namespace sprig::convert {
namespace {

static_assert(std::endian::native == std::endian::little,
              "tensor data is little-endian and is read here as native integers");

// IEEE 754-2008 §3.4 (binary64, binary32, binary16) and bfloat16 (binary32's top 16 bits) all
// lay a value out as sign | exponent | significand. A value is NaN or ±Inf exactly when every
// exponent bit is 1: NaN when the significand is non-zero (quiet or signalling, §6.2.1), ±Inf
// when it is zero, the sign bit telling which.
template <typename Bits>
struct Format {
  Bits exponent_mask;  // all exponent bits
  Bits exponent_lsb;   // the lowest exponent bit
  static constexpr Bits kSign = Bits{1} << (sizeof(Bits) * 8 - 1);
};

constexpr Format<uint64_t> kBinary64{0x7FF0000000000000ull, 0x0010000000000000ull};
constexpr Format<uint32_t> kBinary32{0x7F800000u, 0x00800000u};
constexpr Format<uint16_t> kBinary16{0x7C00u, 0x0400u};
constexpr Format<uint16_t> kBfloat16{0x7F80u, 0x0080u};

// Words (8 bytes) per block: the inner loop has no branch, so it runs at memory speed; blocks
// keep the element-by-element search in a block that does hold a bad value short.
constexpr uint64_t kBlockWords = 2048;

template <typename Bits>
Bits Load(const uint8_t* p) {
  Bits v;
  std::memcpy(&v, p, sizeof(Bits));  // unaligned-safe; compiles to a plain load
  return v;
}

// `value` repeated in every Bits-wide lane of a 64-bit word.
template <typename Bits>
constexpr uint64_t Broadcast(Bits value) {
  uint64_t word = 0;
  for (size_t lane = 0; lane < sizeof(uint64_t) / sizeof(Bits); ++lane) {
    word |= static_cast<uint64_t>(value) << (lane * 8 * sizeof(Bits));
  }
  return word;
}

template <typename Bits>
NonFiniteKind Classify(Bits v, const Format<Bits>& f) {
  const Bits significand = static_cast<Bits>(~(f.exponent_mask | Format<Bits>::kSign));
  if (v & significand) return NonFiniteKind::kNaN;
  return (v & Format<Bits>::kSign) ? NonFiniteKind::kNegativeInfinity
                                   : NonFiniteKind::kPositiveInfinity;
}

// Element by element over [begin, end).
template <typename Bits>
std::optional<NonFiniteValue> ScanElements(const uint8_t* data, uint64_t begin, uint64_t end,
                                           const Format<Bits>& f) {
  for (uint64_t i = begin; i < end; ++i) {
    const Bits v = Load<Bits>(data + i * sizeof(Bits));
    if ((v & f.exponent_mask) == f.exponent_mask) return NonFiniteValue{i, Classify(v, f)};
  }
  return std::nullopt;
}

// The fast path reads 64-bit words, each holding 1, 2 or 4 elements in lanes. Adding the lowest
// exponent bit to a lane's isolated exponent carries into the lane's sign position only when
// the exponent is all ones; the sum never leaves its lane, because the exponent field sits
// below the sign bit. OR-ing the sums over a block therefore flags a block that holds a NaN or
// infinity, with one AND, one ADD and one OR per word, whatever the element type.
template <typename Bits>
std::optional<NonFiniteValue> Scan(const uint8_t* data, uint64_t count, const Format<Bits>& f) {
  constexpr uint64_t kPerWord = sizeof(uint64_t) / sizeof(Bits);
  const uint64_t mask = Broadcast(f.exponent_mask);
  const uint64_t lsb = Broadcast(f.exponent_lsb);
  const uint64_t sign = Broadcast(Format<Bits>::kSign);
  const uint64_t words = count / kPerWord;
  for (uint64_t start = 0; start < words; start += kBlockWords) {
    const uint64_t n = std::min(kBlockWords, words - start);
    const uint8_t* block = data + start * sizeof(uint64_t);
    uint64_t flags = 0;
    for (uint64_t i = 0; i < n; ++i) {
      flags |= (Load<uint64_t>(block + i * sizeof(uint64_t)) & mask) + lsb;
    }
    if (flags & sign) {
      if (auto bad = ScanElements(data, start * kPerWord, (start + n) * kPerWord, f)) return bad;
    }
  }
  return ScanElements(data, words * kPerWord, count, f);
}

}  // namespace

const char* ToString(NonFiniteKind kind) {
  switch (kind) {
    case NonFiniteKind::kNaN:
      return "NaN";
    case NonFiniteKind::kPositiveInfinity:
      return "+Inf";
    case NonFiniteKind::kNegativeInfinity:
      return "-Inf";
  }
  return "?";
}

std::optional<NonFiniteValue> FindNonFinite(io::ElementType type, const uint8_t* data,
                                            uint64_t count) {
  switch (type) {
    case io::ElementType::kF64:
      return Scan(data, count, kBinary64);
    case io::ElementType::kF32:
      return Scan(data, count, kBinary32);
    case io::ElementType::kF16:
      return Scan(data, count, kBinary16);
    case io::ElementType::kBF16:
      return Scan(data, count, kBfloat16);
    default:
      return std::nullopt;
  }
}

}  // namespace sprig::convert
