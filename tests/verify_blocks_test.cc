// The transformer block variants against models built directly from torch.nn modules, not from
// sprig's reference modules (tests/python/torch_nn_blocks.py, Debian python3-torch):
//   - PyTorch's nn.TransformerEncoderLayer, norm_first=False (post-norm), in an
//     nn.TransformerEncoder, with a LayerNorm on the embeddings (BERT-style), no final norm and
//     a masked-language-model head (nn.Linear, nn.GELU, nn.LayerNorm, vocabulary nn.Linear with
//     bias; once tied to the embedding);
//   - nn.MultiheadAttention inside a pre-norm causal block with an lm head, one block's MLP a
//     leaf tree of torch.nn modules (routes checked);
//   - attention written with nn.Linear q/k/v with bias and the output projection without.
// Each is saved with NumPy under its own parameter names, packed with its mapping file (renames
// with {i} placeholders; nn.MultiheadAttention's fused in_proj_weight/in_proj_bias split into
// q, k, v) and checked with `sprig verify` at f32 and f16 against the module's own forward pass
// (float64). A config that misdescribes the module must then fail, so each case can fail. The
// script also loads the weights through the same mapping file into sprig's own reference modules
// (sprig_torch), which must agree with the torch.nn module.
#include <gtest/gtest.h>

#include <nlohmann/json.hpp>
#include <string>

#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

// Writes case `name` of torch_nn_blocks.py into dir/name and returns that directory.
std::string Build(const testing::TempDir& dir, const std::string& name) {
  const std::string out = dir.File(name);
  const auto r =
      testing::Run("PYTHONPATH=" + Quote(std::string(SPRIG_SOURCE_DIR) + "/converter/python") +
                   " " + testing::Python() + " " +
                   Quote(std::string(SPRIG_SOURCE_DIR) + "/tests/python/torch_nn_blocks.py") + " " +
                   name + " " + Quote(out));
  EXPECT_EQ(r.exit_code, 0) << r.output;
  return out;
}

testing::CommandResult Pack(const std::string& ref, const std::string& config, const char* dtype,
                            const std::string& out) {
  return testing::Run(testing::SprigCli() + " pack " + Quote(config) + " " +
                      Quote(ref + "/weights.npz") + " --map " + Quote(ref + "/map.json") +
                      " --dtype " + dtype + " --force -o " + Quote(out));
}

// Packs at f32 and f16 and verifies each: both pass, and the figures are printed.
void ExpectVerifies(const std::string& ref, const char* name) {
  for (const char* dtype : {"f32", "f16"}) {
    SCOPED_TRACE(dtype);
    const std::string model = ref + "/m_" + dtype + ".sprig";
    auto r = Pack(ref, ref + "/config.json", dtype, model);
    ASSERT_EQ(r.exit_code, 0) << r.output;
    r = testing::Run(testing::SprigCli() + " verify " + Quote(model) + " " +
                     Quote(ref + "/reference.npz") + " --json");
    ASSERT_EQ(r.exit_code, 0) << r.output;
    const nlohmann::json j = nlohmann::json::parse(r.output, nullptr, false);
    ASSERT_TRUE(j.is_object()) << r.output;
    EXPECT_TRUE(j["outputs"]["ok"].get<bool>()) << r.output;
    EXPECT_EQ(j["outputs"]["rows_compared"], 40) << r.output;
    // A routed block (the causal case's tree) agrees on every row.
    for (const nlohmann::json& layer : j["routing"]) {
      EXPECT_EQ(layer["agreement_percent"], 100.0) << r.output;
    }
    std::printf("[ %s %s ] outputs max abs error %.3g, max rel error %.3g\n", name, dtype,
                j["outputs"]["max_abs_error"].get<double>(),
                j["outputs"]["max_rel_error"].get<double>());
  }
}

