#!/usr/bin/env bash
# Compares the speed of two builds of sprig, interleaved: the layer benchmarks and `sprig bench`
# on the sample transformer, old and new alternating over several rounds. See --help and
# DEVELOPERS.md ("Checking a refactor").
set -euo pipefail

usage() {
  cat <<'EOF'
Usage: scripts/compare-speed.sh [--quick] [--rounds N] [--work DIR] OLD_BUILD_DIR NEW_BUILD_DIR

Measures two builds of sprig (each a build directory holding bin/sprig and
bin/sprig_bench_layers) in rounds; each round runs both programs one after the other, the old
one first in odd rounds and the new one first in even rounds, on:

  layers   sprig_bench_layers --benchmark_filter=^layer/ --benchmark_min_time=0.3 (the path
           tree, leaf tree, experts and dense layers at in = out = 768, batch 1, 16 and 128:
           CPU microseconds per row and wall time per call), followed by its storage-type
           comparison (path and leaf tree as f32, f16, bf16, i8 at batch 1, cold and warm
           inputs: CPU microseconds per row)
  bench    sprig bench on samples/lm/tree packed as f32 by the old program (--threads 1,
           --prompt-tokens 64, --decode-tokens 64, --repeat 30; --quick 10): median latency,
           tokens per second and tokens per CPU second of prefill and decode

Everything runs on one thread (sessions of one thread, OPENBLAS_NUM_THREADS=1). Prints, per
figure, the median over the rounds of the old and the new program, the ratio new/old of those
medians, and the median of the per-round ratios ("paired", which cancels load that changes
between rounds), and the kernel path each program used. The programs pick their kernel path
as usual; set SPRIG_KERNEL_PATH to choose one for both.

On a shared machine the figures move with the load: compare ratios, not absolute times, and
repeat a comparison whose ratios are far from 1 before believing it.

Options:
  --quick      3 rounds; of the layer benchmarks only the path tree, leaf tree, experts and
               dense 4096 at batch 1, --benchmark_min_time=0.1; sprig bench --repeat 10
  --rounds N   rounds (default 6; --quick 3)
  --work DIR   keep the per-round outputs in DIR (default: a temporary folder, removed)
  -h, --help   this text
EOF
}

QUICK=0
ROUNDS=""
KEEP=""
POSITIONAL=()
while [[ $# -gt 0 ]]; do
  case "$1" in
    -h | --help)
      usage
      exit 0
      ;;
    --quick)
      QUICK=1
      shift
      ;;
    --rounds | --work)
      [[ $# -ge 2 ]] || { echo "compare-speed: $1 needs a value" >&2; exit 2; }
      if [[ "$1" == --rounds ]]; then ROUNDS="$2"; else KEEP="$2"; fi
      shift 2
      ;;
    -*)
      echo "compare-speed: unknown option $1 (see --help)" >&2
      exit 2
      ;;
    *)
      POSITIONAL+=("$1")
      shift
      ;;
  esac
