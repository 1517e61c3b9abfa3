// Model::Impl, the private state behind the public sprig::Model: the mapped file and the
// network bound to it once at open. For the runtime's own use (sessions, the C API, internal
// queries); not installed.
#pragma once

#include <memory>

#include "format/model_file.h"
#include "network/network.h"
#include "sprig/model.h"
#include "tokenizer/tokenizer.h"

namespace sprig {

struct Model::Impl {
  std::unique_ptr<format::ModelFile> file;
  std::unique_ptr<network::Network> network;  // bound to *file, which it must not outlive
  // The config's tokenizer, checked and ready at open; null for tokenizer "none".
  std::unique_ptr<tokenizer::Tokenizer> tokenizer;

  // The tokenizer, or InvalidArgument naming the model when it has none (`call` names what
  // needed it).
  Result<const tokenizer::Tokenizer*> RequireTokenizer(const char* call) const;

  static const Impl& Of(const Model& model) { return *model.impl_; }
};

}  // namespace sprig
