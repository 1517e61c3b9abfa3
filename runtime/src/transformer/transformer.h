// The transformer family (model semantics: README.md "Model semantics"; the executable
// reference is converter/python/sprig_torch/models.py): token embedding, optional learned
// positions, pre-norm blocks of attention and a feed-forward layer, the final norm and a head.
//
// A Transformer holds pointers into a Model's mapping and its bound feed-forward layers; it is
// immutable and may be shared by any number of threads. Per-call memory (activations, keys and
// values) belongs to the caller's Workspace and KvCache.
#pragma once

#include <cstddef>
#include <cstdint>
#include <vector>

#include "layers/feed_forward.h"
#include "layers/matrix_view.h"
#include "sprig/model.h"
#include "sprig/session.h"
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

// Keys and values of one sequence, per block: [positions, kv_dim] each, grown as tokens come.
struct KvCache {
  std::vector<std::vector<float>> keys, values;
  size_t length = 0;  // positions held
  void Clear() {
    for (auto& k : keys) k.clear();
    for (auto& v : values) v.clear();
    length = 0;
  }
};

// Growable activations for one call; reused between calls.
struct Workspace {
  std::vector<float> x, normed, q, k, v, attn, proj, ffn, out;
  std::vector<float> rope_cos, rope_sin;
};

// Fills cos[i], sin[i] (i < head_dim / 2) for a token at `position`: angle
// position · base^(−2i/head_dim), computed in double and rounded once to float, as the
// reference does.
void RopeTable(size_t position, size_t head_dim, double base, float* cos, float* sin);

// Rotates one head vector in place in rotate-half form: for pair (i, i + head_dim/2),
// x'_i = x_i cos − x_{i+h} sin, x'_{i+h} = x_{i+h} cos + x_i sin.
void ApplyRope(float* x, size_t head_dim, const float* cos, const float* sin);

class Transformer {
 public:
  // Binds a transformer model's tensors (no weight is read). NotSupported for storage types
  // the attention kernels cannot read (i8).
  static Result<Transformer> Bind(const Model& model);

  const ModelConfig& config() const { return *config_; }
  size_t head_dim() const { return head_dim_; }
  size_t kv_dim() const { return kv_dim_; }
  size_t blocks() const { return blocks_.size(); }

  // Runs `sequences` sequences of `length` tokens each, independently and from position 0
  // (no cache). `output` receives [sequences, length, V] (lm), [sequences, C] (classifier) or
  // [sequences, length, D] (none). When `routes` is not null, routes->layers gets one entry per
  // routed block with [sequences·length, width] choices; `trace`, when not null, one entry per
  // block (see LayerTrace). Tokens must already be checked.
  void Forward(const layers::Exec& exec, Workspace& ws, const int32_t* tokens, size_t sequences,
               size_t length, float* output, Routes* routes,
               std::vector<LayerTrace>* trace = nullptr) const;

  // Appends `count` tokens of one sequence to `cache` at positions cache.length onwards and
  // writes the lm logits of the last of them to `logits` (V floats) when it is not null. The
  // caller checks that the tokens fit in max_seq and that the model is causal with an lm head.
  void Append(const layers::Exec& exec, Workspace& ws, KvCache& cache, const int32_t* tokens,
              size_t count, float* logits) const;

 private:
  Transformer() = default;
  // Embeds and runs every block over rows = sequences · length tokens whose positions start at
  // `start`; leaves the hidden states (before the final norm) in ws.x.
  void RunBlocks(const layers::Exec& exec, Workspace& ws, const int32_t* tokens, size_t sequences,
                 size_t length, size_t start, KvCache* cache, Routes* routes,
                 std::vector<LayerTrace>* trace = nullptr) const;
  void Embed(const layers::Exec& exec, const int32_t* tokens, size_t rows, size_t length,
             size_t start, float* x) const;
  void Attend(const layers::Exec& exec, Workspace& ws, size_t sequences, size_t length,
              size_t start, const float* keys, const float* values, size_t sequence_stride) const;
  void NormRows(const layers::Exec& exec, const Norm& n, const float* x, size_t rows,
                float* y) const;
  void Head(const layers::Exec& exec, Workspace& ws, size_t sequences, size_t length,
            float* output) const;

  const ModelConfig* config_ = nullptr;
  size_t d_ = 0, head_dim_ = 0, kv_dim_ = 0, group_ = 1;
  layers::MatrixView embed_, pos_, lm_head_;
  bool has_pos_ = false;
  Linear classifier_;
  Norm final_norm_;
  std::vector<Block> blocks_;
};

}  // namespace sprig::transformer
