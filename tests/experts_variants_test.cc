// The experts layer's router scorings and shared experts through config.json (parse, canonical
// form, errors), the loader's check, the .sprig header, the tensor list and the cost counts.
// `sprig inspect` names them. Their numerics are checked against the PyTorch reference in
// reference_stack_test.cc and against models built from plain torch.nn modules in
// experts_torch_test.cc.
#include <gtest/gtest.h>

#include <string>

#include <flatbuffers/flatbuffers.h>
#include <nlohmann/json.hpp>

#include "converter/config/config_equal.h"
#include "converter/config/config_json.h"
#include "format/header_config.h"
#include "model/config_check.h"
#include "model/flops.h"
#include "model/tensor_spec.h"
#include "support/test_util.h"

namespace sprig {
namespace {

// A stack of one experts layer with extra fields `fields` (JSON members, no braces).
std::string OneExpertsLayer(const std::string& fields) {
  return R"({"family":"stack","input_dim":6,"layers":[{"kind":"experts","experts":4,"top_k":2,)"
         R"("width":5,"out":3)" +
         (fields.empty() ? "" : "," + fields) + "}]}";
}

Result<ModelConfig> Parse(const std::string& fields) {
  return convert::ParseConfig(OneExpertsLayer(fields), "config.json");
}

std::string ErrorOf(const std::string& fields) {
  auto r = Parse(fields);
  return r.ok() ? "OK" : r.status().message();
}

TEST(ConfigExperts, Defaults) {
  auto c = Parse("");
  ASSERT_TRUE(c.ok()) << c.status().message();
  const LayerConfig& l = c->layers[0];
  EXPECT_EQ(l.router_scoring, RouterScoring::kSoftmax);
  EXPECT_TRUE(l.renormalize);
  EXPECT_EQ(l.shared_experts, 0u);
  EXPECT_EQ(l.shared_width, 0u);
  EXPECT_FALSE(l.shared_gate);
  // shared_width defaults to the routed experts' width.
  c = Parse(R"("shared_experts":2)");
  ASSERT_TRUE(c.ok()) << c.status().message();
  EXPECT_EQ(c->layers[0].shared_width, 5u);
  EXPECT_FALSE(c->layers[0].shared_gate);
}

TEST(ConfigExperts, ParsesEveryScoringAndRoundTrips) {
  const char* variants[] = {
      R"("router_scoring":"softmax","renormalize":false)",
      R"("router_scoring":"sigmoid")",
      R"("router_scoring":"sigmoid","renormalize":false)",
      R"("router_scoring":"softmax_chosen")",
      R"("router_scoring":"softmax_chosen","renormalize":true,"shared_experts":1)",
      R"("shared_experts":3,"shared_width":7,"shared_gate":true,"gated":true,"bias":false)",
  };
  for (const char* fields : variants) {
    auto c = Parse(fields);
    ASSERT_TRUE(c.ok()) << fields << ": " << c.status().message();
    const std::string text = convert::ConfigToJson(*c);
    auto again = convert::ParseConfig(text, "canonical.json");
    ASSERT_TRUE(again.ok()) << again.status().message() << "\n" << text;
    EXPECT_TRUE(*again == *c) << text;
    EXPECT_EQ(convert::ConfigToJson(*again), text);
    EXPECT_NE(text.find("\"router_scoring\""), std::string::npos) << text;
  }
  auto c =
      Parse(R"("router_scoring":"sigmoid","shared_experts":3,"shared_width":7,"shared_gate":true)");
  ASSERT_TRUE(c.ok());
  EXPECT_EQ(c->layers[0].router_scoring, RouterScoring::kSigmoid);
  EXPECT_EQ(c->layers[0].shared_experts, 3u);
  EXPECT_EQ(c->layers[0].shared_width, 7u);
  EXPECT_TRUE(c->layers[0].shared_gate);
}

TEST(ConfigExperts, Errors) {
  EXPECT_EQ(ErrorOf(R"("router_scoring":"tanh")"),
            "config.json: layers[0].router_scoring must be one of \"softmax\", \"sigmoid\" or "
            "\"softmax_chosen\", got \"tanh\"");
  EXPECT_EQ(ErrorOf(R"("router_scoring":"softmax_chosen","renormalize":false)"),
            "config.json: layers[0].renormalize is false but router_scoring softmax_chosen "
            "always normalises over the chosen experts; leave renormalize out or set it true");
  EXPECT_EQ(ErrorOf(R"("shared_width":4)"),
            "config.json: layers[0].shared_width is given but layers[0].shared_experts is 0 or "
            "absent; it applies only to a layer with shared experts");
  EXPECT_EQ(ErrorOf(R"("shared_experts":0,"shared_gate":true)"),
            "config.json: layers[0].shared_gate is given but layers[0].shared_experts is 0 or "
            "absent; it applies only to a layer with shared experts");
  EXPECT_EQ(ErrorOf(R"("shared_experts":4097)"),
            "config.json: layers[0].shared_experts must be between 0 and 4096, got 4097");
  EXPECT_EQ(ErrorOf(R"("shared_experts":1,"shared_width":0)"),
            "config.json: layers[0].shared_width must be between 1 and 16777216, got 0");
  EXPECT_EQ(ErrorOf(R"("shared_experts":1,"shared_gate":1)"),
            "config.json: layers[0].shared_gate must be true or false, got 1");
  // The fields belong to experts layers only.
  auto dense = convert::ParseConfig(
      R"({"family":"stack","input_dim":6,"layers":[{"kind":"dense","width":4,"out":3,)"
      R"("shared_experts":1}]})",
      "config.json");
  ASSERT_FALSE(dense.ok());
  EXPECT_NE(
      dense.status().message().find("field \"shared_experts\" does not apply to a dense layer"),
      std::string::npos)
      << dense.status().message();
}

// The loader checks headers with the same rules (a header is untrusted).
TEST(ConfigExperts, ValidateRefusesInconsistentHeaderValues) {
  auto c = Parse(R"("shared_experts":2)");
  ASSERT_TRUE(c.ok());
  ModelConfig bad = *c;
  bad.layers[0].router_scoring = RouterScoring::kSoftmaxChosen;
  bad.layers[0].renormalize = false;
  EXPECT_EQ(ValidateConfig(bad, "m.sprig").message(),
            "m.sprig: layers[0].renormalize is false, but router_scoring softmax_chosen always "
            "normalises over the chosen experts");
  bad = *c;
  bad.layers[0].shared_width = 0;
  EXPECT_EQ(ValidateConfig(bad, "m.sprig").message(),
            "m.sprig: layers[0].shared_width is 0, expected 1..16777216");
  bad = *c;
  bad.layers[0].shared_experts = 0;
  EXPECT_EQ(ValidateConfig(bad, "m.sprig").message(),
            "m.sprig: layers[0].shared_width or shared_gate is set but shared_experts is 0");
}

TEST(ExpertsVariants, HeaderRoundTrip) {
  auto c = Parse(
      R"("router_scoring":"softmax_chosen","shared_experts":2,"shared_width":3,"shared_gate":true)");
  ASSERT_TRUE(c.ok());
  flatbuffers::FlatBufferBuilder b;
  b.Finish(format::BuildConfig(b, *c));
  auto back = format::ReadConfig(*flatbuffers::GetRoot<fb::Config>(b.GetBufferPointer()), "m");
  ASSERT_TRUE(back.ok()) << back.status().message();
  EXPECT_TRUE(*back == *c);
}

// A header written before these fields existed reads as a softmax layer without shared experts.
TEST(ExpertsVariants, OlderHeaderReadsAsSoftmaxWithoutSharedExperts) {
  flatbuffers::FlatBufferBuilder b;
  fb::LayerBuilder lb(b);
  lb.add_kind(fb::LayerKind::Experts);
  lb.add_experts(4);
  lb.add_top_k(2);
  lb.add_width(5);
  lb.add_in_dim(6);
  lb.add_out_dim(3);
  auto layer = lb.Finish();
  auto layers = b.CreateVector(std::vector<flatbuffers::Offset<fb::Layer>>{layer});
  fb::ConfigBuilder cb(b);
  cb.add_input_dim(6);
  cb.add_layers(layers);
  b.Finish(cb.Finish());
  auto read = format::ReadConfig(*flatbuffers::GetRoot<fb::Config>(b.GetBufferPointer()), "m");
  ASSERT_TRUE(read.ok()) << read.status().message();
  const LayerConfig& l = read->layers[0];
  EXPECT_EQ(l.router_scoring, RouterScoring::kSoftmax);
  EXPECT_TRUE(l.renormalize);
  EXPECT_EQ(l.shared_experts, 0u);
  EXPECT_EQ(l.shared_width, 0u);
  EXPECT_FALSE(l.shared_gate);
  EXPECT_TRUE(ValidateConfig(*read, "m").ok());
}

TEST(ExpertsVariants, TensorsOfSharedExpertsAreHot) {
  auto c = Parse(R"("shared_experts":2,"shared_width":3,"shared_gate":true,"gated":true)");
  ASSERT_TRUE(c.ok());
  std::string names;
  for (const TensorSpec& t : ExpectedTensors(*c)) {
    if (t.name.find("shared") == std::string::npos) continue;
    names += t.name + " " + ShapeToString(t.shape) + (t.routed ? " routed" : "") + "\n";
  }
  EXPECT_EQ(names,
            "layers.0.shared.fc1.weight [2, 3, 6]\n"
            "layers.0.shared.fc1.bias [2, 3]\n"
            "layers.0.shared.gate.weight [2, 3, 6]\n"
            "layers.0.shared.gate.bias [2, 3]\n"
            "layers.0.shared.fc2.weight [2, 3, 3]\n"
            "layers.0.shared.fc2.bias [2, 3]\n"
            "layers.0.shared_gate.weight [1, 6]\n"
            "layers.0.shared_gate.bias [1]\n");
  c = Parse(R"("shared_experts":1,"bias":false,"shared_gate":true)");
  ASSERT_TRUE(c.ok());
  names.clear();
  for (const TensorSpec& t : ExpectedTensors(*c)) {
    if (t.name.find("shared") != std::string::npos) names += t.name + "\n";
  }
  EXPECT_EQ(names,
            "layers.0.shared.fc1.weight\nlayers.0.shared.fc2.weight\n"
            "layers.0.shared_gate.weight\n");
}

// in 6, out 3, 4 experts of width 5 (top 2), 2 shared of width 3, with a gate and biases.
TEST(ExpertsVariants, CostCountsSharedExpertsAndGate) {
  auto c = Parse(R"("shared_experts":2,"shared_width":3,"shared_gate":true)");
  ASSERT_TRUE(c.ok());
  const LayerCost cost = CostOf(c->layers[0]);
  const uint64_t expert_params = 5 * 6 + 5 + 3 * 5 + 3;  // fc1 + bias, fc2 + bias
  const uint64_t shared_params = 3 * 6 + 3 + 3 * 3 + 3;
  EXPECT_EQ(cost.params, 4 * (6 + 1) + 4 * expert_params + 2 * shared_params + 6 + 1);
  const uint64_t expert_flops = 2 * 5 * 6 + 2 * 5 * 3, shared_flops = 2 * 3 * 6 + 2 * 3 * 3;
  EXPECT_EQ(cost.flops_per_token, 2 * 4 * 6 + 2 * expert_flops + 2 * shared_flops + 2 * 6);
  // The dense twin holds every routed and shared unit: 4 * 5 + 2 * 3.
  EXPECT_EQ(cost.dense_width, 26u);
  EXPECT_EQ(cost.dense_flops_per_token, 2 * 26 * 6 + 2 * 26 * 3);
  // The parameter count agrees with the tensors the layer has.
  uint64_t elements = 0;
  for (const TensorSpec& t : ExpectedTensors(*c)) elements += ElementCount(t.shape);
  EXPECT_EQ(cost.params, elements);
}

// `sprig inspect` names the scoring and the shared experts on a line below the layer (human
// form) and in the layer's description (--json), with the FLOPs model/flops.h counts.
TEST(ExpertsVariants, InspectNamesScoringAndSharedExperts) {
  testing::TempDir dir;
  const std::string model = testing::PackSynthesized(
      dir, "m",
      OneExpertsLayer(
          R"("router_scoring":"softmax_chosen","shared_experts":2,"shared_width":3,"shared_gate":true)"));
  auto r = testing::Run(testing::SprigCli() + " inspect " + testing::Quote(model));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(r.output.find(
                "\n      softmax_chosen router; 2 shared experts of width 3 with a sigmoid gate\n"),
            std::string::npos)
      << r.output;
  r = testing::Run(testing::SprigCli() + " inspect --json " + testing::Quote(model));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const nlohmann::json j = nlohmann::json::parse(r.output, nullptr, false);
  ASSERT_TRUE(j.is_object()) << r.output;
  EXPECT_EQ(j["layers"][0]["description"],
            "experts 4 experts, top 2, width 5, relu; softmax_chosen router; 2 shared experts of "
            "width 3 with a sigmoid gate");
  auto c = Parse(
      R"("router_scoring":"softmax_chosen","shared_experts":2,"shared_width":3,"shared_gate":true)");
  ASSERT_TRUE(c.ok());
  EXPECT_EQ(j["layers"][0]["flops_per_token"], CostOf(c->layers[0]).flops_per_token);
  EXPECT_EQ(j["layers"][0]["dense_width"], 26);
  // The default form keeps its one-line description.
  const std::string plain = testing::PackSynthesized(dir, "plain", OneExpertsLayer(""));
  r = testing::Run(testing::SprigCli() + " inspect --json " + testing::Quote(plain));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_EQ(nlohmann::json::parse(r.output)["layers"][0]["description"],
            "experts 4 experts, top 2, width 5, relu");
}

}  // namespace
}  // namespace sprig
