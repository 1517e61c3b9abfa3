// Identities of the routed layers (docs/model-semantics.md, the published definitions of
// each kind), checked through the public runtime API: configs parsed with ParseConfig, weights
// synthesized and edited in memory, packed with MatchTensors + PackTensors, opened with Model::open
// and run with Session::forward.
//
// The independent reference is RefForward below: a plain double-precision C++ rendering
// of docs/model-semantics.md (nn.Linear layout, the four activations' formulas, hard
// descent with a logit of exactly 0 going left, path-mode accumulation, softmax top-k mixing),
// written from the definitions and sharing no code with the runtime.
//
// Outputs are compared relative to each row's largest magnitude: an entry that nearly cancels
// carries an absolute rounding error of the size of its terms, so an element-wise relative
// bound would be meaningless for it.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <functional>
#include <limits>
#include <map>
#include <memory>
#include <numbers>
#include <numeric>
#include <string>
#include <vector>

#include "base/status_macros.h"
#include "converter/config/config_json.h"
#include "converter/config/tensor_match.h"
#include "converter/pack/packer.h"
#include "converter/synth/synth.h"
#include "io/ndarray.h"
#include "kernels/kernels.h"
#include "model/tensor_spec.h"
#include "sprig/model.h"
#include "sprig/session.h"
#include "support/test_util.h"

namespace sprig {
namespace {

// ---- weights in memory ----

// A validated config and its weights as float32 values by tensor name, editable before packing.
struct Net {
  ModelConfig config;
  std::vector<TensorSpec> specs;  // ExpectedTensors order
  std::map<std::string, std::vector<float>> values;

