#include "network/stack_network.h"
#include "base/status_macros.h"

namespace sprig::network {
namespace {

// Activations between layers: layer i writes to ping when i is even, pong when odd, and the
// last layer to the caller's output.
struct StackWorkspace final : Workspace {
  std::vector<float> ping, pong;
};

}  // namespace

Result<std::unique_ptr<Network>> StackNetwork::Bind(const format::ModelFile& file) {
  std::unique_ptr<StackNetwork> network(new StackNetwork());
  SPRIG_RETURN_IF_ERROR(network->BindLayers(file));
  return std::unique_ptr<Network>(std::move(network));
}

std::unique_ptr<Workspace> StackNetwork::NewWorkspace() const {
  return std::make_unique<StackWorkspace>();
}

void StackNetwork::Forward(const layers::Exec& exec, Workspace& workspace, const Input& input,
                           float* output, Recorder& recorder) const {
  StackWorkspace& ws = static_cast<StackWorkspace&>(workspace);
  const size_t rows = input.sequences;
  recorder.Begin();
  const float* x = input.rows;
  for (size_t i = 0; i < layers_.size(); ++i) {
    const layers::FeedForward& layer = *layers_[i];
    float* y = output;
    if (i + 1 < layers_.size()) {
      std::vector<float>& buffer = (i % 2 == 0) ? ws.ping : ws.pong;
      if (buffer.size() < rows * layer.out()) buffer.resize(rows * layer.out());
      y = buffer.data();
    }
    layer.Forward(exec, x, rows, y, recorder.RoutesOf(i, layer.route_width(), rows));
    recorder.Trace(i, x, layer.in(), y, layer.out(), rows);
    x = y;
  }
}

}  // namespace sprig::network
