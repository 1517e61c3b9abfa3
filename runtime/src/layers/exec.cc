#include "layers/exec.h"

#include "layers/thread_pool.h"

namespace sprig::layers {

size_t Exec::threads() const {
  return pool ? pool->size() : 1;
}

void Exec::ParallelFor(size_t count, const std::function<void(size_t, Scratch&)>& body) const {
  if (pool == nullptr || count <= 1) {
    for (size_t task = 0; task < count; ++task) body(task, (*scratch)[0]);
    return;
  }
  pool->Run(count, [&](size_t task, size_t worker) { body(task, (*scratch)[worker]); });
}

}  // namespace sprig::layers
