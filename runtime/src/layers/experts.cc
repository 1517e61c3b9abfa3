#include "layers/experts.h"

#include <algorithm>
#include <numeric>
#include <vector>

#include "layers/exec.h"
#include "layers/grouping.h"
#include "layers/mlp.h"

namespace sprig::layers {

ExpertsLayer::ExpertsLayer(const Binder& binder, const LayerConfig& config)
    : binder_(binder), config_(config) {
  in_ = config.in;
  out_ = config.out;
  router_ = binder.Matrix(binder.Find("router.weight"));
  router_bias_ = binder.FloatRow(binder.Find("router.bias"), 0);
  experts_ = FindMlp(binder, "experts");
}

void ExpertsLayer::Choose(const kernels::KernelTable& k, float* logits, int32_t* chosen,
                          float* weights) const {
  const size_t experts = config_.experts, top = config_.top_k;
  k.softmax(logits, experts);
  const float* probability = logits;
  // Stable selection: higher probability first, the lower index on ties.
  int32_t on_stack[kMaxExpertsOnStack];
  std::vector<int32_t> on_heap;
  int32_t* ranked = on_stack;
  if (experts > kMaxExpertsOnStack) {
    on_heap.resize(experts);
    ranked = on_heap.data();
  }
  std::iota(ranked, ranked + experts, 0);
  std::partial_sort(ranked, ranked + top, ranked + experts, [&](int32_t a, int32_t b) {
    return probability[a] > probability[b] || (probability[a] == probability[b] && a < b);
  });
  float sum = 0.0f;
  for (size_t j = 0; j < top; ++j) sum += probability[ranked[j]];
  for (size_t j = 0; j < top; ++j) {
    chosen[j] = ranked[j];
    weights[j] = config_.renormalize ? probability[ranked[j]] / sum : probability[ranked[j]];
  }
}

void ExpertsLayer::Forward(const Exec& exec, const float* x, size_t rows, float* y,
                           int32_t* routes) const {
  const kernels::KernelTable& k = *exec.k;
  const size_t experts = config_.experts, top = config_.top_k;
  std::vector<float> logits(rows * experts);
  std::vector<int32_t> chosen(rows * top);
  std::vector<float> weights(rows * top);
  if (exec.single_row) {
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
    for (size_t j = 0; j < top; ++j) {
      MlpForward(k, Expert(chosen[j]), x, 1, expert_output, scratch, true);
      for (size_t o = 0; o < out_; ++o) y[o] += weights[j] * expert_output[o];
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
}

}  // namespace sprig::layers
