// Regression mode of a fuzz target: runs LLVMFuzzerTestOneInput on every file given, or on
// every file inside each folder given (the committed corpus), without libFuzzer. Built with the
// normal compiler and registered with CTest, so each test run replays the corpus and any crash
// the fuzzers once found.
#include <cstdint>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <iterator>
#include <string>
#include <vector>

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size);

namespace {

int RunFile(const std::filesystem::path& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) {
    // string(): on Windows a path holds wide characters, which %s cannot print.
    std::fprintf(stderr, "cannot read %s\n", path.string().c_str());
    return 1;
  }
  const std::vector<uint8_t> bytes((std::istreambuf_iterator<char>(in)),
                                   std::istreambuf_iterator<char>());
  LLVMFuzzerTestOneInput(bytes.data(), bytes.size());
  return 0;
}

}  // namespace

int main(int argc, char** argv) {
  size_t files = 0;
  for (int i = 1; i < argc; ++i) {
    const std::filesystem::path arg = argv[i];
    std::vector<std::filesystem::path> paths;
    if (std::filesystem::is_directory(arg)) {
      for (const auto& e : std::filesystem::recursive_directory_iterator(arg)) {
        if (e.is_regular_file()) paths.push_back(e.path());
      }
    } else {
      paths.push_back(arg);
    }
    for (const auto& p : paths) {
      if (RunFile(p) != 0) return 1;
      ++files;
    }
  }
  if (files == 0) {
    std::fprintf(stderr, "no inputs: pass corpus folders or files\n");
    return 1;
  }
  std::printf("replayed %zu inputs without a crash\n", files);
  return 0;
}
