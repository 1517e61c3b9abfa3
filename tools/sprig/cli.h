// Shared pieces of the sprig command-line verbs: exit codes, error reporting, progress, sizes.
#pragma once

#include <CLI/CLI.hpp>
#include <nlohmann/json.hpp>

#include <chrono>
#include <cstdint>
#include <string>
#include <vector>

#include "sprig/status.h"

namespace sprig::cli {

// docs/verbs.md: 0 success, 1 a check failed, 2 bad usage or input.
// JSON output replaces bytes that are not UTF-8 (a POSIX file name may hold any bytes) with
// U+FFFD instead of failing: pass as dump(2, ' ', false, kReplaceInvalidUtf8).
inline constexpr auto kReplaceInvalidUtf8 = nlohmann::json::error_handler_t::replace;

inline constexpr int kExitOk = 0;
inline constexpr int kExitCheckFailed = 1;
inline constexpr int kExitBadInput = 2;

// Prints "sprig VERB: message" to stderr and returns the exit code for the status.
int Fail(const std::string& verb, const Status& status);

// "[2, 3]": an array shape as error messages print it
std::string ShapeText(const std::vector<uint64_t>& shape);
// "1.5 MiB", "312 B"
std::string HumanBytes(uint64_t bytes);
// "1.23 G", "456 k" (FLOPs, parameters)
std::string HumanCount(uint64_t count);

// Progress on stderr for long work: silent for the first second, then a line that updates in
// place on a terminal (or a line every few seconds when stderr is not a terminal).
class Progress {
 public:
  explicit Progress(std::string label);
  void Update(uint64_t done, uint64_t total);
  void Finish();

 private:
  std::string label_;
  std::chrono::steady_clock::time_point start_;
  std::chrono::steady_clock::time_point last_;
  bool shown_ = false;
  bool tty_ = false;
};

// --compute f32|i8 (SessionOptions::compute) on run, routes, bench and verify, with one help
// text. `value` keeps its default, "f32".
CLI::Option* AddComputeOption(CLI::App* command, std::string& value);

// Each verb registers its subcommand and returns a runner invoked if it was chosen.
struct Verb {
  CLI::App* command = nullptr;
  std::function<int()> run;
};

Verb AddPack(CLI::App& app);
Verb AddInspect(CLI::App& app);
Verb AddSynth(CLI::App& app);
Verb AddRun(CLI::App& app);
Verb AddRoutes(CLI::App& app);
Verb AddGenerate(CLI::App& app);
Verb AddVerify(CLI::App& app);
Verb AddBench(CLI::App& app);
Verb AddTokens(CLI::App& app);

}  // namespace sprig::cli
