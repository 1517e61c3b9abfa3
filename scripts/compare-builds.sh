#!/usr/bin/env bash
# Checks that two builds of sprig behave the same: packed files, `sprig run` outputs and routes,
# exit codes and messages, byte for byte. Run it on the build from before a refactor and the one
# after; see --help and DEVELOPERS.md ("Checking a refactor").
set -euo pipefail

usage() {
  cat <<'EOF'
Usage: scripts/compare-builds.sh [--kernel-paths LIST] [--models REGEX] OLD_BUILD_DIR
                                 NEW_BUILD_DIR [WORK_DIR]

Compares two builds of sprig (each a build directory holding bin/sprig) on fixed models and
inputs, byte for byte:

  models   the sample models samples/lm/tree and samples/lm/dense (their weights.npz), and
           synthesized models covering every layer kind (dense gated and ungated, leaf tree,
           path tree, experts with each router scoring and with shared experts; relu, gelu,
           gelu_tanh, silu; with and without biases) in stacks
           and transformers (learned, rope and no positions; layernorm and rmsnorm; lm,
           classifier and none heads; grouped key/value heads; attention biases)
  synth    `sprig synth CONFIG --seed 7` by both programs: the weights must be identical
  pack     `sprig pack --dtype T` for T in f32 f16 bf16 i8, and i8 with --dtype-nodes f32, by
           both programs: the packed files must be identical
  run      `sprig run` of the old program's packed file by both programs on fixed inputs
           (stack: float32 rows; transformer: int32 tokens [B, T]; written by NumPy with a
           fixed seed), with the default batch, --batch 1 and --threads 2 on the kernel path
           the CPU picks, and with the default batch and --batch 1 on each other kernel path
           of --kernel-paths (SPRIG_KERNEL_PATH): the output .npy and the --routes .npz must
           be identical

Every case also compares the exit code and what the programs print (progress lines, durations
and rates aside); the commands run with the same relative paths on both sides so that their
messages can match.

Prints one line per case, "same" or "DIFFERENT: ..." with what differs, then
"N passed, N failed". Exit status: 0 when every case is the same, 1 when any differs, 2 on bad
usage or when the old program cannot run a case (then the line says ERROR).

Options:
  --kernel-paths LIST  the kernel paths besides the one the CPU picks, comma-separated
                       SPRIG_KERNEL_PATH values such as scalar,avx2; "all" (the default):
                       every path this CPU offers, as the old program reports them; "none":
                       only the path the CPU picks
  --models REGEX       only the models whose names match (grep -E), to repeat a failing
                       case quickly; the names are in the case lines
  -h, --help           this text

WORK_DIR keeps the models, inputs, outputs and messages (created when missing; files from an
earlier comparison are overwritten). Without it a temporary folder is used and removed.
Needs /usr/bin/python3 with NumPy.
EOF
}

