// The configuration of a sprig model: the families, layer kinds and fields that a config.json
// describes and a .sprig header stores. These are plain values (copyable, thread-safe to read).
// The meaning of each field is the model semantics (docs/model-semantics.md), the input
// contract (docs/input-contract.md) and the file format (schema/README.md).
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "sprig/export.h"

namespace sprig {

enum class Family : uint8_t { kStack, kTransformer };
enum class LayerKind : uint8_t { kDense, kTree, kExperts };
enum class TreeMode : uint8_t { kLeaf, kPath };
enum class Activation : uint8_t { kRelu, kGelu, kGeluTanh, kSilu };
enum class NormKind : uint8_t { kLayerNorm, kRmsNorm };
enum class Positions : uint8_t { kLearned, kRope, kNone };
enum class HeadKind : uint8_t { kLm, kClassifier, kNone };
enum class Pool : uint8_t { kMean, kFirst, kLast };
// Where a transformer block normalises: kPre, x + Attn(Norm1(x)) then x + FFN(Norm2(x)); kPost,
// Norm1(x + Attn(x)) then Norm2(x + FFN(x)) (docs/model-semantics.md).
enum class NormPosition : uint8_t { kPre, kPost };
// How an experts layer scores its router logits: kSoftmax chooses on softmax probabilities over
// all experts; kSigmoid on each expert's sigmoid; kSoftmaxChosen on the logits, weighting the
// chosen experts by a softmax over their logits only (docs/model-semantics.md).
enum class RouterScoring : uint8_t { kSoftmax, kSigmoid, kSoftmaxChosen };
// kByte: one token per UTF-8 byte (vocab_size 256). kSentencePiece: a SentencePiece vocabulary
// (BPE or unigram) stored in the file's tokenizer section.
enum class Tokenizer : uint8_t { kNone, kByte, kSentencePiece };

// Storage type of a tensor in a .sprig file. Compute is always float32.
enum class DType : uint8_t { kF32, kF16, kBF16, kI8 };

// One feed-forward entry of `layers`.
struct LayerConfig {
  LayerKind kind = LayerKind::kDense;
  TreeMode mode = TreeMode::kLeaf;  // tree only
  uint32_t width = 0;               // dense and experts: hidden units (per expert)
  uint32_t depth = 0;               // tree only
  uint32_t leaf_width = 0;          // tree, leaf mode: hidden units per leaf
  uint32_t experts = 0;             // experts only
  uint32_t top_k = 0;               // experts only
  bool renormalize = true;          // experts only
  RouterScoring router_scoring = RouterScoring::kSoftmax;  // experts only
  uint32_t shared_experts = 0;  // experts only: always-on experts added to the routed mixture
  uint32_t shared_width = 0;    // experts only: hidden units per shared expert (0 when none)
  bool shared_gate = false;     // experts only: shared experts scaled by sigmoid(gate · x + b)
  Activation activation = Activation::kRelu;
  bool gated = false;  // dense, tree leaf, experts
  bool bias = true;    // false: the layer has no bias tensors (all biases zero)
  uint32_t in = 0;     // input width (d_model in a transformer)
  uint32_t out = 0;    // output width (d_model in a transformer)
};

struct HeadConfig {
  HeadKind kind = HeadKind::kNone;
  uint32_t classes = 0;     // classifier only
  Pool pool = Pool::kMean;  // classifier only
  // lm only: a transform before the vocabulary projection, as masked-language-model heads
  // have: Norm(act(T x + t)) with `head.transform.*` and, when transform_norm, the model's norm
  // kind in `head.transform_norm.*`.
  bool transform = false;
  Activation transform_activation = Activation::kGelu;
  bool transform_norm = true;
  bool bias = false;  // lm only: a `head.bias` [vocab_size] added to the logits
};

// Which attention projections of a transformer block have a bias tensor.
struct ProjectionBias {
  bool q = true, k = true, v = true, o = true;
  bool all() const { return q && k && v && o; }
  bool none() const { return !q && !k && !v && !o; }
};

struct SPRIG_API ModelConfig {
  Family family = Family::kStack;
  std::string name;
  std::string description;
  std::vector<LayerConfig> layers;

  // Stack family.
  uint32_t input_dim = 0;

  // Transformer family.
  uint32_t vocab_size = 0;
  uint32_t d_model = 0;
  uint32_t n_heads = 0;
  uint32_t n_kv_heads = 0;  // 0 in a parsed config means "same as n_heads" until validated
  uint32_t max_seq = 0;
  NormKind norm = NormKind::kLayerNorm;
  float norm_eps = 1e-5f;
  Positions positions = Positions::kLearned;
  float rope_base = 10000.0f;
  bool causal = true;
  bool tie_embeddings = false;
  ProjectionBias attn_bias;
  NormPosition norm_position = NormPosition::kPre;
  bool final_norm = true;   // `norm.*` applied before the head
  bool embed_norm = false;  // `embed_norm.*` applied to token + position embeddings
  Tokenizer tokenizer = Tokenizer::kNone;
  HeadConfig head;

  // Width of the model's output per row or token.
  uint32_t output_dim() const;
};

// Names used in config.json, error messages and inspect output.
SPRIG_API const char* ToString(Family v);
SPRIG_API const char* ToString(LayerKind v);
SPRIG_API const char* ToString(TreeMode v);
SPRIG_API const char* ToString(Activation v);
SPRIG_API const char* ToString(NormKind v);
SPRIG_API const char* ToString(Positions v);
SPRIG_API const char* ToString(HeadKind v);
SPRIG_API const char* ToString(Pool v);
SPRIG_API const char* ToString(NormPosition v);
SPRIG_API const char* ToString(RouterScoring v);
SPRIG_API const char* ToString(Tokenizer v);
SPRIG_API const char* ToString(DType v);

// Bytes per element of a storage type (i8 counts its values only, not its scales).
SPRIG_API size_t DTypeSize(DType v);

}  // namespace sprig
