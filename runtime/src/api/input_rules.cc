#include "api/input_rules.h"
#include "base/status_macros.h"

#include <cmath>
#include <cstdio>

namespace sprig::input_rules {
namespace {

std::string Num(uint64_t v) {
  return std::to_string(v);
}

// A float as printf's %g writes it ("0.5", "1e-06").
std::string Number(float v) {
  char buf[32];
  std::snprintf(buf, sizeof(buf), "%g", static_cast<double>(v));
  return buf;
}

// "[2, 3]"
std::string ShapeText(const std::vector<uint64_t>& shape) {
  std::string s = "[";
  for (size_t i = 0; i < shape.size(); ++i) s += (i ? ", " : "") + Num(shape[i]);
  return s + "]";
}

template <typename Token>
Status CheckRange(const ModelConfig& config, const Token* tokens, size_t batch, size_t length) {
  const size_t n = batch * length;
  const int64_t vocab = config.vocab_size;
  for (size_t i = 0; i < n; ++i) {
    const int64_t t = tokens[i];
    if (t < 0 || t >= vocab) {
      return Status::InvalidArgument("token " + std::to_string(t) + " at [" + Num(i / length) +
                                     ", " + Num(i % length) + "] is outside the vocabulary [0, " +
                                     Num(config.vocab_size) + ")");
    }
  }
  return Status::Ok();
}

}  // namespace

Status RowsCall(const ModelConfig& config, const std::string& path) {
  if (config.family == Family::kStack) return Status::Ok();
  return Status::InvalidArgument(path + " is a transformer model; it takes tokens, not float rows");
}

Status TokensCall(const ModelConfig& config, const std::string& path) {
  if (config.family == Family::kTransformer) return Status::Ok();
  return Status::InvalidArgument(path + " is a stack model; it takes float rows, not tokens");
}

Status FiniteRows(const ModelConfig& config, const float* rows, size_t count,
                  const kernels::KernelTable* kernels) {
  const size_t in = config.input_dim, n = count * in;
  if (kernels != nullptr && kernels->all_finite(rows, n)) return Status::Ok();
  for (size_t i = 0; i < n; ++i) {
    if (std::isfinite(rows[i])) continue;
    return Status::InvalidArgument("input row " + Num(i / in) + ", column " + Num(i % in) +
                                   " is not a finite number");
  }
  return Status::Ok();
}

Status Sequences(const ModelConfig& config, size_t batch, size_t length) {
  if (length > config.max_seq) {
    return Status::InvalidArgument("a sequence of " + Num(length) +
                                   " tokens is longer than the model's max_seq " +
                                   Num(config.max_seq));
  }
  if (config.head.kind == HeadKind::kClassifier && length == 0 && batch > 0) {
    return Status::InvalidArgument("a classifier needs sequences of at least one token");
  }
  return Status::Ok();
}

Status TokenRange(const ModelConfig& config, const int32_t* tokens, size_t batch, size_t length) {
  return CheckRange(config, tokens, batch, length);
}

Status TokenRange(const ModelConfig& config, const int64_t* tokens, size_t batch, size_t length) {
  return CheckRange(config, tokens, batch, length);
}

Status Decoding(const ModelConfig& config, const std::string& path) {
  SPRIG_RETURN_IF_ERROR(TokensCall(config, path));
  if (config.head.kind != HeadKind::kLm) {
    return Status::InvalidArgument(path + " has a " + ToString(config.head.kind) +
                                   " head; decoding with the KV cache needs an lm head");
  }
  if (!config.causal) {
    // Earlier tokens of a bidirectional model would have to see the new one, which a cache
    // of their keys and values cannot express.
    return Status::InvalidArgument(path +
                                   " is not causal; decoding with the KV cache needs a causal "
                                   "model (use forward_tokens on whole sequences)");
  }
  return Status::Ok();
}

Status DecodingRoom(const ModelConfig& config, size_t cached, size_t count) {
  if (cached > config.max_seq || count > config.max_seq - cached) {
    return Status::InvalidArgument("the KV cache holds " + Num(cached) + " of max_seq " +
                                   Num(config.max_seq) + " tokens; " + Num(count) +
                                   " more do not fit");
  }
  return Status::Ok();
}

Status Generation(const GenerateOptions& options, size_t prompt_tokens) {
  if (!(options.temperature >= 0.0f) || !std::isfinite(options.temperature)) {
    return Status::InvalidArgument("temperature must be a finite number >= 0, got " +
                                   Number(options.temperature));
  }
  if (!(options.top_p > 0.0f && options.top_p <= 1.0f)) {
    return Status::InvalidArgument("top_p must be in (0, 1], got " + Number(options.top_p));
  }
  if (prompt_tokens == 0) {
    return Status::InvalidArgument("generate needs a prompt of at least one token");
  }
  return Status::Ok();
}

Result<std::vector<uint64_t>> OutputShape(const ModelConfig& config, const std::string& path,
                                          InputKind kind, const std::vector<uint64_t>& shape) {
  if (kind == InputKind::kRows) {
    SPRIG_RETURN_IF_ERROR(RowsCall(config, path));
    const uint64_t in = config.input_dim;
    if ((shape.size() != 1 && shape.size() != 2) || shape.back() != in) {
      return Status::InvalidArgument("the input has shape " + ShapeText(shape) +
                                     "; the model takes rows of " + Num(in) +
                                     " values, shape [N, " + Num(in) + "]");
    }
    return std::vector<uint64_t>{shape.size() == 1 ? 1 : shape[0], config.output_dim()};
  }
  SPRIG_RETURN_IF_ERROR(TokensCall(config, path));
  if (shape.size() != 1 && shape.size() != 2) {
    return Status::InvalidArgument("the input has shape " + ShapeText(shape) +
                                   "; tokens are [T] or [B, T]");
  }
  const uint64_t batch = shape.size() == 1 ? 1 : shape[0], length = shape.back();
  SPRIG_RETURN_IF_ERROR(Sequences(config, batch, length));
  if (config.head.kind == HeadKind::kClassifier) {
    return std::vector<uint64_t>{batch, config.output_dim()};
  }
  return std::vector<uint64_t>{batch, length, config.output_dim()};
}

size_t TokensOutputSize(const ModelConfig& config, size_t batch, size_t length) {
  const size_t rows = config.head.kind == HeadKind::kClassifier ? batch : batch * length;
  return rows * config.output_dim();
}

}  // namespace sprig::input_rules
