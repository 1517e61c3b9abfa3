// The log callback's public setters, C++ (sprig/log.h) and C (sprig.h), over base/log.h.
#include "sprig/log.h"

#include "base/log.h"
#include "sprig/sprig.h"

namespace sprig {

// The C levels are LogLevel's values; a change there must not change the C ABI silently.
static_assert(SPRIG_LOG_INFO == static_cast<int>(LogLevel::kInfo));
static_assert(SPRIG_LOG_WARNING == static_cast<int>(LogLevel::kWarning));
static_assert(SPRIG_LOG_ERROR == static_cast<int>(LogLevel::kError));

void SetLogCallback(LogCallback callback, void* user) {
  base::SetLogSink(callback, nullptr, user);
}

}  // namespace sprig

extern "C" void sprig_set_log_callback(sprig_log_callback callback, void* user) {
  sprig::base::SetLogSink(nullptr, callback, user);
}
