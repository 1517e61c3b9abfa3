#include "cli.h"

#include <cstdio>

#include "platform/process.h"

namespace sprig::cli {

std::string ShapeText(const std::vector<uint64_t>& shape) {
  std::string s = "[";
  for (size_t i = 0; i < shape.size(); ++i) s += (i ? ", " : "") + std::to_string(shape[i]);
  return s + "]";
}

int Fail(const std::string& verb, const Status& status) {
  std::fprintf(stderr, "sprig %s: %s\n", verb.c_str(), status.message().c_str());
  return status.code() == Status::Code::kCheckFailed ? kExitCheckFailed : kExitBadInput;
}

std::string HumanBytes(uint64_t bytes) {
  const char* units[] = {"B", "KiB", "MiB", "GiB", "TiB"};
  double v = static_cast<double>(bytes);
  int u = 0;
  while (v >= 1024.0 && u < 4) {
    v /= 1024.0;
    ++u;
  }
  char buf[32];
  if (u == 0) {
    std::snprintf(buf, sizeof(buf), "%llu B", static_cast<unsigned long long>(bytes));
  } else {
    std::snprintf(buf, sizeof(buf), "%.*f %s", v < 10 ? 2 : 1, v, units[u]);
  }
  return buf;
}

CLI::Option* AddComputeOption(CLI::App* command, std::string& value) {
  return command
      ->add_option("--compute", value,
                   "f32 (the default) or i8. i8 quantises the activations of the feed-forward "
                   "weights stored as i8 (pack --dtype i8) to int8 and uses integer dot "
                   "products: faster where the CPU has them, but results change beyond the "
                   "storage rounding. Opt in only; never the default")
      ->check(CLI::IsMember({"f32", "i8"}))
      ->capture_default_str();
}

std::string HumanCount(uint64_t count) {
  const char* units[] = {"", " k", " M", " G", " T"};
  double v = static_cast<double>(count);
  int u = 0;
  while (v >= 1000.0 && u < 4) {
    v /= 1000.0;
    ++u;
  }
  char buf[32];
  if (u == 0) {
    std::snprintf(buf, sizeof(buf), "%llu", static_cast<unsigned long long>(count));
  } else {
    std::snprintf(buf, sizeof(buf), "%.*f%s", v < 10 ? 2 : 1, v, units[u]);
  }
  return buf;
}

Progress::Progress(std::string label)
    : label_(std::move(label)),
      start_(std::chrono::steady_clock::now()),
      last_(start_),
      tty_(platform::IsTerminal(stderr)) {}

void Progress::Update(uint64_t done, uint64_t total) {
  const auto now = std::chrono::steady_clock::now();
  const double elapsed = std::chrono::duration<double>(now - start_).count();
  const double since = std::chrono::duration<double>(now - last_).count();
  if (elapsed < 1.0 || since < (tty_ ? 0.2 : 3.0)) return;
  last_ = now;
  shown_ = true;
  const double pct = total ? 100.0 * static_cast<double>(done) / static_cast<double>(total) : 100;
  const double rate = static_cast<double>(done) / elapsed / (1024.0 * 1024.0);
  std::fprintf(stderr, "%s%s: %5.1f%%  %s of %s  %.0f MiB/s%s", tty_ ? "\r" : "", label_.c_str(),
               pct, HumanBytes(done).c_str(), HumanBytes(total).c_str(), rate, tty_ ? "   " : "\n");
  std::fflush(stderr);
}

void Progress::Finish() {
  if (shown_ && tty_) std::fprintf(stderr, "\n");
}

}  // namespace sprig::cli
