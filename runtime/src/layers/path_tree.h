// A tree in path mode: the d + 1 neurons on the root-to-leaf path each add act(a)·out[n].
// Semantics: docs/model-semantics.md; the PyTorch reference in
// converter/python/sprig_torch/layers.py is the executable form the tests compare against.
#pragma once

#include <cstddef>
#include <cstdint>

#include "format/model_file.h"
#include "kernels/kernels.h"
#include "layers/binder.h"
#include "layers/exec.h"
#include "layers/feed_forward.h"
#include "layers/quantize.h"
#include "sprig/config.h"

namespace sprig::layers {

// Every neuron on the root-to-leaf path contributes (conditional matrix multiplication form).
class PathTreeLayer final : public FeedForward {
 public:
  PathTreeLayer(const Binder& binder, const LayerConfig& config);
  void Forward(const Exec& exec, const float* x, size_t rows, float* y,
               int32_t* routes) const override;
  size_t route_width() const override { return 1; }
  uint64_t unit_count() const override { return uint64_t{1} << config_.depth; }

 private:
  // Where one neuron's data lies: its weight row, bias, output row and (i8) their scales.
  // Located once per neuron, as all of them share one record.
  struct Neuron {
    static constexpr uint64_t kHot = ~uint64_t{0};
    uint64_t record = kHot;  // the record holding the neuron, or kHot for a hot row
    const uint8_t* weight = nullptr;
    const float* weight_scale = nullptr;
    const float* bias = nullptr;  // null: no bias. Read when the logit is formed, not here.
    const uint8_t* out = nullptr;
    const float* out_scale = nullptr;
  };
  Neuron Locate(uint64_t node) const;
  Neuron LocateEach(uint64_t node) const;
  // The pre-activation w·x + b of a neuron; with `quantized` (compute mode "i8", i8-stored
  // weights: x quantised once) through the int8 kernels.
  float Logit(const kernels::KernelTable& k, const Neuron& neuron, const float* x,
              const QuantizedRows* quantized) const;
  // Starts loading a neuron's weight row, or its output row (both with their scales).
  void PrefetchWeight(const Neuron& neuron) const;
  void PrefetchOut(const Neuron& neuron) const;
  void ForwardOne(const kernels::KernelTable& k, const Exec& exec, const float* x, float* y,
                  int32_t* routes, const QuantizedRows* quantized) const;
  // y = out_bias (or 0).
  void InitOutput(float* y) const;
  // Batches, a tile of rows at a time (see Forward): the descent one level at a time over the
  // rows grouped by node, then the sums.
  // `leaves` may be null; `quantized` (compute mode "i8"): the tile's rows quantised, or null.
  void ForwardTile(const kernels::KernelTable& k, const float* x, size_t rows, float* y,
                   int32_t* leaves, const QuantizedRows* quantized, Scratch& scratch) const;
  void DescendLevel(const kernels::KernelTable& k, const float* x, size_t rows, uint32_t level,
                    const QuantizedRows* quantized, Scratch& scratch) const;
  void SumTile(const kernels::KernelTable& k, size_t rows, float* y, Scratch& scratch) const;
  // Marks the records of every node on the rows' paths (given by their leaves).
  void TouchPaths(const Exec& exec, const int32_t* leaves, size_t rows) const;

  Binder binder_;
  LayerConfig config_;
  const format::TensorInfo* weight_ = nullptr;
  const format::TensorInfo* bias_ = nullptr;
  const format::TensorInfo* out_rows_ = nullptr;
  const float* out_bias_ = nullptr;
  // nodes.weight, nodes.bias and nodes.out share hot rows and records (as the packer writes
  // them), so Locate finds a neuron's record once for all three.
  bool shared_location_ = false;
};

}  // namespace sprig::layers
