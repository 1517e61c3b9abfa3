"""Writes the tensor files that tests/io_test.cc reads, using NumPy (and PyTorch for bfloat16).

Usage: /usr/bin/python3 io_make_fixtures.py OUT_DIR

Every array is written twice: in its container (.npy, .npz, .safetensors) and as the raw
little-endian C-order bytes NumPy itself produces (arr.tobytes() of a little-endian copy), so
the C++ reader can be checked bit for bit against NumPy's own view of the data.
OUT_DIR/manifest.json lists every file, array, dtype name, shape and raw side file.
Source: NumPy (Debian python3-numpy): numpy.save, numpy.savez, numpy.savez_compressed,
numpy.lib.format.write_array; PyTorch (Debian python3-torch) for bfloat16 bits.
"""

import json
import os
import struct
import sys
import zipfile

import numpy as np

OUT = sys.argv[1]
rng = np.random.default_rng(20240611)
manifest = {"npy": [], "npz": [], "safetensors": []}

NUMPY_DTYPES = ["<f8", "<f4", "<f2", "<i8", "<i4", "<i2", "|i1", "<u8", "<u4", "<u2", "|u1",
                "|b1"]


def sample(dtype, shape):
    """Random values of `dtype`, with NaN, infinities, -0 and subnormals among the floats."""
    dt = np.dtype(dtype)
    n = int(np.prod(shape, dtype=np.int64))
    if dt.kind == "f":
        values = rng.standard_normal(n).astype(dt)
        specials = np.array([np.nan, np.inf, -np.inf, -0.0, np.finfo(dt).tiny / 2,
                             np.finfo(dt).max], dtype=dt)
        values[: min(n, len(specials))] = specials[: min(n, len(specials))]
    elif dt.kind == "b":
        values = rng.integers(0, 2, n).astype(dt)
    else:
        info = np.iinfo(dt)
        values = rng.integers(info.min, info.max, n, dtype=dt, endpoint=True)
    return values.reshape(shape)


def raw_bytes(arr):
    """C-order little-endian bytes, as NumPy lays them out."""
    return np.ascontiguousarray(arr, dtype=arr.dtype.newbyteorder("<")).tobytes(order="C")


def write_raw(name, arr):
    path = os.path.join(OUT, name + ".bin")
    with open(path, "wb") as f:
        f.write(raw_bytes(arr))
    return os.path.basename(path)


def describe(name, arr, raw):
    return {"name": name, "dtype": arr.dtype.name, "shape": list(arr.shape), "raw": raw}


def add_npy(case, arr, version=None):
    path = os.path.join(OUT, case + ".npy")
    if version is None:
        np.save(path, arr)
    else:
        with open(path, "wb") as f:
            np.lib.format.write_array(f, arr, version=version)
    manifest["npy"].append({"file": case + ".npy", **describe(case, arr, write_raw(case, arr))})


# --- .npy: every dtype, and the layouts a reader must handle.
for d in NUMPY_DTYPES:
    add_npy("dtype_" + np.dtype(d).name, sample(d, (2, 3, 4)))
add_npy("scalar", sample("<f4", ()))
add_npy("vector", sample("<f8", (7,)))
add_npy("empty", sample("<f4", (0,)))
add_npy("empty_inner", sample("<i4", (3, 0, 2)))
add_npy("fortran_2d", np.asfortranarray(sample("<f4", (5, 3))))
add_npy("fortran_3d", np.asfortranarray(sample("<i2", (2, 3, 4))))
add_npy("big_f4", sample("<f4", (4, 5)).astype(">f4"))
add_npy("big_f2", sample("<f2", (9,)).astype(">f2"))
add_npy("big_i8", sample("<i8", (3, 2)).astype(">i8"))
add_npy("big_u2", sample("<u2", (6,)).astype(">u2"))
add_npy("big_fortran_f8", np.asfortranarray(sample("<f8", (3, 4)).astype(">f8")))
add_npy("version2", sample("<f4", (3, 3)), version=(2, 0))
add_npy("version3", sample("<u1", (10,)), version=(3, 0))


