// Readers and writers for the tensor containers a training framework produces:
//   .npy          one array (NumPy format versions 1.0, 2.0, 3.0)
//   .npz          a zip of .npy members, stored (numpy.savez) or deflated (numpy.savez_compressed)
//   .safetensors  8-byte little-endian header length, JSON header, raw data
// The container kind is recognised from the file's first bytes, not its name.
#pragma once

#include <optional>
#include <string>
#include <unordered_map>
#include <vector>

#include "io/ndarray.h"
#include "sprig/status.h"

namespace sprig::io {

enum class ArchiveKind { kNpy, kNpz, kSafetensors };

// The container kind from a file's leading bytes, or nullopt when none matches (a text file,
// for instance).
std::optional<ArchiveKind> DetectArchiveKind(const uint8_t* data, uint64_t size);

// A whole file's bytes, read through the same mapping the readers use (for inputs that are not
// tensor files, such as text, and for content hashes). Errors name the file.
Result<std::string> ReadFileBytes(const std::string& path);

class TensorArchive {
 public:
  // Opens and fully validates `path`. Uncompressed data is mapped, not copied. Every error names
  // the file (and the member or tensor) and says what was expected.
  static Result<TensorArchive> Open(const std::string& path);

  ArchiveKind kind() const { return kind_; }
  const std::string& path() const { return path_; }
  // Arrays in file order. A .npy file yields one array named after the file's stem.
  const std::vector<NdArray>& arrays() const { return arrays_; }
  // nullptr when absent.
  const NdArray* Find(const std::string& name) const;

 private:
  ArchiveKind kind_ = ArchiveKind::kNpz;
  std::string path_;
  std::vector<NdArray> arrays_;
  std::unordered_map<std::string, size_t> index_;  // name -> position in arrays_
};

// Write a single array as a .npy file (format 1.0, or 2.0 when the header needs it).
// Written atomically: a temporary file in the destination folder, renamed when complete.
Status WriteNpy(const std::string& path, const NdArray& array, bool overwrite);

// Write arrays as a .npz that numpy.load reads; member "x" is stored as "x.npy".
// `compress` deflates members as numpy.savez_compressed does. Written atomically.
Status WriteNpz(const std::string& path, const std::vector<NdArray>& arrays, bool compress,
                bool overwrite);

// Write arrays as a .safetensors file (used by tests and by users with such pipelines).
Status WriteSafetensors(const std::string& path, const std::vector<NdArray>& arrays,
                        bool overwrite);

}  // namespace sprig::io
