// The C API (sprig/sprig.h) against the C++ API it wraps: the same outputs bit for bit for
// forward, forward_tokens, KV-cache decoding and seeded generation; status codes and messages
// for missing, damaged and misused models; NULL handles and arrays refused without a crash; and
// a program compiled as C (c_api_smoke.c) whose printed outputs must equal the C++ results.
// Models are random (`sprig synth`); outputs mean nothing, only their agreement does.
#include "sprig/sprig.h"

#include <gtest/gtest.h>

#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <limits>
#include <regex>
#include <sstream>
#include <string>
#include <vector>

#include "format/model_file.h"
#include "sprig/model.h"
#include "sprig/session.h"
#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

const char* const kStack = R"({"family":"stack","input_dim":16,"layers":[
  {"kind":"tree","mode":"leaf","depth":3,"leaf_width":8,"activation":"relu","out":16},
  {"kind":"tree","mode":"path","depth":5,"activation":"gelu","out":16},
  {"kind":"experts","experts":4,"top_k":2,"width":8,"out":4}]})";

const char* const kByteLm = R"({"family":"transformer","name":"bytes","tokenizer":"byte",
  "vocab_size":256,"d_model":32,"n_heads":4,"max_seq":48,"norm":"rmsnorm",
  "positions":"rope","causal":true,"head":{"kind":"lm"},"layers":[
   {"kind":"tree","mode":"leaf","depth":2,"leaf_width":8,"activation":"relu"},
   {"kind":"experts","experts":4,"top_k":2,"width":8,"activation":"silu","gated":true}]})";

const char* const kClassifier = R"({"family":"transformer","vocab_size":30,"d_model":16,
  "n_heads":2,"max_seq":20,"positions":"learned","causal":true,
  "head":{"kind":"classifier","classes":3,"pool":"mean"},
  "layers":[{"kind":"dense","width":16,"activation":"gelu"}]})";

std::string MakeModel(const testing::TempDir& dir, const std::string& name,
                      const std::string& config) {
  return testing::PackSynthesized(dir, name, config, 5);
}

std::unique_ptr<Session> CppSession(const std::string& path, size_t threads = 1) {
  return testing::OpenSession(path, threads);
}

// Owns C handles and an error string for one test.
struct C {
  sprig_model_t* model = nullptr;
  sprig_session_t* session = nullptr;
  char* err = nullptr;
  ~C() {
    sprig_session_destroy(session);
    sprig_model_close(model);
    sprig_free(err);
  }
  std::string message() const { return err ? err : ""; }
};

// Opens `path` and a session through the C API.
void OpenC(const std::string& path, size_t threads, C* c) {
  ASSERT_EQ(sprig_model_open(path.c_str(), &c->model, &c->err), SPRIG_OK) << c->message();
  ASSERT_EQ(sprig_session_create(c->model, threads, &c->session, &c->err), SPRIG_OK)
      << c->message();
}

std::vector<float> Rows(size_t rows, size_t in, uint32_t seed) {
  std::vector<float> x(rows * in);
  uint32_t s = seed;
  for (float& v : x) {
    s = s * 1664525u + 1013904223u;  // any spread of values will do
    v = static_cast<float>(static_cast<int>(s >> 20) - 2048) / 512.0f;
  }
  return x;
}

std::vector<int32_t> Tokens(size_t n, uint32_t vocab, uint32_t seed) {
  std::vector<int32_t> t(n);
  uint32_t s = seed;
  for (auto& v : t) {
    s = s * 1664525u + 1013904223u;
    v = static_cast<int32_t>((s >> 8) % vocab);
  }
  return t;
}

class CApiTest : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = new testing::TempDir;
    stack_ = MakeModel(*dir_, "stack", kStack);
    lm_ = MakeModel(*dir_, "bytes", kByteLm);
    classifier_ = MakeModel(*dir_, "cls", kClassifier);
  }
  static void TearDownTestSuite() { delete dir_; }
  static testing::TempDir* dir_;
  static std::string stack_, lm_, classifier_;
};
testing::TempDir* CApiTest::dir_ = nullptr;
std::string CApiTest::stack_, CApiTest::lm_, CApiTest::classifier_;

