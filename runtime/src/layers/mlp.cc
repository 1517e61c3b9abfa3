#include "layers/mlp.h"

namespace sprig::layers {
namespace {

void Project(const kernels::KernelTable& k, const MatrixView& w, const float* x, const float* bias,
             float* y, size_t rows, bool vector_kernels) {
  if (vector_kernels && rows == 1) {
    kernels::Gemv(k, w.type, w.data, x, bias, y, w.rows, w.cols, w.scales);
  } else {
    kernels::GemmRows(k, w.type, w.data, x, bias, y, rows, w.rows, w.cols, w.scales);
  }
}

}  // namespace

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

void MlpForward(const kernels::KernelTable& k, const MlpView& m, const float* x, size_t rows,
                float* y, Scratch& s, bool vk) {
  const size_t hidden = rows * m.width;
  if (s.a.size() < hidden) s.a.resize(hidden);
  float* h = s.a.data();
  Project(k, m.fc1, x, m.fc1_bias, h, rows, vk);
  if (m.gate.data != nullptr) {
    if (s.b.size() < hidden) s.b.resize(hidden);
    float* g = s.b.data();
    Project(k, m.gate, x, m.gate_bias, g, rows, vk);
    k.gated_activate(m.activation, g, h, h, hidden);
  } else {
    k.activate(m.activation, h, hidden);
  }
  Project(k, m.fc2, h, m.fc2_bias, y, rows, vk);
}

void PrefetchMlp(const MlpView& m) {
  // A few lines at the start of each matrix: enough for the hardware prefetcher to take over
  // the sequential stream while the current node's dot product finishes.
  for (const MatrixView* w : {&m.fc1, &m.gate, &m.fc2}) {
    if (w->data == nullptr) continue;
    for (int line = 0; line < 4; ++line) __builtin_prefetch(w->data + 64 * line, 0, 1);
  }
}

}  // namespace sprig::layers
