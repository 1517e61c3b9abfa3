// sprig_tokenizer_check: runs sprig's SentencePiece tokenizer as the agreement test
// (tests/python/tokenizer_agreement.py) needs it. The model goes the way a packed one does:
// ReadSentencePieceModel, SerializeSection, OpenSentencePiece.
//
//   sprig_tokenizer_check MODEL encode TEXTS   one text a line, hex-encoded (texts may hold
//                                              newlines and invalid UTF-8); prints per text
//                                              the ids, a tab, and the hex of their decode
//   sprig_tokenizer_check MODEL decode IDS     one id sequence a line (decimal, spaces);
//                                              prints the hex of each decode
//   sprig_tokenizer_check MODEL section OUT    writes the tokenizer section pack would store
//                                              (the fuzz corpus's seeds: make_corpus.sh)
//
// Every decode is also streamed one id at a time; a stream that differs from the whole
// decode, or that emits half a character, fails the program.
#include <cstdio>
#include <fstream>
#include <iostream>
#include <sstream>
#include <string>
#include <vector>

#include "converter/tokenizer/sentencepiece_model.h"
#include "tokenizer/tokenizer.h"
#include "tokenizer/utf8.h"

namespace {

using sprig::tokenizer::Tokenizer;

std::string FromHex(const std::string& hex) {
  std::string out;
  for (size_t i = 0; i + 1 < hex.size(); i += 2) {
    out.push_back(static_cast<char>(std::stoi(hex.substr(i, 2), nullptr, 16)));
  }
  return out;
}

std::string ToHex(const std::string& bytes) {
  static const char* kDigits = "0123456789abcdef";
  std::string out;
  for (unsigned char c : bytes) {
    out.push_back(kDigits[c >> 4]);
    out.push_back(kDigits[c & 15]);
  }
  return out;
}

// The whole decode, checked against the streamed one. Exits on any difference.
std::string DecodeChecked(const Tokenizer& tokenizer, const std::vector<int32_t>& ids) {
  auto whole = tokenizer.Decode(ids);
  if (!whole.ok()) {
    std::cerr << "decode failed: " << whole.status().message() << "\n";
    std::exit(1);
  }
  sprig::tokenizer::StreamDecoder stream(tokenizer);
  std::string streamed;
  for (int32_t id : ids) {
    auto part = stream.Push(id);
    // Text the model's pieces produce is valid UTF-8, so each part must be whole characters.
    if (!part.ok() || !sprig::tokenizer::IsValidUtf8(*part)) {
      std::cerr << "stream decode emitted a partial character or failed\n";
      std::exit(1);
    }
    streamed += *part;
  }
  streamed += stream.Finish();
  if (streamed != *whole) {
    std::cerr << "stream decode differs from the whole decode: " << ToHex(streamed) << " vs "
              << ToHex(*whole) << "\n";
    std::exit(1);
  }
  return *whole;
}

void Encode(const Tokenizer& tokenizer, std::istream& in) {
  std::string line;
  while (std::getline(in, line)) {
    const std::vector<int32_t> ids = tokenizer.Encode(FromHex(line));
    std::string text;
    for (size_t i = 0; i < ids.size(); ++i) {
      if (i > 0) text.push_back(' ');
      text.append(std::to_string(ids[i]));
    }
    std::cout << text << "\t" << ToHex(DecodeChecked(tokenizer, ids)) << "\n";
  }
}

void Decode(const Tokenizer& tokenizer, std::istream& in) {
  std::string line;
  while (std::getline(in, line)) {
    std::istringstream words(line);
    std::vector<int32_t> ids;
    for (int32_t id; words >> id;) ids.push_back(id);
    std::cout << ToHex(DecodeChecked(tokenizer, ids)) << "\n";
  }
}

}  // namespace

int main(int argc, char** argv) {
  if (argc != 4) {
    std::cerr << "usage: sprig_tokenizer_check MODEL encode|decode|section FILE\n";
    return 2;
  }
  auto spec = sprig::convert::ReadSentencePieceModel(argv[1]);
  if (!spec.ok()) {
    std::cerr << spec.status().message() << "\n";
    return 1;
  }
  const std::string section = sprig::tokenizer::SerializeSection(*spec);
  auto tokenizer = sprig::tokenizer::OpenSentencePiece(
      reinterpret_cast<const uint8_t*>(section.data()), section.size(),
      static_cast<uint32_t>(spec->pieces.size()));
  if (!tokenizer.ok()) {
    std::cerr << tokenizer.status().message() << "\n";
    return 1;
  }
  if (std::string(argv[2]) == "section") {
    std::ofstream out(argv[3], std::ios::binary);
    out.write(section.data(), static_cast<std::streamsize>(section.size()));
    return out ? 0 : 1;
  }
  std::ifstream in(argv[3], std::ios::binary);
  if (!in) {
    std::cerr << argv[3] << ": cannot open\n";
    return 1;
  }
  const std::string mode = argv[2];
  if (mode == "encode") {
    Encode(**tokenizer, in);
  } else if (mode == "decode") {
    Decode(**tokenizer, in);
  } else {
    std::cerr << "unknown mode " << mode << "\n";
    return 2;
  }
  return 0;
}
