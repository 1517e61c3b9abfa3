// The transformer family through the public API and the CLI: decoding with the KV cache
// against whole-sequence forward passes, generation (determinism, greedy = argmax, nucleus
// sampling, max_seq), rotary positions against the closed-form rotation, classifier pooling,
// input checks, and `sprig run` / `sprig generate` on transformer models. Models are random
// (`sprig synth`); outputs mean nothing, only their agreement does. Checks against PyTorch are
// in reference_transformer_test.cc.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstring>
#include <map>
#include <memory>
#include <string>
#include <vector>

#include "sprig/model.h"
#include "sprig/session.h"
#include "support/test_util.h"
#include "transformer/sampler.h"
#include "transformer/transformer.h"

namespace sprig {
namespace {

using testing::Quote;

const char* const kLm = R"({"family":"transformer","name":"lm","vocab_size":64,"d_model":32,
  "n_heads":4,"n_kv_heads":2,"max_seq":40,"norm":"rmsnorm","positions":"rope","causal":true,
  "head":{"kind":"lm"},"layers":[
   {"kind":"tree","mode":"leaf","depth":3,"leaf_width":8,"activation":"gelu"},
   {"kind":"experts","experts":4,"top_k":2,"width":8,"activation":"silu","gated":true},
   {"kind":"tree","mode":"path","depth":4,"activation":"relu"}]})";

const char* const kByteLm = R"({"family":"transformer","name":"bytes","tokenizer":"byte",
  "vocab_size":256,"d_model":32,"n_heads":4,"max_seq":48,"norm":"layernorm",
  "positions":"learned","causal":true,"head":{"kind":"lm"},"layers":[
   {"kind":"tree","mode":"leaf","depth":2,"leaf_width":8,"activation":"relu"},
   {"kind":"dense","width":16,"activation":"gelu"}]})";

std::string Classifier(const char* pool) {
  return std::string(R"({"family":"transformer","vocab_size":30,"d_model":16,"n_heads":2,
    "max_seq":20,"norm":"layernorm","positions":"learned","causal":true,
    "head":{"kind":"classifier","classes":3,"pool":")") +
         pool + R"("},"layers":[{"kind":"dense","width":16,"activation":"gelu"}]})";
}

const char* const kBidirectional = R"({"family":"transformer","vocab_size":30,"d_model":16,
  "n_heads":2,"max_seq":20,"positions":"none","causal":false,"head":{"kind":"lm"},
  "layers":[{"kind":"dense","width":16,"activation":"gelu"}]})";

std::string MakeModel(const testing::TempDir& dir, const std::string& name,
                      const std::string& config, uint64_t seed = 3) {
  return testing::PackSynthesized(dir, name, config, seed);
}

std::unique_ptr<Session> Open(const std::string& path, size_t threads = 1) {
  return testing::OpenSession(path, threads);
}

std::vector<int32_t> Tokens(size_t n, int32_t vocab, uint32_t seed) {
  std::vector<int32_t> t(n);
  uint32_t s = seed;
  for (auto& v : t) {
    s = s * 1664525u + 1013904223u;  // any spread of tokens will do
    v = static_cast<int32_t>((s >> 8) % static_cast<uint32_t>(vocab));
  }
  return t;
}

// |a - b| <= rel · max|b| over a row of logits.
void ExpectClose(const float* a, const float* b, size_t n, float rel, const std::string& what) {
  float scale = 0.0f;
  for (size_t i = 0; i < n; ++i) scale = std::max(scale, std::fabs(b[i]));
  for (size_t i = 0; i < n; ++i) {
    ASSERT_LE(std::fabs(a[i] - b[i]), rel * scale) << what << " at " << i;
  }
}

