#include "transformer/sampler.h"

#include <algorithm>
#include <cmath>
#include <numeric>

namespace sprig::transformer {
int32_t Argmax(const float* logits, size_t n) {
  size_t best = 0;
  for (size_t i = 1; i < n; ++i) {
    if (logits[i] > logits[best]) best = i;
  }
  return static_cast<int32_t>(best);
}

int32_t Sample(const float* logits, size_t n, const SamplerOptions& options, Random& rng,
               std::vector<double>& p, std::vector<int32_t>& order) {
  if (options.temperature == 0.0f || n <= 1) return Argmax(logits, n);
  // Softmax in double, so the distribution (and hence the text for a seed) does not depend on
  // the kernel path's exp.
  p.resize(n);
  const double inv_t = 1.0 / static_cast<double>(options.temperature);
  const float max = logits[Argmax(logits, n)];
  double sum = 0.0;
  for (size_t i = 0; i < n; ++i) {
    p[i] = std::exp((static_cast<double>(logits[i]) - max) * inv_t);
    sum += p[i];
  }
  for (double& v : p) v /= sum;
  order.resize(n);
  std::iota(order.begin(), order.end(), 0);
  // Most probable first, the lower index on ties: the nucleus is then a prefix.
  std::stable_sort(order.begin(), order.end(), [&](int32_t a, int32_t b) { return p[a] > p[b]; });
  size_t keep = n;
  if (options.top_p < 1.0f) {
    double cumulative = 0.0;
    for (size_t i = 0; i < n; ++i) {
      cumulative += p[order[i]];
      if (cumulative >= options.top_p) {
        keep = i + 1;
        break;
      }
    }
  }
  double kept = 0.0;
  for (size_t i = 0; i < keep; ++i) kept += p[order[i]];
  // Renormalising is the same as drawing u uniformly over the kept mass.
  const double u = rng.Uniform() * kept;
  double cumulative = 0.0;
  for (size_t i = 0; i < keep; ++i) {
    cumulative += p[order[i]];
    if (u < cumulative) return order[i];
  }
  return order[keep - 1];  // u rounded up to the total
}

}  // namespace sprig::transformer
