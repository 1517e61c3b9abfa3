// The engine against the PyTorch reference (converter/python/sprig_torch, Debian python3-torch):
// random models of every layer kind, mode, activation and gating; sprig's outputs within
// rtol 1e-5 / atol 1e-6 of the reference's hard-mode outputs for f32 storage, routes identical
// except where the deciding logit's magnitude is below 1e-6 (counted and reported).
// Batch 1, batches with one thread and with two threads are all checked, and must be
// bit-identical to each other.
#include <gtest/gtest.h>

#include <string>
#include <vector>

#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

std::vector<std::string> Layers() {
  std::vector<std::string> v;
  const char* acts[] = {"relu", "gelu", "gelu_tanh", "silu"};
  for (const char* a : acts) {
    for (const char* gated : {"false", "true"}) {
      v.push_back(std::string(R"({"kind":"dense","width":24,"activation":")") + a +
                  R"(","gated":)" + gated + "}");
      v.push_back(
          std::string(R"({"kind":"tree","mode":"leaf","depth":4,"leaf_width":6,"activation":")") +
          a + R"(","gated":)" + gated + "}");
      v.push_back(
          std::string(R"({"kind":"experts","experts":5,"top_k":2,"width":7,"activation":")") + a +
          R"(","gated":)" + gated + "}");
    }
    v.push_back(std::string(R"({"kind":"tree","mode":"path","depth":6,"activation":")") + a +
                "\"}");
  }
  v.push_back(R"({"kind":"dense","width":9,"activation":"relu","bias":false})");
  v.push_back(R"({"kind":"tree","mode":"leaf","depth":0,"leaf_width":5,"activation":"gelu"})");
  v.push_back(
      R"({"kind":"tree","mode":"leaf","depth":1,"leaf_width":3,"activation":"relu","bias":false})");
  v.push_back(R"({"kind":"tree","mode":"leaf","depth":7,"leaf_width":2,"activation":"silu"})");
  v.push_back(R"({"kind":"tree","mode":"path","depth":0,"activation":"relu"})");
  v.push_back(R"({"kind":"tree","mode":"path","depth":2,"activation":"gelu","bias":false})");
  v.push_back(R"({"kind":"tree","mode":"path","depth":9,"activation":"gelu_tanh"})");
  v.push_back(R"({"kind":"experts","experts":1,"top_k":1,"width":4,"activation":"relu"})");
  v.push_back(R"({"kind":"experts","experts":6,"top_k":6,"width":4,"activation":"gelu"})");
  v.push_back(
      R"({"kind":"experts","experts":8,"top_k":3,"width":4,"activation":"silu","renormalize":false,"bias":false})");
  // Router scorings and shared experts (with and without their gate, gated MLPs, no biases).
  v.push_back(
      R"({"kind":"experts","experts":7,"top_k":2,"width":5,"activation":"gelu","router_scoring":"sigmoid"})");
  v.push_back(
      R"({"kind":"experts","experts":7,"top_k":3,"width":5,"activation":"relu","router_scoring":"sigmoid","renormalize":false})");
  v.push_back(
      R"({"kind":"experts","experts":6,"top_k":2,"width":4,"activation":"silu","router_scoring":"softmax_chosen"})");
  v.push_back(
      R"({"kind":"experts","experts":5,"top_k":2,"width":4,"activation":"gelu","shared_experts":1})");
  v.push_back(
      R"({"kind":"experts","experts":5,"top_k":1,"width":4,"activation":"silu","gated":true,"router_scoring":"sigmoid","shared_experts":2,"shared_width":6,"shared_gate":true})");
  v.push_back(
      R"({"kind":"experts","experts":4,"top_k":2,"width":3,"activation":"relu","bias":false,"router_scoring":"softmax_chosen","shared_experts":3,"shared_width":2,"shared_gate":true})");
  return v;
}

