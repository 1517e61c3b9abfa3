// sprig verify MODEL REFERENCE.npz [--atol A] [--rtol R] [--threads N] [--compute f32|i8]
//                                  [--show N] [--json] [--require-routes]
//
// Runs a model on a reference file's inputs and compares outputs, every layer's outputs and
// every routing decision with the reference (as sprig_torch.export writes it). Only `inputs`
// and `outputs` are required, so a reference written by any tool serves; what it lacks is
// reported as not checked. Each routing
// disagreement is judged against how far rounding could have moved its margin; see
// verify_check.h for the rules.
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <functional>
#include <nlohmann/json.hpp>

#include "api/model_internals.h"
#include "base/status_macros.h"
#include "cli.h"
#include "io/tensor_archive.h"
#include "numeric/half.h"
#include "sprig/session.h"
#include "verify_check.h"

namespace sprig::cli {
namespace {

struct VerifyArgs {
  std::string model, reference;
  double atol = -1, rtol = -1;  // negative: the storage type's default
  size_t threads = 1;
  std::string compute = "f32";  // --compute: the session's compute mode
  size_t show = 20;
  bool json = false;
  bool require_routes = false;  // a reference without every routed layer's routes does not fit
};

double ElementAsDouble(const io::NdArray& a, uint64_t i) {
  const uint8_t* p = a.data + i * io::ElementSize(a.type);
  switch (a.type) {
    case io::ElementType::kF64: {
      double v;
      std::memcpy(&v, p, 8);
      return v;
    }
    case io::ElementType::kF32: {
      float v;
      std::memcpy(&v, p, 4);
      return v;
    }
    case io::ElementType::kF16: {
      uint16_t v;
      std::memcpy(&v, p, 2);
      return numeric::HalfToFloat(v);
    }
    case io::ElementType::kBF16: {
      uint16_t v;
      std::memcpy(&v, p, 2);
      return numeric::BFloat16ToFloat(v);
    }
    case io::ElementType::kI64: {
      int64_t v;
      std::memcpy(&v, p, 8);
      return static_cast<double>(v);
    }
    case io::ElementType::kI32: {
      int32_t v;
      std::memcpy(&v, p, 4);
      return v;
    }
    default:
      return std::nan("");
  }
}

// The reference file with its arrays checked by name, type and shape.
class Reference {
 public:
  explicit Reference(io::TensorArchive archive) : archive_(std::move(archive)) {}
  const std::string& path() const { return archive_.path(); }
  bool Has(const std::string& name) const { return archive_.Find(name) != nullptr; }

  // A float array of `elements` values whose last axis is `width` (0: any).
  Result<std::vector<double>> Floats(const std::string& name, uint64_t elements,
                                     uint64_t width) const {
    const io::NdArray* a = archive_.Find(name);
    if (a == nullptr) return Missing(name);
    if (!io::IsFloating(a->type)) {
      return Status::InvalidArgument(path() + ": array '" + name + "' holds " +
                                     io::ElementTypeName(a->type) + " values, expected floats");
    }
    const uint64_t last = a->shape.empty() ? 1 : a->shape.back();
    if (a->elements() != elements || (width != 0 && last != width)) {
      return Status::InvalidArgument(path() + ": array '" + name + "' has shape " +
                                     ShapeText(a->shape) + ", expected " +
                                     std::to_string(elements) + " values" +
                                     (width ? " in rows of " + std::to_string(width) : "") +
                                     " for this model and these inputs");
    }
    std::vector<double> v(elements);
    for (uint64_t i = 0; i < elements; ++i) v[i] = ElementAsDouble(*a, i);
    return v;
  }

