// Transformer models against the PyTorch reference (converter/python/sprig_torch/models.py,
// Debian python3-torch): a covering set of configs over norm (layernorm, rmsnorm) × positions
// (learned, rope, none) × grouped key/value heads × causal or bidirectional × head (lm tied or
// untied, classifier mean/first/last, none) × feed-forward kind (dense, tree leaf, tree path,
// experts), and the block variants (post-norm, embedding norm, no final norm, per-projection
// attention biases, an lm head with a transform and a bias). sprig's outputs must be within rtol
// 1e-4 / atol 1e-5 of the reference's float64 hard-mode outputs and its routes identical except
// rows whose deciding margin is below 1e-5 (counted and printed). One and two threads must give
// bit-identical results.
#include <gtest/gtest.h>

#include <string>
#include <vector>

#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

const char* const kDense = R"({"kind":"dense","width":24,"activation":"gelu"})";
const char* const kLeaf =
    R"({"kind":"tree","mode":"leaf","depth":3,"leaf_width":6,"activation":"relu"})";
const char* const kPath = R"({"kind":"tree","mode":"path","depth":4,"activation":"silu"})";
const char* const kExperts =
    R"({"kind":"experts","experts":4,"top_k":2,"width":8,"activation":"silu","gated":true})";
const char* const kExpertsNoBias =
    R"({"kind":"experts","experts":5,"top_k":1,"width":6,"activation":"gelu_tanh","bias":false})";
// Router scorings other than softmax, with shared experts (gated and not).
const char* const kExpertsSigmoidShared =
    R"({"kind":"experts","experts":6,"top_k":2,"width":6,"activation":"silu","gated":true,"router_scoring":"sigmoid","shared_experts":1,"shared_width":10,"shared_gate":true})";
const char* const kExpertsChosenShared =
    R"({"kind":"experts","experts":4,"top_k":2,"width":8,"activation":"gelu","router_scoring":"softmax_chosen","shared_experts":2})";

struct Case {
  const char* name;
  std::string fields;  // config fields other than family, layers
  std::vector<const char*> layers;
  int rows;
};

std::vector<Case> Cases() {
  // vocab 50, max_seq 32 unless a case says otherwise; d_model 32 with 4 heads (head_dim 8).
  const std::string base = R"("vocab_size":50,"d_model":32,"n_heads":4,"max_seq":32,)";
  return {
      {"ln_learned_mha_causal_lm",
       base +
           R"("n_kv_heads":4,"norm":"layernorm","positions":"learned","causal":true,"head":{"kind":"lm"})",
       {kDense, kLeaf},
       24},
      {"rms_rope_gqa_causal_tied",
       base +
           R"("n_kv_heads":2,"norm":"rmsnorm","positions":"rope","causal":true,"tie_embeddings":true,"head":{"kind":"lm"})",
       {kExperts, kPath},
       32},
      {"ln_none_mqa_bidir_mean",
       base +
           R"("n_kv_heads":1,"norm":"layernorm","positions":"none","causal":false,"head":{"kind":"classifier","classes":3,"pool":"mean"})",
       {kLeaf, kDense},
       20},
      {"rms_learned_gqa_bidir_first",
       base +
           R"("n_kv_heads":2,"norm":"rmsnorm","positions":"learned","causal":false,"head":{"kind":"classifier","classes":5,"pool":"first"})",
       {kPath, kExperts},
       17},
      {"ln_rope_mha_causal_last",
       base +
           R"("norm":"layernorm","positions":"rope","causal":true,"head":{"kind":"classifier","classes":4,"pool":"last"})",
       {kDense},
       25},
      {"rms_none_mha_causal_hidden",
       base + R"("norm":"rmsnorm","positions":"none","causal":true,"head":{"kind":"none"})",
       {kLeaf, kLeaf},
       19},
      {"ln_rope_gqa_bidir_hidden",
       base +
           R"("n_kv_heads":2,"norm":"layernorm","positions":"rope","causal":false,"head":{"kind":"none"})",
       {kExperts},
       23},
      {"rms_learned_mqa_causal_lm_nobias",
       base +
           R"("n_kv_heads":1,"norm":"rmsnorm","positions":"learned","causal":true,"attn_bias":false,"head":{"kind":"lm"})",
       {kPath, kDense},
       32},
      {"ln_learned_gqa_causal_tied",
       base +
           R"("n_kv_heads":2,"norm":"layernorm","positions":"learned","causal":true,"tie_embeddings":true,"head":{"kind":"lm"})",
       {kExperts, kLeaf},
       21},
      {"rms_rope_mha_bidir_lm",
       base + R"("norm":"rmsnorm","positions":"rope","causal":false,"head":{"kind":"lm"})",
       {kDense, kPath},
       18},
      {"ln_none_gqa_causal_mean",
       base +
           R"("n_kv_heads":2,"norm":"layernorm","positions":"none","causal":true,"head":{"kind":"classifier","classes":2,"pool":"mean"})",
       {kPath},
       30},
      {"rms_rope_mqa_causal_first_nobias",
       base +
           R"("n_kv_heads":1,"norm":"rmsnorm","positions":"rope","causal":true,"attn_bias":false,"head":{"kind":"classifier","classes":3,"pool":"first"})",
       {kLeaf, kExperts},
       22},
      {"ln_learned_mha_bidir_last",
       base +
           R"("norm":"layernorm","positions":"learned","causal":false,"head":{"kind":"classifier","classes":6,"pool":"last"})",
       {kExperts, kDense},
       16},
      {"rms_none_gqa_bidir_hidden",
       base +
           R"("n_kv_heads":2,"norm":"rmsnorm","positions":"none","causal":false,"head":{"kind":"none"})",
       {kDense, kLeaf},
       27},
      // The byte tokenizer, a non-default rope_base and norm_eps.
      {"byte_ln_rope_causal_lm",
       R"("tokenizer":"byte","vocab_size":256,"d_model":32,"n_heads":4,"max_seq":40,"norm":"layernorm","norm_eps":1e-6,"positions":"rope","rope_base":500.0,"causal":true,"head":{"kind":"lm"})",
       {kLeaf, kPath},
       40},
      // head_dim 6 with 6 query and 3 key/value heads; three blocks.
      {"rms_learned_gqa3_causal_tied",
       R"("vocab_size":40,"d_model":36,"n_heads":6,"n_kv_heads":3,"max_seq":24,"norm":"rmsnorm","positions":"learned","causal":true,"tie_embeddings":true,"head":{"kind":"lm"})",
       {kExpertsNoBias, kDense, kLeaf},
       24},
      // Block variants: post-norm, a norm on the embeddings, no final norm, biases on some
      // projections only, an lm head with a transform (dense, activation, norm) and a bias.
      {"post_ln_embed_norm_mlm_head",
       base +
           R"("norm":"layernorm","positions":"learned","causal":false,"norm_position":"post","final_norm":false,"embed_norm":true,"attn_bias":["q","k","v"],"head":{"kind":"lm","transform":{"activation":"gelu"},"bias":true})",
       {kDense, kLeaf},
       26},
      {"post_rms_rope_tied_transform",
       base +
           R"("n_kv_heads":2,"norm":"rmsnorm","positions":"rope","causal":true,"norm_position":"post","tie_embeddings":true,"attn_bias":["o"],"head":{"kind":"lm","transform":{"activation":"relu","norm":false},"bias":true})",
       {kExperts, kPath},
       29},
      {"pre_ln_no_final_norm_kv_bias_mean",
       base +
           R"("norm":"layernorm","positions":"none","causal":false,"final_norm":false,"attn_bias":["k","v"],"head":{"kind":"classifier","classes":3,"pool":"mean"})",
       {kLeaf},
       21},
      {"post_ln_embed_norm_hidden",
       base +
           R"("n_kv_heads":1,"norm":"layernorm","positions":"learned","causal":true,"norm_position":"post","embed_norm":true,"head":{"kind":"none"})",
       {kPath, kExpertsNoBias},
       23},
      {"rms_rope_gqa_causal_lm_moe_variants",
       base +
           R"("n_kv_heads":2,"norm":"rmsnorm","positions":"rope","causal":true,"head":{"kind":"lm"})",
       {kExpertsSigmoidShared, kExpertsChosenShared},
       28},
  };
}

