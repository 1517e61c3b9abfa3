// Round trips synth -> pack -> open for every layer kind and both families, and the layout's
// page and padding promises.
#include <gtest/gtest.h>

#include <cstring>

#include "converter/config/config_json.h"
#include "io/tensor_archive.h"
#include "converter/pack/layout.h"
#include "converter/pack/packer.h"
#include "format/model_file.h"
#include "format/preamble.h"
#include "format/row_map.h"
#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;
using testing::TempDir;

// Every layer kind, mode and option of the input contract in one stack; the path tree is deep
// enough to have records below its hot levels.
constexpr const char* kStackConfig = R"({
  "family": "stack", "name": "all kinds", "input_dim": 24,
  "layers": [
    {"kind": "dense", "width": 40, "activation": "gelu", "out": 24},
    {"kind": "dense", "width": 16, "activation": "silu", "gated": true, "bias": false, "out": 24},
    {"kind": "tree", "mode": "leaf", "depth": 3, "leaf_width": 8, "activation": "relu", "out": 24},
    {"kind": "tree", "mode": "leaf", "depth": 2, "leaf_width": 4, "activation": "gelu_tanh",
     "gated": true, "out": 24},
    {"kind": "tree", "mode": "leaf", "depth": 0, "leaf_width": 8, "activation": "relu", "out": 24},
    {"kind": "tree", "mode": "path", "depth": 8, "activation": "gelu", "out": 24},
    {"kind": "tree", "mode": "path", "depth": 2, "activation": "relu", "bias": false, "out": 24},
    {"kind": "experts", "experts": 4, "top_k": 2, "width": 8, "activation": "silu",
     "gated": true, "out": 24},
    {"kind": "experts", "experts": 3, "top_k": 1, "width": 8, "renormalize": false, "out": 5}
  ]})";

constexpr const char* kTransformerConfig = R"({
  "family": "transformer", "vocab_size": 256, "d_model": 32, "n_heads": 4, "n_kv_heads": 2,
  "max_seq": 16, "norm": "rmsnorm", "positions": "rope", "tokenizer": "byte",
  "head": {"kind": "lm"},
  "layers": [
    {"kind": "tree", "mode": "leaf", "depth": 2, "leaf_width": 8, "activation": "gelu"},
    {"kind": "tree", "mode": "path", "depth": 5, "activation": "gelu"},
    {"kind": "experts", "experts": 4, "top_k": 2, "width": 16, "activation": "silu", "gated": true}
  ]})";

constexpr const char* kClassifierConfig = R"({
  "family": "transformer", "vocab_size": 50, "d_model": 16, "n_heads": 2, "max_seq": 8,
  "positions": "learned", "attn_bias": true, "head": {"kind": "classifier", "classes": 3,
  "pool": "mean"},
  "layers": [{"kind": "dense", "width": 32, "activation": "gelu"}]})";

struct Packed {
  std::string config, weights, model;
};

Packed SynthAndPack(const TempDir& dir, const std::string& config_text, const std::string& dtype) {
  Packed p{dir.File("config.json"), dir.File("weights.npz"), dir.File("model-" + dtype + ".sprig")};
  testing::WriteFile(p.config, config_text);
  const std::string cli = testing::SprigCli();
  auto synth = testing::Run(cli + " synth " + Quote(p.config) + " -o " + Quote(p.weights) +
                            " --seed 7 --force");
  EXPECT_EQ(synth.exit_code, 0) << synth.output;
  auto pack = testing::Run(cli + " pack " + Quote(p.config) + " " + Quote(p.weights) + " -o " +
                           Quote(p.model) + " --dtype " + dtype);
  EXPECT_EQ(pack.exit_code, 0) << pack.output;
  auto check = testing::Run(cli + " inspect --check " + Quote(p.model));
  EXPECT_EQ(check.exit_code, 0) << check.output;
  return p;
}

// Every tensor gathered from the file equals the source (f32), bit for bit.
void ExpectF32RoundTrip(const Packed& p) {
  auto archive = io::TensorArchive::Open(p.weights);
  ASSERT_TRUE(archive.ok()) << archive.status().message();
  auto file = format::ModelFile::Open(p.model);
  ASSERT_TRUE(file.ok()) << file.status().message();
  ASSERT_EQ((*file)->tensors().size(), archive->arrays().size());
  for (const io::NdArray& a : archive->arrays()) {
    const format::TensorInfo* t = (*file)->Find(a.name);
    ASSERT_NE(t, nullptr) << a.name;
    EXPECT_EQ(t->shape, a.shape) << a.name;
    const std::vector<uint8_t> back = (*file)->Gather(*t);
    ASSERT_EQ(back.size(), a.nbytes()) << a.name;
    // An empty tensor (a depth-0 tree's nodes) has no data pointer to compare.
    EXPECT_TRUE(back.empty() || std::memcmp(back.data(), a.data, back.size()) == 0) << a.name;
  }
}

