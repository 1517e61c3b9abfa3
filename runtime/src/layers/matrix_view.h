// A weight matrix (or a stack of rows) as it lies in a mapped model file.
#pragma once

#include <cstdint>

#include "sprig/config.h"

namespace sprig::layers {

// Row i starts at row(i). An i8 matrix has one float32 scale per row, row i's at scales[i]
// (null for the other types).
struct MatrixView {
  DType type = DType::kF32;
  const uint8_t* data = nullptr;
  const float* scales = nullptr;
  uint64_t rows = 0, cols = 0, row_bytes = 0;
  const void* row(uint64_t i) const { return data + i * row_bytes; }
  const float* row_scales(uint64_t i) const { return scales ? scales + i : nullptr; }
};

}  // namespace sprig::layers
