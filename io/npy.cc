#include "io/npy.h"

#include <cctype>
#include <cstring>
#include <new>
#include <string_view>
#include <utility>

#include "base/status_macros.h"
#include "io/bytes.h"

namespace sprig::io {

namespace {

// ---------------------------------------------------------------------------------------------
// A parser for the Python literals NumPy writes in a .npy header: dicts, tuples, lists,
// strings, integers, True/False/None. It is deliberately small (no floats, no expressions) and
// bounded in nesting so that a hostile header cannot exhaust the stack.

struct PyValue {
  enum class Kind { kNone, kBool, kInt, kString, kSequence, kDict };
  Kind kind = Kind::kNone;
  bool boolean = false;
  bool negative = false;
  uint64_t integer = 0;
  std::string text;
  std::vector<PyValue> items;  // tuple or list elements, or dict values
  // A dict's keys (string keys only), parallel to `items`. Not a vector of pairs: a pair of an
  // incomplete type inside its own definition is refused by some standard libraries.
  std::vector<std::string> keys;
};

class PyLiteralParser {
 public:
  explicit PyLiteralParser(std::string_view text) : text_(text) {}

  // Parses exactly one value followed only by whitespace; returns false with error().
  bool ParseAll(PyValue* out) {
    if (!ParseValue(out, 0)) return false;
    SkipSpace();
    if (pos_ != text_.size()) return Fail("unexpected text after the dict");
    return true;
  }
  const std::string& error() const { return error_; }

 private:
  static constexpr int kMaxDepth = 16;

  bool Fail(std::string message) {
    error_ = std::move(message) + " at character " + std::to_string(pos_);
    return false;
  }
  void SkipSpace() {
    while (pos_ < text_.size() && (text_[pos_] == ' ' || text_[pos_] == '\t' ||
                                   text_[pos_] == '\n' || text_[pos_] == '\r')) {
      ++pos_;
    }
  }
  bool Peek(char c) {
    SkipSpace();
    return pos_ < text_.size() && text_[pos_] == c;
  }
  bool ConsumeWord(std::string_view word) {
    if (text_.substr(pos_, word.size()) != word) return false;
    size_t end = pos_ + word.size();
    if (end < text_.size() &&
        (std::isalnum(static_cast<unsigned char>(text_[end])) || text_[end] == '_')) {
      return false;
    }
    pos_ = end;
    return true;
  }

  bool ParseValue(PyValue* out, int depth) {
    if (depth > kMaxDepth) return Fail("nesting too deep");
    SkipSpace();
    if (pos_ >= text_.size()) return Fail("unexpected end");
    char c = text_[pos_];
    if (c == '{') return ParseDict(out, depth);
    if (c == '(') return ParseSequence(out, ')', depth);
    if (c == '[') return ParseSequence(out, ']', depth);
    if (c == '\'' || c == '"') {
      out->kind = PyValue::Kind::kString;
      return ParseString(&out->text);
    }
    if (c == '-' || (c >= '0' && c <= '9')) return ParseInt(out);
    if (ConsumeWord("True")) {
      out->kind = PyValue::Kind::kBool;
      out->boolean = true;
      return true;
    }
    if (ConsumeWord("False")) {
      out->kind = PyValue::Kind::kBool;
      out->boolean = false;
      return true;
    }
    if (ConsumeWord("None")) {
      out->kind = PyValue::Kind::kNone;
      return true;
    }
    return Fail(std::string("unexpected character '") + c + "'");
  }

  bool ParseString(std::string* out) {
    char quote = text_[pos_++];
    out->clear();
    while (pos_ < text_.size() && text_[pos_] != quote) {
      char c = text_[pos_++];
      if (c == '\\') {
        if (pos_ >= text_.size()) break;
        char e = text_[pos_++];
        switch (e) {
          case 'n':
            c = '\n';
            break;
          case 't':
            c = '\t';
            break;
          case 'r':
            c = '\r';
            break;
          case '0':
            c = '\0';
            break;
          default:
            c = e;
            break;  // \\, \', \" and anything NumPy never writes
        }
      }
      out->push_back(c);
    }
    if (pos_ >= text_.size()) return Fail("unterminated string");
    ++pos_;
    return true;
  }

