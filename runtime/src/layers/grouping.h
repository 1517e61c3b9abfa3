// Grouping rows by unit (a leaf of a leaf tree, an expert): each unit touched by a batch runs
// once over the rows routed to it, as a small matrix product, instead of once per row.
#pragma once

#include <cstddef>
#include <cstdint>
#include <functional>
#include <vector>

#include "layers/exec.h"
#include "layers/mlp.h"

namespace sprig::layers {

// One non-empty group: the entries order[begin .. end) all go to `unit`.
struct RowGroup {
  uint32_t unit, begin, end;
};
// Orders entries 0 .. count - 1 by unit: order[] lists them grouped by unit_of[] (ascending
// within a unit), groups[] holds each non-empty group in unit order.
void GroupByUnit(const uint32_t* unit_of, size_t count, std::vector<uint32_t>& order,
                 std::vector<RowGroup>& groups);

// Evaluates each group's unit once over its entries, as a small matrix product: entry `e`
// (an index from `order`) reads input row e / per_row of x and writes output row e of out.
// Groups run in parallel; each row's arithmetic is the same whatever the grouping.
void RunGroups(const Exec& exec, const std::vector<RowGroup>& groups,
               const std::vector<uint32_t>& order, size_t per_row, const float* x, size_t in,
               float* out, size_t out_width, const std::function<MlpView(uint32_t)>& unit);

}  // namespace sprig::layers
