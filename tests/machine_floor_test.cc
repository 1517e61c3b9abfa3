// Machine floors (bench/kit/floors.h, docs/benchmarking.md "Machine floors") against the rule
// written out by hand from the config: the bytes a call must read (the distinct tree nodes,
// leaves and experts its rows reach, the fixed tensors, the rows' inputs and outputs), its
// multiply-adds, and the floor max(bytes ÷ bandwidth, multiply-adds ÷ rate) with a bandwidth and
// a rate injected; and the read-bandwidth measurement (bench/kit/machine.h), which must read
// every byte of its buffer: a NaN planted at the buffer's end is seen. No timing is asserted.
#include <gtest/gtest.h>

#include <cmath>
#include <limits>
#include <memory>
#include <string>
#include <vector>

#include "bench/kit/floors.h"
#include "bench/kit/machine.h"
#include "kernels/kernels.h"
#include "support/test_util.h"

namespace sprig {
namespace {

using bench::Footprint;
using bench::Machine;
using bench::WorkCost;
using testing::Quote;

// in = 8 throughout; out = 4.
constexpr const char* kStack = R"({"family":"stack","input_dim":8,"layers":[
 {"kind":"tree","mode":"path","depth":3,"activation":"relu","out":4},
 {"kind":"tree","mode":"leaf","depth":2,"leaf_width":3,"activation":"relu","out":8},
 {"kind":"experts","experts":4,"top_k":2,"width":3,"activation":"relu","out":4},
 {"kind":"dense","width":5,"activation":"relu","out":4}]})";

// Synthesizes and packs `config` with `--dtype dtype`.
std::shared_ptr<const Model> Pack(const testing::TempDir& dir, const std::string& name,
                                  const std::string& config, const std::string& dtype) {
  const std::string json = dir.File(name + ".json"), npz = dir.File(name + ".npz"),
                    file = dir.File(name + ".sprig");
  testing::WriteFile(json, config);
  const std::string cli = testing::SprigCli();
  EXPECT_EQ(testing::Run(cli + " synth " + Quote(json) + " -o " + Quote(npz)).exit_code, 0);
  EXPECT_EQ(testing::Run(cli + " pack " + Quote(json) + " " + Quote(npz) + " -o " + Quote(file) +
                         " --dtype " + dtype)
                .exit_code,
            0);
  auto model = Model::open(file);
  EXPECT_TRUE(model.ok()) << model.status().message();
  return model.ok() ? *model : nullptr;
}

Machine FixedMachine(double bytes_per_second, double madds_per_second) {
  Machine m;
  m.bandwidth.push_back({1024, 1024, bytes_per_second, "all_finite", "fixed"});
  m.multiply_adds_per_second = madds_per_second;
  return m;
}

constexpr double kIo = sizeof(float);  // a row's inputs and outputs are float32

TEST(MachineFloor, RoutedLayersCountTheDistinctUnitsTheirRowsReach) {
  testing::TempDir dir;
  auto model = Pack(dir, "f32", kStack, "f32");
  ASSERT_TRUE(model);
  const Footprint f = Footprint::Of(*model);
  // Path tree, depth 3: leaves 0 and 7 share the root only, so 1 + 3 + 3 = 7 distinct neurons,
  // each a weight row (8), a bias (1) and an output row (4) of float32; the output bias (4) once.
  const int32_t path_leaves[] = {0, 7};
  WorkCost w = f.LayerCall(0, path_leaves, 2);
  EXPECT_DOUBLE_EQ(w.bytes, 7 * (8 + 1 + 4) * 4.0 + 4 * 4.0 + 2 * (8 + 4) * kIo);
  EXPECT_DOUBLE_EQ(w.multiply_adds, 2 * 4 * (8 + 4));  // (d + 1)(in + out) per row
  EXPECT_EQ(w.working_set, (15 * (8 + 1 + 4) + 4) * 4u);
  // The same leaf twice reads its path once.
  const int32_t same[] = {5, 5};
  EXPECT_DOUBLE_EQ(f.LayerCall(0, same, 2).bytes, 4 * 13 * 4.0 + 4 * 4.0 + 2 * 12 * kIo);

  // Leaf tree, depth 2, leaves of width 3 (in 4, out 8): leaves 0 and 1 pass the root and node 1
  // (weight row 4 + bias); each leaf fc1 3×4 + 3, fc2 8×3 + 8.
  const int32_t leaves[] = {0, 1};
  w = f.LayerCall(1, leaves, 2);
  const double leaf = 3 * 4 + 3 + 8 * 3 + 8;
  EXPECT_DOUBLE_EQ(w.bytes, (2 * (4 + 1) + 2 * leaf) * 4.0 + 2 * (4 + 8) * kIo);
  EXPECT_DOUBLE_EQ(w.multiply_adds, 2 * (2 * 4 + 3 * 4 + 3 * 8));

  // Experts (in 8, out 4): the router (4×8 + 4) always; rows choosing {1, 2} and {2, 3} reach
  // three experts of fc1 3×8 + 3 and fc2 4×3 + 4.
  const int32_t experts[] = {1, 2, 2, 3};
  w = f.LayerCall(2, experts, 2);
  const double expert = 3 * 8 + 3 + 4 * 3 + 4;
  EXPECT_DOUBLE_EQ(w.bytes, (4 * 8 + 4 + 3 * expert) * 4.0 + 2 * (8 + 4) * kIo);

  // Dense, width 5: all of it.
  w = f.LayerCall(3, nullptr, 3);
  EXPECT_DOUBLE_EQ(w.bytes, (5 * 4 + 5 + 4 * 5 + 4) * 4.0 + 3 * (4 + 4) * kIo);
  EXPECT_DOUBLE_EQ(w.multiply_adds, 3 * 5 * (4 + 4));
}

