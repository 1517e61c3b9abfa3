// POSIX: files by path, the process, memory figures, the file cache, and CPU features off x86.
#include <sys/resource.h>
#include <sys/stat.h>
#include <unistd.h>

#include <fcntl.h>
#include <cerrno>
#include <cstdio>
#include <cstring>
#include <ctime>

#include "platform/common.h"
#include "platform/cpu.h"
#include "platform/files.h"
#include "platform/memory.h"
#include "platform/posix_common.h"
#include "platform/process.h"

#if SPRIG_PLATFORM_LINUX && defined(__aarch64__)
#include <asm/hwcap.h>
#include <sys/auxv.h>
#endif

namespace sprig::platform {

// ---- files ----

bool IsSeparator(char c) {
  return c == '/';
}

PathInfo InfoOf(const std::string& path) {
  PathInfo info;
  struct stat st;
  if (::stat(path.c_str(), &st) != 0) {
    if (errno != ENOENT && errno != ENOTDIR) info.error = ErrnoText(errno);
    return info;
  }
  info.kind = S_ISREG(st.st_mode)   ? PathKind::kFile
              : S_ISDIR(st.st_mode) ? PathKind::kFolder
                                    : PathKind::kOther;
  if (info.kind == PathKind::kFile) info.size = static_cast<uint64_t>(st.st_size);
  return info;
}

std::FILE* OpenFile(const std::string& path, const char* mode) {
  return std::fopen(path.c_str(), mode);
}

Status RemoveFile(const std::string& path) {
  if (::unlink(path.c_str()) == 0) return Status::Ok();
  const int err = errno;
  if (err == ENOENT) return Status::NotFound("cannot remove " + path + ": it does not exist");
  return Status::IOError("cannot remove " + path + ": " + ErrnoText(err));
}

bool SameFile(const std::string& a, const std::string& b) {
  struct stat sa, sb;
  if (::stat(a.c_str(), &sa) != 0 || ::stat(b.c_str(), &sb) != 0) return false;
  return sa.st_dev == sb.st_dev && sa.st_ino == sb.st_ino;
}

// POSIX paths are bytes; UTF-8 ones pass through unchanged.
std::filesystem::path FsPath(const std::string& utf8) {
  return std::filesystem::path(utf8);
}

std::string Utf8(const std::filesystem::path& path) {
  return path.string();
}

std::string TemporaryFolder() {
  std::error_code error;
  const std::filesystem::path folder = std::filesystem::temp_directory_path(error);
  return error ? std::string("/tmp") : folder.string();
}

// ---- the process ----

unsigned long ProcessId() {
  return static_cast<unsigned long>(::getpid());
}

bool IsTerminal(std::FILE* stream) {
  return ::isatty(::fileno(stream)) != 0;
}

std::vector<std::string> Utf8Arguments(int argc, char** argv) {
  return std::vector<std::string>(argv, argv + argc);
}

void UseUtf8Console() {}

std::string CommandLine() {
  std::string line;
#if SPRIG_PLATFORM_LINUX
  // The arguments as the kernel holds them, each ended by a NUL.
  if (std::FILE* f = std::fopen("/proc/self/cmdline", "rb")) {
    int c;
    while ((c = std::fgetc(f)) != EOF) line += c == 0 ? ' ' : static_cast<char>(c);
    std::fclose(f);
  }
  while (!line.empty() && line.back() == ' ') line.pop_back();
#endif
  return line;
}

namespace {

double Seconds(clockid_t clock) {
  timespec t{};
  ::clock_gettime(clock, &t);
  return static_cast<double>(t.tv_sec) + static_cast<double>(t.tv_nsec) * 1e-9;
}

}  // namespace

double ProcessCpuSeconds() {
  return Seconds(CLOCK_PROCESS_CPUTIME_ID);
}

double ThreadCpuSeconds() {
  return Seconds(CLOCK_THREAD_CPUTIME_ID);
}

// ---- memory ----

namespace {

#if SPRIG_PLATFORM_LINUX
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
#endif

}  // namespace

MemoryFigures ReadMemoryFigures() {
  MemoryFigures m;
  struct rusage ru;
  const bool have_usage = getrusage(RUSAGE_SELF, &ru) == 0;
  if (have_usage) {
    m.minor_faults = static_cast<uint64_t>(ru.ru_minflt);
    m.major_faults = static_cast<uint64_t>(ru.ru_majflt);
  }
#if SPRIG_PLATFORM_LINUX
  uint64_t swapped = 0;
  if (std::FILE* f = std::fopen("/proc/self/status", "r")) {
    char line[256];
    while (std::fgets(line, sizeof(line), f)) {
      if (!ParseKb(line, "VmRSS", &m.resident) && !ParseKb(line, "VmHWM", &m.peak_resident) &&
          !ParseKb(line, "RssFile", &m.resident_file) && !ParseKb(line, "VmSwap", &swapped)) {
        ParseKb(line, "RssAnon", &m.resident_anonymous);
      }
    }
    std::fclose(f);
  }
  m.private_bytes = m.resident_anonymous + swapped;
#else
  // POSIX has no query for the resident set now; the peak is ru_maxrss, in bytes on macOS and
  // in kilobytes on Linux and the BSDs.
  if (have_usage) {
#if defined(__APPLE__)
    m.peak_resident = static_cast<uint64_t>(ru.ru_maxrss);
#else
    m.peak_resident = static_cast<uint64_t>(ru.ru_maxrss) * 1024;
#endif
  }
#endif
  return m;
}

Status DropFromCache(const std::string& path) {
#if SPRIG_PLATFORM_LINUX
  const int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) return Status::IOError("cannot open " + path + ": " + ErrnoText(errno));
  // Dirty pages are not dropped; write them back first (a freshly packed file may have some).
  ::fdatasync(fd);
  const int err = ::posix_fadvise(fd, 0, 0, POSIX_FADV_DONTNEED);
  ::close(fd);
  if (err != 0) {
    return Status::IOError("cannot drop " + path + " from the page cache: " + ErrnoText(err));
  }
  return Status::Ok();
#else
  return Status::NotSupported("dropping " + path +
                              " from the page cache is not supported on this system");
#endif
}

// ---- CPU features (x86-64 is cpu_x86.cc) ----

#if !(defined(__x86_64__) || defined(_M_X64))
const CpuFeatures& DetectCpu() {
  static const CpuFeatures features = [] {
    CpuFeatures f;
#if defined(__aarch64__)
    // Advanced SIMD (with the f16 <-> f32 conversions the path uses) is required of AArch64
    // cores meant for standard software, but the architecture lets specialised cores omit it;
    // Linux reports it as HWCAP_ASIMD, so such a core falls back to scalar instead of faulting.
    // Elsewhere (macOS on Apple cores always has it) it is assumed.
#if SPRIG_PLATFORM_LINUX
    f.neon = (getauxval(AT_HWCAP) & HWCAP_ASIMD) != 0;
#else
    f.neon = true;
#endif
#endif
    return f;
  }();
  return features;
}
#endif

}  // namespace sprig::platform
