"""The same .sprig files run by two builds of sprig (x86-64 Linux, and another: aarch64 Linux
under user-mode QEMU, or x86-64 Windows under Wine), compared with each other and with the
float64 PyTorch reference.

Usage (PYTHONPATH=converter/python, Debian's /usr/bin/python3 with python3-torch and NumPy):

    arch_agreement.py --native SPRIG --foreign "qemu-aarch64 SPRIG_ARM64" --work DIR
    arch_agreement.py --native SPRIG --foreign "cmake/wine-run.sh SPRIG.EXE" \
        --foreign-name windows --foreign-vector auto --work DIR

For every case (stacks of every routed layer kind and activation, transformers with either
norm, RoPE and learned positions, an lm and a classifier head) and every storage type
(f32, f16, bf16), a random model is built with sprig_torch and its weights are rounded to the
storage type, so that `sprig pack --dtype` stores them exactly and the float64 reference is the
exact model of the stored numbers. The NATIVE build packs the model; both builds then run the
same packed file with the vector path (the native default; on the foreign build the path that
--foreign-vector names, neon by default, or its own choice with "auto") and with the scalar
path (SPRIG_KERNEL_PATH=scalar).

Checks, each one failing the script:
* the foreign build packs the same weights into a byte-identical file (the format has no
  processor-dependent byte), and `sprig synth` draws byte-identical weights on both;
* every run is within rtol 1e-4 / atol 1e-5 of the reference and its routes are the
  reference's except rows whose deciding margin is below 1e-5 (as tests/python/
  compare_outputs.py, with the transformer reference test's tolerances, the looser of the
  two reference tests, since these models mix both);
* the two vector paths agree with each other within 2e-4 / 2e-5 (each is within the
  reference tolerance, so their difference is within twice it), and their routes differ only
  on rows with a margin below 1e-5. They are not expected to be bit-identical: NEON has four
  float lanes, AVX2 eight and AVX-512 sixteen, so the vector kernels add products in a
  different order;
* the two scalar paths agree with each other to the bit: the scalar kernels and layers are
  the same C++ source, built without floating-point contraction (see runtime/CMakeLists.txt),
  so every addition, multiplication and square root is the same IEEE 754 operation in the
  same order on both processors, and the other C library functions used (exp, tanh, ...)
  give the same results in glibc's aarch64 and x86-64 builds on these inputs. Exact GELU is
  the exception: glibc's erff/erfcf differ in the last bits between the two, so the case
  that uses it ("gelu") is held to the vector paths' tolerance instead, and the distance is
  printed. A Windows build takes those functions from the MinGW-w64 C runtime instead of
  glibc; the same rule is applied to it, and what it shows is printed the same way.

Prints one line per run and a closing 'N passed, N failed' line; exits 1 when a check fails,
2 for bad arguments.
"""
import argparse
import os
import shlex
import subprocess
import sys
import time

import numpy as np
import torch

from sprig_torch.export import export, random_inputs, random_model

REF_RTOL, REF_ATOL, MARGIN = 1e-4, 1e-5, 1e-5
PAIR_RTOL, PAIR_ATOL = 2e-4, 2e-5

# Exact GELU is left out of the cases whose scalar runs must agree to the bit: erf comes from
# each system's C library, and glibc's x86-64 and aarch64 erff/erfcf differ in the last bits.
STACK = {
    "family": "stack",
    "input_dim": 70,  # 70 = 17·4 + 2 = 8·8 + 6: vector tails on both processors
    "layers": [
        {"kind": "dense", "width": 24, "activation": "silu", "gated": True, "out": 33},
        {"kind": "tree", "mode": "leaf", "depth": 4, "leaf_width": 6, "activation": "relu",
         "out": 33},
        {"kind": "experts", "experts": 5, "top_k": 2, "width": 7, "activation": "gelu_tanh",
         "out": 9},
        {"kind": "tree", "mode": "path", "depth": 6, "activation": "relu", "out": 64},
        {"kind": "dense", "width": 8, "activation": "silu", "out": 5},
    ],
}
TRANSFORMER = {
    "family": "transformer", "vocab_size": 50, "d_model": 32, "n_heads": 4, "n_kv_heads": 2,
    "max_seq": 32, "norm": "rmsnorm", "positions": "rope", "causal": True,
    "head": {"kind": "lm"},
    "layers": [
        {"kind": "experts", "experts": 4, "top_k": 2, "width": 8, "activation": "silu",
         "gated": True},
        {"kind": "tree", "mode": "leaf", "depth": 3, "leaf_width": 6, "activation": "relu"},
    ],
}
TRANSFORMER_LN = {
    "family": "transformer", "vocab_size": 50, "d_model": 32, "n_heads": 4, "n_kv_heads": 4,
    "max_seq": 32, "norm": "layernorm", "positions": "learned", "causal": False,
    "head": {"kind": "classifier", "classes": 3, "pool": "mean"},
    "layers": [
        {"kind": "tree", "mode": "path", "depth": 4, "activation": "gelu_tanh"},
        {"kind": "dense", "width": 24, "activation": "relu", "gated": True},
    ],
}
GELU = {
    "family": "stack",
    "input_dim": 33,
    "layers": [
        {"kind": "tree", "mode": "leaf", "depth": 3, "leaf_width": 9, "activation": "gelu",
         "out": 17},
        {"kind": "experts", "experts": 4, "top_k": 2, "width": 6, "activation": "gelu",
         "gated": True, "out": 5},
    ],
}
# (name, config, rows or tokens, seed, whether the scalar runs must be bit-identical)
CASES = [("stack", STACK, 300, 5, True), ("transformer", TRANSFORMER, 32, 6, True),
         ("transformer-ln", TRANSFORMER_LN, 24, 7, True), ("gelu", GELU, 200, 8, False)]
