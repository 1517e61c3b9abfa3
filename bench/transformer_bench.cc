// A whole transformer, routed against dense: does the feed-forward speedup survive attention,
// norms, embeddings and the head around it?
//
// Three 6-block byte-level causal lms (d_model 512, 8 heads, max_seq 512, layernorm, rope, lm
// head) that differ only in their feed-forward layers:
//
//   routed  path tree of depth 10 (2,047 neurons, 11 used per token), gelu
//   dense   dense width 2,047 (the tree's neurons), gelu: the routed model's dense twin
//   no_ffn  dense width 1: costs next to nothing, so its time is everything but the FFN
//
// (bench/kit/models.h builds the last two from the first, as `sprig bench` does.)
//
// time(dense) / time(no_ffn) is the Amdahl bound: the whole-model speedup if the FFN were free.
// The routed model's speedup over dense is printed beside it, and measured / bound says how much
// of what routing could win it does win.
//
// Each repetition runs, for each thread count in turn, the three models (the order rotating
// from one repetition to the next, so none always runs first or last): reset, a 128-token prompt
// through append_tokens (prefill), then 128 append_token calls (decode). Prompts and decode tokens
// are random bytes, new for each repetition and the same for the three models within one. Speedups
// are paired: the ratio of the three models' times within a repetition, then the median and range
// over repetitions, so slow drift of the machine cancels.
//
//   build/bin/sprig_bench_transformer [--quick] [--reps N] [--threads 1,2] [--dtype f32|f16]
#include <algorithm>
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <memory>
#include <string>
#include <vector>

#include "bench/kit/models.h"
#include "bench/kit/stats.h"
#include "converter/config/config_json.h"
#include "converter/pack/packer.h"
#include "converter/synth/synth.h"
#include "model/flops.h"
#include "sprig/model.h"
#include "sprig/session.h"

