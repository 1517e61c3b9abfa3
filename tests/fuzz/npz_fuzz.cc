// Fuzz target: the .npz (zip) reader. Any bytes must read or be refused with a Status, without
// reading outside the file or inflating more than a member declares; every byte of every array
// it returns is read.
#include <cstdint>

#include "io/mapped_file.h"
#include "io/npz.h"
#include "fuzz_support.h"

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  sprig::fuzz::CheckArrays(
      sprig::io::ReadNpz(sprig::io::MappedFile::FromMemory(data, size), "fuzz.npz"));
  return 0;
}
