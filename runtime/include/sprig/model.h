// sprig::Model: an opened .sprig file.
//
// A Model is immutable once open and safe to share between any number of threads; each thread
// runs it through its own Session. Opening maps the file read-only, verifies its preamble and
// header (every offset and size against the file) and binds the network (pointers into the
// mapping); it reads no weights, which are paged in from the mapping as inference touches them.
#pragma once

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "sprig/config.h"
#include "sprig/status.h"

namespace sprig {

namespace format {
class ModelFile;
}
namespace layers {
class FeedForward;
}

// How open maps the file. Open reads only the header whatever these say; they are hints to
// the kernel, and none of them failing makes open fail.
struct OpenOptions {
  // Tell the kernel that record sections are read at random, so it does not read neighbouring
  // leaves ahead of use (MADV_RANDOM). Default: true.
  bool advise_random_records = true;
  // Ask the kernel to start reading the hot section (routing nodes, dense layers) in the
  // background (MADV_WILLNEED); open does not wait for it. Default: true.
  bool warm_hot = true;
  // Lock the hot section in memory (mlock), so it is never paged out. This reads the hot
  // section during open and needs RLIMIT_MEMLOCK to allow it; if it fails the model still
  // opens and hot_locked() says false. Default: false.
  bool lock_hot = false;
};

// How much of one section of the file is in memory right now.
struct SectionResidency {
  std::string name;
  bool records = false;  // false: the hot section
  int layer = -1;        // the layer a record section belongs to; -1 for the hot section
  uint64_t size = 0;
  uint64_t resident_bytes = 0;
};

// The file's sections and how much of each is in the page cache (mincore(2), whole pages), plus
// totals. Pages count whether this process touched them or not; they stay after use until the
// kernel reclaims them.
struct Residency {
  std::vector<SectionResidency> sections;
  uint64_t hot_size = 0, hot_resident = 0;
  uint64_t records_size = 0, records_resident = 0;
};

class Model {
 public:
  // Opens `path`. On failure the Status names the file and what is wrong with it.
  static Result<std::shared_ptr<const Model>> open(const std::string& path,
                                                   const OpenOptions& options = {});
  ~Model();
  Model(const Model&) = delete;
  Model& operator=(const Model&) = delete;

  const ModelConfig& config() const;
  const std::string& path() const;
  uint64_t file_size() const;

  // Reads every weight and compares it with its stored checksum. Returns CheckFailed naming
  // the damaged tensors and records. Thread-safe; may take a while on large files.
  Status verify_checksums() const;

  // Which parts of the file are in memory now (see Residency). Thread-safe; costs one mincore
  // call per section and a byte per page.
  Residency residency() const;
  // True when OpenOptions::lock_hot was set and the hot section is locked in memory.
  bool hot_locked() const;

  // The underlying file and bound layers, for sprig's own tools. Not part of the stable API.
  const format::ModelFile& file() const;
  const std::vector<std::unique_ptr<layers::FeedForward>>& layers() const;

  // The model's private state: the mapped file and the network bound to it.
  struct Impl;

 private:
  explicit Model(std::unique_ptr<Impl> impl);
  std::unique_ptr<Impl> impl_;
};

}  // namespace sprig
