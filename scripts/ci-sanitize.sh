#!/usr/bin/env bash
# CI: the C++ test suite under AddressSanitizer + UndefinedBehaviorSanitizer (build-asan/, the
# configuration of `make asan`), then the concurrency test under ThreadSanitizer (build-tsan/,
# that test alone). The PyTorch reference tests are left out under ASan: they check arithmetic
# against PyTorch, which the normal test run already does, and spend their time in Python; so
# are the digits training test (Python again), the tests that load libsprig.so into the
# host's Python (an uninstrumented interpreter cannot load an ASan-built library) and the
# browser rendering of a bench report.
set -euo pipefail
cd "$(dirname "$0")/.."
JOBS="${JOBS:-2}"

bash scripts/install-deps.sh
configure() {  # BUILD_DIR CMAKE_ARGS...
  local dir="$1"
  shift
  mkdir -p "$dir"
  cmake -S . -B "$dir" "$@" > "$dir/configure.log" 2>&1 || { cat "$dir/configure.log"; exit 1; }
}

echo "== ASan + UBSan: build-asan"
configure build-asan -DCMAKE_BUILD_TYPE=RelWithDebInfo -DSPRIG_SANITIZE=ON \
  -DSPRIG_BUILD_BENCHMARKS=OFF
cmake --build build-asan -j "$JOBS"
ASAN_OPTIONS=detect_leaks=1:abort_on_error=1 UBSAN_OPTIONS=print_stacktrace=1 \
  ctest --test-dir build-asan --output-on-failure -j "$JOBS" --timeout 1800 \
  -E 'ReferenceStack\.|ReferenceTransformer\.|PythonModule|BenchCli\.(CompareTorch|ReportIsSelfContained)|Digits\.'

echo "== TSan: build-tsan"
configure build-tsan -DCMAKE_BUILD_TYPE=RelWithDebInfo -DSPRIG_THREAD_SANITIZER=ON \
  -DSPRIG_BUILD_BENCHMARKS=OFF
cmake --build build-tsan -j "$JOBS" --target sprig_tsan_tests
ctest --test-dir build-tsan --output-on-failure --timeout 1800
