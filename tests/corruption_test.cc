// A small valid model, damaged on purpose: cut at many lengths, and 1,050 random corruptions
// (single bytes and runs of bytes) spread evenly over the preamble, the header and the data.
// Model::open, a forward pass, `sprig inspect --check` and `sprig run` must never crash or
// hang; every refusal is one line on stderr naming the file, with exit 2; every corruption of
// checksummed bytes (records, hot tensors) makes `inspect --check` exit 1; and damage to
// padding, which nothing reads, changes nothing.
#include <gtest/gtest.h>

#include <algorithm>
#include <cstdint>
#include <cstdio>
#include <cstring>
#include <map>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include "io/tensor_archive.h"
#include "format/model_file.h"
#include "format/preamble.h"
#include "sprig/model.h"
#include "sprig/session.h"
#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

constexpr const char* kConfig = R"({"family":"stack","input_dim":16,"layers":[
  {"kind":"dense","width":8,"activation":"gelu","out":16},
  {"kind":"tree","mode":"leaf","depth":3,"leaf_width":8,"activation":"relu","out":16},
  {"kind":"tree","mode":"path","depth":5,"activation":"gelu","out":16},
  {"kind":"experts","experts":4,"top_k":2,"width":8,"out":4}]})";
constexpr size_t kRows = 4;

// Where a damaged byte lies, in the order a reader meets it.
enum class Region { kPreamble, kHeader, kChecked, kPadding };

const char* Name(Region r) {
  switch (r) {
    case Region::kPreamble:
      return "preamble";
    case Region::kHeader:
      return "header";
    case Region::kChecked:
      return "checksummed data";
    default:
      return "padding";
  }
}

struct Damage {
  std::string path;
  Region region;
  std::string what;  // for failure messages: "3 bytes at 5120"
};

