// Top-k experts: a router scored by softmax, sigmoid or softmax over the chosen experts, the k
// best-scored experts' outputs mixed, plus optional always-on shared experts.
// Semantics: docs/model-semantics.md; the PyTorch reference in
// converter/python/sprig_torch/layers.py is the executable form the tests compare against.
#pragma once

#include <cstddef>
#include <cstdint>

#include "kernels/kernels.h"
#include "layers/binder.h"
#include "layers/exec.h"
#include "layers/feed_forward.h"
#include "layers/matrix_view.h"
#include "layers/mlp.h"
#include "sprig/config.h"

namespace sprig::layers {

// Top-k mixture of experts, with shared experts added to every row when the layer has them.
class ExpertsLayer final : public FeedForward {
 public:
  ExpertsLayer(const Binder& binder, const LayerConfig& config);
  void Forward(const Exec& exec, const float* x, size_t rows, float* y,
               int32_t* routes) const override;
  size_t route_width() const override { return config_.top_k; }
  uint64_t unit_count() const override { return config_.experts; }

 private:
  // Chooses top_k experts for one row from its router logits (overwritten with probabilities
  // under softmax scoring); writes indices and mixing weights in descending weight order, ties
  // to the lower index.
  void Choose(const kernels::KernelTable& k, float* logits, int32_t* chosen, float* weights) const;
  // Adds the shared experts to the `count` rows of y: y += g(x) * sum_s shared_s(x), `shared`
  // holding each shared expert's output on x, [shared_experts, count, out].
  void AddShared(const Exec& exec, const float* x, size_t count, const float* shared,
                 float* y) const;
  static constexpr size_t kMaxExpertsOnStack = 256;
  MlpView Expert(uint64_t expert) const {
    return MlpOf(binder_, experts_, expert, config_, config_.width);
  }
  MlpView Shared(uint64_t expert) const {
    return MlpOf(binder_, shared_, expert, config_, config_.shared_width);
  }

  Binder binder_;
  LayerConfig config_;
  MatrixView router_;
  const float* router_bias_ = nullptr;
  MlpTensors experts_;
  MlpTensors shared_;       // unset when the layer has no shared experts
  MatrixView shared_gate_;  // data null when the shared experts have no gate
  float shared_gate_bias_ = 0.0f;
};

}  // namespace sprig::layers
