// Messages sprig reports on its own, apart from the outcome of a call (a call's failure comes
// back as its Status). Today there is one: a warning when the SPRIG_KERNEL_PATH environment
// variable names a kernel path this CPU cannot run, so the fastest one is used instead.
//
// The library never writes to stderr or stdout. It hands each message to the callback set here
// and drops it when none is set, the default. The sprig program prints them to stderr as
// "sprig: warning: MESSAGE". The C interface has the same in sprig.h (sprig_set_log_callback).
#pragma once

#include "sprig/export.h"

namespace sprig {

// How much a message matters. The values are the C interface's SPRIG_LOG_* codes.
enum class LogLevel : int {
  kInfo = 0,     // worth knowing; nothing is wrong
  kWarning = 1,  // sprig did something other than what was asked, and carried on
  kError = 2,    // something failed that no call's Status reports
};

// Receives one message: a sentence without a trailing newline, valid during the call only, and
// the `user` pointer given to SetLogCallback. It is called on the thread that emits the message,
// one message at a time. It must return normally (no exception or longjmp out of it) and must
// not call sprig's functions.
using LogCallback = void (*)(LogLevel level, const char* message, void* user);

// Sends the library's messages to `callback` from now on, or drops them when `callback` is null.
// Process-wide and thread-safe. When it returns, the previous callback is no longer running and
// will not be called again, so whatever its `user` points to may be released.
SPRIG_API void SetLogCallback(LogCallback callback, void* user);

}  // namespace sprig
