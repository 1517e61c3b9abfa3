#include "api/model_internals.h"

#include "api/model_impl.h"

namespace sprig::internal {

std::vector<float> RowScales(const Model& model, const std::string& name) {
  const format::ModelFile& file = *Model::Impl::Of(model).file;
  const format::TensorInfo* t = file.Find(name);
  if (t == nullptr || t->dtype != DType::kI8 || t->shape.size() != 2) return {};
  std::vector<float> scales(t->shape[0]);
  for (uint64_t row = 0; row < scales.size(); ++row) scales[row] = *file.RowScales(*t, row);
  return scales;
}

}  // namespace sprig::internal
