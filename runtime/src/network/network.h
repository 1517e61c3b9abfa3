// A model's network: its bound layers and the way its family runs them, behind one interface
// that the stack (network/stack_network.h) and the transformer (transformer/transformer.h)
// implement.
//
// A network is bound once, when its model opens (Model::open), and owned by the model. Binding
// records pointers into the file's mapping and reads no weight. Afterwards it is immutable and
// shared by every session of the model: a session passes in everything a call changes (its
// kernels, threads and scratch in layers::Exec, its Workspace, its KvCache) and a Recorder for
// the routes and traces the caller asked for. The session applies the input rules
// (api/input_rules.h) first, so a network assumes a valid input.
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <vector>

#include "format/model_file.h"
#include "layers/feed_forward.h"
#include "network/recorder.h"
#include "sprig/config.h"
#include "sprig/status.h"

namespace sprig::network {

// The input of one forward call: float rows for a stack, token sequences for a transformer.
struct Input {
  const float* rows = nullptr;      // stack: [sequences, in]
  const int32_t* tokens = nullptr;  // transformer: [sequences, length], row-major
  size_t sequences = 0;             // a stack's rows, or a transformer's sequences
  size_t length = 1;                // tokens per sequence (1 for a stack)
};

// The memory a session's calls work in (activations between layers and blocks). It grows on
// first use and is kept for later calls, so a warm session does not allocate per call. Made by
// Network::NewWorkspace for that network only; used by one thread at a time.
class Workspace {
 public:
  virtual ~Workspace() = default;
};

// Keys and values of one sequence, per block, each laid out [kv head][capacity][head_dim]: one
// head's keys (and values) are a contiguous run of positions, which attention reads as one
// stream (a [positions, kv_dim] layout would read a few cache lines per position, each
// kv_dim apart). Positions [0, length) hold data; the arrays grow (and are laid out again) as
// tokens come, and are kept for the next sequence.
struct KvCache {
  std::vector<std::vector<float>> keys, values;
  size_t length = 0;    // positions held
  size_t capacity = 0;  // positions each array has room for
  void Clear() { length = 0; }
};

// Decoding one sequence token by token with a KV cache (Session::append_tokens).
class Decoder {
 public:
  // Appends `count` tokens of one sequence to `cache` at positions cache.length onwards and
  // writes the lm logits of the last of them to `logits` (vocab_size floats) when it is not
  // null.
  virtual void Append(const layers::Exec& exec, Workspace& ws, KvCache& cache,
                      const int32_t* tokens, size_t count, float* logits) const = 0;

 protected:
  ~Decoder() = default;
};

class Network {
 public:
  virtual ~Network() = default;
  Network(const Network&) = delete;
  Network& operator=(const Network&) = delete;

  // The feed-forward layers in model order: a stack's layers, or a transformer's blocks'
  // feed-forward parts.
  const std::vector<std::unique_ptr<layers::FeedForward>>& layers() const { return layers_; }

  // A workspace for this network's calls.
  virtual std::unique_ptr<Workspace> NewWorkspace() const = 0;

  // Runs one forward call. `output` receives [sequences, out] for a stack; for a transformer
  // [sequences, length, vocab_size] (lm head), [sequences, classes] (classifier) or
  // [sequences, length, d_model] (no head). Each layer's routes and trace go to `recorder`.
  virtual void Forward(const layers::Exec& exec, Workspace& ws, const Input& input, float* output,
                       Recorder& recorder) const = 0;

  // The network's decoder, or null for a family that cannot decode (a stack). Whether a model
  // of a family that can may decode (an lm head, causal attention) is an input rule.
  virtual const Decoder* decoder() const { return nullptr; }

 protected:
  Network() = default;
  // Binds every feed-forward layer the file's config lists, with the family's tensor prefixes.
  Status BindLayers(const format::ModelFile& file);

  std::vector<std::unique_ptr<layers::FeedForward>> layers_;
};

}  // namespace sprig::network