  std::vector<float>& at(const std::string& name) { return values.at(name); }
  // The tensor's values, or null when the config has no such tensor (a bias-free layer).
  const float* Get(const std::string& name) const {
    auto it = values.find(name);
    return it == values.end() ? nullptr : it->second.data();
  }
};

Result<Net> SynthNet(const std::string& json, uint64_t seed) {
  Net net;
  SPRIG_ASSIGN_OR_RETURN(net.config, convert::ParseConfig(json, "config.json"));
  net.specs = ExpectedTensors(net.config);
  for (const io::NdArray& a : convert::SynthesizeWeights(net.config, seed)) {
    std::vector<float> v(a.elements());
    if (a.nbytes() > 0) std::memcpy(v.data(), a.data, a.nbytes());  // empty: data may be null
    net.values[a.name] = std::move(v);
  }
  return net;
}

// Packs `net` (every weight stored as `dtype`) to dir/name and opens it.
Result<std::shared_ptr<const Model>> Pack(const Net& net, const testing::TempDir& dir,
                                          const std::string& name, DType dtype = DType::kF32) {
  std::vector<io::NdArray> arrays;
  for (const TensorSpec& t : net.specs) {
    const std::vector<float>& v = net.values.at(t.name);
    std::vector<uint8_t> bytes(v.size() * sizeof(float));
    if (!bytes.empty()) std::memcpy(bytes.data(), v.data(), bytes.size());
    arrays.push_back(io::NdArray::Owned(t.name, io::ElementType::kF32, t.shape, std::move(bytes)));
  }
  SPRIG_ASSIGN_OR_RETURN(auto matched, convert::MatchTensors(net.config, arrays, name, {}));
  const std::string path = dir.File(name);
  convert::PackOptions options;
  options.storage = {dtype, dtype, dtype};
  SPRIG_RETURN_IF_ERROR(convert::PackTensors(net.config, matched, path, options).status());
  return Model::open(path);
}

std::vector<float> RandomRows(size_t rows, size_t in, uint64_t seed) {
  convert::Random rng(seed);
  std::vector<float> x(rows * in);
  for (float& v : x) v = rng.Normal();
  return x;
}

// One forward call of all `rows` in a fresh session.
Result<std::vector<float>> Forward(const std::shared_ptr<const Model>& model,
                                   const std::vector<float>& x, size_t rows,
                                   const SessionOptions& options = {}, Routes* routes = nullptr) {
  SPRIG_ASSIGN_OR_RETURN(auto session, Session::create(model, options));
  std::vector<float> y(rows * model->config().output_dim());
  SPRIG_RETURN_IF_ERROR(session->forward(x.data(), rows, y.data(), routes));
  return y;
}

// Runs the rows of `x` through one session in consecutive calls of the given sizes, gathering
// outputs and routes as if they came from one call.
Status ForwardSplit(Session& session, const std::vector<float>& x, const std::vector<size_t>& sizes,
                    std::vector<float>* y, Routes* routes) {
  const ModelConfig& c = session.model().config();
  const size_t in = c.input_dim, out = c.output_dim();
  const size_t rows = x.size() / in;
  y->assign(rows * out, 0.0f);
  routes->layers.clear();
  size_t r0 = 0;
  for (size_t n : sizes) {
    Routes part;
    SPRIG_RETURN_IF_ERROR(session.forward(x.data() + r0 * in, n, y->data() + r0 * out, &part));
    if (routes->layers.empty()) {
      *routes = std::move(part);
    } else {
      for (size_t l = 0; l < part.layers.size(); ++l) {
        auto& dst = routes->layers[l].choices;
        dst.insert(dst.end(), part.layers[l].choices.begin(), part.layers[l].choices.end());
      }
    }
    r0 += n;
  }
  if (r0 != rows) return Status::InvalidArgument("split sizes do not add up to the rows");
  return Status::Ok();
}

// Every row as its own single-row call.
Status ForwardRowByRow(Session& session, const std::vector<float>& x, std::vector<float>* y,
                       Routes* routes) {
  const size_t rows = x.size() / session.model().config().input_dim;
  return ForwardSplit(session, x, std::vector<size_t>(rows, 1), y, routes);
}

// |a[r, j] − b[r, j]| ≤ rtol · max_j |b[r, j]| for every row r (skipping rows in `skip`).
template <typename B>
::testing::AssertionResult RowsClose(const std::vector<float>& a, const std::vector<B>& b,
                                     size_t width, double rtol,
                                     const std::vector<bool>& skip = {}) {
  if (a.size() != b.size()) {
    return ::testing::AssertionFailure() << "sizes differ: " << a.size() << " vs " << b.size();
  }
  for (size_t r = 0; r * width < a.size(); ++r) {
    if (!skip.empty() && skip[r]) continue;
    double scale = 0;
    for (size_t j = 0; j < width; ++j) scale = std::max(scale, std::fabs(double(b[r * width + j])));
    for (size_t j = 0; j < width; ++j) {
      const double d = std::fabs(double(a[r * width + j]) - double(b[r * width + j]));
      if (!(d <= rtol * scale)) {
        return ::testing::AssertionFailure()
               << "row " << r << ", column " << j << ": " << a[r * width + j] << " vs "
               << b[r * width + j] << " (difference " << d << ", allowed " << rtol * scale << ")";
      }
    }
  }
  return ::testing::AssertionSuccess();
}

double MaxAbs(const std::vector<float>& v) {
  double m = 0;
  for (float f : v) m = std::max(m, std::fabs(double(f)));
  return m;
}

::testing::AssertionResult RoutesEqual(const Routes& a, const Routes& b) {
  if (a.layers.size() != b.layers.size()) {
    return ::testing::AssertionFailure()
           << a.layers.size() << " vs " << b.layers.size() << " routed layers";
  }
  for (size_t l = 0; l < a.layers.size(); ++l) {
    const LayerRoutes &x = a.layers[l], &y = b.layers[l];
    if (x.layer != y.layer || x.width != y.width) {
      return ::testing::AssertionFailure() << "routed layer " << l << " differs in index/width";
    }
    for (size_t i = 0; i < std::max(x.choices.size(), y.choices.size()); ++i) {
      if (i >= x.choices.size() || i >= y.choices.size() || x.choices[i] != y.choices[i]) {
        return ::testing::AssertionFailure()
               << "layer " << x.layer << ": row " << i / x.width << " differs";
      }
    }
  }
  return ::testing::AssertionSuccess();
}

// ---- the independent double-precision reference (docs/model-semantics.md) ----

double Act(Activation a, double v) {
  switch (a) {
    case Activation::kRelu:
      return v > 0 ? v : 0;
    // gelu, exact erf form: 0.5·x·(1 + erf(x/√2)).
    case Activation::kGelu:
      return 0.5 * v * (1 + std::erf(v / std::sqrt(2.0)));
    // gelu_tanh: 0.5·x·(1 + tanh(√(2/π)·(x + 0.044715·x³))).
    case Activation::kGeluTanh:
      return 0.5 * v *
             (1 + std::tanh(std::sqrt(2.0 / std::numbers::pi) * (v + 0.044715 * v * v * v)));
    // silu: x·sigmoid(x).
    case Activation::kSilu:
      return v / (1 + std::exp(-v));
  }
  return v;
}

// w[rows, in] (row-major) · x + bias (null: zero).
std::vector<double> Linear(const float* w, const float* bias, size_t rows, size_t in,
                           const std::vector<double>& x) {
  std::vector<double> y(rows);
  for (size_t o = 0; o < rows; ++o) {
    double s = bias ? bias[o] : 0.0;
    for (size_t i = 0; i < in; ++i) s += double(w[o * in + i]) * x[i];
    y[o] = s;
  }
  return y;
}

// The MLP of unit `unit` of `group` ("leaves." or "experts."), or the dense MLP (group "").
std::vector<double> RefMlp(const Net& net, const std::string& prefix, const std::string& group,
                           const LayerConfig& c, size_t width, size_t unit,
                           const std::vector<double>& x) {
  const std::string p = prefix + group;
  auto unit_ptr = [&](const std::string& name, size_t per_unit) -> const float* {
    const float* base = net.Get(p + name);
    return base ? base + unit * per_unit : nullptr;
  };
  std::vector<double> h =
      Linear(unit_ptr("fc1.weight", width * c.in), unit_ptr("fc1.bias", width), width, c.in, x);
  if (c.gated) {
    const std::vector<double> g =
        Linear(unit_ptr("gate.weight", width * c.in), unit_ptr("gate.bias", width), width, c.in, x);
    for (size_t i = 0; i < width; ++i) h[i] = Act(c.activation, g[i]) * h[i];
  } else {
    for (double& v : h) v = Act(c.activation, v);
  }
  return Linear(unit_ptr("fc2.weight", c.out * width), unit_ptr("fc2.bias", c.out), c.out, width,
                h);
}

struct RefLayerResult {
  std::vector<double> y;
  std::vector<int32_t> route;  // empty for dense
  // How far the routing decisions were from flipping: the smallest |node logit| on the path
  // (trees) or the smallest gap between consecutive sorted router logits among the top k + 1
  // (experts). Infinity for a dense layer.
  double margin = std::numeric_limits<double>::infinity();
  std::vector<double> probabilities;  // experts: softmax(router x)
};

RefLayerResult RefLayer(const Net& net, size_t index, const std::vector<double>& x) {
  const LayerConfig& c = net.config.layers[index];
  const std::string prefix = LayerPrefix(net.config, index);
  RefLayerResult r;
  auto logit = [&](size_t node) {
    const float* w = net.Get(prefix + "nodes.weight") + node * c.in;
    const float* b = net.Get(prefix + "nodes.bias");
    double s = b ? b[node] : 0.0;
    for (size_t i = 0; i < c.in; ++i) s += double(w[i]) * x[i];
    return s;
  };
  switch (c.kind) {
    case LayerKind::kDense:
      r.y = RefMlp(net, prefix, "", c, c.width, 0, x);
      break;
    case LayerKind::kTree: {
      const size_t first_leaf = (size_t{1} << c.depth) - 1;
      size_t n = 0;
      if (c.mode == TreeMode::kLeaf) {
        for (uint32_t level = 0; level < c.depth; ++level) {
          const double a = logit(n);
          r.margin = std::min(r.margin, std::fabs(a));
          n = 2 * n + 1 + (a > 0 ? 1 : 0);  // a logit of exactly 0 goes left
        }
        r.route = {int32_t(n - first_leaf)};
        r.y = RefMlp(net, prefix, "leaves.", c, c.leaf_width, n - first_leaf, x);
      } else {
        const float* out_bias = net.Get(prefix + "out_bias");
        const float* rows = net.Get(prefix + "nodes.out");
        r.y.assign(c.out, 0.0);
        for (size_t o = 0; o < c.out; ++o) r.y[o] = out_bias ? out_bias[o] : 0.0;
        for (uint32_t level = 0; level <= c.depth; ++level) {
          const double a = logit(n);
          const double act = Act(c.activation, a);
          for (size_t o = 0; o < c.out; ++o) r.y[o] += act * rows[n * c.out + o];
          if (level < c.depth) {
            r.margin = std::min(r.margin, std::fabs(a));
            n = 2 * n + 1 + (a > 0 ? 1 : 0);
          }
        }
        r.route = {int32_t(n - first_leaf)};
      }
      break;
    }
    case LayerKind::kExperts: {
      const size_t e = c.experts, k = c.top_k;
      const std::vector<double> l =
          Linear(net.Get(prefix + "router.weight"), net.Get(prefix + "router.bias"), e, c.in, x);
      const double mx = *std::max_element(l.begin(), l.end());
      std::vector<double> p(e);
      double sum = 0;
      for (size_t j = 0; j < e; ++j) sum += p[j] = std::exp(l[j] - mx);
      for (double& v : p) v /= sum;
      std::vector<int32_t> ids(e);
      std::iota(ids.begin(), ids.end(), 0);
      std::stable_sort(ids.begin(), ids.end(), [&](int32_t a, int32_t b) { return p[a] > p[b]; });
      for (size_t j = 0; j < k && j + 1 < e; ++j) {
        r.margin = std::min(r.margin, l[ids[j]] - l[ids[j + 1]]);
      }
      double chosen = 0;
      for (size_t j = 0; j < k; ++j) chosen += p[ids[j]];
      r.y.assign(c.out, 0.0);
      for (size_t j = 0; j < k; ++j) {
        const double w = c.renormalize ? p[ids[j]] / chosen : p[ids[j]];
        const std::vector<double> ey = RefMlp(net, prefix, "experts.", c, c.width, ids[j], x);
        for (size_t o = 0; o < c.out; ++o) r.y[o] += w * ey[o];
        r.route.push_back(ids[j]);
      }
      r.probabilities = p;
      break;
    }
  }
  return r;
}

struct RefOutput {
  std::vector<double> y;                    // [rows, out]
  std::vector<std::vector<int32_t>> route;  // per routed layer: [rows, width]
  std::vector<double> margin;               // per row: the smallest margin of any routed layer
  std::vector<std::vector<double>> last_probabilities;  // per row, of the last experts layer
};

RefOutput RefForward(const Net& net, const std::vector<float>& x) {
  const size_t in = net.config.input_dim, rows = x.size() / in;
  RefOutput out;
  size_t routed = 0;
  for (const LayerConfig& c : net.config.layers) routed += c.kind != LayerKind::kDense;
  out.route.resize(routed);
  for (size_t r = 0; r < rows; ++r) {
    std::vector<double> v(x.begin() + r * in, x.begin() + (r + 1) * in);
    double margin = std::numeric_limits<double>::infinity();
    size_t slot = 0;
    std::vector<double> probabilities;
    for (size_t i = 0; i < net.config.layers.size(); ++i) {
      RefLayerResult lr = RefLayer(net, i, v);
      margin = std::min(margin, lr.margin);
      if (!lr.route.empty()) {
        out.route[slot].insert(out.route[slot].end(), lr.route.begin(), lr.route.end());
        ++slot;
      }
      if (!lr.probabilities.empty()) probabilities = lr.probabilities;
      v = std::move(lr.y);
    }
    out.y.insert(out.y.end(), v.begin(), v.end());
    out.margin.push_back(margin);
    out.last_probabilities.push_back(std::move(probabilities));
  }
  return out;
}

// ---- leaf tree of depth 0 == dense MLP ----

struct DenseCase {
  bool gated, bias;
  const char* activation;
};

class RuntimeIdentityLeafDepthZero : public ::testing::TestWithParam<DenseCase> {};

// docs/model-semantics.md: "d = 0 is one leaf, equal to a dense MLP". The same
// fc1/fc2(/gate) weights are packed once as a depth-0 tree and once as a dense layer.
TEST_P(RuntimeIdentityLeafDepthZero, EqualsDenseMlpOfSameWidth) {
  const DenseCase p = GetParam();
  const std::string common = std::string(R"("activation":")") + p.activation + R"(","gated":)" +
                             (p.gated ? "true" : "false") + R"(,"bias":)" +
                             (p.bias ? "true" : "false") + R"(,"out":11)";
  auto dense = SynthNet(R"({"family":"stack","input_dim":19,"layers":[{"kind":"dense",)"
                        R"("width":24,)" +
                            common + "}]}",
                        3);
  ASSERT_TRUE(dense.ok()) << dense.status().message();
  auto tree = SynthNet(R"({"family":"stack","input_dim":19,"layers":[{"kind":"tree",)"
                       R"("mode":"leaf","depth":0,"leaf_width":24,)" +
                           common + "}]}",
                       4);
  ASSERT_TRUE(tree.ok()) << tree.status().message();
  for (const char* part :
       {"fc1.weight", "fc1.bias", "gate.weight", "gate.bias", "fc2.weight", "fc2.bias"}) {
    const std::string d = std::string("layers.0.") + part;
    const std::string t = std::string("layers.0.leaves.") + part;
    ASSERT_EQ(dense->Get(d) != nullptr, tree->Get(t) != nullptr) << part;
    if (dense->Get(d) == nullptr) continue;
    ASSERT_EQ(dense->at(d).size(), tree->at(t).size()) << part;
    tree->at(t) = dense->at(d);  // [W, in] and [1, W, in] hold the same values in C order
  }
  testing::TempDir dir;
  auto dense_model = Pack(*dense, dir, "dense.sprig");
  ASSERT_TRUE(dense_model.ok()) << dense_model.status().message();
  auto tree_model = Pack(*tree, dir, "tree.sprig");
  ASSERT_TRUE(tree_model.ok()) << tree_model.status().message();

  const size_t rows = 33;
  const std::vector<float> x = RandomRows(rows, 19, 5);
  // A batched call, then every row alone (the single-row kernels).
  auto yd = Forward(*dense_model, x, rows);
  auto yt = Forward(*tree_model, x, rows);
  ASSERT_TRUE(yd.ok() && yt.ok());
  EXPECT_GT(MaxAbs(*yd), 1e-2) << "degenerate outputs";
  EXPECT_TRUE(RowsClose(*yt, *yd, 11, 1e-6));
  for (size_t r = 0; r < rows; ++r) {
    const std::vector<float> row(x.begin() + r * 19, x.begin() + (r + 1) * 19);
    Routes routes;
    auto d1 = Forward(*dense_model, row, 1);
    auto t1 = Forward(*tree_model, row, 1, {}, &routes);
    ASSERT_TRUE(d1.ok() && t1.ok());
    EXPECT_TRUE(RowsClose(*t1, *d1, 11, 1e-6)) << "row " << r << " alone";
    ASSERT_EQ(routes.layers.size(), 1u);
    EXPECT_EQ(routes.layers[0].choices, std::vector<int32_t>{0});
  }
}

INSTANTIATE_TEST_SUITE_P(GatedAndBias, RuntimeIdentityLeafDepthZero,
                         ::testing::Values(DenseCase{false, true, "gelu"},
                                           DenseCase{false, false, "relu"},
                                           DenseCase{true, true, "silu"},
                                           DenseCase{true, false, "gelu_tanh"}),
                         [](const auto& info) {
                           return std::string(info.param.gated ? "Gated" : "Ungated") +
                                  (info.param.bias ? "Bias" : "NoBias");
                         });

// ---- zero routing nodes ----

void ZeroNodes(Net& net, size_t layer) {
  const std::string prefix = LayerPrefix(net.config, layer);
  for (const char* name : {"nodes.weight", "nodes.bias"}) {
    auto it = net.values.find(prefix + name);
    if (it != net.values.end()) std::fill(it->second.begin(), it->second.end(), 0.0f);
  }
}

class RuntimeIdentityZeroLeafTree : public ::testing::TestWithParam<bool> {};

// docs/model-semantics.md: "A logit of exactly 0 goes left". With every node weight and
// bias zero each logit is exactly 0, so every row descends left to leaf 0 and the output is leaf
// 0's MLP (checked against leaf 0's weights packed as a dense layer).
TEST_P(RuntimeIdentityZeroLeafTree, EveryRowTakesLeafZero) {
  const bool bias = GetParam();
  const std::string b = bias ? "true" : "false";
  auto tree = SynthNet(R"({"family":"stack","input_dim":10,"layers":[{"kind":"tree","mode":)"
                       R"("leaf","depth":3,"leaf_width":5,"activation":"gelu","bias":)" +
                           b + R"(,"out":4}]})",
                       8);
  ASSERT_TRUE(tree.ok()) << tree.status().message();
  ZeroNodes(*tree, 0);
  auto dense = SynthNet(R"({"family":"stack","input_dim":10,"layers":[{"kind":"dense",)"
                        R"("width":5,"activation":"gelu","bias":)" +
                            b + R"(,"out":4}]})",
                        9);
  ASSERT_TRUE(dense.ok());
  for (const char* part : {"fc1.weight", "fc1.bias", "fc2.weight", "fc2.bias"}) {
    const std::string d = std::string("layers.0.") + part;
    if (dense->Get(d) == nullptr) continue;
    const std::vector<float>& all = tree->at(std::string("layers.0.leaves.") + part);
    const size_t per_leaf = all.size() / 8;
    dense->at(d).assign(all.begin(), all.begin() + per_leaf);  // leaf 0
  }
  testing::TempDir dir;
  auto tree_model = Pack(*tree, dir, "tree.sprig");
  ASSERT_TRUE(tree_model.ok()) << tree_model.status().message();
  auto dense_model = Pack(*dense, dir, "dense.sprig");
  ASSERT_TRUE(dense_model.ok()) << dense_model.status().message();
  for (size_t rows : {size_t{1}, size_t{50}}) {
    const std::vector<float> x = RandomRows(rows, 10, 100 + rows);
    Routes routes;
    auto y = Forward(*tree_model, x, rows, {}, &routes);
    ASSERT_TRUE(y.ok()) << y.status().message();
    ASSERT_EQ(routes.layers.size(), 1u);
    EXPECT_EQ(routes.layers[0].layer, 0u);
    EXPECT_EQ(routes.layers[0].width, 1u);
    EXPECT_EQ(routes.layers[0].choices, std::vector<int32_t>(rows, 0)) << "batch " << rows;
    auto yd = Forward(*dense_model, x, rows);
    ASSERT_TRUE(yd.ok());
    EXPECT_TRUE(RowsClose(*y, *yd, 4, 1e-6)) << "batch " << rows;
  }
}

INSTANTIATE_TEST_SUITE_P(WithAndWithoutBias, RuntimeIdentityZeroLeafTree, ::testing::Bool(),
                         [](const auto& info) { return info.param ? "Bias" : "NoBias"; });

struct PathCase {
  const char* activation;
  bool bias;
};

class RuntimeIdentityZeroPathTree : public ::testing::TestWithParam<PathCase> {};

// docs/model-semantics.md, path mode: y = out_bias + Σ_levels act(a)·out[n]. With zero
// node weights and biases every a is exactly 0, so every row takes the leftmost path (route 0), and
// since act(0) = 0 for relu, gelu, gelu_tanh and silu, the output is out_bias (0 without biases).
TEST_P(RuntimeIdentityZeroPathTree, LeftmostPathAndOutBias) {
  const PathCase p = GetParam();
  auto net =
      SynthNet(std::string(R"({"family":"stack","input_dim":9,"layers":[{"kind":"tree",)"
                           R"("mode":"path","depth":4,"activation":")") +
                   p.activation + R"(","bias":)" + (p.bias ? "true" : "false") + R"(,"out":6}]})",
               21);
  ASSERT_TRUE(net.ok()) << net.status().message();
  ZeroNodes(*net, 0);
  ASSERT_GT(MaxAbs(net->at("layers.0.nodes.out")), 0.1);  // the rows would show if added
  std::vector<float> out_bias(6, 0.0f);
  if (p.bias) out_bias = net->at("layers.0.out_bias");
  testing::TempDir dir;
  auto model = Pack(*net, dir, "path.sprig");
  ASSERT_TRUE(model.ok()) << model.status().message();
  for (size_t rows : {size_t{1}, size_t{50}}) {
    const std::vector<float> x = RandomRows(rows, 9, 200 + rows);
    Routes routes;
    auto y = Forward(*model, x, rows, {}, &routes);
    ASSERT_TRUE(y.ok()) << y.status().message();
    ASSERT_EQ(routes.layers.size(), 1u);
    EXPECT_EQ(routes.layers[0].choices, std::vector<int32_t>(rows, 0)) << "batch " << rows;
    for (size_t r = 0; r < rows; ++r) {
      for (size_t o = 0; o < 6; ++o) {
        // act(0)·out[n] is ±0, and adding ±0 leaves y unchanged: the equality is exact.
        EXPECT_EQ((*y)[r * 6 + o], out_bias[o]) << "batch " << rows << ", row " << r;
      }
    }
  }
}

