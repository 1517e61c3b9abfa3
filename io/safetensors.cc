#include "io/safetensors.h"

#include <algorithm>
#include <cstring>
#include <nlohmann/json.hpp>
#include <unordered_set>
#include <utility>

#include "base/status_macros.h"
#include "io/atomic_file.h"
#include "io/bytes.h"
#include "io/npy.h"
#include "io/tensor_archive.h"

namespace sprig::io {

namespace {

constexpr char kMetadataKey[] = "__metadata__";

struct DtypeName {
  const char* name;
  ElementType type;
};
constexpr DtypeName kDtypes[] = {
    {"F64", ElementType::kF64},   {"F32", ElementType::kF32}, {"F16", ElementType::kF16},
    {"BF16", ElementType::kBF16}, {"I64", ElementType::kI64}, {"I32", ElementType::kI32},
    {"I16", ElementType::kI16},   {"I8", ElementType::kI8},   {"U64", ElementType::kU64},
    {"U32", ElementType::kU32},   {"U16", ElementType::kU16}, {"U8", ElementType::kU8},
    {"BOOL", ElementType::kBool},
};

const char* DtypeFor(ElementType t) {
  for (const auto& d : kDtypes) {
    if (d.type == t) return d.name;
  }
  return "?";
}

// One header entry, checked against the data section of `data_size` bytes.
Result<NdArray> ParseEntry(const std::string& name, const nlohmann::json& entry, uint64_t data_size,
                           const std::string& where, uint64_t* begin_out) {
  if (!entry.is_object()) {
    return Status::Corruption(where + " has a header entry that is not a JSON object");
  }
  auto dtype = entry.find("dtype");
  auto shape = entry.find("shape");
  auto offsets = entry.find("data_offsets");
  if (dtype == entry.end() || shape == entry.end() || offsets == entry.end()) {
    return Status::Corruption(where + " lacks '" +
                              std::string(dtype == entry.end()   ? "dtype"
                                          : shape == entry.end() ? "shape"
                                                                 : "data_offsets") +
                              "' in the header");
  }
  if (!dtype->is_string()) {
    return Status::Corruption(where + " has a 'dtype' that is not a string");
  }
  const std::string dtype_name = dtype->get<std::string>();
  const DtypeName* found = nullptr;
  for (const auto& d : kDtypes) {
    if (dtype_name == d.name) found = &d;
  }
  if (found == nullptr) {
    return Status::NotSupported(where + " has dtype '" + dtype_name +
                                "', which sprig cannot read; expected F64, F32, F16, BF16, I64, "
                                "I32, I16, I8, U64, U32, U16, U8 or BOOL");
  }
  NdArray array;
  array.name = name;
  array.type = found->type;
  if (!shape->is_array()) {
    return Status::Corruption(where + " has a 'shape' that is not a list");
  }
  for (const auto& d : *shape) {
    if (!d.is_number_unsigned()) {
      return Status::Corruption(where +
                                " has a 'shape' that holds something other than "
                                "non-negative integers");
    }
    array.shape.push_back(d.get<uint64_t>());
  }
  if (!offsets->is_array() || offsets->size() != 2 || !(*offsets)[0].is_number_unsigned() ||
      !(*offsets)[1].is_number_unsigned()) {
    return Status::Corruption(where +
                              " has 'data_offsets' that are not two non-negative "
                              "integers [begin, end]");
  }
  const uint64_t begin = (*offsets)[0].get<uint64_t>();
  const uint64_t end = (*offsets)[1].get<uint64_t>();
  uint64_t bytes;
  if (!ShapeBytes(array.shape, ElementSize(array.type), &bytes) || bytes > kMaxArrayBytes) {
    return Status::NotSupported(where + " has shape " + ShapeText(array.shape) +
                                ", larger than the 64 GiB sprig accepts for one array");
  }
  if (begin > end || end > data_size) {
    return Status::Corruption(where + " has data_offsets [" + std::to_string(begin) + ", " +
                              std::to_string(end) + "] outside the " + std::to_string(data_size) +
                              "-byte data section (truncated or corrupt file)");
  }
  if (end - begin != bytes) {
    return Status::Corruption(where + " has data_offsets [" + std::to_string(begin) + ", " +
                              std::to_string(end) + "] spanning " + std::to_string(end - begin) +
                              " bytes, but its shape " + ShapeText(array.shape) + " of " +
                              dtype_name + " needs " + std::to_string(bytes));
  }
  *begin_out = begin;
  return array;
}

}  // namespace

Result<std::vector<NdArray>> ReadSafetensors(const std::shared_ptr<const MappedFile>& file,
                                             const std::string& path) {
  const uint8_t* d = file->data();
  const uint64_t size = file->size();
  if (size < 8) return Status::Corruption(path + " is truncated inside its safetensors preamble");
  const uint64_t header_size = LoadLE64(d);
  if (header_size > kMaxSafetensorsHeader) {
    return Status::Corruption(path + " declares a " + std::to_string(header_size) +
                              "-byte safetensors header, more than the " +
                              std::to_string(kMaxSafetensorsHeader) + " bytes allowed");
  }
  if (header_size > size - 8) {
    return Status::Corruption(path + " is truncated: its safetensors header declares " +
                              std::to_string(header_size) + " bytes but only " +
                              std::to_string(size - 8) + " follow");
  }
  const char* text = reinterpret_cast<const char*>(d + 8);
  nlohmann::json header =
      nlohmann::json::parse(text, text + header_size, /*cb=*/nullptr, /*allow_exceptions=*/false);
  if (header.is_discarded()) {
    return Status::Corruption(path + " has a safetensors header that is not valid JSON");
  }
  if (!header.is_object()) {
    return Status::Corruption(path + " has a safetensors header that is not a JSON object");
  }
  const uint64_t data_start = 8 + header_size;
  const uint64_t data_size = size - data_start;
  struct Placed {
    uint64_t begin;
    NdArray array;
  };
  std::vector<Placed> placed;
  for (const auto& [name, entry] : header.items()) {
    if (name == kMetadataKey) {
      if (!entry.is_object()) {
        return Status::Corruption(path + " has a '__metadata__' entry that is not a JSON object");
      }
      continue;
    }
    uint64_t begin = 0;
    SPRIG_ASSIGN_OR_RETURN(NdArray array, ParseEntry(name, entry, data_size,
                                                     path + ", tensor '" + name + "'", &begin));
    array.data = d + data_start + begin;
    array.keepalive = file;
    placed.push_back({begin, std::move(array)});
  }
  // File order: by where the data lies (names break ties between empty tensors).
  std::sort(placed.begin(), placed.end(), [](const Placed& a, const Placed& b) {
    return a.begin != b.begin ? a.begin < b.begin : a.array.name < b.array.name;
  });
  std::vector<NdArray> arrays;
  arrays.reserve(placed.size());
  for (Placed& p : placed) arrays.push_back(std::move(p.array));
  return arrays;
}

Status WriteSafetensors(const std::string& path, const std::vector<NdArray>& arrays,
                        bool overwrite) {
  nlohmann::ordered_json header = nlohmann::ordered_json::object();
  std::unordered_set<std::string> names;
  uint64_t offset = 0;
  for (const NdArray& a : arrays) {
    SPRIG_RETURN_IF_ERROR(CheckArrayForWriting(a, path));
    if (a.name == kMetadataKey || !names.insert(a.name).second) {
      return Status::InvalidArgument("cannot write " + path + ": " +
                                     (a.name == kMetadataKey
                                          ? "the name '__metadata__' is "
                                            "reserved"
                                          : "two arrays are named '" + a.name + "'"));
    }
    const uint64_t end = offset + a.nbytes();
    header[a.name] = {
        {"dtype", DtypeFor(a.type)}, {"shape", a.shape}, {"data_offsets", {offset, end}}};
    offset = end;
  }
  std::string text;
  try {
    text = header.dump();
  } catch (const nlohmann::json::exception&) {
    // dump() refuses names that are not valid UTF-8, which JSON cannot carry.
    return Status::InvalidArgument("cannot write " + path + ": an array name is not valid UTF-8");
  }
  // Pad with spaces (which JSON ignores) so the data starts on an 8-byte boundary.
  text.append((8 - text.size() % 8) % 8, ' ');
  std::string preamble;
  AppendLE64(preamble, text.size());

  SPRIG_ASSIGN_OR_RETURN(AtomicFile file, AtomicFile::Create(path, overwrite));
  SPRIG_RETURN_IF_ERROR(file.Write(preamble.data(), preamble.size()));
  SPRIG_RETURN_IF_ERROR(file.Write(text.data(), text.size()));
  for (const NdArray& a : arrays) SPRIG_RETURN_IF_ERROR(file.Write(a.data, a.nbytes()));
  return file.Commit();
}

}  // namespace sprig::io
