#include "layers/bind.h"

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

MlpTensors FindMlp(const Binder& b, const std::string& group) {
  const std::string g = group.empty() ? "" : group + ".";
  MlpTensors t;
  t.fc1 = b.Find(g + "fc1.weight");
  t.fc1_bias = b.Find(g + "fc1.bias");
  t.gate = b.Find(g + "gate.weight");
  t.gate_bias = b.Find(g + "gate.bias");
  t.fc2 = b.Find(g + "fc2.weight");
  t.fc2_bias = b.Find(g + "fc2.bias");
  t.stacked = !group.empty();
  return t;
}

MlpView MlpOf(const Binder& b, const MlpTensors& t, uint64_t unit, const LayerConfig& layer,
              size_t width) {
  MlpView m;
  m.activation = layer.activation;
  m.width = width;
  m.in = layer.in;
  m.out = layer.out;
  if (t.stacked) {
    m.fc1 = b.UnitMatrix(t.fc1, unit);
    m.fc2 = b.UnitMatrix(t.fc2, unit);
    if (t.gate) m.gate = b.UnitMatrix(t.gate, unit);
    m.fc1_bias = b.FloatRow(t.fc1_bias, unit);
    m.gate_bias = b.FloatRow(t.gate_bias, unit);
    m.fc2_bias = b.FloatRow(t.fc2_bias, unit);
  } else {
    m.fc1 = b.Matrix(t.fc1);
    m.fc2 = b.Matrix(t.fc2);
    if (t.gate) m.gate = b.Matrix(t.gate);
    m.fc1_bias = b.FloatRow(t.fc1_bias, 0);
    m.gate_bias = b.FloatRow(t.gate_bias, 0);
    m.fc2_bias = b.FloatRow(t.fc2_bias, 0);
  }
  return m;
}

}  // namespace sprig::layers