INSTANTIATE_TEST_SUITE_P(Activations, RuntimeIdentityZeroPathTree,
                         ::testing::Values(PathCase{"relu", true}, PathCase{"gelu", true},
                                           PathCase{"gelu_tanh", true}, PathCase{"silu", true},
                                           PathCase{"gelu", false}),
                         [](const auto& info) {
                           return std::string(info.param.activation) +
                                  (info.param.bias ? "_bias" : "_nobias");
                         });

// ---- experts ----

struct ExpertsCase {
  bool gated;
  const char* activation;
};

class RuntimeIdentityExpertsFullMixture : public ::testing::TestWithParam<ExpertsCase> {};

// docs/model-semantics.md, experts with top_k = E and renormalize: Σ_S p = 1, so the
// output is the full softmax mixture Σ_j softmax(router x)_j · expert_j(x), computed here by the
// reference.
TEST_P(RuntimeIdentityExpertsFullMixture, EqualsSoftmaxMixtureOfAllExperts) {
  const ExpertsCase p = GetParam();
  auto net =
      SynthNet(std::string(R"({"family":"stack","input_dim":12,"layers":[{"kind":)"
                           R"("experts","experts":5,"top_k":5,"width":6,"activation":")") +
                   p.activation + R"(","gated":)" + (p.gated ? "true" : "false") + R"(,"out":7}]})",
               31);
  ASSERT_TRUE(net.ok()) << net.status().message();
  testing::TempDir dir;
  auto model = Pack(*net, dir, "experts.sprig");
  ASSERT_TRUE(model.ok()) << model.status().message();
  const size_t rows = 30;
  const std::vector<float> x = RandomRows(rows, 12, 32);
  const RefOutput ref = RefForward(*net, x);
  Routes batched, single;
  auto y = Forward(*model, x, rows, {}, &batched);
  ASSERT_TRUE(y.ok()) << y.status().message();
  EXPECT_GT(MaxAbs(*y), 1e-2) << "degenerate outputs";
  EXPECT_TRUE(RowsClose(*y, ref.y, 7, 1e-5)) << "batch of " << rows;
  auto session = Session::create(*model);
  ASSERT_TRUE(session.ok());
  std::vector<float> y1;
  ASSERT_TRUE(ForwardRowByRow(**session, x, &y1, &single).ok());
  EXPECT_TRUE(RowsClose(y1, ref.y, 7, 1e-5)) << "single rows";
  // Routes list every expert by descending probability; only rows whose sorted router logits
  // are all more than 1e-4 apart are compared (closer ones may swap by rounding).
  for (const Routes* routes : {&batched, &single}) {
    ASSERT_EQ(routes->layers.size(), 1u);
    ASSERT_EQ(routes->layers[0].width, 5u);
    for (size_t r = 0; r < rows; ++r) {
      if (ref.margin[r] < 1e-4) continue;
      const std::vector<int32_t> got(routes->layers[0].choices.begin() + r * 5,
                                     routes->layers[0].choices.begin() + (r + 1) * 5);
      const std::vector<int32_t> want(ref.route[0].begin() + r * 5,
                                      ref.route[0].begin() + (r + 1) * 5);
      EXPECT_EQ(got, want) << "row " << r;
    }
  }
}

