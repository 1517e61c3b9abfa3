// config.json parsing and validation (docs/input-contract.md), ConfigToJson, and files of plain
// renames read as mapping files (the mapping file's other forms: mapping_test.cc).
#include <gtest/gtest.h>

#include <cstdio>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <map>
#include <random>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "converter/config/config_equal.h"
#include "converter/config/config_json.h"
#include "converter/config/config_limits.h"
#include "converter/config/mapping.h"
#include "support/test_util.h"

namespace sprig::convert {
namespace {

using nlohmann::json;

// A small valid stack: 64 inputs, one dense layer.
json BaseStack() {
  return json::parse(R"({"family":"stack","input_dim":64,
                         "layers":[{"kind":"dense","width":32,"out":10}]})");
}

// A small valid transformer: byte vocabulary, d_model 64, 4 heads.
json BaseTransformer() {
  return json::parse(R"({"family":"transformer","vocab_size":256,"d_model":64,"n_heads":4,
                         "max_seq":128,"layers":[{"kind":"dense","width":128}]})");
}

Result<ModelConfig> Parse(const json& j) {
  return ParseConfig(j.dump(), "config.json");
}

// The error message of parsing `text`, or "OK" when it parses.
std::string ErrorOf(const std::string& text) {
  auto r = ParseConfig(text, "config.json");
  if (r.ok()) return "OK";
  EXPECT_EQ(r.status().code(), Status::Code::kInvalidArgument) << r.status().message();
  return r.status().message();
}
std::string ErrorOf(const json& j) {
  return ErrorOf(j.dump());
}
std::string ErrorOf(const char* text) {
  return ErrorOf(std::string(text));
}

#define EXPECT_CONTAINS(text, part) \
  EXPECT_NE(std::string(text).find(part), std::string::npos) << "message: " << (text)

#define EXPECT_STARTS_WITH(text, prefix) \
  EXPECT_EQ(std::string(text).rfind(prefix, 0), 0u) << "message: " << (text)

// A layer array entry replaced in a base config.
json WithLayers(json base, const std::string& layers) {
  base["layers"] = json::parse(layers);
  return base;
}

class TempDir {
 public:
  TempDir() {
    path_ = std::filesystem::temp_directory_path() /
            ("sprig_config_test_" + std::to_string(sprig::testing::ProcessId()) + "_" +
             ::testing::UnitTest::GetInstance()->current_test_info()->name());
    std::filesystem::create_directories(path_);
  }
  ~TempDir() { std::filesystem::remove_all(path_); }
  std::string Write(const std::string& name, const std::string& text) const {
    const std::string p = (path_ / name).string();
    std::ofstream(p, std::ios::binary) << text;
    return p;
  }
  std::string Path(const std::string& name) const { return (path_ / name).string(); }

 private:
  std::filesystem::path path_;
};

// ---------------------------------------------------------------------------------------------
// Parsing valid configs.

// The four example entries of docs/input-contract.md, verbatim. The first carries in/out,
// so it belongs to a stack; the others leave them out, as transformer entries do.
TEST(ConfigParse, DesignExampleLayersParse) {
  auto stack = ParseConfig(R"({"family":"stack","input_dim":64,"layers":[
      {"kind":"dense","width":256,"activation":"gelu","gated":false,"in":64,"out":10}]})",
                           "config.json");
  ASSERT_TRUE(stack.ok()) << stack.status().message();
  const LayerConfig& d = stack->layers[0];
  EXPECT_EQ(d.kind, LayerKind::kDense);
  EXPECT_EQ(d.width, 256u);
  EXPECT_EQ(d.activation, Activation::kGelu);
  EXPECT_FALSE(d.gated);
  EXPECT_EQ(d.in, 64u);
  EXPECT_EQ(d.out, 10u);
  EXPECT_TRUE(d.bias);

  auto t = ParseConfig(R"({"family":"transformer","vocab_size":256,"d_model":64,"n_heads":4,
      "max_seq":128,"layers":[
      {"kind":"tree","mode":"leaf","depth":6,"leaf_width":16,"activation":"relu"},
      {"kind":"tree","mode":"path","depth":11,"activation":"gelu"},
      {"kind":"experts","experts":8,"top_k":2,"width":64,"activation":"silu","gated":true}]})",
                       "config.json");
  ASSERT_TRUE(t.ok()) << t.status().message();
  ASSERT_EQ(t->layers.size(), 3u);
  const LayerConfig& leaf = t->layers[0];
  EXPECT_EQ(leaf.kind, LayerKind::kTree);
  EXPECT_EQ(leaf.mode, TreeMode::kLeaf);
  EXPECT_EQ(leaf.depth, 6u);
  EXPECT_EQ(leaf.leaf_width, 16u);
  EXPECT_EQ(leaf.activation, Activation::kRelu);
  const LayerConfig& path = t->layers[1];
  EXPECT_EQ(path.mode, TreeMode::kPath);
  EXPECT_EQ(path.depth, 11u);
  EXPECT_EQ(path.activation, Activation::kGelu);
  const LayerConfig& moe = t->layers[2];
  EXPECT_EQ(moe.kind, LayerKind::kExperts);
  EXPECT_EQ(moe.experts, 8u);
  EXPECT_EQ(moe.top_k, 2u);
  EXPECT_EQ(moe.width, 64u);
  EXPECT_EQ(moe.activation, Activation::kSilu);
  EXPECT_TRUE(moe.gated);
  EXPECT_TRUE(moe.renormalize);
  for (const LayerConfig& l : t->layers) {
    EXPECT_EQ(l.in, 64u);
    EXPECT_EQ(l.out, 64u);
  }
}

