#include "io/tensor_archive.h"

#include <cstring>
#include <filesystem>
#include <optional>
#include <utility>

#include "base/status_macros.h"
#include "io/atomic_file.h"
#include "io/bytes.h"
#include "io/mapped_file.h"
#include "io/npy.h"
#include "io/npz.h"
#include "io/safetensors.h"
#include "platform/files.h"

namespace sprig::io {

std::optional<ArchiveKind> DetectArchiveKind(const uint8_t* d, uint64_t size) {
  if (size >= kNpyMagicSize && std::memcmp(d, kNpyMagic, kNpyMagicSize) == 0) {
    return ArchiveKind::kNpy;
  }
  // A zip starts with a local header, or with the end record when it has no members.
  if (size >= 4 && (std::memcmp(d, "PK\x03\x04", 4) == 0 || std::memcmp(d, "PK\x05\x06", 4) == 0)) {
    return ArchiveKind::kNpz;
  }
  // A plausible header length (text has printable bytes in its high half, making it enormous)
  // followed by '{'. A truncated file still passes, so that it is reported as truncated.
  if (size >= 9 && d[8] == '{' && LoadLE64(d) >= 2 && LoadLE64(d) <= kMaxSafetensorsHeader) {
    return ArchiveKind::kSafetensors;
  }
  return std::nullopt;
}

Result<std::string> ReadFileBytes(const std::string& path) {
  SPRIG_ASSIGN_OR_RETURN(std::shared_ptr<const MappedFile> file, MappedFile::Open(path));
  if (file->size() == 0) return std::string();
  return std::string(reinterpret_cast<const char*>(file->data()), file->size());
}

Result<TensorArchive> TensorArchive::Open(const std::string& path) {
  SPRIG_ASSIGN_OR_RETURN(std::shared_ptr<const MappedFile> file, MappedFile::Open(path));
  const std::optional<ArchiveKind> kind = DetectArchiveKind(file->data(), file->size());
  if (!kind) {
    if (file->size() == 0) {
      return Status::InvalidArgument(path +
                                     " is empty; expected a .npy, .npz or .safetensors file");
    }
    return Status::InvalidArgument(path +
                                   " is not a .npy, .npz or .safetensors file (it starts "
                                   "with bytes " +
                                   HexPrefix(file->data(), file->size()) + ")");
  }
  TensorArchive archive;
  archive.kind_ = *kind;
  archive.path_ = path;
  switch (*kind) {
    case ArchiveKind::kNpy: {
      SPRIG_ASSIGN_OR_RETURN(NdArray array,
                             DecodeNpy(file->data(), file->size(), file,
                                       platform::Utf8(platform::FsPath(path).stem()), path));
      archive.arrays_.push_back(std::move(array));
      break;
    }
    case ArchiveKind::kNpz: {
      SPRIG_ASSIGN_OR_RETURN(archive.arrays_, ReadNpz(file, path));
      break;
    }
    case ArchiveKind::kSafetensors: {
      SPRIG_ASSIGN_OR_RETURN(archive.arrays_, ReadSafetensors(file, path));
      break;
    }
  }
  for (size_t i = 0; i < archive.arrays_.size(); ++i) {
    archive.index_.emplace(archive.arrays_[i].name, i);
  }
  return archive;
}

const NdArray* TensorArchive::Find(const std::string& name) const {
  auto it = index_.find(name);
  return it == index_.end() ? nullptr : &arrays_[it->second];
}

Status WriteNpy(const std::string& path, const NdArray& array, bool overwrite) {
  SPRIG_ASSIGN_OR_RETURN(std::string header, EncodeNpyHeader(array, path));
  SPRIG_ASSIGN_OR_RETURN(AtomicFile file, AtomicFile::Create(path, overwrite));
  SPRIG_RETURN_IF_ERROR(file.Write(header.data(), header.size()));
  SPRIG_RETURN_IF_ERROR(file.Write(array.data, array.nbytes()));
  return file.Commit();
}

Status WriteNpz(const std::string& path, const std::vector<NdArray>& arrays, bool compress,
                bool overwrite) {
  NpzWriteOptions options;
  options.compress = compress;
  options.overwrite = overwrite;
  return WriteNpzWithOptions(path, arrays, options);
}

}  // namespace sprig::io
