// The HTML report's machine-floor section: the measured machine, then per point the whole model
// and each routed layer against its machine floor, with a bar of time ÷ floor.
#include <algorithm>
#include <cstdio>

#include "tools/report/report.h"
#include "tools/report/svg.h"

namespace sprig::bench {
namespace {

using nlohmann::json;

std::string Figure(const char* format, double v) {
  char b[48];
  std::snprintf(b, sizeof b, format, v);
  return b;
}

std::string BytesLabel(uint64_t bytes) {
  if (bytes >= (uint64_t{1} << 20)) return Figure("%.1f MiB", bytes / 1048576.0);
  return Figure("%.0f KiB", bytes / 1024.0);
}

std::string MachineText(const json& m) {
  std::string t = "<p><b>Machine</b> (kernels " + svg::Escape(m["kernel_path"].get<std::string>()) +
                  ", one thread, measured for " +
                  Figure("%.2f", m["measure_seconds"].get<double>()) + " s): read bandwidth";
  for (const json& b : m["bandwidth"]) {
    t += (&b == &m["bandwidth"].front() ? " " : ", ") +
         BytesLabel(b["working_set_bytes"].get<uint64_t>()) + " " +
         Figure("%.1f", b["bytes_per_second"].get<double>() / 1e9) + " GB/s";
  }
  t += "; f32 multiply-adds " + Figure("%.1f", m["multiply_adds_per_second"].get<double>() / 1e9) +
       " G/s";
  if (m.contains("thread_scaling")) {
    for (const json& s : m["thread_scaling"]) {
      t += "; " + std::to_string(s["threads"].get<size_t>()) + " threads at once " +
           Figure("%.2f", s["times_one_thread"].get<double>()) +
           "&times; one thread (arithmetic alone)";
    }
  }
  return t + ".</p>";
}

// A bar as long as time ÷ floor, on a scale of 0 to 10 (longer ratios are cut and say so).
std::string RatioBar(double ratio) {
  const double shown = std::clamp(ratio, 0.0, 10.0);
  const char* color = ratio <= 1.5 ? "#6a9a3a" : ratio <= 3 ? "#d9a21f" : "#c23b3b";
  return "<span style=\"display:inline-block;height:10px;width:" + Figure("%.0f", shown * 16) +
         "px;background:" + color + "\"></span>" + (ratio > 10 ? " &rarr;" : "");
}

std::string FloorRow(const json& p, const std::string& part, const json& f) {
  const json& ratio = f["time_over_floor"];
  const std::string point = p["phase"] == "rows"
                                ? "batch " + std::to_string(p["batch"].get<size_t>())
                                : p["phase"].get<std::string>();
  return "<tr><td>" + std::to_string(p["threads"].get<size_t>()) + "</td><td>" + point +
         "</td><td>" + part + "</td><td>" +
         Figure("%.3f", f["seconds"]["median"].get<double>() * 1e6) + "</td><td>" +
         Figure("%.3f", f["floor_seconds"].get<double>() * 1e6) + "</td><td><b>" +
         Figure("%.2f", ratio["median"].get<double>()) + "</b> <span class=\"dim\">[" +
         Figure("%.2f", ratio["min"].get<double>()) + "&ndash;" +
         Figure("%.2f", ratio["max"].get<double>()) + "]</span></td><td>" +
         RatioBar(ratio["median"].get<double>()) + "</td><td>" +
         svg::Escape(f["limited_by"].get<std::string>()) + "</td></tr>";
}

}  // namespace

std::string MachineFloorSection(const json& r) {
  const bool stack = r["family"] == "stack";
  std::string t = "<h2>Against the machine floor</h2>" + MachineText(r["machine"]) +
                  "<table><tr><th>threads</th><th>point</th><th>part</th><th>&micro;s per " +
                  (stack ? "row" : "token") +
                  "</th><th>machine floor &micro;s</th><th>time &divide; floor</th><th></th>"
                  "<th>limited by</th></tr>";
  for (const json& p : r["results"]) {
    t += FloorRow(p, "whole model", p["machine_floor"]["model"]);
    for (const json& l : p["machine_floor"]["layers"]) {
      t += FloorRow(p, "layer " + std::to_string(l["layer"].get<size_t>()) + " alone", l);
    }
  }
  return t +
         "</table><p class=\"dim\">The machine floor is the time a call cannot go below on this "
         "machine: the larger of the bytes it must read once &divide; the read bandwidth at its "
         "working set and its multiply-adds &divide; the rate above. Each routed layer is timed "
         "alone on the inputs it received in the model. Not the <i>floor</i> side above, which "
         "is a model.</p>";
}

}  // namespace sprig::bench
