// sprig::Session: per-thread inference state over a shared Model.
//
// A Session owns its scratch memory and worker threads. It is not thread-safe: use one Session
// per thread (any number of Sessions may share one Model). A row's results are bit-identical
// whatever the thread count and however rows are split into calls.
#pragma once

#include <cstddef>
#include <cstdint>
#include <functional>
#include <memory>
#include <string>
#include <vector>

#include "sprig/export.h"
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
  // Arithmetic of the feed-forward layers (docs/storage-types.md, "Int8 activations"). "f32" (the
  // default): activations stay float32 whatever the weights' storage type. "i8": opt in, never the
  // default: a feed-forward matrix stored as i8 (packed with --dtype i8) reads its input rows
  // quantised to int8 (one scale per row) and multiplies them in exact integer arithmetic;
  // matrices of other storage types, path trees' output rows and a transformer's attention and
  // head stay float32. "i8" changes results by more than the storage rounding (verify bounds
  // it), though still not with the batch or thread count. Refused for a model that stores no
  // feed-forward weight as i8.
  std::string compute = "f32";
};

// The routing decisions of one forward call, one entry per routed layer.
struct LayerRoutes {
  size_t layer = 0;
  size_t width = 1;              // ints per row: 1 for trees, top_k for experts
  std::vector<int32_t> choices;  // [rows, width]: leaf index, or experts by descending weight
};

struct Routes {
  std::vector<LayerRoutes> layers;
};

// What one layer of a forward call read and wrote, for comparing a model with its reference
// layer by layer (sprig verify). Rows are ordered as in Routes.
struct LayerTrace {
  size_t layer = 0;
  size_t in = 0;               // values per row of `inputs`
  size_t out = 0;              // values per row of `outputs`
  std::vector<float> inputs;   // [rows, in]: the feed-forward layer's input (in a transformer
                               // block, the normalised residual stream it reads)
  std::vector<float> outputs;  // [rows, out]: the stack layer's output, or the residual stream
                               // after a transformer block
};

// How Session::generate picks each token.
struct GenerateOptions {
  // Tokens to generate at most. Default: 64.
  size_t count = 64;
  // Softmax temperature; 0 picks the most probable token (ties to the lower index).
  // Must be finite and >= 0. Default: 1.
  float temperature = 1.0f;
  // Nucleus sampling: draw only from the smallest set of most probable tokens whose
  // probabilities sum to at least top_p, renormalised. Must be in (0, 1]. Default: 1 (all).
  float top_p = 1.0f;
  // Seed of the sampler's generator: the same seed, model and prompt give the same tokens, for
  // any thread count. Default: 1.
  uint64_t seed = 1;
};

// The records (leaves, experts or path-tree chunks) of one routed layer that a session has read.
struct LayerTouch {
  size_t layer = 0;
  uint64_t records = 0;      // records the layer has
  uint64_t touched = 0;      // distinct records read at least once
  uint64_t record_size = 0;  // bytes of one record in the file
};

// What a session has done since it was created or since reset_stats(). Plain counters, read
// with Session::stats(); times are wall-clock seconds inside the calls.
struct SessionStats {
  uint64_t forward_calls = 0;     // forward() and forward_tokens() calls that succeeded
  uint64_t rows = 0;              // stack rows run by forward()
  uint64_t sequence_tokens = 0;   // tokens run by forward_tokens()
  uint64_t prefill_tokens = 0;    // tokens added to the KV cache by multi-token appends
  uint64_t decode_tokens = 0;     // tokens added to the KV cache one at a time
  uint64_t generated_tokens = 0;  // tokens handed to generate()'s callback
  double forward_seconds = 0;     // in forward() and forward_tokens()
  double prefill_seconds = 0;     // in multi-token appends
  double decode_seconds = 0;      // in single-token appends
  // One entry per layer with records, in layer order: how many distinct records the calls
  // read. The same whatever the thread count or however rows were split into calls.
  std::vector<LayerTouch> touched;
};

