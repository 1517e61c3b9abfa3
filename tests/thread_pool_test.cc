// The fork-join pool under the patterns a forward pass gives it: many short jobs back to back
// (workers still polling), jobs after a pause long enough for every thread to sleep, and jobs of
// one task (run by the caller alone). Every task of every job must run exactly once, on a valid
// worker index, and Run must not return before its last task has finished. Built into the
// ThreadSanitizer executable as well (tests/tsan/), which checks the pool's handoffs for races.
#include "layers/thread_pool.h"

#include <atomic>
#include <chrono>
#include <thread>
#include <vector>

#include <gtest/gtest.h>

namespace sprig::layers {
namespace {

// Runs `jobs` jobs of `tasks` tasks each, each task adding 1 to its own counter, and checks that
// each counter was hit once per job and that every task had finished when Run returned.
void RunJobs(ThreadPool& pool, size_t jobs, size_t tasks, std::chrono::microseconds pause) {
  std::vector<std::atomic<int>> hits(tasks);
  for (size_t job = 0; job < jobs; ++job) {
    std::atomic<size_t> finished{0};
    std::atomic<bool> bad_worker{false};
    pool.Run(tasks, [&](size_t task, size_t worker) {
      if (worker >= pool.size()) bad_worker = true;
      hits[task].fetch_add(1);
      finished.fetch_add(1);
    });
    ASSERT_EQ(finished.load(), tasks) << "Run returned before its tasks finished, job " << job;
    ASSERT_FALSE(bad_worker.load());
    if (pause.count() > 0) std::this_thread::sleep_for(pause);
  }
  for (size_t task = 0; task < tasks; ++task) {
    ASSERT_EQ(hits[task].load(), static_cast<int>(jobs)) << "task " << task;
  }
}

TEST(ThreadPool, BackToBackJobsRunEveryTaskOnce) {
  for (size_t threads : {2, 3, 4}) {
    ThreadPool pool(threads);
    for (size_t tasks : {2, 3, 7, 64}) RunJobs(pool, 2000, tasks, std::chrono::microseconds(0));
  }
}

TEST(ThreadPool, JobsAfterTheWorkersSleptRunEveryTaskOnce) {
  ThreadPool pool(3);
  // Longer than the polling time, so the workers and the caller wake from sleep.
  RunJobs(pool, 20, 5, std::chrono::microseconds(2000));
}

TEST(ThreadPool, SlowTasksKeepTheCallerWaiting) {
  ThreadPool pool(2);
  // Tasks longer than the polling time: the caller sleeps until a worker's last task ends.
  std::atomic<int> done{0};
  pool.Run(4, [&](size_t, size_t) {
    std::this_thread::sleep_for(std::chrono::milliseconds(3));
    done.fetch_add(1);
  });
  EXPECT_EQ(done.load(), 4);
}

TEST(ThreadPool, OneTaskAndNoTasksRunOnTheCaller) {
  ThreadPool pool(2);
  const std::thread::id caller = std::this_thread::get_id();
  std::thread::id ran_on;
  pool.Run(1, [&](size_t, size_t worker) {
    ran_on = std::this_thread::get_id();
    EXPECT_EQ(worker, 0u);
  });
  EXPECT_EQ(ran_on, caller);
  pool.Run(0, [&](size_t, size_t) { ADD_FAILURE() << "a job of no tasks ran one"; });
}

}  // namespace
}  // namespace sprig::layers
