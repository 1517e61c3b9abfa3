// POSIX: a file written aside and published in one step. Linux first tries an anonymous
// temporary (O_TMPFILE), which the kernel frees if the process dies before publishing, and
// names it with linkat through /proc/self/fd; elsewhere, and on file systems without
// O_TMPFILE, a hidden named temporary is renamed (or, without overwrite, linked) into place.
#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>

#include "base/status_macros.h"
#include "platform/common.h"
#include "platform/files.h"
#include "platform/output_file.h"
#include "platform/posix_common.h"

namespace sprig::platform {

namespace {

// write() and pwrite() move at most about 2 GiB per call on Linux; larger spans are looped.
constexpr uint64_t kMaxSyscallBytes = uint64_t{1} << 30;

Status FolderError(const std::string& path, int err) {
  const std::string folder = FolderOf(path);
  if (err == ENOENT || err == ENOTDIR) {
    return Status::IOError("cannot write " + path + ": folder " + folder + " does not exist");
  }
  return Status::IOError("cannot write " + path + ": folder " + folder + " is not writable (" +
                         ErrnoText(err) + ")");
}

// The descriptor PendingFile keeps in its system-neutral handle.
int Fd(intptr_t handle) {
  return static_cast<int>(handle);
}

Status Refused(const std::string& path) {
  return Status::InvalidArgument(path + " already exists (refusing to overwrite)");
}

#if SPRIG_PLATFORM_LINUX
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

// Publishes the anonymous file `fd` as `path`.
Status LinkAnonymous(int fd, const std::string& path, bool overwrite) {
  if (!overwrite) {
    // linkat never replaces an existing name, so a file that appeared since Create() is kept.
    const int err = LinkDescriptor(fd, path);
    if (err == EEXIST) return Refused(path);
    if (err != 0) return Status::IOError("cannot create " + path + ": " + ErrnoText(err));
    return Status::Ok();
  }
  // A link can't replace a file, so link to a fresh hidden name, then rename over the target.
  for (int attempt = 0; attempt < 100; ++attempt) {
    const std::string temp = TemporaryName(path);
    const int err = LinkDescriptor(fd, temp);
    if (err == EEXIST) continue;
    if (err != 0) return Status::IOError("cannot create " + path + ": " + ErrnoText(err));
    if (::rename(temp.c_str(), path.c_str()) != 0) {
      const int rename_err = errno;
      ::unlink(temp.c_str());
      return Status::IOError("cannot replace " + path + ": " + ErrnoText(rename_err));
    }
    return Status::Ok();
  }
  return Status::IOError("cannot create " + path + ": no free temporary name in its folder");
}
#endif

// Publishes the named temporary `temp` as `path`.
Status RenameNamed(const std::string& temp, const std::string& path, bool overwrite) {
  if (overwrite) {
    if (::rename(temp.c_str(), path.c_str()) != 0) {
      return Status::IOError("cannot rename " + temp + " to " + path + ": " + ErrnoText(errno));
    }
    return Status::Ok();
  }
  // link() fails with EEXIST instead of replacing, which rename() would do silently.
  if (::link(temp.c_str(), path.c_str()) != 0) {
    const int err = errno;
    if (err == EEXIST) return Refused(path);
    return Status::IOError("cannot create " + path + ": " + ErrnoText(err));
  }
  ::unlink(temp.c_str());
  return Status::Ok();
}

}  // namespace

Result<std::unique_ptr<PendingFile>> PendingFile::Create(const std::string& path,
                                                         bool allow_anonymous) {
  const std::string folder = FolderOf(path);
  int fd = -1;
  int err = EOPNOTSUPP;
#if SPRIG_PLATFORM_LINUX
  // O_TMPFILE: an unnamed inode in the folder, freed by the kernel if we die before Publish.
  if (allow_anonymous) {
    fd = ::open(folder.c_str(), O_TMPFILE | O_WRONLY | O_CLOEXEC, 0644);
    err = errno;
  }
#else
  (void)allow_anonymous;
#endif
  if (fd >= 0) {
    return std::unique_ptr<PendingFile>(new PendingFile(path, "", fd));
  }
  if (err != EOPNOTSUPP && err != EISDIR && err != EINVAL) return FolderError(path, err);
  // No O_TMPFILE here: a hidden named temporary, removed unless published.
  for (int attempt = 0; attempt < 100; ++attempt) {
    std::string temp = TemporaryName(path);
    fd = ::open(temp.c_str(), O_CREAT | O_EXCL | O_WRONLY | O_CLOEXEC, 0644);
    if (fd >= 0) {
      return std::unique_ptr<PendingFile>(new PendingFile(path, std::move(temp), fd));
    }
    if (errno != EEXIST) return FolderError(path, errno);
  }
  return Status::IOError("cannot write " + path + ": no free temporary name in " + folder);
}

PendingFile::~PendingFile() {
  if (Fd(handle_.value) >= 0) ::close(Fd(handle_.value));
  if (!temporary_path_.empty() && !published_) ::unlink(temporary_path_.c_str());
}

Status PendingFile::Write(const void* data, size_t size) {
  auto p = static_cast<const uint8_t*>(data);
  while (size > 0) {
    const ssize_t n = ::write(Fd(handle_.value), p, std::min<uint64_t>(size, kMaxSyscallBytes));
    if (n < 0) {
      if (errno == EINTR) continue;
      return Status::IOError("cannot write " + path_ + ": " + ErrnoText(errno));
    }
    p += n;
    size -= size_t(n);
  }
  return Status::Ok();
}

Status PendingFile::WriteAt(uint64_t offset, const void* data, size_t size) {
  auto p = static_cast<const uint8_t*>(data);
  while (size > 0) {
    const ssize_t n =
        ::pwrite(Fd(handle_.value), p, std::min<uint64_t>(size, kMaxSyscallBytes), off_t(offset));
    if (n < 0) {
      if (errno == EINTR) continue;
      return Status::IOError("cannot write " + path_ + ": " + ErrnoText(errno));
    }
    p += n;
    offset += uint64_t(n);
    size -= size_t(n);
  }
  return Status::Ok();
}

Status PendingFile::Publish(bool overwrite) {
  if (Fd(handle_.value) < 0 || published_) {
    return Status::InvalidArgument("cannot commit " + path_ +
                                   ": it is already committed or closed");
  }
  if (::fsync(Fd(handle_.value)) != 0) {
    return Status::IOError("cannot write " + path_ + ": fsync failed: " + ErrnoText(errno));
  }
#if SPRIG_PLATFORM_LINUX
  if (temporary_path_.empty()) {
    SPRIG_RETURN_IF_ERROR(LinkAnonymous(Fd(handle_.value), path_, overwrite));
  }
#endif
  if (!temporary_path_.empty()) {
    SPRIG_RETURN_IF_ERROR(RenameNamed(temporary_path_, path_, overwrite));
  }
  published_ = true;
  ::close(Fd(handle_.value));
  handle_.value = -1;
  // The new name lives in the folder's own data; sync it so the name survives a power cut.
  const int dir = ::open(FolderOf(path_).c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
  if (dir >= 0) {
    const int rc = ::fsync(dir);
    const int err = errno;
    ::close(dir);
    if (rc != 0 && err != EINVAL) {
      return Status::IOError(path_ +
                             " was written, but its folder could not be synced: " + ErrnoText(err));
    }
  }
  return Status::Ok();
}

}  // namespace sprig::platform
