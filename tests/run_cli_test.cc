// `sprig run` and `sprig routes` (README.md) through the built program: outputs and routes
// files that NumPy reads, agreement with Session::forward, the statistics of `routes`, clear
// errors (exit 2) for bad input, and `--help` of every verb.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstring>
#include <filesystem>
#include <map>
#include <memory>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "io/tensor_archive.h"
#include "sprig/model.h"
#include "sprig/session.h"
#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

// Layer 0 is dense, so the routed layers' indices (1, 2, 3) differ from their order among the
// routed layers (0, 1, 2): the routes file must use the former.
constexpr const char* kStackConfig = R"({"family":"stack","input_dim":6,"layers":[
  {"kind":"dense","width":12,"activation":"gelu","out":8},
  {"kind":"tree","mode":"leaf","depth":2,"leaf_width":4,"activation":"relu","out":8},
  {"kind":"experts","experts":4,"top_k":2,"width":5,"activation":"silu","gated":true,"out":8},
  {"kind":"tree","mode":"path","depth":3,"activation":"gelu","out":3}]})";

constexpr const char* kTransformerConfig = R"({"family":"transformer","vocab_size":16,
  "d_model":8,"n_heads":2,"max_seq":4,"head":{"kind":"lm"},
  "layers":[{"kind":"dense","width":8,"activation":"relu"}]})";

constexpr size_t kRows = 37;
constexpr size_t kIn = 6;
constexpr size_t kOut = 3;

// Writes the input files with NumPy (Debian python3-numpy): N(0, 1) rows as float32, the same
// values as float64, a 1-D single row, rows of the wrong width, int32 rows, float16 rows, rows
// with a NaN at row 2, column 3, and an .npz holding two arrays.
constexpr const char* kMakeInputs = R"(
import sys, numpy as np
d = sys.argv[1]
rng = np.random.default_rng(7)
x = rng.standard_normal((37, 6)).astype(np.float32)
np.save(d + '/x.npy', x)
np.save(d + '/x64.npy', x.astype(np.float64))
np.save(d + '/row.npy', x[0])
np.save(d + '/wide.npy', rng.standard_normal((5, 7)).astype(np.float32))
np.save(d + '/ints.npy', np.arange(24, dtype=np.int32).reshape(4, 6))
np.save(d + '/halves.npy', x[:4].astype(np.float16))
bad = rng.standard_normal((4, 6)).astype(np.float32)
bad[2, 3] = np.nan
np.save(d + '/nan.npy', bad)
np.savez(d + '/two.npz', a=x[:4], b=x[4:8])
)";

// Prints, as JSON, what numpy.load sees in each file: {"dtype", "shape"} for a .npy, and
// {name: {"dtype", "shape"}} for an .npz. Source: numpy.load (Debian python3-numpy).
constexpr const char* kDescribe = R"(
import sys, json, numpy as np
def desc(a):
    return {'dtype': str(a.dtype), 'shape': list(a.shape)}
out = {}
for path in sys.argv[1:]:
    f = np.load(path)
    out[path] = {k: desc(f[k]) for k in f.files} if path.endswith('.npz') else desc(f)
print(json.dumps(out))
)";

nlohmann::json Describe(const std::vector<std::string>& files) {
  auto r = testing::RunPython(kDescribe, files);
  EXPECT_EQ(r.exit_code, 0) << r.output;
  return nlohmann::json::parse(r.output, nullptr, /*allow_exceptions=*/false);
}

// The float32 contents of a one-array file, read with sprig's own reader.
std::vector<float> ReadFloats(const std::string& path, std::vector<uint64_t>* shape) {
  auto archive = io::TensorArchive::Open(path);
  EXPECT_TRUE(archive.ok()) << archive.status().message();
  if (!archive.ok() || archive->arrays().size() != 1) return {};
  const io::NdArray& a = archive->arrays()[0];
  EXPECT_EQ(a.type, io::ElementType::kF32) << path;
  *shape = a.shape;
  std::vector<float> v(a.elements());
  std::memcpy(v.data(), a.data, a.nbytes());
  return v;
}

// The int32 arrays of a routes file by name.
std::map<std::string, std::vector<int32_t>> ReadRoutes(const std::string& path) {
  std::map<std::string, std::vector<int32_t>> out;
  auto archive = io::TensorArchive::Open(path);
  EXPECT_TRUE(archive.ok()) << archive.status().message();
  if (!archive.ok()) return out;
  for (const io::NdArray& a : archive->arrays()) {
    EXPECT_EQ(a.type, io::ElementType::kI32) << a.name;
    std::vector<int32_t> v(a.elements());
    std::memcpy(v.data(), a.data, a.nbytes());
    out[a.name] = std::move(v);
  }
  return out;
}

