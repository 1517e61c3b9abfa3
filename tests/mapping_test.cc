// The mapping file (docs/mapping.md): its forms, the arrays they make, every refusal, and the
// matching's messages for mapped tensors. Expected values are written out from the document's
// definitions (NumPy's C order, a transpose swapping the last two axes), not taken from the code.
#include <gtest/gtest.h>

#include <cstdint>
#include <cstring>
#include <limits>
#include <map>
#include <string>
#include <vector>

#include "converter/config/config_json.h"
#include "converter/config/mapping.h"
#include "converter/config/tensor_match.h"

namespace sprig::convert {
namespace {

using io::ElementType;
using io::NdArray;

// An array whose element i holds the value i (as float32), so a value names its position in the
// source.
NdArray Iota(const std::string& name, std::vector<uint64_t> shape, float start = 0) {
  uint64_t n = 1;
  for (uint64_t d : shape) n *= d;
  std::vector<uint8_t> bytes(n * sizeof(float));
  for (uint64_t i = 0; i < n; ++i) {
    const float v = start + static_cast<float>(i);
    std::memcpy(bytes.data() + i * sizeof(float), &v, sizeof(float));
  }
  return NdArray::Owned(name, ElementType::kF32, std::move(shape), std::move(bytes));
}

NdArray Typed(const std::string& name, ElementType type, std::vector<uint64_t> shape) {
  uint64_t n = 1;
  for (uint64_t d : shape) n *= d;
  std::vector<uint8_t> bytes(n * io::ElementSize(type));
  for (size_t i = 0; i < bytes.size(); ++i) bytes[i] = static_cast<uint8_t>(i);
  return NdArray::Owned(name, type, std::move(shape), std::move(bytes));
}

#define EXPECT_STARTS_WITH(text, prefix) \
  EXPECT_EQ(std::string(text).substr(0, std::string(prefix).size()), prefix) << (text)

std::vector<float> Values(const NdArray& a) {
  std::vector<float> v(a.elements());
  std::memcpy(v.data(), a.data, a.nbytes());
  return v;
}

Mapping Parse(const std::string& text) {
  auto m = ParseMapping(text, "map.json");
  EXPECT_TRUE(m.ok()) << m.status().message();
  return m.ok() ? *m : Mapping{};
}

std::string ParseError(const std::string& text) {
  auto m = ParseMapping(text, "map.json");
  if (m.ok()) return "OK";
  EXPECT_EQ(m.status().code(), Status::Code::kInvalidArgument);
  return m.status().message();
}

std::vector<MappedTensor> Apply(const std::string& text, const std::vector<NdArray>& arrays) {
  auto r = ApplyMapping(Parse(text), arrays);
  EXPECT_TRUE(r.ok()) << r.status().message();
  return r.ok() ? *r : std::vector<MappedTensor>{};
}

std::string ApplyError(const std::string& text, const std::vector<NdArray>& arrays) {
  const Mapping mapping = Parse(text);
  auto r = ApplyMapping(mapping, arrays);
  if (r.ok()) return "OK";
  EXPECT_EQ(r.status().code(), Status::Code::kInvalidArgument);
  return r.status().message();
}

const MappedTensor* Find(const std::vector<MappedTensor>& mapped, const std::string& name) {
  for (const MappedTensor& m : mapped) {
    if (m.name == name) return &m;
  }
  ADD_FAILURE() << "no tensor " << name;
  return nullptr;
}

// ---------------------------------------------------------------------------------------------
// The forms.

TEST(Mapping, ParsesEachForm) {
  const Mapping m = Parse(R"({
    "h.{i}.ln.weight": "blocks.{i}.norm1.weight",
    "h.{i}.w": {"to": "blocks.{i}.fc1.weight", "transpose": true},
    "h.{i}.v": {"to": "blocks.{i}.fc2.weight", "transpose": false},
    "moe.{l}.experts.{e}.w1": {"stack": "layers.{l}.experts.fc1.weight", "over": "e"},
    "attn.{i}.in_proj": {"split": {"q.{i}": [0, 4], "k.{i}": [4, 8], "v.{i}": [8, 12]}},
    "fused": {"split": ["a", "b"], "axis": -1, "transpose": true}})");
  ASSERT_EQ(m.source, "map.json");
  ASSERT_EQ(m.entries.size(), 6u);
  std::map<std::string, const MappingEntry*> by_key;
  for (const MappingEntry& e : m.entries) by_key[e.key] = &e;
  const MappingEntry& rename = *by_key.at("h.{i}.ln.weight");
  EXPECT_EQ(rename.kind, MappingEntry::Kind::kRename);
  EXPECT_EQ(rename.to, "blocks.{i}.norm1.weight");
  EXPECT_FALSE(rename.transpose);
  EXPECT_TRUE(by_key.at("h.{i}.w")->transpose);
  EXPECT_FALSE(by_key.at("h.{i}.v")->transpose);
  const MappingEntry& stack = *by_key.at("moe.{l}.experts.{e}.w1");
  EXPECT_EQ(stack.kind, MappingEntry::Kind::kStack);
  EXPECT_EQ(stack.to, "layers.{l}.experts.fc1.weight");
  EXPECT_EQ(stack.over, "e");
  const MappingEntry& split = *by_key.at("attn.{i}.in_proj");
  EXPECT_EQ(split.kind, MappingEntry::Kind::kSplit);
  EXPECT_FALSE(split.equal_parts);
  EXPECT_EQ(split.axis, 0);
  ASSERT_EQ(split.parts.size(), 3u);  // in order along the axis, whatever the JSON order
  EXPECT_EQ(split.parts[0].name, "q.{i}");
  EXPECT_EQ(split.parts[2].name, "v.{i}");
  EXPECT_EQ(split.parts[2].begin, 8u);
  EXPECT_EQ(split.parts[2].end, 12u);
  const MappingEntry& equal = *by_key.at("fused");
  EXPECT_TRUE(equal.equal_parts);
  EXPECT_EQ(equal.axis, -1);
  EXPECT_TRUE(equal.transpose);
  ASSERT_EQ(equal.parts.size(), 2u);
  EXPECT_EQ(equal.parts[1].name, "b");
}

TEST(Mapping, RenamesByPatternWithoutCopying) {
  const std::vector<NdArray> arrays = {Iota("h.0.w", {2}), Iota("h.12.w", {2}), Iota("h.07.w", {2}),
                                       Iota("h.x.w", {2}), Iota("other", {1})};
  const auto mapped = Apply(R"({"h.{i}.w": "blocks.{i}.weight"})", arrays);
  ASSERT_EQ(mapped.size(), 5u);
  // File order is kept; a placeholder matches decimal integers without leading zeros only.
  EXPECT_EQ(mapped[0].name, "blocks.0.weight");
  EXPECT_EQ(mapped[1].name, "blocks.12.weight");
  EXPECT_EQ(mapped[2].name, "h.07.w");
  EXPECT_EQ(mapped[3].name, "h.x.w");
  EXPECT_EQ(mapped[4].name, "other");
  EXPECT_EQ(mapped[0].origin, "renamed from h.0.w");
  EXPECT_EQ(mapped[0].action, "renames h.0.w to");
  EXPECT_EQ(mapped[2].origin, "");
  for (size_t i = 0; i < mapped.size(); ++i) {
    // A rename is the input array itself: no copy of its bytes.
    EXPECT_EQ(mapped[i].array, &arrays[i]);
    EXPECT_EQ(mapped[i].made, nullptr);
  }
  // Several placeholders, each matched as a whole number.
  const auto two = Apply(R"({"l{a}.e{b}": "x.{b}.{a}"})", {Iota("l10.e3", {1})});
  ASSERT_EQ(two.size(), 1u);
  EXPECT_EQ(two[0].name, "x.3.10");
}

// A key whose placeholders can divide a long run of digits in very many ways is matched in
// polynomial time (a failed match is not retried from the same place).
TEST(Mapping, HostilePatternsMatchQuickly) {
  std::string key = "w", value = "x";
  for (int i = 0; i < 16; ++i) {
    key += "{p" + std::to_string(i) + "}1";
    value += ".{p" + std::to_string(i) + "}";
  }
  const std::vector<NdArray> arrays = {Iota("w" + std::string(400, '1') + "2", {1})};
  auto r = ApplyMapping(Parse("{\"" + key + "\": \"" + value + "\"}"), arrays);
  ASSERT_TRUE(r.ok()) << r.status().message();
  EXPECT_EQ((*r)[0].name, arrays[0].name);  // no match: the name ends in 2
}

TEST(Mapping, TransposesTheLastTwoAxes) {
  const auto mapped = Apply(R"({"w": {"to": "ours.w", "transpose": true},
                               "b": {"to": "ours.b", "transpose": true}})",
                            {Iota("w", {2, 3}), Iota("b", {2, 2, 3})});
  const MappedTensor& w = *Find(mapped, "ours.w");
  EXPECT_EQ(w.array->shape, (std::vector<uint64_t>{3, 2}));
  // NumPy: np.arange(6).reshape(2, 3).T.ravel() == [0, 3, 1, 4, 2, 5].
  EXPECT_EQ(Values(*w.array), (std::vector<float>{0, 3, 1, 4, 2, 5}));
  EXPECT_EQ(w.origin, "transposed from w");
  ASSERT_NE(w.made, nullptr);
  const MappedTensor& b = *Find(mapped, "ours.b");
  EXPECT_EQ(b.array->shape, (std::vector<uint64_t>{2, 3, 2}));
  // np.arange(12).reshape(2, 2, 3).swapaxes(-1, -2).ravel().
  EXPECT_EQ(Values(*b.array), (std::vector<float>{0, 3, 1, 4, 2, 5, 6, 9, 7, 10, 8, 11}));
}

