// How a layer call runs: the kernels, the threads and each thread's scratch memory.
#pragma once

#include <cstddef>
#include <cstdint>
#include <functional>
#include <vector>

#include "kernels/kernels.h"
#include "layers/touch_log.h"

namespace sprig::layers {

// Results never depend on the number of threads, so work is split between threads only where
// a row's arithmetic is the same wherever it runs: over units whose arithmetic does not depend
// on the split, or over rows in chunks that are multiples of kRowChunk, so that every row lands
// in the same register block of the matrix kernels whatever the thread count.
inline constexpr size_t kRowChunk = 16;

// One thread's buffers, each named for what it holds. A buffer grows to the largest size asked
// of it and is kept for later calls, so a warm session allocates nothing here. A function that
// calls another while holding a buffer uses buffers the callee does not (RunGroups calls
// MlpForward).
struct Scratch {
  std::vector<float> hidden;         // MlpForward: act(fc1 x + b1), [rows, width]
  std::vector<float> gate;           // MlpForward, gated: gate x + b, [rows, width]
  std::vector<float> group_input;    // RunGroups: one group's input rows, gathered, [rows, in]
  std::vector<float> group_output;   // RunGroups: one group's output rows, [rows, out]
  std::vector<float> expert_output;  // ExpertsLayer, single row: one expert's output, [out]
  std::vector<float> shared_output;  // ExpertsLayer, single row: shared experts' outputs, [S, out]
  // The transformer's attention: one (sequence, head)'s scores over the positions it sees.
  std::vector<float> attention_scores;
  // and the value rows of its positions.
  std::vector<const void*> attention_values;
  // int8 activations (Exec::int8_activations): the rows a projection reads, quantised, and
  // their scales (QuantizeRows, quantize.h); and MlpForward's hidden activations, quantised
  // apart so that an input quantised once serves several MLPs (a leaf after its tree's nodes,
  // the experts a row chooses).
  std::vector<int8_t> quantized;
  std::vector<float> quantized_scales;
  std::vector<int8_t> quantized_hidden;
  std::vector<float> quantized_hidden_scales;
  // Path and leaf trees, batched: one tile's descent. Each row's current node, and the tile's
  // rows grouped by node (and the next level's grouping).
  std::vector<uint64_t> descent_node;
  std::vector<uint32_t> descent_order, descent_next_order;
  // PathTreeLayer, batched: each row's path: its logits, then activations, and the output rows
  // (with their int8 scales) they multiply, [rows, depth + 1].
  std::vector<float> path_logits;
  std::vector<const void*> path_out;
  std::vector<const float*> path_out_scale;
};

class ThreadPool;

// How a call runs: kernels, threads and their scratch (see kRowChunk for how work is split).
struct Exec {
  const kernels::KernelTable* k = nullptr;
  ThreadPool* pool = nullptr;               // null: the calling thread only
  std::vector<Scratch>* scratch = nullptr;  // one per thread of the pool (at least one)
  // The call is for a single row: layers use matrix-vector kernels and prefetch the records
  // they are about to touch. (Batches use matrix-matrix kernels, grouped by record.)
  bool single_row = false;
  // When not null, layers mark every record they read here.
  TouchLog* touched = nullptr;
  // The opt-in compute mode "i8": a projection whose weights are stored as i8 quantises its
  // input rows to int8 and runs the integer kernels (quantize.h); projections of other storage
  // types stay float. Results then differ from the float mode by the activation rounding, but
  // still do not depend on the batch or the thread count.
  bool int8_activations = false;

  size_t threads() const;
  // body(task, scratch) for task < count, spread over the pool.
  void ParallelFor(size_t count, const std::function<void(size_t, Scratch&)>& body) const;
};

}  // namespace sprig::layers
