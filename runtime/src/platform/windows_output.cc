// Windows: a file written aside and published in one step. The temporary is a uniquely named
// file in the destination's folder; Publish flushes it (FlushFileBuffers), closes it and moves
// it into place with MoveFileExW (MOVEFILE_REPLACE_EXISTING only when overwriting;
// MOVEFILE_WRITE_THROUGH so the call returns once the move is on disk).
#include "platform/windows_common.h"

#include <algorithm>

#include "platform/common.h"
#include "platform/files.h"
#include "platform/output_file.h"

namespace sprig::platform {

namespace {

// The HANDLE PendingFile keeps in its system-neutral handle (INVALID_HANDLE_VALUE is -1).
HANDLE File(intptr_t handle) {
  return reinterpret_cast<HANDLE>(handle);
}

// WriteFile takes a 32-bit count; larger spans are looped.
constexpr uint64_t kMaxCallBytes = uint64_t{1} << 30;

Status FolderError(const std::string& path, DWORD error) {
  const std::string folder = FolderOf(path);
  if (IsNotFound(error)) {
    return Status::IOError("cannot write " + path + ": folder " + folder + " does not exist");
  }
  return Status::IOError("cannot write " + path + ": folder " + folder + " is not writable (" +
                         WindowsErrorText(error) + ")");
}

Status WriteAtOffset(HANDLE file, const std::string& path, uint64_t offset, const void* data,
                     size_t size) {
  auto p = static_cast<const uint8_t*>(data);
  while (size > 0) {
    OVERLAPPED where = {};
    where.Offset = DWORD(offset & 0xffffffffu);
    where.OffsetHigh = DWORD(offset >> 32);
    DWORD written = 0;
    const DWORD want = static_cast<DWORD>(std::min<uint64_t>(size, kMaxCallBytes));
    if (!WriteFile(file, p, want, &written, &where)) {
      return Status::IOError("cannot write " + path + ": " + WindowsErrorText(GetLastError()));
    }
    // A call that succeeds without writing would loop forever; a full volume can do this.
    if (written == 0) return Status::IOError("cannot write " + path + ": nothing was written");
    p += written;
    offset += written;
    size -= written;
  }
  return Status::Ok();
}

}  // namespace

Result<std::unique_ptr<PendingFile>> PendingFile::Create(const std::string& path,
                                                         bool /*allow_anonymous*/) {
  // Windows has no anonymous files that can be named later: always a named temporary.
  for (int attempt = 0; attempt < 100; ++attempt) {
    std::string temp = TemporaryName(path);
    const HANDLE file = CreateFileW(Widen(temp).c_str(), GENERIC_WRITE, FILE_SHARE_READ, nullptr,
                                    CREATE_NEW, FILE_ATTRIBUTE_NORMAL, nullptr);
    if (file != INVALID_HANDLE_VALUE) {
      return std::unique_ptr<PendingFile>(
          new PendingFile(path, std::move(temp), reinterpret_cast<intptr_t>(file)));
    }
    const DWORD error = GetLastError();
    if (error != ERROR_FILE_EXISTS && error != ERROR_ALREADY_EXISTS) {
      return FolderError(path, error);
    }
  }
  return Status::IOError("cannot write " + path + ": no free temporary name in " + FolderOf(path));
}

PendingFile::~PendingFile() {
  if (File(handle_.value) != INVALID_HANDLE_VALUE) CloseHandle(File(handle_.value));
  if (!published_) DeleteFileW(Widen(temporary_path_).c_str());
}

Status PendingFile::Write(const void* data, size_t size) {
  // Every write names its offset (a write at an offset also moves the file pointer), so the
  // end is kept in the handle.
  Status status = WriteAtOffset(File(handle_.value), path_, handle_.end, data, size);
  if (status.ok()) handle_.end += size;
  return status;
}

Status PendingFile::WriteAt(uint64_t offset, const void* data, size_t size) {
  return WriteAtOffset(File(handle_.value), path_, offset, data, size);
}

Status PendingFile::Publish(bool overwrite) {
  if (File(handle_.value) == INVALID_HANDLE_VALUE || published_) {
    return Status::InvalidArgument("cannot commit " + path_ +
                                   ": it is already committed or closed");
  }
  if (!FlushFileBuffers(File(handle_.value))) {
    return Status::IOError("cannot write " + path_ +
                           ": flushing it to disk failed: " + WindowsErrorText(GetLastError()));
  }
  // A file open for writing cannot be moved by name; ours is complete, so close it first.
  CloseHandle(File(handle_.value));
  handle_.value = -1;
  const DWORD flags = MOVEFILE_WRITE_THROUGH | (overwrite ? MOVEFILE_REPLACE_EXISTING : 0);
  if (!MoveFileExW(Widen(temporary_path_).c_str(), Widen(path_).c_str(), flags)) {
    // The destructor removes the temporary; the destination was not touched.
    const DWORD error = GetLastError();
    if (error == ERROR_ALREADY_EXISTS || error == ERROR_FILE_EXISTS) {
      return Status::InvalidArgument(path_ + " already exists (refusing to overwrite)");
    }
    if (IsInUse(error)) {
      return Status::IOError("cannot replace " + path_ +
                             ": another program has it open, or it is read-only (" +
                             WindowsErrorText(error) + ")");
    }
    return Status::IOError("cannot create " + path_ + ": " + WindowsErrorText(error));
  }
  published_ = true;
  return Status::Ok();
}

}  // namespace sprig::platform