TEST_F(CApiTest, ModelPropertiesFollowTheConfig) {
  C s, l, k;
  ASSERT_EQ(sprig_model_open(stack_.c_str(), &s.model, &s.err), SPRIG_OK) << s.message();
  ASSERT_EQ(sprig_model_open(lm_.c_str(), &l.model, &l.err), SPRIG_OK) << l.message();
  ASSERT_EQ(sprig_model_open(classifier_.c_str(), &k.model, &k.err), SPRIG_OK) << k.message();
  EXPECT_EQ(sprig_model_family(s.model), SPRIG_FAMILY_STACK);
  EXPECT_EQ(sprig_model_layer_count(s.model), 3u);
  EXPECT_EQ(sprig_model_input_dim(s.model), 16u);
  EXPECT_EQ(sprig_model_output_dim(s.model), 4u);
  EXPECT_EQ(sprig_model_vocab_size(s.model), 0u);
  EXPECT_EQ(sprig_model_max_seq(s.model), 0u);
  EXPECT_EQ(sprig_model_tokens_output_size(s.model, 2, 3), 0u);

  EXPECT_EQ(sprig_model_family(l.model), SPRIG_FAMILY_TRANSFORMER);
  EXPECT_EQ(sprig_model_layer_count(l.model), 2u);
  EXPECT_EQ(sprig_model_input_dim(l.model), 0u);
  EXPECT_EQ(sprig_model_vocab_size(l.model), 256u);
  EXPECT_EQ(sprig_model_max_seq(l.model), 48u);
  EXPECT_EQ(sprig_model_output_dim(l.model), 256u);
  EXPECT_EQ(sprig_model_tokens_output_size(l.model, 2, 3), 2u * 3u * 256u);
  // A classifier writes one row of class scores per sequence.
  EXPECT_EQ(sprig_model_output_dim(k.model), 3u);
  EXPECT_EQ(sprig_model_tokens_output_size(k.model, 2, 7), 2u * 3u);

  EXPECT_EQ(sprig_model_verify_checksums(s.model, &s.err), SPRIG_OK) << s.message();
  EXPECT_EQ(sprig_model_verify_checksums(l.model, nullptr), SPRIG_OK);
}

TEST_F(CApiTest, ForwardIsBitIdenticalToTheSession) {
  for (size_t threads : {1, 2}) {
    SCOPED_TRACE(threads);
    auto cpp = CppSession(stack_, threads);
    C c;
    OpenC(stack_, threads, &c);
    ASSERT_TRUE(cpp && c.session);
    EXPECT_EQ(sprig_session_threads(c.session), threads);
    EXPECT_STREQ(sprig_session_kernel_path(c.session), cpp->kernel_path());
    const size_t rows = 37;
    const std::vector<float> x = Rows(rows, 16, 3);
    std::vector<float> want(rows * 4), got(rows * 4, -1.0f);
    ASSERT_TRUE(cpp->forward(x.data(), rows, want.data()).ok());
    ASSERT_EQ(sprig_session_forward(c.session, x.data(), rows, got.data(), &c.err), SPRIG_OK)
        << c.message();
    EXPECT_TRUE(testing::BitEqual(got, want));
    // Zero rows with no arrays is a valid, empty call.
    EXPECT_EQ(sprig_session_forward(c.session, nullptr, 0, nullptr, &c.err), SPRIG_OK);
  }
}

