// Reading a SentencePiece .model file into the spec the tokenizer section stores.
#pragma once

#include <string>

#include "sprig/status.h"
#include "tokenizer/tokenizer.h"

namespace sprig::convert {

// Reads a SentencePiece .model file with libsentencepiece (pieces, scores, types and special
// ids through SentencePieceProcessor; the normalizer and trainer fields the library's API does
// not expose from the serialized ModelProto, with a small wire-format reader). Errors name the
// file and say what is wrong. A model sprig cannot reproduce (WORD or CHAR models, a
// denormalizer with rules) is refused. In a build without the library: NotSupported.
Result<tokenizer::TokenizerSpec> ReadSentencePieceModel(const std::string& path);

}  // namespace sprig::convert
