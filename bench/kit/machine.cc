#include "bench/kit/machine.h"

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <map>
#include <thread>
#include <vector>

namespace sprig::bench {
namespace {

using Clock = std::chrono::steady_clock;

double Since(Clock::time_point start) {
  return std::chrono::duration<double>(Clock::now() - start).count();
}

// Bytes one timed sample reads at least: a pass over a small buffer takes nanoseconds, below
// what the clock resolves.
constexpr uint64_t kSampleBytes = uint64_t{1} << 20;
constexpr size_t kMinSamples = 3;

}  // namespace

std::vector<uint64_t> LadderSizes() {
  return {uint64_t{32} << 10, uint64_t{256} << 10, uint64_t{2} << 20, uint64_t{16} << 20,
          uint64_t{128} << 20};
}

double Machine::BandwidthAt(uint64_t bytes) const {
  if (bandwidth.empty()) return 0;
  if (bytes <= bandwidth.front().working_set_bytes) return bandwidth.front().bytes_per_second;
  if (bytes >= bandwidth.back().working_set_bytes) return bandwidth.back().bytes_per_second;
  for (size_t i = 1; i < bandwidth.size(); ++i) {
    const Bandwidth& hi = bandwidth[i];
    if (bytes > hi.working_set_bytes) continue;
    if (bytes == hi.working_set_bytes) return hi.bytes_per_second;
    const Bandwidth& lo = bandwidth[i - 1];
    const double t = std::log(static_cast<double>(bytes) / lo.working_set_bytes) /
                     std::log(static_cast<double>(hi.working_set_bytes) / lo.working_set_bytes);
    return lo.bytes_per_second + t * (hi.bytes_per_second - lo.bytes_per_second);
  }
  return bandwidth.back().bytes_per_second;
}

ReadSample ReadBandwidth(const kernels::KernelTable& k, const float* data, size_t count,
                         double min_seconds) {
  ReadSample out;
  if (count == 0) return out;
  // The gemv reading: whole rows only (a buffer smaller than a row is read by all_finite alone).
  const size_t rows = count / kGemvRow;
  std::vector<float> x(kGemvRow, 1.0f), y(rows);
  struct Reader {
    const char* kernel;
    uint64_t bytes;  // one pass
    std::function<bool()> pass;
  };
  std::vector<Reader> readers = {
      {"all_finite", count * sizeof(float), [&] { return k.all_finite(data, count); }}};
  if (rows > 0) {
    readers.push_back({"f32.gemv", rows * kGemvRow * sizeof(float), [&] {
                         k.f32.gemv(data, x.data(), nullptr, y.data(), rows, kGemvRow);
                         return k.all_finite(y.data(), rows);
                       }});
  }
  // The untimed pass of each brings a cache-sized buffer into the cache, as a layer's second
  // call finds it. Every answer is kept: the calls go through function pointers and their
  // answers decide all_finite, so no pass can be left out.
  for (const Reader& r : readers) r.pass();
  out.all_finite = k.all_finite(data, count);
  double best = 0;
  const auto start = Clock::now();
  for (size_t samples = 0; samples < kMinSamples || Since(start) < min_seconds; ++samples) {
    for (size_t i = 0; i < readers.size(); ++i) {
      const Reader& r = readers[i];
      const size_t passes = static_cast<size_t>(std::max<uint64_t>(1, kSampleBytes / r.bytes));
      bool finite = true;
      const auto t0 = Clock::now();
      for (size_t p = 0; p < passes; ++p) finite &= r.pass();
      const double seconds = Since(t0);
      if (i == 0) out.all_finite &= finite;
      const double rate = static_cast<double>(r.bytes * passes) / seconds;
      if (seconds > 0 && rate > best) best = rate, out.kernel = r.kernel;
    }
  }
  out.bytes_per_second = best;
  return out;
}

namespace {

// The multiply-add loop's data: a 64 × 512 weight matrix and 16 rows, 160 KiB in all.
struct MaddData {
  static constexpr size_t kRows = 16, kOut = 64, kIn = 512;
  // Calls per timed sample.
  static constexpr size_t kCalls = 64;
  static constexpr double kSampleMadds = static_cast<double>(kCalls * kRows * kOut * kIn);
  std::vector<float> w, x, bias, y;
  MaddData() : w(kOut * kIn), x(kRows * kIn), bias(kOut, 0.5f), y(kRows * kOut) {
    for (size_t i = 0; i < w.size(); ++i) w[i] = static_cast<float>(i % 7) * 0.01f;
    for (size_t i = 0; i < x.size(); ++i) x[i] = static_cast<float>(i % 5) * 0.1f;
  }
  void Sample(const kernels::KernelTable& k) {
    for (size_t c = 0; c < kCalls; ++c) {
      k.f32.gemm_rows(w.data(), x.data(), bias.data(), y.data(), kRows, kOut, kIn);
    }
  }
  // The outputs are read, so the calls have an effect the compiler must keep (they go through
  // function pointers, which it cannot see through anyway).
  bool Finite(const kernels::KernelTable& k) const { return k.all_finite(y.data(), y.size()); }
};

}  // namespace

double MultiplyAddRate(const kernels::KernelTable& k, double min_seconds) {
  MaddData data;
  data.Sample(k);
  double best = 0;
  const auto start = Clock::now();
  for (size_t samples = 0; samples < kMinSamples || Since(start) < min_seconds; ++samples) {
    const auto t0 = Clock::now();
    data.Sample(k);
    const double seconds = Since(t0);
    if (seconds > 0) best = std::max(best, MaddData::kSampleMadds / seconds);
  }
  return data.Finite(k) ? best : 0;
}

double ParallelMultiplyAddRate(const kernels::KernelTable& k, size_t threads, double seconds) {
  std::atomic<size_t> ready{0};
  std::atomic<bool> go{false}, stop{false};
  std::vector<double> rates(threads, 0.0);
  std::vector<std::thread> workers;
  for (size_t t = 0; t < threads; ++t) {
    workers.emplace_back([&, t] {
      MaddData data;
      data.Sample(k);  // warm: its data in this core's cache
      ++ready;
      while (!go.load()) std::this_thread::yield();
      size_t samples = 0;
      const auto t0 = Clock::now();
      while (!stop.load()) {
        data.Sample(k);
        ++samples;
      }
      const double elapsed = Since(t0);
      if (elapsed > 0 && data.Finite(k)) rates[t] = samples * MaddData::kSampleMadds / elapsed;
    });
  }
  while (ready.load() < threads) std::this_thread::yield();
  go.store(true);
  std::this_thread::sleep_for(std::chrono::duration<double>(seconds));
  stop.store(true);
  for (std::thread& w : workers) w.join();
  double sum = 0;
  for (double r : rates) sum += r;
  return sum;
}

ThreadScaling MeasureThreadScaling(const kernels::KernelTable& k, size_t threads, double seconds) {
  // Alternating rounds, so that a change of the machine's state (another program starting)
  // touches both rates alike.
  constexpr int kRounds = 3;
  double one = 0, many = 0;
  for (int round = 0; round < kRounds; ++round) {
    one = std::max(one, ParallelMultiplyAddRate(k, 1, seconds));
    many = std::max(many, ParallelMultiplyAddRate(k, threads, seconds));
  }
  ThreadScaling s;
  s.threads = threads;
  s.multiply_adds_per_second = many;
  s.times_one_thread = one > 0 ? many / one : 0;
  return s;
}

std::vector<Bandwidth> PlannedSizes(const MachineOptions& options) {
  std::map<uint64_t, std::string> sizes;
  auto add = [&sizes](uint64_t bytes, const std::string& why) {
    // A working set below one vector's worth reads nothing measurable; count at least 4 KiB.
    bytes = std::max<uint64_t>(bytes, 4096);
    std::string& what = sizes[bytes];
    if (what.find(why) == std::string::npos) what += (what.empty() ? "" : ", ") + why;
  };
  for (uint64_t bytes : LadderSizes()) add(bytes, "ladder");
  for (size_t i = 0; i < options.sizes.size(); ++i) {
    add(options.sizes[i], i < options.reasons.size() ? options.reasons[i] : "model");
  }
  std::vector<Bandwidth> out;
  for (const auto& [bytes, what] : sizes) {
    Bandwidth b;
    b.working_set_bytes = bytes;
    b.buffer_bytes = std::min(bytes, kMaxBuffer) / sizeof(float) * sizeof(float);
    b.what = what;
    out.push_back(b);
  }
  return out;
}

Machine MeasureMachine(const kernels::KernelTable& k, const MachineOptions& options) {
  const auto start = Clock::now();
  Machine m;
  m.kernel_path = kernels::ToString(k.path);
  m.bandwidth = PlannedSizes(options);
  // One buffer of the largest size, written first so every page exists; each size reads a
  // prefix of it.
  std::vector<float> buffer(m.bandwidth.back().buffer_bytes / sizeof(float), 1.0f);
  for (Bandwidth& b : m.bandwidth) {
    const ReadSample sample =
        ReadBandwidth(k, buffer.data(), b.buffer_bytes / sizeof(float), options.seconds_per_size);
    b.bytes_per_second = sample.bytes_per_second;
    b.kernel = sample.kernel;
    if (options.step) options.step();
  }
  m.multiply_adds_per_second = MultiplyAddRate(k, options.seconds_per_size);
  // Long enough for the cores' clocks to settle under the load of all of them.
  const double scaling_seconds = std::max(0.1, 5 * options.seconds_per_size);
  for (size_t threads : options.thread_counts) {
    if (threads < 2) continue;
    if (std::any_of(m.thread_scaling.begin(), m.thread_scaling.end(),
                    [&](const ThreadScaling& s) { return s.threads == threads; })) {
      continue;
    }
    m.thread_scaling.push_back(MeasureThreadScaling(k, threads, scaling_seconds));
  }
  if (options.step) options.step();
  m.seconds = Since(start);
  return m;
}

}  // namespace sprig::bench
