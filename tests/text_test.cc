// Text in and out through the whole chain: `sprig pack --tokenizer` stores a SentencePiece model
// in the file (and refuses what does not fit), open checks the section, and every front end
// (C++, C, the command line, Python) encodes and decodes with it. The tokenizer's own rules are
// checked against the SentencePiece library in tokenizer_test.cc and tokenizer_agreement_test.cc;
// here the reference is the library too (python3-sentencepiece) where a test compares ids.
#include <gtest/gtest.h>

#include <fstream>
#include <string>

#include "sprig/session.h"
#include "sprig/sprig.h"
#include "sprig/text.h"
#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

std::string Sample(const std::string& file) {
  return std::string(SPRIG_SOURCE_DIR) + "/samples/lm/" + file;
}

const std::string kConfig = Sample("subword/config.json");
const std::string kWeights = Sample("subword/weights.npz");
const std::string kTokenizer = Sample("subword/vell-notes.model");

testing::CommandResult Pack(const std::string& config, const std::string& weights,
                            const std::string& out, const std::string& extra) {
  return testing::Run(testing::SprigCli() + " pack " + Quote(config) + " " + Quote(weights) +
                      " -o " + Quote(out) + " " + extra);
}

class Text : public ::testing::Test {
 protected:
  void SetUp() override {
    model_path_ = dir_.File("notes.sprig");
    auto r = Pack(kConfig, kWeights, model_path_, "--tokenizer " + Quote(kTokenizer));
    // Builds without the SentencePiece library (the cross builds) cannot read a .model file.
    if (r.output.find("no SentencePiece reader") != std::string::npos) {
      GTEST_SKIP() << "this build of sprig cannot read SentencePiece models";
    }
    ASSERT_EQ(r.exit_code, 0) << r.output;
  }
  std::shared_ptr<const Model> Open() {
    auto m = Model::open(model_path_);
    EXPECT_TRUE(m.ok()) << m.status().message();
    return m.ok() ? *m : nullptr;
  }
  testing::TempDir dir_;
  std::string model_path_;
};

TEST_F(Text, PackRefusesASentencePieceConfigWithoutItsTokenizer) {
  const std::string out = dir_.File("none.sprig");
  auto r = Pack(kConfig, kWeights, out, "");
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("give its SentencePiece model with --tokenizer"), std::string::npos)
      << r.output;
  EXPECT_FALSE(std::filesystem::exists(testing::FsPath(out)));
}

TEST_F(Text, PackRefusesATokenizerForAConfigThatNamesAnother) {
  const std::string out = dir_.File("byte.sprig");
  auto r = Pack(Sample("tree/config.json"), Sample("tree/weights.npz"), out,
                "--tokenizer " + Quote(kTokenizer));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("names tokenizer \"byte\""), std::string::npos) << r.output;
  EXPECT_FALSE(std::filesystem::exists(testing::FsPath(out)));
}

TEST_F(Text, PackRefusesAVocabularyOfAnotherSize) {
  std::string config = testing::ReadFile(kConfig);
  const size_t at = config.find("\"vocab_size\": 1024");
  ASSERT_NE(at, std::string::npos) << config;
  config.replace(at, 18, "\"vocab_size\": 1000");
  testing::WriteFile(dir_.File("config.json"), config);
  const std::string out = dir_.File("mismatch.sprig");
  auto r = Pack(dir_.File("config.json"), kWeights, out, "--tokenizer " + Quote(kTokenizer));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("has a vocabulary of 1024 pieces"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("vocab_size 1000"), std::string::npos) << r.output;
  EXPECT_FALSE(std::filesystem::exists(testing::FsPath(out)));
}

TEST_F(Text, PackRefusesAFileThatIsNotATokenizerModel) {
  const std::string out = dir_.File("bad.sprig");
  auto r = Pack(kConfig, kWeights, out, "--tokenizer " + Quote(kConfig));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("is not a SentencePiece model"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("config.json"), std::string::npos) << r.output;
  EXPECT_FALSE(std::filesystem::exists(testing::FsPath(out)));
}

TEST_F(Text, OpenRefusesADamagedTokenizerSection) {
  auto model = Open();
  ASSERT_TRUE(model);
  uint64_t offset = 0;
  for (const SectionDescription& s : model->sections()) {
    if (s.tokenizer) offset = s.offset;
  }
  ASSERT_GT(offset, 0u);
  model.reset();
  std::string bytes = testing::ReadFile(model_path_);
  bytes[offset + 100] ^= 0x20;
  const std::string damaged = dir_.File("damaged.sprig");
  testing::WriteFile(damaged, bytes);
  auto m = Model::open(damaged);
  ASSERT_FALSE(m.ok());
  EXPECT_NE(m.status().message().find("tokenizer section's checksum does not match"),
            std::string::npos)
      << m.status().message();
  auto r = testing::Run(testing::SprigCli() + " tokens " + Quote(damaged) + " --text fog");
  EXPECT_EQ(r.exit_code, 2) << r.output;
}