TEST(ConfigParse, StackFillsDefaults) {
  auto c = ParseConfig(R"({"family":"stack","name":"digits","description":"a demo",
      "input_dim":8,"layers":[
      {"kind":"dense","width":16,"out":4},
      {"kind":"tree","depth":3,"leaf_width":2,"out":3},
      {"kind":"experts","experts":4,"top_k":1,"width":5,"out":2},
      {"kind":"tree","mode":"path","depth":2,"bias":false,"out":2}]})",
                       "config.json");
  ASSERT_TRUE(c.ok()) << c.status().message();
  EXPECT_EQ(c->family, Family::kStack);
  EXPECT_EQ(c->name, "digits");
  EXPECT_EQ(c->description, "a demo");
  EXPECT_EQ(c->input_dim, 8u);
  ASSERT_EQ(c->layers.size(), 4u);
  // `in` chains from input_dim through each previous `out`.
  const uint32_t ins[] = {8, 4, 3, 2}, outs[] = {4, 3, 2, 2};
  for (size_t i = 0; i < 4; ++i) {
    EXPECT_EQ(c->layers[i].in, ins[i]) << i;
    EXPECT_EQ(c->layers[i].out, outs[i]) << i;
    EXPECT_EQ(c->layers[i].activation, Activation::kRelu) << i;
    EXPECT_FALSE(c->layers[i].gated) << i;
  }
  EXPECT_TRUE(c->layers[0].bias);
  EXPECT_EQ(c->layers[1].mode, TreeMode::kLeaf);
  EXPECT_TRUE(c->layers[2].renormalize);
  EXPECT_FALSE(c->layers[3].bias);
  EXPECT_EQ(c->output_dim(), 2u);
  // Transformer fields keep their neutral values in a stack.
  EXPECT_EQ(c->d_model, 0u);
  EXPECT_EQ(c->head.kind, HeadKind::kNone);
}

TEST(ConfigParse, TransformerFillsDefaults) {
  auto c = Parse(BaseTransformer());
  ASSERT_TRUE(c.ok()) << c.status().message();
  EXPECT_EQ(c->family, Family::kTransformer);
  EXPECT_EQ(c->vocab_size, 256u);
  EXPECT_EQ(c->d_model, 64u);
  EXPECT_EQ(c->n_heads, 4u);
  EXPECT_EQ(c->n_kv_heads, 4u);  // from n_heads
  EXPECT_EQ(c->max_seq, 128u);
  EXPECT_EQ(c->norm, NormKind::kLayerNorm);
  EXPECT_EQ(c->norm_eps, 1e-5f);
  EXPECT_EQ(c->positions, Positions::kLearned);
  EXPECT_EQ(c->rope_base, 10000.0f);
  EXPECT_TRUE(c->causal);
  EXPECT_FALSE(c->tie_embeddings);
  EXPECT_TRUE(c->attn_bias);
  EXPECT_EQ(c->tokenizer, Tokenizer::kNone);
  EXPECT_EQ(c->head.kind, HeadKind::kLm);
  EXPECT_EQ(c->layers[0].in, 64u);
  EXPECT_EQ(c->layers[0].out, 64u);
  EXPECT_EQ(c->input_dim, 0u);
  EXPECT_EQ(c->output_dim(), 256u);
}

TEST(ConfigParse, TransformerExplicitFields) {
  json j = BaseTransformer();
  j["name"] = "tiny";
  j["n_kv_heads"] = 2;
  j["norm"] = "rmsnorm";
  j["norm_eps"] = 1e-6;
  j["positions"] = "rope";
  j["rope_base"] = 500000;
  j["causal"] = false;
  j["attn_bias"] = false;
  j["tokenizer"] = "byte";
  j["head"] = json::parse(R"({"kind":"classifier","classes":3,"pool":"last"})");
  j["layers"][0]["in"] = 64;  // allowed when equal to d_model
  j["layers"][0]["out"] = 64;
  auto c = Parse(j);
  ASSERT_TRUE(c.ok()) << c.status().message();
  EXPECT_EQ(c->n_kv_heads, 2u);
  EXPECT_EQ(c->norm, NormKind::kRmsNorm);
  EXPECT_EQ(c->norm_eps, 1e-6f);
  EXPECT_EQ(c->positions, Positions::kRope);
  EXPECT_EQ(c->rope_base, 500000.0f);
  EXPECT_FALSE(c->causal);
  EXPECT_FALSE(c->attn_bias);
  EXPECT_EQ(c->tokenizer, Tokenizer::kByte);
  EXPECT_EQ(c->head.kind, HeadKind::kClassifier);
  EXPECT_EQ(c->head.classes, 3u);
  EXPECT_EQ(c->head.pool, Pool::kLast);
  EXPECT_EQ(c->output_dim(), 3u);

  j["head"] = json::parse(R"({"kind":"classifier","classes":3})");
  c = Parse(j);
  ASSERT_TRUE(c.ok()) << c.status().message();
  EXPECT_EQ(c->head.pool, Pool::kMean);
  j["head"] = json::parse(R"({"kind":"none"})");
  c = Parse(j);
  ASSERT_TRUE(c.ok()) << c.status().message();
  EXPECT_EQ(c->head.kind, HeadKind::kNone);
  j["head"] = json::parse(R"({"kind":"lm"})");
  j["tie_embeddings"] = true;
  c = Parse(j);
  ASSERT_TRUE(c.ok()) << c.status().message();
  EXPECT_TRUE(c->tie_embeddings);
}