  // An integer array of rows × width values ([rows] allowed when width is 1, [width] when rows
  // is 1).
  Result<std::vector<int64_t>> Ints(const std::string& name, uint64_t rows, uint64_t width) const {
    const io::NdArray* a = archive_.Find(name);
    if (a == nullptr) return Missing(name);
    if (a->type != io::ElementType::kI32 && a->type != io::ElementType::kI64) {
      return Status::InvalidArgument(path() + ": array '" + name + "' holds " +
                                     io::ElementTypeName(a->type) + " values, expected int32 or " +
                                     "int64");
    }
    const bool flat = a->shape.size() == 1 && (width == 1 || rows == 1);
    const bool matrix = a->shape.size() == 2 && a->shape[1] == width;
    if (a->elements() != rows * width || !(flat || matrix)) {
      return Status::InvalidArgument(path() + ": array '" + name + "' has shape " +
                                     ShapeText(a->shape) + ", expected [" + std::to_string(rows) +
                                     (width == 1 ? "" : ", " + std::to_string(width)) + "]");
    }
    std::vector<int64_t> v(rows * width);
    for (uint64_t i = 0; i < v.size(); ++i) v[i] = static_cast<int64_t>(ElementAsDouble(*a, i));
    return v;
  }

  const io::NdArray* Find(const std::string& name) const { return archive_.Find(name); }

