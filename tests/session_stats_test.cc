// Session statistics count the work a session did.
#include <gtest/gtest.h>

#include "sprig/session.h"
#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

std::shared_ptr<const Model> Packed(const testing::TempDir& dir, const std::string& name,
                                    const std::string& config) {
  auto model = Model::open(testing::PackSynthesized(dir, name, config));
  EXPECT_TRUE(model.ok()) << model.status().message();
  return model.ok() ? *model : nullptr;
}

TEST(SessionStats, CountsRowsAndCalls) {
  testing::TempDir dir;
  auto model = Packed(dir, "stack", R"({"family":"stack","input_dim":4,"layers":[
      {"kind":"tree","mode":"leaf","depth":2,"leaf_width":3,"activation":"relu","out":2}]})");
  ASSERT_NE(model, nullptr);
  auto session = Session::create(model);
  ASSERT_TRUE(session.ok());
  std::vector<float> x(10 * 4, 0.5f), y(10 * 2);
  ASSERT_TRUE((*session)->forward(x.data(), 10, y.data()).ok());
  ASSERT_TRUE((*session)->forward(x.data(), 1, y.data()).ok());
  x[3] = std::numeric_limits<float>::quiet_NaN();
  EXPECT_FALSE((*session)->forward(x.data(), 1, y.data()).ok());  // refused: not counted
  const SessionStats& s = (*session)->stats();
  EXPECT_EQ(s.forward_calls, 2u);
  EXPECT_EQ(s.rows, 11u);
  EXPECT_GE(s.forward_seconds, 0.0);
  EXPECT_EQ(s.decode_tokens, 0u);
  (*session)->reset_stats();
  EXPECT_EQ((*session)->stats().rows, 0u);
}

TEST(SessionStats, SeparatesPrefillDecodeAndGeneration) {
  testing::TempDir dir;
  auto model = Packed(dir, "lm", R"({"family":"transformer","vocab_size":256,"d_model":16,
      "n_heads":2,"max_seq":32,"positions":"rope","tokenizer":"byte","layers":[
      {"kind":"tree","mode":"path","depth":3,"activation":"gelu"}]})");
  ASSERT_NE(model, nullptr);
  auto session = Session::create(model);
  ASSERT_TRUE(session.ok());
  std::vector<float> logits(8 * 256);
  const std::vector<int32_t> tokens = {72, 101, 108, 108, 111};
  ASSERT_TRUE((*session)->forward_tokens(tokens.data(), 1, tokens.size(), logits.data()).ok());
  size_t seen = 0;
  GenerateOptions options;
  options.count = 6;
  ASSERT_TRUE((*session)->generate(tokens, options, [&](int32_t) { return ++seen < 100; }).ok());
  const SessionStats& s = (*session)->stats();
  EXPECT_EQ(s.forward_calls, 1u);
  EXPECT_EQ(s.sequence_tokens, 5u);
  EXPECT_EQ(s.prefill_tokens, 5u);  // the prompt, in one pass
  EXPECT_EQ(s.decode_tokens, 5u);   // every generated token but the last is fed back
  EXPECT_EQ(s.generated_tokens, 6u);
  EXPECT_EQ(seen, 6u);
}

}  // namespace
}  // namespace sprig
