// `sprig verify` against references written by the PyTorch exporter (converter/python/sprig_torch,
// Debian python3-torch): it passes on the exporter's own output for every layer kind and both
// families, fails (exit 1) with a precise report when a weight is perturbed or a routing node's
// bias is nudged after export, explains a flip that float16 rounding causes (IEEE 754 half
// precision, rounded by numpy.float16) in a tree and in an experts layer scored on its logits,
// and refuses references that do not fit the model (exit 2). With --compute i8 (int8
// activations) it explains flips with the activation rounding term, including one built so that
// only that term explains it, and still fails on a perturbed weight.
// Then against references written without the exporter (tests/python/external_reference.py): one
// of plain NumPy with inputs and outputs only, and one of a torch.nn model with names of its own.
#include <gtest/gtest.h>

#include <cmath>
#include <nlohmann/json.hpp>
#include <string>

#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

const char* kStack = R"({"family":"stack","input_dim":12,"layers":[
 {"kind":"dense","width":16,"activation":"gelu","out":10},
 {"kind":"tree","mode":"leaf","depth":3,"leaf_width":4,"activation":"relu","out":9},
 {"kind":"tree","mode":"path","depth":4,"activation":"silu","out":8},
 {"kind":"experts","experts":5,"top_k":2,"width":6,"activation":"gelu_tanh","gated":true,"out":5}]})";

const char* kTransformer = R"({"family":"transformer","vocab_size":40,"d_model":16,"n_heads":4,
 "n_kv_heads":2,"max_seq":48,"positions":"rope","norm":"rmsnorm","layers":[
 {"kind":"tree","mode":"leaf","depth":2,"leaf_width":8,"activation":"gelu"},
 {"kind":"tree","mode":"path","depth":3,"activation":"relu"},
 {"kind":"experts","experts":4,"top_k":2,"width":8,"activation":"silu"}]})";

std::string PythonPath() {
  return "PYTHONPATH=" + Quote(std::string(SPRIG_SOURCE_DIR) + "/converter/python") + " ";
}

// Exports a random model of `config` into dir/ref and returns its directory.
std::string Export(const testing::TempDir& dir, const std::string& config, int rows, int seed = 3) {
  testing::WriteFile(dir.File("c.json"), config);
  const auto r =
      testing::Run(PythonPath() + testing::Python() + " -m sprig_torch.export --config " +
                   Quote(dir.File("c.json")) + " --seed " + std::to_string(seed) + " --rows " +
                   std::to_string(rows) + " --out " + Quote(dir.File("ref")));
  EXPECT_EQ(r.exit_code, 0) << r.output;
  return dir.File("ref");
}

// Runs verify_cases.py; returns what it printed.
std::string Case(const std::string& args) {
  const auto r = testing::Run(
      PythonPath() + testing::Python() + " " +
      Quote(std::string(SPRIG_SOURCE_DIR) + "/tests/python/verify_cases.py") + " " + args);
  EXPECT_EQ(r.exit_code, 0) << r.output;
  return r.output;
}

std::string Pack(const std::string& ref, const std::string& out, const char* dtype) {
  const auto r = testing::Run(testing::SprigCli() + " pack " + Quote(ref + "/config.json") + " " +
                              Quote(ref + "/weights.npz") + " -o " + Quote(out) + " --force" +
                              " --dtype " + dtype);
  EXPECT_EQ(r.exit_code, 0) << r.output;
  return out;
}

struct Verified {
  int exit_code = -1;
  nlohmann::json report;
  std::string text;
};

// `options` are passed on to verify (such as "--compute i8").
Verified Verify(const std::string& model, const std::string& ref, const std::string& options = "") {
  Verified v;
  const std::string command = testing::SprigCli() + " verify " + Quote(model) + " " +
                              Quote(ref + "/reference.npz") + " " + options;
  auto r = testing::Run(command + " --json 2>/dev/null");
  v.exit_code = r.exit_code;
  if (r.exit_code == 0 || r.exit_code == 1) v.report = nlohmann::json::parse(r.output);
  v.text = testing::Run(command).output;
  return v;
}

