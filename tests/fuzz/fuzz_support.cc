#include "fuzz_support.h"

#ifdef _WIN32
#include <process.h>

#include <filesystem>
#include <fstream>
#else
#include <sys/mman.h>
#include <unistd.h>
#endif

#include <cstdio>
#include <cstdlib>

namespace sprig::fuzz {

// Where Touch leaves its sum; volatile, so the reads that produced it are kept.
volatile uint8_t touch_sink;

#ifdef _WIN32
// Windows has no anonymous file with a path: a temporary file of this process stands in. Each
// input is read by a model or reader that is closed before the next is written, so nothing
// holds the file mapped when it is rewritten.
MemoryFile::MemoryFile() {
  path_ = (std::filesystem::temp_directory_path() /
           ("sprig-fuzz-" + std::to_string(_getpid()) + ".bin"))
              .string();
}

MemoryFile::~MemoryFile() {
  std::error_code ignored;
  std::filesystem::remove(path_, ignored);
}

const std::string& MemoryFile::Write(const uint8_t* data, size_t size) {
  std::ofstream out(path_, std::ios::binary | std::ios::trunc);
  out.write(reinterpret_cast<const char*>(data), static_cast<std::streamsize>(size));
  if (!out.flush()) std::abort();
  return path_;
}
#else
MemoryFile::MemoryFile() {
  fd_ = memfd_create("sprig-fuzz", MFD_CLOEXEC);
  if (fd_ < 0) {
    std::perror("memfd_create");
    std::abort();
  }
  path_ = "/proc/self/fd/" + std::to_string(fd_);
}

MemoryFile::~MemoryFile() {
  close(fd_);
}

const std::string& MemoryFile::Write(const uint8_t* data, size_t size) {
  // Shrinking to zero first drops every old page, so no byte of the last input survives.
  if (ftruncate(fd_, 0) != 0 || ftruncate(fd_, static_cast<off_t>(size)) != 0) std::abort();
  size_t done = 0;
  while (done < size) {
    const ssize_t n = pwrite(fd_, data + done, size - done, static_cast<off_t>(done));
    if (n <= 0) std::abort();
    done += static_cast<size_t>(n);
  }
  return path_;
}
#endif

void Touch(const void* data, size_t size) {
  const auto* p = static_cast<const volatile uint8_t*>(data);
  uint8_t sum = 0;
  for (size_t i = 0; i < size; ++i) sum = static_cast<uint8_t>(sum + p[i]);
  touch_sink = sum;
}

void CheckArrays(const Result<std::vector<io::NdArray>>& arrays) {
  if (!arrays.ok()) {
    if (arrays.status().message().empty()) std::abort();
    return;
  }
  for (const io::NdArray& a : *arrays) Touch(a.data, a.nbytes());
}

}  // namespace sprig::fuzz
