#include "converter/pack/packer.h"

#include <chrono>
#include <condition_variable>
#include <cstring>
#include <deque>
#include <mutex>
#include <thread>

#include "base/status_macros.h"
#include "converter/pack/convert.h"
#include "converter/pack/layout.h"
#include "converter/tokenizer/sentencepiece_model.h"
#include "format/header_config.h"
#include "format/preamble.h"
#include "io/atomic_file.h"
#include "io/tensor_archive.h"
#include "platform/files.h"
#include "sprig_schema/model_generated.h"
#include "tokenizer/tokenizer.h"

namespace sprig::convert {
namespace {

using format::kPageSize;

constexpr const char* kProducer = "sprig " SPRIG_VERSION;

struct Checksums {
  std::vector<uint32_t> hot;                   // per planned tensor
  std::vector<uint32_t> hot_scales;            // per planned tensor (i8 only)
  std::vector<std::vector<uint32_t>> records;  // per record set, per record
};

std::vector<uint8_t> BuildHeader(const ModelConfig& config, const LayoutPlan& plan,
                                 const Checksums& crc, const std::vector<TensorError>& errors) {
  flatbuffers::FlatBufferBuilder b(1 << 16);
  // Every field is written even at its default, so the header's size depends only on the
  // model's structure, not on offsets or checksums: the packer reserves that space up front.
  b.ForceDefaults(true);
  auto cfg = format::BuildConfig(b, config);
  auto json = b.CreateString(ConfigToJson(config));
  auto producer = b.CreateString(kProducer);
  std::vector<flatbuffers::Offset<fb::Section>> sections;
  for (const PlannedSection& s : plan.sections) {
    const fb::SectionKind kind = s.records     ? fb::SectionKind::Records
                                 : s.tokenizer ? fb::SectionKind::Tokenizer
                                               : fb::SectionKind::Hot;
    sections.push_back(fb::CreateSection(b, b.CreateString(s.name), kind, s.offset, s.size,
                                         s.padding, s.layer, s.crc32));
  }
  auto sections_vec = b.CreateVector(sections);
  std::vector<flatbuffers::Offset<fb::Tensor>> tensors;
  for (size_t i = 0; i < plan.tensors.size(); ++i) {
    const PlannedTensor& t = plan.tensors[i];
    // Built in named steps, shape first: C++ leaves the order of evaluating arguments open,
    // and GCC takes them in another order on aarch64 than on x86-64, which gave another (as
    // valid) header there. This order keeps the bytes x86-64 builds always wrote.
    auto shape = b.CreateVector(t.spec.shape);
    auto name = b.CreateString(t.spec.name);
    tensors.push_back(fb::CreateTensor(
        b, name, static_cast<fb::DType>(t.dtype), shape, t.hot_offset, t.hot_rows,
        t.hot_rows * t.row_bytes, crc.hot[i], t.record_set, t.part_offset, t.part_size,
        t.spec.layer, t.scales_hot_offset, crc.hot_scales[i], t.scales_part_offset,
        static_cast<float>(errors[i].error.max_abs), static_cast<float>(errors[i].error.rel_rms)));
  }
  auto tensors_vec = b.CreateVector(tensors);
  std::vector<flatbuffers::Offset<fb::RecordSet>> sets;
  for (size_t si = 0; si < plan.record_sets.size(); ++si) {
    const PlannedRecordSet& rs = plan.record_sets[si];
    std::vector<fb::RecordRef> refs;
    refs.reserve(rs.offsets.size());
    for (size_t r = 0; r < rs.offsets.size(); ++r) {
      refs.emplace_back(rs.offsets[r], crc.records[si][r], 0);
    }
    auto refs_vec = b.CreateVectorOfStructs(refs);
    sets.push_back(fb::CreateRecordSet(
        b, rs.layer, rs.section, rs.map.subtree ? fb::RowMap::Subtree : fb::RowMap::Contiguous,
        rs.map.rows_per_record, rs.map.hot_levels, rs.map.chunk_levels, rs.record_size, refs_vec));
  }
  auto sets_vec = b.CreateVector(sets);
  auto header = fb::CreateHeader(b, cfg, json, producer, sections_vec, tensors_vec, sets_vec);
  fb::FinishHeaderBuffer(b, header);
  return std::vector<uint8_t>(b.GetBufferPointer(), b.GetBufferPointer() + b.GetSize());
}

// Streams converted tensor data to the output in file order, zero-filling gaps. Bytes are
// gathered into large chunks that a second thread writes, so the copy into the page cache
// overlaps the conversion and checksumming of the next chunk (on two cores that is most of
// the pack's time).
class DataWriter {
 public:
  DataWriter(io::AtomicFile& file, const PackOptions& options, uint64_t total)
      : file_(file), options_(options), total_(total), writer_([this] { WriterLoop(); }) {
    current_.reserve(kChunkBytes);
  }
  ~DataWriter() { (void)Finish(); }