class TransformerTest : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = new testing::TempDir;
    lm_ = MakeModel(*dir_, "lm", kLm);
    byte_lm_ = MakeModel(*dir_, "bytes", kByteLm);
  }
  static void TearDownTestSuite() { delete dir_; }
  static testing::TempDir* dir_;
  static std::string lm_, byte_lm_;
};
testing::TempDir* TransformerTest::dir_ = nullptr;
std::string TransformerTest::lm_, TransformerTest::byte_lm_;

TEST_F(TransformerTest, DecodeWithCacheMatchesWholeSequence) {
  for (size_t threads : {1, 2}) {
    auto s = Open(lm_, threads);
    ASSERT_TRUE(s);
    const size_t v = 64, t = 40;  // up to max_seq
    const std::vector<int32_t> tokens = Tokens(t, 64, 7);
    std::vector<float> whole(t * v), step(v);
    ASSERT_TRUE(s->forward_tokens(tokens.data(), 1, t, whole.data()).ok());
    EXPECT_EQ(s->position(), 0u) << "forward_tokens must not touch the cache";
    for (size_t i = 0; i < t; ++i) {
      ASSERT_TRUE(s->append_token(tokens[i], step.data()).ok());
      ExpectClose(step.data(), whole.data() + i * v, v, 1e-5f,
                  "position " + std::to_string(i) + " threads " + std::to_string(threads));
    }
    EXPECT_EQ(s->position(), t);
    // A batched append fills the same cache: continuing from it matches too.
    s->reset();
    std::vector<float> last(v);
    ASSERT_TRUE(s->append_tokens(tokens.data(), 25, last.data()).ok());
    ExpectClose(last.data(), whole.data() + 24 * v, v, 1e-5f, "batched append");
    ASSERT_TRUE(s->append_token(tokens[25], step.data()).ok());
    ExpectClose(step.data(), whole.data() + 25 * v, v, 1e-5f, "after batched append");
  }
}

// The decode path through the block variants: post-norm blocks, a norm on the embeddings, no
// final norm, biases on some projections only, and an lm head with a transform and a bias
// (tied and untied). The cached, one-token path must give the whole-sequence logits.
TEST(TransformerVariants, DecodeWithCacheMatchesWholeSequence) {
  testing::TempDir dir;
  const std::string common = R"({"family":"transformer","vocab_size":40,"d_model":24,
    "n_heads":4,"n_kv_heads":2,"max_seq":20,"causal":true,"norm_position":"post",
    "final_norm":false,"embed_norm":true,)";
  const std::string layers = R"(,"layers":[{"kind":"dense","width":16,"activation":"gelu"},
    {"kind":"tree","mode":"leaf","depth":2,"leaf_width":8}]})";
  const std::vector<std::string> configs = {
      common + R"("attn_bias":["q","v"],"positions":"learned",
        "head":{"kind":"lm","transform":{"activation":"gelu"},"bias":true})" +
          layers,
      common + R"("attn_bias":["k","o"],"norm":"rmsnorm","positions":"rope","tie_embeddings":true,
        "head":{"kind":"lm","transform":{"activation":"relu","norm":false},"bias":true})" +
          layers,
  };
  for (size_t c = 0; c < configs.size(); ++c) {
    const std::string path = MakeModel(dir, "variant" + std::to_string(c), configs[c]);
    auto s = Open(path);
    ASSERT_TRUE(s);
    const size_t v = 40, t = 20;
    const std::vector<int32_t> tokens = Tokens(t, 40, 11);
    std::vector<float> whole(t * v), step(v);
    ASSERT_TRUE(s->forward_tokens(tokens.data(), 1, t, whole.data()).ok());
    for (size_t i = 0; i < t; ++i) {
      ASSERT_TRUE(s->append_token(tokens[i], step.data()).ok());
      ExpectClose(step.data(), whole.data() + i * v, v, 1e-5f,
                  "config " + std::to_string(c) + " position " + std::to_string(i));
    }
    // inspect names the variant.
    auto r = testing::Run(testing::SprigCli() + " inspect " + Quote(path));
    ASSERT_EQ(r.exit_code, 0) << r.output;
    const char* expected[] = {
        "blocks       post-norm, norm on the embeddings, attention biases q v, no final norm, "
        "head transform gelu + norm, head bias\n",
        "blocks       post-norm, norm on the embeddings, attention biases k o, no final norm, "
        "head transform relu, head bias, tied embeddings\n"};
    EXPECT_NE(r.output.find(expected[c]), std::string::npos) << r.output;
  }
}

