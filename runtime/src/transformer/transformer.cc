// The transformer family: binding its tensors, the pre- and post-norm blocks and the heads.
#include "transformer/transformer.h"

#include <algorithm>
#include <cstring>

#include "base/status_macros.h"
#include "layers/binder.h"

namespace sprig::transformer {
namespace {

using layers::Exec;
using layers::MatrixView;

// Row `row` of a hot matrix as float32 (converting f16/bf16 with the kernel converters).
void RowToFloat(const kernels::KernelTable& k, const MatrixView& m, uint64_t row, float* out) {
  const void* src = m.row(row);
  switch (m.type) {
    case DType::kF16:
      k.f16_to_f32(static_cast<const uint16_t*>(src), out, m.cols);
      break;
    case DType::kBF16:
      k.bf16_to_f32(static_cast<const uint16_t*>(src), out, m.cols);
      break;
    case DType::kI8: {
      const auto* q = static_cast<const int8_t*>(src);
      const float scale = m.scales[row];
      for (uint64_t i = 0; i < m.cols; ++i) out[i] = scale * static_cast<float>(q[i]);
      break;
    }
    default:
      std::memcpy(out, src, m.cols * sizeof(float));
      break;
  }
}

// A matrix-vector product is split between threads only when each gets at least this many
// output rows; below that the hand-off costs more than it saves.
constexpr size_t kMinRowsPerThread = 128;

// y[rows, out] = x[rows, in] W^T + b for one weight matrix.
struct Projection {
  const MatrixView* weight;
  const float* bias;  // may be null
  float* y;
};

// The pieces one projection is split into between threads. Each output is its own dot product
// (or, for a batch, its own accumulator in gemm_rows), computed the same way whichever piece
// or thread runs it, so the result does not depend on the split.
// - One thread: one piece, written straight into y.
// - One row: the outputs are split, one piece per thread.
// - Batches: kPiecesPerThread pieces per thread, which threads claim as they finish, so that a
//   core that runs slower (another program on it, a lower clock) takes fewer of them instead
//   of holding up the job. The outputs are split while the input rows fit kColumnSplitBytes:
//   each thread then reads only its part of the matrix, and the input rows, which every piece
//   reads, stay in cache. Longer inputs are split by rows instead, in multiples of kRowChunk.
constexpr size_t kPiecesPerThread = 4;
constexpr size_t kColumnSplitBytes = size_t{1} << 20;
// A batch's piece has at least this many outputs, so that gemm_rows's register blocks stay full.
constexpr size_t kMinOutputsPerPiece = 32;

struct Split {
  bool by_rows;
  size_t pieces;
  size_t per_piece;  // outputs, or rows when by_rows
};

Split SplitOf(const Exec& e, const MatrixView& w, size_t rows) {
  if (e.threads() == 1) return {false, 1, w.rows};
  if (e.single_row || rows == 1) {
    const size_t pieces = w.rows >= 2 * kMinRowsPerThread ? e.threads() : 1;
    return {false, pieces, (w.rows + pieces - 1) / pieces};
  }
  const size_t wanted = e.threads() * kPiecesPerThread;
  if (rows * w.cols * sizeof(float) <= kColumnSplitBytes) {
    const size_t pieces = std::max<size_t>(1, std::min(wanted, w.rows / kMinOutputsPerPiece));
    const size_t per_piece = (w.rows + pieces - 1) / pieces;
    return {false, (w.rows + per_piece - 1) / per_piece, per_piece};
  }
  const size_t per_piece = (rows + wanted - 1) / wanted;
  const size_t chunk = (per_piece + layers::kRowChunk - 1) / layers::kRowChunk * layers::kRowChunk;
  return {true, (rows + chunk - 1) / chunk, chunk};
}

void RunPiece(const Exec& e, const Projection& p, const float* x, size_t rows, const Split& split,
              size_t piece, layers::Scratch& scratch) {
  const MatrixView& w = *p.weight;
  const size_t out = w.rows, in = w.cols;
  if (split.by_rows) {
    const size_t r0 = piece * split.per_piece, n = std::min(split.per_piece, rows - r0);
    kernels::GemmRows(*e.k, w.type, w.data, x + r0 * in, p.bias, p.y + r0 * out, n, out, in,
                      w.scales);
    return;
  }
  const size_t o0 = piece * split.per_piece;
  if (o0 >= out) return;
  const size_t n = std::min(split.per_piece, out - o0);
  const float* bias = p.bias ? p.bias + o0 : nullptr;
  if (e.single_row || rows == 1) {
    for (size_t r = 0; r < rows; ++r) {
      kernels::Gemv(*e.k, w.type, w.row(o0), x + r * in, bias, p.y + r * out + o0, n, in,
                    w.row_scales(o0));
    }
    return;
  }
  if (n == out) {
    kernels::GemmRows(*e.k, w.type, w.data, x, bias, p.y, rows, out, in, w.scales);
    return;
  }
  // gemm_rows writes whole rows: the piece's outputs go through the thread's scratch.
  std::vector<float>& piece_out = scratch.group_output;
  piece_out.resize(rows * n);
  kernels::GemmRows(*e.k, w.type, w.row(o0), x, bias, piece_out.data(), rows, n, in,
                    w.row_scales(o0));
  for (size_t r = 0; r < rows; ++r) {
    std::copy_n(piece_out.data() + r * n, n, p.y + r * out + o0);
  }
}

// Every projection of the same input in one parallel job: the threads meet once, not once per
// matrix (a block's queries, keys and values).
template <size_t N>
void Project(const Exec& e, const Projection (&projections)[N], const float* x, size_t rows) {
  Split splits[N];
  size_t tasks = 0;
  for (size_t i = 0; i < N; ++i) {
    splits[i] = SplitOf(e, *projections[i].weight, rows);
    tasks += splits[i].pieces;
  }
  e.ParallelFor(tasks, [&](size_t task, layers::Scratch& scratch) {
    size_t i = 0;
    while (task >= splits[i].pieces) task -= splits[i++].pieces;
    RunPiece(e, projections[i], x, rows, splits[i], task, scratch);
  });
}

void Project(const Exec& e, const MatrixView& w, const float* bias, const float* x, size_t rows,
             float* y) {
  const Projection one[] = {{&w, bias, y}};
  Project(e, one, x, rows);
}

void Project(const Exec& e, const Linear& l, const float* x, size_t rows, float* y) {
  Project(e, l.weight, l.bias, x, rows, y);
}

void AddInPlace(float* x, const float* y, size_t n) {
  for (size_t i = 0; i < n; ++i) x[i] += y[i];
}

// Runs body(r) for every row r < rows, kRowChunk rows per task: work done row by row between
// two parallel jobs, which would otherwise run on one thread while the others wait.
template <typename Body>
void ForEachRow(const Exec& e, size_t rows, const Body& body) {
  const size_t tasks = (rows + layers::kRowChunk - 1) / layers::kRowChunk;
  e.ParallelFor(tasks, [&](size_t task, layers::Scratch&) {
    const size_t end = std::min(rows, (task + 1) * layers::kRowChunk);
    for (size_t r = task * layers::kRowChunk; r < end; ++r) body(r);
  });
}

// x[rows, width] += y[rows, width].
void AddRows(const Exec& e, float* x, const float* y, size_t rows, size_t width) {
  ForEachRow(e, rows, [&](size_t r) { AddInPlace(x + r * width, y + r * width, width); });
}

void Grow(std::vector<float>& v, size_t n) {
  if (v.size() < n) v.resize(n);
}

// Finds a tensor the validated file must hold, refusing storage the kernels cannot read.
class Tensors {
 public:
  explicit Tensors(const format::ModelFile& f) : file_(f), binder_(f, "") {}

