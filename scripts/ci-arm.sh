#!/usr/bin/env bash
# The aarch64 (64-bit ARM Linux) build, cross-compiled on an x86-64 Debian host and tested under
# user-mode QEMU:
#   1. installs the cross compiler, QEMU and the arm64 libraries (scripts/install-arm-deps.sh);
#   2. cross-builds the tests and the sprig program into BUILD_ARM (benchmarks off);
#   3. runs the test suite under QEMU, all but LargeLeafTree: those tests check which file
#      pages the host kernel brought into memory after madvise hints, and QEMU's user mode
#      (7.2, Debian 12) returns success for such hints without passing them on, so the
#      kernel's read-ahead fills the page cache and they fail for a reason not the program's;
#      they are also the slowest under emulation (over three minutes each here); and the tests
#      in which the host's Python loads libsprig.so in-process (PythonModule, and BenchCli's
#      compare_torch.py and report tests), which an x86-64 interpreter cannot do with an
#      aarch64 library;
#   4. packs and synthesizes with both builds and runs the same packed files with both,
#      comparing them with each other and with PyTorch (tests/python/arch_agreement.py).
# Usage: scripts/ci-arm.sh [NATIVE_BUILD] [BUILD_ARM]; NATIVE_BUILD (default build) must hold a
# built bin/sprig, as `make build` leaves it.
set -euo pipefail
ROOT="$(cd "$(dirname "$0")/.." && pwd)"
NATIVE="$(cd "${1:-build}" && pwd)"
ARM="${2:-build-arm64}"
cd "$ROOT"

start=$SECONDS
bash scripts/install-arm-deps.sh

echo "== aarch64 cross build ($ARM)"
mkdir -p "$ARM"
cmake -S . -B "$ARM" -DCMAKE_TOOLCHAIN_FILE="$ROOT/cmake/toolchain-aarch64-linux-gnu.cmake" \
  -DCMAKE_BUILD_TYPE=Release -DSPRIG_BUILD_BENCHMARKS=OFF > "$ARM/configure.log" 2>&1 ||
  (cat "$ARM/configure.log" && exit 1)
cmake --build "$ARM" -j 2  # everything the tests run: the test binary, CLI, C smoke, fuzz replays
built=$SECONDS

echo "== aarch64 tests under qemu-aarch64"
# ctest runs each test through CMAKE_CROSSCOMPILING_EMULATOR (the toolchain file sets it).
ctest --test-dir "$ARM" --output-on-failure -j 2 --timeout 900 \
  -E '^LargeLeafTree[.]|PythonModule|^BenchCli[.](CompareTorch|ReportIsSelfContained)'
tested=$SECONDS

echo "== the same .sprig files on x86-64 and on aarch64"
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
PYTHONPATH="$ROOT/converter/python" /usr/bin/python3 "$ROOT/tests/python/arch_agreement.py" \
  --native "$NATIVE/bin/sprig" --foreign "qemu-aarch64 $ROOT/$ARM/bin/sprig" --work "$work"
echo "aarch64: build $((built - start)) s, tests $((tested - built)) s," \
  "agreement $((SECONDS - tested)) s"
