// BPE segmentation as SentencePiece does it: characters (user-defined symbols whole and never
// merged), then repeatedly the adjacent pair that forms the best-scored piece, leftmost first;
// unused pieces that result are split back into the pieces they were merged from.
#pragma once

#include <string_view>
#include <vector>

#include "tokenizer/vocabulary.h"

namespace sprig::tokenizer {

std::vector<Segment> EncodeBpe(const Vocabulary& vocabulary, std::string_view normalized);

}  // namespace sprig::tokenizer
