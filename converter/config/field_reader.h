// FieldReader: typed, range-checked access to the fields of one JSON object, with errors that
// name the field by its path in the document ("config.json: layers[0].depth must be ...").
#pragma once

#include <cstdint>
#include <initializer_list>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include <nlohmann/json.hpp>

#include "base/status_macros.h"
#include "sprig/status.h"

namespace sprig::convert::internal {

class FieldReader {
 public:
  // `object` must be a JSON object and outlive the reader. `path` locates it in the document:
  // "" for the top level, "head", "layers[2]". `source` names the file.
  FieldReader(const nlohmann::json& object, std::string path, std::string source)
      : object_(object), path_(std::move(path)), source_(std::move(source)) {}

  bool Has(const char* key) const { return object_.contains(key); }

  // Refuses any key not in `allowed`. A key in `known` (fields of other kinds of object) is
  // reported as not applying to `what` ("a dense layer"); any other key as unknown. Both
  // messages list the allowed fields.
  Status CheckKeys(const std::vector<const char*>& allowed, const std::vector<const char*>& known,
                   const std::string& what) const;

  // An integer in [min, max]. Absent: `fallback`, or an error naming the missing field when
  // there is none. `note` follows the range in errors (" for a leaf-mode tree").
  Status Uint(const char* key, uint64_t min, uint64_t max, std::optional<uint64_t> fallback,
              uint32_t* out, const std::string& note = "") const;
  Status Bool(const char* key, bool fallback, bool* out) const;
  // A string of at most `max_bytes` bytes; absent: "".
  Status String(const char* key, size_t max_bytes, std::string* out) const;
  // A number > 0 that stays finite and non-zero as a float32.
  Status PositiveFloat(const char* key, float fallback, float* out) const;

  // One of `choices` (name, value), e.g. {{"relu", Activation::kRelu}, ...}.
  template <typename E>
  Status Enum(const char* key, std::initializer_list<std::pair<const char*, E>> choices,
              std::optional<E> fallback, E* out) const {
    std::vector<const char*> names;
    for (const auto& c : choices) names.push_back(c.first);
    int index = -1;
    SPRIG_RETURN_IF_ERROR(EnumIndex(key, names, fallback.has_value(), &index));
    if (index < 0) {
      *out = *fallback;
    } else {
      *out = std::data(choices)[index].second;
    }
    return Status::Ok();
  }

  // "layers[0].depth" (or "depth" at the top level).
  std::string FieldName(const char* key) const;
  // An InvalidArgument status "SOURCE: MESSAGE".
  Status Error(const std::string& message) const;
  // An InvalidArgument status "SOURCE: PATH: MESSAGE" (or "SOURCE: MESSAGE" at the top level).
  Status ObjectError(const std::string& message) const;
  Status Missing(const char* key) const;

 private:
  // Sets *index to the matching choice, or -1 when the field is absent and has a default.
  Status EnumIndex(const char* key, const std::vector<const char*>& names, bool has_fallback,
                   int* index) const;

  const nlohmann::json& object_;
  std::string path_;
  std::string source_;
};

}  // namespace sprig::convert::internal
