// A dense feed-forward layer: one MLP over every row.
// Semantics: docs/model-semantics.md; the PyTorch reference in
// converter/python/sprig_torch/layers.py is the executable form the tests compare against.
#pragma once

#include <cstddef>
#include <cstdint>

#include "layers/binder.h"
#include "layers/exec.h"
#include "layers/feed_forward.h"
#include "layers/mlp.h"
#include "sprig/config.h"

namespace sprig::layers {

class DenseLayer final : public FeedForward {
 public:
  DenseLayer(const Binder& binder, const LayerConfig& config);
  void Forward(const Exec& exec, const float* x, size_t rows, float* y,
               int32_t* routes) const override;

 private:
  MlpView mlp_;
};

}  // namespace sprig::layers
