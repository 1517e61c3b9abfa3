// ConfigToJson: the canonical text of a validated config, every field explicit.
#include <charconv>
#include <string>

#include <nlohmann/json.hpp>

#include "converter/config/config_json.h"

namespace sprig::convert {
namespace {

using ojson = nlohmann::ordered_json;

// The shortest decimal that reads back as the same float32, as a double for the JSON writer
// (which prints doubles in their own shortest form, so 1e-5f is written "1e-05", not
// "9.999999747378752e-06"). Reading goes decimal → double → float; in the rare case where that
// double rounding lands on a different float, the exact double value of `f` is used instead,
// which always reads back exactly.
double FloatForJson(float f) {
  char buf[32];
  const auto end = std::to_chars(buf, buf + sizeof(buf), f).ptr;
  double d = 0;
  std::from_chars(buf, end, d);
  return static_cast<float>(d) == f ? d : static_cast<double>(f);
}

ojson LayerToJson(const ModelConfig& config, const LayerConfig& layer) {
  ojson j;
  j["kind"] = ToString(layer.kind);
  switch (layer.kind) {
    case LayerKind::kDense:
      j["width"] = layer.width;
      j["activation"] = ToString(layer.activation);
      j["gated"] = layer.gated;
      break;
    case LayerKind::kTree:
      j["mode"] = ToString(layer.mode);
      j["depth"] = layer.depth;
      if (layer.mode == TreeMode::kLeaf) j["leaf_width"] = layer.leaf_width;
      j["activation"] = ToString(layer.activation);
      if (layer.mode == TreeMode::kLeaf) j["gated"] = layer.gated;
      break;
    case LayerKind::kExperts:
      j["experts"] = layer.experts;
      j["top_k"] = layer.top_k;
      j["width"] = layer.width;
      j["activation"] = ToString(layer.activation);
      j["gated"] = layer.gated;
      j["renormalize"] = layer.renormalize;
      j["router_scoring"] = ToString(layer.router_scoring);
      j["shared_experts"] = layer.shared_experts;
      if (layer.shared_experts > 0) {
        j["shared_width"] = layer.shared_width;
        j["shared_gate"] = layer.shared_gate;
      }
      break;
  }
  j["bias"] = layer.bias;
  // A transformer layer's widths are d_model by definition, so they are not written.
  if (config.family == Family::kStack) {
    j["in"] = layer.in;
    j["out"] = layer.out;
  }
  return j;
}

ojson HeadToJson(const HeadConfig& head) {
  ojson j;
  j["kind"] = ToString(head.kind);
  if (head.kind == HeadKind::kClassifier) {
    j["classes"] = head.classes;
    j["pool"] = ToString(head.pool);
  }
  if (head.kind == HeadKind::kLm) {
    // Written only when present, so that the configs of models without them read as before.
    if (head.transform) {
      ojson t;
      t["activation"] = ToString(head.transform_activation);
      t["norm"] = head.transform_norm;
      j["transform"] = t;
    }
    if (head.bias) j["bias"] = true;
  }
  return j;
}

// The top-level fields except `layers`, in the order docs/input-contract.md lists them.
ojson TopLevelToJson(const ModelConfig& c) {
  ojson j;
  j["family"] = ToString(c.family);
  j["name"] = c.name;
  j["description"] = c.description;
  if (c.family == Family::kStack) {
    j["input_dim"] = c.input_dim;
    return j;
  }
  j["vocab_size"] = c.vocab_size;
  j["d_model"] = c.d_model;
  j["n_heads"] = c.n_heads;
  j["n_kv_heads"] = c.n_kv_heads ? c.n_kv_heads : c.n_heads;
  j["max_seq"] = c.max_seq;
  j["norm"] = ToString(c.norm);
  j["norm_eps"] = FloatForJson(c.norm_eps);
  j["positions"] = ToString(c.positions);
  j["rope_base"] = FloatForJson(c.rope_base);
  j["causal"] = c.causal;
  j["tie_embeddings"] = c.tie_embeddings;
  if (c.attn_bias.all() || c.attn_bias.none()) {
    j["attn_bias"] = c.attn_bias.all();
  } else {
    ojson list = ojson::array();
    if (c.attn_bias.q) list.push_back("q");
    if (c.attn_bias.k) list.push_back("k");
    if (c.attn_bias.v) list.push_back("v");
    if (c.attn_bias.o) list.push_back("o");
    j["attn_bias"] = list;
  }
  j["norm_position"] = ToString(c.norm_position);
  j["final_norm"] = c.final_norm;
  j["embed_norm"] = c.embed_norm;
  j["tokenizer"] = ToString(c.tokenizer);
  j["head"] = HeadToJson(c.head);
  return j;
}

std::string Dump(const ojson& j) {
  return j.dump(-1, ' ', /*ensure_ascii=*/false, ojson::error_handler_t::replace);
}

}  // namespace

// Written by hand rather than with dump(2) so each layer stays on one line, as in
// docs/input-contract.md: a config with a hundred layers is then still a page one can read.
std::string ConfigToJson(const ModelConfig& config) {
  const ojson top = TopLevelToJson(config);
  std::string out = "{\n";
  for (const auto& item : top.items()) {
    out += "  " + Dump(ojson(item.key())) + ": " + Dump(item.value()) + ",\n";
  }
  out += "  \"layers\": [\n";
  for (size_t i = 0; i < config.layers.size(); ++i) {
    out += "    " + Dump(LayerToJson(config, config.layers[i]));
    out += i + 1 < config.layers.size() ? ",\n" : "\n";
  }
  out += "  ]\n}\n";
  return out;
}

}  // namespace sprig::convert
