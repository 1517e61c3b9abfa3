// The C interface (sprig/sprig.h) over sprig::Model and sprig::Session.
//
// Every entry point runs its body through Guard(), which turns a non-OK Status into its code
// and message and any C++ exception into SPRIG_INTERNAL, so nothing but an int crosses into C.
#include "sprig/sprig.h"

#include <algorithm>
#include <cstdlib>
#include <cstring>
#include <exception>
#include <memory>
#include <new>
#include <string>
#include <vector>

#include "api/input_rules.h"
#include "sprig/memory.h"
#include "sprig/model.h"
#include "sprig/session.h"
#include "sprig/text.h"

// The handles are the C++ objects behind a plain struct, so C sees only a pointer type.
struct sprig_model_t {
  std::shared_ptr<const sprig::Model> model;
};

struct sprig_session_t {
  std::unique_ptr<sprig::Session> session;
};

struct sprig_text_decoder_t {
  std::unique_ptr<sprig::TextDecoder> decoder;
};

namespace sprig {
namespace {

// The C codes are Status::Code's values; a reordering there must not change the C ABI silently.
static_assert(SPRIG_OK == static_cast<int>(Status::Code::kOk));
static_assert(SPRIG_INVALID_ARGUMENT == static_cast<int>(Status::Code::kInvalidArgument));
static_assert(SPRIG_NOT_FOUND == static_cast<int>(Status::Code::kNotFound));
static_assert(SPRIG_CORRUPTION == static_cast<int>(Status::Code::kCorruption));
static_assert(SPRIG_IO_ERROR == static_cast<int>(Status::Code::kIOError));
static_assert(SPRIG_NOT_SUPPORTED == static_cast<int>(Status::Code::kNotSupported));
static_assert(SPRIG_CHECK_FAILED == static_cast<int>(Status::Code::kCheckFailed));

// Kept in step with project(VERSION) in the top-level CMakeLists.txt (a test compares them).
constexpr const char* kVersion = SPRIG_VERSION;

// Replaces *errptr (when there is one) with a malloc'd copy of `message`. If that allocation
// fails the caller still gets the code; *errptr is then NULL.
void SetError(char** errptr, const char* message) {
  if (errptr == nullptr) return;
  std::free(*errptr);
  const size_t n = std::strlen(message) + 1;
  *errptr = static_cast<char*>(std::malloc(n));
  if (*errptr != nullptr) std::memcpy(*errptr, message, n);
}

int Report(const Status& status, char** errptr) {
  if (status.ok()) return SPRIG_OK;
  SetError(errptr, status.message().c_str());
  return static_cast<int>(status.code());
}

// Runs `body` (returning a Status) and reports its outcome in C terms.
template <typename Body>
int Guard(char** errptr, Body&& body) noexcept {
  try {
    return Report(body(), errptr);
  } catch (const std::bad_alloc&) {
    SetError(errptr, "sprig ran out of memory");
  } catch (const std::exception& e) {
    // Building the message allocates too; if that fails the code must still get out.
    try {
      SetError(errptr, (std::string("internal error in sprig: ") + e.what()).c_str());
    } catch (...) {
      SetError(errptr, "internal error in sprig");
    }
  } catch (...) {
    SetError(errptr, "internal error in sprig: an unknown exception");
  }
  return SPRIG_INTERNAL;
}

// The error for a NULL argument `what` given to `function`.
Status Null(const char* function, const char* what) {
  return Status::InvalidArgument(std::string(function) + " was given a NULL " + what);
}

// A NULL data pointer is only acceptable when the array it stands for is empty.
bool MissingArray(const void* data, size_t count) {
  return data == nullptr && count > 0;
}

// Hands `bytes` to C as a malloc'ed copy with a NUL after them (the caller frees it with
// sprig_free). Returns false when the allocation fails.
bool CopyOut(const std::string& bytes, char** text, size_t* length) {
  char* copy = static_cast<char*>(std::malloc(bytes.size() + 1));
  if (copy == nullptr) return false;
  std::memcpy(copy, bytes.data(), bytes.size());
  copy[bytes.size()] = '\0';
  *text = copy;
  if (length != nullptr) *length = bytes.size();
  return true;
}

// The C options as the C++ ones; NULL means the defaults.
GenerateOptions GenerateOptionsFrom(const sprig_generate_options_t* options) {
  GenerateOptions o;
  if (options != nullptr) {
    o.count = options->count;
    o.temperature = options->temperature;
    o.top_p = options->top_p;
    o.seed = options->seed;
  }
  return o;
}

}  // namespace
}  // namespace sprig

