// Fuzz target: the .npy reader. Any bytes must decode or be refused with a Status; a decoded
// array's bytes must lie inside the input (every byte is read), and re-encoding its header must
// give an image that decodes to the same array.
#include <cstdint>
#include <cstdlib>
#include <cstring>
#include <string>

#include "io/npy.h"
#include "fuzz_support.h"

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  auto array = sprig::io::DecodeNpy(data, size, nullptr, "x", "fuzz.npy");
  if (!array.ok()) {
    if (array.status().message().empty()) std::abort();
    return 0;
  }
  const uint64_t bytes = array->nbytes();
  sprig::fuzz::Touch(array->data, bytes);
  auto header = sprig::io::EncodeNpyHeader(*array, "again.npy");
  if (!header.ok()) return 0;  // a type NumPy cannot hold is refused for writing, not a bug
  std::string image = *header;
  image.append(reinterpret_cast<const char*>(array->data), bytes);
  auto again = sprig::io::DecodeNpy(reinterpret_cast<const uint8_t*>(image.data()), image.size(),
                                    nullptr, "x", "again.npy");
  if (!again.ok() || again->type != array->type || again->shape != array->shape ||
      (bytes > 0 && std::memcmp(again->data, array->data, bytes) != 0)) {
    std::abort();
  }
  return 0;
}