KERNEL_PATHS="all"
MODELS_MATCH=""
POSITIONAL=()
while [[ $# -gt 0 ]]; do
  case "$1" in
    -h | --help)
      usage
      exit 0
      ;;
    --kernel-paths)
      [[ $# -ge 2 ]] || { echo "compare-builds: --kernel-paths needs a value" >&2; exit 2; }
      KERNEL_PATHS="$2"
      shift 2
      ;;
    --models)
      [[ $# -ge 2 ]] || { echo "compare-builds: --models needs a value" >&2; exit 2; }
      MODELS_MATCH="$2"
      shift 2
      ;;
    -*)
      echo "compare-builds: unknown option $1 (see --help)" >&2
      exit 2
      ;;
    *)
      POSITIONAL+=("$1")
      shift
      ;;
  esac
done
if [[ ${#POSITIONAL[@]} -lt 2 || ${#POSITIONAL[@]} -gt 3 ]]; then
  usage >&2
  exit 2
fi

ROOT="$(cd "$(dirname "$0")/.." && pwd)"
HELPER="$ROOT/scripts/compare_helper.py"
PYTHON=/usr/bin/python3

program_of() {
  local dir="$1"
  if [[ ! -x "$dir/bin/sprig" ]]; then
    echo "compare-builds: $dir/bin/sprig is missing or not executable" >&2
    exit 2
  fi
  echo "$(cd "$dir" && pwd)/bin/sprig"
}
OLD="$(program_of "${POSITIONAL[0]}")"
NEW="$(program_of "${POSITIONAL[1]}")"

if [[ ${#POSITIONAL[@]} -eq 3 ]]; then
  mkdir -p "${POSITIONAL[2]}"
  WORK="$(cd "${POSITIONAL[2]}" && pwd)"
else
  WORK="$(mktemp -d "${TMPDIR:-/tmp}/sprig-compare.XXXXXX")"
  trap 'rm -rf "$WORK"' EXIT
fi
mkdir -p "$WORK/models" "$WORK/old" "$WORK/new"

# ---- the synthesized models ----

declare -a MODEL_NAMES=()
declare -A MODEL_CONFIGS=()
model() {
  MODEL_NAMES+=("$1")
  MODEL_CONFIGS[$1]="$2"
}

# Widths are not multiples of the vector lengths (4, 8, 16) in most layers, so that the kernels'
# tails run too; the deep path trees have records below their hot levels.
model stack-dense '{"family":"stack","name":"dense","input_dim":37,"layers":[
  {"kind":"dense","width":40,"activation":"gelu","out":37},
  {"kind":"dense","width":16,"activation":"silu","gated":true,"bias":false,"out":24},
  {"kind":"dense","width":33,"activation":"relu","gated":true,"out":24},
  {"kind":"dense","width":20,"activation":"gelu_tanh","out":10}]}'
model stack-leaf '{"family":"stack","name":"leaf","input_dim":64,"layers":[
  {"kind":"tree","mode":"leaf","depth":3,"leaf_width":8,"activation":"relu","out":64},
  {"kind":"tree","mode":"leaf","depth":2,"leaf_width":4,"activation":"gelu_tanh","gated":true,
   "out":64},
  {"kind":"tree","mode":"leaf","depth":0,"leaf_width":8,"activation":"relu","out":64},
  {"kind":"tree","mode":"leaf","depth":6,"leaf_width":16,"activation":"gelu","out":64},
  {"kind":"tree","mode":"leaf","depth":4,"leaf_width":5,"activation":"silu","gated":true,
   "bias":false,"out":13}]}'
model stack-path '{"family":"stack","name":"path","input_dim":37,"layers":[
  {"kind":"tree","mode":"path","depth":8,"activation":"gelu","out":37},
  {"kind":"tree","mode":"path","depth":2,"activation":"relu","bias":false,"out":37},
  {"kind":"tree","mode":"path","depth":4,"activation":"silu","out":37},
  {"kind":"tree","mode":"path","depth":11,"activation":"gelu_tanh","out":9}]}'
model stack-experts '{"family":"stack","name":"experts","input_dim":24,"layers":[
  {"kind":"experts","experts":4,"top_k":2,"width":8,"activation":"silu","gated":true,"out":24},
  {"kind":"experts","experts":3,"top_k":1,"width":8,"activation":"relu","renormalize":false,
   "out":24},
  {"kind":"experts","experts":6,"top_k":6,"width":5,"activation":"gelu","out":24},
  {"kind":"experts","experts":8,"top_k":3,"width":12,"activation":"gelu_tanh","gated":true,
   "bias":false,"out":7}]}'
model stack-experts-variants '{"family":"stack","name":"experts variants","input_dim":24,"layers":[
  {"kind":"experts","experts":6,"top_k":2,"width":8,"activation":"silu","gated":true,
   "router_scoring":"sigmoid","shared_experts":1,"shared_gate":true,"out":24},
  {"kind":"experts","experts":5,"top_k":2,"width":8,"activation":"gelu",
   "router_scoring":"sigmoid","renormalize":false,"shared_experts":2,"shared_width":6,"out":24},
  {"kind":"experts","experts":4,"top_k":3,"width":6,"activation":"relu","bias":false,
   "router_scoring":"softmax_chosen","shared_experts":1,"shared_width":5,"shared_gate":true,
   "out":7}]}'
