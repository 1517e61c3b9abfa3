// sprig synth: random weights for a config, for benchmarks, tests and demos.
//
// Weights are N(0, 1/in) (the usual fan-in scaling, so activations keep unit scale), biases
// N(0, 0.01²), norm weights 1 and norm biases 0, embeddings N(0, 1), learned positions
// N(0, 0.1²). Routing nodes and routers get zero-mean hyperplanes with small biases, so rows of
// unit-scale inputs split evenly and routing is not degenerate. Deterministic for a seed on
// every platform (our own generator and normal sampler, not the standard library's).
#pragma once

#include <cstdint>
#include <vector>

#include "io/ndarray.h"
#include "numeric/random.h"
#include "sprig/config.h"

namespace sprig::convert {

std::vector<io::NdArray> SynthesizeWeights(const ModelConfig& config, uint64_t seed);

// The deterministic generator synth uses, also used by tests and benchmarks.
using Random = numeric::Random;

}  // namespace sprig::convert
