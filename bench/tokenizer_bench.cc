// Encoding speed of sprig's SentencePiece tokenizer beside the SentencePiece library's, in one
// run, on the same text and models.
//
//   build/bin/sprig_bench_tokenizer [--text FILE] [--rounds N] [--vocab N]
//
// Trains a BPE and a unigram model with libsentencepiece on the licence texts Debian ships in
// /usr/share/common-licenses (into a temporary folder), then encodes the text line by line
// with both, in interleaved rounds (odd rounds sprig first, even rounds the library first),
// and prints per model the median MB/s of each and their ratio. The text defaults to those
// licence texts (repeated 20 times, 3.4 MB); the sample corpus is another choice:
//   python3 samples/lm/corpus.py --seed 1 --lines 20000 > corpus.txt
// It also checks that both give the same ids for every line, and fails when they do not.
#include <sentencepiece_processor.h>
#include <sentencepiece_trainer.h>

#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include "bench/kit/stats.h"
#include "converter/tokenizer/sentencepiece_model.h"
#include "platform/files.h"
#include "tokenizer/tokenizer.h"

namespace {

const char* kLicences[] = {"GPL-3",   "GPL-2",   "LGPL-2.1", "LGPL-3",   "Apache-2.0",
                           "MPL-2.0", "MPL-1.1", "GFDL-1.3", "Artistic", "BSD"};
const std::string kLicenceFolder = "/usr/share/common-licenses/";

struct Options {
  std::string text_path;
  int rounds = 7;
  int vocab = 1000;
};

std::string ReadAll(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) {
    std::fprintf(stderr, "%s: cannot open\n", path.c_str());
    std::exit(1);
  }
  std::ostringstream out;
  out << in.rdbuf();
  return out.str();
}

std::vector<std::string> LinesOf(const std::string& text) {
  std::vector<std::string> lines;
  std::istringstream in(text);
  for (std::string line; std::getline(in, line);) lines.push_back(line);
  return lines;
}

// Trains one model with the library; returns its path.
std::string Train(const std::string& folder, const std::string& type, int vocab) {
  std::string inputs;
  for (const char* name : kLicences) inputs += (inputs.empty() ? "" : ",") + kLicenceFolder + name;
  const std::string prefix = folder + "/" + type;
  const auto status = sentencepiece::SentencePieceTrainer::Train(
      "--input=" + inputs + " --model_prefix=" + prefix + " --model_type=" + type +
      " --vocab_size=" + std::to_string(vocab) + " --num_threads=1 --minloglevel=2");
  if (!status.ok()) {
    std::fprintf(stderr, "training the %s model failed: %s\n", type.c_str(),
                 status.ToString().c_str());
    std::exit(1);
  }
  return prefix + ".model";
}

// Seconds to encode every line with `encode`.
template <typename Encode>
double TimeEncoding(const std::vector<std::string>& lines, Encode encode) {
  const auto start = std::chrono::steady_clock::now();
  size_t sink = 0;
  for (const std::string& line : lines) sink += encode(line);
  const std::chrono::duration<double> elapsed = std::chrono::steady_clock::now() - start;
  if (sink == SIZE_MAX) std::printf(" ");  // keeps the work from being optimised away
  return elapsed.count();
}