// Half-precision storage: the embedding rows, attention and head matrices are read through the
// f16/bf16 kernels; decoding must still agree with the whole-sequence pass on the same weights,
// and the logits stay near the float32 model's (the weights differ by their rounding only).
TEST_F(TransformerTest, HalfPrecisionStorageDecodesConsistently) {
  const std::string cli = testing::SprigCli();
  auto f32 = Open(lm_, 1);
  const size_t v = 64, t = 24;
  const std::vector<int32_t> tokens = Tokens(t, 64, 5);
  std::vector<float> want(t * v);
  ASSERT_TRUE(f32->forward_tokens(tokens.data(), 1, t, want.data()).ok());
  float scale = 0.0f;
  for (float x : want) scale = std::max(scale, std::fabs(x));
  for (const char* dtype : {"f16", "bf16"}) {
    SCOPED_TRACE(dtype);
    testing::TempDir dir;
    const std::string path = dir.File("m.sprig");
    auto r = testing::Run(cli + " pack " + Quote(dir_->File("lm.json")) + " " +
                          Quote(dir_->File("lm.npz")) + " -o " + Quote(path) + " --dtype " + dtype);
    ASSERT_EQ(r.exit_code, 0) << r.output;
    auto s = Open(path, 2);
    ASSERT_TRUE(s);
    std::vector<float> whole(t * v), step(v);
    ASSERT_TRUE(s->forward_tokens(tokens.data(), 1, t, whole.data()).ok());
    double err = 0.0;
    for (size_t i = 0; i < t * v; ++i) err = std::max(err, double(std::fabs(whole[i] - want[i])));
    // A loose bound: bf16 keeps 8 bits of mantissa, and a flipped route moves a token further.
    EXPECT_LT(err, 0.05 * scale);
    std::printf("[ %s ] max |logit - f32 logit| = %.3g (largest logit %.3g)\n", dtype, err, scale);
    for (size_t i = 0; i < t; ++i) {
      ASSERT_TRUE(s->append_token(tokens[i], step.data()).ok());
      ExpectClose(step.data(), whole.data() + i * v, v, 1e-5f, "position " + std::to_string(i));
    }
  }
}

TEST_F(TransformerTest, BatchOfSequencesEqualsEachAlone) {
  auto s1 = Open(lm_, 1);
  auto s2 = Open(lm_, 2);
  ASSERT_TRUE(s1 && s2);
  const size_t b = 3, t = 17, v = 64;
  const std::vector<int32_t> tokens = Tokens(b * t, 64, 11);
  std::vector<float> batch1(b * t * v), batch2(b * t * v), alone(t * v);
  Routes routes1, routes2;
  ASSERT_TRUE(s1->forward_tokens(tokens.data(), b, t, batch1.data(), &routes1).ok());
  ASSERT_TRUE(s2->forward_tokens(tokens.data(), b, t, batch2.data(), &routes2).ok());
  EXPECT_EQ(batch1, batch2) << "two threads changed the logits";
  ASSERT_EQ(routes1.layers.size(), 3u);
  for (size_t l = 0; l < 3; ++l) {
    EXPECT_EQ(routes1.layers[l].layer, l);
    EXPECT_EQ(routes1.layers[l].width, l == 1 ? 2u : 1u);
    EXPECT_EQ(routes1.layers[l].choices.size(), b * t * routes1.layers[l].width);
    EXPECT_EQ(routes1.layers[l].choices, routes2.layers[l].choices);
  }
  for (size_t i = 0; i < b; ++i) {
    Routes alone_routes;
    ASSERT_TRUE(s1->forward_tokens(tokens.data() + i * t, 1, t, alone.data(), &alone_routes).ok());
    for (size_t p = 0; p < t; ++p) {
      ExpectClose(batch1.data() + (i * t + p) * v, alone.data() + p * v, v, 1e-5f,
                  "sequence " + std::to_string(i));
    }
    const auto& leaf = routes1.layers[0].choices;
    EXPECT_TRUE(std::equal(alone_routes.layers[0].choices.begin(),
                           alone_routes.layers[0].choices.end(), leaf.begin() + i * t));
  }
}

