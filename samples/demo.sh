#!/usr/bin/env bash
# The demo: synthesize a small routed model, pack it (f32 and f16), inspect and check it, run it
# on a few rows, and show how the rows spread over its leaves and experts.
set -euo pipefail
BUILD="${1:-build}"
ROOT="$(cd "$(dirname "$0")/.." && pwd)"
SPRIG="$BUILD/bin/sprig"
OUT="$ROOT/demo-out"
mkdir -p "$OUT"
CONFIG="$ROOT/samples/demo/orchard.json"

step() { printf '\n== %s\n' "$*"; }

step "1. random weights for the demo config (samples/demo/orchard.json)"
"$SPRIG" synth "$CONFIG" -o "$OUT/orchard-weights.npz" --seed 7 --force

step "2. pack them into .sprig files, as float32 and as half precision"
"$SPRIG" pack "$CONFIG" "$OUT/orchard-weights.npz" -o "$OUT/orchard.sprig" --force
"$SPRIG" pack "$CONFIG" "$OUT/orchard-weights.npz" -o "$OUT/orchard-f16.sprig" --dtype f16 --force

step "3. inspect the file and verify every checksum"
"$SPRIG" inspect "$OUT/orchard.sprig" --check

step "4. run it on 8 rows of made-up readings"
/usr/bin/python3 - "$OUT/readings.npy" <<'PY'
import sys, numpy as np
np.save(sys.argv[1], np.random.default_rng(3).standard_normal((256, 48)).astype(np.float32))
PY
"$SPRIG" run "$OUT/orchard.sprig" --input "$OUT/readings.npy" --output "$OUT/grades.npy" \
  --routes "$OUT/routes.npz"
/usr/bin/python3 - "$OUT/grades.npy" "$OUT/routes.npz" <<'PY'
import sys, numpy as np
y = np.load(sys.argv[1]); r = np.load(sys.argv[2])
print("first rows' scores for the 6 grades (random weights: the grades mean nothing):")
for i in range(8):
    print("  row %d: %s  -> grade %d, leaf %d" % (i, np.array2string(y[i], precision=2,
          suppress_small=True), int(y[i].argmax()), int(r["layer1"][i])))
PY

step "5. how the 256 rows spread over the routed layers"
"$SPRIG" routes "$OUT/orchard.sprig" --input "$OUT/readings.npy" | head -24

printf '\nDemo files are in %s\n' "$OUT"
