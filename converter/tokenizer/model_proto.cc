#include "converter/tokenizer/model_proto.h"

#include "base/status_macros.h"

namespace sprig::convert {
namespace {

// One field of a message: its number, and its value as an integer (varint and fixed wire
// types) or as bytes (length-delimited).
struct Field {
  uint32_t number;
  uint64_t integer = 0;
  std::string_view bytes;
};

class WireReader {
 public:
  explicit WireReader(std::string_view data) : data_(data) {}
  bool done() const { return data_.empty(); }

  Result<Field> Next() {
    SPRIG_ASSIGN_OR_RETURN(const uint64_t key, Varint());
    Field field{static_cast<uint32_t>(key >> 3), 0, {}};
    switch (key & 7) {
      case 0: {
        SPRIG_ASSIGN_OR_RETURN(field.integer, Varint());
        return field;
      }
      case 1:
        return Fixed(field, 8);
      case 5:
        return Fixed(field, 4);
      case 2: {
        SPRIG_ASSIGN_OR_RETURN(const uint64_t size, Varint());
        if (size > data_.size()) return Status::Corruption("a field runs past the end");
        field.bytes = data_.substr(0, size);
        data_.remove_prefix(size);
        return field;
      }
      default:
        return Status::Corruption("wire type " + std::to_string(key & 7) + " is not supported");
    }
  }

 private:
  Result<uint64_t> Varint() {
    uint64_t value = 0;
    for (int shift = 0; shift < 64; shift += 7) {
      if (data_.empty()) return Status::Corruption("a varint runs past the end");
      const auto byte = static_cast<uint8_t>(data_.front());
      data_.remove_prefix(1);
      value |= uint64_t{byte & 0x7Fu} << shift;
      if (byte < 0x80) return value;
    }
    return Status::Corruption("a varint is longer than 10 bytes");
  }

  Result<Field> Fixed(Field field, size_t size) {
    if (data_.size() < size) return Status::Corruption("a fixed field runs past the end");
    for (size_t i = 0; i < size; ++i) {
      field.integer |= uint64_t{static_cast<uint8_t>(data_[i])} << (8 * i);
    }
    data_.remove_prefix(size);
    return field;
  }

  std::string_view data_;
};

Status ReadTrainerSpec(std::string_view bytes, ModelProtoFields& out) {
  WireReader reader(bytes);
  while (!reader.done()) {
    SPRIG_ASSIGN_OR_RETURN(const Field f, reader.Next());
    if (f.number == 3) out.model_type = static_cast<int>(f.integer);
    if (f.number == 24) out.treat_whitespace_as_suffix = f.integer != 0;
    if (f.number == 35) out.byte_fallback = f.integer != 0;
    if (f.number == 44) {
      out.has_unk_surface = true;
      out.unk_surface = std::string(f.bytes);
    }
  }
  return Status::Ok();
}

Status ReadNormalizerSpec(std::string_view bytes, ModelProtoFields& out) {
  WireReader reader(bytes);
  while (!reader.done()) {
    SPRIG_ASSIGN_OR_RETURN(const Field f, reader.Next());
    if (f.number == 1) out.normalizer_name = std::string(f.bytes);
    if (f.number == 2) out.precompiled_charsmap = std::string(f.bytes);
    if (f.number == 3) out.add_dummy_prefix = f.integer != 0;
    if (f.number == 4) out.remove_extra_whitespaces = f.integer != 0;
    if (f.number == 5) out.escape_whitespaces = f.integer != 0;
  }
  return Status::Ok();
}

// A denormalizer changes decoded text only through its rules (precompiled_charsmap).
Result<bool> DenormalizerHasRules(std::string_view bytes) {
  WireReader reader(bytes);
  while (!reader.done()) {
    SPRIG_ASSIGN_OR_RETURN(const Field f, reader.Next());
    if (f.number == 2 && !f.bytes.empty()) return true;
  }
  return false;
}

Result<int> PieceType(std::string_view bytes) {
  WireReader reader(bytes);
  int type = 1;  // NORMAL, the proto's default
  while (!reader.done()) {
    SPRIG_ASSIGN_OR_RETURN(const Field f, reader.Next());
    if (f.number == 3) type = static_cast<int>(f.integer);
  }
  return type;
}

}  // namespace

Result<ModelProtoFields> ReadModelProtoFields(std::string_view serialized) {
  ModelProtoFields out;
  WireReader reader(serialized);
  while (!reader.done()) {
    SPRIG_ASSIGN_OR_RETURN(const Field f, reader.Next());
    if (f.number == 1) {
      SPRIG_ASSIGN_OR_RETURN(const int type, PieceType(f.bytes));
      out.piece_types.push_back(type);
    } else if (f.number == 2) {
      SPRIG_RETURN_IF_ERROR(ReadTrainerSpec(f.bytes, out));
    } else if (f.number == 3) {
      SPRIG_RETURN_IF_ERROR(ReadNormalizerSpec(f.bytes, out));
    } else if (f.number == 5) {
      SPRIG_ASSIGN_OR_RETURN(out.denormalizer_has_rules, DenormalizerHasRules(f.bytes));
    }
  }
  return out;
}

}  // namespace sprig::convert
