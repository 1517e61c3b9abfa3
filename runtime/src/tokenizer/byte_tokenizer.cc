// The byte tokenizer: every byte of the text is its own token, ids 0..255, as the sample
// models were trained. Decoding gives the bytes back unchanged, valid UTF-8 or not.
#include "tokenizer/tokenizer.h"
#include "tokenizer/utf8.h"

namespace sprig::tokenizer {
namespace {

class ByteTokenizer : public Tokenizer {
 public:
  const char* kind() const override { return "byte"; }
  uint32_t vocab_size() const override { return 256; }
  std::vector<int32_t> Encode(std::string_view text) const override {
    std::vector<int32_t> ids(text.size());
    for (size_t i = 0; i < text.size(); ++i) ids[i] = static_cast<uint8_t>(text[i]);
    return ids;
  }
  std::string Piece(int32_t id) const override {
    return id >= 0 && id < 256 ? std::string(1, static_cast<char>(id)) : std::string();
  }
  int32_t bos_id() const override { return -1; }
  int32_t eos_id() const override { return -1; }

  Status DecodeStep(int32_t id, size_t position, DecodeState& state,
                    std::string& out) const override {
    if (id < 0 || id > 255) {
      return Status::InvalidArgument("token " + std::to_string(position) + " is " +
                                     std::to_string(id) + ", not a byte (0..255)");
    }
    // Bytes of a character still being completed wait; a byte that cannot start or continue
    // one is passed through as it is, since the whole decode keeps it too.
    state.pending_bytes.push_back(static_cast<char>(id));
    MoveDecidedBytes(state.pending_bytes, out, /*replace_invalid=*/false, /*final=*/false);
    return Status::Ok();
  }
  void DecodeFinish(DecodeState& state, std::string& out) const override {
    MoveDecidedBytes(state.pending_bytes, out, /*replace_invalid=*/false, /*final=*/true);
    state = DecodeState();
  }
};

}  // namespace

std::unique_ptr<Tokenizer> MakeByteTokenizer() {
  return std::make_unique<ByteTokenizer>();
}

}  // namespace sprig::tokenizer