  Status PadTo(uint64_t offset) {
    if (offset < position_) return Status::InvalidArgument("internal: layout goes backwards");
    uint64_t gap = offset - position_;
    while (gap > 0) {
      const size_t n = static_cast<size_t>(std::min<uint64_t>(gap, kChunkBytes - current_.size()));
      current_.insert(current_.end(), n, 0);
      gap -= n;
      position_ += n;
      SPRIG_RETURN_IF_ERROR(MaybeHandOff());
    }
    return Status::Ok();
  }

  Status Put(const void* data, size_t size) {
    const auto* p = static_cast<const uint8_t*>(data);
    while (size > 0) {
      const size_t n = std::min(size, kChunkBytes - current_.size());
      current_.insert(current_.end(), p, p + n);
      p += n;
      size -= n;
      position_ += n;
      done_ += n;
      SPRIG_RETURN_IF_ERROR(MaybeHandOff());
    }
    if (options_.progress && (done_ - reported_ >= (64u << 20) || done_ == total_)) {
      reported_ = done_;
      options_.progress(done_, total_);
    }
    return Status::Ok();
  }

  // Writes what is left and waits for the writer thread; returns its first error.
  Status Finish() {
    if (!writer_.joinable()) return status_;
    HandOff();
    {
      std::lock_guard<std::mutex> lock(mu_);
      closing_ = true;
    }
    cv_.notify_all();
    writer_.join();
    return status_;
  }

 private:
  static constexpr size_t kChunkBytes = size_t{8} << 20;
  static constexpr size_t kMaxQueued = 3;

  Status MaybeHandOff() {
    if (current_.size() < kChunkBytes) return Status::Ok();
    HandOff();
    std::lock_guard<std::mutex> lock(mu_);
    return status_;
  }

  void HandOff() {
    if (current_.empty()) return;
    std::unique_lock<std::mutex> lock(mu_);
    cv_.wait(lock, [&] { return queue_.size() < kMaxQueued; });
    queue_.push_back(std::move(current_));
    lock.unlock();
    cv_.notify_all();
    current_ = std::vector<uint8_t>();
    current_.reserve(kChunkBytes);
  }

  void WriterLoop() {
    std::unique_lock<std::mutex> lock(mu_);
    for (;;) {
      cv_.wait(lock, [&] { return !queue_.empty() || closing_; });
      if (queue_.empty()) return;
      std::vector<uint8_t> chunk = std::move(queue_.front());
      queue_.pop_front();
      lock.unlock();
      cv_.notify_all();
      Status s = status_.ok() ? file_.Write(chunk.data(), chunk.size()) : Status::Ok();
      lock.lock();
      if (!s.ok() && status_.ok()) status_ = s;
    }
  }