TEST(Mapping, StacksInIndexOrderPerGroup) {
  std::vector<NdArray> arrays;
  // Twelve experts in two layers, written out of order: index 10 sorts after 9, not after 1.
  for (int layer = 0; layer < 2; ++layer) {
    for (int e = 11; e >= 0; --e) {
      arrays.push_back(Iota("moe." + std::to_string(layer) + ".experts." + std::to_string(e) + ".w",
                            {1, 2}, static_cast<float>(100 * layer + 10 * e)));
    }
  }
  const auto mapped =
      Apply(R"({"moe.{l}.experts.{e}.w": {"stack": "layers.{l}.experts.fc1.weight", "over": "e"}})",
            arrays);
  ASSERT_EQ(mapped.size(), 2u);
  EXPECT_EQ(mapped[0].name, "layers.0.experts.fc1.weight");
  EXPECT_EQ(mapped[1].name, "layers.1.experts.fc1.weight");
  EXPECT_EQ(mapped[1].origin, "stacked from moe.1.experts.{e}.w");
  EXPECT_EQ(mapped[1].action, "stacks moe.1.experts.{e}.w into");
  const NdArray& s = *mapped[1].array;
  EXPECT_EQ(s.shape, (std::vector<uint64_t>{12, 1, 2}));
  EXPECT_EQ(s.type, ElementType::kF32);
  const std::vector<float> v = Values(s);
  for (int e = 0; e < 12; ++e) {
    EXPECT_EQ(v[2 * e], 100 + 10 * e) << e;
    EXPECT_EQ(v[2 * e + 1], 100 + 10 * e + 1) << e;
  }
  // With transpose, each part is transposed before stacking.
  const auto t = Apply(R"({"p.{e}": {"stack": "s", "over": "e", "transpose": true}})",
                       {Iota("p.1", {2, 3}, 6), Iota("p.0", {2, 3})});
  ASSERT_EQ(t.size(), 1u);
  EXPECT_EQ(t[0].array->shape, (std::vector<uint64_t>{2, 3, 2}));
  EXPECT_EQ(Values(*t[0].array), (std::vector<float>{0, 3, 1, 4, 2, 5, 6, 9, 7, 10, 8, 11}));
  EXPECT_EQ(t[0].origin, "stacked from p.{e}, transposed");
}

