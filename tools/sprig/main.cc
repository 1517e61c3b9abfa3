// sprig: the command-line program. Each verb is a thin layer over the libraries.
#include <cstdio>
#include <cstdlib>
#include <string>
#include <vector>

#include "cli.h"
#include "platform/process.h"
#include "sprig/log.h"

namespace {

// The library writes nothing itself: the program prints its messages, one line each on stderr.
void PrintLibraryMessage(sprig::LogLevel level, const char* message, void* /*user*/) {
  const char* kind = level == sprig::LogLevel::kError     ? "error"
                     : level == sprig::LogLevel::kWarning ? "warning"
                                                          : "note";
  std::fprintf(stderr, "sprig: %s: %s\n", kind, message);
}

}  // namespace

int main(int argc, char** argv) {
  // File names and prompts arrive as UTF-8 on every system (on Windows argv holds the ANSI code
  // page's approximation of them), and what is printed is shown as UTF-8.
  std::vector<std::string> arguments = sprig::platform::Utf8Arguments(argc, argv);
  std::vector<char*> utf8_argv;
  for (std::string& argument : arguments) utf8_argv.push_back(argument.data());
  utf8_argv.push_back(nullptr);
  sprig::platform::UseUtf8Console();
  sprig::SetLogCallback(PrintLibraryMessage, nullptr);
  CLI::App app{
      "sprig runs tree-routed and expert-routed feed-forward models on laptop CPUs.\n"
      "Run 'sprig VERB --help' for a verb's options."};
  app.require_subcommand(1);
  // Options are spelled --name on every system. CLI11 would also read "/name" as an option on
  // Windows, and so mistake a path such as /data/notes.sprig for one; every verb inherits this.
  app.allow_windows_style_options(false);
  app.set_version_flag("--version", "sprig " SPRIG_VERSION);
  std::vector<sprig::cli::Verb> verbs = {
      sprig::cli::AddPack(app),   sprig::cli::AddInspect(app), sprig::cli::AddSynth(app),
      sprig::cli::AddRun(app),    sprig::cli::AddRoutes(app),  sprig::cli::AddGenerate(app),
      sprig::cli::AddVerify(app), sprig::cli::AddBench(app),   sprig::cli::AddTokens(app),
  };
  try {
    app.parse(static_cast<int>(arguments.size()), utf8_argv.data());
  } catch (const CLI::ParseError& e) {
    const int code = app.exit(e);
    // CLI11 returns 0 for --help and --version; any real usage error is our exit code 2.
    return code == 0 ? 0 : sprig::cli::kExitBadInput;
  }
  for (const auto& verb : verbs) {
    if (verb.command->parsed()) return verb.run();
  }
  return sprig::cli::kExitBadInput;
}
