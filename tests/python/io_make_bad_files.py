"""Writes damaged and unsupported tensor files for the failure tests in tests/io_test.cc.

Usage: /usr/bin/python3 io_make_bad_files.py OUT_DIR

Valid files come from NumPy (Debian python3-numpy) and Python's zipfile; the damage is then
applied by patching bytes at offsets read back from the zip structures, so each file is broken
in exactly one, known way.
"""

import json
import os
import struct
import sys
import warnings
import zipfile

import numpy as np

OUT = sys.argv[1]


def path(name):
    return os.path.join(OUT, name)


def npy_bytes(arr, **kw):
    import io
    buf = io.BytesIO()
    np.lib.format.write_array(buf, arr, **kw)
    return buf.getvalue()


def patch(name, offset, new):
    with open(path(name), "r+b") as f:
        f.seek(offset)
        f.write(new)


def central_entry_offset(data, member):
    """Offset of `member`'s central directory header in zip bytes `data`."""
    pos = data.index(b"PK\x01\x02")
    while True:
        name_len, extra_len, comment_len = struct.unpack("<HHH", data[pos + 28:pos + 34])
        if data[pos + 46:pos + 46 + name_len] == member.encode():
            return pos
        pos += 46 + name_len + extra_len + comment_len


a = np.arange(24, dtype="<f4").reshape(4, 6)
b = np.arange(10, dtype="<i8")

# Unsupported dtypes.
np.save(path("complex.npy"), np.arange(4, dtype="<c8"))
np.save(path("object.npy"), np.array([1, "x"], dtype=object), allow_pickle=True)
np.save(path("structured.npy"), np.zeros(3, dtype=[("x", "<f4"), ("y", "<i4")]))
np.savez(path("complex_member.npz"), ok=a, z=np.arange(4, dtype="<c8"))

# A .npy cut short, and one with an unknown format version.
data = npy_bytes(a)
with open(path("truncated.npy"), "wb") as f:
    f.write(data[:-5])
with open(path("version9.npy"), "wb") as f:
    f.write(data[:6] + b"\x09\x00" + data[8:])
with open(path("bad_header.npy"), "wb") as f:
    header = b"{'descr': '<f4', 'fortran_order': False, 'shape': (4, 6, }"
    header += b" " * (-(10 + len(header) + 1) % 64) + b"\n"
    f.write(data[:8] + struct.pack("<H", len(header)) + header + data[-96:])

# .npz files from numpy.savez / savez_compressed, then damaged.
np.savez(path("stored.npz"), a=a, b=b)
np.savez_compressed(path("deflated.npz"), a=a, b=b)
stored = open(path("stored.npz"), "rb").read()
deflated = open(path("deflated.npz"), "rb").read()
with zipfile.ZipFile(path("stored.npz")) as z:
    info = z.getinfo("a.npy")
    directory_offset = stored.index(b"PK\x01\x02")
# Truncated: cut in the middle, and cut just before the central directory.
with open(path("cut_middle.npz"), "wb") as f:
    f.write(stored[: len(stored) // 2])
with open(path("cut_directory.npz"), "wb") as f:
    f.write(stored[:directory_offset])
# The end record points the central directory past the end of the file.
end = stored.rindex(b"PK\x05\x06")
with open(path("directory_outside.npz"), "wb") as f:
    f.write(stored[: end + 16] + struct.pack("<I", len(stored) + 1000) + stored[end + 20:])
# One flipped data byte in member a.npy (stored), and a wrong CRC for b.npy (deflated).
with open(path("crc_stored.npz"), "wb") as f:
    h = info.header_offset
    name_len, extra_len = struct.unpack("<HH", stored[h + 26:h + 30])
    last = h + 30 + name_len + extra_len + info.compress_size - 1
    f.write(stored[:last] + bytes([stored[last] ^ 0x40]) + stored[last + 1:])
entry = central_entry_offset(deflated, "b.npy")
with open(path("crc_deflated.npz"), "wb") as f:
    crc = struct.unpack("<I", deflated[entry + 16:entry + 20])[0]
    f.write(deflated[: entry + 16] + struct.pack("<I", crc ^ 1) + deflated[entry + 20:])

# A decompression bomb: 8 MiB of zeros deflate to a few KiB; the central directory then claims
# 3 GiB. And the opposite lie: a declared size half the real one.
zeros = npy_bytes(np.zeros(1 << 21, dtype="<f4"))
for name, declared in (("bomb.npz", 3 << 30), ("undersized.npz", len(zeros) // 2)):
    with zipfile.ZipFile(path(name), "w", compression=zipfile.ZIP_DEFLATED) as z:
        z.writestr("big.npy", zeros)
    data = open(path(name), "rb").read()
    entry = central_entry_offset(data, "big.npy")
    patch(name, entry + 24, struct.pack("<I", declared))

# Members that are not arrays, duplicates, and a compression method other than 0 and 8.
with zipfile.ZipFile(path("not_npy_member.npz"), "w") as z:
    z.writestr("a.npy", npy_bytes(a))
    z.writestr("readme.txt", b"hello")
with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    with zipfile.ZipFile(path("duplicate.npz"), "w") as z:
        z.writestr("a.npy", npy_bytes(a))
        z.writestr("a.npy", npy_bytes(a))
with zipfile.ZipFile(path("bzip2.npz"), "w", compression=zipfile.ZIP_BZIP2) as z:
    z.writestr("a.npy", npy_bytes(a))


# .safetensors with a tensor whose offsets leave the data, a header longer than the file, and
# a header that is not JSON.
def safetensors(name, header, data, header_length=None):
    text = json.dumps(header).encode()
    text += b" " * (-len(text) % 8)
    length = len(text) if header_length is None else header_length
    with open(path(name), "wb") as f:
        f.write(struct.pack("<Q", length) + text + data)


raw = a.tobytes()
safetensors("offsets_outside.safetensors",
            {"w": {"dtype": "F32", "shape": [4, 6], "data_offsets": [0, len(raw)]},
             "v": {"dtype": "F32", "shape": [4, 6], "data_offsets": [len(raw), 2 * len(raw)]}},
            raw)
safetensors("header_past_end.safetensors",
            {"w": {"dtype": "F32", "shape": [4, 6], "data_offsets": [0, len(raw)]}}, raw,
            header_length=1 << 20)
safetensors("wrong_size.safetensors",
            {"w": {"dtype": "F32", "shape": [4, 5], "data_offsets": [0, len(raw)]}}, raw)
safetensors("complex.safetensors",
            {"w": {"dtype": "C64", "shape": [12], "data_offsets": [0, len(raw)]}}, raw)
with open(path("bad_json.safetensors"), "wb") as f:
    text = b'{"w": {"dtype": "F32", '
    f.write(struct.pack("<Q", len(text)) + text + raw)