INSTANTIATE_TEST_SUITE_P(Kinds, RuntimeIdentityExpertsFullMixture,
                         ::testing::Values(ExpertsCase{false, "gelu"}, ExpertsCase{true, "silu"},
                                           ExpertsCase{false, "relu"},
                                           ExpertsCase{true, "gelu_tanh"}),
                         [](const auto& info) {
                           return std::string(info.param.gated ? "Gated_" : "Ungated_") +
                                  info.param.activation;
                         });

// docs/model-semantics.md: with renormalize false the chosen expert is weighted by p_j
// itself, so with top_k = 1 the output is p_max · expert_max(x), while renormalize true gives
// expert_max(x).
TEST(RuntimeIdentityExpertsNoRenormalize, TopOneScaledByItsProbability) {
  const char* kConfig = R"({"family":"stack","input_dim":14,"layers":[{"kind":"experts",)"
                        R"("experts":4,"top_k":1,"width":8,"activation":"silu","gated":true,)"
                        R"("renormalize":%s,"out":6}]})";
  char text[512];
  std::snprintf(text, sizeof(text), kConfig, "false");
  auto raw = SynthNet(text, 41);
  ASSERT_TRUE(raw.ok()) << raw.status().message();
  std::snprintf(text, sizeof(text), kConfig, "true");
  auto renorm = SynthNet(text, 41);
  ASSERT_TRUE(renorm.ok()) << renorm.status().message();
  ASSERT_EQ(raw->values, renorm->values);  // same seed, same tensors: same weights
  testing::TempDir dir;
  auto raw_model = Pack(*raw, dir, "raw.sprig");
  ASSERT_TRUE(raw_model.ok()) << raw_model.status().message();
  auto renorm_model = Pack(*renorm, dir, "renorm.sprig");
  ASSERT_TRUE(renorm_model.ok()) << renorm_model.status().message();

  const size_t rows = 40;
  const std::vector<float> x = RandomRows(rows, 14, 42);
  const RefOutput ref = RefForward(*raw, x);
  for (size_t batch : {size_t{1}, rows}) {
    std::vector<float> y_raw, y_renorm;
    Routes r_raw, r_renorm;
    auto s1 = Session::create(*raw_model);
    auto s2 = Session::create(*renorm_model);
    ASSERT_TRUE(s1.ok() && s2.ok());
    const std::vector<size_t> split(rows / batch, batch);
    ASSERT_TRUE(ForwardSplit(**s1, x, split, &y_raw, &r_raw).ok());
    ASSERT_TRUE(ForwardSplit(**s2, x, split, &y_renorm, &r_renorm).ok());
    EXPECT_TRUE(RowsClose(y_raw, ref.y, 6, 1e-5)) << "batch " << batch;
    EXPECT_TRUE(RoutesEqual(r_raw, r_renorm)) << "batch " << batch;
    std::vector<double> scaled(y_renorm.size());
    for (size_t r = 0; r < rows; ++r) {
      const std::vector<double>& prob = ref.last_probabilities[r];
      const double p_max = *std::max_element(prob.begin(), prob.end());
      ASSERT_LT(p_max, 1.0 - 1e-3) << "row " << r << " would not show the scaling";
      if (ref.margin[r] >= 1e-4) {
        EXPECT_EQ(r_raw.layers[0].choices[r], ref.route[0][r]) << "row " << r;
      }
      for (size_t o = 0; o < 6; ++o) scaled[r * 6 + o] = p_max * y_renorm[r * 6 + o];
    }
    EXPECT_TRUE(RowsClose(y_raw, scaled, 6, 1e-5)) << "batch " << batch;
  }
}

