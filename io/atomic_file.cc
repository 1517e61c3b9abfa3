#include "io/atomic_file.h"
#include "base/status_macros.h"

#include <fcntl.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <cerrno>
#include <cstring>
#include <new>
#include <utility>

namespace sprig::io {

namespace {

constexpr uint64_t kBufferSize = uint64_t{4} << 20;
// write() and pwrite() move at most about 2 GiB per call on Linux; larger spans are looped.
constexpr uint64_t kMaxSyscallBytes = uint64_t{1} << 30;

bool force_named_temporary = false;

std::string FolderOf(const std::string& path) {
  const size_t slash = path.find_last_of('/');
  if (slash == std::string::npos) return ".";
  if (slash == 0) return "/";
  return path.substr(0, slash);
}

std::string BaseOf(const std::string& path) {
  const size_t slash = path.find_last_of('/');
  return slash == std::string::npos ? path : path.substr(slash + 1);
}

std::string ErrorText(int err) {
  return std::strerror(err);
}

// A name ".BASE.tmp-XXXXXX" in the destination's folder, hidden and unlikely to collide;
// callers create it with O_EXCL (or link to it) and retry on EEXIST.
std::string TemporaryName(const std::string& path) {
  static std::atomic<uint64_t> counter{0};
  struct timespec ts;
  clock_gettime(CLOCK_REALTIME, &ts);
  uint64_t x = (uint64_t(getpid()) << 32) ^ uint64_t(ts.tv_nsec) ^ (uint64_t(ts.tv_sec) << 20) ^
               (counter.fetch_add(1) * 0x9e3779b97f4a7c15ull);
  // splitmix64 finaliser, so consecutive names differ in every character.
  x ^= x >> 30;
  x *= 0xbf58476d1ce4e5b9ull;
  x ^= x >> 27;
  x *= 0x94d049bb133111ebull;
  x ^= x >> 31;
  static const char kChars[] = "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789";
  std::string suffix;
  for (int i = 0; i < 6; ++i) {
    suffix += kChars[x % 62];
    x /= 62;
  }
  const std::string folder = FolderOf(path);
  const std::string prefix = path.find('/') == std::string::npos ? "" : folder + "/";
  return prefix + "." + BaseOf(path) + ".tmp-" + suffix;
}

Status FolderError(const std::string& path, int err) {
  const std::string folder = FolderOf(path);
  if (err == ENOENT || err == ENOTDIR) {
    return Status::IOError("cannot write " + path + ": folder " + folder + " does not exist");
  }
  return Status::IOError("cannot write " + path + ": folder " + folder + " is not writable (" +
                         ErrorText(err) + ")");
}

// Gives the anonymous file `fd` the name `dest`. The /proc path is the documented way to link
// an O_TMPFILE file without privileges; AT_EMPTY_PATH covers systems without /proc mounted.
int LinkDescriptor(int fd, const std::string& dest) {
  const std::string proc = "/proc/self/fd/" + std::to_string(fd);
  if (::linkat(AT_FDCWD, proc.c_str(), AT_FDCWD, dest.c_str(), AT_SYMLINK_FOLLOW) == 0) return 0;
  int err = errno;
  if (err == ENOENT && ::access("/proc/self/fd", F_OK) != 0) {
    if (::linkat(fd, "", AT_FDCWD, dest.c_str(), AT_EMPTY_PATH) == 0) return 0;
    err = errno;
  }
  return err;
}

}  // namespace

void AtomicFile::ForceNamedTemporaryForTesting(bool force) {
  force_named_temporary = force;
}

Result<AtomicFile> AtomicFile::Create(const std::string& path, bool overwrite) {
  const std::string base = BaseOf(path);
  if (base.empty() || base == "." || base == "..") {
    return Status::InvalidArgument("cannot write '" + path + "': it names a folder, not a file");
  }
  struct stat st;
  if (::stat(path.c_str(), &st) == 0) {
    if (S_ISDIR(st.st_mode)) {
      return Status::InvalidArgument("cannot write " + path + ": it is a folder");
    }
    if (!overwrite)
      return Status::InvalidArgument(path + " already exists (refusing to overwrite)");
  }
  const std::string folder = FolderOf(path);
  if (::stat(folder.c_str(), &st) != 0) return FolderError(path, errno);
  if (!S_ISDIR(st.st_mode)) {
    return Status::IOError("cannot write " + path + ": " + folder + " is not a folder");
  }

  AtomicFile file;
  file.path_ = path;
  file.overwrite_ = overwrite;
  file.buffer_.reset(new (std::nothrow) uint8_t[kBufferSize]);
  if (!file.buffer_) return Status::IOError("out of memory opening " + path + " for writing");

  // O_TMPFILE: an unnamed inode in the folder, freed by the kernel if we die before Commit.
  int fd = -1;
  int err = EOPNOTSUPP;
  if (!force_named_temporary) {
    fd = ::open(folder.c_str(), O_TMPFILE | O_WRONLY | O_CLOEXEC, 0644);
    err = errno;
  }
  if (fd < 0 && err != EOPNOTSUPP && err != EISDIR && err != EINVAL) {
    return FolderError(path, err);
  }
  if (fd < 0) {
    // The file system lacks O_TMPFILE: a hidden named temporary, removed unless committed.
    for (int attempt = 0; attempt < 100 && fd < 0; ++attempt) {
      file.temp_path_ = TemporaryName(path);
      fd = ::open(file.temp_path_.c_str(), O_CREAT | O_EXCL | O_WRONLY | O_CLOEXEC, 0644);
      err = errno;
      if (fd < 0 && err != EEXIST) {
        file.temp_path_.clear();
        return FolderError(path, err);
      }
    }
    if (fd < 0) {
      file.temp_path_.clear();
      return Status::IOError("cannot write " + path + ": no free temporary name in " + folder);
    }
  }
  file.fd_ = fd;
  return file;
}

AtomicFile::AtomicFile(AtomicFile&& other) noexcept {
  *this = std::move(other);
}

AtomicFile& AtomicFile::operator=(AtomicFile&& other) noexcept {
  if (this != &other) {
    Discard();
    path_ = std::move(other.path_);
    temp_path_ = std::move(other.temp_path_);
    fd_ = std::exchange(other.fd_, -1);
    overwrite_ = other.overwrite_;
    size_ = std::exchange(other.size_, 0);
    buffer_ = std::move(other.buffer_);
    flushed_ = std::exchange(other.flushed_, 0);
    committed_ = std::exchange(other.committed_, false);
    error_ = std::move(other.error_);
    other.temp_path_.clear();
  }
  return *this;
}

AtomicFile::~AtomicFile() {
  Discard();
}

void AtomicFile::Discard() {
  if (fd_ >= 0) {
    ::close(fd_);
    fd_ = -1;
  }
  if (!temp_path_.empty() && !committed_) ::unlink(temp_path_.c_str());
  temp_path_.clear();
}

Status AtomicFile::Fail(Status status) {
  if (error_.ok()) error_ = status;
  return status;
}

Status AtomicFile::WriteAll(const void* data, size_t size) {
  auto p = static_cast<const uint8_t*>(data);
  while (size > 0) {
    const ssize_t n = ::write(fd_, p, std::min<uint64_t>(size, kMaxSyscallBytes));
    if (n < 0) {
      if (errno == EINTR) continue;
      return Fail(Status::IOError("cannot write " + path_ + ": " + ErrorText(errno)));
    }
    p += n;
    size -= size_t(n);
  }
  return Status::Ok();
}

Status AtomicFile::Flush() {
  if (size_ == flushed_) return Status::Ok();
  SPRIG_RETURN_IF_ERROR(WriteAll(buffer_.get(), size_ - flushed_));
  flushed_ = size_;
  return Status::Ok();
}

Status AtomicFile::Write(const void* data, size_t size) {
  if (!error_.ok()) return error_;
  if (fd_ < 0) {
    return Status::InvalidArgument("cannot write " + path_ + ": it is already committed or closed");
  }
  if (size == 0) return Status::Ok();
  if (size >= kBufferSize || size_ - flushed_ + size > kBufferSize) {
    SPRIG_RETURN_IF_ERROR(Flush());
    if (size >= kBufferSize) {
      // Large pieces go straight to the kernel: copying them into the buffer gains nothing.
      SPRIG_RETURN_IF_ERROR(WriteAll(data, size));
      size_ += size;
      flushed_ = size_;
      return Status::Ok();
    }
  }
  std::memcpy(buffer_.get() + (size_ - flushed_), data, size);
  size_ += size;
  return Status::Ok();
}

Status AtomicFile::WriteZeros(uint64_t count) {
  if (!error_.ok()) return error_;
  if (fd_ < 0) {
    return Status::InvalidArgument("cannot write " + path_ + ": it is already committed or closed");
  }
  while (count > 0) {
    if (size_ - flushed_ == kBufferSize) SPRIG_RETURN_IF_ERROR(Flush());
    const uint64_t n = std::min(count, kBufferSize - (size_ - flushed_));
    std::memset(buffer_.get() + (size_ - flushed_), 0, n);
    size_ += n;
    count -= n;
  }
  return Status::Ok();
}

Status AtomicFile::WriteAt(uint64_t offset, const void* data, size_t size) {
  if (!error_.ok()) return error_;
  if (fd_ < 0) {
    return Status::InvalidArgument("cannot write " + path_ + ": it is already committed or closed");
  }
  if (offset > size_ || size > size_ - offset) {
    return Status::InvalidArgument("cannot write " + path_ + ": WriteAt(" + std::to_string(offset) +
                                   ", " + std::to_string(size) + ") lies beyond the " +
                                   std::to_string(size_) + " bytes written so far");
  }
  auto p = static_cast<const uint8_t*>(data);
  // The part already in the file is rewritten in place; the rest is still in the buffer.
  while (size > 0 && offset < flushed_) {
    const uint64_t want = std::min<uint64_t>({size, flushed_ - offset, kMaxSyscallBytes});
    const ssize_t n = ::pwrite(fd_, p, want, off_t(offset));
    if (n < 0) {
      if (errno == EINTR) continue;
      return Fail(Status::IOError("cannot write " + path_ + ": " + ErrorText(errno)));
    }
    p += n;
    offset += uint64_t(n);
    size -= size_t(n);
  }
  if (size > 0) std::memcpy(buffer_.get() + (offset - flushed_), p, size);
  return Status::Ok();
}

Status AtomicFile::CommitAnonymous() {
  if (!overwrite_) {
    // linkat never replaces an existing name, so a file that appeared since Create() is kept.
    const int err = LinkDescriptor(fd_, path_);
    if (err == EEXIST)
      return Status::InvalidArgument(path_ + " already exists (refusing to overwrite)");
    if (err != 0) return Status::IOError("cannot create " + path_ + ": " + ErrorText(err));
    return Status::Ok();
  }
  // A link can't replace a file, so link to a fresh hidden name, then rename over the target.
  for (int attempt = 0; attempt < 100; ++attempt) {
    const std::string temp = TemporaryName(path_);
    const int err = LinkDescriptor(fd_, temp);
    if (err == EEXIST) continue;
    if (err != 0) return Status::IOError("cannot create " + path_ + ": " + ErrorText(err));
    if (::rename(temp.c_str(), path_.c_str()) != 0) {
      const int rename_err = errno;
      ::unlink(temp.c_str());
      return Status::IOError("cannot replace " + path_ + ": " + ErrorText(rename_err));
    }
    return Status::Ok();
  }
  return Status::IOError("cannot create " + path_ + ": no free temporary name in its folder");
}

Status AtomicFile::CommitNamed() {
  if (overwrite_) {
    if (::rename(temp_path_.c_str(), path_.c_str()) != 0) {
      return Status::IOError("cannot rename " + temp_path_ + " to " + path_ + ": " +
                             ErrorText(errno));
    }
    temp_path_.clear();
    return Status::Ok();
  }
  // link() fails with EEXIST instead of replacing, which rename() would do silently.
  if (::link(temp_path_.c_str(), path_.c_str()) != 0) {
    const int err = errno;
    if (err == EEXIST)
      return Status::InvalidArgument(path_ + " already exists (refusing to overwrite)");
    return Status::IOError("cannot create " + path_ + ": " + ErrorText(err));
  }
  ::unlink(temp_path_.c_str());
  temp_path_.clear();
  return Status::Ok();
}

Status AtomicFile::Commit() {
  if (!error_.ok()) return error_;
  if (fd_ < 0 || committed_) {
    return Status::InvalidArgument("cannot commit " + path_ +
                                   ": it is already committed or closed");
  }
  SPRIG_RETURN_IF_ERROR(Flush());
  if (::fsync(fd_) != 0) {
    return Fail(Status::IOError("cannot write " + path_ + ": fsync failed: " + ErrorText(errno)));
  }
  SPRIG_RETURN_IF_ERROR(temp_path_.empty() ? CommitAnonymous() : CommitNamed());
  committed_ = true;
  ::close(fd_);
  fd_ = -1;
  // The new name lives in the folder's own data; sync it so the name survives a power cut.
  const std::string folder = FolderOf(path_);
  const int dir = ::open(folder.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
  if (dir >= 0) {
    const int rc = ::fsync(dir);
    const int err = errno;
    ::close(dir);
    if (rc != 0 && err != EINVAL) {
      return Status::IOError(path_ +
                             " was written, but its folder could not be synced: " + ErrorText(err));
    }
  }
  return Status::Ok();
}

}  // namespace sprig::io
