// The input rules: what a model accepts, each rule written once. Session applies them to every
// call, Model's public queries (output_shape, check_rows, check_tokens, check_decoding) apply
// the same functions, and the front ends (the C API, the command line, the Python module) pass
// their messages on instead of checking for themselves. Each returns InvalidArgument with one
// sentence naming what is wrong, or Ok.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "kernels/kernels.h"
#include "sprig/config.h"
#include "sprig/model.h"
#include "sprig/session.h"
#include "sprig/status.h"

namespace sprig::input_rules {

// Family: float rows (Session::forward) are for a stack, tokens (Session::forward_tokens,
// decoding) for a transformer. `path` names the model in the message.
Status RowsCall(const ModelConfig& config, const std::string& path);
Status TokensCall(const ModelConfig& config, const std::string& path);

// Every one of rows × config.input_dim values is finite. `kernels`, when not null, checks the
// whole input first with its vector kernel; the first value that is not finite is then found
// with std::isfinite.
Status FiniteRows(const ModelConfig& config, const float* rows, size_t count,
                  const kernels::KernelTable* kernels);

// Sequence length: at most max_seq tokens, and at least one for a classifier (which pools each
// sequence). Decoding's cache room is DecodingRoom.
Status Sequences(const ModelConfig& config, size_t batch, size_t length);

// Token range: every token of [batch, length] in [0, vocab_size); the message names the first
// that is not as [sequence, position].
Status TokenRange(const ModelConfig& config, const int32_t* tokens, size_t batch, size_t length);
Status TokenRange(const ModelConfig& config, const int64_t* tokens, size_t batch, size_t length);

// Decoding: a transformer (TokensCall) with an lm head and causal attention (earlier tokens of a
// bidirectional model would have to see each new one, which a cache of their keys and values
// cannot express).
Status Decoding(const ModelConfig& config, const std::string& path);
// KV cache capacity: `count` more tokens fit beside the `cached` ones within max_seq.
Status DecodingRoom(const ModelConfig& config, size_t cached, size_t count);

// Generation: a prompt of at least one token, a finite temperature >= 0, top_p in (0, 1].
Status Generation(const GenerateOptions& options, size_t prompt_tokens);

// Output shapes (see Model::output_shape): the family, the rank and, for rows, the width; for
// tokens, Sequences. Returns the output's shape.
Result<std::vector<uint64_t>> OutputShape(const ModelConfig& config, const std::string& path,
                                          InputKind kind, const std::vector<uint64_t>& shape);

// Floats forward_tokens writes for `batch` sequences of `length` tokens: one row per token, or
// one per sequence for a classifier, of output_dim each.
size_t TokensOutputSize(const ModelConfig& config, size_t batch, size_t length);

}  // namespace sprig::input_rules
