// The run-time dispatcher. Baseline code: it reads CPU features and picks a table, and must
// never include the xsimd implementation (see kernels_simd.h).
#include "kernels/kernels.h"

#include <cstdlib>
#include <string>

#include "base/log.h"
#include "kernels/kernels_internal.h"
#include "platform/cpu.h"

namespace sprig::kernels {
namespace {

constexpr KernelPath kAllPaths[] = {KernelPath::kScalar, KernelPath::kSse42, KernelPath::kAvx2,
                                    KernelPath::kAvx512, KernelPath::kNeon};

// The platform layer reads CPUID and XGETBV (x86-64) or asks the system (aarch64), so a path
// counts only when the OS also saves its registers.
bool CpuSupports(KernelPath path) {
  const platform::CpuFeatures& cpu = platform::DetectCpu();
  switch (path) {
    case KernelPath::kScalar:
      return true;
#if defined(__x86_64__) || defined(_M_X64)
    case KernelPath::kSse42:
      return cpu.sse42;
    case KernelPath::kAvx2:
      return cpu.avx2 && cpu.fma && cpu.f16c;
    case KernelPath::kAvx512:
      return cpu.avx512f && cpu.avx512bw && cpu.avx512dq && cpu.avx512vl && cpu.fma && cpu.f16c;
#endif
#if defined(__aarch64__)
    case KernelPath::kNeon:
      return cpu.neon;
#endif
    default:
      return false;
  }
}

std::string AvailableNames() {
  std::string names;
  for (KernelPath path : AvailablePaths()) {
    if (!names.empty()) names += ", ";
    names += ToString(path);
  }
  return names;
}

}  // namespace

const char* ToString(KernelPath path) {
  switch (path) {
    case KernelPath::kScalar:
      return "scalar";
    case KernelPath::kSse42:
      return "sse42";
    case KernelPath::kAvx2:
      return "avx2";
    case KernelPath::kAvx512:
      return "avx512";
    case KernelPath::kNeon:
      return "neon";
  }
  return "unknown";
}

Result<KernelPath> ParseKernelPath(std::string_view name) {
  for (KernelPath path : kAllPaths) {
    if (name == ToString(path)) return path;
  }
  return Status::InvalidArgument("unknown kernel path \"" + std::string(name) +
                                 "\"; expected one of scalar, sse42, avx2, avx512, neon");
}

bool IsPathAvailable(KernelPath path) {
  return CpuSupports(path);
}

std::vector<KernelPath> AvailablePaths() {
  std::vector<KernelPath> paths;
  for (KernelPath path : kAllPaths) {
    if (IsPathAvailable(path)) paths.push_back(path);
  }
  return paths;
}

KernelPath DetectBestPath() {
  return AvailablePaths().back();
}

Result<KernelPath> ResolvePath(const char* requested) {
  if (requested == nullptr || *requested == '\0') return DetectBestPath();
  Result<KernelPath> path = ParseKernelPath(requested);
  if (!path.ok()) return path.status().WithContext("SPRIG_KERNEL_PATH");
  if (!IsPathAvailable(*path)) {
    return Status::InvalidArgument(
        "SPRIG_KERNEL_PATH asks for kernel path \"" + std::string(requested) +
        "\", which this CPU does not support; available: " + AvailableNames());
  }
  return path;
}

KernelPath BestAvailablePath() {
  Result<KernelPath> path = ResolvePath(std::getenv("SPRIG_KERNEL_PATH"));
  if (path.ok()) return *path;
  const KernelPath best = DetectBestPath();
  base::Log(LogLevel::kWarning, path.status().message() + "; using \"" + ToString(best) + "\".");
  return best;
}

const KernelTable& Kernels(KernelPath path) {
  if (!IsPathAvailable(path)) return ScalarKernels();
  switch (path) {
#if defined(__x86_64__) || defined(_M_X64)
    case KernelPath::kSse42:
      return Sse42Kernels();
    case KernelPath::kAvx2:
      return Avx2Kernels();
    case KernelPath::kAvx512:
      return Avx512Kernels();
#endif
#if defined(__aarch64__)
    case KernelPath::kNeon:
      return NeonKernels();
#endif
    default:
      return ScalarKernels();
  }
}

const KernelTable& ActiveKernels() {
  // Chosen once: the environment and the CPU do not change while the process runs.
  static const KernelTable& table = Kernels(BestAvailablePath());
  return table;
}

}  // namespace sprig::kernels
