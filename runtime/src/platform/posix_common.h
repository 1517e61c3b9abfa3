// Internal to runtime/src/platform's POSIX files.
#pragma once

#include <cstring>
#include <string>

// The Linux-only parts (/proc, O_TMPFILE, posix_fadvise, getauxval, madvise's own flags) are
// used on Linux unless SPRIG_PORTABLE_POSIX asks for the portable fallbacks that a macOS or BSD
// build would get; the test build compiles both ways (docs/platform.md).
#if defined(__linux__) && !defined(SPRIG_PORTABLE_POSIX)
#define SPRIG_PLATFORM_LINUX 1
#else
#define SPRIG_PLATFORM_LINUX 0
#endif

namespace sprig::platform {

inline std::string ErrnoText(int err) {
  return std::strerror(err);
}

}  // namespace sprig::platform
