// sprig bench MODEL [--baseline OTHER.sprig | --dense-twin] [--input FILE] [--rows N |
//                   --prompt-tokens P --decode-tokens G] [--batch N,...] [--threads N,...]
//                   [--compute f32|i8]
//                   [--repeat R] [--cold] [--json FILE] [--report FILE.html]
//
// Speed and memory of a model against a baseline, measured interleaved in one process (the code
// is in bench/kit). The baseline is another .sprig file or the model's dense twin, built for
// the run: its config with every routed layer made dense at the same total width, the
// model's own weights for everything else, packed into an unlinked temporary file so it is
// paged in from storage like any model. The inputs are the user's (--input: rows, tokens or
// text) or random ones, and the report says which.

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <map>
#include <memory>
#include <string>

#include "base/status_macros.h"
#include "bench/kit/measure.h"
#include "bench/kit/models.h"
#include "cli.h"
#include "input_file.h"
#include "io/atomic_file.h"
#include "platform/process.h"
#include "sprig/memory.h"
#include "sprig/model.h"
#include "tools/report/report.h"

namespace sprig::cli {
namespace {

struct BenchArgs {
  std::string model, baseline, json, report, input;
  bool dense_twin = false, cold = false;
  std::vector<size_t> batches, threads = {1};
  size_t rows = 256, prompt_tokens = 128, decode_tokens = 128, repeat = 10;
  uint64_t seed = 1;
  std::string compute = "f32";  // --compute: the model side's compute mode
  // Which options were given, to refuse those that do not apply to the model's family.
  bool rows_given = false, batch_given = false, tokens_given = false;
};

// A progress bar on a terminal: "[#######.......]  45%  step 12 of 27".
class Bar {
 public:
  explicit Bar(bool on) : on_(on && platform::IsTerminal(stderr)) {}
  void Update(size_t done, size_t total) {
    if (!on_ || total == 0) return;
    // Redraw at most ten times a second (and at the end): steps can take microseconds.
    const auto now = std::chrono::steady_clock::now();
    if (done < total && shown_ && now - last_ < std::chrono::milliseconds(100)) return;
    last_ = now;
    const size_t width = 30, filled = width * done / total;
    std::fprintf(stderr, "\rbench [%s%s] %3zu%%  step %zu of %zu", std::string(filled, '#').c_str(),
                 std::string(width - filled, '.').c_str(), 100 * done / total, done, total);
    std::fflush(stderr);
    shown_ = true;
  }
  ~Bar() {
    if (shown_) std::fprintf(stderr, "\r%60s\r", "");
  }

