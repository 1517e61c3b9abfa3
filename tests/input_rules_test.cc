// The input rules live once, in the runtime (runtime/src/api/input_rules.h), and every front end
// passes their message on: for each rule one input that breaks it goes through the C++ API, the
// C API (sprig.h), the command line and the Python module (sprig_native, over the C API with
// ctypes), and each must report the same sentence, written out here in full. The command line
// adds only "sprig VERB: " and, for an input file, that file's name.
#include <gtest/gtest.h>

#include <cmath>
#include <cstdint>
#include <limits>
#include <map>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "sprig/session.h"
#include "sprig/sprig.h"
#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

// Byte-tokenizer models, so that `sprig generate` reaches the runtime's decoding rules.
constexpr const char* kStack = R"({"family":"stack","input_dim":4,"layers":[
    {"kind":"tree","mode":"leaf","depth":2,"leaf_width":4,"activation":"relu","out":3}]})";
constexpr const char* kLm = R"({"family":"transformer","vocab_size":256,"tokenizer":"byte",
    "d_model":8,"n_heads":2,"max_seq":8,"positions":"rope","head":{"kind":"lm"},"layers":[
    {"kind":"tree","mode":"leaf","depth":1,"leaf_width":4,"activation":"relu"}]})";
constexpr const char* kClassifier = R"({"family":"transformer","vocab_size":256,
    "tokenizer":"byte","d_model":8,"n_heads":2,"max_seq":8,"positions":"learned",
    "head":{"kind":"classifier","classes":3,"pool":"mean"},"layers":[
    {"kind":"dense","width":4,"activation":"relu"}]})";
constexpr const char* kBidirectional = R"({"family":"transformer","vocab_size":256,
    "tokenizer":"byte","d_model":8,"n_heads":2,"max_seq":8,"positions":"rope","causal":false,
    "head":{"kind":"lm"},"layers":[{"kind":"dense","width":4,"activation":"relu"}]})";

// The same inputs as NumPy arrays, written by Python for the command line and built in Python
// for the module. Each case's script sets `x`, the array (or prompt) it passes.
struct Case {
  const char* name;
  const char* model;   // "stack", "lm", "classifier" or "bidirectional"
  const char* call;    // Python: "forward", "forward_tokens" or "generate"
  const char* python;  // an expression for x
};

const Case kCases[] = {
    {"token_range", "lm", "forward_tokens", "np.array([[3, 300]], np.int32)"},
    {"token_range_int64", "lm", "forward_tokens", "np.array([[2**40, 5]], np.int64)"},
    {"max_seq", "lm", "forward_tokens", "np.zeros((1, 9), np.int32)"},
    {"cache_room", "lm", "generate", "b'123456789'"},
    {"rows_for_transformer", "lm", "forward", "np.zeros((1, 8), np.float32)"},
    {"tokens_for_stack", "stack", "forward_tokens", "np.zeros((1, 4), np.int32)"},
    {"lm_head", "classifier", "generate", "b'hi'"},
    {"causal", "bidirectional", "generate", "b'hi'"},
    {"classifier_tokens", "classifier", "forward_tokens", "np.zeros((2, 0), np.int32)"},
    {"row_width", "stack", "forward", "np.zeros((2, 5), np.float32)"},
    {"finite", "stack", "forward", "np.array([[0, 0, 0, 0], [0, 0, np.nan, 0]], np.float32)"},
};

// Writes sys.argv[1]/<case>.npy for the array cases (the command line's --input).
std::string MakeInputsScript() {
  std::string s = "import sys, numpy as np\nd = sys.argv[1]\n";
  for (const Case& c : kCases) {
    if (std::string(c.call) == "generate") continue;
    s += "np.save(d + '/" + std::string(c.name) + ".npy', " + c.python + ")\n";
  }
  return s;
}

// Runs every case through sprig_native and prints {case: message} as JSON.
std::string ModuleScript() {
  std::string s = R"(
import json, sys
import numpy as np
import sprig_native as sn
paths = dict(zip(['stack', 'lm', 'classifier', 'bidirectional'], sys.argv[1:5]))
out = {}
def attempt(name, model, call, x):
    with sn.Model(paths[model]) as m:
        s = sn.Session(m)
        try:
            getattr(s, call)(x)
            out[name] = None
        except sn.SprigError as e:
            out[name] = str(e)
)";
  for (const Case& c : kCases) {
    s += "attempt('" + std::string(c.name) + "', '" + c.model + "', '" + c.call + "', " + c.python +
         ")\n";
  }
  return s + "print(json.dumps(out))\n";
}

