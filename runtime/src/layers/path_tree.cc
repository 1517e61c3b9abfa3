// Tree in path mode: the d + 1 neurons on the root-to-leaf path each add act(a)·out[n].
#include <algorithm>
#include <cmath>
#include <cstring>
#include <utility>

#include "layers/layer_kinds.h"

namespace sprig::layers {
namespace {

// How many rows ahead the batched descent prefetches (measured: 1 to 4 at in = out = 768).
constexpr size_t kPrefetchRowsAhead = 2;

// Scalar activation of one pre-activation (the same formulas as the kernels' scalar path).
float ActivateScalar(Activation act, float a) {
  switch (act) {
    case Activation::kRelu:
      return a > 0.0f ? a : 0.0f;
    case Activation::kGelu:
      return 0.5f * a * std::erfc(-a * 0.70710678118654752f);
    case Activation::kGeluTanh: {
      const float u = 0.79788456080286536f * (a + 0.044715f * a * a * a);
      return a / (1.0f + std::exp(-2.0f * u));
    }
    case Activation::kSilu:
      return a / (1.0f + std::exp(-a));
  }
  return a;
}

}  // namespace

PathTreeLayer::PathTreeLayer(const Binder& b, const LayerConfig& c) : binder_(b), config_(c) {
  in_ = c.in;
  out_ = c.out;
  weight_ = b.Find("nodes.weight");
  bias_ = b.Find("nodes.bias");
  out_rows_ = b.Find("nodes.out");
  out_bias_ = b.FloatRow(b.Find("out_bias"), 0);
}

float PathTreeLayer::Step(const kernels::KernelTable& k, uint64_t node, const float* x, float* y,
                          bool prefetch_child) const {
  const format::ModelFile& f = binder_.file();
  const float bias = bias_ ? *reinterpret_cast<const float*>(f.Row(*bias_, node)) : 0.0f;
  const float a =
      kernels::Dot(k, weight_->dtype, x, f.Row(*weight_, node), in_, f.RowScales(*weight_, node)) +
      bias;
  // The child is known before this neuron's output row is added: start loading the child's
  // rows now, so they arrive while the axpy below streams the current output row.
  if (prefetch_child) Prefetch(2 * node + 1 + (a > 0.0f ? 1 : 0));
  kernels::Axpy(k, out_rows_->dtype, ActivateScalar(config_.activation, a), f.Row(*out_rows_, node),
                y, out_, f.RowScales(*out_rows_, node));
  return a;
}

void PathTreeLayer::Prefetch(uint64_t node) const {
  const format::ModelFile& f = binder_.file();
  const auto* w = f.Row(*weight_, node);
  const auto* o = f.Row(*out_rows_, node);
  for (uint64_t off = 0; off < weight_->row_bytes; off += 64) __builtin_prefetch(w + off, 0, 3);
  for (uint64_t off = 0; off < out_rows_->row_bytes; off += 64) __builtin_prefetch(o + off, 0, 3);
}

void PathTreeLayer::Forward(const Exec& e, const float* x, size_t rows, float* y,
                            int32_t* routes) const {
  const kernels::KernelTable& k = *e.k;
  const uint32_t depth = config_.depth;
  const uint64_t first_leaf = (uint64_t{1} << depth) - 1;
  auto init = [&](float* yr) {
    if (out_bias_) {
      std::memcpy(yr, out_bias_, out_ * sizeof(float));
    } else {
      std::fill(yr, yr + out_, 0.0f);
    }
  };
  if (e.single_row) {
    init(y);
    uint64_t n = 0;
    for (uint32_t level = 0; level <= depth; ++level) {
      Touch(e, n);
      const float a = Step(k, n, x, y, level < depth);
      if (level < depth) n = 2 * n + 1 + (a > 0.0f ? 1 : 0);
    }
    if (routes) routes[0] = static_cast<int32_t>(n - first_leaf);
    return;
  }
  // Level by level for all rows; within a level rows are visited grouped by node, so each
  // neuron's weights are read once per batch and reused from cache for its rows. A row's
  // arithmetic does not depend on the grouping, so the split over threads is free.
  std::vector<uint64_t> node(rows, 0);
  std::vector<std::pair<uint64_t, uint32_t>> order(rows);
  for (size_t r = 0; r < rows; ++r) init(y + r * out_);
  for (uint32_t level = 0; level <= depth; ++level) {
    for (size_t r = 0; r < rows; ++r) order[r] = {node[r], static_cast<uint32_t>(r)};
    if (level > 0) std::sort(order.begin(), order.end());
    if (e.touched) {
      // Rows are sorted by node: mark each distinct node's record once.
      for (size_t i = 0; i < rows; ++i) {
        if (i == 0 || order[i].first != order[i - 1].first) Touch(e, order[i].first);
      }
    }
    const size_t chunks = (rows + kRowChunk - 1) / kRowChunk;
    e.ParallelFor(chunks, [&](size_t c, Scratch&) {
      for (size_t i = c * kRowChunk; i < std::min(rows, (c + 1) * kRowChunk); ++i) {
        const uint32_t r = order[i].second;
        // Rows further on in this order usually need other neurons: fetch them ahead, far
        // enough that they arrive before they are needed.
        const size_t ahead = i + kPrefetchRowsAhead;
        if (ahead < rows && order[ahead].first != order[ahead - 1].first) {
          Prefetch(order[ahead].first);
        }
        const float a = Step(k, node[r], x + r * in_, y + r * out_, false);
        if (level < depth) node[r] = 2 * node[r] + 1 + (a > 0.0f ? 1 : 0);
      }
    });
  }
  if (routes) {
    for (size_t r = 0; r < rows; ++r) routes[r] = static_cast<int32_t>(node[r] - first_leaf);
  }
}

}  // namespace sprig::layers
