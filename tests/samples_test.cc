// The committed sample language models (samples/lm: trained with PyTorch by train_lm.py,
// exported with sprig_torch.export) pack and verify cleanly against their committed reference
// files, as float32 and float16, and the next-byte loss sprig's logits give on the reference
// sequences equals the loss of PyTorch's own hard-mode logits (cross-entropy computed by NumPy).
#include <gtest/gtest.h>

#include <filesystem>

#include <nlohmann/json.hpp>
#include <string>

#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

// Next-byte cross-entropy (nats per byte) of logits [B, T, V] on tokens [B, T].
const char* kLoss = R"(
import json, sys
import numpy as np
def loss(logits, tokens):
    z = logits[:, :-1].astype(np.float64)
    z = z - z.max(-1, keepdims=True)
    logp = z - np.log(np.exp(z).sum(-1, keepdims=True))
    nxt = tokens[:, 1:]
    return float(-np.take_along_axis(logp, nxt[..., None], -1).mean())
ref = np.load(sys.argv[1])
print(json.dumps({'reference': loss(ref['outputs'], ref['inputs']),
                  'sprig': loss(np.load(sys.argv[2]), ref['inputs'])}))
)";

class SampleModels : public ::testing::TestWithParam<const char*> {};

TEST_P(SampleModels, VerifyCleanlyAndGiveTheReferenceLoss) {
  const std::string src = SPRIG_SOURCE_DIR;
  const std::string dir = src + "/samples/lm/" + GetParam();
  const std::string cli = testing::SprigCli();
  testing::TempDir tmp;
  // The subword model carries its SentencePiece vocabulary into the file.
  const std::string tokenizer = dir + "/vell-notes.model";
  const std::string tokenizer_option =
      std::filesystem::exists(tokenizer) ? " --tokenizer " + Quote(tokenizer) : "";
  for (const char* dtype : {"f32", "f16"}) {
    const std::string model = tmp.File(std::string(dtype) + ".sprig");
    auto r = testing::Run(cli + " pack " + Quote(dir + "/config.json") + " " +
                          Quote(dir + "/weights.npz") + " -o " + Quote(model) + " --dtype " +
                          dtype + tokenizer_option);
    // Builds without the SentencePiece library (the cross builds) cannot read a .model file.
    if (r.output.find("no SentencePiece reader") != std::string::npos) {
      GTEST_SKIP() << "this build of sprig cannot read SentencePiece models";
    }
    ASSERT_EQ(r.exit_code, 0) << r.output;
    r = testing::Run(cli + " verify " + Quote(model) + " " + Quote(dir + "/reference.npz"));
    EXPECT_EQ(r.exit_code, 0) << r.output;
    std::printf("[ %s %s ]\n%s", GetParam(), dtype, r.output.c_str());
    r = testing::RunPython(
        "import sys, numpy as np; np.save(sys.argv[2], np.load(sys.argv[1])['inputs'])",
        {dir + "/reference.npz", tmp.File("tokens.npy")});
    ASSERT_EQ(r.exit_code, 0) << r.output;
    r = testing::Run(cli + " run " + Quote(model) + " --input " + Quote(tmp.File("tokens.npy")) +
                     " --output " + Quote(tmp.File("logits.npy")));
    ASSERT_EQ(r.exit_code, 0) << r.output;
    r = testing::RunPython(kLoss, {dir + "/reference.npz", tmp.File("logits.npy")});
    ASSERT_EQ(r.exit_code, 0) << r.output;
    const auto loss = nlohmann::json::parse(r.output);
    std::printf("[ %s %s ] next-byte loss on the reference sequences %s\n", GetParam(), dtype,
                loss.dump().c_str());
    // float32 storage: the same numbers up to accumulation order; float16: within 1%.
    const double tolerance = std::string(dtype) == "f32" ? 1e-4 : 1e-2;
    EXPECT_NEAR(loss["sprig"].get<double>(), loss["reference"].get<double>(),
                tolerance * loss["reference"].get<double>());
  }
}

INSTANTIATE_TEST_SUITE_P(TreeAndDenseTwin, SampleModels, ::testing::Values("tree", "dense"));
INSTANTIATE_TEST_SUITE_P(Subword, SampleModels, ::testing::Values("subword"));

}  // namespace
}  // namespace sprig
