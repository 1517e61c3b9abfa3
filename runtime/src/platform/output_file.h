// A file that appears complete at its destination or not at all.
//
// The bytes go to a temporary file in the destination's folder: on Linux an anonymous one
// (O_TMPFILE) where the file system allows, which the kernel frees if the process dies;
// otherwise a hidden, uniquely named one, removed by the destructor unless published. Publish()
// flushes it to storage and gives it its name in one step (link or rename, then a sync of the
// folder on POSIX; MoveFileExW with MOVEFILE_WRITE_THROUGH on Windows). Not thread-safe.
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <string>
#include <utility>

#include "sprig/status.h"

namespace sprig::platform {

class PendingFile {
 public:
  // Creates the temporary in the folder of `path` (UTF-8). `allow_anonymous` false forces the
  // named temporary (for tests of that path). IOError naming the folder when it does not exist
  // or is not writable.
  static Result<std::unique_ptr<PendingFile>> Create(const std::string& path,
                                                     bool allow_anonymous = true);
  // Removes the temporary unless Publish() succeeded.
  ~PendingFile();
  PendingFile(const PendingFile&) = delete;
  PendingFile& operator=(const PendingFile&) = delete;

  // Appends `size` bytes. IOError naming the destination.
  Status Write(const void* data, size_t size);
  // Overwrites bytes at `offset`, which the caller keeps within what was written.
  Status WriteAt(uint64_t offset, const void* data, size_t size);
  // Flushes to storage and gives the file its name. Without `overwrite` an existing file is
  // never replaced (InvalidArgument "PATH already exists (refusing to overwrite)"), even one
  // that appeared since Create(). A target another program holds open (Windows) is an IOError
  // naming it; the destination is then untouched and the temporary removed. After a failure
  // the object only cleans up.
  Status Publish(bool overwrite);

  // The temporary's path; empty for an anonymous temporary.
  const std::string& temporary_path() const { return temporary_path_; }

 private:
  // The open temporary, in the system's terms.
  struct Handle {
    intptr_t value = -1;  // a descriptor (POSIX) or a HANDLE (Windows); -1 when closed
    uint64_t end = 0;     // bytes written (Windows writes name their offset)
  };
  PendingFile(std::string path, std::string temporary_path, intptr_t handle)
      : path_(std::move(path)), temporary_path_(std::move(temporary_path)) {
    handle_.value = handle;
  }
  std::string path_;
  std::string temporary_path_;
  Handle handle_;
  bool published_ = false;
};

}  // namespace sprig::platform
