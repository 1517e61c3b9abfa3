// The stack family: float rows through the layers in order, each layer's output the next one's
// input; the output is the last layer's.
#pragma once

#include <memory>

#include "network/network.h"

namespace sprig::network {

class StackNetwork final : public Network {
 public:
  // Binds a stack model's layers. `file` must outlive the network.
  static Result<std::unique_ptr<Network>> Bind(const format::ModelFile& file);

  std::unique_ptr<Workspace> NewWorkspace() const override;
  void Forward(const layers::Exec& exec, Workspace& ws, const Input& input, float* output,
               Recorder& recorder) const override;

 private:
  StackNetwork() = default;
};

}  // namespace sprig::network
