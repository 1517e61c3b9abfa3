// Experts layers against mixtures of experts written as common MoE training code writes them
// (tests/python/experts_torch_reference.py): a torch.nn.Linear router without bias, experts as an
// nn.ModuleList of small MLP modules under their own names (`moe.experts.3.w1.weight`), the
// choice made with torch.topk, shared experts scaled by sigmoid(nn.Linear(d, 1)). The forms are
// those of published code: Mixtral's sparse MoE block (softmax, top-k, renormalised), the same
// without renormalising (Switch, Qwen2-MoE's default), DeepSeek-V3's sigmoid scoring normalised
// over the chosen, Mistral's reference MoeLayer (top-k on logits, softmax over the chosen),
// Qwen2-MoE's gated shared expert and DeepSeek-MoE's ungated shared experts. PyTorch computes
// the reference outputs and routes; NumPy saves the weights under the module's own names; the
// mapping file stacks each expert's tensors (`sprig pack --map`). Each case must verify with
// routes required at f32 (every route agreeing) and at f16 (every disagreement explained by
// rounding); a config that misdescribes the module (another scoring, renormalising or not) must
// fail verify. The Python exporter's load_weights and weight_arrays take the same mapping file:
// the reference module it builds must match the torch.nn module, and the arrays it writes back
// must be the module's own.
#include <gtest/gtest.h>

#include <cstdio>
#include <nlohmann/json.hpp>
#include <string>

#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

const char* const kCases[] = {"softmax_renormalized", "softmax_plain", "sigmoid_normalized",
                              "softmax_over_chosen",  "shared_gated",  "shared_plain",
                              "shared_gated_biased"};

// Writes case `name` of the torch.nn models into dir/name and returns that folder.
std::string Write(const testing::TempDir& dir, const std::string& name) {
  const auto r = testing::Run(
      testing::Python() + " " +
      Quote(std::string(SPRIG_SOURCE_DIR) + "/tests/python/experts_torch_reference.py") + " " +
      name + " " + Quote(dir.File(name)));
  EXPECT_EQ(r.exit_code, 0) << r.output;
  return dir.File(name);
}

testing::CommandResult Pack(const std::string& ref, const std::string& config,
                            const std::string& out, const std::string& dtype) {
  return testing::Run(testing::SprigCli() + " pack " + Quote(config) + " " +
                      Quote(ref + "/weights.npz") + " --map " + Quote(ref + "/mapping.json") +
                      " --dtype " + dtype + " -o " + Quote(out));
}

// `sprig verify --require-routes --json`: the exit code and the report (null unless 0 or 1).
std::pair<int, nlohmann::json> Verify(const std::string& model, const std::string& ref) {
  const auto r = testing::Run(testing::SprigCli() + " verify " + Quote(model) + " " +
                              Quote(ref + "/reference.npz") + " --require-routes --json");
  nlohmann::json j;
  if (r.exit_code == 0 || r.exit_code == 1) j = nlohmann::json::parse(r.output, nullptr, false);
  return {r.exit_code, j};
}

class ExpertsTorchNn : public ::testing::TestWithParam<const char*> {};

TEST_P(ExpertsTorchNn, VerifiesAtF32AndF16) {
  testing::TempDir dir;
  const std::string ref = Write(dir, GetParam());
  // Under its own names the model does not pack: the mapping is what makes it sprig's layer.
  auto r = testing::Run(testing::SprigCli() + " pack " + Quote(ref + "/config.json") + " " +
                        Quote(ref + "/weights.npz") + " -o " + Quote(dir.File("plain.sprig")));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("layers.0.router.weight"), std::string::npos) << r.output;
  // The Python exporter takes the same mapping file both ways.
  r = testing::Run(
      "PYTHONPATH=" + Quote(std::string(SPRIG_SOURCE_DIR) + "/converter/python") + " " +
      testing::Python() + " " +
      Quote(std::string(SPRIG_SOURCE_DIR) + "/tests/python/experts_torch_reference.py") +
      " exporter " + Quote(ref));
  EXPECT_EQ(r.exit_code, 0) << r.output;
  for (const std::string dtype : {"f32", "f16"}) {
    const std::string model = dir.File(dtype + ".sprig");
    r = Pack(ref, ref + "/config.json", model, dtype);
    ASSERT_EQ(r.exit_code, 0) << r.output;
    const auto [code, j] = Verify(model, ref);
    ASSERT_EQ(code, 0) << GetParam() << " " << dtype << "\n" << j.dump(1);
    ASSERT_EQ(j["routing"].size(), 1u) << j.dump(1);
    const nlohmann::json& routing = j["routing"][0];
    EXPECT_EQ(routing["unexplained"], 0) << j.dump(1);
    // Unit-scale random rows leave no routing margin small enough for f32 rounding to flip.
    if (dtype == "f32") {
      EXPECT_EQ(routing["agreement_percent"], 100.0) << j.dump(1);
    }
    std::printf("[ %s %s ] outputs max abs error %.3g, routing agreement %.2f%% (%s explained)\n",
                GetParam(), dtype.c_str(), j["outputs"]["max_abs_error"].get<double>(),
                routing["agreement_percent"].get<double>(), routing["explained"].dump().c_str());
  }
}

// Each case is named for its form, so docs/variants.md can name the test that covers a variant.
INSTANTIATE_TEST_SUITE_P(CommonMoeForms, ExpertsTorchNn, ::testing::ValuesIn(kCases),
                         [](const ::testing::TestParamInfo<const char*>& info) {
                           return std::string(info.param);
                         });

// The check can fail: the same weights under a config that describes another form (renormalising
// where the module does not, softmax where it scores by sigmoid, sigmoid where it takes a softmax
// over the chosen) do not verify. And the forms docs/model-semantics.md calls equivalent are:
// Mixtral's softmax-then-renormalise packed as softmax_chosen verifies.
TEST(ExpertsTorchNnConfigs, OnlyTheFormOfTheModuleOrAnEquivalentVerifies) {
  testing::TempDir dir;
  struct Edit {
    const char* name;
    const char* python;  // applied to the config dict `c`
    int verify_exit;
  };
  for (const Edit e :
       {Edit{"softmax_plain", "c['layers'][0]['renormalize'] = True", 1},
        Edit{"sigmoid_normalized", "c['layers'][0]['router_scoring'] = 'softmax'", 1},
        Edit{"softmax_over_chosen", "c['layers'][0]['router_scoring'] = 'sigmoid'", 1},
        Edit{"softmax_renormalized", "c['layers'][0]['router_scoring'] = 'softmax_chosen'", 0}}) {
    const std::string ref = Write(dir, e.name);
    const std::string config = dir.File(std::string(e.name) + ".edited.json");
    auto r =
        testing::RunPython(std::string("import json, sys\nc = json.load(open(sys.argv[1]))\n") +
                               e.python + "\njson.dump(c, open(sys.argv[2], 'w'))",
                           {ref + "/config.json", config});
    ASSERT_EQ(r.exit_code, 0) << r.output;
    const std::string model = dir.File(std::string(e.name) + ".sprig");
    r = Pack(ref, config, model, "f32");
    ASSERT_EQ(r.exit_code, 0) << r.output;
    const auto [code, j] = Verify(model, ref);
    EXPECT_EQ(code, e.verify_exit) << e.name << ": " << e.python << "\n" << j.dump(1);
  }
}

}  // namespace
}  // namespace sprig
