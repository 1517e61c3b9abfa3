// Fuzz target: Model::open on any bytes, then a forward pass (and, for language models, decoding
// and generation) on whatever opens, and the checksum pass. Nothing may crash, read outside the
// file or allocate without bound; every refusal is a Status with a message.
//
// Most mutations break the header checksum, which open checks first. So that mutated headers
// also reach the FlatBuffers verifier and the range checks behind it, every input is opened
// twice: as it is, and with the preamble's file size and both checksums recomputed.
#include <cstdint>
#include <cstdlib>
#include <cstring>
#include <string>
#include <vector>

#include "format/preamble.h"
#include "fuzz_support.h"
#include "sprig/session.h"

namespace {

// Little-endian field access to the preamble (schema/README.md, "Preamble").
uint64_t GetU64(const uint8_t* p) {
  uint64_t v = 0;
  for (int i = 0; i < 8; ++i) v |= uint64_t{p[i]} << (8 * i);
  return v;
}
uint32_t GetU32(const uint8_t* p) {
  return static_cast<uint32_t>(GetU64(p) & 0xffffffffu);
}

// The input with a consistent preamble, or empty when it has no sprig magic or its header range
// lies outside it (then there is nothing to repair).
std::vector<uint8_t> Repaired(const uint8_t* data, size_t size) {
  namespace f = sprig::format;
  if (size < f::kPreambleSize || std::memcmp(data, f::kMagic, sizeof(f::kMagic)) != 0) return {};
  f::Preamble p;
  p.version = GetU32(data + 8);
  p.header_offset = GetU64(data + 16);
  p.header_size = GetU64(data + 24);
  p.file_size = size;
  if (p.header_offset > size || p.header_size > size - p.header_offset) return {};
  p.header_crc32 = f::Crc32(data + p.header_offset, p.header_size);
  std::vector<uint8_t> out(data, data + size);
  f::EncodePreamble(p, out.data());
  return out;
}

void RunStack(sprig::Session& s, const sprig::ModelConfig& c) {
  constexpr size_t kRows = 3;
  std::vector<float> in(kRows * c.input_dim), out(kRows * c.output_dim());
  for (size_t i = 0; i < in.size(); ++i) in[i] = static_cast<float>(i % 7) * 0.5f - 1.5f;
  sprig::Routes routes;
  (void)s.forward(in.data(), kRows, out.data(), &routes);
}

void RunTransformer(sprig::Session& s, const sprig::ModelConfig& c) {
  const size_t length = c.max_seq < 5 ? c.max_seq : 5;
  std::vector<int32_t> tokens(length);
  for (size_t i = 0; i < length; ++i) tokens[i] = static_cast<int32_t>((i * 7) % c.vocab_size);
  const size_t per_token = c.output_dim();
  const size_t outputs =
      c.head.kind == sprig::HeadKind::kClassifier ? per_token : length * per_token;
  std::vector<float> out(outputs);
  sprig::Routes routes;
  (void)s.forward_tokens(tokens.data(), 1, length, out.data(), &routes);
  if (!c.causal || c.head.kind != sprig::HeadKind::kLm) return;
  std::vector<float> logits(c.vocab_size);
  (void)s.append_tokens(tokens.data(), length, logits.data());
  (void)s.append_token(0, logits.data());
  sprig::GenerateOptions g;
  g.count = 3;
  (void)s.generate({1}, g, [](int32_t) { return true; });
}

void OpenAndRun(const uint8_t* data, size_t size) {
  static sprig::fuzz::MemoryFile memory;
  auto model = sprig::Model::open(memory.Write(data, size));
  if (!model.ok()) {
    if (model.status().message().empty()) std::abort();
    return;
  }
  (void)(*model)->verify_checksums();
  auto session = sprig::Session::create(*model);
  if (!session.ok()) return;
  const sprig::ModelConfig& c = (*model)->config();
  if (c.family == sprig::Family::kStack) {
    RunStack(**session, c);
  } else {
    RunTransformer(**session, c);
  }
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  OpenAndRun(data, size);
  const std::vector<uint8_t> repaired = Repaired(data, size);
  if (!repaired.empty() && std::memcmp(repaired.data(), data, sprig::format::kPreambleSize) != 0) {
    OpenAndRun(repaired.data(), repaired.size());
  }
  return 0;
}
