#include "base/log.h"

#include <mutex>

namespace sprig::base {
namespace {

struct Sink {
  LogCallback callback = nullptr;
  CLogCallback c_callback = nullptr;
  void* user = nullptr;
};

// The callback runs with the mutex held: that serialises messages and lets SetLogSink promise
// that the callback it replaces has returned (so the embedder may free its `user`).
std::mutex& SinkMutex() {
  static std::mutex mutex;
  return mutex;
}

Sink& CurrentSink() {
  static Sink sink;
  return sink;
}

}  // namespace

void SetLogSink(LogCallback callback, CLogCallback c_callback, void* user) {
  std::lock_guard<std::mutex> lock(SinkMutex());
  CurrentSink() = Sink{callback, callback == nullptr ? c_callback : nullptr, user};
}

void Log(LogLevel level, const std::string& message) {
  std::lock_guard<std::mutex> lock(SinkMutex());
  const Sink& sink = CurrentSink();
  if (sink.callback != nullptr) {
    sink.callback(level, message.c_str(), sink.user);
  } else if (sink.c_callback != nullptr) {
    sink.c_callback(static_cast<int>(level), message.c_str(), sink.user);
  }
}

}  // namespace sprig::base
