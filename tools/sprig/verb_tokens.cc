// sprig tokens MODEL (--text TEXT | --input FILE | --ids ID,ID,...) [--json]
//
// Shows how the model's tokenizer cuts a text: each token's id and its piece as the vocabulary
// stores it. With --ids it goes the other way: the text those ids decode to.

#include <cstdio>
#include <memory>
#include <nlohmann/json.hpp>
#include <sstream>

#include "base/status_macros.h"
#include "cli.h"
#include "input_file.h"
#include "io/tensor_archive.h"
#include "sprig/model.h"

namespace sprig::cli {
namespace {

struct TokensArgs {
  std::string model, text, input, ids;
  bool json = false;
};

// "12,7, 300" → {12, 7, 300}; the message names the entry that is not an integer.
Result<std::vector<int32_t>> ParseIds(const std::string& list) {
  std::vector<int32_t> ids;
  std::stringstream in(list);
  std::string item;
  while (std::getline(in, item, ',')) {
    const size_t first = item.find_first_not_of(" \t");
    const size_t last = item.find_last_not_of(" \t");
    const std::string trimmed =
        first == std::string::npos ? "" : item.substr(first, last - first + 1);
    char* end = nullptr;
    const long long v = std::strtoll(trimmed.c_str(), &end, 10);
    if (trimmed.empty() || *end != '\0' || v < INT32_MIN || v > INT32_MAX) {
      return Status::InvalidArgument("--ids: entry " + std::to_string(ids.size()) + " (\"" +
                                     trimmed + "\") is not a token id");
    }
    ids.push_back(static_cast<int32_t>(v));
  }
  return ids;
}

Status ShowDecoded(const Model& model, const TokensArgs& a) {
  SPRIG_ASSIGN_OR_RETURN(std::vector<int32_t> ids, ParseIds(a.ids));
  SPRIG_ASSIGN_OR_RETURN(std::string text, model.decode(ids));
  if (a.json) {
    nlohmann::json j = {
        {"tokenizer", ToString(model.config().tokenizer)}, {"ids", ids}, {"text", text}};
    std::printf("%s\n", j.dump(2, ' ', false, kReplaceInvalidUtf8).c_str());
  } else {
    std::fwrite(text.data(), 1, text.size(), stdout);
    std::printf("\n");
  }
  return Status::Ok();
}

Status ShowEncoded(const Model& model, const TokensArgs& a) {
  std::string text = a.text, source = "--text";
  if (!a.input.empty()) {
    SPRIG_ASSIGN_OR_RETURN(text, io::ReadFileBytes(a.input));
    source = a.input;
  }
  SPRIG_ASSIGN_OR_RETURN(std::vector<int32_t> ids, model.encode(text));
  std::vector<std::string> pieces;
  for (int32_t id : ids) {
    SPRIG_ASSIGN_OR_RETURN(std::string piece, model.token_piece(id));
    pieces.push_back(std::move(piece));
  }
  if (a.json) {
    nlohmann::json j = {{"tokenizer", ToString(model.config().tokenizer)},
                        {"input", source},
                        {"bytes", text.size()},
                        {"ids", ids},
                        {"pieces", pieces}};
    std::printf("%s\n", j.dump(2, ' ', false, kReplaceInvalidUtf8).c_str());
    return Status::Ok();
  }
  std::printf("%zu tokens from %zu bytes (tokenizer %s, vocabulary of %u)\n", ids.size(),
              text.size(), ToString(model.config().tokenizer), model.config().vocab_size);
  for (size_t i = 0; i < ids.size(); ++i) {
    std::printf("  %6d  %s\n", ids[i], pieces[i].c_str());
  }
  return Status::Ok();
}

int RunTokens(const TokensArgs& a) {
  auto model = Model::open(a.model);
  if (!model.ok()) return Fail("tokens", model.status());
  const Status s = a.ids.empty() ? ShowEncoded(**model, a) : ShowDecoded(**model, a);
  return s.ok() ? kExitOk : Fail("tokens", s);
}

}  // namespace

Verb AddTokens(CLI::App& app) {
  auto args = std::make_shared<TokensArgs>();
  CLI::App* c = app.add_subcommand(
      "tokens",
      "Show the token ids and pieces the model's tokenizer makes of a text, or decode ids.");
  c->add_option("MODEL", args->model, "the .sprig file (a transformer with a tokenizer)")
      ->required();
  CLI::Option* text = c->add_option("--text", args->text, "the text to encode");
  CLI::Option* input = c->add_option("--input", args->input, "a UTF-8 text file to encode");
  CLI::Option* ids = c->add_option("--ids", args->ids, "comma-separated token ids to decode");
  text->excludes(input)->excludes(ids);
  input->excludes(text)->excludes(ids);
  ids->excludes(text)->excludes(input);
  c->add_flag("--json", args->json, "print JSON");
  c->callback([text, input, ids] {
    if (text->count() + input->count() + ids->count() == 0) {
      throw CLI::RequiredError("--text, --input or --ids");
    }
  });
  c->footer(
      "Pieces are shown as the vocabulary stores them: SentencePiece writes a space as "
      "U+2581 and a byte token as <0xNN>.");
  return {c, [args] { return RunTokens(*args); }};
}

}  // namespace sprig::cli
