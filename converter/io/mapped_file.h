// MappedFile: a whole file mapped read-only, shared by every array that points into it.
// Internal to converter/io. Immutable after Open, so safe to share between threads.
#pragma once

#include <cstdint>
#include <memory>
#include <string>

#include "sprig/status.h"

namespace sprig::io {

class MappedFile {
 public:
  // Maps `path` (a regular file). An empty file maps to data() == nullptr, size() == 0.
  // Errors: NotFound when the file does not exist, IOError when it cannot be opened or mapped.
  static Result<std::shared_ptr<const MappedFile>> Open(const std::string& path);

  MappedFile(const MappedFile&) = delete;
  MappedFile& operator=(const MappedFile&) = delete;
  ~MappedFile();

  const uint8_t* data() const { return data_; }
  uint64_t size() const { return size_; }

 private:
  MappedFile(const uint8_t* data, uint64_t size) : data_(data), size_(size) {}
  const uint8_t* data_;
  uint64_t size_;
};

}  // namespace sprig::io
