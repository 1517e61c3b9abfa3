// note_suggest: the next words for a note being typed, as an offline note-taking app would
// offer them. Reads one line of text at a time from standard input and prints, for each, the
// continuation a byte-level sprig language model suggests, the time the request took and the
// process's resident memory.
//
//   note_suggest MODEL.sprig [WORDS]      (WORDS: how many words to suggest, default 3)
//
// Suggestions come from a small sample model: they are often wrong, and no one should rely on
// them for anything that matters.
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <iostream>
#include <string>
#include <vector>

#include "sprig/memory.h"
#include "sprig/session.h"

namespace {

// Greedy continuation of `text` until `words` words are complete (or 64 bytes).
std::string Suggest(sprig::Session& session, const std::string& text, int words) {
  const size_t max_seq = session.model().config().max_seq;
  const size_t budget = 64;
  // Keep the end of the note: the context the model sees, leaving room for the suggestion.
  const size_t keep = max_seq > budget ? max_seq - budget : 1;
  const std::string context = text.size() > keep ? text.substr(text.size() - keep) : text;
  std::vector<int32_t> prompt(context.begin(), context.end());
  for (int32_t& t : prompt) t &= 0xff;  // bytes, not signed chars
  if (prompt.empty()) prompt.push_back('\n');
  sprig::GenerateOptions options;
  options.count = budget;
  options.temperature = 0;  // the most probable byte each time: the same text for the same note
  std::string out;
  int done = 0;
  sprig::Status s = session.generate(prompt, options, [&](int32_t token) {
    const char c = static_cast<char>(token);
    if (c == '\n') return false;
    // A space or full stop after some letters ends a word.
    if ((c == ' ' || c == '.') && !out.empty() && out.back() != ' ' && ++done == words) {
      if (c == '.') out += c;
      return false;
    }
    out += c;
    return true;
  });
  if (!s.ok()) return "(" + s.message() + ")";
  return out;
}

}  // namespace

int main(int argc, char** argv) {
  if (argc < 2 || argc > 3 || std::string(argv[1]) == "--help") {
    std::fprintf(stderr, "usage: note_suggest MODEL.sprig [WORDS]\n");
    return 2;
  }
  const int words = argc == 3 ? std::atoi(argv[2]) : 3;
  auto model = sprig::Model::open(argv[1]);
  if (!model.ok()) {
    std::fprintf(stderr, "note_suggest: %s\n", model.status().message().c_str());
    return 2;
  }
  auto session = sprig::Session::create(*model);
  if (!session.ok()) {
    std::fprintf(stderr, "note_suggest: %s\n", session.status().message().c_str());
    return 2;
  }
  std::printf("note_suggest: suggestions come from a small sample model and are often wrong.\n");
  std::string line;
  while (std::getline(std::cin, line)) {
    const auto start = std::chrono::steady_clock::now();
    const std::string suggestion = Suggest(**session, line, words > 0 ? words : 3);
    const double ms =
        std::chrono::duration<double, std::milli>(std::chrono::steady_clock::now() - start).count();
    const sprig::ProcessMemory m = sprig::ReadProcessMemory();
    std::printf("%s[%s]\n  %.2f ms, resident %.1f MiB\n", line.c_str(), suggestion.c_str(), ms,
                static_cast<double>(m.rss) / (1024.0 * 1024.0));
    std::fflush(stdout);
  }
  return 0;
}
