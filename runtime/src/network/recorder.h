// The one recorder of what a forward call's layers decided and computed: each routed layer's
// choices (Routes) and each layer's input and output (LayerTrace). Both families record through
// it, so their Routes and traces have one shape: one Routes entry per routed layer and one trace
// entry per layer, in layer order, each with a row per token of the call.
#pragma once

#include <cstddef>
#include <cstdint>
#include <vector>

#include "sprig/session.h"

namespace sprig::network {

class Recorder {
 public:
  // Records into `routes` and `trace`; either may be null, and then that part is not recorded.
  // The caller owns both; they must outlive the recorder.
  Recorder(Routes* routes, std::vector<LayerTrace>* trace) : routes_(routes), trace_(trace) {}

  // Empties both, at the start of a call.
  void Begin();

  // Where layer `layer` writes its choices for `rows` rows: a new Routes entry of `width` ints
  // per row. Null when routes are not recorded or the layer does not route (width 0); a layer
  // then writes none.
  int32_t* RoutesOf(size_t layer, size_t width, size_t rows);

  // Copies layer `layer`'s input ([rows, in]) and output ([rows, out]) into a new trace entry,
  // when tracing.
  void Trace(size_t layer, const float* input, size_t in, const float* output, size_t out,
             size_t rows);

 private:
  Routes* routes_;
  std::vector<LayerTrace>* trace_;
};

}  // namespace sprig::network