  Status Matrix(const std::string& name, MatrixView* out) {
    const format::TensorInfo* t = file_.Find(name);
    if (t == nullptr) return Status::NotFound(file_.path() + " has no tensor " + name);
    if (t->hot_rows != t->shape[0]) {
      return Status::Corruption(file_.path() + ": tensor " + name +
                                " must be stored whole in the hot section");
    }
    *out = binder_.Matrix(t);
    return Status::Ok();
  }

  // A float32 vector (bias, norm weight); null when absent and not required.
  Status Floats(const std::string& name, bool required, const float** out) {
    const format::TensorInfo* t = file_.Find(name);
    *out = nullptr;
    if (t == nullptr) {
      if (!required) return Status::Ok();
      return Status::NotFound(file_.path() + " has no tensor " + name);
    }
    if (t->dtype != DType::kF32) {
      return Status::Corruption(file_.path() + ": tensor " + name + " is stored as " +
                                ToString(t->dtype) + "; biases and norm weights must be f32");
    }
    *out = binder_.FloatRow(t, 0);
    return Status::Ok();
  }

  Status Norm(const std::string& prefix, bool layer_norm, transformer::Norm* n) {
    SPRIG_RETURN_IF_ERROR(Floats(prefix + ".weight", true, &n->weight));
    return Floats(prefix + ".bias", layer_norm, &n->bias);
  }