class RunCli : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = new testing::TempDir;
    const std::string cli = testing::SprigCli();
    for (auto [name, config] :
         {std::pair{"stack", kStackConfig}, std::pair{"transformer", kTransformerConfig}}) {
      const std::string c = File(std::string(name) + ".json");
      const std::string w = File(std::string(name) + ".npz");
      testing::WriteFile(c, config);
      auto r = testing::Run(cli + " synth " + Quote(c) + " -o " + Quote(w) + " --seed 3");
      ASSERT_EQ(r.exit_code, 0) << r.output;
      r = testing::Run(cli + " pack " + Quote(c) + " " + Quote(w) + " -o " +
                       Quote(File(std::string(name) + ".sprig")));
      ASSERT_EQ(r.exit_code, 0) << r.output;
    }
    auto r = testing::RunPython(kMakeInputs, {dir_->path()});
    ASSERT_EQ(r.exit_code, 0) << r.output;
    ready_ = true;
  }
  static void TearDownTestSuite() {
    delete dir_;
    dir_ = nullptr;
  }
  void SetUp() override { ASSERT_TRUE(ready_) << "suite setup failed"; }

  static std::string File(const std::string& name) { return dir_->File(name); }
  static std::string Model() { return File("stack.sprig"); }
  // `sprig VERB ARGS` with stdout and stderr together.
  static testing::CommandResult Sprig(const std::string& args) {
    return testing::Run(testing::SprigCli() + " " + args);
  }
  static testing::CommandResult RunModel(const std::string& input, const std::string& output,
                                         const std::string& extra = "") {
    return Sprig("run " + Quote(Model()) + " --input " + Quote(input) + " --output " +
                 Quote(output) + (extra.empty() ? "" : " " + extra));
  }

  static inline testing::TempDir* dir_ = nullptr;
  static inline bool ready_ = false;
};

// `run` writes [N, out] float32 that numpy.load reads, equal to Session::forward on the same
// rows in one call (the default batch of 64 holds all 37 rows).
TEST_F(RunCli, WritesFloat32RowsThatNumpyReads) {
  auto r = RunModel(File("x.npy"), File("y.npy"));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const nlohmann::json d = Describe({File("y.npy")});
  ASSERT_FALSE(d.is_discarded());
  EXPECT_EQ(d[File("y.npy")]["dtype"], "float32");
  EXPECT_EQ(d[File("y.npy")]["shape"], nlohmann::json({kRows, kOut}));

  std::vector<uint64_t> shape;
  const std::vector<float> x = ReadFloats(File("x.npy"), &shape);
  ASSERT_EQ(shape, (std::vector<uint64_t>{kRows, kIn}));
  const std::vector<float> y = ReadFloats(File("y.npy"), &shape);
  ASSERT_EQ(shape, (std::vector<uint64_t>{kRows, kOut}));
  auto model = Model::open(Model());
  ASSERT_TRUE(model.ok()) << model.status().message();
  auto session = Session::create(*model);
  ASSERT_TRUE(session.ok());
  std::vector<float> want(kRows * kOut);
  ASSERT_TRUE((*session)->forward(x.data(), kRows, want.data()).ok());
  EXPECT_EQ(y, want);
}

// float64 rows are converted to float32; these values came from float32, so the outputs are
// the same bytes. A 1-D array is one row, giving [1, out] equal to a single-row call.
TEST_F(RunCli, AcceptsFloat64AndOneRow) {
  ASSERT_EQ(RunModel(File("x.npy"), File("y32.npy")).exit_code, 0);
  auto r = RunModel(File("x64.npy"), File("y64.npy"));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_EQ(testing::ReadFile(File("y64.npy")), testing::ReadFile(File("y32.npy")));

  r = RunModel(File("row.npy"), File("row-out.npy"));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  // Single-row calls use the vector kernels: compare with --batch 1, also single-row calls.
  r = RunModel(File("x.npy"), File("y-b1.npy"), "--batch 1");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const nlohmann::json d = Describe({File("row-out.npy"), File("y64.npy")});
  ASSERT_FALSE(d.is_discarded());
  EXPECT_EQ(d[File("row-out.npy")]["shape"], nlohmann::json({1, kOut}));
  EXPECT_EQ(d[File("row-out.npy")]["dtype"], "float32");
  EXPECT_EQ(d[File("y64.npy")]["shape"], nlohmann::json({kRows, kOut}));
  std::vector<uint64_t> shape;
  const std::vector<float> one = ReadFloats(File("row-out.npy"), &shape);
  const std::vector<float> all = ReadFloats(File("y-b1.npy"), &shape);
  ASSERT_EQ(one.size(), kOut);
  ASSERT_GE(all.size(), kOut);
  EXPECT_EQ(one, std::vector<float>(all.begin(), all.begin() + kOut));
}

