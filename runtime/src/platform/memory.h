// This process's memory and the system's file cache. See docs/platform.md for what each figure
// is on each system.
#pragma once

#include <cstdint>
#include <string>

#include "sprig/status.h"

namespace sprig::platform {

// Bytes unless noted; 0 where the system does not report a figure.
struct MemoryFigures {
  uint64_t resident = 0;            // Linux VmRSS; Windows WorkingSetSize
  uint64_t peak_resident = 0;       // Linux VmHWM; Windows PeakWorkingSetSize
  uint64_t resident_file = 0;       // Linux RssFile; not split on Windows
  uint64_t resident_anonymous = 0;  // Linux RssAnon; not split on Windows
  uint64_t private_bytes = 0;       // committed private memory: Windows PrivateUsage; Linux RssAnon
                                    // plus swapped-out anonymous pages (VmSwap)
  uint64_t minor_faults = 0;  // count: getrusage ru_minflt; Windows PageFaultCount (all faults)
  uint64_t major_faults = 0;  // count: getrusage ru_majflt; not reported by Windows
};

MemoryFigures ReadMemoryFigures();

// Drops `path`'s clean, unmapped pages from the system's file cache so the next read starts
// cold (posix_fadvise POSIX_FADV_DONTNEED, after flushing dirty pages). NotSupported where the
// system offers an unprivileged process no way to do it for one file (Windows, portable POSIX
// builds); IOError when the file cannot be opened.
Status DropFromCache(const std::string& path);

}  // namespace sprig::platform