class VerifyPasses : public ::testing::TestWithParam<const char*> {};

TEST_P(VerifyPasses, OnTheExportersOwnOutput) {
  testing::TempDir dir;
  const std::string config = GetParam();
  const std::string ref = Export(dir, config, 40);
  for (const char* dtype : {"f32", "f16"}) {
    const Verified v = Verify(Pack(ref, dir.File(std::string(dtype) + ".sprig"), dtype), ref);
    EXPECT_EQ(v.exit_code, 0) << dtype << "\n" << v.text;
    EXPECT_TRUE(v.report["pass"].get<bool>());
    EXPECT_EQ(v.report["storage"], dtype);
    EXPECT_TRUE(v.report["first_divergent_layer"].is_null());
    EXPECT_EQ(v.report["layer_outputs"].size(), 3u + (config.find("stack") != std::string::npos));
    EXPECT_EQ(v.report["routing"].size(), 3u);
    for (const auto& layer : v.report["routing"]) {
      EXPECT_EQ(layer["unexplained"], 0) << v.text;
      // Exported inputs are unit-scale random rows: no decision is near enough to zero for f32
      // to flip it.
      if (std::string(dtype) == "f32") {
        EXPECT_EQ(layer["agreement_percent"], 100.0) << v.text;
      }
    }
    std::printf("%s", v.text.c_str());
  }
}

INSTANTIATE_TEST_SUITE_P(BothFamilies, VerifyPasses, ::testing::Values(kStack, kTransformer));

TEST(Verify, FailsWhenAWeightIsPerturbedAfterExport) {
  testing::TempDir dir;
  const std::string ref = Export(dir, kStack, 40);
  // The dense first layer's output weights: every row's layer-0 outputs move, and so do the
  // routing decisions after it.
  Case("perturb " + Quote(ref) + " layers.0.fc2.weight 5 0.5");
  const Verified v = Verify(Pack(ref, dir.File("m.sprig"), "f32"), ref);
  EXPECT_EQ(v.exit_code, 1) << v.text;
  EXPECT_FALSE(v.report["pass"].get<bool>());
  EXPECT_EQ(v.report["first_divergent_layer"], 0) << v.text;
  EXPECT_FALSE(v.report["layer_outputs"][0]["ok"].get<bool>());
  EXPECT_GT(v.report["layer_outputs"][0]["max_abs_error"].get<double>(), 1e-3);
  EXPECT_NE(v.text.find("first layer whose outputs diverge: 0"), std::string::npos) << v.text;
  EXPECT_NE(v.text.find("FAIL"), std::string::npos);
}

TEST(Verify, FailsWhenARoutingNodesBiasIsNudged) {
  testing::TempDir dir;
  const std::string ref = Export(dir, kStack, 200);
  // The root of the leaf tree (layer 1): rows whose root logit lay within 0.3 of zero on the
  // left now go right, with margins far beyond any rounding.
  Case("perturb " + Quote(ref) + " layers.1.nodes.bias 0 0.3");
  const Verified v = Verify(Pack(ref, dir.File("m.sprig"), "f32"), ref);
  EXPECT_EQ(v.exit_code, 1) << v.text;
  const auto& layer1 = v.report["routing"][0];
  EXPECT_EQ(layer1["layer"], 1);
  EXPECT_GT(layer1["unexplained"].get<int>(), 0) << v.text;
  EXPECT_LT(layer1["agreement_percent"].get<double>(), 100.0);
  for (const auto& flip : layer1["disagreements"]) {
    EXPECT_EQ(flip["verdict"], "UNEXPLAINED");
    // Each listed flip names both routes and a margin larger than its rounding bound.
    EXPECT_GT(flip["margin"].get<double>(), flip["bound_rounding"].get<double>());
  }
  EXPECT_EQ(v.report["first_divergent_layer"], 1) << v.text;
  EXPECT_NE(v.text.find("UNEXPLAINED"), std::string::npos);
}

