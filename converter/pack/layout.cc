#include "converter/pack/layout.h"

#include "format/preamble.h"

namespace sprig::convert {
namespace {

using format::AlignUp;
using format::kPageSize;
using format::kPartAlignment;

// The row map a routed layer's records use.
format::RowMapInfo MapForLayer(const LayerConfig& layer) {
  if (layer.kind == LayerKind::kTree && layer.mode == TreeMode::kPath) {
    return format::SubtreeMapFor(layer.depth + 1);
  }
  format::RowMapInfo m;
  m.rows_per_record = 1;
  return m;
}

uint64_t TightPlacement(uint64_t start, uint64_t b, uint64_t count, std::vector<uint64_t>* out) {
  const uint64_t pages = (b + kPageSize - 1) / kPageSize;
  const uint64_t slack = pages * kPageSize - b;  // how far into a page a record may start
  uint64_t pos = start;
  for (uint64_t i = 0; i < count; ++i) {
    pos = AlignUp(pos, kPartAlignment);
    if (pos % kPageSize > slack) pos = AlignUp(pos, kPageSize);
    if (out) out->push_back(pos);
    pos += b;
  }
  return pos;
}

bool EndsWith(const std::string& s, const std::string& suffix) {
  return s.size() >= suffix.size() &&
         s.compare(s.size() - suffix.size(), suffix.size(), suffix) == 0;
}

}  // namespace

StoragePart PartOf(const TensorSpec& spec) {
  const std::string& n = spec.name;
  if (spec.layer >= 0 && (EndsWith(n, "nodes.weight") || EndsWith(n, "router.weight"))) {
    return StoragePart::kNodes;
  }
  if (spec.routed) return StoragePart::kRecords;
  return StoragePart::kDense;
}

DType StoredType(const TensorSpec& spec, const StoragePlan& plan) {
  const std::string& n = spec.name;
  const bool norm =
      EndsWith(n, "norm.weight") || EndsWith(n, "norm1.weight") || EndsWith(n, "norm2.weight");
  if (EndsWith(n, "bias") || norm || spec.shape.size() < 2) return DType::kF32;
  switch (PartOf(spec)) {
    case StoragePart::kNodes:
      return plan.nodes;
    case StoragePart::kRecords:
      return plan.records;
    case StoragePart::kDense:
      break;
  }
  return plan.dense;
}

uint64_t PlaceRecords(uint64_t start, uint64_t b, uint64_t count, std::vector<uint64_t>* out) {
  const uint64_t tight_end = TightPlacement(start, b, count, nullptr);
  const uint64_t data = b * count;
  if ((tight_end - start - data) * 50 <= data) return TightPlacement(start, b, count, out);
  uint64_t pos = start;
  for (uint64_t i = 0; i < count; ++i) {
    out->push_back(pos);
    pos = AlignUp(pos + b, kPartAlignment);
  }
  return pos;
}

LayoutPlan PlanLayout(const ModelConfig& config, const std::vector<TensorSpec>& specs,
                      const StoragePlan& storage, uint64_t data_start) {
  LayoutPlan plan;
  plan.data_start = data_start;
  // Record sets first (they decide which rows stay hot), one per routed layer.
  std::vector<int> set_of_layer(config.layers.size(), -1);
  for (const TensorSpec& s : specs) {
    PlannedTensor t;
    t.spec = s;
    t.dtype = StoredType(s, storage);
    t.rows = s.shape.empty() ? 1 : s.shape[0];
    uint64_t per_row = 1;
    for (size_t d = 1; d < s.shape.size(); ++d) per_row *= s.shape[d];
    t.row_bytes = per_row * DTypeSize(t.dtype);
    if (t.dtype == DType::kI8) t.scale_row_bytes = per_row / s.shape.back() * sizeof(float);
    t.hot_rows = t.rows;
    if (s.routed) {
      int& set = set_of_layer[s.layer];
      if (set < 0) {
        set = static_cast<int>(plan.record_sets.size());
        PlannedRecordSet rs;
        rs.layer = static_cast<uint32_t>(s.layer);
        rs.map = MapForLayer(config.layers[s.layer]);
        plan.record_sets.push_back(rs);
      }
      PlannedRecordSet& rs = plan.record_sets[set];
      t.hot_rows = std::min(rs.map.hot_rows, t.rows);
      if (t.hot_rows < t.rows) {
        t.record_set = set;
        t.part_size = rs.map.rows_per_record * t.row_bytes;
        t.part_offset = AlignUp(rs.record_size, kPartAlignment);
        rs.record_size = t.part_offset + t.part_size;
        if (t.scale_row_bytes > 0) {
          t.scales_part_offset = AlignUp(rs.record_size, kPartAlignment);
          rs.record_size = t.scales_part_offset + rs.map.rows_per_record * t.scale_row_bytes;
        }
        rs.tensors.push_back(plan.tensors.size());
      }
    }
    plan.tensors.push_back(std::move(t));
  }

  // Hot section.
  uint64_t pos = AlignUp(data_start, kPageSize);
  PlannedSection hot;
  hot.name = "hot";
  hot.offset = pos;
  uint64_t hot_data = 0;
  for (PlannedTensor& t : plan.tensors) {
    const uint64_t bytes = t.hot_rows * t.row_bytes;
    if (bytes == 0) continue;
    pos = AlignUp(pos, kPartAlignment);
    t.hot_offset = pos;
    pos += bytes;
    hot_data += bytes;
    if (t.scale_row_bytes > 0) {
      pos = AlignUp(pos, kPartAlignment);
      t.scales_hot_offset = pos;
      pos += t.hot_rows * t.scale_row_bytes;
      hot_data += t.hot_rows * t.scale_row_bytes;
    }
  }
  hot.size = AlignUp(pos, kPageSize) - hot.offset;
  hot.padding = hot.size - hot_data;
  plan.sections.push_back(hot);
  pos = hot.offset + hot.size;

  // One record section per routed layer.
  for (PlannedRecordSet& rs : plan.record_sets) {
    if (rs.tensors.empty()) continue;
    rs.record_size = AlignUp(rs.record_size, kPartAlignment);
    const uint64_t rows = plan.tensors[rs.tensors.front()].rows;
    const uint64_t count = format::RecordCount(rs.map, rows);
    PlannedSection sec;
    sec.name = "records.layer" + std::to_string(rs.layer);
    sec.records = true;
    sec.offset = pos;
    sec.layer = static_cast<int>(rs.layer);
    const uint64_t end = PlaceRecords(pos, rs.record_size, count, &rs.offsets);
    uint64_t used = 0;
    for (size_t ti : rs.tensors) {
      const PlannedTensor& t = plan.tensors[ti];
      used += (t.part_size + rs.map.rows_per_record * t.scale_row_bytes) * count;
    }
    sec.size = AlignUp(end, kPageSize) - sec.offset;
    sec.padding = sec.size - used;
    rs.section = static_cast<uint32_t>(plan.sections.size());
    plan.sections.push_back(sec);
    pos = sec.offset + sec.size;
  }
  // Drop record sets that ended up with no records (a tree small enough to be all hot).
  std::vector<PlannedRecordSet> kept;
  std::vector<int> remap(plan.record_sets.size(), -1);
  for (size_t i = 0; i < plan.record_sets.size(); ++i) {
    if (plan.record_sets[i].tensors.empty()) continue;
    remap[i] = static_cast<int>(kept.size());
    kept.push_back(std::move(plan.record_sets[i]));
  }
  plan.record_sets = std::move(kept);
  for (PlannedTensor& t : plan.tensors) {
    if (t.record_set >= 0) t.record_set = remap[t.record_set];
  }
  plan.file_size = pos;
  return plan;
}

}  // namespace sprig::convert
