// Routed layers against dense ones, one thread, in = out = 768: the figures behind the
// "how much faster is the tree really" question.
//
//   path tree depth 11 (4,095 neurons, 12 used per row)  vs dense width 3,072 and 4,095
//   leaf tree depth 8, leaf width 16                     vs dense width 4,096
//   experts E = 8, k = 2, width 512                      vs dense width 4,096
//
// at batch 1, 16 and 128. Every call takes distinct input rows from a pool of 4,096 (one hot row
// repeated would flatter a tree, whose path would stay in cache). The dense baselines are our
// own dense layer and, when the build found it, OpenBLAS sgemv/sgemm with our activation
// kernel in between. After the Google Benchmark table, a summary prints microseconds per row
// and the speedups measured in this run.
//
// Then storage types: the path tree and the leaf tree packed as f32, f16, bf16 and i8, run one
// row per call, interleaved round by round (so that load from other processes hits every type
// alike), reported as the median time per row and the median of the per-round speedups over
// f32. Twice: with each call's input row cold (read from the 12 MB pool by the call itself), and
// warm (the next call's row is prefetched during the current call, as a preceding layer would
// leave its output in cache; the prefetch instructions are inside the timed loop).
// `--storage_only` runs just that comparison.
//
//   OPENBLAS_NUM_THREADS=1 build/bin/sprig_bench_layers [--benchmark_min_time=0.5]
//   build/bin/sprig_bench_layers --storage_only
#include <benchmark/benchmark.h>

#include <algorithm>
#include <cstdio>
#include <cstring>
#include <map>
#include <memory>
#include <string>
#include <vector>

#include "bench/kit/models.h"
#include "converter/config/config_json.h"
#include "converter/synth/synth.h"
#include "kernels/kernels.h"
#include "platform/process.h"
#include "sprig/session.h"

#ifdef SPRIG_HAVE_BLAS
#include <cblas.h>
#endif

namespace sprig::bench {
namespace {

constexpr size_t kDim = 768;
constexpr size_t kPoolRows = 4096;

struct Case {
  std::string name;
  std::string layer;  // JSON layer entry
};

const std::vector<Case>& Cases() {
  static const std::vector<Case> cases = {
      {"path_d11", R"({"kind":"tree","mode":"path","depth":11,"activation":"gelu","out":768})"},
      {"leaf_d8_w16",
       R"({"kind":"tree","mode":"leaf","depth":8,"leaf_width":16,"activation":"gelu","out":768})"},
      {"experts_8x512_k2",
       R"({"kind":"experts","experts":8,"top_k":2,"width":512,"activation":"gelu","out":768})"},
      {"dense_3072", R"({"kind":"dense","width":3072,"activation":"gelu","out":768})"},
      {"dense_4095", R"({"kind":"dense","width":4095,"activation":"gelu","out":768})"},
      {"dense_4096", R"({"kind":"dense","width":4096,"activation":"gelu","out":768})"},
  };
  return cases;
}

std::vector<float> InputPool() {
  convert::Random rng(42);
  std::vector<float> v(kPoolRows * kDim);
  for (float& x : v) x = rng.Normal();
  return v;
}

const std::vector<float>& Pool() {
  static const std::vector<float> pool = InputPool();
  return pool;
}

// A synthesized single-layer model, packed into an unlinked temporary file once per case and
// storage type.
std::shared_ptr<const Model> ModelFor(const Case& c, DType dtype = DType::kF32) {
  static std::map<std::string, std::shared_ptr<const Model>> cache;
  const std::string key = c.name + "." + ToString(dtype);
  auto it = cache.find(key);
  if (it != cache.end()) return it->second;
  const std::string text = R"({"family":"stack","input_dim":768,"layers":[)" + c.layer + "]}";
  auto config = convert::ParseConfig(text, c.name);
  BuildOptions options;
  options.dtype = dtype;
  auto model = config.ok() ? BuildUnlinkedModel(*config, options) : config.status();
  if (!model.ok()) {
    std::fprintf(stderr, "%s\n", model.status().message().c_str());
    std::abort();
  }
  cache[key] = *model;
  return *model;
}

void BM_Layer(benchmark::State& state, const Case& c) {
  const size_t batch = static_cast<size_t>(state.range(0));
  auto session = Session::create(ModelFor(c));
  std::vector<float> y(batch * kDim);
  const std::vector<float>& pool = Pool();
  size_t next = 0;
  for (auto _ : state) {
    if (next + batch > kPoolRows) next = 0;
    (void)(*session)->forward(pool.data() + next * kDim, batch, y.data());
    benchmark::DoNotOptimize(y.data());
    next += batch;
  }
  // Inverted rate of rows per second, scaled: microseconds per row.
  state.counters["us_per_row"] = benchmark::Counter(
      static_cast<double>(batch) / 1e6,
      benchmark::Counter::kIsIterationInvariantRate | benchmark::Counter::kInvert);
}

#ifdef SPRIG_HAVE_BLAS
// y = W2·gelu(W1·x + b1) + b2 through OpenBLAS, the best dense baseline a user could pick.
void BM_Blas(benchmark::State& state, size_t width) {
  const size_t batch = static_cast<size_t>(state.range(0));
  convert::Random rng(3);
  std::vector<float> w1(width * kDim), w2(kDim * width), b1(width, 0.01f), b2(kDim, 0.01f);
  for (float& v : w1) v = rng.Normal() / 28.0f;
  for (float& v : w2) v = rng.Normal() / 64.0f;
  std::vector<float> h(batch * width), y(batch * kDim);
  const kernels::KernelTable& k = kernels::ActiveKernels();
  const std::vector<float>& pool = Pool();
  size_t next = 0;
  for (auto _ : state) {
    if (next + batch > kPoolRows) next = 0;
    const float* x = pool.data() + next * kDim;
    for (size_t r = 0; r < batch; ++r) std::copy(b1.begin(), b1.end(), h.begin() + r * width);
    for (size_t r = 0; r < batch; ++r) std::copy(b2.begin(), b2.end(), y.begin() + r * kDim);
    if (batch == 1) {
      cblas_sgemv(CblasRowMajor, CblasNoTrans, width, kDim, 1.0f, w1.data(), kDim, x, 1, 1.0f,
                  h.data(), 1);
      k.activate(Activation::kGelu, h.data(), width);
      cblas_sgemv(CblasRowMajor, CblasNoTrans, kDim, width, 1.0f, w2.data(), width, h.data(), 1,
                  1.0f, y.data(), 1);
    } else {
      cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasTrans, batch, width, kDim, 1.0f, x, kDim,
                  w1.data(), kDim, 1.0f, h.data(), width);
      k.activate(Activation::kGelu, h.data(), batch * width);
      cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasTrans, batch, kDim, width, 1.0f, h.data(),
                  width, w2.data(), width, 1.0f, y.data(), kDim);
    }
    benchmark::DoNotOptimize(y.data());
    next += batch;
  }
  state.counters["us_per_row"] = benchmark::Counter(
      static_cast<double>(batch) / 1e6,
      benchmark::Counter::kIsIterationInvariantRate | benchmark::Counter::kInvert);
}
#endif

