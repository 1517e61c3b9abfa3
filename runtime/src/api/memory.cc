#include "sprig/memory.h"

#include <fcntl.h>
#include <sys/resource.h>
#include <unistd.h>

#include <cerrno>
#include <cstdio>
#include <cstring>

namespace sprig {
namespace {

// The kB figure of a "Name:   1234 kB" line of /proc/self/status, in bytes; false if `line`
// is not the named field.
bool ParseKb(const char* line, const char* name, uint64_t* bytes) {
  const size_t n = std::strlen(name);
  if (std::strncmp(line, name, n) != 0 || line[n] != ':') return false;
  unsigned long long kb = 0;
  if (std::sscanf(line + n + 1, "%llu", &kb) != 1) return false;
  *bytes = static_cast<uint64_t>(kb) * 1024;
  return true;
}

}  // namespace

ProcessMemory ReadProcessMemory() {
  ProcessMemory m;
#ifdef __linux__
  if (FILE* f = std::fopen("/proc/self/status", "r")) {
    char line[256];
    while (std::fgets(line, sizeof(line), f)) {
      if (!ParseKb(line, "VmRSS", &m.rss) && !ParseKb(line, "VmHWM", &m.peak_rss) &&
          !ParseKb(line, "RssFile", &m.rss_file)) {
        ParseKb(line, "RssAnon", &m.rss_anon);
      }
    }
    std::fclose(f);
  }
  struct rusage ru;
  if (getrusage(RUSAGE_SELF, &ru) == 0) {
    m.minor_faults = static_cast<uint64_t>(ru.ru_minflt);
    m.major_faults = static_cast<uint64_t>(ru.ru_majflt);
  }
#endif
  return m;
}

Status EvictFromPageCache(const std::string& path) {
#ifdef __linux__
  const int fd = open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) return Status::IOError("cannot open " + path + ": " + std::strerror(errno));
  // Dirty pages are not dropped; write them back first (a freshly packed file may have some).
  fdatasync(fd);
  const int err = posix_fadvise(fd, 0, 0, POSIX_FADV_DONTNEED);
  close(fd);
  if (err != 0) {
    return Status::IOError("cannot drop " + path + " from the page cache: " + std::strerror(err));
  }
  return Status::Ok();
#else
  return Status::NotSupported("dropping " + path + " from the page cache needs Linux");
#endif
}

}  // namespace sprig
