// Size limits a config.json must respect. ParseConfig refuses anything outside them, so code
// that runs after parsing (tensor specs, layout planning, packing, the runtime) can multiply
// dimensions together without checking for overflow.
//
//   every dimension (input_dim, vocab_size, d_model, n_heads, n_kv_heads, max_seq, width,
//   leaf_width, in, out, head classes)                        1 .. 2^24 (16,777,216)
//   tree depth, leaf mode                                      0 .. 20   (at most 2^20 leaves)
//   tree depth, path mode                                      0 .. 22   (2^23 - 1 neurons)
//   experts per layer                                          1 .. 4096
//   shared experts per layer (shared_width is a dimension)     0 .. 4096
//   layers                                                     1 .. 1024
//   elements of any one tensor                                 at most 2^36
//   elements of all tensors together                           at most 2^38
//   name / description                                         1 KiB / 64 KiB of UTF-8
//   config.json / mapping file                                 16 MiB / 64 MiB
//
// Why these numbers: 2^38 elements of the widest input type (float64, 8 bytes) is 2^41 bytes,
// so every byte count, offset and padded size derived from a valid config stays below 2^42,
// far from 2^63 even after rounding up to pages or adding per-row scales. A single dimension
// of 2^24 keeps the product of any two dimensions below 2^48 and fits a float32 index exactly.
#pragma once

#include <cstddef>
#include <cstdint>

#include "model/config_check.h"

namespace sprig::convert {

// The size limits are shared with the loader, which checks every header it opens against them
// (model/config_check.h); they are named here too so converter code reads them from one place.
using ::sprig::kMaxDimension;
using ::sprig::kMaxExperts;
using ::sprig::kMaxLayers;
using ::sprig::kMaxLeafDepth;
using ::sprig::kMaxPathDepth;
using ::sprig::kMaxTensorElements;
using ::sprig::kMaxTotalElements;

// Limits of the converter's inputs only.
inline constexpr size_t kMaxNameBytes = 1024;
inline constexpr size_t kMaxDescriptionBytes = 64 * 1024;
inline constexpr uint64_t kMaxConfigFileBytes = 16 * 1024 * 1024;
inline constexpr uint64_t kMaxMappingFileBytes = 64 * 1024 * 1024;

}  // namespace sprig::convert
