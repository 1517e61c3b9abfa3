#include "converter/tokenizer/sentencepiece_model.h"

#ifdef SPRIG_HAVE_SENTENCEPIECE
#include <sentencepiece_processor.h>

#include <cstdio>
#include <memory>

#include "base/status_macros.h"
#include "converter/tokenizer/model_proto.h"
#include "platform/files.h"
#endif

namespace sprig::convert {

#ifndef SPRIG_HAVE_SENTENCEPIECE

Result<tokenizer::TokenizerSpec> ReadSentencePieceModel(const std::string& path) {
  return Status::NotSupported(path +
                              ": this build of sprig has no SentencePiece reader (it was built "
                              "without libsentencepiece)");
}

#else

namespace {

Result<std::string> ReadWholeFile(const std::string& path) {
  std::unique_ptr<std::FILE, int (*)(std::FILE*)> file(platform::OpenFile(path, "rb"),
                                                       &std::fclose);
  if (!file) return Status::IOError(path + ": cannot open the file");
  std::string bytes;
  char buffer[1 << 16];
  size_t got;
  while ((got = std::fread(buffer, 1, sizeof buffer, file.get())) > 0) bytes.append(buffer, got);
  if (std::ferror(file.get())) return Status::IOError(path + ": cannot read the file");
  return bytes;
}

// SentencePiece's type of a piece, from the processor's questions, and the proto's type where
// the processor cannot tell (user-defined pieces).
tokenizer::PieceType TypeOf(const sentencepiece::SentencePieceProcessor& processor, int id,
                            int proto_type) {
  using tokenizer::PieceType;
  if (processor.IsUnknown(id)) return PieceType::kUnknown;
  if (processor.IsControl(id)) return PieceType::kControl;
  if (processor.IsUnused(id)) return PieceType::kUnused;
  if (processor.IsByte(id)) return PieceType::kByte;
  return proto_type == 4 ? PieceType::kUserDefined : PieceType::kNormal;
}

Status CheckSupported(const std::string& path, const ModelProtoFields& fields) {
  if (fields.model_type != 1 && fields.model_type != 2) {
    return Status::NotSupported(path + ": model_type " + std::to_string(fields.model_type) +
                                " (word or char) is not supported; sprig reproduces unigram "
                                "and BPE models only");
  }
  if (fields.denormalizer_has_rules) {
    return Status::NotSupported(path +
                                ": the model has denormalization rules, which sprig "
                                "does not apply");
  }
  return Status::Ok();
}

}  // namespace

Result<tokenizer::TokenizerSpec> ReadSentencePieceModel(const std::string& path) {
  SPRIG_ASSIGN_OR_RETURN(const std::string bytes, ReadWholeFile(path));
  sentencepiece::SentencePieceProcessor processor;
  if (const auto status = processor.LoadFromSerializedProto(bytes); !status.ok()) {
    return Status::InvalidArgument(path + " is not a SentencePiece model: " + status.ToString());
  }
  auto fields = ReadModelProtoFields(bytes);
  if (!fields.ok()) {
    return Status::InvalidArgument(path +
                                   " is not a SentencePiece model: " + fields.status().message());
  }
  SPRIG_RETURN_IF_ERROR(CheckSupported(path, *fields));
  const int count = processor.GetPieceSize();
  if (static_cast<size_t>(count) != fields->piece_types.size()) {
    return Status::InvalidArgument(path + ": the library reports " + std::to_string(count) +
                                   " pieces, the model's bytes hold " +
                                   std::to_string(fields->piece_types.size()));
  }
  tokenizer::TokenizerSpec spec;
  spec.algorithm =
      fields->model_type == 2 ? tokenizer::Algorithm::kBpe : tokenizer::Algorithm::kUnigram;
  for (int id = 0; id < count; ++id) {
    spec.pieces.push_back(processor.IdToPiece(id));
    spec.scores.push_back(processor.GetScore(id));
    spec.types.push_back(TypeOf(processor, id, fields->piece_types[id]));
  }
  spec.precompiled_charsmap = fields->precompiled_charsmap;
  spec.add_dummy_prefix = fields->add_dummy_prefix;
  spec.remove_extra_whitespaces = fields->remove_extra_whitespaces;
  spec.escape_whitespaces = fields->escape_whitespaces;
  spec.treat_whitespace_as_suffix = fields->treat_whitespace_as_suffix;
  spec.byte_fallback = fields->byte_fallback;
  if (fields->has_unk_surface) spec.unk_surface = fields->unk_surface;
  spec.unk_id = processor.unk_id();
  spec.bos_id = processor.bos_id();
  spec.eos_id = processor.eos_id();
  spec.pad_id = processor.pad_id();
  return spec;
}

#endif

}  // namespace sprig::convert
