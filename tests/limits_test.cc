// Resource limits of the tensor readers, checked before anything is allocated: shapes whose
// byte counts overflow 64 bits, and shapes larger than the data the file holds, are refused
// with a message naming the file and the array. (Config limits: config_test.cc; .sprig headers
// that claim data beyond the file: loader_test.cc; decompression bombs: io_test.cc.)
#include <gtest/gtest.h>

#include <cstdint>
#include <string>

#include "io/mapped_file.h"
#include "io/npy.h"
#include "io/safetensors.h"

namespace sprig::io {
namespace {

// A .npy 1.0 image (NumPy format description: magic, version, u16 header length, a dict
// literal padded with spaces to a multiple of 64 and ended by '\n') followed by `data`.
std::string Npy(const std::string& dict, const std::string& data) {
  std::string header = dict;
  while ((10 + header.size() + 1) % 64 != 0) header += ' ';
  header += '\n';
  std::string image = std::string(kNpyMagic, kNpyMagicSize) + '\x01' + '\x00';
  image += static_cast<char>(header.size() & 0xff);
  image += static_cast<char>(header.size() >> 8);
  return image + header + data;
}

std::string NpyError(const std::string& image) {
  auto r = DecodeNpy(reinterpret_cast<const uint8_t*>(image.data()), image.size(), nullptr, "x",
                     "big.npy");
  return r.ok() ? "" : r.status().message();
}

// A .safetensors image: u64 little-endian header length, the JSON header, then `data`.
std::string Safetensors(const std::string& json, const std::string& data) {
  std::string image;
  for (int i = 0; i < 8; ++i) image += static_cast<char>((json.size() >> (8 * i)) & 0xff);
  return image + json + data;
}

std::string SafetensorsError(const std::string& image) {
  auto file = MappedFile::FromMemory(reinterpret_cast<const uint8_t*>(image.data()), image.size());
  auto r = ReadSafetensors(file, "big.safetensors");
  return r.ok() ? "" : r.status().message();
}

TEST(ReaderLimits, NpyShapesWhoseSizeOverflowsAreRefused) {
  // 2^32 * 2^32 * 4 bytes wraps to 0 in 64 bits: it must not pass as an empty array.
  const std::string msg = NpyError(
      Npy("{'descr': '<f4', 'fortran_order': False, 'shape': (4294967296, 4294967296), }", ""));
  EXPECT_NE(msg.find("big.npy"), std::string::npos) << msg;
  EXPECT_NE(msg, "");
}

TEST(ReaderLimits, NpyShapesLargerThanTheFileAreRefused) {
  // 1,000,000 float32 promised, 8 bytes present.
  const std::string msg = NpyError(
      Npy("{'descr': '<f4', 'fortran_order': False, 'shape': (1000, 1000), }", "12345678"));
  EXPECT_NE(msg.find("big.npy"), std::string::npos) << msg;
  EXPECT_NE(msg, "");
}

TEST(ReaderLimits, SafetensorsShapesWhoseSizeOverflowsAreRefused) {
  const std::string msg = SafetensorsError(Safetensors(
      R"({"w":{"dtype":"F32","shape":[4294967296,4294967296],"data_offsets":[0,0]}})", ""));
  EXPECT_NE(msg.find("big.safetensors"), std::string::npos) << msg;
  EXPECT_NE(msg.find("'w'"), std::string::npos) << msg;
}

TEST(ReaderLimits, SafetensorsRangesBeyondTheFileAreRefused) {
  const std::string msg = SafetensorsError(Safetensors(
      R"({"w":{"dtype":"F32","shape":[1000000],"data_offsets":[0,4000000]}})", "12345678"));
  EXPECT_NE(msg.find("big.safetensors"), std::string::npos) << msg;
  EXPECT_NE(msg.find("'w'"), std::string::npos) << msg;
}

}  // namespace
}  // namespace sprig::io
