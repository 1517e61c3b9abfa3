#!/usr/bin/env bash
# The demo: the whole job on the sample language model of samples/lm (a byte-level model of
# orchard logbook notes whose blocks use fast feedforward leaf trees, and its dense twin, both
# trained with PyTorch by samples/lm/train_lm.py): pack, verify against PyTorch, generate,
# benchmark against the dense twin, and write an HTML report. On the way, text in and out with
# the subword sample model (samples/lm/subword: SentencePiece BPE pieces, its tokenizer packed
# into the file).
set -euo pipefail
BUILD="${1:-build}"
ROOT="$(cd "$(dirname "$0")/.." && pwd)"
SPRIG="$BUILD/bin/sprig"
OUT="$ROOT/demo-out"
LM="$ROOT/samples/lm"
mkdir -p "$OUT"

step() { printf '\n== %s\n' "$*"; }

step "1. pack the sample model as float32 and as half precision, and its dense twin"
"$SPRIG" pack "$LM/tree/config.json" "$LM/tree/weights.npz" -o "$OUT/notes.sprig" --force
"$SPRIG" pack "$LM/tree/config.json" "$LM/tree/weights.npz" -o "$OUT/notes-f16.sprig" \
  --dtype f16 --force
"$SPRIG" pack "$LM/dense/config.json" "$LM/dense/weights.npz" -o "$OUT/notes-dense.sprig" --force
"$SPRIG" inspect "$OUT/notes.sprig" | sed -n '/^layers/,$p'

step "2. verify both files against the PyTorch reference outputs and routes"
for model in notes notes-f16; do
  "$SPRIG" verify "$OUT/$model.sprig" "$LM/tree/reference.npz" | grep -E '^verify|^  outputs|routing|diverge|^PASS|^FAIL'
done

step "3. continue a note (the text comes from a small sample model and is often wrong)"
"$SPRIG" generate "$OUT/notes.sprig" --prompt "Day 41 at Brindle Terrace: " --count 96 \
  --temperature 0.6 --seed 3
echo

step "4. text in and out: the subword model with its SentencePiece tokenizer (its text is often wrong too)"
"$SPRIG" pack "$LM/subword/config.json" "$LM/subword/weights.npz" -o "$OUT/subword.sprig" \
  --tokenizer "$LM/subword/vell-notes.model" --force
"$SPRIG" verify "$OUT/subword.sprig" "$LM/subword/reference.npz" | grep -E '^verify|^  outputs|diverge|^PASS|^FAIL'
"$SPRIG" tokens "$OUT/subword.sprig" --text "Day 12 at Quill Hill: fog until noon. Marit mended the netting."
# No trailing space in this prompt: the model saw spaces only joined to the next word, and a
# prompt ending in a lone space gives garbled text.
"$SPRIG" generate "$OUT/subword.sprig" --prompt "Day 41 at Brindle Terrace:" --count 48 \
  --temperature 0.6 --seed 3
echo

step "5. benchmark the routed model against its trained dense twin (decode and prefill)"
"$SPRIG" bench "$OUT/notes.sprig" --baseline "$OUT/notes-dense.sprig" --prompt-tokens 64 \
  --decode-tokens 64 --repeat 5 --report "$OUT/report.html"

step "6. the report"
printf 'Open %s in a browser: speedup, latency distribution, memory and leaf usage.\n' \
  "$OUT/report.html"
printf 'Demo files are in %s\n' "$OUT"
