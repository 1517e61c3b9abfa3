// Half-precision storage types: IEEE 754-2008 binary16 ("f16") and bfloat16 ("bf16", the top
// 16 bits of a binary32). Values are carried as raw uint16_t bit patterns; compute is float32.
//
// Every narrowing conversion rounds to nearest, ties to even, keeps subnormals (no flushing),
// overflows to infinity and keeps infinities. A NaN stays a NaN of the same sign with the quiet
// bit set and the top of its payload kept (the behaviour of the x86 F16C instructions, so the
// vector converters can match these bit for bit). Widening is exact; f16 -> f32 also quiets a
// signalling NaN, bf16 -> f32 is a plain shift.
//
// double -> f16/bf16 rounds once, directly from the double. Going through float would round
// twice and can differ in the last bit (e.g. 1 + 2^-11 + 2^-40 is 0x3c01 in f16, but through
// float it becomes the tie 1 + 2^-11, which rounds to even 0x3c00).
//
// All functions are pure and thread-safe.
#pragma once

#include <cstddef>
#include <cstdint>

namespace sprig::numeric {

uint16_t FloatToHalf(float value);
float HalfToFloat(uint16_t bits);
uint16_t DoubleToHalf(double value);

uint16_t FloatToBFloat16(float value);
float BFloat16ToFloat(uint16_t bits);
uint16_t DoubleToBFloat16(double value);

// Array converters from float64: the scalar functions above, element by element (float64 input
// only arrives at pack time, so it has no vector path). The float32 <-> f16/bf16 array
// converters run on the fastest kernel path of the CPU and so live with the kernels
// (kernels/convert.h). `src` and `dst` must not overlap.
void ConvertDoubleToHalf(const double* src, uint16_t* dst, size_t n);
void ConvertDoubleToBFloat16(const double* src, uint16_t* dst, size_t n);

}  // namespace sprig::numeric