model stack-all-kinds '{"family":"stack","name":"all kinds","input_dim":24,"layers":[
  {"kind":"dense","width":40,"activation":"gelu","out":24},
  {"kind":"tree","mode":"leaf","depth":3,"leaf_width":8,"activation":"relu","out":19},
  {"kind":"experts","experts":4,"top_k":2,"width":8,"activation":"silu","gated":true,"out":19},
  {"kind":"tree","mode":"path","depth":8,"activation":"gelu","out":24},
  {"kind":"dense","width":16,"activation":"silu","gated":true,"bias":false,"out":5}]}'
model tf-learned-layernorm-lm '{"family":"transformer","name":"learned layernorm lm",
  "vocab_size":256,"tokenizer":"byte","d_model":48,"n_heads":4,"max_seq":32,
  "norm":"layernorm","positions":"learned","attn_bias":true,"head":{"kind":"lm"},"layers":[
  {"kind":"dense","width":96,"activation":"silu","gated":true},
  {"kind":"tree","mode":"leaf","depth":3,"leaf_width":16,"activation":"gelu"}]}'
model tf-rope-rmsnorm-gqa-lm '{"family":"transformer","name":"rope rmsnorm grouped lm",
  "vocab_size":256,"tokenizer":"byte","d_model":64,"n_heads":8,"n_kv_heads":2,"max_seq":40,
  "norm":"rmsnorm","positions":"rope","rope_base":10000,"tie_embeddings":true,
  "head":{"kind":"lm"},"layers":[
  {"kind":"tree","mode":"path","depth":6,"activation":"gelu"},
  {"kind":"experts","experts":4,"top_k":2,"width":32,"activation":"silu","gated":true},
  {"kind":"tree","mode":"leaf","depth":2,"leaf_width":8,"activation":"relu","gated":true}]}'
model tf-classifier-mean '{"family":"transformer","name":"classifier mean","vocab_size":50,
  "d_model":32,"n_heads":4,"max_seq":24,"norm":"layernorm","positions":"learned",
  "attn_bias":true,"head":{"kind":"classifier","classes":5,"pool":"mean"},"layers":[
  {"kind":"dense","width":64,"activation":"gelu_tanh"},
  {"kind":"experts","experts":3,"top_k":1,"width":16,"activation":"relu","renormalize":false}]}'
model tf-classifier-last-rope '{"family":"transformer","name":"classifier last, one kv head",
  "vocab_size":100,"d_model":32,"n_heads":4,"n_kv_heads":1,"max_seq":20,"norm":"rmsnorm",
  "positions":"rope","rope_base":500,"causal":false,
  "head":{"kind":"classifier","classes":3,"pool":"last"},"layers":[
  {"kind":"tree","mode":"leaf","depth":3,"leaf_width":8,"activation":"silu"},
  {"kind":"tree","mode":"path","depth":3,"activation":"relu","bias":false}]}'
model tf-classifier-first-nopos '{"family":"transformer","name":"classifier first, no positions",
  "vocab_size":70,"d_model":24,"n_heads":2,"max_seq":16,"norm":"layernorm","positions":"none",
  "head":{"kind":"classifier","classes":4,"pool":"first"},"layers":[
  {"kind":"dense","width":48,"activation":"relu","gated":true,"bias":false}]}'
model tf-none-head '{"family":"transformer","name":"hidden states","vocab_size":64,
  "d_model":40,"n_heads":5,"max_seq":24,"norm":"rmsnorm","norm_eps":1e-6,"positions":"rope",
  "attn_bias":false,"head":{"kind":"none"},"layers":[
  {"kind":"experts","experts":6,"top_k":2,"width":16,"activation":"gelu","gated":true},
  {"kind":"tree","mode":"leaf","depth":4,"leaf_width":8,"activation":"gelu_tanh"}]}'
