"""Checks files written by sprig's writers (WriteNpy, WriteNpz, WriteSafetensors) with NumPy.

Usage: /usr/bin/python3 io_check_written.py MANIFEST.json

The manifest (written by tests/io_test.cc) lists each file, its kind and its arrays: name,
NumPy dtype name, shape and a side file of the raw little-endian C-order bytes. .npy and .npz
files are loaded with numpy.load and their CRCs checked with zipfile.testzip; .safetensors
files are parsed from the format's definition. Exits 1 and prints every mismatch.
Source: NumPy (Debian python3-numpy) numpy.load; Python's zipfile.
"""

import json
import os
import struct
import sys
import zipfile

import numpy as np

SAFETENSORS_DTYPES = {"float64": "F64", "float32": "F32", "float16": "F16", "bfloat16": "BF16",
                      "int64": "I64", "int32": "I32", "int16": "I16", "int8": "I8",
                      "uint64": "U64", "uint32": "U32", "uint16": "U16", "uint8": "U8",
                      "bool": "BOOL"}

manifest_path = sys.argv[1]
base = os.path.dirname(os.path.abspath(manifest_path))
errors = []


def raw(spec):
    with open(os.path.join(base, spec["raw"]), "rb") as f:
        return f.read()


def check_array(where, arr, spec):
    if arr.dtype.name != spec["dtype"]:
        errors.append(f"{where}: dtype {arr.dtype.name}, expected {spec['dtype']}")
    if list(arr.shape) != spec["shape"]:
        errors.append(f"{where}: shape {list(arr.shape)}, expected {spec['shape']}")
    if not arr.dtype.isnative and arr.dtype.itemsize > 1:
        errors.append(f"{where}: byte order {arr.dtype.byteorder}, expected little-endian")
    if arr.tobytes(order="C") != raw(spec):
        errors.append(f"{where}: data differs from the raw bytes")


def check_local_headers(path):
    """Each local header must agree with the central directory (zipfile reads only the latter):
    CRC-32 and sizes, the sizes taken from the ZIP64 extra field when marked 0xffffffff."""
    with open(path, "rb") as f:
        data = f.read()
    with zipfile.ZipFile(path) as z:
        for info in z.infolist():
            h = info.header_offset
            if data[h:h + 4] != b"PK\x03\x04":
                errors.append(f"{path}:{info.filename}: no local header at {h}")
                continue
            crc, csize, usize, nlen, elen = struct.unpack("<IIIHH", data[h + 14:h + 30])
            extra = data[h + 30 + nlen:h + 30 + nlen + elen]
            if (csize, usize) == (0xFFFFFFFF, 0xFFFFFFFF):
                if extra[:2] != b"\x01\x00":
                    errors.append(f"{path}:{info.filename}: ZIP64 markers without ZIP64 extra")
                    continue
                usize, csize = struct.unpack("<QQ", extra[4:20])
            if (crc, csize, usize) != (info.CRC, info.compress_size, info.file_size):
                errors.append(f"{path}:{info.filename}: local header (crc {crc:08x}, sizes "
                              f"{csize}/{usize}) disagrees with the central directory (crc "
                              f"{info.CRC:08x}, sizes {info.compress_size}/{info.file_size})")


def check_safetensors(path, specs):
    with open(path, "rb") as f:
        data = f.read()
    (n,) = struct.unpack("<Q", data[:8])
    header = json.loads(data[8:8 + n])
    if (8 + n) % 8:
        errors.append(f"{path}: data starts at {8 + n}, not on an 8-byte boundary")
    body = data[8 + n:]
    names = [k for k in header if k != "__metadata__"]
    if sorted(names) != sorted(s["name"] for s in specs):
        errors.append(f"{path}: tensors {names}, expected {[s['name'] for s in specs]}")
    for spec in specs:
        entry = header.get(spec["name"])
        if entry is None:
            continue
        where = f"{path}:{spec['name']}"
        if entry["dtype"] != SAFETENSORS_DTYPES[spec["dtype"]]:
            errors.append(f"{where}: dtype {entry['dtype']}")
        if entry["shape"] != spec["shape"]:
            errors.append(f"{where}: shape {entry['shape']}")
        begin, end = entry["data_offsets"]
        if body[begin:end] != raw(spec) or end > len(body):
            errors.append(f"{where}: data differs from the raw bytes")


with open(manifest_path) as f:
    manifest = json.load(f)
for entry in manifest["files"]:
    path = os.path.join(base, entry["file"])
    try:
        if entry["kind"] == "npy":
            check_array(path, np.load(path), entry["arrays"][0])
        elif entry["kind"] == "npz":
            with zipfile.ZipFile(path) as z:
                bad = z.testzip()
                if bad is not None:
                    errors.append(f"{path}: zipfile reports a bad CRC in {bad}")
            check_local_headers(path)
            with np.load(path) as z:
                names = [s["name"] for s in entry["arrays"]]
                if list(z.files) != names:
                    errors.append(f"{path}: members {list(z.files)}, expected {names}")
                for spec in entry["arrays"]:
                    check_array(f"{path}:{spec['name']}", z[spec["name"]], spec)
        else:
            check_safetensors(path, entry["arrays"])
    except Exception as e:  # any failure to read is a mismatch
        errors.append(f"{path}: {type(e).__name__}: {e}")

for e in errors:
    print(e)
sys.exit(1 if errors else 0)
