#include "sprig/model.h"

#include "format/model_file.h"

namespace sprig {

Model::Model(std::unique_ptr<format::ModelFile> file) : file_(std::move(file)) {}
Model::~Model() = default;

Result<std::shared_ptr<const Model>> Model::open(const std::string& path,
                                                 const OpenOptions& options) {
  format::OpenFileOptions file_options;
  file_options.advise_random_records = options.advise_random_records;
  SPRIG_ASSIGN_OR_RETURN(auto file, format::ModelFile::Open(path, file_options));
  return std::shared_ptr<const Model>(new Model(std::move(file)));
}

const ModelConfig& Model::config() const { return file_->config(); }
const std::string& Model::path() const { return file_->path(); }
uint64_t Model::file_size() const { return file_->file_size(); }
Status Model::verify_checksums() const { return file_->VerifyChecksums(); }

}  // namespace sprig