TEST(MachineFloor, Int8RowsCountTheirScales) {
  testing::TempDir dir;
  auto model = Pack(dir, "i8", kStack, "i8");
  ASSERT_TRUE(model);
  const int32_t leaves[] = {0, 7};
  // schema/README.md, "int8 storage": one byte per weight and a float32 scale per row of a 2-D
  // tensor; biases stay float32.
  const double neuron = (8 + 4) + 4 + (4 + 4);
  EXPECT_DOUBLE_EQ(Footprint::Of(*model).LayerCall(0, leaves, 2).bytes,
                   7 * neuron + 4 * 4.0 + 2 * (8 + 4) * kIo);
}

TEST(MachineFloor, FloorIsTheLargerOfBytesAndMultiplyAddsOverTheMachine) {
  WorkCost w;
  w.bytes = 4000;
  w.multiply_adds = 3000;
  w.working_set = 1 << 20;
  // Bandwidth 1e9 B/s, rate 1e9 multiply-adds/s: 4 µs of reading, 3 µs of arithmetic.
  bench::Floor f = bench::FloorOf(FixedMachine(1e9, 1e9), w);
  EXPECT_DOUBLE_EQ(f.seconds, 4e-6);
  EXPECT_TRUE(f.bandwidth_limited());
  f = bench::FloorOf(FixedMachine(1e9, 1e8), w);
  EXPECT_DOUBLE_EQ(f.seconds, 3e-5);
  EXPECT_FALSE(f.bandwidth_limited());
}

TEST(MachineFloor, WholeModelIsTheSumOfItsParts) {
  testing::TempDir dir;
  auto model = Pack(dir, "sum", kStack, "f32");
  ASSERT_TRUE(model);
  const Footprint f = Footprint::Of(*model);
  Routes routes;
  routes.layers = {{0, 1, {0, 7}}, {1, 1, {0, 1}}, {2, 2, {1, 2, 2, 3}}};
  const Machine m = FixedMachine(2e9, 1e8);
  double sum = 0;
  sum += bench::FloorOf(m, f.LayerCall(0, routes.layers[0].choices.data(), 2)).seconds;
  sum += bench::FloorOf(m, f.LayerCall(1, routes.layers[1].choices.data(), 2)).seconds;
  sum += bench::FloorOf(m, f.LayerCall(2, routes.layers[2].choices.data(), 2)).seconds;
  sum += bench::FloorOf(m, f.LayerCall(3, nullptr, 2)).seconds;
  std::vector<WorkCost> parts;
  f.CallParts(routes, 0, 2, 0, 0, &parts);
  ASSERT_EQ(parts.size(), 4u);
  EXPECT_DOUBLE_EQ(bench::SumOfFloors(m, parts).seconds, sum);
  // Run one after another, each part's bytes come back only after the others': the working set
  // of each is at least the call's bytes.
  double call = 0;
  for (const WorkCost& w : parts) call += w.bytes;
  for (size_t i = 0; i < parts.size(); ++i) {
    const uint64_t own =
        f.LayerCall(i, i < 3 ? routes.layers[i].choices.data() : nullptr, 2).working_set;
    EXPECT_EQ(parts[i].working_set, std::max(own, static_cast<uint64_t>(call))) << i;
  }
  // The second row alone: its own routes (leaf 7: a path of 4 neurons).
  parts.clear();
  f.CallParts(routes, 1, 1, 0, 0, &parts);
  EXPECT_DOUBLE_EQ(parts[0].bytes, 4 * 13 * 4.0 + 4 * 4.0 + (8 + 4) * kIo);
}

