// Tests of the platform layer (runtime/src/platform): paths with non-ASCII characters and
// spaces, mappings of files over 4 GiB, atomic replacement, process memory, residency and CPU
// features. They use the platform's interface alone, so the same file also builds against the
// POSIX files compiled with SPRIG_PORTABLE_POSIX (sprig_platform_portable_tests), where the
// figures a portable system lacks are checked to be absent.
// External checks: GCC's __builtin_cpu_supports (libgcc's own CPUID and XGETBV reading) for
// the CPU features on Linux; Linux's /proc/self/status documented fields (proc(5)).
#include <gtest/gtest.h>

#include <algorithm>
#include <atomic>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <memory>
#include <string>
#include <vector>

#include "platform/common.h"
#include "platform/cpu.h"
#include "platform/files.h"
#include "platform/mapping.h"
#include "platform/memory.h"
#include "platform/output_file.h"
#include "platform/process.h"

#ifdef _WIN32
#ifndef WIN32_LEAN_AND_MEAN
#define WIN32_LEAN_AND_MEAN
#endif
#include <windows.h>
#include <winioctl.h>
#else
#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>
#endif

namespace sprig::platform {
namespace {

namespace fs = std::filesystem;

constexpr uint64_t kMiB = uint64_t{1} << 20;

// A fresh folder under the system's temporary folder, removed with its contents afterwards.
class Folder {
 public:
  Folder() {
    static std::atomic<int> counter{0};
    path_ = TemporaryFolder() + "/sprig-platform-test-" + std::to_string(ProcessId()) + "-" +
            std::to_string(counter++);
    fs::create_directories(FsPath(path_));
  }
  ~Folder() {
    std::error_code ignored;
    fs::remove_all(FsPath(path_), ignored);
  }
  const std::string& path() const { return path_; }
  std::string File(const std::string& name) const { return path_ + "/" + name; }
  // The names in the folder, sorted (to see that no temporary is left behind).
  std::vector<std::string> Names() const {
    std::vector<std::string> names;
    for (const auto& entry : fs::directory_iterator(FsPath(path_))) {
      names.push_back(Utf8(entry.path().filename()));
    }
    std::sort(names.begin(), names.end());
    return names;
  }