namespace sprig::bench {
namespace {

constexpr size_t kPrompt = 128;

// The routed model's FFN; the dense twin and the floor (no_ffn) come from bench/kit/models.h.
constexpr const char* kRoutedFfn =
    R"({"kind":"tree","mode":"path","depth":10,"activation":"gelu"})";
constexpr const char* kVariantNames[] = {"routed", "dense", "no_ffn"};
constexpr size_t kRouted = 0, kDense = 1, kNoFfn = 2, kModels = 3;

struct Options {
  bool quick = false;
  size_t reps = 11;
  size_t decode = 128;
  std::vector<size_t> threads = {1, 2};
  std::string dtype = "f32";
};

std::string RoutedConfigText() {
  std::string layers;
  for (int i = 0; i < 6; ++i) layers += std::string(i ? "," : "") + kRoutedFfn;
  return R"({"family":"transformer","name":"bench_routed","tokenizer":"byte","vocab_size":256,)"
         R"("d_model":512,"n_heads":8,"max_seq":512,"norm":"layernorm","positions":"rope",)"
         R"("causal":true,"head":{"kind":"lm"},"layers":[)" +
         layers + "]}";
}

[[noreturn]] void Die(const std::string& what, const Status& s) {
  std::fprintf(stderr, "%s: %s\n", what.c_str(), s.message().c_str());
  std::exit(1);
}

// The routed model, its dense twin and its floor, each synthesized (seed 1), packed into an
// unlinked temporary file and opened.
std::vector<std::shared_ptr<const Model>> BuildModels(DType dtype) {
  auto routed = convert::ParseConfig(RoutedConfigText(), "routed");
  if (!routed.ok()) Die("routed", routed.status());
  const ModelConfig configs[kModels] = {*routed, DenseTwinConfig(*routed), FloorConfig(*routed)};
  BuildOptions options;
  options.dtype = dtype;
  std::vector<std::shared_ptr<const Model>> models;
  for (size_t m = 0; m < kModels; ++m) {
    auto model = BuildUnlinkedModel(configs[m], options);
    if (!model.ok()) Die(kVariantNames[m], model.status());
    models.push_back(*model);
  }
  return models;
}

std::vector<int32_t> RandomBytes(convert::Random& rng, size_t n) {
  std::vector<int32_t> t(n);
  for (int32_t& v : t) v = static_cast<int32_t>(rng.Next() % 256);
  return t;
}

double Seconds(std::chrono::steady_clock::time_point a, std::chrono::steady_clock::time_point b) {
  return std::chrono::duration<double>(b - a).count();
}

struct Timing {
  double prefill = 0, decode = 0;  // seconds
};

// One repetition on one model: prefill from an empty cache, then decode token by token.
Timing RunOnce(Session& s, const std::vector<int32_t>& prompt, const std::vector<int32_t>& next,
               std::vector<float>& logits) {
  Timing t;
  s.reset();
  auto t0 = std::chrono::steady_clock::now();
  Status st = s.append_tokens(prompt.data(), prompt.size(), logits.data());
  auto t1 = std::chrono::steady_clock::now();
  if (!st.ok()) Die("append_tokens", st);
  t.prefill = Seconds(t0, t1);
  t0 = std::chrono::steady_clock::now();
  for (int32_t tok : next) {
    st = s.append_token(tok, logits.data());
    if (!st.ok()) Die("append_token", st);
  }
  t1 = std::chrono::steady_clock::now();
  t.decode = Seconds(t0, t1);
  return t;
}

std::string Format(const Summary& s, const char* fmt) {
  char a[32], b[32], c[32];
  std::snprintf(a, sizeof a, fmt, s.median);
  std::snprintf(b, sizeof b, fmt, s.min);
  std::snprintf(c, sizeof c, fmt, s.max);
  return std::string(a) + " [" + b + "-" + c + "]";
}

void PrintFlops(const std::vector<std::shared_ptr<const Model>>& models, size_t decode) {
  // Attention grows with the position: the prompt's tokens average kPrompt / 2, the decoded
  // ones kPrompt + decode / 2.
  const uint64_t contexts[] = {kPrompt / 2, kPrompt + decode / 2};
  std::printf("\nFLOPs per token (multiply-add = 2; model/flops.h CostOf at context c)\n");
  std::printf("%-8s %12s %8s %12s %12s %12s %12s\n", "model", "params", "c", "ffn", "other",
              "total", "ffn_if_dense");
  for (size_t m = 0; m < kModels; ++m) {
    for (uint64_t c : contexts) {
      const ModelCost cost = CostOf(models[m]->config(), c);
      std::printf("%-8s %12llu %8llu %12llu %12llu %12llu %12llu\n", kVariantNames[m],
                  static_cast<unsigned long long>(cost.params), static_cast<unsigned long long>(c),
                  static_cast<unsigned long long>(cost.ffn_flops),
                  static_cast<unsigned long long>(cost.other_flops),
                  static_cast<unsigned long long>(cost.ffn_flops + cost.other_flops),
                  static_cast<unsigned long long>(cost.ffn_dense_flops));
    }
  }
}

// Runs every repetition: within one, each thread count in turn and within that the three
// models (order rotating), so the model and thread comparisons both see the same machine.
std::vector<std::vector<Timing>> RunAll(const std::vector<std::shared_ptr<const Model>>& models,
                                        const Options& o,
                                        std::vector<std::vector<std::unique_ptr<Session>>>* out) {
  auto& sessions = *out;  // [thread count][model]
  for (size_t threads : o.threads) {
    sessions.emplace_back();
    for (const auto& model : models) {
      SessionOptions so;
      so.threads = threads;
      auto s = Session::create(model, so);
      if (!s.ok()) Die("Session::create", s.status());
      sessions.back().push_back(std::move(*s));
    }
  }
  std::vector<float> logits(256);
  convert::Random rng(1000);
  // Warm-up: touches every page of the mappings and grows the caches and workspaces.
  {
    const auto prompt = RandomBytes(rng, kPrompt), next = RandomBytes(rng, o.decode);
    for (auto& per_thread : sessions) {
      for (auto& s : per_thread) RunOnce(*s, prompt, next, logits);
    }
  }
  // [thread count * kModels + model][repetition]
  std::vector<std::vector<Timing>> t(o.threads.size() * kModels);
  for (size_t r = 0; r < o.reps; ++r) {
    const auto prompt = RandomBytes(rng, kPrompt), next = RandomBytes(rng, o.decode);
    for (size_t ti = 0; ti < o.threads.size(); ++ti) {
      for (size_t i = 0; i < kModels; ++i) {
        const size_t m = (r + i) % kModels;
        t[ti * kModels + m].push_back(RunOnce(*sessions[ti][m], prompt, next, logits));
      }
    }
  }
  return t;
}

double PhaseSeconds(const Timing& x, int phase) {
  return phase == 0 ? x.prefill : x.decode;
}
const char* PhaseName(int phase) {
  return phase == 0 ? "prefill" : "decode";
}

// Prints one thread count's rates and paired speedups; `t` points at its kModels series.
void PrintThreads(const std::vector<Timing>* t, size_t threads, const char* kernel_path,
                  const Options& o) {
  std::printf("\nthreads %zu (kernels %s): tokens/s, median [min-max] over %zu repetitions\n",
              threads, kernel_path, o.reps);
  std::printf("%-8s %-8s %28s %12s\n", "phase", "model", "tokens/s", "ms/token");
  for (int phase = 0; phase < 2; ++phase) {
    const size_t tokens = phase == 0 ? kPrompt : o.decode;
    for (size_t m = 0; m < kModels; ++m) {
      std::vector<double> rate, ms;
      for (const Timing& x : t[m]) {
        rate.push_back(tokens / PhaseSeconds(x, phase));
        ms.push_back(PhaseSeconds(x, phase) * 1e3 / tokens);
      }
      std::printf("%-8s %-8s %28s %12.3f\n", PhaseName(phase), kVariantNames[m],
                  Format(Summarize(rate), "%.1f").c_str(), Summarize(ms).median);
    }
  }
  std::printf("\n%-8s %-22s %-22s %-22s %s\n", "phase", "speedup routed/dense",
              "bound dense/no_ffn", "measured/bound", "ffn share of dense");
  for (int phase = 0; phase < 2; ++phase) {
    std::vector<double> speedup, bound, ratio, share;
    for (size_t r = 0; r < o.reps; ++r) {
      auto sec = [&](size_t m) { return PhaseSeconds(t[m][r], phase); };
      speedup.push_back(sec(kDense) / sec(kRouted));
      bound.push_back(sec(kDense) / sec(kNoFfn));
      ratio.push_back(speedup.back() / bound.back());
      share.push_back(1 - sec(kNoFfn) / sec(kDense));
    }
    std::printf("%-8s %-22s %-22s %-22s %s\n", PhaseName(phase),
                Format(Summarize(speedup), "%.2f").c_str(),
                Format(Summarize(bound), "%.2f").c_str(), Format(Summarize(ratio), "%.3f").c_str(),
                Format(Summarize(share), "%.2f").c_str());
  }
}

// Thread scaling against the first thread count, paired per repetition.
void PrintScaling(const std::vector<std::vector<Timing>>& t, const Options& o) {
  if (o.threads.size() < 2) return;
  std::printf("\nthread scaling: time(%zu threads) / time(N threads), median [min-max]\n",
              o.threads[0]);
  std::printf("%-8s %-8s", "phase", "model");
  for (size_t ti = 1; ti < o.threads.size(); ++ti) std::printf(" %18s%-4zu", "N = ", o.threads[ti]);
  std::printf("\n");
  for (int phase = 0; phase < 2; ++phase) {
    for (size_t m = 0; m < kModels; ++m) {
      std::printf("%-8s %-8s", PhaseName(phase), kVariantNames[m]);
      for (size_t ti = 1; ti < o.threads.size(); ++ti) {
        std::vector<double> s;
        for (size_t r = 0; r < o.reps; ++r) {
          s.push_back(PhaseSeconds(t[m][r], phase) / PhaseSeconds(t[ti * kModels + m][r], phase));
        }
        std::printf(" %22s", Format(Summarize(s), "%.2f").c_str());
      }
      std::printf("\n");
    }
  }
}

bool ParseArgs(int argc, char** argv, Options* o) {
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    auto value = [&]() -> const char* { return i + 1 < argc ? argv[++i] : nullptr; };
    if (a == "--quick") {
      o->quick = true;
    } else if (a == "--reps") {
      const char* v = value();
      if (!v || std::atoi(v) < 1) return false;
      o->reps = static_cast<size_t>(std::atoi(v));
    } else if (a == "--threads") {
      const char* v = value();
      if (!v) return false;
      o->threads.clear();
      for (const char* p = v; *p;) {
        char* end = nullptr;
        const long n = std::strtol(p, &end, 10);
        if (end == p || n < 1) return false;
        o->threads.push_back(static_cast<size_t>(n));
        p = *end == ',' ? end + 1 : end;
        if (*end && *end != ',') return false;
      }
    } else if (a == "--dtype") {
      const char* v = value();
      if (!v) return false;
      o->dtype = v;
    } else {
      return false;
    }
  }
  return true;
}

}  // namespace
}  // namespace sprig::bench

