// The MLP every layer kind is built from: h = act(fc1 x + b1) (⊙ (gate…) when gated),
// y = fc2 h + b2. Leaves and experts are MLPs whose weights live in one record. Here: finding a
// layer's MLP tensors, viewing one unit's MLP, running it.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>

#include "format/model_file.h"
#include "kernels/kernels.h"
#include "layers/binder.h"
#include "layers/exec.h"
#include "layers/matrix_view.h"
#include "layers/quantize.h"
#include "sprig/config.h"

namespace sprig::layers {

struct MlpView {
  MatrixView fc1, gate, fc2;  // gate.data is null when ungated
  const float* fc1_bias = nullptr;
  const float* gate_bias = nullptr;
  const float* fc2_bias = nullptr;
  Activation activation = Activation::kRelu;
  size_t width = 0, in = 0, out = 0;
};

// The MLP of unit `unit` of a routed layer whose tensors are named `<group>.fc1.weight` etc.
// (group "leaves" or "experts"), or of a dense layer when `group` is empty (unit ignored).
struct MlpTensors {
  const format::TensorInfo *fc1 = nullptr, *fc1_bias = nullptr, *gate = nullptr,
                           *gate_bias = nullptr, *fc2 = nullptr, *fc2_bias = nullptr;
  bool stacked = false;
};
MlpTensors FindMlp(const Binder& binder, const std::string& group);
MlpView MlpOf(const Binder& binder, const MlpTensors& tensors, uint64_t unit,
              const LayerConfig& layer, size_t width);

// y[rows, out] = mlp(x[rows, in]). Uses scratch.hidden and scratch.gate. `vector_kernels` picks the
// matrix-vector kernels (only for calls of one row: the two kernel families round
// differently, and a row's result must not depend on how its batch was split).
// `int8_activations` (Exec::int8_activations) runs the i8-stored matrices on int8 activations
// (quantize.h): x quantised into scratch.quantized unless `quantized_x` holds it already (x's
// rows, quantised by QuantizeRows), the hidden activations into scratch.quantized_hidden.
void MlpForward(const kernels::KernelTable& k, const MlpView& mlp, const float* x, size_t rows,
                float* y, Scratch& scratch, bool vector_kernels, bool int8_activations,
                const QuantizedRows* quantized_x = nullptr);

// Hints the CPU to start loading a unit's weights: the first cache lines of each matrix and the
// first line of each of its next pages.
void PrefetchMlp(const MlpView& mlp);

}  // namespace sprig::layers
