// sprig pack from the command line: refusals that protect the user's files.
#include <gtest/gtest.h>
#ifndef _WIN32
#include <signal.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>
#endif

#include <chrono>
#include <filesystem>
#include <nlohmann/json.hpp>
#include <string>
#include <thread>
#include <vector>

#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

constexpr const char* kConfig = R"({"family":"stack","input_dim":8,"layers":[
  {"kind":"tree","mode":"leaf","depth":2,"leaf_width":4,"activation":"relu","out":3}]})";

class PackCli : public ::testing::Test {
 protected:
  void SetUp() override {
    config_ = dir_.File("config.json");
    weights_ = dir_.File("w.npz");
    testing::WriteFile(config_, kConfig);
    auto r =
        testing::Run(testing::SprigCli() + " synth " + Quote(config_) + " -o " + Quote(weights_));
    ASSERT_EQ(r.exit_code, 0) << r.output;
  }
  testing::CommandResult Pack(const std::string& out, const std::string& extra = "") {
    return testing::Run(testing::SprigCli() + " pack " + Quote(config_) + " " + Quote(weights_) +
                        " -o " + Quote(out) + " " + extra);
  }
  testing::TempDir dir_;
  std::string config_, weights_;
};

TEST_F(PackCli, RefusesAnExistingOutputWithoutForce) {
  const std::string out = dir_.File("m.sprig");
  testing::WriteFile(out, "precious");
  auto r = Pack(out);
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("already exists; pass --force"), std::string::npos) << r.output;
  EXPECT_EQ(testing::ReadFile(out), "precious");
  r = Pack(out, "--force");
  EXPECT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(testing::ReadFile(out), "precious");
}

TEST_F(PackCli, NeverWritesOverAnInput) {
  for (const std::string& input : {weights_, config_}) {
    const std::string before = testing::ReadFile(input);
    auto r = Pack(input, "--force");
    EXPECT_EQ(r.exit_code, 2) << r.output;
    EXPECT_NE(r.output.find("is one of the inputs"), std::string::npos) << r.output;
    EXPECT_EQ(testing::ReadFile(input), before);
  }
}

TEST_F(PackCli, AFailedWriteLeavesNoFile) {
  // A destination whose folder does not exist: the write fails before anything is published.
  const std::string out = dir_.File("no-such-folder/m.sprig");
  auto r = Pack(out);
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("no-such-folder"), std::string::npos) << r.output;
  EXPECT_FALSE(std::filesystem::exists(out));
  // A bad tensor also leaves nothing behind, and no temporary in the folder.
  testing::WriteFile(config_, R"({"family":"stack","input_dim":9,"layers":[
    {"kind":"tree","mode":"leaf","depth":2,"leaf_width":4,"activation":"relu","out":3}]})");
  r = Pack(dir_.File("bad.sprig"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("but the config needs"), std::string::npos) << r.output;
  size_t files = 0;
  for (const auto& e : std::filesystem::directory_iterator(dir_.path())) {
    (void)e;
    ++files;
  }
  EXPECT_EQ(files, 2u) << "only config.json and w.npz should remain";
}

TEST_F(PackCli, BadDtypeAndMissingInputs) {
  auto r = Pack(dir_.File("m.sprig"), "--dtype f8");
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("--dtype must be f32, f16, bf16 or i8"), std::string::npos) << r.output;
  r = testing::Run(testing::SprigCli() + " pack " + Quote(dir_.File("nope.json")) + " " +
                   Quote(weights_) + " -o " + Quote(dir_.File("m.sprig")));
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("nope.json"), std::string::npos) << r.output;
  r = testing::Run(testing::SprigCli() + " pack");
  EXPECT_EQ(r.exit_code, 2) << r.output;
}

TEST_F(PackCli, RenameMapServesOtherNames) {
  // Source: NumPy (Debian python3-numpy) rewrites the weights under a "model." prefix.
  const std::string renamed = dir_.File("theirs.npz");
  auto py = testing::RunPython(
      "import sys, numpy as np, json\n"
      "w = np.load(sys.argv[1])\n"
      "np.savez(sys.argv[2], **{'model.' + k: w[k] for k in w.files})\n"
      "json.dump({'model.' + k: k for k in w.files}, open(sys.argv[3], 'w'))\n",
      {weights_, renamed, dir_.File("map.json")});
  ASSERT_EQ(py.exit_code, 0) << py.output;
  auto r = testing::Run(testing::SprigCli() + " pack " + Quote(config_) + " " + Quote(renamed) +
                        " -o " + Quote(dir_.File("a.sprig")));
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("--map FILE"), std::string::npos) << r.output;
  r = testing::Run(testing::SprigCli() + " pack " + Quote(config_) + " " + Quote(renamed) + " -o " +
                   Quote(dir_.File("a.sprig")) + " --rename " + Quote(dir_.File("map.json")));
  EXPECT_EQ(r.exit_code, 0) << r.output;
}