// A whole number written with a fraction part (as Python writes 256.0) is still an integer.
TEST(ConfigParse, WholeNumberWithFractionPart) {
  auto c = Parse(WithLayers(BaseStack(), R"([{"kind":"dense","width":32.0,"out":1e1}])"));
  ASSERT_TRUE(c.ok()) << c.status().message();
  EXPECT_EQ(c->layers[0].width, 32u);
  EXPECT_EQ(c->layers[0].out, 10u);
  EXPECT_EQ(ErrorOf(WithLayers(BaseStack(), R"([{"kind":"dense","width":32.5,"out":1}])")),
            "config.json: layers[0].width must be a non-negative integer, got 32.5");
}

// ---------------------------------------------------------------------------------------------
// Round trip through the canonical form.

std::vector<ModelConfig> RoundTripConfigs() {
  std::vector<std::string> texts = {
      BaseStack().dump(),
      BaseTransformer().dump(),
      R"({"family":"stack","name":"mixed \"quotes\" and ünïcode","description":"line\nbreak",
          "input_dim":8,"layers":[
          {"kind":"dense","width":16,"activation":"gelu_tanh","gated":true,"bias":false,"out":4},
          {"kind":"tree","depth":0,"leaf_width":2,"gated":true,"out":3},
          {"kind":"tree","mode":"path","depth":4,"activation":"silu","out":3},
          {"kind":"experts","experts":6,"top_k":6,"width":5,"renormalize":false,"out":2}]})",
      R"({"family":"transformer","vocab_size":256,"d_model":48,"n_heads":6,"n_kv_heads":3,
          "max_seq":7,"norm":"rmsnorm","norm_eps":3.3e-7,"positions":"rope","rope_base":1234.5,
          "causal":false,"attn_bias":false,"tokenizer":"byte",
          "head":{"kind":"classifier","classes":5,"pool":"first"},
          "layers":[{"kind":"experts","experts":4,"top_k":2,"width":8,"gated":true},
                    {"kind":"tree","mode":"path","depth":3}]})",
      R"({"family":"transformer","vocab_size":100,"d_model":16,"n_heads":2,"max_seq":4,
          "positions":"none","tie_embeddings":true,"norm_eps":1.4e-45,
          "layers":[{"kind":"tree","depth":2,"leaf_width":4}]})",
  };
  std::vector<ModelConfig> out;
  for (const std::string& t : texts) {
    auto c = ParseConfig(t, "config.json");
    EXPECT_TRUE(c.ok()) << c.status().message();
    if (c.ok()) out.push_back(*c);
  }
  return out;
}

TEST(ConfigRoundTrip, ParseOfCanonicalIsEqual) {
  const auto configs = RoundTripConfigs();
  ASSERT_EQ(configs.size(), 5u);
  for (const ModelConfig& c : configs) {
    const std::string text = ConfigToJson(c);
    auto again = ParseConfig(text, "canonical.json");
    ASSERT_TRUE(again.ok()) << again.status().message() << "\n" << text;
    EXPECT_TRUE(*again == c) << text;
    // The canonical form is a fixed point.
    EXPECT_EQ(ConfigToJson(*again), text);
  }
}

TEST(ConfigRoundTrip, EveryFieldIsExplicit) {
  auto c = Parse(BaseTransformer());
  ASSERT_TRUE(c.ok());
  const json j = json::parse(ConfigToJson(*c));
  for (const char* key : {"family", "name", "description", "vocab_size", "d_model", "n_heads",
                          "n_kv_heads", "max_seq", "norm", "norm_eps", "positions", "rope_base",
                          "causal", "tie_embeddings", "attn_bias", "tokenizer", "head", "layers"}) {
    EXPECT_TRUE(j.contains(key)) << key;
  }
  EXPECT_EQ(j["n_kv_heads"], 4);
  EXPECT_EQ(j["head"], json::parse(R"({"kind":"lm"})"));
  EXPECT_EQ(j["layers"][0],
            json::parse(R"({"kind":"dense","width":128,"activation":"relu","gated":false,
                            "bias":true})"));
  auto s = Parse(BaseStack());
  ASSERT_TRUE(s.ok());
  const json sj = json::parse(ConfigToJson(*s));
  EXPECT_EQ(sj["layers"][0]["in"], 64);
  EXPECT_FALSE(sj.contains("d_model"));
  EXPECT_FALSE(sj.contains("head"));
}

