// Matching a weights file against the tensors a config requires (docs/input-contract.md):
// every expected tensor present once, with the right shape, a floating-point type and finite
// values; nothing else present.
#pragma once

#include <string>
#include <vector>

#include "converter/config/config_json.h"
#include "io/ndarray.h"
#include "io/tensor_archive.h"
#include "model/tensor_spec.h"
#include "sprig/config.h"
#include "sprig/status.h"

namespace sprig::convert {

struct MatchedTensor {
  TensorSpec spec;
  const io::NdArray* source;  // points into the archive (or vector) passed in
};

// Checks the archive against ExpectedTensors(config) after applying `rename` (their name → our
// name; names not in the map are taken as they are; entries naming no array are ignored).
// On success returns one entry per expected tensor, in ExpectedTensors order; the pointers stay
// valid as long as the archive does. `config` must be validated (ParseConfig).
//
// Problems found: a missing tensor (with its expected shape, and a --rename hint when a close
// name exists), an extra tensor, a wrong shape, an element type other than float64, float32,
// float16 or bfloat16, a NaN or infinity (with its flat index), a rename target that is not an
// expected name, and two arrays that end up with the same name. The error is InvalidArgument
// and describes the first problem in ExpectedTensors order (problems with extra arrays come
// after, in file order), then says how many others there are: "... (and 3 more problems)".
Result<std::vector<MatchedTensor>> MatchTensors(const ModelConfig& config,
                                                const io::TensorArchive& archive,
                                                const RenameMap& rename);

// The same over arrays in memory; `source_name` names them in errors (normally the file).
Result<std::vector<MatchedTensor>> MatchTensors(const ModelConfig& config,
                                                const std::vector<io::NdArray>& arrays,
                                                const std::string& source_name,
                                                const RenameMap& rename);

}  // namespace sprig::convert