// An experts layer and two gated dense layers, under names the way common PyTorch code writes
// them: one module per expert (stacked), fc1 and gate fused into one [2W, in] tensor (split),
// fc2 stored as nn.Linear's transpose [in, out] in one layer (transposed), names by pattern.
constexpr const char* kMappedConfig = R"({"family":"stack","input_dim":4,"layers":[
  {"kind":"experts","experts":3,"top_k":2,"width":6,"activation":"relu","out":4},
  {"kind":"dense","width":6,"gated":true,"activation":"silu","out":4},
  {"kind":"dense","width":6,"gated":true,"activation":"silu","out":2}]})";

// Source: NumPy (Debian python3-numpy) rewrites our weights under those names, in float64 for
// the fused tensors (the mapping keeps element types), and writes the mapping file.
constexpr const char* kTheirWeights = R"(
import sys, json, numpy as np
w = np.load(sys.argv[1])
t = {}
for e in range(3):
    t[f'moe.experts.{e}.w1.weight'] = w['layers.0.experts.fc1.weight'][e]
    t[f'moe.experts.{e}.w1.bias'] = w['layers.0.experts.fc1.bias'][e]
    t[f'moe.experts.{e}.w2.weight'] = w['layers.0.experts.fc2.weight'][e]
    t[f'moe.experts.{e}.w2.bias'] = w['layers.0.experts.fc2.bias'][e]
t['moe.router.weight'] = w['layers.0.router.weight']
t['moe.router.bias'] = w['layers.0.router.bias']
for l in (1, 2):
    fused = np.concatenate([w[f'layers.{l}.fc1.weight'], w[f'layers.{l}.gate.weight']])
    t[f'mlp.{l}.fused'] = fused.astype(np.float64)
    t[f'mlp.{l}.b1'] = w[f'layers.{l}.fc1.bias']
    t[f'mlp.{l}.bg'] = w[f'layers.{l}.gate.bias']
    t[f'mlp.{l}.b2'] = w[f'layers.{l}.fc2.bias']
t['mlp.1.out'] = w['layers.1.fc2.weight']
t['mlp.2.out_t'] = np.ascontiguousarray(w['layers.2.fc2.weight'].T)
np.savez(sys.argv[2], **t)
json.dump({
  'moe.experts.{e}.w1.weight': {'stack': 'layers.0.experts.fc1.weight', 'over': 'e'},
  'moe.experts.{e}.w1.bias': {'stack': 'layers.0.experts.fc1.bias', 'over': 'e'},
  'moe.experts.{e}.w2.weight': {'stack': 'layers.0.experts.fc2.weight', 'over': 'e'},
  'moe.experts.{e}.w2.bias': {'stack': 'layers.0.experts.fc2.bias', 'over': 'e'},
  'moe.router.weight': 'layers.0.router.weight',
  'moe.router.bias': 'layers.0.router.bias',
  'mlp.1.fused': {'split': {'layers.1.fc1.weight': [0, 6], 'layers.1.gate.weight': [6, 12]}},
  'mlp.2.fused': {'split': ['layers.2.fc1.weight', 'layers.2.gate.weight'], 'axis': -2},
  'mlp.{l}.b1': 'layers.{l}.fc1.bias',
  'mlp.{l}.bg': 'layers.{l}.gate.bias',
  'mlp.{l}.b2': 'layers.{l}.fc2.bias',
  'mlp.1.out': 'layers.1.fc2.weight',
  'mlp.2.out_t': {'to': 'layers.2.fc2.weight', 'transpose': True},
}, open(sys.argv[3], 'w'), indent=1)
)";