TEST_F(Text, EncodeAndDecodeAgreeWithTheSentencePieceLibrary) {
  auto model = Open();
  ASSERT_TRUE(model);
  const std::string text =
      "Day 12 at Quill Hill: fog until noon.\nMarit saw 3 crates \xF0\x9F\x8D\x8E";
  auto ids = model->encode(text);
  ASSERT_TRUE(ids.ok()) << ids.status().message();
  std::string list;
  for (int32_t id : *ids) {
    if (!list.empty()) list += ',';
    list += std::to_string(id);
  }
  // python3-sentencepiece, the reference library, on the same model file and text.
  auto r = testing::RunPython(
      "import sys, sentencepiece as spm\n"
      "sp = spm.SentencePieceProcessor(model_file=sys.argv[1])\n"
      "print(','.join(map(str, sp.encode(sys.argv[2]))))\n",
      {kTokenizer, text});
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_EQ(r.output, list + "\n");
  auto back = model->decode(*ids);
  ASSERT_TRUE(back.ok()) << back.status().message();
  EXPECT_EQ(*back, text);  // this sample's normaliser is the identity
  EXPECT_FALSE(model->decode({0, 5, 1024}).ok());
}

TEST_F(Text, StreamedGenerationEqualsTheWholeDecode) {
  auto model = Open();
  ASSERT_TRUE(model);
  auto session = Session::create(model);
  ASSERT_TRUE(session.ok());
  const std::string prompt = "Day 41 at Brindle Terrace:";
  GenerateOptions options;
  options.count = 40;
  options.seed = 9;
  std::string streamed;
  std::vector<int32_t> generated;
  ASSERT_TRUE((*session)
                  ->generate_text(prompt, options,
                                  [&](const std::string& text, int32_t token) {
                                    streamed += text;
                                    if (token >= 0) generated.push_back(token);
                                    return true;
                                  })
                  .ok());
  EXPECT_EQ(generated.size(), 40u);
  // The same tokens through generate(): the text path adds nothing but the tokenizer.
  std::vector<int32_t> ids = *model->encode(prompt);
  std::vector<int32_t> direct;
  ASSERT_TRUE((*session)
                  ->generate(ids, options,
                             [&](int32_t t) {
                               direct.push_back(t);
                               return true;
                             })
                  .ok());
  EXPECT_EQ(direct, generated);
  const std::string before = *model->decode(ids);
  ids.insert(ids.end(), generated.begin(), generated.end());
  const std::string whole = *model->decode(ids);
  ASSERT_EQ(whole.substr(0, before.size()), before);
  EXPECT_EQ(streamed, whole.substr(before.size()));
}

TEST_F(Text, TextDecoderNeverSplitsACharacter) {
  auto model = Open();
  ASSERT_TRUE(model);
  // Byte fallback spells a character the vocabulary lacks as its UTF-8 bytes, one token each.
  const std::vector<int32_t> ids = *model->encode("pear \xF0\x9F\x8D\x90 and \xE2\x82\xAC");
  auto decoder = TextDecoder::create(model);
  ASSERT_TRUE(decoder.ok());
  std::string joined;
  for (int32_t id : ids) {
    auto piece = (*decoder)->push(id);
    ASSERT_TRUE(piece.ok());
    // Every piece is whole UTF-8 on its own (Python's strict decoder is not needed: a split
    // character would leave a lead byte at the end or a continuation byte at the start).
    if (!piece->empty()) {
      EXPECT_NE(static_cast<unsigned char>(piece->front()) & 0xC0, 0x80) << *piece;
      EXPECT_LT(static_cast<unsigned char>(piece->back()), 0xC0) << *piece;
    }
    joined += *piece;
  }
  joined += (*decoder)->finish();
  EXPECT_EQ(joined, *model->decode(ids));
  EXPECT_FALSE((*decoder)->push(-1).ok());
}

TEST_F(Text, CApiEncodesDecodesAndStreams) {
  sprig_model_t* model = nullptr;
  char* err = nullptr;
  ASSERT_EQ(sprig_model_open(model_path_.c_str(), &model, &err), SPRIG_OK);
  const std::string text = "We picked 14 crates of hedge fig.";
  int32_t* ids = nullptr;
  size_t count = 0;
  ASSERT_EQ(sprig_model_encode(model, text.data(), text.size(), &ids, &count, &err), SPRIG_OK);
  ASSERT_GT(count, 0u);
  char* back = nullptr;
  size_t length = 0;
  ASSERT_EQ(sprig_model_decode(model, ids, count, &back, &length, &err), SPRIG_OK);
  EXPECT_EQ(std::string(back, length), text);
  sprig_free(back);
  back = nullptr;
  sprig_text_decoder_t* decoder = nullptr;
  ASSERT_EQ(sprig_text_decoder_create(model, &decoder, &err), SPRIG_OK);
  std::string streamed;
  for (size_t i = 0; i < count; ++i) {
    char* piece = nullptr;
    ASSERT_EQ(sprig_text_decoder_push(decoder, ids[i], &piece, &length, &err), SPRIG_OK);
    streamed.append(piece, length);
    sprig_free(piece);
  }
  char* rest = nullptr;
  ASSERT_EQ(sprig_text_decoder_finish(decoder, &rest, &length, &err), SPRIG_OK);
  streamed.append(rest, length);
  EXPECT_EQ(streamed, text);
  const int32_t bad = 5000;
  EXPECT_EQ(sprig_model_decode(model, &bad, 1, &back, &length, &err), SPRIG_INVALID_ARGUMENT);
  ASSERT_NE(err, nullptr);
  EXPECT_NE(std::string(err).find("5000"), std::string::npos) << err;
  sprig_free(rest);
  sprig_free(err);
  sprig_free(ids);
  sprig_text_decoder_destroy(decoder);
  sprig_model_close(model);
}