class InputRules : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = new testing::TempDir();
    paths_ = new std::map<std::string, std::string>{
        {"stack", testing::PackSynthesized(*dir_, "stack", kStack)},
        {"lm", testing::PackSynthesized(*dir_, "lm", kLm)},
        {"classifier", testing::PackSynthesized(*dir_, "classifier", kClassifier)},
        {"bidirectional", testing::PackSynthesized(*dir_, "bidirectional", kBidirectional)},
    };
    auto r = testing::RunPython(MakeInputsScript(), {dir_->path()});
    ASSERT_EQ(r.exit_code, 0) << r.output;
  }
  static void TearDownTestSuite() {
    delete paths_;
    delete dir_;
  }

  static std::string Path(const std::string& model) { return paths_->at(model); }
  static std::string Input(const std::string& name) { return dir_->File(name + ".npy"); }

  // The message each case must give, in every front end.
  static std::map<std::string, std::string> Expected() {
    return {
        {"token_range", "token 300 at [0, 1] is outside the vocabulary [0, 256)"},
        {"token_range_int64", "token 1099511627776 at [0, 0] is outside the vocabulary [0, 256)"},
        {"max_seq", "a sequence of 9 tokens is longer than the model's max_seq 8"},
        {"cache_room", "the KV cache holds 0 of max_seq 8 tokens; 9 more do not fit"},
        {"rows_for_transformer",
         Path("lm") + " is a transformer model; it takes tokens, not float rows"},
        {"tokens_for_stack", Path("stack") + " is a stack model; it takes float rows, not tokens"},
        {"lm_head", Path("classifier") +
                        " has a classifier head; decoding with the KV cache needs an lm head"},
        {"causal", Path("bidirectional") +
                       " is not causal; decoding with the KV cache needs a causal model (use "
                       "forward_tokens on whole sequences)"},
        {"classifier_tokens", "a classifier needs sequences of at least one token"},
        {"row_width", "the input has shape [2, 5]; the model takes rows of 4 values, shape [N, 4]"},
        {"finite", "input row 1, column 2 is not a finite number"},
    };
  }

  static testing::TempDir* dir_;
  static std::map<std::string, std::string>* paths_;
};

testing::TempDir* InputRules::dir_ = nullptr;
std::map<std::string, std::string>* InputRules::paths_ = nullptr;

std::string MessageOf(const Status& s) {
  return s.ok() ? "(ok)" : s.message();
}

TEST_F(InputRules, CppApi) {
  const auto expected = Expected();
  std::map<std::string, std::string> got;
  auto lm = testing::OpenSession(Path("lm"));
  auto stack = testing::OpenSession(Path("stack"));
  auto classifier = testing::OpenSession(Path("classifier"));
  auto bidirectional = testing::OpenSession(Path("bidirectional"));
  ASSERT_TRUE(lm && stack && classifier && bidirectional);
  std::vector<float> out(9 * 256);
  const int32_t bad[2] = {3, 300};
  got["token_range"] = MessageOf(lm->forward_tokens(bad, 1, 2, out.data()));
  // int64 tokens cannot reach forward_tokens; the model checks them before narrowing.
  const int64_t wide[2] = {int64_t{1} << 40, 5};
  got["token_range_int64"] = MessageOf(lm->model().check_tokens(wide, 1, 2));
  const std::vector<int32_t> nine(9, 0);
  got["max_seq"] = MessageOf(lm->forward_tokens(nine.data(), 1, 9, out.data()));
  const std::vector<int32_t> prompt = {'1', '2', '3', '4', '5', '6', '7', '8', '9'};
  auto keep = [](int32_t) { return true; };
  got["cache_room"] = MessageOf(lm->generate(prompt, {}, keep));
  const float zeros[8] = {};
  got["rows_for_transformer"] = MessageOf(lm->forward(zeros, 1, out.data()));
  const int32_t tokens[4] = {};
  got["tokens_for_stack"] = MessageOf(stack->forward_tokens(tokens, 1, 4, out.data()));
  got["lm_head"] = MessageOf(classifier->generate({'h', 'i'}, {}, keep));
  got["causal"] = MessageOf(bidirectional->generate({'h', 'i'}, {}, keep));
  got["classifier_tokens"] = MessageOf(classifier->forward_tokens(nullptr, 2, 0, out.data()));
  // A pointer carries no shape; the model's output_shape query applies the shape rules.
  got["row_width"] = MessageOf(stack->model().output_shape(InputKind::kRows, {2, 5}).status());
  const float rows[8] = {0, 0, 0, 0, 0, 0, std::numeric_limits<float>::quiet_NaN(), 0};
  got["finite"] = MessageOf(stack->forward(rows, 2, out.data()));
  EXPECT_EQ(got, expected);
}

// A C session over the model at `path`, closed with the test.
struct CSession {
  explicit CSession(const std::string& path) {
    EXPECT_EQ(sprig_model_open(path.c_str(), &model, nullptr), SPRIG_OK) << path;
    EXPECT_EQ(sprig_session_create(model, 1, &session, nullptr), SPRIG_OK) << path;
  }
  ~CSession() {
    sprig_session_destroy(session);
    sprig_model_close(model);
    sprig_free(err);
  }
  // The message of a call that must fail with SPRIG_INVALID_ARGUMENT.
  std::string Message(int code) {
    EXPECT_EQ(code, SPRIG_INVALID_ARGUMENT) << (err ? err : "");
    return code == SPRIG_OK || err == nullptr ? "(ok)" : err;
  }
  sprig_model_t* model = nullptr;
  sprig_session_t* session = nullptr;
  char* err = nullptr;
};

