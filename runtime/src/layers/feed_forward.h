// Feed-forward layers bound to a mapped model file: dense, tree (leaf and path mode), experts.
//
// A layer holds pointers into the file's mapping and its dimensions; it is immutable and shared
// by every session. All per-call memory comes from the caller's Scratch, so one layer can run
// on many threads at once.
#pragma once

#include <cstddef>
#include <cstdint>
#include <functional>
#include <memory>
#include <vector>

#include "format/model_file.h"
#include "kernels/kernels.h"
#include "sprig/config.h"
#include "sprig/status.h"

namespace sprig::layers {

// A weight matrix (or a stack of rows) in the file: row i starts at row(i). An i8 matrix has
// one float32 scale per row, row i's at scales[i] (null for the other types).
struct MatrixView {
  DType type = DType::kF32;
  const uint8_t* data = nullptr;
  const float* scales = nullptr;
  uint64_t rows = 0, cols = 0, row_bytes = 0;
  const void* row(uint64_t i) const { return data + i * row_bytes; }
  const float* row_scales(uint64_t i) const { return scales ? scales + i : nullptr; }
};

// Growable per-thread buffers. Each layer uses the slots it needs; nothing is shared.
struct Scratch {
  std::vector<float> a, b, c, d, e;
  std::vector<uint32_t> index, order, counts;
  std::vector<int32_t> choice;
};

class ThreadPool;

// The records a session has read: one bitset per model layer (bit i of word i / 64 is record
// i), empty for layers without records. Layers mark records on the calling thread only, before
// or after their parallel parts, so no synchronisation is needed and the result is the same
// for any thread count.
struct TouchLog {
  std::vector<std::vector<uint64_t>> bits;
  void Mark(size_t layer, uint64_t record) {
    bits[layer][record / 64] |= uint64_t{1} << (record % 64);
  }
};

// How a call runs: kernels, threads and their scratch. Results never depend on the number of
// threads: work is split only where a row's arithmetic is the same wherever it runs.
struct Exec {
  const kernels::KernelTable* k = nullptr;
  ThreadPool* pool = nullptr;               // null: the calling thread only
  std::vector<Scratch>* scratch = nullptr;  // one per thread of the pool (at least one)
  // The call is for a single row: layers use matrix-vector kernels and prefetch the records
  // they are about to touch. (Batches use matrix-matrix kernels, grouped by record.)
  bool single_row = false;
  // When not null, layers mark every record they read here.
  TouchLog* touched = nullptr;

  size_t threads() const;
  // fn(task, scratch) for task < count, spread over the pool.
  void ParallelFor(size_t count, const std::function<void(size_t, Scratch&)>& fn) const;
};

class FeedForward {
 public:
  virtual ~FeedForward() = default;
  // y[rows, out] = layer(x[rows, in]); x and y do not overlap. When `routes` is not null the
  // layer writes route_width() ints per row: the leaf index (trees) or the chosen experts in
  // descending weight order.
  virtual void Forward(const Exec& exec, const float* x, size_t rows, float* y,
                       int32_t* routes) const = 0;
  // Ints per row that Forward writes to a RouteSink (0 for a dense layer).
  virtual size_t route_width() const { return 0; }
  // Records a layer has (leaves, experts); 0 when it has none.
  virtual uint64_t unit_count() const { return 0; }
  size_t in() const { return in_; }
  size_t out() const { return out_; }
  // The layer's index in the model and its record set (null when it has none). Set once by
  // BindLayer.
  size_t index() const { return index_; }
  const format::RecordSetInfo* records() const { return records_; }
  uint64_t record_count() const { return records_ ? records_->offsets.size() : 0; }
  void SetRecords(size_t index, const format::RecordSetInfo* records) {
    index_ = index;
    records_ = records;
  }

 protected:
  // Marks the record holding row `row` of the layer's routed tensors (a leaf, an expert or a
  // path-tree node) in exec.touched; hot rows live in no record.
  void Touch(const Exec& exec, uint64_t row) const {
    if (exec.touched == nullptr || records_ == nullptr || row < records_->map.hot_rows) return;
    TouchRecord(exec, format::LocateRow(records_->map, row).record);
  }
  // The same for a row whose record the caller has located already.
  void TouchRecord(const Exec& exec, uint64_t record) const {
    if (exec.touched != nullptr && records_ != nullptr) exec.touched->Mark(index_, record);
  }

  size_t in_ = 0, out_ = 0;
  size_t index_ = 0;
  const format::RecordSetInfo* records_ = nullptr;
};

// Binds layer `index` of a validated model file. `prefix` is its tensor-name prefix.
Result<std::unique_ptr<FeedForward>> BindLayer(const format::ModelFile& file, size_t index,
                                               const std::string& prefix);

}  // namespace sprig::layers
