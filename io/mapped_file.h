// MappedFile: a whole file mapped read-only, shared by every array that points into it.
// Internal to io/. Immutable after Open, so safe to share between threads.
#pragma once

#include <cstdint>
#include <memory>
#include <string>

#include "sprig/status.h"

namespace sprig::platform {
class FileMapping;
}

namespace sprig::io {

class MappedFile {
 public:
  // Maps `path` (a regular file). An empty file maps to data() == nullptr, size() == 0.
  // Errors: NotFound when the file does not exist, IOError when it is a folder, not a regular
  // file, or cannot be opened or mapped (platform::FileMapping).
  static Result<std::shared_ptr<const MappedFile>> Open(const std::string& path);
  // A view of `size` bytes at `data` that the caller keeps alive and unchanged for as long as
  // the MappedFile and every array read from it are used; nothing is mapped or unmapped. For
  // images already in memory (the fuzz targets feed the readers this way).
  static std::shared_ptr<const MappedFile> FromMemory(const uint8_t* data, uint64_t size);

  MappedFile(const MappedFile&) = delete;
  MappedFile& operator=(const MappedFile&) = delete;
  ~MappedFile();

  const uint8_t* data() const { return data_; }
  uint64_t size() const { return size_; }

 private:
  MappedFile(const uint8_t* data, uint64_t size, std::unique_ptr<platform::FileMapping> mapping);
  const uint8_t* data_;
  uint64_t size_;
  std::unique_ptr<platform::FileMapping> mapping_;  // null: memory owned by FromMemory's caller
};

}  // namespace sprig::io
