#include "layers/path_tree.h"

#include <algorithm>
#include <cstring>
#include <utility>
#include <vector>

#include "format/row_map.h"
#include "layers/exec.h"
#include "layers/grouping.h"
#include "layers/quantize.h"
#include "model/config_check.h"

namespace sprig::layers {
namespace {

// How many rows ahead the batched sum requests output rows (measured: 1 to 6 at
// in = out = 768 perform alike).
constexpr size_t kPrefetchRowsAhead = 2;

}  // namespace

PathTreeLayer::PathTreeLayer(const Binder& binder, const LayerConfig& config)
    : binder_(binder), config_(config) {
  in_ = config.in;
  out_ = config.out;
  weight_ = binder.Find("nodes.weight");
  bias_ = binder.Find("nodes.bias");
  out_rows_ = binder.Find("nodes.out");
  out_bias_ = binder.FloatRow(binder.Find("out_bias"), 0);
  auto same_place = [&](const format::TensorInfo* tensor) {
    return tensor == nullptr ||
           (tensor->record_set == weight_->record_set && tensor->hot_rows == weight_->hot_rows);
  };
  shared_location_ = same_place(bias_) && same_place(out_rows_);
}

PathTreeLayer::Neuron PathTreeLayer::Locate(uint64_t node) const {
  // The routed tensors (nodes.weight, nodes.bias, nodes.out) have the same rows, hot rows and
  // record set (checked at open), so one location serves all of them: the ModelFile::Row
  // arithmetic, done once per neuron instead of once per tensor. Their record set is the
  // layer's (a layer has one).
  if (!shared_location_) return LocateEach(node);
  Neuron neuron;
  const uint8_t* record = nullptr;
  uint64_t local = node;
  if (node >= weight_->hot_rows) {
    const format::RowLocation location = format::LocateRow(records()->map, node);
    neuron.record = location.record;
    record = binder_.file().base() + records()->offsets[location.record];
    local = location.local_row;
  }
  auto at = [&](const uint8_t* hot, uint64_t part_offset, uint64_t row_bytes) {
    return record == nullptr ? hot + local * row_bytes : record + part_offset + local * row_bytes;
  };
  neuron.weight = at(weight_->hot, weight_->part_offset, weight_->row_bytes);
  neuron.out = at(out_rows_->hot, out_rows_->part_offset, out_rows_->row_bytes);
  if (bias_ != nullptr) {
    neuron.bias =
        reinterpret_cast<const float*>(at(bias_->hot, bias_->part_offset, bias_->row_bytes));
  }
  if (weight_->scale_row_bytes > 0) {
    neuron.weight_scale = reinterpret_cast<const float*>(
        at(weight_->scales_hot, weight_->scales_part_offset, weight_->scale_row_bytes));
  }
  if (out_rows_->scale_row_bytes > 0) {
    neuron.out_scale = reinterpret_cast<const float*>(
        at(out_rows_->scales_hot, out_rows_->scales_part_offset, out_rows_->scale_row_bytes));
  }
  return neuron;
}

// The general form, for a file whose routed tensors are stored apart (no packer writes one,
// but a file is untrusted): each pointer from its own tensor's layout.
PathTreeLayer::Neuron PathTreeLayer::LocateEach(uint64_t node) const {
  const format::ModelFile& file = binder_.file();
  Neuron neuron;
  if (records() != nullptr && node >= records()->map.hot_rows) {
    neuron.record = format::LocateRow(records()->map, node).record;
  }
  neuron.weight = file.Row(*weight_, node);
  neuron.weight_scale = file.RowScales(*weight_, node);
  neuron.out = file.Row(*out_rows_, node);
  neuron.out_scale = file.RowScales(*out_rows_, node);
  if (bias_ != nullptr) neuron.bias = reinterpret_cast<const float*>(file.Row(*bias_, node));
  return neuron;
}

float PathTreeLayer::Logit(const kernels::KernelTable& k, const Neuron& neuron, const float* x,
                           const QuantizedRows* quantized) const {
  if (quantized != nullptr) {
    // Compute mode "i8": the exact integer sum with the row quantised once, scaled and biased
    // in one expression (kernels::QuantizedOutput).
    const int32_t sum = k.int8_activations.dot(quantized->values,
                                               reinterpret_cast<const int8_t*>(neuron.weight), in_);
    return kernels::QuantizedOutput(sum, quantized->scales[0], *neuron.weight_scale, neuron.bias,
                                    0);
  }
  const float dot = kernels::Dot(k, weight_->dtype, x, neuron.weight, in_, neuron.weight_scale);
  return neuron.bias != nullptr ? dot + *neuron.bias : dot;
}

void PathTreeLayer::PrefetchWeight(const Neuron& neuron) const {
  for (uint64_t offset = 0; offset < weight_->row_bytes; offset += 64) {
    __builtin_prefetch(neuron.weight + offset, 0, 3);
  }
  if (neuron.weight_scale != nullptr) __builtin_prefetch(neuron.weight_scale, 0, 3);
  if (neuron.bias != nullptr) __builtin_prefetch(neuron.bias, 0, 3);
}

void PathTreeLayer::PrefetchOut(const Neuron& neuron) const {
  for (uint64_t offset = 0; offset < out_rows_->row_bytes; offset += 64) {
    __builtin_prefetch(neuron.out + offset, 0, 3);
  }
  if (neuron.out_scale != nullptr) __builtin_prefetch(neuron.out_scale, 0, 3);
}

// One row, in two phases. The descent: each level's latency is a load of the neuron's weight
// row followed by its dot product, and the next neuron is known only after that dot product. So
// both children's weight rows are requested before the current dot product starts (one of them
// is wasted, but the chosen one is then on its way a whole dot product earlier), and the chosen
// child's output row as soon as the choice is made. (Measured at in = out = 768 in every storage
// type: asking for all four grandchildren as well, or for a record's whole node part on entering
// it, is slower: the extra misses cost more than the latency they hide; not asking for the
// output rows during the descent is slower too.)
// Then the sum: all the path's activations in one vector call, and all its output rows added
// to y in one pass (axpy_rows), by which time the output rows have arrived. With the output rows
// out of the descent, its critical path is the weight rows alone.
void PathTreeLayer::ForwardOne(const kernels::KernelTable& k, const Exec& exec, const float* x,
                               float* y, int32_t* routes, const QuantizedRows* quantized) const {
  const uint32_t depth = config_.depth;
  Neuron path[kMaxPathDepth + 1];
  float a[kMaxPathDepth + 1];
  uint64_t node = 0;
  Neuron current = Locate(0);
  PrefetchWeight(current);
  PrefetchOut(current);
  for (uint32_t level = 0;; ++level) {
    if (current.record != Neuron::kHot) TouchRecord(exec, current.record);
    path[level] = current;
    if (level == depth) {
      a[level] = Logit(k, current, x, quantized);
      break;
    }
    const Neuron left = Locate(2 * node + 1), right = Locate(2 * node + 2);
    PrefetchWeight(left);
    PrefetchWeight(right);
    a[level] = Logit(k, current, x, quantized);
    const bool go_right = a[level] > 0.0f;
    const Neuron& child = go_right ? right : left;
    PrefetchOut(child);
    node = 2 * node + 1 + (go_right ? 1 : 0);
    current = child;
  }
  const size_t count = depth + 1;
  k.activate(config_.activation, a, count);
  const void* out_rows[kMaxPathDepth + 1];
  for (size_t level = 0; level < count; ++level) {
    out_rows[level] = path[level].out;
    if (path[level].out_scale != nullptr) a[level] *= *path[level].out_scale;
  }
  kernels::AxpyRows(k, out_rows_->dtype, a, out_rows, count, y, out_);
  if (routes) routes[0] = static_cast<int32_t>(node - ((uint64_t{1} << depth) - 1));
}

// A batch runs in tiles of rows, each in two phases as ForwardOne (and with its arithmetic, so a
// row's result does not depend on its batch, its tile or the thread that ran it).
// The descent, level by level over the tile's rows grouped by node: a node's weight row is read
// once for all the rows that reach it (the top levels are shared by most of the tile), and
// rows further on in the order are prefetched (the deep levels, where each row has its own
// node, are a stream of independent loads). Each row keeps its logits and output rows.
// The sum, row by row in leaf order (neighbours then share most of their path, whose output
// rows stay in cache): each row's activations in one vector call and its output rows added to
// its y in one axpy_rows, while the next row's output rows are requested.
// In the compute mode "i8" (i8 nodes) the node logits read each row quantised once, through the
// int8 kernels, in both forms; the output rows are still added as float activations times the
// stored rows (axpy_rows).
void PathTreeLayer::Forward(const Exec& exec, const float* x, size_t rows, float* y,
                            int32_t* routes) const {
  const kernels::KernelTable& k = *exec.k;
  const bool quantize = Quantizes(exec, weight_->dtype);
  if (exec.single_row) {
    InitOutput(y);
    QuantizedRows quantized;
    if (quantize) quantized = QuantizeRows(k, x, 1, in_, (*exec.scratch)[0]);
    ForwardOne(k, exec, x, y, routes, quantize ? &quantized : nullptr);
    return;
  }
  // The statistics need every row's path, which its leaf determines.
  std::vector<int32_t> own_leaves;
  int32_t* leaves = routes;
  if (leaves == nullptr && exec.touched != nullptr) {
    own_leaves.resize(rows);
    leaves = own_leaves.data();
  }
  const size_t tile = TileRows(rows, in_, exec.threads());
  const size_t tiles = (rows + tile - 1) / tile;
  exec.ParallelFor(tiles, [&](size_t t, Scratch& scratch) {
    const size_t first = t * tile, count = std::min(tile, rows - first);
    QuantizedRows quantized;
    if (quantize) quantized = QuantizeRows(k, x + first * in_, count, in_, scratch);
    ForwardTile(k, x + first * in_, count, y + first * out_,
                leaves != nullptr ? leaves + first : nullptr, quantize ? &quantized : nullptr,
                scratch);
  });
  if (exec.touched != nullptr) TouchPaths(exec, leaves, rows);
}

void PathTreeLayer::InitOutput(float* y) const {
  if (out_bias_) {
    std::memcpy(y, out_bias_, out_ * sizeof(float));
  } else {
    std::fill(y, y + out_, 0.0f);
  }
}

void PathTreeLayer::TouchPaths(const Exec& exec, const int32_t* leaves, size_t rows) const {
  const uint32_t depth = config_.depth;
  for (size_t r = 0; r < rows; ++r) {
    // In heap order, node n's children are 2n + 1 and 2n + 2, so the ancestor of node m at
    // `level` is ((m + 1) >> (depth - level)) - 1.
    const uint64_t leaf_node = (uint64_t{1} << depth) + static_cast<uint64_t>(leaves[r]);
    for (uint32_t level = 0; level <= depth; ++level) {
      Touch(exec, (leaf_node >> (depth - level)) - 1);
    }
  }
}

void PathTreeLayer::ForwardTile(const kernels::KernelTable& k, const float* x, size_t rows,
                                float* y, int32_t* leaves, const QuantizedRows* quantized,
                                Scratch& scratch) const {
  const uint32_t depth = config_.depth;
  const size_t width = depth + 1;
  scratch.descent_node.assign(rows, 0);
  // Both orders have one entry to spare, as RegroupByChild writes one past (they swap).
  scratch.descent_order.resize(rows + 1);
  scratch.descent_next_order.resize(rows + 1);
  scratch.path_logits.resize(rows * width);
  scratch.path_out.resize(rows * width);
  scratch.path_out_scale.resize(rows * width);
  for (size_t r = 0; r < rows; ++r) scratch.descent_order[r] = static_cast<uint32_t>(r);
  for (uint32_t level = 0; level <= depth; ++level) {
    DescendLevel(k, x, rows, level, quantized, scratch);
    if (level < depth) {
      RegroupByChild(scratch.descent_node.data(), scratch.descent_order.data(), rows,
                     scratch.descent_next_order.data());
      scratch.descent_order.swap(scratch.descent_next_order);
    }
  }
  const uint64_t first_leaf = (uint64_t{1} << depth) - 1;
  if (leaves != nullptr) {
    for (size_t r = 0; r < rows; ++r) {
      leaves[r] = static_cast<int32_t>(scratch.descent_node[r] - first_leaf);
    }
  }
  SumTile(k, rows, y, scratch);
}

void PathTreeLayer::DescendLevel(const kernels::KernelTable& k, const float* x, size_t rows,
                                 uint32_t level, const QuantizedRows* quantized,
                                 Scratch& scratch) const {
  const size_t width = config_.depth + 1;
  uint64_t* node = scratch.descent_node.data();
  LogitsByNode(
      k, x, in_, rows, node, scratch.descent_order.data(), quantized,
      [this](uint64_t n) { return Locate(n); },
      [this](const Neuron& neuron) {
        return NodeRow{weight_->dtype, neuron.weight, neuron.weight_scale, neuron.bias};
      },
      [this](const Neuron& neuron) { PrefetchWeight(neuron); },
      [&](uint32_t r, const Neuron& neuron, float a) {
        scratch.path_logits[r * width + level] = a;
        scratch.path_out[r * width + level] = neuron.out;
        scratch.path_out_scale[r * width + level] = neuron.out_scale;
        if (level < config_.depth) node[r] = 2 * node[r] + 1 + (a > 0.0f ? 1 : 0);
      });
}

void PathTreeLayer::SumTile(const kernels::KernelTable& k, size_t rows, float* y,
                            Scratch& scratch) const {
  const size_t width = config_.depth + 1;
  const uint32_t* order = scratch.descent_order.data();
  const void* const* out = scratch.path_out.data();
  const float* const* out_scale = scratch.path_out_scale.data();
  // Requests the output rows of entry i of the order that entry i - 1 does not share (those
  // are in cache by the time entry i is summed).
  auto request = [&](size_t i) {
    const size_t path = order[i] * width;
    const size_t before = i > 0 ? order[i - 1] * width : 0;
    for (size_t level = 0; level < width; ++level) {
      if (i > 0 && out[path + level] == out[before + level]) continue;
      Neuron neuron;
      neuron.out = static_cast<const uint8_t*>(out[path + level]);
      neuron.out_scale = out_scale[path + level];
      PrefetchOut(neuron);
    }
  };
  for (size_t i = 0; i < std::min(rows, kPrefetchRowsAhead); ++i) request(i);
  for (size_t i = 0; i < rows; ++i) {
    if (i + kPrefetchRowsAhead < rows) request(i + kPrefetchRowsAhead);
    const uint32_t r = order[i];
    float* a = scratch.path_logits.data() + r * width;
    k.activate(config_.activation, a, width);
    for (size_t level = 0; level < width; ++level) {
      if (out_scale[r * width + level] != nullptr) a[level] *= *out_scale[r * width + level];
    }
    float* y_row = y + r * out_;
    InitOutput(y_row);
    kernels::AxpyRows(k, out_rows_->dtype, a, out + r * width, width, y_row, out_);
  }
}

}  // namespace sprig::layers
