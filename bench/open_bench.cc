// How long Model::open takes on a given .sprig file and how much resident memory it adds.
//
//   build/bin/sprig_bench_open MODEL [REPEATS]
//
// Opens the model REPEATS times (default 50), each time from scratch, and prints the median and
// worst open time and the growth of the process's resident memory (VmRSS) across one open
// beside the file's hot-section size. The page cache may already hold the header; what this
// measures is the work open does: map, verify the preamble and header, index.
#include <algorithm>
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <string>
#include <vector>

#include "sprig/memory.h"
#include "sprig/model.h"

namespace {

// Resident set size in bytes (sprig::ReadProcessMemory: VmRSS on Linux, the working set on
// Windows).
long long ResidentBytes() {
  return static_cast<long long>(sprig::ReadProcessMemory().rss);
}

}  // namespace

int main(int argc, char** argv) {
  if (argc < 2 || std::string(argv[1]) == "--help") {
    std::printf("usage: sprig_bench_open MODEL [REPEATS]\n");
    return argc < 2 ? 2 : 0;
  }
  const std::string path = argv[1];
  const int repeats = argc > 2 ? std::atoi(argv[2]) : 50;
  std::vector<double> ms;
  long long rss_growth = 0;
  uint64_t hot = 0, file_size = 0;
  for (int i = 0; i < repeats; ++i) {
    const long long before = ResidentBytes();
    const auto t0 = std::chrono::steady_clock::now();
    auto model = sprig::Model::open(path);
    const auto t1 = std::chrono::steady_clock::now();
    if (!model.ok()) {
      std::fprintf(stderr, "%s\n", model.status().message().c_str());
      return 2;
    }
    const long long after = ResidentBytes();
    ms.push_back(std::chrono::duration<double, std::milli>(t1 - t0).count());
    if (i == 0) {
      rss_growth = after - before;
      file_size = (*model)->file_size();
      for (const sprig::SectionDescription& s : (*model)->sections()) {
        if (!s.records) hot += s.size;
      }
    }
  }
  std::sort(ms.begin(), ms.end());
  std::printf("%s: %.1f MB file, hot section %.2f MB\n", path.c_str(), file_size / 1e6, hot / 1e6);
  std::printf("Model::open over %d opens: median %.3f ms, min %.3f ms, max %.3f ms\n", repeats,
              ms[ms.size() / 2], ms.front(), ms.back());
  std::printf("resident memory added by the first open: %.2f MB\n", rss_growth / 1e6);
  return 0;
}
