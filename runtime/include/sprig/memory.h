// Process memory figures and page-cache control, for measuring what a model costs in memory.
//
// Complete on Linux. Windows reports the working set, its peak and the fault count, and cannot
// evict a file (NotSupported); other POSIX systems report the peak and the fault counts.
// Figures a system does not report are 0.
#pragma once

#include <cstdint>
#include <string>

#include "sprig/export.h"
#include "sprig/status.h"

namespace sprig {

// This process's memory now. Bytes unless noted. Linux: /proc/self/status and getrusage(2);
// Windows: GetProcessMemoryInfo.
struct ProcessMemory {
  uint64_t rss = 0;           // resident set now: VmRSS; Windows: WorkingSetSize
  uint64_t peak_rss = 0;      // the highest rss so far: VmHWM; Windows: PeakWorkingSetSize;
                              // other POSIX: ru_maxrss
  uint64_t rss_file = 0;      // RssFile: resident pages mapped from files (a model's weights);
                              // 0 on Windows, which does not split the working set
  uint64_t rss_anon = 0;      // RssAnon: resident anonymous memory (heap, scratch, stacks);
                              // 0 on Windows
  uint64_t minor_faults = 0;  // ru_minflt: faults served without I/O (count); Windows:
                              // PageFaultCount, every fault
  uint64_t major_faults = 0;  // ru_majflt: faults that read from storage (count); 0 on Windows
};

SPRIG_API ProcessMemory ReadProcessMemory();

// Asks the kernel to drop `path`'s pages from the page cache (Linux: posix_fadvise DONTNEED),
// so the next run starts cold. NotSupported on Windows, which offers an unprivileged process no
// way to do it for one file, and on other POSIX systems. The kernel drops only clean pages that
// no process has mapped: close models of this file first (another process's open model keeps
// its mapped pages), and pages on file systems that keep data only in memory (tmpfs) are never
// dropped. Check with Model::residency() when it matters. IOError when the file cannot be
// opened.
SPRIG_API Status EvictFromPageCache(const std::string& path);

}  // namespace sprig