TEST_F(CApiTest, TokenCallsAreBitIdenticalToTheSession) {
  auto cpp = CppSession(lm_, 2);
  C c;
  OpenC(lm_, 2, &c);
  ASSERT_TRUE(cpp && c.session);
  const size_t v = 256, b = 2, t = 9;
  const std::vector<int32_t> tokens = Tokens(b * t, 256, 7);
  std::vector<float> want(b * t * v), got(b * t * v);
  ASSERT_TRUE(cpp->forward_tokens(tokens.data(), b, t, want.data()).ok());
  ASSERT_EQ(sprig_session_forward_tokens(c.session, tokens.data(), b, t, got.data(), &c.err),
            SPRIG_OK)
      << c.message();
  EXPECT_TRUE(testing::BitEqual(got, want));
  EXPECT_EQ(sprig_session_position(c.session), 0u) << "forward_tokens must not touch the cache";

  // Decoding one token at a time, then a batched append on top.
  std::vector<float> cpp_logits(v), c_logits(v);
  for (size_t i = 0; i < t; ++i) {
    ASSERT_TRUE(cpp->append_token(tokens[i], cpp_logits.data()).ok());
    ASSERT_EQ(sprig_session_append_token(c.session, tokens[i], c_logits.data(), &c.err), SPRIG_OK)
        << c.message();
    EXPECT_TRUE(testing::BitEqual(c_logits, cpp_logits)) << "position " << i;
    EXPECT_EQ(sprig_session_position(c.session), i + 1);
  }
  ASSERT_TRUE(cpp->append_tokens(tokens.data() + t, t, cpp_logits.data()).ok());
  ASSERT_EQ(sprig_session_append_tokens(c.session, tokens.data() + t, t, c_logits.data(), &c.err),
            SPRIG_OK)
      << c.message();
  EXPECT_TRUE(testing::BitEqual(c_logits, cpp_logits));
  EXPECT_EQ(sprig_session_position(c.session), 2 * t);
  // Logits are optional; reset empties the cache.
  EXPECT_EQ(sprig_session_append_token(c.session, 1, nullptr, &c.err), SPRIG_OK) << c.message();
  sprig_session_reset(c.session);
  EXPECT_EQ(sprig_session_position(c.session), 0u);
  cpp->reset();
  ASSERT_TRUE(cpp->append_token(tokens[3], cpp_logits.data()).ok());
  ASSERT_EQ(sprig_session_append_token(c.session, tokens[3], c_logits.data(), &c.err), SPRIG_OK);
  EXPECT_TRUE(testing::BitEqual(c_logits, cpp_logits)) << "after reset";
}

// Collects tokens through the C callback, stopping after `limit` when it is not 0.
struct Collector {
  std::vector<int32_t> tokens;
  size_t limit = 0;
  static int Take(int32_t token, void* user) {
    auto* self = static_cast<Collector*>(user);
    self->tokens.push_back(token);
    return self->limit == 0 || self->tokens.size() < self->limit;
  }
};

TEST_F(CApiTest, GenerateGivesTheSessionsTokens) {
  auto cpp = CppSession(lm_, 1);
  C c;
  OpenC(lm_, 2, &c);  // the thread count must not change the tokens
  ASSERT_TRUE(cpp && c.session);
  const std::vector<int32_t> prompt = {'H', 'e', 'l', 'l', 'o'};
  auto cpp_generate = [&](const GenerateOptions& o, size_t limit) {
    std::vector<int32_t> out;
    EXPECT_TRUE(cpp->generate(prompt, o,
                              [&](int32_t t) {
                                out.push_back(t);
                                return limit == 0 || out.size() < limit;
                              })
                    .ok());
    return out;
  };
  for (uint64_t seed : {1u, 9u, 12345u}) {
    SCOPED_TRACE(seed);
    sprig_generate_options_t o;
    sprig_generate_options_default(&o);
    o.count = 30;
    o.seed = seed;
    o.temperature = 0.8f;
    o.top_p = 0.9f;
    Collector got;
    ASSERT_EQ(sprig_session_generate(c.session, prompt.data(), prompt.size(), &o, &Collector::Take,
                                     &got, &c.err),
              SPRIG_OK)
        << c.message();
    GenerateOptions want;
    want.count = 30;
    want.seed = seed;
    want.temperature = 0.8f;
    want.top_p = 0.9f;
    EXPECT_EQ(got.tokens, cpp_generate(want, 0));
    EXPECT_EQ(got.tokens.size(), 30u);
    EXPECT_EQ(sprig_session_position(c.session), prompt.size() + 29);
    // A callback returning 0 stops generation at once.
    Collector stopped;
    stopped.limit = 4;
    ASSERT_EQ(sprig_session_generate(c.session, prompt.data(), prompt.size(), &o, &Collector::Take,
                                     &stopped, &c.err),
              SPRIG_OK);
    EXPECT_EQ(stopped.tokens, cpp_generate(want, 4));
    EXPECT_EQ(sprig_session_position(c.session), prompt.size() + 3);
  }
  // NULL options are the C++ defaults, which sprig_generate_options_default also gives.
  const GenerateOptions d;
  sprig_generate_options_t o;
  std::memset(&o, 0xff, sizeof(o));
  sprig_generate_options_default(&o);
  EXPECT_EQ(o.count, d.count);
  EXPECT_EQ(o.temperature, d.temperature);
  EXPECT_EQ(o.top_p, d.top_p);
  EXPECT_EQ(o.seed, d.seed);
  Collector defaults;
  ASSERT_EQ(sprig_session_generate(c.session, prompt.data(), prompt.size(), nullptr,
                                   &Collector::Take, &defaults, &c.err),
            SPRIG_OK)
      << c.message();
  EXPECT_EQ(defaults.tokens, cpp_generate(d, 0));
  EXPECT_EQ(sprig_session_position(c.session), 48u) << "64 tokens run into max_seq 48";
}