// ---- a stack with every layer kind: threads, splits and kernel paths ----

constexpr const char* kEveryKind = R"({"family":"stack","input_dim":21,"layers":[
  {"kind":"dense","width":24,"activation":"gelu","out":20},
  {"kind":"tree","mode":"leaf","depth":3,"leaf_width":6,"activation":"relu","gated":true,"out":20},
  {"kind":"tree","mode":"path","depth":5,"activation":"gelu_tanh","out":19},
  {"kind":"experts","experts":4,"top_k":2,"width":8,"activation":"silu","gated":true,"out":20},
  {"kind":"tree","mode":"leaf","depth":0,"leaf_width":4,"activation":"silu","out":20},
  {"kind":"tree","mode":"leaf","depth":2,"leaf_width":5,"activation":"gelu","bias":false,"out":17},
  {"kind":"experts","experts":3,"top_k":1,"width":6,"renormalize":false,"bias":false,"out":9},
  {"kind":"dense","width":8,"activation":"relu","gated":true,"bias":false,"out":7}]})";

class RuntimeIdentityEveryKind : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = new testing::TempDir;
    auto net = SynthNet(kEveryKind, 51);
    ASSERT_TRUE(net.ok()) << net.status().message();
    net_ = new Net(std::move(*net));
    auto model = Pack(*net_, *dir_, "every-kind.sprig");
    ASSERT_TRUE(model.ok()) << model.status().message();
    model_ = new std::shared_ptr<const Model>(*model);
  }
  static void TearDownTestSuite() {
    delete model_;
    delete net_;
    delete dir_;
  }
  void SetUp() override { ASSERT_NE(model_, nullptr); }

  static std::unique_ptr<Session> NewSession(size_t threads, const std::string& path = "") {
    SessionOptions o;
    o.threads = threads;
    o.kernel_path = path;
    auto s = Session::create(*model_, o);
    EXPECT_TRUE(s.ok()) << s.status().message();
    return s.ok() ? std::move(*s) : nullptr;
  }

  static constexpr size_t kRows = 40;
  static constexpr size_t kIn = 21;
  static constexpr size_t kOut = 7;
  static inline testing::TempDir* dir_ = nullptr;
  static inline Net* net_ = nullptr;
  static inline std::shared_ptr<const Model>* model_ = nullptr;
};