// One small leaf tree whose reference row 0 sits where storage rounding flips the root.
const char* kFlipConfig = R"({"family":"stack","input_dim":24,"layers":[
 {"kind":"tree","mode":"leaf","depth":3,"leaf_width":4,"activation":"relu","out":6}]})";

// The one disagreement a *-flip case makes: row 0, explained, its margin within the bound.
// Returns the flip's report.
nlohmann::json ExpectOneExplainedFlip(const Verified& v) {
  EXPECT_EQ(v.exit_code, 0) << v.text;
  const auto& routing = v.report["routing"][0];
  EXPECT_EQ(routing["disagreements"].size(), 1u) << v.text;
  if (routing["disagreements"].size() != 1) return nlohmann::json::object();
  const auto& flip = routing["disagreements"][0];
  EXPECT_EQ(flip["row"], 0);
  EXPECT_EQ(flip["verdict"], "explained by rounding");
  EXPECT_LE(flip["margin"].get<double>(), flip["bound_rounding"].get<double>());
  // The flipped row's outputs come from another leaf, so they are left out, not failed.
  EXPECT_EQ(v.report["outputs"]["rows_skipped"], 1);
  std::printf("%s", v.text.c_str());
  return flip;
}

TEST(Verify, ExplainsAFlipCausedByHalfPrecisionRounding) {
  testing::TempDir dir;
  const std::string ref = Export(dir, kFlipConfig, 10);
  Case("f16-flip " + Quote(ref) + " 0");
  const Verified f32 = Verify(Pack(ref, dir.File("f32.sprig"), "f32"), ref);
  EXPECT_EQ(f32.exit_code, 0) << f32.text;
  EXPECT_EQ(f32.report["routing"][0]["agreement_percent"], 100.0) << f32.text;
  ExpectOneExplainedFlip(Verify(Pack(ref, dir.File("f16.sprig"), "f16"), ref));
}

// An experts layer scored on its logits (sigmoid, softmax_chosen) reports margins on the logits;
// a row built so that float16 router weights swap its two best experts is explained by them.
TEST(Verify, ExplainsAnExpertsFlipOnLogitMargins) {
  for (const char* scoring : {"sigmoid", "softmax_chosen"}) {
    testing::TempDir dir;
    const std::string ref =
        Export(dir,
               std::string(R"({"family":"stack","input_dim":24,"layers":[{"kind":"experts",)") +
                   R"("experts":3,"top_k":1,"width":4,"activation":"gelu","router_scoring":")" +
                   scoring + R"(","out":6}]})",
               10);
    Case("experts-flip " + Quote(ref));
    const Verified f32 = Verify(Pack(ref, dir.File("f32.sprig"), "f32"), ref);
    EXPECT_EQ(f32.exit_code, 0) << f32.text;
    EXPECT_EQ(f32.report["routing"][0]["agreement_percent"], 100.0) << f32.text;
    ExpectOneExplainedFlip(Verify(Pack(ref, dir.File("f16.sprig"), "f16"), ref));
  }
}

// int8 has no relative error bound: verify bounds the logit's change by (s / 2)·||x||_1 from the
// row scales in the file. The flip is built against NumPy's int8 rounding of the root's row.
TEST(Verify, ExplainsAFlipCausedByInt8Rounding) {
  testing::TempDir dir;
  const std::string ref = Export(dir, kFlipConfig, 10);
  const nlohmann::json made = nlohmann::json::parse(Case("i8-flip " + Quote(ref) + " 0"));
  const nlohmann::json flip =
      ExpectOneExplainedFlip(Verify(Pack(ref, dir.File("i8.sprig"), "i8"), ref));
  // The bound covers the proven worst case for the root's row, computed by NumPy.
  ASSERT_TRUE(flip.contains("bound_rounding"));
  EXPECT_GE(flip["bound_rounding"].get<double>(), 0.999 * made["int8_bound"].get<double>());
}

