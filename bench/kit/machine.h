// The machine `sprig bench` runs on, measured on the kernel path its sessions use: single-thread
// read bandwidth at given working-set sizes and the multiply-add rate of the matrix kernel. The
// machine floors of bench/kit/floors.h divide a call's bytes and multiply-adds by these.
#pragma once

#include <cstddef>
#include <cstdint>
#include <functional>
#include <string>
#include <vector>

#include "kernels/kernels.h"

namespace sprig::bench {

// Read bandwidth at one working-set size.
struct Bandwidth {
  uint64_t working_set_bytes = 0;  // the size asked for
  uint64_t buffer_bytes = 0;       // the bytes read per pass (sizes above kMaxBuffer are capped)
  double bytes_per_second = 0;     // the best sample of either kernel
  std::string kernel;              // the kernel of that sample: "all_finite" or "f32.gemv"
  std::string what;                // why this size: "ladder", "layer 3", "file", ...
};

// Several threads running the multiply-add loop at once, each on its own cache-resident data:
// what the machine itself gives when a session's work is split perfectly between threads.
struct ThreadScaling {
  size_t threads = 0;
  double multiply_adds_per_second = 0;  // all the threads together
  double times_one_thread = 0;          // ÷ one thread's rate, measured the same way alongside
};

struct Machine {
  std::string kernel_path;
  std::vector<Bandwidth> bandwidth;           // ascending working set, one entry per size
  double multiply_adds_per_second = 0;        // f32 gemm_rows on cache-resident data
  std::vector<ThreadScaling> thread_scaling;  // per thread count above 1 that the run uses
  double seconds = 0;                         // the measurement took

  // Bandwidth at `bytes`: the entry of that size when measured, else interpolated linearly in
  // log(size) between the nearest two, or the nearest end's. 0 when nothing was measured.
  double BandwidthAt(uint64_t bytes) const;
};

// Working-set sizes measured for context whatever the model: L1, L2, L3-sized and two from
// memory on common machines.
std::vector<uint64_t> LadderSizes();

// The largest buffer read: beyond it every size reads from memory alike, and a larger one would
// only cost memory.
inline constexpr uint64_t kMaxBuffer = uint64_t{256} << 20;
// Floats per matrix row when a buffer is read by gemv (a row of a layer with in = 1024).
inline constexpr size_t kGemvRow = 1024;

struct ReadSample {
  double bytes_per_second = 0;
  std::string kernel;      // the kernel of the best sample
  bool all_finite = true;  // what k.all_finite returned: false when the buffer holds a NaN
};

// Reads `count` floats at `data` in timed samples, alternating two kernels of the table, until
// `min_seconds` have passed and each took at least three samples, after one untimed pass of
// each; the best sample's rate. k.all_finite reads every byte as one stream; k.f32.gemv reads
// the buffer as a matrix of rows of kGemvRow floats, several rows at once, as the layers' matrix
// kernels read weights (from memory, several streams at once are faster than one on common
// machines). A sample reads at least 1 MiB (small buffers are read many times) so that the
// clock resolves it.
ReadSample ReadBandwidth(const kernels::KernelTable& k, const float* data, size_t count,
                         double min_seconds);

// Multiply-adds per second of k.f32.gemm_rows over a 64 × 512 weight matrix and 16 rows
// (160 KiB in all, cache-resident), the best of samples taken for `min_seconds`.
double MultiplyAddRate(const kernels::KernelTable& k, double min_seconds);

// Multiply-adds per second of `threads` threads each running MultiplyAddRate's loop on its own
// data at the same time, summed, over `seconds` of wall time (a sustained rate, not the best
// sample: on a machine whose cores slow each other down, that is what a split job gets).
double ParallelMultiplyAddRate(const kernels::KernelTable& k, size_t threads, double seconds);

// The scaling of `threads` threads against one, each rate the best of a few alternating rounds.
ThreadScaling MeasureThreadScaling(const kernels::KernelTable& k, size_t threads, double seconds);

struct MachineOptions {
  std::vector<uint64_t> sizes;  // with their reasons in `reasons`, the same length
  std::vector<std::string> reasons;
  double seconds_per_size = 0.02;
  std::vector<size_t> thread_counts;  // thread counts of the run; those above 1 are measured
  std::function<void()> step;         // called after each size and after the rate
};

// The sizes MeasureMachine reads, ascending, each once with its reasons joined ("ladder",
// "layer 1", ...); their count plus one (the rate) is the number of `step` calls.
std::vector<Bandwidth> PlannedSizes(const MachineOptions& options);

// Measures bandwidth at the ladder's sizes and `options.sizes` (deduplicated), the rate and its
// scaling over the thread counts above 1.
Machine MeasureMachine(const kernels::KernelTable& k, const MachineOptions& options);

}  // namespace sprig::bench