// Wide enough that a batch's projections are split between threads by outputs (d_model 128,
// vocab 160: several pieces per matrix), and, for the long batch, by rows (its input rows pass
// the column-split size). Every split must give the one-thread bits, and a prefill through the
// cache the bits of the same tokens without it.
TEST(TransformerThreads, WideProjectionsGiveTheSameBitsOnAnyThreadCount) {
  testing::TempDir dir;
  const std::string path = MakeModel(dir, "wide", R"({"family":"transformer","vocab_size":160,
    "d_model":128,"n_heads":4,"max_seq":128,"norm":"rmsnorm","positions":"rope","causal":true,
    "head":{"kind":"lm"},"layers":[{"kind":"tree","mode":"path","depth":3,"activation":"gelu"},
    {"kind":"dense","width":96,"activation":"silu","gated":true}]})");
  const size_t v = 160;
  struct Shape {
    size_t batch, length;
  };
  for (const Shape shape : {Shape{2, 40}, Shape{20, 128}}) {
    const size_t rows = shape.batch * shape.length;
    const std::vector<int32_t> tokens = Tokens(rows, 160, 5);
    std::vector<float> base(rows * v);
    auto s1 = Open(path, 1);
    ASSERT_TRUE(s1);
    ASSERT_TRUE(s1->forward_tokens(tokens.data(), shape.batch, shape.length, base.data()).ok());
    for (size_t threads : {2, 3}) {
      auto s = Open(path, threads);
      ASSERT_TRUE(s);
      std::vector<float> out(rows * v);
      ASSERT_TRUE(s->forward_tokens(tokens.data(), shape.batch, shape.length, out.data()).ok());
      EXPECT_TRUE(out == base) << rows << " rows, " << threads << " threads";
      // The cached prefill of the first sequence: its last token's logits.
      std::vector<float> last(v);
      ASSERT_TRUE(s->append_tokens(tokens.data(), shape.length, last.data()).ok());
      const float* want = base.data() + (shape.length - 1) * v;
      EXPECT_TRUE(std::equal(last.begin(), last.end(), want))
          << "append_tokens of " << shape.length << ", " << threads << " threads";
    }
  }
}

TEST_F(TransformerTest, GenerateIsDeterministicForASeedAndThreadCount) {
  auto collect = [&](size_t threads, uint64_t seed, float top_p) {
    auto s = Open(lm_, threads);
    std::vector<int32_t> out;
    GenerateOptions o;
    o.count = 30;
    o.seed = seed;
    o.temperature = 0.8f;
    o.top_p = top_p;
    EXPECT_TRUE(s->generate({1, 2, 3}, o, [&](int32_t t) {
                   out.push_back(t);
                   return true;
                 }).ok());
    return out;
  };
  const auto a = collect(1, 5, 0.9f);
  EXPECT_EQ(a.size(), 30u);
  EXPECT_EQ(a, collect(1, 5, 0.9f));
  EXPECT_EQ(a, collect(2, 5, 0.9f));
  EXPECT_NE(a, collect(1, 6, 0.9f)) << "the seed has no effect";
  // Repeated calls on one session start afresh from the prompt.
  auto s = Open(lm_, 1);
  GenerateOptions o;
  o.count = 12;
  std::vector<int32_t> first, second;
  ASSERT_TRUE(s->generate({4, 5}, o, [&](int32_t t) { return first.push_back(t), true; }).ok());
  ASSERT_TRUE(s->generate({4, 5}, o, [&](int32_t t) { return second.push_back(t), true; }).ok());
  EXPECT_EQ(first, second);
}

