// The program's errors on every operating system: a missing file, a file that is not a model,
// bad input, a path with spaces and non-ASCII characters, an output locked by another process
// and an interrupted pack. Each says which file and what is wrong, exits 2, and leaves no
// half-written output. On Windows these run under the same assertions as on Linux; the two
// cases that only Windows has (a locked destination, a pack stopped by TerminateProcess) are
// Windows-only, as the POSIX kill test in pack_cli_test.cc is POSIX-only.
#include <gtest/gtest.h>

#include <chrono>
#include <filesystem>
#include <string>
#include <thread>

#include "support/test_util.h"

#ifdef _WIN32
#include <windows.h>
#endif

namespace sprig {
namespace {

using testing::Quote;

constexpr const char* kConfig = R"({"family":"stack","input_dim":8,"layers":[
  {"kind":"tree","mode":"leaf","depth":2,"leaf_width":4,"activation":"relu","out":3}]})";

class ErrorPaths : public ::testing::Test {
 protected:
  testing::CommandResult Sprig(const std::string& args) {
    return testing::Run(testing::SprigCli() + " " + args);
  }
  // True when `text` holds `part`; the message is the failure's explanation.
  static bool Has(const std::string& text, const std::string& part) {
    return text.find(part) != std::string::npos;
  }
  // The files left in the test's folder, by name.
  std::vector<std::string> Files() const {
    std::vector<std::string> names;
    for (const auto& e : std::filesystem::directory_iterator(testing::FsPath(dir_.path()))) {
      names.push_back(testing::Utf8(e.path().filename()));
    }
    return names;
  }
  testing::TempDir dir_;
};

TEST_F(ErrorPaths, MissingModelIsNamed) {
  const std::string missing = dir_.File("no such model.sprig");
  auto r = Sprig("inspect " + Quote(missing));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_TRUE(Has(r.output, "no such model.sprig")) << r.output;
  EXPECT_TRUE(Has(r.output, "does not exist")) << r.output;
}

TEST_F(ErrorPaths, MissingConfigIsNamed) {
  auto r = Sprig("pack " + Quote(dir_.File("absent.json")) + " " + Quote(dir_.File("w.npz")) +
                 " -o " + Quote(dir_.File("m.sprig")));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_TRUE(Has(r.output, "absent.json")) << r.output;
  EXPECT_TRUE(Has(r.output, "cannot open the config file")) << r.output;
  EXPECT_FALSE(std::filesystem::exists(testing::FsPath(dir_.File("m.sprig"))));
}

TEST_F(ErrorPaths, FileThatIsNotAModel) {
  const std::string bad = dir_.File("notes.sprig");
  testing::WriteFile(bad, "a text file, not a model\n");
  auto r = Sprig("inspect " + Quote(bad));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_TRUE(Has(r.output, "notes.sprig is not a .sprig file")) << r.output;
}

TEST_F(ErrorPaths, InputOfTheWrongWidthIsRefused) {
  const std::string model = testing::PackSynthesized(dir_, "m", kConfig);
  const std::string input = dir_.File("rows.npy");
  // A valid .npy of float32 rows 5 wide; the model takes 8. Written byte by byte as NumPy's
  // format 1.0 describes it: magic, version, header length, then a dict padded with spaces
  // and ended by a newline so that the data starts at a multiple of 64 bytes.
  std::string header = "{'descr': '<f4', 'fortran_order': False, 'shape': (2, 5), }";
  header.append((64 - (10 + header.size() + 1) % 64) % 64, ' ');
  header += '\n';
  std::string npy = std::string("\x93NUMPY\x01\x00", 8);
  npy += static_cast<char>(header.size() & 0xff);
  npy += static_cast<char>(header.size() >> 8);
  npy += header;
  npy.append(2 * 5 * 4, '\0');
  testing::WriteFile(input, npy);
  auto r = Sprig("run " + Quote(model) + " --input " + Quote(input) + " --output " +
                 Quote(dir_.File("out.npy")));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_TRUE(Has(r.output, "rows.npy")) << r.output;
  EXPECT_FALSE(std::filesystem::exists(testing::FsPath(dir_.File("out.npy"))));
}

TEST_F(ErrorPaths, PathsWithSpacesAndNonAsciiCharacters) {
  // Folder and file names in three scripts, with spaces: UTF-8 on the command line, in the
  // library's API and in the files the program writes.
  const std::string folder = dir_.File("mödel fïles 模型");
  std::filesystem::create_directory(testing::FsPath(folder));
  const std::string config = folder + "/cönfig.json", weights = folder + "/wéights 1.npz",
                    model = folder + "/nötes 模型.sprig", out = folder + "/öut.npy";
  testing::WriteFile(dir_.File("plain.json"), kConfig);
  std::filesystem::copy_file(testing::FsPath(dir_.File("plain.json")), testing::FsPath(config));
  auto r = Sprig("synth " + Quote(config) + " -o " + Quote(weights));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  r = Sprig("pack " + Quote(config) + " " + Quote(weights) + " -o " + Quote(model));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_TRUE(std::filesystem::exists(testing::FsPath(model)));
  r = Sprig("inspect " + Quote(model));
  EXPECT_EQ(r.exit_code, 0) << r.output;
  auto session = testing::OpenSession(model);
  ASSERT_NE(session, nullptr);
  // A missing file in such a folder is named as the user wrote it.
  r = Sprig("inspect " + Quote(folder + "/ägain missing.sprig"));
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_TRUE(Has(r.output, "ägain missing.sprig")) << r.output;
}

