#include "tokenizer/sentencepiece_tokenizer.h"

#include "base/status_macros.h"
#include "tokenizer/bpe.h"
#include "tokenizer/section.h"
#include "tokenizer/unigram.h"
#include "tokenizer/utf8.h"

namespace sprig::tokenizer {
namespace {

NormalizerOptions OptionsOf(const TokenizerSpec& spec) {
  NormalizerOptions options;
  options.add_dummy_prefix = spec.add_dummy_prefix;
  options.remove_extra_whitespaces = spec.remove_extra_whitespaces;
  options.escape_whitespaces = spec.escape_whitespaces;
  options.treat_whitespace_as_suffix = spec.treat_whitespace_as_suffix;
  return options;
}

std::string SpacesOf(std::string_view piece) {
  std::string out;
  while (!piece.empty()) {
    if (piece.starts_with(kSpaceSymbol)) {
      out.push_back(' ');
      piece.remove_prefix(kSpaceSymbol.size());
    } else {
      out.push_back(piece.front());
      piece.remove_prefix(1);
    }
  }
  return out;
}

}  // namespace

SentencePieceTokenizer::SentencePieceTokenizer(const TokenizerSpec& spec, CharsMap charsmap)
    : vocabulary_(std::make_unique<Vocabulary>(spec)),
      charsmap_(std::move(charsmap)),
      normalizer_(charsmap_, vocabulary_->user_symbols(), OptionsOf(spec)) {
  const TokenizerSpec& s = vocabulary_->spec();
  surfaces_.resize(s.pieces.size());
  first_surfaces_.resize(s.pieces.size());
  // SentencePiece drops the first piece's leading space only when the normalizer could have
  // put it there (a dummy prefix, or spaces removed at the start).
  const bool drop_leading_space = s.add_dummy_prefix || s.remove_extra_whitespaces;
  for (size_t id = 0; id < s.pieces.size(); ++id) {
    std::string_view piece = s.pieces[id];
    surfaces_[id] = SpacesOf(piece);
    if (drop_leading_space && piece.starts_with(kSpaceSymbol))
      piece.remove_prefix(kSpaceSymbol.size());
    first_surfaces_[id] = SpacesOf(piece);
  }
}

std::vector<int32_t> SentencePieceTokenizer::Encode(std::string_view text) const {
  const std::string normalized = normalizer_.Normalize(text);
  const std::vector<Segment> segments = vocabulary_->spec().algorithm == Algorithm::kBpe
                                            ? EncodeBpe(*vocabulary_, normalized)
                                            : EncodeUnigram(*vocabulary_, normalized);
  std::vector<int32_t> ids;
  ids.reserve(segments.size());
  AppendIds(segments, ids);
  return ids;
}

void SentencePieceTokenizer::AppendIds(const std::vector<Segment>& segments,
                                       std::vector<int32_t>& ids) const {
  const bool byte_fallback = vocabulary_->spec().byte_fallback;
  bool previous_unknown = false;
  for (const auto& [piece, id] : segments) {
    const bool unknown = vocabulary_->type(id) == PieceType::kUnknown;
    if (unknown && byte_fallback) {
      for (char c : piece) ids.push_back(vocabulary_->byte_id(static_cast<uint8_t>(c)));
    } else if (!(unknown && previous_unknown)) {
      ids.push_back(id);
    }
    previous_unknown = unknown;
  }
}

std::string SentencePieceTokenizer::Piece(int32_t id) const {
  if (id < 0 || static_cast<size_t>(id) >= vocabulary_->spec().pieces.size()) return "";
  return vocabulary_->spec().pieces[id];
}

Status SentencePieceTokenizer::DecodeStep(int32_t id, size_t position, DecodeState& state,
                                          std::string& out) const {
  const TokenizerSpec& s = vocabulary_->spec();
  if (id < 0 || static_cast<size_t>(id) >= s.pieces.size()) {
    return Status::InvalidArgument("token " + std::to_string(position) + " is " +
                                   std::to_string(id) + ", outside the vocabulary of " +
                                   std::to_string(s.pieces.size()) + " pieces");
  }
  const size_t before = out.size();
  const PieceType type = s.types[id];
  if (type == PieceType::kByte) {
    // A run of byte pieces is read as UTF-8; a byte that starts no valid character is U+FFFD.
    state.pending_bytes.push_back(static_cast<char>(ByteOfPiece(s.pieces[id])));
    MoveDecidedBytes(state.pending_bytes, out, /*replace_invalid=*/true, /*final=*/false);
  } else {
    MoveDecidedBytes(state.pending_bytes, out, /*replace_invalid=*/true, /*final=*/true);
    if (out.size() > before) state.started = true;
    if (type == PieceType::kUnknown) {
      out.append(s.unk_surface);
    } else if (type != PieceType::kControl) {  // control pieces have no text
      out.append(state.started ? surfaces_[id] : first_surfaces_[id]);
    }
  }
  if (out.size() > before) state.started = true;
  return Status::Ok();
}

void SentencePieceTokenizer::DecodeFinish(DecodeState& state, std::string& out) const {
  MoveDecidedBytes(state.pending_bytes, out, /*replace_invalid=*/true, /*final=*/true);
  state = DecodeState();
}

Result<std::unique_ptr<Tokenizer>> OpenSentencePiece(const uint8_t* data, size_t size,
                                                     uint32_t vocab_size) {
  SPRIG_ASSIGN_OR_RETURN(TokenizerSpec spec, ParseSection(data, size, vocab_size));
  SPRIG_ASSIGN_OR_RETURN(
      CharsMap charsmap,
      CharsMap::Parse(spec.precompiled_charsmap, "tokenizer section: precompiled_charsmap"));
  return std::unique_ptr<Tokenizer>(
      std::make_unique<SentencePieceTokenizer>(spec, std::move(charsmap)));
}

}  // namespace sprig::tokenizer
