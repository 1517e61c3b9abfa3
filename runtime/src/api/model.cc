#include "sprig/model.h"

#include "format/model_file.h"
#include "layers/feed_forward.h"
#include "model/tensor_spec.h"

namespace sprig {

Model::Model(std::unique_ptr<format::ModelFile> file) : file_(std::move(file)) {}
Model::~Model() = default;

Result<std::shared_ptr<const Model>> Model::open(const std::string& path,
                                                 const OpenOptions& options) {
  format::OpenFileOptions file_options;
  file_options.advise_random_records = options.advise_random_records;
  file_options.warm_hot = options.warm_hot;
  file_options.lock_hot = options.lock_hot;
  SPRIG_ASSIGN_OR_RETURN(auto file, format::ModelFile::Open(path, file_options));
  std::shared_ptr<Model> model(new Model(std::move(file)));
  // Binding only records pointers into the mapping; no weight is read.
  const format::ModelFile& f = *model->file_;
  for (size_t i = 0; i < f.config().layers.size(); ++i) {
    SPRIG_ASSIGN_OR_RETURN(auto layer, layers::BindLayer(f, i, LayerPrefix(f.config(), i)));
    model->layers_.push_back(std::move(layer));
  }
  return std::shared_ptr<const Model>(std::move(model));
}

const ModelConfig& Model::config() const {
  return file_->config();
}
const std::string& Model::path() const {
  return file_->path();
}
uint64_t Model::file_size() const {
  return file_->file_size();
}
Status Model::verify_checksums() const {
  return file_->VerifyChecksums();
}
bool Model::hot_locked() const {
  return file_->hot_locked();
}

Residency Model::residency() const {
  Residency r;
  for (const format::SectionInfo& s : file_->sections()) {
    SectionResidency sr;
    sr.name = s.name;
    sr.records = s.records;
    sr.layer = s.records ? s.layer : -1;
    sr.size = s.size;
    sr.resident_bytes = format::ResidentBytes(file_->base() + s.offset, s.size);
    (s.records ? r.records_size : r.hot_size) += sr.size;
    (s.records ? r.records_resident : r.hot_resident) += sr.resident_bytes;
    r.sections.push_back(std::move(sr));
  }
  return r;
}

}  // namespace sprig
