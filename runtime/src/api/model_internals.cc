#include "api/model_internals.h"

#include <string_view>

#include "api/model_impl.h"
#include "base/status_macros.h"
#include "kernels/kernels.h"
#include "layers/exec.h"
#include "layers/thread_pool.h"

namespace sprig::internal {

std::vector<float> RowScales(const Model& model, const std::string& name) {
  const format::ModelFile& file = *Model::Impl::Of(model).file;
  const format::TensorInfo* t = file.Find(name);
  if (t == nullptr || t->dtype != DType::kI8 || t->shape.size() != 2) return {};
  std::vector<float> scales(t->shape[0]);
  for (uint64_t row = 0; row < scales.size(); ++row) scales[row] = *file.RowScales(*t, row);
  return scales;
}

// What a session's State holds for a layer call, without its workspace, cache or statistics.
struct LayerCaller::State {
  std::shared_ptr<const Model> model;
  const network::Network* network = nullptr;
  const kernels::KernelTable* kernels = nullptr;
  std::unique_ptr<layers::ThreadPool> pool;
  std::vector<layers::Scratch> scratch;
  // Layers mark the records they read whenever a log is given, as in a session; kept so that the
  // timed call does the same work.
  layers::TouchLog touched;
  bool int8_activations = false;  // the session's compute mode is "i8"
};

LayerCaller::LayerCaller(std::unique_ptr<State> state) : state_(std::move(state)) {}
LayerCaller::~LayerCaller() = default;

Result<std::unique_ptr<LayerCaller>> LayerCaller::Create(std::shared_ptr<const Model> model,
                                                         const Session& like) {
  if (!model || &like.model() != model.get()) {
    return Status::InvalidArgument("LayerCaller::Create needs an open model and a session of it");
  }
  auto state = std::make_unique<State>();
  state->network = Model::Impl::Of(*model).network.get();
  // The session resolved its path and thread count already; its path is available by now.
  SPRIG_ASSIGN_OR_RETURN(const kernels::KernelPath path,
                         kernels::ParseKernelPath(like.kernel_path()));
  state->kernels = &kernels::Kernels(path);
  if (like.threads() > 1) state->pool = std::make_unique<layers::ThreadPool>(like.threads());
  state->scratch.resize(like.threads());
  state->int8_activations = std::string_view(like.compute()) == "i8";
  for (const auto& layer : state->network->layers()) {
    state->touched.bits.emplace_back((layer->record_count() + 63) / 64, 0);
  }
  state->model = std::move(model);
  return std::unique_ptr<LayerCaller>(new LayerCaller(std::move(state)));
}

void LayerCaller::Forward(size_t layer, const float* x, size_t rows, float* y) {
  layers::Exec exec;
  exec.k = state_->kernels;
  exec.pool = state_->pool.get();
  exec.scratch = &state_->scratch;
  exec.single_row = rows == 1;
  exec.touched = &state_->touched;
  exec.int8_activations = state_->int8_activations;
  state_->network->layers()[layer]->Forward(exec, x, rows, y, nullptr);
}

const char* LayerCaller::kernel_path() const {
  return kernels::ToString(state_->kernels->path);
}

std::vector<double> RowAbsSums(const Model& model, const std::string& name) {
  const format::ModelFile& file = *Model::Impl::Of(model).file;
  const format::TensorInfo* t = file.Find(name);
  if (t == nullptr || t->dtype != DType::kI8 || t->shape.size() != 2) return {};
  std::vector<double> sums(t->shape[0]);
  for (uint64_t row = 0; row < sums.size(); ++row) {
    const auto* q = reinterpret_cast<const int8_t*>(file.Row(*t, row));
    int64_t total = 0;
    for (uint64_t i = 0; i < t->shape[1]; ++i) total += q[i] < 0 ? -int64_t{q[i]} : int64_t{q[i]};
    sums[row] = static_cast<double>(*file.RowScales(*t, row)) * static_cast<double>(total);
  }
  return sums;
}

}  // namespace sprig::internal
