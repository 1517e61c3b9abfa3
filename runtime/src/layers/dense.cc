#include "layers/dense.h"

#include <algorithm>

#include "layers/exec.h"
#include "layers/mlp.h"

namespace sprig::layers {

DenseLayer::DenseLayer(const Binder& b, const LayerConfig& c) {
  in_ = c.in;
  out_ = c.out;
  mlp_ = MlpOf(b, FindMlp(b, ""), 0, c, c.width);
}

void DenseLayer::Forward(const Exec& e, const float* x, size_t rows, float* y, int32_t*) const {
  if (e.single_row) {
    MlpForward(*e.k, mlp_, x, rows, y, (*e.scratch)[0], true);
    return;
  }
  // Split rows into chunks that are multiples of kRowChunk (see exec.h).
  const size_t per_thread = (rows + e.threads() - 1) / e.threads();
  const size_t chunk = (per_thread + kRowChunk - 1) / kRowChunk * kRowChunk;
  const size_t tasks = (rows + chunk - 1) / chunk;
  e.ParallelFor(tasks, [&](size_t t, Scratch& s) {
    const size_t r0 = t * chunk, n = std::min(chunk, rows - r0);
    MlpForward(*e.k, mlp_, x + r0 * in_, n, y + r0 * out_, s, false);
  });
}

}  // namespace sprig::layers
