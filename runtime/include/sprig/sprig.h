/* sprig.h: the C interface to sprig, for programs in C and in languages that call C.
 *
 * It is a thin layer over the C++ API (sprig/model.h, sprig/session.h) and gives the same
 * results bit for bit. The header is plain C (C99 or later) and C++.
 *
 * Handles. sprig_model_t is an opened .sprig file; sprig_session_t is the per-thread state that
 * runs it. Both are opaque; create them with sprig_model_open / sprig_session_create and release
 * them with sprig_model_close / sprig_session_destroy (either accepts NULL). A session keeps its
 * model alive: the model handle may be closed while sessions made from it are still in use.
 *
 * Thread-safety. A model is immutable: any number of threads may call the sprig_model_*
 * functions and create sessions from one model at the same time, without locking (closing it
 * must not race with other calls on the same handle). A session is not thread-safe: call a
 * session's functions from one thread at a time; use one session per thread.
 *
 * Errors. Every call that can fail returns an int status: SPRIG_OK (0) or one of the SPRIG_*
 * codes below. It also takes `char** errptr`, which may be NULL. On failure, when errptr is not
 * NULL, *errptr receives a NUL-terminated message for a person (one sentence naming the file,
 * argument or value at fault), allocated with malloc; free it with sprig_free. Any message
 * *errptr already held is freed first, so one variable can serve many calls; it must therefore
 * start out NULL. On success *errptr is left as it was. A NULL handle or a NULL array that must
 * hold data is SPRIG_INVALID_ARGUMENT, never a crash. No C++ exception leaves these functions;
 * an unexpected one (such as running out of memory) becomes SPRIG_INTERNAL.
 *
 * Arrays. The caller owns every array it passes; sprig reads inputs and writes outputs during
 * the call and keeps no pointer to them afterwards. Output arrays must have room for the counts
 * each function names.
 */
#ifndef SPRIG_SPRIG_H_
#define SPRIG_SPRIG_H_

#include <stddef.h>
#include <stdint.h>

#include "sprig/export.h"