// Source: NumPy's float32 -> float16 cast (numpy.ndarray.astype, round to nearest even) and
// PyTorch's float32 -> bfloat16 cast (torch.Tensor.to(torch.bfloat16)); both from Debian.
// Biases and norm weights are stored as float32 whatever the requested type (schema/README.md).
constexpr const char* kExpectedRoundingScript = R"(
import sys, numpy as np, torch
src = np.load(sys.argv[1])
out = {}
for k in src.files:
    a = src[k].astype(np.float32)
    if k.endswith('bias') or k.endswith('norm.weight') or k.endswith('norm1.weight') or k.endswith('norm2.weight'):
        out[k] = a
    elif sys.argv[3] == 'f16':
        out[k] = a.astype(np.float16).view(np.uint16)
    else:
        out[k] = torch.from_numpy(a.copy()).to(torch.bfloat16).view(torch.int16).numpy().view(np.uint16)
np.savez(sys.argv[2], **out)
)";

void ExpectHalfRoundTrip(const TempDir& dir, const Packed& p, const std::string& dtype) {
  const std::string expected = dir.File("expected-" + dtype + ".npz");
  auto py = testing::RunPython(kExpectedRoundingScript, {p.weights, expected, dtype});
  ASSERT_EQ(py.exit_code, 0) << py.output;
  auto archive = io::TensorArchive::Open(expected);
  ASSERT_TRUE(archive.ok()) << archive.status().message();
  auto file = format::ModelFile::Open(p.model);
  ASSERT_TRUE(file.ok()) << file.status().message();
  for (const io::NdArray& a : archive->arrays()) {
    const format::TensorInfo* t = (*file)->Find(a.name);
    ASSERT_NE(t, nullptr) << a.name;
    EXPECT_EQ(ToString(t->dtype), a.type == io::ElementType::kF32 ? std::string("f32") : dtype);
    const std::vector<uint8_t> back = (*file)->Gather(*t);
    ASSERT_EQ(back.size(), a.nbytes()) << a.name;
    // An empty tensor (a depth-0 tree's nodes) has no data pointer to compare.
    EXPECT_TRUE(back.empty() || std::memcmp(back.data(), a.data, back.size()) == 0) << a.name;
  }
}

class PackRoundTrip : public ::testing::TestWithParam<const char*> {};

TEST_P(PackRoundTrip, F32IsBitExact) {
  TempDir dir;
  ExpectF32RoundTrip(SynthAndPack(dir, GetParam(), "f32"));
}

TEST_P(PackRoundTrip, F16MatchesNumpyRounding) {
  TempDir dir;
  ExpectHalfRoundTrip(dir, SynthAndPack(dir, GetParam(), "f16"), "f16");
}

TEST_P(PackRoundTrip, BF16MatchesTorchRounding) {
  TempDir dir;
  ExpectHalfRoundTrip(dir, SynthAndPack(dir, GetParam(), "bf16"), "bf16");
}

INSTANTIATE_TEST_SUITE_P(AllKinds, PackRoundTrip,
                         ::testing::Values(kStackConfig, kTransformerConfig, kClassifierConfig));

TEST(Pack, SameOptionsGiveIdenticalBytes) {
  TempDir dir;
  Packed p = SynthAndPack(dir, kStackConfig, "f16");
  const std::string again = dir.File("again.sprig");
  auto r = testing::Run(testing::SprigCli() + " pack " + Quote(p.config) + " " + Quote(p.weights) +
                        " -o " + Quote(again) + " --dtype f16");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_EQ(testing::ReadFile(again), testing::ReadFile(p.model));
}

TEST(Pack, FromSafetensorsAndFloat64Sources) {
  TempDir dir;
  Packed p = SynthAndPack(dir, kClassifierConfig, "f32");
  // Source: NumPy (Debian python3-numpy) writes float64 copies; the pack must round each value
  // once to float32, as numpy's astype(float32) does.
  const std::string f64 = dir.File("w64.npz");
  const std::string f32 = dir.File("w32.npz");
  auto py = testing::RunPython(
      "import sys, numpy as np\n"
      "src = np.load(sys.argv[1])\n"
      "rng = np.random.default_rng(5)\n"
      "d = {k: src[k].astype(np.float64) + rng.standard_normal(src[k].shape) * 1e-9 for k in "
      "src.files}\n"
      "np.savez(sys.argv[2], **d)\n"
      "np.savez(sys.argv[3], **{k: v.astype(np.float32) for k, v in d.items()})\n",
      {p.weights, f64, f32});
  ASSERT_EQ(py.exit_code, 0) << py.output;
  const std::string out = dir.File("from64.sprig");
  auto r = testing::Run(testing::SprigCli() + " pack " + Quote(p.config) + " " + Quote(f64) +
                        " -o " + Quote(out));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  ExpectF32RoundTrip({p.config, f32, out});
}

