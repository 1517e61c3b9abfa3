// A small fork-join pool: Run(count, body) calls body(task, worker) for task < count on the
// caller and the pool's workers, and returns when all are done. Tasks are claimed in order from
// an atomic counter, so which worker runs a task varies, but a task's inputs never depend on
// it: results are the same for any number of threads.
//
// A forward pass hands the pool many short jobs in a row (each projection, each tree level of
// each block), with a few microseconds of serial work between them. Waking a sleeping thread
// through the operating system costs tens of microseconds, as much as a job, so after each job
// the workers (and a caller waiting for the last task) poll for a short while before they
// sleep: back-to-back jobs start without a wake-up, and an idle pool still sleeps.
#pragma once

#include <atomic>
#include <condition_variable>
#include <cstddef>
#include <cstdint>
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
  // body(task, worker) with worker < size(). Not reentrant; one Run at a time.
  void Run(size_t count, const std::function<void(size_t, size_t)>& body);

 private:
  // The job's state in one word, so that a claim is one compare-and-swap that also checks the
  // job: the high half is the job's number, the low half the next task to claim.
  static constexpr uint64_t Pack(uint64_t job, uint64_t next) { return job << 32 | next; }
  static constexpr uint64_t JobOf(uint64_t state) { return state >> 32; }
  static constexpr uint64_t NextOf(uint64_t state) { return state & 0xffffffffu; }
  // The low half of a job that takes no more claims (the caller has seen every task done).
  static constexpr uint64_t kClosed = 0xffffffffu;

  void WorkerLoop(size_t worker);
  // Claims and runs tasks of job `job` until none is left or the job has moved on.
  void Drain(uint64_t job, size_t worker);
  // Waits until state_ holds a job other than `seen` (or stop_), polling first, then sleeping.
  uint64_t AwaitJob(uint64_t seen);
  void AwaitCompletion(size_t count);

  std::vector<std::thread> workers_;
  std::atomic<uint64_t> state_{Pack(0, kClosed)};
  std::atomic<size_t> completed_{0};  // tasks of the current job finished
  // The job's body and task count, written by the caller before it publishes the job in
  // state_. A worker reads body_ only after a claim on that job succeeded, so it is that job's.
  // It may read count_ of the next job while holding a stale state, which its claim then
  // refuses; atomics keep that read well defined.
  std::atomic<const std::function<void(size_t, size_t)>*> body_{nullptr};
  std::atomic<size_t> count_{0};
  std::atomic<bool> stop_{false};
  // Sleeping: workers wait on wake_ for a new job, the caller on done_ for the last task.
  std::mutex mutex_;
  std::condition_variable wake_, done_;
  size_t sleeping_workers_ = 0;   // under mutex_
  bool caller_sleeping_ = false;  // under mutex_
};

}  // namespace sprig::layers
