#include "sprig/model.h"

#include "api/input_rules.h"
#include "api/model_impl.h"
#include "base/status_macros.h"
#include "kernels/kernels.h"
#include "model/flops.h"
#include "model/tensor_spec.h"
#include "network/stack_network.h"
#include "platform/mapping.h"
#include "transformer/transformer.h"

namespace sprig {
namespace {

// The record set `records` points into, as an index into the file's list; -1 for null.
int RecordSetIndex(const format::ModelFile& file, const format::RecordSetInfo* records) {
  if (records == nullptr) return -1;
  return static_cast<int>(records - file.record_sets().data());
}

// The config's tokenizer: the byte one, or the SentencePiece vocabulary of the file's tokenizer
// section (whose checksum the file's open has checked), every part of it checked here.
Result<std::unique_ptr<tokenizer::Tokenizer>> OpenTokenizer(const format::ModelFile& file) {
  switch (file.config().tokenizer) {
    case Tokenizer::kNone:
      return std::unique_ptr<tokenizer::Tokenizer>();
    case Tokenizer::kByte:
      return tokenizer::MakeByteTokenizer();
    case Tokenizer::kSentencePiece:
      break;
  }
  uint64_t size = 0;
  const uint8_t* section = file.TokenizerSection(&size);
  auto opened = tokenizer::OpenSentencePiece(section, size, file.config().vocab_size);
  if (!opened.ok()) {
    return Status::Corruption(file.path() + ": tokenizer section: " + opened.status().message());
  }
  return std::move(*opened);
}

}  // namespace

Result<const tokenizer::Tokenizer*> Model::Impl::RequireTokenizer(const char* call) const {
  if (tokenizer) return tokenizer.get();
  return Status::InvalidArgument(
      std::string(call) + ": " + file->path() + " has no tokenizer (its config names tokenizer \"" +
      ToString(file->config().tokenizer) + "\"); give token ids instead of text");
}

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
  SPRIG_ASSIGN_OR_RETURN(impl->tokenizer, OpenTokenizer(*impl->file));
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
uint32_t Model::format_version() const {
  return impl_->file->format_version();
}
const std::string& Model::producer() const {
  return impl_->file->producer();
}
uint64_t Model::header_size() const {
  return impl_->file->header_size();
}
const std::string& Model::config_json() const {
  return impl_->file->config_json();
}

std::vector<SectionDescription> Model::sections() const {
  std::vector<SectionDescription> out;
  for (const format::SectionInfo& s : impl_->file->sections()) {
    out.push_back({s.name, s.records, s.tokenizer, s.layer, s.offset, s.size, s.padding});
  }
  return out;
}

std::vector<LayerDescription> Model::layer_descriptions() const {
  const format::ModelFile& file = *impl_->file;
  std::vector<LayerDescription> out;
  for (const auto& layer : impl_->network->layers()) {
    LayerDescription d;
    d.index = layer->index();
    d.config = file.config().layers[d.index];
    d.in = layer->in();
    d.out = layer->out();
    d.route_width = layer->route_width();
    d.units = layer->unit_count();
    d.record_set = RecordSetIndex(file, layer->records());
    d.records = layer->record_count();
    d.record_size = layer->records() ? layer->records()->record_size : 0;
    const LayerCost cost = CostOf(d.config);
    d.params = cost.params;
    d.flops_per_token = cost.flops_per_token;
    d.dense_width = cost.dense_width;
    d.dense_flops_per_token = cost.dense_flops_per_token;
    out.push_back(std::move(d));
  }
  return out;
}

std::vector<TensorDescription> Model::tensor_descriptions() const {
  std::vector<TensorDescription> out;
  for (const format::TensorInfo& t : impl_->file->tensors()) {
    TensorDescription d;
    d.name = t.name;
    d.shape = t.shape;
    d.dtype = t.dtype;
    d.layer = t.layer;
    d.hot_rows = t.hot_rows;
    d.record_set = t.record_set;
    d.bytes = ElementCount(t.shape) * DTypeSize(t.dtype);
    // One row of scales per row along axis 0 (a 0-d tensor has no scales).
    d.scale_bytes = t.shape.empty() ? 0 : t.shape[0] * t.scale_row_bytes;
    d.error_max_abs = t.error_max_abs;
    d.error_rel_rms = t.error_rel_rms;
    out.push_back(std::move(d));
  }
  return out;
}

Result<std::vector<uint64_t>> Model::output_shape(InputKind kind,
                                                  const std::vector<uint64_t>& input_shape) const {
  return input_rules::OutputShape(config(), path(), kind, input_shape);
}

Status Model::check_rows(const float* rows, size_t count) const {
  SPRIG_RETURN_IF_ERROR(input_rules::RowsCall(config(), path()));
  return input_rules::FiniteRows(config(), rows, count, &kernels::ActiveKernels());
}

Status Model::check_tokens(const int64_t* tokens, size_t batch, size_t length) const {
  SPRIG_RETURN_IF_ERROR(input_rules::TokensCall(config(), path()));
  SPRIG_RETURN_IF_ERROR(input_rules::Sequences(config(), batch, length));
  return input_rules::TokenRange(config(), tokens, batch, length);
}

Status Model::check_decoding(size_t cached, size_t count) const {
  SPRIG_RETURN_IF_ERROR(input_rules::Decoding(config(), path()));
  return input_rules::DecodingRoom(config(), cached, count);
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
    sr.tokenizer = s.tokenizer;
    sr.layer = s.records ? s.layer : -1;
    sr.size = s.size;
    sr.resident_bytes = format::ResidentBytes(file.base() + s.offset, s.size);
    r.sections.push_back(sr);
    // The totals are the weights' alone; the tokenizer section is listed on its own line.
    if (s.tokenizer) continue;
    (s.records ? r.records_size : r.hot_size) += sr.size;
    (s.records ? r.records_resident : r.hot_resident) += sr.resident_bytes;
  }
  return r;
}

uint64_t Model::process_resident_bytes() const {
  return platform::TouchedBytes(impl_->file->mapping());
}

}  // namespace sprig