TEST_F(CApiTest, SessionKeepsItsModelAlive) {
  C c;
  OpenC(stack_, 1, &c);
  sprig_model_close(c.model);
  c.model = nullptr;
  auto cpp = CppSession(stack_, 1);
  const std::vector<float> x = Rows(5, 16, 11);
  std::vector<float> want(5 * 4), got(5 * 4);
  ASSERT_TRUE(cpp->forward(x.data(), 5, want.data()).ok());
  ASSERT_EQ(sprig_session_forward(c.session, x.data(), 5, got.data(), &c.err), SPRIG_OK)
      << c.message();
  EXPECT_TRUE(testing::BitEqual(got, want));
}

TEST_F(CApiTest, FailuresGiveTheirCodeAndAMessage) {
  C c;
  // A missing file: NOT_FOUND naming it, and no handle.
  const std::string missing = dir_->File("absent.sprig");
  c.model = reinterpret_cast<sprig_model_t*>(&c);  // must be overwritten with NULL
  EXPECT_EQ(sprig_model_open(missing.c_str(), &c.model, &c.err), SPRIG_NOT_FOUND);
  EXPECT_EQ(c.model, nullptr);
  EXPECT_NE(c.message().find("absent.sprig"), std::string::npos) << c.message();
  // Not a .sprig file: CORRUPTION. The earlier message is replaced (and freed).
  const std::string text = dir_->File("text.sprig");
  testing::WriteFile(text, std::string(4096, 'x'));
  EXPECT_EQ(sprig_model_open(text.c_str(), &c.model, &c.err), SPRIG_CORRUPTION);
  EXPECT_NE(c.message().find("is not a .sprig file"), std::string::npos) << c.message();
  // Without errptr the code still comes back.
  EXPECT_EQ(sprig_model_open(missing.c_str(), &c.model, nullptr), SPRIG_NOT_FOUND);

  // Float rows into a transformer, tokens into a stack.
  OpenC(lm_, 1, &c);
  float x[16] = {}, y[256];
  EXPECT_EQ(sprig_session_forward(c.session, x, 1, y, &c.err), SPRIG_INVALID_ARGUMENT);
  EXPECT_NE(c.message().find("is a transformer model"), std::string::npos) << c.message();
  C s;
  OpenC(stack_, 1, &s);
  const int32_t tokens[2] = {1, 2};
  EXPECT_EQ(sprig_session_forward_tokens(s.session, tokens, 1, 2, y, &s.err),
            SPRIG_INVALID_ARGUMENT);
  EXPECT_NE(s.message().find("is a stack model"), std::string::npos) << s.message();
  EXPECT_EQ(sprig_session_append_token(s.session, 1, y, &s.err), SPRIG_INVALID_ARGUMENT);
  const float nan_row[16] = {0, 0, std::numeric_limits<float>::quiet_NaN()};
  EXPECT_EQ(sprig_session_forward(s.session, nan_row, 1, y, &s.err), SPRIG_INVALID_ARGUMENT);
  EXPECT_NE(s.message().find("column 2 is not a finite number"), std::string::npos) << s.message();

  // Bad tokens, bad options, a full cache.
  const int32_t bad[2] = {3, 256};
  EXPECT_EQ(sprig_session_forward_tokens(c.session, bad, 1, 2, y, &c.err), SPRIG_INVALID_ARGUMENT);
  EXPECT_NE(c.message().find("token 256 at [0, 1]"), std::string::npos) << c.message();
  sprig_generate_options_t o;
  sprig_generate_options_default(&o);
  o.top_p = 0.0f;
  Collector sink;
  EXPECT_EQ(sprig_session_generate(c.session, tokens, 2, &o, &Collector::Take, &sink, &c.err),
            SPRIG_INVALID_ARGUMENT);
  EXPECT_NE(c.message().find("top_p"), std::string::npos) << c.message();
  EXPECT_EQ(sprig_session_generate(c.session, tokens, 0, nullptr, &Collector::Take, &sink, &c.err),
            SPRIG_INVALID_ARGUMENT);
  EXPECT_NE(c.message().find("at least one token"), std::string::npos) << c.message();
  EXPECT_TRUE(sink.tokens.empty());
  const std::vector<int32_t> full(48, 7);
  ASSERT_EQ(sprig_session_append_tokens(c.session, full.data(), 48, nullptr, &c.err), SPRIG_OK);
  EXPECT_EQ(sprig_session_append_token(c.session, 7, y, &c.err), SPRIG_INVALID_ARGUMENT);
  EXPECT_NE(c.message().find("max_seq"), std::string::npos) << c.message();

  // Too many threads.
  sprig_session_t* session = nullptr;
  EXPECT_EQ(sprig_session_create(c.model, 1000, &session, &c.err), SPRIG_INVALID_ARGUMENT);
  EXPECT_EQ(session, nullptr);
  EXPECT_NE(c.message().find("threads is 1000"), std::string::npos) << c.message();
}