std::string ConfigJson(const Case& c) {
  std::string layers;
  for (const char* l : c.layers) layers += std::string(layers.empty() ? "" : ",") + l;
  return std::string(R"({"family":"transformer","name":")") + c.name + "\"," + c.fields +
         R"(,"layers":[)" + layers + "]}";
}

TEST(ReferenceTransformer, MatchesPyTorch) {
  const std::vector<Case> cases = Cases();
  testing::TempDir dir;
  std::string spec = "[";
  for (size_t i = 0; i < cases.size(); ++i) {
    spec += std::string(i ? "," : "") + R"({"name":")" + cases[i].name + R"(","config":)" +
            ConfigJson(cases[i]) + R"(,"seed":)" + std::to_string(100 + i) + R"(,"rows":)" +
            std::to_string(cases[i].rows) + "}";
  }
  testing::WriteFile(dir.File("spec.json"), spec + "]");
  const std::string src = SPRIG_SOURCE_DIR;
  // One Python process exports every model, so PyTorch starts once.
  auto r = testing::Run("PYTHONPATH=" + Quote(src + "/converter/python") + " " + testing::Python() +
                        " " + Quote(src + "/tests/python/transformer_reference.py") + " " +
                        Quote(dir.File("spec.json")) + " " + Quote(dir.path()));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const std::string cli = testing::SprigCli();
  for (const Case& c : cases) {
    SCOPED_TRACE(c.name);
    const std::string ref = dir.File(c.name);
    const std::string model = ref + "/m.sprig";
    r = testing::Run(cli + " pack " + Quote(ref + "/config.json") + " " +
                     Quote(ref + "/weights.npz") + " -o " + Quote(model));
    ASSERT_EQ(r.exit_code, 0) << r.output;
    for (int threads : {1, 2}) {
      const std::string t = std::to_string(threads);
      r = testing::Run(cli + " run " + Quote(model) + " --input " + Quote(ref + "/tokens.npy") +
                       " --output " + Quote(ref + "/out" + t + ".npy") + " --routes " +
                       Quote(ref + "/routes" + t + ".npz") + " --threads " + t);
      ASSERT_EQ(r.exit_code, 0) << r.output;
    }
    r = testing::Run(testing::Python() + " " + Quote(src + "/tests/python/compare_outputs.py") +
                     " " + Quote(ref + "/reference.npz") + " " + Quote(ref + "/out1.npy") + " " +
                     Quote(ref + "/routes1.npz") + " 1e-4 1e-5 1e-5");
    EXPECT_EQ(r.exit_code, 0) << ConfigJson(c) << "\n" << r.output;
    std::printf("[ %s ] %s", c.name, r.output.c_str());
    EXPECT_EQ(testing::ReadFile(ref + "/out1.npy"), testing::ReadFile(ref + "/out2.npy"))
        << "two threads changed the outputs";
    EXPECT_EQ(testing::ReadFile(ref + "/routes1.npz"), testing::ReadFile(ref + "/routes2.npz"))
        << "two threads changed the routes";
  }
}

}  // namespace
}  // namespace sprig
