#include "converter/synth/synth.h"

#include <cmath>
#include <cstring>
#include <string>

#include "model/tensor_spec.h"

namespace sprig::convert {
namespace {

bool EndsWith(const std::string& s, const char* suffix) {
  const size_t n = std::strlen(suffix);
  return s.size() >= n && s.compare(s.size() - n, n, suffix) == 0;
}

// The scale (standard deviation) of a tensor's entries; a negative value means "constant -v".
float ScaleFor(const TensorSpec& t) {
  const std::string& n = t.name;
  const bool norm = n.find("norm") != std::string::npos && n.find("nodes") == std::string::npos;
  if (norm) return EndsWith(n, ".weight") ? -1.0f : -0.0f;
  if (n == "embed.weight") return 1.0f;
  if (n == "pos.weight") return 0.1f;
  if (EndsWith(n, "bias")) return 0.01f;
  // A weight's last axis is its fan-in (PyTorch layout); a path tree's output rows use their
  // own width, which keeps the summed path contributions at a modest scale.
  const uint64_t fan_in = t.shape.empty() ? 1 : t.shape.back();
  return static_cast<float>(1.0 / std::sqrt(static_cast<double>(fan_in ? fan_in : 1)));
}

}  // namespace

std::vector<io::NdArray> SynthesizeWeights(const ModelConfig& config, uint64_t seed) {
  std::vector<io::NdArray> out;
  const std::vector<TensorSpec> specs = ExpectedTensors(config);
  for (size_t i = 0; i < specs.size(); ++i) {
    const TensorSpec& t = specs[i];
    // One stream per tensor, so a tensor's values do not depend on the tensors before it.
    Random rng(seed * 0x100000001b3ull + i);
    const uint64_t n = ElementCount(t.shape);
    std::vector<uint8_t> bytes(n * sizeof(float));
    float* v = reinterpret_cast<float*>(bytes.data());
    const float scale = ScaleFor(t);
    if (scale <= 0.0f) {
      for (uint64_t k = 0; k < n; ++k) v[k] = -scale;
    } else {
      for (uint64_t k = 0; k < n; ++k) v[k] = scale * rng.Normal();
    }
    out.push_back(io::NdArray::Owned(t.name, io::ElementType::kF32, t.shape, std::move(bytes)));
  }
  return out;
}

}  // namespace sprig::convert
