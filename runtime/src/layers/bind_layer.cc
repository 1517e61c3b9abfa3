#include <memory>
#include <string>

#include "base/status_macros.h"
#include "format/model_file.h"
#include "layers/binder.h"
#include "layers/dense.h"
#include "layers/experts.h"
#include "layers/feed_forward.h"
#include "layers/leaf_tree.h"
#include "layers/path_tree.h"
#include "sprig/config.h"
#include "sprig/status.h"

namespace sprig::layers {

namespace {

Result<std::unique_ptr<FeedForward>> BindKind(const format::ModelFile& file, size_t index,
                                              const std::string& prefix) {
  const LayerConfig& config = file.config().layers[index];
  Binder binder(file, prefix);
  switch (config.kind) {
    case LayerKind::kDense:
      return std::unique_ptr<FeedForward>(new DenseLayer(binder, config));
    case LayerKind::kTree:
      if (config.mode == TreeMode::kLeaf) {
        return std::unique_ptr<FeedForward>(new LeafTreeLayer(binder, config));
      }
      return std::unique_ptr<FeedForward>(new PathTreeLayer(binder, config));
    case LayerKind::kExperts:
      return std::unique_ptr<FeedForward>(new ExpertsLayer(binder, config));
  }
  return Status::NotSupported(file.path() + ": layer " + std::to_string(index) +
                              " has a kind this build cannot run");
}

}  // namespace

Result<std::unique_ptr<FeedForward>> BindLayer(const format::ModelFile& file, size_t index,
                                               const std::string& prefix) {
  SPRIG_ASSIGN_OR_RETURN(auto layer, BindKind(file, index, prefix));
  // All of a routed layer's tensors share one record set (one record per leaf, expert or
  // path-tree chunk); the loader allows at most one per layer.
  const format::RecordSetInfo* records = nullptr;
  for (const format::RecordSetInfo& set : file.record_sets()) {
    if (set.layer == index) records = &set;
  }
  layer->SetRecords(index, records);
  return layer;
}

}  // namespace sprig::layers
