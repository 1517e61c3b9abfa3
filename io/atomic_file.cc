#include "io/atomic_file.h"
#include "base/status_macros.h"

#include <algorithm>
#include <cstring>
#include <new>
#include <utility>

#include "platform/files.h"
#include "platform/output_file.h"

namespace sprig::io {

namespace {

constexpr uint64_t kBufferSize = uint64_t{4} << 20;

bool force_named_temporary = false;

}  // namespace

void AtomicFile::ForceNamedTemporaryForTesting(bool force) {
  force_named_temporary = force;
}

Result<AtomicFile> AtomicFile::Create(const std::string& path, bool overwrite) {
  const std::string base = platform::BaseName(path);
  if (base.empty() || base == "." || base == "..") {
    return Status::InvalidArgument("cannot write '" + path + "': it names a folder, not a file");
  }
  const platform::PathInfo target = platform::InfoOf(path);
  if (target.kind == platform::PathKind::kFolder) {
    return Status::InvalidArgument("cannot write " + path + ": it is a folder");
  }
  if (target.kind != platform::PathKind::kMissing && !overwrite) {
    return Status::InvalidArgument(path + " already exists (refusing to overwrite)");
  }
  const std::string folder = platform::FolderOf(path);
  const platform::PathInfo where = platform::InfoOf(folder);
  if (where.kind == platform::PathKind::kMissing) {
    return Status::IOError(
        "cannot write " + path + ": folder " + folder +
        (where.error.empty() ? " does not exist" : " is not writable (" + where.error + ")"));
  }
  if (where.kind != platform::PathKind::kFolder) {
    return Status::IOError("cannot write " + path + ": " + folder + " is not a folder");
  }

  AtomicFile file;
  file.path_ = path;
  file.overwrite_ = overwrite;
  file.buffer_.reset(new (std::nothrow) uint8_t[kBufferSize]);
  if (!file.buffer_) return Status::IOError("out of memory opening " + path + " for writing");
  SPRIG_ASSIGN_OR_RETURN(file.file_, platform::PendingFile::Create(path, !force_named_temporary));
  return file;
}

AtomicFile::AtomicFile(AtomicFile&& other) noexcept {
  *this = std::move(other);
}

AtomicFile& AtomicFile::operator=(AtomicFile&& other) noexcept {
  if (this != &other) {
    Discard();
    path_ = std::move(other.path_);
    file_ = std::move(other.file_);
    overwrite_ = other.overwrite_;
    size_ = std::exchange(other.size_, 0);
    buffer_ = std::move(other.buffer_);
    flushed_ = std::exchange(other.flushed_, 0);
    committed_ = std::exchange(other.committed_, false);
    error_ = std::move(other.error_);
  }
  return *this;
}

AtomicFile::~AtomicFile() {
  Discard();
}

void AtomicFile::Discard() {
  file_.reset();  // removes the temporary unless it was published
}

Status AtomicFile::Fail(Status status) {
  if (error_.ok()) error_ = status;
  return status;
}

Status AtomicFile::WriteAll(const void* data, size_t size) {
  Status status = file_->Write(data, size);
  return status.ok() ? status : Fail(status);
}

Status AtomicFile::Flush() {
  if (size_ == flushed_) return Status::Ok();
  SPRIG_RETURN_IF_ERROR(WriteAll(buffer_.get(), size_ - flushed_));
  flushed_ = size_;
  return Status::Ok();
}

Status AtomicFile::Write(const void* data, size_t size) {
  if (!error_.ok()) return error_;
  if (!file_) {
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
  if (!file_) {
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
  if (!file_) {
    return Status::InvalidArgument("cannot write " + path_ + ": it is already committed or closed");
  }
  if (offset > size_ || size > size_ - offset) {
    return Status::InvalidArgument("cannot write " + path_ + ": WriteAt(" + std::to_string(offset) +
                                   ", " + std::to_string(size) + ") lies beyond the " +
                                   std::to_string(size_) + " bytes written so far");
  }
  auto p = static_cast<const uint8_t*>(data);
  // The part already in the file is rewritten in place; the rest is still in the buffer.
  if (offset < flushed_) {
    const uint64_t in_file = std::min<uint64_t>(size, flushed_ - offset);
    const Status status = file_->WriteAt(offset, p, in_file);
    if (!status.ok()) return Fail(status);
    p += in_file;
    offset += in_file;
    size -= in_file;
  }
  if (size > 0) std::memcpy(buffer_.get() + (offset - flushed_), p, size);
  return Status::Ok();
}

Status AtomicFile::Commit() {
  if (!error_.ok()) return error_;
  if (!file_ || committed_) {
    return Status::InvalidArgument("cannot commit " + path_ +
                                   ": it is already committed or closed");
  }
  SPRIG_RETURN_IF_ERROR(Flush());
  SPRIG_RETURN_IF_ERROR(file_->Publish(overwrite_));
  committed_ = true;
  file_.reset();
  return Status::Ok();
}

}  // namespace sprig::io
