#include "bench/kit/models.h"

#include <atomic>
#include <cstdio>
#include <filesystem>
#include <map>
#include <optional>
#include <vector>

#include "base/status_macros.h"
#include "converter/config/tensor_match.h"
#include "converter/pack/packer.h"
#include "converter/synth/synth.h"
#include "format/model_file.h"
#include "model/config_check.h"
#include "model/flops.h"
#include "platform/files.h"
#include "platform/process.h"
#include "sprig/memory.h"

namespace sprig::bench {
namespace {

// A routed layer made dense with `width` units; in, out, activation and biases stay.
LayerConfig DenseOf(const LayerConfig& l, uint32_t width, bool gated) {
  LayerConfig d;
  d.kind = LayerKind::kDense;
  d.width = width;
  d.activation = l.activation;
  d.gated = gated;
  d.bias = l.bias;
  d.in = l.in;
  d.out = l.out;
  return d;
}

std::optional<io::ElementType> ElementTypeOf(DType t) {
  switch (t) {
    case DType::kF32:
      return io::ElementType::kF32;
    case DType::kF16:
      return io::ElementType::kF16;
    case DType::kBF16:
      return io::ElementType::kBF16;
    case DType::kI8:
      break;
  }
  return std::nullopt;
}

// Replaces synthesized arrays by the donor's tensors of the same name, shape and a float
// storage type (stored values are exact in their own type, so packing them again is lossless).
Status CopyFromDonor(const std::string& donor_path, std::vector<io::NdArray>* arrays) {
  format::OpenFileOptions o;
  o.warm_hot = false;
  SPRIG_ASSIGN_OR_RETURN(auto donor, format::ModelFile::Open(donor_path, o));
  for (io::NdArray& a : *arrays) {
    const format::TensorInfo* t = donor->Find(a.name);
    if (!t || t->shape != a.shape) continue;
    const auto type = ElementTypeOf(t->dtype);
    if (!type) continue;
    a = io::NdArray::Owned(a.name, *type, a.shape, donor->Gather(*t));
  }
  return Status::Ok();
}

std::string TemporaryPath(const std::string& folder) {
  static std::atomic<int> counter{0};
  const std::filesystem::path dir =
      platform::FsPath(folder.empty() ? platform::TemporaryFolder() : folder);
  return platform::Utf8(dir / (".sprig-bench-" + std::to_string(platform::ProcessId()) + "-" +
                               std::to_string(counter++) + ".sprig"));
}

}  // namespace

bool IsRouted(const LayerConfig& layer) {
  return layer.kind != LayerKind::kDense;
}

ModelConfig DenseTwinConfig(const ModelConfig& routed) {
  ModelConfig twin = routed;
  twin.name = routed.name.empty() ? "dense twin" : routed.name + " (dense twin)";
  for (LayerConfig& l : twin.layers) {
    if (!IsRouted(l)) continue;
    // Path trees have no gate; leaves and experts keep theirs (flops.h counts the same way).
    const bool gated = l.kind == LayerKind::kTree && l.mode == TreeMode::kPath ? false : l.gated;
    l = DenseOf(l, static_cast<uint32_t>(CostOf(l).dense_width), gated);
  }
  return twin;
}

ModelConfig FloorConfig(const ModelConfig& routed) {
  ModelConfig floor = routed;
  floor.name = routed.name.empty() ? "floor" : routed.name + " (floor)";
  for (LayerConfig& l : floor.layers) {
    if (IsRouted(l)) l = DenseOf(l, 1, false);
  }
  return floor;
}

DType MainStorageType(const Model& model) {
  std::map<DType, uint64_t> bytes;
  for (const TensorDescription& t : model.tensor_descriptions()) bytes[t.dtype] += t.bytes;
  DType best = DType::kF32;
  uint64_t most = 0;
  for (const auto& [type, n] : bytes) {
    if (n > most) best = type, most = n;
  }
  return best;
}

Result<std::shared_ptr<const Model>> BuildUnlinkedModel(const ModelConfig& config,
                                                        const BuildOptions& options) {
  SPRIG_RETURN_IF_ERROR(ValidateConfig(config, "the " + config.name + " config"));
  std::vector<io::NdArray> weights = convert::SynthesizeWeights(config, options.seed);
  if (!options.donor_path.empty()) {
    SPRIG_RETURN_IF_ERROR(CopyFromDonor(options.donor_path, &weights));
  }
  SPRIG_ASSIGN_OR_RETURN(auto matched,
                         convert::MatchTensors(config, weights, "synthesized weights", {}));
  const std::string path = TemporaryPath(options.folder);
  convert::PackOptions pack;
  pack.storage = {options.dtype, options.dtype, options.dtype};
  SPRIG_RETURN_IF_ERROR(convert::PackTensors(config, matched, path, pack).status());
  if (options.evict) {
    // Writing left every page in the cache; a cold start needs them gone. Failure only means
    // the start is warmer than asked, which the residency figures then show.
    (void)EvictFromPageCache(path);
  }
  auto opened = Model::open(path);
  // POSIX removes the name at once; the mapping stays valid until the model is closed.
  if (platform::RemoveFile(path).ok() || !opened.ok()) return opened;
  // Windows refuses to delete a mapped file: the last user of the model closes it, then
  // removes the file, so no model-sized temporary is left behind.
  std::shared_ptr<const Model> model = std::move(opened).value();
  const Model* raw = model.get();
  return std::shared_ptr<const Model>(raw, [model, path](const Model*) mutable {
    model.reset();
    (void)platform::RemoveFile(path);
  });
}

}  // namespace sprig::bench
