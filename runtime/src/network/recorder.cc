#include "network/recorder.h"

#include <utility>

namespace sprig::network {

void Recorder::Begin() {
  if (routes_) routes_->layers.clear();
  if (trace_) trace_->clear();
}

int32_t* Recorder::RoutesOf(size_t layer, size_t width, size_t rows) {
  if (routes_ == nullptr || width == 0) return nullptr;
  LayerRoutes entry;
  entry.layer = layer;
  entry.width = width;
  entry.choices.resize(rows * width);
  routes_->layers.push_back(std::move(entry));
  return routes_->layers.back().choices.data();
}

void Recorder::Trace(size_t layer, const float* input, size_t in, const float* output, size_t out,
                     size_t rows) {
  if (trace_ == nullptr) return;
  trace_->push_back({layer, in, out, std::vector<float>(input, input + rows * in),
                     std::vector<float>(output, output + rows * out)});
}

}  // namespace sprig::network
