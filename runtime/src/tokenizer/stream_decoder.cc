#include "base/status_macros.h"
#include "tokenizer/tokenizer.h"

namespace sprig::tokenizer {

StreamDecoder::StreamDecoder(const Tokenizer& tokenizer) : tokenizer_(tokenizer) {}

Result<std::string> StreamDecoder::Push(int32_t id) {
  std::string out;
  SPRIG_RETURN_IF_ERROR(tokenizer_.DecodeStep(id, position_, state_, out));
  ++position_;
  return out;
}

std::string StreamDecoder::Finish() {
  std::string out;
  tokenizer_.DecodeFinish(state_, out);
  position_ = 0;
  return out;
}

void StreamDecoder::Reset() {
  state_ = DecodeState();
  position_ = 0;
}

}  // namespace sprig::tokenizer
