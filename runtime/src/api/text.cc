// Text in and out: Model::encode/decode/token_piece, TextDecoder and Session::generate_text,
// all through the tokenizer the model bound at open (tokenizer/).
#include "sprig/text.h"

#include "api/model_impl.h"
#include "base/status_macros.h"
#include "sprig/session.h"

namespace sprig {

Result<std::vector<int32_t>> Model::encode(const std::string& text) const {
  SPRIG_ASSIGN_OR_RETURN(const tokenizer::Tokenizer* t, impl_->RequireTokenizer("encode"));
  return t->Encode(text);
}

Result<std::string> Model::decode(const std::vector<int32_t>& tokens) const {
  SPRIG_ASSIGN_OR_RETURN(const tokenizer::Tokenizer* t, impl_->RequireTokenizer("decode"));
  return t->Decode(tokens);
}

Result<std::string> Model::token_piece(int32_t token) const {
  SPRIG_ASSIGN_OR_RETURN(const tokenizer::Tokenizer* t, impl_->RequireTokenizer("token_piece"));
  if (token < 0 || static_cast<uint32_t>(token) >= t->vocab_size()) {
    return Status::InvalidArgument("token " + std::to_string(token) +
                                   " is outside the vocabulary [0, " +
                                   std::to_string(t->vocab_size()) + ")");
  }
  return t->Piece(token);
}

struct TextDecoder::State {
  explicit State(const tokenizer::Tokenizer& t) : stream(t) {}
  tokenizer::StreamDecoder stream;
};

TextDecoder::TextDecoder(std::shared_ptr<const Model> model, std::unique_ptr<State> state)
    : model_(std::move(model)), state_(std::move(state)) {}
TextDecoder::~TextDecoder() = default;

Result<std::unique_ptr<TextDecoder>> TextDecoder::create(std::shared_ptr<const Model> model) {
  if (!model) return Status::InvalidArgument("TextDecoder::create: the model is null");
  SPRIG_ASSIGN_OR_RETURN(const tokenizer::Tokenizer* t,
                         Model::Impl::Of(*model).RequireTokenizer("TextDecoder"));
  auto state = std::make_unique<State>(*t);
  return std::unique_ptr<TextDecoder>(new TextDecoder(std::move(model), std::move(state)));
}

Result<std::string> TextDecoder::push(int32_t token) {
  return state_->stream.Push(token);
}
std::string TextDecoder::finish() {
  return state_->stream.Finish();
}
void TextDecoder::reset() {
  state_->stream.Reset();
}

Status Session::generate_text(
    const std::string& prompt, const GenerateOptions& options,
    const std::function<bool(const std::string& text, int32_t token)>& on_text) {
  SPRIG_ASSIGN_OR_RETURN(const tokenizer::Tokenizer* t,
                         Model::Impl::Of(*model_).RequireTokenizer("generate_text"));
  const std::vector<int32_t> ids = t->Encode(prompt);
  if (ids.empty()) {
    return Status::InvalidArgument(
        "generate_text: the prompt gives no tokens; it needs at least "
        "one");
  }
  // The decoder continues the prompt: a generated word's leading space is decoded as text that
  // follows other text, not as the start of a text (where SentencePiece drops it).
  tokenizer::StreamDecoder stream(*t);
  for (int32_t id : ids) SPRIG_RETURN_IF_ERROR(stream.Push(id).status());
  bool go_on = true;
  Status failed;
  SPRIG_RETURN_IF_ERROR(generate(ids, options, [&](int32_t token) {
    auto text = stream.Push(token);
    if (!text.ok()) {
      failed = text.status();
      return false;
    }
    go_on = on_text(*text, token);
    return go_on;
  }));
  SPRIG_RETURN_IF_ERROR(failed);
  const std::string rest = stream.Finish();
  if (go_on && !rest.empty()) on_text(rest, -1);
  return Status::Ok();
}

}  // namespace sprig
