// Helpers shared by the fuzz targets: a file in memory that path-based readers can open, and a
// way to touch every byte a reader hands back (so a range that runs past the file is read, and
// AddressSanitizer sees it).
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "io/ndarray.h"
#include "sprig/status.h"

namespace sprig::fuzz {

// An anonymous in-memory file (memfd_create), reachable through a /proc/self/fd path; on
// Windows a temporary file. One per target, rewritten for every input: readers open it like
// any file, and on Linux nothing touches disk.
class MemoryFile {
 public:
  MemoryFile();
  ~MemoryFile();
  MemoryFile(const MemoryFile&) = delete;
  MemoryFile& operator=(const MemoryFile&) = delete;
  // Replaces the contents with `size` bytes of `data`; returns the path to open.
  const std::string& Write(const uint8_t* data, size_t size);

 private:
  int fd_ = -1;
  std::string path_;
};

// Folds every byte of [data, data + size) into a value the optimiser cannot drop.
void Touch(const void* data, size_t size);

// The common check of a reader's result: a refusal must carry a message (aborts otherwise), and
// every byte of every array read is touched.
void CheckArrays(const Result<std::vector<io::NdArray>>& arrays);

}  // namespace sprig::fuzz
