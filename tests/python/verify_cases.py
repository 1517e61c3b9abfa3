"""Makes the cases that `sprig verify` must catch or explain (used by tests/verify_cli_test.cc).

    verify_cases.py perturb DIR TENSOR INDEX DELTA
        adds DELTA to element INDEX (flat) of TENSOR in DIR/weights.npz, after export, so the
        packed model no longer matches DIR/reference.npz;
    verify_cases.py f16-flip DIR LAYER
        rewrites DIR/reference.npz for new inputs: the exported inputs, with row 0 moved along
        the root node's weight vector of stack layer LAYER (a leaf tree) until the root's logit
        is -d/2 in exact arithmetic, where d is how far rounding the root's weights to IEEE half
        precision moves that logit (numpy.float16 rounds to nearest even, as IEEE 754 says).
        With weights stored as float16 the logit is then +d/2: the row goes right instead of
        left, a flip that rounding explains.
    verify_cases.py i8-flip DIR LAYER
        the same with the root's weights rounded as int8 storage does (schema/README.md: scale
        s = max|w| / 127 in float32, q = numpy.rint(w / s)); also prints the proven bound on
        that logit's change, (s / 2) * ||x||_1.
    verify_cases.py i8act-flip DIR
        for stack layer 0, a leaf tree packed as i8 and run with int8 activations (sprig verify
        --compute i8): row 0 becomes one large element and, elsewhere, values just under half a
        quantisation step with the sign of the root's weight, so that quantising the row
        (scale s_x = max|x| / 127 in float32, q = numpy.rint(x / s_x), the kernels' rule) moves
        the root's logit by nearly its worst case, (s_x / 2) * ||w_hat||_1, far more than int8
        storage can. The root's bias is then set so that the exact logit is -d/2, d the
        quantised logit's distance from it, and the reference rewritten for the new weights.
        Prints both logits and the storage and activation bounds.
    verify_cases.py experts-flip DIR
        the same for stack layer 0, an experts layer with top_k 1 scored on its logits (sigmoid
        or softmax_chosen): a row is moved along router.weight[a] - router.weight[b], a and b
        its two highest-scored experts, until the exact gap l_a - l_b is -d/2, d being how far
        rounding the router's weights to IEEE half precision moves that gap; float16 storage
        then chooses the other expert, a flip that rounding explains.

NumPy and PyTorch from Debian (python3-numpy, python3-torch).
"""

import json
import os
import sys

import numpy as np
import torch

from sprig_torch.export import reference_arrays
from sprig_torch.models import build_model


def load_model(d):
    with open(os.path.join(d, "config.json"), encoding="utf-8") as f:
        model = build_model(json.load(f))
    weights = np.load(os.path.join(d, "weights.npz"))
    model.load_state_dict({k: torch.from_numpy(weights[k]) for k in weights.files})
    return model.eval()


def perturb(d, tensor, index, delta):
    path = os.path.join(d, "weights.npz")
    weights = dict(np.load(path))
    flat = weights[tensor].reshape(-1)
    flat[int(index)] += np.float32(delta)
    np.savez(path, **weights)


def to_f16(w):
    return w.astype(np.float16).astype(np.float64)


def to_i8(w):
    w32 = w.astype(np.float32)
    s = np.abs(w32).max() / np.float32(127)
    return (np.rint(w32 / s).astype(np.float32) * s).astype(np.float64), float(s)


def f16_flip(d, layer, rounding="f16"):
    model = load_model(d)
    ref_path = os.path.join(d, "reference.npz")
    inputs = np.load(ref_path)["inputs"].astype(np.float64)
    prefix = f"layers.{layer}.nodes."
    weights = np.load(os.path.join(d, "weights.npz"))
    w = weights[prefix + "weight"][0].astype(np.float64)
    b = float(weights[prefix + "bias"][0])
    w16, s = to_i8(w) if rounding == "i8" else (to_f16(w), 0.0)
    if layer != 0:
        raise ValueError("f16-flip moves the model's input, so LAYER must be 0")
    x = inputs[0]
    # The root logit is linear in x: move x along w so that the exact logit is -d/2.
    drift = float((w16 - w) @ x)
    if abs(drift) < 1e-7:
        raise ValueError("storage rounding does not move this row's logit; pick another seed")
    target = -drift / 2
    x = x + (target - (w @ x + b)) / (w @ w) * w
    inputs[0] = x
    np.savez(ref_path, **reference_arrays(model, inputs.astype(np.float32)))
    print(json.dumps({"exact_logit": float(w @ x + b), "stored_logit": float(w16 @ x + b),
                      "int8_bound": s / 2 * float(np.abs(x.astype(np.float32)).sum())}))


