// Equality of config values, field by field (floats compared exactly). Used to check that a
// config survives ConfigToJson → ParseConfig, and a .sprig header round trip, unchanged.
#pragma once

#include "sprig/config.h"

namespace sprig {

inline bool operator==(const LayerConfig& a, const LayerConfig& b) {
  return a.kind == b.kind && a.mode == b.mode && a.width == b.width && a.depth == b.depth &&
         a.leaf_width == b.leaf_width && a.experts == b.experts && a.top_k == b.top_k &&
         a.renormalize == b.renormalize && a.activation == b.activation && a.gated == b.gated &&
         a.bias == b.bias && a.in == b.in && a.out == b.out &&
         a.router_scoring == b.router_scoring && a.shared_experts == b.shared_experts &&
         a.shared_width == b.shared_width && a.shared_gate == b.shared_gate;
}

inline bool operator==(const HeadConfig& a, const HeadConfig& b) {
  return a.kind == b.kind && a.classes == b.classes && a.pool == b.pool &&
         a.transform == b.transform && a.transform_activation == b.transform_activation &&
         a.transform_norm == b.transform_norm && a.bias == b.bias;
}

inline bool operator==(const ProjectionBias& a, const ProjectionBias& b) {
  return a.q == b.q && a.k == b.k && a.v == b.v && a.o == b.o;
}

inline bool operator==(const ModelConfig& a, const ModelConfig& b) {
  return a.family == b.family && a.name == b.name && a.description == b.description &&
         a.layers == b.layers && a.input_dim == b.input_dim && a.vocab_size == b.vocab_size &&
         a.d_model == b.d_model && a.n_heads == b.n_heads && a.n_kv_heads == b.n_kv_heads &&
         a.max_seq == b.max_seq && a.norm == b.norm && a.norm_eps == b.norm_eps &&
         a.positions == b.positions && a.rope_base == b.rope_base && a.causal == b.causal &&
         a.tie_embeddings == b.tie_embeddings && a.attn_bias == b.attn_bias &&
         a.norm_position == b.norm_position && a.final_norm == b.final_norm &&
         a.embed_norm == b.embed_norm && a.tokenizer == b.tokenizer && a.head == b.head;
}

}  // namespace sprig