TEST_F(CApiTest, DamagedWeightsFailTheChecksumPass) {
  auto file = format::ModelFile::Open(stack_);
  ASSERT_TRUE(file.ok()) << file.status().message();
  const uint64_t offset = (*file)->record_sets()[1].offsets[3] + 17;
  file->reset();
  std::string bytes = testing::ReadFile(stack_);
  bytes[offset] ^= 0x01;
  testing::TempDir dir;
  const std::string path = dir.File("flipped.sprig");
  testing::WriteFile(path, bytes);
  C c;
  ASSERT_EQ(sprig_model_open(path.c_str(), &c.model, &c.err), SPRIG_OK) << c.message();
  EXPECT_EQ(sprig_model_verify_checksums(c.model, &c.err), SPRIG_CHECK_FAILED);
  EXPECT_NE(c.message().find("record 3 of layer 1"), std::string::npos) << c.message();
}

TEST_F(CApiTest, NullHandlesAndArraysAreRefused) {
  char* err = nullptr;
  float y[4];
  const float x[16] = {};
  const int32_t t[1] = {1};
  auto expect_null = [&](int code, const char* function, const char* what) {
    EXPECT_EQ(code, SPRIG_INVALID_ARGUMENT) << function;
    const std::string m = err ? err : "";
    EXPECT_NE(m.find(function), std::string::npos) << m;
    EXPECT_NE(m.find(std::string("NULL ") + what), std::string::npos) << m;
  };
  sprig_model_t* model = nullptr;
  expect_null(sprig_model_open(nullptr, &model, &err), "sprig_model_open", "path");
  expect_null(sprig_model_open(stack_.c_str(), nullptr, &err), "sprig_model_open", "model");
  expect_null(sprig_model_verify_checksums(nullptr, &err), "sprig_model_verify_checksums", "model");
  sprig_session_t* session = nullptr;
  expect_null(sprig_session_create(nullptr, 1, &session, &err), "sprig_session_create", "model");
  EXPECT_EQ(session, nullptr);
  expect_null(sprig_session_forward(nullptr, x, 1, y, &err), "sprig_session_forward", "session");
  expect_null(sprig_session_forward_tokens(nullptr, t, 1, 1, y, &err),
              "sprig_session_forward_tokens", "session");
  expect_null(sprig_session_append_token(nullptr, 1, y, &err), "sprig_session_append_token",
              "session");
  expect_null(sprig_session_append_tokens(nullptr, t, 1, y, &err), "sprig_session_append_tokens",
              "session");
  expect_null(sprig_session_generate(nullptr, t, 1, nullptr, &Collector::Take, nullptr, &err),
              "sprig_session_generate", "session");
  sprig_free(err);
  err = nullptr;

  // Getters and releases take NULL quietly.
  EXPECT_EQ(sprig_model_family(nullptr), 0);
  EXPECT_EQ(sprig_model_layer_count(nullptr), 0u);
  EXPECT_EQ(sprig_model_input_dim(nullptr), 0u);
  EXPECT_EQ(sprig_model_output_dim(nullptr), 0u);
  EXPECT_EQ(sprig_model_vocab_size(nullptr), 0u);
  EXPECT_EQ(sprig_model_max_seq(nullptr), 0u);
  EXPECT_EQ(sprig_model_tokens_output_size(nullptr, 1, 1), 0u);
  EXPECT_EQ(sprig_session_position(nullptr), 0u);
  EXPECT_EQ(sprig_session_threads(nullptr), 0u);
  EXPECT_EQ(sprig_session_kernel_path(nullptr), nullptr);
  sprig_session_reset(nullptr);
  sprig_session_destroy(nullptr);
  sprig_model_close(nullptr);
  sprig_generate_options_default(nullptr);
  sprig_free(nullptr);

  // NULL arrays with data to hold, on live sessions.
  C s, l;
  OpenC(stack_, 1, &s);
  OpenC(lm_, 1, &l);
  expect_null(sprig_session_forward(s.session, nullptr, 1, y, &err), "sprig_session_forward",
              "input");
  expect_null(sprig_session_forward(s.session, x, 1, nullptr, &err), "sprig_session_forward",
              "output");
  expect_null(sprig_session_forward_tokens(l.session, nullptr, 1, 1, y, &err),
              "sprig_session_forward_tokens", "tokens");
  expect_null(sprig_session_forward_tokens(l.session, t, 1, 1, nullptr, &err),
              "sprig_session_forward_tokens", "output");
  expect_null(sprig_session_append_tokens(l.session, nullptr, 2, nullptr, &err),
              "sprig_session_append_tokens", "tokens");
  expect_null(
      sprig_session_generate(l.session, nullptr, 1, nullptr, &Collector::Take, nullptr, &err),
      "sprig_session_generate", "prompt");
  expect_null(sprig_session_generate(l.session, t, 1, nullptr, nullptr, nullptr, &err),
              "sprig_session_generate", "callback");
  sprig_free(err);
}

