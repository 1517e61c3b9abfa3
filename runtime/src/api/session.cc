#include "sprig/session.h"

#include <cmath>
#include <cstring>
#include <thread>

#include "format/model_file.h"
#include "kernels/kernels.h"
#include "layers/feed_forward.h"
#include "layers/thread_pool.h"

namespace sprig {
namespace {

// True when no value is NaN or infinite (exponent bits all ones); written so it vectorises.
bool AllFinite(const float* x, size_t n) {
  uint32_t bad = 0;
  for (size_t i = 0; i < n; ++i) {
    uint32_t bits;
    std::memcpy(&bits, x + i, 4);
    bad |= static_cast<uint32_t>((bits & 0x7f800000u) == 0x7f800000u);
  }
  return bad == 0;
}

}  // namespace

struct Session::State {
  const kernels::KernelTable* kernels = nullptr;
  std::unique_ptr<layers::ThreadPool> pool;
  std::vector<layers::Scratch> scratch;
  std::vector<float> ping, pong;  // activations between layers
};

Session::Session(std::shared_ptr<const Model> model, std::unique_ptr<State> state)
    : model_(std::move(model)), state_(std::move(state)) {}
Session::~Session() = default;

Result<std::unique_ptr<Session>> Session::create(std::shared_ptr<const Model> model,
                                                 const SessionOptions& options) {
  if (!model) return Status::InvalidArgument("Session::create needs an open model");
  auto state = std::make_unique<State>();
  kernels::KernelPath path;
  if (options.kernel_path.empty()) {
    path = kernels::BestAvailablePath();
  } else {
    SPRIG_ASSIGN_OR_RETURN(path, kernels::ResolvePath(options.kernel_path.c_str()));
  }
  state->kernels = &kernels::Kernels(path);
  size_t threads = options.threads;
  if (threads == 0) threads = std::max(1u, std::thread::hardware_concurrency());
  if (threads > 256) {
    return Status::InvalidArgument("threads is " + std::to_string(threads) +
                                   ", expected 0..256");
  }
  if (threads > 1) state->pool = std::make_unique<layers::ThreadPool>(threads);
  state->scratch.resize(threads);
  return std::unique_ptr<Session>(new Session(std::move(model), std::move(state)));
}

const char* Session::kernel_path() const { return kernels::ToString(state_->kernels->path); }
size_t Session::threads() const { return state_->scratch.size(); }

Status Session::forward(const float* input, size_t rows, float* output, Routes* routes) {
  const ModelConfig& c = model_->config();
  if (c.family != Family::kStack) {
    return Status::InvalidArgument(model_->path() +
                                   " is a transformer model; it takes tokens, not float rows");
  }
  const size_t in = c.input_dim;
  if (!AllFinite(input, rows * in)) {
    for (size_t i = 0;; ++i) {
      if (std::isfinite(input[i])) continue;
      return Status::InvalidArgument("input row " + std::to_string(i / in) + ", column " +
                                     std::to_string(i % in) + " is not a finite number");
    }
  }
  layers::Exec exec;
  exec.k = state_->kernels;
  exec.pool = state_->pool.get();
  exec.scratch = &state_->scratch;
  exec.single_row = rows == 1;
  if (routes) routes->layers.clear();
  const auto& net = model_->layers();
  const float* x = input;
  for (size_t i = 0; i < net.size(); ++i) {
    const layers::FeedForward& layer = *net[i];
    float* y = output;
    if (i + 1 < net.size()) {
      std::vector<float>& buf = (i % 2 == 0) ? state_->ping : state_->pong;
      if (buf.size() < rows * layer.out()) buf.resize(rows * layer.out());
      y = buf.data();
    }
    int32_t* route_out = nullptr;
    if (routes && layer.route_width() > 0) {
      LayerRoutes lr;
      lr.layer = i;
      lr.width = layer.route_width();
      lr.choices.resize(rows * lr.width);
      routes->layers.push_back(std::move(lr));
      route_out = routes->layers.back().choices.data();
    }
    layer.Forward(exec, x, rows, y, route_out);
    x = y;
  }
  return Status::Ok();
}

}  // namespace sprig
