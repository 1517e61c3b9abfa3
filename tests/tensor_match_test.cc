// Matching weights against a config (docs/input-contract.md) and the NaN/Inf scan behind
// it.
#include <gtest/gtest.h>

#include <algorithm>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <map>
#include <random>
#include <string>
#include <vector>

#include "converter/config/config_json.h"
#include "converter/config/finite_check.h"
#include "converter/config/tensor_match.h"
#include "support/test_util.h"

namespace sprig::convert {
namespace {

using io::ElementType;
using io::NdArray;

#define EXPECT_CONTAINS(text, part) \
  EXPECT_NE(std::string(text).find(part), std::string::npos) << "message: " << (text)

NdArray Zeros(const std::string& name, ElementType type, std::vector<uint64_t> shape) {
  uint64_t n = 1;
  for (uint64_t d : shape) n *= d;
  // All-zero bits are +0 in every IEEE 754-2008 binary format and in bfloat16: finite.
  return NdArray::Owned(name, type, std::move(shape),
                        std::vector<uint8_t>(n * io::ElementSize(type), 0));
}

// Writes `bits` (a pattern of sizeof(Bits) bytes) into element `index` of `array`.
template <typename Bits>
NdArray WithElement(const NdArray& array, uint64_t index, Bits bits) {
  std::vector<uint8_t> bytes(array.data, array.data + array.nbytes());
  std::memcpy(bytes.data() + index * sizeof(Bits), &bits, sizeof(Bits));
  return NdArray::Owned(array.name, array.type, array.shape, std::move(bytes));
}

ModelConfig Config(const std::string& text) {
  auto c = ParseConfig(text, "config.json");
  EXPECT_TRUE(c.ok()) << c.status().message();
  return c.ok() ? *c : ModelConfig{};
}

// A gated dense layer (in 4, width 8, out 3) and a leaf-mode tree (depth 2, leaf_width 5, out 2).
ModelConfig SmallStack() {
  return Config(R"({"family":"stack","input_dim":4,"layers":[
      {"kind":"dense","width":8,"gated":true,"out":3},
      {"kind":"tree","depth":2,"leaf_width":5,"out":2}]})");
}

// Zero arrays for every tensor the config expects.
std::vector<NdArray> ArraysFor(const ModelConfig& config, ElementType type = ElementType::kF32) {
  std::vector<NdArray> arrays;
  for (const TensorSpec& spec : ExpectedTensors(config)) {
    arrays.push_back(Zeros(spec.name, type, spec.shape));
  }
  return arrays;
}

using RenameMap = std::map<std::string, std::string>;

std::string ErrorOf(const ModelConfig& config, const std::vector<NdArray>& arrays,
                    const RenameMap& rename = {}) {
  auto r = MatchTensors(config, arrays, "weights.npz", RenameMapping(rename, "map.json"));
  if (r.ok()) return "OK";
  EXPECT_EQ(r.status().code(), Status::Code::kInvalidArgument);
  return r.status().message();
}

NdArray* Find(std::vector<NdArray>& arrays, const std::string& name) {
  for (NdArray& a : arrays) {
    if (a.name == name) return &a;
  }
  ADD_FAILURE() << "no array " << name;
  return nullptr;
}

// ---------------------------------------------------------------------------------------------
// Successful matches.

