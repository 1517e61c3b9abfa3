// Unigram segmentation: the Viterbi path over piece scores, as SentencePiece's optimized encoder
// computes it (same arithmetic, same ties).
#pragma once

#include <string_view>
#include <vector>

#include "tokenizer/vocabulary.h"

namespace sprig::tokenizer {

std::vector<Segment> EncodeUnigram(const Vocabulary& vocabulary, std::string_view normalized);

}  // namespace sprig::tokenizer
