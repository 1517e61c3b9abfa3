// sprig pack: config + weights → .sprig file.
#pragma once

#include <cstdint>
#include <functional>
#include <string>
#include <vector>

#include "converter/config/config_json.h"
#include "converter/config/tensor_match.h"
#include "sprig/config.h"
#include "sprig/status.h"

namespace sprig::convert {

struct PackOptions {
  DType dtype = DType::kF32;  // storage type of every tensor
  bool overwrite = false;     // replace an existing output
  RenameMap rename;           // their tensor name → ours
  // Called now and then with bytes of tensor data written so far and the total.
  std::function<void(uint64_t done, uint64_t total)> progress;
};

struct PackSummary {
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

// Parses "f32" | "f16" | "bf16" (and "i8", refused for now with a clear message).
Result<DType> ParseStorageType(const std::string& text);

}  // namespace sprig::convert