  io::AtomicFile& file_;
  const PackOptions& options_;
  uint64_t total_;
  uint64_t position_ = 0;
  uint64_t done_ = 0;
  uint64_t reported_ = 0;
  std::vector<uint8_t> current_;
  std::mutex mu_;
  std::condition_variable cv_;
  std::deque<std::vector<uint8_t>> queue_;
  bool closing_ = false;
  Status status_;
  std::thread writer_;  // last: starts after every member above exists
};

uint64_t SourceRowBytes(const io::NdArray& a) {
  const uint64_t rows = a.shape.empty() ? 1 : a.shape[0];
  return rows == 0 ? 0 : a.nbytes() / rows;
}

Status WriteHot(const LayoutPlan& plan, const std::vector<const io::NdArray*>& sources,
                DataWriter& out, Checksums& crc, std::vector<uint8_t>& buffer) {
  for (size_t i = 0; i < plan.tensors.size(); ++i) {
    const PlannedTensor& t = plan.tensors[i];
    const uint64_t bytes = t.hot_rows * t.row_bytes;
    if (bytes == 0) continue;
    const io::NdArray& src = *sources[i];
    const uint64_t elements = bytes / DTypeSize(t.dtype);
    buffer.resize(bytes);
    if (t.dtype == DType::kI8) {
      const uint64_t scale_rows = t.hot_rows * t.scale_row_bytes / sizeof(float);
      std::vector<uint8_t> scales(scale_rows * sizeof(float));
      QuantizeRows(src.type, src.data, scale_rows, elements / scale_rows, buffer.data(),
                   scales.data());
      crc.hot[i] = format::Crc32(buffer.data(), bytes);
      crc.hot_scales[i] = format::Crc32(scales.data(), scales.size());
      SPRIG_RETURN_IF_ERROR(out.PadTo(t.hot_offset));
      SPRIG_RETURN_IF_ERROR(out.Put(buffer.data(), bytes));
      SPRIG_RETURN_IF_ERROR(out.PadTo(t.scales_hot_offset));
      SPRIG_RETURN_IF_ERROR(out.Put(scales.data(), scales.size()));
      continue;
    }
    ConvertElements(src.type, src.data, t.dtype, buffer.data(), elements);
    crc.hot[i] = format::Crc32(buffer.data(), bytes);
    SPRIG_RETURN_IF_ERROR(out.PadTo(t.hot_offset));
    SPRIG_RETURN_IF_ERROR(out.Put(buffer.data(), bytes));
  }
  return Status::Ok();
}

Status WriteRecords(const LayoutPlan& plan, const std::vector<const io::NdArray*>& sources,
                    DataWriter& out, Checksums& crc, std::vector<uint8_t>& record) {
  for (size_t si = 0; si < plan.record_sets.size(); ++si) {
    const PlannedRecordSet& rs = plan.record_sets[si];
    crc.records[si].resize(rs.offsets.size());
    record.resize(rs.record_size);
    for (size_t r = 0; r < rs.offsets.size(); ++r) {
      std::memset(record.data(), 0, record.size());
      for (size_t ti : rs.tensors) {
        const PlannedTensor& t = plan.tensors[ti];
        const io::NdArray& src = *sources[ti];
        const uint64_t src_row = SourceRowBytes(src);
        const uint64_t elements = t.row_bytes / DTypeSize(t.dtype);
        for (uint64_t local = 0; local < rs.map.rows_per_record; ++local) {
          const uint64_t row = format::RowOf(rs.map, r, local);
          if (row >= t.rows) continue;  // a final partial record keeps zeros
          uint8_t* values = record.data() + t.part_offset + local * t.row_bytes;
          if (t.dtype == DType::kI8) {
            const uint64_t scale_rows = t.scale_row_bytes / sizeof(float);
            QuantizeRows(src.type, src.data + row * src_row, scale_rows, elements / scale_rows,
                         values, record.data() + t.scales_part_offset + local * t.scale_row_bytes);
            continue;
          }
          ConvertElements(src.type, src.data + row * src_row, t.dtype, values, elements);
        }
      }
      crc.records[si][r] = format::Crc32(record.data(), record.size());
      SPRIG_RETURN_IF_ERROR(out.PadTo(rs.offsets[r]));
      SPRIG_RETURN_IF_ERROR(out.Put(record.data(), record.size()));
    }
  }
  return Status::Ok();
}

// Puts the tokenizer section (when there is one) after everything else, page-aligned, so the
// weights' layout is the same with or without it.
void AddTokenizerSection(const std::string& bytes, LayoutPlan& plan) {
  if (bytes.empty()) return;
  PlannedSection s;
  s.name = "tokenizer";
  s.tokenizer = true;
  s.offset = format::AlignUp(plan.file_size, kPageSize);
  s.size = bytes.size();
  s.crc32 = format::Crc32(reinterpret_cast<const uint8_t*>(bytes.data()), bytes.size());
  plan.file_size = s.offset + s.size;
  plan.sections.push_back(s);
}

// A config with tokenizer "sentencepiece" comes with its tokenizer section; no other config does.
Status CheckTokenizerSection(const ModelConfig& config, const PackOptions& options) {
  const bool wanted = config.tokenizer == Tokenizer::kSentencePiece;
  if (wanted && options.tokenizer_section.empty()) {
    return Status::InvalidArgument(
        "the config names tokenizer \"sentencepiece\"; give its SentencePiece model with "
        "--tokenizer FILE.model");
  }
  if (!wanted && !options.tokenizer_section.empty()) {
    return Status::InvalidArgument(std::string("a tokenizer was given, but the config names "
                                               "tokenizer \"") +
                                   ToString(config.tokenizer) +
                                   "\"; set \"tokenizer\": \"sentencepiece\" in config.json to "
                                   "store a SentencePiece vocabulary");
  }
  return Status::Ok();
}

// One line per layout decision, for options.describe_layout.
void DescribeLayout(const std::string& out_path, size_t header_size, uint64_t data_start,
                    const LayoutPlan& plan, const PackOptions& options) {
  options.describe_layout("pack " + out_path + ": header " + std::to_string(header_size) +
                          " bytes, data from offset " + std::to_string(data_start) + ", file " +
                          std::to_string(plan.file_size) + " bytes");
  for (const PlannedSection& sec : plan.sections) {
    options.describe_layout("  section " + sec.name + ": offset " + std::to_string(sec.offset) +
                            ", size " + std::to_string(sec.size) + ", padding " +
                            std::to_string(sec.padding));
  }
  for (const PlannedRecordSet& rs : plan.record_sets) {
    options.describe_layout("  layer " + std::to_string(rs.layer) + ": " +
                            std::to_string(rs.offsets.size()) + " records of " +
                            std::to_string(rs.record_size) + " bytes (" +
                            (rs.map.subtree ? "subtree" : "contiguous") + " map)");
  }
}

// The tokenizer section for `config` from the SentencePiece model at `model_path`: the config
// must name tokenizer "sentencepiece" and its vocab_size must be the model's piece count.
Result<std::string> ReadTokenizerSection(const ModelConfig& config, const std::string& config_path,
                                         const std::string& model_path) {
  if (config.tokenizer != Tokenizer::kSentencePiece) {
    return Status::InvalidArgument(std::string("--tokenizer ") + model_path + " was given, but " +
                                   config_path + " names tokenizer \"" +
                                   ToString(config.tokenizer) +
                                   "\"; set \"tokenizer\": \"sentencepiece\" to store a "
                                   "SentencePiece vocabulary");
  }
  SPRIG_ASSIGN_OR_RETURN(tokenizer::TokenizerSpec spec, ReadSentencePieceModel(model_path));
  if (spec.pieces.size() != config.vocab_size) {
    return Status::InvalidArgument(
        model_path + " has a vocabulary of " + std::to_string(spec.pieces.size()) +
        " pieces, but " + config_path + " says vocab_size " + std::to_string(config.vocab_size) +
        "; they must be equal (the embedding has one row per piece)");
  }
  return tokenizer::SerializeSection(spec);
}

}  // namespace

Result<DType> ParseStorageType(const std::string& text, const std::string& option) {
  if (text == "f32") return DType::kF32;
  if (text == "f16") return DType::kF16;
  if (text == "bf16") return DType::kBF16;
  if (text == "i8") return DType::kI8;
  return Status::InvalidArgument(option + " must be f32, f16, bf16 or i8, got \"" + text + "\"");
}

Result<PackSummary> PackTensors(const ModelConfig& config,
                                const std::vector<MatchedTensor>& tensors,
                                const std::string& out_path, const PackOptions& options) {
  const auto start = std::chrono::steady_clock::now();
  SPRIG_RETURN_IF_ERROR(CheckTokenizerSection(config, options));
  std::vector<TensorSpec> specs;
  std::vector<const io::NdArray*> sources;
  PackSummary summary;
  for (const MatchedTensor& m : tensors) {
    specs.push_back(m.spec);
    sources.push_back(m.source);
    summary.input_bytes += m.source->nbytes();
  }
  // Reserve header space from a draft whose size equals the final one (see BuildHeader).
  LayoutPlan plan = PlanLayout(config, specs, options.storage, kPageSize);
  AddTokenizerSection(options.tokenizer_section, plan);
  for (size_t i = 0; i < plan.tensors.size(); ++i) {
    const PlannedTensor& t = plan.tensors[i];
    summary.errors.push_back({t.spec.name, t.dtype, MeasureStorageError(*sources[i], t.dtype)});
  }
  Checksums crc{
      std::vector<uint32_t>(plan.tensors.size()), std::vector<uint32_t>(plan.tensors.size()), {}};
  for (const PlannedRecordSet& rs : plan.record_sets) {
    crc.records.emplace_back(rs.offsets.size());
  }
  const size_t header_size = BuildHeader(config, plan, crc, summary.errors).size();
  const uint64_t data_start = format::AlignUp(format::kPreambleSize + header_size, kPageSize);
  plan = PlanLayout(config, specs, options.storage, data_start);
  AddTokenizerSection(options.tokenizer_section, plan);
  if (options.describe_layout) DescribeLayout(out_path, header_size, data_start, plan, options);
  for (const PlannedTensor& t : plan.tensors) {
    summary.tensor_bytes += t.rows * (t.row_bytes + t.scale_row_bytes);
  }
  SPRIG_ASSIGN_OR_RETURN(io::AtomicFile file, io::AtomicFile::Create(out_path, options.overwrite));
  {
    DataWriter writer(file, options, summary.tensor_bytes);
    std::vector<uint8_t> buffer;
    // The preamble and header are written last, over these zeros.
    SPRIG_RETURN_IF_ERROR(writer.PadTo(data_start));
    SPRIG_RETURN_IF_ERROR(WriteHot(plan, sources, writer, crc, buffer));
    SPRIG_RETURN_IF_ERROR(WriteRecords(plan, sources, writer, crc, buffer));
    for (const PlannedSection& s : plan.sections) {
      if (!s.tokenizer) continue;
      SPRIG_RETURN_IF_ERROR(writer.PadTo(s.offset));
      SPRIG_RETURN_IF_ERROR(
          writer.Put(reinterpret_cast<const uint8_t*>(options.tokenizer_section.data()), s.size));
    }
    SPRIG_RETURN_IF_ERROR(writer.PadTo(plan.file_size));
    SPRIG_RETURN_IF_ERROR(writer.Finish());
  }

  const std::vector<uint8_t> header = BuildHeader(config, plan, crc, summary.errors);
  if (format::kPreambleSize + header.size() > data_start) {
    return Status::InvalidArgument("internal: the header grew after layout planning");
  }
  format::Preamble pre;
  pre.header_offset = format::kPreambleSize;
  pre.header_size = header.size();
  pre.file_size = file.size();
  pre.header_crc32 = format::Crc32(header.data(), header.size());
  uint8_t pre_bytes[format::kPreambleSize];
  format::EncodePreamble(pre, pre_bytes);
  SPRIG_RETURN_IF_ERROR(file.WriteAt(format::kPreambleSize, header.data(), header.size()));
  SPRIG_RETURN_IF_ERROR(file.WriteAt(0, pre_bytes, sizeof(pre_bytes)));
  SPRIG_RETURN_IF_ERROR(file.Commit());
  summary.file_size = pre.file_size;
  summary.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  return summary;
}

Result<PackSummary> PackFiles(const std::string& config_path, const std::string& weights_path,
                              const std::string& out_path, const PackOptions& options) {
  const auto start = std::chrono::steady_clock::now();
  if (platform::SameFile(out_path, config_path) || platform::SameFile(out_path, weights_path)) {
    return Status::InvalidArgument("the output " + out_path +
                                   " is one of the inputs; choose another output path");
  }
  SPRIG_ASSIGN_OR_RETURN(ModelConfig config, ReadConfigFile(config_path));
  if (config.tokenizer == Tokenizer::kSentencePiece && options.tokenizer_model.empty()) {
    return Status::InvalidArgument(config_path +
                                   " names tokenizer \"sentencepiece\"; give its SentencePiece "
                                   "model with --tokenizer FILE.model");
  }
  // The tokenizer before the weights: a vocabulary that does not fit the config is the cause
  // to name, not the embedding shape that follows from it.
  PackOptions with_tokenizer = options;
  if (!options.tokenizer_model.empty()) {
    SPRIG_ASSIGN_OR_RETURN(with_tokenizer.tokenizer_section,
                           ReadTokenizerSection(config, config_path, options.tokenizer_model));
  }
  SPRIG_ASSIGN_OR_RETURN(io::TensorArchive archive, io::TensorArchive::Open(weights_path));
  SPRIG_ASSIGN_OR_RETURN(std::vector<MatchedTensor> matched,
                         MatchTensors(config, archive, options.mapping));
  SPRIG_ASSIGN_OR_RETURN(PackSummary summary,
                         PackTensors(config, matched, out_path, with_tokenizer));
  // Report the whole job: reading and checking the inputs included.
  summary.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  return summary;
}

}  // namespace sprig::convert
