// Process memory figures and page-cache control, for measuring what a model costs in memory.
//
// Linux only: on other systems ReadProcessMemory() returns zeros and EvictFromPageCache()
// returns NotSupported.
#pragma once

#include <cstdint>
#include <string>

#include "sprig/export.h"
#include "sprig/status.h"

namespace sprig {

// This process's memory now, from /proc/self/status and getrusage(2). Bytes unless noted.
struct ProcessMemory {
  uint64_t rss = 0;           // VmRSS: resident set now
  uint64_t peak_rss = 0;      // VmHWM: the highest rss so far
  uint64_t rss_file = 0;      // RssFile: resident pages mapped from files (a model's weights)
  uint64_t rss_anon = 0;      // RssAnon: resident anonymous memory (heap, scratch, stacks)
  uint64_t minor_faults = 0;  // ru_minflt: faults served without I/O (count)
  uint64_t major_faults = 0;  // ru_majflt: faults that read from storage (count)
};

SPRIG_API ProcessMemory ReadProcessMemory();

// Asks the kernel to drop `path`'s pages from the page cache (posix_fadvise DONTNEED), so the
// next run starts cold. The kernel drops only clean pages that no process has mapped: close
// models of this file first (another process's open model keeps its mapped pages), and pages
// on file systems that keep data only in memory (tmpfs) are never dropped. Check with
// Model::residency() when it matters. IOError when the file cannot be opened.
SPRIG_API Status EvictFromPageCache(const std::string& path);

}  // namespace sprig
