// `sprig bench` (docs/benchmarking.md) through the built program: every key that document
// gives for --json, with sane values on small models; FLOPs against the documented cost
// formulas; a model benchmarked against itself reports identical FLOPs, records touched and
// memory sections on both sides; the HTML report is self-contained and renders in a real
// browser (headless Chromium, Debian's chromium package) to a non-blank screenshot. No timing
// is asserted beyond "positive and ordered". With --input the figures come from the user's rows,
// tokens or text, and the report names the file by size and SHA-256 (checked with Python's
// hashlib); with random input on a routed model it says that is not the model's routing.
#include <gtest/gtest.h>

#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <nlohmann/json.hpp>
#include <regex>
#include <sstream>
#include <string>
#include <tuple>
#include <utility>
#include <vector>

#include "support/test_util.h"

namespace sprig {
namespace {

using nlohmann::json;
using testing::Quote;

// Layer 0 is dense; 1 to 3 are routed. Inputs 64 wide.
constexpr const char* kStackConfig = R"({"family":"stack","input_dim":64,"name":"small","layers":[
 {"kind":"dense","width":32,"activation":"gelu","out":64},
 {"kind":"tree","mode":"leaf","depth":4,"leaf_width":8,"activation":"relu","out":64},
 {"kind":"experts","experts":4,"top_k":2,"width":16,"activation":"silu","gated":true,"out":64},
 {"kind":"tree","mode":"path","depth":5,"activation":"gelu","out":10}]})";

constexpr const char* kTransformerConfig = R"({"family":"transformer","vocab_size":256,
 "d_model":32,"n_heads":4,"max_seq":64,"head":{"kind":"lm"},"tokenizer":"byte",
 "positions":"rope","layers":[{"kind":"tree","mode":"path","depth":4,"activation":"gelu"},
 {"kind":"tree","mode":"leaf","depth":3,"leaf_width":4,"activation":"gelu"}]})";

const char* const kSides[] = {"model", "baseline", "floor"};

class BenchCli : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = new testing::TempDir;
    stack_ = new std::string(testing::PackSynthesized(*dir_, "stack", kStackConfig));
    transformer_ = new std::string(testing::PackSynthesized(*dir_, "lm", kTransformerConfig));
  }
  static void TearDownTestSuite() {
    delete dir_;
    delete stack_;
    delete transformer_;
  }

  // Runs `sprig bench ARGS --json FILE` and returns the parsed document (null on failure).
  static json Bench(const std::string& args, const std::string& name) {
    const std::string out = dir_->File(name + ".json");
    auto r = testing::Run(testing::SprigCli() + " bench " + args + " --json " + Quote(out));
    EXPECT_EQ(r.exit_code, 0) << r.output;
    if (r.exit_code != 0) return nullptr;
    return json::parse(testing::ReadFile(out), nullptr, /*allow_exceptions=*/false);
  }

  static inline testing::TempDir* dir_ = nullptr;
  static inline std::string* stack_ = nullptr;
  static inline std::string* transformer_ = nullptr;
};

// The key paths of the documented --json table: the backticked first column of each row between
// the "bench-json-keys" markers. `<side>` stands for model, baseline and floor; `[]` for every
// element of an array.
std::vector<std::string> DocumentedKeys() {
  const std::string doc =
      testing::ReadFile(std::string(SPRIG_SOURCE_DIR) + "/docs/benchmarking.md");
  const size_t begin = doc.find("<!-- bench-json-keys -->");
  const size_t end = doc.find("<!-- /bench-json-keys -->");
  std::vector<std::string> keys;
  if (begin == std::string::npos || end == std::string::npos) return keys;
  std::istringstream lines(doc.substr(begin, end - begin));
  const std::regex row(R"(^\| `([^`]+)` \|)");
  std::string line;
  for (std::smatch m; std::getline(lines, line);) {
    if (std::regex_search(line, m, row)) keys.push_back(m[1]);
  }
  return keys;
}

// Checks that `path` (dots, `[]`, `<side>`) exists in `j`, adding a failure naming what is missing.
void ExpectPath(const json& j, const std::string& path, const std::string& where) {
  if (path.empty()) return;
  const size_t dot = path.find('.');
  std::string head = path.substr(0, dot);
  const std::string rest = dot == std::string::npos ? "" : path.substr(dot + 1);
  if (head == "<side>") {
    for (const char* side : kSides) ExpectPath(j, side + (rest.empty() ? "" : "." + rest), where);
    return;
  }
  const bool each = head.size() > 2 && head.substr(head.size() - 2) == "[]";
  if (each) head.resize(head.size() - 2);
  ASSERT_TRUE(j.is_object() && j.contains(head)) << "missing " << where << "." << head;
  const json& v = j[head];
  if (!each) {
    ExpectPath(v, rest, where + "." + head);
    return;
  }
  ASSERT_TRUE(v.is_array()) << where << "." << head << " is not an array";
  // The machine's thread scaling is measured per thread count above 1: none on one thread.
  if (v.empty() && head == "thread_scaling" && where == "report.machine") return;
  ASSERT_FALSE(v.empty()) << where << "." << head << " is empty";
  for (const json& e : v) ExpectPath(e, rest, where + "." + head + "[]");
}

