// The transformer family (model semantics: docs/model-semantics.md; the executable
// reference is converter/python/sprig_torch/models.py): token embedding, optional learned
// positions, an optional norm on the embeddings, pre- or post-norm blocks of attention and a
// feed-forward layer, the optional final norm and a head (an lm head optionally with a
// transform before the vocabulary projection).
//
// A TransformerNetwork holds pointers into a model's mapping and its bound feed-forward layers;
// it is bound once when the model opens, immutable, and shared by any number of threads.
// Per-call memory (activations, keys and values) belongs to the session's TransformerWorkspace
// and KvCache.
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <vector>

#include "layers/feed_forward.h"
#include "layers/matrix_view.h"
#include "network/network.h"
#include "sprig/config.h"
#include "sprig/status.h"

namespace sprig::transformer {

// y = W x + b over rows; W is [out, in] in the file.
struct Linear {
  layers::MatrixView weight;
  const float* bias = nullptr;  // null: no bias
};

// layernorm (weight and bias) or rmsnorm (weight only); always float32 in the file.
struct Norm {
  const float* weight = nullptr;
  const float* bias = nullptr;
};

struct Block {
  Norm norm1, norm2;
  Linear q, k, v, o;
  const layers::FeedForward* ffn = nullptr;
};

// Growable activations for one call; reused between calls.
struct TransformerWorkspace final : network::Workspace {
  std::vector<float> x, normed, q, k, v, attn, proj, ffn, out;
  std::vector<float> rope_cos, rope_sin;
  // Without a cache: the batch's keys and values laid out per kv head as the cache lays them
  // out (network::KvCache), [sequences, kv heads, length, head_dim].
  std::vector<float> head_keys, head_values;
};

// Fills cos[i], sin[i] (i < head_dim / 2) for a token at `position`: angle
// position · base^(−2i/head_dim), computed in double and rounded once to float, as the
// reference does.
void RopeTable(size_t position, size_t head_dim, double base, float* cos, float* sin);

// Rotates one head vector in place in rotate-half form: for pair (i, i + head_dim/2),
// x'_i = x_i cos − x_{i+h} sin, x'_{i+h} = x_{i+h} cos + x_i sin.
void ApplyRope(float* x, size_t head_dim, const float* cos, const float* sin);

class TransformerNetwork final : public network::Network, public network::Decoder {
 public:
  // Binds a transformer model's tensors and feed-forward layers (no weight is read). Every
  // storage type is read: hot matrices through the kernels, embedding rows converted to
  // float32. Corruption when a tensor the attention or head reads is not stored whole in the
  // hot section, or a bias or norm weight is not float32. `file` must outlive the network.
  static Result<std::unique_ptr<network::Network>> Bind(const format::ModelFile& file);

  std::unique_ptr<network::Workspace> NewWorkspace() const override;

  // Runs input.sequences sequences of input.length tokens each, independently and from
  // position 0 (no cache). `output` receives [sequences, length, V] (lm), [sequences, C]
  // (classifier) or [sequences, length, D] (none). The recorder gets one routes entry per
  // routed block with [sequences·length, width] choices and one trace entry per block (see
  // LayerTrace).
  void Forward(const layers::Exec& exec, network::Workspace& ws, const network::Input& input,
               float* output, network::Recorder& recorder) const override;

  const network::Decoder* decoder() const override { return this; }

  // Appends `count` tokens of one sequence to `cache` at positions cache.length onwards and
  // writes the lm logits of the last of them to `logits` (V floats) when it is not null. The
  // session has checked that the tokens fit in max_seq and that the model is causal with an
  // lm head.
  void Append(const layers::Exec& exec, network::Workspace& ws, network::KvCache& cache,
              const int32_t* tokens, size_t count, float* logits) const override;

 private:
  explicit TransformerNetwork(const ModelConfig& config) : config_(&config) {}
  // Embeds and runs every block over rows = sequences · length tokens whose positions start at
  // `start`; leaves the hidden states (before the final norm) in ws.x.
  void RunBlocks(const layers::Exec& exec, TransformerWorkspace& ws, const int32_t* tokens,
                 size_t sequences, size_t length, size_t start, network::KvCache* cache,
                 network::Recorder& recorder) const;
  void Embed(const layers::Exec& exec, const int32_t* tokens, size_t rows, size_t length,
             size_t start, float* x) const;
  // Where position p of kv head g of sequence s starts in a keys or values array:
  // s·sequence + g·head + p·head_dim floats (a head's positions are contiguous).
  struct KvLayout {
    size_t sequence, head;
  };
  void Attend(const layers::Exec& exec, TransformerWorkspace& ws, size_t sequences, size_t length,
              size_t start, const float* keys, const float* values, const KvLayout& layout) const;
  // Gives every block's cache arrays room for `positions` positions, keeping those held.
  void Reserve(network::KvCache& cache, size_t positions) const;
  void NormRows(const layers::Exec& exec, const Norm& n, const float* x, size_t rows,
                float* y) const;
  void Head(const layers::Exec& exec, TransformerWorkspace& ws, size_t sequences, size_t length,
            float* output) const;
  // The lm logits [rows, V] of hidden rows h (already through the final norm, if any); uses
  // ws.proj and ws.out.
  void LmLogits(const layers::Exec& exec, TransformerWorkspace& ws, const float* h, size_t rows,
                float* logits) const;

  const ModelConfig* config_ = nullptr;
  size_t d_ = 0, head_dim_ = 0, kv_dim_ = 0, group_ = 1;
  layers::MatrixView embed_, pos_, lm_head_;
  const float* lm_bias_ = nullptr;  // null: the lm head has no bias
  bool has_pos_ = false;
  Linear classifier_;
  Linear head_transform_;
  Norm final_norm_, embed_norm_, head_transform_norm_;
  std::vector<Block> blocks_;
};

}  // namespace sprig::transformer