 private:
  Status Missing(const std::string& name) const {
    return Status::InvalidArgument(path() + " has no array '" + name +
                                   "'; verify needs 'inputs' and 'outputs' (and with "
                                   "--require-routes, 'routes.layer{i}' of every routed layer)");
  }
  io::TensorArchive archive_;
};

// What the model computed on the reference inputs.
struct Computed {
  std::vector<float> output;
  std::vector<uint64_t> shape;  // the output's logical shape
  Routes routes;
  std::vector<LayerTrace> trace;
  size_t rows = 0;       // rows of routes and traces
  size_t sequences = 0;  // transformer: batch
  size_t length = 0;     // transformer: tokens per sequence
};

// The output shape for the reference's inputs under the model's input rules; a broken rule's
// message names the array.
Result<std::vector<uint64_t>> OutputShape(const Model& model, const Reference& ref, InputKind kind,
                                          const io::NdArray& inputs) {
  auto shape = model.output_shape(kind, inputs.shape);
  if (!shape.ok()) return shape.status().WithContext(ref.path() + ": array 'inputs'");
  return shape;
}

Result<Computed> RunStack(Session& session, const Reference& ref) {
  const Model& model = session.model();
  const io::NdArray* in = ref.Find("inputs");
  if (in == nullptr) return Status::InvalidArgument(ref.path() + " has no array 'inputs'");
  Computed r;
  SPRIG_ASSIGN_OR_RETURN(r.shape, OutputShape(model, ref, InputKind::kRows, *in));
  r.rows = r.shape[0];
  const size_t in_dim = model.config().input_dim;
  SPRIG_ASSIGN_OR_RETURN(std::vector<double> x, ref.Floats("inputs", r.rows * in_dim, 0));
  std::vector<float> xf(x.begin(), x.end());
  r.output.resize(r.rows * r.shape[1]);
  SPRIG_RETURN_IF_ERROR(session.forward(xf.data(), r.rows, r.output.data(), &r.routes, &r.trace)
                            .WithContext(ref.path() + ": array 'inputs'"));
  return r;
}

Result<Computed> RunTokens(Session& session, const Reference& ref) {
  const Model& model = session.model();
  const io::NdArray* in = ref.Find("inputs");
  if (in == nullptr) return Status::InvalidArgument(ref.path() + " has no array 'inputs'");
  if (in->type != io::ElementType::kI32 && in->type != io::ElementType::kI64) {
    return Status::InvalidArgument(ref.path() + ": array 'inputs' is " +
                                   io::ElementTypeName(in->type) + " " + ShapeText(in->shape) +
                                   "; this transformer takes int32/int64 tokens [T] or [B, T]");
  }
  Computed r;
  SPRIG_ASSIGN_OR_RETURN(r.shape, OutputShape(model, ref, InputKind::kTokens, *in));
  r.sequences = r.shape[0];
  r.length = in->shape.back();
  r.rows = r.sequences * r.length;
  SPRIG_ASSIGN_OR_RETURN(std::vector<int64_t> t, ref.Ints("inputs", r.sequences, r.length));
  SPRIG_RETURN_IF_ERROR(model.check_tokens(t.data(), r.sequences, r.length)
                            .WithContext(ref.path() + ": array 'inputs'"));
  const std::vector<int32_t> tokens(t.begin(), t.end());  // in range, so exact
  uint64_t size = 1;
  for (uint64_t d : r.shape) size *= d;
  r.output.resize(size);
  SPRIG_RETURN_IF_ERROR(session.forward_tokens(tokens.data(), r.sequences, r.length,
                                               r.output.data(), &r.routes, &r.trace));
  return r;
}

std::string TensorPrefix(const ModelConfig& c, size_t layer) {
  return (c.family == Family::kStack ? "layers." : "blocks.") + std::to_string(layer) +
         (c.family == Family::kStack ? "." : ".ffn.");
}

// The tensor that makes a routed layer's decisions.
std::string DecidingTensor(const ModelConfig& c, size_t layer) {
  return TensorPrefix(c, layer) +
         (c.layers[layer].kind == LayerKind::kExperts ? "router.weight" : "nodes.weight");
}

// Bounds of the form per_row(row)·max per_node(n) over the deciding rows n that can move a
// row's margin. A tree's deciding node is one of the d ancestors of the reference's leaf (leaf
// and path mode number them alike), so the largest among them bounds it. A router's margin
// p_a - p_b moves by at most (p_a + p_b + |p_a - p_b|)·max_j |Δlogit_j| <= 2·max_j |Δlogit_j|
// (first order, as in sprig_torch's margin_bounds), with max_j over every expert; a logit margin
// l_a - l_b (sigmoid and softmax_chosen scoring) moves by at most the same 2·max_j |Δlogit_j|,
// exactly. A row whose reference route is not a leaf gets no bound (0).
std::vector<double> DecidingBounds(const LayerConfig& layer, const RoutedLayer& r, uint64_t rows,
                                   const std::vector<double>& per_node,
                                   const std::function<double(uint64_t row)>& per_row) {
  std::vector<double> bounds(rows, 0.0);
  if (per_node.empty()) return bounds;
  if (layer.kind == LayerKind::kExperts) {
    const double largest = *std::max_element(per_node.begin(), per_node.end());
    for (uint64_t row = 0; row < rows; ++row) bounds[row] = 2.0 * largest * per_row(row);
    return bounds;
  }
  const uint64_t first_leaf = (uint64_t{1} << layer.depth) - 1;
  for (uint64_t row = 0; row < rows; ++row) {
    const int64_t leaf = r.want[row * r.width];
    if (leaf < 0 || static_cast<uint64_t>(leaf) > first_leaf) continue;  // not a leaf: no bound
    double largest = 0;
    for (uint64_t n = static_cast<uint64_t>(leaf) + first_leaf; n > 0;) {
      n = (n - 1) / 2;  // the parent, down to the root
      largest = std::max(largest, per_node[n]);
    }
    bounds[row] = largest * per_row(row);
  }
  return bounds;
}

// For int8 deciding weights, an absolute bound per row on how far storage rounding moved the
// margin. Every stored weight is within s / 2 of the source, s its row's scale (schema/README.md,
// "int8 storage"), so a logit w·x moves by at most (s / 2)·||x||_1 (DecidingBounds takes the
// largest s that can decide). `x` is the reference's layer input.
std::vector<double> Int8MarginBounds(const Model& model, const RoutedLayer& r,
                                     const std::vector<double>& x, uint64_t rows) {
  const ModelConfig& c = model.config();
  const std::vector<float> scales = internal::RowScales(model, DecidingTensor(c, r.layer));
  if (scales.empty()) return {};
  std::vector<double> half_scales(scales.size());
  for (size_t n = 0; n < scales.size(); ++n) half_scales[n] = static_cast<double>(scales[n]) / 2.0;
  return DecidingBounds(c.layers[r.layer], r, rows, half_scales, [&](uint64_t row) {
    double l1 = 0;
    for (uint64_t j = 0; j < r.in; ++j) l1 += std::fabs(x[row * r.in + j]);
    return l1;
  });
}

// Compute mode "i8" with i8 deciding weights: an absolute bound per row on how far quantising
// the layer's input moved the margin. sprig quantises its own input x (the trace's) with
// s_x = max|x|/127, each element within s_x / 2 of x (round to nearest), so a logit ŵ·x moves
// by at most (s_x / 2)·||ŵ||_1 (Hölder), ŵ the stored row dequantised (DecidingBounds takes
// the largest ||ŵ||_1 that can decide).
std::vector<double> ActivationMarginBounds(const Model& model, const RoutedLayer& r,
                                           const std::vector<float>& x, uint64_t rows) {
  const ModelConfig& c = model.config();
  const std::vector<double> norms = internal::RowAbsSums(model, DecidingTensor(c, r.layer));
  if (norms.empty()) return {};
  return DecidingBounds(c.layers[r.layer], r, rows, norms, [&](uint64_t row) {
    double max_abs = 0;
    for (uint64_t j = 0; j < r.in; ++j) {
      max_abs = std::max(max_abs, std::fabs(static_cast<double>(x[row * r.in + j])));
    }
    // The scale as the kernels round it (a float division), half of it per element.
    return static_cast<double>(static_cast<float>(max_abs) / 127.0f) / 2.0;
  });
}

// "layer 2", "layers 0, 1 and 3"
std::string LayerList(const std::vector<size_t>& layers) {
  std::string s = layers.size() == 1 ? "layer " : "layers ";
  for (size_t i = 0; i < layers.size(); ++i) {
    s += (i == 0 ? "" : i + 1 == layers.size() ? " and " : ", ") + std::to_string(layers[i]);
  }
  return s;
}

// Says what a reference without some optional arrays leaves unchecked: "routing not checked:
// the reference has no routes" when it has none of them, else the layers it lacks.
void NoteNotChecked(const std::vector<size_t>& missing, size_t of, const std::string& what,
                    const std::string& array, VerifyInputs* v) {
  if (missing.empty()) return;
  if (missing.size() == of) {
    v->not_checked.push_back(what + " not checked: the reference has no " + array);
  } else {
    v->not_checked.push_back(what + " of " + LayerList(missing) +
                             " not checked: the reference has no " + array + ".layer{i} for " +
                             (missing.size() == 1 ? "it" : "them"));
  }
}

// Builds the check's inputs: reference arrays next to what sprig computed.
Result<VerifyInputs> Gather(const Model& model, const Reference& ref, Computed& got,
                            bool require_routes, const std::string& compute) {
  const ModelConfig& c = model.config();
  VerifyInputs v;
  v.transformer = c.family == Family::kTransformer;
  v.causal = c.causal;
  v.sequences = got.sequences;
  v.length = got.length;
  v.rows = got.rows;
  v.storage = DType::kF32;
  v.compute = compute;
  const std::vector<TensorDescription> tensors = model.tensor_descriptions();
  for (const TensorDescription& t : tensors) {
    if (StorageRoundoff(t.dtype) > StorageRoundoff(v.storage)) v.storage = t.dtype;
  }
  const std::vector<LayerDescription> layers = model.layer_descriptions();
  const uint64_t out_rows = got.shape[0] * (got.shape.size() == 3 ? got.shape[1] : 1);
  v.output.name = "outputs";
  v.output.rows = out_rows;
  v.output.width = got.shape.back();
  v.output.got.assign(got.output.begin(), got.output.end());
  SPRIG_ASSIGN_OR_RETURN(v.output.want, ref.Floats("outputs", got.output.size(), got.shape.back()));
  v.output_per_sequence = c.family == Family::kTransformer && c.head.kind == HeadKind::kClassifier;
  std::vector<size_t> no_outputs, no_routes, no_margins;
  for (const LayerTrace& t : got.trace) {
    const std::string name = "layer_outputs.layer" + std::to_string(t.layer);
    if (!ref.Has(name)) {
      no_outputs.push_back(t.layer);
      continue;
    }
    Compared layer;
    layer.name = name;
    layer.layer = t.layer;
    layer.rows = got.rows;
    layer.width = t.out;
    layer.got.assign(t.outputs.begin(), t.outputs.end());
    SPRIG_ASSIGN_OR_RETURN(layer.want, ref.Floats(name, t.outputs.size(), t.out));
    v.layers.push_back(std::move(layer));
  }
  for (const LayerRoutes& lr : got.routes.layers) {
    const std::string suffix = ".layer" + std::to_string(lr.layer);
    RoutedLayer r;
    r.layer = lr.layer;
    r.width = lr.width;
    r.units = layers[lr.layer].units;
    r.kind = c.layers[lr.layer].kind;
    r.storage = DType::kF32;
    for (const TensorDescription& t : tensors) {
      if (t.name == DecidingTensor(c, lr.layer)) r.storage = t.dtype;
    }
    r.in = layers[lr.layer].in;
    r.got.assign(lr.choices.begin(), lr.choices.end());
    if (!ref.Has("routes" + suffix)) {
      if (require_routes) {
        return Status::InvalidArgument(ref.path() + " has no array 'routes" + suffix +
                                       "'; --require-routes needs the routes of every routed "
                                       "layer");
      }
      no_routes.push_back(lr.layer);
      continue;
    }
    SPRIG_ASSIGN_OR_RETURN(r.want, ref.Ints("routes" + suffix, got.rows, lr.width));
    if (ref.Has("margins" + suffix)) {
      SPRIG_ASSIGN_OR_RETURN(r.margins, ref.Floats("margins" + suffix, got.rows, 0));
    } else {
      no_margins.push_back(lr.layer);
    }
    // The sensitivity arrays are optional: without them a flip is listed but not explained.
    if (ref.Has("margin_scales" + suffix) && ref.Has("margin_norms" + suffix) &&
        ref.Has("layer_inputs" + suffix)) {
      SPRIG_ASSIGN_OR_RETURN(r.scales, ref.Floats("margin_scales" + suffix, got.rows, 0));
      SPRIG_ASSIGN_OR_RETURN(r.norms, ref.Floats("margin_norms" + suffix, got.rows, 0));
      SPRIG_ASSIGN_OR_RETURN(std::vector<double> want_in,
                             ref.Floats("layer_inputs" + suffix, got.rows * r.in, r.in));
      const LayerTrace& t = got.trace[lr.layer];
      r.input_error.assign(got.rows, 0.0);
      for (size_t row = 0; row < got.rows; ++row) {
        double sum = 0;
        for (size_t j = 0; j < r.in; ++j) {
          const double d = static_cast<double>(t.inputs[row * r.in + j]) - want_in[row * r.in + j];
          sum += d * d;
        }
        r.input_error[row] = std::sqrt(sum);
      }
      if (r.storage == DType::kI8) r.int8_bounds = Int8MarginBounds(model, r, want_in, got.rows);
      if (r.storage == DType::kI8 && compute == "i8") {
        r.activation_bounds = ActivationMarginBounds(model, r, t.inputs, got.rows);
      }
    }
    v.routed.push_back(std::move(r));
  }
  NoteNotChecked(no_outputs, got.trace.size(), "per-layer outputs", "layer_outputs", &v);
  NoteNotChecked(no_routes, got.routes.layers.size(), "routing", "routes", &v);
  if (!no_margins.empty()) {
    v.not_checked.push_back("routing disagreements of " + LayerList(no_margins) +
                            " cannot be explained: the reference has no margins");
  }
  return v;
}

void PrintCompared(const ComparedResult& c) {
  std::printf("  %-22s max abs error %.3g, max rel error %.3g, worst row %lld; %s\n",
              c.name.c_str(), c.max_abs_error, c.max_rel_error, static_cast<long long>(c.worst_row),
              c.ok ? "within tolerance" : "OUTSIDE tolerance");
  if (c.rows_skipped) {
    std::printf("  %-22s (%llu of %llu rows compared; the others follow a flipped route)\n", "",
                static_cast<unsigned long long>(c.rows_compared),
                static_cast<unsigned long long>(c.rows_compared + c.rows_skipped));
  }
}

// "0.0123": a bound as the text report prints it (%.3g)
std::string Figure(double value) {
  char text[32];
  std::snprintf(text, sizeof(text), "%.3g", value);
  return text;
}

std::string RouteText(const std::vector<int64_t>& r) {
  std::string s;
  for (size_t i = 0; i < r.size(); ++i) s += (i ? "," : "") + std::to_string(r[i]);
  return s;
}

void PrintReport(const VerifyArgs& a, const VerifyReport& r) {
  std::printf("verify %s against %s\n", a.model.c_str(), a.reference.c_str());
  std::printf("  storage %s, compute %s: rtol %.3g, atol %.3g%s\n", ToString(r.storage),
              r.compute.c_str(), r.rtol, r.atol_factor,
              r.atol_is_relative ? " x RMS of each compared array" : "");
  PrintCompared(r.output);
  for (const ComparedResult& l : r.layers) PrintCompared(l);
  for (const RoutingResult& l : r.routing) {
    std::printf(
        "  routing layer %zu: %llu of %llu rows agree (%.2f%%), %llu disagree: %llu "
        "explained by rounding, %llu follow an earlier flip, %llu unexplained\n",
        l.layer, static_cast<unsigned long long>(l.agree), static_cast<unsigned long long>(l.rows),
        l.agreement_percent, static_cast<unsigned long long>(l.flips.size()),
        static_cast<unsigned long long>(l.explained), static_cast<unsigned long long>(l.downstream),
        static_cast<unsigned long long>(l.unexplained));
    size_t shown = 0;
    for (const Flip& f : l.flips) {
      if (shown++ == a.show) {
        std::printf("    ... %zu more (all in --json)\n", l.flips.size() - a.show);
        break;
      }
      // In the compute mode "i8" the rounding part names its activation term.
      const std::string activation =
          r.compute == "i8" ? ", of it activations " + Figure(f.bound_activation) : "";
      std::printf(
          "    row %llu: reference %s, sprig %s; margin %.3g, bound %.3g (rounding %.3g%s "
          "+ input error %.3g): %s\n",
          static_cast<unsigned long long>(f.row), RouteText(f.want).c_str(),
          RouteText(f.got).c_str(), f.margin, f.bound_rounding + f.bound_input, f.bound_rounding,
          activation.c_str(), f.bound_input, FlipVerdictText(f.verdict));
    }
  }
  for (const std::string& n : r.not_checked) std::printf("  %s\n", n.c_str());
  if (r.first_divergent_layer >= 0) {
    std::printf("  first layer whose outputs diverge: %d\n", r.first_divergent_layer);
  } else if (!r.output.ok) {
    // Only the model's outputs differ: no compared layer locates where.
    std::printf("  first layer whose outputs diverge: none of those compared; the outputs do\n");
  } else {
    std::printf("  first layer whose outputs diverge: none\n");
  }
  std::printf("%s\n", r.pass ? "PASS" : "FAIL");
}

nlohmann::json ComparedJson(const ComparedResult& c) {
  return {{"name", c.name},
          {"max_abs_error", c.max_abs_error},
          {"max_rel_error", c.max_rel_error},
          {"worst_row", c.worst_row},
          {"atol", c.atol},
          {"rows_compared", c.rows_compared},
          {"rows_skipped", c.rows_skipped},
          {"ok", c.ok}};
}

nlohmann::json ReportJson(const VerifyArgs& a, const VerifyReport& r) {
  nlohmann::json j;
  j["model"] = a.model;
  j["reference"] = a.reference;
  j["storage"] = ToString(r.storage);
  j["compute"] = r.compute;
  j["rtol"] = r.rtol;
  j["atol"] = r.atol_factor;
  j["atol_relative_to_rms"] = r.atol_is_relative;
  j["outputs"] = ComparedJson(r.output);
  j["layer_outputs"] = nlohmann::json::array();
  for (const ComparedResult& l : r.layers) {
    nlohmann::json e = ComparedJson(l);
    e["layer"] = l.layer;
    j["layer_outputs"].push_back(e);
  }
  j["routing"] = nlohmann::json::array();
  for (const RoutingResult& l : r.routing) {
    nlohmann::json flips = nlohmann::json::array();
    for (const Flip& f : l.flips) {
      flips.push_back({{"row", f.row},
                       {"reference", f.want},
                       {"sprig", f.got},
                       {"margin", f.margin},
                       {"bound_rounding", f.bound_rounding},
                       {"bound_activation", f.bound_activation},
                       {"bound_input", f.bound_input},
                       {"verdict", FlipVerdictText(f.verdict)}});
    }
    j["routing"].push_back({{"layer", l.layer},
                            {"storage", ToString(l.storage)},
                            {"rows", l.rows},
                            {"agree", l.agree},
                            {"agreement_percent", l.agreement_percent},
                            {"explained", l.explained},
                            {"downstream", l.downstream},
                            {"unexplained", l.unexplained},
                            {"disagreements", flips}});
  }
  j["first_divergent_layer"] = r.first_divergent_layer >= 0
                                   ? nlohmann::json(r.first_divergent_layer)
                                   : nlohmann::json(nullptr);
  j["not_checked"] = r.not_checked;
  j["pass"] = r.pass;
  return j;
}

int RunVerify(const VerifyArgs& a) {
  auto model = Model::open(a.model);
  if (!model.ok()) return Fail("verify", model.status());
  auto archive = io::TensorArchive::Open(a.reference);
  if (!archive.ok()) return Fail("verify", archive.status());
  const Reference ref(std::move(*archive));
  SessionOptions options;
  options.threads = a.threads;
  options.compute = a.compute;
  auto session = Session::create(*model, options);
  if (!session.ok()) return Fail("verify", session.status());
  auto got = (*model)->config().family == Family::kStack ? RunStack(**session, ref)
                                                         : RunTokens(**session, ref);
  if (!got.ok()) return Fail("verify", got.status());
  auto inputs = Gather(**model, ref, *got, a.require_routes, a.compute);
  if (!inputs.ok()) return Fail("verify", inputs.status());
  Tolerance tol = DefaultTolerance(inputs->storage);
  if (a.rtol >= 0) tol.rtol = a.rtol;
  if (a.atol >= 0) {
    tol.atol = a.atol;
    tol.atol_relative_to_rms = false;
  }
  const VerifyReport report = CheckAgainstReference(*inputs, tol);
  if (a.json) {
    std::printf("%s\n", ReportJson(a, report).dump(2, ' ', false, kReplaceInvalidUtf8).c_str());
  } else {
    PrintReport(a, report);
  }
  return report.pass ? kExitOk : kExitCheckFailed;
}

}  // namespace

Verb AddVerify(CLI::App& app) {
  auto args = std::make_shared<VerifyArgs>();
  CLI::App* c =
      app.add_subcommand("verify",
                         "Check a model against a reference's outputs (and its routes and layer "
                         "outputs when it has them): exit 0 when they agree, 1 when they do not, "
                         "2 when the reference does not fit the model.");
  c->add_option("MODEL", args->model, "the .sprig file")->required();
  c->add_option("REFERENCE", args->reference,
                "reference .npz: inputs and outputs; optionally routes, margins, layer_outputs, "
                "layer_inputs, margin_scales and margin_norms, each .layer{i}")
      ->required();
  c->add_option("--atol", args->atol,
                "absolute tolerance (default: a factor of each array's RMS, by storage type)");
  c->add_option("--rtol", args->rtol, "relative tolerance (default: by storage type)");
  c->add_option("--threads", args->threads, "threads (0: one per CPU)")->capture_default_str();
  AddComputeOption(c, args->compute);
  c->add_option("--show", args->show, "disagreements listed per layer in the text report")
      ->capture_default_str();
  c->add_flag("--json", args->json, "print the report as JSON");
  c->add_flag("--require-routes", args->require_routes,
              "refuse (exit 2) a reference without the routes of every routed layer: for a "
              "release check that must cover routing");
  c->footer(
      "An element passes when |sprig - reference| <= atol + rtol * |reference|. A routing "
      "disagreement is explained when its margin is within what the storage type's rounding, "
      "float32 accumulation, with --compute i8 the int8 rounding of the layer's input, and the "
      "measured error of the layer's input can move it; rows after a flip are not compared.");
  return {c, [args] { return RunVerify(*args); }};
}

}  // namespace sprig::cli
