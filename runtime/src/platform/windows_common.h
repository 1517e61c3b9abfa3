// Internal to runtime/src/platform's Windows files: text conversions and error texts.
#pragma once

#ifndef WIN32_LEAN_AND_MEAN
#define WIN32_LEAN_AND_MEAN
#endif
#ifndef NOMINMAX
#define NOMINMAX
#endif
#include <windows.h>

#include <string>

namespace sprig::platform {

// UTF-8 -> UTF-16 for the wide ("W") calls, and back. Invalid UTF-8 becomes U+FFFD, so a
// mangled name is reported as not found rather than silently mapped to another file.
std::wstring Widen(const std::string& utf8);
std::string Narrow(const std::wstring& wide);
std::string Narrow(const wchar_t* wide);

// The system's text for an error code (GetLastError()), one line, UTF-8.
std::string WindowsErrorText(DWORD error);

// True for the codes that mean "nothing there".
inline bool IsNotFound(DWORD error) {
  return error == ERROR_FILE_NOT_FOUND || error == ERROR_PATH_NOT_FOUND ||
         error == ERROR_INVALID_NAME || error == ERROR_BAD_NETPATH || error == ERROR_INVALID_DRIVE;
}

// True for the codes that mean another program holds the file.
inline bool IsInUse(DWORD error) {
  return error == ERROR_SHARING_VIOLATION || error == ERROR_LOCK_VIOLATION ||
         error == ERROR_USER_MAPPED_FILE || error == ERROR_ACCESS_DENIED;
}

}  // namespace sprig::platform
