#!/usr/bin/env bash
# CI: builds the libFuzzer targets with clang under AddressSanitizer and UndefinedBehaviorSanitizer
# (build-fuzz/) and runs each for SPRIG_FUZZ_SECONDS (default 60) from the committed seed corpus.
# Fails on any crash, sanitizer report, leak, timeout or memory blow-up; the input that caused it
# is left in build-fuzz/crash-<target>-*. New inputs found here are thrown away.
set -euo pipefail
cd "$(dirname "$0")/.."
SECONDS_PER_TARGET="${SPRIG_FUZZ_SECONDS:-45}"
JOBS="${JOBS:-2}"
TARGETS=(model npy npz safetensors config mapping tokenizer)

bash scripts/install-deps.sh
mkdir -p build-fuzz
CC=clang CXX=clang++ cmake -S . -B build-fuzz -DCMAKE_BUILD_TYPE=RelWithDebInfo \
  -DSPRIG_BUILD_FUZZERS=ON -DSPRIG_BUILD_TESTS=OFF -DSPRIG_BUILD_BENCHMARKS=OFF \
  > build-fuzz/configure.log 2>&1 || { cat build-fuzz/configure.log; exit 1; }
cmake --build build-fuzz -j "$JOBS" --target "${TARGETS[@]/#/sprig_fuzz_}"

for t in "${TARGETS[@]}"; do
  work="$(mktemp -d)"
  log="build-fuzz/ci-fuzz-$t.log"
  echo "== fuzz $t for ${SECONDS_PER_TARGET} s"
  if ! "build-fuzz/bin/sprig_fuzz_$t" -max_total_time="$SECONDS_PER_TARGET" -timeout=10 \
      -rss_limit_mb=2048 -print_final_stats=1 -artifact_prefix="build-fuzz/crash-$t-" \
      "$work" "tests/fuzz/corpus/$t" > "$log" 2>&1; then
    tail -n 60 "$log"
    rm -rf "$work"
    echo "fuzz target $t failed; its input is in build-fuzz/crash-$t-*" >&2
    exit 1
  fi
  rm -rf "$work"
  grep -aE '^(Done|stat::number_of_executed_units)' "$log" || true
done