# --- .npz: numpy.savez (stored) and numpy.savez_compressed (deflated); order is kwargs order.
def npz_arrays():
    return {
        "layers.0.fc1.weight": sample("<f4", (16, 8)),
        "layers.0.fc1.bias": sample("<f4", (16,)),
        "half": sample("<f2", (3, 5)),
        "double": sample("<f8", (2, 2)),
        "ints": sample("<i8", (4,)),
        "mask": sample("|b1", (2, 3)),
        "empty": sample("<f4", (0, 4)),
        "scalar": sample("<i4", ()),
        "fortran": np.asfortranarray(sample("<f4", (3, 4))),
        "bigendian": sample("<f4", (5,)).astype(">f4"),
    }


def add_npz(case, arrays, save):
    path = os.path.join(OUT, case + ".npz")
    save(path, **arrays)
    manifest["npz"].append({"file": case + ".npz", "arrays": [
        describe(name, arr, write_raw(case + "." + name, arr)) for name, arr in arrays.items()]})


add_npz("savez", npz_arrays(), np.savez)
add_npz("savez_compressed", npz_arrays(), np.savez_compressed)
add_npz("savez_empty", {}, np.savez)
# ZIP64 end records and extra fields everywhere: Python's zipfile switches to them above these
# module limits, so lowering the limits makes a small file use the large-file layout.
saved_limits = (zipfile.ZIP64_LIMIT, zipfile.ZIP_FILECOUNT_LIMIT)
zipfile.ZIP64_LIMIT, zipfile.ZIP_FILECOUNT_LIMIT = 8, 1
try:
    add_npz("savez_zip64", npz_arrays(), np.savez)
    add_npz("savez_compressed_zip64", npz_arrays(), np.savez_compressed)
finally:
    zipfile.ZIP64_LIMIT, zipfile.ZIP_FILECOUNT_LIMIT = saved_limits


# --- .safetensors, written by hand from the format's definition (8-byte little-endian header
# length, JSON header, data) since the safetensors package is not installed.
def bfloat16_bits(values):
    import torch
    return torch.tensor(values, dtype=torch.float32).to(torch.bfloat16).view(torch.int16).numpy()


def write_safetensors(case, tensors, header_order):
    """`tensors`: name -> (dtype string, shape, raw bytes). Data is laid out in dict order;
    the header lists the entries in `header_order` so that readers must sort by offset."""
    offsets, data, pos = {}, b"", 0
    for name, (_, _, raw) in tensors.items():
        offsets[name] = [pos, pos + len(raw)]
        data += raw
        pos += len(raw)
    header = {"__metadata__": {"format": "pt", "note": "written by io_make_fixtures.py"}}
    for name in header_order:
        dtype, shape, _ = tensors[name]
        header[name] = {"dtype": dtype, "shape": list(shape), "data_offsets": offsets[name]}
    text = json.dumps(header).encode()
    text += b" " * (-len(text) % 8)
    with open(os.path.join(OUT, case + ".safetensors"), "wb") as f:
        f.write(struct.pack("<Q", len(text)) + text + data)


bf16 = bfloat16_bits(rng.standard_normal(12).tolist() + [float("inf"), -0.0, 1e-40, 3.0e38])
st_arrays = {
    "embed.weight": ("F32", sample("<f4", (4, 6))),
    "bf16": ("BF16", bf16.reshape(4, 4)),
    "half": ("F16", sample("<f2", (5,))),
    "double": ("F64", sample("<f8", (2, 3))),
    "i64": ("I64", sample("<i8", (3,))),
    "i32": ("I32", sample("<i4", (2, 2))),
    "i16": ("I16", sample("<i2", (3,))),
    "i8": ("I8", sample("|i1", (5,))),
    "u8": ("U8", sample("|u1", (4,))),
    "flags": ("BOOL", sample("|b1", (3,))),
    "empty": ("F32", sample("<f4", (0, 3))),
    "scalar": ("F32", sample("<f4", ())),
}
tensors = {n: (d, a.shape, raw_bytes(a)) for n, (d, a) in st_arrays.items()}
write_safetensors("tensors", tensors, sorted(tensors, reverse=True))
manifest["safetensors"].append({"file": "tensors.safetensors", "arrays": [
    {"name": n, "dtype": "bfloat16" if d == "BF16" else a.dtype.name, "shape": list(a.shape),
     "raw": write_raw("tensors." + n, a)} for n, (d, a) in st_arrays.items()]})

with open(os.path.join(OUT, "manifest.json"), "w") as f:
    json.dump(manifest, f, indent=1)