// The compute mode "i8" (int8 activations) on models packed at i8: every flip it makes is
// explained once verify adds the activation rounding, (s_x / 2)·||ŵ||_1 per deciding logit, to
// the bound; outputs stay within i8's tolerances. Both families, every routed kind.
TEST(Verify, Int8ActivationsPassWithEveryFlipExplained) {
  for (const char* config : {kStack, kTransformer}) {
    testing::TempDir dir;
    // A transformer's reference rows are one sequence, at most max_seq tokens.
    const std::string ref = Export(dir, config, config == kStack ? 200 : 40);
    const Verified v = Verify(Pack(ref, dir.File("i8.sprig"), "i8"), ref, "--compute i8");
    EXPECT_EQ(v.exit_code, 0) << v.text;
    EXPECT_EQ(v.report["compute"], "i8");
    EXPECT_NE(v.text.find("compute i8"), std::string::npos) << v.text;
    ASSERT_EQ(v.report["routing"].size(), 3u);
    for (const auto& layer : v.report["routing"]) {
      EXPECT_EQ(layer["unexplained"], 0) << v.text;
      EXPECT_GT(layer["agreement_percent"].get<double>(), 90.0) << v.text;
      for (const auto& flip : layer["disagreements"]) {
        if (flip["verdict"] != "explained by rounding") continue;
        // An i8 deciding row always has an activation term in this mode.
        EXPECT_GT(flip["bound_activation"].get<double>(), 0.0) << v.text;
      }
    }
    std::printf("%s", v.text.c_str());
  }
}

// A root logit built so that quantising its row (not storing its weights) flips it: explained
// with the activation term, and beyond what the bound would allow without it.
TEST(Verify, ExplainsAFlipCausedByInt8Activations) {
  testing::TempDir dir;
  const std::string ref = Export(dir, kFlipConfig, 10);
  const nlohmann::json made = nlohmann::json::parse(Case("i8act-flip " + Quote(ref)));
  ASSERT_LT(made["exact_logit"].get<double>() * made["computed_logit"].get<double>(), 0.0)
      << "NumPy's rendering of the int8 rule must flip the root";
  const std::string model = Pack(ref, dir.File("i8.sprig"), "i8");
  // Float activations on the same file: int8 storage alone does not flip it.
  const Verified f32 = Verify(model, ref);
  EXPECT_EQ(f32.exit_code, 0) << f32.text;
  EXPECT_EQ(f32.report["routing"][0]["agreement_percent"], 100.0) << f32.text;
  const Verified i8 = Verify(model, ref, "--compute i8");
  const nlohmann::json flip = ExpectOneExplainedFlip(i8);
  ASSERT_TRUE(flip.contains("bound_activation"));
  EXPECT_GE(flip["bound_activation"].get<double>(), 0.999 * made["activation_bound"].get<double>());
  EXPECT_GT(std::fabs(flip["margin"].get<double>()),
            1.01 * (flip["bound_rounding"].get<double>() - flip["bound_activation"].get<double>() +
                    flip["bound_input"].get<double>()))
      << "the flip must need the activation term";
}

TEST(Verify, Int8ActivationsFailOnAPerturbedWeight) {
  testing::TempDir dir;
  const std::string ref = Export(dir, kStack, 40);
  Case("perturb " + Quote(ref) + " layers.0.fc2.weight 5 0.5");
  const Verified v = Verify(Pack(ref, dir.File("m.sprig"), "i8"), ref, "--compute i8");
  EXPECT_EQ(v.exit_code, 1) << v.text;
  EXPECT_FALSE(v.report["pass"].get<bool>());
  EXPECT_EQ(v.report["first_divergent_layer"], 0) << v.text;
  EXPECT_NE(v.text.find("FAIL"), std::string::npos);
}