// A summary (docs/benchmarking.md): count, then min <= median <= p95 <= p99 <= max, all positive.
void ExpectSummary(const json& s, const std::string& what) {
  ASSERT_TRUE(s.is_object()) << what;
  EXPECT_GT(s["count"].get<double>(), 0) << what;
  EXPECT_GT(s["min"].get<double>(), 0) << what;
  EXPECT_LE(s["min"].get<double>(), s["median"].get<double>()) << what;
  EXPECT_LE(s["median"].get<double>(), s["p95"].get<double>()) << what;
  EXPECT_LE(s["p95"].get<double>(), s["p99"].get<double>()) << what;
  EXPECT_LE(s["p99"].get<double>(), s["max"].get<double>()) << what;
}

// False for a CPU-time summary whose figures are null where the documentation allows it: on
// Windows, whose process CPU time advances in ticks of 10 to 16 ms, longer than these short
// repetitions. Everywhere else it must be a full summary.
bool CpuClockAdvanced(const json& summary) {
#ifdef _WIN32
  return summary["min"].is_number() && summary["max"].is_number();
#else
  (void)summary;
  return true;
#endif
}

void ExpectSaneResults(const json& r, size_t repeat) {
  for (const json& p : r["results"]) {
    const std::string at = p["phase"].get<std::string>() + "/" + p["batch"].dump();
    for (const char* side : kSides) {
      ExpectSummary(p[side]["per_second"], at + " " + side + " per_second");
      if (CpuClockAdvanced(p[side]["cpu_per_second"])) {
        ExpectSummary(p[side]["cpu_per_second"], at + " " + side + " cpu_per_second");
      }
      ExpectSummary(p[side]["latency_ms"], at + " " + side + " latency_ms");
      EXPECT_EQ(p[side]["per_second"]["count"], repeat) << at;
    }
    ExpectSummary(p["speedup"], at + " speedup");
    if (CpuClockAdvanced(p["cpu_speedup"])) ExpectSummary(p["cpu_speedup"], at + " cpu_speedup");
    ExpectSummary(p["bound"], at + " bound");
    // null only for models of nothing but routed layers, which these are not.
    ASSERT_TRUE(p["flops_bound"].is_number()) << at;
    EXPECT_GT(p["flops_bound"].get<double>(), 0) << at;
  }
}

// The machine (docs/benchmarking.md, "Machine floors"): positive, finite bandwidths at ascending
// working sets, the ladder among them, and a multiply-add rate; at every point the whole model
// and each of the `routed` layers against a positive, finite floor, with the repetitions' count.
void ExpectMachineFloors(const json& r, const std::vector<size_t>& routed, size_t repeat) {
  const json& m = r["machine"];
  EXPECT_EQ(m["kernel_path"], r["kernels"]);
  uint64_t last = 0;
  size_t ladder = 0;
  for (const json& b : m["bandwidth"]) {
    EXPECT_GT(b["working_set_bytes"].get<uint64_t>(), last);
    last = b["working_set_bytes"];
    EXPECT_LE(b["buffer_bytes"], b["working_set_bytes"]);
    EXPECT_GT(b["bytes_per_second"].get<double>(), 0);
    EXPECT_TRUE(std::isfinite(b["bytes_per_second"].get<double>()));
    ladder += b["what"].get<std::string>().find("ladder") != std::string::npos;
  }
  EXPECT_EQ(ladder, 5u);
  EXPECT_GT(m["multiply_adds_per_second"].get<double>(), 0);
  for (const json& p : r["results"]) {
    const std::string at = p["phase"].get<std::string>() + "/" + p["batch"].dump();
    const json& f = p["machine_floor"];
    std::vector<const json*> parts = {&f["model"]};
    ASSERT_EQ(f["layers"].size(), routed.size()) << at;
    for (size_t i = 0; i < routed.size(); ++i) {
      EXPECT_EQ(f["layers"][i]["layer"], routed[i]) << at;
      parts.push_back(&f["layers"][i]);
    }
    for (const json* part : parts) {
      const double floor = (*part)["floor_seconds"];
      EXPECT_GT(floor, 0) << at;
      EXPECT_TRUE(std::isfinite(floor)) << at;
      EXPECT_GT((*part)["bytes"].get<double>(), 0) << at;
      ExpectSummary((*part)["time_over_floor"], at + " time_over_floor");
      EXPECT_TRUE(std::isfinite((*part)["time_over_floor"]["max"].get<double>())) << at;
      EXPECT_EQ((*part)["time_over_floor"]["count"], repeat) << at;
      const std::string limit = (*part)["limited_by"];
      EXPECT_TRUE(limit == "bandwidth" || limit == "multiply-adds") << at << " " << limit;
    }
  }
}

