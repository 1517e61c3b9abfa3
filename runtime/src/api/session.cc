#include "sprig/session.h"

#include <algorithm>
#include <bit>
#include <chrono>
#include <thread>

#include "api/input_rules.h"
#include "api/model_impl.h"
#include "base/status_macros.h"
#include "kernels/kernels.h"
#include "layers/feed_forward.h"
#include "layers/thread_pool.h"
#include "network/network.h"
#include "network/recorder.h"
#include "transformer/sampler.h"

namespace sprig {
namespace {

double SecondsSince(std::chrono::steady_clock::time_point start) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
}

// The compute mode "i8" applies to feed-forward matrices stored as i8 (an attention
// projection of a transformer block stays float, and a path tree's output rows are added as
// float activations times the stored rows); a model without one would only be slower. Rows
// longer than the integer kernels' exact range are refused too.
Status CheckInt8Activations(const Model& model) {
  bool applies = false;
  for (const TensorDescription& tensor : model.tensor_descriptions()) {
    if (tensor.dtype != DType::kI8 || tensor.layer < 0) continue;
    if (tensor.name.find(".attn.") != std::string::npos) continue;
    if (tensor.name.ends_with("nodes.out")) continue;
    if (!tensor.shape.empty() && tensor.shape.back() > kernels::kMaxQuantizedLength) {
      return Status::InvalidArgument(model.path() + ": tensor " + tensor.name + " has rows of " +
                                     std::to_string(tensor.shape.back()) +
                                     " values; compute \"i8\" needs at most " +
                                     std::to_string(kernels::kMaxQuantizedLength));
    }
    applies = true;
  }
  if (applies) return Status::Ok();
  return Status::InvalidArgument(
      model.path() +
      " stores no feed-forward weight as i8, so compute \"i8\" (int8 activations) has nothing "
      "to run on; pack the model with --dtype i8 to use it");
}

}  // namespace

// Everything a session's calls change; the model's network is shared and never changes.
struct Session::State {
  const network::Network* network = nullptr;
  const kernels::KernelTable* kernels = nullptr;
  std::unique_ptr<layers::ThreadPool> pool;
  std::vector<layers::Scratch> scratch;
  std::unique_ptr<network::Workspace> workspace;
  network::KvCache cache;  // transformer models only
  SessionStats stats;
  layers::TouchLog touched;       // one bitset per model layer, sized at creation
  bool int8_activations = false;  // SessionOptions::compute == "i8"

  layers::Exec MakeExec(bool single_row) {
    layers::Exec exec;
    exec.k = kernels;
    exec.pool = pool.get();
    exec.scratch = &scratch;
    exec.single_row = single_row;
    exec.touched = &touched;
    exec.int8_activations = int8_activations;
    return exec;
  }
};

Session::Session(std::shared_ptr<const Model> model, std::unique_ptr<State> state)
    : model_(std::move(model)), state_(std::move(state)) {}
Session::~Session() = default;

Result<std::unique_ptr<Session>> Session::create(std::shared_ptr<const Model> model,
                                                 const SessionOptions& options) {
  if (!model) return Status::InvalidArgument("Session::create needs an open model");
  auto state = std::make_unique<State>();
  state->network = Model::Impl::Of(*model).network.get();
  kernels::KernelPath path;
  if (options.kernel_path.empty()) {
    path = kernels::BestAvailablePath();
  } else {
    SPRIG_ASSIGN_OR_RETURN(path, kernels::ResolvePath(options.kernel_path.c_str()));
  }
  state->kernels = &kernels::Kernels(path);
  if (options.compute == "i8") {
    SPRIG_RETURN_IF_ERROR(CheckInt8Activations(*model));
    state->int8_activations = true;
  } else if (options.compute != "f32") {
    return Status::InvalidArgument("compute is \"" + options.compute +
                                   "\"; expected \"f32\" (the default) or \"i8\"");
  }
  size_t threads = options.threads;
  if (threads == 0) threads = std::max(1u, std::thread::hardware_concurrency());
  if (threads > 256) {
    return Status::InvalidArgument("threads is " + std::to_string(threads) + ", expected 0..256");
  }
  if (threads > 1) state->pool = std::make_unique<layers::ThreadPool>(threads);
  state->scratch.resize(threads);
  for (const auto& layer : state->network->layers()) {
    state->touched.bits.emplace_back((layer->record_count() + 63) / 64, 0);
  }
  state->workspace = state->network->NewWorkspace();
  return std::unique_ptr<Session>(new Session(std::move(model), std::move(state)));
}

const char* Session::kernel_path() const {
  return kernels::ToString(state_->kernels->path);
}
const char* Session::compute() const {
  return state_->int8_activations ? "i8" : "f32";
}
size_t Session::threads() const {
  return state_->scratch.size();
}

