// A tree in leaf mode: d node decisions, then one leaf MLP.
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
#include "layers/quantize.h"
#include "sprig/config.h"

namespace sprig::layers {

// Hard descent to one leaf MLP (fast feedforward inference).
class LeafTreeLayer final : public FeedForward {
 public:
  LeafTreeLayer(const Binder& binder, const LayerConfig& config);
  void Forward(const Exec& exec, const float* x, size_t rows, float* y,
               int32_t* routes) const override;
  size_t route_width() const override { return 1; }
  uint64_t unit_count() const override { return uint64_t{1} << config_.depth; }

 private:
  // The leaf one row reaches (the single-row form, which prefetches what comes next). With
  // `quantized` (the row quantised with `scale`, compute mode "i8", i8-stored nodes) the logits
  // use the int8 kernels; otherwise x in float.
  uint32_t Descend(const kernels::KernelTable& k, const float* x, const int8_t* quantized,
                   float scale) const;
  // A batch's tile of rows: leaves[r] for r < rows. `quantized` (compute mode "i8", i8 nodes):
  // the tile's rows quantised, or null.
  void DescendTile(const kernels::KernelTable& k, const float* x, size_t rows, uint32_t* leaves,
                   const QuantizedRows* quantized, Scratch& scratch) const;
  MlpView Leaf(uint64_t leaf) const {
    return MlpOf(binder_, leaves_, leaf, config_, config_.leaf_width);
  }

  Binder binder_;
  LayerConfig config_;
  MatrixView nodes_;
  const float* node_bias_ = nullptr;
  MlpTensors leaves_;
};

}  // namespace sprig::layers
