// Model::open on damaged and hostile files: every failure is a clear Status, never a crash.
#include <gtest/gtest.h>

#include <cstring>
#include <vector>

#include "format/header_config.h"
#include "format/model_file.h"
#include "format/preamble.h"
#include "sprig/model.h"
#include "sprig/session.h"
#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;
using testing::TempDir;

constexpr const char* kConfig = R"({
  "family": "stack", "input_dim": 16,
  "layers": [
    {"kind": "tree", "mode": "leaf", "depth": 3, "leaf_width": 8, "activation": "relu", "out": 16},
    {"kind": "tree", "mode": "path", "depth": 5, "activation": "gelu", "out": 16},
    {"kind": "experts", "experts": 4, "top_k": 2, "width": 8, "out": 4}
  ]})";

class LoaderTest : public ::testing::Test {
 protected:
  void SetUp() override {
    testing::WriteFile(dir_.File("config.json"), kConfig);
    const std::string cli = testing::SprigCli();
    auto r = testing::Run(cli + " synth " + Quote(dir_.File("config.json")) + " -o " +
                          Quote(dir_.File("w.npz")));
    ASSERT_EQ(r.exit_code, 0) << r.output;
    r = testing::Run(cli + " pack " + Quote(dir_.File("config.json")) + " " +
                     Quote(dir_.File("w.npz")) + " -o " + Quote(dir_.File("m.sprig")));
    ASSERT_EQ(r.exit_code, 0) << r.output;
    bytes_ = testing::ReadFile(dir_.File("m.sprig"));
  }

  // Writes `bytes` to a file and opens it; returns the status message ("" on success).
  std::string OpenBytes(const std::string& bytes) {
    const std::string path = dir_.File("damaged.sprig");
    testing::WriteFile(path, bytes);
    auto m = Model::open(path);
    return m.ok() ? "" : m.status().message();
  }

  // Rewrites the preamble with `edit` applied, keeping its checksum valid.
  std::string WithPreamble(const std::function<void(format::Preamble&)>& edit) {
    auto p = format::DecodePreamble(reinterpret_cast<const uint8_t*>(bytes_.data()), bytes_.size(),
                                    bytes_.size(), "m");
    EXPECT_TRUE(p.ok());
    format::Preamble pre = *p;
    edit(pre);
    uint8_t raw[format::kPreambleSize];
    format::EncodePreamble(pre, raw);
    std::string out = bytes_;
    std::memcpy(out.data(), raw, sizeof(raw));
    return out;
  }

  TempDir dir_;
  std::string bytes_;
};

TEST_F(LoaderTest, OpensTheValidFile) {
  EXPECT_EQ(OpenBytes(bytes_), "");
}

TEST_F(LoaderTest, MissingFileIsNamed) {
  auto m = Model::open(dir_.File("nope.sprig"));
  ASSERT_FALSE(m.ok());
  EXPECT_EQ(m.status().code(), Status::Code::kNotFound);
  EXPECT_NE(m.status().message().find("nope.sprig"), std::string::npos);
}

TEST_F(LoaderTest, DirectoryIsRefused) {
  auto m = Model::open(dir_.path());
  ASSERT_FALSE(m.ok());
  EXPECT_NE(m.status().message().find("not a regular file"), std::string::npos);
}

TEST_F(LoaderTest, BadMagic) {
  std::string b = bytes_;
  b[0] = 'X';
  EXPECT_NE(OpenBytes(b).find("is not a .sprig file"), std::string::npos);
  EXPECT_NE(OpenBytes("hello, world\n").find("is not a .sprig file"), std::string::npos);
}

TEST_F(LoaderTest, NewerVersionIsRefusedClearly) {
  const std::string msg =
      OpenBytes(WithPreamble([](format::Preamble& p) { p.version = format::kFormatVersion + 1; }));
  EXPECT_NE(msg.find("version " + std::to_string(format::kFormatVersion + 1)), std::string::npos)
      << msg;
  EXPECT_NE(msg.find("upgrade sprig"), std::string::npos) << msg;
}

TEST_F(LoaderTest, HeaderOutsideTheFile) {
  std::string msg =
      OpenBytes(WithPreamble([&](format::Preamble& p) { p.header_size = bytes_.size(); }));
  EXPECT_NE(msg.find("outside the file"), std::string::npos) << msg;
  msg = OpenBytes(WithPreamble([](format::Preamble& p) { p.header_offset = ~uint64_t{0} - 8; }));
  EXPECT_NE(msg.find("outside the file"), std::string::npos) << msg;
}