TEST_F(TransformerTest, GreedyGenerationIsArgmaxOfForwardLogits) {
  auto s = Open(lm_, 1);
  const std::vector<int32_t> prompt = {9, 30, 2, 41};
  GenerateOptions o;
  o.temperature = 0.0f;
  o.count = 20;
  std::vector<int32_t> gen;
  ASSERT_TRUE(s->generate(prompt, o, [&](int32_t t) { return gen.push_back(t), true; }).ok());
  ASSERT_EQ(gen.size(), 20u);
  std::vector<int32_t> seq = prompt;
  seq.insert(seq.end(), gen.begin(), gen.end() - 1);
  std::vector<float> logits(seq.size() * 64);
  ASSERT_TRUE(s->forward_tokens(seq.data(), 1, seq.size(), logits.data()).ok());
  for (size_t i = 0; i < gen.size(); ++i) {
    const float* row = logits.data() + (prompt.size() - 1 + i) * 64;
    EXPECT_EQ(gen[i], std::max_element(row, row + 64) - row) << "step " << i;
  }
  // A nucleus this small holds only the most probable token: the same as greedy.
  o.temperature = 1.0f;
  o.top_p = 1e-6f;
  std::vector<int32_t> nucleus;
  ASSERT_TRUE(s->generate(prompt, o, [&](int32_t t) { return nucleus.push_back(t), true; }).ok());
  EXPECT_EQ(nucleus, gen);
}

TEST_F(TransformerTest, GenerationStopsAtMaxSeqAndWhenAsked) {
  auto s = Open(lm_, 1);
  GenerateOptions o;
  o.count = 100;
  size_t n = 0;
  ASSERT_TRUE(s->generate(Tokens(30, 64, 3), o, [&](int32_t) { return ++n, true; }).ok());
  // 30 prompt tokens + 10 appended fill max_seq 40; the token predicted after them is the 11th.
  EXPECT_EQ(s->position(), 40u);
  EXPECT_EQ(n, 11u);
  float logits[64];
  Status st = s->append_token(1, logits);
  EXPECT_EQ(st.code(), Status::Code::kInvalidArgument);
  EXPECT_NE(st.message().find("max_seq"), std::string::npos) << st.message();
  n = 0;
  ASSERT_TRUE(s->generate({1}, o, [&](int32_t) { return ++n < 5; }).ok());
  EXPECT_EQ(n, 5u);
  EXPECT_EQ(s->position(), 5u);  // the prompt and the four tokens accepted before the stop
}