// Session promises "Results are identical for every thread count", and a row's result must
// not depend on how its batch was split into calls (layers/mlp.h). Checked on every kernel
// path this CPU offers, since each has its own register blocking. Batched calls (every part of
// size ≥ 2, so every call uses the matrix kernels) are compared with one 40-row call on one
// thread; single-row calls use the vector kernels, which round differently, so they are
// compared only with single-row calls.
TEST_F(RuntimeIdentityEveryKind, BitIdenticalAcrossThreadsAndBatchSplits) {
  const std::vector<float> x = RandomRows(kRows, kIn, 52);
  const std::vector<std::vector<size_t>> splits = {
      {kRows},           {16, 24}, {24, 16},
      {17, 23},          {2, 38},  {38, 2},
      {5, 7, 11, 13, 4}, {20, 20}, {2, 2, 2, 2, 2, 2, 2, 2, 2, 2, 2, 2, 2, 2, 2, 2, 2, 2, 2, 2}};
  for (kernels::KernelPath path : kernels::AvailablePaths()) {
    const std::string name = kernels::ToString(path);
    auto one = NewSession(1, name);
    auto two = NewSession(2, name);
    ASSERT_TRUE(one && two) << name;
    std::vector<float> base;
    Routes base_routes;
    ASSERT_TRUE(ForwardSplit(*one, x, {kRows}, &base, &base_routes).ok());
    ASSERT_EQ(base_routes.layers.size(), 6u);
    const std::vector<size_t> routed = {1, 2, 3, 4, 5, 6};
    for (size_t l = 0; l < routed.size(); ++l) EXPECT_EQ(base_routes.layers[l].layer, routed[l]);
    // Every (threads, split) whose outputs or routes differ from the base, in one message.
    std::string output_mismatches, route_mismatches;
    for (Session* s : {one.get(), two.get()}) {
      for (const auto& split : splits) {
        std::vector<float> y;
        Routes routes;
        ASSERT_TRUE(ForwardSplit(*s, x, split, &y, &routes).ok());
        std::string what = "\n  ";
        what.append(std::to_string(s->threads())).append(" thread(s), calls of");
        for (size_t n : split) what.append(" ").append(std::to_string(n));
        if (!testing::BitEqual(y, base)) output_mismatches += what;
        if (!RoutesEqual(routes, base_routes)) route_mismatches += what;
      }
    }
    EXPECT_TRUE(output_mismatches.empty())
        << name << ": outputs differ from one 40-row call on one thread for:" << output_mismatches;
    EXPECT_TRUE(route_mismatches.empty())
        << name << ": routes differ from one 40-row call on one thread for:" << route_mismatches;
    std::vector<float> y1, y2;
    Routes r1, r2;
    ASSERT_TRUE(ForwardRowByRow(*one, x, &y1, &r1).ok());
    ASSERT_TRUE(ForwardRowByRow(*two, x, &y2, &r2).ok());
    EXPECT_TRUE(testing::BitEqual(y1, y2)) << name << ": single-row calls, 1 vs 2 threads";
    EXPECT_TRUE(RoutesEqual(r1, r2)) << name << ": single-row calls, 1 vs 2 threads";
  }
}