// The config with one field replaced, written beside the reference; returns its path.
std::string ConfigWith(const std::string& ref, const std::string& key, const nlohmann::json& v) {
  nlohmann::json c = nlohmann::json::parse(testing::ReadFile(ref + "/config.json"));
  c[key] = v;
  const std::string path = ref + "/config_" + key + ".json";
  testing::WriteFile(path, c.dump());
  return path;
}

// Verify's exit code for the model packed (f32) with a config that misdescribes the module.
int VerifyMisdescribed(const std::string& ref, const std::string& key, const nlohmann::json& v) {
  const std::string model = ref + "/wrong_" + key + ".sprig";
  auto r = Pack(ref, ConfigWith(ref, key, v), "f32", model);
  EXPECT_EQ(r.exit_code, 0) << r.output;
  return testing::Run(testing::SprigCli() + " verify " + Quote(model) + " " +
                      Quote(ref + "/reference.npz"))
      .exit_code;
}

// PyTorch's nn.TransformerEncoderLayer, norm_first=False, activation "gelu", in an
// nn.TransformerEncoder; BERT-style embedding LayerNorm; MLM head with its own vocabulary
// projection. The same tensors under a pre-norm config compute something else: verify fails.
TEST(VerifyTorchNnBlocks, PostNormEncoderLayerWithMlmHead) {
  testing::TempDir dir;
  const std::string ref = Build(dir, "encoder_gelu");
  ExpectVerifies(ref, "encoder_gelu");
  EXPECT_EQ(VerifyMisdescribed(ref, "norm_position", "pre"), 1);
}

// PyTorch's nn.TransformerEncoderLayer, norm_first=False, activation "relu", two layers; the
// MLM head's vocabulary projection tied to the token embedding (BERT ties them), so the module's
// parameters hold it once. Read without the embedding norm, the model fails verify.
TEST(VerifyTorchNnBlocks, PostNormEncoderLayerWithTiedMlmHead) {
  testing::TempDir dir;
  const std::string ref = Build(dir, "encoder_relu");
  ExpectVerifies(ref, "encoder_relu");
  const std::string model = ref + "/no_embed_norm.sprig";
  auto r = Pack(ref, ConfigWith(ref, "embed_norm", false), "f32", model);
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("embed_norm.weight"), std::string::npos) << r.output;
}

// nn.MultiheadAttention (fused in_proj split by the mapping file) inside a pre-norm block with a
// causal attn_mask, final LayerNorm and an lm head; the second block's MLP is a leaf tree. Read
// as bidirectional, verify fails.
TEST(VerifyTorchNnBlocks, MultiheadAttentionInAPreNormCausalBlock) {
  testing::TempDir dir;
  const std::string ref = Build(dir, "mha_causal");
  ExpectVerifies(ref, "mha_causal");
  // Its second block's feed-forward is a leaf tree of torch.nn modules, stacked by the mapping
  // file: routes are required and checked.
  auto r = testing::Run(testing::SprigCli() + " verify " + Quote(ref + "/m_f16.sprig") + " " +
                        Quote(ref + "/reference.npz") + " --require-routes --json");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const nlohmann::json j = nlohmann::json::parse(r.output, nullptr, false);
  ASSERT_TRUE(j.is_object()) << r.output;
  ASSERT_EQ(j["routing"].size(), 1u) << r.output;
  EXPECT_EQ(j["routing"][0]["layer"], 1);
  EXPECT_EQ(VerifyMisdescribed(ref, "causal", false), 1);
}

// Attention of separate nn.Linear projections, q/k/v with bias and the output without; the pack
// of a config claiming all four biases is refused, naming the output projection's bias.
TEST(VerifyTorchNnBlocks, QueryKeyValueBiasesWithoutOutputBias) {
  testing::TempDir dir;
  const std::string ref = Build(dir, "qkv_bias");
  ExpectVerifies(ref, "qkv_bias");
  auto r = Pack(ref, ConfigWith(ref, "attn_bias", true), "f32", ref + "/all.sprig");
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("blocks.0.attn.o.bias"), std::string::npos) << r.output;
}

}  // namespace
}  // namespace sprig
