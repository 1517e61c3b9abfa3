// Heavy use of one model: many threads, each with its own Session over one shared Model, mixing
// whole-sequence forward passes, decoding and generation, must give exactly the outputs of a
// single thread (docs/embedding.md: a Model is shared by any number of threads; docs/verbs.md:
// results do not depend on thread counts). The same file is built alone under ThreadSanitizer
// (tests/tsan/), where it must also run without a data race report. Also: a long decoding loop
// keeps memory flat.
//
// Models are packed in-process (synthesized weights), so this file needs neither the sprig
// program nor Python and links into the small sanitizer build as it is.
#include <gtest/gtest.h>

#include <algorithm>
#include <cstdio>
#include <memory>
#include <string>
#include <thread>
#include <vector>

#include "converter/config/config_json.h"
#include "io/tensor_archive.h"
#include "converter/pack/packer.h"
#include "converter/synth/synth.h"
#include "sprig/memory.h"
#include "sprig/model.h"
#include "sprig/session.h"
#include "support/test_util.h"

namespace sprig {
namespace {

// A causal language model with every routed layer kind and grouped key/value heads.
constexpr const char* kLm = R"({"family":"transformer","vocab_size":64,"d_model":32,
  "n_heads":4,"n_kv_heads":2,"max_seq":48,"norm":"rmsnorm","positions":"rope","causal":true,
  "head":{"kind":"lm"},"layers":[
   {"kind":"tree","mode":"leaf","depth":3,"leaf_width":8,"activation":"gelu"},
   {"kind":"experts","experts":4,"top_k":2,"width":8,"activation":"silu","gated":true},
   {"kind":"tree","mode":"path","depth":4,"activation":"relu"},
   {"kind":"dense","width":16,"activation":"gelu_tanh"}]})";

// Synthesizes weights for `config_json` and packs them into dir/name.sprig, all in-process.
std::shared_ptr<const Model> PackAndOpen(const testing::TempDir& dir,
                                         const std::string& config_json, const std::string& name) {
  auto config = convert::ParseConfig(config_json, name + ".json");
  EXPECT_TRUE(config.ok()) << config.status().message();
  if (!config.ok()) return nullptr;
  const std::string weights = dir.File(name + ".npz"), out = dir.File(name + ".sprig");
  const std::string config_path = dir.File(name + ".json");
  Status s = io::WriteNpz(weights, convert::SynthesizeWeights(*config, 5), false, true);
  EXPECT_TRUE(s.ok()) << s.message();
  {
    FILE* f = std::fopen(config_path.c_str(), "w");
    EXPECT_NE(f, nullptr);
    if (f == nullptr) return nullptr;
    std::fputs(config_json.c_str(), f);
    std::fclose(f);
  }
  auto packed = convert::PackFiles(config_path, weights, out, {});
  EXPECT_TRUE(packed.ok()) << packed.status().message();
  auto model = Model::open(out);
  EXPECT_TRUE(model.ok()) << model.status().message();
  return model.ok() ? *model : nullptr;
}

// What one round of work produces; rounds differ by `round` (inputs and sampling seed).
struct Outputs {
  std::vector<float> logits;         // forward_tokens on a [2, 12] batch
  std::vector<int32_t> routes;       // every routed block's choices for that batch
  std::vector<float> decode_logits;  // append_tokens then append_token, last logits
  std::vector<int32_t> generated;    // generate() with a seed
  bool operator==(const Outputs&) const = default;
};

std::vector<int32_t> Tokens(size_t n, size_t round, int32_t vocab) {
  std::vector<int32_t> t(n);
  for (size_t i = 0; i < n; ++i) t[i] = static_cast<int32_t>((i * 13 + round * 7 + 1) % vocab);
  return t;
}

// Runs one round on `session`; a failing call leaves its output empty, which never matches.
Outputs RunRound(Session& session, size_t round) {
  const ModelConfig& c = session.model().config();
  const int32_t vocab = static_cast<int32_t>(c.vocab_size);
  Outputs o;
  const std::vector<int32_t> batch = Tokens(2 * 12, round, vocab);
  o.logits.resize(batch.size() * c.vocab_size);
  Routes routes;
  if (!session.forward_tokens(batch.data(), 2, 12, o.logits.data(), &routes).ok()) o.logits = {};
  for (const LayerRoutes& l : routes.layers) {
    o.routes.insert(o.routes.end(), l.choices.begin(), l.choices.end());
  }
  session.reset();
  const std::vector<int32_t> prompt = Tokens(9, round + 1, vocab);
  o.decode_logits.resize(c.vocab_size);
  if (!session.append_tokens(prompt.data(), prompt.size(), nullptr).ok() ||
      !session.append_token(prompt[0], o.decode_logits.data()).ok()) {
    o.decode_logits = {};
  }
  GenerateOptions g;
  g.count = 20;
  g.temperature = 0.8f;
  g.top_p = 0.9f;
  g.seed = 1 + round % 3;
  if (!session
           .generate(prompt, g,
                     [&](int32_t t) {
                       o.generated.push_back(t);
                       return true;
                     })
           .ok()) {
    o.generated = {};
  }
  return o;
}

