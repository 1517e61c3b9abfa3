// Model::Impl, the private state behind the public sprig::Model: the mapped file and the
// network bound to it once at open. For the runtime's own use (sessions, the C API, internal
// queries); not installed.
#pragma once

#include <memory>

#include "format/model_file.h"
#include "network/network.h"
#include "sprig/model.h"

namespace sprig {

struct Model::Impl {
  std::unique_ptr<format::ModelFile> file;
  std::unique_ptr<network::Network> network;  // bound to *file, which it must not outlive

  static const Impl& Of(const Model& model) { return *model.impl_; }
};

}  // namespace sprig