TEST(Mapping, SplitsByRangesAndEqualParts) {
  const std::vector<NdArray> arrays = {Iota("in_proj", {6, 2}), Iota("wide", {2, 6}),
                                       Iota("fused", {2, 4})};
  const auto mapped = Apply(R"({
      "in_proj": {"split": {"q": [0, 2], "k": [2, 4], "v": [4, 6]}},
      "wide": {"split": ["a", "b", "c"], "axis": -1},
      "fused": {"split": {"x": [0, 1], "y": [1, 4]}, "axis": 1, "transpose": true}})",
                            arrays);
  ASSERT_EQ(mapped.size(), 3u + 3u + 2u);
  const MappedTensor& k = *Find(mapped, "k");
  EXPECT_EQ(k.array->shape, (std::vector<uint64_t>{2, 2}));
  EXPECT_EQ(Values(*k.array), (std::vector<float>{4, 5, 6, 7}));
  // Rows of the first axis are one run of the source: a view, not a copy.
  EXPECT_EQ(k.array->data, arrays[0].data + 4 * sizeof(float));
  EXPECT_EQ(k.origin, "split from in_proj, [2, 4) of axis 0");
  const MappedTensor& b = *Find(mapped, "b");
  EXPECT_EQ(b.array->shape, (std::vector<uint64_t>{2, 2}));
  // np.arange(12).reshape(2, 6)[:, 2:4].
  EXPECT_EQ(Values(*b.array), (std::vector<float>{2, 3, 8, 9}));
  EXPECT_EQ(b.origin, "split from wide, [2, 4) of axis 1");
  const MappedTensor& y = *Find(mapped, "y");
  // np.arange(8).reshape(2, 4)[:, 1:4].T.
  EXPECT_EQ(y.array->shape, (std::vector<uint64_t>{3, 2}));
  EXPECT_EQ(Values(*y.array), (std::vector<float>{1, 5, 2, 6, 3, 7}));
  EXPECT_EQ(y.origin, "split from fused, [1, 4) of axis 1, transposed");
}

