// Measures a model against a baseline and a floor in one process, interleaved, so that drift of
// the machine (other programs, frequency, temperature) falls on all of them alike.
//
// A repetition runs, for each thread count and each batch size (stack) or once (transformer),
// every side in turn, the order rotating from one repetition to the next; ratios are formed
// within a repetition and summarized over repetitions. Before the repetitions a first pass per
// side records its first call (cold when the files were evicted) and its resident memory as
// tokens are processed, and every session runs the workload once untimed (warm-up).
#pragma once

#include <cstdint>
#include <functional>
#include <memory>
#include <string>
#include <vector>

#include "bench/kit/floors.h"
#include "bench/kit/machine.h"
#include "bench/kit/stats.h"
#include "model/flops.h"
#include "sprig/memory.h"
#include "sprig/model.h"
#include "sprig/session.h"

namespace sprig::bench {

inline constexpr size_t kSides = 3;
enum Side : size_t { kModel = 0, kBaseline = 1, kFloor = 2 };
const char* SideName(size_t side);  // "model", "baseline", "floor"

struct MeasureOptions {
  std::vector<size_t> threads = {1};
  std::vector<size_t> batches = {1};  // stack: rows per call
  size_t rows = 256;                  // stack: rows per repetition (each batch size)
  size_t prompt_tokens = 128;         // transformer
  size_t decode_tokens = 128;         // transformer
  size_t repeat = 10;
  uint64_t seed = 1;  // random inputs
  // The model side's SessionOptions::compute ("f32" or "i8"); the baseline and the floor
  // always run "f32", the default every user gets.
  std::string compute = "f32";
  // Inputs from a file; when empty the inputs are random (from `seed`). Stack: rows ×
  // input_dim values, taken in turn (a repetition longer than the file wraps to its start).
  // Transformer: prompts of prompt_tokens tokens, each with the decode_tokens tokens fed after
  // it (ContinuePrompts); the first pass takes the first, repetition r the (r + 1)-th, wrapping.
  std::vector<float> input_rows;
  std::vector<std::vector<int32_t>> input_prompts, input_continuations;
  // Called after each step with steps done and the total (progress display).
  std::function<void(size_t done, size_t total)> progress;
};

// One resident-memory sample of a side's first pass.
struct MemorySample {
  uint64_t tokens = 0;           // rows or tokens processed so far
  uint64_t mapped_resident = 0;  // this process's resident bytes of the model's mapping
};

struct SideMemory {
  uint64_t file_size = 0;
  Residency residency;                // page cache, after the run
  std::vector<LayerTouch> touched;    // records read (any one session; all ran the same inputs)
  uint64_t mapped_resident = 0;       // this process's resident bytes of the mapping, at the end
  uint64_t mapped_resident_peak = 0;  // the most seen in any sample
  double first_call_ms = 0;           // the very first call (cold with --cold)
  std::vector<MemorySample> curve;    // first pass
};

// FLOPs per token of a side at one phase (transformer attention grows with the context).
struct SideFlops {
  std::string phase;  // "rows", "prefill", "decode"
  uint64_t context = 0;
  ModelCost cost;
  uint64_t routed_flops = 0;  // of cost.ffn_flops, the routed layers' part
};

struct SideInfo {
  std::string label;  // what it is: the file, "dense twin of ...", "floor of ..."
  std::shared_ptr<const Model> model;
  std::vector<SideFlops> flops;
  SideMemory memory;
};

// Time of one side at one point over the repetitions.
struct SideTiming {
  std::vector<double> seconds;      // per repetition: the whole workload of the point
  std::vector<double> cpu_seconds;  // the same in process CPU time
  std::vector<double> latency_ms;   // every call (stack) or decoded token (decode), all reps
  Summary per_second;               // rows or tokens per second over repetitions
  Summary cpu_per_second;           // rows or tokens per second of process CPU time
  Summary latency;                  // of latency_ms
};

// The machine floor (bench/kit/floors.h) of the whole model or of one routed layer at a point,
// and the measured time against it. The whole model's time is the model side's; a routed
// layer's is the layer run alone on the inputs it received in the model (captured with a
// LayerTrace), in the same repetitions. Per row (stack, prefill) or decoded token.
struct FloorTiming {
  int layer = -1;               // the routed layer; -1 for the whole model
  std::vector<double> seconds;  // measured, per repetition
  double units = 0;             // rows or tokens per repetition
  // Per repetition, the work of every part of every call on that repetition's inputs; the
  // floors are computed from it once the machine is measured (after the runs, so that its
  // buffers neither evict the models nor raise the process's peak memory).
  std::vector<std::vector<WorkCost>> work;
  uint64_t working_set = 0;  // a layer's total bytes (its bandwidth lookup); 0 for the model
  // From ComputeFloors:
  std::vector<double> floor_seconds;           // per repetition
  double bytes = 0, multiply_adds = 0;         // per row or token, over all repetitions
  double bytes_seconds = 0, madd_seconds = 0;  // their floor times, summed alike
  Summary time, floor, time_over_floor;        // over repetitions
  bool bandwidth_limited() const { return bytes_seconds >= madd_seconds; }
};

// One measured configuration: a thread count and a phase (stack rows at a batch size,
// transformer prefill or decode).
struct Point {
  size_t threads = 1;
  std::string phase;  // "rows", "prefill", "decode"
  size_t batch = 1;   // rows per call; prompt tokens for prefill; 1 for decode
  size_t units = 0;   // rows or tokens per repetition
  SideTiming side[kSides];
  Summary speedup;            // baseline / model, paired per repetition
  Summary bound;              // baseline / floor, paired: the measured whole-model bound
  Summary cpu_speedup;        // baseline / model in process CPU time, paired
  double flops_bound = 0;     // baseline FLOPs / (model FLOPs - routed layers' FLOPs)
  FloorTiming machine_floor;  // the whole model
  std::vector<FloorTiming> layer_floors;  // each routed layer, in model order
  // threads > 1: `threads` one-thread sessions of the model running this point at the same
  // time, their rates summed, ÷ one such session's rate alone (the best of alternating rounds).
  // The ceiling of what splitting the point over `threads` threads can give on this machine,
  // with the model's own work (memory traffic included); 0 when not measured.
  double copies_scaling = 0;
};

struct LayerUsage {
  size_t layer = 0;
  std::vector<uint64_t> counts;  // choices per leaf or expert
};

struct Measurement {
  Family family = Family::kStack;
  std::string kernel_path;
  Machine machine;  // measured on kernel_path, single thread
  SideInfo sides[kSides];
  std::vector<Point> points;
  std::vector<LayerUsage> usage;  // the model's routed layers on the benchmark's inputs
  ProcessMemory memory_start, memory_end;
};

// Each prompt continued by `count` tokens of the model's own greedy decoding (temperature 0), the
// tokens every side is then fed one at a time: they are what the model would produce, and all
// sides see the same. Run on a model opened for this alone, before the measured ones, so that it
// warms no measured mapping.
Result<std::vector<std::vector<int32_t>>> ContinuePrompts(
    const std::shared_ptr<const Model>& model, const std::vector<std::vector<int32_t>>& prompts,
    size_t count);

// `sides` holds the opened model, baseline and floor. They must take the same inputs (checked
// by the caller). Errors come from the sessions (InvalidArgument for an unsuitable model).
Result<Measurement> Measure(const std::shared_ptr<const Model> (&models)[kSides],
                            const std::string (&labels)[kSides], const MeasureOptions& options);

}  // namespace sprig::bench
