// Self-attention: rotary positions and scaled dot-product attention over grouped key/value
// heads, for a batch of independent sequences or one sequence continued from its cache.
#include <cmath>

#include "transformer/transformer.h"

namespace sprig::transformer {

void RopeTable(size_t position, size_t head_dim, double base, float* cos, float* sin) {
  const size_t half = head_dim / 2;
  for (size_t i = 0; i < half; ++i) {
    // The reference forms base^(-2i/d) and the product with t in double, then rounds cos and
    // sin to the compute type; rounding the angle to float first would lose ~1e-4 rad at
    // positions in the thousands.
    const double inv_freq =
        std::pow(base, -2.0 * static_cast<double>(i) / static_cast<double>(head_dim));
    const double angle = static_cast<double>(position) * inv_freq;
    cos[i] = static_cast<float>(std::cos(angle));
    sin[i] = static_cast<float>(std::sin(angle));
  }
}

void ApplyRope(float* x, size_t head_dim, const float* cos, const float* sin) {
  const size_t half = head_dim / 2;
  for (size_t i = 0; i < half; ++i) {
    const float lo = x[i], hi = x[i + half];
    x[i] = lo * cos[i] - hi * sin[i];
    x[i + half] = hi * cos[i] + lo * sin[i];
  }
}

// ws.q holds [sequences · length, d] queries whose token t has position start + t. keys and
// values hold, laid out as `layout` says, the head_dim entries of every kv head for positions
// 0 .. start + length − 1 (keys already rotated). Writes the concatenated head outputs to
// ws.attn.
void TransformerNetwork::Attend(const layers::Exec& exec, TransformerWorkspace& ws,
                                size_t sequences, size_t length, size_t start, const float* keys,
                                const float* values, const KvLayout& layout) const {
  const kernels::KernelTable& k = *exec.k;
  const size_t heads = config_->n_heads, hd = head_dim_, d = d_;
  const size_t total = start + length;
  const float scale = std::sqrt(static_cast<float>(hd));
  ws.attn.resize(sequences * length * d);
  // One task per (sequence, head): each output element is computed by exactly one task in a
  // fixed order, so the result does not depend on the thread count.
  exec.ParallelFor(sequences * heads, [&](size_t task, layers::Scratch& s) {
    const size_t seq = task / heads, h = task % heads, g = h / group_;
    // The head's keys and values: [total, hd] matrices.
    const float* head_keys = keys + seq * layout.sequence + g * layout.head;
    const float* head_values = values + seq * layout.sequence + g * layout.head;
    if (s.attention_scores.size() < total) s.attention_scores.resize(total);
    float* scores = s.attention_scores.data();
    s.attention_values.resize(total);
    for (size_t j = 0; j < total; ++j) s.attention_values[j] = head_values + j * hd;
    for (size_t t = 0; t < length; ++t) {
      const size_t row = seq * length + t;
      const float* q = ws.q.data() + row * d + h * hd;
      // Causal: position p sees keys 0..p; otherwise every key of the sequence.
      const size_t visible = config_->causal ? start + t + 1 : total;
      // scores = K q over the visible positions: the matrix-vector kernel sums several keys'
      // products at once, each with its own accumulators, so a score does not depend on how
      // many positions are visible.
      k.f32.gemv(head_keys, q, nullptr, scores, visible, hd);
      for (size_t j = 0; j < visible; ++j) scores[j] /= scale;
      k.softmax(scores, visible);
      float* out = ws.attn.data() + row * d + h * hd;
      for (size_t i = 0; i < hd; ++i) out[i] = 0.0f;
      // Equal to one axpy per position, in order, with the output kept in registers.
      k.f32.axpy_rows(scores, s.attention_values.data(), visible, out, hd);
    }
  });
}

}  // namespace sprig::transformer