// Names and shapes written out from the table in docs/input-contract.md (dense:
// fc1/gate/fc2; tree leaf: nodes, leaves.fc1, leaves.fc2), not taken from the code under test.
TEST(TensorMatch, DesignTableNames) {
  const ModelConfig config = SmallStack();
  std::vector<NdArray> arrays = {
      Zeros("layers.1.leaves.fc2.bias", ElementType::kF32, {4, 2}),
      Zeros("layers.0.fc1.weight", ElementType::kF32, {8, 4}),
      Zeros("layers.0.fc1.bias", ElementType::kF32, {8}),
      Zeros("layers.0.gate.weight", ElementType::kF32, {8, 4}),
      Zeros("layers.0.gate.bias", ElementType::kF32, {8}),
      Zeros("layers.0.fc2.weight", ElementType::kF32, {3, 8}),
      Zeros("layers.0.fc2.bias", ElementType::kF32, {3}),
      Zeros("layers.1.nodes.weight", ElementType::kF32, {3, 3}),
      Zeros("layers.1.nodes.bias", ElementType::kF32, {3}),
      Zeros("layers.1.leaves.fc1.weight", ElementType::kF32, {4, 5, 3}),
      Zeros("layers.1.leaves.fc1.bias", ElementType::kF32, {4, 5}),
      Zeros("layers.1.leaves.fc2.weight", ElementType::kF32, {4, 2, 5}),
  };
  auto r = MatchTensors(config, arrays, "weights.npz", {});
  ASSERT_TRUE(r.ok()) << r.status().message();
  ASSERT_EQ(r->size(), arrays.size());
  const auto specs = ExpectedTensors(config);
  for (size_t i = 0; i < specs.size(); ++i) {
    // In spec order, each pointing at the array of that name.
    EXPECT_EQ((*r)[i].spec.name, specs[i].name);
    ASSERT_NE((*r)[i].source, nullptr);
    EXPECT_EQ((*r)[i].source->name, specs[i].name);
    EXPECT_GE((*r)[i].source, arrays.data());
    EXPECT_LT((*r)[i].source, arrays.data() + arrays.size());
  }
}

TEST(TensorMatch, AcceptsEveryFloatType) {
  const ModelConfig config = SmallStack();
  for (ElementType t :
       {ElementType::kF64, ElementType::kF32, ElementType::kF16, ElementType::kBF16}) {
    auto arrays = ArraysFor(config, t);
    std::reverse(arrays.begin(), arrays.end());  // file order does not matter
    auto r = MatchTensors(config, arrays, "weights.npz", {});
    ASSERT_TRUE(r.ok()) << io::ElementTypeName(t) << ": " << r.status().message();
    EXPECT_EQ(r->front().source, &arrays.back());
  }
}

TEST(TensorMatch, TransformerTensors) {
  const ModelConfig config = Config(R"({"family":"transformer","vocab_size":256,"d_model":8,
      "n_heads":2,"max_seq":4,"head":{"kind":"classifier","classes":3},
      "layers":[{"kind":"experts","experts":3,"top_k":1,"width":4}]})");
  auto arrays = ArraysFor(config, ElementType::kBF16);
  EXPECT_EQ(ErrorOf(config, arrays), "OK");
  EXPECT_NE(Find(arrays, "blocks.0.ffn.experts.fc1.weight"), nullptr);
  Find(arrays, "head.weight")->shape = {256, 8};  // an lm-shaped head for a classifier
  EXPECT_EQ(ErrorOf(config, arrays),
            "weights.npz: head.weight has shape [256, 8] but the "
            "config needs [3, 8]");
}

// ---------------------------------------------------------------------------------------------
// Problems.

TEST(TensorMatch, MissingTensorNamesShape) {
  const ModelConfig config = SmallStack();
  auto arrays = ArraysFor(config);
  arrays.erase(arrays.begin());  // layers.0.fc1.weight
  EXPECT_EQ(ErrorOf(config, arrays),
            "weights.npz: tensor layers.0.fc1.weight with shape [8, 4] is missing");
}

TEST(TensorMatch, PrefixedNamesSuggestRename) {
  const ModelConfig config = SmallStack();
  const size_t n = ExpectedTensors(config).size();
  for (const std::string prefix : {"model.", "module."}) {
    auto arrays = ArraysFor(config);
    for (NdArray& a : arrays) a.name = prefix + a.name;
    const std::string msg = ErrorOf(config, arrays);
    EXPECT_CONTAINS(msg,
                    "weights.npz: tensor layers.0.fc1.weight with shape [8, 4] is missing; "
                    "the file has " +
                        prefix + "layers.0.fc1.weight");
    EXPECT_CONTAINS(msg, "--map FILE");
    EXPECT_CONTAINS(msg, "{\"" + prefix + "layers.0.fc1.weight\": \"layers.0.fc1.weight\"}");
    EXPECT_CONTAINS(msg, "prefix \"" + prefix + "\"");
    // Every expected tensor is missing and every array unexpected.
    EXPECT_CONTAINS(msg, "(and " + std::to_string(2 * n - 1) + " more problems)");

    // The suggested map fixes it.
    RenameMap rename;
    for (const NdArray& a : arrays) rename[a.name] = a.name.substr(prefix.size());
    EXPECT_EQ(ErrorOf(config, arrays, rename), "OK");
  }
}

