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

std::vector<double> RowAbsSums(const Model& model, const std::string& name) {
  const format::ModelFile& file = *Model::Impl::Of(model).file;
  const format::TensorInfo* t = file.Find(name);
  if (t == nullptr || t->dtype != DType::kI8 || t->shape.size() != 2) return {};
  std::vector<double> sums(t->shape[0]);
  for (uint64_t row = 0; row < sums.size(); ++row) {
    const auto* q = reinterpret_cast<const int8_t*>(file.Row(*t, row));
    int64_t total = 0;
    for (uint64_t i = 0; i < t->shape[1]; ++i) total += q[i] < 0 ? -int64_t{q[i]} : int64_t{q[i]};
    sums[row] = static_cast<double>(*file.RowScales(*t, row)) * static_cast<double>(total);
  }
  return sums;
}

}  // namespace sprig::internal
