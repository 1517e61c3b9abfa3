"""Compares sprig's outputs and routes with a reference.npz written by sprig_torch.export.

Usage: compare_outputs.py REFERENCE.npz OUTPUTS.npy ROUTES.npz RTOL ATOL MARGIN

Outputs pass when |sprig - reference| <= ATOL + RTOL * |reference| everywhere. Routes pass
when every row whose route differs has a deciding margin below MARGIN (such rows are counted
and reported, not hidden). Prints one JSON line with the figures; exits 0 on pass, 1 on fail.
Used by the C++ reference tests; NumPy from Debian's python3-numpy.
"""
import json
import sys

import numpy as np


def main():
    ref_path, out_path, routes_path = sys.argv[1:4]
    rtol, atol, margin_limit = (float(v) for v in sys.argv[4:7])
    ref = np.load(ref_path)
    got = np.load(out_path).astype(np.float64)
    want = ref["outputs"].astype(np.float64).reshape(got.shape)
    err = np.abs(got - want)
    excess = err - (atol + rtol * np.abs(want))
    routes = np.load(routes_path)
    report = {
        "max_abs_error": float(err.max()) if err.size else 0.0,
        "worst_row": int(np.unravel_index(np.argmax(excess), excess.shape)[0]) if err.size else -1,
        "outputs_ok": bool((excess <= 0).all()),
        "layers": {},
    }
    ok = report["outputs_ok"]
    for key in routes.files:
        mine = routes[key]
        theirs = ref["routes." + key].reshape(mine.shape)
        margins = ref["margins." + key]
        differ = (mine != theirs).reshape(mine.shape[0], -1).any(axis=1)
        small = margins < margin_limit
        report["layers"][key] = {
            "rows": int(mine.shape[0]),
            "mismatched": int(differ.sum()),
            "mismatched_with_small_margin": int((differ & small).sum()),
            "small_margin_rows": int(small.sum()),
        }
        if (differ & ~small).any():
            ok = False
    # A row whose route flipped legitimately has outputs that need not match either.
    print(json.dumps(report))
    sys.exit(0 if ok else 1)


if __name__ == "__main__":
    main()
