// The mapping file of `sprig pack --map` (docs/mapping.md): their tensor names → ours, with
// renaming by pattern, transposing, stacking indexed tensors into one and splitting a fused
// tensor into several. The same file is read by the Python exporter (sprig_torch.export).
//
// All functions are pure (no global state) and safe to call from any thread.
#pragma once

#include <cstdint>
#include <map>
#include <memory>
#include <string>
#include <vector>

#include "io/ndarray.h"
#include "sprig/status.h"

namespace sprig::convert {

// One part of a split: our name (a pattern) and its half-open range along the split axis.
struct SplitPart {
  std::string name;
  uint64_t begin = 0;
  uint64_t end = 0;
};

// One entry of the file: a key (their name, or a pattern with {placeholders}) and what becomes
// of every tensor it matches.
struct MappingEntry {
  enum class Kind : uint8_t { kRename, kStack, kSplit };
  std::string key;
  Kind kind = Kind::kRename;
  std::string to;          // kRename: our name; kStack: the stacked tensor's name (patterns)
  std::string over;        // kStack: the placeholder whose values number the parts
  bool transpose = false;  // swap the last two axes (of each part, for stack and split)
  // kSplit: the parts in order along the axis. With equal_parts the ranges are found when the
  // tensor's size is known (begin and end are 0 until then).
  std::vector<SplitPart> parts;
  bool equal_parts = false;
  int64_t axis = 0;  // kSplit: negative counts from the last axis
  // The key and `to` are names taken as they are, not patterns (RenameMapping's entries).
  bool literal = false;
};

struct Mapping {
  std::string source;  // the file, named in every error
  std::vector<MappingEntry> entries;
  bool empty() const { return entries.empty(); }
};

// Parses a mapping file's text; `source` names it in errors. Every check that does not need
// the tensors is made here: the value forms, unknown fields, placeholders (a value may use only
// the key's, and must use all of them but a stack's `over`), split ranges that overlap or leave
// a gap, and two entries giving one literal name. Errors are InvalidArgument, one sentence:
//   "map.json: entry \"h.{i}.w\": unknown field \"trasnpose\" (expected to, transpose)"
Result<Mapping> ParseMapping(const std::string& json_text, const std::string& source);
// Reads the file (at most kMaxMappingFileBytes) and parses it with its path as `source`.
Result<Mapping> ReadMapping(const std::string& path);

// A mapping of plain renames ({"their.name": "our.name"}), for callers that build one in
// memory. Names are taken literally (no placeholders).
Mapping RenameMapping(const std::map<std::string, std::string>& renames,
                      const std::string& source = "the rename map");

// A tensor after mapping: under our name, from one of the arrays given (renamed or untouched,
// never copied) or made by the mapping (stacked, split or transposed) and owned by `made`.
struct MappedTensor {
  std::string name;
  const io::NdArray* array = nullptr;  // into the arrays given, or made.get()
  std::shared_ptr<const io::NdArray> made;
  // Where it came from, for messages; both empty when no entry matched it.
  std::string origin;  // "renamed from x", "stacked from moe.0.experts.{e}.w1.weight", ...
  std::string action;  // "renames x to", "stacks moe.0.experts.{e}.w1.weight into", ...
};

// Applies `mapping` to `arrays` (in file order). Arrays no entry matches pass through under
// their own name. The result is in file order, a stack at the place of its first part. Errors
// name the mapping file, the entry and the tensors: a tensor two entries match, a missing
// stack index, stack parts of different shape or element type, a split range past the end or
// short of it, an equal split that does not divide, an axis out of range, a transpose of a
// tensor with fewer than two axes, and two tensors given one name by the mapping.
// Renamed tensors are not copied; stacked and transposed ones are built in memory, and split
// parts too unless they are contiguous in the source (a split along the first axis).
Result<std::vector<MappedTensor>> ApplyMapping(const Mapping& mapping,
                                               const std::vector<io::NdArray>& arrays);

}  // namespace sprig::convert