TEST(TensorMatch, CloseNameSuggestsRename) {
  const ModelConfig config = SmallStack();
  auto arrays = ArraysFor(config);
  Find(arrays, "layers.0.fc2.bias")->name = "layers.0.fc2.biass";
  EXPECT_EQ(
      ErrorOf(config, arrays),
      "weights.npz: tensor layers.0.fc2.bias with shape [3] is missing; the file has "
      "layers.0.fc2.biass: map its names to ours with --map FILE, a JSON object such as "
      "{\"layers.0.fc2.biass\": \"layers.0.fc2.bias\"} (docs/mapping.md) (and 1 more problem)");
  // Nothing close: no hint.
  Find(arrays, "layers.0.fc2.biass")->name = "unrelated";
  EXPECT_EQ(ErrorOf(config, arrays),
            "weights.npz: tensor layers.0.fc2.bias with shape [3] is missing (and 1 more problem)");
}

TEST(TensorMatch, ExtraTensor) {
  const ModelConfig config = SmallStack();
  auto arrays = ArraysFor(config);
  arrays.push_back(Zeros("layers.0.fc3.weight", ElementType::kF32, {2, 2}));
  EXPECT_EQ(ErrorOf(config, arrays),
            "weights.npz: unexpected tensor layers.0.fc3.weight with shape [2, 2]: the config "
            "has no tensor of that name");
  // A name that needs quoting is escaped.
  arrays.back().name = "bad\nname\"";
  EXPECT_EQ(ErrorOf(config, arrays),
            "weights.npz: unexpected tensor \"bad\\x0Aname\\\"\" with shape [2, 2]: the config "
            "has no tensor of that name");
}

TEST(TensorMatch, Misshaped) {
  const ModelConfig config = Config(R"({"family":"stack","input_dim":64,
                                        "layers":[{"kind":"dense","width":256,"out":10}]})");
  auto arrays = ArraysFor(config);
  *Find(arrays, "layers.0.fc1.weight") = Zeros("layers.0.fc1.weight", ElementType::kF32, {64, 32});
  EXPECT_EQ(ErrorOf(config, arrays),
            "weights.npz: layers.0.fc1.weight has shape [64, 32] but the config needs [256, 64]");
  // Same element count, other layout: still wrong (a transposed weight).
  *Find(arrays, "layers.0.fc1.weight") = Zeros("layers.0.fc1.weight", ElementType::kF32, {64, 256});
  EXPECT_EQ(ErrorOf(config, arrays),
            "weights.npz: layers.0.fc1.weight has shape [64, 256] but the config needs [256, 64]");
  *Find(arrays, "layers.0.fc1.weight") = Zeros("layers.0.fc1.weight", ElementType::kF32, {});
  EXPECT_EQ(ErrorOf(config, arrays),
            "weights.npz: layers.0.fc1.weight has shape [] but the config needs [256, 64]");
}

TEST(TensorMatch, UnsupportedElementType) {
  const ModelConfig config = SmallStack();
  for (ElementType t : {ElementType::kI64, ElementType::kI32, ElementType::kI8, ElementType::kU8,
                        ElementType::kU16, ElementType::kBool}) {
    auto arrays = ArraysFor(config);
    NdArray* a = Find(arrays, "layers.0.fc2.weight");
    *a = Zeros(a->name, t, a->shape);
    EXPECT_EQ(ErrorOf(config, arrays),
              std::string("weights.npz: layers.0.fc2.weight has element type ") +
                  io::ElementTypeName(t) +
                  ", but weights must be float64, float32, float16 or bfloat16");
  }
}

