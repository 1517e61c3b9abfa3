#include "layers/binder.h"

namespace sprig::layers {

MatrixView Binder::Matrix(const format::TensorInfo* t) const {
  MatrixView m;
  m.type = t->dtype;
  m.data = t->hot;
  m.scales = file_.RowScales(*t, 0);
  m.rows = t->shape[0];
  m.cols = t->shape.size() > 1 ? t->shape[1] : 1;
  m.row_bytes = m.cols * DTypeSize(t->dtype);
  return m;
}

MatrixView Binder::UnitMatrix(const format::TensorInfo* t, uint64_t unit) const {
  MatrixView m;
  m.type = t->dtype;
  m.data = file_.Row(*t, unit);
  m.scales = file_.RowScales(*t, unit);
  m.rows = t->shape[1];
  m.cols = t->shape[2];
  m.row_bytes = m.cols * DTypeSize(t->dtype);
  return m;
}

const float* Binder::FloatRow(const format::TensorInfo* t, uint64_t row) const {
  if (t == nullptr) return nullptr;
  return reinterpret_cast<const float*>(file_.Row(*t, row));
}

}  // namespace sprig::layers