int main(int argc, char** argv) {
  using namespace sprig::bench;
  Options o;
  if (!ParseArgs(argc, argv, &o)) {
    std::fprintf(stderr, "usage: %s [--quick] [--reps N] [--threads 1,2] [--dtype f32|f16|bf16]\n",
                 argv[0]);
    return 2;
  }
  if (o.quick) {
    // A quick look: fewer repetitions and half the decoded tokens; ratios are noisier.
    o.reps = std::min<size_t>(o.reps, 3);
    o.decode = 64;
  }
  std::string command;
  for (int i = 0; i < argc; ++i) command += std::string(i ? " " : "") + argv[i];
  std::printf("command: %s\n", command.c_str());
  std::printf(
      "6 blocks, d_model 512, 8 heads, vocab 256, max_seq 512, layernorm, rope, causal, "
      "lm head; storage %s\n",
      o.dtype.c_str());
  std::printf(
      "prefill: %zu-token prompt via append_tokens from an empty cache; decode: %zu "
      "append_token calls after it\n",
      kPrompt, o.decode);
  auto dtype = sprig::convert::ParseStorageType(o.dtype);
  if (!dtype.ok()) Die("--dtype", dtype.status());

  const auto models = BuildModels(*dtype);
  PrintFlops(models, o.decode);
  std::vector<std::vector<std::unique_ptr<sprig::Session>>> sessions;
  const auto t = RunAll(models, o, &sessions);
  for (size_t ti = 0; ti < o.threads.size(); ++ti) {
    PrintThreads(&t[ti * kModels], o.threads[ti], sessions[ti][0]->kernel_path(), o);
  }
  PrintScaling(t, o);
  return 0;
}
