// Read-only file mappings, hints about how they will be read, and how much of them is in
// memory. See docs/platform.md for what each call is on each system.
#pragma once

#include <cstdint>
#include <memory>
#include <string>

#include "sprig/status.h"

namespace sprig::platform {

// A whole file mapped read-only (mmap; CreateFileMappingW + MapViewOfFile on Windows, where
// files over 4 GiB are mapped whole too). Pages are read from the file when first touched;
// nothing is copied. Immutable; safe to share between threads. The file itself is closed as
// soon as it is mapped (on Windows it stays open for deletion and renaming by others).
class FileMapping {
 public:
  // Errors, each naming `path`: NotFound when it does not exist; IOError when it is a folder or
  // not a regular file (the message says "not a regular file") or cannot be opened or mapped. An
  // empty file maps to data() == nullptr, size() == 0.
  static Result<std::unique_ptr<FileMapping>> Open(const std::string& path);
  ~FileMapping();
  FileMapping(const FileMapping&) = delete;
  FileMapping& operator=(const FileMapping&) = delete;

  const uint8_t* data() const { return data_; }
  uint64_t size() const { return size_; }

 private:
  FileMapping(const uint8_t* data, uint64_t size) : data_(data), size_(size) {}
  const uint8_t* data_;
  uint64_t size_;
};

enum class AccessHint {
  kRandom,    // faults read only their own page (POSIX MADV_RANDOM; nothing on Windows)
  kNormal,    // the system's read-around (MADV_NORMAL; nothing on Windows)
  kWillNeed,  // start reading now, without waiting (MADV_WILLNEED; PrefetchVirtualMemory)
};

// Tells the system how [data, data + size), a range of a mapping, will be read. Best effort:
// a hint the system lacks is skipped, and failure costs only speed.
void Advise(const void* data, uint64_t size, AccessHint hint);

// Locks [data, data + size) in memory, which reads it now (mlock; VirtualLock on Windows).
// False when the system refuses (limits on locked memory); unmapping releases the lock.
bool LockInMemory(const void* data, uint64_t size);

// Bytes of [data, data + size), a range of a mapping, that are in memory now, at page
// granularity with the first and last pages clipped to the range; 0 when the query fails.
// POSIX (mincore): pages in the system's page cache, whoever read them. Windows
// (QueryWorkingSetEx): pages in THIS process's working set; pages that are only in the
// system's file cache do not count.
uint64_t ResidentBytes(const void* data, uint64_t size);

// Bytes of `mapping` that this process has touched and still has in memory: Linux reads the
// mapping's Rss in /proc/self/smaps (costly: the whole file is read); Windows counts the
// mapping's pages in the working set (QueryWorkingSetEx); a portable POSIX build has no such
// query and returns ResidentBytes, the page-cache figure, an upper bound.
uint64_t TouchedBytes(const FileMapping& mapping);

}  // namespace sprig::platform
