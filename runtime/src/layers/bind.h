// Helpers for binding layers to tensors of a mapped file.
#pragma once

#include <string>

#include "format/model_file.h"
#include "layers/mlp.h"

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
  MatrixView Matrix(const format::TensorInfo* t) const;
  // Unit `unit` of a stacked [units, rows, cols] tensor.
  MatrixView UnitMatrix(const format::TensorInfo* t, uint64_t unit) const;
  // Row `row` of a float32 tensor (biases), or null when t is null.
  const float* FloatRow(const format::TensorInfo* t, uint64_t row) const;
  const format::ModelFile& file() const { return file_; }

 private:
  const format::ModelFile& file_;
  std::string prefix_;
};

// The MLP of unit `unit` of a routed layer whose tensors are named `<group>.fc1.weight` etc.
// (group "leaves" or "experts"), or of a dense layer when `group` is empty (unit ignored).
struct MlpTensors {
  const format::TensorInfo *fc1 = nullptr, *fc1_bias = nullptr, *gate = nullptr,
                           *gate_bias = nullptr, *fc2 = nullptr, *fc2_bias = nullptr;
  bool stacked = false;
};
MlpTensors FindMlp(const Binder& b, const std::string& group);
MlpView MlpOf(const Binder& b, const MlpTensors& t, uint64_t unit, const LayerConfig& layer,
              size_t width);

}  // namespace sprig::layers