TEST_F(LoaderTest, MisalignedHeaderIsRefused) {
  // FlatBuffers reads 8-byte fields in place; a header 4 bytes off would make them misaligned.
  const std::string msg =
      OpenBytes(WithPreamble([](format::Preamble& p) { p.header_offset = 68; }));
  EXPECT_NE(msg.find("header offset 68 is not a multiple of 8"), std::string::npos) << msg;
}

TEST_F(LoaderTest, DataLargerThanTheFileIsRefused) {
  // A file cut short whose preamble is rewritten to match: the header is intact and claims
  // sections and tensors beyond the end of the file. Open must refuse it before reading any.
  for (uint64_t keep : {bytes_.size() - 4096, bytes_.size() / 2}) {
    std::string cut = bytes_.substr(0, keep);
    auto p = format::DecodePreamble(reinterpret_cast<const uint8_t*>(bytes_.data()), bytes_.size(),
                                    bytes_.size(), "m");
    ASSERT_TRUE(p.ok());
    format::Preamble pre = *p;
    pre.file_size = keep;
    uint8_t raw[format::kPreambleSize];
    format::EncodePreamble(pre, raw);
    std::memcpy(cut.data(), raw, sizeof(raw));
    const std::string msg = OpenBytes(cut);
    EXPECT_NE(msg.find("is not page-aligned inside the file's data"), std::string::npos)
        << keep << ": " << msg;
  }
}

TEST_F(LoaderTest, EveryTruncationIsRefused) {
  // Cut at every length in the preamble and header and at a spread of lengths in the data.
  std::vector<size_t> cuts;
  for (size_t n = 0; n < 8192 && n < bytes_.size(); n += 7) cuts.push_back(n);
  for (size_t n = 8192; n < bytes_.size(); n += bytes_.size() / 97 + 1) cuts.push_back(n);
  cuts.push_back(bytes_.size() - 1);
  for (size_t n : cuts) {
    const std::string msg = OpenBytes(bytes_.substr(0, n));
    EXPECT_FALSE(msg.empty()) << "a file cut to " << n << " bytes opened";
  }
}

TEST_F(LoaderTest, DamagedHeaderByteIsCaught) {
  std::string b = bytes_;
  b[format::kPreambleSize + 100] ^= 0x40;
  EXPECT_NE(OpenBytes(b).find("header's checksum"), std::string::npos);
}

TEST_F(LoaderTest, DamagedRecordIsCaughtByCheck) {
  auto file = format::ModelFile::Open(dir_.File("m.sprig"));
  ASSERT_TRUE(file.ok());
  const uint64_t offset = (*file)->record_sets()[1].offsets[3] + 17;
  file->reset();
  std::string b = bytes_;
  b[offset] ^= 0x01;
  const std::string path = dir_.File("flipped.sprig");
  testing::WriteFile(path, b);
  // Open reads no weights, so it succeeds; the checksum pass finds the record.
  auto m = Model::open(path);
  ASSERT_TRUE(m.ok()) << m.status().message();
  const Status s = (*m)->verify_checksums();
  EXPECT_EQ(s.code(), Status::Code::kCheckFailed);
  EXPECT_NE(s.message().find("record 3 of layer 1"), std::string::npos) << s.message();
  auto r = testing::Run(testing::SprigCli() + " inspect --check " + Quote(path));
  EXPECT_EQ(r.exit_code, 1) << r.output;
  EXPECT_NE(r.output.find("record 3 of layer 1"), std::string::npos) << r.output;
}