TEST(PackLayout, RowMapsAreBijections) {
  for (uint32_t levels = 1; levels <= 14; ++levels) {
    const format::RowMapInfo m = format::SubtreeMapFor(levels);
    const uint64_t rows = (uint64_t{1} << levels) - 1;
    const uint64_t records = format::RecordCount(m, rows);
    std::vector<uint8_t> seen(records * m.rows_per_record, 0);
    for (uint64_t row = m.hot_rows; row < rows; ++row) {
      const format::RowLocation loc = format::LocateRow(m, row);
      ASSERT_LT(loc.record, records) << "levels " << levels << " row " << row;
      ASSERT_LT(loc.local_row, m.rows_per_record);
      EXPECT_EQ(format::RowOf(m, loc.record, loc.local_row), row);
      ++seen[loc.record * m.rows_per_record + loc.local_row];
    }
    for (uint8_t s : seen) EXPECT_EQ(s, 1) << "levels " << levels;
  }
  // Deeper trees, up to the deepest path tree a file may hold: the first, a middle and the last
  // row of every level go to a record and back (LocateRow's closed form against RowOf's loop).
  for (uint32_t levels = 15; levels <= 23; ++levels) {
    const format::RowMapInfo m = format::SubtreeMapFor(levels);
    const uint64_t records = format::RecordCount(m, (uint64_t{1} << levels) - 1);
    for (uint32_t level = m.hot_levels; level < levels; ++level) {
      const uint64_t first = (uint64_t{1} << level) - 1, last = 2 * first;
      for (uint64_t row : {first, (first + last) / 2, last}) {
        const format::RowLocation loc = format::LocateRow(m, row);
        ASSERT_LT(loc.record, records) << "levels " << levels << " row " << row;
        EXPECT_EQ(format::RowOf(m, loc.record, loc.local_row), row) << "levels " << levels;
      }
    }
  }
}

TEST(PackLayout, PathStepsStayInsideOneChunkPerGroup) {
  // Following any root-to-leaf path, the rows below the hot levels fall into exactly one record
  // per group of chunk levels.
  const format::RowMapInfo m = format::SubtreeMapFor(12);
  uint64_t n = 0;
  std::vector<uint64_t> records;
  for (uint32_t level = 0; level < 12; ++level) {
    if (n >= m.hot_rows) {
      const uint64_t r = format::LocateRow(m, n).record;
      if (records.empty() || records.back() != r) records.push_back(r);
    }
    n = 2 * n + 1 + (level % 3 == 0);
  }
  EXPECT_EQ(records.size(), (12 - m.hot_levels) / m.chunk_levels);
}

// Record placement: at most ceil(B/4096) + 1 pages per record, padding under 5%, for the
// benchmark shapes of the routed runtime (in = out = 768) in f32 and f16.
TEST(PackLayout, RecordsArePageAwareForBenchmarkShapes) {
  const char* layers[] = {
      R"({"kind":"tree","mode":"leaf","depth":8,"leaf_width":16,"activation":"relu","out":768})",
      R"({"kind":"tree","mode":"path","depth":11,"activation":"gelu","out":768})",
      R"({"kind":"experts","experts":8,"top_k":2,"width":512,"activation":"silu","out":768})",
  };
  for (const char* layer : layers) {
    for (DType dtype : {DType::kF32, DType::kF16, DType::kI8}) {
      const std::string text =
          std::string(R"({"family":"stack","input_dim":768,"layers":[)") + layer + "]}";
      auto config = convert::ParseConfig(text, "bench.json");
      ASSERT_TRUE(config.ok()) << config.status().message();
      const convert::LayoutPlan plan =
          convert::PlanLayout(*config, ExpectedTensors(*config), {dtype, dtype, dtype}, 4096);
      ASSERT_EQ(plan.record_sets.size(), 1u) << layer;
      const auto& rs = plan.record_sets[0];
      const uint64_t pages = (rs.record_size + 4095) / 4096;
      for (uint64_t off : rs.offsets) {
        const uint64_t touched = (off + rs.record_size - 1) / 4096 - off / 4096 + 1;
        EXPECT_LE(touched, pages + 1) << layer;
      }
      const auto& sec = plan.sections[rs.section];
      EXPECT_LT(static_cast<double>(sec.padding), 0.05 * static_cast<double>(sec.size)) << layer;
    }
  }
}

}  // namespace
}  // namespace sprig