TEST(Mapping, KeepsElementTypes) {
  for (ElementType type :
       {ElementType::kF64, ElementType::kF32, ElementType::kF16, ElementType::kBF16}) {
    const size_t size = io::ElementSize(type);
    const std::vector<NdArray> arrays = {Typed("w", type, {2, 3}), Typed("p.0", type, {3}),
                                         Typed("p.1", type, {3}), Typed("f", type, {4, 1})};
    const auto mapped = Apply(R"({"w": {"to": "wt", "transpose": true},
                                 "p.{e}": {"stack": "p", "over": "e"},
                                 "f": {"split": ["f0", "f1"]}})",
                              arrays);
    ASSERT_EQ(mapped.size(), 4u);
    for (const MappedTensor& m : mapped) EXPECT_EQ(m.array->type, type) << m.name;
    // Element (1, 0) of the transpose is element (0, 1) of the source: the same bytes.
    const MappedTensor& wt = *Find(mapped, "wt");
    EXPECT_EQ(std::memcmp(wt.array->data + 2 * size, arrays[0].data + 1 * size, size), 0);
    const MappedTensor& p = *Find(mapped, "p");
    EXPECT_EQ(std::memcmp(p.array->data + 3 * size, arrays[2].data, 3 * size), 0);
    const MappedTensor& f1 = *Find(mapped, "f1");
    EXPECT_EQ(std::memcmp(f1.array->data, arrays[3].data + 2 * size, 2 * size), 0);
  }
}

// ---------------------------------------------------------------------------------------------
// Refusals when the file is read.

TEST(Mapping, RefusesMalformedEntries) {
  EXPECT_EQ(ParseError(R"({"w": {"to": "x", "trasnpose": true}})"),
            "map.json: entry \"w\": unknown field \"trasnpose\" (expected to, transpose)");
  EXPECT_EQ(ParseError(R"({"w.{e}": {"stack": "x", "over": "e", "axis": 0}})"),
            "map.json: entry \"w.{e}\": unknown field \"axis\" (expected stack, over, transpose)");
  EXPECT_EQ(ParseError(R"({"w": {"split": ["a"], "over": "e"}})"),
            "map.json: entry \"w\": unknown field \"over\" (expected split, axis, transpose)");
  EXPECT_EQ(ParseError(R"({"w": {"to": "x", "transpose": 1}})"),
            "map.json: entry \"w\": \"transpose\" must be true or false, got 1");
  EXPECT_EQ(ParseError(R"({"w": {"to": "x", "stack": "y"}})"),
            "map.json: entry \"w\": an entry object needs exactly one of \"to\", \"stack\" or "
            "\"split\", got {\"stack\":\"y\",\"to\":\"x\"}");
  EXPECT_EQ(ParseError(R"({"w": {"transpose": true}})"),
            "map.json: entry \"w\": an entry object needs exactly one of \"to\", \"stack\" or "
            "\"split\", got {\"transpose\":true}");
  EXPECT_EQ(ParseError(R"({"w": ["x"]})"),
            "map.json: entry \"w\": the value must be our name or an object with \"to\", "
            "\"stack\" or \"split\", got [\"x\"]");
  EXPECT_EQ(ParseError(R"({"w": {"to": 7}})"),
            "map.json: entry \"w\": \"to\" must be a non-empty string, got 7");
  EXPECT_EQ(ParseError(R"({"w.{e}": {"stack": "x"}})"),
            "map.json: entry \"w.{e}\": a stack needs \"over\", the placeholder that numbers the "
            "parts");
  EXPECT_EQ(ParseError(R"({"w.{e}": {"stack": "x", "over": "i"}})"),
            "map.json: entry \"w.{e}\": \"over\" is \"i\", but the key has no {i} placeholder to "
            "number the parts by");
  EXPECT_EQ(ParseError(R"({"w": {"split": ["a"], "axis": 0.5}})"),
            "map.json: entry \"w\": \"axis\" must be an integer, got 0.5");
  EXPECT_EQ(ParseError(R"({"w": {"split": "a"}})"),
            "map.json: entry \"w\": \"split\" must be a list of names (equal parts) or an object "
            "of names to ranges [begin, end), got \"a\"");
  EXPECT_EQ(ParseError(R"({"w": {"split": []}})"),
            "map.json: entry \"w\": \"split\" names no part");
  EXPECT_EQ(ParseError(R"({"w": {"split": ["a", "a"]}})"),
            "map.json: entry \"w\": part \"a\" is named twice");
  EXPECT_EQ(ParseError(R"({"w": {"split": {"a": [0, -4]}}})"),
            "map.json: entry \"w\": part \"a\" must be a non-empty name with a range [begin, end) "
            "of integers, 0 <= begin < end, got [0,-4]");
  EXPECT_EQ(ParseError(R"({"w": {"split": {"a": [3, 3]}}})"),
            "map.json: entry \"w\": part \"a\" must be a non-empty name with a range [begin, end) "
            "of integers, 0 <= begin < end, got [3,3]");
  EXPECT_STARTS_WITH(ParseError("{\"w\": {\"to\": \"x\"},}"), "map.json: invalid JSON at line 1");
  EXPECT_EQ(ParseError("[1]"),
            "map.json: a mapping file must be a JSON object of their tensor names (or patterns) "
            "to ours, got [1]");
}

