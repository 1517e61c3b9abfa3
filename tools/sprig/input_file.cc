#include "input_file.h"

#include <algorithm>
#include <cstring>

#include "base/status_macros.h"
#include "cli.h"
#include "io/tensor_archive.h"
#include "sha256.h"

namespace sprig::cli {
namespace {

// The offset of the first byte that breaks UTF-8 (RFC 3629: no overlong forms, no surrogates,
// nothing above U+10FFFF), or npos when the whole text is valid.
size_t FirstInvalidUtf8(std::string_view s) {
  const auto* p = reinterpret_cast<const unsigned char*>(s.data());
  const size_t n = s.size();
  for (size_t i = 0; i < n;) {
    const unsigned char c = p[i];
    size_t len = 0;
    uint32_t lo = 0x80, hi = 0xBF;  // allowed range of the second byte
    if (c < 0x80) {
      ++i;
      continue;
    } else if (c >= 0xC2 && c <= 0xDF) {
      len = 2;
    } else if (c >= 0xE0 && c <= 0xEF) {
      len = 3;
      if (c == 0xE0) lo = 0xA0;
      if (c == 0xED) hi = 0x9F;
    } else if (c >= 0xF0 && c <= 0xF4) {
      len = 4;
      if (c == 0xF0) lo = 0x90;
      if (c == 0xF4) hi = 0x8F;
    } else {
      return i;
    }
    if (i + len > n || p[i + 1] < lo || p[i + 1] > hi) return i;
    for (size_t k = 2; k < len; ++k) {
      if (p[i + k] < 0x80 || p[i + k] > 0xBF) return i;
    }
    i += len;
  }
  return std::string_view::npos;
}

Status ReadRows(const io::NdArray& a, const Model& model, InputFile* in) {
  if (a.type != io::ElementType::kF32 && a.type != io::ElementType::kF64) {
    return Status::InvalidArgument(in->path + " holds " + io::ElementTypeName(a.type) +
                                   " values; this stack model takes float32 or float64 rows");
  }
  auto shape = model.output_shape(InputKind::kRows, a.shape);
  if (!shape.ok()) return shape.status().WithContext(in->path);
  in->rows = (*shape)[0];
  in->values = RowValues(a);
  if (in->rows == 0) return Status::InvalidArgument(in->path + " holds no rows");
  return model.check_rows(in->values.data(), in->rows).WithContext(in->path);
}

// Every token checked by the runtime's rules, a piece of at most max_seq tokens at a time (the
// rules bound a sequence's length; a file's sequence may be longer and is cut by the caller).
Status CheckSequence(const InputFile& in, size_t index, const std::vector<int64_t>& tokens,
                     const Model& model) {
  const size_t piece = model.config().max_seq;
  for (size_t at = 0; at < tokens.size(); at += piece) {
    const size_t n = std::min(piece, tokens.size() - at);
    SPRIG_RETURN_IF_ERROR(model.check_tokens(tokens.data() + at, 1, n)
                              .WithContext(in.path + ", sequence " + std::to_string(index) +
                                           " from token " + std::to_string(at)));
  }
  return Status::Ok();
}

Status ReadTokens(const io::NdArray& a, const Model& model, InputFile* in) {
  if (a.type != io::ElementType::kI32 && a.type != io::ElementType::kI64) {
    return Status::InvalidArgument(in->path + " holds " + io::ElementTypeName(a.type) +
                                   " values; this transformer takes int32 or int64 tokens [T] or "
                                   "[B, T], or a text file");
  }
  if (a.shape.empty() || a.shape.size() > 2 || a.elements() == 0) {
    return Status::InvalidArgument(in->path + " has shape " + ShapeText(a.shape) +
                                   "; expected tokens [T] or [B, T] with at least one token");
  }
  const size_t length = a.shape.back(), count = a.elements() / length;
  const std::vector<int64_t> all = TokenValues(a);
  for (size_t s = 0; s < count; ++s) {
    const std::vector<int64_t> wide(all.begin() + static_cast<std::ptrdiff_t>(s * length),
                                    all.begin() + static_cast<std::ptrdiff_t>((s + 1) * length));
    SPRIG_RETURN_IF_ERROR(CheckSequence(*in, s, wide, model));
    in->sequences.emplace_back(wide.begin(), wide.end());  // in range, so exact
  }
  return Status::Ok();
}

}  // namespace

// The array's values as float32 (rows) or int64 (tokens), in order.
std::vector<float> RowValues(const io::NdArray& a) {
  std::vector<float> out(a.elements());
  for (size_t i = 0; i < out.size(); ++i) {
    if (a.type == io::ElementType::kF32) {
      std::memcpy(&out[i], a.data + 4 * i, 4);
    } else {
      double d;
      std::memcpy(&d, a.data + 8 * i, 8);
      out[i] = static_cast<float>(d);
    }
  }
  return out;
}

std::vector<int64_t> TokenValues(const io::NdArray& a) {
  std::vector<int64_t> out(a.elements());
  for (size_t i = 0; i < out.size(); ++i) {
    if (a.type == io::ElementType::kI32) {
      int32_t v;
      std::memcpy(&v, a.data + 4 * i, 4);
      out[i] = v;
    } else {
      std::memcpy(&out[i], a.data + 8 * i, 8);
    }
  }
  return out;
}

uint64_t InputFile::units() const {
  if (!sequences.empty()) {
    uint64_t n = 0;
    for (const auto& s : sequences) n += s.size();
    return n;
  }
  return rows;
}

bool IsText(std::string_view bytes) {
  return !io::DetectArchiveKind(reinterpret_cast<const uint8_t*>(bytes.data()), bytes.size());
}

Result<std::vector<int32_t>> TokenizeText(const std::string& path, std::string_view text,
                                          const Model& model) {
  const ModelConfig& c = model.config();
  if (c.family != Family::kTransformer) {
    return Status::InvalidArgument(path + " is text (not a .npy array); " + model.path() +
                                   " is a stack model, which takes float rows [N, " +
                                   std::to_string(c.input_dim) + "] as a .npy array");
  }
  if (c.tokenizer == Tokenizer::kNone) {
    return Status::InvalidArgument(path + " is text (not a .npy array), but " + model.path() +
                                   " has tokenizer '" + ToString(c.tokenizer) +
                                   "'; give its tokens as an int32/int64 .npy array");
  }
  if (text.empty()) return Status::InvalidArgument(path + " is empty; it holds no text");
  const size_t bad = FirstInvalidUtf8(text);
  if (bad != std::string_view::npos) {
    return Status::InvalidArgument(path + " is neither a .npy array nor UTF-8 text: byte " +
                                   std::to_string(bad) + " breaks UTF-8");
  }
  // The model's own tokenizer, as sprig generate and the sample models' training read text.
  SPRIG_ASSIGN_OR_RETURN(std::vector<int32_t> tokens, model.encode(std::string(text)));
  if (tokens.empty()) {
    return Status::InvalidArgument(path + " gives no tokens with " + model.path() +
                                   "'s tokenizer (it holds only what the tokenizer drops, such as "
                                   "whitespace)");
  }
  return tokens;
}

Result<InputFile> ReadInputFile(const std::string& path, const Model& model) {
  InputFile in;
  in.path = path;
  SPRIG_ASSIGN_OR_RETURN(const std::string bytes, io::ReadFileBytes(path));
  in.bytes = bytes.size();
  in.sha256 = Sha256Hex(bytes);
  if (IsText(bytes)) {
    in.kind = "text";
    SPRIG_ASSIGN_OR_RETURN(std::vector<int32_t> tokens, TokenizeText(path, bytes, model));
    in.sequences.push_back(std::move(tokens));
    return in;
  }
  SPRIG_ASSIGN_OR_RETURN(io::TensorArchive archive, io::TensorArchive::Open(path));
  if (archive.arrays().size() != 1) {
    return Status::InvalidArgument(path + " holds " + std::to_string(archive.arrays().size()) +
                                   " arrays; --input takes one array of rows or tokens");
  }
  const io::NdArray& a = archive.arrays()[0];
  if (model.config().family == Family::kStack) {
    in.kind = "rows";
    SPRIG_RETURN_IF_ERROR(ReadRows(a, model, &in));
  } else {
    in.kind = "tokens";
    SPRIG_RETURN_IF_ERROR(ReadTokens(a, model, &in));
  }
  return in;
}

}  // namespace sprig::cli