class Corruption : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = new testing::TempDir();
    const std::string model = testing::PackSynthesized(*dir_, "m", kConfig);
    bytes_ = new std::string(testing::ReadFile(model));
    auto file = format::ModelFile::Open(model);
    ASSERT_TRUE(file.ok()) << file.status().message();
    const format::ModelFile& f = **file;
    header_begin_ = format::kPreambleSize;
    header_end_ = header_begin_ + f.header_size();
    // Every byte a checksum covers: hot tensors and whole records (their padding included).
    checked_ = new std::vector<std::pair<uint64_t, uint64_t>>();
    for (const format::TensorInfo& t : f.tensors()) {
      if (t.hot_size > 0) {
        const uint64_t at = static_cast<uint64_t>(t.hot - f.base());
        checked_->push_back({at, at + t.hot_size});
      }
    }
    for (const format::RecordSetInfo& rs : f.record_sets()) {
      for (uint64_t at : rs.offsets) checked_->push_back({at, at + rs.record_size});
    }
    std::vector<float> rows(kRows * 16);
    for (size_t i = 0; i < rows.size(); ++i) rows[i] = static_cast<float>(i % 9) * 0.25f - 1.0f;
    std::vector<uint8_t> raw(rows.size() * sizeof(float));
    std::memcpy(raw.data(), rows.data(), raw.size());
    input_ = new std::string(dir_->File("x.npy"));
    ASSERT_TRUE(io::WriteNpy(*input_,
                             io::NdArray::Owned("x", io::ElementType::kF32, {kRows, 16}, raw), true)
                    .ok());
  }
  static void TearDownTestSuite() {
    delete input_;
    delete checked_;
    delete bytes_;
    delete dir_;
  }

  static Region RegionOf(uint64_t at) {
    if (at < header_begin_) return Region::kPreamble;
    if (at < header_end_) return Region::kHeader;
    for (const auto& [lo, hi] : *checked_) {
      if (at >= lo && at < hi) return Region::kChecked;
    }
    return Region::kPadding;
  }

  // Opens `path` in-process and, when it opens, runs rows through it and checks its checksums.
  // Returns the open status's message ("" when it opened) and the checksum status.
  static std::pair<std::string, Status> OpenAndRun(const std::string& path) {
    auto model = Model::open(path);
    if (!model.ok()) return {model.status().message(), Status::Ok()};
    auto session = Session::create(*model);
    EXPECT_TRUE(session.ok());
    if (session.ok()) {
      std::vector<float> in(kRows * 16, 0.5f), out(kRows * 4);
      (void)(*session)->forward(in.data(), kRows, out.data());
    }
    return {"", (*model)->verify_checksums()};
  }

  // Runs `sprig inspect --check` and `sprig run` on every file in one shell, each under a time
  // limit; returns per file the two exit codes, and leaves each command's stderr in FILE.inspect
  // and FILE.run.
  static std::map<std::string, std::pair<int, int>> RunCli(const std::vector<Damage>& files) {
    const std::string list = dir_->File("files.txt");
    std::string names;
    for (const Damage& d : files) names += d.path + "\n";
    testing::WriteFile(list, names);
    const std::string cli = testing::SprigCli();  // already quoted (and emulated, if cross)
    const std::string script =
        "while IFS= read -r f; do "
        "timeout 60 " +
        cli +
        " inspect --check \"$f\" >/dev/null 2>\"$f.inspect\"; a=$?; "
        "timeout 60 " +
        cli + " run \"$f\" --input " + Quote(*input_) +
        " --output \"$f.out.npy\" >/dev/null 2>\"$f.run\"; b=$?; "
        "echo \"$a $b $f\"; done < " +
        Quote(list);
    const testing::CommandResult r = testing::Run("bash -c " + Quote(script));
    std::map<std::string, std::pair<int, int>> codes;
    std::istringstream lines(r.output);
    std::string line;
    while (std::getline(lines, line)) {
      std::istringstream fields(line);
      int a = -1, b = -1;
      std::string f;
      fields >> a >> b;
      std::getline(fields >> std::ws, f);
      codes[f] = {a, b};
    }
    return codes;
  }

  // A refusal: exit 2 and exactly one line on stderr, "sprig VERB: ..." naming the file.
  static void ExpectRefusal(int code, const std::string& path, const char* verb,
                            const std::string& what) {
    const std::string err = testing::ReadFile(path + "." + verb);
    EXPECT_EQ(code, 2) << verb << " of " << what << ": " << err;
    EXPECT_EQ(std::count(err.begin(), err.end(), '\n'), 1) << verb << " of " << what << ": " << err;
    EXPECT_EQ(err.rfind(std::string("sprig ") + verb + ": ", 0), 0u) << err;
    EXPECT_NE(err.find(path), std::string::npos) << verb << " of " << what << ": " << err;
  }

  static testing::TempDir* dir_;
  static std::string* bytes_;
  static std::string* input_;
  static uint64_t header_begin_, header_end_;
  static std::vector<std::pair<uint64_t, uint64_t>>* checked_;
};

testing::TempDir* Corruption::dir_ = nullptr;
std::string* Corruption::bytes_ = nullptr;
std::string* Corruption::input_ = nullptr;
uint64_t Corruption::header_begin_ = 0, Corruption::header_end_ = 0;
std::vector<std::pair<uint64_t, uint64_t>>* Corruption::checked_ = nullptr;

TEST_F(Corruption, TruncatedFilesAreRefused) {
  // Every 11th length through the preamble and header (loader_test.cc opens every 7th), then
  // 60 lengths spread over the data.
  std::vector<uint64_t> cuts;
  for (uint64_t n = 0; n < header_end_ + 64; n += 11) cuts.push_back(n);
  for (uint64_t n = header_end_ + 64; n < bytes_->size(); n += bytes_->size() / 60 + 1) {
    cuts.push_back(n);
  }
  cuts.push_back(bytes_->size() - 1);
  std::vector<Damage> files;
  for (uint64_t n : cuts) {
    const std::string path = dir_->File("cut" + std::to_string(n) + ".sprig");
    testing::WriteFile(path, bytes_->substr(0, n));
    EXPECT_NE(OpenAndRun(path).first, "") << "a file cut to " << n << " bytes opened";
    files.push_back({path, Region::kPreamble, "a cut to " + std::to_string(n) + " bytes"});
  }
  const auto codes = RunCli(files);
  ASSERT_EQ(codes.size(), files.size());
  for (const Damage& d : files) {
    ExpectRefusal(codes.at(d.path).first, d.path, "inspect", d.what);
    ExpectRefusal(codes.at(d.path).second, d.path, "run", d.what);
  }
}