void ExpectSaneMemory(const json& r) {
  for (const char* side : kSides) {
    const json& m = r["sides"][side]["memory"];
    EXPECT_GT(m["mapped_resident_bytes"].get<uint64_t>(), 0u) << side;
    EXPECT_GE(m["mapped_resident_peak_bytes"], m["mapped_resident_bytes"]) << side;
    EXPECT_LE(m["mapped_resident_peak_bytes"], r["sides"][side]["file_bytes"]) << side;
    EXPECT_LE(m["hot_resident_bytes"], m["hot_bytes"]) << side;
    EXPECT_LE(m["records_resident_bytes"], m["records_bytes"]) << side;
    EXPECT_GT(m["first_call_ms"].get<double>(), 0) << side;
    uint64_t last = 0;
    for (const json& c : m["curve"]) {
      EXPECT_GE(c["tokens"].get<uint64_t>(), last) << side;
      last = c["tokens"];
    }
    for (const json& t : m["touched"]) {
      EXPECT_GE(t["touched"].get<uint64_t>(), 1u) << side;
      EXPECT_LE(t["touched"], t["records"]) << side;
    }
  }
  const json& end = r["process_memory"]["end"];
  EXPECT_GT(end["rss_bytes"].get<uint64_t>(), 0u);
  EXPECT_GE(end["peak_rss_bytes"], end["rss_bytes"]);
}

TEST_F(BenchCli, StackJsonHasEveryDocumentedKey) {
  const std::vector<std::string> keys = DocumentedKeys();
  ASSERT_GT(keys.size(), 40u)
      << "the bench-json-keys table of docs/benchmarking.md is missing or short";
  const json r = Bench(Quote(*stack_) + " --repeat 2 --rows 64 --batch 1,8 --threads 1,2", "s");
  ASSERT_TRUE(r.is_object());
  for (const std::string& key : keys) ExpectPath(r, key, "report");
  EXPECT_EQ(r["schema"], "sprig-bench/1");
  EXPECT_EQ(r["family"], "stack");
  EXPECT_EQ(r["settings"]["baseline"], "dense_twin");
  ASSERT_EQ(r["results"].size(), 4u);  // 2 thread counts x 2 batch sizes
  ExpectSaneResults(r, 2);
  ExpectMachineFloors(r, {1, 2, 3}, 2);
  // Thread scaling ("Thread scaling"): the machine's for 2 threads, and the model's copies at
  // every point on 2 threads only.
  ASSERT_EQ(r["machine"]["thread_scaling"].size(), 1u);
  EXPECT_EQ(r["machine"]["thread_scaling"][0]["threads"], 2);
  EXPECT_GT(r["machine"]["thread_scaling"][0]["times_one_thread"].get<double>(), 0);
  for (const json& p : r["results"]) {
    if (p["threads"] == 1) {
      EXPECT_TRUE(p["copies_scaling"].is_null()) << p["batch"];
    } else {
      ASSERT_TRUE(p["copies_scaling"].is_number()) << p["batch"];
      EXPECT_GT(p["copies_scaling"].get<double>(), 0) << p["batch"];
      EXPECT_TRUE(std::isfinite(p["copies_scaling"].get<double>())) << p["batch"];
    }
  }
  // 64 rows in calls of 8: 8 calls per repetition, each timed.
  for (const json& p : r["results"]) {
    EXPECT_EQ(p["units"], 64) << p["batch"];
    EXPECT_EQ(p["model"]["latency_ms"]["count"], 2 * 64 / p["batch"].get<size_t>());
  }
  ExpectSaneMemory(r);
  // The three routed layers' records; the dense twin and the floor have none.
  EXPECT_EQ(r["sides"]["model"]["memory"]["touched"].size(), 3u);
  EXPECT_TRUE(r["sides"]["baseline"]["memory"]["touched"].empty());
  EXPECT_EQ(r["sides"]["baseline"]["memory"]["records_bytes"], 0);
  // Usage: each tree layer routes every one of the 64 rows once; experts choose top_k = 2.
  ASSERT_EQ(r["usage"].size(), 3u);
  const uint64_t want[] = {64, 128, 64};
  const uint64_t units[] = {16, 4, 32};  // leaves; a path tree of depth 5 ends in 32
  for (size_t i = 0; i < 3; ++i) {
    uint64_t sum = 0;
    for (uint64_t c : r["usage"][i]["counts"]) sum += c;
    EXPECT_EQ(sum, want[i]) << "layer " << r["usage"][i]["layer"];
    EXPECT_EQ(r["usage"][i]["units"], units[i]);
  }
}

