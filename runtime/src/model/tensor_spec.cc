#include "model/tensor_spec.h"

namespace sprig {
namespace {

void AddMlpTensors(std::vector<TensorSpec>& out, const std::string& prefix, int index,
                   std::vector<uint64_t> lead, uint64_t width, uint64_t in, uint64_t outw,
                   bool gated, bool bias, bool routed) {
  auto shape = [&](std::initializer_list<uint64_t> tail) {
    std::vector<uint64_t> s = lead;
    s.insert(s.end(), tail);
    return s;
  };
  out.push_back({prefix + "fc1.weight", shape({width, in}), index, routed});
  if (bias) out.push_back({prefix + "fc1.bias", shape({width}), index, routed});
  if (gated) {
    out.push_back({prefix + "gate.weight", shape({width, in}), index, routed});
    if (bias) out.push_back({prefix + "gate.bias", shape({width}), index, routed});
  }
  out.push_back({prefix + "fc2.weight", shape({outw, width}), index, routed});
  if (bias) out.push_back({prefix + "fc2.bias", shape({outw}), index, routed});
}

}  // namespace

std::string LayerPrefix(const ModelConfig& config, size_t i) {
  if (config.family == Family::kStack) return "layers." + std::to_string(i) + ".";
  return "blocks." + std::to_string(i) + ".ffn.";
}

uint64_t TreeNodeCount(const LayerConfig& layer) {
  if (layer.kind != LayerKind::kTree) return 0;
  if (layer.mode == TreeMode::kLeaf) return (uint64_t{1} << layer.depth) - 1;
  return (uint64_t{1} << (layer.depth + 1)) - 1;
}

uint64_t RoutedUnitCount(const LayerConfig& layer) {
  if (layer.kind == LayerKind::kExperts) return layer.experts;
  if (layer.kind == LayerKind::kTree && layer.mode == TreeMode::kLeaf) {
    return uint64_t{1} << layer.depth;
  }
  return 0;
}

std::vector<TensorSpec> LayerTensors(const LayerConfig& layer, const std::string& prefix,
                                     int index) {
  std::vector<TensorSpec> out;
  const uint64_t in = layer.in, outw = layer.out;
  switch (layer.kind) {
    case LayerKind::kDense:
      AddMlpTensors(out, prefix, index, {}, layer.width, in, outw, layer.gated, layer.bias, false);
      break;
    case LayerKind::kTree: {
      const uint64_t nodes = TreeNodeCount(layer);
      if (layer.mode == TreeMode::kLeaf) {
        out.push_back({prefix + "nodes.weight", {nodes, in}, index, false});
        if (layer.bias) out.push_back({prefix + "nodes.bias", {nodes}, index, false});
        AddMlpTensors(out, prefix + "leaves.", index, {uint64_t{1} << layer.depth},
                      layer.leaf_width, in, outw, layer.gated, layer.bias, true);
      } else {
        out.push_back({prefix + "nodes.weight", {nodes, in}, index, true});
        if (layer.bias) out.push_back({prefix + "nodes.bias", {nodes}, index, true});
        out.push_back({prefix + "nodes.out", {nodes, outw}, index, true});
        if (layer.bias) out.push_back({prefix + "out_bias", {outw}, index, false});
      }
      break;
    }
    case LayerKind::kExperts:
      out.push_back({prefix + "router.weight", {layer.experts, in}, index, false});
      if (layer.bias) out.push_back({prefix + "router.bias", {layer.experts}, index, false});
      AddMlpTensors(out, prefix + "experts.", index, {layer.experts}, layer.width, in, outw,
                    layer.gated, layer.bias, true);
      // Shared experts run on every row, so they live in the hot section, not in records.
      if (layer.shared_experts > 0) {
        AddMlpTensors(out, prefix + "shared.", index, {layer.shared_experts}, layer.shared_width,
                      in, outw, layer.gated, layer.bias, false);
      }
      if (layer.shared_gate) {
        out.push_back({prefix + "shared_gate.weight", {1, in}, index, false});
        if (layer.bias) out.push_back({prefix + "shared_gate.bias", {1}, index, false});
      }
      break;
  }
  return out;
}

std::vector<TensorSpec> ExpectedTensors(const ModelConfig& config) {
  std::vector<TensorSpec> out;
  if (config.family == Family::kTransformer) {
    const uint64_t d = config.d_model, v = config.vocab_size;
    const uint64_t head_dim = config.n_heads ? d / config.n_heads : 0;
    const uint64_t kv = config.n_kv_heads ? config.n_kv_heads : config.n_heads;
    const bool layer_norm = config.norm == NormKind::kLayerNorm;
    out.push_back({"embed.weight", {v, d}});
    if (config.positions == Positions::kLearned) out.push_back({"pos.weight", {config.max_seq, d}});
    auto add_model_norm = [&](const std::string& n) {
      out.push_back({n + ".weight", {d}});
      if (layer_norm) out.push_back({n + ".bias", {d}});
    };
    if (config.embed_norm) add_model_norm("embed_norm");
    const bool has_bias[4] = {config.attn_bias.q, config.attn_bias.k, config.attn_bias.v,
                              config.attn_bias.o};
    for (size_t i = 0; i < config.layers.size(); ++i) {
      const std::string b = "blocks." + std::to_string(i) + ".";
      const int li = static_cast<int>(i);
      auto add_norm = [&](const std::string& n) {
        out.push_back({b + n + ".weight", {d}, li});
        if (layer_norm) out.push_back({b + n + ".bias", {d}, li});
      };
      add_norm("norm1");
      const uint64_t rows[4] = {d, kv * head_dim, kv * head_dim, d};
      const char* names[4] = {"q", "k", "v", "o"};
      for (int p = 0; p < 4; ++p) {
        out.push_back({b + "attn." + names[p] + ".weight", {rows[p], d}, li});
        if (has_bias[p]) out.push_back({b + "attn." + names[p] + ".bias", {rows[p]}, li});
      }
      add_norm("norm2");
      auto ffn = LayerTensors(config.layers[i], b + "ffn.", li);
      out.insert(out.end(), ffn.begin(), ffn.end());
    }
    if (config.final_norm) add_model_norm("norm");
    if (config.head.kind == HeadKind::kLm) {
      if (config.head.transform) {
        out.push_back({"head.transform.weight", {d, d}});
        out.push_back({"head.transform.bias", {d}});
        if (config.head.transform_norm) add_model_norm("head.transform_norm");
      }
      if (!config.tie_embeddings) out.push_back({"head.weight", {v, d}});
      if (config.head.bias) out.push_back({"head.bias", {v}});
    } else if (config.head.kind == HeadKind::kClassifier) {
      out.push_back({"head.weight", {config.head.classes, d}});
      out.push_back({"head.bias", {config.head.classes}});
    }
    return out;
  }
  for (size_t i = 0; i < config.layers.size(); ++i) {
    auto t = LayerTensors(config.layers[i], LayerPrefix(config, i), static_cast<int>(i));
    out.insert(out.end(), t.begin(), t.end());
  }
  return out;
}

uint64_t ElementCount(const std::vector<uint64_t>& shape) {
  uint64_t n = 1;
  for (uint64_t d : shape) n *= d;
  return n;
}

std::string ShapeToString(const std::vector<uint64_t>& shape) {
  std::string s = "[";
  for (size_t i = 0; i < shape.size(); ++i) {
    if (i) s += ", ";
    s += std::to_string(shape[i]);
  }
  return s + "]";
}

}  // namespace sprig
