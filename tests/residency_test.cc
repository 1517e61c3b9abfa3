// Memory: opening maps the file but reads only its header; running rows pages in only the
// records their routes reach; sessions count the distinct records they read.
//
// The large-model tests drop the file from the page cache (posix_fadvise DONTNEED) and then
// ask mincore(2) which pages came back. mincore on a shared file mapping reports the page
// cache, not this process's page tables, so the kernel's fault-around (which maps up to 16
// neighbouring pages per fault, but only pages already cached) does not show up in it; the
// read-ahead it could show is what MADV_RANDOM (OpenOptions::advise_random_records) turns off.
// If the environment keeps the file cached anyway (a file system held in memory, say), the
// tests skip with a message instead of failing.
#include <gtest/gtest.h>

#include <algorithm>
#include <cstring>
#include <set>

#include "converter/config/config_json.h"
#include "converter/config/tensor_match.h"
#include "io/tensor_archive.h"
#include "converter/pack/packer.h"
#include "converter/synth/synth.h"
#include "format/model_file.h"
#include "format/row_map.h"
#include "sprig/memory.h"
#include "sprig/session.h"
#include "support/test_util.h"

namespace sprig {
namespace {

// Page-cache bytes beyond the pages of the touched records that the tests tolerate. Measured
// on ext4 (Linux 6.x, read_ahead_kb 8192): none at all, for one row and for 64 rows (63 leaves:
// exactly their 4.3 MiB of pages). Zero is expected: the mapping is MADV_RANDOM outside the
// hot section, which open queues whole, so no fault reads around itself. The allowance (4 pages
// per record for file systems that cache in larger folios, 64 KiB in all) is far below one
// stray read-around window, so a regression that reads neighbouring records still fails.
constexpr uint64_t kSlackPerRecord = 16 * 1024;
constexpr uint64_t kSlackTotal = 64 * 1024;
constexpr uint64_t kPage = 4096;

// Packs `json` with synthesized float32 weights to dir/name; returns the path.
std::string PackSynth(const testing::TempDir& dir, const std::string& name,
                      const std::string& json) {
  auto config = convert::ParseConfig(json, name + ".json");
  EXPECT_TRUE(config.ok()) << config.status().message();
  if (!config.ok()) return "";
  const std::vector<io::NdArray> arrays = convert::SynthesizeWeights(*config, 7);
  auto matched = convert::MatchTensors(*config, arrays, name, {});
  EXPECT_TRUE(matched.ok()) << matched.status().message();
  if (!matched.ok()) return "";
  const std::string path = dir.File(name);
  auto packed = convert::PackTensors(*config, *matched, path, {});
  EXPECT_TRUE(packed.ok()) << packed.status().message();
  return path;
}

std::vector<float> RandomRows(size_t rows, size_t in, uint64_t seed) {
  convert::Random rng(seed);
  std::vector<float> x(rows * in);
  for (float& v : x) v = rng.Normal();
  return x;
}

// The model's file indexed by the format reader, for where its records lie. A second mapping
// of the same file: mincore reports the page cache, which both mappings share, and opening
// reads only the header (no warming of the hot section, no read-ahead).
std::unique_ptr<format::ModelFile> Layout(const Model& m) {
  format::OpenFileOptions options;
  options.warm_hot = false;
  auto file = format::ModelFile::Open(m.path(), options);
  EXPECT_TRUE(file.ok()) << file.status().message();
  return file.ok() ? std::move(*file) : nullptr;
}

// Resident bytes of record `i` of the file's first record set.
uint64_t RecordResident(const format::ModelFile& f, size_t i) {
  const format::RecordSetInfo& rs = f.record_sets()[0];
  return format::ResidentBytes(f.base() + rs.offsets[i], rs.record_size);
}

// Pages a record of `size` bytes at `offset` spans.
uint64_t PagesSpanned(uint64_t offset, uint64_t size) {
  return (offset + size + kPage - 1) / kPage - offset / kPage;
}

// One leaf tree, in = out = 512, depth 12, leaf width 16: 4096 leaves of about 66 KB, so the
// record section holds about 270 MB.
class LargeLeafTree : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = new testing::TempDir();
    path_ = PackSynth(*dir_, "large.sprig", R"({"family":"stack","input_dim":512,"layers":[
        {"kind":"tree","mode":"leaf","depth":12,"leaf_width":16,"activation":"relu",
         "out":512}]})");
  }
  static void TearDownTestSuite() {
    delete dir_;
    dir_ = nullptr;
  }

  // Drops the file from the page cache and opens it; skips the test if the pages stay.
  std::shared_ptr<const Model> OpenCold() {
    EXPECT_TRUE(EvictFromPageCache(path_).ok());
    auto model = Model::open(path_);
    EXPECT_TRUE(model.ok()) << model.status().message();
    if (!model.ok()) return nullptr;
    const Residency r = (*model)->residency();
    EXPECT_GE(r.records_size, 256u << 20);
    if (r.records_resident > r.records_size / 10) {
      cold_ = false;
      return nullptr;
    }
    cold_ = true;
    return *model;
  }

  static testing::TempDir* dir_;
  static std::string path_;
  bool cold_ = false;
};

