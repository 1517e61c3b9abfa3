// The tensors a configuration requires: names and shapes as in the input contract, and whether
// each belongs to a layer's records (leaves, experts, path-tree neurons) or to the hot section.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "sprig/config.h"

namespace sprig {

struct TensorSpec {
  std::string name;             // full name, e.g. "layers.0.leaves.fc1.weight"
  std::vector<uint64_t> shape;  // PyTorch layout: [out_features, in_features] for a weight
  int layer = -1;               // index into ModelConfig::layers, or -1 for model-level tensors
  // True when the tensor's first axis indexes records (a leaf, an expert, a path-tree neuron),
  // so its rows may be stored in the layer's record section rather than the hot section.
  bool routed = false;
};

// Prefix of layer i's tensor names: "layers.{i}." in a stack, "blocks.{i}.ffn." in a transformer.
std::string LayerPrefix(const ModelConfig& config, size_t i);

// Every tensor the config requires, model-level tensors and each layer's in order.
// The config must already be validated (sizes in range).
std::vector<TensorSpec> ExpectedTensors(const ModelConfig& config);

// Tensors of one feed-forward layer, names prefixed with `prefix`.
std::vector<TensorSpec> LayerTensors(const LayerConfig& layer, const std::string& prefix,
                                     int index);

// Number of elements of a shape (1 for a scalar). Shapes are validated to stay far below 2^63.
uint64_t ElementCount(const std::vector<uint64_t>& shape);

// "[2, 3, 4]"
std::string ShapeToString(const std::vector<uint64_t>& shape);

// Routing nodes of a tree: 2^d - 1 (leaf mode) or 2^(d+1) - 1 (path mode).
uint64_t TreeNodeCount(const LayerConfig& layer);
// Records of a routed layer: leaves (2^d) or experts; 0 for a dense layer. Path trees are
// chunked by the layout planner, so they report 0 here.
uint64_t RoutedUnitCount(const LayerConfig& layer);

}  // namespace sprig