TEST_F(Text, CommandLineShowsPiecesRunsTextAndGenerates) {
  const std::string cli = testing::SprigCli();
  auto r = testing::Run(cli + " tokens " + Quote(model_path_) + " --text \"Day 12 at Quill Hill\"");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(r.output.find("tokens from 20 bytes (tokenizer sentencepiece"), std::string::npos)
      << r.output;
  EXPECT_NE(r.output.find("\xE2\x96\x81Quill"), std::string::npos) << r.output;
  r = testing::Run(cli + " run " + Quote(model_path_) +
                   " --text \"Day 12 at Quill Hill\" --output " + Quote(dir_.File("y.npy")));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(r.output.find("[1, 5, 1024]"), std::string::npos) << r.output;
  testing::WriteFile(dir_.File("prompt.txt"), "Day 12 at Quill Hill");
  r = testing::Run(cli + " run " + Quote(model_path_) + " --input " +
                   Quote(dir_.File("prompt.txt")) + " --output " + Quote(dir_.File("z.npy")));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_EQ(testing::ReadFile(dir_.File("y.npy")), testing::ReadFile(dir_.File("z.npy")));
  r = testing::Run(cli + " generate " + Quote(model_path_) +
                   " --prompt \"Day 12 at Quill Hill:\" --count 20 --temperature 0");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(r.output.find("caution: generated text comes from a model"), std::string::npos);
}

TEST_F(Text, PythonModuleEncodesAndDecodesAsTheLibrary) {
  // sprig_native's Model.encode/decode beside python3-sentencepiece on the same model file.
  const char* script =
      "import sys, sentencepiece as spm, sprig_native as sn\n"
      "sp = spm.SentencePieceProcessor(model_file=sys.argv[2])\n"
      "texts = ['Day 12 at Quill Hill: fog until noon.', '', '  two  spaces\\tand a tab',\n"
      "         'caf\\u00e9 \\U0001F34E \\uff21\\uff22 e\\u0301', 'x' * 300]\n"
      "with sn.Model(sys.argv[1]) as m:\n"
      "    same = [m.encode(t) == sp.encode(t) for t in texts]\n"
      "    back = [m.decode(sp.encode(t)) == sp.decode(sp.encode(t)) for t in texts]\n"
      "    print('encode', sum(same), 'of', len(texts), 'decode', sum(back), 'of', len(texts))\n";
  const std::string src = SPRIG_SOURCE_DIR;
  auto r = testing::Run("SPRIG_LIBRARY=" + Quote(SPRIG_SHARED_LIBRARY) + " PYTHONPATH=" +
                        Quote(src + "/converter/python") + " " + testing::Python() + " -c " +
                        Quote(script) + " " + Quote(model_path_) + " " + Quote(kTokenizer));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(r.output.find("encode 5 of 5 decode 5 of 5"), std::string::npos) << r.output;
}

TEST(TextWithoutTokenizer, IsRefusedByName) {
  testing::TempDir dir;
  const std::string path = testing::PackSynthesized(
      dir, "stack",
      R"({"family": "stack", "input_dim": 8, "layers": [{"kind": "dense", "width": 8, "out": 4}]})");
  auto model = Model::open(path);
  ASSERT_TRUE(model.ok());
  auto ids = (*model)->encode("fog");
  ASSERT_FALSE(ids.ok());
  EXPECT_NE(ids.status().message().find("has no tokenizer"), std::string::npos)
      << ids.status().message();
  EXPECT_FALSE(TextDecoder::create(*model).ok());
}

TEST(TextByteTokenizer, KeepsOneTokenPerByte) {
  testing::TempDir dir;
  const std::string out = dir.File("tree.sprig");
  auto r = Pack(Sample("tree/config.json"), Sample("tree/weights.npz"), out, "");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  auto m = Model::open(out);
  ASSERT_TRUE(m.ok());
  const std::string text = "fog \xC3\xA9";
  auto ids = (*m)->encode(text);
  ASSERT_TRUE(ids.ok());
  EXPECT_EQ(*ids, (std::vector<int32_t>{'f', 'o', 'g', ' ', 0xC3, 0xA9}));
  EXPECT_EQ(*(*m)->decode(*ids), text);
}

}  // namespace
}  // namespace sprig
