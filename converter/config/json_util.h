// Helpers shared by the config and mapping-file readers: strict JSON parsing with located errors,
// bounded file reading, and short descriptions of JSON values for error messages.
#pragma once

#include <cstdint>
#include <string>

#include <nlohmann/json.hpp>

#include "sprig/status.h"

namespace sprig::convert::internal {

// Parses `text` as one JSON document. Errors read "SOURCE: invalid JSON at line L, column C:
// ..." and a key that appears twice in one object is refused (plain JSON parsers keep the last
// one silently, which would hide a mistake in a config).
Result<nlohmann::json> ParseJsonText(const std::string& text, const std::string& source);

// Reads a whole file of at most `max_bytes` bytes. `what` names the file's role in errors
// ("config", "mapping").
Result<std::string> ReadTextFile(const std::string& path, uint64_t max_bytes, const char* what);

// A value as it appears in JSON, shortened to about 40 characters: "\"six\"", "-3", "[1,2]".
std::string DescribeJson(const nlohmann::json& value);

// "\"text\"" with quotes, backslashes and control or non-ASCII bytes escaped, so a hostile
// name cannot garble a terminal or an error log.
std::string Quote(const std::string& text);

}  // namespace sprig::convert::internal
