#include "layers/experts.h"

#include <algorithm>
#include <numeric>
#include <vector>

#include "layers/exec.h"
#include "layers/grouping.h"
#include "layers/mlp.h"

namespace sprig::layers {

ExpertsLayer::ExpertsLayer(const Binder& b, const LayerConfig& c) : binder_(b), config_(c) {
  in_ = c.in;
  out_ = c.out;
  router_ = b.Matrix(b.Find("router.weight"));
  router_bias_ = b.FloatRow(b.Find("router.bias"), 0);
  experts_ = FindMlp(b, "experts");
}

void ExpertsLayer::Choose(const kernels::KernelTable& k, float* p, int32_t* chosen,
                          float* weights) const {
  const size_t experts = config_.experts, top = config_.top_k;
  k.softmax(p, experts);
  // Stable selection: higher probability first, the lower index on ties.
  int32_t idx[kMaxExpertsOnStack];
  std::vector<int32_t> heap_idx;
  int32_t* ids = idx;
  if (experts > kMaxExpertsOnStack) {
    heap_idx.resize(experts);
    ids = heap_idx.data();
  }
  std::iota(ids, ids + experts, 0);
  std::partial_sort(ids, ids + top, ids + experts,
                    [&](int32_t a, int32_t b) { return p[a] > p[b] || (p[a] == p[b] && a < b); });
  float sum = 0.0f;
  for (size_t j = 0; j < top; ++j) sum += p[ids[j]];
  for (size_t j = 0; j < top; ++j) {
    chosen[j] = ids[j];
    weights[j] = config_.renormalize ? p[ids[j]] / sum : p[ids[j]];
  }
}

void ExpertsLayer::Forward(const Exec& e, const float* x, size_t rows, float* y,
                           int32_t* routes) const {
  const kernels::KernelTable& k = *e.k;
  const size_t experts = config_.experts, top = config_.top_k;
  Scratch& s0 = (*e.scratch)[0];
  std::vector<float> logits(rows * experts);
  std::vector<int32_t> chosen(rows * top);
  std::vector<float> weights(rows * top);
  if (e.single_row) {
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

  if (e.single_row) {
    for (size_t j = 0; j < top; ++j) {
      PrefetchMlp(Expert(chosen[j]));
      Touch(e, static_cast<uint64_t>(chosen[j]));
    }
    std::fill(y, y + out_, 0.0f);
    if (s0.e.size() < out_) s0.e.resize(out_);
    for (size_t j = 0; j < top; ++j) {
      MlpForward(k, Expert(chosen[j]), x, 1, s0.e.data(), s0, true);
      for (size_t o = 0; o < out_; ++o) y[o] += weights[j] * s0.e[o];
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
  for (const RowGroup& g : groups) Touch(e, g.unit);
  std::vector<float> slot_out(rows * top * out_);
  RunGroups(e, groups, order, top, x, in_, slot_out.data(), out_,
            [this](uint32_t j) { return Expert(j); });
  for (size_t r = 0; r < rows; ++r) {
    float* yr = y + r * out_;
    std::fill(yr, yr + out_, 0.0f);
    for (size_t j = 0; j < top; ++j) {
      const float w = weights[r * top + j];
      const float* src = slot_out.data() + (r * top + j) * out_;
      for (size_t o = 0; o < out_; ++o) yr[o] += w * src[o];
    }
  }
}

}  // namespace sprig::layers
