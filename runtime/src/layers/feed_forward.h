// The interface of a feed-forward layer bound to a mapped model file (the kinds: dense, tree in
// leaf or path mode, experts), and the function that binds one.
//
// A layer holds pointers into the file's mapping and its dimensions; it is immutable and shared
// by every session. All per-call memory comes from the caller's Scratch, so one layer can run
// on many threads at once.
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <string>

#include "format/model_file.h"
#include "layers/exec.h"
#include "layers/touch_log.h"
#include "sprig/status.h"

namespace sprig::layers {

class FeedForward {
 public:
  virtual ~FeedForward() = default;
  // y[rows, out] = layer(x[rows, in]); x and y do not overlap. When `routes` is not null the
  // layer writes route_width() ints per row: the leaf index (trees) or the chosen experts in
  // descending weight order.
  virtual void Forward(const Exec& exec, const float* x, size_t rows, float* y,
                       int32_t* routes) const = 0;
  // Ints per row that Forward writes to `routes` (0 for a dense layer).
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
