// The per-instruction-set tables behind kernels::Kernels(). Each getter lives in the file
// compiled for its instruction set and only returns the address of a constant table, so calling
// it runs no instruction of that set; calling a function from the table does, so the dispatcher
// hands a table out only when the CPU supports it.
#pragma once

#include "kernels/kernels.h"

namespace sprig::kernels {

const KernelTable& ScalarKernels();
#if defined(__x86_64__) || defined(_M_X64)
const KernelTable& Sse42Kernels();
const KernelTable& Avx2Kernels();
const KernelTable& Avx512Kernels();
#endif
#if defined(__aarch64__)
const KernelTable& NeonKernels();
#endif

}  // namespace sprig::kernels
