#include "tokenizer/charsmap.h"

#include <cstring>

#include "tokenizer/utf8.h"

namespace sprig::tokenizer {
namespace {

// A Darts-clone unit: a node (label, offset to its children, whether a key ends here) or, with
// the top bit set, the value of the key that ends at its parent.
bool IsValueUnit(uint32_t unit) {
  return (unit >> 31) != 0;
}
bool HasLeaf(uint32_t unit) {
  return ((unit >> 8) & 1) != 0;
}
uint32_t ValueOf(uint32_t unit) {
  return unit & 0x7FFFFFFFu;
}
uint32_t LabelOf(uint32_t unit) {
  return unit & (0x80000000u | 0xFFu);
}
uint32_t OffsetOf(uint32_t unit) {
  return (unit >> 10) << ((unit & (1u << 9)) >> 6);
}

uint32_t ReadLe32(const char* p) {
  const auto* b = reinterpret_cast<const uint8_t*>(p);
  return uint32_t{b[0]} | uint32_t{b[1]} << 8 | uint32_t{b[2]} << 16 | uint32_t{b[3]} << 24;
}

}  // namespace

Result<CharsMap> CharsMap::Parse(std::string_view blob, const std::string& field) {
  CharsMap map;
  if (blob.empty()) return map;
  if (blob.size() <= 4) {
    return Status::Corruption(field + " is " + std::to_string(blob.size()) +
                              " bytes, too short for its trie size");
  }
  const uint32_t trie_size = ReadLe32(blob.data());
  if (trie_size == 0 || trie_size % 4 != 0 || trie_size >= blob.size() - 4) {
    return Status::Corruption(field + ": trie size " + std::to_string(trie_size) +
                              " is not a positive multiple of 4 below the rules' " +
                              std::to_string(blob.size() - 4) + " bytes");
  }
  map.units_.resize(trie_size / 4);
  for (size_t i = 0; i < map.units_.size(); ++i) map.units_[i] = ReadLe32(blob.data() + 4 + 4 * i);
  map.replacements_ = std::string(blob.substr(4 + trie_size));
  if (map.replacements_.back() != '\0') {
    return Status::Corruption(field + ": the replacement strings do not end with NUL");
  }
  // Replacements become the normalized text, which the algorithms step through by character.
  if (!IsValidUtf8(map.replacements_)) {
    return Status::Corruption(field + ": the replacement strings are not valid UTF-8");
  }
  // Every key's value must point into the replacement strings; any node's children block may
  // still fall outside the trie, which the lookup checks step by step.
  const size_t count = map.units_.size();
  for (size_t i = 0; i < count; ++i) {
    const uint32_t unit = map.units_[i];
    if (IsValueUnit(unit) || !HasLeaf(unit)) continue;
    const size_t value_at = i ^ OffsetOf(unit);
    if (value_at >= count || !IsValueUnit(map.units_[value_at]) ||
        ValueOf(map.units_[value_at]) >= map.replacements_.size()) {
      return Status::Corruption(field + ": trie unit " + std::to_string(i) +
                                " has a value outside the replacement strings");
    }
  }
  return map;
}

size_t CharsMap::LongestMatch(std::string_view text, std::string_view* replacement) const {
  if (units_.empty()) return 0;
  const size_t count = units_.size();
  size_t longest = 0;
  size_t node = OffsetOf(units_[0]);
  for (size_t i = 0; i < text.size(); ++i) {
    const auto byte = static_cast<uint8_t>(text[i]);
    node ^= byte;
    if (node >= count) break;
    const uint32_t unit = units_[node];
    if (LabelOf(unit) != byte) break;
    node ^= OffsetOf(unit);
    if (node >= count) break;
    if (HasLeaf(unit) && IsValueUnit(units_[node])) {
      const char* start = replacements_.data() + ValueOf(units_[node]);
      *replacement = std::string_view(start, std::strlen(start));
      longest = i + 1;
    }
  }
  return longest;
}

}  // namespace sprig::tokenizer
