#include "model/config_check.h"

#include "base/status_macros.h"
#include "model/tensor_spec.h"

namespace sprig {
namespace {

Status CheckDim(uint64_t v, const std::string& where, bool allow_zero = false) {
  if ((v == 0 && !allow_zero) || v > kMaxDimension) {
    return Status::InvalidArgument(where + " is " + std::to_string(v) + ", expected 1.." +
                                   std::to_string(kMaxDimension));
  }
  return Status::Ok();
}

// Router scoring and shared experts of an experts layer.
Status CheckExpertsVariant(const LayerConfig& l, const std::string& where) {
  if (static_cast<uint8_t>(l.router_scoring) >
      static_cast<uint8_t>(RouterScoring::kSoftmaxChosen)) {
    return Status::InvalidArgument(where +
                                   ".router_scoring is not softmax, sigmoid or "
                                   "softmax_chosen");
  }
  if (l.router_scoring == RouterScoring::kSoftmaxChosen && !l.renormalize) {
    return Status::InvalidArgument(where +
                                   ".renormalize is false, but router_scoring softmax_chosen "
                                   "always normalises over the chosen experts");
  }
  if (l.shared_experts > kMaxExperts) {
    return Status::InvalidArgument(where + ".shared_experts is " +
                                   std::to_string(l.shared_experts) + ", expected 0.." +
                                   std::to_string(kMaxExperts));
  }
  if (l.shared_experts == 0) {
    if (l.shared_width != 0 || l.shared_gate) {
      return Status::InvalidArgument(where +
                                     ".shared_width or shared_gate is set but shared_experts "
                                     "is 0");
    }
    return Status::Ok();
  }
  return CheckDim(l.shared_width, where + ".shared_width");
}

Status CheckLayer(const LayerConfig& l, const std::string& where) {
  SPRIG_RETURN_IF_ERROR(CheckDim(l.in, where + ".in"));
  SPRIG_RETURN_IF_ERROR(CheckDim(l.out, where + ".out"));
  switch (l.kind) {
    case LayerKind::kDense:
      return CheckDim(l.width, where + ".width");
    case LayerKind::kTree:
      if (l.mode == TreeMode::kLeaf) {
        if (l.depth > kMaxLeafDepth) {
          return Status::InvalidArgument(where + ".depth is " + std::to_string(l.depth) +
                                         ", expected 0.." + std::to_string(kMaxLeafDepth) +
                                         " for a leaf-mode tree");
        }
        return CheckDim(l.leaf_width, where + ".leaf_width");
      }
      if (l.depth > kMaxPathDepth) {
        return Status::InvalidArgument(where + ".depth is " + std::to_string(l.depth) +
                                       ", expected 0.." + std::to_string(kMaxPathDepth) +
                                       " for a path-mode tree");
      }
      return Status::Ok();
    case LayerKind::kExperts:
      if (l.experts == 0 || l.experts > kMaxExperts) {
        return Status::InvalidArgument(where + ".experts is " + std::to_string(l.experts) +
                                       ", expected 1.." + std::to_string(kMaxExperts));
      }
      if (l.top_k == 0 || l.top_k > l.experts) {
        return Status::InvalidArgument(where + ".top_k is " + std::to_string(l.top_k) +
                                       ", expected 1..experts (" + std::to_string(l.experts) + ")");
      }
      SPRIG_RETURN_IF_ERROR(CheckDim(l.width, where + ".width"));
      return CheckExpertsVariant(l, where);
  }
  return Status::InvalidArgument(where + ".kind is not dense, tree or experts");
}

// Products of up to four dimensions of at most 2^24 each fit in 128 bits; compare in 128 bits so
// that a limit check can never itself overflow.
Status CheckSizes(const ModelConfig& c, const std::string& source) {
  unsigned __int128 total = 0;
  for (const TensorSpec& t : ExpectedTensors(c)) {
    unsigned __int128 n = 1;
    for (uint64_t d : t.shape) {
      n *= d;
      if (n > kMaxTensorElements) {
        return Status::InvalidArgument(source + ": tensor " + t.name + " " +
                                       ShapeToString(t.shape) +
                                       " would hold more than 2^36 "
                                       "elements, the limit");
      }
    }
    total += n;
  }
  if (total > kMaxTotalElements) {
    return Status::InvalidArgument(source +
                                   ": the model would hold more than 2^38 weights, "
                                   "the limit");
  }
  return Status::Ok();
}

Status CheckTransformer(const ModelConfig& c, const std::string& s) {
  SPRIG_RETURN_IF_ERROR(CheckDim(c.vocab_size, s + ": vocab_size"));
  SPRIG_RETURN_IF_ERROR(CheckDim(c.d_model, s + ": d_model"));
  SPRIG_RETURN_IF_ERROR(CheckDim(c.n_heads, s + ": n_heads"));
  SPRIG_RETURN_IF_ERROR(CheckDim(c.n_kv_heads, s + ": n_kv_heads"));
  SPRIG_RETURN_IF_ERROR(CheckDim(c.max_seq, s + ": max_seq"));
  if (c.d_model % c.n_heads != 0) {
    return Status::InvalidArgument(s + ": d_model (" + std::to_string(c.d_model) +
                                   ") must be a multiple of n_heads (" + std::to_string(c.n_heads) +
                                   ")");
  }
  if (c.n_heads % c.n_kv_heads != 0) {
    return Status::InvalidArgument(s + ": n_heads (" + std::to_string(c.n_heads) +
                                   ") must be a multiple of n_kv_heads (" +
                                   std::to_string(c.n_kv_heads) + ")");
  }
  if (c.positions == Positions::kRope && (c.d_model / c.n_heads) % 2 != 0) {
    return Status::InvalidArgument(s +
                                   ": rope positions need an even head_dim (d_model / "
                                   "n_heads), got " +
                                   std::to_string(c.d_model / c.n_heads));
  }
  if (!(c.norm_eps > 0.0f) || !(c.rope_base > 0.0f)) {
    return Status::InvalidArgument(s + ": norm_eps and rope_base must be positive");
  }
  if (c.tokenizer == Tokenizer::kByte && c.vocab_size != 256) {
    return Status::InvalidArgument(s + ": the byte tokenizer needs vocab_size 256, got " +
                                   std::to_string(c.vocab_size));
  }
  if (c.tie_embeddings && c.head.kind != HeadKind::kLm) {
    return Status::InvalidArgument(s + ": tie_embeddings needs head kind lm");
  }
  if (c.head.kind == HeadKind::kClassifier) {
    SPRIG_RETURN_IF_ERROR(CheckDim(c.head.classes, s + ": head.classes"));
  }
  if (c.head.kind != HeadKind::kLm && (c.head.transform || c.head.bias)) {
    return Status::InvalidArgument(s + ": head.transform and head.bias need head kind lm");
  }
  for (size_t i = 0; i < c.layers.size(); ++i) {
    if (c.layers[i].in != c.d_model || c.layers[i].out != c.d_model) {
      return Status::InvalidArgument(s + ": layers[" + std::to_string(i) +
                                     "] must map d_model to d_model in a transformer");
    }
  }
  return Status::Ok();
}

Status CheckStack(const ModelConfig& c, const std::string& s) {
  SPRIG_RETURN_IF_ERROR(CheckDim(c.input_dim, s + ": input_dim"));
  uint32_t width = c.input_dim;
  for (size_t i = 0; i < c.layers.size(); ++i) {
    if (c.layers[i].in != width) {
      return Status::InvalidArgument(s + ": layers[" + std::to_string(i) + "].in is " +
                                     std::to_string(c.layers[i].in) + " but the " +
                                     (i == 0 ? std::string("input_dim") : "previous layer's out") +
                                     " is " + std::to_string(width));
    }
    width = c.layers[i].out;
  }
  return Status::Ok();
}

}  // namespace

Status ValidateConfig(const ModelConfig& c, const std::string& source) {
  if (c.layers.empty() || c.layers.size() > kMaxLayers) {
    return Status::InvalidArgument(source + ": layers has " + std::to_string(c.layers.size()) +
                                   " entries, expected 1.." + std::to_string(kMaxLayers));
  }
  for (size_t i = 0; i < c.layers.size(); ++i) {
    SPRIG_RETURN_IF_ERROR(CheckLayer(c.layers[i], source + ": layers[" + std::to_string(i) + "]"));
  }
  SPRIG_RETURN_IF_ERROR(c.family == Family::kStack ? CheckStack(c, source)
                                                   : CheckTransformer(c, source));
  return CheckSizes(c, source);
}

}  // namespace sprig