// Collects microseconds per row by benchmark name for the summary.
class SummaryReporter : public benchmark::ConsoleReporter {
 public:
  void ReportRuns(const std::vector<Run>& runs) override {
    for (const Run& r : runs) {
      auto it = r.counters.find("us_per_row");
      if (it != r.counters.end()) us_per_row[r.benchmark_name()] = it->second.value;
    }
    ConsoleReporter::ReportRuns(runs);
  }
  std::map<std::string, double> us_per_row;
};

void PrintSummary(const std::map<std::string, double>& us) {
  auto get = [&](const std::string& name, int batch) {
    auto it = us.find(name + "/" + std::to_string(batch));
    return it == us.end() ? 0.0 : it->second;
  };
  struct Pair {
    const char* routed;
    const char* dense;
    const char* blas;
  };
  const Pair pairs[] = {{"path_d11", "dense_3072", "blas_3072"},
                        {"path_d11", "dense_4095", "blas_4095"},
                        {"leaf_d8_w16", "dense_4096", "blas_4096"},
                        {"experts_8x512_k2", "dense_4096", "blas_4096"}};
  std::printf("\nsummary: microseconds per row (1 thread, in = out = %zu, kernels %s)\n", kDim,
              kernels::ToString(kernels::ActiveKernels().path));
  std::printf("%-18s %-11s %6s %10s %10s %10s %10s %10s\n", "routed", "dense", "batch", "routed_us",
              "dense_us", "blas_us", "x_dense", "x_blas");
  for (const Pair& p : pairs) {
    for (int batch : {1, 16, 128}) {
      const double r = get(std::string("layer/") + p.routed, batch);
      const double d = get(std::string("layer/") + p.dense, batch);
      const double b = get(p.blas, batch);
      std::printf("%-18s %-11s %6d %10.3f %10.3f %10.3f %9.1fx %9.1fx\n", p.routed, p.dense, batch,
                  r, d, b, r > 0 ? d / r : 0.0, r > 0 && b > 0 ? b / r : 0.0);
    }
  }
  std::printf("\nengine dense vs OpenBLAS (ratio of times; 1.0 = equal)\n");
  for (const char* w : {"3072", "4095", "4096"}) {
    for (int batch : {1, 16, 128}) {
      const double d = get(std::string("layer/dense_") + w, batch);
      const double b = get(std::string("blas_") + w, batch);
      std::printf("  dense %-5s batch %-4d %6.2f\n", w, batch, b > 0 ? d / b : 0.0);
    }
  }
}

double Median(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  return v.empty() ? 0.0 : v[v.size() / 2];
}

