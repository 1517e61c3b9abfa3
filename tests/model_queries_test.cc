// Model's public queries (sprig/model.h) against the file as the format reader indexes it
// (format::ModelFile, the loader the runtime itself opens files with) and the config: the
// sections, one description per layer, one per tensor, the output shape for an input, the
// decoding rule and this process's resident bytes of the mapping.
#include <gtest/gtest.h>

#include <string>
#include <vector>

#include "format/model_file.h"
#include "model/flops.h"
#include "model/tensor_spec.h"
#include "sprig/session.h"
#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

// Every layer kind; the path tree is deep enough to be chunked into records beyond hot levels.
constexpr const char* kStack = R"({"family":"stack","input_dim":16,"layers":[
    {"kind":"dense","width":12,"activation":"gelu","out":16},
    {"kind":"tree","mode":"leaf","depth":3,"leaf_width":4,"activation":"relu","out":16},
    {"kind":"tree","mode":"path","depth":10,"activation":"gelu","out":16},
    {"kind":"experts","experts":5,"top_k":2,"width":4,"activation":"silu","gated":true,
     "out":7}]})";

constexpr const char* kLm = R"({"family":"transformer","vocab_size":64,"d_model":8,"n_heads":2,
    "max_seq":12,"positions":"rope","head":{"kind":"lm"},"layers":[
    {"kind":"experts","experts":3,"top_k":1,"width":4,"activation":"relu"}]})";

// Packs dir/name.json with the weights dir/name.npz (as testing::PackSynthesized left them)
// stored as `dtype`; returns the file's path.
std::string PackAs(const testing::TempDir& dir, const std::string& name, const std::string& dtype) {
  const std::string path = dir.File(name + "." + dtype + ".sprig");
  const auto r =
      testing::Run(testing::SprigCli() + " pack " + Quote(dir.File(name + ".json")) + " " +
                   Quote(dir.File(name + ".npz")) + " -o " + Quote(path) + " --dtype " + dtype);
  EXPECT_EQ(r.exit_code, 0) << r.output;
  return path;
}

TEST(ModelQueries, DescribeWhatTheFileHolds) {
  testing::TempDir dir;
  testing::PackSynthesized(dir, "stack", kStack);
  for (const std::string dtype : {"f32", "i8"}) {
    const std::string path = PackAs(dir, "stack", dtype);
    auto model = Model::open(path);
    ASSERT_TRUE(model.ok()) << model.status().message();
    auto file = format::ModelFile::Open(path);
    ASSERT_TRUE(file.ok()) << file.status().message();
    const Model& m = **model;
    const format::ModelFile& f = **file;

    EXPECT_EQ(m.format_version(), f.format_version());
    EXPECT_EQ(m.producer(), f.producer());
    EXPECT_EQ(m.header_size(), f.header_size());
    EXPECT_EQ(m.config_json(), f.config_json());

    const std::vector<SectionDescription> sections = m.sections();
    ASSERT_EQ(sections.size(), f.sections().size());
    for (size_t i = 0; i < sections.size(); ++i) {
      EXPECT_EQ(sections[i].name, f.sections()[i].name);
      EXPECT_EQ(sections[i].records, f.sections()[i].records);
      EXPECT_EQ(sections[i].layer, f.sections()[i].layer);
      EXPECT_EQ(sections[i].offset, f.sections()[i].offset);
      EXPECT_EQ(sections[i].size, f.sections()[i].size);
      EXPECT_EQ(sections[i].padding, f.sections()[i].padding);
    }

    const ModelConfig& c = m.config();
    const std::vector<LayerDescription> layers = m.layer_descriptions();
    ASSERT_EQ(layers.size(), c.layers.size());
    // What each kind routes among and how many ints a route takes (README "Model semantics").
    const uint64_t want_units[] = {0, 8, 1024, 5};
    const size_t want_width[] = {0, 1, 1, 2};
    for (size_t i = 0; i < layers.size(); ++i) {
      const LayerDescription& l = layers[i];
      EXPECT_EQ(l.index, i);
      EXPECT_EQ(l.config.kind, c.layers[i].kind);
      EXPECT_EQ(l.in, c.layers[i].in);
      EXPECT_EQ(l.out, c.layers[i].out);
      EXPECT_EQ(l.units, want_units[i]) << "layer " << i;
      EXPECT_EQ(l.route_width, want_width[i]) << "layer " << i;
      const LayerCost cost = CostOf(c.layers[i]);
      EXPECT_EQ(l.params, cost.params);
      EXPECT_EQ(l.flops_per_token, cost.flops_per_token);
      EXPECT_EQ(l.dense_width, cost.dense_width);
      EXPECT_EQ(l.dense_flops_per_token, cost.dense_flops_per_token);
      int set = -1;
      for (size_t s = 0; s < f.record_sets().size(); ++s) {
        if (f.record_sets()[s].layer == i) set = static_cast<int>(s);
      }
      EXPECT_EQ(l.record_set, set) << "layer " << i;
      if (set >= 0) {
        EXPECT_EQ(l.records, f.record_sets()[set].offsets.size());
        EXPECT_EQ(l.record_size, f.record_sets()[set].record_size);
      } else {
        EXPECT_EQ(l.records, 0u);
        EXPECT_EQ(l.record_size, 0u);
      }
    }
    // The routed layers keep their leaves, chunks and experts in records; the dense one is hot.
    EXPECT_EQ(layers[0].record_set, -1);
    for (size_t i = 1; i < layers.size(); ++i) EXPECT_GE(layers[i].record_set, 0) << i;

    const std::vector<TensorDescription> tensors = m.tensor_descriptions();
    ASSERT_EQ(tensors.size(), f.tensors().size());
    bool any_i8 = false;
    for (size_t i = 0; i < tensors.size(); ++i) {
      const TensorDescription& t = tensors[i];
      const format::TensorInfo& info = f.tensors()[i];
      EXPECT_EQ(t.name, info.name);
      EXPECT_EQ(t.shape, info.shape);
      EXPECT_EQ(t.dtype, info.dtype);
      EXPECT_EQ(t.layer, info.layer);
      EXPECT_EQ(t.hot_rows, info.hot_rows);
      EXPECT_EQ(t.record_set, info.record_set);
      EXPECT_EQ(t.bytes, ElementCount(t.shape) * DTypeSize(t.dtype)) << t.name;
      EXPECT_EQ(t.error_max_abs, info.error_max_abs);
      EXPECT_EQ(t.error_rel_rms, info.error_rel_rms);
      if (t.dtype == DType::kI8) {
        any_i8 = true;
        // schema/README.md: one float32 scale per row of the last dimension.
        EXPECT_EQ(t.scale_bytes, ElementCount(t.shape) / t.shape.back() * 4) << t.name;
        EXPECT_GT(t.error_max_abs, 0.0f) << t.name;
      } else {
        EXPECT_EQ(t.scale_bytes, 0u) << t.name;
      }
    }
    EXPECT_EQ(any_i8, dtype == "i8");
  }
}