class PackCliMapping : public PackCli {
 protected:
  void SetUp() override {
    PackCli::SetUp();
    testing::WriteFile(config_, kMappedConfig);
    auto r = testing::Run(testing::SprigCli() + " synth " + Quote(config_) + " -o " +
                          Quote(weights_) + " --force");
    ASSERT_EQ(r.exit_code, 0) << r.output;
    theirs_ = dir_.File("theirs.npz");
    map_ = dir_.File("map.json");
    auto py = testing::RunPython(kTheirWeights, {weights_, theirs_, map_});
    ASSERT_EQ(py.exit_code, 0) << py.output;
  }
  testing::CommandResult PackTheirs(const std::string& out, const std::string& extra) {
    return testing::Run(testing::SprigCli() + " pack " + Quote(config_) + " " + Quote(theirs_) +
                        " -o " + Quote(out) + " " + extra);
  }
  // A Python edit of the mapping file (`m`, a dict) or of their weights (`t`), then a pack that
  // must fail with exit code 2, naming each of `names`, and leave no file behind.
  void ExpectRefused(const std::string& edit, const std::vector<std::string>& names) {
    const std::string map = dir_.File("edited.json"), theirs = dir_.File("edited.npz");
    auto py = testing::RunPython(
        "import sys, json, numpy as np\n"
        "m = json.load(open(sys.argv[1]))\n"
        "t = dict(np.load(sys.argv[2]))\n" +
            edit +
            "\n"
            "open(sys.argv[3], 'w').write(m if isinstance(m, str) else json.dumps(m))\n"
            "np.savez(sys.argv[4], **t)\n",
        {map_, theirs_, map, theirs});
    ASSERT_EQ(py.exit_code, 0) << py.output;
    const std::string out = dir_.File("refused.sprig");
    auto r = testing::Run(testing::SprigCli() + " pack " + Quote(config_) + " " + Quote(theirs) +
                          " -o " + Quote(out) + " --map " + Quote(map));
    EXPECT_EQ(r.exit_code, 2) << edit << "\n" << r.output;
    for (const std::string& name : names) {
      EXPECT_NE(r.output.find(name), std::string::npos) << edit << "\nmissing " << name << " in\n"
                                                        << r.output;
    }
    EXPECT_FALSE(std::filesystem::exists(out)) << edit;
    for (const auto& e : std::filesystem::directory_iterator(dir_.path())) {
      const std::string file = e.path().filename().string();
      EXPECT_TRUE(file.find(".sprig") == std::string::npos || file == "ours.sprig")
          << edit << ": " << file << " left behind";
    }
  }
  std::string theirs_, map_;
};

TEST_F(PackCliMapping, StackSplitAndTransposeGiveTheSameFile) {
  const std::string ours = dir_.File("ours.sprig");
  ASSERT_EQ(Pack(ours).exit_code, 0);
  // Without the mapping their names are refused.
  auto r = PackTheirs(dir_.File("a.sprig"), "");
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("is missing"), std::string::npos) << r.output;
  // --map and its synonym --rename: byte for byte the file packed from our own names.
  for (const std::string option : {"--map", "--rename"}) {
    const std::string out = dir_.File(option.substr(2) + ".sprig");
    r = PackTheirs(out, option + " " + Quote(map_));
    ASSERT_EQ(r.exit_code, 0) << option << ": " << r.output;
    EXPECT_EQ(testing::ReadFile(out), testing::ReadFile(ours)) << option;
  }
}

