// ParseMapping / ReadMapping / ApplyMapping: the mapping file (docs/mapping.md).
#include "converter/config/mapping.h"

#include <algorithm>
#include <cstdint>
#include <cstring>
#include <set>
#include <unordered_map>
#include <utility>

#include "base/status_macros.h"
#include "converter/config/config_limits.h"
#include "converter/config/json_util.h"
#include "model/tensor_spec.h"

namespace sprig::convert {
namespace {

using internal::DescribeJson;
using internal::Quote;
using nlohmann::json;

// A name pattern split at its placeholders: "h.{i}.w" is "h.", {i}, ".w".
struct Token {
  bool placeholder = false;
  std::string text;  // the literal text, or the placeholder's name
};
using Pattern = std::vector<Token>;
// Placeholder values in the order the key names them: ("i", "12").
using Captures = std::vector<std::pair<std::string, std::string>>;

// Placeholders in one name: far more than any model's names have (a layer, an expert, a head),
// and few enough that matching stays cheap and shallow (MatchFrom recurses once per token).
constexpr size_t kMaxPlaceholders = 16;

bool IsNameChar(char c, bool first) {
  return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || c == '_' ||
         (!first && c >= '0' && c <= '9');
}

size_t PlaceholderCount(const Pattern& pattern) {
  return static_cast<size_t>(
      std::count_if(pattern.begin(), pattern.end(), [](const Token& t) { return t.placeholder; }));
}

// Splits `text` at its placeholders; `where` starts the error message ("map.json: entry ...").
Result<Pattern> ParsePattern(const std::string& text, const std::string& where) {
  Pattern pattern;
  std::string literal;
  for (size_t i = 0; i < text.size(); ++i) {
    if (text[i] == '}') {
      return Status::InvalidArgument(where + ": " + Quote(text) +
                                     " has a \"}\" without its \"{\"; a placeholder is written "
                                     "{name}, with letters, digits and underscores");
    }
    if (text[i] != '{') {
      literal += text[i];
      continue;
    }
    const size_t close = text.find('}', i);
    const std::string name =
        close == std::string::npos ? std::string() : text.substr(i + 1, close - i - 1);
    bool valid = !name.empty();
    for (size_t j = 0; j < name.size() && valid; ++j) valid = IsNameChar(name[j], j == 0);
    if (!valid) {
      return Status::InvalidArgument(where + ": " + Quote(text) +
                                     " has a malformed placeholder; a placeholder is written "
                                     "{name}, with letters, digits and underscores");
    }
    for (const Token& t : pattern) {
      if (t.placeholder && t.text == name) {
        return Status::InvalidArgument(where + ": " + Quote(text) + " uses {" + name +
                                       "} twice; give each placeholder its own name");
      }
    }
    if (!literal.empty()) pattern.push_back({false, std::move(literal)});
    literal.clear();
    if (!pattern.empty() && pattern.back().placeholder) {
      // Two placeholders side by side would split one run of digits arbitrarily.
      return Status::InvalidArgument(where + ": " + Quote(text) +
                                     " has two placeholders with nothing between them");
    }
    pattern.push_back({true, name});
    if (PlaceholderCount(pattern) > kMaxPlaceholders) {
      return Status::InvalidArgument(where + ": " + Quote(text) + " has more than " +
                                     std::to_string(kMaxPlaceholders) + " placeholders");
    }
    i = close;
  }
  if (!literal.empty()) pattern.push_back({false, std::move(literal)});
  return pattern;
}

std::vector<std::string> PlaceholdersOf(const Pattern& pattern) {
  std::vector<std::string> names;
  for (const Token& t : pattern) {
    if (t.placeholder) names.push_back(t.text);
  }
  return names;
}

bool Contains(const std::vector<std::string>& names, const std::string& name) {
  return std::find(names.begin(), names.end(), name) != names.end();
}

// Whether `name` matches `pattern` from token `t` and position `pos`, recording the
// placeholders' values. A placeholder matches a decimal integer without leading zeros. Whether
// the rest matches depends only on (t, pos), so each pair that failed is remembered in
// `failed`: a hostile key with many placeholders then costs tokens × length² steps at most,
// not an exponential number.
bool MatchFrom(const Pattern& pattern, size_t t, const std::string& name, size_t pos,
               Captures& captures, std::vector<bool>& failed) {
  if (t == pattern.size()) return pos == name.size();
  const size_t state = t * (name.size() + 1) + pos;
  if (failed[state]) return false;
  const Token& token = pattern[t];
  if (!token.placeholder) {
    if (name.compare(pos, token.text.size(), token.text) == 0 &&
        MatchFrom(pattern, t + 1, name, pos + token.text.size(), captures, failed)) {
      return true;
    }
    failed[state] = true;
    return false;
  }
  size_t digits = 0;
  while (pos + digits < name.size() && name[pos + digits] >= '0' && name[pos + digits] <= '9') {
    ++digits;
  }
  if (digits > 0 && name[pos] == '0') digits = 1;  // "0" alone; "07" is not a number here
  for (size_t n = digits; n > 0; --n) {
    captures.emplace_back(token.text, name.substr(pos, n));
    if (MatchFrom(pattern, t + 1, name, pos + n, captures, failed)) return true;
    captures.pop_back();
  }
  failed[state] = true;
  return false;
}

bool Match(const Pattern& pattern, const std::string& name, Captures& captures) {
  std::vector<bool> failed(pattern.size() * (name.size() + 1), false);
  return MatchFrom(pattern, 0, name, 0, captures, failed);
}

std::string Substitute(const Pattern& pattern, const Captures& captures) {
  std::string out;
  for (const Token& t : pattern) {
    if (!t.placeholder) {
      out += t.text;
      continue;
    }
    for (const auto& [name, value] : captures) {
      if (name == t.text) out += value;
    }
  }
  return out;
}

// Tensor names are shown bare when they are plain, quoted otherwise (as tensor_match.cc does).
std::string Name(const std::string& name) {
  const bool plain = !name.empty() && std::all_of(name.begin(), name.end(), [](char c) {
    return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || (c >= '0' && c <= '9') || c == '.' ||
           c == '_' || c == '-' || c == '/' || c == ':' || c == '{' || c == '}';
  });
  return plain ? name : Quote(name);
}

// ---------------------------------------------------------------------------------------------
// Parsing.

struct EntryParser {
  const std::string& source;
  const std::string& key;
  std::string where() const { return source + ": entry " + Quote(key); }
  Status Error(const std::string& detail) const {
    return Status::InvalidArgument(where() + ": " + detail);
  }
};

Result<std::string> NameField(const EntryParser& p, const json& value, const char* field) {
  if (!value.is_string() || value.get_ref<const std::string&>().empty()) {
    return p.Error(std::string("\"") + field + "\" must be a non-empty string, got " +
                   DescribeJson(value));
  }
  return value.get<std::string>();
}

Status ParseSplit(const EntryParser& p, const json& split, MappingEntry& entry) {
  if (split.is_array()) {
    entry.equal_parts = true;
    for (const json& part : split) {
      SPRIG_ASSIGN_OR_RETURN(std::string name, NameField(p, part, "split"));
      entry.parts.push_back({std::move(name), 0, 0});
    }
  } else if (split.is_object()) {
    for (const auto& item : split.items()) {
      const json& range = item.value();
      const bool valid = range.is_array() && range.size() == 2 && range[0].is_number_unsigned() &&
                         range[1].is_number_unsigned() &&
                         range[0].get<uint64_t>() < range[1].get<uint64_t>();
      if (item.key().empty() || !valid) {
        return p.Error("part " + Quote(item.key()) +
                       " must be a non-empty name with a range [begin, end) of integers, "
                       "0 <= begin < end, got " +
                       DescribeJson(range));
      }
      entry.parts.push_back({item.key(), range[0].get<uint64_t>(), range[1].get<uint64_t>()});
    }
    std::sort(entry.parts.begin(), entry.parts.end(),
              [](const SplitPart& a, const SplitPart& b) { return a.begin < b.begin; });
    uint64_t covered = 0;
    for (size_t i = 0; i < entry.parts.size(); ++i) {
      const SplitPart& part = entry.parts[i];
      const std::string range =
          "[" + std::to_string(part.begin) + ", " + std::to_string(part.end) + ")";
      if (part.begin < covered) {
        const SplitPart& before = entry.parts[i - 1];
        return p.Error("parts " + Quote(before.name) + " [" + std::to_string(before.begin) + ", " +
                       std::to_string(before.end) + ") and " + Quote(part.name) + " " + range +
                       " overlap");
      }
      if (part.begin > covered) {
        return p.Error("no part covers [" + std::to_string(covered) + ", " +
                       std::to_string(part.begin) + ") before " + Quote(part.name) + " " + range +
                       "; the parts must cover the axis from 0 without gaps");
      }
      covered = part.end;
    }
  } else {
    return p.Error(
        "\"split\" must be a list of names (equal parts) or an object of names to ranges "
        "[begin, end), got " +
        DescribeJson(split));
  }
  if (entry.parts.empty()) return p.Error("\"split\" names no part");
  std::set<std::string> seen;
  for (const SplitPart& part : entry.parts) {
    if (!seen.insert(part.name).second)
      return p.Error("part " + Quote(part.name) + " is named twice");
  }
  return Status::Ok();
}

// The names of ours an entry gives (patterns): a split's parts, or its one `to`.
std::vector<std::string> OurNames(const MappingEntry& entry) {
  if (entry.kind != MappingEntry::Kind::kSplit) return {entry.to};
  std::vector<std::string> names;
  for (const SplitPart& part : entry.parts) names.push_back(part.name);
  return names;
}

Result<MappingEntry> ParseEntry(const std::string& source, const std::string& key,
                                const json& value) {
  const EntryParser p{source, key};
  MappingEntry entry;
  entry.key = key;
  if (key.empty()) return Status::InvalidArgument(source + ": an entry has an empty name");
  if (value.is_string()) {
    SPRIG_ASSIGN_OR_RETURN(entry.to, NameField(p, value, "to"));
  } else if (value.is_object()) {
    const int forms = static_cast<int>(value.contains("to")) +
                      static_cast<int>(value.contains("stack")) +
                      static_cast<int>(value.contains("split"));
    if (forms != 1) {
      return p.Error("an entry object needs exactly one of \"to\", \"stack\" or \"split\", got " +
                     DescribeJson(value));
    }
    std::vector<std::string> fields;
    if (value.contains("to")) {
      fields = {"to", "transpose"};
      SPRIG_ASSIGN_OR_RETURN(entry.to, NameField(p, value["to"], "to"));
    } else if (value.contains("stack")) {
      entry.kind = MappingEntry::Kind::kStack;
      fields = {"stack", "over", "transpose"};
      SPRIG_ASSIGN_OR_RETURN(entry.to, NameField(p, value["stack"], "stack"));
      if (!value.contains("over")) {
        return p.Error("a stack needs \"over\", the placeholder that numbers the parts");
      }
      SPRIG_ASSIGN_OR_RETURN(entry.over, NameField(p, value["over"], "over"));
    } else {
      entry.kind = MappingEntry::Kind::kSplit;
      fields = {"split", "axis", "transpose"};
      SPRIG_RETURN_IF_ERROR(ParseSplit(p, value["split"], entry));
      if (value.contains("axis")) {
        const json& axis = value["axis"];
        const bool fits =
            axis.is_number_integer() &&
            !(axis.is_number_unsigned() && axis.get<uint64_t>() > static_cast<uint64_t>(INT64_MAX));
        if (!fits) {
          return p.Error("\"axis\" must be an integer, got " + DescribeJson(axis));
        }
        entry.axis = axis.get<int64_t>();
      }
    }
    for (const auto& item : value.items()) {
      if (!Contains(fields, item.key())) {
        std::string expected;
        for (const std::string& f : fields) expected += (expected.empty() ? "" : ", ") + f;
        return p.Error("unknown field " + Quote(item.key()) + " (expected " + expected + ")");
      }
    }
    if (value.contains("transpose")) {
      if (!value["transpose"].is_boolean()) {
        return p.Error("\"transpose\" must be true or false, got " +
                       DescribeJson(value["transpose"]));
      }
      entry.transpose = value["transpose"].get<bool>();
    }
  } else {
    return p.Error(
        "the value must be our name or an object with \"to\", \"stack\" or \"split\", got " +
        DescribeJson(value));
  }

  // Placeholders: the value may use only the key's, and must use every one of them (but the
  // one a stack numbers its parts by), or several tensors would get one name.
  SPRIG_ASSIGN_OR_RETURN(Pattern key_pattern, ParsePattern(key, p.where()));
  const std::vector<std::string> key_names = PlaceholdersOf(key_pattern);
  if (entry.kind == MappingEntry::Kind::kStack && !Contains(key_names, entry.over)) {
    return p.Error("\"over\" is " + Quote(entry.over) + ", but the key has no {" + entry.over +
                   "} placeholder to number the parts by");
  }
  for (const std::string& v : OurNames(entry)) {
    SPRIG_ASSIGN_OR_RETURN(Pattern value_pattern, ParsePattern(v, p.where()));
    const std::vector<std::string> used = PlaceholdersOf(value_pattern);
    for (const std::string& name : used) {
      if (!Contains(key_names, name)) {
        return p.Error(Quote(v) + " uses {" + name + "}, which the key does not have");
      }
      if (entry.kind == MappingEntry::Kind::kStack && name == entry.over) {
        return p.Error(Quote(v) + " uses {" + name +
                       "}, the placeholder the stack numbers its parts by");
      }
    }
    for (const std::string& name : key_names) {
      const bool stacked = entry.kind == MappingEntry::Kind::kStack && name == entry.over;
      if (!stacked && !Contains(used, name)) {
        return p.Error(Quote(v) + " does not use the key's {" + name +
                       "}, so every tensor it matches would get that one name");
      }
    }
  }
  return entry;
}

}  // namespace

Result<Mapping> ParseMapping(const std::string& json_text, const std::string& source) {
  SPRIG_ASSIGN_OR_RETURN(json root, internal::ParseJsonText(json_text, source));
  if (!root.is_object()) {
    return Status::InvalidArgument(
        source +
        ": a mapping file must be a JSON object of their tensor names (or patterns) to ours, "
        "got " +
        DescribeJson(root));
  }
  Mapping mapping;
  mapping.source = source;
  std::map<std::string, std::string> producer;  // a literal name of ours → the entry giving it
  for (const auto& item : root.items()) {
    SPRIG_ASSIGN_OR_RETURN(MappingEntry entry, ParseEntry(source, item.key(), item.value()));
    // Names with placeholders can only be compared once the tensors are known (ApplyMapping).
    for (const std::string& name : OurNames(entry)) {
      if (name.find('{') != std::string::npos) continue;
      auto [it, inserted] = producer.emplace(name, entry.key);
      if (!inserted) {
        return Status::InvalidArgument(source + ": entries " + Quote(it->second) + " and " +
                                       Quote(entry.key) + " both produce " + Quote(name));
      }
    }
    mapping.entries.push_back(std::move(entry));
  }
  return mapping;
}

Result<Mapping> ReadMapping(const std::string& path) {
  SPRIG_ASSIGN_OR_RETURN(std::string text,
                         internal::ReadTextFile(path, kMaxMappingFileBytes, "mapping"));
  return ParseMapping(text, path);
}

Mapping RenameMapping(const std::map<std::string, std::string>& renames,
                      const std::string& source) {
  Mapping mapping;
  mapping.source = source;
  for (const auto& [theirs, ours] : renames) {
    MappingEntry entry;
    entry.key = theirs;
    entry.to = ours;
    entry.literal = true;
    mapping.entries.push_back(std::move(entry));
  }
  return mapping;
}

// ---------------------------------------------------------------------------------------------
// Applying.

namespace {

// The byte operations below move whole elements; the element size is a template argument so
// each copy is one load and store.
template <size_t N>
void TransposeMatrices(const uint8_t* src, uint8_t* dst, uint64_t batch, uint64_t rows,
                       uint64_t cols) {
  // Blocks of 32 × 32 elements keep both the rows read and the rows written in cache.
  constexpr uint64_t kBlock = 32;
  for (uint64_t b = 0; b < batch; ++b) {
    const uint8_t* in = src + b * rows * cols * N;
    uint8_t* out = dst + b * rows * cols * N;
    for (uint64_t i0 = 0; i0 < rows; i0 += kBlock) {
      for (uint64_t j0 = 0; j0 < cols; j0 += kBlock) {
        const uint64_t i1 = std::min(rows, i0 + kBlock), j1 = std::min(cols, j0 + kBlock);
        for (uint64_t i = i0; i < i1; ++i) {
          for (uint64_t j = j0; j < j1; ++j) {
            std::memcpy(out + (j * rows + i) * N, in + (i * cols + j) * N, N);
          }
        }
      }
    }
  }
}

// `shape` with its last two axes swapped, and the bytes to match (C order).
std::vector<uint8_t> TransposeBytes(const uint8_t* src, const std::vector<uint64_t>& shape,
                                    size_t element_size) {
  const size_t r = shape.size();
  const uint64_t rows = shape[r - 2], cols = shape[r - 1];
  uint64_t batch = 1;
  for (size_t i = 0; i + 2 < r; ++i) batch *= shape[i];
  std::vector<uint8_t> out(batch * rows * cols * element_size);
  if (out.empty()) return out;
  switch (element_size) {
    case 1:
      TransposeMatrices<1>(src, out.data(), batch, rows, cols);
      break;
    case 2:
      TransposeMatrices<2>(src, out.data(), batch, rows, cols);
      break;
    case 4:
      TransposeMatrices<4>(src, out.data(), batch, rows, cols);
      break;
    default:
      TransposeMatrices<8>(src, out.data(), batch, rows, cols);
      break;
  }
  return out;
}

std::vector<uint64_t> Transposed(std::vector<uint64_t> shape) {
  std::swap(shape[shape.size() - 2], shape[shape.size() - 1]);
  return shape;
}

// What ApplyMapping produces before it checks names: the tensor, and the entry that made it.
struct Output {
  MappedTensor tensor;
  int64_t entry = -1;  // -1: passed through
  std::string from;    // their name (or pattern) named when two outputs collide
};

// One stacked tensor being gathered: its parts' indices (as written) and arrays.
struct StackGroup {
  size_t entry = 0;
  std::string name;
  std::string pattern;  // their names with every placeholder but the stacked one filled in
  size_t slot = 0;      // its place among the outputs
  std::vector<std::pair<std::string, size_t>> parts;
};

class Applier {
 public:
  Applier(const Mapping& mapping, const std::vector<io::NdArray>& arrays)
      : mapping_(mapping), arrays_(arrays) {}