testing::TempDir* LargeLeafTree::dir_ = nullptr;
std::string LargeLeafTree::path_;

#define SKIP_IF_NOT_COLD()                                                                  \
  if (!cold_) {                                                                             \
    GTEST_SKIP() << "the page cache kept the model file after POSIX_FADV_DONTNEED (a file " \
                    "system held in memory?); residency cannot be measured here";           \
  }

TEST_F(LargeLeafTree, OpenReadsNoRecords) {
  ASSERT_FALSE(path_.empty());
  auto model = OpenCold();
  SKIP_IF_NOT_COLD();
  ASSERT_NE(model, nullptr);
  const Residency r = model->residency();
  EXPECT_LE(r.records_resident, kSlackTotal) << "open read records";
  uint64_t sections_size = 0;
  for (const SectionResidency& s : r.sections) sections_size += s.size;
  EXPECT_EQ(sections_size, r.hot_size + r.records_size);
  EXPECT_FALSE(model->hot_locked());  // lock_hot is off by default
}

TEST_F(LargeLeafTree, OneRowPagesInOnlyItsLeaf) {
  auto model = OpenCold();
  SKIP_IF_NOT_COLD();
  ASSERT_NE(model, nullptr);
  auto session = Session::create(model);
  ASSERT_TRUE(session.ok());
  const std::vector<float> x = RandomRows(1, 512, 11);
  std::vector<float> y(512);
  Routes routes;
  ASSERT_TRUE((*session)->forward(x.data(), 1, y.data(), &routes).ok());
  const size_t leaf = static_cast<size_t>(routes.layers.at(0).choices.at(0));
  const auto layout = Layout(*model);
  ASSERT_NE(layout, nullptr);
  const format::RecordSetInfo& rs = layout->record_sets()[0];
  EXPECT_EQ(RecordResident(*layout, leaf), rs.record_size) << "the leaf's record is resident";
  uint64_t others = 0;
  for (size_t i = 0; i < rs.offsets.size(); ++i) {
    if (i != leaf) others += RecordResident(*layout, i);
  }
  // Neighbours may share the leaf's first and last pages.
  EXPECT_LE(others, 2 * kPage + kSlackPerRecord) << "records of other leaves were read";
  ASSERT_EQ((*session)->stats().touched.size(), 1u);
  EXPECT_EQ((*session)->stats().touched[0].touched, 1u);
  EXPECT_EQ((*session)->stats().touched[0].records, 4096u);
}

TEST_F(LargeLeafTree, BatchPagesInOnlyRoutedLeaves) {
  auto model = OpenCold();
  SKIP_IF_NOT_COLD();
  ASSERT_NE(model, nullptr);
  const ProcessMemory before = ReadProcessMemory();
  auto session = Session::create(model);
  ASSERT_TRUE(session.ok());
  const size_t rows = 64;
  const std::vector<float> x = RandomRows(rows, 512, 12);
  std::vector<float> y(rows * 512);
  Routes routes;
  ASSERT_TRUE((*session)->forward(x.data(), rows, y.data(), &routes).ok());
  const std::vector<int32_t>& leaf = routes.layers.at(0).choices;
  const std::set<int32_t> distinct(leaf.begin(), leaf.end());
  const uint64_t k = distinct.size();
  ASSERT_GT(k, 1u);

  const auto layout = Layout(*model);
  ASSERT_NE(layout, nullptr);
  const format::RecordSetInfo& rs = layout->record_sets()[0];
  uint64_t routed_pages = 0;
  for (int32_t l : distinct) routed_pages += PagesSpanned(rs.offsets[l], rs.record_size);
  const Residency r = model->residency();
  EXPECT_GE(r.records_resident, k * rs.record_size);
  EXPECT_LE(r.records_resident, routed_pages * kPage + k * kSlackPerRecord + kSlackTotal)
      << k << " leaves routed";
  for (int32_t l : distinct) EXPECT_EQ(RecordResident(*layout, l), rs.record_size);

  // The process maps the routed records (and fault-around neighbours), never the whole file.
  const ProcessMemory after = ReadProcessMemory();
  EXPECT_LT(after.rss - std::min(after.rss, before.rss), model->file_size() / 8);

  // The session counted each routed leaf once, and again after a repeat of the same rows.
  ASSERT_EQ((*session)->stats().touched.size(), 1u);
  EXPECT_EQ((*session)->stats().touched[0].touched, k);
  ASSERT_TRUE((*session)->forward(x.data(), rows, y.data()).ok());
  EXPECT_EQ((*session)->stats().touched[0].touched, k);
  EXPECT_EQ((*session)->stats().touched[0].record_size, rs.record_size);
}

