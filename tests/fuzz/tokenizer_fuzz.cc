// Fuzz target: a tokenizer section (schema/README.md, "Tokenizer section") from anywhere. The
// model target reaches the section only through its checksum, so this one feeds the section's
// bytes to the tokenizer directly: whatever opens must then encode, decode and stream-decode
// without a crash, a sanitizer report or a stream that differs from the whole decode.
#include <cstdint>
#include <cstdlib>
#include <cstring>
#include <string>
#include <vector>

#include "tokenizer/tokenizer.h"

namespace {

// The piece count the section claims (offset 20), so that the vocabulary-size check does not
// refuse every mutation before the rest of the section is read.
uint32_t ClaimedPieces(const uint8_t* data, size_t size) {
  if (size < 24) return 0;
  uint32_t n = 0;
  std::memcpy(&n, data + 20, sizeof(n));
  return n;
}

void Exercise(const sprig::tokenizer::Tokenizer& t, const uint8_t* data, size_t size) {
  const char* texts[] = {"",
                         " ",
                         "Day 12 at Quill Hill: fog until noon.\n",
                         "  tabs\tand\u00a0spaces  ",
                         "caf\xC3\xA9 \xF0\x9F\x8D\x8E \xEF\xBC\xA1",
                         "\xFF\xC3(bad \xE2\x82 utf-8"};
  for (const char* text : texts) {
    const std::vector<int32_t> ids = t.Encode(text);
    (void)t.Decode(ids);
  }
  // The input's own bytes as text, and as ids.
  (void)t.Encode(std::string(reinterpret_cast<const char*>(data), size < 256 ? size : 256));
  std::vector<int32_t> ids;
  for (size_t i = 0; i + 1 < size && ids.size() < 64; i += 2) {
    ids.push_back(static_cast<int32_t>((data[i] | (data[i + 1] << 8)) % (t.vocab_size() + 1)));
  }
  auto whole = t.Decode(ids);
  sprig::tokenizer::StreamDecoder stream(t);
  std::string streamed;
  bool ok = true;
  for (int32_t id : ids) {
    auto piece = stream.Push(id);
    if (piece.ok()) {
      streamed += *piece;
    } else {
      ok = false;
    }
  }
  streamed += stream.Finish();
  // An id outside the vocabulary fails both ways; otherwise the stream is the whole decode.
  if (whole.ok() != ok || (ok && streamed != *whole)) std::abort();
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  auto opened = sprig::tokenizer::OpenSentencePiece(data, size, ClaimedPieces(data, size));
  if (!opened.ok()) {
    if (opened.status().message().empty()) std::abort();
    return 0;
  }
  Exercise(**opened, data, size);
  return 0;
}