// A transformer's dense parts: per block the norms and projections (d = 8, 2 heads, no biases,
// RMS norms of 8) and the KV cache read, with the projections' and attention's multiply-adds;
// then the token's embedding row and the final norm and head.
TEST(MachineFloor, TransformerDenseParts) {
  testing::TempDir dir;
  auto model =
      Pack(dir, "lm",
           R"({"family":"transformer","vocab_size":16,"d_model":8,"n_heads":2,)"
           R"("max_seq":16,"head":{"kind":"lm"},"norm":"rmsnorm","attn_bias":false,)"
           R"("positions":"rope","layers":[{"kind":"dense","width":4,"activation":"relu"}]})",
           "f32");
  ASSERT_TRUE(model);
  const std::vector<WorkCost> parts = Footprint::Of(*model).DenseParts(5, 1, 1);
  ASSERT_EQ(parts.size(), 2u);
  const double weights = (8 + 4 * 8 * 8 + 8) * 4.0;
  const double cache = 6 * 8 * 2 * 4.0;  // positions 0..5, keys and values of 8
  EXPECT_DOUBLE_EQ(parts[0].bytes, weights + cache + 8 * 2 * kIo);
  EXPECT_DOUBLE_EQ(parts[0].multiply_adds, 8 * (8 + 16 + 8) + 2 * 8 * 6);
  EXPECT_DOUBLE_EQ(parts[1].bytes, 8 * 4.0 + (8 + 16 * 8) * 4.0);
  EXPECT_DOUBLE_EQ(parts[1].multiply_adds, 16 * 8);
}

TEST(MachineFloor, BandwidthReadsTheWholeBuffer) {
  const kernels::KernelTable& k = kernels::ActiveKernels();
  std::vector<float> buffer((1 << 20) / sizeof(float), 1.0f);
  bench::ReadSample s = bench::ReadBandwidth(k, buffer.data(), buffer.size(), 0.002);
  EXPECT_TRUE(s.all_finite);
  EXPECT_GT(s.bytes_per_second, 0);
  EXPECT_TRUE(std::isfinite(s.bytes_per_second));
  EXPECT_TRUE(s.kernel == "all_finite" || s.kernel == "f32.gemv") << s.kernel;
  // The last float is the one a read that stopped short would miss.
  buffer.back() = std::numeric_limits<float>::quiet_NaN();
  s = bench::ReadBandwidth(k, buffer.data(), buffer.size(), 0.002);
  EXPECT_FALSE(s.all_finite);
  EXPECT_GT(bench::MultiplyAddRate(k, 0.002), 0);
}

TEST(MachineFloor, BandwidthLookupInterpolatesInLogSize) {
  Machine m;
  m.bandwidth = {{1000, 1000, 10e9, "", ""}, {100000, 100000, 2e9, "", ""}};
  EXPECT_DOUBLE_EQ(m.BandwidthAt(1000), 10e9);
  EXPECT_DOUBLE_EQ(m.BandwidthAt(10), 10e9);
  EXPECT_DOUBLE_EQ(m.BandwidthAt(1 << 30), 2e9);
  EXPECT_NEAR(m.BandwidthAt(10000), 6e9, 1e-3);  // halfway in log(size)
  bench::MachineOptions o;
  o.sizes = {32 << 10, 5000};
  o.reasons = {"layer 0", "layer 1"};
  const std::vector<bench::Bandwidth> planned = bench::PlannedSizes(o);
  ASSERT_EQ(planned.size(), bench::LadderSizes().size() + 1);  // 32 KiB is on the ladder
  EXPECT_EQ(planned[0].working_set_bytes, 5000u);
  EXPECT_EQ(planned[1].what, "ladder, layer 0");
}

}  // namespace
}  // namespace sprig
