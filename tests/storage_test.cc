// Storage types end to end: int8 and f16 files against NumPy, int8 models against float32 models
// of the same (dequantised) weights, per-part storage types, and reproducible packing.
//
// Source of the expectations: tests/python/storage_reference.py, which quantises with NumPy
// (numpy.rint, float32 division; Debian python3-numpy) and converts with numpy.float16
// (IEEE 754 binary16). The int8 rule itself is the one schema/README.md documents.
#include <gtest/gtest.h>

#include <cmath>
#include <cstring>
#include <string>
#include <vector>

#include "io/tensor_archive.h"
#include "format/model_file.h"
#include "format/preamble.h"
#include "support/test_util.h"

namespace sprig::testing {
namespace {

// Every layer kind, with 3-d record tensors, path-tree chunks and hot rows; in >= 5 and at least
// two rows per tensor, as storage_reference.py needs for its ties.
constexpr const char* kStackConfig = R"({"family":"stack","input_dim":40,"layers":[
  {"kind":"dense","width":24,"activation":"gelu","out":40},
  {"kind":"tree","mode":"leaf","depth":3,"leaf_width":8,"activation":"relu","out":40},
  {"kind":"tree","mode":"path","depth":7,"activation":"gelu","out":40},
  {"kind":"experts","experts":4,"top_k":2,"width":16,"activation":"silu","gated":true,"out":12}]})";

struct Fixture {
  TempDir dir;
  std::string config, weights, expected, dequantised;
};

// Writes the config, synthesizes weights and lets NumPy add ties and write its expectations.
void Prepare(Fixture& f, const std::string& config_text) {
  f.config = f.dir.File("model.json");
  f.weights = f.dir.File("weights.npz");
  f.expected = f.dir.File("expected.npz");
  f.dequantised = f.dir.File("dequantised.npz");
  WriteFile(f.config, config_text);
  auto r = Run(SprigCli() + " synth " + Quote(f.config) + " -o " + Quote(f.weights) + " --seed 3");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  r = Run(Quote(Python()) + " " +
          Quote(std::string(SPRIG_SOURCE_DIR) + "/tests/python/storage_reference.py") + " " +
          Quote(f.weights) + " " + Quote(f.expected) + " " + Quote(f.dequantised));
  ASSERT_EQ(r.exit_code, 0) << r.output;
}

std::string Pack(const Fixture& f, const std::string& weights, const std::string& name,
                 const std::string& options) {
  const std::string out = f.dir.File(name);
  auto r = Run(SprigCli() + " pack " + Quote(f.config) + " " + Quote(weights) + " -o " +
               Quote(out) + " --force " + options);
  EXPECT_EQ(r.exit_code, 0) << r.output;
  return out;
}

const io::NdArray& Expected(const io::TensorArchive& a, const std::string& name) {
  const io::NdArray* array = a.Find(name);
  if (array == nullptr) {
    ADD_FAILURE() << "storage_reference.py wrote no " << name;
    static const io::NdArray empty;
    return empty;
  }
  return *array;
}

bool IsBias(const std::string& name) {
  return name.size() >= 4 && name.compare(name.size() - 4, 4, "bias") == 0;
}

std::vector<float> Floats(const io::NdArray& a) {
  std::vector<float> v(a.elements());
  if (a.type == io::ElementType::kF32) std::memcpy(v.data(), a.data, v.size() * sizeof(float));
  return v;
}

