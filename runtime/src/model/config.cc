#include "sprig/config.h"

namespace sprig {

uint32_t ModelConfig::output_dim() const {
  if (family == Family::kStack) return layers.empty() ? input_dim : layers.back().out;
  switch (head.kind) {
    case HeadKind::kLm:
      return vocab_size;
    case HeadKind::kClassifier:
      return head.classes;
    case HeadKind::kNone:
      return d_model;
  }
  return d_model;
}

const char* ToString(Family v) {
  return v == Family::kStack ? "stack" : "transformer";
}

const char* ToString(LayerKind v) {
  switch (v) {
    case LayerKind::kDense:
      return "dense";
    case LayerKind::kTree:
      return "tree";
    case LayerKind::kExperts:
      return "experts";
  }
  return "?";
}

const char* ToString(TreeMode v) {
  return v == TreeMode::kLeaf ? "leaf" : "path";
}

const char* ToString(Activation v) {
  switch (v) {
    case Activation::kRelu:
      return "relu";
    case Activation::kGelu:
      return "gelu";
    case Activation::kGeluTanh:
      return "gelu_tanh";
    case Activation::kSilu:
      return "silu";
  }
  return "?";
}

const char* ToString(NormKind v) {
  return v == NormKind::kLayerNorm ? "layernorm" : "rmsnorm";
}

const char* ToString(Positions v) {
  switch (v) {
    case Positions::kLearned:
      return "learned";
    case Positions::kRope:
      return "rope";
    case Positions::kNone:
      return "none";
  }
  return "?";
}

const char* ToString(HeadKind v) {
  switch (v) {
    case HeadKind::kLm:
      return "lm";
    case HeadKind::kClassifier:
      return "classifier";
    case HeadKind::kNone:
      return "none";
  }
  return "?";
}

const char* ToString(RouterScoring v) {
  switch (v) {
    case RouterScoring::kSoftmax:
      return "softmax";
    case RouterScoring::kSigmoid:
      return "sigmoid";
    case RouterScoring::kSoftmaxChosen:
      return "softmax_chosen";
  }
  return "?";
}

const char* ToString(Pool v) {
  switch (v) {
    case Pool::kMean:
      return "mean";
    case Pool::kFirst:
      return "first";
    case Pool::kLast:
      return "last";
  }
  return "?";
}

const char* ToString(NormPosition v) {
  switch (v) {
    case NormPosition::kPre:
      return "pre";
    case NormPosition::kPost:
      return "post";
  }
  return "?";
}

const char* ToString(Tokenizer v) {
  switch (v) {
    case Tokenizer::kNone:
      return "none";
    case Tokenizer::kByte:
      return "byte";
    case Tokenizer::kSentencePiece:
      return "sentencepiece";
  }
  return "?";
}

const char* ToString(DType v) {
  switch (v) {
    case DType::kF32:
      return "f32";
    case DType::kF16:
      return "f16";
    case DType::kBF16:
      return "bf16";
    case DType::kI8:
      return "i8";
  }
  return "?";
}

size_t DTypeSize(DType v) {
  switch (v) {
    case DType::kF32:
      return 4;
    case DType::kF16:
    case DType::kBF16:
      return 2;
    case DType::kI8:
      return 1;
  }
  return 0;
}

}  // namespace sprig
