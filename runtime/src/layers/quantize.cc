#include "layers/quantize.h"

namespace sprig::layers {

QuantizedRows QuantizeRowsInto(const kernels::KernelTable& k, const float* x, size_t rows,
                               size_t width, std::vector<int8_t>& values,
                               std::vector<float>& scales) {
  if (values.size() < rows * width) values.resize(rows * width);
  if (scales.size() < rows) scales.resize(rows);
  for (size_t r = 0; r < rows; ++r) {
    scales[r] = k.int8_activations.quantize(x + r * width, values.data() + r * width, width);
  }
  return {values.data(), scales.data(), width};
}

QuantizedRows QuantizeRows(const kernels::KernelTable& k, const float* x, size_t rows, size_t width,
                           Scratch& scratch) {
  return QuantizeRowsInto(k, x, rows, width, scratch.quantized, scratch.quantized_scales);
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