// FLOPs per token against the documented performance model (multiply-add = 2): a dense layer of
// width W costs 2·W·(in + out), twice the input product when gated; a leaf tree d·2·in plus one
// leaf; a path tree (d + 1)·2·(in + out); experts 2·E·in for the router plus k experts. The
// dense twin has W = all units: 16·8 leaf units, 4·16 expert units, 63 path neurons.
TEST_F(BenchCli, FlopsFollowTheCostFormulas) {
  const json r = Bench(Quote(*stack_) + " --repeat 1 --rows 8 --batch 8", "flops");
  ASSERT_TRUE(r.is_object());
  const uint64_t dense0 = 2 * 32 * (64 + 64);
  const uint64_t model = dense0 + (4 * 2 * 64 + 2 * 8 * (64 + 64)) +
                         (2 * 4 * 64 + 2 * (2 * 16 * 64 * 2 + 2 * 16 * 64)) + 6 * 2 * (64 + 10);
  const uint64_t twin =
      dense0 + 2 * 128 * (64 + 64) + (2 * 64 * 64 * 2 + 2 * 64 * 64) + 2 * 63 * (64 + 10);
  EXPECT_EQ(r["sides"]["model"]["flops"][0]["total"], model);
  EXPECT_EQ(r["sides"]["model"]["flops"][0]["routed"], model - dense0);
  EXPECT_EQ(r["sides"]["baseline"]["flops"][0]["total"], twin);
  EXPECT_EQ(r["sides"]["model"]["flops"][0]["ffn_if_dense"], twin);
  // The floor keeps layer 0 and makes each routed layer one unit wide.
  const uint64_t floor = dense0 + 2 * 1 * (64 + 64) + 2 * 1 * (64 + 64) + 2 * 1 * (64 + 10);
  EXPECT_EQ(r["sides"]["floor"]["flops"][0]["total"], floor);
  EXPECT_DOUBLE_EQ(r["results"][0]["flops_bound"].get<double>(),
                   static_cast<double>(twin) / static_cast<double>(dense0));
}

// An experts layer with shared experts: the model runs the router, k experts, every shared
// expert and the gate's dot product (2·in); its dense twin holds every routed and every shared
// unit, W = 4·8 + 2·6 (model/flops.h), and no router or gate.
TEST_F(BenchCli, DenseTwinOfSharedExpertsHoldsTheirUnits) {
  const std::string model = testing::PackSynthesized(
      *dir_, "shared",
      R"({"family":"stack","input_dim":16,"layers":[{"kind":"experts","experts":4,"top_k":2,)"
      R"("width":8,"activation":"silu","router_scoring":"sigmoid","shared_experts":2,)"
      R"("shared_width":6,"shared_gate":true,"out":10}]})");
  const json r = Bench(Quote(model) + " --repeat 1 --rows 8 --batch 8", "shared");
  ASSERT_TRUE(r.is_object());
  const uint64_t flops = 2 * 4 * 16 + 2 * (2 * 8 * (16 + 10)) + 2 * (2 * 6 * (16 + 10)) + 2 * 16;
  const uint64_t twin = 2 * (4 * 8 + 2 * 6) * (16 + 10);
  EXPECT_EQ(r["sides"]["model"]["flops"][0]["total"], flops);
  EXPECT_EQ(r["sides"]["model"]["flops"][0]["ffn_if_dense"], twin);
  EXPECT_EQ(r["sides"]["baseline"]["flops"][0]["total"], twin);
}