STORAGE = {"f32": torch.float32, "f16": torch.float16, "bf16": torch.bfloat16}


class Checks:
    def __init__(self):
        self.passed = 0
        self.failed = 0

    def record(self, ok, what, detail):
        print(f"{'ok  ' if ok else 'FAIL'} {what}: {detail}", flush=True)
        if ok:
            self.passed += 1
        else:
            self.failed += 1


def run(command, env=None):
    """Runs `command` (a list); returns its stderr, raising with its output when it fails."""
    result = subprocess.run(command, env=env, capture_output=True, text=True, check=False)
    if result.returncode != 0:
        raise RuntimeError(f"{shlex.join(command)} exited {result.returncode}:\n"
                           f"{result.stdout}{result.stderr}")
    return result.stderr


def make_case(work, name, config, rows, seed, dtype, native):
    """Exports the reference for `config` in `dtype` and packs it with the native build;
    returns the case's folder, the packed file and the inputs."""
    folder = os.path.join(work, f"{name}-{dtype}")
    model = random_model(config, seed)
    with torch.no_grad():
        for p in model.parameters():
            p.copy_(p.to(STORAGE[dtype]).to(torch.float32))
    export(model, folder, random_inputs(model, rows, seed + 1))
    ref = np.load(os.path.join(folder, "reference.npz"))
    inputs = os.path.join(folder, "inputs.npy")
    np.save(inputs, ref["inputs"])
    packed = os.path.join(folder, "model.sprig")
    run(native + ["pack", os.path.join(folder, "config.json"),
                  os.path.join(folder, "weights.npz"), "-o", packed, "--dtype", dtype])
    return folder, packed, inputs


def run_model(cli, path, packed, inputs, folder, label):
    """Runs `packed` with kernel path `path` (None: the build's own choice)."""
    env = dict(os.environ)
    env.pop("SPRIG_KERNEL_PATH", None)
    if path is not None:
        env["SPRIG_KERNEL_PATH"] = path
    out = os.path.join(folder, f"{label}.npy")
    routes = os.path.join(folder, f"{label}.npz")
    start = time.monotonic()
    stderr = run(cli + ["run", packed, "--input", inputs, "--output", out, "--routes", routes,
                        "--batch", "64"], env)
    if "warning" in stderr:
        # A refused SPRIG_KERNEL_PATH falls back with a warning: the path asked for did not run.
        raise RuntimeError(f"{label}: {stderr.strip()}")
    return np.load(out), dict(np.load(routes)), time.monotonic() - start


def same_bytes(path_a, path_b):
    with open(path_a, "rb") as a, open(path_b, "rb") as b:
        return a.read() == b.read()


def flipped_rows(mine, theirs, margins):
    """Rows whose routes differ, and whether every such row has a margin below MARGIN."""
    differ = (mine != theirs).reshape(mine.shape[0], -1).any(axis=1)
    return differ, bool((~differ | (margins < MARGIN)).all())


def compare_routes(routes_a, routes_b, ref, label, checks):
    """Routes of two runs agree except rows with a small reference margin; returns the union
    of rows that flipped (their outputs need not match)."""
    flipped = None
    for key in sorted(routes_a):
        a, b = routes_a[key], routes_b[key].reshape(routes_a[key].shape)
        margins = ref["margins." + key].reshape(a.shape[0])
        differ, ok = flipped_rows(a, b, margins)
        checks.record(ok, f"{label} routes {key}",
                      f"{int(differ.sum())} of {a.shape[0]} rows differ, all with margin < "
                      f"{MARGIN}" if ok else f"{int(differ.sum())} rows differ")
        flipped = differ if flipped is None else flipped | differ
    return flipped


def compare_outputs(a, b, rtol, atol, flipped, label, checks):
    want = b.astype(np.float64).reshape(a.shape)
    err = np.abs(a.astype(np.float64) - want)
    excess = err - (atol + rtol * np.abs(want))
    if flipped is not None and a.ndim >= 2 and flipped.shape[0] == a.shape[0]:
        excess[flipped] = 0.0  # a row that took another route legitimately differs
    checks.record(bool((excess <= 0).all()), f"{label} outputs",
                  f"max abs difference {err.max():.3g} (rtol {rtol:g}, atol {atol:g})")