// --routes writes layer{i} int32 for each routed layer i: [N] for trees, [N, k] for experts.
TEST_F(RunCli, RoutesFileNamesTheRoutedLayers) {
  auto r = RunModel(File("x.npy"), File("y.npy"), "--routes " + Quote(File("routes.npz")));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const nlohmann::json d = Describe({File("routes.npz")});
  ASSERT_FALSE(d.is_discarded());
  const nlohmann::json want = {
      {"layer1", {{"dtype", "int32"}, {"shape", {kRows}}}},
      {"layer2", {{"dtype", "int32"}, {"shape", {kRows, 2}}}},
      {"layer3", {{"dtype", "int32"}, {"shape", {kRows}}}},
  };
  EXPECT_EQ(d[File("routes.npz")], want) << d.dump();

  // The same choices as Session::forward, each within its layer's units, experts distinct.
  auto routes = ReadRoutes(File("routes.npz"));
  std::vector<uint64_t> shape;
  const std::vector<float> x = ReadFloats(File("x.npy"), &shape);
  auto model = Model::open(Model());
  ASSERT_TRUE(model.ok());
  auto session = Session::create(*model);
  ASSERT_TRUE(session.ok());
  std::vector<float> y(kRows * kOut);
  Routes want_routes;
  ASSERT_TRUE((*session)->forward(x.data(), kRows, y.data(), &want_routes).ok());
  ASSERT_EQ(want_routes.layers.size(), 3u);
  for (const LayerRoutes& lr : want_routes.layers) {
    EXPECT_EQ(routes["layer" + std::to_string(lr.layer)], lr.choices) << lr.layer;
  }
  for (int32_t leaf : routes["layer1"]) EXPECT_TRUE(leaf >= 0 && leaf < 4) << leaf;
  for (int32_t leaf : routes["layer3"]) EXPECT_TRUE(leaf >= 0 && leaf < 8) << leaf;
  const std::vector<int32_t>& experts = routes["layer2"];
  ASSERT_EQ(experts.size(), kRows * 2);
  for (size_t i = 0; i < kRows; ++i) {
    EXPECT_TRUE(experts[2 * i] >= 0 && experts[2 * i] < 4);
    EXPECT_TRUE(experts[2 * i + 1] >= 0 && experts[2 * i + 1] < 4);
    EXPECT_NE(experts[2 * i], experts[2 * i + 1]) << "row " << i;
  }
}

// Rows split into several calls (--batch 10: 10 + 10 + 10 + 7, all batched calls) give the same
// outputs and routes as one call, with two threads too.
TEST_F(RunCli, BatchesAndThreadsDoNotChangeResults) {
  ASSERT_EQ(RunModel(File("x.npy"), File("a.npy"), "--routes " + Quote(File("a.npz"))).exit_code,
            0);
  auto r = RunModel(File("x.npy"), File("b.npy"),
                    "--routes " + Quote(File("b.npz")) + " --batch 10 --threads 2");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_EQ(testing::ReadFile(File("a.npy")), testing::ReadFile(File("b.npy")));
  EXPECT_EQ(ReadRoutes(File("a.npz")), ReadRoutes(File("b.npz")));
}

struct BadInput {
  const char* name;
  std::string args;                   // after "run MODEL" unless it names its own model
  std::vector<std::string> mentions;  // the message must contain each
  std::vector<std::string> any_of;    // and at least one of these, when given
};

