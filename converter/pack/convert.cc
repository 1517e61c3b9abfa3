#include "converter/pack/convert.h"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <vector>

#include "kernels/convert.h"
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
    kernels::ConvertHalfToFloat(static_cast<const uint16_t*>(s), wide, n);
    f = wide;
  } else {  // bf16
    if (dt == DType::kBF16) {
      std::memcpy(d, s, n * 2);
      return;
    }
    kernels::ConvertBFloat16ToFloat(static_cast<const uint16_t*>(s), wide, n);
    f = wide;
  }
  if (dt == DType::kF32) {
    std::memcpy(d, f, n * 4);
  } else if (dt == DType::kF16) {
    kernels::ConvertFloatToHalf(f, static_cast<uint16_t*>(d), n);
  } else {
    kernels::ConvertFloatToBFloat16(f, static_cast<uint16_t*>(d), n);
  }
}

// One row as float32 (the first rounding of a float64 source).
void RowToFloat(io::ElementType st, const uint8_t* src, uint64_t cols, std::vector<float>& row) {
  row.resize(cols);
  ConvertElements(st, src, DType::kF32, reinterpret_cast<uint8_t*>(row.data()), cols);
}

// One row as float64, exactly.
void RowToDouble(io::ElementType st, const uint8_t* src, uint64_t cols, std::vector<double>& row,
                 std::vector<float>& scratch) {
  row.resize(cols);
  if (st == io::ElementType::kF64) {
    std::memcpy(row.data(), src, cols * sizeof(double));
    return;
  }
  RowToFloat(st, src, cols, scratch);  // exact: f32, f16 and bf16 widen without rounding
  std::copy(scratch.begin(), scratch.end(), row.begin());
}

// The stored values of one row decoded back to float32 (int8: q times the row's scale).
void StoredRow(io::ElementType st, const uint8_t* src, DType dt, uint64_t cols,
               std::vector<float>& out) {
  out.resize(cols);
  if (dt == DType::kI8) {
    std::vector<int8_t> q(cols);
    float scale = 0;
    QuantizeRows(st, src, 1, cols, reinterpret_cast<uint8_t*>(q.data()),
                 reinterpret_cast<uint8_t*>(&scale));
    for (uint64_t i = 0; i < cols; ++i) out[i] = scale * static_cast<float>(q[i]);
    return;
  }
  std::vector<uint8_t> stored(cols * DTypeSize(dt));
  ConvertElements(st, src, dt, stored.data(), cols);
  if (dt == DType::kF32) {
    std::memcpy(out.data(), stored.data(), cols * sizeof(float));
    return;
  }
  std::vector<uint16_t> bits(cols);
  std::memcpy(bits.data(), stored.data(), cols * 2);
  for (uint64_t i = 0; i < cols; ++i) {
    out[i] = dt == DType::kF16 ? numeric::HalfToFloat(bits[i]) : numeric::BFloat16ToFloat(bits[i]);
  }
}

}  // namespace

void QuantizeRows(io::ElementType st, const uint8_t* src, uint64_t rows, uint64_t cols, uint8_t* q,
                  uint8_t* scales) {
  const size_t src_row = cols * io::ElementSize(st);
  std::vector<float> row;
  for (uint64_t r = 0; r < rows; ++r) {
    RowToFloat(st, src + r * src_row, cols, row);
    float max_abs = 0.0f;
    for (float v : row) max_abs = std::max(max_abs, std::fabs(v));
    const float scale = max_abs / 127.0f;
    for (uint64_t i = 0; i < cols; ++i) {
      // nearbyint rounds half to even in the default rounding mode, as NumPy's rint does.
      const float v = scale > 0.0f ? std::nearbyint(row[i] / scale) : 0.0f;
      q[r * cols + i] = static_cast<uint8_t>(static_cast<int8_t>(std::clamp(v, -127.0f, 127.0f)));
    }
    std::memcpy(scales + r * sizeof(float), &scale, sizeof(float));
  }
}

StorageError MeasureStorageError(const io::NdArray& src, DType dt) {
  const uint64_t elements = src.elements();
  const uint64_t cols = src.shape.empty() || src.shape.back() == 0 ? 1 : src.shape.back();
  const uint64_t rows = elements / cols;
  const size_t src_row = cols * io::ElementSize(src.type);
  std::vector<double> exact;
  std::vector<float> stored, scratch;
  double max_abs = 0, diff_squares = 0, squares = 0;
  for (uint64_t r = 0; r < rows; ++r) {
    RowToDouble(src.type, src.data + r * src_row, cols, exact, scratch);
    StoredRow(src.type, src.data + r * src_row, dt, cols, stored);
    for (uint64_t i = 0; i < cols; ++i) {
      const double d = static_cast<double>(stored[i]) - exact[i];
      max_abs = std::max(max_abs, std::fabs(d));
      diff_squares += d * d;
      squares += exact[i] * exact[i];
    }
  }
  StorageError e;
  e.max_abs = max_abs;
  e.rel_rms = squares > 0 ? std::sqrt(diff_squares / squares) : 0.0;
  return e;
}

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