int Keep(int32_t, void*) {
  return 1;
}

TEST_F(InputRules, CApi) {
  const auto expected = Expected();
  std::map<std::string, std::string> got;
  CSession lm(Path("lm")), stack(Path("stack")), classifier(Path("classifier")),
      bidirectional(Path("bidirectional"));
  std::vector<float> out(9 * 256);
  const int32_t bad[2] = {3, 300};
  got["token_range"] =
      lm.Message(sprig_session_forward_tokens(lm.session, bad, 1, 2, out.data(), &lm.err));
  const int64_t wide[2] = {int64_t{1} << 40, 5};
  got["token_range_int64"] = lm.Message(sprig_model_check_tokens(lm.model, wide, 1, 2, &lm.err));
  const std::vector<int32_t> nine(9, 0);
  got["max_seq"] =
      lm.Message(sprig_session_forward_tokens(lm.session, nine.data(), 1, 9, out.data(), &lm.err));
  const int32_t prompt[9] = {'1', '2', '3', '4', '5', '6', '7', '8', '9'};
  got["cache_room"] =
      lm.Message(sprig_session_generate(lm.session, prompt, 9, nullptr, &Keep, nullptr, &lm.err));
  const float zeros[8] = {};
  got["rows_for_transformer"] =
      lm.Message(sprig_session_forward(lm.session, zeros, 1, out.data(), &lm.err));
  const int32_t tokens[4] = {};
  got["tokens_for_stack"] = stack.Message(
      sprig_session_forward_tokens(stack.session, tokens, 1, 4, out.data(), &stack.err));
  const int32_t hi[2] = {'h', 'i'};
  got["lm_head"] = classifier.Message(
      sprig_session_generate(classifier.session, hi, 2, nullptr, &Keep, nullptr, &classifier.err));
  got["causal"] = bidirectional.Message(sprig_session_generate(
      bidirectional.session, hi, 2, nullptr, &Keep, nullptr, &bidirectional.err));
  got["classifier_tokens"] = classifier.Message(
      sprig_session_forward_tokens(classifier.session, nullptr, 2, 0, out.data(), &classifier.err));
  const uint64_t shape[2] = {2, 5};
  uint64_t out_shape[3] = {};
  size_t out_rank = 0;
  got["row_width"] = stack.Message(sprig_model_output_shape(stack.model, SPRIG_INPUT_ROWS, shape, 2,
                                                            out_shape, &out_rank, &stack.err));
  EXPECT_EQ(out_rank, 0u) << "nothing is written for an input that does not fit";
  const float rows[8] = {0, 0, 0, 0, 0, 0, std::numeric_limits<float>::quiet_NaN(), 0};
  got["finite"] =
      stack.Message(sprig_session_forward(stack.session, rows, 2, out.data(), &stack.err));
  EXPECT_EQ(got, expected);
}

TEST_F(InputRules, CommandLine) {
  const auto expected = Expected();
  for (const Case& c : kCases) {
    const std::string name = c.name;
    std::string command, want;
    if (std::string(c.call) == "generate") {
      // The prompt's UTF-8 bytes are its tokens; the cases' prompts are ASCII.
      std::string prompt = c.python;
      prompt = prompt.substr(2, prompt.size() - 3);  // b'...'
      command = " generate " + Quote(Path(c.model)) + " --prompt " + Quote(prompt);
      want = "sprig generate: " + expected.at(name) + "\n";
    } else {
      command = " run " + Quote(Path(c.model)) + " --input " + Quote(Input(name)) + " --output " +
                Quote(dir_->File("never.npy"));
      want = "sprig run: " + Input(name) + ": " + expected.at(name) + "\n";
    }
    const testing::CommandResult r = testing::Run(testing::SprigCli() + command);
    EXPECT_EQ(r.exit_code, 2) << name << ": " << r.output;
    EXPECT_NE(r.output.find(want), std::string::npos)
        << name << ": expected \"" << want << "\" in: " << r.output;
  }
}

TEST_F(InputRules, PythonModule) {
  const std::string src = SPRIG_SOURCE_DIR;
  const testing::CommandResult r = testing::Run(
      "SPRIG_LIBRARY=" + Quote(SPRIG_SHARED_LIBRARY) +
      " PYTHONPATH=" + Quote(src + "/converter/python") + " " + testing::Python() + " -c " +
      Quote(ModuleScript()) + " " + Quote(Path("stack")) + " " + Quote(Path("lm")) + " " +
      Quote(Path("classifier")) + " " + Quote(Path("bidirectional")));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const nlohmann::json j = nlohmann::json::parse(r.output, nullptr, false);
  ASSERT_TRUE(j.is_object()) << r.output;
  std::map<std::string, std::string> got;
  for (const auto& [name, message] : j.items()) {
    got[name] = message.is_string() ? message.get<std::string>() : "(ok)";
  }
  EXPECT_EQ(got, Expected());
}

}  // namespace
}  // namespace sprig
