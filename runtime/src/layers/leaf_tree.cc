#include "layers/leaf_tree.h"

#include <algorithm>
#include <vector>

#include "layers/exec.h"
#include "layers/grouping.h"
#include "layers/mlp.h"

namespace sprig::layers {

LeafTreeLayer::LeafTreeLayer(const Binder& b, const LayerConfig& c) : binder_(b), config_(c) {
  in_ = c.in;
  out_ = c.out;
  if (c.depth > 0) {
    nodes_ = b.Matrix(b.Find("nodes.weight"));
    node_bias_ = b.FloatRow(b.Find("nodes.bias"), 0);
  }
  leaves_ = FindMlp(b, "leaves");
}

uint32_t LeafTreeLayer::Descend(const kernels::KernelTable& k, const float* x,
                                bool prefetch) const {
  uint64_t n = 0;
  const uint64_t first_leaf = (uint64_t{1} << config_.depth) - 1;
  for (uint32_t level = 0; level < config_.depth; ++level) {
    if (prefetch) {
      // While this node's dot product runs, start loading whichever comes next: both child
      // nodes, or at the last level both candidate leaves.
      if (level + 1 == config_.depth) {
        PrefetchMlp(Leaf(2 * n + 1 - first_leaf));
        PrefetchMlp(Leaf(2 * n + 2 - first_leaf));
      } else {
        __builtin_prefetch(nodes_.row(2 * n + 1), 0, 1);
        __builtin_prefetch(nodes_.row(2 * n + 2), 0, 1);
      }
    }
    const float logit = kernels::Dot(k, nodes_.type, x, nodes_.row(n), in_, nodes_.row_scales(n)) +
                        (node_bias_ ? node_bias_[n] : 0.0f);
    // A logit of exactly 0 (or NaN) goes left.
    n = 2 * n + 1 + (logit > 0.0f ? 1 : 0);
  }
  return static_cast<uint32_t>(n - first_leaf);
}

void LeafTreeLayer::Forward(const Exec& e, const float* x, size_t rows, float* y,
                            int32_t* routes) const {
  const kernels::KernelTable& k = *e.k;
  Scratch& s0 = (*e.scratch)[0];
  if (e.single_row) {
    const uint32_t leaf = Descend(k, x, true);
    if (routes) routes[0] = static_cast<int32_t>(leaf);
    Touch(e, leaf);
    MlpForward(k, Leaf(leaf), x, 1, y, s0, true);
    return;
  }
  // Descend every row (rows are independent), then evaluate each touched leaf once over the
  // rows routed to it, as a small matrix product.
  std::vector<uint32_t> leaf_of(rows);
  const size_t chunks = (rows + kRowChunk - 1) / kRowChunk;
  e.ParallelFor(chunks, [&](size_t c, Scratch&) {
    for (size_t r = c * kRowChunk; r < std::min(rows, (c + 1) * kRowChunk); ++r) {
      leaf_of[r] = Descend(k, x + r * in_, false);
    }
  });
  if (routes) {
    for (size_t r = 0; r < rows; ++r) routes[r] = static_cast<int32_t>(leaf_of[r]);
  }
  std::vector<uint32_t> order;
  std::vector<RowGroup> groups;
  GroupByUnit(leaf_of.data(), rows, order, groups);
  for (const RowGroup& g : groups) Touch(e, g.unit);
  RunGroups(e, groups, order, 1, x, in_, y, out_, [this](uint32_t leaf) { return Leaf(leaf); });
}

}  // namespace sprig::layers