// Every batch size 2..40 with two threads equals the same rows inside the one 40-row call of a
// single thread, on every kernel path.
TEST_F(RuntimeIdentityEveryKind, EveryBatchSizeMatchesTheWholeBatch) {
  const std::vector<float> x = RandomRows(kRows, kIn, 53);
  for (kernels::KernelPath path : kernels::AvailablePaths()) {
    const std::string name = kernels::ToString(path);
    auto one = NewSession(1, name);
    auto two = NewSession(2, name);
    ASSERT_TRUE(one && two) << name;
    std::vector<float> base;
    Routes base_routes;
    ASSERT_TRUE(ForwardSplit(*one, x, {kRows}, &base, &base_routes).ok());
    std::string output_mismatches, route_mismatches;
    for (size_t n = 2; n <= kRows; ++n) {
      const std::vector<float> part(x.begin(), x.begin() + n * kIn);
      std::vector<float> y;
      Routes routes;
      ASSERT_TRUE(ForwardSplit(*two, part, {n}, &y, &routes).ok());
      const std::vector<float> want(base.begin(), base.begin() + n * kOut);
      if (!testing::BitEqual(y, want)) output_mismatches.append(" ").append(std::to_string(n));
      for (size_t l = 0; l < routes.layers.size(); ++l) {
        const auto& b = base_routes.layers[l];
        const std::vector<int32_t> w(b.choices.begin(), b.choices.begin() + n * b.width);
        if (routes.layers[l].choices != w) {
          route_mismatches.append(" ").append(std::to_string(n)).append(" (layer ");
          route_mismatches.append(std::to_string(routes.layers[l].layer)).append(")");
        }
      }
    }
    EXPECT_TRUE(output_mismatches.empty()) << name << ": outputs of the first n rows differ "
                                           << "from the 40-row call for n =" << output_mismatches;
    EXPECT_TRUE(route_mismatches.empty())
        << name << ": routes of the first n rows differ for n =" << route_mismatches;
  }
}

// The large-batch tests: a one-layer stack of input width kWideIn, its layer given as JSON,
// packed in every storage type and run on every kernel path: body(session options naming the
// path, model, description).
constexpr size_t kLargeBatchRows = 300;
constexpr size_t kWideIn = 771;  // odd, so every kernel has a tail
void ForEachStorageAndPath(
    const std::string& layer, uint64_t seed,
    const std::function<void(SessionOptions, const std::shared_ptr<const Model>&,
                             const std::string&)>& body) {
  testing::TempDir dir;
  const std::string config = R"({"family":"stack","input_dim":)" + std::to_string(kWideIn) +
                             R"(,"layers":[)" + layer + "]}";
  auto net = SynthNet(config, seed);
  ASSERT_TRUE(net.ok()) << net.status().message();
  for (DType dtype : {DType::kF32, DType::kF16, DType::kBF16, DType::kI8}) {
    const std::string name = std::string(ToString(dtype)) + ".sprig";
    auto model = Pack(*net, dir, name, dtype);
    ASSERT_TRUE(model.ok()) << model.status().message();
    for (kernels::KernelPath path : kernels::AvailablePaths()) {
      SessionOptions options;
      options.kernel_path = kernels::ToString(path);
      body(options, *model, layer + " as " + name + " on " + kernels::ToString(path));
    }
  }
}

// Batches of several row tiles (a tile holds about 384 KiB of input rows, here 127 rows) in
// every storage type: the batched path tree (tiles, rows grouped by node, one weight row against
// several input rows) gives every row the bits and the route of a single-row call, on one
// thread and two, on every kernel path.
TEST(RuntimeIdentityLargeBatch, PathTreeRowsEqualSingleRowCalls) {
  const std::vector<float> x = RandomRows(kLargeBatchRows, kWideIn, 71);
  for (uint32_t depth : {0u, 3u, 6u, 9u}) {
    const std::string layer = R"({"kind":"tree","mode":"path","depth":)" + std::to_string(depth) +
                              R"(,"activation":"gelu","out":40})";
    ForEachStorageAndPath(
        layer, 72 + depth, [&](SessionOptions options, const auto& model, const std::string& what) {
          auto single = Session::create(model, options);
          ASSERT_TRUE(single.ok()) << single.status().message();
          std::vector<float> want;
          Routes want_routes;
          ASSERT_TRUE(ForwardRowByRow(**single, x, &want, &want_routes).ok());
          ASSERT_EQ(want.size(), kLargeBatchRows * 40);
          for (size_t threads : {1, 2}) {
            options.threads = threads;
            auto batched = Session::create(model, options);
            ASSERT_TRUE(batched.ok()) << batched.status().message();
            for (const std::vector<size_t>& split :
                 {std::vector<size_t>{kLargeBatchRows}, std::vector<size_t>{129, 2, 169}}) {
              std::vector<float> y;
              Routes routes;
              ASSERT_TRUE(ForwardSplit(**batched, x, split, &y, &routes).ok());
              const std::string how = what + ", " + std::to_string(threads) + " thread(s), " +
                                      std::to_string(split.size()) + " call(s)";
              EXPECT_TRUE(testing::BitEqual(y, want)) << how;
              EXPECT_TRUE(RoutesEqual(routes, want_routes)) << how;
            }
          }
        });
  }
}

// The leaf tree's batched descent (tiles of rows grouped by node) routes every row as a
// single-row call does, in every storage type; its outputs do not depend on how the batch was
// split or on the thread count (single-row calls run the leaf with the matrix-vector kernels,
// which round differently, so outputs are compared between batches only).
TEST(RuntimeIdentityLargeBatch, LeafTreeRoutesEqualSingleRowCalls) {
  const std::vector<float> x = RandomRows(kLargeBatchRows, kWideIn, 81);
  for (uint32_t depth : {0u, 3u, 7u}) {
    const std::string layer = R"({"kind":"tree","mode":"leaf","depth":)" + std::to_string(depth) +
                              R"(,"leaf_width":5,"activation":"relu","out":12})";
    ForEachStorageAndPath(
        layer, 82 + depth, [&](SessionOptions options, const auto& model, const std::string& what) {
          auto one = Session::create(model, options);
          options.threads = 2;
          auto two = Session::create(model, options);
          ASSERT_TRUE(one.ok() && two.ok()) << what;
          std::vector<float> single, whole, split;
          Routes single_routes, whole_routes, split_routes;
          ASSERT_TRUE(ForwardRowByRow(**one, x, &single, &single_routes).ok());
          ASSERT_TRUE(ForwardSplit(**one, x, {kLargeBatchRows}, &whole, &whole_routes).ok());
          ASSERT_TRUE(ForwardSplit(**two, x, {129, 2, 169}, &split, &split_routes).ok());
          EXPECT_TRUE(RoutesEqual(whole_routes, single_routes)) << what;
          EXPECT_TRUE(RoutesEqual(split_routes, single_routes)) << what;
          EXPECT_TRUE(testing::BitEqual(split, whole)) << what;
        });
  }
}

