#include "layers/dense.h"

#include <algorithm>

#include "layers/exec.h"
#include "layers/mlp.h"

namespace sprig::layers {

DenseLayer::DenseLayer(const Binder& binder, const LayerConfig& config) {
  in_ = config.in;
  out_ = config.out;
  mlp_ = MlpOf(binder, FindMlp(binder, ""), 0, config, config.width);
}

void DenseLayer::Forward(const Exec& exec, const float* x, size_t rows, float* y, int32_t*) const {
  if (exec.single_row) {
    MlpForward(*exec.k, mlp_, x, rows, y, (*exec.scratch)[0], true, exec.int8_activations);
    return;
  }
  // Split rows into chunks that are multiples of kRowChunk (see exec.h).
  const size_t per_thread = (rows + exec.threads() - 1) / exec.threads();
  const size_t chunk = (per_thread + kRowChunk - 1) / kRowChunk * kRowChunk;
  const size_t tasks = (rows + chunk - 1) / chunk;
  exec.ParallelFor(tasks, [&](size_t task, Scratch& scratch) {
    const size_t first = task * chunk, count = std::min(chunk, rows - first);
    MlpForward(*exec.k, mlp_, x + first * in_, count, y + first * out_, scratch, false,
               exec.int8_activations);
  });
}

}  // namespace sprig::layers
