// A SentencePiece model (unigram or BPE) behind the Tokenizer interface: normalizer, the
// algorithm, then SentencePiece's handling of unknown pieces (merged runs, or bytes).
#pragma once

#include <memory>
#include <string>
#include <vector>

#include "tokenizer/charsmap.h"
#include "tokenizer/normalizer.h"
#include "tokenizer/tokenizer.h"
#include "tokenizer/vocabulary.h"

namespace sprig::tokenizer {

class SentencePieceTokenizer : public Tokenizer {
 public:
  // `spec` must have passed the section's checks; `charsmap` is its parsed character map.
  SentencePieceTokenizer(const TokenizerSpec& spec, CharsMap charsmap);

  const char* kind() const override { return "sentencepiece"; }
  uint32_t vocab_size() const override {
    return static_cast<uint32_t>(vocabulary_->spec().pieces.size());
  }
  std::vector<int32_t> Encode(std::string_view text) const override;
  std::string Piece(int32_t id) const override;
  int32_t bos_id() const override { return vocabulary_->spec().bos_id; }
  int32_t eos_id() const override { return vocabulary_->spec().eos_id; }
  Status DecodeStep(int32_t id, size_t position, DecodeState& state,
                    std::string& out) const override;
  void DecodeFinish(DecodeState& state, std::string& out) const override;

 private:
  // Appends the ids of the algorithm's segments: a run of unknown segments becomes one unknown
  // id, or with byte fallback each byte of an unknown segment its byte piece.
  void AppendIds(const std::vector<Segment>& segments, std::vector<int32_t>& ids) const;

  std::unique_ptr<Vocabulary> vocabulary_;
  CharsMap charsmap_;
  Normalizer normalizer_;
  // Per id, the decoded text of a normal piece (U+2581 as a space), and the same without its
  // leading U+2581 for the first piece of a text.
  std::vector<std::string> surfaces_;
  std::vector<std::string> first_surfaces_;
};

}  // namespace sprig::tokenizer
