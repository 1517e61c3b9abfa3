// Queries on an open Model for sprig's own tools, on data that an embedder has no use for and
// the public headers therefore leave out. Not installed.
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "sprig/model.h"
#include "sprig/session.h"

namespace sprig::internal {

// The float32 scale of each row of the 2-D i8 tensor `name` (schema/README.md, "int8
// storage"), in row order: sprig verify bounds how far int8 rounding moved a routing margin
// with them. Empty when the model has no such tensor or it is not a 2-D i8 tensor. Reads the
// scales from the mapping (paging them in); thread-safe.
std::vector<float> RowScales(const Model& model, const std::string& name);

// Runs one feed-forward layer of a model alone, set up as a given session of the model runs it
// (its kernel path and compute mode, its threads with scratch of their own; the single-row path
// for one row), so
// that `sprig bench` can time a routed layer against its machine floor on the inputs the layer
// really receives (captured with a LayerTrace). Not thread-safe, like a Session.
class LayerCaller {
 public:
  // `like` is a session of `model`.
  static Result<std::unique_ptr<LayerCaller>> Create(std::shared_ptr<const Model> model,
                                                     const Session& like);
  ~LayerCaller();
  LayerCaller(const LayerCaller&) = delete;
  LayerCaller& operator=(const LayerCaller&) = delete;

  // y[rows, out] = layer `layer`(x[rows, in]), with the layer's in and out
  // (Model::layer_descriptions); `layer` must be below the model's layer count.
  void Forward(size_t layer, const float* x, size_t rows, float* y);
  // The kernel path the calls use ("avx2", ...).
  const char* kernel_path() const;

 private:
  struct State;
  explicit LayerCaller(std::unique_ptr<State> state);
  std::unique_ptr<State> state_;
};

// The 1-norm of each dequantised row of the same kind of tensor, ||ŵ_row||_1 = s_row·Σ|q|, in
// double: sprig verify bounds how far quantising a row's activations (compute mode "i8") moved
// a logit with them. Empty as RowScales is. Reads every value of the tensor.
std::vector<double> RowAbsSums(const Model& model, const std::string& name);

}  // namespace sprig::internal