  bool ParseInt(PyValue* out) {
    out->kind = PyValue::Kind::kInt;
    if (text_[pos_] == '-') {
      out->negative = true;
      ++pos_;
    }
    size_t start = pos_;
    uint64_t v = 0;
    while (pos_ < text_.size() && text_[pos_] >= '0' && text_[pos_] <= '9') {
      if (!CheckedMul(v, 10, &v) || !CheckedAdd(v, uint64_t(text_[pos_] - '0'), &v)) {
        return Fail("integer too large");
      }
      ++pos_;
    }
    if (pos_ == start) return Fail("expected digits");
    // Headers written by Python 2 spell long integers with a trailing L.
    if (pos_ < text_.size() && (text_[pos_] == 'L' || text_[pos_] == 'l')) ++pos_;
    out->integer = v;
    return true;
  }

  bool ParseSequence(PyValue* out, char close, int depth) {
    out->kind = PyValue::Kind::kSequence;
    ++pos_;
    while (!Peek(close)) {
      PyValue item;
      if (!ParseValue(&item, depth + 1)) return false;
      out->items.push_back(std::move(item));
      if (Peek(',')) {
        ++pos_;
      } else if (!Peek(close)) {
        return Fail(std::string("expected ',' or '") + close + "'");
      }
    }
    ++pos_;
    return true;
  }

  bool ParseDict(PyValue* out, int depth) {
    out->kind = PyValue::Kind::kDict;
    ++pos_;
    while (!Peek('}')) {
      if (!Peek('\'') && !Peek('"')) return Fail("expected a string key");
      std::string key;
      if (!ParseString(&key)) return false;
      if (!Peek(':')) return Fail("expected ':'");
      ++pos_;
      PyValue value;
      if (!ParseValue(&value, depth + 1)) return false;
      for (const std::string& seen : out->keys) {
        if (seen == key) return Fail("duplicate key '" + key + "'");
      }
      out->keys.push_back(std::move(key));
      out->items.push_back(std::move(value));
      if (Peek(',')) {
        ++pos_;
      } else if (!Peek('}')) {
        return Fail("expected ',' or '}'");
      }
    }
    ++pos_;
    return true;
  }