TEST_F(BenchCli, TransformerReportsPrefillAndDecode) {
  const json r =
      Bench(Quote(*transformer_) + " --repeat 2 --prompt-tokens 12 --decode-tokens 10 --cold", "t");
  ASSERT_TRUE(r.is_object());
  EXPECT_EQ(r["settings"]["cold"], true);
  for (const std::string& key : DocumentedKeys()) ExpectPath(r, key, "report");
  ASSERT_EQ(r["results"].size(), 2u);
  EXPECT_EQ(r["results"][0]["phase"], "prefill");
  EXPECT_EQ(r["results"][0]["batch"], 12);
  EXPECT_EQ(r["results"][1]["phase"], "decode");
  // Every decoded token of every repetition is a latency sample.
  EXPECT_EQ(r["results"][1]["model"]["latency_ms"]["count"], 20);
  ExpectSaneResults(r, 2);
  ExpectMachineFloors(r, {0, 1}, 2);
  ExpectSaneMemory(r);
  // Attention's context: the prompt's tokens average P / 2, the decoded ones P + G / 2.
  EXPECT_EQ(r["sides"]["model"]["flops"][0]["context"], 6);
  EXPECT_EQ(r["sides"]["model"]["flops"][1]["context"], 17);
  // Routing of the 22 tokens of each of the three sequences run (the first pass's and one per
  // repetition) through both routed blocks.
  ASSERT_EQ(r["usage"].size(), 2u);
  for (const json& u : r["usage"]) {
    uint64_t sum = 0;
    for (uint64_t c : u["counts"]) sum += c;
    EXPECT_EQ(sum, 3 * 22u);
  }
  EXPECT_EQ(r["input"]["kind"], "random");
  EXPECT_EQ(r["input"]["prompts"], 3);
}

// The dense twin and the floor are the model's own blocks with dense layers: a post-norm model
// with a norm on the embeddings, no final norm, biases on some projections and an lm head with
// a transform keeps all of them (the twin is packed with the model's tensors as donor, so a
// tensor the twin lacked or added would fail to build), and the head transform's 2·d² FLOPs
// are counted on every side.
TEST_F(BenchCli, DenseTwinKeepsTheBlockVariants) {
  const std::string config = R"({"family":"transformer","vocab_size":50,"d_model":32,
    "n_heads":4,"max_seq":32,"norm_position":"post","final_norm":false,"embed_norm":true,
    "attn_bias":["q","k","v"],"head":{"kind":"lm","transform":{"activation":"gelu"},"bias":true},
    "layers":[{"kind":"tree","mode":"leaf","depth":3,"leaf_width":4,"activation":"gelu"}]})";
  const std::string model = testing::PackSynthesized(*dir_, "variants", config);
  const json r = Bench(Quote(model) + " --repeat 1 --prompt-tokens 8 --decode-tokens 4", "v");
  ASSERT_TRUE(r.is_object());
  const uint64_t d = 32, v = 50, context = 4;
  const uint64_t other = 4 * 2 * d * d + 2 * 2 * context * d + 2 * v * d + 2 * d * d;
  for (const char* side : kSides) {
    EXPECT_EQ(r["sides"][side]["flops"][0]["other"], other) << side;
  }
  const json& twin = r["sides"]["baseline"];
  EXPECT_EQ(twin["flops"][0]["ffn"], 2 * 32 * (d + d)) << twin.dump();
}

// The same file on both sides: the same inputs give the same FLOPs, the same records touched
// and the same page-cache sections (one file, one page cache).
TEST_F(BenchCli, ModelAgainstItselfReportsEqualSides) {
  for (const std::string* model : {stack_, transformer_}) {
    const std::string extra =
        model == stack_ ? " --rows 32 --batch 4" : " --prompt-tokens 8 --decode-tokens 8";
    const json r =
        Bench(Quote(*model) + " --baseline " + Quote(*model) + " --repeat 2" + extra, "self");
    ASSERT_TRUE(r.is_object());
    EXPECT_EQ(r["settings"]["baseline"], "file");
    const json& a = r["sides"]["model"];
    const json& b = r["sides"]["baseline"];
    EXPECT_EQ(a["flops"], b["flops"]) << *model;
    EXPECT_EQ(a["params"], b["params"]);
    EXPECT_EQ(a["file_bytes"], b["file_bytes"]);
    EXPECT_EQ(a["memory"]["touched"], b["memory"]["touched"]) << *model;
    EXPECT_FALSE(a["memory"]["touched"].empty());
    EXPECT_EQ(a["memory"]["sections"], b["memory"]["sections"]) << *model;
    // With itself as the baseline the FLOPs bound is total / (total - routed), per phase.
    for (const json& p : r["results"]) {
      for (const json& f : a["flops"]) {
        if (f["phase"] != p["phase"]) continue;
        const double total = f["total"].get<double>(), routed = f["routed"].get<double>();
        EXPECT_DOUBLE_EQ(p["flops_bound"].get<double>(), total / (total - routed)) << p["phase"];
      }
    }
  }
}

