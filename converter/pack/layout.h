// Layout planning: where every tensor, record and section of a .sprig file goes.
//
// The hot section holds every unrouted tensor and the hot rows of routed ones, each aligned to
// 64 bytes. Each routed layer gets one record section; a record holds one leaf's, expert's or
// path-tree chunk's rows of every routed tensor of that layer (each part 64-byte aligned).
// Records are placed page-aware: a record of B bytes is started where it touches no more than
// ceil(B / 4096) pages, unless the padding that costs exceeds 2% of the section, in which case
// records are packed back to back (64-byte aligned) and touch at most ceil(B / 4096) + 1.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "format/row_map.h"
#include "model/tensor_spec.h"
#include "sprig/config.h"

namespace sprig::convert {

struct PlannedTensor {
  TensorSpec spec;
  DType dtype = DType::kF32;
  uint64_t rows = 0;       // shape[0] (1 for a 0-d tensor)
  uint64_t row_bytes = 0;  // stored bytes per row (int8 values only for i8)
  uint64_t hot_rows = 0;
  uint64_t hot_offset = 0;  // file offset of the hot rows
  int record_set = -1;
  uint64_t part_offset = 0;  // inside each record
  uint64_t part_size = 0;
  // i8 only: bytes of float32 scales per row along axis 0 (one per row of the last dimension),
  // where the hot rows' scales start, and where a record's scales start inside it.
  uint64_t scale_row_bytes = 0;
  uint64_t scales_hot_offset = 0;
  uint64_t scales_part_offset = 0;
};

// Storage types by the part of the model a tensor belongs to (see PartOf).
struct StoragePlan {
  DType nodes = DType::kF32;
  DType records = DType::kF32;
  DType dense = DType::kF32;
};

// The parts a tensor can belong to for --dtype-nodes, --dtype-records and --dtype-dense:
//   nodes:   routing weights: a tree's nodes.weight (leaf and path mode) and router.weight;
//   records: the weights of leaves and experts, and a path tree's nodes.out;
//   dense:   everything else (dense layers, attention, embeddings, positions, the head).
enum class StoragePart { kNodes, kRecords, kDense };
StoragePart PartOf(const TensorSpec& spec);

struct PlannedRecordSet {
  uint32_t layer = 0;
  uint32_t section = 0;
  format::RowMapInfo map;
  uint64_t record_size = 0;
  std::vector<uint64_t> offsets;  // file offset of each record
  std::vector<size_t> tensors;    // indices into LayoutPlan::tensors, in part order
};

struct PlannedSection {
  std::string name;
  bool records = false;
  bool tokenizer = false;  // the tokenizer section (after the records)
  uint64_t offset = 0;
  uint64_t size = 0;
  uint64_t padding = 0;
  int layer = -1;
  uint32_t crc32 = 0;  // tokenizer section only
};

struct LayoutPlan {
  uint64_t data_start = 0;  // first byte after the reserved header space (page-aligned)
  uint64_t file_size = 0;
  std::vector<PlannedSection> sections;
  std::vector<PlannedTensor> tensors;
  std::vector<PlannedRecordSet> record_sets;
};

// The type a tensor is stored as under `plan`: biases and norm weights (and any tensor of fewer
// than two dimensions) stay float32 whatever is requested (they are tiny, and the kernels add
// them in float32); weight matrices, embeddings and routing nodes take their part's type.
DType StoredType(const TensorSpec& spec, const StoragePlan& plan);

// Plans the data of `specs` (in the order given) starting at `data_start`, storing each tensor
// as StoredType(spec, storage). An i8 tensor's scales follow its values: in the hot section
// after its hot rows, in each record after its part.
LayoutPlan PlanLayout(const ModelConfig& config, const std::vector<TensorSpec>& specs,
                      const StoragePlan& storage, uint64_t data_start);

// Offsets for `count` records of `record_size` bytes starting at page-aligned `start`;
// returns the end. See the file comment for the rule.
uint64_t PlaceRecords(uint64_t start, uint64_t record_size, uint64_t count,
                      std::vector<uint64_t>* offsets);

}  // namespace sprig::convert
