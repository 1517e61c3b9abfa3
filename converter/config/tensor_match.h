// Matching a weights file against the tensors a config requires (docs/input-contract.md):
// every expected tensor present once, with the right shape, a floating-point type and finite
// values; nothing else present.
#pragma once

#include <memory>
#include <string>
#include <vector>

#include "converter/config/config_json.h"
#include "converter/config/mapping.h"
#include "io/ndarray.h"
#include "io/tensor_archive.h"
#include "model/tensor_spec.h"
#include "sprig/config.h"
#include "sprig/status.h"

namespace sprig::convert {

struct MatchedTensor {
  TensorSpec spec;
  // Points into the archive (or vector) passed in, or at `made`.
  const io::NdArray* source = nullptr;
  // A tensor the mapping built (stacked, split or transposed), held here so it lives as long
  // as the match; null for a tensor taken from the input as it is (renamed or not).
  std::shared_ptr<const io::NdArray> made;
};

// Checks the archive against ExpectedTensors(config) after applying `mapping` (ApplyMapping:
// their names → ours; names no entry matches are taken as they are; entries matching no array
// are ignored). On success returns one entry per expected tensor, in ExpectedTensors order; the
// pointers stay valid as long as the archive and the result do. `config` must be validated
// (ParseConfig).
//
// The mapping's own errors come first (they name the mapping file). Problems found then: a
// missing tensor (with its expected shape, and a --map hint when a close name exists), an
// extra tensor, a wrong shape, an element type other than float64, float32, float16 or
// bfloat16, a NaN or infinity (with its flat index), a mapped name that is not an expected
// one, and two arrays that end up with the same name. A mapped tensor is named with where it
// came from: "experts.fc1.weight (stacked from moe.experts.{e}.w1.weight)". The error is
// InvalidArgument and describes the first problem in ExpectedTensors order (problems with extra
// arrays come after, in file order), then says how many others there are: "... (and 3 more
// problems)".
Result<std::vector<MatchedTensor>> MatchTensors(const ModelConfig& config,
                                                const io::TensorArchive& archive,
                                                const Mapping& mapping);

// The same over arrays in memory; `source_name` names them in errors (normally the file).
Result<std::vector<MatchedTensor>> MatchTensors(const ModelConfig& config,
                                                const std::vector<io::NdArray>& arrays,
                                                const std::string& source_name,
                                                const Mapping& mapping);

}  // namespace sprig::convert