  Status Linear(const std::string& prefix, bool bias, transformer::Linear* l) {
    SPRIG_RETURN_IF_ERROR(Matrix(prefix + ".weight", &l->weight));
    return Floats(prefix + ".bias", bias, &l->bias);
  }

 private:
  const format::ModelFile& file_;
  layers::Binder binder_;
};

}  // namespace

Result<std::unique_ptr<network::Network>> TransformerNetwork::Bind(const format::ModelFile& file) {
  const ModelConfig& c = file.config();
  std::unique_ptr<TransformerNetwork> t(new TransformerNetwork(c));
  SPRIG_RETURN_IF_ERROR(t->BindLayers(file));
  t->d_ = c.d_model;
  t->head_dim_ = c.d_model / c.n_heads;
  const size_t kv_heads = c.n_kv_heads ? c.n_kv_heads : c.n_heads;
  t->kv_dim_ = kv_heads * t->head_dim_;
  t->group_ = c.n_heads / kv_heads;
  const bool layer_norm = c.norm == NormKind::kLayerNorm;
  Tensors f(file);
  SPRIG_RETURN_IF_ERROR(f.Matrix("embed.weight", &t->embed_));
  t->has_pos_ = c.positions == Positions::kLearned;
  if (t->has_pos_) SPRIG_RETURN_IF_ERROR(f.Matrix("pos.weight", &t->pos_));
  for (size_t i = 0; i < c.layers.size(); ++i) {
    const std::string p = "blocks." + std::to_string(i) + ".";
    Block b;
    SPRIG_RETURN_IF_ERROR(f.Norm(p + "norm1", layer_norm, &b.norm1));
    SPRIG_RETURN_IF_ERROR(f.Norm(p + "norm2", layer_norm, &b.norm2));
    SPRIG_RETURN_IF_ERROR(f.Linear(p + "attn.q", c.attn_bias.q, &b.q));
    SPRIG_RETURN_IF_ERROR(f.Linear(p + "attn.k", c.attn_bias.k, &b.k));
    SPRIG_RETURN_IF_ERROR(f.Linear(p + "attn.v", c.attn_bias.v, &b.v));
    SPRIG_RETURN_IF_ERROR(f.Linear(p + "attn.o", c.attn_bias.o, &b.o));
    b.ffn = t->layers_[i].get();
    t->blocks_.push_back(b);
  }
  if (c.embed_norm) SPRIG_RETURN_IF_ERROR(f.Norm("embed_norm", layer_norm, &t->embed_norm_));
  if (c.final_norm) SPRIG_RETURN_IF_ERROR(f.Norm("norm", layer_norm, &t->final_norm_));
  if (c.head.kind == HeadKind::kLm) {
    if (c.tie_embeddings) {
      t->lm_head_ = t->embed_;
    } else {
      SPRIG_RETURN_IF_ERROR(f.Matrix("head.weight", &t->lm_head_));
    }
    if (c.head.bias) SPRIG_RETURN_IF_ERROR(f.Floats("head.bias", true, &t->lm_bias_));
    if (c.head.transform) {
      SPRIG_RETURN_IF_ERROR(f.Linear("head.transform", true, &t->head_transform_));
      if (c.head.transform_norm) {
        SPRIG_RETURN_IF_ERROR(f.Norm("head.transform_norm", layer_norm, &t->head_transform_norm_));
      }
    }
  } else if (c.head.kind == HeadKind::kClassifier) {
    SPRIG_RETURN_IF_ERROR(f.Linear("head", true, &t->classifier_));
  }
  return std::unique_ptr<network::Network>(std::move(t));
}

std::unique_ptr<network::Workspace> TransformerNetwork::NewWorkspace() const {
  return std::make_unique<TransformerWorkspace>();
}

void TransformerNetwork::Embed(const Exec& e, const int32_t* tokens, size_t rows, size_t length,
                               size_t start, float* x) const {
  std::vector<float> pos(has_pos_ ? d_ : 0);
  for (size_t r = 0; r < rows; ++r) {
    float* row = x + r * d_;
    RowToFloat(*e.k, embed_, static_cast<uint64_t>(tokens[r]), row);
    if (has_pos_) {
      RowToFloat(*e.k, pos_, start + r % length, pos.data());
      AddInPlace(row, pos.data(), d_);
    }
  }
}

void TransformerNetwork::NormRows(const Exec& e, const Norm& n, const float* x, size_t rows,
                                  float* y) const {
  const float eps = config_->norm_eps;
  // Each row is normalised on its own, so rows split between threads give the same result.
  // kRowChunk rows per task: fewer would cost more in hand-offs than the norm itself.
  const size_t tasks = (rows + layers::kRowChunk - 1) / layers::kRowChunk;
  e.ParallelFor(tasks, [&](size_t task, layers::Scratch&) {
    const size_t end = std::min(rows, (task + 1) * layers::kRowChunk);
    for (size_t r = task * layers::kRowChunk; r < end; ++r) {
      if (config_->norm == NormKind::kLayerNorm) {
        e.k->layer_norm(x + r * d_, n.weight, n.bias, eps, y + r * d_, d_);
      } else {
        e.k->rms_norm(x + r * d_, n.weight, eps, y + r * d_, d_);
      }
    }
  });
}

void TransformerNetwork::Reserve(network::KvCache& cache, size_t positions) const {
  cache.keys.resize(blocks_.size());
  cache.values.resize(blocks_.size());
  if (positions <= cache.capacity) return;
  // Doubling keeps the copies of a long decode to a constant per token; max_seq bounds it.
  const size_t capacity =
      std::max(positions, std::min<size_t>(2 * cache.capacity, config_->max_seq));
  const size_t hd = head_dim_, kv_heads = kv_dim_ / hd;
  for (auto* arrays : {&cache.keys, &cache.values}) {
    for (std::vector<float>& old : *arrays) {
      std::vector<float> grown(kv_heads * capacity * hd);
      for (size_t g = 0; g < kv_heads && cache.length > 0; ++g) {
        std::copy_n(old.data() + g * cache.capacity * hd, cache.length * hd,
                    grown.data() + g * capacity * hd);
      }
      old.swap(grown);
    }
  }
  cache.capacity = capacity;
}

void TransformerNetwork::RunBlocks(const Exec& e, TransformerWorkspace& ws, const int32_t* tokens,
                                   size_t sequences, size_t length, size_t start,
                                   network::KvCache* cache, network::Recorder& recorder) const {
  const size_t rows = sequences * length, d = d_, hd = head_dim_;
  const size_t total = start + length;
  Grow(ws.x, rows * d);
  Grow(ws.normed, rows * d);
  Grow(ws.q, rows * d);
  Grow(ws.k, rows * kv_dim_);
  Grow(ws.v, rows * kv_dim_);
  Grow(ws.proj, rows * d);
  Grow(ws.ffn, rows * d);
  Embed(e, tokens, rows, length, start, ws.x.data());
  if (config_->embed_norm) {
    NormRows(e, embed_norm_, ws.x.data(), rows, ws.normed.data());
    std::copy(ws.normed.begin(), ws.normed.begin() + rows * d, ws.x.begin());
  }
  const bool post = config_->norm_position == NormPosition::kPost;
  const bool rope = config_->positions == Positions::kRope;
  if (rope) {
    // One table for the positions of this call, shared by every block, head and sequence.
    ws.rope_cos.resize(length * hd / 2);
    ws.rope_sin.resize(length * hd / 2);
    ForEachRow(e, length, [&](size_t t) {
      RopeTable(start + t, hd, config_->rope_base, ws.rope_cos.data() + t * hd / 2,
                ws.rope_sin.data() + t * hd / 2);
    });
  }
  if (cache) Reserve(*cache, total);
  recorder.Begin();
  for (size_t i = 0; i < blocks_.size(); ++i) {
    const Block& b = blocks_[i];
    float* x = ws.x.data();
    // Pre-norm blocks project the normalised stream, post-norm blocks the stream itself.
    const float* attn_in = x;
    if (!post) {
      NormRows(e, b.norm1, x, rows, ws.normed.data());
      attn_in = ws.normed.data();
    }
    const Projection qkv[] = {{&b.q.weight, b.q.bias, ws.q.data()},
                              {&b.k.weight, b.k.bias, ws.k.data()},
                              {&b.v.weight, b.v.bias, ws.v.data()}};
    Project(e, qkv, attn_in, rows);
    // Keys and values go per kv head into the cache, or without one into the workspace's
    // arrays of the same layout, so that attention reads each head's positions as one matrix.
    const size_t kv_heads = kv_dim_ / hd;
    float *keys = nullptr, *values = nullptr;
    KvLayout layout{};
    if (cache) {
      // One sequence: its new keys and values go after those already cached.
      keys = cache->keys[i].data();
      values = cache->values[i].data();
      layout = {0, cache->capacity * hd};
    } else {
      Grow(ws.head_keys, rows * kv_dim_);
      Grow(ws.head_values, rows * kv_dim_);
      keys = ws.head_keys.data();
      values = ws.head_values.data();
      layout = {length * kv_dim_, length * hd};
    }
    // Each row's rotation and its copy, the rows split between threads.
    ForEachRow(e, rows, [&](size_t r) {
      float* q_row = &ws.q[r * d];
      float* k_row = &ws.k[r * kv_dim_];
      if (rope) {
        const float* cs = ws.rope_cos.data() + (r % length) * hd / 2;
        const float* sn = ws.rope_sin.data() + (r % length) * hd / 2;
        for (size_t h = 0; h < config_->n_heads; ++h) ApplyRope(q_row + h * hd, hd, cs, sn);
        for (size_t h = 0; h < kv_heads; ++h) ApplyRope(k_row + h * hd, hd, cs, sn);
      }
      const float* v_row = &ws.v[r * kv_dim_];
      const size_t seq = r / length, position = start + r % length;
      for (size_t g = 0; g < kv_heads; ++g) {
        const size_t at = seq * layout.sequence + g * layout.head + position * hd;
        std::copy_n(k_row + g * hd, hd, keys + at);
        std::copy_n(v_row + g * hd, hd, values + at);
      }
    });
    Attend(e, ws, sequences, length, start, keys, values, layout);
    Project(e, b.o, ws.attn.data(), rows, ws.proj.data());
    AddRows(e, x, ws.proj.data(), rows, d);
    // The feed-forward input: Norm2(x) before it (pre), or h = Norm1(x + Attn(x)) (post).
    NormRows(e, post ? b.norm1 : b.norm2, x, rows, ws.normed.data());
    b.ffn->Forward(e, ws.normed.data(), rows, ws.ffn.data(),
                   recorder.RoutesOf(i, b.ffn->route_width(), rows));
    if (post) {
      // x = Norm2(h + FFN(h)); the sum goes through ws.ffn, since a norm does not run in place.
      AddRows(e, ws.ffn.data(), ws.normed.data(), rows, d);
      NormRows(e, b.norm2, ws.ffn.data(), rows, x);
    } else {
      AddRows(e, x, ws.ffn.data(), rows, d);
    }
    recorder.Trace(i, ws.normed.data(), d, x, d, rows);
  }
}

void TransformerNetwork::Head(const Exec& e, TransformerWorkspace& ws, size_t sequences,
                              size_t length, float* output) const {
  const size_t rows = sequences * length, d = d_;
  const float* h = ws.x.data();
  if (config_->final_norm) {
    NormRows(e, final_norm_, ws.x.data(), rows, ws.normed.data());
    h = ws.normed.data();
  }
  switch (config_->head.kind) {
    case HeadKind::kLm:
      LmLogits(e, ws, h, rows, output);
      return;
    case HeadKind::kNone:
      std::copy(h, h + rows * d, output);
      return;
    case HeadKind::kClassifier:
      break;
  }
  Grow(ws.out, sequences * d);
  for (size_t s = 0; s < sequences; ++s) {
    const float* seq = h + s * length * d;
    float* p = ws.out.data() + s * d;
    switch (config_->head.pool) {
      case Pool::kFirst:
        std::copy(seq, seq + d, p);
        break;
      case Pool::kLast:
        std::copy(seq + (length - 1) * d, seq + length * d, p);
        break;
      case Pool::kMean:
        // Summed in double: the mean of many tokens should not depend on their order.
        for (size_t j = 0; j < d; ++j) {
          double sum = 0.0;
          for (size_t t = 0; t < length; ++t) sum += seq[t * d + j];
          p[j] = static_cast<float>(sum / static_cast<double>(length));
        }
        break;
    }
  }
  Project(e, classifier_, ws.out.data(), sequences, output);
}

void TransformerNetwork::LmLogits(const Exec& e, TransformerWorkspace& ws, const float* h,
                                  size_t rows, float* logits) const {
  if (config_->head.transform) {
    // Norm(act(T h + t)), as masked-language-model heads transform before the vocabulary.
    Grow(ws.proj, rows * d_);
    Project(e, head_transform_, h, rows, ws.proj.data());
    e.k->activate(config_->head.transform_activation, ws.proj.data(), rows * d_);
    h = ws.proj.data();
    if (config_->head.transform_norm) {
      Grow(ws.out, rows * d_);
      NormRows(e, head_transform_norm_, ws.proj.data(), rows, ws.out.data());
      h = ws.out.data();
    }
  }
  Project(e, lm_head_, lm_bias_, h, rows, logits);
}

void TransformerNetwork::Forward(const Exec& e, network::Workspace& workspace,
                                 const network::Input& input, float* output,
                                 network::Recorder& recorder) const {
  TransformerWorkspace& ws = static_cast<TransformerWorkspace&>(workspace);
  if (input.sequences == 0 || input.length == 0) {
    recorder.Begin();
    return;
  }
  RunBlocks(e, ws, input.tokens, input.sequences, input.length, 0, nullptr, recorder);
  Head(e, ws, input.sequences, input.length, output);
}

void TransformerNetwork::Append(const Exec& e, network::Workspace& workspace,
                                network::KvCache& cache, const int32_t* tokens, size_t count,
                                float* logits) const {
  TransformerWorkspace& ws = static_cast<TransformerWorkspace&>(workspace);
  if (count == 0) return;
  network::Recorder nothing(nullptr, nullptr);
  RunBlocks(e, ws, tokens, 1, count, cache.length, &cache, nothing);
  cache.length += count;
  if (logits == nullptr) return;
  // Only the last token's logits are wanted: normalise and project that row alone.
  const float* last = ws.x.data() + (count - 1) * d_;
  if (config_->final_norm) {
    NormRows(e, final_norm_, last, 1, ws.normed.data());
    last = ws.normed.data();
  }
  LmLogits(e, ws, last, 1, logits);
}

}  // namespace sprig::transformer
