#include "sprig/memory.h"

#include "platform/memory.h"

namespace sprig {

ProcessMemory ReadProcessMemory() {
  const platform::MemoryFigures figures = platform::ReadMemoryFigures();
  ProcessMemory m;
  m.rss = figures.resident;
  m.peak_rss = figures.peak_resident;
  m.rss_file = figures.resident_file;
  m.rss_anon = figures.resident_anonymous;
  m.minor_faults = figures.minor_faults;
  m.major_faults = figures.major_faults;
  return m;
}

Status EvictFromPageCache(const std::string& path) {
  return platform::DropFromCache(path);
}

}  // namespace sprig
