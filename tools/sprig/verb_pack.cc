// sprig pack CONFIG WEIGHTS -o OUT [--dtype f32|f16|bf16] [--rename MAP] [--force]
#include <unistd.h>

#include <cstdio>
#include <memory>

#include "cli.h"
#include "converter/pack/packer.h"

namespace sprig::cli {
namespace {

struct PackArgs {
  std::string config, weights, out, dtype = "f32", rename;
  bool force = false;
};

int RunPack(const PackArgs& a) {
  if (!a.force && access(a.out.c_str(), F_OK) == 0) {
    return Fail("pack", Status::InvalidArgument(a.out + " already exists; pass --force to "
                                                        "overwrite it"));
  }
  convert::PackOptions options;
  auto dtype = convert::ParseStorageType(a.dtype);
  if (!dtype.ok()) return Fail("pack", dtype.status());
  options.dtype = *dtype;
  options.overwrite = a.force;
  if (!a.rename.empty()) {
    auto map = convert::ReadRenameMap(a.rename);
    if (!map.ok()) return Fail("pack", map.status());
    options.rename = std::move(*map);
  }
  Progress progress("packing " + a.out);
  options.progress = [&](uint64_t done, uint64_t total) { progress.Update(done, total); };
  auto summary = convert::PackFiles(a.config, a.weights, a.out, options);
  progress.Finish();
  if (!summary.ok()) return Fail("pack", summary.status());
  const double mbps = summary->seconds > 0
                          ? static_cast<double>(summary->input_bytes) / summary->seconds / 1e6
                          : 0.0;
  std::printf("wrote %s: %s (%s of %s tensor data) in %.2f s, %.0f MB/s of input\n", a.out.c_str(),
              HumanBytes(summary->file_size).c_str(), HumanBytes(summary->tensor_bytes).c_str(),
              a.dtype.c_str(), summary->seconds, mbps);
  return kExitOk;
}

}  // namespace

Verb AddPack(CLI::App& app) {
  auto args = std::make_shared<PackArgs>();
  CLI::App* c = app.add_subcommand(
      "pack", "Convert config.json + weights (.npz, .npy or .safetensors) into a .sprig file.");
  c->add_option("CONFIG", args->config, "the model's config.json")->required();
  c->add_option("WEIGHTS", args->weights, "tensors: .npz, .safetensors or .npy")->required();
  c->add_option("-o,--output", args->out, "the .sprig file to write")->required();
  c->add_option("--dtype", args->dtype, "storage type of the weights: f32, f16 or bf16")
      ->capture_default_str();
  c->add_option("--rename", args->rename,
                "JSON file mapping the weights' tensor names to sprig's names");
  c->add_flag("--force", args->force, "overwrite OUT if it exists");
  c->footer(
      "The output is written to a temporary file and renamed when complete, so an interrupted "
      "pack leaves no output behind.");
  return {c, [args] { return RunPack(*args); }};
}

}  // namespace sprig::cli
