// schema/README.md against packed files: tests/python/schema_layout_check.py reads the preamble
// with Python's struct and zlib, and the header with the code Debian's `flatc --python` generates
// from schema/model.fbs (Debian python3-flatbuffers), checks every rule the document states, and
// compares each tensor's stored bytes with the synthesized weights (NumPy's float16 rounding for
// f16 storage; for i8 storage the document's rule recomputed with NumPy float32 arithmetic and
// np.rint, which rounds half to even, compared bit for bit for values and scales) and
// recomputes every tensor's recorded storage error. Negative controls damage one record byte,
// a reserved preamble byte and one byte of an i8 scale (with and without its checksums made
// valid again), and expect the rule each breaks.
#include <gtest/gtest.h>

#include <cstdint>
#include <cstring>
#include <string>

#include "format/model_file.h"
#include "format/preamble.h"
#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

// Every stack layer kind: dense (plain and gated), tree leaf (gated), tree path deep enough for
// two record groups (depth 9: hot levels 2, groups at levels 2 and 6), tree path small enough
// to be all hot (depth 2: no record set), experts (gated). The first layer's f32 records
// (2368 bytes: 64-byte parts of 1040 + 80 + 1040 + 52 bytes) leave page-aware placement a gap
// of 1728 bytes per two records, far over 2%, so they are packed back to back; at f32 the
// stack has record sections of both placements (checked below). The last layer's shared experts
// and gate are stored in the hot section.
constexpr const char* kStack = R"({"family":"stack","input_dim":13,"layers":[
 {"kind":"experts","experts":6,"top_k":2,"width":20,"activation":"relu","out":13},
 {"kind":"dense","width":12,"activation":"relu","out":11},
 {"kind":"dense","width":10,"activation":"silu","gated":true,"out":12},
 {"kind":"tree","mode":"leaf","depth":3,"leaf_width":5,"activation":"gelu","gated":true,"out":9},
 {"kind":"tree","mode":"path","depth":9,"activation":"gelu_tanh","out":14},
 {"kind":"experts","experts":5,"top_k":2,"width":6,"activation":"silu","gated":true,"out":7},
 {"kind":"tree","mode":"path","depth":2,"activation":"relu","out":6},
 {"kind":"tree","mode":"leaf","depth":2,"leaf_width":3,"activation":"relu","bias":false,"out":4},
 {"kind":"experts","experts":3,"top_k":1,"width":4,"activation":"gelu","router_scoring":"sigmoid",
  "shared_experts":2,"shared_width":3,"shared_gate":true,"out":5}]})";

constexpr const char* kTransformer = R"({"family":"transformer","vocab_size":64,"d_model":16,
 "n_heads":2,"max_seq":16,"head":{"kind":"lm"},"positions":"rope","norm":"rmsnorm","layers":[
 {"kind":"tree","mode":"path","depth":4,"activation":"gelu"},
 {"kind":"experts","experts":4,"top_k":2,"width":8,"activation":"silu","gated":true}]})";

// The block variants' header fields and tensors: post-norm, a norm on the embeddings, no final
// norm, some attention biases, an lm head with a transform and a bias.
constexpr const char* kTransformerVariants = R"({"family":"transformer","vocab_size":48,
 "d_model":16,"n_heads":2,"max_seq":12,"head":{"kind":"lm","transform":{},"bias":true},
 "norm_position":"post","final_norm":false,"embed_norm":true,"attn_bias":["q","v"],
 "layers":[{"kind":"tree","mode":"leaf","depth":2,"leaf_width":4,"activation":"gelu"}]})";

std::string CheckScript() {
  return std::string(SPRIG_SOURCE_DIR) + "/tests/python/schema_layout_check.py";
}

testing::CommandResult RunCheck(const std::string& model, const std::string& npz) {
  return testing::Run(testing::Python() + " " + Quote(CheckScript()) + " " + Quote(model) + " " +
                      Quote(npz));
}

struct Case {
  const char* name;
  const char* config;
  const char* dtype;
  bool float64_source = false;    // weights rewritten as float64 before packing
  bool both_placements = false;   // expect page-aware and back-to-back record sections
  const char* options = "";       // more pack options (per-part storage types)
  bool tie_rows = false;          // first row of every matrix rewritten to int8 rounding ties
  const char* storage = nullptr;  // expected "storage" of the summary, when given
};

// The script's summary lists the storage types of the weight tensors (biases stay F32).
constexpr const char* kI8Only = R"("storage": ["I8"])";
constexpr const char* kF32AndI8 = R"("storage": ["F32", "I8"])";

class SchemaDoc : public ::testing::TestWithParam<Case> {};