model tf-post-norm-mlm-head '{"family":"transformer","name":"post-norm, embedding norm, mlm head",
  "vocab_size":90,"d_model":32,"n_heads":4,"max_seq":24,"norm":"layernorm","positions":"learned",
  "causal":false,"norm_position":"post","final_norm":false,"embed_norm":true,
  "attn_bias":["q","k","v"],"head":{"kind":"lm","transform":{"activation":"gelu"},"bias":true},
  "layers":[{"kind":"dense","width":64,"activation":"gelu"},
  {"kind":"tree","mode":"leaf","depth":3,"leaf_width":8,"activation":"relu"}]}'
model tf-post-norm-tied-transform '{"family":"transformer","name":"post-norm, tied, transform",
  "vocab_size":256,"tokenizer":"byte","d_model":32,"n_heads":4,"n_kv_heads":2,"max_seq":32,
  "norm":"rmsnorm","positions":"rope","norm_position":"post","tie_embeddings":true,
  "attn_bias":["o"],"head":{"kind":"lm","transform":{"activation":"silu","norm":false},
  "bias":true},"layers":[{"kind":"experts","experts":4,"top_k":2,"width":16,"activation":"silu"}]}'

SAMPLES=(lm/tree lm/dense)
# Storage options of `sprig pack`: each storage type, and int8 records under float32 routing
# nodes (tree nodes and routers), where one layer reads two types.
STORAGES=(f32 f16 bf16 i8 "i8 --dtype-nodes f32")
SEED=7

# ---- cases ----

passed=0
failed=0
errors=0
same() {
  printf 'same       %s\n' "$1"
  passed=$((passed + 1))
}
different() {
  printf 'DIFFERENT: %s: %s\n' "$1" "$2"
  failed=$((failed + 1))
}
error() {
  printf 'ERROR:     %s: %s\n' "$1" "$2"
  errors=$((errors + 1))
}

# Runs a program in a side's folder: invoke SIDE NAME ENV... -- ARGS...; stdout, stderr and the
# exit status go to NAME.stdout, NAME.stderr and NAME.status there.
invoke() {
  local side="$1" name="$2" program
  shift 2
  local env=()
  while [[ "$1" != "--" ]]; do
    env+=("$1")
    shift
  done
  shift
  if [[ "$side" == old ]]; then program="$OLD"; else program="$NEW"; fi
  local status=0
  (cd "$WORK/$side" && env ${env[@]+"${env[@]}"} "$program" "$@" \
    >"$name.stdout" 2>"$name.stderr") || status=$?
  echo "$status" >"$WORK/$side/$name.status"
}

# Removes the files of a case on both sides before it runs, so that a file left by an earlier
# comparison in WORK_DIR cannot stand in for one a program failed to write.
fresh() {
  local file
  for file in "$@"; do
    rm -f "$WORK/old/$file" "$WORK/new/$file"
  done
}

# Messages without what depends on time: progress lines, durations and rates.
messages() {
  sed -E -e 's/\r/\n/g' "$1" | grep -Ev '[0-9.]+%  .* MiB/s *$' |
    sed -E 's/[0-9]+(\.[0-9]+)? ?(ns|us|ms|s|[KMGT]i?B\/s)([^A-Za-z0-9]|$)/#\2\3/g' || true
}

status_of() {
  local status
  read -r status <"$1"
  echo "$status"
}

# What differs between the two sides' results of NAME, as a phrase; empty when nothing does.
# FILES are compared byte for byte (cmp), then the exit status and the messages.
differences() {
  local name="$1"
  shift
  local found=() file old="$WORK/old" new="$WORK/new"
  for file in "$@"; do
    if [[ ! -f "$old/$file" || ! -f "$new/$file" ]]; then
      [[ -f "$old/$file" || -f "$new/$file" ]] && found+=("$file written by one program only")
      continue
    fi
    if ! cmp -s "$old/$file" "$new/$file"; then
      found+=("$file differs ($("$PYTHON" "$HELPER" explain "$old/$file" "$new/$file"))")
    fi
  done
  local old_status new_status
  old_status="$(status_of "$old/$name.status")"
  new_status="$(status_of "$new/$name.status")"
  [[ "$old_status" == "$new_status" ]] || found+=("exit status $old_status against $new_status")
  local stream
  for stream in stdout stderr; do
    cmp -s "$old/$name.$stream" "$new/$name.$stream" && continue
    if ! cmp -s <(messages "$old/$name.$stream") <(messages "$new/$name.$stream"); then
      found+=("$stream differs: $(diff <(messages "$old/$name.$stream") \
        <(messages "$new/$name.$stream") | grep -E '^[<>]' | head -2 | tr '\n' ' ')")
    fi
  done
  local phrase text=""
  for phrase in ${found[@]+"${found[@]}"}; do
    text+="${text:+; }$phrase"
  done
  echo "$text"
}