// Float fields survive the text form bit for bit, whatever their value.
TEST(ConfigRoundTrip, FloatFieldsAreExact) {
  auto base = Parse(BaseTransformer());
  ASSERT_TRUE(base.ok());
  std::mt19937 rng(20240601);
  std::uniform_int_distribution<uint32_t> bits(1, 0x7F7FFFFF);  // positive, finite, non-zero
  for (int i = 0; i < 2000; ++i) {
    ModelConfig c = *base;
    uint32_t a = bits(rng), b = bits(rng);
    std::memcpy(&c.norm_eps, &a, 4);
    std::memcpy(&c.rope_base, &b, 4);
    auto again = ParseConfig(ConfigToJson(c), "canonical.json");
    ASSERT_TRUE(again.ok()) << again.status().message();
    ASSERT_EQ(again->norm_eps, c.norm_eps) << std::hex << a;
    ASSERT_EQ(again->rope_base, c.rope_base) << std::hex << b;
  }
}

// ---------------------------------------------------------------------------------------------
// Errors: each names the file and the field.

TEST(ConfigErrors, InvalidJsonHasLineAndColumn) {
  const std::string msg = ErrorOf("{\"family\": \"stack\",\n  \"input_dim\": }");
  EXPECT_STARTS_WITH(msg, "config.json: invalid JSON at line 2, column ");
  EXPECT_STARTS_WITH(ErrorOf(""), "config.json: invalid JSON at line 1, column 1");
  EXPECT_STARTS_WITH(ErrorOf("{\"a\": 1e999}"), "config.json: invalid JSON");
}

TEST(ConfigErrors, DocumentShape) {
  EXPECT_EQ(ErrorOf("[1, 2]"), "config.json: the config must be a JSON object, got [1,2]");
  EXPECT_EQ(ErrorOf(R"({"family":"stack","input_dim":4,"input_dim":5,"layers":[]})"),
            "config.json: field \"input_dim\" appears twice in the same object");
  EXPECT_EQ(ErrorOf(R"({"input_dim":4})"), "config.json: missing the required field \"family\"");
  EXPECT_EQ(ErrorOf(R"({"family":"mlp"})"),
            "config.json: family must be one of \"stack\" or \"transformer\", got \"mlp\"");
}

TEST(ConfigErrors, UnknownAndMisplacedTopLevelFields) {
  json j = BaseStack();
  j["inputdim"] = 3;
  EXPECT_EQ(ErrorOf(j),
            "config.json: unknown field \"inputdim\" (expected one of family, name, description, "
            "input_dim, layers)");
  j = BaseStack();
  j["d_model"] = 64;
  EXPECT_STARTS_WITH(ErrorOf(j),
                     "config.json: field \"d_model\" does not apply to the stack family");
  j = BaseTransformer();
  j["input_dim"] = 64;
  EXPECT_STARTS_WITH(ErrorOf(j),
                     "config.json: field \"input_dim\" does not apply to the transformer family");
  j = BaseStack();
  j["name"] = 5;
  EXPECT_EQ(ErrorOf(j), "config.json: name must be a string, got 5");
  j = BaseStack();
  j["name"] = std::string(kMaxNameBytes + 1, 'x');
  EXPECT_STARTS_WITH(ErrorOf(j), "config.json: name must be at most 1024 bytes long");
}

TEST(ConfigErrors, UnknownLayerField) {
  const std::string msg = ErrorOf(WithLayers(BaseStack(), R"([
      {"kind":"dense","width":8,"out":8}, {"kind":"dense","width":8,"out":8},
      {"kind":"dense","widht":8,"out":8}])"));
  EXPECT_EQ(msg,
            "config.json: layers[2]: unknown field \"widht\" (expected one of kind, width, "
            "activation, gated, bias, in, out)");
}

TEST(ConfigErrors, FieldOfAnotherKind) {
  EXPECT_STARTS_WITH(
      ErrorOf(WithLayers(BaseStack(), R"([{"kind":"dense","width":8,"leaf_width":4,"out":8}])")),
      "config.json: layers[0]: field \"leaf_width\" does not apply to a dense layer (its fields "
      "are kind, width,");
  EXPECT_STARTS_WITH(
      ErrorOf(WithLayers(BaseStack(),
                         R"([{"kind":"tree","depth":2,"leaf_width":4,"top_k":1,"out":8}])")),
      "config.json: layers[0]: field \"top_k\" does not apply to a leaf-mode tree layer");
  EXPECT_STARTS_WITH(
      ErrorOf(WithLayers(BaseStack(),
                         R"([{"kind":"tree","mode":"path","depth":2,"gated":true,"out":8}])")),
      "config.json: layers[0]: field \"gated\" does not apply to a path-mode tree layer");
  EXPECT_STARTS_WITH(
      ErrorOf(WithLayers(BaseStack(),
                         R"([{"kind":"tree","mode":"path","depth":2,"leaf_width":3,"out":8}])")),
      "config.json: layers[0]: field \"leaf_width\" does not apply to a path-mode tree layer");
  EXPECT_STARTS_WITH(
      ErrorOf(
          WithLayers(BaseStack(),
                     R"([{"kind":"experts","experts":2,"top_k":1,"width":3,"depth":1,"out":8}])")),
      "config.json: layers[0]: field \"depth\" does not apply to an experts layer");
  EXPECT_STARTS_WITH(
      ErrorOf(
          WithLayers(BaseStack(), R"([{"kind":"dense","width":8,"renormalize":true,"out":8}])")),
      "config.json: layers[0]: field \"renormalize\" does not apply to a dense layer");
}

