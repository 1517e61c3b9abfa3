#include "network/network.h"

#include "base/status_macros.h"
#include "model/tensor_spec.h"

namespace sprig::network {

Status Network::BindLayers(const format::ModelFile& file) {
  const ModelConfig& c = file.config();
  for (size_t i = 0; i < c.layers.size(); ++i) {
    SPRIG_ASSIGN_OR_RETURN(auto layer, layers::BindLayer(file, i, LayerPrefix(c, i)));
    layers_.push_back(std::move(layer));
  }
  return Status::Ok();
}

}  // namespace sprig::network
