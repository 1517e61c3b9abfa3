// The opt-in compute mode "i8" (SessionOptions::compute, int8 activations): what it accepts and
// refuses, that it changes results (it is not the float mode under another name) by no more
// than the activation rounding allows, and that a row's result still does not depend on its
// batch, on how the batch is split, on single-row calls or on the thread count, on every
// kernel path. The kernels themselves are tested against their definition in
// quantized_kernels_test.cc.
#include <gtest/gtest.h>

#include <cmath>
#include <cstring>
#include <memory>
#include <random>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "io/tensor_archive.h"
#include "kernels/kernels.h"
#include "sprig/model.h"
#include "sprig/session.h"
#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

// Every layer kind, gated and not, with and without biases, shared experts and a shared gate.
constexpr const char* kEveryKind = R"({"family":"stack","input_dim":37,"layers":[
  {"kind":"dense","width":40,"activation":"gelu","out":36},
  {"kind":"tree","mode":"leaf","depth":3,"leaf_width":12,"activation":"relu","gated":true,"out":35},
  {"kind":"tree","mode":"path","depth":5,"activation":"gelu_tanh","out":70},
  {"kind":"experts","experts":4,"top_k":2,"width":24,"activation":"silu","gated":true,
   "shared_experts":1,"shared_width":16,"shared_gate":true,"out":33},
  {"kind":"tree","mode":"leaf","depth":2,"leaf_width":9,"activation":"gelu","bias":false,"out":17},
  {"kind":"experts","experts":3,"top_k":1,"width":6,"renormalize":false,"bias":false,"out":9},
  {"kind":"dense","width":8,"activation":"relu","gated":true,"bias":false,"out":7}]})";

constexpr size_t kIn = 37, kOut = 7, kRows = 40;

// Synthesizes kEveryKind and packs it in `dtype`; returns the model file.
std::string PackEveryKind(const testing::TempDir& dir, const std::string& dtype) {
  const std::string json = dir.File("every.json"), npz = dir.File("every.npz");
  const std::string model = dir.File("every-" + dtype + ".sprig");
  testing::WriteFile(json, kEveryKind);
  auto r = testing::Run(testing::SprigCli() + " synth " + Quote(json) + " -o " + Quote(npz) +
                        " --seed 7 --force");
  EXPECT_EQ(r.exit_code, 0) << r.output;
  r = testing::Run(testing::SprigCli() + " pack " + Quote(json) + " " + Quote(npz) + " -o " +
                   Quote(model) + " --force --dtype " + dtype);
  EXPECT_EQ(r.exit_code, 0) << r.output;
  return model;
}

std::vector<float> RandomRows(size_t rows, uint32_t seed) {
  std::mt19937 rng(seed);
  std::normal_distribution<float> normal(0.0f, 1.0f);
  std::vector<float> x(rows * kIn);
  for (float& v : x) v = normal(rng);
  return x;
}

std::unique_ptr<Session> NewSession(const std::shared_ptr<const Model>& model, size_t threads,
                                    const std::string& compute, const std::string& path = "") {
  SessionOptions options;
  options.threads = threads;
  options.compute = compute;
  options.kernel_path = path;
  auto session = Session::create(model, options);
  EXPECT_TRUE(session.ok()) << session.status().message();
  return session.ok() ? std::move(*session) : nullptr;
}

// Outputs and every routed layer's choices of `x` run in calls of `sizes` rows.
struct Outcome {
  std::vector<float> y;
  std::vector<std::vector<int32_t>> routes;
};
Outcome Forward(Session& session, const std::vector<float>& x, const std::vector<size_t>& sizes) {
  Outcome run;
  run.y.resize(x.size() / kIn * kOut);
  size_t r0 = 0;
  for (size_t n : sizes) {
    Routes part;
    EXPECT_TRUE(session.forward(x.data() + r0 * kIn, n, run.y.data() + r0 * kOut, &part).ok());
    run.routes.resize(part.layers.size());
    for (size_t l = 0; l < part.layers.size(); ++l) {
      run.routes[l].insert(run.routes[l].end(), part.layers[l].choices.begin(),
                           part.layers[l].choices.end());
    }
    r0 += n;
  }
  return run;
}