TEST(Mapping, RefusesSplitRangesThatOverlapOrLeaveAGap) {
  EXPECT_EQ(ParseError(R"({"in_proj": {"split": {"q": [0, 64], "k": [32, 128]}}})"),
            "map.json: entry \"in_proj\": parts \"q\" [0, 64) and \"k\" [32, 128) overlap");
  EXPECT_EQ(ParseError(R"({"in_proj": {"split": {"q": [0, 64], "k": [70, 128]}}})"),
            "map.json: entry \"in_proj\": no part covers [64, 70) before \"k\" [70, 128); the "
            "parts must cover the axis from 0 without gaps");
  EXPECT_EQ(ParseError(R"({"in_proj": {"split": {"k": [8, 16]}}})"),
            "map.json: entry \"in_proj\": no part covers [0, 8) before \"k\" [8, 16); the parts "
            "must cover the axis from 0 without gaps");
}

TEST(Mapping, RefusesBadPlaceholders) {
  EXPECT_EQ(ParseError(R"({"h.{i}.w": "blocks.{j}.w"})"),
            "map.json: entry \"h.{i}.w\": \"blocks.{j}.w\" uses {j}, which the key does not "
            "have");
  EXPECT_EQ(ParseError(R"({"h.{i}.w": "blocks.w"})"),
            "map.json: entry \"h.{i}.w\": \"blocks.w\" does not use the key's {i}, so every "
            "tensor it matches would get that one name");
  EXPECT_EQ(ParseError(R"({"e.{e}": {"stack": "s.{e}", "over": "e"}})"),
            "map.json: entry \"e.{e}\": \"s.{e}\" uses {e}, the placeholder the stack numbers its "
            "parts by");
  EXPECT_EQ(ParseError(R"({"in.{i}": {"split": ["q.{i}", "k"]}})"),
            "map.json: entry \"in.{i}\": \"k\" does not use the key's {i}, so every tensor it "
            "matches would get that one name");
  EXPECT_EQ(ParseError(R"({"h.{i}.w": "b.{i"})"),
            "map.json: entry \"h.{i}.w\": \"b.{i\" has a malformed placeholder; a placeholder is "
            "written {name}, with letters, digits and underscores");
  EXPECT_EQ(ParseError(R"({"h.{1x}.w": "b"})"),
            "map.json: entry \"h.{1x}.w\": \"h.{1x}.w\" has a malformed placeholder; a "
            "placeholder is written {name}, with letters, digits and underscores");
  EXPECT_EQ(ParseError(R"({"h.i}.w": "b"})"),
            "map.json: entry \"h.i}.w\": \"h.i}.w\" has a \"}\" without its \"{\"; a placeholder "
            "is written {name}, with letters, digits and underscores");
  EXPECT_EQ(ParseError(R"({"h.{i}.{i}": "b.{i}"})"),
            "map.json: entry \"h.{i}.{i}\": \"h.{i}.{i}\" uses {i} twice; give each placeholder "
            "its own name");
  EXPECT_EQ(ParseError(R"({"h.{i}{j}": "b.{i}.{j}"})"),
            "map.json: entry \"h.{i}{j}\": \"h.{i}{j}\" has two placeholders with nothing between "
            "them");
  std::string many = "w", many_value = "x";
  for (int i = 0; i < 17; ++i) {
    many += ".{p" + std::to_string(i) + "}";
    many_value += ".{p" + std::to_string(i) + "}";
  }
  EXPECT_EQ(ParseError("{\"" + many + "\": \"" + many_value + "\"}"),
            "map.json: entry \"" + many + "\": \"" + many + "\" has more than 16 placeholders");
  // In a value too, since the exporter matches values against our names to invert the mapping.
  EXPECT_EQ(ParseError(R"({"h.{i}.{j}": "b.{i}{j}"})"),
            "map.json: entry \"h.{i}.{j}\": \"b.{i}{j}\" has two placeholders with nothing "
            "between them");
}