// Each bad input exits 2 with one message on stderr that names the file and what was expected,
// and writes no output.
TEST_F(RunCli, BadInputsExitTwoWithClearMessages) {
  const std::string out = File("never.npy");
  auto input = [&](const std::string& f) {
    return " --input " + Quote(File(f)) + " --output " + Quote(out);
  };
  const std::string m = Quote(Model());
  const std::vector<BadInput> cases = {
      {"wrong width", "run " + m + input("wide.npy"), {File("wide.npy"), "[5, 7]", "[N, 6]"}, {}},
      {"int32 rows",
       "run " + m + input("ints.npy"),
       {File("ints.npy"), "float rows, not tokens"},
       {}},
      {"float16 rows",
       "run " + m + input("halves.npy"),
       {File("halves.npy"), "float16", "float32"},
       {}},
      {"NaN", "run " + m + input("nan.npy"), {File("nan.npy"), "row 2", "column 3", "finite"}, {}},
      {"two arrays", "run " + m + input("two.npz"), {File("two.npz"), "2 arrays", "one array"}, {}},
      {"missing input", "run " + m + input("absent.npy"), {File("absent.npy")}, {}},
      {"missing model",
       "run " + Quote(File("absent.sprig")) + input("x.npy"),
       {File("absent.sprig")},
       {}},
      {"batch 0", "run " + m + input("x.npy") + " --batch 0", {"--batch", "at least 1"}, {}},
      // The message may name either file; it must say the model takes tokens.
      {"transformer",
       "run " + Quote(File("transformer.sprig")) + input("x.npy"),
       {"tokens"},
       {File("transformer.sprig"), File("x.npy")}},
  };
  for (const BadInput& c : cases) {
    auto r = Sprig(c.args);
    EXPECT_EQ(r.exit_code, 2) << c.name << ": " << r.output;
    EXPECT_EQ(r.output.rfind("sprig run: ", 0), 0u) << c.name << ": " << r.output;
    for (const std::string& s : c.mentions) {
      EXPECT_NE(r.output.find(s), std::string::npos)
          << c.name << ": the message should mention \"" << s << "\": " << r.output;
    }
    if (!c.any_of.empty()) {
      EXPECT_TRUE(
          std::any_of(c.any_of.begin(), c.any_of.end(),
                      [&](const std::string& s) { return r.output.find(s) != std::string::npos; }))
          << c.name << ": the message should name the model or the input: " << r.output;
    }
    EXPECT_FALSE(std::filesystem::exists(out)) << c.name << " wrote an output";
  }
}

// `routes --json`: per routed layer its units, counts summing to rows × route width, entropy
// within [0, log2 units], dead = the number of zero counts, imbalance = max / mean ≥ 1; and the
// counts are those of the routes `run` writes.
TEST_F(RunCli, RoutesJsonStatistics) {
  const std::string json_file = File("routes.json");
  auto r = testing::Run(testing::SprigCli() + " routes " + Quote(Model()) + " --input " +
                        Quote(File("x.npy")) + " --json > " + Quote(json_file));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const nlohmann::json j =
      nlohmann::json::parse(testing::ReadFile(json_file), nullptr, /*allow_exceptions=*/false);
  ASSERT_FALSE(j.is_discarded()) << testing::ReadFile(json_file);
  ASSERT_EQ(RunModel(File("x.npy"), File("y.npy"), "--routes " + Quote(File("r.npz"))).exit_code,
            0);
  auto routes = ReadRoutes(File("r.npz"));

  EXPECT_EQ(j.value("rows", 0), kRows);
  ASSERT_TRUE(j.contains("layers") && j["layers"].is_array());
  ASSERT_EQ(j["layers"].size(), 3u);
  struct Want {
    size_t layer, units, width;
  };
  const Want wants[] = {{1, 4, 1}, {2, 4, 2}, {3, 8, 1}};
  for (size_t i = 0; i < 3; ++i) {
    const nlohmann::json& l = j["layers"][i];
    const Want w = wants[i];
    SCOPED_TRACE("layer " + std::to_string(w.layer));
    ASSERT_EQ(l.value("layer", 99), w.layer);
    ASSERT_EQ(l.value("units", 0), w.units);
    const std::vector<uint64_t> counts = l["counts"].get<std::vector<uint64_t>>();
    ASSERT_EQ(counts.size(), w.units);
    uint64_t sum = 0, dead = 0, peak = 0;
    std::vector<uint64_t> want_counts(w.units, 0);
    for (int32_t c : routes["layer" + std::to_string(w.layer)]) ++want_counts.at(c);
    EXPECT_EQ(counts, want_counts);
    double entropy = 0;
    for (uint64_t c : counts) {
      sum += c;
      dead += c == 0;
      peak = std::max(peak, c);
    }
    for (uint64_t c : counts) {
      if (c) entropy -= double(c) / sum * std::log2(double(c) / sum);
    }
    EXPECT_EQ(sum, kRows * w.width);
    EXPECT_EQ(l.value("choices", 0), kRows * w.width);
    const double max_bits = l.value("max_entropy_bits", -1.0);
    const double bits = l.value("entropy_bits", -1.0);
    EXPECT_NEAR(max_bits, std::log2(double(w.units)), 1e-12);
    EXPECT_GE(bits, 0.0);
    EXPECT_LE(bits, max_bits + 1e-12);
    EXPECT_NEAR(bits, entropy, 1e-9);
    EXPECT_EQ(l.value("dead", uint64_t{999}), dead);
    const double imbalance = l.value("imbalance", 0.0);
    EXPECT_GE(imbalance, 1.0);
    EXPECT_NEAR(imbalance, double(peak) / (double(sum) / w.units), 1e-9);
  }
}

