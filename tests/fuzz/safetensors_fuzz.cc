// Fuzz target: the .safetensors reader. Any bytes must read or be refused with a Status; every
// byte of every tensor it returns is read, so a range outside the file shows up.
#include <cstdint>

#include "io/mapped_file.h"
#include "io/safetensors.h"
#include "fuzz_support.h"

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  sprig::fuzz::CheckArrays(sprig::io::ReadSafetensors(sprig::io::MappedFile::FromMemory(data, size),
                                                      "fuzz.safetensors"));
  return 0;
}