// This thread's CPU time in microseconds: unlike wall time it leaves out the time other
// processes hold the core, which on a shared machine is most of the noise.
double ThreadMicros() {
  return sprig::platform::ThreadCpuSeconds() * 1e6;
}

enum class Input { kCold, kWarm };

// CPU microseconds per row of `rows` single-row calls starting at pool row `first`.
double TimeRows(Session& session, size_t first, size_t rows, Input input) {
  const std::vector<float>& pool = Pool();
  std::vector<float> y(kDim);
  const double start = ThreadMicros();
  for (size_t i = 0; i < rows; ++i) {
    if (input == Input::kWarm) {
      const float* next = pool.data() + (first + i + 1) % kPoolRows * kDim;
      for (size_t b = 0; b < kDim; b += 64 / sizeof(float)) __builtin_prefetch(next + b, 0, 3);
    }
    (void)session.forward(pool.data() + (first + i) % kPoolRows * kDim, 1, y.data());
    benchmark::DoNotOptimize(y.data());
  }
  return (ThreadMicros() - start) / double(rows);
}

// Each storage type against f32 at batch 1, interleaved: in every round each type runs the same
// rows; the per-round ratios cancel most of the noise of a shared machine.
void CompareStorageTypes() {
  constexpr DType kTypes[] = {DType::kF32, DType::kF16, DType::kBF16, DType::kI8};
  constexpr size_t kRounds = 15, kRowsPerRound = 1500;
  std::printf(
      "\nstorage types at batch 1 (1 thread, in = out = %zu, kernels %s; %zu rounds of %zu "
      "rows, interleaved)\n",
      kDim, kernels::ToString(kernels::ActiveKernels().path), kRounds, kRowsPerRound);
  std::printf("%-14s %-5s %-5s %12s %12s %10s\n", "layer", "input", "type", "cpu_us/row", "x_f32",
              "bytes/row");
  for (const Case& c : Cases()) {
    if (c.name != "path_d11" && c.name != "leaf_d8_w16") continue;
    std::vector<std::unique_ptr<Session>> sessions;
    for (DType t : kTypes) {
      auto created = Session::create(ModelFor(c, t));
      sessions.push_back(std::move(*created));
    }
    for (Input input : {Input::kCold, Input::kWarm}) {
      std::vector<std::vector<double>> us(std::size(kTypes)), ratio(std::size(kTypes));
      for (size_t round = 0; round < kRounds + 1; ++round) {
        double times[std::size(kTypes)];
        for (size_t i = 0; i < std::size(kTypes); ++i) {
          times[i] = TimeRows(*sessions[i], round * kRowsPerRound, kRowsPerRound, input);
        }
        if (round == 0) continue;  // warm-up: page faults of the first touches
        for (size_t i = 0; i < std::size(kTypes); ++i) {
          us[i].push_back(times[i]);
          ratio[i].push_back(times[0] / times[i]);
        }
      }
      for (size_t i = 0; i < std::size(kTypes); ++i) {
        // Weight bytes one row reads: per neuron (path) a node row and an output row; per level
        // (leaf) a node row, then one leaf of 16 hidden units; i8 adds a 4-byte scale per row.
        const double value_bytes = kTypes[i] == DType::kI8 ? 1.0 : double(DTypeSize(kTypes[i]));
        const double row = kDim * value_bytes + (kTypes[i] == DType::kI8 ? 4.0 : 0.0);
        const double bytes = c.name == "path_d11" ? 12 * 2 * row : 8 * row + 16 * 2 * row;
        std::printf("%-14s %-5s %-5s %12.3f %11.2fx %10.0f\n", c.name.c_str(),
                    input == Input::kCold ? "cold" : "warm", ToString(kTypes[i]), Median(us[i]),
                    Median(ratio[i]), bytes);
      }
    }
  }
}

}  // namespace
}  // namespace sprig::bench

int main(int argc, char** argv) {
  using namespace sprig::bench;
  for (int i = 1; i < argc; ++i) {
    if (std::strcmp(argv[i], "--storage_only") == 0) {
      CompareStorageTypes();
      return 0;
    }
  }
  for (const Case& c : Cases()) {
    benchmark::RegisterBenchmark(("layer/" + c.name).c_str(), BM_Layer, c)
        ->Arg(1)
        ->Arg(16)
        ->Arg(128)
        ->Unit(benchmark::kMicrosecond);
  }
#ifdef SPRIG_HAVE_BLAS
  for (size_t w : {3072, 4095, 4096}) {
    benchmark::RegisterBenchmark(("blas_" + std::to_string(w)).c_str(), BM_Blas, w)
        ->Arg(1)
        ->Arg(16)
        ->Arg(128)
        ->Unit(benchmark::kMicrosecond);
  }
#endif
  benchmark::Initialize(&argc, argv);
  SummaryReporter reporter;
  benchmark::RunSpecifiedBenchmarks(&reporter);
  PrintSummary(reporter.us_per_row);
  CompareStorageTypes();
  benchmark::Shutdown();
  return 0;
}