# The old program must succeed: a fixed case it cannot run says the case list is wrong.
old_failed() {
  local name="$1"
  [[ "$(status_of "$WORK/old/$name.status")" != 0 ]]
}
old_failure() {
  local name="$1"
  echo "the old program failed (exit $(status_of "$WORK/old/$name.status")): $(head -c 300 \
    "$WORK/old/$name.stderr" | tr '\n' ' ')"
}

# compare CASE NAME FILES...: prints the case line from both sides' results.
compare() {
  local label="$1" name="$2"
  shift 2
  if old_failed "$name"; then
    error "$label" "$(old_failure "$name")"
    return
  fi
  local found
  found="$(differences "$name" "$@")"
  if [[ -z "$found" ]]; then same "$label"; else different "$label" "$found"; fi
}

# ---- prepare: configs, weights, inputs ----

# Whether a model is among those --models asks for.
wanted() {
  [[ -z "$MODELS_MATCH" ]] || grep -Eq -- "$MODELS_MATCH" <<<"$1"
}

ALL_MODELS=()
for sample in "${SAMPLES[@]}"; do
  name="sample-${sample//\//-}"
  wanted "$name" || continue
  mkdir -p "$WORK/models/$name"
  cp "$ROOT/samples/$sample/config.json" "$ROOT/samples/$sample/weights.npz" "$WORK/models/$name/"
  ALL_MODELS+=("$name")
done
SYNTHESIZED=()
for name in "${MODEL_NAMES[@]}"; do
  wanted "$name" || continue
  SYNTHESIZED+=("$name")
  mkdir -p "$WORK/models/$name"
  printf '%s\n' "${MODEL_CONFIGS[$name]}" >"$WORK/models/$name/config.json"
  ALL_MODELS+=("$name")
done
for name in ${ALL_MODELS[@]+"${ALL_MODELS[@]}"}; do
  "$PYTHON" "$HELPER" inputs "$WORK/models/$name/config.json" "$WORK/models/$name/input.npy" \
    --seed "$(cksum <<<"$name" | cut -d' ' -f1)"
done