TEST(ConfigErrors, WrongTypes) {
  auto layer_error = [](const std::string& layer) {
    return ErrorOf(WithLayers(BaseStack(), "[" + layer + "]"));
  };
  EXPECT_EQ(layer_error(R"({"kind":"tree","depth":"six","leaf_width":4,"out":8})"),
            "config.json: layers[0].depth must be a non-negative integer, got \"six\"");
  EXPECT_EQ(layer_error(R"({"kind":"dense","width":-3,"out":8})"),
            "config.json: layers[0].width must be a non-negative integer, got -3");
  EXPECT_EQ(layer_error(R"({"kind":"dense","width":[8],"out":8})"),
            "config.json: layers[0].width must be a non-negative integer, got [8]");
  EXPECT_EQ(layer_error(R"({"kind":"dense","width":8,"gated":1,"out":8})"),
            "config.json: layers[0].gated must be true or false, got 1");
  EXPECT_EQ(layer_error(R"({"kind":"dense","width":8,"activation":"tanh","out":8})"),
            "config.json: layers[0].activation must be one of \"relu\", \"gelu\", \"gelu_tanh\" "
            "or \"silu\", got \"tanh\"");
  EXPECT_EQ(layer_error(R"({"kind":"dense","width":8,"activation":3,"out":8})"),
            "config.json: layers[0].activation must be one of \"relu\", \"gelu\", \"gelu_tanh\" "
            "or \"silu\", got 3");
  EXPECT_EQ(layer_error(R"({"kind":"tree","mode":"both","depth":1,"out":8})"),
            "config.json: layers[0].mode must be one of \"leaf\" or \"path\", got \"both\"");
  EXPECT_EQ(layer_error(R"({"kind":"sparse","width":8,"out":8})"),
            "config.json: layers[0].kind must be one of \"dense\", \"tree\" or \"experts\", got "
            "\"sparse\"");
  EXPECT_EQ(layer_error("5"), "config.json: layers[0] must be an object, got 5");
  json j = BaseStack();
  j["layers"] = json::object();
  EXPECT_EQ(ErrorOf(j), "config.json: layers must be a non-empty array, got {}");
  j["layers"] = json::array();
  EXPECT_EQ(ErrorOf(j), "config.json: layers must be a non-empty array, got []");
  j = BaseTransformer();
  j["causal"] = "yes";
  EXPECT_EQ(ErrorOf(j), "config.json: causal must be true or false, got \"yes\"");
  j = BaseTransformer();
  j["norm_eps"] = "small";
  EXPECT_EQ(ErrorOf(j), "config.json: norm_eps must be a positive number, got \"small\"");
  j = BaseTransformer();
  j["head"] = "lm";
  EXPECT_STARTS_WITH(ErrorOf(j), "config.json: head must be an object");
}

TEST(ConfigErrors, MissingRequiredFields) {
  auto layer_error = [](const std::string& layer) {
    return ErrorOf(WithLayers(BaseStack(), "[" + layer + "]"));
  };
  EXPECT_EQ(layer_error(R"({"width":8,"out":8})"),
            "config.json: layers[0]: missing the required field \"kind\"");
  EXPECT_EQ(layer_error(R"({"kind":"dense","out":8})"),
            "config.json: layers[0]: missing the required field \"width\"");
  EXPECT_EQ(layer_error(R"({"kind":"dense","width":8})"),
            "config.json: layers[0]: missing the required field \"out\"");
  EXPECT_EQ(layer_error(R"({"kind":"tree","leaf_width":8,"out":8})"),
            "config.json: layers[0]: missing the required field \"depth\"");
  EXPECT_EQ(layer_error(R"({"kind":"tree","depth":2,"out":8})"),
            "config.json: layers[0]: missing the required field \"leaf_width\"");
  EXPECT_EQ(layer_error(R"({"kind":"experts","experts":4,"width":2,"out":8})"),
            "config.json: layers[0]: missing the required field \"top_k\"");
  json j = BaseStack();
  j.erase("input_dim");
  EXPECT_EQ(ErrorOf(j), "config.json: missing the required field \"input_dim\"");
  j = BaseStack();
  j.erase("layers");
  EXPECT_EQ(ErrorOf(j), "config.json: missing the required field \"layers\"");
  for (const char* key : {"vocab_size", "d_model", "n_heads", "max_seq"}) {
    j = BaseTransformer();
    j.erase(key);
    EXPECT_EQ(ErrorOf(j), std::string("config.json: missing the required field \"") + key + "\"");
  }
  j = BaseTransformer();
  j["head"] = json::parse(R"({"kind":"classifier"})");
  EXPECT_EQ(ErrorOf(j), "config.json: head: missing the required field \"classes\"");
  j["head"] = json::parse(R"({"classes":3})");
  EXPECT_EQ(ErrorOf(j), "config.json: head: missing the required field \"kind\"");
}