TEST_F(BenchCli, RefusesOptionsOfTheOtherFamilyAndMismatchedBaselines) {
  const std::string cli = testing::SprigCli() + " bench ";
  auto r = testing::Run(cli + Quote(*stack_) + " --prompt-tokens 4");
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("stack model"), std::string::npos) << r.output;
  r = testing::Run(cli + Quote(*transformer_) + " --batch 4");
  EXPECT_EQ(r.exit_code, 2) << r.output;
  r = testing::Run(cli + Quote(*transformer_) + " --prompt-tokens 60 --decode-tokens 10");
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("max_seq"), std::string::npos) << r.output;
  r = testing::Run(cli + Quote(*stack_) + " --baseline " + Quote(*transformer_));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("one family"), std::string::npos) << r.output;
  r = testing::Run(cli + Quote(*stack_) + " --baseline " + Quote(*stack_) + " --dense-twin");
  EXPECT_EQ(r.exit_code, 2) << r.output;
  r = testing::Run(cli + "--help");
  EXPECT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(r.output.find("--dense-twin"), std::string::npos);
}

// The report is one self-contained file: inline SVG charts (speedup, latency, memory and one
// usage chart per routed layer), nothing loaded from elsewhere, no scripts. Then Chromium
// loads it and takes a screenshot, which must show a substantial amount of non-white content.
TEST_F(BenchCli, ReportIsSelfContainedAndRendersInChromium) {
  const std::string html = dir_->File("report.html");
  const json r = Bench(
      Quote(*stack_) + " --repeat 2 --rows 32 --batch 1,4,16 --report " + Quote(html), "report");
  ASSERT_TRUE(r.is_object());
  const std::string text = testing::ReadFile(html);
  size_t charts = 0;
  for (size_t at = text.find("<svg"); at != std::string::npos; at = text.find("<svg", at + 1)) {
    ++charts;
  }
  EXPECT_EQ(charts, 3u + 3u);  // three charts and one per routed layer
  // The machine-floor table: the whole model and the three routed layers at each of the three
  // batch sizes, each with its time ÷ floor.
  EXPECT_NE(text.find("Against the machine floor"), std::string::npos);
  size_t alone = 0;
  for (size_t at = text.find(" alone</td>"); at != std::string::npos;
       at = text.find(" alone</td>", at + 1)) {
    ++alone;
  }
  EXPECT_EQ(alone, 3u * 3u);
  EXPECT_EQ(text.find("<script"), std::string::npos);
  EXPECT_EQ(text.find("src="), std::string::npos);
  EXPECT_EQ(text.find("href="), std::string::npos);
  EXPECT_EQ(text.find("url("), std::string::npos);

  if (testing::Run("command -v chromium").exit_code != 0) {
    GTEST_SKIP() << "chromium is not installed (scripts/install-deps.sh installs Debian's "
                    "chromium); the report was not rendered";
  }
  const std::string png = dir_->File("report.png");
  const std::string command =
      "timeout 180 chromium --headless --no-sandbox --disable-gpu --disable-quic --no-first-run "
      "--disable-background-networking --disable-component-update --disable-sync "
      "--user-data-dir=" +
      Quote(dir_->File("chromium-profile")) + " --screenshot=" + Quote(png) +
      " --window-size=1280,1600 " + Quote("file://" + html);
  auto shot = testing::Run(command);
  ASSERT_EQ(shot.exit_code, 0) << shot.output;
  auto ink = testing::Run(testing::Python() + " " +
                          Quote(std::string(SPRIG_SOURCE_DIR) + "/tests/python/png_ink.py") + " " +
                          Quote(png));
  ASSERT_EQ(ink.exit_code, 0) << ink.output;
  const json m = json::parse(ink.output, nullptr, false);
  ASSERT_TRUE(m.is_object()) << ink.output;
  EXPECT_EQ(m["width"], 1280);
  EXPECT_EQ(m["height"], 1600);
  // Tables, text and charts cover well over 3% of a 1280 x 1600 page; a blank or error page
  // does not. Many colours: antialiased text and the charts' series.
  EXPECT_GT(m["non_white_fraction"].get<double>(), 0.03) << ink.output;
  EXPECT_GT(m["colours"].get<int>(), 50) << ink.output;
}