TEST(StorageInt8, ValuesAndScalesEqualNumPy) {
  Fixture f;
  ASSERT_NO_FATAL_FAILURE(Prepare(f, kStackConfig));
  const std::string path = Pack(f, f.weights, "i8.sprig", "--dtype i8");
  auto file = format::ModelFile::Open(path);
  ASSERT_TRUE(file.ok()) << file.status().message();
  auto expected = io::TensorArchive::Open(f.expected);
  ASSERT_TRUE(expected.ok()) << expected.status().message();
  size_t checked = 0;
  for (const format::TensorInfo& t : (*file)->tensors()) {
    if (IsBias(t.name)) {
      EXPECT_EQ(t.dtype, DType::kF32) << t.name;  // biases stay float32
      continue;
    }
    ASSERT_EQ(t.dtype, DType::kI8) << t.name;
    const std::vector<float> q = Floats(Expected(*expected, t.name + ".q"));
    const std::vector<float> scales = Floats(Expected(*expected, t.name + ".scale"));
    const std::vector<uint8_t> stored = (*file)->Gather(t);
    ASSERT_EQ(stored.size(), q.size()) << t.name;
    int mismatches = 0;
    for (size_t i = 0; i < q.size(); ++i) {
      if (static_cast<float>(static_cast<int8_t>(stored[i])) != q[i] && ++mismatches <= 3) {
        ADD_FAILURE() << t.name << " value " << i << ": stored " << int(int8_t(stored[i]))
                      << ", NumPy " << q[i];
      }
    }
    const size_t per_row = t.scale_row_bytes / sizeof(float);
    ASSERT_EQ(per_row * t.shape[0], scales.size()) << t.name;
    for (uint64_t row = 0; row < t.shape[0]; ++row) {
      const float* s = (*file)->RowScales(t, row);
      for (size_t j = 0; j < per_row; ++j) {
        EXPECT_EQ(s[j], scales[row * per_row + j]) << t.name << " scale " << row * per_row + j;
      }
    }
    // The packer's own error measure is kept: at most half a step (scale / 2) per value.
    EXPECT_GT(t.error_max_abs, 0.0f) << t.name;
    EXPECT_LT(t.error_rel_rms, 0.02f) << t.name;
    ++checked;
  }
  EXPECT_EQ(checked, 11u);  // every weight matrix of the four layers
  EXPECT_TRUE((*file)->VerifyChecksums().ok());
}

TEST(StorageF16, ValuesEqualNumPy) {
  Fixture f;
  ASSERT_NO_FATAL_FAILURE(Prepare(f, kStackConfig));
  const std::string path = Pack(f, f.weights, "f16.sprig", "--dtype f16");
  auto file = format::ModelFile::Open(path);
  ASSERT_TRUE(file.ok()) << file.status().message();
  auto expected = io::TensorArchive::Open(f.expected);
  ASSERT_TRUE(expected.ok()) << expected.status().message();
  for (const format::TensorInfo& t : (*file)->tensors()) {
    if (IsBias(t.name)) continue;
    ASSERT_EQ(t.dtype, DType::kF16) << t.name;
    const io::NdArray& want = Expected(*expected, t.name + ".f16");
    ASSERT_EQ(want.type, io::ElementType::kF16) << t.name;
    const std::vector<uint8_t> stored = (*file)->Gather(t);
    ASSERT_EQ(stored.size(), want.nbytes()) << t.name;
    EXPECT_EQ(std::memcmp(stored.data(), want.data, stored.size()), 0) << t.name;
  }
}

// Runs `rows` deterministic input rows through a model; returns outputs and the routes.
struct RunResult {
  std::vector<float> y;
  Routes routes;
};
// Row k of the inputs is the same whichever call it is in: rows [first, first + rows).
RunResult RunRows(const std::string& path, size_t first, size_t rows, size_t in, size_t out) {
  RunResult r;
  auto session = OpenSession(path);
  if (!session) return r;
  std::vector<float> x(rows * in);
  for (size_t i = 0; i < x.size(); ++i) x[i] = std::sin(0.37f * float(first * in + i)) * 1.5f;
  r.y.resize(rows * out);
  Status s = session->forward(x.data(), rows, r.y.data(), &r.routes);
  EXPECT_TRUE(s.ok()) << s.message();
  return r;
}

// An int8 model computes with q·scale: it must equal a float32 model packed from the
// dequantised weights (NumPy's q·scale) up to float32 rounding, row by row and route by route.
TEST(StorageInt8, ModelEqualsFloatModelOfDequantisedWeights) {
  Fixture f;
  ASSERT_NO_FATAL_FAILURE(Prepare(f, kStackConfig));
  const std::string i8 = Pack(f, f.weights, "i8.sprig", "--dtype i8");
  const std::string f32 = Pack(f, f.dequantised, "deq.sprig", "--dtype f32");
  constexpr size_t kRows = 64;
  for (size_t batch : {size_t{1}, kRows}) {
    RunResult a, b;
    if (batch == 1) {
      // One row per call takes the single-row (matrix-vector, prefetching) paths.
      for (size_t r = 0; r < 8; ++r) {
        RunResult one_a = RunRows(i8, r, 1, 40, 12), one_b = RunRows(f32, r, 1, 40, 12);
        a.y.insert(a.y.end(), one_a.y.begin(), one_a.y.end());
        b.y.insert(b.y.end(), one_b.y.begin(), one_b.y.end());
      }
    } else {
      a = RunRows(i8, 0, kRows, 40, 12);
      b = RunRows(f32, 0, kRows, 40, 12);
      ASSERT_EQ(a.routes.layers.size(), b.routes.layers.size());
      for (size_t l = 0; l < a.routes.layers.size(); ++l) {
        EXPECT_EQ(a.routes.layers[l].choices, b.routes.layers[l].choices) << "layer " << l;
      }
    }
    ASSERT_EQ(a.y.size(), b.y.size());
    for (size_t i = 0; i < a.y.size(); ++i) {
      EXPECT_NEAR(a.y[i], b.y[i], 1e-4 * (1.0 + std::fabs(b.y[i])))
          << "batch " << batch << " " << i;
    }
  }
}

