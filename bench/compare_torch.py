#!/usr/bin/env python3
"""The same model in PyTorch eager mode and in sprig, measured side by side in one process.

    PYTHONPATH=converter/python /usr/bin/python3 bench/compare_torch.py CONFIG.json \\
        [--weights W.npz] [--seed S] [--rows N] [--batch 1,16,128] [--prompt-tokens P] \\
        [--repeat R] [--build build]

The PyTorch side is the reference model of converter/python/sprig_torch in hard mode
(`forward(x, hard=True)`), float32, eager, `torch.set_num_threads(1)`, under `torch.no_grad()`.
The sprig side is the same weights packed with `sprig pack` and run through the C API
(build/lib/libsprig.so, through the ctypes module sprig_native) in a one-thread session.
Without --weights, the weights are `sprig_torch.export.random_model(config, seed)`.

Each repetition runs PyTorch, then sprig, on the same inputs (stack: --rows random N(0, 1) rows
in calls of each --batch size; transformer: one sequence of --prompt-tokens random tokens
through the whole model, which is sprig's prefill: the reference has no key/value cache, so
one-token decoding is not compared). The ratio is PyTorch time / sprig time within each
repetition; median [min-max] over repetitions. The largest difference between the two
outputs is printed as a check that both computed the same thing.
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time

import numpy as np
import torch

import sprig_native
from sprig_torch.export import random_model, weight_arrays
from sprig_torch.models import StackModel, build_model

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def spread(values, digits):
    v = sorted(values)
    return f"{np.median(v):.{digits}f} [{v[0]:.{digits}f}-{v[-1]:.{digits}f}]"


def torch_model(config, weights, seed):
    if weights is None:
        return random_model(config, seed)
    model = build_model(config)
    with np.load(weights) as f:
        state = {k: torch.from_numpy(np.asarray(f[k], dtype=np.float32)) for k in f.files}
    model.load_state_dict(state, strict=True)
    return model.to(torch.float32).eval()


def timed(fn):
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def compare_stack(model, sprig, args, rng):
    rows = args.rows
    x = rng.standard_normal((rows, model.input_dim)).astype(np.float32)
    xt = torch.from_numpy(x)
    out_dim = model(xt[:1], hard=True).shape[1]
    print(f"{'batch':>6} {'PyTorch rows/s':>26} {'sprig rows/s':>26} {'sprig / PyTorch':>22} "
          f"{'max |diff|':>11}")
    for batch in args.batch:
        y = np.empty((rows, out_dim), dtype=np.float32)
        calls = [(r, min(rows, r + batch)) for r in range(0, rows, batch)]

        def run_torch():
            for a, b in calls:
                model(xt[a:b], hard=True)

        def run_sprig():
            for a, b in calls:
                sprig.forward(x[a:b], out=y[a:b])

        run_torch(), run_sprig()  # warm-up
        t_torch, t_sprig = [], []
        for _ in range(args.repeat):
            t_torch.append(timed(run_torch))
            t_sprig.append(timed(run_sprig))
        ref = np.concatenate([model(xt[a:b], hard=True).numpy() for a, b in calls])
        ratio = [a / b for a, b in zip(t_torch, t_sprig)]
        print(f"{batch:>6} {spread([rows / t for t in t_torch], 1):>26} "
              f"{spread([rows / t for t in t_sprig], 1):>26} {spread(ratio, 2):>22} "
              f"{np.abs(ref - y).max():>11.2e}")


def compare_transformer(model, sprig, args, rng):
    c = model.full_config
    n = args.prompt_tokens
    if n > c["max_seq"]:
        raise SystemExit(f"--prompt-tokens {n} is longer than max_seq {c['max_seq']}")
    out_per_token = c["vocab_size"] if c["head"]["kind"] == "lm" else c["d_model"]
    print(f"{'tokens':>6} {'PyTorch tokens/s':>26} {'sprig tokens/s':>26} "
          f"{'sprig / PyTorch':>22} {'max |diff|':>11}")
    t_torch, t_sprig, diff = [], [], 0.0
    for r in range(args.repeat + 1):  # the first is a warm-up
        tokens = rng.integers(0, c["vocab_size"], size=n).astype(np.int32)
        tt = torch.from_numpy(tokens.astype(np.int64))[None, :]
        y = np.empty(n * out_per_token, dtype=np.float32)
        a = timed(lambda: model(tt, hard=True))
        b = timed(lambda: sprig.forward_tokens(tokens, out=y))
        if r:
            t_torch.append(a)
            t_sprig.append(b)
        ref = model(tt, hard=True).reshape(-1).numpy()
        diff = max(diff, float(np.abs(ref - y).max()))
    ratio = [a / b for a, b in zip(t_torch, t_sprig)]
    print(f"{n:>6} {spread([n / t for t in t_torch], 1):>26} "
          f"{spread([n / t for t in t_sprig], 1):>26} {spread(ratio, 2):>22} {diff:>11.2e}")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("config", help="config.json of the model")
    ap.add_argument("--weights", help="its weights (.npz); default: random, from --seed")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--rows", type=int, default=256, help="stack: rows per repetition")
    ap.add_argument("--batch", default="1,16,128", help="stack: rows per call, a list")
    ap.add_argument("--prompt-tokens", type=int, default=128, help="transformer: sequence length")
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--build", default=os.path.join(ROOT, "build"),
                    help="build folder holding bin/sprig and lib/libsprig.so")
    args = ap.parse_args(argv)
    args.batch = [int(b) for b in args.batch.split(",")]
    if args.repeat < 1 or args.rows < 1 or min(args.batch) < 1 or args.prompt_tokens < 1:
        ap.error("--repeat, --rows, --batch and --prompt-tokens must be at least 1")
    torch.set_num_threads(1)
    with open(args.config, encoding="utf-8") as f:
        config = json.load(f)
    with torch.no_grad():
        model = torch_model(config, args.weights, args.seed)
        with tempfile.TemporaryDirectory(prefix="sprig-compare-") as tmp:
            weights = args.weights
            if weights is None:
                weights = os.path.join(tmp, "weights.npz")
                np.savez(weights, **weight_arrays(model))
            packed = os.path.join(tmp, "model.sprig")
            subprocess.run([os.path.join(args.build, "bin", "sprig"), "pack", args.config,
                            weights, "-o", packed], check=True, stdout=subprocess.DEVNULL)
            os.environ.setdefault("SPRIG_LIBRARY",
                                  os.path.join(args.build, "lib", "libsprig.so"))
            sprig_model = sprig_native.Model(packed)
            sprig = sprig_native.Session(sprig_model, threads=1)
            print(f"{args.config}: PyTorch {torch.__version__} eager, hard mode, 1 thread; "
                  f"sprig kernels {sprig.kernel_path}, 1 thread; {args.repeat} repetitions, "
                  f"interleaved; median [min-max]")
            rng = np.random.default_rng(args.seed)
            if isinstance(model, StackModel):
                compare_stack(model, sprig, args, rng)
            else:
                compare_transformer(model, sprig, args, rng)
            sprig.close()
            sprig_model.close()
    return 0


if __name__ == "__main__":
    sys.exit(main())