TEST(Mapping, RefusesTwoEntriesGivingOneLiteralName) {
  EXPECT_EQ(ParseError(R"({"a": "x", "b": {"to": "x", "transpose": true}})"),
            "map.json: entries \"a\" and \"b\" both produce \"x\"");
  EXPECT_EQ(ParseError(R"({"a": {"split": ["x", "y"]}, "b.{e}": {"stack": "y", "over": "e"}})"),
            "map.json: entries \"a\" and \"b.{e}\" both produce \"y\"");
}

// ---------------------------------------------------------------------------------------------
// Refusals once the tensors are known.

TEST(Mapping, RefusesAMissingStackIndex) {
  const std::vector<NdArray> arrays = {Iota("moe.0.experts.0.w1", {2}),
                                       Iota("moe.0.experts.3.w1", {2}),
                                       Iota("moe.0.experts.1.w1", {2})};
  EXPECT_EQ(
      ApplyError(R"({"moe.{l}.experts.{e}.w1": {"stack": "layers.{l}.fc1", "over": "e"}})", arrays),
      "map.json: entry \"moe.{l}.experts.{e}.w1\": index 2 of {e} is missing for "
      "layers.0.fc1 (stacked from moe.0.experts.{e}.w1); the indices must run from 0 "
      "without gaps, found moe.0.experts.0.w1, moe.0.experts.1.w1, moe.0.experts.3.w1");
  // Index 0 absent.
  EXPECT_EQ(ApplyError(R"({"p.{e}": {"stack": "s", "over": "e"}})", {Iota("p.1", {2})}),
            "map.json: entry \"p.{e}\": index 0 of {e} is missing for s (stacked from p.{e}); "
            "the indices must run from 0 without gaps, found p.1");
}

TEST(Mapping, RefusesStackPartsOfDifferentShapeOrType) {
  EXPECT_EQ(ApplyError(R"({"p.{e}": {"stack": "s", "over": "e"}})",
                       {Iota("p.0", {2, 3}), Iota("p.1", {3, 2})}),
            "map.json: entry \"p.{e}\": cannot stack p.0 ([2, 3] float32) with p.1 ([3, 2] "
            "float32) into s; the parts must have one shape and element type");
  EXPECT_EQ(ApplyError(R"({"p.{e}": {"stack": "s", "over": "e"}})",
                       {Iota("p.0", {2}), Typed("p.1", ElementType::kF16, {2})}),
            "map.json: entry \"p.{e}\": cannot stack p.0 ([2] float32) with p.1 ([2] float16) "
            "into s; the parts must have one shape and element type");
}

TEST(Mapping, RefusesSplitsThatDoNotFit) {
  const std::vector<NdArray> arrays = {Iota("in_proj", {12, 4})};
  EXPECT_EQ(
      ApplyError(R"({"in_proj": {"split": {"q": [0, 4], "k": [4, 8], "v": [8, 16]}}})", arrays),
      "map.json: entry \"in_proj\": part \"v\" [8, 16) runs past the end of in_proj, whose "
      "axis 0 has size 12 (shape [12, 4])");
  EXPECT_EQ(ApplyError(R"({"in_proj": {"split": {"q": [0, 4], "k": [4, 8]}}})", arrays),
            "map.json: entry \"in_proj\": the parts cover [0, 8) of axis 0 of in_proj with shape "
            "[12, 4], leaving [8, 12) over");
  EXPECT_EQ(ApplyError(R"({"in_proj": {"split": ["a", "b", "c"], "axis": 1}})", arrays),
            "map.json: entry \"in_proj\": cannot split in_proj with shape [12, 4] into 3 equal "
            "parts along axis 1: 4 is not divisible by 3");
  EXPECT_EQ(ApplyError(R"({"in_proj": {"split": ["a", "b"], "axis": 2}})", arrays),
            "map.json: entry \"in_proj\": axis 2 is out of range for in_proj with shape [12, 4] "
            "(2 axes)");
  EXPECT_EQ(ApplyError(R"({"in_proj": {"split": ["a", "b"], "axis": -3}})", arrays),
            "map.json: entry \"in_proj\": axis -3 is out of range for in_proj with shape [12, 4] "
            "(2 axes)");
  EXPECT_EQ(ApplyError(R"({"in_proj": {"split": ["a", "b"], "axis": -2}})", arrays), "OK");
}

