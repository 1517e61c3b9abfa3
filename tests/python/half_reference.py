"""Reference conversions for tests/half_test.cc, computed by NumPy and PyTorch.

Usage: half_reference.py MODE INPUT OUTPUT

INPUT and OUTPUT are raw little-endian arrays. Modes:
  f32_to_f16          float32 -> float16 bits        (numpy.float16, IEEE 754-2008 binary16)
  f16_to_f32          float16 bits -> float32 bits   (numpy.float16)
  f64_to_f16          float64 -> float16 bits        (numpy, rounds once from float64)
  f32_to_bf16         float32 -> bfloat16 bits       (torch.bfloat16)
  bf16_to_f32         bfloat16 bits -> float32 bits  (torch.bfloat16)
  f64_to_bf16         float64 -> bfloat16 bits       (torch.bfloat16; rounds through float32)
  f64_to_bf16_exact   float64 -> bfloat16 bits rounded once, to nearest with ties to even,
                      using exact rational arithmetic (fractions) over the bfloat16 values
                      that torch.bfloat16 defines. Finite inputs only.
"""

import sys
from fractions import Fraction

import numpy as np


def f32_to_f16(data):
    return np.frombuffer(data, dtype="<f4").astype(np.float16).view("<u2")


def f16_to_f32(data):
    return np.frombuffer(data, dtype="<u2").view(np.float16).astype(np.float32).view("<u4")


def f64_to_f16(data):
    return np.frombuffer(data, dtype="<f8").astype(np.float16).view("<u2")


def torch_to_bf16(data, dtype):
    import torch

    values = torch.from_numpy(np.frombuffer(data, dtype=dtype).copy())
    return values.to(torch.bfloat16).view(torch.int16).numpy().view("<u2")


def bf16_to_f32(data):
    import torch

    bits = torch.from_numpy(np.frombuffer(data, dtype="<i2").copy())
    return bits.view(torch.bfloat16).to(torch.float32).numpy().view("<u4")


def bf16_magnitudes():
    """Exact values of the non-negative finite bfloat16 patterns 0..0x7f7f as torch defines
    them, plus 2^128 for 0x7f80: IEEE 754 rounds at the top of the range as if the next power of
    two existed, and a result that rounds to it overflows to infinity."""
    import torch

    bits = torch.arange(0, 0x7F80, dtype=torch.int32).to(torch.int16)
    values = [Fraction(v) for v in bits.view(torch.bfloat16).to(torch.float64).tolist()]
    return values + [Fraction(2) ** 128]


def f64_to_bf16_exact(data):
    values = np.frombuffer(data, dtype="<f8")
    near = torch_to_bf16(data, "<f8")  # within one bfloat16 step of the correct result
    magnitudes = bf16_magnitudes()
    out = np.empty(len(values), dtype="<u2")
    for i, x in enumerate(values.tolist()):
        sign = 0x8000 if np.signbit(x) else 0
        target = abs(Fraction(x))
        start = int(near[i]) & 0x7FFF
        best = None
        for b in range(max(start - 2, 0), min(start + 2, 0x7F80) + 1):
            distance = abs(magnitudes[b] - target)
            key = (distance, b & 1)  # nearest first, then the even pattern
            if best is None or key < best[0]:
                best = (key, b)
        out[i] = sign | best[1]
    return out


MODES = {
    "f32_to_f16": f32_to_f16,
    "f16_to_f32": f16_to_f32,
    "f64_to_f16": f64_to_f16,
    "f32_to_bf16": lambda data: torch_to_bf16(data, "<f4"),
    "bf16_to_f32": bf16_to_f32,
    "f64_to_bf16": lambda data: torch_to_bf16(data, "<f8"),
    "f64_to_bf16_exact": f64_to_bf16_exact,
}


def main():
    mode, source, target = sys.argv[1:4]
    with open(source, "rb") as f:
        data = f.read()
    with np.errstate(over="ignore"):  # overflow to infinity is one of the cases under test
        result = MODES[mode](data)
    with open(target, "wb") as f:
        f.write(np.ascontiguousarray(result).tobytes())


if __name__ == "__main__":
    main()
