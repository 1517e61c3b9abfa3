// The header's config table (schema/model.fbs, format/header_config.cc): every field survives
// BuildConfig → ReadConfig, and a header written before the block-variant fields reads as the
// model it was written for.
#include <gtest/gtest.h>

#include "converter/config/config_equal.h"
#include "converter/config/config_json.h"
#include "format/header_config.h"
#include "support/test_util.h"

namespace sprig {
namespace {

Result<ModelConfig> RoundTrip(const ModelConfig& c) {
  flatbuffers::FlatBufferBuilder b;
  b.ForceDefaults(true);
  b.Finish(format::BuildConfig(b, c));
  return format::ReadConfig(*flatbuffers::GetRoot<fb::Config>(b.GetBufferPointer()), "m.sprig");
}

TEST(HeaderConfig, BlockVariantsSurviveTheHeader) {
  for (const char* extra : {
           R"("norm_position":"post","final_norm":false,"embed_norm":true,"attn_bias":["q","v"],
              "head":{"kind":"lm","transform":{"activation":"relu","norm":false},"bias":true})",
           R"("attn_bias":["o"],"head":{"kind":"lm","transform":{}})",
           R"("attn_bias":false,"head":{"kind":"lm"})",
           R"("attn_bias":true,"head":{"kind":"none"})",
       }) {
    const std::string text = std::string(R"({"family":"transformer","vocab_size":20,)") +
                             R"("d_model":8,"n_heads":2,"max_seq":4,)" + extra +
                             R"(,"layers":[{"kind":"dense","width":4}]})";
    auto c = convert::ParseConfig(text, "config.json");
    ASSERT_TRUE(c.ok()) << c.status().message();
    auto again = RoundTrip(*c);
    ASSERT_TRUE(again.ok()) << again.status().message();
    EXPECT_TRUE(*again == *c) << extra;
  }
}

// A header from before the per-projection flags, post-norm, the final-norm switch, the
// embedding norm and the head transform: only the fields that existed then are written.
fb::Config const* OldHeader(flatbuffers::FlatBufferBuilder& b, bool attn_bias) {
  auto layers = b.CreateVector(std::vector<flatbuffers::Offset<fb::Layer>>{});
  fb::ConfigBuilder cb(b);
  cb.add_family(fb::Family::Transformer);
  cb.add_layers(layers);
  cb.add_d_model(8);
  cb.add_attn_bias(attn_bias);
  b.Finish(cb.Finish());
  return flatbuffers::GetRoot<fb::Config>(b.GetBufferPointer());
}

TEST(HeaderConfig, AnOldHeaderReadsAsBefore) {
  for (bool bias : {true, false}) {
    flatbuffers::FlatBufferBuilder b;
    auto c = format::ReadConfig(*OldHeader(b, bias), "old.sprig");
    ASSERT_TRUE(c.ok()) << c.status().message();
    EXPECT_EQ(c->attn_bias.all(), bias);
    EXPECT_EQ(c->attn_bias.none(), !bias);
    EXPECT_EQ(c->norm_position, NormPosition::kPre);
    EXPECT_TRUE(c->final_norm);
    EXPECT_FALSE(c->embed_norm);
    EXPECT_FALSE(c->head.transform);
    EXPECT_FALSE(c->head.bias);
  }
}

TEST(HeaderConfig, ContradictoryBiasFlagsAreRefused) {
  flatbuffers::FlatBufferBuilder b;
  b.ForceDefaults(true);
  fb::ConfigBuilder cb(b);
  cb.add_family(fb::Family::Transformer);
  cb.add_attn_bias(true);
  cb.add_attn_bias_o(false);
  b.Finish(cb.Finish());
  auto c = format::ReadConfig(*flatbuffers::GetRoot<fb::Config>(b.GetBufferPointer()), "x.sprig");
  ASSERT_FALSE(c.ok());
  EXPECT_EQ(c.status().message(),
            "x.sprig: the header's config field attn_bias is true but not every "
            "attn_bias_q/k/v/o flag is");
}

// A post-norm model's file, and one with a router scored otherwise than by softmax, says format
// version 2, so a version-1 reader refuses it instead of running its blocks as pre-norm or its
// router as softmax; any other model stays version 1 (schema/README.md).
TEST(HeaderConfig, FilesAVersionOneReaderWouldMisreadAreFormatVersionTwo) {
  testing::TempDir dir;
  const std::string base = R"({"family":"transformer","vocab_size":20,"d_model":8,"n_heads":2,
    "max_seq":4,)";
  const std::string dense = R"("layers":[{"kind":"dense","width":4}])";
  const std::string experts = R"("layers":[{"kind":"experts","experts":2,"top_k":1,"width":4,)";
  const std::pair<std::string, uint32_t> cases[] = {
      {R"("norm_position":"post",)" + dense + "}", 2},
      {R"("norm_position":"pre","final_norm":false,"embed_norm":true,"attn_bias":["q"],)" + dense +
           "}",
       1},
      {experts + R"("router_scoring":"sigmoid"}]})", 2},
      {experts + R"("router_scoring":"softmax_chosen"}]})", 2},
      {experts + R"("shared_experts":1,"shared_gate":true}]})", 1},
  };
  int n = 0;
  for (const auto& [fields, version] : cases) {
    // Named with append: GCC 12 warns (wrongly, -Wrestrict) on `"m" + std::to_string(...)`.
    const std::string name = std::string("m").append(std::to_string(n++));
    const std::string path = testing::PackSynthesized(dir, name, base + fields);
    const std::string bytes = testing::ReadFile(path);
    ASSERT_GE(bytes.size(), 12u);
    uint32_t stored = 0;
    for (int i = 0; i < 4; ++i) stored |= uint32_t{static_cast<uint8_t>(bytes[8 + i])} << (8 * i);
    EXPECT_EQ(stored, version) << fields;
  }
}

}  // namespace
}  // namespace sprig
