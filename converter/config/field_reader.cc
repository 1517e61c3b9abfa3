#include "converter/config/field_reader.h"

#include <algorithm>
#include <cmath>
#include <cstring>

#include "converter/config/json_util.h"

namespace sprig::convert::internal {
namespace {

bool Contains(const std::vector<const char*>& list, const std::string& key) {
  return std::any_of(list.begin(), list.end(), [&](const char* k) { return key == k; });
}

std::string JoinNames(const std::vector<const char*>& names, const char* separator) {
  std::string out;
  for (size_t i = 0; i < names.size(); ++i) {
    if (i) out += separator;
    out += names[i];
  }
  return out;
}

// A JSON number that is a whole number >= 0 (written 64 or 64.0), as uint64; nullopt otherwise.
std::optional<uint64_t> AsWholeNumber(const nlohmann::json& v) {
  if (v.is_number_unsigned()) return v.get<uint64_t>();
  if (v.is_number_integer()) {
    const int64_t i = v.get<int64_t>();
    if (i >= 0) return static_cast<uint64_t>(i);
    return std::nullopt;
  }
  if (v.is_number_float()) {
    const double d = v.get<double>();
    // 2^64 is exactly representable; anything at or above it does not fit.
    if (std::isfinite(d) && d >= 0 && d < 18446744073709551616.0 && std::floor(d) == d) {
      return static_cast<uint64_t>(d);
    }
  }
  return std::nullopt;
}

}  // namespace

std::string FieldReader::FieldName(const char* key) const {
  return path_.empty() ? std::string(key) : path_ + "." + key;
}

Status FieldReader::Error(const std::string& message) const {
  return Status::InvalidArgument(source_ + ": " + message);
}

Status FieldReader::ObjectError(const std::string& message) const {
  return Error(path_.empty() ? message : path_ + ": " + message);
}

Status FieldReader::Missing(const char* key) const {
  return ObjectError(std::string("missing the required field \"") + key + "\"");
}

Status FieldReader::CheckKeys(const std::vector<const char*>& allowed,
                              const std::vector<const char*>& known,
                              const std::string& what) const {
  for (const auto& item : object_.items()) {
    const std::string& key = item.key();
    if (Contains(allowed, key)) continue;
    if (Contains(known, key)) {
      return ObjectError("field " + Quote(key) + " does not apply to " + what +
                         " (its fields are " + JoinNames(allowed, ", ") + ")");
    }
    return ObjectError("unknown field " + Quote(key) + " (expected one of " +
                       JoinNames(allowed, ", ") + ")");
  }
  return Status::Ok();
}

Status FieldReader::Uint(const char* key, uint64_t min, uint64_t max,
                         std::optional<uint64_t> fallback, uint32_t* out,
                         const std::string& note) const {
  auto it = object_.find(key);
  if (it == object_.end()) {
    if (!fallback) return Missing(key);
    *out = static_cast<uint32_t>(*fallback);
    return Status::Ok();
  }
  const std::optional<uint64_t> value = AsWholeNumber(*it);
  if (!value) {
    return Error(FieldName(key) + " must be a non-negative integer, got " + DescribeJson(*it));
  }
  if (*value < min || *value > max) {
    return Error(FieldName(key) + " must be between " + std::to_string(min) + " and " +
                 std::to_string(max) + note + ", got " + DescribeJson(*it));
  }
  *out = static_cast<uint32_t>(*value);
  return Status::Ok();
}

Status FieldReader::Bool(const char* key, bool fallback, bool* out) const {
  auto it = object_.find(key);
  if (it == object_.end()) {
    *out = fallback;
    return Status::Ok();
  }
  if (!it->is_boolean()) {
    return Error(FieldName(key) + " must be true or false, got " + DescribeJson(*it));
  }
  *out = it->get<bool>();
  return Status::Ok();
}

Status FieldReader::String(const char* key, size_t max_bytes, std::string* out) const {
  auto it = object_.find(key);
  if (it == object_.end()) {
    out->clear();
    return Status::Ok();
  }
  if (!it->is_string()) {
    return Error(FieldName(key) + " must be a string, got " + DescribeJson(*it));
  }
  const std::string& s = it->get_ref<const std::string&>();
  if (s.size() > max_bytes) {
    return Error(FieldName(key) + " must be at most " + std::to_string(max_bytes) +
                 " bytes long, got " + std::to_string(s.size()) + " bytes");
  }
  *out = s;
  return Status::Ok();
}

Status FieldReader::PositiveFloat(const char* key, float fallback, float* out) const {
  auto it = object_.find(key);
  if (it == object_.end()) {
    *out = fallback;
    return Status::Ok();
  }
  if (!it->is_number()) {
    return Error(FieldName(key) + " must be a positive number, got " + DescribeJson(*it));
  }
  const double d = it->get<double>();
  // The value is stored and used as a float32, so it must still be positive and finite there
  // (1e-50 would become 0, 1e50 infinity).
  const float f = static_cast<float>(d);
  if (!(d > 0) || !std::isfinite(f) || !(f > 0)) {
    return Error(FieldName(key) + " must be a positive number within the float32 range, got " +
                 DescribeJson(*it));
  }
  *out = f;
  return Status::Ok();
}

Status FieldReader::EnumIndex(const char* key, const std::vector<const char*>& names,
                              bool has_fallback, int* index) const {
  auto it = object_.find(key);
  if (it == object_.end()) {
    if (!has_fallback) return Missing(key);
    *index = -1;
    return Status::Ok();
  }
  if (it->is_string()) {
    const std::string& s = it->get_ref<const std::string&>();
    for (size_t i = 0; i < names.size(); ++i) {
      if (s == names[i]) {
        *index = static_cast<int>(i);
        return Status::Ok();
      }
    }
  }
  std::string choices;
  for (size_t i = 0; i < names.size(); ++i) {
    if (i) choices += i + 1 == names.size() ? " or " : ", ";
    choices += Quote(names[i]);
  }
  return Error(FieldName(key) + " must be " + (names.size() > 1 ? "one of " : "") + choices +
               ", got " + DescribeJson(*it));
}

}  // namespace sprig::convert::internal