#ifdef __cplusplus
extern "C" {
#endif

/* ---- status codes (the same kinds as sprig::Status::Code, in the same order) ---- */

#define SPRIG_OK 0
#define SPRIG_INVALID_ARGUMENT 1 /* the caller's input is malformed or inconsistent */
#define SPRIG_NOT_FOUND 2        /* a file, tensor or field that must exist does not */
#define SPRIG_CORRUPTION 3       /* a file's bytes do not match what its format promises */
#define SPRIG_IO_ERROR 4         /* the operating system refused a read or a map */
#define SPRIG_NOT_SUPPORTED 5    /* well-formed, but asks for something this build cannot do */
#define SPRIG_CHECK_FAILED 6     /* a verification ran and found a mismatch */
#define SPRIG_INTERNAL 7         /* an unexpected failure inside sprig, such as no memory */

/* A short constant name for a status code ("invalid argument", ...); "unknown" for others.
 * The string is static: do not free it. */
SPRIG_API const char* sprig_status_name(int code);

/* Frees a string sprig allocated (an error message). NULL is allowed. */
SPRIG_API void sprig_free(void* ptr);

/* The library's version, "MAJOR.MINOR.PATCH". The string is static: do not free it. */
SPRIG_API const char* sprig_version(void);

/* ---- models ---- */

typedef struct sprig_model_t sprig_model_t;

#define SPRIG_FAMILY_STACK 1       /* float rows in, float rows out (sprig_session_forward) */
#define SPRIG_FAMILY_TRANSFORMER 2 /* tokens in (sprig_session_forward_tokens, ..._generate) */

/* Opens the .sprig file at `path`: maps it read-only and checks its header; no weight is read
 * until inference touches it. On success *model receives a new handle. On failure *model is
 * set to NULL and the code says why: SPRIG_NOT_FOUND for a missing file, SPRIG_CORRUPTION for
 * damaged bytes, and so on, with a message naming the file. */
SPRIG_API int sprig_model_open(const char* path, sprig_model_t** model, char** errptr);

/* Releases the handle. Sessions created from it stay valid. NULL is allowed. */
SPRIG_API void sprig_model_close(sprig_model_t* model);

/* What the model's config says. Each returns 0 for a NULL model. */
SPRIG_API int sprig_model_family(
    const sprig_model_t* model); /* SPRIG_FAMILY_STACK or _TRANSFORMER */
SPRIG_API size_t
sprig_model_layer_count(const sprig_model_t* model);                /* feed-forward layers/blocks */
SPRIG_API size_t sprig_model_input_dim(const sprig_model_t* model); /* stack: floats per row */
SPRIG_API size_t
sprig_model_vocab_size(const sprig_model_t* model); /* transformer: tokens 0..n-1 */
SPRIG_API size_t
sprig_model_max_seq(const sprig_model_t* model); /* transformer: longest sequence */
/* Floats per output row (stack), or per token or sequence (transformer: vocab_size logits for
 * an lm head, one score per class for a classifier, d_model for no head). */
SPRIG_API size_t sprig_model_output_dim(const sprig_model_t* model);
/* Floats sprig_session_forward_tokens writes for `batch` sequences of `length` tokens:
 * batch × length × output_dim, or batch × output_dim for a classifier (one row per sequence).
 * 0 for a stack model or a NULL model. */
SPRIG_API size_t sprig_model_tokens_output_size(const sprig_model_t* model, size_t batch,
                                                size_t length);

/* ---- input rules ----
 *
 * The session calls below apply the model's input rules and report a broken one as
 * SPRIG_INVALID_ARGUMENT with a message naming it. These two apply the same rules, with the same
 * messages, before a call: to size its output, or to check tokens held in another form. */

#define SPRIG_INPUT_ROWS 1   /* float rows for sprig_session_forward */
#define SPRIG_INPUT_TOKENS 2 /* token sequences for sprig_session_forward_tokens */

/* The shape of the output for an input of shape input_shape[0 .. input_rank) given to the call
 * `input_kind` names: rows [N, input_dim] or [input_dim] (one row) give [N, output_dim]; tokens
 * [B, T] or [T] (one sequence) give [B, T, vocab_size] (lm head), [B, classes] (classifier) or
 * [B, T, d_model] (no head). `output_shape` must have room for 3 values; *output_rank receives
 * 2 or 3. SPRIG_INVALID_ARGUMENT, and nothing written, when the input does not fit: rows for a
 * transformer or tokens for a stack, another rank, rows of another width, T > max_seq, or T = 0
 * for a classifier. */
SPRIG_API int sprig_model_output_shape(const sprig_model_t* model, int input_kind,
                                       const uint64_t* input_shape, size_t input_rank,
                                       uint64_t* output_shape, size_t* output_rank, char** errptr);

/* The rules sprig_session_forward_tokens applies to `batch` sequences of `length` tokens
 * (row-major), for tokens held as int64 (as NumPy and many tokenizers hold them) before the
 * caller narrows them to int32: a transformer model, length <= max_seq, length >= 1 for a
 * classifier, and every token in [0, vocab_size) (the message names the first that is not as
 * [sequence, position]). SPRIG_OK or SPRIG_INVALID_ARGUMENT. */
SPRIG_API int sprig_model_check_tokens(const sprig_model_t* model, const int64_t* tokens,
                                       size_t batch, size_t length, char** errptr);

/* Reads every weight and compares it with its stored checksum: SPRIG_OK, or SPRIG_CHECK_FAILED
 * with a message naming the damaged tensors. May take a while on large files. */
SPRIG_API int sprig_model_verify_checksums(const sprig_model_t* model, char** errptr);

/* ---- sessions ---- */

typedef struct sprig_session_t sprig_session_t;

/* Creates a session over `model` using up to `threads` threads per call, the calling thread
 * included (0 means one per CPU; at most 256). The kernel instruction set is the fastest the
 * CPU supports, or the one the SPRIG_KERNEL_PATH environment variable names. On failure
 * *session is set to NULL. */
SPRIG_API int sprig_session_create(const sprig_model_t* model, size_t threads,
                                   sprig_session_t** session, char** errptr);

/* Releases the session (and its reference to the model). NULL is allowed. */
SPRIG_API void sprig_session_destroy(sprig_session_t* session);

/* Threads the session uses, and the kernel instruction set it runs ("avx2", ...; a static
 * string). 0 and NULL for a NULL session. */
SPRIG_API size_t sprig_session_threads(const sprig_session_t* session);
SPRIG_API const char* sprig_session_kernel_path(const sprig_session_t* session);

/* Stack models: `input` holds rows × input_dim floats (row-major); `output` receives
 * rows × output_dim. A row's result does not depend on the thread count or on how rows are
 * split into calls. SPRIG_INVALID_ARGUMENT for a transformer model or a non-finite input (the
 * message names its row and column). */
SPRIG_API int sprig_session_forward(sprig_session_t* session, const float* input, size_t rows,
                                    float* output, char** errptr);

/* Transformer models: runs `batch` sequences of `length` tokens (row-major [batch, length]),
 * each independently from position 0; the KV cache is neither used nor changed. `output`
 * receives sprig_model_tokens_output_size(model, batch, length) floats. SPRIG_INVALID_ARGUMENT
 * for a stack model, length > max_seq, length 0 for a classifier or a token outside
 * [0, vocab_size). */
SPRIG_API int sprig_session_forward_tokens(sprig_session_t* session, const int32_t* tokens,
                                           size_t batch, size_t length, float* output,
                                           char** errptr);

/* Causal transformer models with an lm head: runs `token` at the KV cache's next position
 * (sprig_session_position), keeps its keys and values, and writes the vocab_size logits of the
 * next token to `logits` (which may be NULL). SPRIG_INVALID_ARGUMENT when the cache is full
 * (max_seq tokens), the token is out of range or the model is not a causal lm. */
SPRIG_API int sprig_session_append_token(sprig_session_t* session, int32_t token, float* logits,
                                         char** errptr);
/* As sprig_session_append_token for `count` tokens in one batched pass; `logits` (may be NULL)
 * receives the logits after the last of them. */
SPRIG_API int sprig_session_append_tokens(sprig_session_t* session, const int32_t* tokens,
                                          size_t count, float* logits, char** errptr);

/* Empties the KV cache: the next token goes to position 0. NULL is allowed. */
SPRIG_API void sprig_session_reset(sprig_session_t* session);
/* Tokens held in the KV cache; 0 for a NULL session. */
SPRIG_API size_t sprig_session_position(const sprig_session_t* session);

/* How sprig_session_generate picks each token. Fill it with sprig_generate_options_default
 * and change the fields you need. */
typedef struct sprig_generate_options_t {
  size_t count;      /* tokens to generate at most; default 64 */
  float temperature; /* softmax temperature, finite and >= 0; 0 is greedy; default 1 */
  float top_p;       /* nucleus sampling mass, in (0, 1]; default 1 (all tokens) */
  uint64_t seed;     /* the same seed, model and prompt give the same tokens; default 1 */
} sprig_generate_options_t;

/* Sets every field to its default. NULL is allowed (does nothing). */
SPRIG_API void sprig_generate_options_default(sprig_generate_options_t* options);

/* Called with each generated token as soon as it is chosen; return nonzero to continue and 0 to
 * stop. `user` is the pointer given to sprig_session_generate. It must return normally (no
 * longjmp or exception out of it) and must not call functions of the same session. */
typedef int (*sprig_token_callback)(int32_t token, void* user);

/* Resets the KV cache, runs `prompt` (prompt_len >= 1 tokens) through it, then samples up to
 * options->count tokens (options NULL: the defaults), passing each to `callback`. Generation
 * stops early when the callback returns 0 or once the cache holds max_seq tokens (the last
 * token chosen is still passed; sprig_session_position then equals max_seq). Returns SPRIG_OK
 * in all these cases; SPRIG_INVALID_ARGUMENT for an empty prompt, bad options, a NULL
 * callback, or a model that cannot generate. */
SPRIG_API int sprig_session_generate(sprig_session_t* session, const int32_t* prompt,
                                     size_t prompt_len, const sprig_generate_options_t* options,
                                     sprig_token_callback callback, void* user, char** errptr);

/* ---- text (transformers with a tokenizer: "byte" or "sentencepiece") ---- */

/* UTF-8 text (`length` bytes; it need not end in NUL) → token ids with the model's tokenizer, no
 * begin or end token added (sprig::Model::encode). On success *tokens receives a malloc'ed
 * array of *count ids (NULL when *count is 0); free it with sprig_free. SPRIG_INVALID_ARGUMENT
 * for a model without a tokenizer. */
SPRIG_API int sprig_model_encode(const sprig_model_t* model, const char* text, size_t length,
                                 int32_t** tokens, size_t* count, char** errptr);

/* Token ids → UTF-8 text (sprig::Model::decode). On success *text receives a malloc'ed string of
 * *length bytes plus a terminating NUL (the byte tokenizer may put NUL bytes inside it); free it
 * with sprig_free. SPRIG_INVALID_ARGUMENT for an id outside [0, vocab_size). */
SPRIG_API int sprig_model_decode(const sprig_model_t* model, const int32_t* tokens, size_t count,
                                 char** text, size_t* length, char** errptr);

/* Streaming decode (sprig::TextDecoder): each token's text as soon as it is complete, never part
 * of a UTF-8 character. It keeps its model alive. Not thread-safe: one per stream. */
typedef struct sprig_text_decoder_t sprig_text_decoder_t;

SPRIG_API int sprig_text_decoder_create(const sprig_model_t* model, sprig_text_decoder_t** decoder,
                                        char** errptr);
/* NULL is allowed. */
SPRIG_API void sprig_text_decoder_destroy(sprig_text_decoder_t* decoder);
/* Adds `token`; *text receives the text it completes (malloc'ed, *length bytes plus a NUL; often
 * empty), to free with sprig_free. */
SPRIG_API int sprig_text_decoder_push(sprig_text_decoder_t* decoder, int32_t token, char** text,
                                      size_t* length, char** errptr);
/* Ends the stream: *text receives what is still held (as for push); the decoder is then empty. */
SPRIG_API int sprig_text_decoder_finish(sprig_text_decoder_t* decoder, char** text, size_t* length,
                                        char** errptr);

/* Called by sprig_session_generate_text with each generated token and the text it completes
 * (`length` bytes, NUL-terminated, often empty while a character is incomplete; valid only
 * during the call); a last call with token -1 carries any text still held. Return nonzero to
 * continue and 0 to stop. The same rules as sprig_token_callback apply. */
typedef int (*sprig_text_callback)(const char* text, size_t length, int32_t token, void* user);

/* sprig_session_generate from text (sprig::Session::generate_text): encodes `prompt`
 * (`prompt_length` bytes of UTF-8, which must give at least one token) with the model's
 * tokenizer, generates as sprig_session_generate does and streams the text. */
SPRIG_API int sprig_session_generate_text(sprig_session_t* session, const char* prompt,
                                          size_t prompt_length,
                                          const sprig_generate_options_t* options,
                                          sprig_text_callback callback, void* user, char** errptr);

/* ---- statistics ---- */

/* What a session has done since it was created or since sprig_session_reset_stats (see
 * sprig::SessionStats). Times are wall-clock seconds inside the calls. */
typedef struct sprig_session_stats_t {
  uint64_t forward_calls;    /* forward and forward_tokens calls that succeeded */
  uint64_t rows;             /* stack rows run by forward */
  uint64_t sequence_tokens;  /* tokens run by forward_tokens */
  uint64_t prefill_tokens;   /* tokens added to the KV cache by multi-token appends */
  uint64_t decode_tokens;    /* tokens added to the KV cache one at a time */
  uint64_t generated_tokens; /* tokens handed to generate's callback */
  double forward_seconds;
  double prefill_seconds;
  double decode_seconds;
  size_t routed_layers; /* layers with records; sprig_session_touched takes 0..routed_layers-1 */
} sprig_session_stats_t;

/* Fills *stats. Both must be non-NULL (else nothing is written). */
SPRIG_API void sprig_session_stats(const sprig_session_t* session, sprig_session_stats_t* stats);
SPRIG_API void sprig_session_reset_stats(sprig_session_t* session);

/* The records (leaves, experts, path-tree chunks) the session has read in its `index`-th layer
 * with records: the model layer it is, how many distinct records were read, of how many, and
 * the bytes of one record. SPRIG_INVALID_ARGUMENT when index >= routed_layers. */
SPRIG_API int sprig_session_touched(const sprig_session_t* session, size_t index, size_t* layer,
                                    uint64_t* touched, uint64_t* records, uint64_t* record_size,
                                    char** errptr);

/* How much of the model's file is in memory now: the hot section and the record sections, each
 * as bytes resident of bytes in all. POSIX: pages in the system's page cache, whoever read them
 * (mincore(2)). Windows: pages in this process's working set (QueryWorkingSetEx); pages only in
 * the system's file cache do not count. */
typedef struct sprig_residency_t {
  uint64_t hot_size, hot_resident;
  uint64_t records_size, records_resident;
} sprig_residency_t;
SPRIG_API void sprig_model_residency(const sprig_model_t* model, sprig_residency_t* residency);

/* This process's memory now: resident bytes, the peak, file-backed and anonymous resident
 * bytes, and page-fault counts. Linux: VmRSS, VmHWM, RssFile, RssAnon (/proc/self/status) and
 * getrusage's fault counts. Windows: the working set and its peak (GetProcessMemoryInfo), no
 * file/anonymous split (0) and all page faults as minor_faults (major_faults 0). Other POSIX
 * systems: the peak (ru_maxrss) and the fault counts only. Zeros where the system does not
 * tell. */
typedef struct sprig_process_memory_t {
  uint64_t rss, peak_rss, rss_file, rss_anon;
  uint64_t minor_faults, major_faults;
} sprig_process_memory_t;
SPRIG_API void sprig_process_memory(sprig_process_memory_t* memory);

/* ---- messages ---- */

/* Messages sprig reports on its own, apart from the outcome of a call (see sprig/log.h): today
 * one warning, when SPRIG_KERNEL_PATH names a kernel path this CPU cannot run. sprig never writes
 * to stderr or stdout; it hands each message to the callback set here, or drops it when none is
 * set (the default). */
#define SPRIG_LOG_INFO 0    /* worth knowing; nothing is wrong */
#define SPRIG_LOG_WARNING 1 /* sprig did something other than what was asked, and carried on */
#define SPRIG_LOG_ERROR 2   /* something failed that no call's status reports */

/* Receives one message: its level (SPRIG_LOG_*), a sentence without a trailing newline (valid
 * during the call only) and the `user` pointer given to sprig_set_log_callback. It is called on
 * the thread that emits the message, one message at a time. It must return normally (no longjmp
 * or exception out of it) and must not call sprig's functions. */
typedef void (*sprig_log_callback)(int level, const char* message, void* user);

/* Sends sprig's messages to `callback` from now on, or drops them when it is NULL. Process-wide
 * and thread-safe. When it returns, the previous callback is no longer running and will not be
 * called again, so whatever its `user` points to may be released. */
SPRIG_API void sprig_set_log_callback(sprig_log_callback callback, void* user);

#ifdef __cplusplus
} /* extern "C" */
#endif

#endif /* SPRIG_SPRIG_H_ */