// Nothing stored as i8: the mode would change nothing, so verify refuses it (exit 2) with the
// session's message.
TEST(Verify, Int8ActivationsRefusedWithoutInt8Weights) {
  testing::TempDir dir;
  const std::string ref = Export(dir, kStack, 10);
  const Verified v = Verify(Pack(ref, dir.File("f32.sprig"), "f32"), ref, "--compute i8");
  EXPECT_EQ(v.exit_code, 2) << v.text;
  EXPECT_NE(v.text.find("--dtype i8"), std::string::npos) << v.text;
}

TEST(Verify, RefusesReferencesThatDoNotFitTheModel) {
  testing::TempDir dir;
  const std::string ref = Export(dir, kStack, 8);
  const std::string model = Pack(ref, dir.File("m.sprig"), "f32");
  const std::string cli = testing::SprigCli() + " verify " + Quote(model) + " ";
  struct BadCase {
    const char* python;  // edits the dict `a` of reference arrays
    const char* message;
  };
  const BadCase cases[] = {
      {"del a['outputs']", "has no array 'outputs'"},
      {"a['outputs'] = a['outputs'][:, :3]", "array 'outputs' has shape [8, 3]"},
      {"a['inputs'] = a['inputs'][:, :5]", "array 'inputs': the input has shape [8, 5]"},
      {"a['routes.layer3'] = a['routes.layer3'][:, :1]", "array 'routes.layer3' has shape [8, 1]"},
      {"a['margins.layer1'] = a['margins.layer1'].astype('int32')", "expected floats"},
  };
  for (const BadCase& c : cases) {
    const std::string bad = dir.File("bad.npz");
    auto r = testing::RunPython(std::string("import sys, numpy as np\n"
                                            "a = dict(np.load(sys.argv[1]))\n") +
                                    c.python + "\nnp.savez(sys.argv[2], **a)",
                                {ref + "/reference.npz", bad});
    ASSERT_EQ(r.exit_code, 0) << r.output;
    r = testing::Run(cli + Quote(bad));
    EXPECT_EQ(r.exit_code, 2) << c.python << "\n" << r.output;
    EXPECT_NE(r.output.find(c.message), std::string::npos) << c.python << "\n" << r.output;
    EXPECT_NE(r.output.find("bad.npz"), std::string::npos) << r.output;
  }
  auto r = testing::Run(cli + Quote(dir.File("missing.npz")));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  r = testing::Run(testing::SprigCli() + " verify --help");
  EXPECT_NE(r.output.find("--require-routes"), std::string::npos);
  EXPECT_EQ(r.exit_code, 0);
  EXPECT_NE(r.output.find("--rtol"), std::string::npos);
}

}  // namespace
}  // namespace sprig

