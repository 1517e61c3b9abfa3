// sprig::Model: an opened .sprig file.
//
// A Model is immutable once open and safe to share between any number of threads; each thread
// runs it through its own Session. Opening maps the file read-only, verifies its preamble and
// header (every offset and size against the file) and binds the network (pointers into the
// mapping); it reads no weights, which are paged in from the mapping as inference touches them.
//
// Every query below is const and thread-safe. Queries that return a value (a vector, a Status)
// return a copy the caller owns; references stay valid while the Model lives.
#pragma once

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "sprig/config.h"
#include "sprig/export.h"
#include "sprig/status.h"

namespace sprig {

// How open maps the file. Open reads only the header whatever these say; they are hints to
// the kernel, and none of them failing makes open fail.
struct OpenOptions {
  // Tell the kernel that record sections are read at random, so it does not read neighbouring
  // leaves ahead of use (MADV_RANDOM; Windows has no such advice). Default: true.
  bool advise_random_records = true;
  // Ask the kernel to start reading the hot section (routing nodes, dense layers) in the
  // background (MADV_WILLNEED; PrefetchVirtualMemory on Windows 8 and later); open does not
  // wait for it. Default: true.
  bool warm_hot = true;
  // Lock the hot section in memory (mlock; VirtualLock on Windows), so it is never paged out.
  // This reads the hot section during open and needs RLIMIT_MEMLOCK (on Windows the working-set
  // minimum) to allow it; if it fails the model still opens and hot_locked() says false.
  // Default: false.
  bool lock_hot = false;
};

// How much of one section of the file is in memory right now.
struct SectionResidency {
  std::string name;
  bool records = false;    // a routed layer's records
  bool tokenizer = false;  // the tokenizer section; neither: the hot section
  int layer = -1;          // the layer a record section belongs to; -1 for the hot section
  uint64_t size = 0;
  uint64_t resident_bytes = 0;
};

// The file's sections and how much of each is in memory, whole pages, plus totals. POSIX
// (mincore(2)): the system's page cache; pages count whether this process touched them or not,
// and stay after use until the kernel reclaims them. Windows (QueryWorkingSetEx): this
// process's working set only; pages in the system's file cache alone do not count.
struct Residency {
  std::vector<SectionResidency> sections;
  uint64_t hot_size = 0, hot_resident = 0;
  uint64_t records_size = 0, records_resident = 0;
};

// One section of the file (schema/README.md, "Sections"): the hot section (dense data, routing
// nodes, the top levels of path trees), one routed layer's records, or the tokenizer's
// vocabulary and rules; each page-aligned.
struct SectionDescription {
  std::string name;
  bool records = false;    // a routed layer's records
  bool tokenizer = false;  // the tokenizer section; neither: the hot section
  int layer = -1;          // the layer a record section belongs to; -1 for the hot section
  uint64_t offset = 0;     // bytes from the start of the file
  uint64_t size = 0;       // bytes, padding included
  uint64_t padding = 0;    // bytes of alignment padding inside the section
};

// One feed-forward layer as the model runs it: a stack layer, or the feed-forward part of a
// transformer block (its index is the block's).
struct LayerDescription {
  size_t index = 0;
  LayerConfig config;      // kind, mode, widths and activation, as the file stores them
  size_t in = 0;           // values per input row
  size_t out = 0;          // values per output row
  size_t route_width = 0;  // ints per row in Routes: 0 dense, 1 tree (a leaf), top_k experts
  uint64_t units = 0;      // what a route picks among: 2^depth leaves, or the experts; 0 dense
  // The layer's record set in the file (one record per leaf, expert or path-tree chunk), or -1
  // when all its weights are in the hot section. Record sets are numbered in file order, as
  // TensorDescription::record_set numbers them.
  int record_set = -1;
  uint64_t records = 0;      // records in that set
  uint64_t record_size = 0;  // bytes of one record
  // Counts from the config; a multiply-add is 2 FLOPs, activations, norms and softmax are not
  // counted.
  uint64_t params = 0;                 // weights and biases
  uint64_t flops_per_token = 0;        // what one token costs
  uint64_t dense_width = 0;            // hidden units of the dense layer with as many units
  uint64_t dense_flops_per_token = 0;  // what one token costs that dense layer
};

// One stored tensor (names and shapes: the input contract, docs/input-contract.md).
struct TensorDescription {
  std::string name;
  std::vector<uint64_t> shape;
  DType dtype = DType::kF32;  // storage type (compute is float32)
  int layer = -1;             // the layer it belongs to; -1 for model-level tensors
  uint64_t hot_rows = 0;      // rows (along axis 0) stored in the hot section, the first ones
  int record_set = -1;        // the record set holding the other rows; -1 when all are hot
  uint64_t bytes = 0;         // stored values: elements × DTypeSize(dtype)
  uint64_t scale_bytes = 0;   // i8 only: the float32 scales stored beside the values
  // The storage error the packer measured against the source weights: the largest absolute
  // difference and the RMS of the differences relative to the RMS of the source. 0 for f32,
  // and in files packed before the packer measured it.
  float error_max_abs = 0;
  float error_rel_rms = 0;
};

// Which Session call an input is for: float rows (Session::forward, stack models) or token
// sequences (Session::forward_tokens, transformer models).
enum class InputKind : uint8_t { kRows, kTokens };

class SPRIG_API Model {
 public:
  // Opens `path`. On failure the Status names the file and what is wrong with it.
  static Result<std::shared_ptr<const Model>> open(const std::string& path,
                                                   const OpenOptions& options = {});
  ~Model();
  Model(const Model&) = delete;
  Model& operator=(const Model&) = delete;