class Int8Activations : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = new testing::TempDir;
    for (const char* dtype : {"i8", "f32"}) {
      auto model = Model::open(PackEveryKind(*dir_, dtype));
      ASSERT_TRUE(model.ok()) << model.status().message();
      (std::string(dtype) == "i8" ? i8_ : f32_) = new std::shared_ptr<const Model>(*model);
    }
  }
  static void TearDownTestSuite() {
    delete i8_;
    delete f32_;
    delete dir_;
  }
  void SetUp() override { ASSERT_TRUE(i8_ != nullptr && f32_ != nullptr); }

  static inline testing::TempDir* dir_ = nullptr;
  static inline std::shared_ptr<const Model>* i8_ = nullptr;
  static inline std::shared_ptr<const Model>* f32_ = nullptr;
};

TEST_F(Int8Activations, FloatIsTheDefaultAndOtherNamesAreRefused) {
  auto session = Session::create(*i8_);
  ASSERT_TRUE(session.ok());
  EXPECT_STREQ((*session)->compute(), "f32");
  EXPECT_STREQ(NewSession(*i8_, 1, "i8")->compute(), "i8");
  SessionOptions options;
  options.compute = "int8";
  auto refused = Session::create(*i8_, options);
  ASSERT_FALSE(refused.ok());
  EXPECT_NE(refused.status().message().find("\"int8\""), std::string::npos)
      << refused.status().message();
}

// Without an i8-stored feed-forward weight the mode has nothing to run on: refused, naming the
// model and how to pack it.
TEST_F(Int8Activations, RefusedForAModelWithoutInt8Weights) {
  SessionOptions options;
  options.compute = "i8";
  auto refused = Session::create(*f32_, options);
  ASSERT_FALSE(refused.ok());
  const std::string message = refused.status().message();
  EXPECT_NE(message.find((*f32_)->path()), std::string::npos) << message;
  EXPECT_NE(message.find("--dtype i8"), std::string::npos) << message;
}

// A path tree's output rows are added as float activations times the stored rows: a model whose
// only i8 tensor is nodes.out gives the mode nothing to run on either.
TEST(Int8ActivationsRefusal, PathTreeOutputRowsAloneDoNotCount) {
  testing::TempDir dir;
  const std::string json = dir.File("p.json"), npz = dir.File("p.npz"), model = dir.File("p.sprig");
  testing::WriteFile(json, R"({"family":"stack","input_dim":16,"layers":[
    {"kind":"tree","mode":"path","depth":3,"activation":"gelu","out":8}]})");
  ASSERT_EQ(
      testing::Run(testing::SprigCli() + " synth " + Quote(json) + " -o " + Quote(npz)).exit_code,
      0);
  const auto packed =
      testing::Run(testing::SprigCli() + " pack " + Quote(json) + " " + Quote(npz) + " -o " +
                   Quote(model) + " --dtype-nodes f32 --dtype-records i8 --dtype-dense f32");
  ASSERT_EQ(packed.exit_code, 0) << packed.output;
  auto opened = Model::open(model);
  ASSERT_TRUE(opened.ok()) << opened.status().message();
  bool out_rows_i8 = false;
  for (const TensorDescription& t : (*opened)->tensor_descriptions()) {
    if (t.name == "layers.0.nodes.out") out_rows_i8 = t.dtype == DType::kI8;
    if (t.name == "layers.0.nodes.weight") {
      EXPECT_EQ(t.dtype, DType::kF32);
    }
  }
  ASSERT_TRUE(out_rows_i8) << "the packing this test relies on changed";
  SessionOptions options;
  options.compute = "i8";
  auto refused = Session::create(*opened, options);
  ASSERT_FALSE(refused.ok());
  EXPECT_NE(refused.status().message().find("--dtype i8"), std::string::npos);
}

