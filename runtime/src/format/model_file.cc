#include "format/model_file.h"

#include <algorithm>
#include <cstring>
#include <map>
#include <set>

#include "base/status_macros.h"
#include "format/header_config.h"
#include "format/preamble.h"
#include "model/config_check.h"
#include "model/tensor_spec.h"
#include "platform/mapping.h"
#include "sprig_schema/model_generated.h"

namespace sprig::format {
namespace {

// True when [off, off + len) lies inside [lo, hi), computed without overflow.
bool Inside(uint64_t off, uint64_t len, uint64_t lo, uint64_t hi) {
  return off >= lo && off <= hi && len <= hi - off;
}

// a * b, or false on overflow.
bool MulOk(uint64_t a, uint64_t b, uint64_t* out) {
  return !__builtin_mul_overflow(a, b, out);
}

// FlatBuffers 2.0's verifier checks a vector's length field for 4-byte alignment but not its
// elements: a hostile header can place a vector of 8-byte values 4 bytes off, and reading it
// would be a misaligned access. So such vectors are checked here before they are read.
bool Aligned8(const void* p) {
  return reinterpret_cast<uintptr_t>(p) % 8 == 0;
}

std::string Num(uint64_t v) {
  return std::to_string(v);
}

// The scales of an i8 tensor's rows in each record: inside the record and 4-byte aligned in
// the file (records start where the header says, so every record's offset is checked).
Status CheckRecordScales(const TensorInfo& t, const RecordSetInfo& rs, const std::string& which) {
  uint64_t bytes = 0;
  if (!MulOk(rs.map.rows_per_record, t.scale_row_bytes, &bytes) ||
      !Inside(t.scales_part_offset, bytes, 0, rs.record_size) ||
      t.scales_part_offset % sizeof(float) != 0) {
    return Status::Corruption(which + " has i8 scales outside its record");
  }
  for (uint64_t offset : rs.offsets) {
    if (offset % sizeof(float) != 0) {
      return Status::Corruption(which + " has i8 scales in a record that is not 4-byte aligned");
    }
  }
  return Status::Ok();
}

}  // namespace

uint64_t ResidentBytes(const uint8_t* data, uint64_t size) {
  return platform::ResidentBytes(data, size);
}

ModelFile::~ModelFile() = default;

Result<std::unique_ptr<ModelFile>> ModelFile::Open(const std::string& path,
                                                   const OpenFileOptions& options) {
  std::unique_ptr<ModelFile> f(new ModelFile());
  f->path_ = path;
  SPRIG_ASSIGN_OR_RETURN(f->mapping_, platform::FileMapping::Open(path));
  f->base_ = f->mapping_->data();
  f->size_ = f->mapping_->size();
  if (f->size_ < kPreambleSize) {
    // Still distinguish "not ours" from "ours but cut short" for the message.
    uint8_t head[kPreambleSize] = {};
    if (f->size_ > 0) std::memcpy(head, f->base_, f->size_);
    auto r = DecodePreamble(head, f->size_, f->size_, path.c_str());
    return r.ok() ? Status::Corruption(path + " is truncated") : r.status();
  }
  const uint8_t* const base = f->base_;
  // A page fault on a normal mapping reads a window of up to the device's read-ahead size
  // around the page (often megabytes), regardless of section boundaries: faults on the header
  // or the end of the hot section would pull in the first records. So the whole mapping starts
  // as random access (faults read only their page); the header is then queued in one go and
  // the hot section is queued or faulted normally below. Hints only cost speed when they fail.
  if (options.advise_random_records)
    platform::Advise(base, f->size_, platform::AccessHint::kRandom);
  if (auto pre = DecodePreamble(base, f->size_, f->size_, path.c_str()); pre.ok()) {
    platform::Advise(base, pre->header_offset + pre->header_size, platform::AccessHint::kWillNeed);
  }
  SPRIG_RETURN_IF_ERROR(f->Index(path));
  for (const SectionInfo& s : f->sections_) {
    if (s.records || s.tokenizer || s.size == 0) continue;
    const uint8_t* hot = base + s.offset;
    if (options.warm_hot) {
      // Queue the whole hot section for reading and return without waiting for it, so open
      // stays as fast as reading the header. Its pages are then cached when first touched and
      // their faults read nothing around them.
      platform::Advise(hot, s.size, platform::AccessHint::kWillNeed);
    } else if (options.advise_random_records) {
      // Read-around helps a cold hot section; it can still read up to half a read-ahead
      // window of the first records past the section's end.
      platform::Advise(hot, s.size, platform::AccessHint::kNormal);
    }
    // Locking faults the pages in now and may fail (RLIMIT_MEMLOCK, the working-set minimum);
    // that is not an error, the caller can ask hot_locked(). Unmapping drops the lock.
    if (options.lock_hot) f->hot_locked_ = platform::LockInMemory(hot, s.size);
  }
  return f;
}

// Sections: page-aligned, after the header, inside the file, not overlapping; a record
// section names an existing layer; at most one tokenizer section.
Status ModelFile::IndexSections(const void* header, uint64_t data_start, const std::string& src) {
  const fb::Header* h = static_cast<const fb::Header*>(header);
  if (!h->sections()) return Status::Ok();
  for (const fb::Section* s : *h->sections()) {
    SectionInfo si;
    si.name = s->name() ? s->name()->str() : "";
    si.records = s->kind() == fb::SectionKind::Records;
    si.tokenizer = s->kind() == fb::SectionKind::Tokenizer;
    si.offset = s->offset();
    si.size = s->size();
    si.padding = s->padding();
    si.layer = s->layer();
    si.crc32 = s->crc32();
    const std::string which = "section " + Num(sections_.size()) + " (" + si.name + ")";
    if (static_cast<uint8_t>(s->kind()) > static_cast<uint8_t>(fb::SectionKind::Tokenizer)) {
      return Status::Corruption(src + ": " + which + " has an unknown kind");
    }
    if (si.offset % kPageSize != 0 || !Inside(si.offset, si.size, data_start, size_) ||
        si.padding > si.size) {
      return Status::Corruption(src + ": " + which + " (offset " + Num(si.offset) + ", size " +
                                Num(si.size) + ") is not page-aligned inside the file's data");
    }
    if (!sections_.empty() && si.offset < sections_.back().offset + sections_.back().size) {
      return Status::Corruption(src + ": " + which + " overlaps the section before it");
    }
    if (si.records && (si.layer < 0 || static_cast<size_t>(si.layer) >= config_.layers.size())) {
      return Status::Corruption(src + ": " + which + " names a layer that does not exist");
    }
    if (si.tokenizer && TokenizerSection(nullptr) != nullptr) {
      return Status::Corruption(src + ": " + which + " is a second tokenizer section");
    }
    sections_.push_back(si);
  }
  return Status::Ok();
}

// A SentencePiece config needs exactly one tokenizer section, whole (its checksum matches);
// any other config none. Its contents are checked by the tokenizer when the model binds it.
Status ModelFile::CheckTokenizerSection(const std::string& src) const {
  const bool wanted = config_.tokenizer == Tokenizer::kSentencePiece;
  for (const SectionInfo& s : sections_) {
    if (!s.tokenizer) continue;
    if (!wanted) {
      return Status::Corruption(src + ": the file has a tokenizer section, but its config names " +
                                "tokenizer \"" + ToString(config_.tokenizer) + "\"");
    }
    if (Crc32(base_ + s.offset, s.size) != s.crc32) {
      return Status::Corruption(src + ": the tokenizer section's checksum does not match (the " +
                                "file is damaged)");
    }
    return Status::Ok();
  }
  if (wanted) {
    return Status::Corruption(src + ": the config names tokenizer \"sentencepiece\" but the " +
                              "file has no tokenizer section");
  }
  return Status::Ok();
}

const uint8_t* ModelFile::TokenizerSection(uint64_t* size) const {
  for (const SectionInfo& s : sections_) {
    if (!s.tokenizer) continue;
    if (size) *size = s.size;
    return base_ + s.offset;
  }
  if (size) *size = 0;
  return nullptr;
}

Status ModelFile::Index(const std::string& src) {
  SPRIG_ASSIGN_OR_RETURN(Preamble pre, DecodePreamble(base_, size_, size_, src.c_str()));
  version_ = pre.version;
  header_size_ = pre.header_size;
  const uint8_t* header = base_ + pre.header_offset;
  if (Crc32(header, pre.header_size) != pre.header_crc32) {
    return Status::Corruption(src +
                              ": the header's checksum does not match (the file is "
                              "damaged)");
  }
  flatbuffers::Verifier verifier(header, pre.header_size,
                                 /*max_depth=*/64, /*max_tables=*/1u << 24);
  if (!fb::VerifyHeaderBuffer(verifier)) {
    return Status::Corruption(src +
                              ": the header is not a valid sprig header (FlatBuffers "
                              "verification failed)");
  }
  const fb::Header* h = fb::GetHeader(header);
  SPRIG_ASSIGN_OR_RETURN(config_, ReadConfig(*h->config(), src));
  SPRIG_RETURN_IF_ERROR(ValidateConfig(config_, src + " header"));
  if (h->config_json()) config_json_ = h->config_json()->str();
  if (h->producer()) producer_ = h->producer()->str();
  const uint64_t data_start = pre.header_offset + pre.header_size;

  SPRIG_RETURN_IF_ERROR(IndexSections(h, data_start, src));
  SPRIG_RETURN_IF_ERROR(CheckTokenizerSection(src));

  // Record sets.
  if (h->record_sets()) {
    for (const fb::RecordSet* r : *h->record_sets()) {
      RecordSetInfo rs;
      const std::string which = "record set " + Num(record_sets_.size());
      rs.layer = r->layer();
      rs.section = r->section();
      if (rs.layer >= config_.layers.size() || rs.section >= sections_.size() ||
          !sections_[rs.section].records) {
        return Status::Corruption(src + ": " + which +
                                  " names a layer or section that does not "
                                  "exist");
      }
      // One record set per layer: layers find theirs by layer index, so a second one could
      // hand a layer a set other than the one its tensors are stored in.
      for (const RecordSetInfo& earlier : record_sets_) {
        if (earlier.layer == rs.layer) {
          return Status::Corruption(src + ": " + which + " is a second record set of layer " +
                                    Num(rs.layer));
        }
      }
      const LayerConfig& layer = config_.layers[rs.layer];
      if (r->row_map() == fb::RowMap::Subtree) {
        if (layer.kind != LayerKind::kTree || layer.mode != TreeMode::kPath) {
          return Status::Corruption(src + ": " + which +
                                    " uses a subtree map on a layer that "
                                    "is not a path tree");
        }
        rs.map = SubtreeMapFor(layer.depth + 1);
        if (r->hot_levels() != rs.map.hot_levels || r->chunk_levels() != rs.map.chunk_levels) {
          return Status::NotSupported(src + ": " + which +
                                      " uses a path-tree chunking this "
                                      "build does not read");
        }
      } else if (r->row_map() == fb::RowMap::Contiguous) {
        rs.map.rows_per_record = r->rows_per_record();
        if (rs.map.rows_per_record == 0) {
          return Status::Corruption(src + ": " + which + " has 0 rows per record");
        }
      } else {
        return Status::Corruption(src + ": " + which + " has an unknown row map");
      }
      rs.record_size = r->record_size();
      const SectionInfo& sec = sections_[rs.section];
      if (r->records() && !Aligned8(r->records()->Data())) {
        return Status::Corruption(src + ": the records of " + which +
                                  " are not 8-byte aligned in the header");
      }
      if (r->records()) {
        rs.offsets.reserve(r->records()->size());
        rs.crc32.reserve(r->records()->size());
        for (const fb::RecordRef* ref : *r->records()) {
          // Records and tensor parts start 64-byte aligned (kPartAlignment) as the packer
          // writes them; the kernels read their rows in place as floats and halves.
          if (ref->offset() % kPartAlignment != 0 ||
              !Inside(ref->offset(), rs.record_size, sec.offset, sec.offset + sec.size)) {
            return Status::Corruption(src + ": record " + Num(rs.offsets.size()) + " of " + which +
                                      " is not 64-byte aligned inside its section");
          }
          rs.offsets.push_back(ref->offset());
          rs.crc32.push_back(ref->crc32());
        }
      }
      record_sets_.push_back(std::move(rs));
    }
  }

  // Tensors: exactly the config's, each range inside its section or record.
  std::map<std::string, TensorSpec> expected;
  for (TensorSpec& t : ExpectedTensors(config_)) expected.emplace(t.name, std::move(t));
  const SectionInfo* hot = nullptr;
  for (const SectionInfo& s : sections_) {
    if (!s.records && !s.tokenizer) hot = &s;
  }
  std::set<std::string> seen;
  if (h->tensors()) {
    for (const fb::Tensor* ft : *h->tensors()) {
      TensorInfo t;
      t.name = ft->name()->str();
      const std::string which = src + ": tensor " + t.name;
      auto it = expected.find(t.name);
      if (it == expected.end()) return Status::Corruption(which + " is not one the config needs");
      if (!seen.insert(t.name).second) return Status::Corruption(which + " is listed twice");
      if (ft->shape() && !Aligned8(ft->shape()->Data())) {
        return Status::Corruption(which + " has a shape that is not 8-byte aligned in the header");
      }
      if (ft->shape()) t.shape.assign(ft->shape()->begin(), ft->shape()->end());
      if (t.shape != it->second.shape) {
        return Status::Corruption(which + " has shape " + ShapeToString(t.shape) +
                                  " but the config needs " + ShapeToString(it->second.shape));
      }
      const auto raw_dtype = static_cast<uint8_t>(ft->dtype());
      if (raw_dtype > static_cast<uint8_t>(DType::kI8)) {
        return Status::NotSupported(which + " uses a storage type this build does not read");
      }
      t.dtype = static_cast<DType>(raw_dtype);
      if (t.dtype == DType::kI8 && t.shape.size() < 2) {
        return Status::Corruption(which + " is stored as i8 but has fewer than 2 dimensions");
      }
      t.error_max_abs = ft->error_max_abs();
      t.error_rel_rms = ft->error_rel_rms();
      t.layer = it->second.layer;
      const uint64_t rows = t.shape.empty() ? 1 : t.shape[0];
      uint64_t elements_per_row = 1;
      for (size_t d = 1; d < t.shape.size(); ++d) elements_per_row *= t.shape[d];
      t.row_bytes = elements_per_row * DTypeSize(t.dtype);  // bounded by the config limits
      if (t.dtype == DType::kI8 && t.shape.back() > 0) {
        t.scale_row_bytes = elements_per_row / t.shape.back() * sizeof(float);
      }
      t.hot_rows = ft->hot_rows();
      t.hot_size = ft->hot_size();
      t.hot_crc32 = ft->hot_crc32();
      uint64_t hot_bytes = 0;
      if (t.hot_rows > rows || !MulOk(t.hot_rows, t.row_bytes, &hot_bytes) ||
          hot_bytes != t.hot_size) {
        return Status::Corruption(which + " has a hot size that does not match its shape");
      }
      if (t.hot_size > 0) {
        if (hot == nullptr || ft->hot_offset() % kPartAlignment != 0 ||
            !Inside(ft->hot_offset(), t.hot_size, hot->offset, hot->offset + hot->size)) {
          return Status::Corruption(which + " is not 64-byte aligned inside the hot section");
        }
        t.hot = base_ + ft->hot_offset();
      }
      if (t.scale_row_bytes > 0 && t.hot_rows > 0) {
        // Bounded by the config limits: hot_rows · scale_row_bytes <= 4 · elements.
        const uint64_t bytes = t.hot_rows * t.scale_row_bytes;
        const uint64_t off = ft->scales_hot_offset();
        if (hot == nullptr || off % sizeof(float) != 0 ||
            !Inside(off, bytes, hot->offset, hot->offset + hot->size)) {
          return Status::Corruption(which + " has i8 scales outside the hot section");
        }
        t.scales_hot = base_ + off;
        t.scales_hot_crc32 = ft->scales_hot_crc32();
      }
      t.record_set = ft->record_set();
      if (t.hot_rows < rows) {
        if (t.record_set < 0 || static_cast<size_t>(t.record_set) >= record_sets_.size()) {
          return Status::Corruption(which + " has rows outside the hot section but no record set");
        }
        RecordSetInfo& rs = record_sets_[t.record_set];
        if (rs.layer != static_cast<uint32_t>(t.layer) || !it->second.routed) {
          return Status::Corruption(which + " is stored in another layer's records");
        }
        // Leaves and experts keep no rows hot; a path tree keeps exactly its top levels.
        if (t.hot_rows != rs.map.hot_rows) {
          return Status::Corruption(which +
                                    " keeps a different number of hot rows than its "
                                    "record set");
        }
        t.part_offset = ft->record_part_offset();
        t.part_size = ft->record_part_size();
        uint64_t part_bytes = 0;
        if (!MulOk(rs.map.rows_per_record, t.row_bytes, &part_bytes) || part_bytes != t.part_size ||
            t.part_offset % kPartAlignment != 0 ||
            !Inside(t.part_offset, t.part_size, 0, rs.record_size)) {
          return Status::Corruption(which + " has a record part that is not 64-byte aligned " +
                                    "inside its record");
        }
        if (t.scale_row_bytes > 0) {
          t.scales_part_offset = ft->scales_record_part_offset();
          SPRIG_RETURN_IF_ERROR(CheckRecordScales(t, rs, which));
        }
        if (RecordCount(rs.map, rows) != rs.offsets.size()) {
          return Status::Corruption(which + " needs " + Num(RecordCount(rs.map, rows)) +
                                    " records but its record set has " + Num(rs.offsets.size()));
        }
      } else {
        t.record_set = -1;
      }
      tensors_.push_back(std::move(t));
    }
  }
  if (seen.size() != expected.size()) {
    for (const auto& [name, spec] : expected) {
      if (!seen.count(name)) {
        return Status::Corruption(src + ": the header has no tensor " + name + " " +
                                  ShapeToString(spec.shape) + ", which the config needs");
      }
    }
  }
  return Status::Ok();
}

const TensorInfo* ModelFile::Find(const std::string& name) const {
  for (const TensorInfo& t : tensors_) {
    if (t.name == name) return &t;
  }
  return nullptr;
}

const uint8_t* ModelFile::Row(const TensorInfo& t, uint64_t row) const {
  if (row < t.hot_rows) return t.hot + row * t.row_bytes;
  const RecordSetInfo& rs = record_sets_[t.record_set];
  const RowLocation loc = LocateRow(rs.map, row);
  return base_ + rs.offsets[loc.record] + t.part_offset + loc.local_row * t.row_bytes;
}

const float* ModelFile::RowScales(const TensorInfo& t, uint64_t row) const {
  if (t.scale_row_bytes == 0) return nullptr;
  if (row < t.hot_rows) {
    return reinterpret_cast<const float*>(t.scales_hot + row * t.scale_row_bytes);
  }
  const RecordSetInfo& rs = record_sets_[t.record_set];
  const RowLocation loc = LocateRow(rs.map, row);
  return reinterpret_cast<const float*>(base_ + rs.offsets[loc.record] + t.scales_part_offset +
                                        loc.local_row * t.scale_row_bytes);
}

std::vector<uint8_t> ModelFile::Gather(const TensorInfo& t) const {
  const uint64_t rows = t.shape.empty() ? 1 : t.shape[0];
  std::vector<uint8_t> out(rows * t.row_bytes);
  for (uint64_t r = 0; r < rows; ++r) {
    std::memcpy(out.data() + r * t.row_bytes, Row(t, r), t.row_bytes);
  }
  return out;
}

Status ModelFile::VerifyChecksums() const {
  std::vector<std::string> bad;
  size_t total_bad = 0;
  auto note = [&](std::string what) {
    if (++total_bad <= 20) bad.push_back(std::move(what));
  };
  for (const TensorInfo& t : tensors_) {
    if (t.hot_size > 0 && Crc32(t.hot, t.hot_size) != t.hot_crc32) {
      note("tensor " + t.name + " (hot section)");
    }
    if (t.scales_hot != nullptr &&
        Crc32(t.scales_hot, t.hot_rows * t.scale_row_bytes) != t.scales_hot_crc32) {
      note("tensor " + t.name + " (i8 scales in the hot section)");
    }
  }
  for (const RecordSetInfo& rs : record_sets_) {
    for (size_t i = 0; i < rs.offsets.size(); ++i) {
      if (Crc32(base_ + rs.offsets[i], rs.record_size) != rs.crc32[i]) {
        note("record " + Num(i) + " of layer " + Num(rs.layer));
      }
    }
  }
  if (total_bad == 0) return Status::Ok();
  std::string msg =
      path_ + ": " + Num(total_bad) + " checksum mismatch" + (total_bad == 1 ? "" : "es") + ": ";
  for (size_t i = 0; i < bad.size(); ++i) msg += (i ? ", " : "") + bad[i];
  if (total_bad > bad.size()) msg += ", ...";
  return Status::CheckFailed(msg);
}

}  // namespace sprig::format