  std::string_view text_;
  size_t pos_ = 0;
  std::string error_;
};

// ---------------------------------------------------------------------------------------------
// dtype descriptors ('<f4', '|b1', ...).

const char kSupportedTypes[] =
    "float64, float32, float16, int64, int32, int16, int8, uint64, uint32, uint16, uint8 or bool";

// A readable name for descriptors we refuse, so the message says more than '<c8'.
std::string DescribeUnsupported(const std::string& code) {
  if (code.empty()) return "";
  switch (code[0]) {
    case 'c':
      return code == "c8" ? " (complex64)" : code == "c16" ? " (complex128)" : " (complex)";
    case 'f':
      return " (a float size NumPy does not share with sprig)";
    case 'O':
      return " (Python objects)";
    case 'U':
      return " (unicode strings)";
    case 'S':
    case 'a':
      return " (byte strings)";
    case 'V':
      return " (raw or structured records)";
    case 'M':
      return " (datetime)";
    case 'm':
      return " (timedelta)";
    default:
      return "";
  }
}

struct Descr {
  ElementType type;
  char byte_order;  // '<', '>', '|' or '='
};

bool ParseDescr(const std::string& descr, Descr* out) {
  std::string code = descr;
  char order = '=';
  if (!code.empty() && (code[0] == '<' || code[0] == '>' || code[0] == '|' || code[0] == '=')) {
    order = code[0];
    code = code.substr(1);
  }
  static const struct {
    const char* code;
    ElementType type;
  } kTable[] = {
      {"f8", ElementType::kF64}, {"f4", ElementType::kF32}, {"f2", ElementType::kF16},
      {"i8", ElementType::kI64}, {"i4", ElementType::kI32}, {"i2", ElementType::kI16},
      {"i1", ElementType::kI8},  {"u8", ElementType::kU64}, {"u4", ElementType::kU32},
      {"u2", ElementType::kU16}, {"u1", ElementType::kU8},  {"b1", ElementType::kBool},
  };
  for (const auto& entry : kTable) {
    if (code == entry.code) {
      out->type = entry.type;
      out->byte_order = order;
      return true;
    }
  }
  return false;
}

const char* DescrFor(ElementType t) {
  switch (t) {
    case ElementType::kF64:
      return "<f8";
    case ElementType::kF32:
      return "<f4";
    case ElementType::kF16:
      return "<f2";
    case ElementType::kI64:
      return "<i8";
    case ElementType::kI32:
      return "<i4";
    case ElementType::kI16:
      return "<i2";
    case ElementType::kI8:
      return "|i1";
    case ElementType::kU64:
      return "<u8";
    case ElementType::kU32:
      return "<u4";
    case ElementType::kU16:
      return "<u2";
    case ElementType::kU8:
      return "|u1";
    case ElementType::kBool:
      return "|b1";
    case ElementType::kBF16:
      return nullptr;  // NumPy has no bfloat16
  }
  return nullptr;
}

Status InterpretHeaderDict(const PyValue& dict, const std::string& where, NpyHeader* out) {
  if (dict.kind != PyValue::Kind::kDict) {
    return Status::Corruption(where + " has a .npy header that is not a dict");
  }
  const PyValue* descr = nullptr;
  const PyValue* fortran = nullptr;
  const PyValue* shape = nullptr;
  for (size_t i = 0; i < dict.keys.size(); ++i) {
    const std::string& key = dict.keys[i];
    const PyValue& value = dict.items[i];
    if (key == "descr") {
      descr = &value;
    } else if (key == "fortran_order") {
      fortran = &value;
    } else if (key == "shape") {
      shape = &value;
    } else {
      return Status::Corruption(where + " has an unexpected key '" + key +
                                "' in its .npy header (expected descr, fortran_order, shape)");
    }
  }
  if (!descr || !fortran || !shape) {
    return Status::Corruption(where + " has a .npy header without '" +
                              std::string(!descr     ? "descr"
                                          : !fortran ? "fortran_order"
                                                     : "shape") +
                              "'");
  }
  if (descr->kind == PyValue::Kind::kSequence) {
    return Status::NotSupported(where + " has a structured dtype (a list of fields); expected " +
                                kSupportedTypes);
  }
  if (descr->kind != PyValue::Kind::kString) {
    return Status::Corruption(where + " has a .npy header whose 'descr' is not a string");
  }
  Descr parsed;
  if (!ParseDescr(descr->text, &parsed)) {
    std::string code = descr->text;
    if (!code.empty() && std::strchr("<>|=", code[0])) code = code.substr(1);
    return Status::NotSupported(where + " has dtype '" + descr->text + "'" +
                                DescribeUnsupported(code) + ", which sprig cannot read; expected " +
                                kSupportedTypes);
  }
  if (fortran->kind != PyValue::Kind::kBool) {
    return Status::Corruption(where + " has a .npy header whose 'fortran_order' is not True/False");
  }
  if (shape->kind != PyValue::Kind::kSequence) {
    return Status::Corruption(where + " has a .npy header whose 'shape' is not a tuple");
  }
  out->shape.clear();
  for (const PyValue& d : shape->items) {
    if (d.kind != PyValue::Kind::kInt || d.negative) {
      return Status::Corruption(where +
                                " has a .npy header whose 'shape' holds something other than "
                                "non-negative integers");
    }
    out->shape.push_back(d.integer);
  }
  out->type = parsed.type;
  out->big_endian = parsed.byte_order == '>' && ElementSize(parsed.type) > 1;
  out->fortran_order = fortran->boolean;
  if (!ShapeBytes(out->shape, ElementSize(out->type), &out->data_bytes) ||
      out->data_bytes > kMaxArrayBytes) {
    return Status::NotSupported(where + " has shape " + ShapeText(out->shape) + " of " +
                                ElementTypeName(out->type) +
                                ", larger than the 64 GiB sprig accepts for one array");
  }
  return Status::Ok();
}

// ---------------------------------------------------------------------------------------------
// Data conversion for the uncommon layouts.

void SwapBytesInPlace(uint8_t* data, uint64_t count, size_t element_size) {
  switch (element_size) {
    case 2:
      for (uint64_t i = 0; i < count; ++i) {
        uint16_t v;
        std::memcpy(&v, data + 2 * i, 2);
        v = __builtin_bswap16(v);
        std::memcpy(data + 2 * i, &v, 2);
      }
      break;
    case 4:
      for (uint64_t i = 0; i < count; ++i) {
        uint32_t v;
        std::memcpy(&v, data + 4 * i, 4);
        v = __builtin_bswap32(v);
        std::memcpy(data + 4 * i, &v, 4);
      }
      break;
    case 8:
      for (uint64_t i = 0; i < count; ++i) {
        uint64_t v;
        std::memcpy(&v, data + 8 * i, 8);
        v = __builtin_bswap64(v);
        std::memcpy(data + 8 * i, &v, 8);
      }
      break;
    default:
      break;
  }
}

// Copies Fortran-order (first index fastest) data into C order (last index fastest).
// Output rows along the last axis are gathered with the input's stride for that axis.
void FortranToC(const uint8_t* in, uint8_t* out, const std::vector<uint64_t>& shape,
                size_t element_size) {
  const size_t rank = shape.size();
  std::vector<uint64_t> in_stride(rank);  // in bytes, Fortran order
  uint64_t s = element_size;
  for (size_t k = 0; k < rank; ++k) {
    in_stride[k] = s;
    s *= shape[k];
  }
  const uint64_t row = shape[rank - 1];
  const uint64_t row_stride = in_stride[rank - 1];
  std::vector<uint64_t> index(rank, 0);  // index over the leading rank-1 axes
  uint64_t in_base = 0;
  for (;;) {
    const uint8_t* src = in + in_base;
    for (uint64_t j = 0; j < row; ++j) {
      std::memcpy(out, src + j * row_stride, element_size);
      out += element_size;
    }
    // Advance the leading axes like an odometer, last of them fastest.
    size_t k = rank - 1;
    for (;;) {
      if (k == 0) return;
      --k;
      in_base += in_stride[k];
      if (++index[k] < shape[k]) break;
      in_base -= in_stride[k] * shape[k];
      index[k] = 0;
    }
  }
}

std::string ShapeRepr(const std::vector<uint64_t>& shape) {
  std::string s = "(";
  for (size_t i = 0; i < shape.size(); ++i) {
    if (i) s += ", ";
    s += std::to_string(shape[i]);
  }
  if (shape.size() == 1) s += ",";
  return s + ")";
}

}  // namespace

Result<std::shared_ptr<uint8_t[]>> AllocateBuffer(uint64_t bytes, const std::string& where) {
  uint8_t* p = new (std::nothrow) uint8_t[bytes == 0 ? 1 : bytes];
  if (p == nullptr) {
    return Status::IOError("out of memory reading " + where + " (" + std::to_string(bytes) +
                           " bytes needed)");
  }
  return std::shared_ptr<uint8_t[]>(p);
}

Result<NpyHeader> ParseNpyHeader(const uint8_t* image, uint64_t size, const std::string& where) {
  if (size < kNpyMagicSize + 2 || std::memcmp(image, kNpyMagic, kNpyMagicSize) != 0) {
    return Status::Corruption(where + " is not a .npy array (it does not start with \\x93NUMPY)");
  }
  const uint8_t major = image[6];
  const uint8_t minor = image[7];
  uint64_t length_offset = 8, header_start, header_length;
  if (major == 1) {
    header_start = 10;
  } else if (major == 2 || major == 3) {
    header_start = 12;
  } else {
    return Status::NotSupported(where + " uses .npy format version " + std::to_string(major) + "." +
                                std::to_string(minor) + "; expected 1.0, 2.0 or 3.0");
  }
  if (size < header_start) {
    return Status::Corruption(where + " is truncated inside its .npy header");
  }
  header_length = major == 1 ? LoadLE16(image + length_offset) : LoadLE32(image + length_offset);
  if (!RangeWithin(header_start, header_length, size)) {
    return Status::Corruption(where + " is truncated: its .npy header declares " +
                              std::to_string(header_length) + " bytes but the image has only " +
                              std::to_string(size - header_start) + " after the preamble");
  }
  std::string_view text(reinterpret_cast<const char*>(image + header_start), header_length);
  PyValue dict;
  PyLiteralParser parser(text);
  if (!parser.ParseAll(&dict)) {
    return Status::Corruption(where + " has a malformed .npy header (" + parser.error() + ")");
  }
  NpyHeader header;
  SPRIG_RETURN_IF_ERROR(InterpretHeaderDict(dict, where, &header));
  header.data_offset = header_start + header_length;
  return header;
}

Result<NdArray> DecodeNpy(const uint8_t* image, uint64_t size,
                          std::shared_ptr<const void> keepalive, std::string name,
                          const std::string& where) {
  SPRIG_ASSIGN_OR_RETURN(NpyHeader header, ParseNpyHeader(image, size, where));
  const uint64_t present = size - header.data_offset;
  if (present != header.data_bytes) {
    std::string what = present < header.data_bytes ? " is truncated: its" : " is malformed: its";
    return Status::Corruption(where + what + " shape " + ShapeText(header.shape) + " of " +
                              ElementTypeName(header.type) + " needs " +
                              std::to_string(header.data_bytes) + " bytes of data, but " +
                              std::to_string(present) + " are present");
  }
  NdArray array;
  array.name = std::move(name);
  array.type = header.type;
  array.shape = header.shape;
  const uint8_t* data = image + header.data_offset;
  const size_t element_size = ElementSize(header.type);
  const uint64_t count = header.data_bytes / element_size;
  const bool transpose = header.fortran_order && header.shape.size() > 1 && count > 1;
  if (!transpose && !header.big_endian) {
    array.data = data;
    array.keepalive = std::move(keepalive);
    return array;
  }
  SPRIG_ASSIGN_OR_RETURN(std::shared_ptr<uint8_t[]> buffer,
                         AllocateBuffer(header.data_bytes, where));
  if (transpose) {
    FortranToC(data, buffer.get(), header.shape, element_size);
  } else {
    std::memcpy(buffer.get(), data, header.data_bytes);
  }
  if (header.big_endian) SwapBytesInPlace(buffer.get(), count, element_size);
  array.data = buffer.get();
  array.keepalive = std::move(buffer);
  return array;
}

Status CheckArrayForWriting(const NdArray& array, const std::string& where) {
  if (array.name.empty()) {
    return Status::InvalidArgument("cannot write " + where + ": an array has an empty name");
  }
  uint64_t bytes;
  if (!ShapeBytes(array.shape, ElementSize(array.type), &bytes) || bytes > kMaxArrayBytes) {
    return Status::InvalidArgument("cannot write " + where + ": array '" + array.name +
                                   "' of shape " + ShapeText(array.shape) +
                                   " is larger than 64 GiB");
  }
  if (bytes > 0 && array.data == nullptr) {
    return Status::InvalidArgument("cannot write " + where + ": array '" + array.name +
                                   "' has no data");
  }
  return Status::Ok();
}

Result<std::string> EncodeNpyHeader(const NdArray& array, const std::string& where) {
  SPRIG_RETURN_IF_ERROR(CheckArrayForWriting(array, where));
  const char* descr = DescrFor(array.type);
  if (descr == nullptr) {
    return Status::NotSupported("cannot write array '" + array.name + "' to " + where + ": " +
                                ElementTypeName(array.type) +
                                " has no NumPy dtype; convert it to float32 or write "
                                ".safetensors");
  }
  const std::string dict = std::string("{'descr': '") + descr +
                           "', 'fortran_order': False, 'shape': " + ShapeRepr(array.shape) + ", }";
  // As NumPy does: pad with spaces and a final '\n' so the data starts on a 64-byte boundary;
  // use format 2.0 (a 4-byte length) only when the header does not fit a 2-byte length.
  constexpr uint64_t kAlign = 64;
  for (int major = 1; major <= 2; ++major) {
    const uint64_t preamble = kNpyMagicSize + 2 + (major == 1 ? 2 : 4);
    const uint64_t unpadded = dict.size() + 1;
    const uint64_t pad = (kAlign - (preamble + unpadded) % kAlign) % kAlign;
    const uint64_t length = unpadded + pad;
    if (major == 1 && length > 0xffff) continue;
    std::string out(kNpyMagic, kNpyMagicSize);
    out.push_back(char(major));
    out.push_back(0);
    if (major == 1) {
      AppendLE16(out, uint16_t(length));
    } else {
      AppendLE32(out, uint32_t(length));
    }
    out += dict;
    out.append(pad, ' ');
    out.push_back('\n');
    return out;
  }
  return Status::InvalidArgument("cannot write " + where + ": the header of array '" + array.name +
                                 "' is too long");
}

}  // namespace sprig::io