TEST(ConfigErrors, HeadFields) {
  json j = BaseTransformer();
  j["head"] = json::parse(R"({"kind":"classifier","clases":3})");
  EXPECT_EQ(ErrorOf(j),
            "config.json: head: unknown field \"clases\" (expected one of kind, classes, pool)");
  j["head"] = json::parse(R"({"kind":"lm","classes":3})");
  EXPECT_EQ(ErrorOf(j),
            "config.json: head: field \"classes\" does not apply to the lm head (its fields are "
            "kind)");
  j["head"] = json::parse(R"({"kind":"classifier","classes":0})");
  EXPECT_EQ(ErrorOf(j), "config.json: head.classes must be between 1 and 16777216, got 0");
  j["head"] = json::parse(R"({"kind":"classifier","classes":2,"pool":"max"})");
  EXPECT_EQ(ErrorOf(j),
            "config.json: head.pool must be one of \"mean\", \"first\" or \"last\", got \"max\"");
}

TEST(ConfigErrors, StackWidthsMustChain) {
  EXPECT_EQ(ErrorOf(WithLayers(BaseStack(), R"([{"kind":"dense","width":8,"in":32,"out":8}])")),
            "config.json: layers[0].in is 32 but must be 64 (input_dim)");
  EXPECT_EQ(ErrorOf(WithLayers(BaseStack(), R"([{"kind":"dense","width":8,"out":10},
                                               {"kind":"dense","width":8,"in":9,"out":3}])")),
            "config.json: layers[1].in is 9 but must be 10 (the out of layers[0])");
}

TEST(ConfigErrors, TransformerWidthsAreDModel) {
  json j = BaseTransformer();
  j["layers"][0]["out"] = 32;
  EXPECT_STARTS_WITH(ErrorOf(j),
                     "config.json: layers[0].out is 32 but must be d_model (64) in a transformer");
  j = BaseTransformer();
  j["layers"][0]["in"] = 65;
  EXPECT_STARTS_WITH(ErrorOf(j), "config.json: layers[0].in is 65 but must be d_model (64)");
}

TEST(ConfigErrors, TransformerConsistency) {
  json j = BaseTransformer();
  j["n_heads"] = 5;
  EXPECT_EQ(ErrorOf(j), "config.json: d_model (64) must be a multiple of n_heads (5)");
  j = BaseTransformer();
  j["n_kv_heads"] = 3;
  EXPECT_EQ(ErrorOf(j), "config.json: n_heads (4) must be a multiple of n_kv_heads (3)");
  j = BaseTransformer();
  j["n_kv_heads"] = 8;  // more key/value heads than query heads
  EXPECT_EQ(ErrorOf(j), "config.json: n_heads (4) must be a multiple of n_kv_heads (8)");
  j = BaseTransformer();
  j["d_model"] = 12;
  j["positions"] = "rope";
  EXPECT_EQ(ErrorOf(j),
            "config.json: positions \"rope\" needs an even head_dim, but d_model / n_heads = "
            "12 / 4 = 3");
  j["positions"] = "learned";  // an odd head_dim is fine without rotations
  EXPECT_EQ(ErrorOf(j), "OK");
  j = BaseTransformer();
  j["max_seq"] = 0;
  EXPECT_EQ(ErrorOf(j), "config.json: max_seq must be between 1 and 16777216, got 0");
  j = BaseTransformer();
  j["tie_embeddings"] = true;
  j["head"] = json::parse(R"({"kind":"classifier","classes":2})");
  EXPECT_EQ(ErrorOf(j),
            "config.json: tie_embeddings needs the lm head, but head.kind is \"classifier\"");
  j = BaseTransformer();
  j["tokenizer"] = "byte";
  j["vocab_size"] = 300;
  EXPECT_EQ(ErrorOf(j),
            "config.json: tokenizer \"byte\" needs vocab_size 256 (one token per byte), got 300");
  j = BaseTransformer();
  j["layers"] = json::parse(R"([{"kind":"experts","experts":8,"top_k":9,"width":4}])");
  EXPECT_EQ(ErrorOf(j),
            "config.json: layers[0].top_k must be between 1 and 8 (the number of experts), "
            "got 9");
  j["layers"][0]["top_k"] = 0;
  EXPECT_EQ(ErrorOf(j),
            "config.json: layers[0].top_k must be between 1 and 8 (the number of experts), "
            "got 0");
}

TEST(ConfigErrors, PositiveFloats) {
  for (const char* key : {"norm_eps", "rope_base"}) {
    for (double bad : {0.0, -1.0, 1e-50, 1e50}) {
      json j = BaseTransformer();
      j[key] = bad;
      EXPECT_STARTS_WITH(ErrorOf(j), std::string("config.json: ") + key +
                                         " must be a positive number within the float32 range");
    }
  }
}

// ---------------------------------------------------------------------------------------------
// Limits (config_limits.h) and overflow.

std::string DenseStack(uint64_t input_dim, uint64_t width, uint64_t out, int layers = 1) {
  std::string s =
      R"({"family":"stack","input_dim":)" + std::to_string(input_dim) + R"(,"layers":[)";
  for (int i = 0; i < layers; ++i) {
    if (i) s += ",";
    s += R"({"kind":"dense","width":)" + std::to_string(width) + R"(,"out":)" +
         std::to_string(out) + "}";
  }
  return s + "]}";
}

