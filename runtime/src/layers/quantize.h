// The compute mode "i8" (Exec::int8_activations): rows quantised once to int8, then multiplied
// with int8-stored weights in integer arithmetic (kernels.h, Int8ActivationKernels, states the
// rounding rule and why results are exact). Only projections whose weights are stored as i8
// use it; every other projection keeps float activations.
#pragma once

#include <cstddef>
#include <cstdint>
#include <vector>

#include "kernels/kernels.h"
#include "layers/exec.h"
#include "layers/matrix_view.h"
#include "sprig/config.h"

namespace sprig::layers {

// `rows` rows of `width` int8 values, row r at values + r·width, with its scale scales[r].
struct QuantizedRows {
  const int8_t* values = nullptr;
  const float* scales = nullptr;
  size_t width = 0;
  const int8_t* row(size_t r) const { return values + r * width; }
};

// True when a projection with weights of `type` runs on int8 activations in this call.
inline bool Quantizes(const Exec& exec, DType type) {
  return exec.int8_activations && type == DType::kI8;
}

// Quantises x[rows, width] into `values` and `scales` (each row on its own: the same values
// whatever else is in the batch).
QuantizedRows QuantizeRowsInto(const kernels::KernelTable& k, const float* x, size_t rows,
                               size_t width, std::vector<int8_t>& values,
                               std::vector<float>& scales);
// The same into scratch.quantized and scratch.quantized_scales.
QuantizedRows QuantizeRows(const kernels::KernelTable& k, const float* x, size_t rows, size_t width,
                           Scratch& scratch);

// y[rows, w.rows] = x·wᵀ + bias with the int8 kernels; `w` must be stored as i8. Matrix-vector
// and matrix-matrix forms give the same bits, so one call serves both.
void ProjectQuantized(const kernels::KernelTable& k, const MatrixView& w, const QuantizedRows& x,
                      const float* bias, float* y, size_t rows);

}  // namespace sprig::layers
