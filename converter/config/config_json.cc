// ParseConfig and ReadConfigFile: config.json → a validated ModelConfig (the input contract in
// docs/input-contract.md).
#include "converter/config/config_json.h"

#include <string>
#include <vector>

#include "base/status_macros.h"
#include "converter/config/config_limits.h"
#include "converter/config/field_reader.h"
#include "converter/config/json_util.h"
#include "model/config_check.h"
#include "model/tensor_spec.h"

namespace sprig::convert {
namespace {

using internal::FieldReader;
using nlohmann::json;

// Field lists, in the order error messages show them.
const std::vector<const char*> kCommonFields = {"family", "name", "description"};
const std::vector<const char*> kStackFields = {"input_dim"};
const std::vector<const char*> kTransformerFields = {
    "vocab_size",     "d_model",   "n_heads",       "n_kv_heads", "max_seq",
    "norm",           "norm_eps",  "positions",     "rope_base",  "causal",
    "tie_embeddings", "attn_bias", "norm_position", "final_norm", "embed_norm",
    "tokenizer",      "head"};
const std::vector<const char*> kAllLayerFields = {
    "kind",  "mode",           "width",          "depth",        "leaf_width", "experts",
    "top_k", "renormalize",    "activation",     "gated",        "bias",       "in",
    "out",   "router_scoring", "shared_experts", "shared_width", "shared_gate"};

std::vector<const char*> Concat(std::initializer_list<std::vector<const char*>> lists) {
  std::vector<const char*> out;
  for (const auto& l : lists) out.insert(out.end(), l.begin(), l.end());
  return out;
}

template <typename E>
std::pair<const char*, E> Choice(E v) {
  return {ToString(v), v};
}

// Fields a layer of this kind (and tree mode) may have.
std::vector<const char*> LayerFields(LayerKind kind, TreeMode mode) {
  switch (kind) {
    case LayerKind::kDense:
      return {"kind", "width", "activation", "gated", "bias", "in", "out"};
    case LayerKind::kTree:
      if (mode == TreeMode::kLeaf) {
        return {"kind", "mode", "depth", "leaf_width", "activation", "gated", "bias", "in", "out"};
      }
      return {"kind", "mode", "depth", "activation", "bias", "in", "out"};
    case LayerKind::kExperts:
      return {"kind",           "experts",        "top_k",        "width",      "activation",
              "gated",          "renormalize",    "bias",         "in",         "out",
              "router_scoring", "shared_experts", "shared_width", "shared_gate"};
  }
  return {};
}

std::string LayerDescription(LayerKind kind, TreeMode mode) {
  switch (kind) {
    case LayerKind::kDense:
      return "a dense layer";
    case LayerKind::kTree:
      return mode == TreeMode::kLeaf ? "a leaf-mode tree layer" : "a path-mode tree layer";
    case LayerKind::kExperts:
      return "an experts layer";
  }
  return "this layer";
}

// An experts layer's router scoring and shared experts (after `width` and `renormalize`).
Status ParseExpertsVariant(const FieldReader& r, LayerConfig* layer) {
  SPRIG_RETURN_IF_ERROR(
      r.Enum<RouterScoring>("router_scoring",
                            {Choice(RouterScoring::kSoftmax), Choice(RouterScoring::kSigmoid),
                             Choice(RouterScoring::kSoftmaxChosen)},
                            RouterScoring::kSoftmax, &layer->router_scoring));
  // softmax_chosen is normalised over the chosen experts by definition; renormalize: false would
  // ask for something it cannot do.
  if (layer->router_scoring == RouterScoring::kSoftmaxChosen && !layer->renormalize) {
    return r.Error(r.FieldName("renormalize") +
                   " is false but router_scoring softmax_chosen always normalises over the "
                   "chosen experts; leave renormalize out or set it true");
  }
  SPRIG_RETURN_IF_ERROR(r.Uint("shared_experts", 0, kMaxExperts, 0, &layer->shared_experts));
  if (layer->shared_experts == 0) {
    // Without shared experts their width and gate would describe nothing.
    for (const char* key : {"shared_width", "shared_gate"}) {
      if (r.Has(key)) {
        return r.Error(r.FieldName(key) + " is given but " + r.FieldName("shared_experts") +
                       " is 0 or absent; it applies only to a layer with shared experts");
      }
    }
    layer->shared_width = 0;
    layer->shared_gate = false;
    return Status::Ok();
  }
  SPRIG_RETURN_IF_ERROR(
      r.Uint("shared_width", 1, kMaxDimension, layer->width, &layer->shared_width));
  return r.Bool("shared_gate", false, &layer->shared_gate);
}

// The fields of one kind of layer; `in` and `out` are left to the caller.
Status ParseLayerBody(const FieldReader& r, LayerConfig* layer) {
  const auto max_dim = kMaxDimension;
  SPRIG_RETURN_IF_ERROR(
      r.Enum<Activation>("activation",
                         {Choice(Activation::kRelu), Choice(Activation::kGelu),
                          Choice(Activation::kGeluTanh), Choice(Activation::kSilu)},
                         Activation::kRelu, &layer->activation));
  SPRIG_RETURN_IF_ERROR(r.Bool("bias", true, &layer->bias));
  switch (layer->kind) {
    case LayerKind::kDense:
      SPRIG_RETURN_IF_ERROR(r.Uint("width", 1, max_dim, std::nullopt, &layer->width));
      SPRIG_RETURN_IF_ERROR(r.Bool("gated", false, &layer->gated));
      break;
    case LayerKind::kTree:
      if (layer->mode == TreeMode::kLeaf) {
        SPRIG_RETURN_IF_ERROR(r.Uint("depth", 0, kMaxLeafDepth, std::nullopt, &layer->depth,
                                     " for a leaf-mode tree"));
        SPRIG_RETURN_IF_ERROR(r.Uint("leaf_width", 1, max_dim, std::nullopt, &layer->leaf_width));
        SPRIG_RETURN_IF_ERROR(r.Bool("gated", false, &layer->gated));
      } else {
        SPRIG_RETURN_IF_ERROR(r.Uint("depth", 0, kMaxPathDepth, std::nullopt, &layer->depth,
                                     " for a path-mode tree"));
      }
      break;
    case LayerKind::kExperts:
      SPRIG_RETURN_IF_ERROR(r.Uint("experts", 1, kMaxExperts, std::nullopt, &layer->experts));
      SPRIG_RETURN_IF_ERROR(r.Uint("top_k", 1, layer->experts, std::nullopt, &layer->top_k,
                                   " (the number of experts)"));
      SPRIG_RETURN_IF_ERROR(r.Uint("width", 1, max_dim, std::nullopt, &layer->width));
      SPRIG_RETURN_IF_ERROR(r.Bool("gated", false, &layer->gated));
      SPRIG_RETURN_IF_ERROR(r.Bool("renormalize", true, &layer->renormalize));
      SPRIG_RETURN_IF_ERROR(ParseExpertsVariant(r, layer));
      break;
  }
  return Status::Ok();
}

// A layer's `in` and `out`. In a stack, `out` is required and `in` must equal `expected_in`
// (input_dim or the previous layer's out) when given; in a transformer both are d_model.
Status ParseLayerWidths(const FieldReader& r, const ModelConfig& config, size_t index,
                        LayerConfig* layer) {
  if (config.family == Family::kTransformer) {
    for (const char* key : {"in", "out"}) {
      uint32_t value = config.d_model;
      SPRIG_RETURN_IF_ERROR(r.Uint(key, 1, kMaxDimension, config.d_model, &value));
      if (value != config.d_model) {
        return r.Error(r.FieldName(key) + " is " + std::to_string(value) +
                       " but must be d_model (" + std::to_string(config.d_model) +
                       ") in a transformer; it may be left out");
      }
    }
    layer->in = layer->out = config.d_model;
    return Status::Ok();
  }
  const uint32_t expected_in = index == 0 ? config.input_dim : config.layers[index - 1].out;
  SPRIG_RETURN_IF_ERROR(r.Uint("in", 1, kMaxDimension, expected_in, &layer->in));
  if (layer->in != expected_in) {
    const std::string from =
        index == 0 ? "input_dim" : "the out of layers[" + std::to_string(index - 1) + "]";
    return r.Error(r.FieldName("in") + " is " + std::to_string(layer->in) + " but must be " +
                   std::to_string(expected_in) + " (" + from + ")");
  }
  return r.Uint("out", 1, kMaxDimension, std::nullopt, &layer->out);
}

Status ParseLayer(const json& entry, const std::string& source, size_t index,
                  const ModelConfig& config, LayerConfig* layer) {
  const std::string path = "layers[" + std::to_string(index) + "]";
  if (!entry.is_object()) {
    return Status::InvalidArgument(source + ": " + path + " must be an object, got " +
                                   internal::DescribeJson(entry));
  }
  FieldReader r(entry, path, source);
  SPRIG_RETURN_IF_ERROR(r.Enum<LayerKind>(
      "kind", {Choice(LayerKind::kDense), Choice(LayerKind::kTree), Choice(LayerKind::kExperts)},
      std::nullopt, &layer->kind));
  if (layer->kind == LayerKind::kTree) {
    SPRIG_RETURN_IF_ERROR(r.Enum<TreeMode>(
        "mode", {Choice(TreeMode::kLeaf), Choice(TreeMode::kPath)}, TreeMode::kLeaf, &layer->mode));
  }
  SPRIG_RETURN_IF_ERROR(r.CheckKeys(LayerFields(layer->kind, layer->mode), kAllLayerFields,
                                    LayerDescription(layer->kind, layer->mode)));
  SPRIG_RETURN_IF_ERROR(ParseLayerBody(r, layer));
  return ParseLayerWidths(r, config, index, layer);
}

Status ParseLayers(const json& root, const std::string& source, ModelConfig* config) {
  auto it = root.find("layers");
  if (it == root.end()) {
    return Status::InvalidArgument(source + ": missing the required field \"layers\"");
  }
  if (!it->is_array() || it->empty()) {
    return Status::InvalidArgument(source + ": layers must be a non-empty array, got " +
                                   internal::DescribeJson(*it));
  }
  if (it->size() > kMaxLayers) {
    return Status::InvalidArgument(source + ": layers must have at most " +
                                   std::to_string(kMaxLayers) + " entries, got " +
                                   std::to_string(it->size()));
  }
  config->layers.clear();
  for (size_t i = 0; i < it->size(); ++i) {
    LayerConfig layer;
    SPRIG_RETURN_IF_ERROR(ParseLayer((*it)[i], source, i, *config, &layer));
    config->layers.push_back(layer);
  }
  return Status::Ok();
}

// head.transform of an lm head: {"activation": "gelu", "norm": true}.
Status ParseHeadTransform(const json& head, const std::string& source, HeadConfig* out) {
  auto it = head.find("transform");
  if (it == head.end()) return Status::Ok();
  if (!it->is_object()) {
    return Status::InvalidArgument(
        source + ": head.transform must be an object such as {\"activation\":\"gelu\"}, got " +
        internal::DescribeJson(*it));
  }
  FieldReader r(*it, "head.transform", source);
  SPRIG_RETURN_IF_ERROR(
      r.CheckKeys({"activation", "norm"}, {"activation", "norm"}, "the head's transform"));
  out->transform = true;
  SPRIG_RETURN_IF_ERROR(
      r.Enum<Activation>("activation",
                         {Choice(Activation::kRelu), Choice(Activation::kGelu),
                          Choice(Activation::kGeluTanh), Choice(Activation::kSilu)},
                         Activation::kGelu, &out->transform_activation));
  return r.Bool("norm", true, &out->transform_norm);
}

Status ParseHead(const json& root, const std::string& source, HeadConfig* head) {
  auto it = root.find("head");
  if (it == root.end()) {
    *head = HeadConfig{};
    head->kind = HeadKind::kLm;
    return Status::Ok();
  }
  if (!it->is_object()) {
    return Status::InvalidArgument(source +
                                   ": head must be an object such as {\"kind\":\"lm\"}, got " +
                                   internal::DescribeJson(*it));
  }
  FieldReader r(*it, "head", source);
  SPRIG_RETURN_IF_ERROR(r.Enum<HeadKind>(
      "kind", {Choice(HeadKind::kLm), Choice(HeadKind::kClassifier), Choice(HeadKind::kNone)},
      std::nullopt, &head->kind));
  const std::vector<const char*> all = {"kind", "classes", "pool", "transform", "bias"};
  if (head->kind == HeadKind::kLm) {
    SPRIG_RETURN_IF_ERROR(r.CheckKeys({"kind", "transform", "bias"}, all, "the lm head"));
    SPRIG_RETURN_IF_ERROR(r.Bool("bias", false, &head->bias));
    return ParseHeadTransform(*it, source, head);
  }
  if (head->kind != HeadKind::kClassifier) {
    return r.CheckKeys({"kind"}, all, std::string("the ") + ToString(head->kind) + " head");
  }
  SPRIG_RETURN_IF_ERROR(r.CheckKeys({"kind", "classes", "pool"}, all, "the classifier head"));
  SPRIG_RETURN_IF_ERROR(r.Uint("classes", 1, kMaxDimension, std::nullopt, &head->classes));
  return r.Enum<Pool>("pool", {Choice(Pool::kMean), Choice(Pool::kFirst), Choice(Pool::kLast)},
                      Pool::kMean, &head->pool);
}

// attn_bias: true or false for all four projections, or the list of those that have a bias,
// such as ["q", "k", "v"] (BERT-style attention has all four; some models drop the output's).
Status ParseAttnBias(const json& root, const FieldReader& r, ProjectionBias* out) {
  auto it = root.find("attn_bias");
  if (it == root.end() || it->is_boolean()) {
    bool all = true;
    SPRIG_RETURN_IF_ERROR(r.Bool("attn_bias", true, &all));
    *out = ProjectionBias{all, all, all, all};
    return Status::Ok();
  }
  const std::string expected = "true, false or a list of distinct \"q\", \"k\", \"v\", \"o\"";
  if (!it->is_array()) {
    return r.Error("attn_bias must be " + expected + ", got " + internal::DescribeJson(*it));
  }
  *out = ProjectionBias{false, false, false, false};
  for (const json& e : *it) {
    const std::string name = e.is_string() ? e.get<std::string>() : "";
    bool* flag = name == "q"   ? &out->q
                 : name == "k" ? &out->k
                 : name == "v" ? &out->v
                 : name == "o" ? &out->o
                               : nullptr;
    if (flag == nullptr || *flag) {
      return r.Error("attn_bias must be " + expected + ", got " + internal::DescribeJson(*it));
    }
    *flag = true;
  }
  return Status::Ok();
}

Status ParseTransformerFields(const json& root, const FieldReader& r, const std::string& source,
                              ModelConfig* c) {
  const auto max_dim = kMaxDimension;
  SPRIG_RETURN_IF_ERROR(r.Uint("vocab_size", 1, max_dim, std::nullopt, &c->vocab_size));
  SPRIG_RETURN_IF_ERROR(r.Uint("d_model", 1, max_dim, std::nullopt, &c->d_model));
  SPRIG_RETURN_IF_ERROR(r.Uint("n_heads", 1, max_dim, std::nullopt, &c->n_heads));
  SPRIG_RETURN_IF_ERROR(r.Uint("n_kv_heads", 1, max_dim, c->n_heads, &c->n_kv_heads));
  SPRIG_RETURN_IF_ERROR(r.Uint("max_seq", 1, max_dim, std::nullopt, &c->max_seq));
  SPRIG_RETURN_IF_ERROR(r.Enum<NormKind>("norm",
                                         {Choice(NormKind::kLayerNorm), Choice(NormKind::kRmsNorm)},
                                         NormKind::kLayerNorm, &c->norm));
  SPRIG_RETURN_IF_ERROR(r.PositiveFloat("norm_eps", 1e-5f, &c->norm_eps));
  SPRIG_RETURN_IF_ERROR(r.Enum<Positions>(
      "positions",
      {Choice(Positions::kLearned), Choice(Positions::kRope), Choice(Positions::kNone)},
      Positions::kLearned, &c->positions));
  SPRIG_RETURN_IF_ERROR(r.PositiveFloat("rope_base", 10000.0f, &c->rope_base));
  SPRIG_RETURN_IF_ERROR(r.Bool("causal", true, &c->causal));
  SPRIG_RETURN_IF_ERROR(r.Bool("tie_embeddings", false, &c->tie_embeddings));
  SPRIG_RETURN_IF_ERROR(ParseAttnBias(root, r, &c->attn_bias));
  SPRIG_RETURN_IF_ERROR(r.Enum<NormPosition>(
      "norm_position", {Choice(NormPosition::kPre), Choice(NormPosition::kPost)},
      NormPosition::kPre, &c->norm_position));
  SPRIG_RETURN_IF_ERROR(r.Bool("final_norm", true, &c->final_norm));
  SPRIG_RETURN_IF_ERROR(r.Bool("embed_norm", false, &c->embed_norm));
  SPRIG_RETURN_IF_ERROR(r.Enum<Tokenizer>(
      "tokenizer",
      {Choice(Tokenizer::kByte), Choice(Tokenizer::kSentencePiece), Choice(Tokenizer::kNone)},
      Tokenizer::kNone, &c->tokenizer));
  return ParseHead(root, source, &c->head);
}

// Relations between transformer fields that single-field checks cannot see.
Status CheckTransformer(const FieldReader& r, const ModelConfig& c) {
  auto n = [](uint32_t v) { return std::to_string(v); };
  if (c.d_model % c.n_heads != 0) {
    return r.Error("d_model (" + n(c.d_model) + ") must be a multiple of n_heads (" + n(c.n_heads) +
                   ")");
  }
  if (c.n_heads % c.n_kv_heads != 0) {
    return r.Error("n_heads (" + n(c.n_heads) + ") must be a multiple of n_kv_heads (" +
                   n(c.n_kv_heads) + ")");
  }
  const uint32_t head_dim = c.d_model / c.n_heads;
  if (c.positions == Positions::kRope && head_dim % 2 != 0) {
    return r.Error("positions \"rope\" needs an even head_dim, but d_model / n_heads = " +
                   n(c.d_model) + " / " + n(c.n_heads) + " = " + n(head_dim));
  }
  if (c.tie_embeddings && c.head.kind != HeadKind::kLm) {
    return r.Error(std::string("tie_embeddings needs the lm head, but head.kind is \"") +
                   ToString(c.head.kind) + "\"");
  }
  if (c.tokenizer == Tokenizer::kByte && c.vocab_size != 256) {
    return r.Error("tokenizer \"byte\" needs vocab_size 256 (one token per byte), got " +
                   n(c.vocab_size));
  }
  return Status::Ok();
}

// Whether the product of `shape` exceeds `limit`, found without overflowing; when it does not,
// *product is set to it.
bool ProductExceeds(const std::vector<uint64_t>& shape, uint64_t limit, uint64_t* product) {
  uint64_t p = 1;
  for (uint64_t d : shape) {
    if (d != 0 && p > limit / d) return true;
    p *= d;
  }
  *product = p;
  return p > limit;
}

std::string PowerOfTwo(uint64_t value, int exponent) {
  return "2^" + std::to_string(exponent) + " (" + std::to_string(value) + ")";
}

// Every tensor within kMaxTensorElements and all together within kMaxTotalElements. Field
// ranges are already checked, so ExpectedTensors' own shape arithmetic cannot overflow (the
// largest single dimension is 2^23 - 1 path-tree neurons or 2^24); only products can.
Status CheckSizes(const ModelConfig& config, const std::string& source) {
  uint64_t total = 0;
  for (const TensorSpec& t : ExpectedTensors(config)) {
    uint64_t count = 0;
    if (ProductExceeds(t.shape, kMaxTensorElements, &count)) {
      const std::string where =
          t.layer >= 0 ? "layers[" + std::to_string(t.layer) + "] needs" : "the model needs";
      return Status::InvalidArgument(
          source + ": " + where + " tensor \"" + t.name + "\" of shape " + ShapeToString(t.shape) +
          ", more than the limit of " + PowerOfTwo(kMaxTensorElements, 36) + " elements");
    }
    // count <= 2^36 and there are fewer than 2^16 tensors, so the sum cannot overflow.
    total += count;
  }
  if (total > kMaxTotalElements) {
    return Status::InvalidArgument(source + ": the model's tensors hold " + std::to_string(total) +
                                   " elements, more than the limit of " +
                                   PowerOfTwo(kMaxTotalElements, 38));
  }
  return Status::Ok();
}

}  // namespace

Result<ModelConfig> ParseConfig(const std::string& json_text, const std::string& source) {
  SPRIG_ASSIGN_OR_RETURN(json root, internal::ParseJsonText(json_text, source));
  if (!root.is_object()) {
    return Status::InvalidArgument(source + ": the config must be a JSON object, got " +
                                   internal::DescribeJson(root));
  }
  FieldReader r(root, "", source);
  ModelConfig config;
  SPRIG_RETURN_IF_ERROR(r.Enum<Family>("family",
                                       {Choice(Family::kStack), Choice(Family::kTransformer)},
                                       std::nullopt, &config.family));
  const bool stack = config.family == Family::kStack;
  const auto all = Concat({kCommonFields, kStackFields, kTransformerFields, {"layers"}});
  const auto own = Concat({kCommonFields, stack ? kStackFields : kTransformerFields, {"layers"}});
  SPRIG_RETURN_IF_ERROR(
      r.CheckKeys(own, all, stack ? "the stack family" : "the transformer family"));
  SPRIG_RETURN_IF_ERROR(r.String("name", kMaxNameBytes, &config.name));
  SPRIG_RETURN_IF_ERROR(r.String("description", kMaxDescriptionBytes, &config.description));
  if (stack) {
    SPRIG_RETURN_IF_ERROR(r.Uint("input_dim", 1, kMaxDimension, std::nullopt, &config.input_dim));
  } else {
    SPRIG_RETURN_IF_ERROR(ParseTransformerFields(root, r, source, &config));
    SPRIG_RETURN_IF_ERROR(CheckTransformer(r, config));
  }
  SPRIG_RETURN_IF_ERROR(ParseLayers(root, source, &config));
  SPRIG_RETURN_IF_ERROR(CheckSizes(config, source));
  // The checks above explain problems in config.json's own terms; the loader's validation of
  // .sprig headers is run as well, so that whatever pack accepts, open accepts too.
  SPRIG_RETURN_IF_ERROR(ValidateConfig(config, source));
  return config;
}

Result<ModelConfig> ReadConfigFile(const std::string& path) {
  SPRIG_ASSIGN_OR_RETURN(std::string text,
                         internal::ReadTextFile(path, kMaxConfigFileBytes, "config"));
  return ParseConfig(text, path);
}

}  // namespace sprig::convert
