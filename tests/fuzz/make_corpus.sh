#!/usr/bin/env bash
# Regenerates the seed corpus of the fuzz targets (tests/fuzz/corpus/<target>/): small configs,
# the weights `sprig synth` writes for them, the .sprig files `sprig pack` makes of those, and
# .npy/.npz/.safetensors files in the variants NumPy writes (Debian's python3-numpy).
# Usage: tests/fuzz/make_corpus.sh build/bin/sprig
# Files the fuzzers add later (crashes found and fixed) live beside the seeds and are kept.
set -euo pipefail
SPRIG="$(realpath "$1")"
HERE="$(cd "$(dirname "$0")" && pwd)"
OUT="$HERE/corpus"
TMP="$(mktemp -d)"
trap 'rm -rf "$TMP"' EXIT
mkdir -p "$OUT"/{model,npy,npz,safetensors,config,mapping}

# Small configs covering every layer kind, option and head; dimensions tiny so each packed model
# stays a few pages.
config() { printf '%s\n' "$2" > "$OUT/config/$1.json"; }
config stack_kinds '{"family":"stack","input_dim":4,"name":"kinds","description":"every kind","layers":[
 {"kind":"dense","width":3,"activation":"gelu","out":4},
 {"kind":"tree","mode":"leaf","depth":2,"leaf_width":2,"activation":"relu","out":4},
 {"kind":"tree","mode":"path","depth":3,"activation":"gelu_tanh","out":4},
 {"kind":"experts","experts":3,"top_k":2,"width":2,"activation":"silu","gated":true,"out":2}]}'
config stack_gated '{"family":"stack","input_dim":3,"layers":[
 {"kind":"tree","mode":"leaf","depth":1,"leaf_width":2,"activation":"silu","gated":true,"bias":false,"out":2},
 {"kind":"experts","experts":2,"top_k":1,"width":2,"renormalize":false,"out":2}]}'
config stack_experts_variants '{"family":"stack","input_dim":3,"layers":[
 {"kind":"experts","experts":3,"top_k":2,"width":2,"router_scoring":"sigmoid","shared_experts":2,"shared_width":1,"shared_gate":true,"out":3},
 {"kind":"experts","experts":2,"top_k":1,"width":2,"gated":true,"router_scoring":"softmax_chosen","shared_experts":1,"bias":false,"out":2}]}'
config lm_rope '{"family":"transformer","vocab_size":16,"d_model":4,"n_heads":2,"n_kv_heads":1,
 "max_seq":8,"norm":"rmsnorm","positions":"rope","causal":true,"tie_embeddings":true,
"head":{"kind":"lm"},"layers":[
 {"kind":"tree","mode":"path","depth":2,"activation":"gelu"}]}'
config classifier '{"family":"transformer","vocab_size":8,"d_model":4,"n_heads":1,"max_seq":6,
 "norm":"layernorm","positions":"learned","causal":false,"attn_bias":false,
 "head":{"kind":"classifier","classes":3,"pool":"mean"},"layers":[
 {"kind":"experts","experts":2,"top_k":1,"width":2,"activation":"relu"}]}'
config lm_variants '{"family":"transformer","vocab_size":8,"d_model":4,"n_heads":2,"max_seq":4,
 "norm_position":"post","final_norm":false,"embed_norm":true,"attn_bias":["q","v"],
 "head":{"kind":"lm","transform":{"activation":"gelu"},"bias":true},"layers":[
 {"kind":"dense","width":2,"activation":"relu"}]}'
config hidden '{"family":"transformer","vocab_size":8,"d_model":2,"n_heads":1,"max_seq":4,
 "positions":"none","head":{"kind":"none"},"layers":[
 {"kind":"tree","mode":"leaf","depth":1,"leaf_width":2,"activation":"relu"}]}'

# Mapping files of every form (docs/mapping.md), over the names mapping_fuzz.cc gives them.
mapping() { printf '%s\n' "$2" > "$OUT/mapping/$1.json"; }
mapping rename '{"h.{i}.w": "blocks.{i}.w", "bias": "b"}'
mapping transpose '{"h.{i}.w": {"to": "t.{i}", "transpose": true}, "bias": {"to": "b", "transpose": false}}'
mapping stack '{"moe.{l}.experts.{e}.w1": {"stack": "layers.{l}.fc1", "over": "e", "transpose": true}}'
mapping split_ranges '{"in_proj": {"split": {"q": [0, 4], "k": [4, 8], "v": [8, 12]}, "axis": 0}}'
mapping split_equal '{"in_proj": {"split": ["a", "b"], "axis": -1, "transpose": true}, "7": {"split": ["x"], "axis": 2}}'

