// sprig pack: config + weights → .sprig file.
#pragma once

#include <cstdint>
#include <functional>
#include <string>
#include <vector>

#include "converter/config/config_json.h"
#include "converter/config/tensor_match.h"
#include "converter/pack/convert.h"
#include "converter/pack/layout.h"
#include "sprig/config.h"
#include "sprig/status.h"

namespace sprig::convert {

struct PackOptions {
  StoragePlan storage;     // storage type of each part (all f32 by default)
  bool overwrite = false;  // replace an existing output
  Mapping mapping;         // their tensor names → ours (the --map file)
  // A SentencePiece model file (.model) for a config with tokenizer "sentencepiece": PackFiles
  // reads it and stores its vocabulary and rules in the file's tokenizer section. Required for
  // such a config, refused for any other.
  std::string tokenizer_model;
  // The tokenizer section's bytes (tokenizer::SerializeSection), as PackFiles makes them from
  // tokenizer_model; PackTensors writes them. Non-empty exactly when the config names
  // tokenizer "sentencepiece".
  std::string tokenizer_section;
  // Called now and then with bytes of tensor data written so far and the total.
  std::function<void(uint64_t done, uint64_t total)> progress;
  // Called with one line per layout decision (header size, sections, record sets) when set;
  // `sprig pack` prints them when SPRIG_LOG=debug.
  std::function<void(const std::string& line)> describe_layout;
};

// A tensor's storage type and how far its stored values are from the source.
struct TensorError {
  std::string name;
  DType dtype = DType::kF32;
  StorageError error;
};

struct PackSummary {
  std::vector<TensorError> errors;  // one per tensor, in file order
  uint64_t file_size = 0;
  uint64_t input_bytes = 0;   // bytes of source tensor data read
  uint64_t tensor_bytes = 0;  // bytes of stored tensor data written
  double seconds = 0;
};

// Reads config and weights, validates them, and writes `out_path` atomically. Refuses to write
// over either input, and over an existing file unless options.overwrite.
Result<PackSummary> PackFiles(const std::string& config_path, const std::string& weights_path,
                              const std::string& out_path, const PackOptions& options);

// Writes an already validated config and its matched tensors.
Result<PackSummary> PackTensors(const ModelConfig& config,
                                const std::vector<MatchedTensor>& tensors,
                                const std::string& out_path, const PackOptions& options);

// Parses "f32" | "f16" | "bf16" | "i8". `option` names the option in the error message.
Result<DType> ParseStorageType(const std::string& text, const std::string& option = "--dtype");

}  // namespace sprig::convert
