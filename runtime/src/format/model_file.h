// ModelFile: a .sprig file mapped read-only, its header verified and indexed.
//
// Open() maps the file, checks the preamble, the header checksum, the FlatBuffers verifier and
// every offset and size against the file (overflow-safe), and that the tensors are exactly the
// ones the stored config requires. It reads no tensor data: weights are paged in by the
// kernels as they touch them. Immutable after Open(); safe to share between threads.
#pragma once

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "format/row_map.h"
#include "platform/mapping.h"
#include "sprig/config.h"
#include "sprig/status.h"

namespace sprig::format {

struct SectionInfo {
  std::string name;
  bool records = false;    // a routed layer's records
  bool tokenizer = false;  // the tokenizer section; neither: the hot section
  uint64_t offset = 0;
  uint64_t size = 0;
  uint64_t padding = 0;
  int layer = -1;
  uint32_t crc32 = 0;  // tokenizer section only (checked at open)
};

struct RecordSetInfo {
  uint32_t layer = 0;
  uint32_t section = 0;
  RowMapInfo map;
  uint64_t record_size = 0;
  std::vector<uint64_t> offsets;  // file offset of each record
  std::vector<uint32_t> crc32;    // checksum of each record
};

struct TensorInfo {
  std::string name;
  DType dtype = DType::kF32;
  std::vector<uint64_t> shape;
  uint64_t row_bytes = 0;  // bytes of one row along axis 0 (the whole tensor for a 0-d one)
  int layer = -1;
  const uint8_t* hot = nullptr;  // the first hot_rows rows
  uint64_t hot_rows = 0;
  uint64_t hot_size = 0;
  uint32_t hot_crc32 = 0;
  int record_set = -1;
  uint64_t part_offset = 0;  // inside each record
  uint64_t part_size = 0;
  // i8 only: float32 scales, one per row of the last dimension; scale_row_bytes of them per row
  // along axis 0. The hot rows' scales start at scales_hot; each record's at scales_part_offset.
  uint64_t scale_row_bytes = 0;
  const uint8_t* scales_hot = nullptr;
  uint32_t scales_hot_crc32 = 0;
  uint64_t scales_part_offset = 0;
  // The packer's measure of the stored values against the source (0 for files that predate it).
  float error_max_abs = 0;
  float error_rel_rms = 0;
};

struct OpenFileOptions {
  // Advise the kernel that record sections are read at random (no read-ahead of neighbours).
  bool advise_random_records = true;
  // Ask the system to start reading the hot section in the background (AccessHint::kWillNeed).
  bool warm_hot = true;
  // Lock the hot section in memory (mlock; VirtualLock), which reads it now. Best effort.
  bool lock_hot = false;
};

// Bytes of [data, data + size), a range inside a mapping, whose pages are in memory (page
// granularity; platform::ResidentBytes: the page cache on POSIX, this process's working set on
// Windows); 0 when the query fails.
uint64_t ResidentBytes(const uint8_t* data, uint64_t size);

class ModelFile {
 public:
  static Result<std::unique_ptr<ModelFile>> Open(const std::string& path,
                                                 const OpenFileOptions& options = {});
  ~ModelFile();
  ModelFile(const ModelFile&) = delete;
  ModelFile& operator=(const ModelFile&) = delete;

  const std::string& path() const { return path_; }
  const ModelConfig& config() const { return config_; }
  const std::string& config_json() const { return config_json_; }
  const std::string& producer() const { return producer_; }
  uint32_t format_version() const { return version_; }
  uint64_t file_size() const { return size_; }
  uint64_t header_size() const { return header_size_; }
  const uint8_t* base() const { return base_; }
  // The whole file's mapping (for the platform's queries about it).
  const platform::FileMapping& mapping() const { return *mapping_; }
  // True when OpenFileOptions::lock_hot was asked for and mlock succeeded.
  bool hot_locked() const { return hot_locked_; }

  const std::vector<SectionInfo>& sections() const { return sections_; }
  const std::vector<TensorInfo>& tensors() const { return tensors_; }
  const std::vector<RecordSetInfo>& record_sets() const { return record_sets_; }
  const TensorInfo* Find(const std::string& name) const;
  // The tokenizer section's bytes (its checksum verified at open), or null when the file has
  // none; its size in *size.
  const uint8_t* TokenizerSection(uint64_t* size) const;

  // Pointer to row `row` of a tensor, wherever it is stored.
  const uint8_t* Row(const TensorInfo& t, uint64_t row) const;
  // The float32 scales of row `row` of an i8 tensor (t.scale_row_bytes / 4 of them, 4-byte
  // aligned); null for other types.
  const float* RowScales(const TensorInfo& t, uint64_t row) const;

  // A tensor's stored bytes in logical (C) order, gathered from the hot section and records.
  std::vector<uint8_t> Gather(const TensorInfo& t) const;

  // Verifies the checksum of every hot tensor and every record (reads the whole file).
  // Returns CheckFailed naming each mismatch (up to 20), or Ok.
  Status VerifyChecksums() const;

 private:
  ModelFile() = default;
  Status Index(const std::string& source);
  Status IndexSections(const void* header, uint64_t data_start, const std::string& source);
  Status CheckTokenizerSection(const std::string& source) const;

  std::string path_;
  std::unique_ptr<platform::FileMapping> mapping_;
  const uint8_t* base_ = nullptr;
  uint64_t size_ = 0;
  uint32_t version_ = 0;
  uint64_t header_size_ = 0;
  bool hot_locked_ = false;
  ModelConfig config_;
  std::string config_json_;
  std::string producer_;
  std::vector<SectionInfo> sections_;
  std::vector<TensorInfo> tensors_;
  std::vector<RecordSetInfo> record_sets_;
};

}  // namespace sprig::format
