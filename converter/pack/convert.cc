#include "converter/pack/convert.h"

#include <algorithm>
#include <cstring>
#include <vector>

#include "numeric/half.h"

namespace sprig::convert {
namespace {

// Source data inside a zip member or after a .npy header need not be aligned for its type, and
// the destination inside a record is only 2-byte aligned for some parts. Work goes through
// aligned staging buffers in chunks, which also keeps the working set in cache.
constexpr uint64_t kChunk = 16384;

void ConvertChunk(io::ElementType st, const void* s, DType dt, void* d, size_t n) {
  using io::ElementType;
  if (st == ElementType::kF64) {
    const auto* in = static_cast<const double*>(s);
    if (dt == DType::kF32) {
      auto* out = static_cast<float*>(d);
      for (size_t i = 0; i < n; ++i) out[i] = static_cast<float>(in[i]);
    } else if (dt == DType::kF16) {
      numeric::ConvertDoubleToHalf(in, static_cast<uint16_t*>(d), n);
    } else {
      numeric::ConvertDoubleToBFloat16(in, static_cast<uint16_t*>(d), n);
    }
    return;
  }
  // Every other source widens exactly to float first, so the narrowing below rounds once.
  alignas(64) static thread_local float wide[kChunk];
  const float* f = nullptr;
  if (st == ElementType::kF32) {
    f = static_cast<const float*>(s);
  } else if (st == ElementType::kF16) {
    if (dt == DType::kF16) {
      std::memcpy(d, s, n * 2);
      return;
    }
    numeric::ConvertHalfToFloat(static_cast<const uint16_t*>(s), wide, n);
    f = wide;
  } else {  // bf16
    if (dt == DType::kBF16) {
      std::memcpy(d, s, n * 2);
      return;
    }
    numeric::ConvertBFloat16ToFloat(static_cast<const uint16_t*>(s), wide, n);
    f = wide;
  }
  if (dt == DType::kF32) {
    std::memcpy(d, f, n * 4);
  } else if (dt == DType::kF16) {
    numeric::ConvertFloatToHalf(f, static_cast<uint16_t*>(d), n);
  } else {
    numeric::ConvertFloatToBFloat16(f, static_cast<uint16_t*>(d), n);
  }
}

}  // namespace

void ConvertElements(io::ElementType st, const uint8_t* src, DType dt, uint8_t* dst, uint64_t n) {
  const size_t in_size = io::ElementSize(st);
  const size_t out_size = DTypeSize(dt);
  if ((st == io::ElementType::kF32 && dt == DType::kF32)) {
    std::memcpy(dst, src, n * 4);
    return;
  }
  alignas(64) static thread_local uint8_t in_stage[kChunk * 8];
  alignas(64) static thread_local uint8_t out_stage[kChunk * 4];
  for (uint64_t done = 0; done < n; done += kChunk) {
    const size_t m = static_cast<size_t>(std::min(kChunk, n - done));
    const uint8_t* s = src + done * in_size;
    uint8_t* d = dst + done * out_size;
    const bool s_aligned = reinterpret_cast<uintptr_t>(s) % in_size == 0;
    const bool d_aligned = reinterpret_cast<uintptr_t>(d) % out_size == 0;
    if (!s_aligned) {
      std::memcpy(in_stage, s, m * in_size);
      s = in_stage;
    }
    ConvertChunk(st, s, dt, d_aligned ? d : out_stage, m);
    if (!d_aligned) std::memcpy(d, out_stage, m * out_size);
  }
}

}  // namespace sprig::convert
