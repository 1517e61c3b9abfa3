// Tests of the .sprig container pieces that need no weights: preamble, row maps, layout.
#include <gtest/gtest.h>

#include "converter/pack/layout.h"
#include "format/preamble.h"
#include "format/row_map.h"

namespace sprig {
namespace {

TEST(FormatPreamble, RoundTrips) {
  format::Preamble p;
  p.header_size = 1234;
  p.file_size = 1 << 20;
  p.header_crc32 = 0xdeadbeef;
  uint8_t bytes[format::kPreambleSize];
  format::EncodePreamble(p, bytes);
  auto back = format::DecodePreamble(bytes, sizeof(bytes), p.file_size, "m.sprig");
  ASSERT_TRUE(back.ok()) << back.status().message();
  EXPECT_EQ(back->header_size, 1234u);
  EXPECT_EQ(back->header_crc32, 0xdeadbeefu);
}
}  // namespace
}  // namespace sprig