std::string OneLayer(uint64_t input_dim, const std::string& layer) {
  return R"({"family":"stack","input_dim":)" + std::to_string(input_dim) + R"(,"layers":[)" +
         layer + "]}";
}

TEST(ConfigLimits, TreeDepth) {
  EXPECT_EQ(ErrorOf(OneLayer(1, R"({"kind":"tree","depth":20,"leaf_width":1,"out":1})")), "OK");
  EXPECT_EQ(ErrorOf(OneLayer(1, R"({"kind":"tree","depth":21,"leaf_width":1,"out":1})")),
            "config.json: layers[0].depth must be between 0 and 20 for a leaf-mode tree, got 21");
  EXPECT_EQ(ErrorOf(OneLayer(1, R"({"kind":"tree","mode":"path","depth":22,"out":1})")), "OK");
  EXPECT_EQ(ErrorOf(OneLayer(1, R"({"kind":"tree","mode":"path","depth":23,"out":1})")),
            "config.json: layers[0].depth must be between 0 and 22 for a path-mode tree, got 23");
  EXPECT_EQ(ErrorOf(OneLayer(1, R"({"kind":"tree","depth":4294967296,"leaf_width":1,"out":1})")),
            "config.json: layers[0].depth must be between 0 and 20 for a leaf-mode tree, got "
            "4294967296");
}

TEST(ConfigLimits, Dimensions) {
  const uint64_t max = kMaxDimension;
  EXPECT_EQ(max, 16777216u);
  EXPECT_EQ(ErrorOf(DenseStack(1, max, 1)), "OK");
  EXPECT_EQ(ErrorOf(DenseStack(1, max + 1, 1)),
            "config.json: layers[0].width must be between 1 and 16777216, got 16777217");
  EXPECT_EQ(ErrorOf(DenseStack(max + 1, 1, 1)),
            "config.json: input_dim must be between 1 and 16777216, got 16777217");
  json j = BaseTransformer();
  j["vocab_size"] = max + 1;
  EXPECT_EQ(ErrorOf(j), "config.json: vocab_size must be between 1 and 16777216, got 16777217");
  EXPECT_EQ(
      ErrorOf(OneLayer(1, R"({"kind":"experts","experts":4096,"top_k":1,"width":1,"out":1})")),
      "OK");
  EXPECT_EQ(
      ErrorOf(OneLayer(1, R"({"kind":"experts","experts":4097,"top_k":1,"width":1,"out":1})")),
      "config.json: layers[0].experts must be between 1 and 4096, got 4097");
}

TEST(ConfigLimits, LayerCount) {
  EXPECT_EQ(ErrorOf(DenseStack(1, 1, 1, 1024)), "OK");
  EXPECT_EQ(ErrorOf(DenseStack(1, 1, 1, 1025)),
            "config.json: layers must have at most 1024 entries, got 1025");
}

TEST(ConfigLimits, TensorElementCount) {
  // fc1.weight is [width, in] (docs/input-contract.md): 2^12 x 2^24 = 2^36 elements is the
  // largest allowed.
  EXPECT_EQ(ErrorOf(DenseStack(1u << 24, 1u << 12, 1)), "OK");
  EXPECT_EQ(
      ErrorOf(DenseStack(1u << 24, (1u << 12) + 1, 1)),
      "config.json: layers[0] needs tensor \"layers.0.fc1.weight\" of shape [4097, 16777216], "
      "more than the limit of 2^36 (68719476736) elements");
  EXPECT_EQ(ErrorOf(DenseStack(1u << 24, 1u << 24, 1)),
            "config.json: layers[0] needs tensor \"layers.0.fc1.weight\" of shape [16777216, "
            "16777216], more than the limit of 2^36 (68719476736) elements");
  // A model-level tensor: embed.weight [V, D].
  json j = BaseTransformer();
  j["vocab_size"] = 1u << 24;
  j["d_model"] = 1u << 13;
  EXPECT_STARTS_WITH(ErrorOf(j),
                     "config.json: the model needs tensor \"embed.weight\" of shape [16777216, "
                     "8192], more than the limit");
}

// Products of the largest fields overflow 64 bits; they must be refused, not wrap around.
TEST(ConfigLimits, NoOverflowAtTheExtremes) {
  // leaves.fc1.weight would be [2^20, 2^24, 2^24] = 2^68 elements.
  const std::string tree = OneLayer(
      1u << 24, R"({"kind":"tree","depth":20,"leaf_width":16777216,"gated":true,"out":16777216})");
  EXPECT_CONTAINS(ErrorOf(tree), "more than the limit of 2^36");
  // experts.fc1.weight would be [4096, 2^24, 2^24] = 2^60; router.weight [4096, 2^24] = 2^36
  // is exactly at the limit and passes.
  const std::string experts = OneLayer(
      1u << 24, R"({"kind":"experts","experts":4096,"top_k":4096,"width":16777216,"out":1})");
  EXPECT_CONTAINS(ErrorOf(experts),
                  "\"layers.0.experts.fc1.weight\" of shape [4096, 16777216, "
                  "16777216], more than the limit of 2^36");
  const std::string path =
      OneLayer(1u << 24, R"({"kind":"tree","mode":"path","depth":22,"out":16777216})");
  EXPECT_CONTAINS(ErrorOf(path), "\"layers.0.nodes.weight\" of shape [8388607, 16777216]");
}

