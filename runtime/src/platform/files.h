// Files by path. Every path in this interface is UTF-8; each system's implementation turns it
// into what its calls take (the bytes as they are on POSIX, UTF-16 on Windows), so a path with
// non-ASCII characters or spaces works wherever the system can name it.
#pragma once

#include <cstdint>
#include <cstdio>
#include <filesystem>
#include <string>

#include "sprig/status.h"

namespace sprig::platform {

enum class PathKind {
  kMissing,  // nothing there (also when a folder on the way is a file)
  kFile,     // a regular file
  kFolder,
  kOther,  // a device, a pipe, a socket
};

struct PathInfo {
  PathKind kind = PathKind::kMissing;
  uint64_t size = 0;  // bytes, for a regular file
  // The system's reason when the query itself failed (no permission to search a folder on the
  // way); empty when the path simply does not exist. kind is kMissing then.
  std::string error;
};

// What `path` names. Follows symbolic links.
PathInfo InfoOf(const std::string& path);
inline bool Exists(const std::string& path) {
  return InfoOf(path).kind != PathKind::kMissing;
}

// std::fopen with a UTF-8 path (_wfopen on Windows); null with errno set on failure. `mode` is
// fopen's ("rb", "wb", ...).
std::FILE* OpenFile(const std::string& path, const char* mode);

// Removes a file (not a folder). NotFound when there is none, IOError naming it otherwise.
Status RemoveFile(const std::string& path);

// True when `a` and `b` name the same existing file (device and inode on POSIX; volume serial
// number and file index on Windows), however they are spelled.
bool SameFile(const std::string& a, const std::string& b);

// A UTF-8 path as a std::filesystem::path, and back: the one way the project converts, since
// std::filesystem::path(std::string) and path::string() use the ANSI code page on Windows.
std::filesystem::path FsPath(const std::string& utf8);
std::string Utf8(const std::filesystem::path& path);

// The folder part of `path` ("." when there is none; the root keeps its separator) and its last
// component. Windows also takes '\\' and drive letters ("C:\\x" is in "C:\\").
std::string FolderOf(const std::string& path);
std::string BaseName(const std::string& path);

// The system's folder for temporary files (TMPDIR, /tmp; GetTempPathW on Windows), UTF-8.
std::string TemporaryFolder();

}  // namespace sprig::platform
