#include "verify_check.h"

#include <algorithm>
#include <cmath>
#include <limits>

namespace sprig::cli {
namespace {

constexpr uint64_t kNever = std::numeric_limits<uint64_t>::max();

double Rms(const std::vector<double>& v) {
  if (v.empty()) return 0;
  double sum = 0;
  for (double x : v) sum += x * x;
  return std::sqrt(sum / static_cast<double>(v.size()));
}

// Compares the rows of `c` for which compare_row(row) is true.
template <typename RowFilter>
ComparedResult CompareRows(const Compared& c, const Tolerance& tol, RowFilter compare_row) {
  ComparedResult r;
  r.name = c.name;
  r.layer = c.layer;
  r.atol = tol.atol_relative_to_rms ? tol.atol * Rms(c.want) : tol.atol;
  double worst_ratio = -1;
  for (uint64_t row = 0; row < c.rows; ++row) {
    if (!compare_row(row)) {
      ++r.rows_skipped;
      continue;
    }
    ++r.rows_compared;
    for (uint64_t j = 0; j < c.width; ++j) {
      const double want = c.want[row * c.width + j], got = c.got[row * c.width + j];
      const double err = std::fabs(got - want);
      const double allowed = r.atol + tol.rtol * std::fabs(want);
      // NaN never compares as within tolerance.
      const double ratio = allowed > 0 ? err / allowed : (err == 0 ? 0 : HUGE_VAL);
      r.max_abs_error = std::max(r.max_abs_error, err);
      r.max_rel_error = std::max(r.max_rel_error, err / std::max(std::fabs(want), r.atol));
      if (!(ratio <= 1)) r.ok = false;
      if (std::isnan(err) || ratio > worst_ratio) {
        worst_ratio = std::isnan(err) ? HUGE_VAL : ratio;
        r.worst_row = static_cast<int64_t>(row);
      }
    }
  }
  return r;
}

std::vector<int64_t> Choices(const std::vector<int64_t>& all, uint64_t row, size_t width) {
  return {all.begin() + row * width, all.begin() + (row + 1) * width};
}

// Experts are compared as sets: the order of equal-weight choices does not change the output.
bool SameChoices(std::vector<int64_t> a, std::vector<int64_t> b) {
  std::sort(a.begin(), a.end());
  std::sort(b.begin(), b.end());
  return a == b;
}

// Marks the rows a flip at (layer, row) affects from which layer on.
void Propagate(const VerifyInputs& in, uint64_t row, uint64_t layer,
               std::vector<uint64_t>& affected_from) {
  affected_from[row] = std::min(affected_from[row], layer);
  if (!in.transformer || in.length == 0) return;
  // Attention carries the changed token to others from the next block on.
  const uint64_t first = row - row % in.length;
  const uint64_t begin = in.causal ? row + 1 : first;
  for (uint64_t t = begin; t < first + in.length; ++t) {
    if (t != row) affected_from[t] = std::min(affected_from[t], layer + 1);
  }
}

Flip JudgeFlip(const RoutedLayer& l, uint64_t row, bool follows_earlier) {
  Flip f;
  f.row = row;
  f.want = Choices(l.want, row, l.width);
  f.got = Choices(l.got, row, l.width);
  // Without margins in the reference a flip cannot be judged against rounding.
  f.margin = l.margins.empty() ? std::nan("") : l.margins[row];
  if (follows_earlier) {
    f.verdict = FlipVerdict::kFollowsEarlierFlip;
    return f;
  }
  // No margin or sensitivities in the reference: cannot explain.
  if (l.scales.empty() || l.margins.empty()) return f;
  // float32 accumulation over the n products and the bias (Higham eq. 3.5).
  const double gamma = static_cast<double>(l.in + 1) * std::ldexp(1.0, -24);
  f.bound_rounding = l.int8_bounds.empty() ? (StorageRoundoff(l.storage) + gamma) * l.scales[row]
                                           : l.int8_bounds[row] + gamma * l.scales[row];
  if (!l.activation_bounds.empty()) {
    f.bound_activation = l.activation_bounds[row];
    f.bound_rounding += f.bound_activation;
  }
  f.bound_input = l.norms[row] * l.input_error[row];
  // The bounds are first order; 1% slack covers the second-order terms.
  if (std::fabs(f.margin) <= 1.01 * (f.bound_rounding + f.bound_input)) {
    f.verdict = FlipVerdict::kExplainedByRounding;
  }
  return f;
}

RoutingResult CheckRouting(const VerifyInputs& in, const RoutedLayer& l,
                           std::vector<uint64_t>& affected_from) {
  RoutingResult r;
  r.layer = l.layer;
  r.storage = l.storage;
  r.rows = in.rows;
  std::vector<uint64_t> flipped;
  for (uint64_t row = 0; row < in.rows; ++row) {
    if (SameChoices(Choices(l.got, row, l.width), Choices(l.want, row, l.width))) {
      ++r.agree;
      continue;
    }
    Flip f = JudgeFlip(l, row, affected_from[row] <= l.layer);
    switch (f.verdict) {
      case FlipVerdict::kExplainedByRounding:
        ++r.explained;
        break;
      case FlipVerdict::kFollowsEarlierFlip:
        ++r.downstream;
        break;
      case FlipVerdict::kUnexplained:
        ++r.unexplained;
        break;
    }
    r.flips.push_back(std::move(f));
    flipped.push_back(row);
  }
  // Propagate only after judging the whole layer: a token's flip reaches the others at the
  // next block, not this one.
  for (uint64_t row : flipped) Propagate(in, row, l.layer, affected_from);
  r.agreement_percent =
      in.rows ? 100.0 * static_cast<double>(r.agree) / static_cast<double>(in.rows) : 100.0;
  return r;
}

}  // namespace

double StorageRoundoff(DType type) {
  switch (type) {
    case DType::kF32:
      return std::ldexp(1.0, -24);
    case DType::kF16:
      return std::ldexp(1.0, -11);
    case DType::kBF16:
      return std::ldexp(1.0, -8);
    case DType::kI8:
      return std::ldexp(1.0, -7);
  }
  return 0;
}

Tolerance DefaultTolerance(DType type) {
  // Measured on the project's reference models (docs/verifying.md) and widened
  // by about ten times, so that honest conversions pass and a perturbed weight does not.
  switch (type) {
    case DType::kF32:
      return {1e-4, 1e-4, true};
    case DType::kF16:
      return {2e-2, 2e-2, true};
    case DType::kBF16:
      return {1e-1, 1e-1, true};
    case DType::kI8:
      return {2e-1, 2e-1, true};
  }
  return {};
}

const char* FlipVerdictText(FlipVerdict v) {
  switch (v) {
    case FlipVerdict::kExplainedByRounding:
      return "explained by rounding";
    case FlipVerdict::kFollowsEarlierFlip:
      return "follows an earlier flip";
    case FlipVerdict::kUnexplained:
      return "UNEXPLAINED";
  }
  return "";
}

VerifyReport CheckAgainstReference(const VerifyInputs& in, const Tolerance& tol) {
  VerifyReport report;
  report.storage = in.storage;
  report.compute = in.compute;
  report.rtol = tol.rtol;
  report.atol_factor = tol.atol;
  report.atol_is_relative = tol.atol_relative_to_rms;
  report.not_checked = in.not_checked;
  std::vector<uint64_t> affected_from(in.rows, kNever);
  for (const RoutedLayer& l : in.routed) {
    report.routing.push_back(CheckRouting(in, l, affected_from));
    if (report.routing.back().unexplained > 0) {
      report.pass = false;
      // An unexplained flip is where this layer's outputs diverge, even though the flipped rows
      // are left out of the comparison of its outputs.
      if (report.first_divergent_layer < 0)
        report.first_divergent_layer = static_cast<int>(l.layer);
    }
  }
  for (const Compared& c : in.layers) {
    const uint64_t layer = static_cast<uint64_t>(c.layer);
    report.layers.push_back(
        CompareRows(c, tol, [&](uint64_t row) { return affected_from[row] > layer; }));
    if (!report.layers.back().ok) {
      report.pass = false;
      if (report.first_divergent_layer < 0 || c.layer < report.first_divergent_layer) {
        report.first_divergent_layer = static_cast<int>(c.layer);
      }
    }
  }
  report.output = CompareRows(in.output, tol, [&](uint64_t row) {
    if (!in.output_per_sequence) return affected_from[row] == kNever;
    for (uint64_t t = row * in.length; t < (row + 1) * in.length; ++t) {
      if (affected_from[t] != kNever) return false;
    }
    return true;
  });
  if (!report.output.ok) report.pass = false;
  return report;
}

}  // namespace sprig::cli
