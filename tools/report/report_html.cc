// The HTML report: one file, inline SVG and CSS, readable without scripts or a network.
#include <algorithm>
#include <cstdio>

#include "tools/report/report.h"
#include "tools/report/svg.h"

namespace sprig::bench {
namespace {

using nlohmann::json;

constexpr const char* kColors[kSides] = {"#1f6fb4", "#d9661f", "#6a9a3a"};
constexpr const char* kThreadColors[] = {"#1f6fb4", "#8e3fa6", "#c23b3b", "#2a8c7d"};

std::string Fixed(double v, int digits) {
  char b[48];
  std::snprintf(b, sizeof b, "%.*f", digits, v);
  return b;
}

std::string Mib(double bytes) {
  return Fixed(bytes / (1024.0 * 1024.0), bytes < 10 * 1024.0 * 1024.0 ? 2 : 1) + " MiB";
}

std::string Spread(const json& s, int digits) {
  return Fixed(s["median"].get<double>(), digits) + " <span class=\"dim\">[" +
         Fixed(s["min"].get<double>(), digits) + "&ndash;" + Fixed(s["max"].get<double>(), digits) +
         "]</span>";
}

std::string PhaseLabel(const json& p) {
  const std::string phase = p["phase"];
  if (phase == "rows") return "batch " + std::to_string(p["batch"].get<size_t>());
  return phase + " (" + std::to_string(p["batch"].get<size_t>()) + " per call)";
}

std::string Bytes(uint64_t bytes) {
  return bytes < 1024 * 1024 ? std::to_string(bytes) + " bytes" : Mib(static_cast<double>(bytes));
}

// What the figures were measured on: the file (path, size, SHA-256) or "random, seed S", and the
// caution that random input does not route as the model's data does.
std::string InputText(const json& r) {
  const json& in = r["input"];
  std::string t = "<p><b>Input:</b> ";
  if (in["kind"] == "random") {
    t += "random " + std::string(r["family"] == "stack" ? "N(0, 1) rows" : "tokens") + ", seed " +
         std::to_string(in["seed"].get<uint64_t>());
  } else {
    t += svg::Escape(in["kind"].get<std::string>()) + " from <code>" +
         svg::Escape(in["path"].get<std::string>()) + "</code> (" +
         Bytes(in["bytes"].get<uint64_t>()) + ", " + std::to_string(in["units"].get<uint64_t>()) +
         (r["family"] == "stack" ? " rows" : " tokens") + ", SHA-256 <code>" +
         svg::Escape(in["sha256"].get<std::string>()) + "</code>)";
    if (r["family"] != "stack") {
      t += "; " + std::to_string(in["prompts"].get<uint64_t>()) +
           " prompts, each continued by the model's greedy decoding";
    }
  }
  t += ".</p>";
  const std::string caution = in["caution"];
  if (!caution.empty()) {
    t += "<p class=\"caution\"><b>Caution:</b> " + svg::Escape(caution) + ".</p>";
  }
  return t;
}

std::string Settings(const json& r) {
  const json& s = r["settings"];
  std::string t = "<p><b>" + svg::Escape(r["family"].get<std::string>()) + "</b> model, kernels " +
                  svg::Escape(r["kernels"].get<std::string>()) + ", compute " +
                  svg::Escape(r.value("compute", std::string("f32"))) + ", " +
                  std::to_string(s["repeat"].get<size_t>()) +
                  " repetitions interleaved with the baseline and the floor";
  if (r["family"] == "stack") {
    t += ", " + std::to_string(s["rows"].get<size_t>()) + " rows per repetition";
  } else {
    t += ", " + std::to_string(s["prompt_tokens"].get<size_t>()) + "-token prompt and " +
         std::to_string(s["decode_tokens"].get<size_t>()) + " decoded tokens per repetition";
  }
  if (s["cold"].get<bool>()) t += ", files evicted from the page cache first (--cold)";
  t += ".</p>" + InputText(r);
  t += "<p class=\"dim\">Command: <code>" + svg::Escape(r["command"].get<std::string>()) +
       "</code><br>sprig " + svg::Escape(r["sprig_version"].get<std::string>()) + ", " +
       std::to_string(r["machine"]["cpus"].get<unsigned>()) + " CPUs, load average";
  for (const char* when : {"load_average_start", "load_average_end"}) {
    const json& l = r["machine"][when];
    t += std::string(when == std::string("load_average_start") ? " at start " : ", at end ");
    t += l.empty() ? "unknown" : Fixed(l[0].get<double>(), 2);
  }
  t += " (1 minute).</p>";
  return t;
}

std::string SidesTable(const json& r) {
  std::string t =
      "<h2>The three models</h2><table><tr><th>side</th><th>what</th><th>file</th>"
      "<th>parameters</th>";
  for (const json& f : r["sides"]["model"]["flops"]) {
    t += "<th>FLOPs/token " + svg::Escape(f["phase"].get<std::string>()) + "</th>";
  }
  t += "</tr>";
  for (const char* side : {"model", "baseline", "floor"}) {
    const json& s = r["sides"][side];
    t += "<tr><td><span class=\"key\" style=\"background:" +
         std::string(kColors[side == std::string("model")      ? 0
                             : side == std::string("baseline") ? 1
                                                               : 2]) +
         "\"></span>" + side + "</td><td>" + svg::Escape(s["label"].get<std::string>()) +
         "</td><td>" + Mib(s["file_bytes"].get<double>()) + "</td><td>" +
         Fixed(s["params"].get<double>() / 1e6, 2) + " M</td>";
    for (const json& f : s["flops"])
      t += "<td>" + Fixed(f["total"].get<double>() / 1e6, 2) + " M</td>";
    t += "</tr>";
  }
  return t +
         "</table><p class=\"dim\">The floor is the model with its routed layers made dense "
         "layers of width 1: baseline time / floor time is the speedup the model would "
         "reach if its routed layers cost nothing (the whole-model bound).</p>";
}

std::string ResultsTable(const json& r) {
  const bool stack = r["family"] == "stack";
  std::string t = std::string("<h2>Speed</h2><table><tr><th>threads</th><th>point</th>") +
                  "<th>model " + (stack ? "rows" : "tokens") + "/s</th><th>baseline " +
                  (stack ? "rows" : "tokens") +
                  "/s</th><th>speedup</th>"
                  "<th>speedup in CPU time</th><th>bound (measured)</th><th>bound (FLOPs)</th>"
                  "<th>model latency ms median / p95 / p99</th>"
                  "<th>baseline latency ms median / p95 / p99</th></tr>";
  auto lat = [](const json& l) {
    return Fixed(l["median"].get<double>(), 3) + " / " + Fixed(l["p95"].get<double>(), 3) + " / " +
           Fixed(l["p99"].get<double>(), 3);
  };
  for (const json& p : r["results"]) {
    t += "<tr><td>" + std::to_string(p["threads"].get<size_t>()) + "</td><td>" + PhaseLabel(p) +
         "</td><td>" + Spread(p["model"]["per_second"], 1) + "</td><td>" +
         Spread(p["baseline"]["per_second"], 1) + "</td><td><b>" + Spread(p["speedup"], 2) +
         "</b></td><td>" + Spread(p["cpu_speedup"], 2) + "</td><td>" + Spread(p["bound"], 2) +
         "</td><td>" +
         (p["flops_bound"].is_null() ? std::string("none")
                                     : Fixed(p["flops_bound"].get<double>(), 2)) +
         "</td><td>" + lat(p["model"]["latency_ms"]) + "</td><td>" +
         lat(p["baseline"]["latency_ms"]) + "</td></tr>";
  }
  return t +
         "</table><p class=\"dim\">Median [min&ndash;max] over repetitions; speedups are "
         "baseline time / model time within each repetition; in CPU time they leave out the time "
         "other programs held the CPU, which a busy machine adds more to long runs. Latency is per "
         "call (stack), "
         "per prompt (prefill) or per decoded token (decode).</p>";
}

std::string SpeedupChart(const json& r) {
  std::vector<size_t> threads = r["settings"]["threads"];
  svg::Axes a;
  a.title = "Speedup over the baseline";
  a.x_label = r["family"] == "stack" ? "rows per call (batch size)" : "tokens per call";
  a.y_label = "baseline time / model time";
  a.y_reference = 1;
  std::vector<svg::Series> series;
  for (size_t ti = 0; ti < threads.size(); ++ti) {
    svg::Series s, b, c;
    s.name = "measured, " + std::to_string(threads[ti]) + " thread" + (threads[ti] > 1 ? "s" : "");
    b.name = "bound, " + std::to_string(threads[ti]) + (threads[ti] > 1 ? " threads" : " thread");
    c.name =
        "CPU time, " + std::to_string(threads[ti]) + (threads[ti] > 1 ? " threads" : " thread");
    s.color = b.color = c.color = kThreadColors[ti % 4];
    b.dashed = true;
    c.dotted = true;
    std::vector<json> points;
    for (const json& p : r["results"]) {
      if (p["threads"] == threads[ti]) points.push_back(p);
    }
    // Fewer tokens per call first: decode before prefill.
    std::sort(points.begin(), points.end(),
              [](const json& x, const json& y) { return x["batch"] < y["batch"]; });
    a.x_categories.clear();
    for (size_t i = 0; i < points.size(); ++i) {
      const json& p = points[i];
      a.x_categories.push_back(p["phase"] == "rows"
                                   ? std::to_string(p["batch"].get<size_t>())
                                   : p["phase"].get<std::string>() + " (" +
                                         std::to_string(p["batch"].get<size_t>()) + ")");
      s.x.push_back(static_cast<double>(i));
      s.y.push_back(p["speedup"]["median"]);
      s.low.push_back(p["speedup"]["min"]);
      s.high.push_back(p["speedup"]["max"]);
      b.x.push_back(static_cast<double>(i));
      b.y.push_back(p["bound"]["median"]);
      c.x.push_back(static_cast<double>(i));
      c.y.push_back(p["cpu_speedup"]["median"]);
    }
    series.push_back(s);
    series.push_back(c);
    series.push_back(b);
  }
  return svg::LineChart(a, series);
}

std::string LatencyChart(const json& r) {
  // The point with the most latency samples per repetition: decode, or the smallest batch.
  const json* chosen = nullptr;
  for (const json& p : r["results"]) {
    if (!chosen || p["model"]["latency_ms"]["count"] > (*chosen)["model"]["latency_ms"]["count"]) {
      chosen = &p;
    }
  }
  svg::Axes a;
  a.title = "Latency distribution, " + (chosen ? PhaseLabel(*chosen) : std::string()) + ", " +
            (chosen ? std::to_string((*chosen)["threads"].get<size_t>()) : "") + " thread(s)";
  a.x_label = r["family"] == "stack" ? "milliseconds per call (log scale)"
                                     : "milliseconds per token (log scale)";
  a.y_label = "count";
  a.log_x = true;
  if (!chosen) return svg::StepHistogram(a, {}, {});
  const json& h = (*chosen)["latency_histogram"];
  std::vector<double> edges = h["edges_ms"];
  std::vector<svg::Series> series;
  for (size_t s = 0; s < 2; ++s) {
    svg::Series se;
    se.name = SideName(s);
    se.color = kColors[s];
    for (uint64_t c : h[SideName(s)]) se.y.push_back(static_cast<double>(c));
    series.push_back(se);
  }
  return svg::StepHistogram(a, edges, series);
}

std::string MemoryChart(const json& r) {
  svg::Axes a;
  a.title = "Resident model memory as tokens are processed (first pass)";
  a.x_label = r["family"] == "stack" ? "rows processed" : "tokens processed";
  a.y_label = "resident MiB of the model's mapping";
  std::vector<svg::Series> series;
  for (size_t s = 0; s < 2; ++s) {
    svg::Series se;
    se.name = SideName(s);
    se.color = kColors[s];
    se.markers = false;
    for (const json& c : r["sides"][SideName(s)]["memory"]["curve"]) {
      se.x.push_back(c["tokens"].get<double>());
      se.y.push_back(c["mapped_resident_bytes"].get<double>() / (1024.0 * 1024.0));
    }
    series.push_back(se);
  }
  return svg::LineChart(a, series);
}

std::string MemoryTable(const json& r) {
  std::string t =
      "<h2>Memory</h2><table><tr><th>side</th><th>first call ms</th><th>resident in this "
      "process (end / peak)</th><th>hot section resident</th><th>records resident</th>"
      "<th>records touched</th></tr>";
  for (size_t s = 0; s < kSides; ++s) {
    const json& m = r["sides"][SideName(s)]["memory"];
    uint64_t touched = 0, records = 0, bytes = 0;
    for (const json& l : m["touched"]) {
      touched += l["touched"].get<uint64_t>();
      records += l["records"].get<uint64_t>();
      bytes += l["touched_bytes"].get<uint64_t>();
    }
    t += "<tr><td>" + std::string(SideName(s)) + "</td><td>" +
         Fixed(m["first_call_ms"].get<double>(), 3) + "</td><td>" +
         Mib(m["mapped_resident_bytes"].get<double>()) + " / " +
         Mib(m["mapped_resident_peak_bytes"].get<double>()) + "</td><td>" +
         Mib(m["hot_resident_bytes"].get<double>()) + " of " + Mib(m["hot_bytes"].get<double>()) +
         "</td><td>" + Mib(m["records_resident_bytes"].get<double>()) + " of " +
         Mib(m["records_bytes"].get<double>()) + "</td><td>" +
         (records ? std::to_string(touched) + " of " + std::to_string(records) + " (" +
                        Mib(static_cast<double>(bytes)) + ")"
                  : std::string("none (no routed layers)")) +
         "</td></tr>";
  }
  const json& end = r["process_memory"]["end"];
  return t + "</table><p class=\"dim\">Process at the end: resident " +
         Mib(end["rss_bytes"].get<double>()) + " (peak " +
         Mib(end["peak_rss_bytes"].get<double>()) + "; file-backed " +
         Mib(end["rss_file_bytes"].get<double>()) + ", anonymous " +
         Mib(end["rss_anon_bytes"].get<double>()) +
         "), for all three models together. Hot and records resident count the page cache "
         "(whoever read the pages).</p>";
}

std::string UsageCharts(const json& r) {
  std::string t;
  for (const json& u : r["usage"]) {
    std::vector<uint64_t> counts = u["counts"];
    // At most 128 bars: neighbouring leaves are summed.
    const size_t per_bar = (counts.size() + 127) / 128;
    std::vector<double> bars((counts.size() + per_bar - 1) / per_bar, 0);
    for (size_t i = 0; i < counts.size(); ++i) bars[i / per_bar] += static_cast<double>(counts[i]);
    svg::Axes a;
    a.title = "Layer " + std::to_string(u["layer"].get<size_t>()) + ": choices per " +
              (per_bar > 1 ? std::to_string(per_bar) + " units" : std::string("unit")) + " (" +
              std::to_string(counts.size()) + " units), entropy " +
              Fixed(u["entropy_bits"].get<double>(), 2) + " of " +
              Fixed(u["max_entropy_bits"].get<double>(), 2) + " bits";
    a.x_label = "leaf or expert index / " + std::to_string(per_bar);
    a.y_label = "rows or tokens routed";
    t += "<div class=\"chart\">" + svg::BarChart(a, bars, kColors[0]) + "</div>";
  }
  if (t.empty()) return "<p>The model has no routed layers.</p>";
  return t;
}

}  // namespace

std::string ToHtml(const json& r) {
  std::string h =
      "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>sprig bench: " +
      svg::Escape(r["sides"]["model"]["label"].get<std::string>()) +
      "</title><style>"
      "body{font-family:sans-serif;margin:24px;color:#222;max-width:1240px}"
      "h1{font-size:22px}h2{font-size:17px;margin-top:28px}"
      "table{border-collapse:collapse;font-size:13px}"
      "td,th{border:1px solid #ccc;padding:4px 8px;text-align:left}th{background:#f2f2f2}"
      ".dim{color:#666;font-size:12px}.grid{display:flex;flex-wrap:wrap;gap:12px}"
      ".caution{background:#fff3d6;border-left:4px solid #d9661f;padding:6px 10px}"
      ".chart{border:1px solid #ddd}.key{display:inline-block;width:10px;height:10px;"
      "margin-right:6px}code{font-size:12px}"
      "</style></head><body><h1>sprig bench: " +
      svg::Escape(r["sides"]["model"]["label"].get<std::string>()) + " against " +
      svg::Escape(r["sides"]["baseline"]["label"].get<std::string>()) + "</h1>";
  h += Settings(r) + ResultsTable(r);
  h += "<div class=\"grid\"><div class=\"chart\">" + SpeedupChart(r) +
       "</div><div class=\"chart\">" + LatencyChart(r) + "</div><div class=\"chart\">" +
       MemoryChart(r) + "</div></div>";
  h += MachineFloorSection(r) + SidesTable(r) + MemoryTable(r);
  h += "<h2>Leaf and expert usage per routed layer</h2><div class=\"grid\">" + UsageCharts(r) +
       "</div>";
  if (!r["usage"].empty()) {
    h += "<p class=\"dim\">Entropy is the Shannon entropy of the usage, H = &minus;&sum; "
         "p<sub>i</sub> log<sub>2</sub> p<sub>i</sub> with p<sub>i</sub> the share of choices "
         "that went to unit i: log<sub>2</sub>(units) when every unit is chosen equally often, 0 "
         "when one takes everything.</p>";
  }
  return h + "</body></html>\n";
}

}  // namespace sprig::bench
