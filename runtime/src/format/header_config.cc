#include "format/header_config.h"

namespace sprig::format {
namespace {

// Maps a stored enum to ours, refusing values beyond `last` (a file from a newer writer, or a
// damaged one that still passed the checksum).
template <typename Ours, typename Theirs>
bool MapEnum(Theirs v, Ours last, Ours* out) {
  const auto raw = static_cast<uint8_t>(v);
  if (raw > static_cast<uint8_t>(last)) return false;
  *out = static_cast<Ours>(raw);
  return true;
}

}  // namespace

flatbuffers::Offset<fb::Config> BuildConfig(flatbuffers::FlatBufferBuilder& b,
                                            const ModelConfig& c) {
  std::vector<flatbuffers::Offset<fb::Layer>> layers;
  for (const LayerConfig& l : c.layers) {
    fb::LayerBuilder lb(b);
    lb.add_kind(static_cast<fb::LayerKind>(l.kind));
    lb.add_mode(static_cast<fb::TreeMode>(l.mode));
    lb.add_width(l.width);
    lb.add_depth(l.depth);
    lb.add_leaf_width(l.leaf_width);
    lb.add_experts(l.experts);
    lb.add_top_k(l.top_k);
    lb.add_renormalize(l.renormalize);
    lb.add_activation(static_cast<fb::Activation>(l.activation));
    lb.add_gated(l.gated);
    lb.add_bias(l.bias);
    lb.add_in_dim(l.in);
    lb.add_out_dim(l.out);
    lb.add_router_scoring(static_cast<fb::RouterScoring>(l.router_scoring));
    lb.add_shared_experts(l.shared_experts);
    lb.add_shared_width(l.shared_width);
    lb.add_shared_gate(l.shared_gate);
    layers.push_back(lb.Finish());
  }
  auto layers_vec = b.CreateVector(layers);
  auto name = b.CreateString(c.name);
  auto description = b.CreateString(c.description);
  fb::ConfigBuilder cb(b);
  cb.add_family(static_cast<fb::Family>(c.family));
  cb.add_name(name);
  cb.add_description(description);
  cb.add_layers(layers_vec);
  cb.add_input_dim(c.input_dim);
  cb.add_vocab_size(c.vocab_size);
  cb.add_d_model(c.d_model);
  cb.add_n_heads(c.n_heads);
  cb.add_n_kv_heads(c.n_kv_heads);
  cb.add_max_seq(c.max_seq);
  cb.add_norm(static_cast<fb::NormKind>(c.norm));
  cb.add_norm_eps(c.norm_eps);
  cb.add_positions(static_cast<fb::Positions>(c.positions));
  cb.add_rope_base(c.rope_base);
  cb.add_causal(c.causal);
  cb.add_tie_embeddings(c.tie_embeddings);
  // Readers that predate the per-projection flags see the old field: true only when all four.
  cb.add_attn_bias(c.attn_bias.all());
  cb.add_tokenizer(static_cast<fb::Tokenizer>(c.tokenizer));
  cb.add_head_kind(static_cast<fb::HeadKind>(c.head.kind));
  cb.add_head_classes(c.head.classes);
  cb.add_head_pool(static_cast<fb::Pool>(c.head.pool));
  cb.add_attn_bias_q(c.attn_bias.q);
  cb.add_attn_bias_k(c.attn_bias.k);
  cb.add_attn_bias_v(c.attn_bias.v);
  cb.add_attn_bias_o(c.attn_bias.o);
  cb.add_norm_position(static_cast<fb::NormPosition>(c.norm_position));
  cb.add_final_norm(c.final_norm);
  cb.add_embed_norm(c.embed_norm);
  cb.add_head_transform(c.head.transform);
  cb.add_head_transform_activation(static_cast<fb::Activation>(c.head.transform_activation));
  cb.add_head_transform_norm(c.head.transform_norm);
  cb.add_head_bias(c.head.bias);
  return cb.Finish();
}

uint32_t RequiredFormatVersion(const ModelConfig& config) {
  if (config.norm_position == NormPosition::kPost) return 2;
  for (const LayerConfig& layer : config.layers) {
    if (layer.kind == LayerKind::kExperts && layer.router_scoring != RouterScoring::kSoftmax) {
      return 2;
    }
  }
  return 1;
}

Result<ModelConfig> ReadConfig(const fb::Config& f, const std::string& source) {
  ModelConfig c;
  const auto bad = [&](const char* field) {
    return Status::Corruption(source + ": the header's config field " + std::string(field) +
                              " holds a value this build does not know");
  };
  if (!MapEnum(f.family(), Family::kTransformer, &c.family)) return bad("family");
  if (f.name()) c.name = f.name()->str();
  if (f.description()) c.description = f.description()->str();
  if (f.layers()) {
    for (const fb::Layer* fl : *f.layers()) {
      LayerConfig l;
      if (!MapEnum(fl->kind(), LayerKind::kExperts, &l.kind)) return bad("layers.kind");
      if (!MapEnum(fl->mode(), TreeMode::kPath, &l.mode)) return bad("layers.mode");
      if (!MapEnum(fl->activation(), Activation::kSilu, &l.activation)) {
        return bad("layers.activation");
      }
      l.width = fl->width();
      l.depth = fl->depth();
      l.leaf_width = fl->leaf_width();
      l.experts = fl->experts();
      l.top_k = fl->top_k();
      l.renormalize = fl->renormalize();
      l.gated = fl->gated();
      l.bias = fl->bias();
      l.in = fl->in_dim();
      l.out = fl->out_dim();
      if (!MapEnum(fl->router_scoring(), RouterScoring::kSoftmaxChosen, &l.router_scoring)) {
        return bad("layers.router_scoring");
      }
      l.shared_experts = fl->shared_experts();
      l.shared_width = fl->shared_width();
      l.shared_gate = fl->shared_gate();
      c.layers.push_back(l);
    }
  }
  c.input_dim = f.input_dim();
  c.vocab_size = f.vocab_size();
  c.d_model = f.d_model();
  c.n_heads = f.n_heads();
  c.n_kv_heads = f.n_kv_heads();
  c.max_seq = f.max_seq();
  if (!MapEnum(f.norm(), NormKind::kRmsNorm, &c.norm)) return bad("norm");
  c.norm_eps = f.norm_eps();
  if (!MapEnum(f.positions(), Positions::kNone, &c.positions)) return bad("positions");
  c.rope_base = f.rope_base();
  c.causal = f.causal();
  c.tie_embeddings = f.tie_embeddings();
  c.attn_bias = {f.attn_bias_q(), f.attn_bias_k(), f.attn_bias_v(), f.attn_bias_o()};
  // attn_bias is written true exactly when all four flags are. A file from before the flags
  // reads them as their default, true: with attn_bias false it then means no bias at all,
  // a combination no newer writer produces.
  if (f.attn_bias() && !c.attn_bias.all()) {
    return Status::Corruption(source +
                              ": the header's config field attn_bias is true but not every "
                              "attn_bias_q/k/v/o flag is");
  }
  if (!f.attn_bias() && c.attn_bias.all()) c.attn_bias = {false, false, false, false};
  if (!MapEnum(f.norm_position(), NormPosition::kPost, &c.norm_position)) {
    return bad("norm_position");
  }
  c.final_norm = f.final_norm();
  c.embed_norm = f.embed_norm();
  if (!MapEnum(f.tokenizer(), Tokenizer::kSentencePiece, &c.tokenizer)) return bad("tokenizer");
  if (!MapEnum(f.head_kind(), HeadKind::kNone, &c.head.kind)) return bad("head_kind");
  c.head.classes = f.head_classes();
  if (!MapEnum(f.head_pool(), Pool::kLast, &c.head.pool)) return bad("head_pool");
  c.head.transform = f.head_transform();
  if (!MapEnum(f.head_transform_activation(), Activation::kSilu, &c.head.transform_activation)) {
    return bad("head_transform_activation");
  }
  c.head.transform_norm = f.head_transform_norm();
  c.head.bias = f.head_bias();
  return c;
}

}  // namespace sprig::format