using sprig::Guard;
using sprig::Null;
using sprig::Status;

extern "C" {

const char* sprig_status_name(int code) {
  switch (code) {
    case SPRIG_OK:
      return "ok";
    case SPRIG_INVALID_ARGUMENT:
      return "invalid argument";
    case SPRIG_NOT_FOUND:
      return "not found";
    case SPRIG_CORRUPTION:
      return "corruption";
    case SPRIG_IO_ERROR:
      return "I/O error";
    case SPRIG_NOT_SUPPORTED:
      return "not supported";
    case SPRIG_CHECK_FAILED:
      return "check failed";
    case SPRIG_INTERNAL:
      return "internal error";
    default:
      return "unknown";
  }
}

void sprig_free(void* ptr) {
  std::free(ptr);
}

const char* sprig_version(void) {
  return sprig::kVersion;
}

// ---- models ----

int sprig_model_open(const char* path, sprig_model_t** model, char** errptr) {
  if (model != nullptr) *model = nullptr;
  return Guard(errptr, [&]() -> Status {
    if (model == nullptr) return Null("sprig_model_open", "model out-parameter");
    if (path == nullptr) return Null("sprig_model_open", "path");
    auto opened = sprig::Model::open(path);
    if (!opened.ok()) return opened.status();
    *model = new sprig_model_t{std::move(*opened)};
    return Status::Ok();
  });
}

void sprig_model_close(sprig_model_t* model) {
  delete model;
}

int sprig_model_family(const sprig_model_t* model) {
  if (model == nullptr) return 0;
  return model->model->config().family == sprig::Family::kStack ? SPRIG_FAMILY_STACK
                                                                : SPRIG_FAMILY_TRANSFORMER;
}

size_t sprig_model_layer_count(const sprig_model_t* model) {
  return model == nullptr ? 0 : model->model->config().layers.size();
}

size_t sprig_model_input_dim(const sprig_model_t* model) {
  if (model == nullptr) return 0;
  const sprig::ModelConfig& c = model->model->config();
  return c.family == sprig::Family::kStack ? c.input_dim : 0;
}

size_t sprig_model_vocab_size(const sprig_model_t* model) {
  if (model == nullptr) return 0;
  const sprig::ModelConfig& c = model->model->config();
  return c.family == sprig::Family::kTransformer ? c.vocab_size : 0;
}

size_t sprig_model_max_seq(const sprig_model_t* model) {
  if (model == nullptr) return 0;
  const sprig::ModelConfig& c = model->model->config();
  return c.family == sprig::Family::kTransformer ? c.max_seq : 0;
}

size_t sprig_model_output_dim(const sprig_model_t* model) {
  return model == nullptr ? 0 : model->model->config().output_dim();
}

size_t sprig_model_tokens_output_size(const sprig_model_t* model, size_t batch, size_t length) {
  if (model == nullptr) return 0;
  const sprig::ModelConfig& c = model->model->config();
  return c.family == sprig::Family::kTransformer
             ? sprig::input_rules::TokensOutputSize(c, batch, length)
             : 0;
}

int sprig_model_output_shape(const sprig_model_t* model, int input_kind,
                             const uint64_t* input_shape, size_t input_rank, uint64_t* output_shape,
                             size_t* output_rank, char** errptr) {
  return Guard(errptr, [&]() -> Status {
    const char* f = "sprig_model_output_shape";
    if (model == nullptr) return Null(f, "model");
    if (sprig::MissingArray(input_shape, input_rank)) return Null(f, "input_shape");
    if (output_shape == nullptr) return Null(f, "output_shape");
    if (output_rank == nullptr) return Null(f, "output_rank");
    if (input_kind != SPRIG_INPUT_ROWS && input_kind != SPRIG_INPUT_TOKENS) {
      return Status::InvalidArgument(std::string(f) + " was given input kind " +
                                     std::to_string(input_kind) +
                                     ", expected SPRIG_INPUT_ROWS or SPRIG_INPUT_TOKENS");
    }
    const sprig::InputKind kind =
        input_kind == SPRIG_INPUT_ROWS ? sprig::InputKind::kRows : sprig::InputKind::kTokens;
    auto shape = model->model->output_shape(
        kind, std::vector<uint64_t>(input_shape, input_shape + input_rank));
    if (!shape.ok()) return shape.status();
    std::copy(shape->begin(), shape->end(), output_shape);
    *output_rank = shape->size();
    return Status::Ok();
  });
}

int sprig_model_check_tokens(const sprig_model_t* model, const int64_t* tokens, size_t batch,
                             size_t length, char** errptr) {
  return Guard(errptr, [&]() -> Status {
    const char* f = "sprig_model_check_tokens";
    if (model == nullptr) return Null(f, "model");
    if (sprig::MissingArray(tokens, batch * length)) return Null(f, "tokens");
    return model->model->check_tokens(tokens, batch, length);
  });
}

int sprig_model_verify_checksums(const sprig_model_t* model, char** errptr) {
  return Guard(errptr, [&]() -> Status {
    if (model == nullptr) return Null("sprig_model_verify_checksums", "model");
    return model->model->verify_checksums();
  });
}

// ---- sessions ----

int sprig_session_create(const sprig_model_t* model, size_t threads, sprig_session_t** session,
                         char** errptr) {
  if (session != nullptr) *session = nullptr;
  return Guard(errptr, [&]() -> Status {
    if (session == nullptr) return Null("sprig_session_create", "session out-parameter");
    if (model == nullptr) return Null("sprig_session_create", "model");
    sprig::SessionOptions options;
    options.threads = threads;
    // The session holds its own reference, so the model handle may be closed before it.
    auto created = sprig::Session::create(model->model, options);
    if (!created.ok()) return created.status();
    *session = new sprig_session_t{std::move(*created)};
    return Status::Ok();
  });
}

void sprig_session_destroy(sprig_session_t* session) {
  delete session;
}

size_t sprig_session_threads(const sprig_session_t* session) {
  return session == nullptr ? 0 : session->session->threads();
}

const char* sprig_session_kernel_path(const sprig_session_t* session) {
  return session == nullptr ? nullptr : session->session->kernel_path();
}

int sprig_session_forward(sprig_session_t* session, const float* input, size_t rows, float* output,
                          char** errptr) {
  return Guard(errptr, [&]() -> Status {
    const char* f = "sprig_session_forward";
    if (session == nullptr) return Null(f, "session");
    // The row widths are known only for a stack; Session::forward refuses a transformer.
    const sprig::ModelConfig& c = session->session->model().config();
    if (c.family == sprig::Family::kStack) {
      if (sprig::MissingArray(input, rows * c.input_dim)) return Null(f, "input");
      if (sprig::MissingArray(output, rows * c.output_dim())) return Null(f, "output");
    }
    return session->session->forward(input, rows, output);
  });
}

int sprig_session_forward_tokens(sprig_session_t* session, const int32_t* tokens, size_t batch,
                                 size_t length, float* output, char** errptr) {
  return Guard(errptr, [&]() -> Status {
    const char* f = "sprig_session_forward_tokens";
    if (session == nullptr) return Null(f, "session");
    const sprig::ModelConfig& c = session->session->model().config();
    if (c.family == sprig::Family::kTransformer) {
      if (sprig::MissingArray(tokens, batch * length)) return Null(f, "tokens");
      const size_t n = sprig::input_rules::TokensOutputSize(c, batch, length);
      if (sprig::MissingArray(output, n)) return Null(f, "output");
    }
    return session->session->forward_tokens(tokens, batch, length, output);
  });
}

int sprig_session_append_token(sprig_session_t* session, int32_t token, float* logits,
                               char** errptr) {
  return Guard(errptr, [&]() -> Status {
    if (session == nullptr) return Null("sprig_session_append_token", "session");
    return session->session->append_token(token, logits);
  });
}

int sprig_session_append_tokens(sprig_session_t* session, const int32_t* tokens, size_t count,
                                float* logits, char** errptr) {
  return Guard(errptr, [&]() -> Status {
    const char* f = "sprig_session_append_tokens";
    if (session == nullptr) return Null(f, "session");
    if (sprig::MissingArray(tokens, count)) return Null(f, "tokens");
    return session->session->append_tokens(tokens, count, logits);
  });
}

void sprig_session_reset(sprig_session_t* session) {
  if (session != nullptr) session->session->reset();
}

size_t sprig_session_position(const sprig_session_t* session) {
  return session == nullptr ? 0 : session->session->position();
}

void sprig_generate_options_default(sprig_generate_options_t* options) {
  if (options == nullptr) return;
  // The C++ defaults are the single source of truth.
  const sprig::GenerateOptions d;
  options->count = d.count;
  options->temperature = d.temperature;
  options->top_p = d.top_p;
  options->seed = d.seed;
}

int sprig_session_generate(sprig_session_t* session, const int32_t* prompt, size_t prompt_len,
                           const sprig_generate_options_t* options, sprig_token_callback callback,
                           void* user, char** errptr) {
  return Guard(errptr, [&]() -> Status {
    const char* f = "sprig_session_generate";
    if (session == nullptr) return Null(f, "session");
    if (callback == nullptr) return Null(f, "callback");
    if (sprig::MissingArray(prompt, prompt_len)) return Null(f, "prompt");
    const sprig::GenerateOptions o = sprig::GenerateOptionsFrom(options);
    const std::vector<int32_t> tokens(prompt, prompt + prompt_len);
    return session->session->generate(tokens, o,
                                      [&](int32_t token) { return callback(token, user) != 0; });
  });
}

int sprig_model_encode(const sprig_model_t* model, const char* text, size_t length,
                       int32_t** tokens, size_t* count, char** errptr) {
  return Guard(errptr, [&]() -> Status {
    const char* f = "sprig_model_encode";
    if (model == nullptr) return Null(f, "model");
    if (tokens == nullptr) return Null(f, "tokens");
    if (count == nullptr) return Null(f, "count");
    if (sprig::MissingArray(text, length)) return Null(f, "text");
    auto ids = model->model->encode(std::string(text == nullptr ? "" : text, length));
    if (!ids.ok()) return ids.status();
    *tokens = nullptr;
    *count = ids->size();
    if (ids->empty()) return Status::Ok();
    *tokens = static_cast<int32_t*>(std::malloc(ids->size() * sizeof(int32_t)));
    if (*tokens == nullptr) throw std::bad_alloc();
    std::copy(ids->begin(), ids->end(), *tokens);
    return Status::Ok();
  });
}

int sprig_model_decode(const sprig_model_t* model, const int32_t* tokens, size_t count, char** text,
                       size_t* length, char** errptr) {
  return Guard(errptr, [&]() -> Status {
    const char* f = "sprig_model_decode";
    if (model == nullptr) return Null(f, "model");
    if (text == nullptr) return Null(f, "text");
    if (sprig::MissingArray(tokens, count)) return Null(f, "tokens");
    const std::vector<int32_t> ids(tokens, tokens + count);
    auto decoded = model->model->decode(ids);
    if (!decoded.ok()) return decoded.status();
    if (!sprig::CopyOut(*decoded, text, length)) throw std::bad_alloc();
    return Status::Ok();
  });
}

int sprig_text_decoder_create(const sprig_model_t* model, sprig_text_decoder_t** decoder,
                              char** errptr) {
  return Guard(errptr, [&]() -> Status {
    const char* f = "sprig_text_decoder_create";
    if (decoder == nullptr) return Null(f, "decoder");
    *decoder = nullptr;
    if (model == nullptr) return Null(f, "model");
    auto created = sprig::TextDecoder::create(model->model);
    if (!created.ok()) return created.status();
    *decoder = new sprig_text_decoder_t{std::move(*created)};
    return Status::Ok();
  });
}

void sprig_text_decoder_destroy(sprig_text_decoder_t* decoder) {
  delete decoder;
}

int sprig_text_decoder_push(sprig_text_decoder_t* decoder, int32_t token, char** text,
                            size_t* length, char** errptr) {
  return Guard(errptr, [&]() -> Status {
    const char* f = "sprig_text_decoder_push";
    if (decoder == nullptr) return Null(f, "decoder");
    if (text == nullptr) return Null(f, "text");
    auto piece = decoder->decoder->push(token);
    if (!piece.ok()) return piece.status();
    if (!sprig::CopyOut(*piece, text, length)) throw std::bad_alloc();
    return Status::Ok();
  });
}

int sprig_text_decoder_finish(sprig_text_decoder_t* decoder, char** text, size_t* length,
                              char** errptr) {
  return Guard(errptr, [&]() -> Status {
    const char* f = "sprig_text_decoder_finish";
    if (decoder == nullptr) return Null(f, "decoder");
    if (text == nullptr) return Null(f, "text");
    if (!sprig::CopyOut(decoder->decoder->finish(), text, length)) throw std::bad_alloc();
    return Status::Ok();
  });
}

int sprig_session_generate_text(sprig_session_t* session, const char* prompt, size_t prompt_length,
                                const sprig_generate_options_t* options,
                                sprig_text_callback callback, void* user, char** errptr) {
  return Guard(errptr, [&]() -> Status {
    const char* f = "sprig_session_generate_text";
    if (session == nullptr) return Null(f, "session");
    if (callback == nullptr) return Null(f, "callback");
    if (sprig::MissingArray(prompt, prompt_length)) return Null(f, "prompt");
    const sprig::GenerateOptions o = sprig::GenerateOptionsFrom(options);
    return session->session->generate_text(
        std::string(prompt == nullptr ? "" : prompt, prompt_length), o,
        [&](const std::string& text, int32_t token) {
          return callback(text.c_str(), text.size(), token, user) != 0;
        });
  });
}

void sprig_session_stats(const sprig_session_t* session, sprig_session_stats_t* stats) {
  if (session == nullptr || stats == nullptr) return;
  const sprig::SessionStats& s = session->session->stats();
  stats->forward_calls = s.forward_calls;
  stats->rows = s.rows;
  stats->sequence_tokens = s.sequence_tokens;
  stats->prefill_tokens = s.prefill_tokens;
  stats->decode_tokens = s.decode_tokens;
  stats->generated_tokens = s.generated_tokens;
  stats->forward_seconds = s.forward_seconds;
  stats->prefill_seconds = s.prefill_seconds;
  stats->decode_seconds = s.decode_seconds;
  stats->routed_layers = s.touched.size();
}

void sprig_session_reset_stats(sprig_session_t* session) {
  if (session != nullptr) session->session->reset_stats();
}

int sprig_session_touched(const sprig_session_t* session, size_t index, size_t* layer,
                          uint64_t* touched, uint64_t* records, uint64_t* record_size,
                          char** errptr) {
  return Guard(errptr, [&]() -> Status {
    if (session == nullptr) return Null("sprig_session_touched", "session");
    const auto& all = session->session->stats().touched;
    if (index >= all.size()) {
      return Status::InvalidArgument("sprig_session_touched: index " + std::to_string(index) +
                                     " is not below the " + std::to_string(all.size()) +
                                     " layers with records");
    }
    const sprig::LayerTouch& t = all[index];
    if (layer) *layer = t.layer;
    if (touched) *touched = t.touched;
    if (records) *records = t.records;
    if (record_size) *record_size = t.record_size;
    return Status::Ok();
  });
}

void sprig_model_residency(const sprig_model_t* model, sprig_residency_t* residency) {
  if (model == nullptr || residency == nullptr) return;
  try {
    const sprig::Residency r = model->model->residency();
    *residency = {r.hot_size, r.hot_resident, r.records_size, r.records_resident};
  } catch (...) {
    *residency = {};  // no exception may cross into C; zeros say "unknown"
  }
}

void sprig_process_memory(sprig_process_memory_t* memory) {
  if (memory == nullptr) return;
  try {
    const sprig::ProcessMemory m = sprig::ReadProcessMemory();
    *memory = {m.rss, m.peak_rss, m.rss_file, m.rss_anon, m.minor_faults, m.major_faults};
  } catch (...) {
    *memory = {};
  }
}

}  // extern "C"
