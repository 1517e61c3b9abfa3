"""Held-out loss and routing agreement of packed sample language models.

Usage: held_out.py SPRIG REFERENCE.sprig MODEL.sprig [MODEL.sprig ...] [--seed 1] [--lines 20000]
                   [--compute f32|i8]

Rebuilds the held-out split and the 256 held-out windows that train_lm.py scores (same corpus
seed, line count and window seed), runs every model through `SPRIG run` (the sprig program),
and prints one JSON line per model: its held-out loss in nats per byte (mean cross-entropy of
the next byte, as train_lm.py computes it) and the share of routing decisions, over every
routed block and token, equal to those of REFERENCE.sprig (usually the float32 packing).
--compute runs the MODELs (not the reference) in that compute mode (`sprig run --compute`:
i8 quantises the activations of i8-stored weights).

    PYTHONPATH=converter/python /usr/bin/python3 samples/lm/held_out.py build/bin/sprig \\
        lm-f32.sprig lm-f16.sprig lm-i8.sprig
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile

import numpy as np
import torch
import torch.nn.functional as F

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from train_lm import split_corpus, windows  # noqa: E402


def run(sprig, model, tokens, work, compute="f32"):
    x = os.path.join(work, "x.npy")
    out = os.path.join(work, "logits.npy")
    routes = os.path.join(work, "routes.npz")
    np.save(x, tokens.astype(np.int32))
    subprocess.run([sprig, "run", model, "--input", x, "--output", out, "--routes", routes,
                    "--compute", compute], check=True, stdout=subprocess.DEVNULL)
    with np.load(routes) as r:
        return np.load(out), {k: r[k] for k in r.files}


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("sprig")
    parser.add_argument("reference")
    parser.add_argument("models", nargs="+")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--lines", type=int, default=20000)
    parser.add_argument("--compute", choices=["f32", "i8"], default="f32")
    args = parser.parse_args()
    # As train_lm.held_out_loss: the same split, generator seed and window count.
    _, held_out = split_corpus(args.seed, args.lines)
    x, y = windows(held_out, 256, torch.Generator().manual_seed(args.seed))
    with tempfile.TemporaryDirectory() as work:
        _, ref_routes = run(args.sprig, args.reference, x.numpy(), work)
        for model in [args.reference] + args.models:
            compute = "f32" if model == args.reference else args.compute
            logits, routes = run(args.sprig, model, x.numpy(), work, compute)
            loss = F.cross_entropy(torch.from_numpy(logits).reshape(-1, logits.shape[-1]),
                                   y.reshape(-1)).item()
            same = sum(int((routes[k] == ref_routes[k]).sum()) for k in ref_routes)
            total = sum(ref_routes[k].size for k in ref_routes)
            print(json.dumps({"model": os.path.basename(model), "compute": compute,
                              "held_out_loss": loss,
                              "route_agreement": same / total if total else 1.0}))


if __name__ == "__main__":
    main()