// Bit patterns from IEEE 754-2008 §3.4 (binary64/binary32/binary16: sign, all-ones exponent,
// significand) and bfloat16 (the top half of binary32): a quiet NaN has the significand's top
// bit set (§6.2.1), a signalling NaN only a lower one, infinities a zero significand.
TEST(TensorMatch, NonFiniteValuesNamed) {
  const ModelConfig config = SmallStack();
  struct Case {
    ElementType type;
    uint64_t bits;
    const char* kind;
  };
  const Case cases[] = {
      {ElementType::kF64, 0x7FF8000000000000ull, "NaN"},  // quiet NaN
      {ElementType::kF64, 0x7FF0000000000001ull, "NaN"},  // signalling NaN
      {ElementType::kF64, 0x7FF0000000000000ull, "+Inf"},
      {ElementType::kF64, 0xFFF0000000000000ull, "-Inf"},
      {ElementType::kF32, 0x7FC00000u, "NaN"},
      {ElementType::kF32, 0xFF800001u, "NaN"},  // negative signalling NaN
      {ElementType::kF32, 0x7F800000u, "+Inf"},
      {ElementType::kF32, 0xFF800000u, "-Inf"},
      {ElementType::kF16, 0x7E00u, "NaN"},
      {ElementType::kF16, 0x7C01u, "NaN"},
      {ElementType::kF16, 0x7C00u, "+Inf"},
      {ElementType::kF16, 0xFC00u, "-Inf"},
      {ElementType::kBF16, 0x7FC0u, "NaN"},
      {ElementType::kBF16, 0x7F81u, "NaN"},
      {ElementType::kBF16, 0x7F80u, "+Inf"},
      {ElementType::kBF16, 0xFF80u, "-Inf"},
  };
  // leaves.fc1.weight is [4, 5, 3]; flat index 37 is element [2, 2, 1].
  for (const Case& c : cases) {
    auto arrays = ArraysFor(config, c.type);
    NdArray* a = Find(arrays, "layers.1.leaves.fc1.weight");
    switch (io::ElementSize(c.type)) {
      case 8:
        *a = WithElement<uint64_t>(*a, 37, c.bits);
        break;
      case 4:
        *a = WithElement<uint32_t>(*a, 37, static_cast<uint32_t>(c.bits));
        break;
      default:
        *a = WithElement<uint16_t>(*a, 37, static_cast<uint16_t>(c.bits));
        break;
    }
    EXPECT_EQ(ErrorOf(config, arrays),
              std::string("weights.npz: layers.1.leaves.fc1.weight has a ") + c.kind +
                  " at flat index 37 (element [2, 2, 1]); weights must be finite")
        << io::ElementTypeName(c.type) << " " << std::hex << c.bits;
  }
}

