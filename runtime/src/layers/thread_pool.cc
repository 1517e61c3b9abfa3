#include "layers/thread_pool.h"

#include <cassert>
#include <chrono>

namespace sprig::layers {
namespace {

// How long a thread polls before it sleeps. Longer than the serial work between two jobs of
// one forward pass (norms, residual additions: a few microseconds), far shorter than the time
// between two calls of an interactive application, so an idle pool costs no CPU.
constexpr auto kPollTime = std::chrono::microseconds(100);

// Polls `ready` for up to kPollTime; true as soon as it holds.
template <typename Ready>
bool PollFor(Ready ready) {
  const auto deadline = std::chrono::steady_clock::now() + kPollTime;
  for (unsigned spins = 0;; ++spins) {
    if (ready()) return true;
    // Read the clock every few polls: it costs more than a poll.
    if ((spins & 63) == 63) {
      if (std::chrono::steady_clock::now() >= deadline) return false;
      // A core shared with other programs: let them run while we wait.
      std::this_thread::yield();
    }
  }
}

}  // namespace

ThreadPool::ThreadPool(size_t threads) {
  for (size_t i = 1; i < threads; ++i) workers_.emplace_back([this, i] { WorkerLoop(i); });
}

ThreadPool::~ThreadPool() {
  {
    std::lock_guard<std::mutex> lock(mutex_);
    stop_.store(true);
  }
  wake_.notify_all();
  for (std::thread& worker : workers_) worker.join();
}

uint64_t ThreadPool::AwaitJob(uint64_t seen) {
  auto fresh = [&] { return stop_.load() || JobOf(state_.load()) != seen; };
  if (!PollFor(fresh)) {
    std::unique_lock<std::mutex> lock(mutex_);
    ++sleeping_workers_;
    wake_.wait(lock, fresh);
    --sleeping_workers_;
  }
  return JobOf(state_.load());
}

void ThreadPool::Drain(uint64_t job, size_t worker) {
  uint64_t state = state_.load();
  for (;;) {
    // Stop once the job has moved on or every task is claimed. A stale `state` cannot start a
    // task: the exchange below fails unless state_ still holds this job with this index.
    if (JobOf(state) != job || NextOf(state) >= count_) return;
    if (!state_.compare_exchange_weak(state, state + 1)) continue;
    const size_t task = NextOf(state);
    (*body_.load())(task, worker);
    state = state + 1;
    if (completed_.fetch_add(1) + 1 == count_) {
      // The last task: wake the caller if it has gone to sleep.
      std::lock_guard<std::mutex> lock(mutex_);
      if (caller_sleeping_) done_.notify_one();
    }
  }
}

void ThreadPool::WorkerLoop(size_t worker) {
  uint64_t seen = 0;
  for (;;) {
    seen = AwaitJob(seen);
    if (stop_.load()) return;
    Drain(seen, worker);
  }
}

void ThreadPool::AwaitCompletion(size_t count) {
  auto done = [&] { return completed_.load() >= count; };
  if (PollFor(done)) return;
  std::unique_lock<std::mutex> lock(mutex_);
  caller_sleeping_ = true;
  done_.wait(lock, done);
  caller_sleeping_ = false;
}

void ThreadPool::Run(size_t count, const std::function<void(size_t, size_t)>& body) {
  assert(count < kClosed);
  if (workers_.empty() || count <= 1) {
    for (size_t task = 0; task < count; ++task) body(task, 0);
    return;
  }
  const uint64_t job = JobOf(state_.load()) + 1;
  body_.store(&body);
  count_.store(count);
  completed_.store(0);
  state_.store(Pack(job, 0));
  {
    std::lock_guard<std::mutex> lock(mutex_);
    if (sleeping_workers_ > 0) wake_.notify_all();
  }
  Drain(job, 0);
  AwaitCompletion(count);
  // No claim may start after this: a worker still holding this job's last index would
  // otherwise read the next job's count.
  state_.store(Pack(job, kClosed));
}

}  // namespace sprig::layers