class SPRIG_API Session {
 public:
  static Result<std::unique_ptr<Session>> create(std::shared_ptr<const Model> model,
                                                 const SessionOptions& options = {});
  ~Session();
  Session(const Session&) = delete;
  Session& operator=(const Session&) = delete;

  // Stack models: `input` holds rows × input_dim floats, `output` receives rows × output_dim.
  // When `routes` is not null it receives every routed layer's decisions for these rows; when
  // `trace` is not null it receives every layer's inputs and outputs (one entry per layer).
  // Returns InvalidArgument for a transformer model or a non-finite input value (the input
  // rules; see Model::check_rows).
  Status forward(const float* input, size_t rows, float* output, Routes* routes = nullptr,
                 std::vector<LayerTrace>* trace = nullptr);

  // Transformer models: runs `batch` sequences of `length` tokens each (row-major
  // [batch, length]), every sequence independently from position 0; the KV cache is neither
  // used nor changed. `output` receives [batch, length, vocab_size] logits (lm head),
  // [batch, classes] (classifier) or [batch, length, d_model] hidden states (no head). When
  // `routes` is not null it receives each routed block's choices for the batch·length tokens in
  // batch-major order; `trace`, when not null, receives each block's feed-forward input and
  // output residual stream in the same order. InvalidArgument for a stack model,
  // length > max_seq, length 0 for a classifier or a token outside [0, vocab_size) (the input
  // rules; see Model::check_tokens).
  Status forward_tokens(const int32_t* tokens, size_t batch, size_t length, float* output,
                        Routes* routes = nullptr, std::vector<LayerTrace>* trace = nullptr);

  // Causal transformer models with an lm head: runs `token` at the KV cache's next position
  // (position()), keeps its keys and values, and writes the vocab_size logits of the next token
  // to `logits` (may be null). InvalidArgument when the cache already holds max_seq tokens, the
  // token is out of range, or the model is not a causal lm (see Model::check_decoding).
  Status append_token(int32_t token, float* logits);
  // As append_token for `count` tokens at once (one batched pass); `logits` receives the logits
  // after the last of them.
  Status append_tokens(const int32_t* tokens, size_t count, float* logits);
  // Empties the KV cache; the next token goes to position 0.
  void reset();

  // Counters of the work done so far (see SessionStats); reset_stats() zeroes them.
  const SessionStats& stats() const;
  void reset_stats();
  // Tokens held in the KV cache.
  size_t position() const;

  // Resets the cache, runs `prompt` (at least one token) through it and then samples up to
  // options.count tokens, calling on_token with each as soon as it is chosen; generation stops
  // early when on_token returns false, or once the cache holds max_seq tokens (the last token
  // chosen is still reported; position() == max_seq tells the caller). Returns Ok in all these
  // cases; InvalidArgument for a bad prompt or options, or a model that cannot generate.
  Status generate(const std::vector<int32_t>& prompt, const GenerateOptions& options,
                  const std::function<bool(int32_t token)>& on_token);

  // generate() from text, with the model's tokenizer: encodes `prompt` (which must give at
  // least one token), generates as generate() does, and passes each token with the text it
  // completes (a sprig::TextDecoder's, continuing the prompt, so a word's leading space is
  // kept; it may be empty while a UTF-8 character is incomplete) to on_text; any text still
  // held at the end comes in a last call with token -1. InvalidArgument also for a model
  // without a tokenizer.
  Status generate_text(const std::string& prompt, const GenerateOptions& options,
                       const std::function<bool(const std::string& text, int32_t token)>& on_text);

  const Model& model() const { return *model_; }
  // The kernel instruction set this session runs ("avx2", ...).
  const char* kernel_path() const;
  // The compute mode of SessionOptions::compute: "f32" or "i8".
  const char* compute() const;
  size_t threads() const;

 private:
  struct State;
  Session(std::shared_ptr<const Model> model, std::unique_ptr<State> state);
  std::shared_ptr<const Model> model_;
  std::unique_ptr<State> state_;
};

}  // namespace sprig
