// Tokenizers: text to token ids and back, with code of sprig's own so that the library an
// application embeds needs no tokenizer library. Two kinds: the byte tokenizer (ids 0..255 are
// bytes) and SentencePiece models (unigram or BPE), whose behaviour is that of the SentencePiece
// library, token for token (tests/python/tokenizer_agreement.py checks it).
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <span>
#include <string>
#include <string_view>
#include <vector>

#include "sprig/status.h"

namespace sprig::tokenizer {

// SentencePiece's numbering, so that a model's types and algorithm are stored as it has them.
enum class PieceType : uint8_t {
  kNormal = 1,
  kUnknown = 2,
  kControl = 3,
  kUserDefined = 4,
  kUnused = 5,
  kByte = 6
};
enum class Algorithm : uint8_t { kUnigram = 1, kBpe = 2 };

// Everything encoding and decoding need; what the tokenizer section stores. Owned data.
struct TokenizerSpec {
  Algorithm algorithm = Algorithm::kUnigram;
  std::vector<std::string> pieces;
  std::vector<float> scores;
  std::vector<PieceType> types;
  std::string precompiled_charsmap;  // normalizer rules, as the model carries them
  bool add_dummy_prefix = true, remove_extra_whitespaces = true, escape_whitespaces = true;
  bool treat_whitespace_as_suffix = false, byte_fallback = false;
  std::string unk_surface = " \xE2\x81\x87 ";
  int32_t unk_id = -1, bos_id = -1, eos_id = -1, pad_id = -1;
};

// The tokenizer section's bytes (layout: schema/README.md, "Tokenizer section").
std::string SerializeSection(const TokenizerSpec& spec);

// What a decoder carries from one id to the next: bytes of a character not yet complete, and
// whether any text has been produced (SentencePiece drops the leading space of the first piece).
struct DecodeState {
  std::string pending_bytes;
  bool started = false;
};

class Tokenizer {
 public:
  virtual ~Tokenizer() = default;
  virtual const char* kind() const = 0;  // "byte" or "sentencepiece"
  virtual uint32_t vocab_size() const = 0;
  virtual std::vector<int32_t> Encode(std::string_view text) const = 0;
  // Decodes a whole sequence; an id out of range is refused (InvalidArgument naming the
  // position and the id).
  virtual Result<std::string> Decode(std::span<const int32_t> ids) const;
  virtual std::string Piece(int32_t id) const = 0;  // the stored piece, for display
  virtual int32_t bos_id() const = 0;               // -1 if none
  virtual int32_t eos_id() const = 0;               // -1 if none

  // One step of decoding: appends to `out` the text of `id` that is complete now and keeps the
  // rest in `state`. Decode and StreamDecoder both run on these two calls, so a streamed
  // decode equals the whole one by construction. `position` names the id in messages.
  virtual Status DecodeStep(int32_t id, size_t position, DecodeState& state,
                            std::string& out) const = 0;
  // Appends what `state` still holds (the end of the ids) and clears it.
  virtual void DecodeFinish(DecodeState& state, std::string& out) const = 0;
};

// Streaming decode: Push(id) returns the text that is now complete, never half a UTF-8
// character; concatenating every Push and then Finish() equals Decode(all ids).
class StreamDecoder {
 public:
  explicit StreamDecoder(const Tokenizer& tokenizer);
  Result<std::string> Push(int32_t id);
  std::string Finish();
  void Reset();

 private:
  const Tokenizer& tokenizer_;
  DecodeState state_;
  size_t position_ = 0;
};

std::unique_ptr<Tokenizer> MakeByteTokenizer();  // ids 0..255 = bytes

// Opens a tokenizer section. The bytes are untrusted: every size, offset, string and trie index
// is checked, and the vocabulary's size against `vocab_size` from the config; a message names
// the field. The section's crc32 is checked by the caller (format/) before.
Result<std::unique_ptr<Tokenizer>> OpenSentencePiece(const uint8_t* data, size_t size,
                                                     uint32_t vocab_size);

}  // namespace sprig::tokenizer
