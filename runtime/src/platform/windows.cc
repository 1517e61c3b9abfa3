// Windows: files by path (UTF-8 in the interface, UTF-16 "W" calls inside), the process,
// memory figures, the file cache, and CPU features off x86.
#include "platform/windows_common.h"

// After windows.h, which they need.
#include <io.h>
#include <psapi.h>
#include <shellapi.h>

#include <cstdio>

#include "platform/common.h"
#include "platform/cpu.h"
#include "platform/files.h"
#include "platform/memory.h"
#include "platform/process.h"

namespace sprig::platform {

// ---- text ----

std::wstring Widen(const std::string& utf8) {
  if (utf8.empty()) return std::wstring();
  const int n =
      MultiByteToWideChar(CP_UTF8, 0, utf8.data(), static_cast<int>(utf8.size()), nullptr, 0);
  std::wstring wide(static_cast<size_t>(n), L'\0');
  MultiByteToWideChar(CP_UTF8, 0, utf8.data(), static_cast<int>(utf8.size()), wide.data(), n);
  return wide;
}

std::string Narrow(const std::wstring& wide) {
  if (wide.empty()) return std::string();
  const int n = WideCharToMultiByte(CP_UTF8, 0, wide.data(), static_cast<int>(wide.size()), nullptr,
                                    0, nullptr, nullptr);
  std::string utf8(static_cast<size_t>(n), '\0');
  WideCharToMultiByte(CP_UTF8, 0, wide.data(), static_cast<int>(wide.size()), utf8.data(), n,
                      nullptr, nullptr);
  return utf8;
}

std::string Narrow(const wchar_t* wide) {
  return wide == nullptr ? std::string() : Narrow(std::wstring(wide));
}

std::string WindowsErrorText(DWORD error) {
  wchar_t* buffer = nullptr;
  const DWORD n = FormatMessageW(
      FORMAT_MESSAGE_ALLOCATE_BUFFER | FORMAT_MESSAGE_FROM_SYSTEM | FORMAT_MESSAGE_IGNORE_INSERTS,
      nullptr, error, 0, reinterpret_cast<wchar_t*>(&buffer), 0, nullptr);
  std::string text = n > 0 ? Narrow(buffer) : std::string();
  if (buffer != nullptr) LocalFree(buffer);
  // The system's texts end with a full stop and a line break; ours add their own context.
  while (!text.empty() &&
         (text.back() == '\n' || text.back() == '\r' || text.back() == ' ' || text.back() == '.')) {
    text.pop_back();
  }
  return (text.empty() ? std::string("error") : text) + " (Windows error " + std::to_string(error) +
         ")";
}

// ---- files ----

bool IsSeparator(char c) {
  return c == '/' || c == '\\';
}

namespace {

// Opens `path` for its attributes only, which needs no share access, so it works on files other
// programs hold exclusively. BACKUP_SEMANTICS lets it open folders too. Follows links.
HANDLE OpenForAttributes(const std::string& path) {
  return CreateFileW(Widen(path).c_str(), FILE_READ_ATTRIBUTES,
                     FILE_SHARE_READ | FILE_SHARE_WRITE | FILE_SHARE_DELETE, nullptr, OPEN_EXISTING,
                     FILE_FLAG_BACKUP_SEMANTICS, nullptr);
}

}  // namespace

PathInfo InfoOf(const std::string& path) {
  PathInfo info;
  const HANDLE h = OpenForAttributes(path);
  if (h == INVALID_HANDLE_VALUE) {
    const DWORD error = GetLastError();
    if (!IsNotFound(error)) info.error = WindowsErrorText(error);
    return info;
  }
  BY_HANDLE_FILE_INFORMATION data;
  const bool ok = GetFileInformationByHandle(h, &data) != 0;
  const DWORD type = GetFileType(h);
  CloseHandle(h);
  if (!ok) {
    info.error = WindowsErrorText(GetLastError());
    return info;
  }
  if ((data.dwFileAttributes & FILE_ATTRIBUTE_DIRECTORY) != 0) {
    info.kind = PathKind::kFolder;
  } else if (type != FILE_TYPE_DISK) {
    info.kind = PathKind::kOther;
  } else {
    info.kind = PathKind::kFile;
    info.size = (uint64_t(data.nFileSizeHigh) << 32) | data.nFileSizeLow;
  }
  return info;
}

std::FILE* OpenFile(const std::string& path, const char* mode) {
  return _wfopen(Widen(path).c_str(), Widen(mode).c_str());
}

Status RemoveFile(const std::string& path) {
  if (DeleteFileW(Widen(path).c_str())) return Status::Ok();
  const DWORD error = GetLastError();
  if (IsNotFound(error)) return Status::NotFound("cannot remove " + path + ": it does not exist");
  return Status::IOError("cannot remove " + path + ": " + WindowsErrorText(error));
}

bool SameFile(const std::string& a, const std::string& b) {
  BY_HANDLE_FILE_INFORMATION info[2];
  const std::string* paths[2] = {&a, &b};
  for (int i = 0; i < 2; ++i) {
    const HANDLE h = OpenForAttributes(*paths[i]);
    if (h == INVALID_HANDLE_VALUE) return false;
    const bool ok = GetFileInformationByHandle(h, &info[i]) != 0;
    CloseHandle(h);
    if (!ok) return false;
  }
  // A file is its volume and its index on that volume.
  return info[0].dwVolumeSerialNumber == info[1].dwVolumeSerialNumber &&
         info[0].nFileIndexHigh == info[1].nFileIndexHigh &&
         info[0].nFileIndexLow == info[1].nFileIndexLow;
}

std::filesystem::path FsPath(const std::string& utf8) {
  return std::filesystem::path(Widen(utf8));
}

std::string Utf8(const std::filesystem::path& path) {
  return Narrow(path.wstring());
}

std::string TemporaryFolder() {
  wchar_t buffer[MAX_PATH + 2];
  const DWORD n = GetTempPathW(MAX_PATH + 2, buffer);
  if (n == 0 || n > MAX_PATH + 1) return ".";
  std::string folder = Narrow(std::wstring(buffer, n));
  // GetTempPathW ends the folder with a separator; the other systems' answers do not.
  if (folder.size() > 3 && IsSeparator(folder.back())) folder.pop_back();
  return folder;
}

// ---- the process ----

unsigned long ProcessId() {
  return GetCurrentProcessId();
}

bool IsTerminal(std::FILE* stream) {
  // _isatty is also true for the NUL device; a console answers GetConsoleMode.
  const intptr_t handle = _get_osfhandle(_fileno(stream));
  DWORD mode = 0;
  return handle != -1 && GetConsoleMode(reinterpret_cast<HANDLE>(handle), &mode) != 0;
}

std::vector<std::string> Utf8Arguments(int argc, char** argv) {
  int count = 0;
  wchar_t** wide = CommandLineToArgvW(GetCommandLineW(), &count);
  if (wide == nullptr) return std::vector<std::string>(argv, argv + argc);
  std::vector<std::string> arguments;
  for (int i = 0; i < count; ++i) arguments.push_back(Narrow(wide[i]));
  LocalFree(wide);
  return arguments;
}

void UseUtf8Console() {
  SetConsoleOutputCP(CP_UTF8);
}

std::string CommandLine() {
  return Narrow(GetCommandLineW());
}

namespace {

// Kernel plus user time, which GetProcessTimes and GetThreadTimes give in 100 ns units.
double Seconds(const FILETIME& kernel, const FILETIME& user) {
  const auto ticks = [](const FILETIME& t) {
    return (uint64_t(t.dwHighDateTime) << 32) | t.dwLowDateTime;
  };
  return static_cast<double>(ticks(kernel) + ticks(user)) * 1e-7;
}

}  // namespace

double ProcessCpuSeconds() {
  FILETIME created, exited, kernel, user;
  if (!GetProcessTimes(GetCurrentProcess(), &created, &exited, &kernel, &user)) return 0;
  return Seconds(kernel, user);
}

double ThreadCpuSeconds() {
  FILETIME created, exited, kernel, user;
  if (!GetThreadTimes(GetCurrentThread(), &created, &exited, &kernel, &user)) return 0;
  return Seconds(kernel, user);
}

// ---- memory ----

MemoryFigures ReadMemoryFigures() {
  MemoryFigures m;
  PROCESS_MEMORY_COUNTERS_EX counters = {};
  counters.cb = sizeof(counters);
  // K32GetProcessMemoryInfo lives in kernel32 since Windows 7; psapi.dll forwards to it.
  if (K32GetProcessMemoryInfo(GetCurrentProcess(),
                              reinterpret_cast<PROCESS_MEMORY_COUNTERS*>(&counters),
                              sizeof(counters))) {
    m.resident = counters.WorkingSetSize;
    m.peak_resident = counters.PeakWorkingSetSize;
    m.private_bytes = counters.PrivateUsage;
    m.minor_faults = counters.PageFaultCount;
  }
  return m;
}

Status DropFromCache(const std::string& path) {
  // Windows offers an unprivileged process no way to evict one file's pages from the cache.
  return Status::NotSupported("cannot drop " + path +
                              " from the cache: dropping a file from the cache is not supported "
                              "on Windows");
}

// ---- CPU features (x86-64 is cpu_x86.cc) ----

#if !(defined(__x86_64__) || defined(_M_X64))
const CpuFeatures& DetectCpu() {
  static const CpuFeatures features = [] {
    CpuFeatures f;
#if defined(__aarch64__) || defined(_M_ARM64)
    f.neon = IsProcessorFeaturePresent(PF_ARM_NEON_INSTRUCTIONS_AVAILABLE) != 0;
#endif
    return f;
  }();
  return features;
}
#endif

}  // namespace sprig::platform
