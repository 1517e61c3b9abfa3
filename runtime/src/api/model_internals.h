// Queries on an open Model for sprig's own tools, on data that an embedder has no use for and
// the public headers therefore leave out. Not installed.
#pragma once

#include <string>
#include <vector>

#include "sprig/model.h"

namespace sprig::internal {

// The float32 scale of each row of the 2-D i8 tensor `name` (schema/README.md, "int8
// storage"), in row order: sprig verify bounds how far int8 rounding moved a routing margin
// with them. Empty when the model has no such tensor or it is not a 2-D i8 tensor. Reads the
// scales from the mapping (paging them in); thread-safe.
std::vector<float> RowScales(const Model& model, const std::string& name);

// The 1-norm of each dequantised row of the same kind of tensor, ||ŵ_row||_1 = s_row·Σ|q|, in
// double: sprig verify bounds how far quantising a row's activations (compute mode "i8") moved
// a logit with them. Empty as RowScales is. Reads every value of the tensor.
std::vector<double> RowAbsSums(const Model& model, const std::string& name);

}  // namespace sprig::internal
