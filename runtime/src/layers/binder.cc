#include "layers/binder.h"

namespace sprig::layers {

MatrixView Binder::Matrix(const format::TensorInfo* tensor) const {
  MatrixView matrix;
  matrix.type = tensor->dtype;
  matrix.data = tensor->hot;
  matrix.scales = file_.RowScales(*tensor, 0);
  matrix.rows = tensor->shape[0];
  matrix.cols = tensor->shape.size() > 1 ? tensor->shape[1] : 1;
  matrix.row_bytes = matrix.cols * DTypeSize(tensor->dtype);
  return matrix;
}

MatrixView Binder::UnitMatrix(const format::TensorInfo* tensor, uint64_t unit) const {
  MatrixView matrix;
  matrix.type = tensor->dtype;
  matrix.data = file_.Row(*tensor, unit);
  matrix.scales = file_.RowScales(*tensor, unit);
  matrix.rows = tensor->shape[1];
  matrix.cols = tensor->shape[2];
  matrix.row_bytes = matrix.cols * DTypeSize(tensor->dtype);
  return matrix;
}

const float* Binder::FloatRow(const format::TensorInfo* tensor, uint64_t row) const {
  if (tensor == nullptr) return nullptr;
  return reinterpret_cast<const float*>(file_.Row(*tensor, row));
}

}  // namespace sprig::layers
