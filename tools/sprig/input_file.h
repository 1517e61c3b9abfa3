// The inputs `sprig bench` and `sprig routes` take from a file (--input): float rows [N, in] for
// a stack model; for a transformer, int32/int64 tokens [T] or [B, T], or UTF-8 text that the
// model's tokenizer turns into tokens. Which it is comes from the file's first bytes: a .npy
// (or .npz / .safetensors holding one array) is an array, anything else is text.
#pragma once

#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

#include "io/ndarray.h"
#include "sprig/model.h"

namespace sprig::cli {

struct InputFile {
  std::string path;
  std::string kind;    // "rows", "tokens" or "text"
  uint64_t bytes = 0;  // the file's size
  std::string sha256;  // of the file's bytes (FIPS 180-4), as sha256sum prints it
  // Stack: rows × input_dim values, every one finite.
  size_t rows = 0;
  std::vector<float> values;
  // Transformer: token sequences, every token in the vocabulary. A [T] array and a text are one
  // sequence (of any length; callers cut it into pieces the model takes), [B, T] is B.
  std::vector<std::vector<int32_t>> sequences;

  uint64_t units() const;  // rows, or tokens over all sequences
};

// A float32/float64 array's values as float32, and an int32/int64 array's as int64, in order.
std::vector<float> RowValues(const io::NdArray& a);
std::vector<int64_t> TokenValues(const io::NdArray& a);

// Reads `path` for `model` under the model's input rules; errors name the file.
Result<InputFile> ReadInputFile(const std::string& path, const Model& model);

// Whether `bytes` (a whole file) is text rather than a tensor file.
bool IsText(std::string_view bytes);

// `text` (the contents of `path`) as tokens of the model's tokenizer: with the byte tokenizer,
// each byte of its UTF-8 is one token. Refused when the model has no tokenizer or the text is
// not UTF-8 (naming the byte offset).
Result<std::vector<int32_t>> TokenizeText(const std::string& path, std::string_view text,
                                          const Model& model);

}  // namespace sprig::cli
