#include "sprig/model.h"

#include "api/model_impl.h"
#include "network/stack_network.h"
#include "transformer/transformer.h"

namespace sprig {

Model::Model(std::unique_ptr<Impl> impl) : impl_(std::move(impl)) {}
Model::~Model() = default;

Result<std::shared_ptr<const Model>> Model::open(const std::string& path,
                                                 const OpenOptions& options) {
  format::OpenFileOptions file_options;
  file_options.advise_random_records = options.advise_random_records;
  file_options.warm_hot = options.warm_hot;
  file_options.lock_hot = options.lock_hot;
  auto impl = std::make_unique<Impl>();
  SPRIG_ASSIGN_OR_RETURN(impl->file, format::ModelFile::Open(path, file_options));
  // Binding only records pointers into the mapping; no weight is read.
  if (impl->file->config().family == Family::kStack) {
    SPRIG_ASSIGN_OR_RETURN(impl->network, network::StackNetwork::Bind(*impl->file));
  } else {
    SPRIG_ASSIGN_OR_RETURN(impl->network, transformer::TransformerNetwork::Bind(*impl->file));
  }
  return std::shared_ptr<const Model>(new Model(std::move(impl)));
}

const ModelConfig& Model::config() const {
  return impl_->file->config();
}
const std::string& Model::path() const {
  return impl_->file->path();
}
uint64_t Model::file_size() const {
  return impl_->file->file_size();
}
Status Model::verify_checksums() const {
  return impl_->file->VerifyChecksums();
}
bool Model::hot_locked() const {
  return impl_->file->hot_locked();
}

Residency Model::residency() const {
  const format::ModelFile& file = *impl_->file;
  Residency r;
  for (const format::SectionInfo& s : file.sections()) {
    SectionResidency sr;
    sr.name = s.name;
    sr.records = s.records;
    sr.layer = s.records ? s.layer : -1;
    sr.size = s.size;
    sr.resident_bytes = format::ResidentBytes(file.base() + s.offset, s.size);
    (s.records ? r.records_size : r.hot_size) += sr.size;
    (s.records ? r.records_resident : r.hot_resident) += sr.resident_bytes;
    r.sections.push_back(std::move(sr));
  }
  return r;
}

const format::ModelFile& Model::file() const {
  return *impl_->file;
}
const std::vector<std::unique_ptr<layers::FeedForward>>& Model::layers() const {
  return impl_->network->layers();
}

}  // namespace sprig