// bench/compare_torch.py runs the PyTorch reference (converter/python/sprig_torch) and sprig's
// C API on the same weights and prints each ratio with the largest output difference, which
// must be float32 rounding (the reference tests use atol 1e-6, rtol 1e-5; here 1e-4 absolute on
// unit-scale outputs, since the script's reference runs in float32, not float64).
TEST_F(BenchCli, CompareTorchRunsBothSidesOnTheSameWeights) {
  // The build folder from the paths CMake gives the tests (SprigCli() may be quoted and
  // prefixed with an emulator).
  const std::string build =
      std::filesystem::path(SPRIG_CLI_PATH).parent_path().parent_path().string();
  ASSERT_TRUE(std::filesystem::exists(SPRIG_SHARED_LIBRARY))
      << "libsprig.so, which compare_torch.py loads, is missing: " << SPRIG_SHARED_LIBRARY;
  const std::string script = std::string(SPRIG_SOURCE_DIR) + "/bench/compare_torch.py";
  for (auto [name, config, extra] : {std::tuple{"stack", kStackConfig, " --rows 16 --batch 1,8"},
                                     std::tuple{"lm", kTransformerConfig, " --prompt-tokens 16"}}) {
    const std::string json_path = dir_->File(std::string("compare-") + name + ".json");
    testing::WriteFile(json_path, config);
    auto r =
        testing::Run("PYTHONPATH=" + Quote(std::string(SPRIG_SOURCE_DIR) + "/converter/python") +
                     " " + testing::Python() + " " + Quote(script) + " " + Quote(json_path) +
                     " --repeat 1 --build " + Quote(build) + extra);
    ASSERT_EQ(r.exit_code, 0) << r.output;
    // Each result line ends with the largest |difference|; one per batch size or sequence.
    const std::regex line(R"(^\s*\d+\s.*\s(\d\.\d+e[-+]\d+)\s*$)");
    size_t lines = 0;
    std::istringstream out(r.output);
    std::string text;
    for (std::smatch m; std::getline(out, text);) {
      if (!std::regex_match(text, m, line)) continue;
      ++lines;
      EXPECT_LT(std::stod(m[1]), 1e-4) << text;
    }
    EXPECT_EQ(lines, std::string(name) == "stack" ? 2u : 1u) << r.output;
  }
}

// The SHA-256 of a file by Python's hashlib (FIPS 180-4), and its size.
std::pair<std::string, uint64_t> HashOf(const std::string& path) {
  auto r = testing::RunPython(
      "import sys, hashlib\nb = open(sys.argv[1], 'rb').read()\n"
      "print(hashlib.sha256(b).hexdigest(), len(b))",
      {path});
  EXPECT_EQ(r.exit_code, 0) << r.output;
  std::istringstream in(r.output);
  std::pair<std::string, uint64_t> out;
  in >> out.first >> out.second;
  return out;
}

// Rows from a file: every figure that depends on routing follows them. 24 copies of one row
// send every row down one path, so each tree layer's usage has entropy 0 (the experts' top 2,
// 1 bit) and the leaf tree reads one record of its 16; random rows spread over the leaves and say
// they are random.
TEST_F(BenchCli, StackOnRowsFromAFile) {
  const std::string rows = dir_->File("same.npy");
  auto w = testing::RunPython(
      "import sys, numpy as np\n"
      "row = np.random.default_rng(4).standard_normal(64).astype(np.float32)\n"
      "np.save(sys.argv[1], np.tile(row, (24, 1)))",
      {rows});
  ASSERT_EQ(w.exit_code, 0) << w.output;
  const std::string html = dir_->File("rows.html");
  const json r = Bench(Quote(*stack_) + " --input " + Quote(rows) +
                           " --repeat 2 --batch 1,8 --report " + Quote(html),
                       "rows");
  ASSERT_TRUE(r.is_object());
  for (const std::string& key : DocumentedKeys()) ExpectPath(r, key, "report");
  const auto [sha, bytes] = HashOf(rows);
  EXPECT_EQ(r["input"]["kind"], "rows");
  EXPECT_EQ(r["input"]["path"], rows);
  EXPECT_EQ(r["input"]["bytes"], bytes);
  EXPECT_EQ(r["input"]["sha256"], sha);
  EXPECT_EQ(r["input"]["units"], 24);
  EXPECT_TRUE(r["input"]["seed"].is_null());
  EXPECT_EQ(r["input"]["caution"], "");
  EXPECT_EQ(r["settings"]["rows"], 24);  // by default, the file's rows
  ExpectSaneResults(r, 2);
  ASSERT_EQ(r["usage"].size(), 3u);
  for (const json& u : r["usage"]) {
    // A tree sends the row to one leaf (0 bits); experts share it between the top 2 (1 bit).
    EXPECT_EQ(u["entropy_bits"].get<double>(), u["layer"] == 2 ? 1.0 : 0.0) << u.dump();
    EXPECT_NEAR(u["max_entropy_bits"].get<double>(), std::log2(u["units"].get<double>()), 1e-12);
  }
  // Layer 1 is the leaf tree: one leaf, one record, on every side that has it.
  const json& touched = r["sides"]["model"]["memory"]["touched"];
  ASSERT_EQ(touched.size(), 3u);
  EXPECT_EQ(touched[0]["layer"], 1);
  EXPECT_EQ(touched[0]["touched"], 1);
  EXPECT_EQ(touched[1]["touched"], 2);  // experts: top 2 of one row
  const std::string page = testing::ReadFile(html);
  EXPECT_NE(page.find(sha), std::string::npos);
  EXPECT_EQ(page.find("Caution"), std::string::npos);

  const json random = Bench(Quote(*stack_) + " --repeat 1 --rows 24 --batch 8", "random");
  ASSERT_TRUE(random.is_object());
  EXPECT_EQ(random["input"]["kind"], "random");
  EXPECT_EQ(random["input"]["seed"], 1);
  EXPECT_EQ(random["input"]["path"], "");
  EXPECT_NE(random["input"]["caution"].get<std::string>().find("not the model's routing"),
            std::string::npos);
  EXPECT_GT(random["usage"][0]["entropy_bits"].get<double>(), 0.0);
  EXPECT_GT(random["sides"]["model"]["memory"]["touched"][0]["touched"].get<int>(), 1);
  // The table says it too.
  auto t = testing::Run(testing::SprigCli() + " bench " + Quote(*stack_) +
                        " --repeat 1 --rows 8 --batch 8");
  ASSERT_EQ(t.exit_code, 0) << t.output;
  EXPECT_NE(t.output.find("input: random N(0, 1) rows, seed 1"), std::string::npos) << t.output;
  EXPECT_NE(t.output.find("not the model's routing"), std::string::npos) << t.output;
  EXPECT_NE(t.output.find("usage entropy"), std::string::npos) << t.output;
}