TEST_F(TransformerTest, RefusesBadInputs) {
  auto s = Open(lm_, 1);
  std::vector<float> out(41 * 64);
  std::vector<int32_t> long_seq(41, 1);
  Status st = s->forward_tokens(long_seq.data(), 1, 41, out.data());
  EXPECT_EQ(st.code(), Status::Code::kInvalidArgument);
  EXPECT_NE(st.message().find("max_seq 40"), std::string::npos) << st.message();
  const int32_t bad[3] = {1, 64, 2};
  st = s->forward_tokens(bad, 1, 3, out.data());
  EXPECT_EQ(st.code(), Status::Code::kInvalidArgument);
  EXPECT_NE(st.message().find("token 64 at [0, 1]"), std::string::npos) << st.message();
  EXPECT_FALSE(s->append_token(-1, out.data()).ok());
  EXPECT_EQ(s->position(), 0u);
  float x[4] = {};
  EXPECT_FALSE(s->forward(x, 1, out.data()).ok()) << "float rows into a transformer";
  GenerateOptions o;
  auto keep = [](int32_t) { return true; };
  EXPECT_FALSE(s->generate({}, o, keep).ok());
  o.top_p = 0.0f;
  EXPECT_FALSE(s->generate({1}, o, keep).ok());
  o.top_p = 1.0f;
  o.temperature = -1.0f;
  EXPECT_FALSE(s->generate({1}, o, keep).ok());

  testing::TempDir dir;
  auto bidir = Open(MakeModel(dir, "bidir", kBidirectional), 1);
  ASSERT_NE(bidir, nullptr);
  st = bidir->append_token(1, out.data());
  EXPECT_NE(st.message().find("not causal"), std::string::npos) << st.message();
  auto cls = Open(MakeModel(dir, "cls", Classifier("mean")), 1);
  ASSERT_NE(cls, nullptr);
  st = cls->append_token(1, out.data());
  EXPECT_NE(st.message().find("lm head"), std::string::npos) << st.message();
  const std::string stack = R"({"family":"stack","input_dim":4,"layers":[
    {"kind":"dense","width":4,"activation":"relu","out":2}]})";
  auto st_model = Open(MakeModel(dir, "stack", stack), 1);
  ASSERT_NE(st_model, nullptr);
  EXPECT_FALSE(st_model->forward_tokens(bad, 1, 1, out.data()).ok());
}

// Source: the rotate-half definition of rotary positions (docs/model-semantics.md): each pair
// (i, i + d/2) is the 2-D vector rotated by θ_i = t · base^(−2i/d), i.e. multiplied by
// [[cos θ, −sin θ], [sin θ, cos θ]]; θ evaluated here in long double, independently.
TEST(Rope, MatchesTheClosedFormRotation) {
  const size_t d = 8;
  const double base = 10000.0;
  const float x[d] = {0.5f, -1.25f, 2.0f, 0.75f, -0.3f, 1.1f, -2.2f, 0.9f};
  for (size_t t : {0u, 1u, 7u, 100u, 4095u}) {
    float c[d / 2], s[d / 2], y[d];
    transformer::RopeTable(t, d, base, c, s);
    std::copy(x, x + d, y);
    transformer::ApplyRope(y, d, c, s);
    for (size_t i = 0; i < d / 2; ++i) {
      const long double theta =
          static_cast<long double>(t) * std::pow(10000.0L, -2.0L * i / static_cast<long double>(d));
      const long double ct = std::cos(theta), st = std::sin(theta);
      const long double lo = ct * x[i] - st * x[i + d / 2];
      const long double hi = st * x[i] + ct * x[i + d / 2];
      EXPECT_NEAR(y[i], static_cast<double>(lo), 2e-6) << "t " << t << " pair " << i;
      EXPECT_NEAR(y[i + d / 2], static_cast<double>(hi), 2e-6) << "t " << t << " pair " << i;
    }
    if (t == 0) {
      for (size_t i = 0; i < d; ++i) EXPECT_EQ(y[i], x[i]) << "position 0 is the identity";
    }
  }
}

