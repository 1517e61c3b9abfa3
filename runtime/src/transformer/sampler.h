// Choosing the next token from logits: greedy, or temperature and nucleus (top-p) sampling
// with a small deterministic generator, so that a seed always gives the same text.
#pragma once

#include <cstddef>
#include <cstdint>
#include <vector>

#include "numeric/random.h"

namespace sprig::transformer {

using Random = numeric::Random;

struct SamplerOptions {
  float temperature = 1.0f;  // 0: greedy
  float top_p = 1.0f;        // (0, 1]
};

// The index of the largest logit; ties go to the lower index.
int32_t Argmax(const float* logits, size_t n);

// Samples a token: greedy when temperature is 0; otherwise from softmax(logits / temperature)
// restricted to the nucleus, the smallest set of most probable tokens (ties to the lower index)
// whose probabilities sum to at least top_p, renormalised. Uses one draw of `rng` per call
// (none when greedy). `scratch` is reused between calls. Options must be valid (checked by
// the caller).
int32_t Sample(const float* logits, size_t n, const SamplerOptions& options, Random& rng,
               std::vector<double>& probabilities, std::vector<int32_t>& order);

}  // namespace sprig::transformer