// The same for a transformer: int8 embeddings (looked up row by row and tied to the head),
// positions, attention projections and routed blocks.
TEST(StorageInt8, TransformerEqualsFloatModelOfDequantisedWeights) {
  Fixture f;
  ASSERT_NO_FATAL_FAILURE(Prepare(f, R"({"family":"transformer","vocab_size":48,"d_model":16,
    "n_heads":4,"max_seq":24,"positions":"learned","tie_embeddings":true,"layers":[
    {"kind":"tree","mode":"leaf","depth":2,"leaf_width":8,"activation":"gelu"},
    {"kind":"tree","mode":"path","depth":5,"activation":"relu"},
    {"kind":"experts","experts":4,"top_k":2,"width":8,"activation":"silu"}]})"));
  const std::string i8 = Pack(f, f.weights, "i8.sprig", "--dtype i8");
  const std::string f32 = Pack(f, f.dequantised, "deq.sprig", "--dtype f32");
  constexpr size_t kBatch = 2, kLength = 20, kVocab = 48;
  std::vector<int32_t> tokens(kBatch * kLength);
  for (size_t i = 0; i < tokens.size(); ++i) tokens[i] = int32_t((i * 7 + 3) % kVocab);
  std::vector<float> a(kBatch * kLength * kVocab), b(a.size());
  Routes ra, rb;
  auto sa = OpenSession(i8), sb = OpenSession(f32);
  ASSERT_TRUE(sa && sb);
  ASSERT_TRUE(sa->forward_tokens(tokens.data(), kBatch, kLength, a.data(), &ra).ok());
  ASSERT_TRUE(sb->forward_tokens(tokens.data(), kBatch, kLength, b.data(), &rb).ok());
  ASSERT_EQ(ra.layers.size(), rb.layers.size());
  for (size_t l = 0; l < ra.layers.size(); ++l) {
    EXPECT_EQ(ra.layers[l].choices, rb.layers[l].choices) << "block " << l;
  }
  for (size_t i = 0; i < a.size(); ++i) {
    EXPECT_NEAR(a[i], b[i], 1e-4 * (1.0 + std::fabs(b[i]))) << i;
  }
  // One decode step takes the single-token paths (matrix-vector products, the tied head).
  std::vector<float> la(kVocab), lb(kVocab);
  ASSERT_TRUE(sa->append_tokens(tokens.data(), 1, la.data()).ok());
  ASSERT_TRUE(sb->append_tokens(tokens.data(), 1, lb.data()).ok());
  for (size_t i = 0; i < kVocab; ++i) EXPECT_NEAR(la[i], lb[i], 1e-4 * (1.0 + std::fabs(lb[i])));
}

// Replaces the one occurrence of the 8-byte little-endian `from` inside the header of `bytes`
// with `to` and makes the header checksum valid again, so that only the loader's own range
// checks stand between the edited field and the reader. Returns "" when `from` is not there
// exactly once.
std::string EditHeaderU64(std::string bytes, uint64_t from, uint64_t to) {
  char a[8], b[8];
  std::memcpy(a, &from, 8);
  std::memcpy(b, &to, 8);
  return EditHeaderBytes(bytes, std::string(a, 8), std::string(b, 8));
}