// Encodes with both, compares ids, then times interleaved rounds. Returns false on a
// difference.
bool BenchModel(const std::string& name, const std::string& model_path,
                const std::vector<std::string>& lines, double megabytes, int rounds) {
  auto spec = sprig::convert::ReadSentencePieceModel(model_path);
  if (!spec.ok()) {
    std::fprintf(stderr, "%s\n", spec.status().message().c_str());
    return false;
  }
  const std::string section = sprig::tokenizer::SerializeSection(*spec);
  auto opened = sprig::tokenizer::OpenSentencePiece(
      reinterpret_cast<const uint8_t*>(section.data()), section.size(),
      static_cast<uint32_t>(spec->pieces.size()));
  if (!opened.ok()) {
    std::fprintf(stderr, "%s\n", opened.status().message().c_str());
    return false;
  }
  const sprig::tokenizer::Tokenizer& sprig_tokenizer = **opened;
  sentencepiece::SentencePieceProcessor processor;
  if (!processor.Load(model_path).ok()) return false;

  size_t differences = 0;
  for (const std::string& line : lines) {
    const std::vector<int32_t> ours = sprig_tokenizer.Encode(line);
    const std::vector<int> theirs = processor.EncodeAsIds(line);
    if (!std::equal(ours.begin(), ours.end(), theirs.begin(), theirs.end())) ++differences;
  }

  auto run_sprig = [&] {
    return TimeEncoding(lines,
                        [&](const std::string& l) { return sprig_tokenizer.Encode(l).size(); });
  };
  auto run_library = [&] {
    return TimeEncoding(lines,
                        [&](const std::string& l) { return processor.EncodeAsIds(l).size(); });
  };
  std::vector<double> sprig_rate, library_rate, ratio;
  for (int round = 0; round < rounds; ++round) {
    double ours, theirs;
    if (round % 2 == 0) {
      ours = run_sprig();
      theirs = run_library();
    } else {
      theirs = run_library();
      ours = run_sprig();
    }
    sprig_rate.push_back(megabytes / ours);
    library_rate.push_back(megabytes / theirs);
    ratio.push_back(theirs / ours);
  }
  const double ours = sprig::bench::Summarize(sprig_rate).median;
  const double theirs = sprig::bench::Summarize(library_rate).median;
  std::printf(
      "%-8s %6u pieces  sprig %7.2f MB/s  sentencepiece %7.2f MB/s  sprig/sentencepiece %.2f"
      "  (per-round ratios %.2f..%.2f)  lines differing: %zu of %zu\n",
      name.c_str(), static_cast<unsigned>(spec->pieces.size()), ours, theirs,
      sprig::bench::Summarize(ratio).median, sprig::bench::Summarize(ratio).min,
      sprig::bench::Summarize(ratio).max, differences, lines.size());
  return differences == 0;
}

Options ParseOptions(int argc, char** argv) {
  Options options;
  for (int i = 1; i < argc; ++i) {
    const std::string arg = argv[i];
    if (arg == "--text" && i + 1 < argc) {
      options.text_path = argv[++i];
    } else if (arg == "--rounds" && i + 1 < argc) {
      options.rounds = std::atoi(argv[++i]);
    } else if (arg == "--vocab" && i + 1 < argc) {
      options.vocab = std::atoi(argv[++i]);
    } else {
      std::printf("usage: sprig_bench_tokenizer [--text FILE] [--rounds N] [--vocab N]\n");
      std::exit(arg == "--help" ? 0 : 2);
    }
  }
  return options;
}

}  // namespace

int main(int argc, char** argv) {
  const Options options = ParseOptions(argc, argv);
  std::string text;
  if (options.text_path.empty()) {
    // The licences are 0.17 MB together: repeated, they make a text of a few MB, long
    // enough for steady timings.
    std::string licences;
    for (const char* name : kLicences) licences += ReadAll(kLicenceFolder + name);
    for (int i = 0; i < 20; ++i) text += licences;
  } else {
    text = ReadAll(options.text_path);
  }
  const std::vector<std::string> lines = LinesOf(text);
  double megabytes = 0;
  for (const std::string& line : lines) megabytes += static_cast<double>(line.size()) / 1e6;

  std::random_device random;
  const std::string folder =
      sprig::platform::TemporaryFolder() + "/sprig_bench_tokenizer_" + std::to_string(random());
  std::filesystem::create_directories(sprig::platform::FsPath(folder));
  std::printf("text: %s, %zu lines, %.2f MB; %d interleaved rounds, medians\n",
              options.text_path.empty() ? "licence texts x20" : options.text_path.c_str(),
              lines.size(), megabytes, options.rounds);
  bool same = true;
  for (const std::string type : {"bpe", "unigram"}) {
    same = BenchModel(type, Train(folder, type, options.vocab), lines, megabytes, options.rounds) &&
           same;
  }
  std::filesystem::remove_all(sprig::platform::FsPath(folder));
  return same ? 0 : 1;
}