def quantize_activations(x):
    """The kernels' rule (runtime/src/kernels/kernels.h): float32 scale, round half to even."""
    x32 = x.astype(np.float32)
    s = np.float32(np.abs(x32).max()) / np.float32(127)
    q = np.clip(np.rint(x32 / s), -127, 127)
    return (q.astype(np.float64) * float(s)), float(s)


def i8act_flip(d):
    weights_path = os.path.join(d, "weights.npz")
    weights = dict(np.load(weights_path))
    w = weights["layers.0.nodes.weight"][0].astype(np.float64)
    w_hat, s_w = to_i8(w)
    x = np.sign(w_hat) * 0.49 * (2.0 / 127)  # just under half a step of the scale below
    x[0] = 2.0  # the largest element: s_x = 2 / 127
    x_hat, s_x = quantize_activations(x)
    b = float(weights["layers.0.nodes.bias"][0])
    exact, quantized = float(w @ x + b), float(w_hat @ x_hat + b)
    drift = quantized - exact
    # Move the bias so that the exact logit is -drift / 2 and the computed one +drift / 2.
    weights["layers.0.nodes.bias"][0] = np.float32(b - exact - drift / 2)
    np.savez(weights_path, **weights)
    model = load_model(d)
    ref_path = os.path.join(d, "reference.npz")
    inputs = np.load(ref_path)["inputs"].astype(np.float32)
    inputs[0] = x.astype(np.float32)
    np.savez(ref_path, **reference_arrays(model, inputs))
    b = float(weights["layers.0.nodes.bias"][0])
    x32 = inputs[0].astype(np.float64)
    print(json.dumps({"exact_logit": float(w @ x32 + b),
                      "computed_logit": float(w_hat @ quantize_activations(x32)[0] + b),
                      "int8_bound": s_w / 2 * float(np.abs(x32).sum()),
                      "activation_bound": s_x / 2 * float(np.abs(w_hat).sum())}))


def experts_flip(d):
    model = load_model(d)
    ref_path = os.path.join(d, "reference.npz")
    inputs = np.load(ref_path)["inputs"].astype(np.float64)
    weights = np.load(os.path.join(d, "weights.npz"))
    w = weights["layers.0.router.weight"].astype(np.float64)
    b = weights["layers.0.router.bias"].astype(np.float64)
    w16 = to_f16(w)
    for row in range(inputs.shape[0]):
        x = inputs[row]
        a, c = np.argsort(-(w @ x + b), kind="stable")[:2]
        u = w[a] - w[c]
        drift = float((w16[a] - w16[c] - u) @ x)
        if abs(drift) < 1e-5:
            continue
        # The gap is linear in x: move x along u so that the exact gap is -drift / 2.
        moved = x + (-drift / 2 - (u @ x + b[a] - b[c])) / (u @ u) * u
        logits = w @ moved + b
        others = np.delete(logits, [a, c])
        # a and c must still be the two highest, so the flip is between them alone.
        if others.size and others.max() > min(logits[a], logits[c]) - 1e-2:
            continue
        inputs[0] = moved
        np.savez(ref_path, **reference_arrays(model, inputs.astype(np.float32)))
        print(json.dumps({"row": row, "exact_gap": float(u @ moved + b[a] - b[c]),
                          "stored_gap": float((w16[a] - w16[c]) @ moved + b[a] - b[c])}))
        return
    raise ValueError("no row of the reference can be moved to a half-precision flip")


def main():
    command, d = sys.argv[1], sys.argv[2]
    if command == "perturb":
        perturb(d, sys.argv[3], sys.argv[4], float(sys.argv[5]))
    elif command == "f16-flip":
        f16_flip(d, int(sys.argv[3]))
    elif command == "experts-flip":
        experts_flip(d)
    elif command == "i8act-flip":
        i8act_flip(d)
    elif command == "i8-flip":
        f16_flip(d, int(sys.argv[3]), "i8")
    else:
        raise SystemExit(f"unknown command {command!r}")


if __name__ == "__main__":
    main()
