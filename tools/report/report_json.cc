#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <thread>

#include "tools/report/report.h"

namespace sprig::bench {
namespace {

using nlohmann::json;

json SummaryJson(const Summary& s, double scale = 1) {
  return {{"count", s.count},     {"median", s.median * scale}, {"min", s.min * scale},
          {"max", s.max * scale}, {"p95", s.p95 * scale},       {"p99", s.p99 * scale}};
}

json ProcessJson(const ProcessMemory& m) {
  return {{"rss_bytes", m.rss},
          {"peak_rss_bytes", m.peak_rss},
          {"rss_file_bytes", m.rss_file},
          {"rss_anon_bytes", m.rss_anon},
          {"minor_faults", m.minor_faults},
          {"major_faults", m.major_faults}};
}

json MemoryJson(const SideMemory& m) {
  json sections = json::array(), touched = json::array(), curve = json::array();
  for (const SectionResidency& s : m.residency.sections) {
    sections.push_back({{"name", s.name},
                        {"records", s.records},
                        {"tokenizer", s.tokenizer},
                        {"layer", s.layer},
                        {"bytes", s.size},
                        {"resident_bytes", s.resident_bytes}});
  }
  for (const LayerTouch& t : m.touched) {
    touched.push_back({{"layer", t.layer},
                       {"records", t.records},
                       {"touched", t.touched},
                       {"record_bytes", t.record_size},
                       {"touched_bytes", t.touched * t.record_size}});
  }
  for (const MemorySample& s : m.curve) {
    curve.push_back({{"tokens", s.tokens}, {"mapped_resident_bytes", s.mapped_resident}});
  }
  return {{"first_call_ms", m.first_call_ms},
          {"mapped_resident_bytes", m.mapped_resident},
          {"mapped_resident_peak_bytes", m.mapped_resident_peak},
          {"hot_bytes", m.residency.hot_size},
          {"hot_resident_bytes", m.residency.hot_resident},
          {"records_bytes", m.residency.records_size},
          {"records_resident_bytes", m.residency.records_resident},
          {"sections", sections},
          {"touched", touched},
          {"curve", curve}};
}

json SideJson(const SideInfo& s, const std::string& path) {
  json flops = json::array();
  for (const SideFlops& f : s.flops) {
    flops.push_back({{"phase", f.phase},
                     {"context", f.context},
                     {"ffn", f.cost.ffn_flops},
                     {"routed", f.routed_flops},
                     {"other", f.cost.other_flops},
                     {"total", f.cost.ffn_flops + f.cost.other_flops},
                     {"ffn_if_dense", f.cost.ffn_dense_flops}});
  }
  const ModelConfig& c = s.model->config();
  return {{"label", s.label},
          {"path", path},
          {"name", c.name},
          {"file_bytes", s.model->file_size()},
          {"params", s.flops.empty() ? 0 : s.flops[0].cost.params},
          {"flops", flops},
          {"memory", MemoryJson(s.memory)}};
}

// Log-spaced bins over every side's latencies at the point, so their shapes compare directly.
json LatencyHistogram(const Point& p) {
  constexpr int kBins = 40;
  double lo = 1e300, hi = 0;
  for (const SideTiming& t : p.side) {
    for (double v : t.latency_ms) {
      if (v > 0) lo = std::min(lo, v), hi = std::max(hi, v);
    }
  }
  if (hi <= 0) return {{"edges_ms", json::array()}};
  hi *= 1.0001;  // the largest value falls inside the last bin
  if (hi <= lo) hi = lo * 1.01;
  std::vector<double> edges(kBins + 1);
  for (int i = 0; i <= kBins; ++i)
    edges[i] = lo * std::pow(hi / lo, static_cast<double>(i) / kBins);
  json h = {{"edges_ms", edges}};
  for (size_t s = 0; s < kSides; ++s) {
    std::vector<uint64_t> counts(kBins, 0);
    for (double v : p.side[s].latency_ms) {
      if (v <= 0) continue;
      const int b = static_cast<int>(std::log(v / lo) / std::log(hi / lo) * kBins);
      ++counts[std::clamp(b, 0, kBins - 1)];
    }
    h[SideName(s)] = counts;
  }
  return h;
}

// A machine floor and the measured time against it, per row or token (measure.h, FloorTiming).
json FloorJson(const FloorTiming& f, const Machine& machine) {
  json j = {{"seconds", SummaryJson(f.time)},
            {"floor_seconds", f.floor.median},
            {"time_over_floor", SummaryJson(f.time_over_floor)},
            {"bytes", f.bytes},
            {"multiply_adds", f.multiply_adds},
            {"limited_by", f.bandwidth_limited() ? "bandwidth" : "multiply-adds"}};
  if (f.layer >= 0) {
    j["layer"] = f.layer;
    j["working_set_bytes"] = f.working_set;
    j["bytes_per_second"] = machine.BandwidthAt(f.working_set);
  }
  return j;
}

json MachineFloorJson(const Point& p, const Machine& machine) {
  json layers = json::array();
  for (const FloorTiming& f : p.layer_floors) layers.push_back(FloorJson(f, machine));
  return {{"model", FloorJson(p.machine_floor, machine)}, {"layers", layers}};
}

json MachineJson(const Machine& m, const ReportContext& c) {
  json bandwidth = json::array();
  for (const Bandwidth& b : m.bandwidth) {
    bandwidth.push_back({{"working_set_bytes", b.working_set_bytes},
                         {"buffer_bytes", b.buffer_bytes},
                         {"bytes_per_second", b.bytes_per_second},
                         {"kernel", b.kernel},
                         {"what", b.what}});
  }
  json scaling = json::array();
  for (const ThreadScaling& t : m.thread_scaling) {
    scaling.push_back({{"threads", t.threads},
                       {"multiply_adds_per_second", t.multiply_adds_per_second},
                       {"times_one_thread", t.times_one_thread}});
  }
  return {{"cpus", std::thread::hardware_concurrency()},
          {"load_average_start", c.load_start},
          {"load_average_end", c.load_end},
          {"kernel_path", m.kernel_path},
          {"bandwidth", bandwidth},
          {"multiply_adds_per_second", m.multiply_adds_per_second},
          {"thread_scaling", scaling},
          {"measure_seconds", m.seconds}};
}

json PointJson(const Point& p, const Machine& machine) {
  json j = {{"threads", p.threads}, {"phase", p.phase}, {"batch", p.batch}, {"units", p.units}};
  for (size_t s = 0; s < kSides; ++s) {
    const SideTiming& t = p.side[s];
    j[SideName(s)] = {{"per_second", SummaryJson(t.per_second)},
                      {"cpu_per_second", SummaryJson(t.cpu_per_second)},
                      {"latency_ms", SummaryJson(t.latency)},
                      {"unit_latency_ms", SummaryJson(t.latency, 1.0 / p.batch)}};
  }
  j["speedup"] = SummaryJson(p.speedup);
  j["bound"] = SummaryJson(p.bound);
  j["cpu_speedup"] = SummaryJson(p.cpu_speedup);
  // null when the model is nothing but routed layers: then nothing bounds the speedup.
  j["flops_bound"] = p.flops_bound > 0 ? json(p.flops_bound) : json(nullptr);
  j["latency_histogram"] = LatencyHistogram(p);
  j["machine_floor"] = MachineFloorJson(p, machine);
  j["copies_scaling"] = p.copies_scaling > 0 ? json(p.copies_scaling) : json(nullptr);
  return j;
}

// Routing on random input is not the model's routing: say so wherever the figures that depend on
// it are shown, unless the model has no routed layers.
std::string InputCaution(const Measurement& m, const InputInfo& input) {
  if (input.kind != "random" || m.usage.empty()) return "";
  return "random input: routing on random input is not the model's routing, so the records "
         "touched, resident memory, speed and usage figures describe random " +
         std::string(m.family == Family::kStack ? "rows" : "tokens") +
         ", not the model's own data; give --input FILE to measure on it";
}

json InputJson(const Measurement& m, const ReportContext& c) {
  const InputInfo& in = c.input;
  return {{"kind", in.kind},
          {"path", in.path},
          {"bytes", in.bytes},
          {"sha256", in.sha256},
          {"units", in.units},
          {"prompts", in.prompts},
          {"seed", in.kind == "random" ? json(c.options.seed) : json(nullptr)},
          {"caution", InputCaution(m, in)}};
}

}  // namespace

std::vector<double> LoadAverages() {
#ifdef _WIN32
  // Windows keeps no load average; the report then says it is unknown.
  return {};
#else
  double l[3];
  if (getloadavg(l, 3) != 3) return {};
  return {l[0], l[1], l[2]};
#endif
}

json ToJson(const Measurement& m, const ReportContext& c) {
  json j;
  j["schema"] = "sprig-bench/1";
  j["sprig_version"] = SPRIG_VERSION;
  j["command"] = c.command;
  j["family"] = ToString(m.family);
  j["kernels"] = m.kernel_path;
  j["compute"] = c.options.compute;  // the model side's; baseline and floor run f32
  j["machine"] = MachineJson(m.machine, c);
  const MeasureOptions& o = c.options;
  j["settings"] = {{"baseline", c.baseline_kind},
                   {"threads", o.threads},
                   {"batches", o.batches},
                   {"rows", o.rows},
                   {"prompt_tokens", o.prompt_tokens},
                   {"decode_tokens", o.decode_tokens},
                   {"repeat", o.repeat},
                   {"cold", c.cold},
                   {"seed", o.seed}};
  j["input"] = InputJson(m, c);
  json sides;
  for (size_t s = 0; s < kSides; ++s) sides[SideName(s)] = SideJson(m.sides[s], c.paths[s]);
  j["sides"] = sides;
  j["results"] = json::array();
  for (const Point& p : m.points) j["results"].push_back(PointJson(p, m.machine));
  j["process_memory"] = {{"start", ProcessJson(m.memory_start)},
                         {"end", ProcessJson(m.memory_end)}};
  j["usage"] = json::array();
  for (const LayerUsage& u : m.usage) {
    j["usage"].push_back({{"layer", u.layer},
                          {"units", u.counts.size()},
                          {"counts", u.counts},
                          {"entropy_bits", EntropyBits(u.counts)},
                          {"max_entropy_bits", std::log2(static_cast<double>(u.counts.size()))}});
  }
  return j;
}

}  // namespace sprig::bench
