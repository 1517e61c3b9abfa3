// Element conversion from a source array's type to a storage type, at pack time.
#pragma once

#include <cstdint>

#include "io/ndarray.h"
#include "sprig/config.h"

namespace sprig::convert {

// Converts n elements of floating type `src_type` at `src` (any alignment) to `dst_type` at
// `dst` (any alignment). Every narrowing rounds once, to nearest with ties to even, as NumPy's
// astype does; widening is exact. src_type must be f64, f32, f16 or bf16 (checked earlier by
// tensor matching) and dst_type f32, f16 or bf16.
void ConvertElements(io::ElementType src_type, const uint8_t* src, DType dst_type, uint8_t* dst,
                     uint64_t n);

// Symmetric int8 quantisation of `rows` rows of `cols` elements (schema/README.md, "int8
// storage"): each row is first rounded to float32, then scale = max|w| / 127 (float32
// division; 0 for a row of zeros) and q = clamp(round_half_even(w / scale), -127, 127), with
// w / scale a float32 division (q = 0 where scale is 0). Writes rows·cols int8 values to `q` and
// `rows` float32 scales to `scales` (both any alignment).
void QuantizeRows(io::ElementType src_type, const uint8_t* src, uint64_t rows, uint64_t cols,
                  uint8_t* q, uint8_t* scales);

// How far a tensor stored as `dst_type` is from its source: the largest absolute difference
// and the root-mean-square difference over the source's root-mean-square (0 for an all-zero
// source), both computed in double precision. i8 uses rows of the last dimension.
struct StorageError {
  double max_abs = 0;
  double rel_rms = 0;
};
StorageError MeasureStorageError(const io::NdArray& src, DType dst_type);

}  // namespace sprig::convert