 private:
  bool on_, shown_ = false;
  std::chrono::steady_clock::time_point last_;
};

Status CheckArgs(const BenchArgs& a, const ModelConfig& c) {
  if (a.repeat == 0) return Status::InvalidArgument("--repeat must be at least 1");
  for (size_t t : a.threads) {
    if (t == 0) return Status::InvalidArgument("--threads takes counts of at least 1");
  }
  if (c.family == Family::kStack) {
    if (a.tokens_given) {
      return Status::InvalidArgument(a.model +
                                     " is a stack model; --prompt-tokens and --decode-tokens "
                                     "apply to transformers (use --rows and --batch)");
    }
    if (a.rows == 0) return Status::InvalidArgument("--rows must be at least 1");
    for (size_t b : a.batches) {
      if (b == 0) return Status::InvalidArgument("--batch takes sizes of at least 1");
    }
    return Status::Ok();
  }
  if (a.rows_given || a.batch_given) {
    return Status::InvalidArgument(a.model +
                                   " is a transformer; --rows and --batch apply to stack models "
                                   "(use --prompt-tokens and --decode-tokens)");
  }
  if (a.prompt_tokens == 0) return Status::InvalidArgument("--prompt-tokens must be at least 1");
  return Status::Ok();
}

// The baseline must take the same inputs as the model.
Status CheckBaseline(const BenchArgs& a, const ModelConfig& m, const ModelConfig& b) {
  if (m.family != b.family) {
    return Status::InvalidArgument("the baseline " + a.baseline + " is a " + ToString(b.family) +
                                   " model and " + a.model + " a " + ToString(m.family) +
                                   " model; they must be of one family");
  }
  if (m.family == Family::kStack && m.input_dim != b.input_dim) {
    return Status::InvalidArgument("the baseline " + a.baseline + " takes rows of " +
                                   std::to_string(b.input_dim) + " values and " + a.model + " of " +
                                   std::to_string(m.input_dim) + "; they must be equal");
  }
  if (m.family == Family::kTransformer && m.vocab_size != b.vocab_size) {
    return Status::InvalidArgument("the baseline " + a.baseline + " has a vocabulary of " +
                                   std::to_string(b.vocab_size) + " tokens and " + a.model +
                                   " of " + std::to_string(m.vocab_size) + "; they must be equal");
  }
  return Status::Ok();
}

// A transformer is measured by prefill and decode: the runtime's decoding rules (an lm head,
// causal attention, room in the KV cache for the prompt and the decoded tokens) decide.
Status CheckDecoding(const BenchArgs& a, const Model& model) {
  if (model.config().family != Family::kTransformer) return Status::Ok();
  return model.check_decoding(0, a.prompt_tokens + a.decode_tokens)
      .WithContext("measuring " + model.path() + " by prefill and decode (--prompt-tokens " +
                   std::to_string(a.prompt_tokens) + ", --decode-tokens " +
                   std::to_string(a.decode_tokens) + ")");
}

// The prompts of a transformer's benchmark from the file's sequences: consecutive pieces of
// `length` tokens within each sequence, as many as the run uses (`wanted`) or the file holds.
Result<std::vector<std::vector<int32_t>>> PromptsOf(const InputFile& in, size_t length,
                                                    size_t wanted) {
  std::vector<std::vector<int32_t>> prompts;
  for (const std::vector<int32_t>& seq : in.sequences) {
    for (size_t at = 0; at + length <= seq.size() && prompts.size() < wanted; at += length) {
      prompts.emplace_back(seq.begin() + static_cast<std::ptrdiff_t>(at),
                           seq.begin() + static_cast<std::ptrdiff_t>(at + length));
    }
  }
  if (prompts.empty()) {
    size_t longest = 0;
    for (const auto& seq : in.sequences) longest = std::max(longest, seq.size());
    return Status::InvalidArgument(
        in.path + ": its longest sequence has " + std::to_string(longest) +
        " tokens, fewer than one prompt of --prompt-tokens " + std::to_string(length));
  }
  return prompts;
}

// Reads --input for the model (`probe`, opened for this alone) into the measurement's options
// and the report's description; for a transformer the model's own decoding continues each prompt
// here, before any measured model is opened or a file evicted.
Status PrepareInput(const BenchArgs& a, const std::shared_ptr<const Model>& probe,
                    bench::MeasureOptions* o, bench::InputInfo* info) {
  if (probe->config().family == Family::kTransformer) info->prompts = a.repeat + 1;
  if (a.input.empty()) return Status::Ok();
  SPRIG_ASSIGN_OR_RETURN(InputFile in, ReadInputFile(a.input, *probe));
  info->kind = in.kind;
  info->path = in.path;
  info->bytes = in.bytes;
  info->sha256 = in.sha256;
  info->units = in.units();
  if (probe->config().family == Family::kStack) {
    o->input_rows = std::move(in.values);
    return Status::Ok();
  }
  SPRIG_ASSIGN_OR_RETURN(o->input_prompts, PromptsOf(in, a.prompt_tokens, a.repeat + 1));
  SPRIG_ASSIGN_OR_RETURN(o->input_continuations,
                         bench::ContinuePrompts(probe, o->input_prompts, a.decode_tokens));
  info->prompts = o->input_prompts.size();
  return Status::Ok();
}

Status WriteText(const std::string& path, const std::string& text) {
  SPRIG_ASSIGN_OR_RETURN(io::AtomicFile f, io::AtomicFile::Create(path, /*overwrite=*/true));
  SPRIG_RETURN_IF_ERROR(f.Write(text.data(), text.size()));
  return f.Commit();
}

// Builds the dense twin (when asked) and the floor, opens everything, then measures.
Result<bench::Measurement> Run(const BenchArgs& a, bench::ReportContext* context) {
  ModelConfig config;
  DType dtype;
  {
    // Read the config, then close the model: a cold start needs every mapping gone.
    SPRIG_ASSIGN_OR_RETURN(auto probe, Model::open(a.model));
    config = probe->config();
    dtype = bench::MainStorageType(*probe);
    SPRIG_RETURN_IF_ERROR(CheckArgs(a, config));
    SPRIG_RETURN_IF_ERROR(CheckDecoding(a, *probe));
    SPRIG_RETURN_IF_ERROR(PrepareInput(a, probe, &context->options, &context->input));
  }
  bench::BuildOptions build;
  build.dtype = dtype;
  build.donor_path = a.model;
  build.evict = a.cold;
  std::shared_ptr<const Model> models[bench::kSides];
  std::string labels[bench::kSides] = {a.model, a.baseline, "floor of " + a.model};
  if (a.baseline.empty()) {
    SPRIG_ASSIGN_OR_RETURN(models[bench::kBaseline],
                           bench::BuildUnlinkedModel(bench::DenseTwinConfig(config), build));
    labels[bench::kBaseline] = "dense twin of " + a.model;
  }
  SPRIG_ASSIGN_OR_RETURN(models[bench::kFloor],
                         bench::BuildUnlinkedModel(bench::FloorConfig(config), build));
  if (a.cold) {
    SPRIG_RETURN_IF_ERROR(EvictFromPageCache(a.model));
    if (!a.baseline.empty()) SPRIG_RETURN_IF_ERROR(EvictFromPageCache(a.baseline));
  }
  SPRIG_ASSIGN_OR_RETURN(models[bench::kModel], Model::open(a.model));
  if (!a.baseline.empty()) {
    SPRIG_ASSIGN_OR_RETURN(models[bench::kBaseline], Model::open(a.baseline));
    SPRIG_RETURN_IF_ERROR(CheckBaseline(a, config, models[bench::kBaseline]->config()));
    SPRIG_RETURN_IF_ERROR(CheckDecoding(a, *models[bench::kBaseline]));
  }
  bench::MeasureOptions& o = context->options;
  o.threads = a.threads;
  o.batches = a.batches.empty() ? std::vector<size_t>{1, 16, 128} : a.batches;
  if (config.family == Family::kTransformer) o.batches = {1};
  o.rows = a.rows;
  // Rows from a file: by default each repetition runs every row of it once.
  if (!o.input_rows.empty() && !a.rows_given) o.rows = o.input_rows.size() / config.input_dim;
  o.prompt_tokens = a.prompt_tokens;
  o.decode_tokens = a.decode_tokens;
  o.repeat = a.repeat;
  o.seed = a.seed;
  o.compute = a.compute;
  context->paths[bench::kModel] = a.model;
  context->paths[bench::kBaseline] = a.baseline;
  context->baseline_kind = a.baseline.empty() ? "dense_twin" : "file";
  context->cold = a.cold;
  context->command = platform::CommandLine();
  context->load_start = bench::LoadAverages();
  Bar bar(a.json.empty());
  o.progress = [&bar](size_t done, size_t total) { bar.Update(done, total); };
  auto m = bench::Measure(models, labels, o);
  o.progress = nullptr;
  context->load_end = bench::LoadAverages();
  return m;
}

std::string Spread(const nlohmann::json& s, const char* fmt) {
  // No figure where none was measured: a CPU clock that did not advance in a repetition
  // (Windows counts CPU time in ticks of 10 to 16 ms) leaves the CPU-time rates undefined.
  for (const char* key : {"median", "min", "max"}) {
    if (!s[key].is_number() || !std::isfinite(s[key].get<double>())) return "-";
  }
  char b[96];
  const std::string f = std::string(fmt) + " [" + fmt + "-" + fmt + "]";
  std::snprintf(b, sizeof b, f.c_str(), s["median"].get<double>(), s["min"].get<double>(),
                s["max"].get<double>());
  return b;
}

// What the figures were measured on, with the caution for random input.
void PrintInput(const nlohmann::json& r) {
  const auto& in = r["input"];
  const bool stack = r["family"] == "stack";
  if (in["kind"] == "random") {
    std::printf("input: random %s, seed %llu\n", stack ? "N(0, 1) rows" : "tokens",
                static_cast<unsigned long long>(in["seed"].get<uint64_t>()));
  } else {
    std::printf("input: %s (%s, %s, %llu %s, sha256 %s)", in["path"].get<std::string>().c_str(),
                in["kind"].get<std::string>().c_str(),
                HumanBytes(in["bytes"].get<uint64_t>()).c_str(),
                static_cast<unsigned long long>(in["units"].get<uint64_t>()),
                stack ? "rows" : "tokens", in["sha256"].get<std::string>().c_str());
    if (!stack) {
      std::printf("; %llu prompts continued by the model's greedy decoding",
                  static_cast<unsigned long long>(in["prompts"].get<uint64_t>()));
    }
    std::printf("\n");
  }
  const std::string caution = in["caution"];
  if (!caution.empty()) std::printf("caution: %s\n", caution.c_str());
  std::printf("\n");
}

// Per routed layer, the Shannon entropy of its usage against the maximum, log2(units).
void PrintUsage(const nlohmann::json& r) {
  if (r["usage"].empty()) return;
  std::printf("\nleaf/expert usage entropy (bits of max):");
  for (const auto& u : r["usage"]) {
    std::printf(" layer %zu %.2f/%.2f", u["layer"].get<size_t>(), u["entropy_bits"].get<double>(),
                u["max_entropy_bits"].get<double>());
  }
  std::printf("\n");
}

// The measured machine: read bandwidth per working set and the multiply-add rate, single thread
// on the sessions' kernel path.
void PrintMachine(const nlohmann::json& r) {
  const auto& m = r["machine"];
  std::printf("machine (kernels %s, one thread): read bandwidth",
              m["kernel_path"].get<std::string>().c_str());
  for (const auto& b : m["bandwidth"]) {
    std::printf(" %s %.1f GB/s%s", HumanBytes(b["working_set_bytes"].get<uint64_t>()).c_str(),
                b["bytes_per_second"].get<double>() / 1e9, &b == &m["bandwidth"].back() ? "" : ",");
  }
  std::printf("; multiply-adds %.1f G/s", m["multiply_adds_per_second"].get<double>() / 1e9);
  for (const auto& t : m["thread_scaling"]) {
    std::printf("; %zu threads at once %.2fx one thread", t["threads"].get<size_t>(),
                t["times_one_thread"].get<double>());
  }
  std::printf("\n");
}

// For each point run on several thread counts: the model's rate on T threads ÷ its rate on one;
// beside it, what T one-thread sessions of the model get at once (their summed rate ÷ one alone)
// and what T threads of the multiply-add loop get (PrintMachine): the ceilings of that ratio on
// this machine, with the model's own work and with arithmetic alone.
void PrintThreadScaling(const nlohmann::json& r) {
  std::map<std::string, double> one_thread;
  auto key = [](const nlohmann::json& p) {
    return p["phase"] == "rows" ? "batch " + std::to_string(p["batch"].get<size_t>())
                                : p["phase"].get<std::string>();
  };
  for (const auto& p : r["results"]) {
    if (p["threads"] == 1) one_thread[key(p)] = p["model"]["per_second"]["median"].get<double>();
  }
  std::map<size_t, double> machine;
  for (const auto& t : r["machine"]["thread_scaling"]) {
    machine[t["threads"].get<size_t>()] = t["times_one_thread"].get<double>();
  }
  bool header = false;
  for (const auto& p : r["results"]) {
    const size_t threads = p["threads"].get<size_t>();
    if (threads == 1) continue;
    if (!header) {
      std::printf("\n%-7s %-14s %20s %24s %24s\n", "threads", "point", "model / one thread",
                  "copies at once / one", "multiply-adds / one");
      header = true;
    }
    auto figure = [](double v) {
      char text[32] = "-";
      if (v > 0) std::snprintf(text, sizeof text, "%.2f", v);
      return std::string(text);
    };
    const auto base = one_thread.find(key(p));
    const double ratio = base == one_thread.end() || base->second <= 0
                             ? 0
                             : p["model"]["per_second"]["median"].get<double>() / base->second;
    const auto m = machine.find(threads);
    std::printf(
        "%-7zu %-14s %20s %24s %24s\n", threads, key(p).c_str(), figure(ratio).c_str(),
        figure(p["copies_scaling"].is_null() ? 0 : p["copies_scaling"].get<double>()).c_str(),
        figure(m == machine.end() ? 0 : m->second).c_str());
  }
}

// One row per point for the whole model and per routed layer: measured time per row or token
// against the machine floor (not the "floor" side, a model of width-1 routed layers).
void PrintMachineFloors(const nlohmann::json& r) {
  std::printf("\n%-7s %-14s %-9s %14s %14s %24s %s\n", "threads", "point", "part",
              r["family"] == "stack" ? "us/row" : "us/token", "floor us", "time / machine floor",
              "limited by");
  auto row = [](const nlohmann::json& p, const std::string& point, const std::string& part,
                const nlohmann::json& f) {
    std::printf("%-7zu %-14s %-9s %14.3f %14.3f %24s %s\n", p["threads"].get<size_t>(),
                point.c_str(), part.c_str(), f["seconds"]["median"].get<double>() * 1e6,
                f["floor_seconds"].get<double>() * 1e6,
                Spread(f["time_over_floor"], "%.2f").c_str(),
                f["limited_by"].get<std::string>().c_str());
  };
  for (const auto& p : r["results"]) {
    const std::string point = p["phase"] == "rows"
                                  ? "batch " + std::to_string(p["batch"].get<size_t>())
                                  : p["phase"].get<std::string>();
    row(p, point, "model", p["machine_floor"]["model"]);
    for (const auto& l : p["machine_floor"]["layers"]) {
      row(p, point, "layer " + std::to_string(l["layer"].get<size_t>()), l);
    }
  }
}

void PrintText(const nlohmann::json& r) {
  const bool stack = r["family"] == "stack";
  std::printf("%s against %s\n", r["sides"]["model"]["label"].get<std::string>().c_str(),
              r["sides"]["baseline"]["label"].get<std::string>().c_str());
  std::printf(
      "kernels %s, compute %s (the model; baseline and floor f32), %zu repetitions "
      "interleaved; median [min-max] over repetitions\n",
      r["kernels"].get<std::string>().c_str(), r["compute"].get<std::string>().c_str(),
      r["settings"]["repeat"].get<size_t>());
  PrintMachine(r);
  PrintInput(r);
  std::printf("%-7s %-14s %24s %24s %20s %20s %20s %7s %s\n", "threads", "point",
              stack ? "model rows/s" : "model tokens/s",
              stack ? "baseline rows/s" : "baseline tokens/s", "speedup", "in CPU time",
              "bound (measured)", "(FLOPs)", "model latency ms p50/p95/p99");
  for (const auto& p : r["results"]) {
    const std::string point = p["phase"] == "rows"
                                  ? "batch " + std::to_string(p["batch"].get<size_t>())
                                  : p["phase"].get<std::string>();
    const auto& l = p["model"]["latency_ms"];
    char flops_bound[32] = "none";
    if (!p["flops_bound"].is_null()) {
      std::snprintf(flops_bound, sizeof flops_bound, "%.2f", p["flops_bound"].get<double>());
    }
    std::printf(
        "%-7zu %-14s %24s %24s %20s %20s %20s %7s %.3f/%.3f/%.3f\n", p["threads"].get<size_t>(),
        point.c_str(), Spread(p["model"]["per_second"], "%.1f").c_str(),
        Spread(p["baseline"]["per_second"], "%.1f").c_str(), Spread(p["speedup"], "%.2f").c_str(),
        Spread(p["cpu_speedup"], "%.2f").c_str(), Spread(p["bound"], "%.2f").c_str(), flops_bound,
        l["median"].get<double>(), l["p95"].get<double>(), l["p99"].get<double>());
  }
  PrintThreadScaling(r);
  PrintMachineFloors(r);
  std::printf("\n%-9s %12s %12s %14s %14s %12s %s\n", "side", "file", "params", "FLOPs/token",
              "resident", "first call", "records touched");
  for (const char* side : {"model", "baseline", "floor"}) {
    const auto& s = r["sides"][side];
    const auto& m = s["memory"];
    std::string touched;
    for (const auto& t : m["touched"]) {
      touched += (touched.empty() ? "" : ", ") + std::to_string(t["touched"].get<uint64_t>()) +
                 "/" + std::to_string(t["records"].get<uint64_t>());
    }
    std::string flops;
    for (const auto& f : s["flops"]) {
      flops += (flops.empty() ? "" : " / ") + HumanCount(f["total"].get<uint64_t>());
    }
    std::printf("%-9s %12s %12s %14s %14s %9.3f ms %s\n", side,
                HumanBytes(s["file_bytes"].get<uint64_t>()).c_str(),
                HumanCount(s["params"].get<uint64_t>()).c_str(), flops.c_str(),
                HumanBytes(m["mapped_resident_bytes"].get<uint64_t>()).c_str(),
                m["first_call_ms"].get<double>(), touched.empty() ? "-" : touched.c_str());
  }
  PrintUsage(r);
  const auto& end = r["process_memory"]["end"];
  const auto& load = r["machine"]["load_average_start"];
  // Windows keeps no load average: the report says so rather than print a zero.
  char load_text[32] = "unknown";
  if (!load.empty()) std::snprintf(load_text, sizeof load_text, "%.2f", load[0].get<double>());
  std::printf("\nprocess: resident %s, peak %s (all three models); load average %s at start\n",
              HumanBytes(end["rss_bytes"].get<uint64_t>()).c_str(),
              HumanBytes(end["peak_rss_bytes"].get<uint64_t>()).c_str(), load_text);
}

int RunBench(const BenchArgs& a) {
  bench::ReportContext context;
  auto m = Run(a, &context);
  if (!m.ok()) return Fail("bench", m.status());
  const nlohmann::json report = bench::ToJson(*m, context);
  if (!a.report.empty()) {
    Status s = WriteText(a.report, bench::ToHtml(report));
    if (!s.ok()) return Fail("bench", s);
  }
  if (a.json == "-") {
    std::printf("%s\n", report.dump(2, ' ', false, kReplaceInvalidUtf8).c_str());
  } else if (!a.json.empty()) {
    Status s = WriteText(a.json, report.dump(2, ' ', false, kReplaceInvalidUtf8) + "\n");
    if (!s.ok()) return Fail("bench", s);
  } else {
    PrintText(report);
    if (!a.report.empty()) std::printf("report: %s\n", a.report.c_str());
  }
  return kExitOk;
}

}  // namespace

Verb AddBench(CLI::App& app) {
  auto a = std::make_shared<BenchArgs>();
  CLI::App* c = app.add_subcommand(
      "bench",
      "Measure a model's speed and memory against a dense baseline, interleaved in one run.");
  c->add_option("MODEL", a->model, "the .sprig file")->required();
  auto* baseline = c->add_option("--baseline", a->baseline, "another .sprig file to compare with");
  auto* twin =
      c->add_flag("--dense-twin", a->dense_twin,
                  "compare with the model's dense twin, built from its config for this run (the "
                  "default)");
  baseline->excludes(twin);
  c->add_option("--input", a->input,
                "measure on this file instead of random inputs: stack, float rows [N, in] (.npy); "
                "transformer, int32/int64 tokens [T] or [B, T] (.npy) or UTF-8 text, cut into "
                "prompts that the model's greedy decoding continues");
  c->add_option("--rows", a->rows,
                "stack: rows per repetition at each batch size (default with --input: the "
                "file's rows)")
      ->capture_default_str()
      ->each([a](const std::string&) { a->rows_given = true; });
  c->add_option("--batch", a->batches, "stack: rows per call, a list (default 1,16,128)")
      ->delimiter(',')
      ->each([a](const std::string&) { a->batch_given = true; });
  c->add_option("--prompt-tokens", a->prompt_tokens, "transformer: prompt tokens (prefill)")
      ->capture_default_str()
      ->each([a](const std::string&) { a->tokens_given = true; });
  c->add_option("--decode-tokens", a->decode_tokens,
                "transformer: tokens decoded one at a time after the prompt")
      ->capture_default_str()
      ->each([a](const std::string&) { a->tokens_given = true; });
  AddComputeOption(c, a->compute);
  c->add_option("--threads", a->threads, "threads per session, a list such as 1,2")
      ->delimiter(',')
      ->capture_default_str();
  c->add_option("--repeat", a->repeat, "measured repetitions (after one warm-up)")
      ->capture_default_str();
  c->add_flag("--cold", a->cold,
              "drop the files from the page cache first, so the first call reads from storage");
  c->add_option("--seed", a->seed, "seed of the random inputs (without --input)")
      ->capture_default_str();
  c->add_option("--json", a->json,
                "write the results as JSON to this file ('-': stdout) instead of the table; "
                "no progress bar");
  c->add_option("--report", a->report, "also write a self-contained HTML report to this file");
  c->footer(
      "Figures depend on the machine and on what else runs on it; the interleaving spreads "
      "drift over both sides, and the load average is recorded.");
  return {c, [a] { return RunBench(*a); }};
}

}  // namespace sprig::cli