namespace sprig {
namespace {

// The documented path for a module of one's own (samples/export/own_module.py): its weights under
// its own names, a rename map, the export checked against the module's own outputs, then pack
// --rename and verify.
TEST(Verify, ExampleOfAnOwnModuleRoundTrips) {
  testing::TempDir dir;
  const std::string src = SPRIG_SOURCE_DIR;
  auto r = testing::Run(PythonPath() + testing::Python() + " " +
                        Quote(src + "/samples/export/own_module.py") + " --out " +
                        Quote(dir.File("seeds")));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const std::string seeds = dir.File("seeds");
  r = testing::Run(testing::SprigCli() + " pack " + Quote(seeds + "/config.json") + " " +
                   Quote(seeds + "/weights.npz") + " --rename " + Quote(seeds + "/rename.json") +
                   " -o " + Quote(dir.File("seeds.sprig")));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const Verified v = Verify(dir.File("seeds.sprig"), seeds);
  EXPECT_EQ(v.exit_code, 0) << v.text;
  EXPECT_EQ(v.report["routing"][0]["agreement_percent"], 100.0) << v.text;
}

// The exporter refuses to write a reference that does not describe the trained module.
TEST(Verify, ExportRefusesAReferenceThatDisagreesWithTheModule) {
  testing::TempDir dir;
  const std::string script = R"(
import sys
sys.path.insert(0, sys.argv[1])
import own_module
from sprig_torch.export import export, load_weights
import torch
net = own_module.SeedSorter()
x = torch.randn(50, 6)
with torch.no_grad():
    theirs = net(x, hard=True).numpy()
# A wrong map: the two biases swapped is caught by shape; two same-shape weights are not.
rename = dict(own_module.RENAME)
try:
    load_weights(own_module.CONFIG, net.state_dict(),
                 dict(rename, hidden_b='layers.0.leaves.fc2.bias',
                      out_b='layers.0.leaves.fc1.bias'))
    print('no error for a misshaped map'); sys.exit(1)
except ValueError as e:
    print('refused:', e)
model = load_weights(own_module.CONFIG, net.state_dict(), rename)
theirs[3, 1] += 0.5
try:
    export(model, sys.argv[2], x.numpy(), rename=rename, expected_outputs=theirs)
    print('no error for disagreeing outputs'); sys.exit(1)
except ValueError as e:
    print('refused:', e)
)";
  const std::string src = SPRIG_SOURCE_DIR;
  auto r = testing::Run(PythonPath() + testing::Python() + " -c " + Quote(script) + " " +
                        Quote(src + "/samples/export") + " " + Quote(dir.File("out")));
  EXPECT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(r.output.find("has shape [4, 8], expected [4, 3]"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("differ from the reference model's in 1 values"), std::string::npos)
      << r.output;
  EXPECT_FALSE(testing::Run("test -e " + Quote(dir.File("out"))).exit_code == 0)
      << "a refused export wrote files";
}

}  // namespace
}  // namespace sprig

