// Finds a layer's tensors in a mapped model file and views them as matrices and rows.
#pragma once

#include <cstdint>
#include <string>
#include <utility>

#include "format/model_file.h"
#include "layers/matrix_view.h"

namespace sprig::layers {

class Binder {
 public:
  Binder(const format::ModelFile& file, std::string prefix)
      : file_(file), prefix_(std::move(prefix)) {}
  // The tensor prefix + name, or null when absent (biases of a bias-free layer, gates).
  const format::TensorInfo* Find(const std::string& name) const {
    return file_.Find(prefix_ + name);
  }
  // A 2-D hot tensor as a matrix.
  MatrixView Matrix(const format::TensorInfo* tensor) const;
  // Unit `unit` of a stacked [units, rows, cols] tensor.
  MatrixView UnitMatrix(const format::TensorInfo* tensor, uint64_t unit) const;
  // Row `row` of a float32 tensor (biases), or null when `tensor` is null.
  const float* FloatRow(const format::TensorInfo* tensor, uint64_t row) const;
  const format::ModelFile& file() const { return file_; }

 private:
  const format::ModelFile& file_;
  std::string prefix_;
};

}  // namespace sprig::layers
