// A small fork-join pool: Run(count, fn) calls fn(task, worker) for task < count on the caller
// and the pool's workers, and returns when all are done. Tasks are claimed in order from a
// counter guarded by the pool's mutex, so which worker runs a task varies, but a task's inputs
// never depend on it: results are the same for any number of threads.
#pragma once

#include <condition_variable>
#include <cstddef>
#include <functional>
#include <mutex>
#include <thread>
#include <vector>

namespace sprig::layers {

class ThreadPool {
 public:
  explicit ThreadPool(size_t threads);  // total threads including the caller; at least 1
  ~ThreadPool();
  ThreadPool(const ThreadPool&) = delete;
  ThreadPool& operator=(const ThreadPool&) = delete;

  size_t size() const { return workers_.size() + 1; }
  // fn(task, worker) with worker < size(). Not reentrant; one Run at a time.
  void Run(size_t count, const std::function<void(size_t, size_t)>& fn);

 private:
  void WorkerLoop(size_t worker);
  void Drain(size_t worker);

  std::vector<std::thread> workers_;
  std::mutex mu_;
  std::condition_variable wake_, done_;
  const std::function<void(size_t, size_t)>* fn_ = nullptr;
  size_t count_ = 0;
  size_t next_ = 0;
  size_t active_ = 0;
  size_t generation_ = 0;
  bool stop_ = false;
};

}  // namespace sprig::layers