TEST(TensorMatch, RenameMap) {
  const ModelConfig config = SmallStack();
  auto arrays = ArraysFor(config);
  Find(arrays, "layers.0.fc1.weight")->name = "encoder.w1";
  // Used entries rename, entries for names the file lacks are ignored.
  EXPECT_EQ(ErrorOf(config, arrays, {{"encoder.w1", "layers.0.fc1.weight"}, {"absent", "x"}}),
            "OK");
  EXPECT_EQ(ErrorOf(config, arrays, {{"encoder.w1", "layers.0.fc9.weight"}}),
            "weights.npz: tensor layers.0.fc1.weight with shape [8, 4] is missing; the mapping "
            "file renames encoder.w1 to layers.0.fc9.weight: should that be layers.0.fc1.weight? "
            "(and 1 more problem)");
  // A target outside the config, when nothing else is wrong.
  arrays.push_back(Zeros("spare", ElementType::kF32, {1}));
  Find(arrays, "encoder.w1")->name = "layers.0.fc1.weight";
  EXPECT_EQ(ErrorOf(config, arrays, {{"spare", "layers.9.fc1.weight"}}),
            "weights.npz: the mapping file renames spare to layers.9.fc1.weight, which is not a "
            "tensor this config has");
  // Renamed onto a name the file already has.
  EXPECT_EQ(ErrorOf(config, arrays, {{"spare", "layers.0.fc1.weight"}}),
            "weights.npz: both layers.0.fc1.weight and layers.0.fc1.weight (renamed from spare) "
            "would be tensor layers.0.fc1.weight; check the mapping file");
  // Two sources renamed to one target: the mapping refuses it, naming both entries.
  Find(arrays, "layers.0.fc1.weight")->name = "a";
  EXPECT_EQ(
      ErrorOf(config, arrays, {{"a", "layers.0.fc1.weight"}, {"spare", "layers.0.fc1.weight"}}),
      "map.json: entries \"a\" and \"spare\" both give layers.0.fc1.weight (from a and spare); "
      "each of our names may be produced once");
  // The renamed array's shape is checked under both names.
  Find(arrays, "a")->shape = {4, 8};
  arrays.pop_back();
  EXPECT_EQ(ErrorOf(config, arrays, {{"a", "layers.0.fc1.weight"}}),
            "weights.npz: layers.0.fc1.weight (renamed from a) has shape [4, 8] but the config "
            "needs [8, 4]");
}

TEST(TensorMatch, FirstProblemInSpecOrderAndCount) {
  const ModelConfig config = SmallStack();
  auto arrays = ArraysFor(config);
  // Four problems, added in an order unlike the spec order.
  arrays.push_back(Zeros("extra", ElementType::kF32, {1}));  // after all specs
  Find(arrays, "layers.1.nodes.bias")->shape = {4};          // spec 7
  *Find(arrays, "layers.0.gate.bias") =
      WithElement<uint32_t>(*Find(arrays, "layers.0.gate.bias"), 5, 0x7FC00000u);  // spec 3, NaN
  arrays.erase(arrays.begin() + 4);  // spec 4: fc2.weight
  EXPECT_EQ(ErrorOf(config, arrays),
            "weights.npz: layers.0.gate.bias has a NaN at flat index 5 (element [5]); weights "
            "must be finite (and 3 more problems)");
}

class TempDir {
 public:
  TempDir() {
    path_ = std::filesystem::temp_directory_path() /
            ("sprig_match_test_" + std::to_string(sprig::testing::ProcessId()) + "_" +
             ::testing::UnitTest::GetInstance()->current_test_info()->name());
    std::filesystem::create_directories(path_);
  }
  ~TempDir() { std::filesystem::remove_all(path_); }
  std::string Path(const std::string& name) const { return (path_ / name).string(); }

 private:
  std::filesystem::path path_;
};

// The archive overload reads the arrays of an opened file and names the file in errors.
TEST(TensorMatch, ArchiveOverloadNamesTheFile) {
  TempDir dir;
  const ModelConfig config = SmallStack();
  auto arrays = ArraysFor(config, ElementType::kF16);
  const std::string path = dir.Path("weights.npz");
  ASSERT_TRUE(io::WriteNpz(path, arrays, /*compress=*/false, /*overwrite=*/true).ok());
  auto archive = io::TensorArchive::Open(path);
  ASSERT_TRUE(archive.ok()) << archive.status().message();
  auto matched = MatchTensors(config, *archive, {});
  ASSERT_TRUE(matched.ok()) << matched.status().message();
  EXPECT_EQ(matched->front().source, archive->Find(matched->front().spec.name));
  auto renamed = MatchTensors(config, *archive,
                              RenameMapping({{"layers.0.fc1.weight", "layers.0.fc1.weigth"}}));
  ASSERT_FALSE(renamed.ok());
  EXPECT_EQ(renamed.status().message(),
            path +
                ": tensor layers.0.fc1.weight with shape [8, 4] is missing; the mapping file "
                "renames layers.0.fc1.weight to layers.0.fc1.weigth: should that be "
                "layers.0.fc1.weight? (and 1 more problem)");
}

// ---------------------------------------------------------------------------------------------
// The finite scan against NumPy and PyTorch.

