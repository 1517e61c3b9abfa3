// Tests of io/: reading .npy/.npz/.safetensors files, the writers, and AtomicFile.
//
// Reference files come from NumPy itself: tests/python/io_make_fixtures.py writes every array
// both in its container and as the raw bytes NumPy holds (arr.tobytes()), and the reader must
// reproduce those bytes exactly. Files we write are loaded back with numpy.load by
// tests/python/io_check_written.py, which exits non-zero on any mismatch.
// Source: NumPy (Debian python3-numpy); PyTorch (Debian python3-torch) for bfloat16 bits.
#ifndef _WIN32
#include <fcntl.h>
#include <signal.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>
#endif

#include <gtest/gtest.h>

#include "support/test_util.h"

#include <algorithm>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <memory>
#include <nlohmann/json.hpp>
#include <random>
#include <string>
#include <vector>

#include "io/atomic_file.h"
#include "io/ndarray.h"
#include "io/npz.h"
#include "io/tensor_archive.h"

namespace sprig::io {
namespace {

namespace fs = std::filesystem;
using nlohmann::json;

#define EXPECT_CONTAINS(text, part) \
  EXPECT_NE(std::string(text).find(part), std::string::npos) << "message: " << (text)

// ---------------------------------------------------------------------------------------------
// Helpers.

using testing::TempDir;

std::string PythonBinary() {
  return testing::Python();
}

std::string ShellQuote(const std::string& s) {
  return testing::Quote(s);
}

// Runs tests/python/`script` with `args`; returns its exit status and stores what it printed.
int RunPythonScript(const std::string& script, const std::vector<std::string>& args,
                    std::string* output) {
  std::string command = ShellQuote(PythonBinary()) + " " +
                        ShellQuote(std::string(SPRIG_SOURCE_DIR) + "/tests/python/" + script);
  for (const std::string& a : args) {
    command += ' ';
    command += ShellQuote(a);
  }
  const testing::CommandResult r = testing::Run(command);
  *output = r.output;
  return r.exit_code;
}

std::string ReadBytes(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  return std::string(std::istreambuf_iterator<char>(in), std::istreambuf_iterator<char>());
}

void WriteBytes(const std::string& path, const std::string& bytes) {
  std::ofstream out(path, std::ios::binary | std::ios::trunc);
  out.write(bytes.data(), std::streamsize(bytes.size()));
}

bool SameBytes(const NdArray& a, const std::string& expected) {
  if (a.nbytes() != expected.size()) return false;
  return expected.empty() || std::memcmp(a.data, expected.data(), expected.size()) == 0;
}

// Files generated once per test run by a helper script into a folder of their own.
struct GeneratedFiles {
  std::unique_ptr<TempDir> dir = std::make_unique<TempDir>();
  std::string error;  // empty when the script succeeded
  json manifest;
  std::string File(const std::string& name) const { return dir->File(name); }
};

GeneratedFiles Generate(const std::string& script) {
  GeneratedFiles files;
  std::string output;
  if (files.dir->path().empty()) {
    files.error = "cannot create a temporary folder";
  } else if (RunPythonScript(script, {files.dir->path()}, &output) != 0) {
    files.error = script + " failed: " + output;
  } else if (fs::exists(files.File("manifest.json"))) {
    files.manifest = json::parse(ReadBytes(files.File("manifest.json")));
  }
  return files;
}

const GeneratedFiles& NumpyFiles() {
  static const GeneratedFiles files = Generate("io_make_fixtures.py");
  return files;
}

const GeneratedFiles& BadFiles() {
  static const GeneratedFiles files = Generate("io_make_bad_files.py");
  return files;
}

// Checks one array against a manifest entry: name, NumPy dtype name, shape and raw bytes.
void ExpectMatchesNumpy(const NdArray& array, const json& spec, const GeneratedFiles& files) {
  SCOPED_TRACE("array " + spec["name"].get<std::string>());
  EXPECT_EQ(array.name, spec["name"].get<std::string>());
  EXPECT_EQ(std::string(ElementTypeName(array.type)), spec["dtype"].get<std::string>());
  EXPECT_EQ(array.shape, spec["shape"].get<std::vector<uint64_t>>());
  const std::string raw = ReadBytes(files.File(spec["raw"].get<std::string>()));
  EXPECT_EQ(array.nbytes(), raw.size());
  EXPECT_TRUE(SameBytes(array, raw)) << "data differs from NumPy's tobytes()";
}

// Checks every archive of one kind in the manifest against NumPy's view of it.
void ExpectArchivesMatch(const std::string& kind, ArchiveKind expected_kind) {
  const GeneratedFiles& files = NumpyFiles();
  ASSERT_EQ(files.error, "");
  ASSERT_FALSE(files.manifest[kind].empty());
  for (const json& entry : files.manifest[kind]) {
    const std::string path = files.File(entry["file"].get<std::string>());
    SCOPED_TRACE(path);
    auto archive = TensorArchive::Open(path);
    ASSERT_TRUE(archive.ok()) << archive.status().message();
    EXPECT_EQ(archive->kind(), expected_kind);
    EXPECT_EQ(archive->path(), path);
    const json& specs = entry["arrays"];
    ASSERT_EQ(archive->arrays().size(), specs.size());
    for (size_t i = 0; i < specs.size(); ++i) {
      ExpectMatchesNumpy(archive->arrays()[i], specs[i], files);
      EXPECT_EQ(archive->Find(specs[i]["name"].get<std::string>()), &archive->arrays()[i]);
    }
    EXPECT_EQ(archive->Find("no.such.array"), nullptr);
  }
}

// The failure status of opening `path` (a test failure if it opens).
Status OpenFailure(const std::string& path) {
  auto archive = TensorArchive::Open(path);
  EXPECT_FALSE(archive.ok()) << path << " opened, but it should not";
  return archive.ok() ? Status::Ok() : archive.status();
}

// ---------------------------------------------------------------------------------------------
// Reading files NumPy wrote.

TEST(IoNdArray, ElementTypes) {
  // Source: numpy.dtype(...).itemsize and .name for each type (bfloat16: 2 bytes, from memory).
  EXPECT_EQ(ElementSize(ElementType::kF64), 8u);
  EXPECT_EQ(ElementSize(ElementType::kBF16), 2u);
  EXPECT_EQ(ElementSize(ElementType::kBool), 1u);
  EXPECT_STREQ(ElementTypeName(ElementType::kU16), "uint16");
  EXPECT_TRUE(IsFloating(ElementType::kBF16));
  EXPECT_FALSE(IsFloating(ElementType::kI8));
  NdArray scalar = NdArray::Owned("s", ElementType::kI32, {}, {1, 2, 3, 4});
  EXPECT_EQ(scalar.elements(), 1u);
  EXPECT_EQ(scalar.nbytes(), 4u);
  NdArray empty = NdArray::Borrowed("e", ElementType::kF32, {3, 0}, nullptr);
  EXPECT_EQ(empty.nbytes(), 0u);
}

TEST(IoNpyRead, EveryDtypeAndLayoutMatchesNumpy) {
  const GeneratedFiles& files = NumpyFiles();
  ASSERT_EQ(files.error, "");
  ASSERT_GE(files.manifest["npy"].size(), 12u);
  for (const json& spec : files.manifest["npy"]) {
    const std::string path = files.File(spec["file"].get<std::string>());
    SCOPED_TRACE(path);
    auto archive = TensorArchive::Open(path);
    ASSERT_TRUE(archive.ok()) << archive.status().message();
    EXPECT_EQ(archive->kind(), ArchiveKind::kNpy);
    ASSERT_EQ(archive->arrays().size(), 1u);
    // A .npy file's one array is named after the file's stem (spec name == stem).
    ExpectMatchesNumpy(archive->arrays()[0], spec, files);
  }
}

TEST(IoNpzRead, SavezMatchesNumpy) {
  ExpectArchivesMatch("npz", ArchiveKind::kNpz);
}

TEST(IoSafetensorsRead, HandWrittenFileMatchesNumpyAndTorch) {
  // The header lists tensors in reverse name order; arrays() must follow the data offsets,
  // which the manifest lists in order.
  ExpectArchivesMatch("safetensors", ArchiveKind::kSafetensors);
}

TEST(IoNpzRead, StoredMembersAreViewsOfTheMapping) {
  const GeneratedFiles& files = NumpyFiles();
  ASSERT_EQ(files.error, "");
  const std::string path = files.File("savez.npz");
  const std::string bytes = ReadBytes(path);
  auto archive = TensorArchive::Open(path);
  ASSERT_TRUE(archive.ok()) << archive.status().message();
  // Arrays stored little-endian in C order must point into one shared mapping, at the same
  // distances from each other as their bytes lie in the file: nothing was copied.
  const NdArray* first = nullptr;
  size_t first_offset = 0;
  int checked = 0;
  for (const NdArray& a : archive->arrays()) {
    if (a.nbytes() < 16 || a.name == "fortran" || a.name == "bigendian") continue;
    const std::string raw(reinterpret_cast<const char*>(a.data), a.nbytes());
    const size_t offset = bytes.find(raw);
    ASSERT_NE(offset, std::string::npos) << a.name;
    if (first == nullptr) {
      first = &a;
      first_offset = offset;
      continue;
    }
    EXPECT_EQ(a.data - first->data, std::ptrdiff_t(offset) - std::ptrdiff_t(first_offset))
        << a.name;
    EXPECT_EQ(a.keepalive.get(), first->keepalive.get()) << a.name;
    ++checked;
  }
  EXPECT_GE(checked, 3);
}

TEST(IoNpzRead, ArraysOutliveTheirArchive) {
  const GeneratedFiles& files = NumpyFiles();
  ASSERT_EQ(files.error, "");
  for (const char* name : {"savez.npz", "savez_compressed.npz", "tensors.safetensors"}) {
    std::vector<NdArray> arrays;
    {
      auto archive = TensorArchive::Open(files.File(name));
      ASSERT_TRUE(archive.ok()) << archive.status().message();
      arrays = archive->arrays();
    }
    const json* entry = nullptr;
    for (const char* kind : {"npz", "safetensors"}) {
      for (const json& e : files.manifest[kind]) {
        if (e["file"] == name) entry = &e;
      }
    }
    ASSERT_NE(entry, nullptr);
    ASSERT_EQ(arrays.size(), (*entry)["arrays"].size());
    for (size_t i = 0; i < arrays.size(); ++i) {
      ExpectMatchesNumpy(arrays[i], (*entry)["arrays"][i], files);
    }
  }
}

// ---------------------------------------------------------------------------------------------
// Writing, checked by numpy.load.

// Arrays of every writable type with deterministic random bytes, including a 0-d, an empty
// and a 6 MiB array (larger than AtomicFile's buffer, so its header is patched on disk).
std::vector<NdArray> SampleArrays(bool with_bfloat16) {
  std::mt19937_64 rng(12345);
  auto make = [&](const std::string& name, ElementType type, std::vector<uint64_t> shape) {
    NdArray probe = NdArray::Borrowed(name, type, shape, nullptr);
    std::vector<uint8_t> bytes(probe.nbytes());
    for (auto& b : bytes) b = type == ElementType::kBool ? uint8_t(rng() & 1) : uint8_t(rng());
    return NdArray::Owned(name, type, std::move(shape), std::move(bytes));
  };
  std::vector<NdArray> arrays = {
      make("layers.0.fc1.weight", ElementType::kF32, {8, 4}),
      make("f64", ElementType::kF64, {3}),
      make("f16", ElementType::kF16, {2, 3}),
      make("i64", ElementType::kI64, {2}),
      make("i32", ElementType::kI32, {3, 1}),
      make("i16", ElementType::kI16, {4}),
      make("i8", ElementType::kI8, {5}),
      make("u64", ElementType::kU64, {2}),
      make("u32", ElementType::kU32, {2}),
      make("u16", ElementType::kU16, {3}),
      make("u8", ElementType::kU8, {7}),
      make("mask", ElementType::kBool, {2, 2}),
      make("scalar", ElementType::kF32, {}),
      make("empty", ElementType::kF32, {0, 3}),
      make("gr\xc3\xb6\xc3\x9f"
           "e",
           ElementType::kF32, {2}),  // a UTF-8 name
      make("big", ElementType::kF32, {1536, 1024}),
  };
  if (with_bfloat16) arrays.push_back(make("bf16", ElementType::kBF16, {3, 2}));
  return arrays;
}

// Records `arrays` as written to `file` in a manifest for io_check_written.py.
void AddToManifest(json* manifest, const TempDir& dir, const std::string& file,
                   const std::string& kind, const std::vector<NdArray>& arrays) {
  json entry = {{"file", file}, {"kind", kind}, {"arrays", json::array()}};
  for (size_t i = 0; i < arrays.size(); ++i) {
    const std::string raw = file + "." + std::to_string(i) + ".bin";
    WriteBytes(dir.File(raw),
               std::string(reinterpret_cast<const char*>(arrays[i].data), arrays[i].nbytes()));
    entry["arrays"].push_back({{"name", arrays[i].name},
                               {"dtype", ElementTypeName(arrays[i].type)},
                               {"shape", arrays[i].shape},
                               {"raw", raw}});
  }
  (*manifest)["files"].push_back(entry);
}

// Runs io_check_written.py on `manifest`; fails the test with its report on mismatch.
void ExpectNumpyAgrees(const TempDir& dir, const json& manifest) {
  WriteBytes(dir.File("manifest.json"), manifest.dump(1));
  std::string output;
  EXPECT_EQ(RunPythonScript("io_check_written.py", {dir.File("manifest.json")}, &output), 0)
      << output;
}

// Reads `path` back with our own reader and compares with what was written.
void ExpectReadsBack(const std::string& path, const std::vector<NdArray>& arrays) {
  auto archive = TensorArchive::Open(path);
  ASSERT_TRUE(archive.ok()) << archive.status().message();
  ASSERT_EQ(archive->arrays().size(), arrays.size());
  for (size_t i = 0; i < arrays.size(); ++i) {
    const NdArray& a = archive->arrays()[i];
    EXPECT_EQ(a.name, arrays[i].name);
    EXPECT_EQ(a.type, arrays[i].type);
    EXPECT_EQ(a.shape, arrays[i].shape);
    EXPECT_TRUE(SameBytes(
        a, std::string(reinterpret_cast<const char*>(arrays[i].data), arrays[i].nbytes())))
        << a.name;
  }
}

TEST(IoWrite, NpyFilesLoadInNumpy) {
  TempDir dir;
  json manifest = {{"files", json::array()}};
  for (const NdArray& a : SampleArrays(false)) {
    const std::string file = "npy_" + std::to_string(manifest["files"].size()) + ".npy";
    NdArray named = a;
    // numpy.load of a .npy knows no array name; our reader names it after the file's stem.
    named.name = file.substr(0, file.size() - 4);
    ASSERT_TRUE(WriteNpy(dir.File(file), named, false).ok());
    AddToManifest(&manifest, dir, file, "npy", {named});
    ExpectReadsBack(dir.File(file), {named});
  }
  ExpectNumpyAgrees(dir, manifest);
}

TEST(IoWrite, NpzFilesLoadInNumpy) {
  TempDir dir;
  json manifest = {{"files", json::array()}};
  const std::vector<NdArray> arrays = SampleArrays(false);
  for (bool compress : {false, true}) {
    const std::string file = compress ? "deflated.npz" : "stored.npz";
    Status s = WriteNpz(dir.File(file), arrays, compress, false);
    ASSERT_TRUE(s.ok()) << s.message();
    AddToManifest(&manifest, dir, file, "npz", arrays);
    ExpectReadsBack(dir.File(file), arrays);
  }
  ASSERT_TRUE(WriteNpz(dir.File("none.npz"), {}, false, false).ok());
  AddToManifest(&manifest, dir, "none.npz", "npz", {});
  ExpectReadsBack(dir.File("none.npz"), {});
  ExpectNumpyAgrees(dir, manifest);
}

TEST(IoWrite, Zip64RecordsLoadInNumpy) {
  // Writing 4 GiB in a unit test is too slow, so the ZIP64 threshold is lowered to 1: every
  // size, offset and count then takes the ZIP64 form a large model would get.
  TempDir dir;
  json manifest = {{"files", json::array()}};
  const std::vector<NdArray> arrays = SampleArrays(false);
  for (bool compress : {false, true}) {
    NpzWriteOptions options;
    options.compress = compress;
    options.zip64_threshold = 1;
    const std::string file = compress ? "deflated64.npz" : "stored64.npz";
    Status s = WriteNpzWithOptions(dir.File(file), arrays, options);
    ASSERT_TRUE(s.ok()) << s.message();
    const std::string bytes = ReadBytes(dir.File(file));
    EXPECT_NE(bytes.find("PK\x06\x06"), std::string::npos) << "no ZIP64 end record";
    AddToManifest(&manifest, dir, file, "npz", arrays);
    ExpectReadsBack(dir.File(file), arrays);
  }
  ExpectNumpyAgrees(dir, manifest);
}

TEST(IoWrite, SafetensorsFilesParseAndReadBack) {
  TempDir dir;
  json manifest = {{"files", json::array()}};
  const std::vector<NdArray> arrays = SampleArrays(true);
  ASSERT_TRUE(WriteSafetensors(dir.File("t.safetensors"), arrays, false).ok());
  AddToManifest(&manifest, dir, "t.safetensors", "safetensors", arrays);
  ExpectNumpyAgrees(dir, manifest);
  ExpectReadsBack(dir.File("t.safetensors"), arrays);
}

TEST(IoWrite, Bfloat16IsRefusedForNumpyContainers) {
  TempDir dir;
  NdArray bf16 = NdArray::Owned("w", ElementType::kBF16, {2}, {0, 0x3f, 0x80, 0x3f});
  for (bool npz : {false, true}) {
    const std::string path = dir.File(npz ? "w.npz" : "w.npy");
    Status s = npz ? WriteNpz(path, {bf16}, false, false) : WriteNpy(path, bf16, false);
    EXPECT_EQ(s.code(), Status::Code::kNotSupported);
    EXPECT_CONTAINS(s.message(), "bfloat16");
    EXPECT_CONTAINS(s.message(), "'w'");
    EXPECT_CONTAINS(s.message(), path);
    EXPECT_FALSE(fs::exists(path));
  }
  EXPECT_TRUE(fs::is_empty(dir.path()));
}

TEST(IoWrite, DuplicateNamesAreRefused) {
  TempDir dir;
  NdArray a = NdArray::Owned("a", ElementType::kU8, {1}, {7});
  Status s = WriteNpz(dir.File("d.npz"), {a, a}, false, false);
  EXPECT_EQ(s.code(), Status::Code::kInvalidArgument);
  EXPECT_CONTAINS(s.message(), "'a'");
  s = WriteSafetensors(dir.File("d.safetensors"), {a, a}, false);
  EXPECT_EQ(s.code(), Status::Code::kInvalidArgument);
  EXPECT_TRUE(fs::is_empty(dir.path()));
}

TEST(IoWrite, ExistingOutputIsKeptUnlessOverwriting) {
  TempDir dir;
  const std::string path = dir.File("out.npy");
  WriteBytes(path, "precious");
  NdArray a = NdArray::Owned("out", ElementType::kU8, {3}, {1, 2, 3});
  Status s = WriteNpy(path, a, false);
  EXPECT_EQ(s.code(), Status::Code::kInvalidArgument);
  EXPECT_EQ(s.message(), path + " already exists (refusing to overwrite)");
  EXPECT_EQ(ReadBytes(path), "precious");
  ASSERT_TRUE(WriteNpy(path, a, true).ok());
  ExpectReadsBack(path, {a});
}

// ---------------------------------------------------------------------------------------------
// Files that must be refused, each with a message naming the file (and member or tensor).

class IoReadErrors : public ::testing::Test {
 protected:
  void SetUp() override { ASSERT_EQ(BadFiles().error, ""); }
  static std::string Bad(const std::string& name) { return BadFiles().File(name); }
  // Opens `name` and checks the code and that the message names the file and each `part`.
  static void ExpectFailure(const std::string& name, Status::Code code,
                            const std::vector<std::string>& parts) {
    const Status s = OpenFailure(Bad(name));
    EXPECT_EQ(s.code(), code) << s.message();
    EXPECT_CONTAINS(s.message(), Bad(name));
    for (const std::string& part : parts) EXPECT_CONTAINS(s.message(), part);
  }
};

TEST_F(IoReadErrors, MissingFile) {
  TempDir dir;
  const Status s = OpenFailure(dir.File("absent.npz"));
  EXPECT_EQ(s.code(), Status::Code::kNotFound);
  EXPECT_EQ(s.message(), dir.File("absent.npz") + " does not exist");
}

TEST_F(IoReadErrors, UnreadablePaths) {
  // Tests run as root, whom permission bits do not stop; a folder and a path through a regular
  // file are unreadable for everyone.
  TempDir dir;
  Status s = OpenFailure(dir.path());
  EXPECT_EQ(s.code(), Status::Code::kIOError);
  EXPECT_CONTAINS(s.message(), dir.path());
  EXPECT_CONTAINS(s.message(), "folder");
  WriteBytes(dir.File("plain"), "x");
  s = OpenFailure(dir.File("plain") + "/weights.npz");
  EXPECT_CONTAINS(s.message(), dir.File("plain") + "/weights.npz");
}

TEST_F(IoReadErrors, NotAnArchive) {
  TempDir dir;
  WriteBytes(dir.File("notes.txt"), "hello, world\n");
  Status s = OpenFailure(dir.File("notes.txt"));
  EXPECT_EQ(s.code(), Status::Code::kInvalidArgument);
  EXPECT_EQ(s.message(), dir.File("notes.txt") +
                             " is not a .npy, .npz or .safetensors file (it starts with bytes "
                             "68 65 6c 6c 6f 2c 20 77)");
  WriteBytes(dir.File("empty.npz"), "");
  s = OpenFailure(dir.File("empty.npz"));
  EXPECT_CONTAINS(s.message(), dir.File("empty.npz") + " is empty");
}

TEST_F(IoReadErrors, TruncatedNpy) {
  // 4 x 6 float32 = 96 bytes of data, 5 cut off.
  ExpectFailure("truncated.npy", Status::Code::kCorruption, {"truncated", "96", "91"});
}

TEST_F(IoReadErrors, MalformedNpyHeaders) {
  ExpectFailure("bad_header.npy", Status::Code::kCorruption, {"malformed .npy header"});
  ExpectFailure("version9.npy", Status::Code::kNotSupported, {"version 9.0"});
}

TEST_F(IoReadErrors, UnsupportedDtypes) {
  ExpectFailure("complex.npy", Status::Code::kNotSupported, {"'<c8'", "complex64"});
  ExpectFailure("object.npy", Status::Code::kNotSupported, {"'|O'"});
  ExpectFailure("structured.npy", Status::Code::kNotSupported, {"structured"});
  ExpectFailure("complex_member.npz", Status::Code::kNotSupported, {"member 'z.npy'", "'<c8'"});
  ExpectFailure("complex.safetensors", Status::Code::kNotSupported, {"tensor 'w'", "'C64'"});
}

TEST_F(IoReadErrors, TruncatedNpz) {
  ExpectFailure("cut_middle.npz", Status::Code::kCorruption, {"truncated"});
  ExpectFailure("cut_directory.npz", Status::Code::kCorruption, {"truncated"});
  ExpectFailure("directory_outside.npz", Status::Code::kCorruption, {"central directory"});
}

TEST_F(IoReadErrors, CrcMismatch) {
  ExpectFailure("crc_stored.npz", Status::Code::kCorruption, {"member 'a.npy'", "CRC-32"});
  ExpectFailure("crc_deflated.npz", Status::Code::kCorruption, {"member 'b.npy'", "CRC-32"});
}

TEST_F(IoReadErrors, DecompressionBombs) {
  ExpectFailure("bomb.npz", Status::Code::kCorruption,
                {"member 'big.npy'", "3221225472", "decompression bomb"});
  ExpectFailure("undersized.npz", Status::Code::kCorruption,
                {"member 'big.npy'", "more than its declared"});
}

TEST_F(IoReadErrors, UnsupportedMembers) {
  ExpectFailure("not_npy_member.npz", Status::Code::kInvalidArgument, {"member 'readme.txt'"});
  ExpectFailure("duplicate.npz", Status::Code::kCorruption, {"two members named 'a.npy'"});
  ExpectFailure("bzip2.npz", Status::Code::kNotSupported, {"member 'a.npy'", "method 12"});
}

TEST_F(IoReadErrors, BadSafetensors) {
  ExpectFailure("offsets_outside.safetensors", Status::Code::kCorruption,
                {"tensor 'v'", "[96, 192]", "96-byte data section"});
  ExpectFailure("header_past_end.safetensors", Status::Code::kCorruption, {"truncated", "1048576"});
  ExpectFailure("wrong_size.safetensors", Status::Code::kCorruption, {"tensor 'w'", "needs 80"});
  ExpectFailure("bad_json.safetensors", Status::Code::kCorruption, {"not valid JSON"});
}

TEST_F(IoReadErrors, DamagedBytesAreRefusedOrReadSafely) {
  // Every truncation and a few hundred random byte changes of valid files. Each must either be
  // refused with a message naming the file, or open with every array inside readable memory
  // (this test is most useful under -DSPRIG_SANITIZE=ON, where a stray read aborts).
  const GeneratedFiles& files = NumpyFiles();
  ASSERT_EQ(files.error, "");
  TempDir dir;
  std::mt19937 rng(99);
  for (const char* name : {"savez.npz", "savez_compressed.npz", "savez_zip64.npz",
                           "tensors.safetensors", "fortran_2d.npy", "big_f4.npy"}) {
    const std::string original = ReadBytes(files.File(name));
    const std::string path = dir.File(name);
    std::vector<std::string> variants;
    for (size_t cut = 0; cut < original.size(); cut += 1 + original.size() / 97) {
      variants.push_back(original.substr(0, cut));
    }
    for (int i = 0; i < 200; ++i) {
      std::string damaged = original;
      for (int k = 0; k < 1 + int(rng() % 4); ++k) damaged[rng() % damaged.size()] ^= char(rng());
      variants.push_back(damaged);
    }
    for (const std::string& bytes : variants) {
      // A new file each time: rewriting one in place makes ext4 flush it to disk on close.
      fs::remove(path);
      WriteBytes(path, bytes);
      auto archive = TensorArchive::Open(path);
      if (!archive.ok()) {
        EXPECT_CONTAINS(archive.status().message(), path);
        continue;
      }
      uint64_t checksum = 0;
      for (const NdArray& a : archive->arrays()) {
        for (uint64_t j = 0; j < a.nbytes(); ++j) checksum += a.data[j];
      }
      (void)checksum;
    }
  }
}

// ---------------------------------------------------------------------------------------------
// AtomicFile.

bool SupportsTmpfile(const std::string& folder) {
#ifdef O_TMPFILE
  const int fd = ::open(folder.c_str(), O_TMPFILE | O_WRONLY | O_CLOEXEC, 0644);
  if (fd < 0) return false;
  ::close(fd);
  return true;
#else
  (void)folder;
  return false;  // no anonymous temporaries on this system
#endif
}

// Runs each test with the anonymous temporary (where supported) and with the named fallback.
class IoAtomicFile : public ::testing::TestWithParam<bool> {
 protected:
  void SetUp() override {
    if (!GetParam() && !SupportsTmpfile(dir_.path())) GTEST_SKIP() << "no O_TMPFILE here";
    AtomicFile::ForceNamedTemporaryForTesting(GetParam());
  }
  void TearDown() override { AtomicFile::ForceNamedTemporaryForTesting(false); }
  TempDir dir_;
};

TEST_P(IoAtomicFile, CommitPublishesAndLeavesNoTemporary) {
  const std::string path = dir_.File("out.bin");
  auto file = AtomicFile::Create(path, false);
  ASSERT_TRUE(file.ok()) << file.status().message();
  ASSERT_TRUE(file->Write("abc", 3).ok());
  ASSERT_TRUE(file->WriteZeros(2).ok());
  EXPECT_EQ(file->size(), 5u);
  EXPECT_FALSE(fs::exists(path));
  ASSERT_TRUE(file->Commit().ok());
  EXPECT_EQ(ReadBytes(path), std::string("abc\0\0", 5));
  EXPECT_EQ(std::distance(fs::directory_iterator(dir_.path()), fs::directory_iterator()), 1);
  EXPECT_FALSE(file->Write("x", 1).ok());
}

TEST_P(IoAtomicFile, DiscardedWriteLeavesNothing) {
  {
    auto file = AtomicFile::Create(dir_.File("out.bin"), false);
    ASSERT_TRUE(file.ok()) << file.status().message();
    std::vector<uint8_t> data(5 << 20, 0x5a);
    ASSERT_TRUE(file->Write(data.data(), data.size()).ok());
  }
  EXPECT_TRUE(fs::is_empty(dir_.path()));
}

TEST_P(IoAtomicFile, WriteAtPatchesFlushedAndBufferedBytes) {
  const std::string path = dir_.File("out.bin");
  std::vector<uint8_t> expected;
  std::mt19937 rng(1);
  for (int i = 0; i < (9 << 20) + 123; ++i) expected.push_back(uint8_t(rng()));
  auto file = AtomicFile::Create(path, false);
  ASSERT_TRUE(file.ok()) << file.status().message();
  // Small writes (buffered), one large write (direct), then a small tail (buffered again).
  ASSERT_TRUE(file->Write(expected.data(), 1000).ok());
  ASSERT_TRUE(file->Write(expected.data() + 1000, (9 << 20) - 1000).ok());
  ASSERT_TRUE(file->Write(expected.data() + (9 << 20), 123).ok());
  const uint8_t patch[] = {1, 2, 3, 4, 5, 6, 7, 8};
  for (uint64_t offset : {uint64_t{10}, uint64_t{(9 << 20) - 4}, uint64_t{(9 << 20) + 100}}) {
    ASSERT_TRUE(file->WriteAt(offset, patch, sizeof patch).ok()) << offset;
    std::memcpy(expected.data() + offset, patch, sizeof patch);
  }
  EXPECT_FALSE(file->WriteAt(expected.size() - 4, patch, sizeof patch).ok());
  ASSERT_TRUE(file->Commit().ok());
  EXPECT_TRUE(ReadBytes(path) == std::string(expected.begin(), expected.end()));
}

TEST_P(IoAtomicFile, RefusesAnExistingOutput) {
  const std::string path = dir_.File("out.bin");
  WriteBytes(path, "old");
  auto refused = AtomicFile::Create(path, false);
  ASSERT_FALSE(refused.ok());
  EXPECT_EQ(refused.status().message(), path + " already exists (refusing to overwrite)");

  // A destination that appears between Create and Commit is not replaced either.
  fs::remove(path);
  {
    auto file = AtomicFile::Create(path, false);
    ASSERT_TRUE(file.ok()) << file.status().message();
    ASSERT_TRUE(file->Write("new", 3).ok());
    WriteBytes(path, "old");
    Status s = file->Commit();
    EXPECT_EQ(s.message(), path + " already exists (refusing to overwrite)");
    EXPECT_EQ(ReadBytes(path), "old");
  }

  auto replace = AtomicFile::Create(path, true);
  ASSERT_TRUE(replace.ok()) << replace.status().message();
  ASSERT_TRUE(replace->Write("new", 3).ok());
  ASSERT_TRUE(replace->Commit().ok());
  EXPECT_EQ(ReadBytes(path), "new");
  EXPECT_EQ(std::distance(fs::directory_iterator(dir_.path()), fs::directory_iterator()), 1);
}

TEST_P(IoAtomicFile, UnwritableFoldersAreNamed) {
  // Root ignores permission bits, so use folders nobody can create files in: one that does not
  // exist, and /proc.
  const std::string missing = dir_.File("no/such/folder/out.npz");
  auto file = AtomicFile::Create(missing, false);
  ASSERT_FALSE(file.ok());
  EXPECT_EQ(file.status().code(), Status::Code::kIOError);
  EXPECT_CONTAINS(file.status().message(), dir_.File("no/such/folder"));
  EXPECT_CONTAINS(file.status().message(), "does not exist");

  file = AtomicFile::Create("/proc/sprig-io-test.npz", false);
  ASSERT_FALSE(file.ok());
  EXPECT_EQ(file.status().code(), Status::Code::kIOError);
  EXPECT_CONTAINS(file.status().message(), "folder /proc ");

  NdArray a = NdArray::Owned("a", ElementType::kU8, {1}, {1});
  Status s = WriteNpz(missing, {a}, false, false);
  EXPECT_EQ(s.code(), Status::Code::kIOError);
  EXPECT_CONTAINS(s.message(), missing);
}

INSTANTIATE_TEST_SUITE_P(IoTemporaries, IoAtomicFile, ::testing::Values(false, true),
                         [](const auto& info) { return info.param ? "Named" : "Anonymous"; });

#ifndef _WIN32
// Windows' counterpart, a pack stopped by TerminateProcess, is in error_paths_test.cc.
TEST(IoAtomicFileKill, WriterKilledMidWriteLeavesNothing) {
  TempDir dir;
  if (!SupportsTmpfile(dir.path())) GTEST_SKIP() << "no O_TMPFILE here: a named temporary stays";
  int ready[2];
  ASSERT_EQ(::pipe(ready), 0);
  const pid_t pid = ::fork();
  ASSERT_GE(pid, 0);
  if (pid == 0) {
    ::close(ready[0]);
    auto file = AtomicFile::Create(dir.File("out.npz"), false);
    if (!file.ok()) ::_exit(2);
    std::vector<uint8_t> chunk(1 << 20, 0xab);
    for (int i = 0; i < 6; ++i) {
      if (!file->Write(chunk.data(), chunk.size()).ok()) ::_exit(3);
    }
    const char c = 'w';
    if (::write(ready[1], &c, 1) != 1) ::_exit(4);
    for (;;) ::pause();
  }
  ::close(ready[1]);
  char c = 0;
  const ssize_t got = ::read(ready[0], &c, 1);
  ::close(ready[0]);
  ::kill(pid, SIGKILL);
  int status = 0;
  ::waitpid(pid, &status, 0);
  ASSERT_EQ(got, 1) << "the writer exited before writing";
  EXPECT_TRUE(WIFSIGNALED(status) && WTERMSIG(status) == SIGKILL);
  EXPECT_TRUE(fs::is_empty(dir.path()));
}
#endif

}  // namespace
}  // namespace sprig::io