done
if [[ ${#POSITIONAL[@]} -ne 2 ]]; then
  usage >&2
  exit 2
fi
if [[ -n "$ROUNDS" && ! "$ROUNDS" =~ ^[1-9][0-9]*$ ]]; then
  echo "compare-speed: --rounds takes a count of at least 1, got $ROUNDS" >&2
  exit 2
fi

ROOT="$(cd "$(dirname "$0")/.." && pwd)"
HELPER="$ROOT/scripts/compare_helper.py"
PYTHON=/usr/bin/python3

build_of() {
  local dir="$1" program
  for program in sprig sprig_bench_layers; do
    if [[ ! -x "$dir/bin/$program" ]]; then
      echo "compare-speed: $dir/bin/$program is missing or not executable" >&2
      exit 2
    fi
  done
  cd "$dir" && pwd
}
declare -A BUILD
BUILD[old]="$(build_of "${POSITIONAL[0]}")"
BUILD[new]="$(build_of "${POSITIONAL[1]}")"

if [[ -n "$KEEP" ]]; then
  mkdir -p "$KEEP"
  WORK="$(cd "$KEEP" && pwd)"
  rm -f "$WORK"/old.*.* "$WORK"/new.*.*
else
  WORK="$(mktemp -d "${TMPDIR:-/tmp}/sprig-speed.XXXXXX")"
  trap 'rm -rf "$WORK"' EXIT
fi

if [[ $QUICK == 1 ]]; then
  ROUNDS="${ROUNDS:-3}"
  LAYER_FILTER='^layer/(path_d11|leaf_d8_w16|experts_8x512_k2|dense_4096)/1$'
  MIN_TIME=0.1
  REPEAT=10
else
  ROUNDS="${ROUNDS:-6}"
  LAYER_FILTER='^layer/'
  MIN_TIME=0.3
  REPEAT=30
fi

# One thread everywhere: sessions default to one, and OpenBLAS (when linked) must not add any.
export OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1

MODEL="$WORK/tree.sprig"
"${BUILD[old]}/bin/sprig" pack "$ROOT/samples/lm/tree/config.json" \
  "$ROOT/samples/lm/tree/weights.npz" -o "$MODEL" --force >/dev/null

echo "old: ${BUILD[old]}"
echo "new: ${BUILD[new]}"
echo "rounds: $ROUNDS; layer benchmarks $LAYER_FILTER, min time ${MIN_TIME}s; sprig bench" \
  "--repeat $REPEAT; load average $(cut -d' ' -f1-3 /proc/loadavg)"

read -r load_start _ </proc/loadavg
start=$SECONDS
for round in $(seq 1 "$ROUNDS"); do
  # Odd rounds run old first, even rounds new first: whatever favours the first or the second
  # run of a pair (caches, the clock, another process's rhythm) then falls on both alike.
  if ((round % 2)); then order=(old new); else order=(new old); fi
  for side in "${order[@]}"; do
    bin="${BUILD[$side]}/bin"
    "$bin/sprig_bench_layers" --benchmark_filter="$LAYER_FILTER" \
      --benchmark_min_time="$MIN_TIME" --benchmark_out="$WORK/$side.$round.layers.json" \
      --benchmark_out_format=json >"$WORK/$side.$round.layers.txt" 2>"$WORK/$side.$round.layers.err" ||
      { echo "compare-speed: $bin/sprig_bench_layers failed:" >&2; cat "$WORK/$side.$round.layers.err" >&2; exit 2; }
  done
  for side in "${order[@]}"; do
    bin="${BUILD[$side]}/bin"
    "$bin/sprig" bench "$MODEL" --threads 1 --prompt-tokens 64 --decode-tokens 64 \
      --repeat "$REPEAT" --json "$WORK/$side.$round.bench.json" 2>"$WORK/$side.$round.bench.err" ||
      { echo "compare-speed: $bin/sprig bench failed:" >&2; cat "$WORK/$side.$round.bench.err" >&2; exit 2; }
  done
  echo "round $round of $ROUNDS done ($((SECONDS - start)) s)"
done

read -r load_end _ </proc/loadavg
echo "load average $(cut -d' ' -f1-3 /proc/loadavg)"
"$PYTHON" "$HELPER" speed "$WORK"
# (nproc would count the OMP_NUM_THREADS set above, not the CPUs.)
cpus="$(getconf _NPROCESSORS_ONLN)"
if awk -v a="$load_start" -v b="$load_end" -v cpus="$cpus" 'BEGIN { exit !(a > cpus || b > cpus) }'
then
  echo "note: the load average ($load_start at the start, $load_end at the end) exceeded the" \
    "$cpus CPUs: other processes shared the cores, so ratios from 0.8 to 1.25 can be noise;" \
    "repeat on a quieter machine"
fi
