// Conversion between ModelConfig and its FlatBuffers form in a .sprig header.
#pragma once

#include <flatbuffers/flatbuffers.h>

#include "sprig/config.h"
#include "sprig/status.h"
#include "sprig_schema/model_generated.h"

namespace sprig::format {

flatbuffers::Offset<fb::Config> BuildConfig(flatbuffers::FlatBufferBuilder& b,
                                            const ModelConfig& config);

// Reads a verified FlatBuffers config; refuses enum values this build does not know.
// Does not run ValidateConfig; the caller does.
Result<ModelConfig> ReadConfig(const fb::Config& config, const std::string& source);

}  // namespace sprig::format
