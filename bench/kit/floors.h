// Machine floors: the time a piece of work cannot go below on the measured machine (machine.h),
// the larger of bytes ÷ bandwidth(working set) and multiply-adds ÷ rate. Not to be confused
// with the "floor" side of models.h, a model whose routed layers are made width 1.
//
// What a call must read at least once (docs/benchmarking.md, "Machine floors"):
//   routed layer  the distinct units its rows reach, from their routes: a path tree the d + 1
//                 neurons of each row's path (weight row, output row, bias, int8 scales), a
//                 leaf tree the internal nodes on the paths and the leaves' MLPs, experts the
//                 router, the chosen experts and the shared ones; plus its fixed tensors
//   dense layer   all of its bytes
//   attention     a transformer block's norms and projections, and the KV cache entries read
//   embedding and head  the tokens' embedding (and position) rows, the final norm and the head
// plus, for each layer and block, the rows' inputs and outputs (float32). The working set of
// the bandwidth lookup is the part's total bytes; multiply-adds come from model/flops.h.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "bench/kit/machine.h"
#include "sprig/config.h"
#include "sprig/model.h"
#include "sprig/session.h"

namespace sprig::bench {

// What one call of a part must read and compute.
struct WorkCost {
  double bytes = 0;          // read at least once
  double multiply_adds = 0;  // FLOPs = 2 × multiply-adds
  uint64_t working_set = 0;  // the part's total bytes, for the bandwidth lookup
};

struct Floor {
  double seconds = 0;        // max(bytes_seconds, madd_seconds)
  double bytes_seconds = 0;  // bytes ÷ bandwidth at the working set
  double madd_seconds = 0;   // multiply-adds ÷ rate
  bool bandwidth_limited() const { return bytes_seconds >= madd_seconds; }
};

Floor FloorOf(const Machine& machine, const WorkCost& cost);
// The parts of a call run one after another: raises each part's working set to the call's bytes
// (the sum of the parts' bytes) where it is smaller.
void ShareWorkingSet(std::vector<WorkCost>::iterator begin, std::vector<WorkCost>::iterator end);

// The floor of work made of parts: the sum of the parts' floors (each part is bounded on its
// own; their bytes and multiply-add times are summed alike). Their bytes and multiply-adds are
// summed into `total` when it is not null.
Floor SumOfFloors(const Machine& machine, const std::vector<WorkCost>& parts,
                  WorkCost* total = nullptr);

// The bytes and multiply-adds of a model's parts, from its config and stored tensors.
class Footprint {
 public:
  static Footprint Of(const Model& model);
  static Footprint Of(const ModelConfig& config, const std::vector<TensorDescription>& tensors);

  // Feed-forward layer `layer`'s cost for one call of `rows` rows; `choices` holds the rows'
  // routes (route_width ints per row, as Routes holds them), ignored for a dense layer.
  WorkCost LayerCall(size_t layer, const int32_t* choices, size_t rows) const;
  // A transformer's dense parts for one call of `tokens` tokens of one sequence at positions
  // start, start + 1, ...: one per block (attention), then embedding and head with `head_rows`
  // rows through the head. Empty for a stack.
  std::vector<WorkCost> DenseParts(size_t start, size_t tokens, size_t head_rows) const;
  // Every part's cost for one call of the whole model, appended to `parts`: each layer, then the
  // dense parts. The call's rows are rows first .. first + rows - 1 of `routes`; a transformer
  // call's tokens sit at positions start, ..., with head_rows rows through the head. The parts
  // run one after another, so a part's bytes are read again only after every other part's:
  // each part's working set is at least the whole call's bytes.
  void CallParts(const Routes& routes, size_t first, size_t rows, size_t start, size_t head_rows,
                 std::vector<WorkCost>* parts) const;
  // Every part's working set with its name ("layer 2", "block 0 attention", ...), for the
  // machine measurement; `tokens` sizes the KV cache the attention parts read.
  void WorkingSets(size_t tokens, std::vector<uint64_t>* sizes,
                   std::vector<std::string>* names) const;
  bool IsRoutedLayer(size_t layer) const;
  size_t layer_count() const { return layers_.size(); }

 private:
  struct Layer {
    LayerConfig config;
    double fixed_bytes = 0;  // read by every call (dense tensors, router, shared experts, biases)
    double node_bytes = 0;   // per tree node
    double unit_bytes = 0;   // per leaf or expert
    uint64_t total_bytes = 0;
    double madds_per_row = 0;
  };
  static void AddTensor(const TensorDescription& t, const std::string& local, Layer* layer);

  ModelConfig config_;
  std::vector<Layer> layers_;
  std::vector<uint64_t> attention_bytes_;  // per block: norms and projections
  uint64_t model_bytes_ = 0;               // model-level tensors (embedding, norms, head)
  double token_row_bytes_ = 0;             // embedding and position rows of one token
  double head_bytes_ = 0;                  // read once per call with a head row
};

}  // namespace sprig::bench