// Source: Holtzman et al. 2019, "The Curious Case of Neural Text Degeneration" (nucleus
// sampling): draw from the smallest set of most probable tokens whose probability mass is at
// least p, renormalised. Probabilities here are softmax of chosen logits, computed in the test.
TEST(Sampler, NucleusDrawsOnlyFromTheTopMassInProportion) {
  const float logits[5] = {2.0f, 0.0f, 1.0f, -1.0f, 1.0f};
  double p[5], sum = 0;
  for (int i = 0; i < 5; ++i) sum += p[i] = std::exp(static_cast<double>(logits[i]));
  for (double& v : p) v /= sum;
  // Sorted: 0 (0.521), 2 and 4 (0.191 each; 2 first on the tie), 1, 3. With top_p 0.8 the
  // nucleus is {0, 2, 4} (0.521 + 0.191 = 0.712 < 0.8 <= 0.904).
  ASSERT_LT(p[0] + p[2], 0.8);
  ASSERT_GE(p[0] + p[2] + p[4], 0.8);
  transformer::Random rng(42);
  std::vector<double> scratch;
  std::vector<int32_t> order;
  transformer::SamplerOptions o{1.0f, 0.8f};
  std::map<int32_t, int> counts;
  const int n = 20000;
  for (int i = 0; i < n; ++i) ++counts[transformer::Sample(logits, 5, o, rng, scratch, order)];
  EXPECT_EQ(counts.count(1) + counts.count(3), 0u) << "drew outside the nucleus";
  const double mass = p[0] + p[2] + p[4];
  for (int k : {0, 2, 4}) {
    const double want = p[k] / mass, got = static_cast<double>(counts[k]) / n;
    EXPECT_NEAR(got, want, 4 * std::sqrt(want * (1 - want) / n)) << "token " << k;
  }
  // Temperature 0 is argmax with ties to the lower index.
  const float tie[4] = {1.0f, 3.0f, 3.0f, 0.0f};
  EXPECT_EQ(transformer::Sample(tie, 4, {0.0f, 1.0f}, rng, scratch, order), 1);
}

TEST(TransformerPooling, FirstAndLastPoolTheRightTokens) {
  testing::TempDir dir;
  auto first = Open(MakeModel(dir, "first", Classifier("first")), 1);
  auto last = Open(MakeModel(dir, "last", Classifier("last")), 1);
  auto mean = Open(MakeModel(dir, "mean", Classifier("mean")), 1);
  std::vector<int32_t> a = Tokens(10, 30, 1), b = a;
  b[5] = (b[5] + 1) % 30;
  b[9] = (b[9] + 1) % 30;
  float ya[3], yb[3];
  // Causal attention: token 0 sees only itself, so "first" ignores every later token.
  ASSERT_TRUE(first->forward_tokens(a.data(), 1, 10, ya).ok());
  ASSERT_TRUE(first->forward_tokens(b.data(), 1, 10, yb).ok());
  EXPECT_TRUE(std::equal(ya, ya + 3, yb));
  // "last" and "mean" see the changed tokens.
  ASSERT_TRUE(last->forward_tokens(a.data(), 1, 10, ya).ok());
  ASSERT_TRUE(last->forward_tokens(b.data(), 1, 10, yb).ok());
  EXPECT_FALSE(std::equal(ya, ya + 3, yb));
  // Mean pooling of a one-token sequence is that token: equals "first" and "last" on the same
  // weights (the three models share a seed, so their weights are the same).
  float yf[3], yl[3], ym[3];
  ASSERT_TRUE(first->forward_tokens(a.data(), 1, 1, yf).ok());
  ASSERT_TRUE(last->forward_tokens(a.data(), 1, 1, yl).ok());
  ASSERT_TRUE(mean->forward_tokens(a.data(), 1, 1, ym).ok());
  EXPECT_TRUE(std::equal(yf, yf + 3, yl));
  EXPECT_TRUE(std::equal(yf, yf + 3, ym));
  // Two sequences in one call give [2, C], each as alone.
  std::vector<int32_t> ab = a;
  ab.insert(ab.end(), b.begin(), b.end());
  float y2[6];
  ASSERT_TRUE(mean->forward_tokens(ab.data(), 2, 10, y2).ok());
  ASSERT_TRUE(mean->forward_tokens(b.data(), 1, 10, yb).ok());
  for (int i = 0; i < 3; ++i) EXPECT_NEAR(y2[3 + i], yb[i], 1e-5f * (1 + std::fabs(yb[i])));
}

