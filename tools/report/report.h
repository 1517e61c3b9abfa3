// What `sprig bench` writes: the JSON document (its keys are in docs/benchmarking.md) and a
// self-contained HTML report drawn from that document (inline SVG; no scripts, fonts or
// network).
#pragma once

#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "bench/kit/measure.h"

namespace sprig::bench {

// What the benchmark ran on (the `input` object of the JSON).
struct InputInfo {
  std::string kind = "random";  // "random", or from a file: "rows", "tokens" or "text"
  std::string path, sha256;     // the file and the SHA-256 of its bytes; empty when random
  uint64_t bytes = 0;           // the file's size
  uint64_t units = 0;           // rows or tokens the file holds
  uint64_t prompts = 0;         // transformer: distinct prompts run
};

struct ReportContext {
  InputInfo input;
  std::string command;        // the command line
  std::string baseline_kind;  // "dense_twin" or "file"
  std::string paths[kSides];  // files; empty for models built in memory
  MeasureOptions options;
  bool cold = false;
  std::vector<double> load_start, load_end;  // 1, 5 and 15 minute load averages
};

nlohmann::json ToJson(const Measurement& m, const ReportContext& context);

// The HTML report of a ToJson document.
std::string ToHtml(const nlohmann::json& report);
// Its section on the machine floors (report_floors.cc).
std::string MachineFloorSection(const nlohmann::json& report);

// The system's 1, 5 and 15 minute load averages (empty where unavailable).
std::vector<double> LoadAverages();

}  // namespace sprig::bench