TEST(Mapping, RefusesTransposingOneAxis) {
  const std::vector<NdArray> arrays = {Iota("bias", {4}), Iota("p.0", {4})};
  EXPECT_EQ(ApplyError(R"({"bias": {"to": "b", "transpose": true}})", arrays),
            "map.json: entry \"bias\": cannot transpose bias, which has shape [4]; only tensors "
            "of two or more axes can be transposed");
  EXPECT_EQ(ApplyError(R"({"p.{e}": {"stack": "s", "over": "e", "transpose": true}})", arrays),
            "map.json: entry \"p.{e}\": cannot transpose p.0, which has shape [4]; only tensors of "
            "two or more axes can be transposed");
  EXPECT_EQ(ApplyError(R"({"bias": {"split": ["x", "y"], "transpose": true}})", arrays),
            "map.json: entry \"bias\": cannot transpose bias, which has shape [4]; only tensors "
            "of two or more axes can be transposed");
}

TEST(Mapping, RefusesATensorTwoEntriesClaim) {
  EXPECT_EQ(ApplyError(R"({"h.{i}.w": "a.{i}", "h.0.w": "b"})", {Iota("h.0.w", {1})}),
            "map.json: h.0.w matches both entry \"h.0.w\" and entry \"h.{i}.w\"; each tensor may "
            "be claimed by one entry only");
  EXPECT_EQ(ApplyError(R"({"h.{i}.w": "a.{i}", "{j}.0.w": "b.{j}"})", {Iota("h.0.w", {1})}), "OK");
  EXPECT_EQ(ApplyError(R"({"h.{i}.{k}": "a.{i}.{k}", "h.{j}.0": "b.{j}"})", {Iota("h.1.0", {1})}),
            "map.json: h.1.0 matches both entry \"h.{i}.{k}\" and entry \"h.{j}.0\"; each tensor "
            "may be claimed by one entry only");
}

TEST(Mapping, RefusesTwoTensorsGivenOneName) {
  EXPECT_EQ(ApplyError(R"({"a.{i}": "x.{i}", "b.{i}": "x.{i}"})",
                       {Iota("a.0", {1}), Iota("b.1", {1}), Iota("b.0", {1})}),
            "map.json: entries \"a.{i}\" and \"b.{i}\" both give x.0 (from a.0 and b.0); each of "
            "our names may be produced once");
  // Within one entry: "x.{i}1{j}" gives x.1111 for i = 1, j = 11 and for i = 11, j = 1.
  EXPECT_EQ(ApplyError(R"({"w.{i}.{j}": "x.{i}1{j}"})", {Iota("w.1.11", {1}), Iota("w.11.1", {1})}),
            "map.json: entry \"w.{i}.{j}\" gives x.1111 (from w.1.11 and w.11.1); each of our "
            "names may be produced once");
  EXPECT_EQ(ApplyError(R"({"q.{i}": "x.{i}", "fused": {"split": ["x.0", "y"]}})",
                       {Iota("q.0", {1}), Iota("fused", {2})}),
            "map.json: entries \"q.{i}\" and \"fused\" both give x.0 (from q.0 and fused); each of "
            "our names may be produced once");
}

// ---------------------------------------------------------------------------------------------
// The matching after the mapping.

ModelConfig ExpertsConfig() {
  auto c = ParseConfig(R"({"family":"stack","input_dim":4,"layers":[
      {"kind":"experts","experts":2,"top_k":1,"width":3,"out":4}]})",
                       "config.json");
  EXPECT_TRUE(c.ok()) << c.status().message();
  return c.ok() ? *c : ModelConfig{};
}

// Their names: one tensor per expert, fc2 stored as [in, out] (transposed), the router fused
// with a spare block of rows.
std::vector<NdArray> ExpertArrays(uint64_t fc2_rows = 3) {
  std::vector<NdArray> arrays;
  for (int e = 0; e < 2; ++e) {
    const std::string p = "moe.experts." + std::to_string(e);
    arrays.push_back(Iota(p + ".w1.weight", {3, 4}, static_cast<float>(100 * e)));
    arrays.push_back(Iota(p + ".w1.bias", {3}));
    arrays.push_back(Iota(p + ".w2.weight", {fc2_rows, 4}, static_cast<float>(100 * e)));
    arrays.push_back(Iota(p + ".w2.bias", {4}));
  }
  arrays.push_back(Iota("moe.router", {4, 4}));
  arrays.push_back(Iota("moe.router_bias", {2}));
  return arrays;
}

const std::string kExpertEntries = R"(
  "moe.experts.{e}.w1.weight": {"stack": "layers.0.experts.fc1.weight", "over": "e"},
  "moe.experts.{e}.w1.bias": {"stack": "layers.0.experts.fc1.bias", "over": "e"},
  "moe.experts.{e}.w2.weight": {"stack": "layers.0.experts.fc2.weight", "over": "e",
                                "transpose": true},
  "moe.experts.{e}.w2.bias": {"stack": "layers.0.experts.fc2.bias", "over": "e"},
  "moe.router_bias": "layers.0.router.bias",)";
