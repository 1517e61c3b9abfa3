// converter/python/sprig_native, the ctypes module over the C API, run by Debian's Python on
// the shared library built here: its outputs are bit-identical to `sprig run`'s for a stack and
// a transformer, its statistics count what ran, generation is reproducible by seed, and errors
// arrive as SprigError with the C API's code and message.
#include <gtest/gtest.h>

#include <string>

#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

const char* kScript = R"(
import json, sys
import numpy as np
import sprig_native as sn
model_path, input_path, expected_path = sys.argv[1:4]
out = {}
with sn.Model(model_path) as model:
    session = sn.Session(model, threads=2)
    x = np.load(input_path)
    y = session.forward(x) if model.family == 'stack' else session.forward_tokens(x)
    out['identical'] = bool(np.array_equal(y, np.load(expected_path)))
    stats = session.stats()
    out['rows'] = stats['rows'] if model.family == 'stack' else stats['sequence_tokens']
    out['touched'] = session.touched()
    out['residency'] = model.residency()
    out['rss'] = sn.process_memory()['rss']
    if model.family == 'transformer':
        a = session.generate(b'ab', count=12, temperature=0.8, seed=5)
        b = session.generate(b'ab', count=12, temperature=0.8, seed=5)
        out['generated'] = len(a)
        out['reproducible'] = a == b
try:
    sn.Model(model_path + '.missing')
except sn.SprigError as e:
    out['error_code'] = e.code
    out['error'] = str(e)
print(json.dumps(out))
)";

struct Case {
  const char* name;
  const char* config;
  const char* make_input;  // Python writing sys.argv[1]
};

class PythonModule : public ::testing::TestWithParam<Case> {};

TEST_P(PythonModule, AgreesWithTheCommandLine) {
  const Case c = GetParam();
  testing::TempDir dir;
  const std::string model = testing::PackSynthesized(dir, "m", c.config, 4);
  auto r = testing::RunPython(c.make_input, {dir.File("x.npy")});
  ASSERT_EQ(r.exit_code, 0) << r.output;
  r = testing::Run(testing::SprigCli() + " run " + Quote(model) + " --input " +
                   Quote(dir.File("x.npy")) + " --output " + Quote(dir.File("y.npy")));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const std::string src = SPRIG_SOURCE_DIR;
  r = testing::Run("SPRIG_LIBRARY=" + Quote(SPRIG_SHARED_LIBRARY) +
                   " PYTHONPATH=" + Quote(src + "/converter/python") + " " + testing::Python() +
                   " -c " + Quote(kScript) + " " + Quote(model) + " " + Quote(dir.File("x.npy")) +
                   " " + Quote(dir.File("y.npy")));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  std::printf("[ %s ] %s", c.name, r.output.c_str());
  EXPECT_NE(r.output.find("\"identical\": true"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("\"rows\": 24"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("\"error_code\": 2"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("does not exist"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("\"records\""), std::string::npos) << r.output;
  if (std::string(c.name) == "transformer") {
    EXPECT_NE(r.output.find("\"generated\": 12"), std::string::npos) << r.output;
    EXPECT_NE(r.output.find("\"reproducible\": true"), std::string::npos) << r.output;
  }
}

INSTANTIATE_TEST_SUITE_P(
    BothFamilies, PythonModule,
    ::testing::Values(
        Case{"stack",
             R"({"family":"stack","input_dim":16,"layers":[
               {"kind":"tree","mode":"leaf","depth":3,"leaf_width":8,"out":12},
               {"kind":"experts","experts":4,"top_k":2,"width":8,"out":5}]})",
             "import sys, numpy as np; np.save(sys.argv[1], "
             "np.random.default_rng(1).standard_normal((24, 16)).astype(np.float32))"},
        Case{"transformer",
             R"({"family":"transformer","vocab_size":256,"tokenizer":"byte","d_model":32,
               "n_heads":4,"max_seq":64,"layers":[
               {"kind":"tree","mode":"path","depth":4,"activation":"gelu"}]})",
             "import sys, numpy as np; np.save(sys.argv[1], "
             "np.random.default_rng(1).integers(0, 256, (3, 8)).astype(np.int32))"}),
    [](const ::testing::TestParamInfo<Case>& info) { return std::string(info.param.name); });

}  // namespace
}  // namespace sprig
