// Element conversion from a source array's type to a storage type, at pack time.
#pragma once

#include <cstdint>

#include "converter/io/ndarray.h"
#include "sprig/config.h"

namespace sprig::convert {

// Converts n elements of floating type `src_type` at `src` (any alignment) to `dst_type` at
// `dst` (any alignment). Every narrowing rounds once, to nearest with ties to even, as NumPy's
// astype does; widening is exact. src_type must be f64, f32, f16 or bf16 (checked earlier by
// tensor matching) and dst_type f32, f16 or bf16.
void ConvertElements(io::ElementType src_type, const uint8_t* src, DType dst_type, uint8_t* dst,
                     uint64_t n);

}  // namespace sprig::convert