TEST(ConfigLimits, TotalElementCount) {
  // Per docs/input-contract.md a dense layer holds fc1.weight [W,in], fc1.bias [W],
  // fc2.weight [out,W] and fc2.bias [out]. With in = out = 2^24 and W = 2^12 each weight is 2^36
  // elements (allowed), so one layer holds 2^37 + 2^12 + 2^24 and two layers exceed 2^38.
  const uint64_t one = (uint64_t{1} << 37) + (1u << 12) + (1u << 24);
  EXPECT_EQ(ErrorOf(DenseStack(1u << 24, 1u << 12, 1u << 24, 1)), "OK");
  EXPECT_EQ(ErrorOf(DenseStack(1u << 24, 1u << 12, 1u << 24, 2)),
            "config.json: the model's tensors hold " + std::to_string(2 * one) +
                " elements, more than the limit of 2^38 (274877906944)");
}

// ---------------------------------------------------------------------------------------------
// Files.

TEST(ConfigFile, ReadsAndNamesThePath) {
  TempDir dir;
  const std::string good = dir.Write("config.json", BaseStack().dump());
  auto c = ReadConfigFile(good);
  ASSERT_TRUE(c.ok()) << c.status().message();
  EXPECT_EQ(c->input_dim, 64u);

  json bad = BaseStack();
  bad["layers"][0]["width"] = "wide";
  const std::string bad_path = dir.Write("bad.json", bad.dump());
  auto b = ReadConfigFile(bad_path);
  ASSERT_FALSE(b.ok());
  EXPECT_EQ(b.status().message(),
            bad_path + ": layers[0].width must be a non-negative integer, got \"wide\"");

  const std::string missing = dir.Path("absent.json");
  auto m = ReadConfigFile(missing);
  ASSERT_FALSE(m.ok());
  EXPECT_EQ(m.status().code(), Status::Code::kNotFound);
  EXPECT_STARTS_WITH(m.status().message(), missing + ": cannot open the config file");
}

// A file of plain renames, the only form there was before the mapping file grew, reads as it
// always did (docs/mapping.md, form 1).
TEST(ConfigRenameMap, ParsesPairs) {
  auto m =
      ParseMapping(R"({"model.fc1.weight":"layers.0.fc1.weight","b":"a","a":"b"})", "rename.json");
  ASSERT_TRUE(m.ok()) << m.status().message();
  ASSERT_EQ(m->entries.size(), 3u);
  std::map<std::string, std::string> renames;
  for (const MappingEntry& e : m->entries) {
    EXPECT_EQ(e.kind, MappingEntry::Kind::kRename);
    EXPECT_FALSE(e.transpose);
    renames[e.key] = e.to;
  }
  EXPECT_EQ(renames.at("model.fc1.weight"), "layers.0.fc1.weight");
  EXPECT_EQ(renames.at("a"), "b");  // a swap is fine: targets are distinct
  auto empty = ParseMapping("{}", "rename.json");
  ASSERT_TRUE(empty.ok());
  EXPECT_TRUE(empty->empty());
}

TEST(ConfigRenameMap, Errors) {
  auto error = [](const std::string& text) {
    auto m = ParseMapping(text, "rename.json");
    return m.ok() ? std::string("OK") : m.status().message();
  };
  EXPECT_STARTS_WITH(error(R"(["a","b"])"),
                     "rename.json: a mapping file must be a JSON object of their tensor names (or "
                     "patterns) to ours, got [\"a\",\"b\"]");
  EXPECT_EQ(error(R"({"a": 3})"),
            "rename.json: entry \"a\": the value must be our name or an object with \"to\", "
            "\"stack\" or \"split\", got 3");
  EXPECT_EQ(error(R"({"a": "x", "b": "x"})"),
            "rename.json: entries \"a\" and \"b\" both produce \"x\"");
  EXPECT_EQ(error(R"({"a": "x", "a": "y"})"),
            "rename.json: field \"a\" appears twice in the same object");
  EXPECT_EQ(error(R"({"a": ""})"),
            "rename.json: entry \"a\": \"to\" must be a non-empty string, got \"\"");
  EXPECT_EQ(error(R"({"": "a"})"), "rename.json: an entry has an empty name");
  EXPECT_STARTS_WITH(error("{\"a\": \"x\",\n}"), "rename.json: invalid JSON at line 2, column 1");
}

TEST(ConfigRenameMap, ReadsFile) {
  TempDir dir;
  auto m = ReadMapping(dir.Write("rename.json", R"({"x":"y"})"));
  ASSERT_TRUE(m.ok()) << m.status().message();
  ASSERT_EQ(m->entries.size(), 1u);
  EXPECT_EQ(m->entries[0].to, "y");
  EXPECT_EQ(m->source, dir.Path("rename.json"));
  const std::string missing = dir.Path("none.json");
  auto n = ReadMapping(missing);
  ASSERT_FALSE(n.ok());
  EXPECT_EQ(n.status().code(), Status::Code::kNotFound);
  EXPECT_STARTS_WITH(n.status().message(), missing + ": cannot open the mapping file");
}

}  // namespace
}  // namespace sprig::convert
