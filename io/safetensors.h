// The .safetensors container. Internal to io/.
//
//   u64 N (little-endian) | N bytes of JSON header | data
//   header: {"NAME": {"dtype": "F32", "shape": [3, 4], "data_offsets": [BEGIN, END]}, ...,
//            "__metadata__": {"key": "value", ...} (optional)}
//   offsets are relative to the first byte after the header; writers pad the header with
//   spaces so the data starts on an 8-byte boundary.
#pragma once

#include <memory>
#include <string>
#include <vector>

#include "io/mapped_file.h"
#include "io/ndarray.h"
#include "sprig/status.h"

namespace sprig::io {

// Header lengths above this are refused rather than parsed.
inline constexpr uint64_t kMaxSafetensorsHeader = 100'000'000;

// Reads every tensor, sorted by data offset. Tensors point into the mapping.
Result<std::vector<NdArray>> ReadSafetensors(const std::shared_ptr<const MappedFile>& file,
                                             const std::string& path);

}  // namespace sprig::io
