#include "tokenizer/tokenizer.h"
#include "base/status_macros.h"

namespace sprig::tokenizer {

// Every kind decodes through its steps, the same ones StreamDecoder takes.
Result<std::string> Tokenizer::Decode(std::span<const int32_t> ids) const {
  DecodeState state;
  std::string out;
  for (size_t i = 0; i < ids.size(); ++i) SPRIG_RETURN_IF_ERROR(DecodeStep(ids[i], i, state, out));
  DecodeFinish(state, out);
  return out;
}

}  // namespace sprig::tokenizer
