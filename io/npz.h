// The .npz container: a zip archive whose members "x.npy" are .npy images of the arrays "x".
// Internal to io/; TensorArchive and WriteNpz are the public entry points.
//
// Reading follows the zip specification (APPNOTE.TXT) as far as NumPy and Python's zipfile
// use it: one disk, stored (method 0) or deflated (method 8) members, ZIP64 end records and
// extra fields (NumPy writes ZIP64 local headers for every member), no encryption.
#pragma once

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "io/mapped_file.h"
#include "io/ndarray.h"
#include "sprig/status.h"

namespace sprig::io {

// A member as the central directory describes it.
struct ZipMember {
  std::string name;
  uint16_t flags = 0;
  uint16_t method = 0;
  uint32_t crc32 = 0;
  uint64_t compressed_size = 0;
  uint64_t uncompressed_size = 0;
  uint64_t local_header_offset = 0;
};

// Reads the central directory of the zip archive in `file`, in directory order.
Result<std::vector<ZipMember>> ReadZipDirectory(const MappedFile& file, const std::string& path);

// Reads every member of an .npz as an array, in directory order. Stored members point into
// the mapping; deflated ones are inflated into buffers the arrays own.
Result<std::vector<NdArray>> ReadNpz(const std::shared_ptr<const MappedFile>& file,
                                     const std::string& path);

struct NpzWriteOptions {
  bool compress = false;
  bool overwrite = false;
  int compression_level = -1;  // zlib's default (6), as numpy.savez_compressed uses
  // Sizes, offsets and counts at or above this value are written in ZIP64 fields. Only tests
  // lower it (to exercise the ZIP64 records with small files); counts also switch at 0xffff.
  uint64_t zip64_threshold = 0xffffffff;
};

Status WriteNpzWithOptions(const std::string& path, const std::vector<NdArray>& arrays,
                           const NpzWriteOptions& options);

}  // namespace sprig::io