TEST_F(PackCliMapping, BadMappingsAreRefusedByName) {
  ASSERT_EQ(Pack(dir_.File("ours.sprig")).exit_code, 0);
  // A missing expert: the stack names the index and the names it found.
  ExpectRefused("for k in list(t):\n    if k.startswith('moe.experts.1.'): del t[k]",
                {"edited.json", "moe.experts.{e}.w1.weight", "index 1 of {e} is missing",
                 "moe.experts.0.w1.weight, moe.experts.2.w1.weight"});
  // Parts of different shapes.
  ExpectRefused("t['moe.experts.2.w1.weight'] = np.zeros((6, 5), np.float32)",
                {"edited.json", "moe.experts.0.w1.weight ([6, 4] float32)",
                 "moe.experts.2.w1.weight ([6, 5] float32)"});
  // A split range short of the end, then past it; an equal split that does not divide.
  ExpectRefused("m['mlp.1.fused']['split']['layers.1.gate.weight'] = [6, 10]",
                {"edited.json", "entry \"mlp.1.fused\"", "leaving [10, 12) over"});
  ExpectRefused(
      "m['mlp.1.fused']['split']['layers.1.gate.weight'] = [6, 13]",
      {"edited.json", "mlp.1.fused", "\"layers.1.gate.weight\" [6, 13) runs past the end"});
  ExpectRefused("m['mlp.2.fused']['split'] += ['x', 'y', 'z']",
                {"edited.json", "mlp.2.fused", "into 5 equal parts", "12 is not divisible by 5"});
  // Overlapping ranges, a bad axis, a transpose of a vector.
  ExpectRefused("m['mlp.1.fused']['split']['layers.1.gate.weight'] = [5, 12]",
                {"edited.json", "mlp.1.fused", "overlap"});
  ExpectRefused("m['mlp.2.fused']['axis'] = 2",
                {"edited.json", "mlp.2.fused", "axis 2 is out of range"});
  ExpectRefused("m['moe.router.bias'] = {'to': 'layers.0.router.bias', 'transpose': True}",
                {"edited.json", "moe.router.bias", "cannot transpose"});
  // The file's own mistakes: an unknown field, a placeholder the key lacks, two entries giving
  // one name, one tensor claimed twice, malformed JSON.
  ExpectRefused("m['mlp.2.out_t']['transpos'] = True",
                {"edited.json", "mlp.2.out_t", "unknown field \"transpos\""});
  ExpectRefused("m['mlp.{l}.b1'] = 'layers.{k}.fc1.bias'",
                {"edited.json", "mlp.{l}.b1", "uses {k}, which the key does not have"});
  ExpectRefused("m['mlp.1.out'] = 'layers.2.fc2.weight'",
                {"edited.json", "mlp.1.out", "mlp.2.out_t", "layers.2.fc2.weight"});
  ExpectRefused("m['mlp.1.b{x}'] = 'other.{x}'",
                {"edited.json", "mlp.1.b1", "mlp.{l}.b1", "mlp.1.b{x}"});
  ExpectRefused("m = '{\"a\": \"b\",}'", {"edited.json", "invalid JSON"});
  // The matching after the mapping still says where a tensor came from.
  ExpectRefused(
      "t['moe.experts.0.w2.weight'] = np.zeros((4, 7), np.float32)\n"
      "t['moe.experts.1.w2.weight'] = np.zeros((4, 7), np.float32)\n"
      "t['moe.experts.2.w2.weight'] = np.zeros((4, 7), np.float32)",
      {"edited.npz", "layers.0.experts.fc2.weight (stacked from moe.experts.{e}.w2.weight)",
       "[3, 4, 7]"});
  // A missing mapping file.
  auto r = PackTheirs(dir_.File("m.sprig"), "--map " + Quote(dir_.File("none.json")));
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("none.json: cannot open the mapping file"), std::string::npos)
      << r.output;
  EXPECT_FALSE(std::filesystem::exists(dir_.File("m.sprig")));
}

// The exporter reads the same mapping file as pack: tests/python/test_mapping.py checks
// load_weights and weight_arrays against NumPy and, given the program, that the weights
// load_weights makes pack byte for byte into the file pack makes with --map.
TEST(PackCliExporter, LoadWeightsGetsWhatPackGets) {
  const std::string src = SPRIG_SOURCE_DIR;
  auto r = testing::Run("SPRIG_CLI=" + Quote(testing::SprigCli()) + " PYTHONPATH=" +
                        Quote(src + "/converter/python") + " " + testing::Python() + " " +
                        Quote(src + "/tests/python/test_mapping.py") + " -v");
  EXPECT_EQ(r.exit_code, 0) << r.output;
  // The comparison with pack ran: it skips itself only without SPRIG_CLI.
  EXPECT_NE(r.output.find("test_pack_gets_what_load_weights_gets"), std::string::npos) << r.output;
  EXPECT_EQ(r.output.find("skipped"), std::string::npos) << r.output;
}

TEST_F(PackCli, SynthIsDeterministicAndRoutesSpread) {
  const std::string again = dir_.File("again.npz"), other = dir_.File("other.npz");
  ASSERT_EQ(testing::Run(testing::SprigCli() + " synth " + Quote(config_) + " -o " + Quote(again))
                .exit_code,
            0);
  ASSERT_EQ(testing::Run(testing::SprigCli() + " synth " + Quote(config_) + " -o " + Quote(other) +
                         " --seed 2")
                .exit_code,
            0);
  EXPECT_EQ(testing::ReadFile(again), testing::ReadFile(weights_));
  EXPECT_NE(testing::ReadFile(other), testing::ReadFile(weights_));

  // Synthesized routing nodes split unit-normal rows across the leaves: a depth-5 tree over
  // 2,000 rows uses nearly all 32 leaves with an entropy near log2(32).
  const std::string config = dir_.File("deep.json");
  testing::WriteFile(config, R"({"family":"stack","input_dim":32,"layers":[
    {"kind":"tree","mode":"leaf","depth":5,"leaf_width":4,"activation":"relu","out":8}]})");
  ASSERT_EQ(testing::Run(testing::SprigCli() + " synth " + Quote(config) + " -o " +
                         Quote(dir_.File("deep.npz")))
                .exit_code,
            0);
  ASSERT_EQ(testing::Run(testing::SprigCli() + " pack " + Quote(config) + " " +
                         Quote(dir_.File("deep.npz")) + " -o " + Quote(dir_.File("deep.sprig")))
                .exit_code,
            0);
  auto py = testing::RunPython(
      "import sys, numpy as np\n"
      "np.save(sys.argv[1], np.random.default_rng(0).standard_normal((2000, "
      "32)).astype(np.float32))\n",
      {dir_.File("x.npy")});
  ASSERT_EQ(py.exit_code, 0) << py.output;
  auto r = testing::Run(testing::SprigCli() + " routes " + Quote(dir_.File("deep.sprig")) +
                        " --input " + Quote(dir_.File("x.npy")) + " --json");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const auto j = nlohmann::json::parse(r.output.substr(r.output.find('{')));
  const auto& layer = j["layers"][0];
  EXPECT_GT(layer["entropy_bits"].get<double>(), 0.85 * 5.0) << r.output;
  EXPECT_LE(layer["dead"].get<int>(), 1) << r.output;
}

