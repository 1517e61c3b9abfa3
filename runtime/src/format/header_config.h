// Conversion between ModelConfig and its FlatBuffers form in a .sprig header.
#pragma once

#include <flatbuffers/flatbuffers.h>

#include "sprig/config.h"
#include "sprig/status.h"
#include "sprig_schema/model_generated.h"

namespace sprig::format {

flatbuffers::Offset<fb::Config> BuildConfig(flatbuffers::FlatBufferBuilder& b,
                                            const ModelConfig& config);

// The oldest format version whose readers run `config` as it means: 2 for post-norm blocks and
// for experts layers whose router scoring is not softmax, which a version-1 reader would run as
// pre-norm or as softmax routers without noticing (their tensors are the same); 1 otherwise. The
// other variants (shared experts, the embedding norm, no final norm, per-projection biases, the
// lm head's transform and bias) change the tensor set, which a version-1 reader refuses by name,
// so they need no new version.
uint32_t RequiredFormatVersion(const ModelConfig& config);

// Reads a verified FlatBuffers config; refuses enum values this build does not know.
// Does not run ValidateConfig; the caller does.
Result<ModelConfig> ReadConfig(const fb::Config& config, const std::string& source);

}  // namespace sprig::format
