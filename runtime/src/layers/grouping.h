// Grouping rows by unit (a leaf of a leaf tree, an expert): each unit touched by a batch runs
// once over the rows routed to it, as a small matrix product, instead of once per row.
//
// And the batched descent of a binary tree (path and leaf trees): level by level over a tile of
// rows kept grouped by node, so that a node's weight row is read once for all its rows.
#pragma once

#include <algorithm>
#include <cstddef>
#include <cstdint>
#include <functional>
#include <type_traits>
#include <vector>

#include "kernels/kernels.h"

#include "layers/exec.h"
#include "layers/mlp.h"
#include "layers/quantize.h"

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

// The input rows of one tile of a batched tree descent, kept in cache while the tile descends,
// beside the top levels' weight rows that most of its rows read.
inline constexpr size_t kTileInputBytes = 384 * 1024;
// How many entries ahead of the group being computed the descent requests weight rows
// (measured: 1 to 8 at in = out = 768 perform alike).
inline constexpr size_t kDescentPrefetchAhead = 2;

// Rows per tile for a batch of `rows` rows of `in` floats on `threads` threads: as many as fit
// kTileInputBytes, but at least one tile per thread, and kTilesPerThread per thread when there
// are several.
inline constexpr size_t kTilesPerThread = 2;
size_t TileRows(size_t rows, size_t in, size_t threads);

// The order was grouped by node at the level just done (node[] now holds each row's child), in
// ascending node order; the children of ascending nodes ascend too (2n + 1 < 2n + 2 < 2m + 1
// for n < m), so splitting each group into its left-going then its right-going rows groups
// `next` by the new nodes. No sort. `next` has room for rows + 1 entries (the last is scratch).
void RegroupByChild(const uint64_t* node, const uint32_t* order, size_t rows, uint32_t* next);

// What a descent needs of one node: its weight row (of `type`; i8 with its scale) and bias.
struct NodeRow {
  DType type = DType::kF32;
  const void* weight = nullptr;
  const float* scale = nullptr;
  const float* bias = nullptr;  // null: no bias
};

// One level of a batched descent over rows grouped by node (order[] lists rows, node[r] is row
// r's node): each row gets its node's logit w·x + b, with dot's arithmetic (dot_rows,
// dot_pairs), so the logit does not depend on the batch. `locate(node)` returns something
// `row(located)` turns into a NodeRow; `prefetch(located)` requests its data; `emit(r, located,
// logit)` receives each row's logit (not necessarily in order: the rows left over from a
// group's blocks wait to be computed as pairs). With `quantized` (compute mode "i8", i8 nodes;
// row r of x quantised as its row r) the logit is the single-row form's: the exact integer
// sum, then kernels::QuantizedOutput.
template <class Locate, class Row, class Prefetch, class Emit>
void LogitsByNode(const kernels::KernelTable& k, const float* x, size_t in, size_t rows,
                  const uint64_t* node, const uint32_t* order, const QuantizedRows* quantized,
                  Locate&& locate, Row&& row, Prefetch&& prefetch, Emit&& emit) {
  constexpr size_t kBlock = 16;  // rows of a group per dot_rows call
  // Rows of a group beyond its last whole block of kPairs go to dot_pairs, kPairs at a time
  // with other groups' leftovers: in the deep levels, where most groups hold one row, the
  // dot products of several nodes then run side by side instead of one after another.
  constexpr size_t kPairs = 4;
  using Located = std::decay_t<decltype(locate(uint64_t{0}))>;
  struct Pending {
    uint32_t r;
    Located located;
    NodeRow w;
  };
  Pending pending[kPairs];
  size_t waiting = 0;
  auto flush = [&] {
    const void* ws[kPairs];
    const float* xs[kPairs];
    const float* scales[kPairs];
    float logits[kPairs];
    for (size_t j = 0; j < waiting; ++j) {
      ws[j] = pending[j].w.weight;
      xs[j] = x + pending[j].r * in;
      scales[j] = pending[j].w.scale;
    }
    // A layer's nodes share one storage type, so the pairs do too.
    kernels::DotPairs(k, pending[0].w.type, ws, xs, waiting, in, logits, scales);
    for (size_t j = 0; j < waiting; ++j) {
      const float* bias = pending[j].w.bias;
      emit(pending[j].r, pending[j].located, bias != nullptr ? logits[j] + *bias : logits[j]);
    }
    waiting = 0;
  };
  auto starts_group = [&](size_t i) { return i == 0 || node[order[i]] != node[order[i - 1]]; };
  size_t requested = 0;  // entries whose groups' weight rows have been requested
  for (size_t i = 0; i < rows;) {
    const uint64_t current = node[order[i]];
    size_t end = i + 1;
    while (end < rows && node[order[end]] == current) ++end;
    for (; requested < std::min(rows, end + kDescentPrefetchAhead); ++requested) {
      if (starts_group(requested)) prefetch(locate(node[order[requested]]));
    }
    const auto located = locate(current);
    const NodeRow w = row(located);
    if (quantized != nullptr) {
      for (size_t j = i; j < end; ++j) {
        const uint32_t r = order[j];
        const int32_t sum =
            k.int8_activations.dot(quantized->row(r), static_cast<const int8_t*>(w.weight), in);
        emit(r, located, kernels::QuantizedOutput(sum, quantized->scales[r], *w.scale, w.bias, 0));
      }
      i = end;
      continue;
    }
    const size_t blocked = i + (end - i) / kPairs * kPairs;
    for (size_t first = i; first < blocked; first += kBlock) {
      const size_t count = std::min(kBlock, blocked - first);
      const float* xs[kBlock];
      float logits[kBlock];
      for (size_t j = 0; j < count; ++j) xs[j] = x + order[first + j] * in;
      kernels::DotRows(k, w.type, w.weight, xs, count, in, logits, w.scale);
      for (size_t j = 0; j < count; ++j) {
        emit(order[first + j], located, w.bias != nullptr ? logits[j] + *w.bias : logits[j]);
      }
    }
    for (size_t j = blocked; j < end; ++j) {
      pending[waiting++] = {order[j], located, w};
      if (waiting == kPairs) flush();
    }
    i = end;
  }
  if (waiting > 0) flush();
}

}  // namespace sprig::layers
