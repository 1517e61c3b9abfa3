"""Exports several reference transformer models in one process (PyTorch starts once).

Usage: transformer_reference.py SPEC.json OUT_DIR

SPEC.json is a list of {"name": N, "config": {...}, "seed": S, "rows": R}; each model is
written to OUT_DIR/N exactly as `python3 -m sprig_torch.export --config C --seed S --rows R`
would write it (config.json, weights.npz, reference.npz), and its inputs are also saved as
OUT_DIR/N/tokens.npy for `sprig run`. Uses the reference modules of converter/python/sprig_torch
(PYTHONPATH must include converter/python) on Debian's python3-torch and python3-numpy.
"""
import json
import os
import sys

import numpy as np

from sprig_torch.export import export, random_inputs, random_model


def main():
    spec_path, out_dir = sys.argv[1:3]
    with open(spec_path, encoding="utf-8") as f:
        spec = json.load(f)
    for entry in spec:
        model = random_model(entry["config"], entry["seed"])
        inputs = random_inputs(model, entry["rows"], entry["seed"] + 1)
        target = os.path.join(out_dir, entry["name"])
        export(model, target, inputs)
        np.save(os.path.join(target, "tokens.npy"), inputs)
    return 0


if __name__ == "__main__":
    sys.exit(main())
