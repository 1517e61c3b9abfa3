"""Reference storage conversions for tests/storage_test.cc, computed by NumPy.

Usage: storage_reference.py WEIGHTS.npz EXPECTED.npz DEQUANTISED.npz

First rewrites WEIGHTS.npz (float32 arrays) so that every weight (an array of two or more
dimensions whose name does not end in "bias") has
rounding ties and an all-zero row: its first row of the last dimension becomes
[127, 0.5, 1.5, 2.5, -2.5, 0, ...]·2^-6 (scale exactly 2^-6, so w / scale lands exactly on
halves) and its second row becomes zeros. Then writes, for each such array NAME:

  NAME.q      the int8 values as float32: clip(rint(w / scale), -127, 127), 0 where scale is 0
  NAME.scale  float32 scales, one per row of the last dimension: max|w| / 127 in float32
  NAME.f16    w.astype(numpy.float16) (IEEE 754 binary16, round to nearest even)

DEQUANTISED.npz holds the rewritten weights with every such array replaced by q·scale (float32),
the values an int8 model computes with.

numpy.rint rounds half to even; float32 / float32 in NumPy is one correctly rounded float32
division, the same operation the packer performs.
"""

import sys

import numpy as np


def with_ties(w):
    w = np.array(w, dtype=np.float32)
    rows = w.reshape(-1, w.shape[-1])
    if rows.shape[0] >= 2 and rows.shape[1] >= 5:
        s = np.float32(2.0**-6)
        rows[0, :] = 0
        rows[0, :5] = np.array([127, 0.5, 1.5, 2.5, -2.5], dtype=np.float32) * s
        rows[1, :] = 0
    return rows.reshape(w.shape)


def quantise(w):
    scale = np.abs(w).max(axis=-1, keepdims=True) / np.float32(127)
    safe = np.where(scale > 0, scale, np.float32(1))
    q = np.where(scale > 0, np.clip(np.rint(w / safe), -127, 127), np.float32(0))
    return q.astype(np.float32), scale[..., 0].astype(np.float32)


def main():
    weights_path, expected_path, dequantised_path = sys.argv[1], sys.argv[2], sys.argv[3]
    with np.load(weights_path) as f:
        weights = {name: f[name] for name in f.files}
    expected = {}
    dequantised = {}
    for name, w in weights.items():
        if w.ndim < 2 or name.endswith("bias"):
            continue  # biases are stored as float32 whatever the storage type
        w = with_ties(w)
        weights[name] = w
        q, scale = quantise(w)
        expected[name + ".q"] = q
        expected[name + ".scale"] = scale
        expected[name + ".f16"] = w.astype(np.float16)
        dequantised[name] = (q * scale[..., None]).astype(np.float32)
    for name, w in weights.items():
        dequantised.setdefault(name, w)
    np.savez(weights_path, **weights)
    np.savez(dequantised_path, **dequantised)
    np.savez(expected_path, **expected)


if __name__ == "__main__":
    main()
