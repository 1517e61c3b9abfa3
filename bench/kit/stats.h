// Order statistics of repeated measurements: median, spread and tail percentiles.
#pragma once

#include <cstddef>
#include <cstdint>
#include <vector>

namespace sprig::bench {

struct Summary {
  size_t count = 0;
  double median = 0, min = 0, max = 0, p95 = 0, p99 = 0;
};

// Percentiles by linear interpolation between the two nearest order statistics (NumPy's
// default "linear" method), so they agree with numpy.percentile on the same values. An empty
// input gives an all-zero Summary.
Summary Summarize(std::vector<double> values);

// The q-th percentile (0..100) of sorted values, as above.
double PercentileOfSorted(const std::vector<double>& sorted, double q);

// Shannon entropy in bits of the distribution counts[i] / sum(counts):
// H = -sum_i p_i log2 p_i over the p_i > 0 (0 for no counts). log2 of the number of units is its
// maximum, reached when every unit is chosen equally often.
double EntropyBits(const std::vector<uint64_t>& counts);

}  // namespace sprig::bench
