#include "io/mapped_file.h"

#include <fcntl.h>
#include <sys/mman.h>
#include <sys/stat.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>

namespace sprig::io {

namespace {

std::string OpenErrorMessage(const std::string& path, int err) {
  switch (err) {
    case ENOENT:
      return path + " does not exist";
    case ENOTDIR:
      return path + " does not exist (a folder on its path is a file)";
    case EACCES:
    case EPERM:
      return "cannot read " + path + ": permission denied";
    default:
      return "cannot open " + path + ": " + std::strerror(err);
  }
}

}  // namespace

Result<std::shared_ptr<const MappedFile>> MappedFile::Open(const std::string& path) {
  int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) {
    int err = errno;
    std::string message = OpenErrorMessage(path, err);
    if (err == ENOENT || err == ENOTDIR) return Status::NotFound(message);
    return Status::IOError(message);
  }
  struct stat st;
  if (::fstat(fd, &st) != 0) {
    int err = errno;
    ::close(fd);
    return Status::IOError("cannot read " + path + ": " + std::strerror(err));
  }
  if (S_ISDIR(st.st_mode)) {
    ::close(fd);
    return Status::IOError("cannot read " + path + ": it is a folder, not a file");
  }
  if (!S_ISREG(st.st_mode)) {
    ::close(fd);
    return Status::IOError("cannot read " + path + ": it is not a regular file");
  }
  uint64_t size = uint64_t(st.st_size);
  const uint8_t* data = nullptr;
  if (size > 0) {
    // MAP_PRIVATE + PROT_READ: the arrays are views of the page cache; nothing is copied.
    void* p = ::mmap(nullptr, size, PROT_READ, MAP_PRIVATE, fd, 0);
    if (p == MAP_FAILED) {
      int err = errno;
      ::close(fd);
      return Status::IOError("cannot map " + path + " into memory: " + std::strerror(err));
    }
    data = static_cast<const uint8_t*>(p);
  }
  // The mapping stays valid after the descriptor is closed.
  ::close(fd);
  return std::shared_ptr<const MappedFile>(new MappedFile(data, size, /*mapped=*/true));
}

std::shared_ptr<const MappedFile> MappedFile::FromMemory(const uint8_t* data, uint64_t size) {
  return std::shared_ptr<const MappedFile>(new MappedFile(data, size, /*mapped=*/false));
}

MappedFile::~MappedFile() {
  if (mapped_ && data_ != nullptr) ::munmap(const_cast<uint8_t*>(data_), size_);
}

}  // namespace sprig::io
