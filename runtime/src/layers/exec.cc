#include "layers/exec.h"

#include "layers/thread_pool.h"

namespace sprig::layers {

size_t Exec::threads() const {
  return pool ? pool->size() : 1;
}

void Exec::ParallelFor(size_t count, const std::function<void(size_t, Scratch&)>& fn) const {
  if (pool == nullptr || count <= 1) {
    for (size_t t = 0; t < count; ++t) fn(t, (*scratch)[0]);
    return;
  }
  pool->Run(count, [&](size_t task, size_t worker) { fn(task, (*scratch)[worker]); });
}

}  // namespace sprig::layers
