// The few fields of a serialized SentencePiece ModelProto that the library's API does not
// expose, read straight from the protocol buffer wire format. Field numbers are those of
// sentencepiece_model.proto.
#pragma once

#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

#include "sprig/status.h"

namespace sprig::convert {

struct ModelProtoFields {
  // TrainerSpec (ModelProto field 2).
  int model_type = 1;  // 1 unigram, 2 BPE, 3 word, 4 char
  bool byte_fallback = false, treat_whitespace_as_suffix = false;
  bool has_unk_surface = false;
  std::string unk_surface;
  // NormalizerSpec (field 3), with the proto's defaults.
  std::string normalizer_name, precompiled_charsmap;
  bool add_dummy_prefix = true, remove_extra_whitespaces = true, escape_whitespaces = true;
  // Whether a denormalizer (field 5) carries rules, which sprig does not apply.
  bool denormalizer_has_rules = false;
  // The type of every piece (field 1, SentencePiece.type), NORMAL when absent.
  std::vector<int> piece_types;
};

// Fails with a sentence saying where the bytes stop making sense.
Result<ModelProtoFields> ReadModelProtoFields(std::string_view serialized);

}  // namespace sprig::convert