 private:
  std::string path_;
};

void WriteBytes(const std::string& path, const std::string& bytes) {
  std::FILE* f = OpenFile(path, "wb");
  ASSERT_NE(f, nullptr) << path;
  ASSERT_EQ(std::fwrite(bytes.data(), 1, bytes.size(), f), bytes.size());
  ASSERT_EQ(std::fclose(f), 0);
}

std::string ReadBytes(const std::string& path) {
  std::FILE* f = OpenFile(path, "rb");
  if (f == nullptr) return "<cannot open>";
  std::string bytes;
  char buffer[4096];
  size_t n;
  while ((n = std::fread(buffer, 1, sizeof(buffer), f)) > 0) bytes.append(buffer, n);
  std::fclose(f);
  return bytes;
}

bool Contains(const std::string& text, const std::string& part) {
  return text.find(part) != std::string::npos;
}

// UTF-8 spelled out, so the test does not depend on the source file's encoding.
const std::string kFolderName =
    "m\xC3\xB6"
    "del dir";  // mödel dir
const std::string kFileName =
    "\xC3\xBCn\xC3\xAF c\xC3\xB6"
    "de \xE6\xA8\xA1\xE5\x9E\x8B.bin";  // ünï cöde 模型.bin

TEST(Platform, NonAsciiPathWithSpacesMapsAndReads) {
  Folder folder;
  const std::string dir = folder.File(kFolderName);
  ASSERT_TRUE(fs::create_directory(FsPath(dir)));
  const std::string path = dir + "/" + kFileName;
  std::string bytes(10000, '\0');
  for (size_t i = 0; i < bytes.size(); ++i) bytes[i] = static_cast<char>(i * 7 + 3);
  WriteBytes(path, bytes);

  // The name reaches the file system as UTF-8 (the folder lists it under the same name).
  std::vector<std::string> listed;
  for (const auto& entry : fs::directory_iterator(FsPath(dir))) {
    listed.push_back(Utf8(entry.path().filename()));
  }
  EXPECT_EQ(listed, std::vector<std::string>{kFileName});

  const PathInfo info = InfoOf(path);
  EXPECT_EQ(info.kind, PathKind::kFile);
  EXPECT_EQ(info.size, bytes.size());
  EXPECT_EQ(InfoOf(dir).kind, PathKind::kFolder);
  EXPECT_TRUE(Exists(path));
  EXPECT_TRUE(SameFile(path, dir + "/./" + kFileName));
  EXPECT_FALSE(SameFile(path, dir));
  EXPECT_EQ(BaseName(path), kFileName);
  EXPECT_EQ(FolderOf(path), dir);
  EXPECT_EQ(Utf8(FsPath(path).filename()), kFileName);

  auto mapping = FileMapping::Open(path);
  ASSERT_TRUE(mapping.ok()) << mapping.status().message();
  ASSERT_EQ((*mapping)->size(), bytes.size());
  EXPECT_EQ(std::memcmp((*mapping)->data(), bytes.data(), bytes.size()), 0);
  mapping->reset();  // unmaps, so that the file can be removed on every system

  EXPECT_TRUE(RemoveFile(path).ok());
  EXPECT_FALSE(Exists(path));
  const Status again = RemoveFile(path);
  EXPECT_EQ(again.code(), Status::Code::kNotFound);
  EXPECT_TRUE(Contains(again.message(), kFileName)) << again.message();
}

TEST(Platform, MappingRefusesWhatIsNotAFile) {
  Folder folder;
  const std::string missing = folder.File(kFileName);
  auto m = FileMapping::Open(missing);
  ASSERT_FALSE(m.ok());
  EXPECT_EQ(m.status().code(), Status::Code::kNotFound);
  EXPECT_EQ(m.status().message(), missing + " does not exist");

  m = FileMapping::Open(folder.path());
  ASSERT_FALSE(m.ok());
  EXPECT_EQ(m.status().code(), Status::Code::kIOError);
  EXPECT_TRUE(Contains(m.status().message(), "not a regular file")) << m.status().message();
  EXPECT_TRUE(Contains(m.status().message(), folder.path())) << m.status().message();

  const std::string empty = folder.File("empty.bin");
  WriteBytes(empty, "");
  m = FileMapping::Open(empty);
  ASSERT_TRUE(m.ok()) << m.status().message();
  EXPECT_EQ((*m)->data(), nullptr);
  EXPECT_EQ((*m)->size(), 0u);
  EXPECT_EQ(InfoOf(empty).size, 0u);
  EXPECT_EQ(InfoOf(missing).kind, PathKind::kMissing);
  EXPECT_TRUE(InfoOf(missing).error.empty());
}

// Creates `path` as a sparse file of `size` bytes whose byte at `offset` is `marker`; false
// (with `why` set) when the file system cannot hold it without writing every byte.
bool MakeSparseFile(const std::string& path, uint64_t size, uint64_t offset, char marker,
                    std::string* why) {
#ifdef _WIN32
  const HANDLE file = CreateFileW(FsPath(path).c_str(), GENERIC_READ | GENERIC_WRITE, 0, nullptr,
                                  CREATE_NEW, FILE_ATTRIBUTE_NORMAL, nullptr);
  if (file == INVALID_HANDLE_VALUE) {
    *why = "cannot create " + path;
    return false;
  }
  DWORD returned = 0;
  // Without the sparse attribute NTFS would write zeros up to the marker.
  const bool sparse =
      DeviceIoControl(file, FSCTL_SET_SPARSE, nullptr, 0, nullptr, 0, &returned, nullptr) != 0;
  LARGE_INTEGER at;
  at.QuadPart = static_cast<LONGLONG>(offset);
  DWORD written = 0;
  bool ok = sparse && SetFilePointerEx(file, at, nullptr, FILE_BEGIN) &&
            WriteFile(file, &marker, 1, &written, nullptr) && written == 1;
  at.QuadPart = static_cast<LONGLONG>(size);
  ok = ok && SetFilePointerEx(file, at, nullptr, FILE_BEGIN) && SetEndOfFile(file);
  CloseHandle(file);
  if (!ok) *why = "the file system cannot make sparse files";
  return ok;
#else
  const int fd = ::open(path.c_str(), O_CREAT | O_EXCL | O_RDWR, 0644);
  if (fd < 0) {
    *why = "cannot create " + path;
    return false;
  }
  bool ok = ::ftruncate(fd, static_cast<off_t>(size)) == 0 &&
            ::pwrite(fd, &marker, 1, static_cast<off_t>(offset)) == 1;
  struct stat st;
  // A file system without holes would have stored every byte: far more than a few blocks.
  ok = ok && ::fstat(fd, &st) == 0 && uint64_t(st.st_blocks) * 512 < 64 * kMiB;
  ::close(fd);
  if (!ok) *why = "the file system cannot make sparse files";
  return ok;
#endif
}

TEST(Platform, MapsAFileOver4GiB) {
  Folder folder;
  const std::string path = folder.File(kFileName);
  // Past 4 GiB, so that only a mapping built from both 32-bit halves of the size reaches it.
  const uint64_t offset = (uint64_t{9} << 29) + 12345;  // 4.5 GiB + 12345
  const uint64_t size = offset + 4096;
  std::string why;
  if (!MakeSparseFile(path, size, offset, 'Q', &why)) GTEST_SKIP() << why;
  EXPECT_EQ(InfoOf(path).size, size);
  auto mapping = FileMapping::Open(path);
  ASSERT_TRUE(mapping.ok()) << mapping.status().message();
  ASSERT_EQ((*mapping)->size(), size);
  EXPECT_EQ((*mapping)->data()[offset], 'Q');
  EXPECT_EQ((*mapping)->data()[offset - 1], 0);
  EXPECT_EQ((*mapping)->data()[0], 0);
  EXPECT_EQ((*mapping)->data()[size - 1], 0);
}

// The platform's atomic replacement, with the named temporary (every system) and, where the
// system has one, the anonymous one.
class PlatformPending : public ::testing::TestWithParam<bool> {};

TEST_P(PlatformPending, ReplacesAnExistingFile) {
  Folder folder;
  const std::string path = folder.File(kFileName);
  WriteBytes(path, "old contents");
  auto file = PendingFile::Create(path, GetParam());
  ASSERT_TRUE(file.ok()) << file.status().message();
  ASSERT_TRUE((*file)->Write("new contents, longer", 20).ok());
  ASSERT_TRUE((*file)->WriteAt(0, "N", 1).ok());
  ASSERT_TRUE((*file)->Write("!", 1).ok());    // appends after a WriteAt, at the end
  EXPECT_EQ(ReadBytes(path), "old contents");  // untouched until published
  ASSERT_TRUE((*file)->Publish(/*overwrite=*/true).ok());
  EXPECT_EQ(ReadBytes(path), "New contents, longer!");
  file->reset();
  EXPECT_EQ(folder.Names(), std::vector<std::string>{kFileName});
}

TEST_P(PlatformPending, WithoutOverwriteRefusesAndKeepsTheFile) {
  Folder folder;
  const std::string path = folder.File("out.bin");
  auto file = PendingFile::Create(path, GetParam());
  ASSERT_TRUE(file.ok()) << file.status().message();
  ASSERT_TRUE((*file)->Write("mine", 4).ok());
  // Another writer gets there first.
  WriteBytes(path, "theirs");
  const Status s = (*file)->Publish(/*overwrite=*/false);
  EXPECT_EQ(s.code(), Status::Code::kInvalidArgument);
  EXPECT_EQ(s.message(), path + " already exists (refusing to overwrite)");
  EXPECT_EQ(ReadBytes(path), "theirs");
  file->reset();
  EXPECT_EQ(folder.Names(), std::vector<std::string>{"out.bin"});
}

TEST_P(PlatformPending, CreatesANewFileWithoutOverwrite) {
  Folder folder;
  const std::string path = folder.File(kFileName);
  auto file = PendingFile::Create(path, GetParam());
  ASSERT_TRUE(file.ok()) << file.status().message();
  ASSERT_TRUE((*file)->Write("fresh", 5).ok());
  ASSERT_TRUE((*file)->Publish(/*overwrite=*/false).ok());
  file->reset();
  EXPECT_EQ(ReadBytes(path), "fresh");
  EXPECT_EQ(folder.Names(), std::vector<std::string>{kFileName});
}

TEST_P(PlatformPending, TemporaryIsRemovedWhenNotPublished) {
  Folder folder;
  const std::string path = folder.File("out.bin");
  auto file = PendingFile::Create(path, GetParam());
  ASSERT_TRUE(file.ok()) << file.status().message();
  ASSERT_TRUE((*file)->Write("partial", 7).ok());
  const std::string temporary = (*file)->temporary_path();
  if (!temporary.empty()) {
    EXPECT_EQ(FolderOf(temporary), folder.path());
    EXPECT_TRUE(Exists(temporary));
  }
  file->reset();
  EXPECT_TRUE(folder.Names().empty());
  EXPECT_FALSE(Exists(path));
}

TEST_P(PlatformPending, MissingFolderIsNamed) {
  Folder folder;
  const std::string path = folder.File("no such folder/out.bin");
  auto file = PendingFile::Create(path, GetParam());
  ASSERT_FALSE(file.ok());
  EXPECT_EQ(file.status().code(), Status::Code::kIOError);
  EXPECT_TRUE(Contains(file.status().message(), folder.File("no such folder") + " does not exist"))
      << file.status().message();
}

INSTANTIATE_TEST_SUITE_P(Temporaries, PlatformPending, ::testing::Values(false, true),
                         [](const ::testing::TestParamInfo<bool>& info) {
                           return info.param ? "AnonymousAllowed" : "Named";
                         });

#ifdef _WIN32
TEST(Platform, ReplacingAFileAnotherProgramHoldsFailsClearly) {
  Folder folder;
  const std::string path = folder.File(kFileName);
  WriteBytes(path, "held");
  // Open as another program would, without FILE_SHARE_DELETE: the file cannot be replaced.
  const HANDLE holder =
      CreateFileW(FsPath(path).c_str(), GENERIC_READ, FILE_SHARE_READ | FILE_SHARE_WRITE, nullptr,
                  OPEN_EXISTING, FILE_ATTRIBUTE_NORMAL, nullptr);
  ASSERT_NE(holder, INVALID_HANDLE_VALUE);
  auto file = PendingFile::Create(path);
  ASSERT_TRUE(file.ok()) << file.status().message();
  ASSERT_TRUE((*file)->Write("replacement", 11).ok());
  const Status s = (*file)->Publish(/*overwrite=*/true);
  EXPECT_EQ(s.code(), Status::Code::kIOError);
  EXPECT_TRUE(Contains(s.message(), "cannot replace " + path)) << s.message();
  file->reset();
  CloseHandle(holder);
  EXPECT_EQ(ReadBytes(path), "held");
  EXPECT_EQ(folder.Names(), std::vector<std::string>{kFileName});
}
#endif

TEST(Platform, PathParts) {
  EXPECT_EQ(FolderOf("model.sprig"), ".");
  EXPECT_EQ(BaseName("model.sprig"), "model.sprig");
  EXPECT_EQ(FolderOf("/model.sprig"), "/");
  EXPECT_EQ(FolderOf("a/b/model.sprig"), "a/b");
  EXPECT_EQ(BaseName("a/b/model.sprig"), "model.sprig");
  EXPECT_EQ(BaseName("a/b/"), "");
  const std::string temporary = TemporaryName("a/b/model.sprig");
  EXPECT_EQ(FolderOf(temporary), "a/b");
  EXPECT_EQ(BaseName(temporary).rfind(".model.sprig.tmp-", 0), 0u) << temporary;
  EXPECT_NE(TemporaryName("a/b/model.sprig"), temporary);
#ifdef _WIN32
  EXPECT_EQ(FolderOf("C:\\models\\model.sprig"), "C:\\models");
  EXPECT_EQ(FolderOf("C:\\model.sprig"), "C:\\");
  EXPECT_EQ(BaseName("C:\\models\\model.sprig"), "model.sprig");
  EXPECT_EQ(FolderOf("C:model.sprig"), "C:");
#else
  EXPECT_EQ(BaseName("a\\b.sprig"), "a\\b.sprig");  // a POSIX name may hold a backslash
#endif
}

TEST(Platform, ProcessMemoryIsPlausibleAndGrowsWhenTouched) {
  const MemoryFigures before = ReadMemoryFigures();
  constexpr uint64_t kTouched = 64 * kMiB;
  std::unique_ptr<char[]> block(new char[kTouched]);
  for (uint64_t i = 0; i < kTouched; i += 4096) block[i] = static_cast<char>(i >> 12);
  const MemoryFigures after = ReadMemoryFigures();
#ifdef _WIN32
  // Wine reports neither the fault count nor the private bytes (both 0); Windows does.
  const bool faults_reported = before.minor_faults > 0;
  const bool private_reported = before.private_bytes > 0;
#else
  const bool faults_reported = true, private_reported = true;
#endif
  if (faults_reported) {
    EXPECT_GT(after.minor_faults, before.minor_faults);
  }
#if defined(SPRIG_PORTABLE_POSIX)
  // POSIX has no query for the resident set now: only the peak (getrusage's ru_maxrss).
  EXPECT_EQ(after.resident, 0u);
  EXPECT_GE(after.peak_resident, kTouched);
  (void)private_reported;  // RssAnon and VmSwap come from /proc
#else
  EXPECT_GT(before.resident, 0u);
  EXPECT_GE(before.peak_resident, before.resident);
  EXPECT_GE(after.resident, before.resident + kTouched / 2);
  EXPECT_GE(after.peak_resident, after.resident);
  if (private_reported) {
    EXPECT_GE(after.private_bytes, before.private_bytes + kTouched / 2);
  }
#if defined(__linux__)
  // proc(5): VmRSS = RssAnon + RssFile + RssShmem.
  EXPECT_GE(after.resident_anonymous, kTouched);
  EXPECT_LE(after.resident_anonymous + after.resident_file, after.resident);
#endif
#endif
  EXPECT_EQ(block[4096], 1);
}

TEST(Platform, ReadingAMappingMakesItResident) {
  Folder folder;
  const std::string path = folder.File(kFileName);
  WriteBytes(path, std::string(4 * kMiB, 'x'));
  auto mapping = FileMapping::Open(path);
  ASSERT_TRUE(mapping.ok()) << mapping.status().message();
  const FileMapping& m = **mapping;
  Advise(m.data(), m.size(), AccessHint::kRandom);
  Advise(m.data(), m.size(), AccessHint::kWillNeed);
  uint64_t sum = 0;
  for (uint64_t i = 0; i < m.size(); i += 4096) sum += m.data()[i];
  EXPECT_EQ(sum, uint64_t('x') * (m.size() / 4096));
  const uint64_t resident = ResidentBytes(m.data(), m.size());
  EXPECT_GT(resident, 0u);
  EXPECT_LE(resident, m.size());
  // A range inside one page is clipped to the range.
  EXPECT_LE(ResidentBytes(m.data() + 100, 10), 10u);
  const uint64_t touched = TouchedBytes(m);
  EXPECT_GT(touched, 0u);
  EXPECT_LE(touched, m.size() + 4096);  // smaps counts whole pages
  EXPECT_EQ(ResidentBytes(m.data(), 0), 0u);
}

TEST(Platform, DroppingFromTheCache) {
  Folder folder;
  const std::string path = folder.File(kFileName);
  WriteBytes(path, std::string(kMiB, 'y'));
  const Status s = DropFromCache(path);
#if defined(__linux__) && !defined(SPRIG_PORTABLE_POSIX)
  EXPECT_TRUE(s.ok()) << s.message();
  const Status missing = DropFromCache(folder.File("absent.bin"));
  EXPECT_EQ(missing.code(), Status::Code::kIOError);
  EXPECT_TRUE(Contains(missing.message(), folder.File("absent.bin"))) << missing.message();
#else
  EXPECT_EQ(s.code(), Status::Code::kNotSupported);
  EXPECT_TRUE(Contains(s.message(), path)) << s.message();
  EXPECT_TRUE(Contains(s.message(), "not supported")) << s.message();
#endif
}

TEST(Platform, ArgumentsAndCommandLine) {
  char program[] = "sprig";
  char argument[] =
      "m\xC3\xB6"
      "del.sprig";
  char* argv[] = {program, argument, nullptr};
  const std::vector<std::string> arguments = Utf8Arguments(2, argv);
#ifdef _WIN32
  // Windows reads this process's own command line, whatever argv says.
  ASSERT_FALSE(arguments.empty());
  EXPECT_TRUE(Contains(CommandLine(), BaseName(arguments[0]).substr(0, 6)));
#else
  EXPECT_EQ(arguments, (std::vector<std::string>{"sprig",
                                                 "m\xC3\xB6"
                                                 "del.sprig"}));
#if defined(__linux__) && !defined(SPRIG_PORTABLE_POSIX)
  // This program: sprig_tests or sprig_platform_portable_tests.
  EXPECT_TRUE(Contains(CommandLine(), "_tests")) << CommandLine();
#else
  EXPECT_EQ(CommandLine(), "");
#endif
#endif
  EXPECT_GT(ProcessCpuSeconds(), 0.0);
  EXPECT_GE(ThreadCpuSeconds(), 0.0);
}

TEST(Platform, CpuFeaturesAreConsistent) {
  const CpuFeatures& cpu = DetectCpu();
  EXPECT_EQ(&cpu, &DetectCpu());
  if (cpu.avx512f) {
    EXPECT_TRUE(cpu.avx2);
    EXPECT_TRUE(cpu.fma);
  }
  if (cpu.avx512bw || cpu.avx512dq || cpu.avx512vl) {
    EXPECT_TRUE(cpu.avx512f);
  }
  if (cpu.avx2) {
    EXPECT_TRUE(cpu.sse42);
  }
#if defined(__x86_64__) && defined(__linux__) && defined(__GNUC__) && !defined(__clang__)
  // libgcc reads CPUID and XCR0 itself; both must agree.
  __builtin_cpu_init();
  EXPECT_EQ(cpu.sse42, bool(__builtin_cpu_supports("sse4.2")));
  EXPECT_EQ(cpu.avx2, bool(__builtin_cpu_supports("avx2")));
  EXPECT_EQ(cpu.fma, bool(__builtin_cpu_supports("fma")));
  EXPECT_EQ(cpu.avx512f, bool(__builtin_cpu_supports("avx512f")));
  EXPECT_EQ(cpu.avx512bw, bool(__builtin_cpu_supports("avx512bw")));
  EXPECT_EQ(cpu.avx512dq, bool(__builtin_cpu_supports("avx512dq")));
  EXPECT_EQ(cpu.avx512vl, bool(__builtin_cpu_supports("avx512vl")));
#endif
#if defined(__x86_64__) || defined(_M_X64)
  EXPECT_FALSE(cpu.neon);
#endif
}

}  // namespace
}  // namespace sprig::platform