def ulps_apart(a, b):
    """Largest distance in float32 units in the last place between matching elements."""
    ia = a.astype(np.float32).view(np.int32).astype(np.int64)
    ib = b.astype(np.float32).view(np.int32).astype(np.int64)
    # Map the sign-magnitude bit patterns onto a monotonic integer line.
    ia = np.where(ia < 0, -(ia & 0x7FFFFFFF), ia)
    ib = np.where(ib < 0, -(ib & 0x7FFFFFFF), ib)
    return int(np.abs(ia - ib).max()) if ia.size else 0


def check_case(args, checks, name, config, rows, seed, exact, dtype):
    native, foreign = shlex.split(args.native), shlex.split(args.foreign)
    other = args.foreign_name
    vector_path = None if args.foreign_vector == "auto" else args.foreign_vector
    vector_label = f"{other}-{args.foreign_vector if vector_path else 'vector'}"
    folder, packed, inputs = make_case(args.work, name, config, rows, seed, dtype, native)
    ref = np.load(os.path.join(folder, "reference.npz"))
    tag = f"{name} {dtype}"
    # The file format has no processor-dependent byte: the other build packs the same bytes.
    again = os.path.join(folder, "foreign.sprig")
    run(foreign + ["pack", os.path.join(folder, "config.json"),
                   os.path.join(folder, "weights.npz"), "-o", again, "--dtype", dtype])
    same = same_bytes(packed, again)
    checks.record(same, f"{tag} packed by both builds",
                  "byte-identical files" if same else "the files differ")
    # `sprig synth` draws the same weights from the same seed on both processors.
    drawn = [os.path.join(folder, f"synth-{i}.npz") for i in range(2)]
    for cli, out in zip((native, foreign), drawn):
        run(cli + ["synth", os.path.join(folder, "config.json"), "-o", out, "--seed", str(seed)])
    same = same_bytes(*drawn)
    checks.record(same, f"{tag} synthesized by both builds",
                  "byte-identical files" if same else "the files differ")
    runs = {
        "x86-vector": run_model(native, None, packed, inputs, folder, "x86-vector"),
        "x86-scalar": run_model(native, "scalar", packed, inputs, folder, "x86-scalar"),
        vector_label: run_model(foreign, vector_path, packed, inputs, folder, vector_label),
        f"{other}-scalar": run_model(foreign, "scalar", packed, inputs, folder,
                                     f"{other}-scalar"),
    }
    for label, (out, routes, seconds) in runs.items():
        print(f"     {tag} {label}: {seconds:.2f} s", flush=True)
        ref_routes = {k: ref["routes." + k] for k in routes}
        flipped = compare_routes(routes, ref_routes, ref, f"{tag} {label} vs reference", checks)
        compare_outputs(out, ref["outputs"], REF_RTOL, REF_ATOL, flipped,
                        f"{tag} {label} vs reference", checks)
    out_x, routes_x, _ = runs["x86-vector"]
    out_a, routes_a, _ = runs[vector_label]
    flipped = compare_routes(routes_a, routes_x, ref, f"{tag} {vector_label} vs x86-vector",
                             checks)
    compare_outputs(out_a, out_x, PAIR_RTOL, PAIR_ATOL, flipped,
                    f"{tag} {vector_label} vs x86-vector", checks)
    out_x, routes_x, _ = runs["x86-scalar"]
    out_a, routes_a, _ = runs[f"{other}-scalar"]
    if not exact:
        flipped = compare_routes(routes_a, routes_x, ref, f"{tag} {other}-scalar vs x86-scalar",
                                 checks)
        compare_outputs(out_a, out_x, PAIR_RTOL, PAIR_ATOL, flipped,
                        f"{tag} {other}-scalar vs x86-scalar", checks)
        print(f"     {tag} {other}-scalar vs x86-scalar: up to {ulps_apart(out_a, out_x)} ulp "
              "apart (erf from each C library)", flush=True)
        return
    same = out_x.tobytes() == out_a.tobytes() and all(
        routes_x[k].tobytes() == routes_a[k].tobytes() for k in routes_x)
    checks.record(same, f"{tag} {other}-scalar vs x86-scalar bit-identical",
                  "identical" if same else
                  f"differ by up to {ulps_apart(out_a, out_x)} ulp")


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--native", required=True, help="command of the native sprig")
    parser.add_argument("--foreign", required=True,
                        help="command of the other build's sprig, e.g. 'qemu-aarch64 PATH'")
    parser.add_argument("--foreign-name", default="arm",
                        help="the other build's name in the printed checks (default: arm)")
    parser.add_argument("--foreign-vector", default="neon",
                        help="the kernel path the other build runs as its vector path "
                             "(default: neon; auto: the build's own choice)")
    parser.add_argument("--work", required=True, help="an empty folder for the files")
    args = parser.parse_args()
    if not os.path.isdir(args.work):
        print(f"arch_agreement.py: --work {args.work} is not a folder", file=sys.stderr)
        return 2
    checks = Checks()
    for name, config, rows, seed, exact in CASES:
        for dtype in STORAGE:
            try:
                check_case(args, checks, name, config, rows, seed, exact, dtype)
            except RuntimeError as e:
                checks.record(False, f"{name} {dtype}", str(e))
    print(f"{checks.passed} passed, {checks.failed} failed")
    return 0 if checks.failed == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
