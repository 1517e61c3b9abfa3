// The models a routed model is measured against, built in memory from its config.
//
//   dense twin  every routed layer made dense, with all of its units together as the hidden
//               width (leaves × leaf_width, the path tree's neurons, experts × width plus
//               shared_experts × shared_width), the same in/out, activation, gating and biases;
//               everything else unchanged. The router and the shared experts' sigmoid gate have
//               no counterpart in it (model/flops.h counts the twin the same way).
//   floor       every routed layer made a dense layer of width 1, which costs next to nothing:
//               time(baseline) / time(floor) is the whole-model bound, the speedup if the routed
//               layers were free (Amdahl's law with the dense parts as the serial fraction).
#pragma once

#include <cstdint>
#include <memory>
#include <string>

#include "sprig/config.h"
#include "sprig/model.h"
#include "sprig/status.h"

namespace sprig::bench {

bool IsRouted(const LayerConfig& layer);

ModelConfig DenseTwinConfig(const ModelConfig& routed);
ModelConfig FloorConfig(const ModelConfig& routed);

// The storage type of most of a model's tensor bytes, so a twin is stored like its model.
DType MainStorageType(const Model& model);

struct BuildOptions {
  DType dtype = DType::kF32;
  uint64_t seed = 1;
  // Copy every tensor whose name, shape and storage type match from this file (attention,
  // embeddings, norms, head, unrouted layers), so only the replaced layers get random weights.
  // Empty: all weights random.
  std::string donor_path;
  // Folder for the temporary file; empty: the system temp folder (TMPDIR).
  std::string folder;
  // Drop the packed file from the page cache before opening it (a cold start).
  bool evict = false;
};

// Synthesizes weights for `config` (converter/synth), packs them into a temporary file, opens it
// and unlinks the file. The model keeps its mapping, so it behaves like a file on that folder's
// storage (page cache, eviction, faults), and nothing is left behind once it is closed.
Result<std::shared_ptr<const Model>> BuildUnlinkedModel(const ModelConfig& config,
                                                        const BuildOptions& options);

}  // namespace sprig::bench