namespace sprig {
namespace {

// Writes a reference without sprig's exporter (tests/python/external_reference.py) into dir/name.
std::string External(const testing::TempDir& dir, const std::string& how) {
  const auto r =
      testing::Run(testing::Python() + " " +
                   Quote(std::string(SPRIG_SOURCE_DIR) + "/tests/python/external_reference.py") +
                   " " + how + " " + Quote(dir.File(how)));
  EXPECT_EQ(r.exit_code, 0) << r.output;
  return dir.File(how);
}

// Copies reference.npz with one edit (Python on the dict `a` of its arrays) to dir/name.
std::string Edited(const testing::TempDir& dir, const std::string& ref, const std::string& python,
                   const std::string& name) {
  const std::string out = dir.File(name);
  const auto r = testing::RunPython(
      "import os, sys, numpy as np\nos.makedirs(os.path.dirname(sys.argv[2]), exist_ok=True)\n"
      "a = dict(np.load(sys.argv[1]))\n" +
          python + "\nnp.savez(sys.argv[2], **a)",
      {ref + "/reference.npz", out + "/reference.npz"});
  EXPECT_EQ(r.exit_code, 0) << r.output;
  return out;
}

// A reference of plain NumPy arrays, `inputs` and `outputs` computed by NumPy's own forward pass
// (float64), is enough: verify passes and says what it could not check; one output moved by 0.5
// fails (exit 1) at that row; an output array of the wrong shape is refused (exit 2), and so is
// the reference under --require-routes.
TEST(VerifyMinimal, NumpyInputsAndOutputsAreEnough) {
  testing::TempDir dir;
  const std::string ref = External(dir, "numpy");
  const std::string model = Pack(ref, dir.File("m.sprig"), "f32");
  const Verified v = Verify(model, ref);
  EXPECT_EQ(v.exit_code, 0) << v.text;
  EXPECT_TRUE(v.report["outputs"]["ok"].get<bool>()) << v.text;
  EXPECT_EQ(v.report["outputs"]["rows_compared"], 40);
  EXPECT_TRUE(v.report["routing"].empty());
  EXPECT_TRUE(v.report["layer_outputs"].empty());
  ASSERT_EQ(v.report["not_checked"].size(), 2u) << v.text;
  EXPECT_NE(v.text.find("routing not checked: the reference has no routes"), std::string::npos)
      << v.text;
  EXPECT_NE(v.text.find("per-layer outputs not checked: the reference has no layer_outputs"),
            std::string::npos)
      << v.text;
  EXPECT_NE(v.text.find("PASS"), std::string::npos);
  std::printf("%s", v.text.c_str());

  const std::string moved = Edited(dir, ref, "a['outputs'][17, 2] += 0.5", "moved");
  const Verified bad = Verify(model, moved);
  EXPECT_EQ(bad.exit_code, 1) << bad.text;
  EXPECT_FALSE(bad.report["outputs"]["ok"].get<bool>());
  EXPECT_EQ(bad.report["outputs"]["worst_row"], 17);
  EXPECT_NEAR(bad.report["outputs"]["max_abs_error"].get<double>(), 0.5, 1e-3);
  EXPECT_NE(bad.text.find("FAIL"), std::string::npos);

  const std::string narrow = Edited(dir, ref, "a['outputs'] = a['outputs'][:, :4]", "narrow");
  auto r = testing::Run(testing::SprigCli() + " verify " + Quote(model) + " " +
                        Quote(narrow + "/reference.npz"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("array 'outputs' has shape [40, 4]"), std::string::npos) << r.output;

  r = testing::Run(testing::SprigCli() + " verify " + Quote(model) + " " +
                   Quote(ref + "/reference.npz") + " --require-routes");
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("has no array 'routes.layer1'; --require-routes"), std::string::npos)
      << r.output;
}

// A model built from torch.nn modules (nn.Sequential of nn.Linear, an nn.Linear of split nodes and
// a bank of leaf parameters) under its own names, its outputs and leaf choices computed by
// PyTorch and saved with NumPy: packed with --rename, it verifies with routes required, every
// routing decision agreeing. Without the map pack refuses it, naming a tensor.
TEST(VerifyMinimal, TorchNnModelWithItsOwnNamesMappedWithRename) {
  testing::TempDir dir;
  const std::string ref = External(dir, "torch");
  auto r = testing::Run(testing::SprigCli() + " pack " + Quote(ref + "/config.json") + " " +
                        Quote(ref + "/weights.npz") + " -o " + Quote(dir.File("plain.sprig")));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("layers.0.fc1.weight"), std::string::npos) << r.output;
  r = testing::Run(testing::SprigCli() + " pack " + Quote(ref + "/config.json") + " " +
                   Quote(ref + "/weights.npz") + " --rename " + Quote(ref + "/rename.json") +
                   " -o " + Quote(dir.File("m.sprig")));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  r = testing::Run(testing::SprigCli() + " verify " + Quote(dir.File("m.sprig")) + " " +
                   Quote(ref + "/reference.npz") + " --require-routes --json");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const nlohmann::json j = nlohmann::json::parse(r.output, nullptr, false);
  ASSERT_TRUE(j.is_object()) << r.output;
  ASSERT_EQ(j["routing"].size(), 1u);
  EXPECT_EQ(j["routing"][0]["layer"], 1);
  EXPECT_EQ(j["routing"][0]["agreement_percent"], 100.0);
  // No margins and no per-layer outputs in this reference: both are named.
  ASSERT_EQ(j["not_checked"].size(), 2u) << r.output;
  EXPECT_NE(j["not_checked"].dump().find("cannot be explained: the reference has no margins"),
            std::string::npos);
  // A leaf choice changed in the reference is a disagreement nothing explains (exit 1).
  const std::string flipped =
      Edited(dir, ref, "a['routes.layer1'][5] = (a['routes.layer1'][5] + 1) % 4", "flipped");
  const Verified v = Verify(dir.File("m.sprig"), flipped);
  EXPECT_EQ(v.exit_code, 1) << v.text;
  EXPECT_EQ(v.report["routing"][0]["unexplained"], 1) << v.text;
}

}  // namespace
}  // namespace sprig
