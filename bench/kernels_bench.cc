// Micro-benchmarks of the compute kernels: gemv and gemm_rows at transformer-like sizes on every
// kernel path of this CPU, the same products through BLAS (cblas_sgemv / cblas_sgemm) when the
// build found one, and the array converters.
//
// items_per_second counts multiply-adds (rows·out·in per product), so our figures and BLAS's
// compare directly. Each iteration reads a different input (rotating through a pool of 64
// vectors or row blocks) so that the inputs are not always hot in L1. Run single-threaded BLAS
// for a fair comparison: OPENBLAS_NUM_THREADS=1 sprig_bench --benchmark_min_time=0.2
#include <benchmark/benchmark.h>

#include <cstdint>
#include <random>
#include <string>
#include <vector>

#include "kernels/convert.h"
#include "kernels/kernels.h"

#ifdef SPRIG_HAVE_BLAS
#include <cblas.h>
#endif

namespace sprig::kernels {
namespace {

constexpr size_t kInputPool = 64;

std::vector<float> RandomVector(size_t n, uint32_t seed) {
  std::mt19937 rng(seed);
  std::uniform_real_distribution<float> uniform(-1.0f, 1.0f);
  std::vector<float> v(n);
  for (float& x : v) x = uniform(rng);
  return v;
}

// The weights of one [out, in] matrix in a storage type.
struct BenchWeights {
  BenchWeights(DType storage, size_t out, size_t in) : type(storage) {
    f32 = RandomVector(out * in, 1);
    if (type != DType::kF32) {
      bits.resize(f32.size());
      if (type == DType::kF16) {
        kernels::ConvertFloatToHalf(f32.data(), bits.data(), f32.size());
      } else {
        kernels::ConvertFloatToBFloat16(f32.data(), bits.data(), f32.size());
      }
    }
  }
  const void* data() const {
    return type == DType::kF32 ? static_cast<const void*>(f32.data()) : bits.data();
  }
  DType type;
  std::vector<float> f32;
  std::vector<uint16_t> bits;
};

void SetMultiplyAdds(benchmark::State& state, size_t rows, size_t out, size_t in) {
  state.SetItemsProcessed(int64_t(state.iterations()) * int64_t(rows * out * in));
}

void BM_Gemv(benchmark::State& state, KernelPath path, DType type) {
  const size_t in = size_t(state.range(0));
  const size_t out = size_t(state.range(1));
  const KernelTable& k = Kernels(path);
  const BenchWeights w(type, out, in);
  const std::vector<float> x = RandomVector(kInputPool * in, 2);
  const std::vector<float> bias = RandomVector(out, 3);
  std::vector<float> y(out);
  size_t next = 0;
  for (auto _ : state) {
    Gemv(k, type, w.data(), x.data() + next * in, bias.data(), y.data(), out, in);
    benchmark::DoNotOptimize(y.data());
    benchmark::ClobberMemory();
    next = (next + 1) % kInputPool;
  }
  SetMultiplyAdds(state, 1, out, in);
}

void BM_GemmRows(benchmark::State& state, KernelPath path, DType type) {
  const size_t rows = size_t(state.range(0));
  const size_t in = size_t(state.range(1));
  const size_t out = size_t(state.range(2));
  const KernelTable& k = Kernels(path);
  const BenchWeights w(type, out, in);
  // A pool of rows + 63 input rows; iteration i multiplies rows [i, i + rows).
  const std::vector<float> x = RandomVector((rows + kInputPool - 1) * in, 4);
  const std::vector<float> bias = RandomVector(out, 5);
  std::vector<float> y(rows * out);
  size_t next = 0;
  for (auto _ : state) {
    GemmRows(k, type, w.data(), x.data() + next * in, bias.data(), y.data(), rows, out, in);
    benchmark::DoNotOptimize(y.data());
    benchmark::ClobberMemory();
    next = (next + 1) % kInputPool;
  }
  SetMultiplyAdds(state, rows, out, in);
}

#ifdef SPRIG_HAVE_BLAS
void BM_CblasSgemv(benchmark::State& state) {
  const int in = int(state.range(0));
  const int out = int(state.range(1));
  const std::vector<float> w = RandomVector(size_t(out) * in, 1);
  const std::vector<float> x = RandomVector(kInputPool * in, 2);
  const std::vector<float> bias = RandomVector(out, 3);
  std::vector<float> y(out);
  size_t next = 0;
  for (auto _ : state) {
    y = bias;  // same work as ours: y = W x + b
    cblas_sgemv(CblasRowMajor, CblasNoTrans, out, in, 1.0f, w.data(), in, x.data() + next * in, 1,
                1.0f, y.data(), 1);
    benchmark::DoNotOptimize(y.data());
    benchmark::ClobberMemory();
    next = (next + 1) % kInputPool;
  }
  SetMultiplyAdds(state, 1, out, in);
}

void BM_CblasSgemm(benchmark::State& state) {
  const int rows = int(state.range(0));
  const int in = int(state.range(1));
  const int out = int(state.range(2));
  const std::vector<float> w = RandomVector(size_t(out) * in, 1);
  const std::vector<float> x = RandomVector(size_t(rows + kInputPool - 1) * in, 4);
  std::vector<float> y(size_t(rows) * out);
  size_t next = 0;
  for (auto _ : state) {
    // Y[rows, out] = X[rows, in]·W[out, in]ᵀ (no bias: BLAS would need a separate pass).
    cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasTrans, rows, out, in, 1.0f, x.data() + next * in,
                in, w.data(), in, 0.0f, y.data(), out);
    benchmark::DoNotOptimize(y.data());
    benchmark::ClobberMemory();
    next = (next + 1) % kInputPool;
  }
  SetMultiplyAdds(state, size_t(rows), size_t(out), size_t(in));
}

BENCHMARK(BM_CblasSgemv)->Args({768, 3072})->Args({768, 4096});
BENCHMARK(BM_CblasSgemm)->Args({16, 768, 3072})->Args({128, 768, 3072});
#endif

// Array converters over 4 M values (16 MB of float32); bytes_per_second counts the input.
constexpr size_t kConvertCount = size_t(1) << 22;

void BM_FloatToHalf(benchmark::State& state, KernelPath path, bool bfloat16) {
  const KernelTable& k = Kernels(path);
  const std::vector<float> src = RandomVector(kConvertCount, 6);
  std::vector<uint16_t> dst(kConvertCount);
  for (auto _ : state) {
    (bfloat16 ? k.f32_to_bf16 : k.f32_to_f16)(src.data(), dst.data(), kConvertCount);
    benchmark::DoNotOptimize(dst.data());
    benchmark::ClobberMemory();
  }
  state.SetBytesProcessed(int64_t(state.iterations()) * int64_t(kConvertCount * sizeof(float)));
}

void BM_HalfToFloat(benchmark::State& state, KernelPath path, bool bfloat16) {
  const KernelTable& k = Kernels(path);
  std::vector<uint16_t> src(kConvertCount);
  const std::vector<float> values = RandomVector(kConvertCount, 7);
  kernels::ConvertFloatToHalf(values.data(), src.data(), kConvertCount);
  std::vector<float> dst(kConvertCount);
  for (auto _ : state) {
    (bfloat16 ? k.bf16_to_f32 : k.f16_to_f32)(src.data(), dst.data(), kConvertCount);
    benchmark::DoNotOptimize(dst.data());
    benchmark::ClobberMemory();
  }
  state.SetBytesProcessed(int64_t(state.iterations()) * int64_t(kConvertCount * sizeof(uint16_t)));
}

// Registers every benchmark once per available kernel path and weight type.
int RegisterPathBenchmarks() {
  for (KernelPath path : AvailablePaths()) {
    const std::string p = ToString(path);
    for (DType type : {DType::kF32, DType::kF16}) {
      const std::string t = ToString(type);
      benchmark::RegisterBenchmark(("BM_Gemv/" + p + "/" + t).c_str(), BM_Gemv, path, type)
          ->Args({768, 3072})
          ->Args({768, 4096});
      benchmark::RegisterBenchmark(("BM_GemmRows/" + p + "/" + t).c_str(), BM_GemmRows, path, type)
          ->Args({16, 768, 3072})
          ->Args({128, 768, 3072});
    }
    for (bool bfloat16 : {false, true}) {
      const std::string t = bfloat16 ? "bf16" : "f16";
      benchmark::RegisterBenchmark(("BM_FloatTo/" + p + "/" + t).c_str(), BM_FloatToHalf, path,
                                   bfloat16);
      benchmark::RegisterBenchmark(("BM_ToFloat/" + p + "/" + t).c_str(), BM_HalfToFloat, path,
                                   bfloat16);
    }
  }
  return 0;
}

const int kRegistered = RegisterPathBenchmarks();

}  // namespace
}  // namespace sprig::kernels