// Hostile int8 scale locations are refused at open with the tensor's name.
TEST(StorageInt8, ScalesOutsideTheirSectionOrRecordAreRefused) {
  Fixture f;
  ASSERT_NO_FATAL_FAILURE(Prepare(f, kStackConfig));
  const std::string path = Pack(f, f.weights, "i8.sprig", "--dtype i8");
  const std::string bytes = ReadFile(path);
  auto file = format::ModelFile::Open(path);
  ASSERT_TRUE(file.ok()) << file.status().message();
  const format::TensorInfo* hot = (*file)->Find("layers.0.fc1.weight");
  const format::TensorInfo* rec = (*file)->Find("layers.3.experts.fc2.weight");
  ASSERT_TRUE(hot && rec && hot->scales_hot && rec->record_set >= 0);
  const uint64_t hot_offset = static_cast<uint64_t>(hot->scales_hot - (*file)->base());
  struct Edit {
    const char* what;
    uint64_t from, to;
    const char* tensor;
    const char* message;
  } edits[] = {
      {"hot scales past the end", hot_offset, bytes.size(), "layers.0.fc1.weight",
       "scales outside the hot section"},
      {"hot scales misaligned", hot_offset, hot_offset + 2, "layers.0.fc1.weight",
       "scales outside the hot section"},
      {"record scales past the record", rec->scales_part_offset,
       (*file)->record_sets()[rec->record_set].record_size, "layers.3.experts.fc2.weight",
       "scales outside its record"},
  };
  for (const Edit& e : edits) {
    const std::string edited = EditHeaderU64(bytes, e.from, e.to);
    ASSERT_FALSE(edited.empty()) << e.what << ": the field's value is not unique in the header";
    const std::string bad = f.dir.File("bad.sprig");
    WriteFile(bad, edited);
    auto opened = format::ModelFile::Open(bad);
    ASSERT_FALSE(opened.ok()) << e.what;
    EXPECT_NE(opened.status().message().find(e.tensor), std::string::npos)
        << e.what << ": " << opened.status().message();
    EXPECT_NE(opened.status().message().find(e.message), std::string::npos)
        << e.what << ": " << opened.status().message();
  }
}

// Per-part types go where schema/README.md says, and packing twice gives the same bytes.
TEST(StoragePlan, PartsAndReproducibleBytes) {
  Fixture f;
  ASSERT_NO_FATAL_FAILURE(Prepare(f, kStackConfig));
  const std::string options = "--dtype-nodes f32 --dtype-records i8 --dtype-dense f16";
  const std::string a = Pack(f, f.weights, "a.sprig", options);
  const std::string b = Pack(f, f.weights, "b.sprig", options);
  const std::string bytes = ReadFile(a);
  EXPECT_FALSE(bytes.empty());
  EXPECT_TRUE(bytes == ReadFile(b)) << "two packs with the same options differ";
  auto file = format::ModelFile::Open(a);
  ASSERT_TRUE(file.ok()) << file.status().message();
  auto type_of = [&](const std::string& name) {
    const format::TensorInfo* t = (*file)->Find(name);
    EXPECT_NE(t, nullptr) << name;
    return t ? t->dtype : DType::kF32;
  };
  EXPECT_EQ(type_of("layers.0.fc1.weight"), DType::kF16);    // dense
  EXPECT_EQ(type_of("layers.1.nodes.weight"), DType::kF32);  // leaf-tree routing
  EXPECT_EQ(type_of("layers.1.leaves.fc1.weight"), DType::kI8);
  EXPECT_EQ(type_of("layers.2.nodes.weight"), DType::kF32);  // path-tree routing
  EXPECT_EQ(type_of("layers.2.nodes.out"), DType::kI8);
  EXPECT_EQ(type_of("layers.3.router.weight"), DType::kF32);
  EXPECT_EQ(type_of("layers.3.experts.gate.weight"), DType::kI8);
  EXPECT_EQ(type_of("layers.1.leaves.fc1.bias"), DType::kF32);
}

TEST(StoragePlan, BadTypeIsRefusedWithTheOption) {
  Fixture f;
  ASSERT_NO_FATAL_FAILURE(Prepare(f, kStackConfig));
  auto r = sprig::testing::Run(SprigCli() + " pack " + Quote(f.config) + " " + Quote(f.weights) +
                               " -o " + Quote(f.dir.File("x.sprig")) + " --dtype-records int4");
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("--dtype-records"), std::string::npos) << r.output;
}

}  // namespace
}  // namespace sprig::testing
