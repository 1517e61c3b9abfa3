// sprig generate MODEL --prompt TEXT [--count N] [--seed S] [--temperature T] [--top-p P]
//   [--threads N]
//
// Text continuation with the model's tokenizer (byte or sentencepiece): the prompt is encoded,
// and each generated token's text is printed the moment it is chosen (a UTF-8 character split
// over several tokens is printed once whole).

#include <cstdio>
#include <memory>

#include "cli.h"
#include "platform/process.h"
#include "sprig/session.h"

namespace sprig::cli {
namespace {

struct GenerateArgs {
  std::string model, prompt;
  GenerateOptions options;
  size_t threads = 1;
};

int RunGenerate(const GenerateArgs& a) {
  auto model = Model::open(a.model);
  if (!model.ok()) return Fail("generate", model.status());
  const ModelConfig& c = (*model)->config();
  if (c.family != Family::kTransformer || c.tokenizer == Tokenizer::kNone) {
    return Fail("generate",
                Status::InvalidArgument(a.model + " has tokenizer '" + ToString(c.tokenizer) +
                                        "'; generate needs a transformer with a tokenizer (byte or "
                                        "sentencepiece); give token ids to sprig run instead"));
  }
  SessionOptions options;
  options.threads = a.threads;
  auto session = Session::create(*model, options);
  if (!session.ok()) return Fail("generate", session.status());
  std::fprintf(stderr,
               "caution: generated text comes from a model; it can be wrong and must not be "
               "relied upon.\n");
  size_t generated = 0;
  // The model's tokenizer encodes the prompt and decodes each token as it comes, holding back
  // a UTF-8 character until it is whole.
  Status s =
      (*session)->generate_text(a.prompt, a.options, [&](const std::string& text, int32_t token) {
        std::fwrite(text.data(), 1, text.size(), stdout);
        std::fflush(stdout);
        if (token >= 0) ++generated;
        return true;
      });
  if (platform::IsTerminal(stdout)) std::fputc('\n', stdout);
  std::fflush(stdout);
  if (!s.ok()) return Fail("generate", s);
  if ((*session)->position() >= c.max_seq && generated < a.options.count) {
    std::fprintf(stderr,
                 "note: stopped after %zu tokens: the model's context (max_seq %u) is full\n",
                 generated, c.max_seq);
  }
  return kExitOk;
}

}  // namespace

Verb AddGenerate(CLI::App& app) {
  auto args = std::make_shared<GenerateArgs>();
  CLI::App* c = app.add_subcommand(
      "generate", "Continue a text prompt with a transformer model that has a tokenizer.");
  c->add_option("MODEL", args->model, "the .sprig file")->required();
  c->add_option("--prompt", args->prompt,
                "the text to continue (encoded with the model's tokenizer)")
      ->required();
  c->add_option("--count", args->options.count, "tokens to generate at most")
      ->capture_default_str();
  c->add_option("--seed", args->options.seed, "seed of the sampler: the same seed, the same text")
      ->capture_default_str();
  // Their ranges are the runtime's generation rules, which report a value outside them.
  c->add_option("--temperature", args->options.temperature,
                "softmax temperature (>= 0); 0 always picks the most probable token")
      ->capture_default_str();
  c->add_option("--top-p", args->options.top_p,
                "sample only from the most probable tokens whose probabilities "
                "sum to this (0 < P <= 1)")
      ->capture_default_str();
  c->add_option("--threads", args->threads, "threads (0: one per CPU)")->capture_default_str();
  c->footer("Generated text can be wrong; do not rely on it.");
  return {c, [args] { return RunGenerate(*args); }};
}

}  // namespace sprig::cli
