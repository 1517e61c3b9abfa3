#include "layers/quantize.h"

namespace sprig::layers {

QuantizedRows QuantizeRows(const kernels::KernelTable& k, const float* x, size_t rows, size_t width,
                           Scratch& scratch) {
  if (scratch.quantized.size() < rows * width) scratch.quantized.resize(rows * width);
  if (scratch.quantized_scales.size() < rows) scratch.quantized_scales.resize(rows);
  for (size_t r = 0; r < rows; ++r) {
    scratch.quantized_scales[r] =
        k.int8_activations.quantize(x + r * width, scratch.quantized.data() + r * width, width);
  }
  return {scratch.quantized.data(), scratch.quantized_scales.data(), width};
}

void ProjectQuantized(const kernels::KernelTable& k, const MatrixView& w, const QuantizedRows& x,
                      const float* bias, float* y, size_t rows) {
  const auto* weights = reinterpret_cast<const int8_t*>(w.data);
  if (rows == 1) {
    k.int8_activations.gemv(weights, w.scales, x.values, x.scales[0], bias, y, w.rows, w.cols);
  } else {
    k.int8_activations.gemm_rows(weights, w.scales, x.values, x.scales, bias, y, rows, w.rows,
                                 w.cols);
  }
}

}  // namespace sprig::layers
