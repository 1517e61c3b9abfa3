#include "converter/config/tensor_match.h"

#include <algorithm>
#include <functional>
#include <unordered_map>

#include "base/status_macros.h"
#include "converter/config/finite_check.h"
#include "converter/config/json_util.h"

namespace sprig::convert {
namespace {

// A problem is described only if it turns out to be the one reported, because describing a
// missing tensor searches the file for a close name.
struct Problem {
  uint64_t order;  // the spec index, or specs.size() + array index for unexpected arrays
  std::function<std::string()> describe;
};

// Tensor names are shown bare when they are plain ("layers.0.fc1.weight"), quoted and
// escaped otherwise, so a strange name from a file cannot garble the message.
std::string Name(const std::string& name) {
  const bool plain = !name.empty() && std::all_of(name.begin(), name.end(), [](char c) {
    return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || (c >= '0' && c <= '9') || c == '.' ||
           c == '_' || c == '-' || c == '/' || c == ':';
  });
  return plain ? name : internal::Quote(name);
}

bool IsWeightType(io::ElementType t) {
  return t == io::ElementType::kF64 || t == io::ElementType::kF32 || t == io::ElementType::kF16 ||
         t == io::ElementType::kBF16;
}

// "[0, 17]": the C-order index of element `flat` of `shape`.
std::string ElementIndex(uint64_t flat, const std::vector<uint64_t>& shape) {
  std::vector<uint64_t> index(shape.size());
  for (size_t i = shape.size(); i-- > 0;) {
    index[i] = flat % shape[i];
    flat /= shape[i];
  }
  return ShapeToString(index);
}

size_t EditDistance(const std::string& a, const std::string& b) {
  std::vector<size_t> row(b.size() + 1);
  for (size_t j = 0; j <= b.size(); ++j) row[j] = j;
  for (size_t i = 1; i <= a.size(); ++i) {
    size_t diagonal = row[0];
    row[0] = i;
    for (size_t j = 1; j <= b.size(); ++j) {
      const size_t above = row[j];
      row[j] = std::min({row[j] + 1, row[j - 1] + 1, diagonal + (a[i - 1] != b[j - 1])});
      diagonal = above;
    }
  }
  return row[b.size()];
}

// An array no expected tensor claims: its name after mapping, and what the mapping did to it
// ("renames x to"; empty when nothing).
struct Unused {
  std::string ours;
  std::string action;
};

// The hint for a missing tensor `expected` once `close` was found to stand for it.
std::string HintFor(const std::string& expected, const Unused& close) {
  if (!close.action.empty()) {
    return "; the mapping file " + close.action + " " + Name(close.ours) + ": should that be " +
           Name(expected) + "?";
  }
  return "; the file has " + Name(close.ours) + ": map its names to ours with --map FILE, " +
         "a JSON object such as {" + internal::Quote(close.ours) + ": " +
         internal::Quote(expected) + "} (docs/mapping.md)";
}

// A hint for a missing tensor `expected` when an unused array's name (after renaming) is close
// to it: the same name under an extra prefix ("model.", "module."), without part of ours, or
// within two edits. Empty when there is none.
std::string RenameHint(const std::string& expected, const std::vector<Unused>& unused) {
  for (const Unused& u : unused) {
    const std::string& name = u.ours;
    if (name.size() > expected.size() && name.ends_with(expected) &&
        name[name.size() - expected.size() - 1] == '.') {
      return HintFor(expected, u) + " (their names seem to carry the prefix " +
             internal::Quote(name.substr(0, name.size() - expected.size())) + ")";
    }
  }
  for (const Unused& u : unused) {
    const std::string& name = u.ours;
    if (expected.size() > name.size() && expected.ends_with(name) &&
        expected[expected.size() - name.size() - 1] == '.') {
      return HintFor(expected, u);
    }
  }
  const Unused* best = nullptr;
  size_t best_distance = 3;
  for (const Unused& u : unused) {
    // Names whose lengths differ by at least the best distance so far cannot beat it.
    const size_t gap = u.ours.size() > expected.size() ? u.ours.size() - expected.size()
                                                       : expected.size() - u.ours.size();
    if (gap >= best_distance) continue;
    const size_t d = EditDistance(u.ours, expected);
    if (d < best_distance) {
      best_distance = d;
      best = &u;
    }
  }
  return best ? HintFor(expected, *best) : "";
}

std::string MoreProblems(size_t n) {
  if (n == 0) return "";
  return " (and " + std::to_string(n) + (n == 1 ? " more problem)" : " more problems)");
}

}  // namespace

Result<std::vector<MatchedTensor>> MatchTensors(const ModelConfig& config,
                                                const io::TensorArchive& archive,
                                                const Mapping& mapping) {
  return MatchTensors(config, archive.arrays(), archive.path(), mapping);
}

Result<std::vector<MatchedTensor>> MatchTensors(const ModelConfig& config,
                                                const std::vector<io::NdArray>& input,
                                                const std::string& source_name,
                                                const Mapping& mapping) {
  SPRIG_ASSIGN_OR_RETURN(std::vector<MappedTensor> mapped, ApplyMapping(mapping, input));
  const std::vector<TensorSpec> specs = ExpectedTensors(config);
  std::unordered_map<std::string, size_t> spec_index;
  for (size_t s = 0; s < specs.size(); ++s) spec_index.emplace(specs[s].name, s);

  std::vector<Problem> problems;
  std::vector<Unused> unused;  // arrays no spec claims
  std::vector<int64_t> claimed(specs.size(), -1);
  auto array_of = [&](size_t a) -> const io::NdArray& { return *mapped[a].array; };
  auto shown = [&](size_t a) {  // a tensor's name in messages: ours, and where it came from
    const MappedTensor& m = mapped[a];
    return m.origin.empty() ? Name(m.name) : Name(m.name) + " (" + m.origin + ")";
  };

  for (size_t a = 0; a < mapped.size(); ++a) {
    const MappedTensor& m = mapped[a];
    auto s = spec_index.find(m.name);
    const uint64_t late = specs.size() + a;
    if (s == spec_index.end()) {
      unused.push_back({m.name, m.action});
      if (!m.action.empty()) {
        problems.push_back({late, [&, a] {
                              return "the mapping file " + mapped[a].action + " " +
                                     Name(mapped[a].name) +
                                     ", which is not a tensor this config has";
                            }});
      } else {
        problems.push_back({late, [&, a] {
                              return "unexpected tensor " + Name(mapped[a].name) + " with shape " +
                                     ShapeToString(array_of(a).shape) +
                                     ": the config has no tensor of that name";
                            }});
      }
      continue;
    }
    const size_t spec = s->second;
    if (claimed[spec] >= 0) {
      const size_t first = static_cast<size_t>(claimed[spec]);
      problems.push_back({spec, [&, first, a] {
                            return "both " + shown(first) + " and " + shown(a) +
                                   " would be tensor " + Name(mapped[a].name) +
                                   "; check the mapping file";
                          }});
      continue;
    }
    claimed[spec] = static_cast<int64_t>(a);
  }

  for (size_t s = 0; s < specs.size(); ++s) {
    const TensorSpec& spec = specs[s];
    if (claimed[s] < 0) {
      problems.push_back({s, [&, s] {
                            return "tensor " + Name(specs[s].name) + " with shape " +
                                   ShapeToString(specs[s].shape) + " is missing" +
                                   RenameHint(specs[s].name, unused);
                          }});
      continue;
    }
    const size_t a = static_cast<size_t>(claimed[s]);
    const io::NdArray& array = *mapped[a].array;
    if (array.shape != spec.shape) {
      problems.push_back({s, [&, s, a] {
                            return shown(a) + " has shape " + ShapeToString(array_of(a).shape) +
                                   " but the config needs " + ShapeToString(specs[s].shape);
                          }});
      continue;
    }
    if (!IsWeightType(array.type)) {
      problems.push_back({s, [&, a] {
                            return shown(a) + " has element type " +
                                   io::ElementTypeName(array_of(a).type) +
                                   ", but weights must be float64, float32, float16 or bfloat16";
                          }});
      continue;
    }
    // The shape equals the spec's, so its element count is within the config's limits.
    const uint64_t count = ElementCount(spec.shape);
    if (array.data == nullptr && count > 0) {
      problems.push_back({s, [&, a] { return shown(a) + " has no data"; }});
      continue;
    }
    if (auto bad = FindNonFinite(array.type, array.data, count)) {
      const NonFiniteValue v = *bad;
      problems.push_back({s, [&, s, a, v] {
                            return shown(a) + " has a " + ToString(v.kind) + " at flat index " +
                                   std::to_string(v.index) + " (element " +
                                   ElementIndex(v.index, specs[s].shape) +
                                   "); weights must be finite";
                          }});
    }
  }

  if (!problems.empty()) {
    const auto first =
        std::min_element(problems.begin(), problems.end(),
                         [](const Problem& x, const Problem& y) { return x.order < y.order; });
    return Status::InvalidArgument(source_name + ": " + first->describe() +
                                   MoreProblems(problems.size() - 1));
  }
  std::vector<MatchedTensor> matched;
  matched.reserve(specs.size());
  for (size_t s = 0; s < specs.size(); ++s) {
    MappedTensor& m = mapped[static_cast<size_t>(claimed[s])];
    matched.push_back({specs[s], m.array, std::move(m.made)});
  }
  return matched;
}

}  // namespace sprig::convert
