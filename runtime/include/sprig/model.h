// sprig::Model: an opened .sprig file.
//
// A Model is immutable once open and safe to share between any number of threads; each thread
// runs it through its own Session. Opening maps the file read-only and verifies its preamble
// and header (every offset and size against the file); it reads no weights, which are paged in
// from the mapping as inference touches them.
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

struct OpenOptions {
  // Tell the kernel that record sections are read at random, so it does not read neighbouring
  // leaves ahead of use. Default: true.
  bool advise_random_records = true;
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

  // The underlying file and bound layers, for sprig's own tools. Not part of the stable API.
  const format::ModelFile& file() const { return *file_; }
  const std::vector<std::unique_ptr<layers::FeedForward>>& layers() const { return layers_; }

 private:
  explicit Model(std::unique_ptr<format::ModelFile> file);
  std::unique_ptr<format::ModelFile> file_;
  std::vector<std::unique_ptr<layers::FeedForward>> layers_;
};

}  // namespace sprig