  const ModelConfig& config() const;
  const std::string& path() const;
  uint64_t file_size() const;

  // What the file says of itself: its format version, the program that wrote it, the size of
  // its header, and its config as the JSON text it stores.
  uint32_t format_version() const;
  const std::string& producer() const;
  uint64_t header_size() const;
  const std::string& config_json() const;

  // The file's sections, in file order.
  std::vector<SectionDescription> sections() const;
  // Every feed-forward layer, in model order (one per entry of config().layers).
  std::vector<LayerDescription> layer_descriptions() const;
  // Every stored tensor, in file order.
  std::vector<TensorDescription> tensor_descriptions() const;

  // ---- the input rules ----
  //
  // The Session calls apply these rules to every input, and so do these queries, with the same
  // messages: a front end (the C API, the command line, a language binding) asks them before
  // it allocates an output or when it holds its input in another form, and passes their
  // message on. Each returns InvalidArgument with one sentence naming the rule broken.

  // The shape of the output for an input of `input_shape` given to the call `kind` names:
  // rows [N, input_dim] or [input_dim] (one row) give [N, output_dim]; tokens [B, T] or [T]
  // (one sequence) give [B, T, vocab_size] (lm head), [B, classes] (classifier) or
  // [B, T, d_model] (no head). Checks the family (rows for a stack, tokens for a transformer),
  // the rank, a row's width, T against max_seq and, for a classifier, T >= 1.
  Result<std::vector<uint64_t>> output_shape(InputKind kind,
                                             const std::vector<uint64_t>& input_shape) const;
  // The rules of Session::forward for `count` rows of input_dim floats: the family, and every
  // value finite (the message names the first row and column that is not).
  Status check_rows(const float* rows, size_t count) const;
  // The rules of Session::forward_tokens for `batch` sequences of `length` tokens (row-major),
  // given as int64 as NumPy and many tokenizers hold them, so that a caller can check before it
  // narrows them to int32: the family, length against max_seq, a classifier's length >= 1, and
  // every token in [0, vocab_size) (the message names the first that is not, as
  // [sequence, position]).
  Status check_tokens(const int64_t* tokens, size_t batch, size_t length) const;
  // The rules of decoding (Session::append_tokens, Session::generate): a transformer with an lm
  // head and causal attention, and room in a KV cache that holds `cached` tokens for `count`
  // more (max_seq in all).
  Status check_decoding(size_t cached, size_t count) const;

  // ---- text ----
  //
  // A transformer's tokenizer turns text into token ids and back: "byte" (one token per UTF-8
  // byte) or "sentencepiece" (the BPE or unigram vocabulary stored in the file, with its
  // normalisation rules, encoding as the SentencePiece library does). config().tokenizer says
  // which; a model with tokenizer "none" takes token ids only, and these calls return
  // InvalidArgument for it.

  // UTF-8 text → token ids, with no begin or end token added. Bytes that are not UTF-8 are
  // encoded as the tokenizer's reference does (SentencePiece: each such byte as U+FFFD).
  Result<std::vector<int32_t>> encode(const std::string& text) const;
  // Token ids → UTF-8 text, as the tokenizer's reference decodes them (SentencePiece: control
  // tokens give nothing, the unknown token its surface " \u2047 ", byte tokens their bytes with
  // U+FFFD for each that does not form UTF-8). InvalidArgument for an id outside
  // [0, vocab_size), naming its position.
  Result<std::string> decode(const std::vector<int32_t>& tokens) const;
  // The vocabulary's piece for one id, as stored ("\u2581the", "<0x0A>", "<s>"), for showing
  // a segmentation; the byte tokenizer gives the byte. InvalidArgument outside the vocabulary.
  Result<std::string> token_piece(int32_t token) const;

  // Reads every weight and compares it with its stored checksum. Returns CheckFailed naming
  // the damaged tensors and records. May take a while on large files.
  Status verify_checksums() const;

  // Which parts of the file are in memory now (see Residency). Costs one query per section
  // and a few bytes per page.
  Residency residency() const;
  // Bytes of the model's mapping in this process's resident set now: pages this process has
  // read and still maps, unlike residency() on POSIX, which counts the page cache whoever read
  // it. Linux: the mapping's Rss in /proc/self/smaps (each call reads all of it, so it is not
  // for inner loops). Windows: the mapping's pages in the working set (QueryWorkingSetEx), the
  // same figure as residency(). Other POSIX systems have no such query and give the page-cache
  // figure, an upper bound.
  uint64_t process_resident_bytes() const;
  // True when OpenOptions::lock_hot was set and the hot section is locked in memory.
  bool hot_locked() const;

  // The model's private state: the mapped file and the network bound to it.
  struct Impl;

 private:
  explicit Model(std::unique_ptr<Impl> impl);
  std::unique_ptr<Impl> impl_;
};

}  // namespace sprig