// The mode changes results (so it ran), but only as far as int8 activations can: each layer's
// input rounded to 1/254 of its largest magnitude. Through seven layers the outputs stay within
// a few percent of the float mode's, relative to the outputs' RMS.
TEST_F(Int8Activations, ChangesResultsWithinTheActivationRounding) {
  const std::vector<float> x = RandomRows(kRows, 3);
  const Outcome f = Forward(*NewSession(*i8_, 1, "f32"), x, {kRows});
  const Outcome q = Forward(*NewSession(*i8_, 1, "i8"), x, {kRows});
  EXPECT_FALSE(testing::BitEqual(f.y, q.y));
  double diff = 0, norm = 0;
  for (size_t i = 0; i < f.y.size(); ++i) {
    diff += (double(f.y[i]) - q.y[i]) * (double(f.y[i]) - q.y[i]);
    norm += double(f.y[i]) * f.y[i];
  }
  ASSERT_GT(norm, 0);
  EXPECT_LT(std::sqrt(diff / norm), 0.1) << "relative RMS difference from the float mode";
  // Most routing decisions stay; rows whose margins lie within the rounding may flip.
  size_t same = 0, total = 0;
  for (size_t l = 0; l < f.routes.size(); ++l) {
    for (size_t i = 0; i < f.routes[l].size(); ++i) {
      same += f.routes[l][i] == q.routes[l][i];
      ++total;
    }
  }
  EXPECT_GT(double(same) / double(total), 0.8);
}

// The mode's promise: a row's result depends on nothing but the row, on every kernel path. With
// every feed-forward weight in i8, single-row calls (the matrix-vector kernels) also give the
// same bits as batched ones: integer sums are exact.
TEST_F(Int8Activations, BitIdenticalAcrossBatchesSplitsSingleRowsAndThreads) {
  const std::vector<float> x = RandomRows(kRows, 4);
  const std::vector<std::vector<size_t>> splits = {
      {16, 24}, {17, 23}, {2, 38}, {5, 7, 11, 13, 4}, std::vector<size_t>(kRows, 1)};
  for (kernels::KernelPath path : kernels::AvailablePaths()) {
    const std::string name = kernels::ToString(path);
    auto one = NewSession(*i8_, 1, "i8", name);
    auto two = NewSession(*i8_, 2, "i8", name);
    ASSERT_TRUE(one && two) << name;
    const Outcome base = Forward(*one, x, {kRows});
    ASSERT_EQ(base.routes.size(), 5u);
    for (Session* s : {one.get(), two.get()}) {
      for (const auto& split : splits) {
        const Outcome run = Forward(*s, x, split);
        std::string what = name + ", " + std::to_string(s->threads()) + " thread(s), calls of";
        for (size_t n : split) what.append(" ").append(std::to_string(n));
        EXPECT_TRUE(testing::BitEqual(run.y, base.y)) << what;
        EXPECT_EQ(run.routes, base.routes) << what;
      }
    }
  }
}

