#include "bench/kit/floors.h"

#include <algorithm>

#include "model/flops.h"
#include "model/tensor_spec.h"

namespace sprig::bench {
namespace {

bool StartsWith(const std::string& s, const std::string& prefix) {
  return s.compare(0, prefix.size(), prefix) == 0;
}

double StoredBytes(const TensorDescription& t) {
  return static_cast<double>(t.bytes + t.scale_bytes);
}

// Bytes of one row along axis 0 (a node, leaf or expert), its int8 scales included.
double RowBytes(const TensorDescription& t) {
  return t.shape.empty() || t.shape[0] == 0 ? 0 : StoredBytes(t) / static_cast<double>(t.shape[0]);
}

// The distinct values of `v`.
size_t DistinctCount(std::vector<uint64_t>& v) {
  std::sort(v.begin(), v.end());
  return static_cast<size_t>(std::unique(v.begin(), v.end()) - v.begin());
}

// Tree nodes are numbered as a heap (children of n: 2n + 1, 2n + 2); leaf j of a tree of depth
// d is node 2^d - 1 + j, and its ancestor at level l is node 2^l - 1 + (j >> (d - l)).
void AddPathNodes(uint64_t leaf, uint32_t depth, uint32_t levels, std::vector<uint64_t>* nodes) {
  for (uint32_t l = 0; l < levels; ++l) {
    nodes->push_back((uint64_t{1} << l) - 1 + (leaf >> (depth - l)));
  }
}

}  // namespace

Floor FloorOf(const Machine& machine, const WorkCost& cost) {
  Floor f;
  const double bandwidth = machine.BandwidthAt(cost.working_set);
  if (bandwidth > 0) f.bytes_seconds = cost.bytes / bandwidth;
  if (machine.multiply_adds_per_second > 0) {
    f.madd_seconds = cost.multiply_adds / machine.multiply_adds_per_second;
  }
  f.seconds = std::max(f.bytes_seconds, f.madd_seconds);
  return f;
}

Floor SumOfFloors(const Machine& machine, const std::vector<WorkCost>& parts, WorkCost* total) {
  Floor sum;
  for (const WorkCost& w : parts) {
    const Floor f = FloorOf(machine, w);
    sum.seconds += f.seconds;
    sum.bytes_seconds += f.bytes_seconds;
    sum.madd_seconds += f.madd_seconds;
    if (total) total->bytes += w.bytes, total->multiply_adds += w.multiply_adds;
  }
  return sum;
}

Footprint Footprint::Of(const Model& model) {
  return Of(model.config(), model.tensor_descriptions());
}

// Sorts a layer's tensor into what every call reads and what it reads per node, leaf or expert,
// by its name within the layer (model/tensor_spec.cc names them).
void Footprint::AddTensor(const TensorDescription& t, const std::string& local, Layer* layer) {
  layer->total_bytes += t.bytes + t.scale_bytes;
  const LayerConfig& c = layer->config;
  if (c.kind == LayerKind::kTree && StartsWith(local, "nodes.")) {
    layer->node_bytes += RowBytes(t);
  } else if ((c.kind == LayerKind::kTree && StartsWith(local, "leaves.")) ||
             (c.kind == LayerKind::kExperts && StartsWith(local, "experts."))) {
    layer->unit_bytes += RowBytes(t);
  } else {
    layer->fixed_bytes += StoredBytes(t);
  }
}

Footprint Footprint::Of(const ModelConfig& config, const std::vector<TensorDescription>& tensors) {
  Footprint f;
  f.config_ = config;
  const bool transformer = config.family == Family::kTransformer;
  for (size_t i = 0; i < config.layers.size(); ++i) {
    Layer layer;
    layer.config = config.layers[i];
    layer.madds_per_row = static_cast<double>(CostOf(layer.config).flops_per_token) / 2;
    f.layers_.push_back(layer);
  }
  f.attention_bytes_.assign(transformer ? config.layers.size() : 0, 0);
  const bool tied_head = config.tie_embeddings && config.head.kind == HeadKind::kLm;
  for (const TensorDescription& t : tensors) {
    if (t.layer >= 0 && static_cast<size_t>(t.layer) < f.layers_.size()) {
      const std::string prefix = LayerPrefix(config, static_cast<size_t>(t.layer));
      if (StartsWith(t.name, prefix)) {
        AddTensor(t, t.name.substr(prefix.size()), &f.layers_[t.layer]);
      } else if (transformer) {
        f.attention_bytes_[t.layer] += t.bytes + t.scale_bytes;
      }
      continue;
    }
    f.model_bytes_ += t.bytes + t.scale_bytes;
    // A lookup reads its tokens' rows, unless the head reads the whole table anyway.
    if ((t.name == "embed.weight" && !tied_head) || t.name == "pos.weight") {
      f.token_row_bytes_ += RowBytes(t);
    } else {
      f.head_bytes_ += StoredBytes(t);
    }
  }
  return f;
}

bool Footprint::IsRoutedLayer(size_t layer) const {
  return layer < layers_.size() && layers_[layer].config.kind != LayerKind::kDense;
}

WorkCost Footprint::LayerCall(size_t index, const int32_t* choices, size_t rows) const {
  const Layer& layer = layers_[index];
  const LayerConfig& c = layer.config;
  WorkCost w;
  w.working_set = layer.total_bytes;
  w.multiply_adds = layer.madds_per_row * static_cast<double>(rows);
  w.bytes = layer.fixed_bytes + static_cast<double>(rows * (c.in + c.out) * sizeof(float));
  if (c.kind == LayerKind::kDense || choices == nullptr) {
    // Without routes every unit counts: the dense bound of the layer.
    if (c.kind != LayerKind::kDense) {
      w.bytes += static_cast<double>(layer.total_bytes) - layer.fixed_bytes;
    }
    return w;
  }
  std::vector<uint64_t> nodes, units;
  if (c.kind == LayerKind::kTree) {
    const bool path = c.mode == TreeMode::kPath;
    for (size_t r = 0; r < rows; ++r) {
      if (choices[r] < 0) continue;
      const uint64_t leaf = static_cast<uint64_t>(choices[r]);
      AddPathNodes(leaf, c.depth, path ? c.depth + 1 : c.depth, &nodes);
      if (!path) units.push_back(leaf);
    }
  } else {
    for (size_t i = 0; i < rows * c.top_k; ++i) {
      if (choices[i] >= 0) units.push_back(static_cast<uint64_t>(choices[i]));
    }
  }
  w.bytes += layer.node_bytes * static_cast<double>(DistinctCount(nodes)) +
             layer.unit_bytes * static_cast<double>(DistinctCount(units));
  return w;
}

std::vector<WorkCost> Footprint::DenseParts(size_t start, size_t tokens, size_t head_rows) const {
  std::vector<WorkCost> parts;
  if (config_.family != Family::kTransformer) return parts;
  const double d = config_.d_model;
  const double heads = config_.n_heads ? config_.n_heads : 1;
  const double kv = d / heads * (config_.n_kv_heads ? config_.n_kv_heads : heads);
  const double n = static_cast<double>(tokens), s = static_cast<double>(start);
  // model/flops.h: the projections q, k, v, o; q·k and the weighted sum of v over the t + 1
  // positions token t sees.
  const double madds = n * d * (d + 2 * kv + d) + 2 * d * (n * s + n * (n + 1) / 2);
  const double cache = (s + n) * kv * 2 * sizeof(float);
  for (uint64_t weights : attention_bytes_) {
    WorkCost w;
    w.bytes = static_cast<double>(weights) + cache + n * d * 2 * sizeof(float);
    w.multiply_adds = madds;
    w.working_set = weights + static_cast<uint64_t>(cache);
    parts.push_back(w);
  }
  WorkCost head;
  head.bytes = n * token_row_bytes_ + (head_rows > 0 ? head_bytes_ : 0);
  double head_madds = 0;
  if (config_.head.kind == HeadKind::kLm) {
    head_madds = static_cast<double>(config_.vocab_size) * d + (config_.head.transform ? d * d : 0);
  } else if (config_.head.kind == HeadKind::kClassifier) {
    head_madds = static_cast<double>(config_.head.classes) * d;
  }
  head.multiply_adds = static_cast<double>(head_rows) * head_madds;
  head.working_set = model_bytes_;
  parts.push_back(head);
  return parts;
}

void ShareWorkingSet(std::vector<WorkCost>::iterator begin, std::vector<WorkCost>::iterator end) {
  double bytes = 0;
  for (auto w = begin; w != end; ++w) bytes += w->bytes;
  for (auto w = begin; w != end; ++w) {
    w->working_set = std::max(w->working_set, static_cast<uint64_t>(bytes));
  }
}

void Footprint::CallParts(const Routes& routes, size_t first, size_t rows, size_t start,
                          size_t head_rows, std::vector<WorkCost>* parts) const {
  const size_t begin = parts->size();
  for (size_t i = 0; i < layers_.size(); ++i) {
    const int32_t* choices = nullptr;
    for (const LayerRoutes& r : routes.layers) {
      if (r.layer == i && (first + rows) * r.width <= r.choices.size()) {
        choices = r.choices.data() + first * r.width;
      }
    }
    parts->push_back(LayerCall(i, choices, rows));
  }
  for (const WorkCost& w : DenseParts(start, rows, head_rows)) parts->push_back(w);
  ShareWorkingSet(parts->begin() + static_cast<std::ptrdiff_t>(begin), parts->end());
}

void Footprint::WorkingSets(size_t tokens, std::vector<uint64_t>* sizes,
                            std::vector<std::string>* names) const {
  for (size_t i = 0; i < layers_.size(); ++i) {
    sizes->push_back(layers_[i].total_bytes);
    names->push_back("layer " + std::to_string(i));
  }
  const std::vector<WorkCost> dense = DenseParts(0, tokens, 1);
  for (size_t i = 0; i < dense.size(); ++i) {
    sizes->push_back(dense[i].working_set);
    names->push_back(i + 1 < dense.size() ? "block " + std::to_string(i) + " attention"
                                          : "embedding and head");
  }
}

}  // namespace sprig::bench
