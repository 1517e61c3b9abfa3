// Windows: read-only mappings (CreateFileW, CreateFileMappingW, MapViewOfFile), the prefetch
// hint (PrefetchVirtualMemory, where the system has it), and residency (QueryWorkingSetEx,
// which sees this process's working set only).
#include "platform/windows_common.h"

// After windows.h, which it needs.
#include <psapi.h>

#include <algorithm>
#include <vector>

#include "platform/common.h"
#include "platform/files.h"
#include "platform/mapping.h"

namespace sprig::platform {
namespace {

uint64_t PageSize() {
  static const uint64_t page = [] {
    SYSTEM_INFO info;
    GetSystemInfo(&info);
    return static_cast<uint64_t>(info.dwPageSize);
  }();
  return page;
}

Status OpenError(const std::string& path, DWORD error) {
  if (IsNotFound(error)) return Status::NotFound(path + " does not exist");
  // Opening a folder as a file is refused as access denied; say what it is.
  if (error == ERROR_ACCESS_DENIED && InfoOf(path).kind == PathKind::kFolder) {
    return Status::IOError("cannot read " + path + ": it is a folder, not a regular file");
  }
  if (error == ERROR_ACCESS_DENIED)
    return Status::IOError("cannot read " + path + ": permission denied");
  if (error == ERROR_SHARING_VIOLATION) {
    return Status::IOError("cannot read " + path + ": another program has it open exclusively");
  }
  return Status::IOError("cannot open " + path + ": " + WindowsErrorText(error));
}

// PrefetchVirtualMemory's range (WIN32_MEMORY_RANGE_ENTRY), declared here so that older
// headers need not have it.
struct MemoryRange {
  void* address;
  SIZE_T bytes;
};
using PrefetchFunction = BOOL(WINAPI*)(HANDLE, ULONG_PTR, MemoryRange*, ULONG);

// Windows 8 and later; null where kernel32 lacks it (Windows 7, some Wine versions).
PrefetchFunction Prefetch() {
  static const PrefetchFunction function = [] {
    const HMODULE kernel32 = GetModuleHandleW(L"kernel32.dll");
    FARPROC p = kernel32 ? GetProcAddress(kernel32, "PrefetchVirtualMemory") : nullptr;
    return reinterpret_cast<PrefetchFunction>(reinterpret_cast<void*>(p));
  }();
  return function;
}

}  // namespace

Result<std::unique_ptr<FileMapping>> FileMapping::Open(const std::string& path) {
  // Others may read, write, rename and delete the file meanwhile, as on POSIX.
  const HANDLE file = CreateFileW(Widen(path).c_str(), GENERIC_READ,
                                  FILE_SHARE_READ | FILE_SHARE_WRITE | FILE_SHARE_DELETE, nullptr,
                                  OPEN_EXISTING, FILE_ATTRIBUTE_NORMAL, nullptr);
  if (file == INVALID_HANDLE_VALUE) return OpenError(path, GetLastError());
  if (GetFileType(file) != FILE_TYPE_DISK) {
    CloseHandle(file);
    return Status::IOError("cannot read " + path + ": it is something, not a regular file");
  }
  LARGE_INTEGER size_parts;
  if (!GetFileSizeEx(file, &size_parts)) {
    const DWORD error = GetLastError();
    CloseHandle(file);
    return Status::IOError("cannot read " + path + ": " + WindowsErrorText(error));
  }
  const uint64_t size = static_cast<uint64_t>(size_parts.QuadPart);
  if (size == 0) {
    // An empty file cannot be mapped (CreateFileMappingW refuses a zero size).
    CloseHandle(file);
    return std::unique_ptr<FileMapping>(new FileMapping(nullptr, 0));
  }
  // The size in its high and low 32-bit halves, so that files over 4 GiB map whole.
  const HANDLE section = CreateFileMappingW(file, nullptr, PAGE_READONLY, DWORD(size >> 32),
                                            DWORD(size & 0xffffffffu), nullptr);
  const DWORD section_error = GetLastError();
  CloseHandle(file);  // the section keeps the file open
  if (section == nullptr) {
    return Status::IOError("cannot map " + path +
                           " into memory: " + WindowsErrorText(section_error));
  }
  void* view = MapViewOfFile(section, FILE_MAP_READ, 0, 0, 0);  // 0: to the section's end
  const DWORD view_error = GetLastError();
  CloseHandle(section);  // the view keeps the section
  if (view == nullptr) {
    return Status::IOError("cannot map " + path + " into memory: " + WindowsErrorText(view_error));
  }
  return std::unique_ptr<FileMapping>(new FileMapping(static_cast<const uint8_t*>(view), size));
}

FileMapping::~FileMapping() {
  if (data_ != nullptr) UnmapViewOfFile(data_);
}

void Advise(const void* data, uint64_t size, AccessHint hint) {
  // Windows has no random/normal read-ahead advice for mapped views; only prefetching.
  if (hint != AccessHint::kWillNeed || size == 0) return;
  const PrefetchFunction prefetch = Prefetch();
  if (prefetch == nullptr) return;
  MemoryRange range = {const_cast<void*>(data), static_cast<SIZE_T>(size)};
  prefetch(GetCurrentProcess(), 1, &range, 0);
}

bool LockInMemory(const void* data, uint64_t size) {
  return VirtualLock(const_cast<void*>(data), static_cast<SIZE_T>(size)) != 0;
}

uint64_t ResidentBytes(const void* data, uint64_t size) {
  if (size == 0) return 0;
  const PageSpan span = PageSpan::Of(data, size, PageSize());
  // One entry per page, asked in batches so a large mapping needs no large buffer.
  constexpr uint64_t kBatch = 16384;
  std::vector<PSAPI_WORKING_SET_EX_INFORMATION> entries;
  uint64_t resident = 0;
  for (uint64_t first = 0; first < span.count; first += kBatch) {
    const uint64_t count = std::min(kBatch, span.count - first);
    entries.assign(count, PSAPI_WORKING_SET_EX_INFORMATION{});
    for (uint64_t i = 0; i < count; ++i) {
      entries[i].VirtualAddress = reinterpret_cast<void*>(span.PageAddress(first + i));
    }
    if (!K32QueryWorkingSetEx(GetCurrentProcess(), entries.data(),
                              static_cast<DWORD>(count * sizeof(entries[0])))) {
      return 0;
    }
    for (uint64_t i = 0; i < count; ++i) {
      if (entries[i].VirtualAttributes.Valid) resident += span.BytesIn(first + i);
    }
  }
  return resident;
}

uint64_t TouchedBytes(const FileMapping& mapping) {
  // The working set is already this process's own: the same query over the whole mapping.
  return ResidentBytes(mapping.data(), mapping.size());
}

}  // namespace sprig::platform