TEST(Residency, LockHotIsBestEffort) {
  testing::TempDir dir;
  const std::string path = PackSynth(dir, "small.sprig", R"({"family":"stack","input_dim":8,
      "layers":[{"kind":"tree","mode":"leaf","depth":3,"leaf_width":4,"activation":"relu",
      "out":8}]})");
  OpenOptions options;
  options.lock_hot = true;
  auto model = Model::open(path, options);
  ASSERT_TRUE(model.ok()) << model.status().message();
  // When the lock held, every hot page is resident.
  const Residency r = (*model)->residency();
  if ((*model)->hot_locked()) {
    EXPECT_EQ(r.hot_resident, r.hot_size);
  }
  EXPECT_GT(r.hot_size, 0u);
}

TEST(Residency, ProcessMemoryReadsProc) {
  const ProcessMemory m = ReadProcessMemory();
  EXPECT_GT(m.rss, 0u);
  EXPECT_GE(m.peak_rss, m.rss);
  EXPECT_LE(m.rss_file + m.rss_anon, m.rss + (1u << 20));  // RssShmem makes up the rest
  EXPECT_FALSE(EvictFromPageCache("/nonexistent/model.sprig").ok());
}

// The records a path tree's routes pass through: each node on the root-to-leaf path that is
// not hot, mapped to its chunk.
std::set<uint64_t> PathRecords(const format::RowMapInfo& map, uint32_t depth,
                               const std::vector<int32_t>& leaves) {
  std::set<uint64_t> out;
  const uint64_t first_leaf = (uint64_t{1} << depth) - 1;
  for (int32_t l : leaves) {
    // Node n's parent is (n - 1) / 2; the leaf is node first_leaf + l.
    for (uint64_t n = first_leaf + static_cast<uint64_t>(l);; n = (n - 1) / 2) {
      if (n >= map.hot_rows) out.insert(format::LocateRow(map, n).record);
      if (n == 0) break;
    }
  }
  return out;
}

TEST(Residency, TouchedCountsPathChunksAndExperts) {
  testing::TempDir dir;
  const std::string path = PackSynth(dir, "mixed.sprig", R"({"family":"stack","input_dim":16,
      "layers":[{"kind":"tree","mode":"path","depth":9,"activation":"gelu","out":16},
      {"kind":"experts","experts":32,"top_k":2,"width":8,"activation":"relu","out":16}]})");
  auto model = Model::open(path);
  ASSERT_TRUE(model.ok()) << model.status().message();
  const std::vector<float> x = RandomRows(40, 16, 13);
  std::vector<float> y(40 * 16);
  std::vector<std::vector<LayerTouch>> by_threads;
  for (size_t threads : {1, 2}) {
    SessionOptions options;
    options.threads = threads;
    auto session = Session::create(*model, options);
    ASSERT_TRUE(session.ok());
    Routes routes;
    // Rows 0..29 as a batch, then rows 30..39 one at a time (the single-row paths).
    ASSERT_TRUE((*session)->forward(x.data(), 30, y.data(), &routes).ok());
    std::vector<int32_t> leaves = routes.layers.at(0).choices;
    std::vector<int32_t> experts = routes.layers.at(1).choices;
    for (size_t r = 30; r < 40; ++r) {
      ASSERT_TRUE((*session)->forward(x.data() + r * 16, 1, y.data(), &routes).ok());
      leaves.push_back(routes.layers[0].choices[0]);
      experts.insert(experts.end(), routes.layers[1].choices.begin(),
                     routes.layers[1].choices.end());
    }
    const std::vector<LayerTouch> touched = (*session)->stats().touched;
    ASSERT_EQ(touched.size(), 2u);
    const auto layout = Layout(**model);
    ASSERT_NE(layout, nullptr);
    const format::RecordSetInfo* path_set = nullptr;
    for (const auto& rs : layout->record_sets()) {
      if (rs.layer == 0) path_set = &rs;
    }
    ASSERT_NE(path_set, nullptr);
    EXPECT_EQ(touched[0].layer, 0u);
    EXPECT_EQ(touched[0].records, path_set->offsets.size());
    EXPECT_EQ(touched[0].touched, PathRecords(path_set->map, 9, leaves).size());
    EXPECT_EQ(touched[1].layer, 1u);
    EXPECT_EQ(touched[1].records, 32u);
    EXPECT_EQ(touched[1].touched, std::set<int32_t>(experts.begin(), experts.end()).size());
    by_threads.push_back(touched);
    (*session)->reset_stats();
    EXPECT_EQ((*session)->stats().touched.at(0).touched, 0u);
    EXPECT_EQ((*session)->stats().touched.at(1).touched, 0u);
  }
  for (size_t l = 0; l < 2; ++l) EXPECT_EQ(by_threads[0][l].touched, by_threads[1][l].touched);
}

}  // namespace
}  // namespace sprig