// The file with its header built again field by field; with `decoy_for_layer` >= 0, an extra
// record set for that layer, holding only its first record, goes first, before the layer's own set
// (the tensors' record-set indices move up by one to keep pointing at their sets). The checksums
// stay valid, so only the loader's structural checks can refuse it.
std::string RebuiltFile(const std::string& bytes, const ModelConfig& config, int decoy_for_layer) {
  const auto* data = reinterpret_cast<const uint8_t*>(bytes.data());
  auto pre = format::DecodePreamble(data, bytes.size(), bytes.size(), "m");
  EXPECT_TRUE(pre.ok());
  const fb::Header* h = fb::GetHeader(data + pre->header_offset);
  flatbuffers::FlatBufferBuilder b;
  b.ForceDefaults(true);
  auto cfg = format::BuildConfig(b, config);
  auto json = b.CreateString(h->config_json()->str());
  auto producer = b.CreateString(h->producer()->str());
  std::vector<flatbuffers::Offset<fb::Section>> sections;
  for (const fb::Section* s : *h->sections()) {
    sections.push_back(fb::CreateSection(b, b.CreateString(s->name()->str()), s->kind(),
                                         s->offset(), s->size(), s->padding(), s->layer()));
  }
  auto sections_vec = b.CreateVector(sections);
  const int shift = decoy_for_layer >= 0 ? 1 : 0;
  std::vector<flatbuffers::Offset<fb::Tensor>> tensors;
  for (const fb::Tensor* t : *h->tensors()) {
    auto shape = b.CreateVector(std::vector<uint64_t>(t->shape()->begin(), t->shape()->end()));
    auto name = b.CreateString(t->name()->str());
    tensors.push_back(fb::CreateTensor(
        b, name, t->dtype(), shape, t->hot_offset(), t->hot_rows(), t->hot_size(), t->hot_crc32(),
        t->record_set() >= 0 ? t->record_set() + shift : -1, t->record_part_offset(),
        t->record_part_size(), t->layer(), t->scales_hot_offset(), t->scales_hot_crc32(),
        t->scales_record_part_offset(), t->error_max_abs(), t->error_rel_rms()));
  }
  auto tensors_vec = b.CreateVector(tensors);
  std::vector<flatbuffers::Offset<fb::RecordSet>> sets;
  auto copy_set = [&](const fb::RecordSet* r, size_t max_records) {
    std::vector<fb::RecordRef> refs;
    for (const fb::RecordRef* ref : *r->records()) {
      if (refs.size() < max_records) refs.push_back(*ref);
    }
    sets.push_back(fb::CreateRecordSet(b, r->layer(), r->section(), r->row_map(),
                                       r->rows_per_record(), r->hot_levels(), r->chunk_levels(),
                                       r->record_size(), b.CreateVectorOfStructs(refs)));
  };
  for (const fb::RecordSet* r : *h->record_sets()) {
    if (static_cast<int>(r->layer()) == decoy_for_layer) copy_set(r, 1);
  }
  for (const fb::RecordSet* r : *h->record_sets()) copy_set(r, r->records()->size());
  auto sets_vec = b.CreateVector(sets);
  fb::FinishHeaderBuffer(
      b, fb::CreateHeader(b, cfg, json, producer, sections_vec, tensors_vec, sets_vec));
  // The new header must end before the first section, where the data starts.
  EXPECT_LE(pre->header_offset + b.GetSize(), h->sections()->Get(0)->offset());
  format::Preamble p = *pre;
  p.header_size = b.GetSize();
  p.header_crc32 = format::Crc32(b.GetBufferPointer(), b.GetSize());
  std::string out = bytes;
  format::EncodePreamble(p, reinterpret_cast<uint8_t*>(out.data()));
  std::memcpy(out.data() + p.header_offset, b.GetBufferPointer(), b.GetSize());
  return out;
}

TEST_F(LoaderTest, ASecondRecordSetForALayerIsRefused) {
  auto file = format::ModelFile::Open(dir_.File("m.sprig"));
  ASSERT_TRUE(file.ok()) << file.status().message();
  const ModelConfig config = (*file)->config();
  file->reset();
  // Control: the header built again without a decoy opens and runs.
  const std::string path = dir_.File("rebuilt.sprig");
  testing::WriteFile(path, RebuiltFile(bytes_, config, -1));
  auto m = Model::open(path);
  ASSERT_TRUE(m.ok()) << m.status().message();
  auto session = Session::create(*m);
  ASSERT_TRUE(session.ok());
  std::vector<float> x(16, 0.5f), y(4);
  ASSERT_TRUE((*session)->forward(x.data(), 1, y.data()).ok());
  // A decoy set for the path tree (layer 1), listed before the set its tensors use: the layer
  // would be bound to the decoy, whose one record sizes its touched-records log.
  const std::string decoy = OpenBytes(RebuiltFile(bytes_, config, 1));
  EXPECT_NE(decoy.find("second record set of layer 1"), std::string::npos) << decoy;
  // The same for the leaf tree (layer 0) and the experts (layer 2).
  EXPECT_NE(OpenBytes(RebuiltFile(bytes_, config, 0)).find("second record set of layer 0"),
            std::string::npos);
  EXPECT_NE(OpenBytes(RebuiltFile(bytes_, config, 2)).find("second record set of layer 2"),
            std::string::npos);
}

TEST_F(LoaderTest, InspectOfABadFileExitsTwo) {
  const std::string path = dir_.File("text.sprig");
  testing::WriteFile(path, "not a model");
  auto r = testing::Run(testing::SprigCli() + " inspect " + Quote(path));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("text.sprig is not a .sprig file"), std::string::npos) << r.output;
}

}  // namespace
}  // namespace sprig
