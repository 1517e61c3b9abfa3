// AtomicFile: write a file so that it appears complete at its destination or not at all.
//
// The data goes to a temporary file in the destination's folder (platform::PendingFile: an
// anonymous one on Linux where the file system supports O_TMPFILE, so that even a process killed
// with SIGKILL leaves nothing behind; otherwise a uniquely named temporary that the destructor
// removes). Commit() flushes it to disk and gives it its name in one step; a destructor without
// Commit() discards it. Writes are gathered here in a large buffer. Not thread-safe; one writer
// per object.
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <string>

#include "sprig/status.h"

namespace sprig::platform {
class PendingFile;
}

namespace sprig::io {

class AtomicFile {
 public:
  // Fails if `path` exists and !overwrite, or the folder is not writable.
  static Result<AtomicFile> Create(const std::string& path, bool overwrite);

  AtomicFile(AtomicFile&& other) noexcept;
  AtomicFile& operator=(AtomicFile&& other) noexcept;
  AtomicFile(const AtomicFile&) = delete;
  AtomicFile& operator=(const AtomicFile&) = delete;
  ~AtomicFile();

  // Appends bytes at the current end.
  Status Write(const void* data, size_t size);
  // Appends `count` zero bytes.
  Status WriteZeros(uint64_t count);
  // Overwrites bytes at `offset` (which must lie within what was written).
  Status WriteAt(uint64_t offset, const void* data, size_t size);
  uint64_t size() const { return size_; }
  // Flushes to disk, then gives the file its name (never replacing an existing file without
  // `overwrite`) and makes the name durable; see platform/output_file.h.
  Status Commit();

  // Tests only: when true, Create() uses the named temporary even where O_TMPFILE works, so
  // that path can be exercised on any file system (Windows always uses it). Not thread-safe; set
  // before writing.
  static void ForceNamedTemporaryForTesting(bool force);

 private:
  AtomicFile() = default;
  void Discard();
  Status Flush();
  Status WriteAll(const void* data, size_t size);
  Status Fail(Status status);

  std::string path_;
  std::unique_ptr<platform::PendingFile> file_;  // null once committed or discarded
  bool overwrite_ = false;
  uint64_t size_ = 0;
  // Writes are gathered in a large buffer so that many small ones cost few system calls.
  // Bytes [0, flushed_) are in the file; [flushed_, size_) are buffer_[0, size_ - flushed_).
  std::unique_ptr<uint8_t[]> buffer_;
  uint64_t flushed_ = 0;
  bool committed_ = false;
  Status error_;  // the first failed write; Commit() refuses to publish a partial file
};

}  // namespace sprig::io