#ifdef _WIN32
// A wide path for Win32 calls made by the test itself.
std::wstring Wide(const std::string& utf8) {
  return testing::FsPath(utf8).wstring();
}

TEST_F(ErrorPaths, LockedDestinationIsNamedAndKeepsItsContents) {
  testing::WriteFile(dir_.File("config.json"), kConfig);
  auto r = Sprig("synth " + Quote(dir_.File("config.json")) + " -o " + Quote(dir_.File("w.npz")));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const std::string out = dir_.File("locked.sprig");
  testing::WriteFile(out, "held by another program");
  // Another program holds the destination open and shares nothing: no reader, no writer, no
  // rename or delete. Windows then refuses any replacement of it.
  HANDLE held = CreateFileW(Wide(out).c_str(), GENERIC_READ, 0, nullptr, OPEN_EXISTING,
                            FILE_ATTRIBUTE_NORMAL, nullptr);
  ASSERT_NE(held, INVALID_HANDLE_VALUE);
  r = Sprig("pack " + Quote(dir_.File("config.json")) + " " + Quote(dir_.File("w.npz")) + " -o " +
            Quote(out) + " --force");
  CloseHandle(held);
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_TRUE(Has(r.output, "locked.sprig")) << r.output;
  EXPECT_EQ(testing::ReadFile(out), "held by another program");
  // No temporary is left beside it.
  EXPECT_EQ(Files().size(), 3u) << ::testing::PrintToString(Files());
}

TEST_F(ErrorPaths, PackStoppedMidwayLeavesNoDestination) {
  // Large enough that the pack is still writing when it is stopped.
  testing::WriteFile(dir_.File("config.json"), R"({"family":"stack","input_dim":1024,"layers":[
    {"kind":"dense","width":6144,"activation":"relu","out":1024}]})");
  auto r = Sprig("synth " + Quote(dir_.File("config.json")) + " -o " + Quote(dir_.File("w.npz")));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const std::string out = dir_.File("m.sprig");
  std::wstring line = L"\"" + Wide(SPRIG_CLI_PATH) + L"\" pack \"" +
                      Wide(dir_.File("config.json")) + L"\" \"" + Wide(dir_.File("w.npz")) +
                      L"\" -o \"" + Wide(out) + L"\"";
  STARTUPINFOW startup{};
  startup.cb = sizeof(startup);
  PROCESS_INFORMATION process{};
  ASSERT_TRUE(CreateProcessW(nullptr, line.data(), nullptr, nullptr, FALSE, CREATE_NO_WINDOW,
                             nullptr, nullptr, &startup, &process));
  // Stop it once a file other than the inputs holds at least 1 MiB: the temporary, midway.
  bool stopped = false;
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::seconds(120);
  while (!stopped && std::chrono::steady_clock::now() < deadline) {
    for (const auto& e : std::filesystem::directory_iterator(testing::FsPath(dir_.path()))) {
      const std::string name = testing::Utf8(e.path().filename());
      std::error_code ec;
      // The file's own size, not the folder listing's copy, which NTFS updates lazily.
      if (name != "config.json" && name != "w.npz" &&
          std::filesystem::file_size(e.path(), ec) >= (1u << 20) && !ec) {
        stopped = TerminateProcess(process.hProcess, 9) != 0;
        break;
      }
    }
    if (WaitForSingleObject(process.hProcess, 0) == WAIT_OBJECT_0 && !stopped) break;
    std::this_thread::sleep_for(std::chrono::milliseconds(1));
  }
  // Never wait on a pack that was not stopped: end it first, then report.
  if (!stopped) TerminateProcess(process.hProcess, 1);
  WaitForSingleObject(process.hProcess, INFINITE);
  DWORD code = 0;
  GetExitCodeProcess(process.hProcess, &code);
  CloseHandle(process.hThread);
  CloseHandle(process.hProcess);
  ASSERT_TRUE(stopped) << "the pack finished, or never wrote, before it could be stopped";
  EXPECT_EQ(code, 9u);
  // Nothing was published under the destination's name.
  EXPECT_FALSE(std::filesystem::exists(testing::FsPath(out)));
}
#endif

}  // namespace
}  // namespace sprig