// The property the batched layers rely on (layers/mlp.h: "a row's result must not depend on
// how its batch was split"): a row of gemm_rows gives the same bits whether it is computed
// alone, inside a block of rows, or at any offset of a longer call. This pins the batch-split
// identities above to the kernel when they fail.
TEST(RuntimeIdentityGemmRows, RowResultIndependentOfTheRowsAroundIt) {
  constexpr size_t kOutputs = 20, kInputs = 21, kBatch = 40;
  const std::vector<float> w = RandomRows(kOutputs, kInputs, 61);
  const std::vector<float> x = RandomRows(kBatch, kInputs, 62);
  const std::vector<float> bias = RandomRows(1, kOutputs, 63);
  for (kernels::KernelPath path : kernels::AvailablePaths()) {
    const kernels::KernelTable& k = kernels::Kernels(path);
    std::vector<float> whole(kBatch * kOutputs);
    k.f32.gemm_rows(w.data(), x.data(), bias.data(), whole.data(), kBatch, kOutputs, kInputs);
    std::string mismatches;
    // Calls of n rows starting at row `first`, for every n and a few starting rows.
    for (size_t first : {size_t{0}, size_t{1}, size_t{2}, size_t{16}}) {
      for (size_t n = 1; first + n <= kBatch; ++n) {
        std::vector<float> part(n * kOutputs);
        k.f32.gemm_rows(w.data(), x.data() + first * kInputs, bias.data(), part.data(), n, kOutputs,
                        kInputs);
        if (std::memcmp(part.data(), whole.data() + first * kOutputs,
                        part.size() * sizeof(float)) != 0) {
          mismatches.append(" [").append(std::to_string(first)).append(", ");
          mismatches.append(std::to_string(first + n)).append(")");
        }
      }
    }
    EXPECT_TRUE(mismatches.empty())
        << kernels::ToString(path) << ": gemm_rows over these row ranges differs from the same "
        << "rows of one 40-row call:" << mismatches;
  }
}

// The scalar path against the double-precision reference of docs/model-semantics.md, for
// the whole stack. Rows with a routing decision within 1e-4 of flipping are left out (float
// rounding may take the other branch there); with these N(0, 1) inputs there are normally none.
TEST_F(RuntimeIdentityEveryKind, ScalarPathMatchesReference) {
  const std::vector<float> x = RandomRows(kRows, kIn, 54);
  const RefOutput ref = RefForward(*net_, x);
  std::vector<bool> near(kRows);
  size_t skipped = 0;
  for (size_t r = 0; r < kRows; ++r) skipped += near[r] = ref.margin[r] < 1e-4;
  EXPECT_LE(skipped, 2u);
  auto scalar = NewSession(1, "scalar");
  ASSERT_TRUE(scalar);
  std::vector<float> yb, y1;
  Routes rb, r1;
  ASSERT_TRUE(ForwardSplit(*scalar, x, {kRows}, &yb, &rb).ok());
  ASSERT_TRUE(ForwardRowByRow(*scalar, x, &y1, &r1).ok());
  EXPECT_GT(MaxAbs(yb), 1e-4) << "degenerate outputs";
  EXPECT_TRUE(RowsClose(yb, ref.y, kOut, 1e-5, near)) << "batched";
  EXPECT_TRUE(RowsClose(y1, ref.y, kOut, 1e-5, near)) << "single rows";
  for (const Routes* routes : {&rb, &r1}) {
    ASSERT_EQ(routes->layers.size(), ref.route.size());
    for (size_t l = 0; l < ref.route.size(); ++l) {
      const size_t w = routes->layers[l].width;
      for (size_t r = 0; r < kRows; ++r) {
        if (near[r]) continue;
        for (size_t j = 0; j < w; ++j) {
          EXPECT_EQ(routes->layers[l].choices[r * w + j], ref.route[l][r * w + j])
              << "layer " << routes->layers[l].layer << ", row " << r;
        }
      }
    }
  }
}

// Every kernel path this CPU offers agrees with the scalar path within 1e-5 (relative to the
// row's largest output), batched against batched and single rows against single rows, and
// routes agree except on rows whose deciding logit (from the reference) is within 1e-4 of a
// flip.
TEST_F(RuntimeIdentityEveryKind, EveryKernelPathMatchesScalar) {
  const std::vector<float> x = RandomRows(kRows, kIn, 55);
  const RefOutput ref = RefForward(*net_, x);
  std::vector<bool> near(kRows);
  for (size_t r = 0; r < kRows; ++r) near[r] = ref.margin[r] < 1e-4;
  auto scalar = NewSession(1, "scalar");
  ASSERT_TRUE(scalar);
  std::vector<float> sb, s1;
  Routes srb, sr1;
  ASSERT_TRUE(ForwardSplit(*scalar, x, {kRows}, &sb, &srb).ok());
  ASSERT_TRUE(ForwardRowByRow(*scalar, x, &s1, &sr1).ok());
  const std::vector<kernels::KernelPath> paths = kernels::AvailablePaths();
  ASSERT_FALSE(paths.empty());
  EXPECT_EQ(paths[0], kernels::KernelPath::kScalar);
  for (kernels::KernelPath path : paths) {
    const std::string name = kernels::ToString(path);
    auto s = NewSession(2, name);
    ASSERT_TRUE(s) << name;
    EXPECT_EQ(std::string(s->kernel_path()), name);
    std::vector<float> yb, y1;
    Routes rb, r1;
    ASSERT_TRUE(ForwardSplit(*s, x, {kRows}, &yb, &rb).ok()) << name;
    ASSERT_TRUE(ForwardRowByRow(*s, x, &y1, &r1).ok()) << name;
    EXPECT_TRUE(RowsClose(yb, sb, kOut, 1e-5, near)) << name << ", batched";
    EXPECT_TRUE(RowsClose(y1, s1, kOut, 1e-5, near)) << name << ", single rows";
    for (auto [got, want] : {std::pair{&rb, &srb}, std::pair{&r1, &sr1}}) {
      ASSERT_EQ(got->layers.size(), want->layers.size());
      for (size_t l = 0; l < got->layers.size(); ++l) {
        const size_t w = got->layers[l].width;
        for (size_t r = 0; r < kRows; ++r) {
          if (near[r]) continue;
          for (size_t j = 0; j < w; ++j) {
            EXPECT_EQ(got->layers[l].choices[r * w + j], want->layers[l].choices[r * w + j])
                << name << ", layer " << got->layers[l].layer << ", row " << r;
          }
        }
      }
    }
  }
}

}  // namespace
}  // namespace sprig