if [[ ${#ALL_MODELS[@]} -eq 0 ]]; then
  echo "compare-builds: no model matches --models $MODELS_MATCH" >&2
  exit 2
fi

# The kernel paths: the old program names the available ones and the one it picks when asked
# for a path this CPU lacks (neon on x86, avx2 on ARM), in its warning
#   sprig: warning: SPRIG_KERNEL_PATH asks for kernel path "neon", which this CPU does not
#   support; available: scalar, sse42, avx2; using "avx2".
mkdir -p "$WORK/probe"
printf '%s\n' '{"family":"stack","input_dim":4,"layers":[{"kind":"dense","width":4,"out":2}]}' \
  >"$WORK/probe/config.json"
"$PYTHON" "$HELPER" inputs "$WORK/probe/config.json" "$WORK/probe/input.npy" --seed 1
(cd "$WORK/probe" && "$OLD" synth config.json -o weights.npz --seed 1 --force >/dev/null &&
  "$OLD" pack config.json weights.npz -o probe.sprig --force >/dev/null)
AVAILABLE="" PICKED=""
for absent in neon avx2; do
  (cd "$WORK/probe" && SPRIG_KERNEL_PATH=$absent "$OLD" run probe.sprig --input input.npy \
    --output output.npy >/dev/null 2>warning.txt) || true
  warning="$(grep 'does not support' "$WORK/probe/warning.txt" || true)"
  if [[ "$warning" =~ available:\ ([a-z0-9, ]+)\;\ using\ \"([a-z0-9]+)\" ]]; then
    AVAILABLE="${BASH_REMATCH[1]//,/}"
    PICKED="${BASH_REMATCH[2]}"
    break
  fi
done
case "$KERNEL_PATHS" in
  all)
    if [[ -z "$PICKED" ]]; then
      echo "compare-builds: cannot tell the kernel paths from the old program's warning;" \
        "name them with --kernel-paths" >&2
      exit 2
    fi
    PATHS=()
    for path in $AVAILABLE; do
      [[ "$path" == "$PICKED" ]] || PATHS+=("$path")
    done
    ;;
  none) PATHS=() ;;
  *) IFS=',' read -r -a PATHS <<<"$KERNEL_PATHS" ;;
esac

echo "old: $OLD"
echo "new: $NEW"
echo "work: $WORK"
picked="the CPU's pick"
[[ -z "$PICKED" ]] || picked="$PICKED ($picked)"
echo "kernel paths: $picked${PATHS[*]+ and ${PATHS[*]}}"
for name in ${SYNTHESIZED[@]+"${SYNTHESIZED[@]}"}; do
  # Both programs synthesize; the old program's weights are the ones packed.
  fresh "$name.weights.npz"
  for side in old new; do
    invoke "$side" "$name.synth" -- synth "../models/$name/config.json" \
      -o "$name.weights.npz" --seed "$SEED"
  done
  compare "synth $name" "$name.synth" "$name.weights.npz"
  if old_failed "$name.synth"; then continue; fi
  cp "$WORK/old/$name.weights.npz" "$WORK/models/$name/weights.npz"
done

for name in "${ALL_MODELS[@]}"; do
  [[ -f "$WORK/models/$name/weights.npz" ]] || continue
  for storage in "${STORAGES[@]}"; do
    model="$name.${storage// --dtype-nodes /-nodes-}"
    fresh "$model.sprig"
    for side in old new; do
      # shellcheck disable=SC2086  # the storage is options split on purpose
      invoke "$side" "$model.pack" -- pack "../models/$name/config.json" \
        "../models/$name/weights.npz" -o "$model.sprig" --dtype $storage --force
    done
    compare "pack $name --dtype $storage" "$model.pack" "$model.sprig"
    if old_failed "$model.pack"; then continue; fi

    for path in default ${PATHS[@]+"${PATHS[@]}"}; do
      env=()
      variants=("" "--batch 1")
      if [[ "$path" == default ]]; then
        variants+=("--threads 2")
      else
        env=("SPRIG_KERNEL_PATH=$path")
      fi
      for variant in "${variants[@]}"; do
        tag="$model.$path${variant:+.${variant//[- ]/}}"
        label="run $name --dtype $storage${variant:+ $variant}"
        [[ "$path" == default ]] || label+=" (kernels $path)"
        fresh "$tag.out.npy" "$tag.routes.npz"
        for side in old new; do
          # shellcheck disable=SC2086  # the variant is options split on purpose
          invoke "$side" "$tag.run" ${env[@]+"${env[@]}"} -- run "../old/$model.sprig" \
            --input "../models/$name/input.npy" --output "$tag.out.npy" \
            --routes "$tag.routes.npz" $variant
        done
        # A kernel path this CPU lacks makes the programs warn and fall back: stop, since
        # the cases would not test what they say.
        if grep -q 'SPRIG_KERNEL_PATH' "$WORK/old/$tag.run.stderr"; then
          echo "compare-builds: $(head -1 "$WORK/old/$tag.run.stderr")" >&2
          exit 2
        fi
        compare "$label" "$tag.run" "$tag.out.npy" "$tag.routes.npz"
      done
    done
  done
done

echo "$passed passed, $((failed + errors)) failed"
if [[ $errors -gt 0 ]]; then exit 2; fi
if [[ $failed -gt 0 ]]; then exit 1; fi
exit 0
