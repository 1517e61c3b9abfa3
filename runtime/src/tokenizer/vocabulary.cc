#include "tokenizer/vocabulary.h"

#include <algorithm>
#include <cfloat>

namespace sprig::tokenizer {
namespace {

bool IsSegmentable(PieceType type) {
  return type == PieceType::kNormal || type == PieceType::kUserDefined ||
         type == PieceType::kUnused;
}

std::vector<std::pair<std::string_view, int32_t>> EntriesOf(const TokenizerSpec& spec,
                                                            bool user_defined_only) {
  std::vector<std::pair<std::string_view, int32_t>> entries;
  for (size_t id = 0; id < spec.pieces.size(); ++id) {
    const PieceType type = spec.types[id];
    const bool wanted = user_defined_only ? type == PieceType::kUserDefined : IsSegmentable(type);
    if (wanted) entries.emplace_back(spec.pieces[id], static_cast<int32_t>(id));
  }
  return entries;
}

int HexDigit(char c) {
  if (c >= '0' && c <= '9') return c - '0';
  if (c >= 'A' && c <= 'F') return c - 'A' + 10;
  return -1;
}

}  // namespace

int ByteOfPiece(std::string_view piece) {
  if (piece.size() != 6 || !piece.starts_with("<0x") || piece[5] != '>') return -1;
  const int high = HexDigit(piece[3]), low = HexDigit(piece[4]);
  if (high < 0 || low < 0) return -1;
  return high * 16 + low;
}

Vocabulary::Vocabulary(const TokenizerSpec& spec)
    : spec_(spec), pieces_(EntriesOf(spec_, false)), user_symbols_(EntriesOf(spec_, true)) {
  byte_ids_.fill(-1);
  min_score_ = FLT_MAX;
  max_score_ = FLT_MIN;
  for (size_t id = 0; id < spec_.pieces.size(); ++id) {
    const auto i = static_cast<int32_t>(id);
    const PieceType type = spec_.types[id];
    if (!IsSegmentable(type)) reserved_.emplace(spec_.pieces[id], i);
    if (type == PieceType::kByte) byte_ids_[ByteOfPiece(spec_.pieces[id])] = i;
    if (type == PieceType::kNormal) {
      min_score_ = std::min(min_score_, spec_.scores[id]);
      max_score_ = std::max(max_score_, spec_.scores[id]);
    }
  }
}

int32_t Vocabulary::IdOf(std::string_view piece) const {
  if (auto it = reserved_.find(piece); it != reserved_.end()) return it->second;
  const int32_t id = pieces_.Find(piece);
  return id >= 0 ? id : spec_.unk_id;
}

}  // namespace sprig::tokenizer
