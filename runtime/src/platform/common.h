// Internal to runtime/src/platform: what both systems' files share.
#pragma once

#include <cstdint>
#include <string>

namespace sprig::platform {

// True for a character that separates path components ('/'; also '\\' on Windows). Defined by
// each system's file.
bool IsSeparator(char c);

// A name ".BASE.tmp-XXXXXX" in the folder of `path`, hidden on POSIX and unlikely to collide;
// callers create it exclusively and retry when it exists.
std::string TemporaryName(const std::string& path);

// The pages of `page` bytes that cover [data, data + size), for the residency queries, which
// answer page by page.
struct PageSpan {
  uintptr_t begin = 0;  // the range
  uint64_t size = 0;
  uint64_t page = 0;
  uintptr_t start = 0;  // the first page
  uint64_t count = 0;   // pages

  static PageSpan Of(const void* data, uint64_t size, uint64_t page);
  uintptr_t PageAddress(uint64_t i) const { return start + i * page; }
  // Bytes of page i inside the range: the first and last pages are clipped to it.
  uint64_t BytesIn(uint64_t i) const;
};

}  // namespace sprig::platform