TEST_F(TransformerTest, CliRunWritesLogitsAndRoutes) {
  const std::string cli = testing::SprigCli();
  testing::TempDir dir;
  auto r = testing::RunPython(
      "import sys, numpy as np; np.save(sys.argv[1], (np.arange(2*9).reshape(2, 9) * 7 % 64)"
      ".astype(np.int32))",
      {dir.File("tokens.npy")});
  ASSERT_EQ(r.exit_code, 0) << r.output;
  r = testing::Run(cli + " run " + Quote(lm_) + " --input " + Quote(dir.File("tokens.npy")) +
                   " --output " + Quote(dir.File("out.npy")) + " --routes " +
                   Quote(dir.File("routes.npz")) + " --batch 1");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  // Source: numpy.load of what the CLI wrote; the logits must equal forward_tokens'.
  r = testing::RunPython(
      "import sys, numpy as np\n"
      "y = np.load(sys.argv[1]); r = np.load(sys.argv[2])\n"
      "print(y.dtype, y.shape, sorted((k, r[k].dtype.name, r[k].shape) for k in r.files))\n"
      "y.astype(np.float32).tofile(sys.argv[3])",
      {dir.File("out.npy"), dir.File("routes.npz"), dir.File("out.raw")});
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(r.output.find("float32 (2, 9, 64) [('layer0', 'int32', (18,)), ('layer1', 'int32', "
                          "(18, 2)), ('layer2', 'int32', (18,))]"),
            std::string::npos)
      << r.output;
  std::vector<int32_t> tokens(18);
  for (int i = 0; i < 18; ++i) tokens[i] = i * 7 % 64;
  auto s = Open(lm_, 1);
  std::vector<float> want(18 * 64);
  ASSERT_TRUE(s->forward_tokens(tokens.data(), 2, 9, want.data()).ok());
  const std::string raw = testing::ReadFile(dir.File("out.raw"));
  ASSERT_EQ(raw.size(), want.size() * 4);
  EXPECT_EQ(std::memcmp(raw.data(), want.data(), raw.size()), 0);
  // Tokens outside the vocabulary and float inputs are refused with exit code 2.
  r = testing::RunPython("import sys, numpy as np; np.save(sys.argv[1], np.array([1, 64]))",
                         {dir.File("bad.npy")});
  r = testing::Run(cli + " run " + Quote(lm_) + " --input " + Quote(dir.File("bad.npy")) +
                   " --output " + Quote(dir.File("o.npy")));
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("token 64 at [0, 1]"), std::string::npos) << r.output;
}

TEST_F(TransformerTest, CliGenerateStreamsBytes) {
  const std::string cli = testing::SprigCli();
  const std::string cmd = cli + " generate " + Quote(byte_lm_) +
                          " --prompt 'Hello' --count 20 --seed 9 --temperature 0.7 --top-p 0.95";
  testing::TempDir dir;
  // stdout alone: the subshell sends stderr to a file before Run() merges the streams.
  auto a = testing::Run("(" + cmd + " 2>" + Quote(dir.File("err")) + ")");
  ASSERT_EQ(a.exit_code, 0) << a.output;
  EXPECT_EQ(a.output.size(), 20u) << "one byte per generated token on stdout";
  EXPECT_NE(testing::ReadFile(dir.File("err")).find("must not be relied upon"), std::string::npos);
  auto b = testing::Run("(" + cmd + " --threads 2 2>/dev/null)");
  EXPECT_EQ(a.output, b.output);
  // The same bytes through the API.
  auto s = Open(byte_lm_, 1);
  GenerateOptions o;
  o.count = 20;
  o.seed = 9;
  o.temperature = 0.7f;
  o.top_p = 0.95f;
  std::string text;
  ASSERT_TRUE(s->generate({'H', 'e', 'l', 'l', 'o'}, o, [&](int32_t t) {
                 text.push_back(static_cast<char>(t));
                 return true;
               }).ok());
  EXPECT_EQ(text, a.output);
  // A model without a tokenizer: refused.
  auto r = testing::Run(cli + " generate " + Quote(lm_) + " --prompt hi");
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("needs a transformer with a tokenizer"), std::string::npos) << r.output;
}

}  // namespace
}  // namespace sprig
