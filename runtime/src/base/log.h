// The library's one way out for messages (sprig/log.h): every runtime folder may log through
// Log(), and api/log.cc installs the callback an embedder sets. Nothing is set by default, so a
// message goes nowhere unless a program asks for it.
#pragma once

#include <string>

#include "sprig/log.h"

namespace sprig::base {

// The C interface's callback type (sprig_log_callback in sprig.h). It is kept apart from the C++
// LogCallback because calling a function through a pointer of another type is undefined.
using CLogCallback = void (*)(int level, const char* message, void* user);

// Sends messages to `callback` or `c_callback`, whichever is not null, with `user`; both null
// drops them. When it returns, the previous callback is no longer running and will not be
// called again.
void SetLogSink(LogCallback callback, CLogCallback c_callback, void* user);

// Hands `message` to the callback, if one is set. Thread-safe: callbacks run one at a time.
void Log(LogLevel level, const std::string& message);

}  // namespace sprig::base