  Result<std::vector<MappedTensor>> Run();

 private:
  std::string Where(size_t e) const {
    return mapping_.source + ": entry " + Quote(mapping_.entries[e].key);
  }
  Status Error(size_t e, const std::string& detail) const {
    return Status::InvalidArgument(Where(e) + ": " + detail);
  }
  Status CheckTransposable(size_t e, const io::NdArray& a, const std::string& what) const {
    if (a.shape.size() >= 2) return Status::Ok();
    return Error(e, "cannot transpose " + what + ", which has shape " + ShapeToString(a.shape) +
                        "; only tensors of two or more axes can be transposed");
  }
  Status Rename(size_t e, size_t a, const Captures& captures);
  Status Split(size_t e, size_t a, const Captures& captures);
  Status Stack(StackGroup& group);

  const Mapping& mapping_;
  const std::vector<io::NdArray>& arrays_;
  std::vector<Pattern> keys_;
  std::vector<std::vector<Pattern>> values_;  // per entry: `to`, or each split part's name
  std::vector<Output> outputs_;
};

Status Applier::Rename(size_t e, size_t a, const Captures& captures) {
  const MappingEntry& entry = mapping_.entries[e];
  const io::NdArray& array = arrays_[a];
  Output out;
  out.entry = static_cast<int64_t>(e);
  out.from = array.name;
  out.tensor.name = Substitute(values_[e][0], captures);
  out.tensor.array = &array;
  if (entry.transpose) {
    SPRIG_RETURN_IF_ERROR(CheckTransposable(e, array, Name(array.name)));
    auto made = std::make_shared<io::NdArray>(
        io::NdArray::Owned(out.tensor.name, array.type, Transposed(array.shape),
                           TransposeBytes(array.data, array.shape, io::ElementSize(array.type))));
    out.tensor.array = made.get();
    out.tensor.made = std::move(made);
    out.tensor.origin = "transposed from " + Name(array.name);
    out.tensor.action = "transposes " + Name(array.name) + " into";
  } else {
    out.tensor.origin = "renamed from " + Name(array.name);
    out.tensor.action = "renames " + Name(array.name) + " to";
  }
  outputs_.push_back(std::move(out));
  return Status::Ok();
}

Status Applier::Split(size_t e, size_t a, const Captures& captures) {
  const MappingEntry& entry = mapping_.entries[e];
  const io::NdArray& array = arrays_[a];
  const int64_t rank = static_cast<int64_t>(array.shape.size());
  if (entry.axis >= rank || entry.axis < -rank) {
    return Error(e, "axis " + std::to_string(entry.axis) + " is out of range for " +
                        Name(array.name) + " with shape " + ShapeToString(array.shape) + " (" +
                        std::to_string(rank) + (rank == 1 ? " axis)" : " axes)"));
  }
  const size_t axis = static_cast<size_t>(entry.axis < 0 ? entry.axis + rank : entry.axis);
  const uint64_t dim = array.shape[axis];
  std::vector<SplitPart> parts = entry.parts;
  if (entry.equal_parts) {
    if (dim % parts.size() != 0) {
      return Error(e, "cannot split " + Name(array.name) + " with shape " +
                          ShapeToString(array.shape) + " into " + std::to_string(parts.size()) +
                          " equal parts along axis " + std::to_string(axis) + ": " +
                          std::to_string(dim) + " is not divisible by " +
                          std::to_string(parts.size()));
    }
    const uint64_t size = dim / parts.size();
    for (size_t i = 0; i < parts.size(); ++i) {
      parts[i].begin = i * size;
      parts[i].end = (i + 1) * size;
    }
  } else {
    // ParseMapping made the ranges contiguous from 0, so only the end remains to check.
    const SplitPart& last = parts.back();
    const std::string range =
        "[" + std::to_string(last.begin) + ", " + std::to_string(last.end) + ")";
    if (last.end > dim) {
      return Error(e, "part " + Quote(last.name) + " " + range + " runs past the end of " +
                          Name(array.name) + ", whose axis " + std::to_string(axis) + " has size " +
                          std::to_string(dim) + " (shape " + ShapeToString(array.shape) + ")");
    }
    if (last.end < dim) {
      return Error(e, "the parts cover [0, " + std::to_string(last.end) + ") of axis " +
                          std::to_string(axis) + " of " + Name(array.name) + " with shape " +
                          ShapeToString(array.shape) + ", leaving [" + std::to_string(last.end) +
                          ", " + std::to_string(dim) + ") over");
    }
  }
  if (entry.transpose) {
    SPRIG_RETURN_IF_ERROR(CheckTransposable(e, array, Name(array.name)));
  }
  const size_t element_size = io::ElementSize(array.type);
  uint64_t outer = 1, inner = element_size;
  for (size_t i = 0; i < axis; ++i) outer *= array.shape[i];
  for (size_t i = axis + 1; i < array.shape.size(); ++i) inner *= array.shape[i];
  for (size_t i = 0; i < parts.size(); ++i) {
    const SplitPart& part = parts[i];
    std::vector<uint64_t> shape = array.shape;
    shape[axis] = part.end - part.begin;
    const uint64_t part_bytes = shape[axis] * inner;
    Output out;
    out.entry = static_cast<int64_t>(e);
    out.from = array.name;
    out.tensor.name = Substitute(values_[e][i], captures);
    const std::string range =
        "[" + std::to_string(part.begin) + ", " + std::to_string(part.end) + ")";
    out.tensor.origin = "split from " + Name(array.name) + ", " + range + " of axis " +
                        std::to_string(axis) + (entry.transpose ? ", transposed" : "");
    out.tensor.action = "splits " + Name(array.name) + " into";
    std::shared_ptr<io::NdArray> made;
    if (outer == 1 && !entry.transpose) {
      // The part is one run of the source's bytes: a view that keeps the source alive.
      made = std::make_shared<io::NdArray>(io::NdArray::Borrowed(out.tensor.name, array.type, shape,
                                                                 array.data + part.begin * inner));
      made->keepalive = array.keepalive;
    } else {
      std::vector<uint8_t> bytes(outer * part_bytes);
      for (uint64_t o = 0; o < outer && part_bytes > 0; ++o) {
        std::memcpy(bytes.data() + o * part_bytes, array.data + (o * dim + part.begin) * inner,
                    part_bytes);
      }
      if (entry.transpose) {
        bytes = TransposeBytes(bytes.data(), shape, element_size);
        shape = Transposed(shape);
      }
      made = std::make_shared<io::NdArray>(
          io::NdArray::Owned(out.tensor.name, array.type, std::move(shape), std::move(bytes)));
    }
    out.tensor.array = made.get();
    out.tensor.made = std::move(made);
    outputs_.push_back(std::move(out));
  }
  return Status::Ok();
}

// Indices as written compare as numbers: no leading zeros, so by length first.
bool IndexLess(const std::string& a, const std::string& b) {
  return a.size() != b.size() ? a.size() < b.size() : a < b;
}

Status Applier::Stack(StackGroup& group) {
  const size_t e = group.entry;
  const MappingEntry& entry = mapping_.entries[e];
  auto& parts = group.parts;
  std::sort(parts.begin(), parts.end(),
            [](const auto& a, const auto& b) { return IndexLess(a.first, b.first); });
  for (size_t i = 0; i < parts.size(); ++i) {
    if (parts[i].first == std::to_string(i)) continue;
    // The first index absent: i itself (the sorted indices skip it).
    std::string found;
    const size_t shown = std::min<size_t>(parts.size(), 6);
    for (size_t j = 0; j < shown; ++j) {
      found += (j == 0 ? "" : ", ") + Name(arrays_[parts[j].second].name);
    }
    if (parts.size() > shown) found += " and " + std::to_string(parts.size() - shown) + " more";
    return Error(e, "index " + std::to_string(i) + " of {" + entry.over + "} is missing for " +
                        Name(group.name) + " (stacked from " + Name(group.pattern) +
                        "); the indices must run from 0 without gaps, found " + found);
  }
  const io::NdArray& first = arrays_[parts[0].second];
  for (const auto& [index, a] : parts) {
    const io::NdArray& part = arrays_[a];
    if (part.shape != first.shape || part.type != first.type) {
      return Error(e, "cannot stack " + Name(first.name) + " (" + ShapeToString(first.shape) + " " +
                          io::ElementTypeName(first.type) + ") with " + Name(part.name) + " (" +
                          ShapeToString(part.shape) + " " + io::ElementTypeName(part.type) +
                          ") into " + Name(group.name) +
                          "; the parts must have one shape and element type");
    }
  }
  if (entry.transpose) {
    SPRIG_RETURN_IF_ERROR(CheckTransposable(e, first, Name(first.name)));
  }
  const size_t element_size = io::ElementSize(first.type);
  const uint64_t part_bytes = first.nbytes();
  std::vector<uint8_t> bytes(parts.size() * part_bytes);
  for (size_t i = 0; i < parts.size() && part_bytes > 0; ++i) {
    const io::NdArray& part = arrays_[parts[i].second];
    if (entry.transpose) {
      const std::vector<uint8_t> t = TransposeBytes(part.data, part.shape, element_size);
      std::memcpy(bytes.data() + i * part_bytes, t.data(), part_bytes);
    } else {
      std::memcpy(bytes.data() + i * part_bytes, part.data, part_bytes);
    }
  }
  std::vector<uint64_t> shape = entry.transpose ? Transposed(first.shape) : first.shape;
  shape.insert(shape.begin(), parts.size());
  auto made = std::make_shared<io::NdArray>(
      io::NdArray::Owned(group.name, first.type, std::move(shape), std::move(bytes)));
  Output& out = outputs_[group.slot];
  out.tensor.name = group.name;
  out.tensor.array = made.get();
  out.tensor.made = std::move(made);
  out.tensor.origin =
      "stacked from " + Name(group.pattern) + (entry.transpose ? ", transposed" : "");
  out.tensor.action = "stacks " + Name(group.pattern) + " into";
  return Status::Ok();
}

Result<std::vector<MappedTensor>> Applier::Run() {
  const auto& entries = mapping_.entries;
  std::unordered_map<std::string, size_t> literal_keys;  // keys without placeholders
  std::vector<size_t> pattern_keys;
  for (size_t e = 0; e < entries.size(); ++e) {
    const MappingEntry& entry = entries[e];
    Pattern key;
    std::vector<Pattern> values;
    if (entry.literal) {
      key = {{false, entry.key}};
      values = {{{false, entry.to}}};
    } else {
      SPRIG_ASSIGN_OR_RETURN(key, ParsePattern(entry.key, Where(e)));
      if (entry.kind == MappingEntry::Kind::kSplit) {
        for (const SplitPart& part : entry.parts) {
          SPRIG_ASSIGN_OR_RETURN(Pattern p, ParsePattern(part.name, Where(e)));
          values.push_back(std::move(p));
        }
      } else {
        SPRIG_ASSIGN_OR_RETURN(Pattern p, ParsePattern(entry.to, Where(e)));
        values.push_back(std::move(p));
      }
    }
    const bool literal = key.size() <= 1 && (key.empty() || !key[0].placeholder);
    if (literal) {
      literal_keys.emplace(entry.key, e);
    } else {
      pattern_keys.push_back(e);
    }
    keys_.push_back(std::move(key));
    values_.push_back(std::move(values));
  }

  std::map<std::pair<size_t, std::string>, size_t> group_of;  // (entry, our name) → group
  std::vector<StackGroup> groups;
  for (size_t a = 0; a < arrays_.size(); ++a) {
    const std::string& name = arrays_[a].name;
    // The entries matching this name: a literal key, then the patterns.
    std::vector<std::pair<size_t, Captures>> claims;
    if (auto it = literal_keys.find(name); it != literal_keys.end())
      claims.push_back({it->second, {}});
    for (size_t e : pattern_keys) {
      Captures captures;
      if (Match(keys_[e], name, captures)) claims.push_back({e, std::move(captures)});
    }
    if (claims.size() > 1) {
      return Status::InvalidArgument(mapping_.source + ": " + Name(name) + " matches both entry " +
                                     Quote(entries[claims[0].first].key) + " and entry " +
                                     Quote(entries[claims[1].first].key) +
                                     "; each tensor may be claimed by one entry only");
    }
    if (claims.empty()) {
      Output out;
      out.tensor.name = name;
      out.tensor.array = &arrays_[a];
      outputs_.push_back(std::move(out));
      continue;
    }
    const size_t e = claims[0].first;
    const Captures& captures = claims[0].second;
    switch (entries[e].kind) {
      case MappingEntry::Kind::kRename:
        SPRIG_RETURN_IF_ERROR(Rename(e, a, captures));
        break;
      case MappingEntry::Kind::kSplit:
        SPRIG_RETURN_IF_ERROR(Split(e, a, captures));
        break;
      case MappingEntry::Kind::kStack: {
        const std::string ours = Substitute(values_[e][0], captures);
        std::string index;
        Captures others;
        for (const auto& c : captures) {
          if (c.first == entries[e].over) {
            index = c.second;
          } else {
            others.push_back(c);
          }
        }
        auto [it, inserted] = group_of.emplace(std::make_pair(e, ours), groups.size());
        if (inserted) {
          StackGroup group;
          group.entry = e;
          group.name = ours;
          // Their name with the stacked placeholder left as written: "moe.0.experts.{e}.w1".
          others.emplace_back(entries[e].over, "{" + entries[e].over + "}");
          group.pattern = Substitute(keys_[e], others);
          group.slot = outputs_.size();
          groups.push_back(std::move(group));
          Output slot;
          slot.entry = static_cast<int64_t>(e);
          slot.from = groups.back().pattern;
          outputs_.push_back(std::move(slot));
        }
        groups[it->second].parts.emplace_back(index, a);
        break;
      }
    }
  }
  for (StackGroup& group : groups) SPRIG_RETURN_IF_ERROR(Stack(group));

  // Two tensors the mapping gives one name (passed-through names are left to the matching,
  // which names both sources).
  std::unordered_map<std::string, size_t> made_by;
  for (size_t i = 0; i < outputs_.size(); ++i) {
    const Output& out = outputs_[i];
    if (out.entry < 0) continue;
    auto [it, inserted] = made_by.emplace(out.tensor.name, i);
    if (inserted) continue;
    const Output& other = outputs_[it->second];
    const std::string& k1 = entries[static_cast<size_t>(other.entry)].key;
    const std::string& k2 = entries[static_cast<size_t>(out.entry)].key;
    const std::string who = other.entry == out.entry
                                ? "entry " + Quote(k1) + " gives"
                                : "entries " + Quote(k1) + " and " + Quote(k2) + " both give";
    return Status::InvalidArgument(mapping_.source + ": " + who + " " + Name(out.tensor.name) +
                                   " (from " + Name(other.from) + " and " + Name(out.from) +
                                   "); each of our names may be produced once");
  }
  std::vector<MappedTensor> result;
  result.reserve(outputs_.size());
  for (Output& out : outputs_) result.push_back(std::move(out.tensor));
  return result;
}

}  // namespace

Result<std::vector<MappedTensor>> ApplyMapping(const Mapping& mapping,
                                               const std::vector<io::NdArray>& arrays) {
  return Applier(mapping, arrays).Run();
}

}  // namespace sprig::convert
