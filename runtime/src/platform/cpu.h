// What the processor offers, for the kernels' path choice. x86-64 reads CPUID and, for the
// vector register state the operating system saves, XGETBV (cpu_x86.cc, shared by every system);
// aarch64 asks the system (getauxval on Linux).
#pragma once

namespace sprig::platform {

struct CpuFeatures {
  bool sse42 = false;
  // AVX-era features count only when the OS saves the YMM state (XCR0 bits 1-2), AVX-512 ones
  // only when it also saves the opmask and ZMM state (XCR0 bits 5-7).
  bool avx2 = false;
  bool fma = false;
  bool f16c = false;
  bool avx512f = false;
  bool avx512bw = false;
  bool avx512dq = false;
  bool avx512vl = false;
  bool avx512vnni = false;  // vpdpbusd (int8 dot products), with AVX-512 F
  bool neon = false;        // aarch64 Advanced SIMD
};

// Detected on the first call; the same answer after.
const CpuFeatures& DetectCpu();

}  // namespace sprig::platform
