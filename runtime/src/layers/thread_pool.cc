#include "layers/thread_pool.h"

namespace sprig::layers {

ThreadPool::ThreadPool(size_t threads) {
  for (size_t i = 1; i < threads; ++i) workers_.emplace_back([this, i] { WorkerLoop(i); });
}

ThreadPool::~ThreadPool() {
  {
    std::lock_guard<std::mutex> lock(mutex_);
    stop_ = true;
  }
  wake_.notify_all();
  for (std::thread& worker : workers_) worker.join();
}

void ThreadPool::Drain(size_t worker) {
  std::unique_lock<std::mutex> lock(mutex_);
  while (next_ < count_) {
    const size_t task = next_++;
    lock.unlock();
    (*body_)(task, worker);
    lock.lock();
  }
}

void ThreadPool::WorkerLoop(size_t worker) {
  size_t seen = 0;
  std::unique_lock<std::mutex> lock(mutex_);
  for (;;) {
    wake_.wait(lock, [&] { return stop_ || generation_ != seen; });
    if (stop_) return;
    seen = generation_;
    ++active_;
    lock.unlock();
    Drain(worker);
    lock.lock();
    if (--active_ == 0) done_.notify_all();
  }
}

void ThreadPool::Run(size_t count, const std::function<void(size_t, size_t)>& body) {
  if (workers_.empty() || count <= 1) {
    for (size_t task = 0; task < count; ++task) body(task, 0);
    return;
  }
  {
    std::lock_guard<std::mutex> lock(mutex_);
    body_ = &body;
    count_ = count;
    next_ = 0;
    ++generation_;
  }
  wake_.notify_all();
  Drain(0);
  std::unique_lock<std::mutex> lock(mutex_);
  done_.wait(lock, [&] { return active_ == 0 && next_ >= count_; });
  body_ = nullptr;
}

}  // namespace sprig::layers
