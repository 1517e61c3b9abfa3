#include "layers/grouping.h"

#include <algorithm>
#include <cstring>

namespace sprig::layers {

void GroupByUnit(const uint32_t* unit_of, size_t count, std::vector<uint32_t>& order,
                 std::vector<RowGroup>& groups) {
  order.resize(count);
  for (size_t i = 0; i < count; ++i) order[i] = static_cast<uint32_t>(i);
  std::stable_sort(order.begin(), order.end(),
                   [&](uint32_t a, uint32_t b) { return unit_of[a] < unit_of[b]; });
  groups.clear();
  for (size_t i = 0; i < count;) {
    size_t j = i;
    while (j < count && unit_of[order[j]] == unit_of[order[i]]) ++j;
    groups.push_back({unit_of[order[i]], static_cast<uint32_t>(i), static_cast<uint32_t>(j)});
    i = j;
  }
}

void RunGroups(const Exec& e, const std::vector<RowGroup>& groups,
               const std::vector<uint32_t>& order, size_t per_row, const float* x, size_t in,
               float* out, size_t out_width, const std::function<MlpView(uint32_t)>& unit) {
  e.ParallelFor(groups.size(), [&](size_t gi, Scratch& s) {
    const RowGroup& g = groups[gi];
    const size_t n = g.end - g.begin;
    if (s.c.size() < n * in) s.c.resize(n * in);
    if (s.d.size() < n * out_width) s.d.resize(n * out_width);
    for (size_t i = 0; i < n; ++i) {
      const size_t row = order[g.begin + i] / per_row;
      std::memcpy(s.c.data() + i * in, x + row * in, in * sizeof(float));
    }
    MlpForward(*e.k, unit(g.unit), s.c.data(), n, s.d.data(), s, false);
    for (size_t i = 0; i < n; ++i) {
      std::memcpy(out + order[g.begin + i] * out_width, s.d.data() + i * out_width,
                  out_width * sizeof(float));
    }
  });
}

}  // namespace sprig::layers
