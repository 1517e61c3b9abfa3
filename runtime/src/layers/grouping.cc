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

size_t TileRows(size_t rows, size_t in, size_t threads) {
  const size_t fit = kTileInputBytes / (std::max<size_t>(in, 1) * sizeof(float));
  // More than one thread: kTilesPerThread tiles each, claimed as threads finish, so that a
  // core that runs slower takes fewer of them instead of holding up the batch.
  const size_t tiles = threads > 1 ? threads * kTilesPerThread : 1;
  const size_t per_tile = (rows + tiles - 1) / tiles;
  return std::max<size_t>(1, std::min(fit, per_tile));
}

void RegroupByChild(const uint64_t* node, const uint32_t* order, size_t rows, uint32_t* next) {
  size_t n = 0;
  for (size_t i = 0; i < rows;) {
    const uint64_t parent = (node[order[i]] - 1) / 2;
    size_t end = i;
    while (end < rows && (node[order[end]] - 1) / 2 == parent) ++end;
    // Branch-free: which way a row went is as unpredictable as a coin.
    for (size_t j = i; j < end; ++j) {
      next[n] = order[j];
      n += node[order[j]] % 2;  // left children are odd
    }
    for (size_t j = i; j < end; ++j) {
      next[n] = order[j];
      n += 1 - node[order[j]] % 2;
    }
    i = end;
  }
}

void RunGroups(const Exec& exec, const std::vector<RowGroup>& groups,
               const std::vector<uint32_t>& order, size_t per_row, const float* x, size_t in,
               float* out, size_t out_width, const std::function<MlpView(uint32_t)>& unit) {
  exec.ParallelFor(groups.size(), [&](size_t task, Scratch& scratch) {
    const RowGroup& group = groups[task];
    // The next unit's matrices start loading while this one computes (a leaf's are read from
    // memory as a rule).
    if (task + 1 < groups.size()) PrefetchMlp(unit(groups[task + 1].unit));
    const size_t count = group.end - group.begin;
    if (scratch.group_input.size() < count * in) scratch.group_input.resize(count * in);
    if (scratch.group_output.size() < count * out_width) {
      scratch.group_output.resize(count * out_width);
    }
    float* input = scratch.group_input.data();
    float* output = scratch.group_output.data();
    for (size_t i = 0; i < count; ++i) {
      const size_t row = order[group.begin + i] / per_row;
      std::memcpy(input + i * in, x + row * in, in * sizeof(float));
    }
    MlpForward(*exec.k, unit(group.unit), input, count, output, scratch, false,
               exec.int8_activations);
    for (size_t i = 0; i < count; ++i) {
      std::memcpy(out + order[group.begin + i] * out_width, output + i * out_width,
                  out_width * sizeof(float));
    }
  });
}

}  // namespace sprig::layers