TEST(CApi, StatusCodesAndVersion) {
  // The codes are sprig::Status::Code's values.
  EXPECT_EQ(SPRIG_NOT_FOUND, static_cast<int>(Status::Code::kNotFound));
  EXPECT_EQ(SPRIG_CHECK_FAILED, static_cast<int>(Status::Code::kCheckFailed));
  EXPECT_STREQ(sprig_status_name(SPRIG_OK), "ok");
  EXPECT_STREQ(sprig_status_name(SPRIG_NOT_FOUND), "not found");
  EXPECT_STREQ(sprig_status_name(SPRIG_INTERNAL), "internal error");
  EXPECT_STREQ(sprig_status_name(-3), "unknown");
  // Source: the project's version in the top-level CMakeLists.txt, and what `sprig --version`
  // prints; the library must report the same.
  const std::string cmake = testing::ReadFile(std::string(SPRIG_SOURCE_DIR) + "/CMakeLists.txt");
  std::smatch m;
  ASSERT_TRUE(std::regex_search(cmake, m, std::regex(R"(project\(sprig VERSION ([0-9.]+))")));
  EXPECT_EQ(sprig_version(), m[1].str());
  auto r = testing::Run(testing::SprigCli() + " --version");
  EXPECT_NE(r.output.find(std::string("sprig ") + sprig_version()), std::string::npos) << r.output;
}

