// x86-64 feature detection, the same on every operating system: CPUID says what the processor
// has, XGETBV what register state the operating system saves on a context switch. A feature
// whose registers the OS does not save (an old kernel, a hypervisor that hides XSAVE) would
// corrupt them at the first task switch, so it counts as absent. Plain CPUID and XGETBV
// instructions: this file is compiled for the x86-64 baseline and uses no vector code.
#if defined(__x86_64__) || defined(_M_X64)

#include <cstdint>

#include "platform/cpu.h"

#if defined(__GNUC__) || defined(__clang__)
#include <cpuid.h>
#endif

namespace sprig::platform {
namespace {

struct Registers {
  uint32_t eax = 0, ebx = 0, ecx = 0, edx = 0;
};

// CPUID leaf `leaf`, sub-leaf `sub`; all zero when the leaf is beyond the processor's maximum.
Registers Cpuid(uint32_t leaf, uint32_t sub) {
  Registers r;
#if defined(__GNUC__) || defined(__clang__)
  if (__get_cpuid_count(leaf, sub, &r.eax, &r.ebx, &r.ecx, &r.edx) == 0) return Registers{};
#endif
  return r;
}

// XCR0, the register-state mask the OS enabled with XSETBV. Only valid when CPUID says OSXSAVE.
uint64_t ReadXcr0() {
#if defined(__GNUC__) || defined(__clang__)
  uint32_t eax = 0, edx = 0;
  // The instruction, not the _xgetbv intrinsic: that needs -mxsave for the whole file.
  __asm__ volatile("xgetbv" : "=a"(eax), "=d"(edx) : "c"(0));
  return (uint64_t(edx) << 32) | eax;
#else
  return 0;
#endif
}

bool Bit(uint32_t value, int bit) {
  return ((value >> bit) & 1u) != 0;
}

// XCR0 bits: 1 SSE (XMM), 2 AVX (upper YMM), 5 opmask, 6 upper ZMM0-15, 7 ZMM16-31.
constexpr uint64_t kYmmState = 0x6;
constexpr uint64_t kZmmState = 0xE6;

CpuFeatures Detect() {
  CpuFeatures f;
  const Registers leaf1 = Cpuid(1, 0);
  f.sse42 = Bit(leaf1.ecx, 20);
  const bool osxsave = Bit(leaf1.ecx, 27);
  const bool avx = Bit(leaf1.ecx, 28);
  const uint64_t xcr0 = osxsave ? ReadXcr0() : 0;
  const bool ymm = avx && (xcr0 & kYmmState) == kYmmState;
  const bool zmm = ymm && (xcr0 & kZmmState) == kZmmState;
  // FMA and F16C are VEX-encoded: they use YMM registers, so they need the YMM state too.
  f.fma = ymm && Bit(leaf1.ecx, 12);
  f.f16c = ymm && Bit(leaf1.ecx, 29);
  const Registers leaf7 = Cpuid(0, 0).eax >= 7 ? Cpuid(7, 0) : Registers{};
  f.avx2 = ymm && Bit(leaf7.ebx, 5);
  f.avx512f = zmm && Bit(leaf7.ebx, 16);
  f.avx512dq = f.avx512f && Bit(leaf7.ebx, 17);
  f.avx512bw = f.avx512f && Bit(leaf7.ebx, 30);
  f.avx512vl = f.avx512f && Bit(leaf7.ebx, 31);
  f.avx512vnni = f.avx512f && Bit(leaf7.ecx, 11);
  return f;
}

}  // namespace

const CpuFeatures& DetectCpu() {
  static const CpuFeatures features = Detect();
  return features;
}

}  // namespace sprig::platform

#endif
