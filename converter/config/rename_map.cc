// ReadRenameMap / ParseRenameMap: the --rename file, {"their.name": "our.name", ...}.
#include <map>
#include <string>

#include "base/status_macros.h"
#include "converter/config/config_json.h"
#include "converter/config/config_limits.h"
#include "converter/config/json_util.h"

namespace sprig::convert {

using internal::DescribeJson;
using internal::Quote;

Result<RenameMap> ParseRenameMap(const std::string& json_text, const std::string& source) {
  SPRIG_ASSIGN_OR_RETURN(nlohmann::json root, internal::ParseJsonText(json_text, source));
  if (!root.is_object()) {
    return Status::InvalidArgument(
        source +
        ": a rename map must be a JSON object of \"their name\": \"our name\" pairs, got " +
        DescribeJson(root));
  }
  RenameMap map;
  std::map<std::string, std::string> source_of;  // our name → their name, to find collisions
  for (const auto& item : root.items()) {
    const std::string& from = item.key();
    if (!item.value().is_string()) {
      return Status::InvalidArgument(source + ": the new name for " + Quote(from) +
                                     " must be a string, got " + DescribeJson(item.value()));
    }
    const std::string& to = item.value().get_ref<const std::string&>();
    if (from.empty() || to.empty()) {
      return Status::InvalidArgument(source + ": " +
                                     (from.empty() ? std::string("a name") : Quote(from)) +
                                     " maps to or from an empty name");
    }
    auto [it, inserted] = source_of.emplace(to, from);
    if (!inserted) {
      return Status::InvalidArgument(source + ": both " + Quote(it->second) + " and " +
                                     Quote(from) + " are renamed to " + Quote(to));
    }
    map.emplace(from, to);
  }
  return map;
}

Result<RenameMap> ReadRenameMap(const std::string& path) {
  SPRIG_ASSIGN_OR_RETURN(std::string text,
                         internal::ReadTextFile(path, kMaxRenameFileBytes, "rename map"));
  return ParseRenameMap(text, path);
}

}  // namespace sprig::convert
