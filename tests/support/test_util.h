// Small helpers shared by the tests: temporary folders, running commands, file contents.
#pragma once

#include <cstdint>
#include <filesystem>
#include <memory>
#include <string>
#include <vector>

#include "sprig/session.h"

namespace sprig::testing {

// A fresh folder under the system temp dir, removed with everything in it on destruction.
class TempDir {
 public:
  TempDir();
  ~TempDir();
  TempDir(const TempDir&) = delete;
  TempDir& operator=(const TempDir&) = delete;
  const std::string& path() const { return path_; }
  std::string File(const std::string& name) const { return path_ + "/" + name; }

 private:
  std::string path_;
};

struct CommandResult {
  int exit_code = -1;
  std::string output;  // stdout and stderr together
};

// Runs a shell command line and captures what it prints.
CommandResult Run(const std::string& command_line);

// `command` run with the environment variable `name` set to `value` (`NAME=value command` in a
// POSIX shell, `set "NAME=value"&& command` in cmd.exe).
std::string WithEnv(const std::string& name, const std::string& value, const std::string& command);

// A command-line prefix that runs `program`, a program built with the tests: its quoted path,
// preceded in a cross build by the emulator that runs the tests (CMAKE_CROSSCOMPILING_EMULATOR),
// since a shell started from an emulated test is a host shell that cannot start it directly.
std::string BuiltProgram(const std::string& program);
// The sprig program built with the tests (as BuiltProgram), and Debian's Python (with NumPy and
// PyTorch), which is a host program even in a cross build.
std::string SprigCli();
std::string Python();
// Runs `/usr/bin/python3 -c SCRIPT` (arguments appended, shell-quoted).
CommandResult RunPython(const std::string& script, const std::vector<std::string>& args = {});

// Writes `config` to dir/name.json, synthesizes weights with `sprig synth --seed seed` and packs
// them with `sprig pack`; returns dir/name.sprig. A failing step is reported as a test failure.
std::string PackSynthesized(const TempDir& dir, const std::string& name, const std::string& config,
                            uint64_t seed = 1);

// Opens a model and a session over it with `threads` threads; null (and a test failure) when
// either fails.
std::unique_ptr<Session> OpenSession(const std::string& path, size_t threads = 1);

// True when both arrays hold the same floats bit for bit (a NaN equals the same NaN; 0 and -0
// differ).
bool BitEqual(const std::vector<float>& a, const std::vector<float>& b);

std::string Quote(const std::string& s);
// Sets or removes an environment variable of this process (setenv/unsetenv, or _putenv_s on
// Windows), for the programs it starts and for the library's own reads.
void SetEnv(const std::string& name, const std::string& value);
void UnsetEnv(const std::string& name);
// This process's id, to make names unique.
long ProcessId();
// A UTF-8 path as a std::filesystem::path and back; on Windows the narrow forms would go
// through the ANSI code page, which cannot hold every name.
std::filesystem::path FsPath(const std::string& utf8);
std::string Utf8(const std::filesystem::path& path);
std::string ReadFile(const std::string& path);
void WriteFile(const std::string& path, const std::string& contents);

// Replaces the one occurrence of `from` inside the header of the .sprig file image `bytes` with
// `to` (as long as `from`) and makes the header and preamble checksums valid again, so that a
// reader sees only the edited field. Returns "" when `from` is not there exactly once.
std::string EditHeaderBytes(std::string bytes, const std::string& from, const std::string& to);

}  // namespace sprig::testing