// Widths that exercise vector tails: in 1, 7, 33 and 70, out 1, 9, 64.
struct Shape {
  int in, out;
};
const Shape kShapes[] = {{33, 9}, {7, 64}, {70, 1}, {1, 33}};

class ReferenceStack : public ::testing::TestWithParam<size_t> {};

TEST_P(ReferenceStack, MatchesPyTorch) {
  const size_t i = GetParam();
  const std::string layer = Layers()[i];
  const Shape s = kShapes[i % 4];
  // Two layers: the kind under test, then a small dense layer, so the routed layer's output
  // feeds another layer as in a real stack.
  std::string l1 = layer;
  l1.insert(l1.size() - 1, ",\"out\":" + std::to_string(s.out));
  const std::string config = R"({"family":"stack","input_dim":)" + std::to_string(s.in) +
                             R"(,"layers":[)" + l1 +
                             R"(,{"kind":"dense","width":8,"activation":"relu","out":5}]})";
  testing::TempDir dir;
  testing::WriteFile(dir.File("c.json"), config);
  const std::string src = SPRIG_SOURCE_DIR;
  auto r =
      testing::Run("PYTHONPATH=" + Quote(src + "/converter/python") + " " + testing::Python() +
                   " -m sprig_torch.export --config " + Quote(dir.File("c.json")) + " --seed " +
                   std::to_string(11 + i) + " --rows 150 --out " + Quote(dir.File("ref")));
  ASSERT_EQ(r.exit_code, 0) << config << "\n" << r.output;
  const std::string cli = testing::SprigCli();
  const std::string model = dir.File("m.sprig");
  r = testing::Run(cli + " pack " + Quote(dir.File("ref/config.json")) + " " +
                   Quote(dir.File("ref/weights.npz")) + " -o " + Quote(model));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  r = testing::RunPython(
      "import sys, numpy as np; np.save(sys.argv[2], np.load(sys.argv[1])['inputs'])",
      {dir.File("ref/reference.npz"), dir.File("x.npy")});
  ASSERT_EQ(r.exit_code, 0) << r.output;

  struct Variant {
    const char* name;
    int batch, threads;
  };
  for (const Variant v : {Variant{"b1", 1, 1}, Variant{"b64t1", 64, 1}, Variant{"b64t2", 64, 2}}) {
    const std::string out = dir.File(std::string(v.name) + ".npy");
    const std::string routes = dir.File(std::string(v.name) + ".npz");
    r = testing::Run(cli + " run " + Quote(model) + " --input " + Quote(dir.File("x.npy")) +
                     " --output " + Quote(out) + " --routes " + Quote(routes) + " --batch " +
                     std::to_string(v.batch) + " --threads " + std::to_string(v.threads));
    ASSERT_EQ(r.exit_code, 0) << r.output;
    r = testing::Run(testing::Python() + " " + Quote(src + "/tests/python/compare_outputs.py") +
                     " " + Quote(dir.File("ref/reference.npz")) + " " + Quote(out) + " " +
                     Quote(routes) + " 1e-5 1e-6 1e-6");
    EXPECT_EQ(r.exit_code, 0) << v.name << " " << config << "\n" << r.output;
    if (v.threads == 2) std::printf("[ %s ] %s", layer.c_str(), r.output.c_str());
  }
  EXPECT_EQ(testing::ReadFile(dir.File("b64t1.npy")), testing::ReadFile(dir.File("b64t2.npy")))
      << "two threads changed the outputs";
  EXPECT_EQ(testing::ReadFile(dir.File("b1.npy")), testing::ReadFile(dir.File("b64t1.npy")))
      << "batching changed the outputs";
  EXPECT_EQ(testing::ReadFile(dir.File("b64t1.npz")), testing::ReadFile(dir.File("b64t2.npz")));
}

INSTANTIATE_TEST_SUITE_P(AllKinds, ReferenceStack, ::testing::Range<size_t>(0, Layers().size()));

}  // namespace
}  // namespace sprig
