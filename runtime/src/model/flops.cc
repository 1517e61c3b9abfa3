#include "model/flops.h"

#include "model/tensor_spec.h"

namespace sprig {
namespace {

// An MLP of `width` units: fc1 (+ gate) and fc2, with or without biases.
uint64_t MlpParams(uint64_t width, uint64_t in, uint64_t out, bool gated, bool bias) {
  const uint64_t up = width * in + (bias ? width : 0);
  return up * (gated ? 2 : 1) + out * width + (bias ? out : 0);
}
uint64_t MlpFlops(uint64_t width, uint64_t in, uint64_t out, bool gated) {
  return 2 * width * in * (gated ? 2 : 1) + 2 * width * out;
}

}  // namespace

LayerCost CostOf(const LayerConfig& l) {
  LayerCost c;
  const uint64_t in = l.in, out = l.out;
  switch (l.kind) {
    case LayerKind::kDense:
      c.params = MlpParams(l.width, in, out, l.gated, l.bias);
      c.flops_per_token = MlpFlops(l.width, in, out, l.gated);
      c.dense_width = l.width;
      break;
    case LayerKind::kTree:
      if (l.mode == TreeMode::kLeaf) {
        const uint64_t leaves = uint64_t{1} << l.depth;
        c.params =
            (leaves - 1) * (in + 1) + leaves * MlpParams(l.leaf_width, in, out, l.gated, l.bias);
        c.flops_per_token = 2 * l.depth * in + MlpFlops(l.leaf_width, in, out, l.gated);
        c.dense_width = leaves * l.leaf_width;
        c.dense_flops_per_token = MlpFlops(c.dense_width, in, out, l.gated);
        return c;
      } else {
        const uint64_t neurons = (uint64_t{2} << l.depth) - 1;
        c.params = neurons * (in + 1 + out) + (l.bias ? out : 0);
        c.flops_per_token = (l.depth + 1) * 2 * (in + out);
        c.dense_width = neurons;
      }
      break;
    case LayerKind::kExperts:
      c.params = l.experts * (in + (l.bias ? 1 : 0)) +
                 l.experts * MlpParams(l.width, in, out, l.gated, l.bias) +
                 l.shared_experts * MlpParams(l.shared_width, in, out, l.gated, l.bias) +
                 (l.shared_gate ? in + (l.bias ? 1 : 0) : 0);
      // The router, the chosen experts, every shared expert and the shared gate's dot product.
      c.flops_per_token = 2 * l.experts * in + l.top_k * MlpFlops(l.width, in, out, l.gated) +
                          l.shared_experts * MlpFlops(l.shared_width, in, out, l.gated) +
                          (l.shared_gate ? 2 * in : 0);
      // The dense layer with equal units holds every routed and every shared expert's units;
      // like the router, the shared gate has no counterpart in it.
      c.dense_width = uint64_t{l.experts} * l.width + uint64_t{l.shared_experts} * l.shared_width;
      c.dense_flops_per_token = MlpFlops(c.dense_width, in, out, l.gated);
      return c;
  }
  c.dense_flops_per_token = MlpFlops(c.dense_width, in, out, false);
  if (l.kind == LayerKind::kDense) c.dense_flops_per_token = c.flops_per_token;
  return c;
}

ModelCost CostOf(const ModelConfig& config, uint64_t context) {
  ModelCost m;
  for (const LayerConfig& l : config.layers) {
    const LayerCost c = CostOf(l);
    m.ffn_flops += c.flops_per_token;
    m.ffn_dense_flops += c.dense_flops_per_token;
  }
  if (config.family == Family::kTransformer) {
    const uint64_t d = config.d_model, v = config.vocab_size;
    const uint64_t kv_rows = config.n_heads ? d / config.n_heads * config.n_kv_heads : 0;
    const uint64_t proj = 2 * d * (d + 2 * kv_rows + d);
    const uint64_t attend = 2 * 2 * context * d;  // q·k and the weighted sum of v
    m.other_flops = config.layers.size() * (proj + attend);
    if (config.head.kind == HeadKind::kLm) {
      m.other_flops += 2 * v * d;
      if (config.head.transform) m.other_flops += 2 * d * d;
    } else if (config.head.kind == HeadKind::kClassifier) {
      m.other_flops += 2 * uint64_t{config.head.classes} * d;
    }
  }
  for (const TensorSpec& t : ExpectedTensors(config)) m.params += ElementCount(t.shape);
  return m;
}

}  // namespace sprig
