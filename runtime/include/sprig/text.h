// sprig::TextDecoder: turns token ids into UTF-8 text one token at a time, for showing
// generated text as it is produced.
#pragma once

#include <cstdint>
#include <memory>
#include <string>

#include "sprig/export.h"
#include "sprig/model.h"
#include "sprig/status.h"

namespace sprig {

// Streaming decode with a model's tokenizer. push() returns the text each token completes; it
// never returns part of a UTF-8 character (a token that ends inside one, such as a SentencePiece
// byte token, is held until the character is whole). The texts of every push() and then
// finish() joined equal Model::decode() of all the tokens. Not thread-safe; one per stream.
class SPRIG_API TextDecoder {
 public:
  // InvalidArgument for a model without a tokenizer (config().tokenizer "none").
  static Result<std::unique_ptr<TextDecoder>> create(std::shared_ptr<const Model> model);
  ~TextDecoder();
  TextDecoder(const TextDecoder&) = delete;
  TextDecoder& operator=(const TextDecoder&) = delete;

  // The text `token` completes (often empty for a byte token). InvalidArgument for a token
  // outside the vocabulary; the decoder is then unchanged.
  Result<std::string> push(int32_t token);
  // The end of the stream: what is still held, decoded as decode() would (bytes that never
  // formed a character become U+FFFD). The decoder is then empty, as after reset().
  std::string finish();
  // Forgets everything pushed: the next token starts a new text.
  void reset();

  struct State;

 private:
  TextDecoder(std::shared_ptr<const Model> model, std::unique_ptr<State> state);
  std::shared_ptr<const Model> model_;
  std::unique_ptr<State> state_;
};

}  // namespace sprig
