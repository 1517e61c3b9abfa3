// The records a session has read, for its statistics.
#pragma once

#include <cstddef>
#include <cstdint>
#include <vector>

namespace sprig::layers {

// One bitset per model layer (bit i of word i / 64 is record i), empty for layers without
// records. Layers mark records on the calling thread only, before or after their parallel
// parts, so no synchronisation is needed and the result is the same for any thread count.
struct TouchLog {
  std::vector<std::vector<uint64_t>> bits;
  void Mark(size_t layer, uint64_t record) {
    bits[layer][record / 64] |= uint64_t{1} << (record % 64);
  }
};

}  // namespace sprig::layers
