#include "support/test_util.h"

#include <stdio.h>
#include <stdlib.h>
#include <sys/wait.h>

#include <gtest/gtest.h>

#include <cstring>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <stdexcept>

#include "format/preamble.h"

namespace sprig::testing {

TempDir::TempDir() {
  std::string tmpl = (std::filesystem::temp_directory_path() / "sprig-test-XXXXXX").string();
  if (mkdtemp(tmpl.data()) == nullptr) throw std::runtime_error("mkdtemp failed");
  path_ = tmpl;
}

TempDir::~TempDir() {
  std::error_code ec;
  std::filesystem::remove_all(path_, ec);
}

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

std::string BuiltProgram(const std::string& program) {
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

std::string ReadFile(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  std::stringstream ss;
  ss << in.rdbuf();
  return ss.str();
}

void WriteFile(const std::string& path, const std::string& contents) {
  std::ofstream out(path, std::ios::binary);
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
