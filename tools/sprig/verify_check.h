// The comparison behind `sprig verify`: a model's outputs, layer outputs and routing decisions
// against a reference, with every routing disagreement judged against rounding.
//
// Rules (docs/verifying.md):
// - An element passes when |got - want| <= atol + rtol * |want| (the numpy.isclose rule). The
//   default atol is a factor times the RMS of the reference array being compared, so it does
//   not depend on the model's output scale.
// - A routing disagreement at layer i, row r is *explained by rounding* when the reference's
//   margin for that row is at most
//     (u + gamma_n) * scale + norm * ||dx||_2
//   where u is the unit roundoff of the deciding weights' storage type, gamma_n = n * 2^-24 the
//   float32 dot-product error bound (Higham, Accuracy and Stability of Numerical Algorithms,
//   2nd ed., eq. 3.5: |fl(x.y) - x.y| <= gamma_n |x|.|y|), `scale` and `norm` the reference's
//   sensitivities of that margin (sprig_torch.layers margin_bounds) and dx the measured
//   difference between sprig's and the reference's input to the layer. int8 weights have no
//   relative error bound: each stored weight is within half its row's scale s of the source
//   (schema/README.md), so for them u * scale is replaced by an absolute bound on the margin,
//   (s / 2) * ||x||_1 for a tree node and 2 * (s / 2) * ||x||_1 for a router's p_a - p_b, with s
//   the largest scale among the rows that can decide (RoutedLayer::int8_bounds). In the compute
//   mode "i8" (int8 activations) an i8-stored deciding row's logit ŵ·x is computed on x
//   quantised with scale s_x = max|x|/127: rounding to nearest leaves |x_i - s_x q_i| <= s_x/2
//   for every element, so by Hölder |ŵ·x - ŵ·(s_x q)| <= (s_x/2)·||ŵ||_1, ŵ the dequantised row.
//   That term, with the largest ||ŵ||_1 among the rows that can decide (twice it for a router's
//   margin, as above), is added to the bound (RoutedLayer::activation_bounds); the integer sum
//   itself is exact. A disagreement in
//   a row that already flipped at an earlier layer *follows an earlier flip*. Anything else is
//   unexplained and fails the check.
// - Rows that follow a flip are not compared at the flipped layer or after it: for a causal
//   transformer, a flip at token t also affects the later tokens of its sequence; for a
//   non-causal one, the whole sequence.
// - The check passes when every compared array is within tolerance and no disagreement is
//   unexplained. It covers what the reference gives: inputs and outputs are required; per-layer
//   outputs, routes and margins are optional, and what is missing is listed as not checked.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "sprig/config.h"

namespace sprig::cli {

// Unit roundoff of a storage type (round to nearest): 2^-24 float32, 2^-11 float16 and 2^-8
// bfloat16 (IEEE 754-2019 binary32/binary16 precisions of 24 and 11 bits; bfloat16 keeps 8).
// int8 has no relative bound (its error is absolute per row); it returns 2^-7 as an ordering
// value only.
double StorageRoundoff(DType type);

struct Tolerance {
  double rtol = 0;
  double atol = 0;
  bool atol_relative_to_rms = true;
};
// The default tolerances for a model whose coarsest storage type is `type`.
Tolerance DefaultTolerance(DType type);

// One array compared element by element.
struct Compared {
  std::string name;
  int64_t layer = -1;  // -1: the model's outputs
  uint64_t rows = 0, width = 0;
  std::vector<double> got, want;
};

struct RoutedLayer {
  size_t layer = 0;
  size_t width = 1;  // choices per row
  uint64_t units = 0;
  uint64_t in = 0;  // values per row of the layer's input
  LayerKind kind = LayerKind::kTree;
  DType storage = DType::kF32;     // of the deciding weights
  std::vector<int64_t> got, want;  // [rows, width]
  std::vector<double> margins;     // [rows]; empty when the reference has none (no flip is
                                   // then explained)
  // Optional (empty when the reference lacks them): [rows] each.
  std::vector<double> scales, norms, input_error;
  // int8 deciding weights only (empty otherwise): [rows] absolute bounds on how far storage
  // rounding moved each row's margin, used in place of StorageRoundoff(storage) * scales.
  std::vector<double> int8_bounds;
  // Compute mode "i8" with i8 deciding weights only (empty otherwise): [rows] absolute bounds on
  // how far quantising the row's input moved its margin, (s_x / 2)·||ŵ||_1 per logit.
  std::vector<double> activation_bounds;
};

struct VerifyInputs {
  bool transformer = false;
  bool causal = true;
  bool output_per_sequence = false;  // classifier head: one output row per sequence
  uint64_t sequences = 0, length = 0;
  uint64_t rows = 0;            // rows of layers and routes (tokens of a transformer)
  DType storage = DType::kF32;  // the coarsest storage type in the model
  std::string compute = "f32";  // the session's compute mode (SessionOptions::compute)
  Compared output;
  std::vector<Compared> layers;
  std::vector<RoutedLayer> routed;  // in layer order
  // What the reference did not give and so was not checked, one sentence each.
  std::vector<std::string> not_checked;
};

struct ComparedResult {
  std::string name;
  int64_t layer = -1;
  double max_abs_error = 0, max_rel_error = 0;
  int64_t worst_row = -1;
  double atol = 0;
  uint64_t rows_compared = 0, rows_skipped = 0;
  bool ok = true;
};

enum class FlipVerdict { kExplainedByRounding, kFollowsEarlierFlip, kUnexplained };
const char* FlipVerdictText(FlipVerdict v);

struct Flip {
  uint64_t row = 0;
  std::vector<int64_t> want, got;
  double margin = 0;
  // bound_rounding includes bound_activation, the part due to int8 activations (compute "i8").
  double bound_rounding = 0, bound_activation = 0, bound_input = 0;
  FlipVerdict verdict = FlipVerdict::kUnexplained;
};

struct RoutingResult {
  size_t layer = 0;
  DType storage = DType::kF32;
  uint64_t rows = 0, agree = 0;
  double agreement_percent = 100;
  uint64_t explained = 0, downstream = 0, unexplained = 0;
  std::vector<Flip> flips;
};

struct VerifyReport {
  DType storage = DType::kF32;
  std::string compute = "f32";
  double rtol = 0, atol_factor = 0;
  bool atol_is_relative = true;
  ComparedResult output;
  std::vector<ComparedResult> layers;
  std::vector<RoutingResult> routing;
  // The first layer whose outputs are outside tolerance or that has an unexplained flip; -1
  // when there is none.
  int first_divergent_layer = -1;
  bool pass = true;
  std::vector<std::string> not_checked;  // VerifyInputs::not_checked: the verdict leaves it out
};

VerifyReport CheckAgainstReference(const VerifyInputs& inputs, const Tolerance& tolerance);

}  // namespace sprig::cli