TEST_F(Corruption, RandomDamageIsRefusedOrCaught) {
  // A fixed seed: the same 1,050 corruptions in every run. A third start in each of preamble,
  // header and data; half change one byte, half overwrite a run of 2..64 bytes.
  std::mt19937_64 rng(20261202);
  const uint64_t size = bytes_->size();
  const std::pair<uint64_t, uint64_t> spans[] = {
      {0, header_begin_}, {header_begin_, header_end_}, {header_end_, size}};
  std::vector<Damage> files;
  std::map<Region, size_t> counts;
  for (size_t i = 0; i < 1050; ++i) {
    const auto [lo, hi] = spans[i % 3];
    const uint64_t at = lo + rng() % (hi - lo);
    std::string b = *bytes_;
    uint64_t length = 1;
    if (i % 2 == 1) length = std::min<uint64_t>(2 + rng() % 63, size - at);
    for (uint64_t k = 0; k < length; ++k) b[at + k] = static_cast<char>(rng());
    b[at] = static_cast<char>((*bytes_)[at] ^ (1 + rng() % 255));  // at least one byte changes
    // The region of the first damaged byte a reader meets (preamble before header before data);
    // a run that reaches checksummed bytes counts as damage to them.
    Region region = Region::kPadding;
    for (uint64_t k = 0; k < length; ++k) {
      if (b[at + k] == (*bytes_)[at + k]) continue;
      region = std::min(region, RegionOf(at + k));
    }
    // Appended piece by piece: GCC 12 warns (wrongly, -Wrestrict) on `"c" + std::string`.
    std::string what = std::to_string(length);
    what.append(" bytes at ").append(std::to_string(at)).append(" (").append(Name(region));
    Damage d{dir_->File(std::string("c").append(std::to_string(i)).append(".sprig")), region,
             what.append(")")};
    testing::WriteFile(d.path, b);
    ++counts[region];
    const auto [open_error, check] = OpenAndRun(d.path);
    if (region == Region::kPreamble || region == Region::kHeader) {
      EXPECT_NE(open_error.find(d.path), std::string::npos) << d.what << ": " << open_error;
    } else {
      EXPECT_EQ(open_error, "") << d.what;
      EXPECT_EQ(check.code(),
                region == Region::kChecked ? Status::Code::kCheckFailed : Status::Code::kOk)
          << d.what << ": " << check.message();
    }
    files.push_back(std::move(d));
  }
  std::printf("damage landed in: preamble %zu, header %zu, checksummed data %zu, padding %zu\n",
              counts[Region::kPreamble], counts[Region::kHeader], counts[Region::kChecked],
              counts[Region::kPadding]);
  // The spread the test claims: every region is hit many times.
  EXPECT_GE(counts[Region::kPreamble], 300u);
  EXPECT_GE(counts[Region::kHeader], 300u);
  EXPECT_GE(counts[Region::kChecked], 150u);

  const auto codes = RunCli(files);
  ASSERT_EQ(codes.size(), files.size());
  for (const Damage& d : files) {
    const auto [inspect, run] = codes.at(d.path);
    switch (d.region) {
      case Region::kPreamble:
      case Region::kHeader:
        ExpectRefusal(inspect, d.path, "inspect", d.what);
        ExpectRefusal(run, d.path, "run", d.what);
        break;
      case Region::kChecked:
        EXPECT_EQ(inspect, 1) << d.what << ": " << testing::ReadFile(d.path + ".inspect");
        // Damaged weights still compute something; run reads no checksums.
        EXPECT_EQ(run, 0) << d.what << ": " << testing::ReadFile(d.path + ".run");
        break;
      case Region::kPadding:
        EXPECT_EQ(inspect, 0) << d.what << ": " << testing::ReadFile(d.path + ".inspect");
        EXPECT_EQ(run, 0) << d.what << ": " << testing::ReadFile(d.path + ".run");
        break;
    }
  }
}

}  // namespace
}  // namespace sprig