TEST_F(RunCli, RoutesHumanOutputHasEntropyAndHistogram) {
  auto r = Sprig("routes " + Quote(Model()) + " --input " + Quote(File("x.npy")));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(r.output.find("entropy"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find('#'), std::string::npos) << r.output;
  for (const char* layer : {"layer 1", "layer 2", "layer 3"}) {
    EXPECT_NE(r.output.find(layer), std::string::npos) << layer << "\n" << r.output;
  }
}

TEST_F(RunCli, EveryVerbHasHelp) {
  for (const char* verb : {"pack", "inspect", "synth", "run", "routes"}) {
    auto r = Sprig(std::string(verb) + " --help");
    EXPECT_EQ(r.exit_code, 0) << verb << ": " << r.output;
    EXPECT_NE(r.output.find("Usage"), std::string::npos) << verb << ": " << r.output;
    EXPECT_NE(r.output.find(std::string("sprig ") + verb), std::string::npos)
        << verb << ": " << r.output;
  }
}

// `sprig routes` takes text for a byte-tokenizer transformer: its bytes, in sequences of max_seq
// tokens (the last shorter), route exactly as the same bytes given as int32 token arrays, which
// are written here by NumPy.
TEST(RoutesText, TextRoutesAsItsBytesDo) {
  testing::TempDir dir;
  const std::string model = testing::PackSynthesized(dir, "lm", R"({"family":"transformer",
    "vocab_size":256,"d_model":16,"n_heads":2,"max_seq":16,"head":{"kind":"lm"},
    "tokenizer":"byte","layers":[{"kind":"tree","mode":"leaf","depth":3,"leaf_width":4,
    "activation":"gelu"}]})");
  const std::string text = dir.File("notes.txt");
  testing::WriteFile(text, "Day 9 at Quill Hill: fog until noon. Marit mended the netting.\n");
  const size_t bytes = 63;  // four sequences of 16, the last of 15
  auto r = testing::RunPython(
      "import sys, numpy as np\n"
      "t = np.frombuffer(open(sys.argv[1], 'rb').read(), np.uint8).astype(np.int32)\n"
      "assert t.size == 63\n"
      "np.save(sys.argv[2], t[:48].reshape(3, 16))\n"
      "np.save(sys.argv[3], t[48:])",
      {text, dir.File("whole.npy"), dir.File("rest.npy")});
  ASSERT_EQ(r.exit_code, 0) << r.output;
  auto routes = [&](const std::string& input) {
    auto out = testing::Run(testing::SprigCli() + " routes " + Quote(model) + " --input " +
                            Quote(input) + " --json");
    EXPECT_EQ(out.exit_code, 0) << out.output;
    return nlohmann::json::parse(out.output, nullptr, false);
  };
  const nlohmann::json from_text = routes(text);
  const nlohmann::json whole = routes(dir.File("whole.npy")), rest = routes(dir.File("rest.npy"));
  ASSERT_TRUE(from_text.is_object() && whole.is_object() && rest.is_object());
  EXPECT_EQ(from_text["rows"], bytes);
  std::vector<uint64_t> want = whole["layers"][0]["counts"];
  const std::vector<uint64_t> more = rest["layers"][0]["counts"];
  for (size_t i = 0; i < want.size(); ++i) want[i] += more[i];
  EXPECT_EQ(from_text["layers"][0]["counts"].get<std::vector<uint64_t>>(), want);
  // `run` writes one array, which pieces of text would not make: it keeps to token arrays.
  r = testing::Run(testing::SprigCli() + " run " + Quote(model) + " --input " + Quote(text) +
                   " --output " + Quote(dir.File("y.npy")));
  EXPECT_EQ(r.exit_code, 2) << r.output;
}

}  // namespace
}  // namespace sprig
