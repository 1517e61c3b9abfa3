#include "layers/leaf_tree.h"

#include <algorithm>
#include <vector>

#include "layers/exec.h"
#include "layers/grouping.h"
#include "layers/mlp.h"
#include "layers/quantize.h"

namespace sprig::layers {

LeafTreeLayer::LeafTreeLayer(const Binder& binder, const LayerConfig& config)
    : binder_(binder), config_(config) {
  in_ = config.in;
  out_ = config.out;
  if (config.depth > 0) {
    nodes_ = binder.Matrix(binder.Find("nodes.weight"));
    node_bias_ = binder.FloatRow(binder.Find("nodes.bias"), 0);
  }
  leaves_ = FindMlp(binder, "leaves");
}

uint32_t LeafTreeLayer::Descend(const kernels::KernelTable& k, const float* x,
                                const int8_t* quantized, float scale) const {
  uint64_t node = 0;
  const uint64_t first_leaf = (uint64_t{1} << config_.depth) - 1;
  for (uint32_t level = 0; level < config_.depth; ++level) {
    // While this node's dot product runs, start loading whichever comes next: both child
    // nodes, or at the last level both candidate leaves.
    if (level + 1 == config_.depth) {
      PrefetchMlp(Leaf(2 * node + 1 - first_leaf));
      PrefetchMlp(Leaf(2 * node + 2 - first_leaf));
    } else {
      __builtin_prefetch(nodes_.row(2 * node + 1), 0, 1);
      __builtin_prefetch(nodes_.row(2 * node + 2), 0, 1);
    }
    float logit;
    if (quantized != nullptr) {
      // The int8 form: the exact integer sum, scaled and biased in one expression.
      logit = kernels::QuantizedOutput(
          k.int8_activations.dot(quantized, static_cast<const int8_t*>(nodes_.row(node)), in_),
          scale, *nodes_.row_scales(node), node_bias_, node);
    } else {
      logit = kernels::Dot(k, nodes_.type, x, nodes_.row(node), in_, nodes_.row_scales(node)) +
              (node_bias_ ? node_bias_[node] : 0.0f);
    }
    // A logit of exactly 0 (or NaN) goes left.
    node = 2 * node + 1 + (logit > 0.0f ? 1 : 0);
  }
  return static_cast<uint32_t>(node - first_leaf);
}

// Level by level over the tile's rows grouped by node, as the path tree's batched descent: a
// node's weight row is read once for all the rows reaching it, with the single-row logits.
void LeafTreeLayer::DescendTile(const kernels::KernelTable& k, const float* x, size_t rows,
                                uint32_t* leaves, const QuantizedRows* quantized,
                                Scratch& scratch) const {
  scratch.descent_node.assign(rows, 0);
  // Both orders have one entry to spare, as RegroupByChild writes one past (they swap).
  scratch.descent_order.resize(rows + 1);
  scratch.descent_next_order.resize(rows + 1);
  uint64_t* node = scratch.descent_node.data();
  for (size_t r = 0; r < rows; ++r) scratch.descent_order[r] = static_cast<uint32_t>(r);
  for (uint32_t level = 0; level < config_.depth; ++level) {
    LogitsByNode(
        k, x, in_, rows, node, scratch.descent_order.data(), quantized,
        [](uint64_t n) { return n; },
        [this](uint64_t n) {
          return NodeRow{nodes_.type, nodes_.row(n), nodes_.row_scales(n),
                         node_bias_ ? node_bias_ + n : nullptr};
        },
        [this](uint64_t n) {
          for (size_t offset = 0; offset < nodes_.row_bytes; offset += 64) {
            __builtin_prefetch(static_cast<const uint8_t*>(nodes_.row(n)) + offset, 0, 3);
          }
        },
        // A logit of exactly 0 (or NaN) goes left.
        [&](uint32_t r, uint64_t n, float logit) { node[r] = 2 * n + 1 + (logit > 0.0f ? 1 : 0); });
    RegroupByChild(node, scratch.descent_order.data(), rows, scratch.descent_next_order.data());
    scratch.descent_order.swap(scratch.descent_next_order);
  }
  const uint64_t first_leaf = (uint64_t{1} << config_.depth) - 1;
  for (size_t r = 0; r < rows; ++r) leaves[r] = static_cast<uint32_t>(node[r] - first_leaf);
}

void LeafTreeLayer::Forward(const Exec& exec, const float* x, size_t rows, float* y,
                            int32_t* routes) const {
  const kernels::KernelTable& k = *exec.k;
  // In the compute mode "i8" the node logits of i8-stored nodes use the row quantised once.
  const bool quantize_nodes = config_.depth > 0 && Quantizes(exec, nodes_.type);
  if (exec.single_row) {
    Scratch& scratch = (*exec.scratch)[0];
    // The row quantised for the nodes serves the leaf's fc1 too.
    QuantizedRows quantized;
    if (quantize_nodes) quantized = QuantizeRows(k, x, 1, in_, scratch);
    const uint32_t leaf = quantize_nodes ? Descend(k, x, quantized.values, quantized.scales[0])
                                         : Descend(k, x, nullptr, 0.0f);
    if (routes) routes[0] = static_cast<int32_t>(leaf);
    Touch(exec, leaf);
    MlpForward(k, Leaf(leaf), x, 1, y, scratch, true, exec.int8_activations,
               quantize_nodes ? &quantized : nullptr);
    return;
  }
  // Descend every row, in tiles of rows grouped by node (DescendTile; in the compute mode "i8"
  // on the tile's rows quantised once), then evaluate each touched leaf once over the rows
  // routed to it, as a small matrix product.
  std::vector<uint32_t> leaf_of(rows);
  const size_t tile = TileRows(rows, in_, exec.threads());
  exec.ParallelFor((rows + tile - 1) / tile, [&](size_t t, Scratch& scratch) {
    const size_t first = t * tile, count = std::min(tile, rows - first);
    QuantizedRows quantized;
    if (quantize_nodes) quantized = QuantizeRows(k, x + first * in_, count, in_, scratch);
    DescendTile(k, x + first * in_, count, leaf_of.data() + first,
                quantize_nodes ? &quantized : nullptr, scratch);
  });
  if (routes) {
    for (size_t r = 0; r < rows; ++r) routes[r] = static_cast<int32_t>(leaf_of[r]);
  }
  std::vector<uint32_t> order;
  std::vector<RowGroup> groups;
  GroupByUnit(leaf_of.data(), rows, order, groups);
  for (const RowGroup& group : groups) Touch(exec, group.unit);
  RunGroups(exec, groups, order, 1, x, in_, y, out_, [this](uint32_t leaf) { return Leaf(leaf); });
}

}  // namespace sprig::layers