TEST_P(SchemaDoc, PackedFileAgreesWithTheDocument) {
  const Case c = GetParam();
  testing::TempDir dir;
  const std::string json = dir.File("m.json"), npz = dir.File("m.npz"), model = dir.File("m.sprig");
  testing::WriteFile(json, c.config);
  const std::string cli = testing::SprigCli();
  auto r = testing::Run(cli + " synth " + Quote(json) + " -o " + Quote(npz) + " --seed 3");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  if (c.float64_source) {
    // The document: float64 sources are rounded to f16 once, directly. Values off the float32
    // grid, and one element per tensor, 1 + 2^-11 + 2^-40, that rounds up to 1 + 2^-10 directly
    // but to 1 through float32 (tie to even), make double rounding visible; the script compares
    // with NumPy's float64 -> float16 conversion, which rounds once.
    r = testing::RunPython(
        "import sys, numpy as np; a = np.load(sys.argv[1]); out = {}\n"
        "for k in a.files:\n"
        "    v = a[k].astype(np.float64) * (1 + 2.0**-30)\n"
        "    v.flat[0] = 1 + 2.0**-11 + 2.0**-40\n"
        "    out[k] = v\n"
        "np.savez(sys.argv[1], **out)",
        {npz});
    ASSERT_EQ(r.exit_code, 0) << r.output;
  }
  if (c.tie_rows) {
    // The document's I8 rule rounds w / s to nearest, ties to even. A row whose largest
    // magnitude is 127 has s = 127 / 127 = 1 exactly, so 0.5, 1.5, 2.5, -2.5, 126.5 are exact
    // ties: half to even gives 0, 2, 2, -2, 126 (NumPy's np.rint), half away from zero would
    // give 1, 2, 3, -3, 127. The script compares the packer's bytes with np.rint's.
    r = testing::RunPython(
        "import sys, numpy as np; a = np.load(sys.argv[1]); out = {}\n"
        "ties = np.array([127, 0.5, 1.5, 2.5, -2.5, -0.5, 126.5, -126.5, 3.5], np.float32)\n"
        "for k in a.files:\n"
        "    v = a[k].copy()\n"
        "    if v.ndim >= 2:\n"
        "        row = v.reshape(-1, v.shape[-1])[0]; n = min(len(row), len(ties))\n"
        "        row[:n] = ties[:n]\n"
        "    out[k] = v\n"
        "np.savez(sys.argv[1], **out)",
        {npz});
    ASSERT_EQ(r.exit_code, 0) << r.output;
  }
  r = testing::Run(cli + " pack " + Quote(json) + " " + Quote(npz) + " -o " + Quote(model) +
                   " --dtype " + c.dtype + " " + c.options);
  ASSERT_EQ(r.exit_code, 0) << r.output;
  r = RunCheck(model, npz);
  EXPECT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(r.output.find("\"ok\": true"), std::string::npos) << r.output;
  if (c.both_placements) {
    EXPECT_EQ(r.output.find("\"back_to_back\": 0"), std::string::npos) << r.output;
    EXPECT_EQ(r.output.find("\"page_aware\": 0"), std::string::npos) << r.output;
  }
  if (c.storage != nullptr) {
    EXPECT_NE(r.output.find(c.storage), std::string::npos) << r.output;
  }
  std::printf("[ %s %s ] %s", c.name, c.dtype, r.output.c_str());
}

INSTANTIATE_TEST_SUITE_P(
    SchemaDocModels, SchemaDoc,
    ::testing::Values(Case{"stack", kStack, "f32", false, true}, Case{"stack", kStack, "f16"},
                      Case{"stack", kStack, "bf16"}, Case{"transformer", kTransformer, "f32"},
                      Case{"transformer", kTransformer, "f16"},
                      Case{"transformer_variants", kTransformerVariants, "f16"},
                      Case{"stack64", kStack, "f16", true}, Case{"stack64", kStack, "f32", true},
                      // int8: every stack layer kind, a float64 source (rounded to float32
                      // before the scale), rounding ties, the transformer, and i8 records
                      // with f32 nodes and dense weights.
                      Case{"stack", kStack, "i8", false, false, "", false, kI8Only},
                      Case{"stack64", kStack, "i8", true, false, "", false, kI8Only},
                      Case{"stackties", kStack, "i8", false, false, "", true, kI8Only},
                      Case{"transformer", kTransformer, "i8", false, false, "", false, kI8Only},
                      Case{"stack_records_i8", kStack, "f32", false, false, "--dtype-records i8",
                           false, kF32AndI8}),
    [](const ::testing::TestParamInfo<Case>& info) {
      return std::string(info.param.name) + "_" + info.param.dtype;
    });

// Negative controls: the script must notice damage, naming the rule the damage breaks.
class SchemaDocControl : public ::testing::Test {
 protected:
  void SetUp() override {
    model_ = testing::PackSynthesized(dir_, "m", kStack, 4);
    bytes_ = testing::ReadFile(model_);
  }
  testing::CommandResult CheckDamaged(const std::string& damaged) {
    const std::string path = dir_.File("damaged.sprig");
    testing::WriteFile(path, damaged);
    return RunCheck(path, dir_.File("m.npz"));
  }
  testing::TempDir dir_;
  std::string model_, bytes_;
};

TEST_F(SchemaDocControl, UndamagedFilePasses) {
  const auto r = CheckDamaged(bytes_);
  EXPECT_EQ(r.exit_code, 0) << r.output;
}

