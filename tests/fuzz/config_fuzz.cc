// Fuzz target: the config.json parser. Any text must parse or be refused with a Status; a config
// that parses must survive ConfigToJson -> ParseConfig unchanged, and its tensor list must be
// computable (the limits keep every shape product far from overflow).
#include <cstdint>
#include <cstdlib>
#include <string>

#include "converter/config/config_equal.h"
#include "converter/config/config_json.h"
#include "model/tensor_spec.h"

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  const std::string text(reinterpret_cast<const char*>(data), size);
  auto config = sprig::convert::ParseConfig(text, "config.json");
  if (!config.ok()) {
    if (config.status().message().empty()) std::abort();  // every refusal says why
    return 0;
  }
  auto again = sprig::convert::ParseConfig(sprig::convert::ConfigToJson(*config), "again.json");
  if (!again.ok() || !(*again == *config)) std::abort();
  uint64_t total = 0;
  for (const sprig::TensorSpec& t : sprig::ExpectedTensors(*config)) {
    const uint64_t n = sprig::ElementCount(t.shape);
    if (n > sprig::kMaxTensorElements) std::abort();
    total += n;
  }
  if (total > sprig::kMaxTotalElements) std::abort();
  return 0;
}