const std::string kRouterSplit =
    R"("moe.router": {"split": {"layers.0.router.weight": [0, 2], "spare": [2, 4]}}})";
const std::string kRouterSplitDrop =
    R"("moe.router": {"split": {"layers.0.router.weight": [0, 2]}}})";

std::string MatchError(const std::vector<NdArray>& arrays, const std::string& mapping) {
  auto r = MatchTensors(ExpertsConfig(), arrays, "weights.npz", Parse(mapping));
  return r.ok() ? "OK" : r.status().message();
}

TEST(Mapping, MatchingSaysWhereATensorCameFrom) {
  std::vector<NdArray> arrays = ExpertArrays();
  EXPECT_EQ(MatchError(arrays, "{" + kExpertEntries + kRouterSplit),
            "weights.npz: the mapping file splits moe.router into spare, which is not a tensor "
            "this config has");
  EXPECT_EQ(MatchError(arrays, "{" + kExpertEntries + kRouterSplitDrop),
            "map.json: entry \"moe.router\": the parts cover [0, 2) of axis 0 of moe.router with "
            "shape [4, 4], leaving [2, 4) over");
  // A stacked tensor of the wrong shape, named with its source.
  EXPECT_EQ(MatchError(ExpertArrays(5), "{" + kExpertEntries + kRouterSplit),
            "weights.npz: layers.0.experts.fc2.weight (stacked from moe.experts.{e}.w2.weight, "
            "transposed) has shape [2, 4, 5] but the config needs [2, 4, 3] (and 1 more problem)");
  // A stack under a misspelt name: the hint names the stack.
  std::string misspelt = kExpertEntries;
  misspelt.replace(misspelt.find("experts.fc1.bias"), 16, "experts.fc1.bais");
  EXPECT_EQ(MatchError(arrays, "{" + misspelt + kRouterSplit),
            "weights.npz: tensor layers.0.experts.fc1.bias with shape [2, 3] is missing; the "
            "mapping file stacks moe.experts.{e}.w1.bias into layers.0.experts.fc1.bais: should "
            "that be layers.0.experts.fc1.bias? (and 2 more problems)");
  // A NaN in a split part is reported against the part, at its own index.
  arrays[8] = Iota("moe.router", {4, 4});
  const float nan = std::numeric_limits<float>::quiet_NaN();
  std::vector<uint8_t> bytes(arrays[8].data, arrays[8].data + arrays[8].nbytes());
  std::memcpy(bytes.data() + 5 * sizeof(float), &nan, sizeof(float));
  arrays[8] = NdArray::Owned("moe.router", ElementType::kF32, {4, 4}, std::move(bytes));
  arrays.push_back(Iota("spare.bias", {1}));
  EXPECT_EQ(MatchError(arrays, "{" + kExpertEntries +
                                   R"("moe.router": {"split": ["layers.0.router.weight", "x"]}})"),
            "weights.npz: layers.0.router.weight (split from moe.router, [0, 2) of axis 0) has a "
            "NaN at flat index 5 (element [1, 1]); weights must be finite (and 2 more problems)");
}

TEST(Mapping, MatchedTensorsOutliveTheMapping) {
  std::vector<NdArray> arrays = ExpertArrays();
  arrays[8] = Iota("moe.router", {2, 4});
  std::vector<MatchedTensor> matched;
  {
    const Mapping mapping =
        Parse("{" + kExpertEntries + R"("moe.router": "layers.0.router.weight"})");
    auto r = MatchTensors(ExpertsConfig(), arrays, "weights.npz", mapping);
    ASSERT_TRUE(r.ok()) << r.status().message();
    matched = std::move(*r);
  }
  ASSERT_EQ(matched.size(), 6u);
  for (const MatchedTensor& m : matched) {
    ASSERT_NE(m.source, nullptr);
    EXPECT_EQ(m.source->shape, m.spec.shape) << m.spec.name;
  }
  const MatchedTensor& fc2 = matched[4];
  ASSERT_EQ(fc2.spec.name, "layers.0.experts.fc2.weight");
  ASSERT_NE(fc2.made, nullptr);
  EXPECT_EQ(fc2.source, fc2.made.get());
  // Expert 1's fc2 element (out 1, width 2) is element (2, 1) of its [3, 4] source, which holds
  // 100 + 2 * 4 + 1.
  EXPECT_EQ(Values(*fc2.source)[12 + 1 * 3 + 2], 109.0f);
  // The renamed router is the input array itself, not a copy.
  const MatchedTensor& router = matched[0];
  ASSERT_EQ(router.spec.name, "layers.0.router.weight");
  EXPECT_EQ(router.made, nullptr);
  EXPECT_EQ(router.source, &arrays[8]);
}

}  // namespace
}  // namespace sprig::convert
