// sprig pack CONFIG WEIGHTS -o OUT [--dtype f32|f16|bf16|i8] [--dtype-nodes T] [--dtype-records T]
//   [--dtype-dense T] [--map FILE] [--tokenizer FILE.model] [--force]   (--rename FILE = --map
//   FILE)

#include <cstdio>
#include <cstdlib>
#include <memory>

#include "base/status_macros.h"
#include "cli.h"
#include "converter/pack/packer.h"
#include "platform/files.h"

namespace sprig::cli {
namespace {

struct PackArgs {
  std::string config, weights, out, dtype = "f32", mapping, tokenizer;
  std::string dtype_nodes, dtype_records, dtype_dense;  // empty: as --dtype
  bool force = false;
};

// The storage plan from --dtype and the per-part overrides.
Result<convert::StoragePlan> StorageFrom(const PackArgs& a) {
  SPRIG_ASSIGN_OR_RETURN(DType all, convert::ParseStorageType(a.dtype, "--dtype"));
  convert::StoragePlan plan{all, all, all};
  const std::pair<const std::string*, DType*> parts[] = {{&a.dtype_nodes, &plan.nodes},
                                                         {&a.dtype_records, &plan.records},
                                                         {&a.dtype_dense, &plan.dense}};
  const char* names[] = {"--dtype-nodes", "--dtype-records", "--dtype-dense"};
  for (size_t i = 0; i < 3; ++i) {
    if (parts[i].first->empty()) continue;
    SPRIG_ASSIGN_OR_RETURN(*parts[i].second, convert::ParseStorageType(*parts[i].first, names[i]));
  }
  return plan;
}

// One line per tensor whose stored values differ from the source.
void PrintStorageErrors(const std::vector<convert::TensorError>& errors) {
  bool header = false;
  for (const convert::TensorError& e : errors) {
    if (e.error.max_abs == 0) continue;
    if (!header) {
      std::printf("storage error against the source (max abs, relative RMS):\n");
      header = true;
    }
    std::printf("  %-44s %-5s %11.4g %11.4g\n", e.name.c_str(), ToString(e.dtype), e.error.max_abs,
                e.error.rel_rms);
  }
}

int RunPack(const PackArgs& a) {
  if (!a.force && platform::Exists(a.out)) {
    return Fail("pack", Status::InvalidArgument(a.out + " already exists; pass --force to "
                                                        "overwrite it"));
  }
  convert::PackOptions options;
  auto storage = StorageFrom(a);
  if (!storage.ok()) return Fail("pack", storage.status());
  options.storage = *storage;
  options.overwrite = a.force;
  options.tokenizer_model = a.tokenizer;
  if (!a.mapping.empty()) {
    auto mapping = convert::ReadMapping(a.mapping);
    if (!mapping.ok()) return Fail("pack", mapping.status());
    options.mapping = std::move(*mapping);
  }
  Progress progress("packing " + a.out);
  options.progress = [&](uint64_t done, uint64_t total) { progress.Update(done, total); };
  // SPRIG_LOG=debug shows the layout decisions on stderr.
  const char* log_level = std::getenv("SPRIG_LOG");
  if (log_level != nullptr && std::string(log_level) == "debug") {
    options.describe_layout = [](const std::string& line) {
      std::fprintf(stderr, "sprig: debug: %s\n", line.c_str());
    };
  }
  auto summary = convert::PackFiles(a.config, a.weights, a.out, options);
  progress.Finish();
  if (!summary.ok()) return Fail("pack", summary.status());
  const double mbps = summary->seconds > 0
                          ? static_cast<double>(summary->input_bytes) / summary->seconds / 1e6
                          : 0.0;
  const bool mixed = !a.dtype_nodes.empty() || !a.dtype_records.empty() || !a.dtype_dense.empty();
  const std::string what = mixed ? std::string("tensor data: nodes ") + ToString(storage->nodes) +
                                       ", records " + ToString(storage->records) + ", dense " +
                                       ToString(storage->dense)
                                 : a.dtype + " tensor data";
  std::printf("wrote %s: %s (%s of %s) in %.2f s, %.0f MB/s of input\n", a.out.c_str(),
              HumanBytes(summary->file_size).c_str(), HumanBytes(summary->tensor_bytes).c_str(),
              what.c_str(), summary->seconds, mbps);
  PrintStorageErrors(summary->errors);
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
  c->add_option("--dtype", args->dtype, "storage type of the weights: f32, f16, bf16 or i8")
      ->capture_default_str();
  c->add_option("--dtype-nodes", args->dtype_nodes,
                "storage type of routing weights (tree nodes.weight, router.weight); default "
                "--dtype");
  c->add_option("--dtype-records", args->dtype_records,
                "storage type of leaf and expert weights and path-tree nodes.out; default --dtype");
  c->add_option("--dtype-dense", args->dtype_dense,
                "storage type of every other weight (dense layers, attention, embeddings, "
                "head); default --dtype");
  // --rename is the option's older name, kept so that existing scripts work: a file of plain
  // renames is a mapping file.
  c->add_option("--map,--rename", args->mapping,
                "mapping file: JSON mapping the weights' tensor names to sprig's (rename by "
                "pattern, transpose, stack, split; docs/mapping.md)");
  c->add_option("--tokenizer", args->tokenizer,
                "a SentencePiece model (.model, BPE or unigram) to store in the file, for a "
                "config with \"tokenizer\": \"sentencepiece\"");
  c->add_flag("--force", args->force, "overwrite OUT if it exists");
  c->footer(
      "The output is written to a temporary file and renamed when complete, so an interrupted "
      "pack leaves no output behind. Biases and norm weights are always stored as f32; i8 is "
      "symmetric with one f32 scale per row. Every tensor whose stored values differ from the "
      "source is listed with its error.");
  return {c, [args] { return RunPack(*args); }};
}

}  // namespace sprig::cli
