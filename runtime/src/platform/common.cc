// What every system's implementation shares: path parts and temporary names.
#include "platform/common.h"

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cstdint>

#include "platform/files.h"
#include "platform/process.h"

namespace sprig::platform {
namespace {

// Index of the last separator, or npos.
size_t LastSeparator(const std::string& path) {
  for (size_t i = path.size(); i > 0; --i) {
    if (IsSeparator(path[i - 1])) return i - 1;
  }
  return std::string::npos;
}

}  // namespace

PageSpan PageSpan::Of(const void* data, uint64_t size, uint64_t page) {
  PageSpan span;
  span.begin = reinterpret_cast<uintptr_t>(data);
  span.size = size;
  span.page = page;
  span.start = span.begin - span.begin % page;
  span.count = (span.begin + size - span.start + page - 1) / page;
  return span;
}

uint64_t PageSpan::BytesIn(uint64_t i) const {
  const uint64_t lo = std::max<uint64_t>(PageAddress(i), begin);
  const uint64_t hi = std::min<uint64_t>(PageAddress(i) + page, begin + size);
  return hi - lo;
}

std::string FolderOf(const std::string& path) {
  const size_t at = LastSeparator(path);
  if (at == std::string::npos) {
    // "C:name" is relative to drive C's current folder (only Windows spells paths this way).
    if (path.size() >= 2 && path[1] == ':' && IsSeparator('\\')) return path.substr(0, 2);
    return ".";
  }
  // The root keeps its separator: "/x" is in "/", "C:\x" in "C:\".
  if (at == 0 || (at == 2 && path[1] == ':' && IsSeparator('\\'))) return path.substr(0, at + 1);
  return path.substr(0, at);
}

std::string BaseName(const std::string& path) {
  const size_t at = LastSeparator(path);
  if (at == std::string::npos) {
    if (path.size() >= 2 && path[1] == ':' && IsSeparator('\\')) return path.substr(2);
    return path;
  }
  return path.substr(at + 1);
}

std::string TemporaryName(const std::string& path) {
  static std::atomic<uint64_t> counter{0};
  const uint64_t now =
      static_cast<uint64_t>(std::chrono::system_clock::now().time_since_epoch().count());
  uint64_t x = (uint64_t(ProcessId()) << 32) ^ now ^ (counter.fetch_add(1) * 0x9e3779b97f4a7c15ull);
  // splitmix64 finaliser, so consecutive names differ in every character.
  x ^= x >> 30;
  x *= 0xbf58476d1ce4e5b9ull;
  x ^= x >> 27;
  x *= 0x94d049bb133111ebull;
  x ^= x >> 31;
  static const char kChars[] = "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789";
  std::string suffix;
  for (int i = 0; i < 6; ++i) {
    suffix += kChars[x % 62];
    x /= 62;
  }
  // Appended piece by piece: GCC 12 warns falsely (-Wrestrict) about "." + std::string.
  std::string name(1, '.');
  name += BaseName(path);
  name += ".tmp-";
  name += suffix;
  const size_t at = LastSeparator(path);
  if (at != std::string::npos) return path.substr(0, at + 1) + name;
  if (path.size() >= 2 && path[1] == ':' && IsSeparator('\\')) return path.substr(0, 2) + name;
  return name;
}

}  // namespace sprig::platform
