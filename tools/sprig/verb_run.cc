// sprig run MODEL --input IN.npy|TEXTFILE --output OUT.npy [--routes R.npz] [--batch N]
//           [--threads N] [--compute f32|i8] [--stats] [--cold]
// sprig run MODEL --text TEXT --output OUT.npy ...
// sprig routes MODEL --input IN.npy|TEXT [--json]
//
// Stack models take float rows [N, in]; transformer models take int32/int64 tokens [T] or
// [B, T] (each of the B sequences runs independently from position 0). `routes` also takes UTF-8
// text for a transformer with a tokenizer, cut into sequences of max_seq tokens.
#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <memory>
#include <nlohmann/json.hpp>
#include <optional>

#include "base/status_macros.h"
#include "bench/kit/stats.h"
#include "cli.h"
#include "input_file.h"
#include "io/tensor_archive.h"
#include "sprig/memory.h"
#include "sprig/session.h"

namespace sprig::cli {
namespace {

struct RunArgs {
  std::string model, input, output, routes;
  std::string text_arg;  // run: --text, the input given on the command line
  size_t batch = 64;
  size_t threads = 1;
  std::string compute = "f32";  // --compute
  bool json = false;
  bool stats = false;  // run: print memory and records touched to stderr afterwards
  bool cold = false;   // run: drop the model file from the page cache first
  bool text = false;   // routes: --input may be text
};

// The --input array: one array, of floats (rows, for a stack) or integers (tokens, for a
// transformer). Whether it fits the model is the runtime's input rules' to say.
Result<io::TensorArchive> ReadInput(const std::string& path) {
  SPRIG_ASSIGN_OR_RETURN(io::TensorArchive archive, io::TensorArchive::Open(path));
  if (archive.arrays().size() != 1) {
    return Status::InvalidArgument(path + " holds " + std::to_string(archive.arrays().size()) +
                                   " arrays; --input takes one array of rows or tokens");
  }
  return archive;
}

bool IsRows(const io::NdArray& a) {
  return a.type == io::ElementType::kF32 || a.type == io::ElementType::kF64;
}
bool IsTokens(const io::NdArray& a) {
  return a.type == io::ElementType::kI32 || a.type == io::ElementType::kI64;
}

struct RunResult {
  std::shared_ptr<const Model> model;
  SessionStats stats;
  double open_seconds = 0;        // Model::open
  double first_call_seconds = 0;  // the first forward call, cold or warm
  std::vector<float> output;
  std::vector<uint64_t> shape;  // of output
  Routes routes;                // concatenated over batches
  size_t rows = 0;              // rows of routes: input rows, or tokens of a transformer
  std::string summary;          // what ran, for the closing message
};

void AppendRoutes(Routes& all, Routes&& part) {
  if (all.layers.empty()) {
    all = std::move(part);
    return;
  }
  for (size_t l = 0; l < part.layers.size(); ++l) {
    auto& dst = all.layers[l].choices;
    const auto& src = part.layers[l].choices;
    dst.insert(dst.end(), src.begin(), src.end());
  }
}

// The output shape for `input` under the model's input rules; a broken rule's message names the
// input file.
Result<std::vector<uint64_t>> OutputShape(const RunArgs& a, const Model& model, InputKind kind,
                                          const io::NdArray& input) {
  auto shape = model.output_shape(kind, input.shape);
  if (!shape.ok()) return shape.status().WithContext(a.input);
  return shape;
}

// Tokens: --batch sequences per forward_tokens call.
Result<RunResult> RunTokens(const RunArgs& a, std::shared_ptr<const Model> model,
                            const io::NdArray& input, bool want_routes) {
  RunResult r;
  SPRIG_ASSIGN_OR_RETURN(r.shape, OutputShape(a, *model, InputKind::kTokens, input));
  const size_t batch = r.shape[0];
  const size_t length = input.shape.back();
  const std::vector<int64_t> wide = TokenValues(input);
  SPRIG_RETURN_IF_ERROR(model->check_tokens(wide.data(), batch, length).WithContext(a.input));
  const std::vector<int32_t> tokens(wide.begin(), wide.end());  // in range, so exact
  SessionOptions options;
  options.threads = a.threads;
  options.compute = a.compute;
  SPRIG_ASSIGN_OR_RETURN(auto session, Session::create(model, options));
  r.rows = batch * length;
  uint64_t per_sequence = 1;
  for (size_t i = 1; i < r.shape.size(); ++i) per_sequence *= r.shape[i];
  r.output.resize(batch * per_sequence);
  r.model = model;
  Progress progress("running " + a.model);
  for (size_t b0 = 0; b0 < batch; b0 += a.batch) {
    const size_t n = std::min(a.batch, batch - b0);
    Routes part;
    SPRIG_RETURN_IF_ERROR(session->forward_tokens(tokens.data() + b0 * length, n, length,
                                                  r.output.data() + b0 * per_sequence,
                                                  want_routes ? &part : nullptr));
    if (want_routes) AppendRoutes(r.routes, std::move(part));
    if (b0 == 0) r.first_call_seconds = session->stats().forward_seconds;
    progress.Update(b0 + n, batch);
  }
  progress.Finish();
  r.stats = session->stats();
  r.summary = std::to_string(batch) + " sequences of " + std::to_string(length) + " tokens";
  return r;
}

// Rows: --batch rows per forward call.
Result<RunResult> RunRows(const RunArgs& a, std::shared_ptr<const Model> model,
                          const io::NdArray& input, bool want_routes) {
  RunResult r;
  SPRIG_ASSIGN_OR_RETURN(r.shape, OutputShape(a, *model, InputKind::kRows, input));
  r.rows = r.shape[0];
  const size_t in = model->config().input_dim, out = r.shape[1];
  const std::vector<float> x = RowValues(input);
  // The whole input is checked before the first call, so that a message's row is the file's.
  SPRIG_RETURN_IF_ERROR(model->check_rows(x.data(), r.rows).WithContext(a.input));
  SessionOptions options;
  options.threads = a.threads;
  options.compute = a.compute;
  SPRIG_ASSIGN_OR_RETURN(auto session, Session::create(model, options));
  r.output.resize(r.rows * out);
  r.model = model;
  Progress progress("running " + a.model);
  for (size_t r0 = 0; r0 < r.rows; r0 += a.batch) {
    const size_t n = std::min(a.batch, r.rows - r0);
    Routes batch_routes;
    SPRIG_RETURN_IF_ERROR(session->forward(x.data() + r0 * in, n, r.output.data() + r0 * out,
                                           want_routes ? &batch_routes : nullptr));
    if (want_routes) AppendRoutes(r.routes, std::move(batch_routes));
    if (r0 == 0) r.first_call_seconds = session->stats().forward_seconds;
    progress.Update((r0 + n) * in * 4, r.rows * in * 4);
  }
  progress.Finish();
  r.stats = session->stats();
  r.summary = std::to_string(r.rows) + " rows";
  return r;
}

// Text: the tokens of `bytes` in sequences of max_seq tokens (the last may be shorter), --batch
// sequences per call. Only routes are kept: the pieces' outputs would not form one array.
Result<RunResult> RunText(const RunArgs& a, std::shared_ptr<const Model> model,
                          const std::string& bytes) {
  SPRIG_ASSIGN_OR_RETURN(std::vector<int32_t> tokens, TokenizeText(a.input, bytes, *model));
  const ModelConfig& c = model->config();
  SessionOptions options;
  options.threads = a.threads;
  options.compute = a.compute;
  SPRIG_ASSIGN_OR_RETURN(auto session, Session::create(model, options));
  RunResult r;
  r.model = model;
  r.rows = tokens.size();
  const size_t length = c.max_seq, full = tokens.size() / length;
  Progress progress("running " + a.model);
  // Whole pieces in batches, then the remainder as one shorter sequence.
  for (size_t s0 = 0; s0 < full || (s0 == full && tokens.size() % length != 0);) {
    const size_t n = s0 < full ? std::min(a.batch, full - s0) : 1;
    const size_t piece = s0 < full ? length : tokens.size() % length;
    std::vector<uint64_t> shape = {n, piece};
    SPRIG_ASSIGN_OR_RETURN(std::vector<uint64_t> out_shape,
                           model->output_shape(InputKind::kTokens, shape));
    uint64_t size = 1;
    for (uint64_t d : out_shape) size *= d;
    std::vector<float> out(size);
    Routes part;
    SPRIG_RETURN_IF_ERROR(
        session->forward_tokens(tokens.data() + s0 * length, n, piece, out.data(), &part));
    AppendRoutes(r.routes, std::move(part));
    s0 += n;
    progress.Update(std::min(s0 * length, tokens.size()), tokens.size());
  }
  progress.Finish();
  r.stats = session->stats();
  r.summary = std::to_string(tokens.size()) + " tokens of text";
  return r;
}

// run's text forms: --text TEXT, or --input naming a UTF-8 text file. The text's tokens are one
// sequence [1, T]; nullopt when the input is an array file instead.
Result<std::optional<RunResult>> RunTextSequence(const RunArgs& a,
                                                 std::shared_ptr<const Model> model,
                                                 bool want_routes) {
  std::string text = a.text_arg, source = "--text";
  if (!a.input.empty()) {
    SPRIG_ASSIGN_OR_RETURN(text, io::ReadFileBytes(a.input));
    if (!IsText(text)) return std::optional<RunResult>();
    source = a.input;
  }
  SPRIG_ASSIGN_OR_RETURN(std::vector<int32_t> tokens, TokenizeText(source, text, *model));
  const size_t max_seq = model->config().max_seq;
  if (tokens.size() > max_seq) {
    return Status::InvalidArgument(source + " is " + std::to_string(tokens.size()) +
                                   " tokens, more than the model's context of " +
                                   std::to_string(max_seq) +
                                   " (max_seq); shorten it, or see its routing with sprig routes, "
                                   "which cuts text into pieces");
  }
  const io::NdArray array =
      io::NdArray::Borrowed("tokens", io::ElementType::kI32, {1, tokens.size()}, tokens.data());
  RunArgs named = a;
  named.input = source;
  SPRIG_ASSIGN_OR_RETURN(RunResult r, RunTokens(named, model, array, want_routes));
  r.summary = "1 sequence of " + std::to_string(tokens.size()) + " tokens of text";
  return std::optional<RunResult>(std::move(r));
}

// Float arrays go to the rows call and integer arrays to the tokens call; the runtime says
// when the model takes the other.
Result<RunResult> RunModel(const RunArgs& a, bool want_routes) {
  const auto start = std::chrono::steady_clock::now();
  SPRIG_ASSIGN_OR_RETURN(auto model, Model::open(a.model));
  const double open_seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  if (a.batch == 0) return Status::InvalidArgument("--batch must be at least 1");
  if (!a.text) {
    // run: text from --text or a text file is one sequence, encoded with the model's tokenizer.
    SPRIG_ASSIGN_OR_RETURN(std::optional<RunResult> r, RunTextSequence(a, model, want_routes));
    if (r) {
      r->open_seconds = open_seconds;
      return std::move(*r);
    }
  }
  if (a.text) {
    // Text has none of the tensor files' leading bytes; anything else is read as an array.
    SPRIG_ASSIGN_OR_RETURN(const std::string bytes, io::ReadFileBytes(a.input));
    if (IsText(bytes)) {
      SPRIG_ASSIGN_OR_RETURN(RunResult r, RunText(a, model, bytes));
      r.open_seconds = open_seconds;
      return r;
    }
  }
  SPRIG_ASSIGN_OR_RETURN(io::TensorArchive archive, ReadInput(a.input));
  const io::NdArray& input = archive.arrays()[0];
  if (!IsRows(input) && !IsTokens(input)) {
    const bool stack = model->config().family == Family::kStack;
    return Status::InvalidArgument(a.input + " holds " + io::ElementTypeName(input.type) +
                                   (stack ? " values; this model takes float32 or float64 rows"
                                          : " values; this transformer model takes int32 or "
                                            "int64 tokens"));
  }
  SPRIG_ASSIGN_OR_RETURN(RunResult r, IsRows(input) ? RunRows(a, model, input, want_routes)
                                                    : RunTokens(a, model, input, want_routes));
  r.open_seconds = open_seconds;
  return r;
}

std::string Mib(uint64_t bytes) {
  char buf[32];
  std::snprintf(buf, sizeof(buf), "%.1f MiB", static_cast<double>(bytes) / (1024.0 * 1024.0));
  return buf;
}

// --stats: what the run read and what it cost in memory, on stderr.
void PrintRunStats(const RunResult& r, const ProcessMemory& before, const ProcessMemory& after) {
  std::fprintf(stderr, "open %.3f ms, first call %.3f ms, all calls %.3f ms\n",
               r.open_seconds * 1e3, r.first_call_seconds * 1e3, r.stats.forward_seconds * 1e3);
  for (const LayerTouch& t : r.stats.touched) {
    std::fprintf(stderr, "layer %zu: %llu of %llu records touched (%.1f%%), %s of %s\n", t.layer,
                 static_cast<unsigned long long>(t.touched),
                 static_cast<unsigned long long>(t.records),
                 t.records ? 100.0 * static_cast<double>(t.touched) / t.records : 0.0,
                 Mib(t.touched * t.record_size).c_str(), Mib(t.records * t.record_size).c_str());
  }
  // Page-cache residency: pages of the file in memory now, whoever read them.
  const Residency res = r.model->residency();
  for (const SectionResidency& s : res.sections) {
    std::fprintf(stderr, "section %-12s %s of %s resident\n", s.name.c_str(),
                 Mib(s.resident_bytes).c_str(), Mib(s.size).c_str());
  }
  std::fprintf(stderr, "resident: hot %s of %s, records %s of %s%s\n",
               Mib(res.hot_resident).c_str(), Mib(res.hot_size).c_str(),
               Mib(res.records_resident).c_str(), Mib(res.records_size).c_str(),
               r.model->hot_locked() ? " (hot locked)" : "");
  std::fprintf(stderr, "process rss %s (file %s, anonymous %s), peak %s\n", Mib(after.rss).c_str(),
               Mib(after.rss_file).c_str(), Mib(after.rss_anon).c_str(),
               Mib(after.peak_rss).c_str());
  std::fprintf(stderr, "page faults during open and run: %llu major, %llu minor\n",
               static_cast<unsigned long long>(after.major_faults - before.major_faults),
               static_cast<unsigned long long>(after.minor_faults - before.minor_faults));
}

int RunRun(const RunArgs& a) {
  if (a.cold) {
    Status s = EvictFromPageCache(a.model);
    if (!s.ok()) return Fail("run", s);
  }
  const ProcessMemory before = ReadProcessMemory();
  auto r = RunModel(a, !a.routes.empty());
  if (!r.ok()) return Fail("run", r.status());
  const ProcessMemory after = ReadProcessMemory();
  std::vector<uint8_t> bytes(r->output.size() * 4);
  std::memcpy(bytes.data(), r->output.data(), bytes.size());
  Status s = io::WriteNpy(
      a.output, io::NdArray::Owned("output", io::ElementType::kF32, r->shape, std::move(bytes)),
      /*overwrite=*/true);
  if (!s.ok()) return Fail("run", s);
  if (!a.routes.empty()) {
    std::vector<io::NdArray> arrays;
    for (const LayerRoutes& lr : r->routes.layers) {
      std::vector<uint8_t> rb(lr.choices.size() * 4);
      std::memcpy(rb.data(), lr.choices.data(), rb.size());
      std::vector<uint64_t> shape = {r->rows};
      if (lr.width > 1) shape.push_back(lr.width);
      arrays.push_back(io::NdArray::Owned("layer" + std::to_string(lr.layer), io::ElementType::kI32,
                                          shape, std::move(rb)));
    }
    s = io::WriteNpz(a.routes, arrays, false, /*overwrite=*/true);
    if (!s.ok()) return Fail("run", s);
  }
  std::fprintf(stderr, "ran %s -> %s %s%s\n", r->summary.c_str(), a.output.c_str(),
               ShapeText(r->shape).c_str(),
               a.routes.empty() ? "" : (", routes -> " + a.routes).c_str());
  if (a.stats) PrintRunStats(*r, before, after);
  return kExitOk;
}

// ---- routes: usage statistics ----

struct Usage {
  size_t layer = 0;
  std::vector<uint64_t> counts;
  uint64_t total = 0;
  double entropy_bits = 0, max_entropy_bits = 0, top1pct_share = 0, imbalance = 0;
  uint64_t dead = 0;
};

Usage Summarise(const LayerRoutes& lr, uint64_t units) {
  Usage u;
  u.layer = lr.layer;
  u.counts.assign(units, 0);
  for (int32_t c : lr.choices) {
    if (c >= 0 && static_cast<uint64_t>(c) < units) ++u.counts[c];
  }
  u.total = lr.choices.size();
  u.max_entropy_bits = std::log2(static_cast<double>(units));
  uint64_t max_count = 0;
  for (uint64_t c : u.counts) {
    if (c == 0) ++u.dead;
    max_count = std::max(max_count, c);
  }
  u.entropy_bits = bench::EntropyBits(u.counts);
  std::vector<uint64_t> sorted = u.counts;
  std::sort(sorted.rbegin(), sorted.rend());
  const size_t top = std::max<size_t>(1, (units + 99) / 100);
  uint64_t top_sum = 0;
  for (size_t i = 0; i < top && i < sorted.size(); ++i) top_sum += sorted[i];
  u.top1pct_share = u.total ? static_cast<double>(top_sum) / static_cast<double>(u.total) : 0;
  const double mean = static_cast<double>(u.total) / static_cast<double>(units);
  u.imbalance = mean > 0 ? static_cast<double>(max_count) / mean : 0;
  return u;
}

void PrintHistogram(const Usage& u) {
  const size_t bins = std::min<size_t>(32, u.counts.size());
  const size_t per_bin = (u.counts.size() + bins - 1) / bins;
  std::vector<uint64_t> b(bins, 0);
  for (size_t i = 0; i < u.counts.size(); ++i) b[i / per_bin] += u.counts[i];
  const uint64_t peak = *std::max_element(b.begin(), b.end());
  for (size_t i = 0; i < bins; ++i) {
    const size_t first = i * per_bin, last = std::min(u.counts.size(), first + per_bin) - 1;
    const int bar = peak ? static_cast<int>(40.0 * static_cast<double>(b[i]) / peak + 0.5) : 0;
    char label[48];
    if (first == last) {
      std::snprintf(label, sizeof(label), "%zu", first);
    } else {
      std::snprintf(label, sizeof(label), "%zu-%zu", first, last);
    }
    std::printf("    %-11s %8llu %s\n", label, static_cast<unsigned long long>(b[i]),
                std::string(bar, '#').c_str());
  }
}

int RunRoutes(const RunArgs& a) {
  auto r = RunModel(a, true);
  if (!r.ok()) return Fail("routes", r.status());
  const std::vector<LayerDescription> layers = r->model->layer_descriptions();
  std::vector<Usage> usage;
  for (const LayerRoutes& lr : r->routes.layers) {
    usage.push_back(Summarise(lr, layers[lr.layer].units));
  }
  if (a.json) {
    nlohmann::json j;
    j["rows"] = r->rows;
    j["layers"] = nlohmann::json::array();
    for (const Usage& u : usage) {
      j["layers"].push_back({{"layer", u.layer},
                             {"units", u.counts.size()},
                             {"choices", u.total},
                             {"counts", u.counts},
                             {"entropy_bits", u.entropy_bits},
                             {"max_entropy_bits", u.max_entropy_bits},
                             {"top_1pct_share", u.top1pct_share},
                             {"dead", u.dead},
                             {"imbalance", u.imbalance}});
    }
    std::printf("%s\n", j.dump(2, ' ', false, kReplaceInvalidUtf8).c_str());
    return kExitOk;
  }
  std::printf("%s: routes of %zu rows\n", a.model.c_str(), r->rows);
  if (usage.empty()) std::printf("  the model has no routed layers\n");
  for (const Usage& u : usage) {
    const LayerConfig& lc = r->model->config().layers[u.layer];
    std::printf("\nlayer %zu (%s, %zu %s)\n", u.layer, ToString(lc.kind), u.counts.size(),
                lc.kind == LayerKind::kExperts ? "experts" : "leaves");
    std::printf("  entropy      %.2f bits of %.2f possible (%.0f%%)\n", u.entropy_bits,
                u.max_entropy_bits,
                u.max_entropy_bits > 0 ? 100.0 * u.entropy_bits / u.max_entropy_bits : 100.0);
    std::printf("  busiest 1%%   take %.1f%% of choices\n", 100.0 * u.top1pct_share);
    std::printf("  dead         %llu never reached\n", static_cast<unsigned long long>(u.dead));
    std::printf("  imbalance    %.2f (busiest / mean)\n", u.imbalance);
    PrintHistogram(u);
  }
  return kExitOk;
}

void AddCommonOptions(CLI::App* c, RunArgs& a) {
  c->add_option("MODEL", a.model, "the .sprig file")->required();
  c->add_option("--input", a.input,
                "stack: float32/float64 rows [N, input_dim]; transformer: int32/int64 tokens "
                "[T] or [B, T] (.npy)")
      ->required();
  c->add_option("--batch", a.batch, "rows (stack) or sequences (transformer) per forward call")
      ->capture_default_str();
  c->add_option("--threads", a.threads, "threads per call (0: one per CPU)")->capture_default_str();
  AddComputeOption(c, a.compute);
}

}  // namespace

Verb AddRun(CLI::App& app) {
  auto args = std::make_shared<RunArgs>();
  CLI::App* c = app.add_subcommand(
      "run", "Run a model on rows or tokens from a .npy file, or on text (transformers).");
  AddCommonOptions(c, *args);
  CLI::Option* input = c->get_option("--input");
  input->required(false);
  input->description(
      "stack: float32/float64 rows [N, input_dim] (.npy); transformer: int32/int64 tokens [T] or "
      "[B, T] (.npy), or a UTF-8 text file encoded with the model's tokenizer as one sequence");
  CLI::Option* text = c->add_option(
      "--text", args->text_arg,
      "transformer with a tokenizer: this text, encoded with the model's tokenizer, as one "
      "sequence (at most max_seq tokens)");
  input->excludes(text);
  text->excludes(input);
  c->callback([input, text] {
    if (input->count() == 0 && text->count() == 0) {
      throw CLI::RequiredError("--input or --text");
    }
  });
  c->add_option("--output", args->output,
                "where to write float32 outputs (.npy): [N, out] for a stack; logits [B, T, V], "
                "classes [B, C] or hidden states [B, T, D] for a transformer")
      ->required();
  c->add_option("--routes", args->routes,
                "also write each routed layer's choices to this .npz (layer{i}: int32)");
  c->add_flag("--stats", args->stats,
              "afterwards print to stderr the records each routed layer touched, how much of "
              "the file is resident, process memory and page faults");
  c->add_flag("--cold", args->cold,
              "drop the model file from the page cache first (only pages no process maps)");
  c->footer("Outputs are whatever the model computes; a model's predictions can be wrong.");
  return {c, [args] { return RunRun(*args); }};
}

Verb AddRoutes(CLI::App& app) {
  auto args = std::make_shared<RunArgs>();
  args->text = true;
  CLI::App* c = app.add_subcommand(
      "routes", "Show how rows or tokens spread over each routed layer's leaves or experts.");
  AddCommonOptions(c, *args);
  c->get_option("--input")->description(
      "stack: float32/float64 rows [N, input_dim] (.npy); transformer: int32/int64 tokens [T] "
      "or [B, T] (.npy), or UTF-8 text tokenized with the model's tokenizer and cut into "
      "sequences of max_seq tokens");
  c->add_flag("--json", args->json, "print JSON");
  return {c, [args] { return RunRoutes(*args); }};
}

}  // namespace sprig::cli