dtypes=(f32 f16 bf16)
i=0
for c in "$OUT"/config/*.json; do
  name="$(basename "$c" .json)"
  "$SPRIG" synth "$c" -o "$TMP/$name.npz" --seed 3 > /dev/null
  cp "$TMP/$name.npz" "$OUT/npz/$name.npz"
  "$SPRIG" pack "$c" "$TMP/$name.npz" -o "$OUT/model/$name.sprig" --force \
    --dtype "${dtypes[$((i % 3))]}" > /dev/null
  i=$((i + 1))
done

/usr/bin/python3 - "$OUT" <<'PY'
import io, json, struct, sys
import numpy as np
out = sys.argv[1]
a = np.arange(12, dtype=np.float32).reshape(3, 4) / 7
np.save(f"{out}/npy/f32.npy", a)
np.save(f"{out}/npy/f64_big_endian.npy", a.astype(">f8"))
np.save(f"{out}/npy/f16_fortran.npy", np.asfortranarray(a.astype(np.float16)))
np.save(f"{out}/npy/i64_scalar.npy", np.array(5, dtype=np.int64))
np.save(f"{out}/npy/bool_empty.npy", np.zeros((0, 3), dtype=bool))
np.save(f"{out}/npy/u8_3d.npy", np.arange(24, dtype=np.uint8).reshape(2, 3, 4))
# Format 2.0 (u32 header length), as NumPy writes for very large headers.
buf = io.BytesIO()
np.lib.format.write_array(buf, a[:2], version=(2, 0))
open(f"{out}/npy/f32_v2.npy", "wb").write(buf.getvalue())
np.savez_compressed(f"{out}/npz/compressed.npz", x=a, y=np.arange(5, dtype=np.int32))
np.savez(f"{out}/npz/stored.npz", scalar=np.float64(2.5), empty=np.zeros((0,), np.float32))

def safetensors(path, tensors, metadata=None):
    header, blobs, offset = {}, [], 0
    for name, (dtype, arr) in tensors.items():
        raw = arr.tobytes()
        header[name] = {"dtype": dtype, "shape": list(arr.shape),
                        "data_offsets": [offset, offset + len(raw)]}
        blobs.append(raw)
        offset += len(raw)
    if metadata:
        header["__metadata__"] = metadata
    text = json.dumps(header).encode()
    text += b" " * (-len(text) % 8)
    open(path, "wb").write(struct.pack("<Q", len(text)) + text + b"".join(blobs))

bf16 = (a.view(np.uint32) >> 16).astype(np.uint16)
safetensors(f"{out}/safetensors/mixed.safetensors",
            {"w": ("F32", a), "h": ("F16", a.astype(np.float16)), "b": ("BF16", bf16),
             "i": ("I64", np.arange(3, dtype=np.int64))}, {"format": "pt"})
safetensors(f"{out}/safetensors/scalar_empty.safetensors",
            {"s": ("F64", np.array(1.5)), "e": ("I8", np.zeros((0, 2), np.int8))})
PY
# Tokenizer sections: small SentencePiece models (BPE with byte fallback and a user-defined
# symbol and no normalisation rules, unigram with NFKC case folding, whose rules are most of its size) trained on a licence text every Debian system ships,
# stored as pack would store them (sprig_tokenizer_check, built beside sprig when the build
# found libsentencepiece).
mkdir -p "$OUT/tokenizer"
CHECK="$(dirname "$SPRIG")/sprig_tokenizer_check"
/usr/bin/python3 - "$TMP" <<'PY'
import sys, sentencepiece as spm
tmp = sys.argv[1]
common = dict(input="/usr/share/common-licenses/Apache-2.0", num_threads=1, hard_vocab_limit=False)
spm.SentencePieceTrainer.train(model_prefix=f"{tmp}/bpe", model_type="bpe", vocab_size=400,
                               byte_fallback=True, user_defined_symbols=["<note>"],
                               normalization_rule_name="identity", **common)
spm.SentencePieceTrainer.train(model_prefix=f"{tmp}/unigram", model_type="unigram",
                               vocab_size=300, normalization_rule_name="nfkc_cf", **common)
PY
for m in bpe unigram; do
  "$CHECK" "$TMP/$m.model" section "$OUT/tokenizer/$m.section"
done
du -sh "$OUT"
