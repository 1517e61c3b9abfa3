#include "layers/experts.h"

#include <algorithm>
#include <cmath>
#include <numeric>
#include <vector>

#include "layers/exec.h"
#include "layers/grouping.h"
#include "layers/mlp.h"
#include "layers/quantize.h"

namespace sprig::layers {

ExpertsLayer::ExpertsLayer(const Binder& binder, const LayerConfig& config)
    : binder_(binder), config_(config) {
  in_ = config.in;
  out_ = config.out;
  router_ = binder.Matrix(binder.Find("router.weight"));
  router_bias_ = binder.FloatRow(binder.Find("router.bias"), 0);
  experts_ = FindMlp(binder, "experts");
  if (config.shared_experts > 0) shared_ = FindMlp(binder, "shared");
  if (config.shared_gate) {
    shared_gate_ = binder.Matrix(binder.Find("shared_gate.weight"));
    const float* bias = binder.FloatRow(binder.Find("shared_gate.bias"), 0);
    shared_gate_bias_ = bias ? *bias : 0.0f;
  }
}

namespace {

float Sigmoid(float z) {
  return 1.0f / (1.0f + std::exp(-z));
}

// log(sigmoid(z)) without overflow or underflow for any finite z.
float LogSigmoid(float z) {
  return z >= 0.0f ? -std::log1p(std::exp(-z)) : z - std::log1p(std::exp(z));
}

}  // namespace

void ExpertsLayer::Choose(const kernels::KernelTable& k, float* logits, int32_t* chosen,
                          float* weights) const {
  const size_t experts = config_.experts, top = config_.top_k;
  const RouterScoring scoring = config_.router_scoring;
  // Sigmoid and softmax_chosen choose on the logits themselves: the sigmoid is monotonic, so
  // the choice is the same as on sigmoid scores, but sigmoids of large logits round to 1.0f and
  // would tie where the logits do not.
  if (scoring == RouterScoring::kSoftmax) k.softmax(logits, experts);
  const float* score = logits;
  // Stable selection: higher score first, the lower index on ties.
  int32_t on_stack[kMaxExpertsOnStack];
  std::vector<int32_t> on_heap;
  int32_t* ranked = on_stack;
  if (experts > kMaxExpertsOnStack) {
    on_heap.resize(experts);
    ranked = on_heap.data();
  }
  std::iota(ranked, ranked + experts, 0);
  std::partial_sort(ranked, ranked + top, ranked + experts, [&](int32_t a, int32_t b) {
    return score[a] > score[b] || (score[a] == score[b] && a < b);
  });
  for (size_t j = 0; j < top; ++j) chosen[j] = ranked[j];
  switch (scoring) {
    case RouterScoring::kSoftmax: {
      float sum = 0.0f;
      for (size_t j = 0; j < top; ++j) sum += score[ranked[j]];
      for (size_t j = 0; j < top; ++j) {
        weights[j] = config_.renormalize ? score[ranked[j]] / sum : score[ranked[j]];
      }
      return;
    }
    case RouterScoring::kSigmoid:
      if (!config_.renormalize) {
        for (size_t j = 0; j < top; ++j) weights[j] = Sigmoid(score[ranked[j]]);
        return;
      }
      // s_j / sum s is the softmax of log s over the chosen experts; in that form no sigmoid
      // underflows to 0 and the sum can never be 0.
      for (size_t j = 0; j < top; ++j) weights[j] = LogSigmoid(score[ranked[j]]);
      k.softmax(weights, top);
      return;
    case RouterScoring::kSoftmaxChosen:
      for (size_t j = 0; j < top; ++j) weights[j] = score[ranked[j]];
      k.softmax(weights, top);
      return;
  }
}

void ExpertsLayer::AddShared(const Exec& exec, const float* x, size_t count, const float* shared,
                             float* y) const {
  const size_t experts = config_.shared_experts;
  std::vector<float> gate(count, 1.0f);
  if (shared_gate_.data != nullptr) {
    const float* bias = config_.bias ? &shared_gate_bias_ : nullptr;
    if (Quantizes(exec, shared_gate_.type)) {
      const QuantizedRows quantized = QuantizeRows(*exec.k, x, count, in_, (*exec.scratch)[0]);
      ProjectQuantized(*exec.k, shared_gate_, quantized, bias, gate.data(), count);
    } else if (exec.single_row) {
      kernels::Gemv(*exec.k, shared_gate_.type, shared_gate_.data, x, bias, gate.data(), 1, in_,
                    shared_gate_.scales);
    } else {
      kernels::GemmRows(*exec.k, shared_gate_.type, shared_gate_.data, x, bias, gate.data(), count,
                        1, in_, shared_gate_.scales);
    }
    for (float& g : gate) g = Sigmoid(g);
  }
  // Per row: the shared experts summed in index order, then scaled by the gate, then added, as
  // the reference does (y = routed + g * sum_s shared_s), whatever the batch or thread count.
  std::vector<float> sum(out_);
  for (size_t r = 0; r < count; ++r) {
    std::copy(shared + r * out_, shared + (r + 1) * out_, sum.begin());
    for (size_t s = 1; s < experts; ++s) {
      const float* part = shared + (s * count + r) * out_;
      for (size_t o = 0; o < out_; ++o) sum[o] += part[o];
    }
    float* y_row = y + r * out_;
    if (shared_gate_.data != nullptr) {
      for (size_t o = 0; o < out_; ++o) y_row[o] += gate[r] * sum[o];
    } else {
      for (size_t o = 0; o < out_; ++o) y_row[o] += sum[o];
    }
  }
}

void ExpertsLayer::Forward(const Exec& exec, const float* x, size_t rows, float* y,
                           int32_t* routes) const {
  const kernels::KernelTable& k = *exec.k;
  const size_t experts = config_.experts, top = config_.top_k;
  std::vector<float> logits(rows * experts);
  std::vector<int32_t> chosen(rows * top);
  std::vector<float> weights(rows * top);
  QuantizedRows quantized;  // the rows, quantised: set when the router quantises them
  if (Quantizes(exec, router_.type)) {
    // The router's rows quantised on the calling thread's scratch (the layer's parallel parts
    // start later); each row's logits are exact sums, the same for any batch.
    quantized = QuantizeRows(k, x, rows, in_, (*exec.scratch)[0]);
    ProjectQuantized(k, router_, quantized, router_bias_, logits.data(), rows);
  } else if (exec.single_row) {
    kernels::Gemv(k, router_.type, router_.data, x, router_bias_, logits.data(), experts, in_,
                  router_.scales);
  } else {
    kernels::GemmRows(k, router_.type, router_.data, x, router_bias_, logits.data(), rows, experts,
                      in_, router_.scales);
  }
  for (size_t r = 0; r < rows; ++r) {
    Choose(k, logits.data() + r * experts, chosen.data() + r * top, weights.data() + r * top);
  }
  if (routes) std::copy(chosen.begin(), chosen.end(), routes);

  if (exec.single_row) {
    for (size_t j = 0; j < top; ++j) {
      PrefetchMlp(Expert(chosen[j]));
      Touch(exec, static_cast<uint64_t>(chosen[j]));
    }
    std::fill(y, y + out_, 0.0f);
    Scratch& scratch = (*exec.scratch)[0];
    if (scratch.expert_output.size() < out_) scratch.expert_output.resize(out_);
    float* expert_output = scratch.expert_output.data();
    // In the compute mode "i8" the row is quantised once for every MLP it meets (MlpForward
    // keeps its hidden activations apart): the router's, or else here for the experts.
    auto quantizes = [&](const format::TensorInfo* w) {
      return w != nullptr && Quantizes(exec, w->dtype);
    };
    if (quantized.values == nullptr && (quantizes(experts_.fc1) || quantizes(experts_.gate))) {
      quantized = QuantizeRows(k, x, 1, in_, scratch);
    }
    const QuantizedRows* row = quantized.values != nullptr ? &quantized : nullptr;
    for (size_t j = 0; j < top; ++j) {
      MlpForward(k, Expert(chosen[j]), x, 1, expert_output, scratch, true, exec.int8_activations,
                 row);
      for (size_t o = 0; o < out_; ++o) y[o] += weights[j] * expert_output[o];
    }
    if (config_.shared_experts > 0) {
      const size_t size = config_.shared_experts * out_;
      if (scratch.shared_output.size() < size) scratch.shared_output.resize(size);
      for (size_t s = 0; s < config_.shared_experts; ++s) {
        MlpForward(k, Shared(s), x, 1, scratch.shared_output.data() + s * out_, scratch, true,
                   exec.int8_activations, row);
      }
      AddShared(exec, x, 1, scratch.shared_output.data(), y);
    }
    return;
  }
  // Group (row, slot) pairs by expert; each expert runs once over its rows. Outputs go to
  // per-slot buffers and are mixed afterwards in slot order, so a row's sum is formed in the
  // same order whatever the grouping or thread count.
  std::vector<uint32_t> expert_of(rows * top);
  for (size_t i = 0; i < rows * top; ++i) expert_of[i] = static_cast<uint32_t>(chosen[i]);
  std::vector<uint32_t> order;
  std::vector<RowGroup> groups;
  GroupByUnit(expert_of.data(), rows * top, order, groups);
  for (const RowGroup& group : groups) Touch(exec, group.unit);
  std::vector<float> slot_output(rows * top * out_);
  RunGroups(exec, groups, order, top, x, in_, slot_output.data(), out_,
            [this](uint32_t expert) { return Expert(expert); });
  for (size_t r = 0; r < rows; ++r) {
    float* y_row = y + r * out_;
    std::fill(y_row, y_row + out_, 0.0f);
    for (size_t j = 0; j < top; ++j) {
      const float weight = weights[r * top + j];
      const float* expert_row = slot_output.data() + (r * top + j) * out_;
      for (size_t o = 0; o < out_; ++o) y_row[o] += weight * expert_row[o];
    }
  }
  if (config_.shared_experts == 0) return;
  // Shared experts run over every row, split as a dense layer splits its rows (chunks that are
  // multiples of kRowChunk, see exec.h), one task per (shared expert, chunk).
  const size_t shared = config_.shared_experts;
  const size_t per_thread = (rows + exec.threads() - 1) / exec.threads();
  const size_t chunk = (per_thread + kRowChunk - 1) / kRowChunk * kRowChunk;
  const size_t chunks = (rows + chunk - 1) / chunk;
  std::vector<float> shared_output(shared * rows * out_);
  exec.ParallelFor(shared * chunks, [&](size_t task, Scratch& scratch) {
    const size_t s = task / chunks, first = (task % chunks) * chunk;
    const size_t count = std::min(chunk, rows - first);
    MlpForward(k, Shared(s), x + first * in_, count,
               shared_output.data() + (s * rows + first) * out_, scratch, false,
               exec.int8_activations);
  });
  AddShared(exec, x, rows, shared_output.data(), y);
}

}  // namespace sprig::layers
