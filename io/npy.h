// The .npy format (NumPy format versions 1.0, 2.0 and 3.0): header parsing, decoding of a
// whole .npy image (a file or an .npz member) into an NdArray, and header encoding.
// Internal to io/.
//
//   "\x93NUMPY" major minor  header_len (u16 in 1.0; u32 in 2.0/3.0)
//   header: a Python dict literal {'descr': '<f4', 'fortran_order': False, 'shape': (3, 4), }
//           padded with spaces and ended by '\n'
//   data:   product(shape) elements in the order and byte order the header says
#pragma once

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "io/ndarray.h"
#include "sprig/status.h"

namespace sprig::io {

inline constexpr char kNpyMagic[] = "\x93NUMPY";  // 6 bytes
inline constexpr size_t kNpyMagicSize = 6;

struct NpyHeader {
  ElementType type = ElementType::kF32;
  bool big_endian = false;     // the data must be byte-swapped
  bool fortran_order = false;  // the data must be transposed into C order
  std::vector<uint64_t> shape;
  uint64_t data_offset = 0;  // where the data starts, from the beginning of the image
  uint64_t data_bytes = 0;   // product(shape) * element size
};

// Parses the header at the start of a .npy image of `size` bytes. `where` names the file (or
// "FILE, member 'x.npy'") in error messages.
Result<NpyHeader> ParseNpyHeader(const uint8_t* image, uint64_t size, const std::string& where);

// Decodes a whole .npy image. Little-endian C-order data is used in place (the array points
// into `image` and shares `keepalive`); big-endian or Fortran-order data is converted into a
// buffer the array owns. The data must fill the image exactly.
Result<NdArray> DecodeNpy(const uint8_t* image, uint64_t size,
                          std::shared_ptr<const void> keepalive, std::string name,
                          const std::string& where);

// Checks that `array` can be written in a NumPy container (its type exists in NumPy, its size
// is consistent) and returns the .npy header bytes for it, padded so the data starts on a
// 64-byte boundary as NumPy does. `where` names the destination in error messages.
Result<std::string> EncodeNpyHeader(const NdArray& array, const std::string& where);

// Checks an array given to a writer: name, data pointer and byte count. Shared by all writers.
Status CheckArrayForWriting(const NdArray& array, const std::string& where);

// A buffer of `bytes` uninitialised bytes, or an IOError naming `where` when memory runs out.
Result<std::shared_ptr<uint8_t[]>> AllocateBuffer(uint64_t bytes, const std::string& where);

}  // namespace sprig::io
