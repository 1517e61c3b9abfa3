// Shorthands for propagating a failed Status, for sprig's own code only: the installed headers
// define no macro but SPRIG_API, so an embedder's code never meets these names.
#pragma once

#include <utility>

#include "sprig/status.h"

// Returns the Status of `expr` from the enclosing function when it is not OK.
#define SPRIG_RETURN_IF_ERROR(expr)                \
  do {                                             \
    ::sprig::Status sprig_status_ = (expr);        \
    if (!sprig_status_.ok()) return sprig_status_; \
  } while (0)

// Evaluates `expr` (a Result<T>); returns its Status when it failed, otherwise moves its value
// into `lhs` (a declaration such as `auto x` or an existing variable).
#define SPRIG_CONCAT_INNER_(a, b) a##b
#define SPRIG_CONCAT_(a, b) SPRIG_CONCAT_INNER_(a, b)
#define SPRIG_ASSIGN_OR_RETURN(lhs, expr) \
  SPRIG_ASSIGN_OR_RETURN_IMPL_(SPRIG_CONCAT_(sprig_result_, __LINE__), lhs, expr)
#define SPRIG_ASSIGN_OR_RETURN_IMPL_(tmp, lhs, expr) \
  auto tmp = (expr);                                 \
  if (!tmp.ok()) return tmp.status();                \
  lhs = std::move(tmp).value()
