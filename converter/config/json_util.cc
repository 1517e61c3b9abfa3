#include "converter/config/json_util.h"

#include <cerrno>
#include <cstdio>
#include <cstring>
#include <set>
#include <vector>

#include "platform/files.h"

namespace sprig::convert::internal {
namespace {

constexpr size_t kMaxDescribedChars = 40;

// Keeps printable ASCII and escapes everything else as \xNN.
std::string Printable(const std::string& text) {
  std::string out;
  out.reserve(text.size());
  for (unsigned char c : text) {
    if (c >= 0x20 && c < 0x7f) {
      out += static_cast<char>(c);
    } else {
      char buf[8];
      std::snprintf(buf, sizeof(buf), "\\x%02X", c);
      out += buf;
    }
  }
  return out;
}

// nlohmann's message is "[json.exception.parse_error.101] parse error at line 2, column 7:
// syntax error ..."; keep the part from "line" on so the position reads naturally after ours.
std::string ParseErrorDetail(const std::string& what) {
  const size_t at = what.find(" at line ");
  if (at != std::string::npos) return "invalid JSON" + Printable(what.substr(at));
  const size_t bracket = what.find("] ");
  return "invalid JSON: " +
         Printable(bracket == std::string::npos ? what : what.substr(bracket + 2));
}

}  // namespace

Result<nlohmann::json> ParseJsonText(const std::string& text, const std::string& source) {
  // One set of keys per open object; the callback sees keys before their values, so a repeat
  // is caught in the object it belongs to.
  std::vector<std::set<std::string>> open_objects;
  std::string duplicate;
  auto callback = [&](int /*depth*/, nlohmann::json::parse_event_t event, nlohmann::json& parsed) {
    using Event = nlohmann::json::parse_event_t;
    if (event == Event::object_start) {
      open_objects.emplace_back();
    } else if (event == Event::object_end) {
      if (!open_objects.empty()) open_objects.pop_back();
    } else if (event == Event::key && !open_objects.empty()) {
      const std::string& key = parsed.get_ref<const std::string&>();
      if (!open_objects.back().insert(key).second && duplicate.empty()) duplicate = key;
    }
    return true;
  };
  nlohmann::json value;
  // nlohmann reports errors by exception; they are caught here so none crosses our API.
  try {
    value = nlohmann::json::parse(text, callback, /*allow_exceptions=*/true,
                                  /*ignore_comments=*/false);
  } catch (const nlohmann::json::exception& e) {
    return Status::InvalidArgument(source + ": " + ParseErrorDetail(e.what()));
  }
  if (!duplicate.empty()) {
    return Status::InvalidArgument(source + ": field " + Quote(duplicate) +
                                   " appears twice in the same object");
  }
  return value;
}

Result<std::string> ReadTextFile(const std::string& path, uint64_t max_bytes, const char* what) {
  std::FILE* file = platform::OpenFile(path, "rb");
  if (file == nullptr) {
    const int err = errno;
    std::string message = path + ": cannot open the " + what + " file: " + std::strerror(err);
    if (err == ENOENT) return Status::NotFound(message);
    return Status::IOError(message);
  }
  std::string text;
  char buffer[1 << 16];
  size_t n;
  while ((n = std::fread(buffer, 1, sizeof(buffer), file)) > 0) {
    if (text.size() + n > max_bytes) {
      std::fclose(file);
      return Status::InvalidArgument(path + ": the " + what + " file is larger than " +
                                     std::to_string(max_bytes) + " bytes, the most accepted");
    }
    text.append(buffer, n);
  }
  const bool failed = std::ferror(file) != 0;
  const int err = errno;
  std::fclose(file);
  if (failed) {
    return Status::IOError(path + ": cannot read the " + what + " file: " + std::strerror(err));
  }
  return text;
}

std::string DescribeJson(const nlohmann::json& value) {
  std::string text =
      value.dump(-1, ' ', /*ensure_ascii=*/true, nlohmann::json::error_handler_t::replace);
  if (text.size() > kMaxDescribedChars) text = text.substr(0, kMaxDescribedChars - 3) + "...";
  return Printable(text);
}

std::string Quote(const std::string& text) {
  std::string out = "\"";
  for (unsigned char c : text) {
    if (c == '"' || c == '\\') {
      out += '\\';
      out += static_cast<char>(c);
    } else if (c >= 0x20 && c < 0x7f) {
      out += static_cast<char>(c);
    } else {
      char buf[8];
      std::snprintf(buf, sizeof(buf), "\\x%02X", c);
      out += buf;
    }
  }
  return out + "\"";
}

}  // namespace sprig::convert::internal
