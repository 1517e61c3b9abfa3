#include "bench/kit/stats.h"

#include <algorithm>
#include <cmath>

namespace sprig::bench {

double PercentileOfSorted(const std::vector<double>& sorted, double q) {
  if (sorted.empty()) return 0;
  const double pos = q / 100.0 * static_cast<double>(sorted.size() - 1);
  const size_t lo = static_cast<size_t>(std::floor(pos));
  const size_t hi = std::min(lo + 1, sorted.size() - 1);
  const double frac = pos - static_cast<double>(lo);
  return sorted[lo] + (sorted[hi] - sorted[lo]) * frac;
}

Summary Summarize(std::vector<double> values) {
  Summary s;
  if (values.empty()) return s;
  std::sort(values.begin(), values.end());
  s.count = values.size();
  s.min = values.front();
  s.max = values.back();
  s.median = PercentileOfSorted(values, 50);
  s.p95 = PercentileOfSorted(values, 95);
  s.p99 = PercentileOfSorted(values, 99);
  return s;
}

double EntropyBits(const std::vector<uint64_t>& counts) {
  uint64_t total = 0;
  for (uint64_t c : counts) total += c;
  double h = 0;
  for (uint64_t c : counts) {
    if (c == 0) continue;
    const double p = static_cast<double>(c) / static_cast<double>(total);
    h -= p * std::log2(p);
  }
  return h;
}

}  // namespace sprig::bench
