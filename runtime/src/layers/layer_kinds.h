// The concrete feed-forward layers. Semantics: the model definition in README.md ("Model
// semantics"); the PyTorch reference in converter/python/sprig_torch/layers.py is the
// executable form the tests compare against.
#pragma once

#include "layers/binder.h"
#include "layers/feed_forward.h"
#include "layers/grouping.h"
#include "layers/mlp.h"

namespace sprig::layers {

class DenseLayer final : public FeedForward {
 public:
  DenseLayer(const Binder& b, const LayerConfig& c);
  void Forward(const Exec& e, const float* x, size_t rows, float* y,
               int32_t* routes) const override;

 private:
  MlpView mlp_;
};

// Hard descent to one leaf MLP (fast feedforward inference).
class LeafTreeLayer final : public FeedForward {
 public:
  LeafTreeLayer(const Binder& b, const LayerConfig& c);
  void Forward(const Exec& e, const float* x, size_t rows, float* y,
               int32_t* routes) const override;
  size_t route_width() const override { return 1; }
  uint64_t unit_count() const override { return uint64_t{1} << config_.depth; }

 private:
  uint32_t Descend(const kernels::KernelTable& k, const float* x, bool prefetch) const;
  MlpView Leaf(uint64_t leaf) const {
    return MlpOf(binder_, leaves_, leaf, config_, config_.leaf_width);
  }

  Binder binder_;
  LayerConfig config_;
  MatrixView nodes_;
  const float* node_bias_ = nullptr;
  MlpTensors leaves_;
};

// Every neuron on the root-to-leaf path contributes (conditional matrix multiplication form).
class PathTreeLayer final : public FeedForward {
 public:
  PathTreeLayer(const Binder& b, const LayerConfig& c);
  void Forward(const Exec& e, const float* x, size_t rows, float* y,
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
  // The pre-activation w·x + b of a neuron.
  float Logit(const kernels::KernelTable& k, const Neuron& n, const float* x) const;
  // y += act(a)·out.
  void AddOutput(const kernels::KernelTable& k, const Neuron& n, float a, float* y) const;
  // Starts loading a neuron's weight row, or its output row (both with their scales).
  void PrefetchWeight(const Neuron& n) const;
  void PrefetchOut(const Neuron& n) const;
  void ForwardOne(const kernels::KernelTable& k, const Exec& e, const float* x, float* y,
                  int32_t* routes) const;

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

// Top-k mixture of experts with a softmax router.
class ExpertsLayer final : public FeedForward {
 public:
  ExpertsLayer(const Binder& b, const LayerConfig& c);
  void Forward(const Exec& e, const float* x, size_t rows, float* y,
               int32_t* routes) const override;
  size_t route_width() const override { return config_.top_k; }
  uint64_t unit_count() const override { return config_.experts; }

 private:
  // Chooses top_k experts for one row from its router logits (overwritten with probabilities);
  // writes indices and mixing weights in descending weight order, ties to the lower index.
  void Choose(const kernels::KernelTable& k, float* logits, int32_t* chosen, float* weights) const;
  static constexpr size_t kMaxExpertsOnStack = 256;
  MlpView Expert(uint64_t j) const { return MlpOf(binder_, experts_, j, config_, config_.width); }

  Binder binder_;
  LayerConfig config_;
  MatrixView router_;
  const float* router_bias_ = nullptr;
  MlpTensors experts_;
};

}  // namespace sprig::layers