TEST(Concurrency, EightSessionsOverOneModelMatchOneThread) {
  testing::TempDir dir;
  auto model = PackAndOpen(dir, kLm, "lm");
  ASSERT_NE(model, nullptr);
  constexpr size_t kRounds = 3, kThreads = 8;
  std::vector<Outputs> expected;
  {
    auto single = Session::create(model);
    ASSERT_TRUE(single.ok()) << single.status().message();
    for (size_t r = 0; r < kRounds; ++r) expected.push_back(RunRound(**single, r));
  }
  for (const Outputs& e : expected) {
    ASSERT_FALSE(e.logits.empty() || e.decode_logits.empty() || e.generated.empty());
  }

  // Every thread runs every round, starting at a different one so that different kinds of work
  // overlap; odd threads' sessions also split their rows over two worker threads.
  std::vector<size_t> mismatches(kThreads, 0);
  std::vector<std::string> errors(kThreads);
  std::vector<std::thread> threads;
  for (size_t t = 0; t < kThreads; ++t) {
    threads.emplace_back([&, t] {
      SessionOptions options;
      options.threads = 1 + t % 2;
      auto session = Session::create(model, options);
      if (!session.ok()) {
        errors[t] = session.status().message();
        return;
      }
      for (size_t i = 0; i < 2 * kRounds; ++i) {
        const size_t round = (t + i) % kRounds;
        if (!(RunRound(**session, round) == expected[round])) ++mismatches[t];
      }
    });
  }
  for (std::thread& th : threads) th.join();
  for (size_t t = 0; t < kThreads; ++t) {
    EXPECT_EQ(errors[t], "") << "thread " << t;
    EXPECT_EQ(mismatches[t], 0u) << "thread " << t << " differed from the single-thread outputs";
  }
}

#if defined(__SANITIZE_ADDRESS__) || defined(__SANITIZE_THREAD__)
#define SPRIG_SANITIZED 1
#elif defined(__has_feature)
#if __has_feature(address_sanitizer) || __has_feature(thread_sanitizer)
#define SPRIG_SANITIZED 1
#endif
#endif

// Decoding 100,000 tokens in a loop, resetting the cache whenever it is full, must not grow the
// process: after a warm-up, resident memory stays within a generous bound. Not timed.
TEST(Endurance, DecodingWithResetsKeepsMemoryFlat) {
#ifdef SPRIG_SANITIZED
  GTEST_SKIP() << "sanitizers keep freed memory in quarantine, so resident memory says nothing";
#endif
  testing::TempDir dir;
  auto model = PackAndOpen(dir, kLm, "lm");
  ASSERT_NE(model, nullptr);
  auto session = Session::create(model);
  ASSERT_TRUE(session.ok()) << session.status().message();
  Session& s = **session;
  const ModelConfig& c = model->config();
  std::vector<float> logits(c.vocab_size);
  constexpr uint64_t kTokens = 100'000, kWarmup = 10'000;
  // Greedy decoding: each token is the argmax of the last logits, so the loop feeds itself.
  int32_t token = 1;
  uint64_t rss_after_warmup = 0, peak_after_warmup = 0, resets = 0;
  for (uint64_t n = 0; n < kTokens; ++n) {
    if (s.position() == c.max_seq) {
      s.reset();
      ++resets;
    }
    ASSERT_TRUE(s.append_token(token, logits.data()).ok()) << "token " << n;
    token = 0;
    for (size_t v = 1; v < logits.size(); ++v) {
      if (logits[v] > logits[token]) token = static_cast<int32_t>(v);
    }
    // Sampled every 1,000 tokens: reading /proc costs more than a decode step.
    if ((n + 1) % 1000 != 0) continue;
    const uint64_t rss = ReadProcessMemory().rss;
    if (n + 1 == kWarmup) rss_after_warmup = rss;
    if (n + 1 > kWarmup) peak_after_warmup = std::max(peak_after_warmup, rss);
  }
  EXPECT_EQ(resets, kTokens / c.max_seq);
  std::printf("resident memory after %llu tokens: %.2f MiB; highest after that: %.2f MiB\n",
              static_cast<unsigned long long>(kWarmup), rss_after_warmup / 1048576.0,
              peak_after_warmup / 1048576.0);
  ASSERT_GT(rss_after_warmup, 0u) << "no /proc/self/status here";
  // The cache and scratch of this model are a few KiB; 4 MiB of growth would mean a leak per
  // reset or per token (90,000 tokens, 1,875 resets since the warm-up).
  EXPECT_LT(peak_after_warmup, rss_after_warmup + (4u << 20))
      << "resident memory grew from " << rss_after_warmup << " to " << peak_after_warmup;
}

}  // namespace
}  // namespace sprig
