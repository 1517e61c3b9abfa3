// A small deterministic random generator: xoshiro256** (Blackman and Vigna), seeded through
// splitmix64 so that any 64-bit seed, including 0, gives a well-mixed state. The same seed gives
// the same sequence on every platform (unlike the standard library's distributions). Used for
// sampling generated tokens and for synthesized weights. Not for cryptography.
#pragma once

#include <cstdint>

namespace sprig::numeric {

class Random {
 public:
  explicit Random(uint64_t seed);
  uint64_t Next();
  // Uniform in [0, 1), 53 random bits.
  double Uniform();
  // Standard normal (Box-Muller; each pair of uniforms gives two values).
  float Normal();

 private:
  uint64_t s_[4];
  bool has_spare_ = false;
  float spare_ = 0;
};

}  // namespace sprig::numeric