template <typename T>
void WriteFile(const std::string& path, const std::vector<T>& values) {
  std::ofstream(path, std::ios::binary)
      .write(reinterpret_cast<const char*>(values.data()),
             static_cast<std::streamsize>(values.size() * sizeof(T)));
}

std::vector<uint8_t> ReadFile(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  return std::vector<uint8_t>(std::istreambuf_iterator<char>(in), {});
}

// The classes numpy/torch give each bit pattern: 0 finite, 1 NaN, 2 +Inf, 3 -Inf.
// Source: numpy.isnan / numpy.isposinf / numpy.isneginf on numpy.float16, numpy.float32 and
// numpy.float64 views of the bits; torch.bfloat16 views converted to float32 for bfloat16.
constexpr char kClassifyScript[] = R"PY(
import sys
import numpy as np
import torch

d = sys.argv[1]

def classify(x):
    out = np.zeros(x.shape, np.uint8)
    out[np.isnan(x)] = 1
    out[np.isposinf(x)] = 2
    out[np.isneginf(x)] = 3
    return out

bits16 = np.arange(65536, dtype=np.uint16)
classify(bits16.view(np.float16)).tofile(d + "/f16.bin")
bf16 = torch.from_numpy(bits16.view(np.int16).copy()).view(torch.bfloat16)
classify(bf16.to(torch.float32).numpy()).tofile(d + "/bf16.bin")
classify(np.fromfile(d + "/p32.bin", dtype="<u4").view(np.float32)).tofile(d + "/f32.bin")
classify(np.fromfile(d + "/p64.bin", dtype="<u8").view(np.float64)).tofile(d + "/f64.bin")
)PY";

uint8_t ClassOf(const std::optional<NonFiniteValue>& v) {
  if (!v) return 0;
  switch (v->kind) {
    case NonFiniteKind::kNaN:
      return 1;
    case NonFiniteKind::kPositiveInfinity:
      return 2;
    case NonFiniteKind::kNegativeInfinity:
      return 3;
  }
  return 255;
}

// Checks FindNonFinite on every pattern alone, then on all of them as one array: scanning from
// just after each hit must land on exactly the next pattern the reference calls non-finite.
template <typename Bits>
void CheckAgainstReference(ElementType type, const std::vector<Bits>& patterns,
                           const std::vector<uint8_t>& expected) {
  ASSERT_EQ(patterns.size(), expected.size()) << io::ElementTypeName(type);
  for (size_t i = 0; i < patterns.size(); ++i) {
    const auto r = FindNonFinite(type, reinterpret_cast<const uint8_t*>(&patterns[i]), 1);
    ASSERT_EQ(ClassOf(r), expected[i]) << io::ElementTypeName(type) << " bits 0x" << std::hex
                                       << static_cast<uint64_t>(patterns[i]);
  }
  const uint8_t* data = reinterpret_cast<const uint8_t*>(patterns.data());
  uint64_t from = 0, hits = 0;
  while (true) {
    const auto r = FindNonFinite(type, data + from * sizeof(Bits), patterns.size() - from);
    uint64_t next = from;
    while (next < expected.size() && expected[next] == 0) ++next;
    if (!r) {
      ASSERT_EQ(next, expected.size()) << io::ElementTypeName(type) << " missed index " << next;
      break;
    }
    ASSERT_EQ(from + r->index, next) << io::ElementTypeName(type);
    ASSERT_EQ(ClassOf(r), expected[next]);
    from = next + 1;
    ++hits;
  }
  EXPECT_GT(hits, 0u);
}