TEST_F(SchemaDocControl, OneChangedRecordByteBreaksTheRecordCrc) {
  // sprig's reader only locates a record to damage; the script reads the file on its own.
  auto file = format::ModelFile::Open(model_);
  ASSERT_TRUE(file.ok()) << file.status().message();
  ASSERT_FALSE((*file)->record_sets().empty());
  const auto& rs = (*file)->record_sets().back();
  ASSERT_GE(rs.offsets.size(), 2u);
  std::string damaged = bytes_;
  damaged[rs.offsets[1] + 5] ^= 0x40;
  const auto r = CheckDamaged(damaged);
  EXPECT_EQ(r.exit_code, 1) << r.output;
  EXPECT_NE(r.output.find("RULE record.crc32"), std::string::npos) << r.output;
}

TEST_F(SchemaDocControl, ChangedReservedPreambleByteIsNamed) {
  std::string damaged = bytes_;
  damaged[50] = 1;  // reserved bytes 48-59 must be zero
  const auto r = CheckDamaged(damaged);
  EXPECT_EQ(r.exit_code, 1) << r.output;
  EXPECT_NE(r.output.find("RULE preamble.reserved"), std::string::npos) << r.output;
}

// EditHeaderBytes for a 4-byte little-endian value.
std::string EditHeaderU32(const std::string& bytes, uint32_t from, uint32_t to) {
  char a[4], b[4];
  std::memcpy(a, &from, 4);
  std::memcpy(b, &to, 4);
  return testing::EditHeaderBytes(bytes, std::string(a, 4), std::string(b, 4));
}

// Negative controls on an i8 file: one changed byte of a hot scale must break that tensor's
// hot-scales checksum, and, with every checksum made valid again, the recomputed scale.
class SchemaDocI8Control : public ::testing::Test {
 protected:
  void SetUp() override {
    json_ = dir_.File("m.json");
    npz_ = dir_.File("m.npz");
    model_ = dir_.File("m.sprig");
    testing::WriteFile(json_, kStack);
    const std::string cli = testing::SprigCli();
    auto r = testing::Run(cli + " synth " + Quote(json_) + " -o " + Quote(npz_) + " --seed 5");
    ASSERT_EQ(r.exit_code, 0) << r.output;
    r = testing::Run(cli + " pack " + Quote(json_) + " " + Quote(npz_) + " -o " + Quote(model_) +
                     " --dtype i8");
    ASSERT_EQ(r.exit_code, 0) << r.output;
    r = RunCheck(model_, npz_);
    ASSERT_EQ(r.exit_code, 0) << r.output;
    bytes_ = testing::ReadFile(model_);
    // sprig's reader only locates a scale to damage; the script reads the file on its own.
    auto file = format::ModelFile::Open(model_);
    ASSERT_TRUE(file.ok()) << file.status().message();
    for (const auto& t : (*file)->tensors()) {
      if (t.dtype == DType::kI8 && t.hot_rows > 0 && t.scales_hot != nullptr) {
        name_ = t.name;
        scales_at_ = static_cast<size_t>(t.scales_hot - (*file)->base());
        scales_size_ = t.hot_rows * t.scale_row_bytes;
        scales_crc_ = t.scales_hot_crc32;
        break;
      }
    }
    ASSERT_FALSE(name_.empty()) << "no i8 tensor with hot rows";
  }
  testing::CommandResult CheckDamaged(const std::string& damaged) {
    const std::string path = dir_.File("damaged.sprig");
    testing::WriteFile(path, damaged);
    return RunCheck(path, npz_);
  }
  testing::TempDir dir_;
  std::string json_, npz_, model_, bytes_, name_;
  size_t scales_at_ = 0, scales_size_ = 0;
  uint32_t scales_crc_ = 0;
};

TEST_F(SchemaDocI8Control, OneChangedHotScaleByteBreaksTheScalesCrc) {
  std::string damaged = bytes_;
  damaged[scales_at_ + 1] ^= 0x01;  // a low mantissa byte of the first scale
  const auto r = CheckDamaged(damaged);
  EXPECT_EQ(r.exit_code, 1) << r.output;
  EXPECT_NE(r.output.find("RULE tensor.scales_hot_crc32"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find(name_), std::string::npos) << r.output;
}

TEST_F(SchemaDocI8Control, ChangedHotScaleWithValidChecksumsBreaksTheScaleRule) {
  std::string damaged = bytes_;
  damaged[scales_at_ + 1] ^= 0x01;
  const uint32_t crc = format::Crc32(damaged.data() + scales_at_, scales_size_);
  damaged = EditHeaderU32(damaged, scales_crc_, crc);
  ASSERT_FALSE(damaged.empty()) << "the hot scales' crc is not in the header exactly once";
  const auto r = CheckDamaged(damaged);
  EXPECT_EQ(r.exit_code, 1) << r.output;
  EXPECT_NE(r.output.find("RULE tensor.i8_scales"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find(name_), std::string::npos) << r.output;
}

}  // namespace
}  // namespace sprig