// Text for a byte-tokenizer transformer: cut into prompts of --prompt-tokens bytes, each continued
// by the model's greedy decoding; a .npy of the same bytes as tokens gives the same routing.
TEST_F(BenchCli, TransformerOnTextAndTokens) {
  const std::string text = dir_->File("notes.txt");
  std::string notes;
  for (int i = 0; i < 6; ++i) notes += "Day " + std::to_string(i) + " at the lower bank: fog.\n";
  testing::WriteFile(text, notes);
  const json r = Bench(Quote(*transformer_) + " --input " + Quote(text) +
                           " --repeat 2 --prompt-tokens 12 --decode-tokens 10",
                       "text");
  ASSERT_TRUE(r.is_object());
  for (const std::string& key : DocumentedKeys()) ExpectPath(r, key, "report");
  EXPECT_EQ(r["input"]["kind"], "text");
  EXPECT_EQ(r["input"]["units"], notes.size());
  EXPECT_EQ(r["input"]["sha256"], HashOf(text).first);
  EXPECT_EQ(r["input"]["prompts"], 3);
  EXPECT_EQ(r["input"]["caution"], "");
  ExpectSaneResults(r, 2);
  for (const json& u : r["usage"]) {
    uint64_t sum = 0;
    for (uint64_t c : u["counts"]) sum += c;
    EXPECT_EQ(sum, 3 * 22u);
  }
  const std::string tokens = dir_->File("notes.npy");
  auto w = testing::RunPython(
      "import sys, numpy as np\n"
      "np.save(sys.argv[2], np.frombuffer(open(sys.argv[1], 'rb').read(), np.uint8)"
      ".astype(np.int64))",
      {text, tokens});
  ASSERT_EQ(w.exit_code, 0) << w.output;
  const json t = Bench(Quote(*transformer_) + " --input " + Quote(tokens) +
                           " --repeat 2 --prompt-tokens 12 --decode-tokens 10",
                       "tokens");
  ASSERT_TRUE(t.is_object());
  EXPECT_EQ(t["input"]["kind"], "tokens");
  EXPECT_EQ(t["usage"], r["usage"]);
  EXPECT_EQ(t["sides"]["model"]["memory"]["touched"], r["sides"]["model"]["memory"]["touched"]);
}

TEST_F(BenchCli, RefusesInputsThatDoNotFit) {
  const std::string cli = testing::SprigCli() + " bench ";
  const std::string text = dir_->File("short.txt");
  testing::WriteFile(text, "Day 1: fog.");
  auto r = testing::Run(cli + Quote(*transformer_) + " --input " + Quote(text) +
                        " --prompt-tokens 12 --decode-tokens 4");
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("fewer than one prompt of --prompt-tokens 12"), std::string::npos)
      << r.output;
  const std::string latin1 = dir_->File("latin1.txt");
  testing::WriteFile(latin1, "caf\xe9 au lait, and more text after it");
  r = testing::Run(cli + Quote(*transformer_) + " --input " + Quote(latin1) +
                   " --prompt-tokens 8 --decode-tokens 4");
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("byte 3 breaks UTF-8"), std::string::npos) << r.output;
  r = testing::Run(cli + Quote(*stack_) + " --input " + Quote(text));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("is a stack model"), std::string::npos) << r.output;
}

}  // namespace
}  // namespace sprig