TEST(TensorMatchFinite, AgreesWithNumpyAndTorch) {
  TempDir dir;
  // Random binary32/binary64 patterns, a third of them with an all-ones exponent, plus the
  // edges around it (largest finite, infinities, NaN extremes) with both signs.
  std::mt19937_64 rng(7);
  std::vector<uint32_t> p32 = {0x00000000u, 0x80000000u, 0x00000001u, 0x7F7FFFFFu, 0xFF7FFFFFu,
                               0x7F800000u, 0xFF800000u, 0x7F800001u, 0x7FBFFFFFu, 0x7FC00000u,
                               0x7FFFFFFFu, 0xFFFFFFFFu, 0x00800000u};
  std::vector<uint64_t> p64 = {0,
                               0x8000000000000000ull,
                               1,
                               0x7FEFFFFFFFFFFFFFull,
                               0x7FF0000000000000ull,
                               0xFFF0000000000000ull,
                               0x7FF0000000000001ull,
                               0x7FF8000000000000ull,
                               0x7FFFFFFFFFFFFFFFull,
                               0xFFFFFFFFFFFFFFFFull};
  for (int i = 0; i < 60000; ++i) {
    uint64_t r = rng();
    uint32_t a = static_cast<uint32_t>(r), b = static_cast<uint32_t>(r >> 32);
    if (i % 3 == 0) a |= 0x7F800000u;
    p32.push_back(a);
    (void)b;
    uint64_t c = rng();
    if (i % 3 == 1) c |= 0x7FF0000000000000ull;
    p64.push_back(c);
  }
  WriteFile(dir.Path("p32.bin"), p32);
  WriteFile(dir.Path("p64.bin"), p64);
  const std::string script = dir.Path("classify.py");
  std::ofstream(script) << kClassifyScript;
  const char* python = std::getenv("SPRIG_PYTHON");
  const std::string command =
      std::string(python ? python : "/usr/bin/python3") + " " + script + " " + dir.Path("");
  ASSERT_EQ(std::system(command.c_str()), 0) << command;

  std::vector<uint16_t> all16(65536);
  for (uint32_t i = 0; i < 65536; ++i) all16[i] = static_cast<uint16_t>(i);
  CheckAgainstReference<uint16_t>(ElementType::kF16, all16, ReadFile(dir.Path("f16.bin")));
  CheckAgainstReference<uint16_t>(ElementType::kBF16, all16, ReadFile(dir.Path("bf16.bin")));
  CheckAgainstReference<uint32_t>(ElementType::kF32, p32, ReadFile(dir.Path("f32.bin")));
  CheckAgainstReference<uint64_t>(ElementType::kF64, p64, ReadFile(dir.Path("f64.bin")));
}

// One bad value anywhere (block edges, the tail after the last whole word) at any alignment.
TEST(TensorMatchFinite, FindsTheFirstAtAnyPositionAndAlignment) {
  const uint64_t n = 3 * 2048 * 4 + 5;  // several scan blocks of f16 plus a partial word
  for (size_t offset = 0; offset < 3; ++offset) {
    std::vector<uint8_t> buffer(offset + n * 2, 0);
    uint8_t* data = buffer.data() + offset;
    EXPECT_FALSE(FindNonFinite(ElementType::kF16, data, n));
    for (uint64_t at : {uint64_t{0}, uint64_t{1}, uint64_t{3}, uint64_t{4}, uint64_t{8191},
                        uint64_t{8192}, uint64_t{8193}, n - 5, n - 2, n - 1}) {
      const uint16_t inf = 0xFC00;  // binary16 -Inf (IEEE 754-2008 §3.4)
      std::memcpy(data + at * 2, &inf, 2);
      auto r = FindNonFinite(ElementType::kF16, data, n);
      ASSERT_TRUE(r) << at;
      EXPECT_EQ(r->index, at);
      EXPECT_EQ(r->kind, NonFiniteKind::kNegativeInfinity);
      // A later NaN does not hide the first.
      const uint16_t nan = 0x7E00;
      std::memcpy(data + (n - 1) * 2, &nan, 2);
      EXPECT_EQ(FindNonFinite(ElementType::kF16, data, n)->index, at);
      std::memset(data, 0, n * 2);
    }
  }
  const uint8_t bytes[8] = {0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF};
  EXPECT_FALSE(FindNonFinite(ElementType::kI64, bytes, 1));  // integers have no NaN
  EXPECT_FALSE(FindNonFinite(ElementType::kF32, bytes, 0));
}

}  // namespace
}  // namespace sprig::convert
