// sprig's SentencePiece tokenizer against the SentencePiece library (Debian's
// python3-sentencepiece), token for token, on models it trains: tests/python/
// tokenizer_agreement.py drives sprig_tokenizer_check (tests/tokenizer_check.cc).
#include <gtest/gtest.h>

#include <cstdio>
#include <string>

#include "support/test_util.h"

namespace sprig {
namespace {

TEST(TokenizerAgreement, MatchesSentencePieceTokenForToken) {
#ifndef SPRIG_TOKENIZER_CHECK_PATH
  GTEST_SKIP() << "this build has no libsentencepiece, so no sprig_tokenizer_check";
#else
  const testing::CommandResult r = testing::Run(
      testing::Python() + " " +
      testing::Quote(std::string(SPRIG_SOURCE_DIR) + "/tests/python/tokenizer_agreement.py") + " " +
      testing::BuiltProgram(SPRIG_TOKENIZER_CHECK_PATH));
  EXPECT_EQ(r.exit_code, 0) << r.output;
  std::printf("%s", r.output.c_str());  // the counts per model, for the log
#endif
}

}  // namespace
}  // namespace sprig