// `sprig run --compute i8` gives the session's bits, `--compute f32` (the default) the float
// mode's; `sprig bench --compute i8` names the mode in its JSON and table; both refuse the mode
// for a model without i8 weights (exit 2).
TEST_F(Int8Activations, RunAndBenchTakeTheComputeOption) {
  const std::vector<float> x = RandomRows(kRows, 5);
  const std::string in = dir_->File("x.npy");
  ASSERT_TRUE(io::WriteNpy(in,
                           io::NdArray::Owned(
                               "x", io::ElementType::kF32, {kRows, kIn},
                               std::vector<uint8_t>(reinterpret_cast<const uint8_t*>(x.data()),
                                                    reinterpret_cast<const uint8_t*>(x.data()) +
                                                        x.size() * sizeof(float))),
                           true)
                  .ok());
  for (const char* compute : {"f32", "i8"}) {
    const std::string out = dir_->File(std::string("y-") + compute + ".npy");
    const auto r =
        testing::Run(testing::SprigCli() + " run " + Quote((*i8_)->path()) + " --input " +
                     Quote(in) + " --output " + Quote(out) + " --batch 7 --compute " + compute);
    ASSERT_EQ(r.exit_code, 0) << r.output;
    auto archive = io::TensorArchive::Open(out);
    ASSERT_TRUE(archive.ok()) << archive.status().message();
    const io::NdArray& y = archive->arrays()[0];
    std::vector<float> got(y.elements());
    std::memcpy(got.data(), y.data, y.nbytes());
    EXPECT_TRUE(testing::BitEqual(got, Forward(*NewSession(*i8_, 1, compute), x, {kRows}).y))
        << compute;
  }
  const auto refused =
      testing::Run(testing::SprigCli() + " run " + Quote((*f32_)->path()) + " --input " +
                   Quote(in) + " --output " + Quote(dir_->File("no.npy")) + " --compute i8");
  EXPECT_EQ(refused.exit_code, 2) << refused.output;
  EXPECT_NE(refused.output.find("--dtype i8"), std::string::npos) << refused.output;

  const std::string json = dir_->File("bench.json");
  const auto bench =
      testing::Run(testing::SprigCli() + " bench " + Quote((*i8_)->path()) +
                   " --repeat 1 --rows 8 --batch 8 --compute i8 --json " + Quote(json));
  ASSERT_EQ(bench.exit_code, 0) << bench.output;
  EXPECT_EQ(nlohmann::json::parse(testing::ReadFile(json))["compute"], "i8");
  const auto text = testing::Run(testing::SprigCli() + " bench " + Quote((*i8_)->path()) +
                                 " --repeat 1 --rows 8 --batch 8 --compute i8");
  EXPECT_NE(text.output.find("compute i8"), std::string::npos) << text.output;
  EXPECT_EQ(testing::Run(testing::SprigCli() + " bench " + Quote((*f32_)->path()) +
                         " --repeat 1 --rows 8 --batch 8 --compute i8")
                .exit_code,
            2);
}

// A transformer's feed-forward layers take the mode too (its attention and head stay float):
// batched sequences give the bits of the same sequences run alone.
TEST(Int8ActivationsTransformer, SequencesIndependentOfTheirBatch) {
  testing::TempDir dir;
  const std::string json = dir.File("t.json"), npz = dir.File("t.npz"), model = dir.File("t.sprig");
  testing::WriteFile(json, R"({"family":"transformer","vocab_size":50,"d_model":32,"n_heads":4,
    "max_seq":16,"positions":"rope","norm":"rmsnorm","layers":[
    {"kind":"tree","mode":"path","depth":3,"activation":"gelu"},
    {"kind":"experts","experts":4,"top_k":2,"width":16,"activation":"silu"}]})");
  ASSERT_EQ(
      testing::Run(testing::SprigCli() + " synth " + Quote(json) + " -o " + Quote(npz)).exit_code,
      0);
  ASSERT_EQ(testing::Run(testing::SprigCli() + " pack " + Quote(json) + " " + Quote(npz) + " -o " +
                         Quote(model) + " --dtype i8")
                .exit_code,
            0);
  auto opened = Model::open(model);
  ASSERT_TRUE(opened.ok()) << opened.status().message();
  auto session = NewSession(*opened, 2, "i8");
  ASSERT_TRUE(session);
  const std::vector<int32_t> tokens = {1, 7, 3, 9, 22, 41, 5, 0, 13, 2, 8, 30};
  const size_t length = 6, vocab = 50;
  std::vector<float> both(2 * length * vocab), first(length * vocab), second(length * vocab);
  ASSERT_TRUE(session->forward_tokens(tokens.data(), 2, length, both.data()).ok());
  ASSERT_TRUE(session->forward_tokens(tokens.data(), 1, length, first.data()).ok());
  ASSERT_TRUE(session->forward_tokens(tokens.data() + length, 1, length, second.data()).ok());
  first.insert(first.end(), second.begin(), second.end());
  EXPECT_TRUE(testing::BitEqual(both, first));
}

}  // namespace
}  // namespace sprig