#ifndef _WIN32
// Windows' counterpart, a pack stopped by TerminateProcess, is in error_paths_test.cc.
// The file descriptor through which process `pid` writes a file in `folder`, or "" if none is
// open yet: an O_TMPFILE file shows as "FOLDER/#INODE (deleted)", a named temporary by its name.
std::string WritingFd(pid_t pid, const std::string& folder) {
  const std::string fds = "/proc/" + std::to_string(pid) + "/fd";
  std::error_code ec;
  for (const auto& e : std::filesystem::directory_iterator(fds, ec)) {
    char target[4096];
    const ssize_t n = ::readlink(e.path().c_str(), target, sizeof(target) - 1);
    if (n <= 0) continue;
    const std::string t(target, static_cast<size_t>(n));
    if (t.rfind(folder + "/", 0) == 0 && t.find(".sprig.tmp-") != std::string::npos) {
      return e.path().string();
    }
    if (t.rfind(folder + "/#", 0) == 0) return e.path().string();
  }
  return "";
}

TEST_F(PackCli, KilledMidwayLeavesNoDestination) {
  // 12.6 M float32 weights (50 MB): packing takes long enough to be caught while it writes.
  testing::WriteFile(config_, R"({"family":"stack","input_dim":1024,"layers":[
    {"kind":"dense","width":6144,"activation":"relu","out":1024}]})");
  std::filesystem::remove(weights_);
  auto r =
      testing::Run(testing::SprigCli() + " synth " + Quote(config_) + " -o " + Quote(weights_));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const std::string out = dir_.File("m.sprig");
#ifdef SPRIG_TEST_EMULATOR
  GTEST_SKIP() << "the pack is started with execl, which cannot start a foreign-architecture "
                  "program under user-mode emulation";
#endif
  // The program's own path: execl takes no shell quoting.
  const std::string cli = SPRIG_CLI_PATH;
  const pid_t pid = ::fork();
  ASSERT_GE(pid, 0);
  if (pid == 0) {
    ::execl(cli.c_str(), cli.c_str(), "pack", config_.c_str(), weights_.c_str(), "-o", out.c_str(),
            static_cast<char*>(nullptr));
    ::_exit(127);
  }
  // Kill it once its temporary holds at least 1 MiB: midway, before it can be published.
  bool anonymous = false, killed = false;
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(120);
  while (!killed && std::chrono::steady_clock::now() < deadline) {
    const std::string fd = WritingFd(pid, dir_.path());
    struct stat st;
    if (!fd.empty() && ::stat(fd.c_str(), &st) == 0 && st.st_size >= (1 << 20)) {
      anonymous = std::filesystem::read_symlink(fd).string().find("(deleted)") != std::string::npos;
      killed = ::kill(pid, SIGKILL) == 0;
    }
    int status = 0;
    if (!killed && ::waitpid(pid, &status, WNOHANG) == pid) {
      FAIL() << "pack finished before it could be interrupted";
    }
    std::this_thread::sleep_for(std::chrono::microseconds(200));
  }
  if (!killed) ::kill(pid, SIGKILL);
  int status = 0;
  ::waitpid(pid, &status, 0);
  ASSERT_TRUE(killed) << "pack never started writing";
  EXPECT_TRUE(WIFSIGNALED(status) && WTERMSIG(status) == SIGKILL);
  EXPECT_FALSE(std::filesystem::exists(out));
  if (anonymous) {
    // An O_TMPFILE temporary dies with the process: only the inputs remain.
    size_t files = 0;
    for (const auto& e : std::filesystem::directory_iterator(dir_.path())) {
      (void)e;
      ++files;
    }
    EXPECT_EQ(files, 2u);
  }
}
#endif

}  // namespace
}  // namespace sprig