namespace sprig {
namespace {

// Transformer blocks mark the chunks their feed-forward trees read, as stack layers do.
TEST(Residency, TouchedCountsTransformerBlocks) {
  testing::TempDir dir;
  const std::string path = PackSynth(dir, "lm.sprig", R"({"family":"transformer",
      "vocab_size":256,"d_model":16,"n_heads":2,"max_seq":32,"positions":"rope",
      "tokenizer":"byte","layers":[{"kind":"tree","mode":"path","depth":9,"activation":"gelu"}]})");
  auto model = Model::open(path);
  ASSERT_TRUE(model.ok()) << model.status().message();
  auto session = Session::create(*model);
  ASSERT_TRUE(session.ok());
  std::vector<int32_t> tokens;
  for (int32_t t = 0; t < 24; ++t) tokens.push_back((t * 37 + 5) % 256);
  std::vector<float> logits(tokens.size() * 256);
  Routes routes;
  ASSERT_TRUE(
      (*session)->forward_tokens(tokens.data(), 2, tokens.size() / 2, logits.data(), &routes).ok());
  const auto layout = Layout(**model);
  ASSERT_NE(layout, nullptr);
  const format::RecordSetInfo& rs = layout->record_sets().at(0);
  const std::vector<LayerTouch> touched = (*session)->stats().touched;
  ASSERT_EQ(touched.size(), 1u);
  EXPECT_EQ(touched[0].touched, PathRecords(rs.map, 9, routes.layers.at(0).choices).size());
}

// `sprig run --stats --cold` reports the records each routed layer touched, residency, memory
// and faults; the touched count agrees with the routes the same run wrote.
TEST(Residency, RunCliPrintsStats) {
  testing::TempDir dir;
  const std::string model = PackSynth(dir, "cli.sprig", R"({"family":"stack","input_dim":8,
      "layers":[{"kind":"tree","mode":"leaf","depth":4,"leaf_width":4,"activation":"relu",
      "out":8}]})");
  const size_t rows = 20;
  const std::vector<float> x = RandomRows(rows, 8, 14);
  std::vector<uint8_t> bytes(x.size() * sizeof(float));
  std::memcpy(bytes.data(), x.data(), bytes.size());
  const std::string in = dir.File("x.npy"), out = dir.File("y.npy"), routes = dir.File("r.npz");
  ASSERT_TRUE(
      io::WriteNpy(in, io::NdArray::Owned("x", io::ElementType::kF32, {rows, 8}, std::move(bytes)),
                   false)
          .ok());
  const testing::CommandResult r =
      testing::Run(testing::SprigCli() + " run " + testing::Quote(model) + " --input " +
                   testing::Quote(in) + " --output " + testing::Quote(out) + " --routes " +
                   testing::Quote(routes) + " --batch 7 --stats --cold");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  auto archive = io::TensorArchive::Open(routes);
  ASSERT_TRUE(archive.ok()) << archive.status().message();
  const io::NdArray& a = archive->arrays().at(0);
  ASSERT_EQ(a.elements(), rows);
  std::set<int32_t> leaves;
  for (size_t i = 0; i < rows; ++i) {
    int32_t v;
    std::memcpy(&v, a.data + 4 * i, 4);
    leaves.insert(v);
  }
  EXPECT_NE(r.output.find("layer 0: " + std::to_string(leaves.size()) + " of 16 records touched"),
            std::string::npos)
      << r.output;
  EXPECT_NE(r.output.find("resident: hot "), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("process rss "), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("page faults during open and run: "), std::string::npos) << r.output;
}

}  // namespace
}  // namespace sprig