Status Session::forward(const float* input, size_t rows, float* output, Routes* routes,
                        std::vector<LayerTrace>* trace) {
  const ModelConfig& c = model_->config();
  SPRIG_RETURN_IF_ERROR(input_rules::RowsCall(c, model_->path()));
  SPRIG_RETURN_IF_ERROR(input_rules::FiniteRows(c, input, rows, state_->kernels));
  const auto start = std::chrono::steady_clock::now();
  network::Input call;
  call.rows = input;
  call.sequences = rows;
  network::Recorder recorder(routes, trace);
  state_->network->Forward(state_->MakeExec(rows == 1), *state_->workspace, call, output, recorder);
  state_->stats.forward_calls += 1;
  state_->stats.rows += rows;
  state_->stats.forward_seconds += SecondsSince(start);
  return Status::Ok();
}

Status Session::forward_tokens(const int32_t* tokens, size_t batch, size_t length, float* output,
                               Routes* routes, std::vector<LayerTrace>* trace) {
  const ModelConfig& c = model_->config();
  SPRIG_RETURN_IF_ERROR(input_rules::TokensCall(c, model_->path()));
  SPRIG_RETURN_IF_ERROR(input_rules::Sequences(c, batch, length));
  SPRIG_RETURN_IF_ERROR(input_rules::TokenRange(c, tokens, batch, length));
  const auto start = std::chrono::steady_clock::now();
  network::Input call;
  call.tokens = tokens;
  call.sequences = batch;
  call.length = length;
  network::Recorder recorder(routes, trace);
  state_->network->Forward(state_->MakeExec(batch * length == 1), *state_->workspace, call, output,
                           recorder);
  state_->stats.forward_calls += 1;
  state_->stats.sequence_tokens += batch * length;
  state_->stats.forward_seconds += SecondsSince(start);
  return Status::Ok();
}

Status Session::append_tokens(const int32_t* tokens, size_t count, float* logits) {
  const ModelConfig& c = model_->config();
  SPRIG_RETURN_IF_ERROR(input_rules::Decoding(c, model_->path()));
  SPRIG_RETURN_IF_ERROR(input_rules::DecodingRoom(c, state_->cache.length, count));
  SPRIG_RETURN_IF_ERROR(input_rules::TokenRange(c, tokens, 1, count));
  if (count == 0) return Status::Ok();
  const auto start = std::chrono::steady_clock::now();
  // Decoding passed, so the model is a transformer, whose network decodes.
  state_->network->decoder()->Append(state_->MakeExec(count == 1), *state_->workspace,
                                     state_->cache, tokens, count, logits);
  const double seconds = SecondsSince(start);
  if (count == 1) {
    state_->stats.decode_tokens += 1;
    state_->stats.decode_seconds += seconds;
  } else {
    state_->stats.prefill_tokens += count;
    state_->stats.prefill_seconds += seconds;
  }
  return Status::Ok();
}

Status Session::append_token(int32_t token, float* logits) {
  return append_tokens(&token, 1, logits);
}

void Session::reset() {
  state_->cache.Clear();
}

const SessionStats& Session::stats() const {
  // Counted from the bitsets on demand, so forward calls only set bits.
  SessionStats& s = state_->stats;
  s.touched.clear();
  const auto& layers = state_->network->layers();
  for (size_t i = 0; i < layers.size(); ++i) {
    if (layers[i]->records() == nullptr) continue;
    LayerTouch t;
    t.layer = i;
    t.records = layers[i]->record_count();
    t.record_size = layers[i]->records()->record_size;
    for (uint64_t word : state_->touched.bits[i]) t.touched += std::popcount(word);
    s.touched.push_back(t);
  }
  return s;
}

void Session::reset_stats() {
  state_->stats = SessionStats();
  for (auto& bits : state_->touched.bits) std::fill(bits.begin(), bits.end(), 0);
}

size_t Session::position() const {
  return state_->cache.length;
}

Status Session::generate(const std::vector<int32_t>& prompt, const GenerateOptions& options,
                         const std::function<bool(int32_t token)>& on_token) {
  SPRIG_RETURN_IF_ERROR(input_rules::Generation(options, prompt.size()));
  const ModelConfig& c = model_->config();
  reset();
  std::vector<float> logits(c.family == Family::kTransformer ? c.vocab_size : 0);
  // The prompt in one batched pass; its last token's logits predict the first new token.
  SPRIG_RETURN_IF_ERROR(append_tokens(prompt.data(), prompt.size(), logits.data()));
  transformer::Random rng(options.seed);
  transformer::SamplerOptions sampler{options.temperature, options.top_p};
  std::vector<double> probabilities;
  std::vector<int32_t> order;
  for (size_t i = 0; i < options.count; ++i) {
    const int32_t token =
        transformer::Sample(logits.data(), logits.size(), sampler, rng, probabilities, order);
    state_->stats.generated_tokens += 1;
    if (!on_token(token)) break;
    if (i + 1 == options.count || position() == c.max_seq) break;
    SPRIG_RETURN_IF_ERROR(append_token(token, logits.data()));
  }
  return Status::Ok();
}

}  // namespace sprig
