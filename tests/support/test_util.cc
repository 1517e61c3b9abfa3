#include "support/test_util.h"

#include <stdio.h>
#include <stdlib.h>
#ifdef _WIN32
#include <process.h>
#else
#include <sys/wait.h>
#include <unistd.h>
#endif

#include <gtest/gtest.h>

#include <cstring>
#include <filesystem>
#include <fstream>
#include <random>
#include <sstream>
#include <stdexcept>

#include "format/preamble.h"

namespace sprig::testing {

TempDir::TempDir() {
#ifdef _WIN32
  // No mkdtemp: a random name, retried until it is new. The generic form keeps the forward
  // slashes that the tests join names with.
  std::random_device seed;
  std::mt19937_64 rng(seed());
  for (int attempt = 0; attempt < 100 && path_.empty(); ++attempt) {
    const auto candidate = std::filesystem::temp_directory_path() /
                           ("sprig-test-" + std::to_string(rng() % 1000000007));
    if (std::filesystem::create_directory(candidate)) path_ = Utf8(candidate.generic_u8string());
  }
  if (path_.empty()) throw std::runtime_error("cannot make a temporary folder");
#else
  std::string tmpl = (std::filesystem::temp_directory_path() / "sprig-test-XXXXXX").string();
  if (mkdtemp(tmpl.data()) == nullptr) throw std::runtime_error("mkdtemp failed");
  path_ = tmpl;
#endif
}

TempDir::~TempDir() {
  std::error_code ec;
  std::filesystem::remove_all(path_, ec);
}

#ifdef _WIN32
// cmd.exe runs the command lines; a program's arguments are split by the C runtime's rules, in
// which a double-quoted argument may hold spaces and \" is a literal quote.
std::string Quote(const std::string& s) {
  std::string out = "\"";
  for (char c : s) {
    if (c == '"') out += '\\';
    out += c;
  }
  return out + "\"";
}

static CommandResult RunOnce(const std::string& command_line) {
  CommandResult r;
  // cmd /c removes the first and the last quote of a line that starts with one; the outer pair
  // added here is what it removes, so the line's own quotes reach the program intact. The line
  // goes as UTF-16: _popen would pass it through the ANSI code page, which mangles UTF-8 names.
  const std::wstring line = FsPath("\"" + command_line + " 2>&1\"").wstring();
  FILE* p = _wpopen(line.c_str(), L"rb");
  if (p == nullptr) return r;
  char buf[4096];
  size_t n;
  while ((n = fread(buf, 1, sizeof(buf), p)) > 0) r.output.append(buf, n);
  r.exit_code = _pclose(p);
  // Text written by programs through the C runtime's text mode ends lines with \r\n.
  std::string::size_type at = 0;
  while ((at = r.output.find("\r\n", at)) != std::string::npos) r.output.erase(at, 1);
  return r;
}

// True when the line starts with a quoted path to a file that exists (a program of ours, as
// BuiltProgram writes it), so that "not recognized" cannot mean the program is missing.
static bool StartsWithAnExistingProgram(const std::string& command_line) {
  if (command_line.empty() || command_line[0] != '"') return false;
  const size_t end = command_line.find('"', 1);
  if (end == std::string::npos) return false;
  std::error_code ec;
  return std::filesystem::is_regular_file(FsPath(command_line.substr(1, end - 1)), ec);
}

// Under Wine, cmd.exe now and then fails to start a program that exists (it then says "Can't
// recognize '<line>' as an internal or external command"), a failure of the emulator seen once
// in several thousand runs, not of the program under test. Such a line is run again, at most
// twice more; any other failure is returned as it is.
CommandResult Run(const std::string& command_line) {
  CommandResult r;
  for (int attempt = 0; attempt < 3; ++attempt) {
    r = RunOnce(command_line);
    const bool not_started = r.exit_code != 0 && r.output.rfind("Can't recognize '", 0) == 0;
    if (!not_started || !StartsWithAnExistingProgram(command_line)) break;
    std::fprintf(stderr, "note: cmd.exe did not start the program (attempt %d): %s\n", attempt + 1,
                 r.output.c_str());
  }
  return r;
}
#else
std::string Quote(const std::string& s) {
  std::string out = "'";
  for (char c : s) {
    if (c == '\'') {
      out += "'\\''";
    } else {
      out += c;
    }
  }
  return out + "'";
}

CommandResult Run(const std::string& command_line) {
  CommandResult r;
  FILE* p = popen((command_line + " 2>&1").c_str(), "r");
  if (p == nullptr) return r;
  char buf[4096];
  size_t n;
  while ((n = fread(buf, 1, sizeof(buf), p)) > 0) r.output.append(buf, n);
  const int status = pclose(p);
  r.exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
  return r;
}
#endif

std::string WithEnv(const std::string& name, const std::string& value, const std::string& command) {
#ifdef _WIN32
  return "set \"" + name + "=" + value + "\"&& " + command;
#else
  return name + "=" + Quote(value) + " " + command;
#endif
}

std::string BuiltProgram(const std::string& program) {
#ifdef _WIN32
  // A build tree on Linux gives POSIX paths; Wine resolves "/x" against the current drive, which
  // is not always Z: (the drive Wine maps to "/"), so the path is made absolute on Z: here.
  if (!program.empty() && program[0] == '/') return Quote("Z:" + program);
#endif
#ifdef SPRIG_TEST_EMULATOR
  return std::string(SPRIG_TEST_EMULATOR) + " " + Quote(program);
#else
  return Quote(program);
#endif
}

std::string SprigCli() {
  return BuiltProgram(SPRIG_CLI_PATH);
}
std::string Python() {
  return "/usr/bin/python3";
}

CommandResult RunPython(const std::string& script, const std::vector<std::string>& args) {
  std::string cmd = "PYTHONPATH=";
  cmd += Quote(std::string(SPRIG_SOURCE_DIR) + "/converter/python");
  // Appended piece by piece: GCC 12 warns (wrongly, -Wrestrict) on `" " + std::string`.
  cmd.append(" ").append(Python()).append(" -c ").append(Quote(script));
  for (const auto& a : args) cmd.append(" ").append(Quote(a));
  return Run(cmd);
}

std::string PackSynthesized(const TempDir& dir, const std::string& name, const std::string& config,
                            uint64_t seed) {
  const std::string cli = SprigCli();
  const std::string json = dir.File(name + ".json"), npz = dir.File(name + ".npz"),
                    model = dir.File(name + ".sprig");
  WriteFile(json, config);
  auto r =
      Run(cli + " synth " + Quote(json) + " -o " + Quote(npz) + " --seed " + std::to_string(seed));
  if (r.exit_code != 0) ADD_FAILURE() << "synth failed: " << r.output;
  r = Run(cli + " pack " + Quote(json) + " " + Quote(npz) + " -o " + Quote(model));
  if (r.exit_code != 0) ADD_FAILURE() << "pack failed: " << r.output;
  return model;
}

bool BitEqual(const std::vector<float>& a, const std::vector<float>& b) {
  return a.size() == b.size() && std::memcmp(a.data(), b.data(), a.size() * sizeof(float)) == 0;
}

std::unique_ptr<Session> OpenSession(const std::string& path, size_t threads) {
  auto model = Model::open(path);
  EXPECT_TRUE(model.ok()) << model.status().message();
  if (!model.ok()) return nullptr;
  SessionOptions options;
  options.threads = threads;
  auto session = Session::create(*model, options);
  EXPECT_TRUE(session.ok()) << session.status().message();
  return session.ok() ? std::move(*session) : nullptr;
}

void SetEnv(const std::string& name, const std::string& value) {
#ifdef _WIN32
  _putenv_s(name.c_str(), value.c_str());
#else
  setenv(name.c_str(), value.c_str(), 1);
#endif
}

void UnsetEnv(const std::string& name) {
#ifdef _WIN32
  _putenv_s(name.c_str(), "");  // an empty value removes the variable on Windows
#else
  unsetenv(name.c_str());
#endif
}

long ProcessId() {
#ifdef _WIN32
  return _getpid();
#else
  return getpid();
#endif
}

std::filesystem::path FsPath(const std::string& utf8) {
  return std::filesystem::path(std::u8string(utf8.begin(), utf8.end()));
}

std::string Utf8(const std::filesystem::path& path) {
  const std::u8string s = path.u8string();
  return std::string(s.begin(), s.end());
}

std::string ReadFile(const std::string& path) {
  std::ifstream in(FsPath(path), std::ios::binary);
  std::stringstream ss;
  ss << in.rdbuf();
  return ss.str();
}

void WriteFile(const std::string& path, const std::string& contents) {
  std::ofstream out(FsPath(path), std::ios::binary);
  out << contents;
}

std::string EditHeaderBytes(std::string bytes, const std::string& from, const std::string& to) {
  if (from.empty() || from.size() != to.size()) return "";
  auto pre = format::DecodePreamble(reinterpret_cast<const uint8_t*>(bytes.data()), bytes.size(),
                                    bytes.size(), "m");
  if (!pre.ok()) return "";
  const size_t begin = pre->header_offset, end = begin + pre->header_size;
  const size_t at = bytes.find(from, begin);
  if (at == std::string::npos || at + from.size() > end || bytes.find(from, at + 1) < end) {
    return "";
  }
  std::memcpy(bytes.data() + at, to.data(), to.size());
  format::Preamble p = *pre;
  p.header_crc32 = format::Crc32(bytes.data() + begin, pre->header_size);
  uint8_t raw[format::kPreambleSize];
  format::EncodePreamble(p, raw);
  std::memcpy(bytes.data(), raw, sizeof(raw));
  return bytes;
}

}  // namespace sprig::testing
