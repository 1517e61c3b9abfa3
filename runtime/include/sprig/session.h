// sprig::Session: per-thread inference state over a shared Model.
//
// A Session owns its scratch memory and worker threads. It is not thread-safe: use one Session
// per thread (any number of Sessions may share one Model). Results are identical for every
// thread count.
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "sprig/model.h"
#include "sprig/status.h"

namespace sprig {

struct SessionOptions {
  // Threads a forward call may use, the calling thread included. 0 means one per CPU.
  // Default: 1.
  size_t threads = 1;
  // Kernel instruction set: "" picks the fastest this CPU supports (or the SPRIG_KERNEL_PATH
  // environment variable, if set); otherwise one of "scalar", "sse42", "avx2", "avx512",
  // "neon", which must be available. Default: "".
  std::string kernel_path;
};

// The routing decisions of one forward call, one entry per routed layer.
struct LayerRoutes {
  size_t layer = 0;
  size_t width = 1;             // ints per row: 1 for trees, top_k for experts
  std::vector<int32_t> choices;  // [rows, width]: leaf index, or experts by descending weight
};

struct Routes {
  std::vector<LayerRoutes> layers;
};

class Session {
 public:
  static Result<std::unique_ptr<Session>> create(std::shared_ptr<const Model> model,
                                                 const SessionOptions& options = {});
  ~Session();
  Session(const Session&) = delete;
  Session& operator=(const Session&) = delete;

  // Stack models: `input` holds rows × input_dim floats, `output` receives rows × output_dim.
  // When `routes` is not null it receives every routed layer's decisions for these rows.
  // Returns InvalidArgument for a transformer model or a non-finite input value.
  Status forward(const float* input, size_t rows, float* output, Routes* routes = nullptr);

  const Model& model() const { return *model_; }
  // The kernel instruction set this session runs ("avx2", ...).
  const char* kernel_path() const;
  size_t threads() const;

 private:
  struct State;
  Session(std::shared_ptr<const Model> model, std::unique_ptr<State> state);
  std::shared_ptr<const Model> model_;
  std::unique_ptr<State> state_;
};

}  // namespace sprig
