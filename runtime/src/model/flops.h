// Parameter and FLOP counts per layer, for inspect and bench. A multiply-add counts as 2 FLOPs;
// activations, norms and softmax are not counted.
#pragma once

#include <cstdint>

#include "sprig/config.h"

namespace sprig {

struct LayerCost {
  uint64_t params = 0;                 // weights and biases of the layer
  uint64_t flops_per_token = 0;        // what one token actually costs
  uint64_t dense_width = 0;            // hidden units of the dense layer with equal units
  uint64_t dense_flops_per_token = 0;  // that dense layer's cost per token
};

LayerCost CostOf(const LayerConfig& layer);

struct ModelCost {
  uint64_t params = 0;
  uint64_t ffn_flops = 0;        // feed-forward layers, per token
  uint64_t ffn_dense_flops = 0;  // the same layers made dense, per token
  uint64_t other_flops = 0;      // attention projections and head, per token (transformer)
};

// Attention's score and value products grow with the sequence; they are counted for a token at
// position `context` (e.g. max_seq / 2).
ModelCost CostOf(const ModelConfig& config, uint64_t context);

}  // namespace sprig