TEST(ModelQueries, OutputShapeFollowsTheInputRules) {
  testing::TempDir dir;
  auto stack = Model::open(testing::PackSynthesized(dir, "stack", kStack));
  auto lm = Model::open(testing::PackSynthesized(dir, "lm", kLm));
  ASSERT_TRUE(stack.ok() && lm.ok());
  using Shape = std::vector<uint64_t>;
  EXPECT_EQ(*(*stack)->output_shape(InputKind::kRows, {3, 16}), (Shape{3, 7}));
  EXPECT_EQ(*(*stack)->output_shape(InputKind::kRows, {16}), (Shape{1, 7}));
  EXPECT_EQ(*(*stack)->output_shape(InputKind::kRows, {0, 16}), (Shape{0, 7}));
  EXPECT_FALSE((*stack)->output_shape(InputKind::kRows, {3, 15}).ok());
  EXPECT_FALSE((*stack)->output_shape(InputKind::kRows, {2, 3, 16}).ok());
  EXPECT_FALSE((*stack)->output_shape(InputKind::kRows, {}).ok());
  EXPECT_FALSE((*stack)->output_shape(InputKind::kTokens, {2, 3}).ok());
  EXPECT_EQ(*(*lm)->output_shape(InputKind::kTokens, {2, 5}), (Shape{2, 5, 64}));
  EXPECT_EQ(*(*lm)->output_shape(InputKind::kTokens, {5}), (Shape{1, 5, 64}));
  EXPECT_EQ(*(*lm)->output_shape(InputKind::kTokens, {2, 12}), (Shape{2, 12, 64}));
  EXPECT_FALSE((*lm)->output_shape(InputKind::kTokens, {2, 13}).ok());
  EXPECT_FALSE((*lm)->output_shape(InputKind::kTokens, {1, 2, 3}).ok());
  EXPECT_FALSE((*lm)->output_shape(InputKind::kRows, {2, 8}).ok());

  // The shape it gives is the one the session fills.
  auto session = Session::create(*lm);
  ASSERT_TRUE(session.ok());
  std::vector<int32_t> tokens(10, 1);
  std::vector<float> out(2 * 5 * 64 + 1, -7.0f);
  ASSERT_TRUE((*session)->forward_tokens(tokens.data(), 2, 5, out.data()).ok());
  EXPECT_NE(out[2 * 5 * 64 - 1], -7.0f);
  EXPECT_EQ(out[2 * 5 * 64], -7.0f);

  // Decoding: room for max_seq tokens in all.
  EXPECT_TRUE((*lm)->check_decoding(0, 12).ok());
  EXPECT_TRUE((*lm)->check_decoding(11, 1).ok());
  EXPECT_FALSE((*lm)->check_decoding(11, 2).ok());
  EXPECT_FALSE((*stack)->check_decoding(0, 1).ok());
}

TEST(ModelQueries, ProcessResidentBytesCountsTheMappingOnly) {
  testing::TempDir dir;
  const std::string path = testing::PackSynthesized(dir, "stack", kStack);
  OpenOptions options;
  options.warm_hot = false;
  auto model = Model::open(path, options);
  ASSERT_TRUE(model.ok());
  auto session = Session::create(*model);
  ASSERT_TRUE(session.ok());
  std::vector<float> x(8 * 16, 0.5f), y(8 * 7);
  ASSERT_TRUE((*session)->forward(x.data(), 8, y.data()).ok());
  const uint64_t resident = (*model)->process_resident_bytes();
#ifdef __linux__
  // The forward call read the hot section at least; nothing beyond the file's pages counts.
  EXPECT_GT(resident, 0u);
#endif
  EXPECT_LE(resident, ((*model)->file_size() + 4095) / 4096 * 4096);
}

}  // namespace
}  // namespace sprig
