// sprig synth CONFIG -o WEIGHTS.npz [--seed S]
#include <cstdio>
#include <memory>

#include "cli.h"
#include "converter/config/config_json.h"
#include "converter/synth/synth.h"
#include "io/tensor_archive.h"

namespace sprig::cli {
namespace {

struct SynthArgs {
  std::string config, out;
  uint64_t seed = 1;
  bool force = false;
  bool compress = false;
};

int RunSynth(const SynthArgs& a) {
  auto config = convert::ReadConfigFile(a.config);
  if (!config.ok()) return Fail("synth", config.status());
  std::vector<io::NdArray> arrays = convert::SynthesizeWeights(*config, a.seed);
  uint64_t bytes = 0;
  for (const auto& arr : arrays) bytes += arr.nbytes();
  const Status s = io::WriteNpz(a.out, arrays, a.compress, a.force);
  if (!s.ok()) return Fail("synth", s);
  std::printf("wrote %s: %zu tensors, %s of float32 weights (seed %llu)\n", a.out.c_str(),
              arrays.size(), HumanBytes(bytes).c_str(), static_cast<unsigned long long>(a.seed));
  return kExitOk;
}

}  // namespace

Verb AddSynth(CLI::App& app) {
  auto args = std::make_shared<SynthArgs>();
  CLI::App* c = app.add_subcommand(
      "synth", "Write random weights for a config.json (for benchmarks, tests and demos).");
  c->add_option("CONFIG", args->config, "the model's config.json")->required();
  c->add_option("-o,--output", args->out, "the .npz file to write")->required();
  c->add_option("--seed", args->seed, "random seed; the same seed gives the same weights")
      ->capture_default_str();
  c->add_flag("--compress", args->compress, "deflate the .npz members");
  c->add_flag("--force", args->force, "overwrite the output if it exists");
  c->footer("Random weights make no meaningful predictions; use them to measure, not to infer.");
  return {c, [args] { return RunSynth(*args); }};
}

}  // namespace sprig::cli
