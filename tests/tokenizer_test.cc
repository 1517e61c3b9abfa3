// The tokenizers on small hand-built specs: each algorithm, unknowns, byte fallback, decoding
// and streaming, the section's round trip and its refusal of damaged bytes. Agreement with the
// SentencePiece library on trained models is tests/tokenizer_agreement_test.cc.
#include <gtest/gtest.h>

#include <cstring>
#include <random>
#include <string>
#include <vector>

#include "converter/tokenizer/sentencepiece_model.h"
#include "tokenizer/section.h"
#include "tokenizer/tokenizer.h"
#include "tokenizer/utf8.h"

namespace sprig::tokenizer {
namespace {

const std::string kSpace = "\xE2\x96\x81";  // U+2581, SentencePiece's escaped space

struct PieceDef {
  std::string piece;
  float score;
  PieceType type;
};

TokenizerSpec SpecOf(Algorithm algorithm, const std::vector<PieceDef>& pieces) {
  TokenizerSpec spec;
  spec.algorithm = algorithm;
  for (const PieceDef& p : pieces) {
    spec.pieces.push_back(p.piece);
    spec.scores.push_back(p.score);
    spec.types.push_back(p.type);
  }
  spec.unk_id = 0;
  spec.bos_id = 1;
  spec.eos_id = 2;
  return spec;
}

// <unk> <s> </s> then the given normal pieces.
TokenizerSpec Basic(Algorithm algorithm, const std::vector<std::pair<std::string, float>>& normal) {
  std::vector<PieceDef> pieces = {{"<unk>", 0, PieceType::kUnknown},
                                  {"<s>", 0, PieceType::kControl},
                                  {"</s>", 0, PieceType::kControl}};
  for (const auto& [piece, score] : normal) pieces.push_back({piece, score, PieceType::kNormal});
  return SpecOf(algorithm, pieces);
}

void AddBytePieces(TokenizerSpec& spec) {
  static const char* kHex = "0123456789ABCDEF";
  for (int b = 0; b < 256; ++b) {
    spec.pieces.push_back(std::string("<0x") + kHex[b >> 4] + kHex[b & 15] + ">");
    spec.scores.push_back(0);
    spec.types.push_back(PieceType::kByte);
  }
  spec.byte_fallback = true;
}

std::unique_ptr<Tokenizer> Open(const TokenizerSpec& spec) {
  const std::string section = SerializeSection(spec);
  auto opened = OpenSentencePiece(reinterpret_cast<const uint8_t*>(section.data()), section.size(),
                                  static_cast<uint32_t>(spec.pieces.size()));
  EXPECT_TRUE(opened.ok()) << opened.status().message();
  return opened.ok() ? std::move(*opened) : nullptr;
}

int32_t IdOf(const TokenizerSpec& spec, const std::string& piece) {
  for (size_t i = 0; i < spec.pieces.size(); ++i) {
    if (spec.pieces[i] == piece) return static_cast<int32_t>(i);
  }
  return -1;
}

std::string DecodeAll(const Tokenizer& tokenizer, const std::vector<int32_t>& ids) {
  auto text = tokenizer.Decode(ids);
  EXPECT_TRUE(text.ok()) << text.status().message();
  return text.ok() ? *text : "";
}

TEST(TokenizerUnigram, TakesTheBestScoredPath) {
  // "▁ab": ▁a + b scores -1 - 1 = -2, ▁ + ab scores -3 - 0.5, ▁ + a + b worse still.
  const TokenizerSpec spec = Basic(
      Algorithm::kUnigram, {{kSpace, -3}, {"a", -2}, {"b", -1}, {kSpace + "a", -1}, {"ab", -0.5f}});
  auto tokenizer = Open(spec);
  EXPECT_EQ(tokenizer->Encode("ab"),
            (std::vector<int32_t>{IdOf(spec, kSpace + "a"), IdOf(spec, "b")}));
  EXPECT_EQ(DecodeAll(*tokenizer, tokenizer->Encode("ab")), "ab");
}

TEST(TokenizerUnigram, MergesARunOfUnknownsAndSkipsUnusedPieces) {
  TokenizerSpec spec = Basic(Algorithm::kUnigram, {{kSpace, -1}, {"a", -1}});
  spec.pieces.push_back("xy");  // unused: never chosen, though it would cover "xy"
  spec.scores.push_back(0);
  spec.types.push_back(PieceType::kUnused);
  auto tokenizer = Open(spec);
  // "xy" and "z" are unknown characters in a row: one unknown id.
  EXPECT_EQ(tokenizer->Encode("axyz"),
            (std::vector<int32_t>{IdOf(spec, kSpace), IdOf(spec, "a"), spec.unk_id}));
  EXPECT_EQ(DecodeAll(*tokenizer, tokenizer->Encode("axyz")), "a \xE2\x81\x87 ");
}

TEST(TokenizerUnigram, UserDefinedSymbolsWinAndStayUnnormalized) {
  TokenizerSpec spec = Basic(Algorithm::kUnigram, {{kSpace, -1}, {"a", -1}, {"b", -1}});
  spec.pieces.push_back("ab");
  spec.scores.push_back(0);
  spec.types.push_back(PieceType::kUserDefined);
  auto tokenizer = Open(spec);
  EXPECT_EQ(tokenizer->Encode("ab"), (std::vector<int32_t>{IdOf(spec, kSpace), IdOf(spec, "ab")}));
}

TEST(TokenizerBpe, MergesTheBestPairFirstAndLeftmostOnTies) {
  // "aaa": "aa" merges at the left first, leaving "aa" + "a".
  const TokenizerSpec spec = Basic(Algorithm::kBpe, {{kSpace, -1}, {"a", -2}, {"aa", -1}});
  TokenizerSpec no_prefix = spec;
  no_prefix.add_dummy_prefix = false;
  auto tokenizer = Open(no_prefix);
  EXPECT_EQ(tokenizer->Encode("aaa"), (std::vector<int32_t>{IdOf(spec, "aa"), IdOf(spec, "a")}));
}

TEST(TokenizerBpe, SplitsUnusedPiecesBackAndFreezesUserSymbols) {
  TokenizerSpec spec = Basic(Algorithm::kBpe, {{"a", -5}, {"b", -5}, {"c", -5}, {"abc", -1}});
  spec.add_dummy_prefix = false;
  spec.pieces.push_back("ab");  // unused, but merges on the way to "abc"
  spec.scores.push_back(-2);
  spec.types.push_back(PieceType::kUnused);
  spec.pieces.push_back("bc");  // unused, and nothing completes it
  spec.scores.push_back(-3);
  spec.types.push_back(PieceType::kUnused);
  spec.pieces.push_back("c!");
  spec.scores.push_back(0);
  spec.types.push_back(PieceType::kUserDefined);
  auto tokenizer = Open(spec);
  EXPECT_EQ(tokenizer->Encode("abc"), (std::vector<int32_t>{IdOf(spec, "abc")}));
  EXPECT_EQ(tokenizer->Encode("bc"), (std::vector<int32_t>{IdOf(spec, "b"), IdOf(spec, "c")}));
  // "c!" is one frozen symbol: "b" cannot merge with its "c".
  EXPECT_EQ(tokenizer->Encode("bc!"), (std::vector<int32_t>{IdOf(spec, "b"), IdOf(spec, "c!")}));
}

TEST(TokenizerByteFallback, UnknownCharactersBecomeTheirBytes) {
  TokenizerSpec spec = Basic(Algorithm::kUnigram, {{kSpace, -1}, {"a", -1}});
  AddBytePieces(spec);
  auto tokenizer = Open(spec);
  EXPECT_EQ(tokenizer->Encode("a\xC3\xA9"),
            (std::vector<int32_t>{IdOf(spec, kSpace), IdOf(spec, "a"), IdOf(spec, "<0xC3>"),
                                  IdOf(spec, "<0xA9>")}));
  // Malformed input is U+FFFD per bad byte, then its three bytes.
  EXPECT_EQ(tokenizer->Encode("\xFF").size(), 4u);
  EXPECT_EQ(DecodeAll(*tokenizer, tokenizer->Encode("a\xC3\xA9")), "a\xC3\xA9");
}

TEST(TokenizerDecode, ControlUnknownBytesAndTheLeadingSpace) {
  TokenizerSpec spec = Basic(Algorithm::kUnigram, {{kSpace + "a", -1}, {"b", -1}});
  AddBytePieces(spec);
  spec.unk_surface = "?";
  auto tokenizer = Open(spec);
  const int32_t a = IdOf(spec, kSpace + "a");
  // The first text of a decode drops its piece's leading space, even after a control piece.
  EXPECT_EQ(DecodeAll(*tokenizer, {spec.bos_id, a, a, spec.eos_id}), "a a");
  EXPECT_EQ(DecodeAll(*tokenizer, {spec.unk_id, a}), "? a");
  // A byte that starts no character is U+FFFD; a cut character too.
  EXPECT_EQ(
      DecodeAll(*tokenizer, {IdOf(spec, "<0xFF>"), IdOf(spec, "<0x41>"), IdOf(spec, "<0xC3>"), a}),
      "\xEF\xBF\xBD"
      "A\xEF\xBF\xBD a");
  auto bad = tokenizer->Decode(std::vector<int32_t>{a, 100000});
  ASSERT_FALSE(bad.ok());
  EXPECT_NE(bad.status().message().find("token 1 is 100000"), std::string::npos);
}

TEST(TokenizerDecode, NoLeadingSpaceRuleWithoutPrefixOrCleanUp) {
  TokenizerSpec spec = Basic(Algorithm::kUnigram, {{kSpace + "a", -1}});
  spec.add_dummy_prefix = false;
  spec.remove_extra_whitespaces = false;
  auto tokenizer = Open(spec);
  EXPECT_EQ(DecodeAll(*tokenizer, {IdOf(spec, kSpace + "a")}), " a");
}

TEST(TokenizerStream, NeverSplitsACharacterAndEqualsTheWholeDecode) {
  TokenizerSpec spec = Basic(Algorithm::kUnigram, {{kSpace + "a", -1}, {"b", -1}});
  AddBytePieces(spec);
  auto tokenizer = Open(spec);
  std::mt19937 rng(5);
  const std::vector<std::string> chars = {"a", "\xC3\xA9", "\xE2\x82\xAC", "\xF0\x9F\x98\x80"};
  for (int round = 0; round < 300; ++round) {
    std::vector<int32_t> ids;
    for (int n = static_cast<int>(rng() % 12); n > 0; --n) {
      const int pick = static_cast<int>(rng() % 10);
      if (pick < 6) {
        for (unsigned char c : chars[rng() % chars.size()]) {
          ids.push_back(IdOf(spec, std::string("<0x") + "0123456789ABCDEF"[c >> 4] +
                                       "0123456789ABCDEF"[c & 15] + ">"));
        }
      } else if (pick < 8) {
        ids.push_back(3 + static_cast<int32_t>(rng() % 2));
      } else {
        ids.push_back(static_cast<int32_t>(5 + rng() % 256));  // any byte
      }
    }
    StreamDecoder stream(*tokenizer);
    std::string streamed;
    for (int32_t id : ids) {
      auto part = stream.Push(id);
      ASSERT_TRUE(part.ok());
      EXPECT_TRUE(IsValidUtf8(*part));
      streamed += *part;
    }
    streamed += stream.Finish();
    EXPECT_EQ(streamed, DecodeAll(*tokenizer, ids));
  }
}

TEST(TokenizerStream, ByteTokenizerHoldsACharacterUntilItIsWhole) {
  auto tokenizer = MakeByteTokenizer();
  EXPECT_EQ(tokenizer->Encode("\xC3\xA9"), (std::vector<int32_t>{0xC3, 0xA9}));
  StreamDecoder stream(*tokenizer);
  EXPECT_EQ(*stream.Push(0xE2), "");
  EXPECT_EQ(*stream.Push(0x82), "");
  EXPECT_EQ(*stream.Push(0xAC), "\xE2\x82\xAC");
  EXPECT_EQ(*stream.Push(0xFF), "\xFF");  // not a character at all: passed on as it is
  EXPECT_EQ(*stream.Push(0xC3), "");
  EXPECT_EQ(stream.Finish(), "\xC3");
  EXPECT_FALSE(stream.Push(256).ok());
}

TokenizerSpec WithCharsMap() {
  TokenizerSpec spec = Basic(Algorithm::kUnigram, {{kSpace, -1}, {"b", -1}, {"c", -1}});
  // A Darts-clone double array with one key, "A" -> offset 0 ("b"): the root's children start
  // at 256, "A" sits at 256 ^ 0x41 with a leaf whose value unit is at 321 ^ 1.
  std::vector<uint32_t> units(512, 0);
  units[0] = 256u << 10;
  units[321] = (1u << 10) | (1u << 8) | 0x41;
  units[320] = (1u << 31) | 0;
  std::string blob(4, '\0');
  const uint32_t trie_size = static_cast<uint32_t>(units.size() * 4);
  std::memcpy(blob.data(), &trie_size, 4);
  blob.append(reinterpret_cast<const char*>(units.data()), trie_size);
  blob.append("b\0", 2);
  spec.precompiled_charsmap = blob;
  return spec;
}

TEST(TokenizerNormalizer, AppliesTheCharsMapAndWhitespaceRules) {
  const TokenizerSpec spec = WithCharsMap();
  auto tokenizer = Open(spec);
  const int32_t space = IdOf(spec, kSpace), b = IdOf(spec, "b"), c = IdOf(spec, "c");
  EXPECT_EQ(tokenizer->Encode("  A  c "), (std::vector<int32_t>{space, b, space, c}));
  EXPECT_EQ(tokenizer->Encode("   "), std::vector<int32_t>{});
  EXPECT_EQ(tokenizer->Encode(""), std::vector<int32_t>{});
}

TEST(TokenizerSection, RoundTrips) {
  TokenizerSpec spec = WithCharsMap();
  AddBytePieces(spec);
  spec.treat_whitespace_as_suffix = true;
  spec.unk_surface = "<?>";
  spec.pad_id = -1;
  const std::string section = SerializeSection(spec);
  auto back = ParseSection(reinterpret_cast<const uint8_t*>(section.data()), section.size(),
                           static_cast<uint32_t>(spec.pieces.size()));
  ASSERT_TRUE(back.ok()) << back.status().message();
  EXPECT_EQ(back->pieces, spec.pieces);
  EXPECT_EQ(back->scores, spec.scores);
  EXPECT_EQ(back->types, spec.types);
  EXPECT_EQ(back->precompiled_charsmap, spec.precompiled_charsmap);
  EXPECT_EQ(back->unk_surface, spec.unk_surface);
  EXPECT_EQ(back->treat_whitespace_as_suffix, true);
  EXPECT_EQ(back->byte_fallback, true);
  EXPECT_EQ(back->bos_id, spec.bos_id);
  EXPECT_EQ(SerializeSection(*back), section);
}

// Opens `bytes` and expects a refusal whose message holds `field`.
void ExpectRefused(const std::string& bytes, uint32_t vocab_size, const std::string& field) {
  auto opened =
      OpenSentencePiece(reinterpret_cast<const uint8_t*>(bytes.data()), bytes.size(), vocab_size);
  ASSERT_FALSE(opened.ok()) << "accepted; expected a message naming " << field;
  EXPECT_NE(opened.status().message().find(field), std::string::npos) << opened.status().message();
}

void PutU32(std::string& bytes, size_t at, uint32_t value) {
  std::memcpy(&bytes[at], &value, 4);
}

TEST(TokenizerSection, RefusesDamage) {
  const TokenizerSpec spec = WithCharsMap();
  const auto n = static_cast<uint32_t>(spec.pieces.size());
  const std::string good = SerializeSection(spec);
  ExpectRefused(good, n + 1, "vocab_size");
  for (size_t cut : {size_t{0}, size_t{10}, size_t{63}, size_t{64}, good.size() - 1}) {
    ExpectRefused(good.substr(0, cut), n, "tokenizer section");
  }
  std::string bytes = good;
  bytes[0] = 'X';
  ExpectRefused(bytes, n, "magic");
  bytes = good;
  bytes[4] = 9;
  ExpectRefused(bytes, n, "version");
  bytes = good;
  PutU32(bytes, 20, n + 1);
  ExpectRefused(bytes, n + 1, "add up");
  bytes = good;
  bytes[16] = 7;
  ExpectRefused(bytes, n, "algorithm");
  bytes = good;
  PutU32(bytes, 24, 1);  // unk_id on a control piece
  ExpectRefused(bytes, n, "unk_id");
  // piece_ends: after 64 bytes of header, n scores, n types and their padding.
  const size_t ends = 64 + 4 * n + n + (4 - n % 4) % 4;
  bytes = good;
  PutU32(bytes, ends + 4, 1);  // the second piece would end before it starts
  ExpectRefused(bytes, n, "piece_ends[1]");
  bytes = good;
  bytes[64 + 4 * n + 2] = 9;  // an unknown piece type
  ExpectRefused(bytes, n, "types[2]");
  // The trie's one value unit moved past the replacement strings.
  const size_t charsmap = good.size() - spec.precompiled_charsmap.size();
  bytes = good;
  PutU32(bytes, charsmap + 4 + 4 * 320, (1u << 31) | 77);
  ExpectRefused(bytes, n, "precompiled_charsmap");
  bytes = good;
  PutU32(bytes, charsmap, 3);  // a trie size that is not a multiple of 4
  ExpectRefused(bytes, n, "precompiled_charsmap");
}

TEST(TokenizerSection, SurvivesRandomCorruption) {
  TokenizerSpec spec = WithCharsMap();
  AddBytePieces(spec);
  const std::string good = SerializeSection(spec);
  std::mt19937 rng(11);
  for (int round = 0; round < 3000; ++round) {
    std::string bytes = good;
    for (int k = 1 + static_cast<int>(rng() % 4); k > 0; --k) {
      bytes[rng() % bytes.size()] = static_cast<char>(rng());
    }
    auto opened = OpenSentencePiece(reinterpret_cast<const uint8_t*>(bytes.data()), bytes.size(),
                                    static_cast<uint32_t>(spec.pieces.size()));
    if (opened.ok()) {
      // Whatever opens must encode and decode without harm.
      const std::vector<int32_t> ids = (*opened)->Encode("A bc \xC3\xA9 \xFF x");
      EXPECT_TRUE((*opened)->Decode(ids).ok());
    }
  }
}

TEST(TokenizerConverter, RefusesAFileThatIsNotAModelNamingIt) {
  const std::string path = std::string(SPRIG_SOURCE_DIR) + "/schema/README.md";
  auto spec = convert::ReadSentencePieceModel(path);
  ASSERT_FALSE(spec.ok());
  EXPECT_NE(spec.status().message().find(path), std::string::npos) << spec.status().message();
}

}  // namespace
}  // namespace sprig::tokenizer
