// config.json: parsing and validation against the input contract.
//
// All functions are pure (no global state) and safe to call from any thread.
#pragma once

#include <string>

#include "converter/config/config_limits.h"
#include "sprig/config.h"
#include "sprig/status.h"

namespace sprig::convert {

// Parses and validates a config. `source` names the file in error messages. Every field's
// type and range is checked, unknown fields are refused, defaults are filled in (n_kv_heads
// from n_heads, a stack layer's `in` from the previous layer's `out`), and sizes are limited
// so that every tensor's byte count stays far below 2^63 (see config_limits.h).
//
// Errors are InvalidArgument, one sentence naming the field by its path:
//   "config.json: layers[2]: unknown field \"widht\" (expected one of kind, width, ...)"
//   "config.json: layers[0].depth must be a non-negative integer, got \"six\""
//   "config.json: invalid JSON at line 3, column 5: ..."
Result<ModelConfig> ParseConfig(const std::string& json_text, const std::string& source);
// Reads the file (at most kMaxConfigFileBytes) and parses it with its path as `source`.
// A missing file is NotFound, an unreadable one IOError.
Result<ModelConfig> ReadConfigFile(const std::string& path);

// Writes the canonical JSON form of a validated config (all fields, defaults explicit; one
// line per layer). ParseConfig(ConfigToJson(c)) == c.
std::string ConfigToJson(const ModelConfig& config);

}  // namespace sprig::convert