// The smoke program, built as C11 against sprig.h only. Its input rows follow the formula in
// c_api_smoke.c; every printed output must be the C++ session's, bit for bit.
TEST_F(CApiTest, ProgramCompiledAsCAgreesWithCpp) {
  // Bits agree for one kernel instruction set. The program may see other CPU features than this
  // process (under an emulator, say), so it is told to use this session's through the
  // SPRIG_KERNEL_PATH variable, which the C API follows as documented.
  auto cpp = CppSession(stack_, 1);
  ASSERT_TRUE(cpp);
  const std::string kernel = cpp->kernel_path();
  auto r = testing::Run(testing::WithEnv(
      "SPRIG_KERNEL_PATH", kernel,
      testing::BuiltProgram(SPRIG_C_SMOKE_PATH) + " " + Quote(stack_) + " " + Quote(lm_)));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(r.output.find(std::string("version ") + sprig_version() + "\n"), std::string::npos)
      << r.output;
  EXPECT_NE(r.output.find("missing: not found, model NULL: "), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("no-such-model.sprig"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("null session: invalid argument\n"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("stack family 1 layers 3 in 16 out 4\n"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("kernel " + kernel + " threads 2\n"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("tokens into a stack: invalid argument\n"), std::string::npos)
      << r.output;

  const size_t rows = 2, in = 16, out = 4;
  std::vector<float> x(rows * in), want(rows * out);
  for (size_t row = 0; row < rows; ++row) {
    for (size_t i = 0; i < in; ++i) {
      x[row * in + i] = static_cast<float>(static_cast<int>((31 * row + 17 * i) % 23) - 11) / 8;
    }
  }
  ASSERT_TRUE(cpp->forward(x.data(), rows, want.data()).ok());
  std::istringstream lines(r.output);
  std::string line;
  size_t seen = 0;
  while (std::getline(lines, line)) {
    if (line.rfind("y ", 0) != 0) continue;
    size_t k = 0;
    double value = 0;
    unsigned bits = 0;
    ASSERT_EQ(std::sscanf(line.c_str(), "y %zu %lf %x", &k, &value, &bits), 3) << line;
    ASSERT_EQ(k, seen);
    uint32_t want_bits;
    std::memcpy(&want_bits, &want[k], 4);
    EXPECT_EQ(bits, want_bits) << line << " vs " << want[k];
    EXPECT_EQ(static_cast<float>(value), want[k]) << line;
    ++seen;
  }
  EXPECT_EQ(seen, rows * out);

  // The lm part: seeded sampling at temperature 0.7, stopped by the callback after ten tokens.
  auto lm = CppSession(lm_, 1);
  ASSERT_TRUE(lm);
  GenerateOptions o;
  o.count = 12;
  o.seed = 9;
  o.temperature = 0.7f;
  std::string want_tokens = "tokens";
  size_t n = 0;
  ASSERT_TRUE(lm->generate({'H', 'e', 'l', 'l', 'o'}, o, [&](int32_t t) {
                  // Appended in two steps: `" " + std::to_string(t)` draws a false -Wrestrict
                  // warning from GCC 12.
                  want_tokens += ' ';
                  want_tokens += std::to_string(t);
                  return ++n < 10;
                }).ok());
  EXPECT_NE(r.output.find(want_tokens + "\n"), std::string::npos)
      << r.output << "\nexpected " << want_tokens;
  EXPECT_NE(r.output.find("position 14 vocab 256 max_seq 48\n"), std::string::npos) << r.output;
}

}  // namespace
}  // namespace sprig
