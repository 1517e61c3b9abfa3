// POSIX: read-only mappings (mmap), access hints (madvise on Linux, posix_madvise elsewhere),
// residency (mincore) and the pages this process touched (/proc/self/smaps on Linux).
#include <fcntl.h>
#include <sys/mman.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cinttypes>
#include <cstdio>
#include <cstring>
#include <vector>

#include "platform/common.h"
#include "platform/mapping.h"
#include "platform/posix_common.h"

namespace sprig::platform {
namespace {

// mincore's vector is `unsigned char*` on Linux and `char*` on macOS and the BSDs: take the type
// from the declaration instead of naming systems.
template <typename T>
struct ThirdArgument;
template <typename R, typename A, typename B, typename C, bool kNoexcept>
struct ThirdArgument<R (*)(A, B, C) noexcept(kNoexcept)> {
  using type = C;
};
using MincoreVector = ThirdArgument<decltype(&::mincore)>::type;

uint64_t PageSize() {
  static const uint64_t page = static_cast<uint64_t>(::sysconf(_SC_PAGESIZE));
  return page;
}

Status OpenError(const std::string& path, int err) {
  switch (err) {
    case ENOENT:
      return Status::NotFound(path + " does not exist");
    case ENOTDIR:
      return Status::NotFound(path + " does not exist (a folder on its path is a file)");
    case EACCES:
    case EPERM:
      return Status::IOError("cannot read " + path + ": permission denied");
    default:
      return Status::IOError("cannot open " + path + ": " + ErrnoText(err));
  }
}

}  // namespace

Result<std::unique_ptr<FileMapping>> FileMapping::Open(const std::string& path) {
  const int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) return OpenError(path, errno);
  struct stat st;
  if (::fstat(fd, &st) != 0) {
    const int err = errno;
    ::close(fd);
    return Status::IOError("cannot read " + path + ": " + ErrnoText(err));
  }
  if (!S_ISREG(st.st_mode)) {
    ::close(fd);
    return Status::IOError("cannot read " + path + ": it is " +
                           (S_ISDIR(st.st_mode) ? "a folder" : "something") +
                           ", not a regular file");
  }
  const uint64_t size = static_cast<uint64_t>(st.st_size);
  const uint8_t* data = nullptr;
  if (size > 0) {
    // Shared and read-only: a view of the page cache; nothing is copied.
    void* p = ::mmap(nullptr, size, PROT_READ, MAP_SHARED, fd, 0);
    if (p == MAP_FAILED) {
      const int err = errno;
      ::close(fd);
      return Status::IOError("cannot map " + path + " into memory: " + ErrnoText(err));
    }
    data = static_cast<const uint8_t*>(p);
  }
  // The mapping stays valid after the descriptor is closed.
  ::close(fd);
  return std::unique_ptr<FileMapping>(new FileMapping(data, size));
}

FileMapping::~FileMapping() {
  if (data_ != nullptr) ::munmap(const_cast<uint8_t*>(data_), size_);
}

void Advise(const void* data, uint64_t size, AccessHint hint) {
  if (size == 0) return;
  // The calls take whole pages: start at the page holding `data`.
  const uintptr_t begin = reinterpret_cast<uintptr_t>(data);
  const uintptr_t start = begin - begin % PageSize();
  uint8_t* const p = reinterpret_cast<uint8_t*>(start);
  const uint64_t length = begin + size - start;
#if SPRIG_PLATFORM_LINUX
  if (hint == AccessHint::kWillNeed) {
    // Queues reading without waiting. The kernel caps one call at its read-ahead window, so
    // long ranges go in pieces.
    constexpr uint64_t kPiece = 2u << 20;
    for (uint64_t off = 0; off < length; off += kPiece) {
      ::madvise(p + off, std::min(kPiece, length - off), MADV_WILLNEED);
    }
    return;
  }
  ::madvise(p, length, hint == AccessHint::kRandom ? MADV_RANDOM : MADV_NORMAL);
#else
  const int advice = hint == AccessHint::kWillNeed ? POSIX_MADV_WILLNEED
                     : hint == AccessHint::kRandom ? POSIX_MADV_RANDOM
                                                   : POSIX_MADV_NORMAL;
  ::posix_madvise(p, length, advice);
#endif
}

bool LockInMemory(const void* data, uint64_t size) {
  return ::mlock(data, size) == 0;
}

uint64_t ResidentBytes(const void* data, uint64_t size) {
  if (size == 0) return 0;
  // mincore works in the system's pages, which may be larger than the file's 4 KiB alignment:
  // query from the page holding `data` and clip the first and last pages to the range.
  const PageSpan span = PageSpan::Of(data, size, PageSize());
  std::vector<unsigned char> vec(span.count);
  if (::mincore(reinterpret_cast<void*>(span.start), span.begin + size - span.start,
                reinterpret_cast<MincoreVector>(vec.data())) != 0) {
    return 0;
  }
  uint64_t resident = 0;
  for (uint64_t i = 0; i < span.count; ++i) {
    if ((vec[i] & 1) != 0) resident += span.BytesIn(i);
  }
  return resident;
}

uint64_t TouchedBytes(const FileMapping& mapping) {
#if SPRIG_PLATFORM_LINUX
  std::FILE* f = std::fopen("/proc/self/smaps", "r");
  if (!f) return 0;
  const uintptr_t want = reinterpret_cast<uintptr_t>(mapping.data());
  char line[512];
  bool in_mapping = false;
  uint64_t rss = 0;
  while (std::fgets(line, sizeof(line), f)) {
    uintptr_t start = 0, end = 0;
    // A mapping's first line is "start-end perms offset dev inode path"; its fields follow.
    if (std::sscanf(line, "%" SCNxPTR "-%" SCNxPTR " ", &start, &end) == 2 &&
        std::strchr(line, ' ') > std::strchr(line, '-')) {
      if (in_mapping) break;
      in_mapping = start == want;
      continue;
    }
    unsigned long long kb = 0;
    if (in_mapping && std::sscanf(line, "Rss: %llu kB", &kb) == 1) rss = kb * 1024;
  }
  std::fclose(f);
  return rss;
#else
  // No per-process figure without /proc: the page cache's, which includes this process's.
  return ResidentBytes(mapping.data(), mapping.size());
#endif
}

}  // namespace sprig::platform
