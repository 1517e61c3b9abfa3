// Semantic validation of a ModelConfig: ranges, consistency and size limits. The converter runs
// it after parsing config.json and the loader runs it on every header it opens, so a hostile
// file can never make later code overflow or allocate absurd amounts.
#pragma once

#include <cstdint>
#include <string>

#include "sprig/config.h"
#include "sprig/status.h"

namespace sprig {

// Documented limits (docs/input-contract.md, "Limits").
inline constexpr uint64_t kMaxDimension = uint64_t{1} << 24;  // any width, vocab, max_seq
inline constexpr uint32_t kMaxLeafDepth = 20;
inline constexpr uint32_t kMaxPathDepth = 22;
inline constexpr uint32_t kMaxExperts = 4096;
inline constexpr size_t kMaxLayers = 1024;
inline constexpr uint64_t kMaxTensorElements = uint64_t{1} << 36;
inline constexpr uint64_t kMaxTotalElements = uint64_t{1} << 38;

// `source` names the config (file) in messages, e.g. "config.json" or "model.sprig header".
Status ValidateConfig(const ModelConfig& config, const std::string& source);

}  // namespace sprig
