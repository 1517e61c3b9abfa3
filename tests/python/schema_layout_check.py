"""Reads a packed .sprig file exactly as schema/README.md describes it, independently of sprig's
own reader, and checks every rule the document states against the file and its source weights.

Usage: /usr/bin/python3 schema_layout_check.py FILE.sprig WEIGHTS.npz

The preamble is parsed with Python's struct and checked with zlib.crc32 (ISO 3309 / ITU-T V.42,
as the document says). The FlatBuffers header is read with the Python code that Debian's
`flatc --python` generates from schema/model.fbs into a temporary folder, on Debian's
python3-flatbuffers runtime. Each tensor's stored bytes, gathered from its hot rows and its
records by the document's row maps, must equal the array in WEIGHTS.npz bit for bit: for F32
storage the float32 array itself; for F16 NumPy's float16 conversion (round to nearest, ties to
even: NumPy's `astype(numpy.float16)`, Debian python3-numpy); for BF16 the top 16 bits of the
float32 bits after round to nearest, ties to even (the document's definition); for I8 the
document's rule recomputed row by row with NumPy float32 arithmetic: s = float32(max|w|) / 127
as a float32 division, q = clamp(rint(float32(w / s)), -127, 127), where NumPy's `np.rint`
rounds to the nearest integer, half to even (from memory of NumPy's documentation of
numpy.around, "rounds to the nearest even value"; seen directly here: np.rint gives 0, 2, 2, -2
for 0.5, 1.5, 2.5, -2.5, the tie rows of tests/schema_doc_test.cc). The int8 values and the float32 scales must both match bit for bit, wherever the
document puts them (hot section and each record). Every tensor's recorded error_max_abs and
error_rel_rms are recomputed in float64 against the source and must agree within a relative
1e-5 (they are stored as float32 and summed in another order).

Prints a one-line JSON summary of what was checked; on the first disagreement prints
"RULE <name>: <what>" and exits 1. Exits 2 for unusable arguments.
"""

import json
import os
import re
import struct
import subprocess
import sys
import tempfile
import zipfile
import zlib

import numpy as np

PAGE = 4096  # "a multiple of 4096" (Header, sections)
ALIGN = 64  # "each tensor 64-byte aligned", "each part 64-byte aligned"
SCHEMA = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "schema",
                      "model.fbs")


class RuleError(Exception):
    pass


def rule(ok, name, what):
    if not ok:
        raise RuleError(f"RULE {name}: {what}")


def align_up(v, a):
    return (v + a - 1) // a * a


def load_schema_module(folder):
    """Generates the header's Python reader from schema/model.fbs with Debian's flatc."""
    r = subprocess.run(["flatc", "--python", "-o", folder, SCHEMA], capture_output=True,
                       text=True)
    if r.returncode != 0:
        print(f"schema_layout_check: flatc --python failed on {SCHEMA}: {r.stderr}",
              file=sys.stderr)
        sys.exit(2)
    sys.path.insert(0, folder)
    import sprig.fb.Header as header_mod  # noqa: E402 (generated just above)
    return header_mod


def scalar_slots(folder, table):
    """vtable slots of a table's scalar fields, read off the generated accessor code."""
    with open(os.path.join(folder, "sprig", "fb", table + ".py")) as f:
        src = f.read()
    pattern = (r"def (\w+)\(self\):\s+o = flatbuffers\.number_types\.UOffsetTFlags\.py_type"
               r"\(self\._tab\.Offset\((\d+)\)\)\s+if o != 0:\s+"
               r"return (?:bool\()?self\._tab\.Get\(")  # bools are wrapped in bool()
    return [(m.group(1), int(m.group(2))) for m in re.finditer(pattern, src)]


def check_scalars_written(obj, slots, where):
    # "Every scalar is written even when it equals its default."
    for name, slot in slots:
        rule(obj._tab.Offset(slot) != 0, "header.scalars_written",
             f"{where}: scalar field {name} is not written")


def check_preamble(data):
    """The "Preamble" table, field by field."""
    rule(len(data) >= 64, "preamble.size", f"the file has {len(data)} bytes, fewer than 64")
    rule(data[0:8] == bytes([0x53, 0x50, 0x52, 0x49, 0x47, 0x00, 0x0D, 0x0A]), "preamble.magic",
         f"bytes 0-7 are {data[0:8].hex(' ')}")
    version, pre_size, hdr_off, hdr_size, file_size, hdr_crc, bom = struct.unpack_from(
        "<IIQQQII", data, 8)
    rule(version in (1, 2), "preamble.version", f"format version {version}, expected 1 or 2")
    rule(pre_size == 64, "preamble.preamble_size", f"preamble size {pre_size}, expected 64")
    rule(hdr_off == 64, "preamble.header_offset", f"header offset {hdr_off}, expected 64")
    rule(file_size == len(data), "preamble.file_size",
         f"file size field {file_size}, the file has {len(data)} bytes")
    rule(data[44:48] == bytes([0x04, 0x03, 0x02, 0x01]) and bom == 0x01020304,
         "preamble.byte_order_mark", f"bytes 44-47 are {data[44:48].hex(' ')}")
    rule(data[48:60] == bytes(12), "preamble.reserved", f"bytes 48-59 are {data[48:60].hex()}")
    (pre_crc,) = struct.unpack_from("<I", data, 60)
    rule(pre_crc == zlib.crc32(data[0:60]), "preamble.crc32",
         f"stored {pre_crc:#010x}, crc32 of bytes 0-59 is {zlib.crc32(data[0:60]):#010x}")
    rule(0 < hdr_size and hdr_off + hdr_size <= len(data), "preamble.header_range",
         f"header [{hdr_off}, +{hdr_size}) outside a {len(data)}-byte file")
    header = data[hdr_off:hdr_off + hdr_size]
    rule(hdr_crc == zlib.crc32(header), "preamble.header_crc32",
         f"stored {hdr_crc:#010x}, crc32 of the header is {zlib.crc32(header):#010x}")
    return hdr_off, hdr_size


def bf16_bits(a32):
    """Top 16 bits of binary32 after round to nearest, ties to even (schema/README.md)."""
    u = a32.view(np.uint32).astype(np.uint64)
    rounded = (u + 0x7FFF + ((u >> 16) & 1)) >> 16
    return rounded.astype(np.uint16)


def i8_quantize(src):
    """The document's I8 rule: per row of the last dimension, returns (q int8, s float32) with
    q shaped like the source and s shaped [rows of the last dimension]."""
    w = np.ascontiguousarray(src).astype(np.float32)  # float64 sources: rounded to float32 first
    cols = w.shape[-1]
    rows = w.reshape(-1, cols)
    s = np.max(np.abs(rows), axis=1).astype(np.float32) / np.float32(127)  # float32 division
    assert s.dtype == np.float32
    safe = np.where(s > 0, s, np.float32(1))
    ratio = rows / safe[:, None]  # float32 / float32: a float32 division
    assert ratio.dtype == np.float32
    # np.rint: round to nearest, ties to even (NumPy's documented rounding).
    q = np.clip(np.rint(ratio), -127, 127)
    q = np.where(s[:, None] > 0, q, 0).astype(np.int8)
    return q.reshape(w.shape), s


def stored_values(src, dtype_name):
    """What the stored values stand for, as float64 (I8: s * q as a float32 product)."""
    a = np.ascontiguousarray(src)
    if dtype_name == "F32":
        return a.astype(np.float32).astype(np.float64)
    if dtype_name == "F16":
        return a.astype(np.float16).astype(np.float64)
    if dtype_name == "BF16":
        bits = bf16_bits(a.astype(np.float32)).astype(np.uint32) << 16
        return bits.view(np.float32).astype(np.float64)
    q, s = i8_quantize(a)
    cols = a.shape[-1]
    v = (s[:, None] * q.reshape(-1, cols).astype(np.float32)).astype(np.float32)
    return v.reshape(a.shape).astype(np.float64)


def storage_error(src, dtype_name):
    """The document's "Storage error", in double precision."""
    exact = np.ascontiguousarray(src).astype(np.float64)
    d = stored_values(src, dtype_name) - exact
    max_abs = float(np.max(np.abs(d))) if d.size else 0.0
    squares = float(np.sum(exact * exact))
    rel_rms = float(np.sqrt(np.sum(d * d)) / np.sqrt(squares)) if squares > 0 else 0.0
    return max_abs, rel_rms


def expected_bytes(src, dtype_name):
    a = np.ascontiguousarray(src)
    if dtype_name == "I8":
        return i8_quantize(a)[0].tobytes()
    if dtype_name == "F32":
        return a.astype("<f4").tobytes()
    if dtype_name == "F16":
        # One rounding from the source, also from float64 (NumPy converts float64 directly).
        return a.astype("<f2").tobytes()
    if dtype_name == "BF16":
        return bf16_bits(a.astype("<f4")).astype("<u2").tobytes()
    raise RuleError(f"RULE tensor.dtype: no source comparison for storage type {dtype_name}")


def storage_part(name, layer):
    """The document's storage parts: nodes, records or dense."""
    if layer >= 0 and name.endswith(("nodes.weight", "router.weight")):
        return "nodes"
    if ".leaves." in name or ".experts." in name or name.endswith("nodes.out"):
        return "records"
    return "dense"


def enum_names(cls):
    return {v: k for k, v in vars(cls).items() if not k.startswith("_")}


def page_aware_offsets(start, size, count):
    """Record positions p (64-byte aligned) with p mod P <= ceil(B/P)*P - B, skipping ahead to
    the next page when the next free position does not qualify."""
    slack = -(-size // PAGE) * PAGE - size
    pos, out = start, []
    for _ in range(count):
        pos = align_up(pos, ALIGN)
        if pos % PAGE > slack:
            pos = align_up(pos, PAGE)
        out.append(pos)
        pos += size
    return out


def subtree_location(row, hot_levels, chunk_levels):
    """The document's Subtree formulas: record and breadth-first row inside it of node `row`."""
    k = row + 1  # 1-based heap numbering
    level = k.bit_length() - 1
    s = hot_levels
    before = 0
    while level >= s + chunk_levels:
        before += 1 << s
        s += chunk_levels
    root = k >> (level - s)
    local_heap = (1 << (level - s)) + (k - (root << (level - s)))
    return before + (root - (1 << s)), local_heap - 1


def main():
    if len(sys.argv) != 3 or sys.argv[1] in ("-h", "--help"):
        print(__doc__)
        sys.exit(0 if len(sys.argv) == 2 else 2)
    path, npz_path = sys.argv[1], sys.argv[2]
    try:
        with open(path, "rb") as f:
            data = f.read()
        weights = np.load(npz_path)
    except OSError as e:
        print(f"schema_layout_check: cannot read {e.filename}: {e.strerror}", file=sys.stderr)
        sys.exit(2)
    except (ValueError, zipfile.BadZipFile) as e:
        print(f"schema_layout_check: {npz_path} is not a NumPy .npz archive ({e})",
              file=sys.stderr)
        sys.exit(2)
    with tempfile.TemporaryDirectory() as folder:
        try:
            summary = check(data, weights, folder)
        except RuleError as e:
            print(f"{path}: {e}")
            sys.exit(1)
    print(json.dumps(summary, sort_keys=True))


def check(data, weights, folder):
    hm = load_schema_module(folder)
    from sprig.fb.DType import DType
    from sprig.fb.LayerKind import LayerKind
    from sprig.fb.RowMap import RowMap
    from sprig.fb.SectionKind import SectionKind
    from sprig.fb.TreeMode import TreeMode
    dtypes = enum_names(DType)
    summary = {"preamble_fields": 10}

    hdr_off, hdr_size = check_preamble(data)
    version = struct.unpack_from("<I", data, 8)[0]
    buf = bytearray(data[hdr_off:hdr_off + hdr_size])
    rule(hm.Header.HeaderBufferHasIdentifier(buf, 0), "header.file_identifier",
         f"header bytes 4-7 are {bytes(buf[4:8])!r}, expected b'SPRH'")
    h = hm.Header.GetRootAs(buf, 0)
    rule(h.Config() is not None, "header.config", "the header has no config")
    producer = (h.Producer() or b"").decode()
    rule(producer.startswith("sprig "), "header.producer", f"producer {producer!r}")
    try:
        json.loads((h.ConfigJson() or b"").decode())
    except ValueError as e:
        raise RuleError(f"RULE header.config_json: not JSON ({e})")

    slots = {t: scalar_slots(folder, t) for t in ("Config", "Layer", "Section", "RecordSet",
                                                  "Tensor")}
    rule(all(slots.values()), "header.scalars_written",
         "found no scalar accessors in the generated code")
    cfg = h.Config()
    # Version 2 when a version-1 reader would misread the model: post-norm blocks, or an experts
    # layer whose router scoring is not softmax (0).
    post_norm = cfg.NormPosition() == 1
    other_scoring = any(cfg.Layers(i).Kind() == LayerKind.Experts and cfg.Layers(i).RouterScoring() != 0
                        for i in range(cfg.LayersLength()))
    expected_version = 2 if post_norm or other_scoring else 1
    rule(version == expected_version, "preamble.version",
         f"format version {version} for a {'post' if post_norm else 'pre'}-norm model "
         f"{'with' if other_scoring else 'without'} a non-softmax router, expected "
         f"{expected_version}")
    check_scalars_written(cfg, slots["Config"], "config")
    for i in range(cfg.LayersLength()):
        check_scalars_written(cfg.Layers(i), slots["Layer"], f"config.layers[{i}]")

    # data_start: the header, then zero padding to a page.
    data_start = align_up(hdr_off + hdr_size, PAGE)
    rule(data[hdr_off + hdr_size:data_start] == bytes(data_start - hdr_off - hdr_size),
         "header.zero_padding", "bytes between the header's end and the next page are not zero")

    # Sections: page-aligned, in file order after the header, not overlapping, inside the file.
    sections = [h.Sections(i) for i in range(h.SectionsLength())]
    rule(len(sections) >= 1 and sections[0].Kind() == SectionKind.Hot, "sections.hot_first",
         "the first section is not the hot section")
    pos = data_start
    for i, s in enumerate(sections):
        check_scalars_written(s, slots["Section"], f"sections[{i}]")
        name = (s.Name() or b"").decode()
        rule(s.Offset() % PAGE == 0, "sections.page_aligned",
             f"section {name} offset {s.Offset()} is not a multiple of 4096")
        rule(s.Offset() >= pos, "sections.order",
             f"section {name} at {s.Offset()} starts before {pos} (the header or the previous "
             "section)")
        rule(s.Offset() + s.Size() <= len(data), "sections.inside_file",
             f"section {name} [{s.Offset()}, +{s.Size()}) ends past the file")
        rule((s.Kind() == SectionKind.Hot) == (s.Layer() == -1), "sections.layer",
             f"section {name}: kind {s.Kind()} with layer {s.Layer()}")
        pos = s.Offset() + s.Size()
    rule(sections[0].Offset() == data_start, "sections.after_header",
         f"the hot section starts at {sections[0].Offset()}, the header's page ends at "
         f"{data_start}")
    rule(pos == len(data), "sections.end_of_file",
         f"the last section ends at {pos}, the file at {len(data)}")

    # Tensors: names and shapes are those of the source weights.
    tensors = [h.Tensors(i) for i in range(h.TensorsLength())]
    names = [(t.Name() or b"").decode() for t in tensors]
    rule(sorted(names) == sorted(weights.files), "tensors.names",
         f"header tensors {sorted(set(names) ^ set(weights.files))} differ from the weights'")
    record_sets = [h.RecordSets(i) for i in range(h.RecordSetsLength())]
    hot = sections[0]
    hot_data = 0
    hot_spans = []
    stored = {}
    weight_types = set()
    part_types = {}
    n_i8 = 0
    for t, name in zip(tensors, names):
        check_scalars_written(t, slots["Tensor"], f"tensor {name}")
        src = weights[name]
        shape = [int(x) for x in (t.ShapeAsNumpy() if t.ShapeLength() else [])]
        rule(shape == list(src.shape), "tensor.shape",
             f"{name}: shape {shape}, the weights have {list(src.shape)}")
        dname = dtypes.get(t.Dtype(), str(t.Dtype()))
        rule(dname in ("F32", "F16", "BF16", "I8"), "tensor.dtype",
             f"{name}: storage type {dname}")
        # Biases and norm weights always stay F32; the rest share the requested type.
        last = name.split(".")[-2:]
        keeps_f32 = name.endswith("bias") or (last[-1] == "weight" and len(last) == 2 and
                                                last[0].endswith(("norm", "norm1", "norm2")))
        keeps_f32 = keeps_f32 or len(shape) < 2  # "any tensor of fewer than two dimensions"
        if keeps_f32:
            rule(dname == "F32", "tensor.dtype_biases_norms_f32", f"{name} is stored as {dname}")
        else:
            weight_types.add(dname)
            part_types.setdefault(storage_part(name, t.Layer()), set()).add(dname)
        size = {"F32": 4, "F16": 2, "BF16": 2, "I8": 1}[dname]
        rows = shape[0] if shape else 1
        per_row = int(np.prod(shape[1:], dtype=np.int64)) if shape else 1
        row_bytes = size * per_row
        # I8: S = per_row / last dimension float32 scales per axis-0 row; none for other types.
        scale_row_bytes = 4 * (per_row // shape[-1]) if dname == "I8" else 0
        rule(t.HotRows() <= rows, "tensor.hot_rows", f"{name}: {t.HotRows()} hot rows of {rows}")
        rule(t.HotSize() == t.HotRows() * row_bytes, "tensor.hot_size",
             f"{name}: hot_size {t.HotSize()} for {t.HotRows()} rows of {row_bytes} bytes")
        if t.HotSize():
            rule(t.HotOffset() % ALIGN == 0, "tensor.hot_alignment",
                 f"{name}: hot_offset {t.HotOffset()} is not 64-byte aligned")
            rule(hot.Offset() <= t.HotOffset() and
                 t.HotOffset() + t.HotSize() <= hot.Offset() + hot.Size(), "tensor.hot_inside",
                 f"{name}: hot rows [{t.HotOffset()}, +{t.HotSize()}) outside the hot section")
            hot_spans.append((t.HotOffset(), t.HotSize(), name))
        hot_bytes = data[t.HotOffset():t.HotOffset() + t.HotSize()]
        rule(zlib.crc32(hot_bytes) == t.HotCrc32(), "tensor.hot_crc32",
             f"{name}: stored {t.HotCrc32():#010x}, crc32 of its hot bytes is "
             f"{zlib.crc32(hot_bytes):#010x}")
        hot_data += t.HotSize()
        hot_scales = b""
        if dname == "I8":
            n_i8 += 1
            sz = t.HotRows() * scale_row_bytes
            so = t.ScalesHotOffset()
            if sz:
                # At the first 64-byte aligned offset after the tensor's hot values.
                want = align_up(t.HotOffset() + t.HotSize(), ALIGN)
                rule(so == want, "tensor.scales_hot_offset",
                     f"{name}: scales_hot_offset {so}, the first 64-byte aligned offset after "
                     f"its hot values is {want}")
                rule(hot.Offset() <= so and so + sz <= hot.Offset() + hot.Size(),
                     "tensor.scales_hot_inside",
                     f"{name}: hot scales [{so}, +{sz}) outside the hot section")
                hot_spans.append((so, sz, name + " (scales)"))
            else:
                rule(so == 0, "tensor.scales_hot_offset",
                     f"{name}: no hot rows but scales_hot_offset {so}, expected 0")
            hot_scales = data[so:so + sz]
            rule(zlib.crc32(hot_scales) == t.ScalesHotCrc32(), "tensor.scales_hot_crc32",
                 f"{name}: stored {t.ScalesHotCrc32():#010x}, crc32 of its hot scales is "
                 f"{zlib.crc32(hot_scales):#010x}")
            hot_data += sz
        else:
            rule(t.ScalesHotOffset() == 0 and t.ScalesHotCrc32() == 0 and
                 t.ScalesRecordPartOffset() == 0, "tensor.scales_unused",
                 f"{name}: {dname} storage with scale fields set")
        routed = t.HotRows() < rows
        rule(routed == (t.RecordSet() >= 0), "tensor.record_set",
             f"{name}: {t.HotRows()} of {rows} rows hot but record_set {t.RecordSet()}")
        if routed:
            rule(t.RecordSet() < len(record_sets), "tensor.record_set",
                 f"{name}: record_set {t.RecordSet()} of {len(record_sets)}")
        elif dname == "I8":
            rule(t.ScalesRecordPartOffset() == 0, "tensor.scales_record_part_offset",
                 f"{name}: no records but scales_record_part_offset "
                 f"{t.ScalesRecordPartOffset()}, expected 0")
        stored[name] = (t, dname, rows, row_bytes, bytearray(hot_bytes), scale_row_bytes,
                        bytearray(hot_scales))
    # --dtype and the per-part overrides: one storage type per part.
    for part, types in part_types.items():
        rule(len(types) == 1, "tensor.dtype_parts",
             f"{part} weight tensors are stored as several types {sorted(types)}")
    hot_spans.sort()
    for (a, asz, an), (b, _, bn) in zip(hot_spans, hot_spans[1:]):
        rule(a + asz <= b, "tensor.hot_overlap", f"{an} and {bn} overlap in the hot section")
    rule(hot.Padding() == hot.Size() - hot_data, "sections.padding",
         f"hot section padding {hot.Padding()}, size {hot.Size()} minus tensor bytes "
         f"{hot_data} is {hot.Size() - hot_data}")

    n_records = 0
    placements = {"page_aware": 0, "back_to_back": 0}
    layers = [cfg.Layers(i) for i in range(cfg.LayersLength())]
    for si, rs in enumerate(record_sets):
        check_scalars_written(rs, slots["RecordSet"], f"record_sets[{si}]")
        members = [(n, v) for n, v in stored.items() if v[0].RecordSet() == si]
        rule(members, "record_set.tensors", f"record set {si} has no tensors")
        rule(rs.Section() < len(sections), "record_set.section",
             f"record set {si}: section {rs.Section()} of {len(sections)}")
        sec = sections[rs.Section()]
        rule(sec.Kind() == SectionKind.Records and sec.Layer() == rs.Layer(),
             "record_set.section", f"record set {si} (layer {rs.Layer()}) points at section "
             f"{(sec.Name() or b'').decode()} of layer {sec.Layer()}")
        rule(rs.Layer() < len(layers), "record_set.layer", f"record set {si}: layer {rs.Layer()}")
        layer = layers[rs.Layer()]
        path_tree = layer.Kind() == LayerKind.Tree and layer.Mode() == TreeMode.Path
        rows = members[0][1][2]
        B = rs.RecordSize()
        rule(B % ALIGN == 0 and B > 0, "record_set.record_size",
             f"record set {si}: record size {B} is not a positive multiple of 64")
        if path_tree:
            rule(rs.RowMap() == RowMap.Subtree, "row_map.kind",
                 f"record set {si}: a path tree with row map {rs.RowMap()}")
            L = rows.bit_length()
            rule(rows == (1 << L) - 1, "row_map.subtree_rows", f"{rows} nodes is not 2^L - 1")
            hot_levels = ((L - 1) % 4) + 1 if L > 4 else L
            rule(rs.ChunkLevels() == 4 and rs.HotLevels() == hot_levels, "row_map.subtree_levels",
                 f"record set {si}: hot_levels {rs.HotLevels()}, chunk_levels "
                 f"{rs.ChunkLevels()}; L = {L} gives {hot_levels} and 4")
            rule(rs.RowsPerRecord() == 15, "row_map.subtree_rows",
                 f"record set {si}: rows_per_record {rs.RowsPerRecord()}, a chunk has 15 nodes")
            hot_rows = (1 << hot_levels) - 1
            count = sum(1 << s for s in range(hot_levels, L, 4))
        else:
            rule(rs.RowMap() == RowMap.Contiguous and rs.RowsPerRecord() == 1, "row_map.kind",
                 f"record set {si}: row map {rs.RowMap()}, rows_per_record "
                 f"{rs.RowsPerRecord()} for leaves or experts")
            hot_rows = 0
            count = rows
        rule(rs.RecordsLength() == count, "record_set.count",
             f"record set {si}: {rs.RecordsLength()} records, the row map needs {count}")
        # Parts: contract order (the header's tensor order), 64-byte aligned, inside the record.
        part_end = 0
        covered = np.zeros(B, dtype=bool)
        for name, (t, _, trows, row_bytes, _, scale_row_bytes, _) in members:
            rule(t.HotRows() == hot_rows and trows == rows, "row_map.hot_rows",
                 f"{name}: {t.HotRows()} hot rows of {trows}, the row map keeps {hot_rows} of "
                 f"{rows}")
            rule(t.Layer() == rs.Layer(), "tensor.layer",
                 f"{name}: layer {t.Layer()} in record set of layer {rs.Layer()}")
            po, ps = t.RecordPartOffset(), t.RecordPartSize()
            rule(po % ALIGN == 0 and po >= part_end and po + ps <= B, "record.part_layout",
                 f"{name}: part [{po}, +{ps}) not 64-aligned, out of order or past the "
                 f"{B}-byte record")
            rule(ps == rs.RowsPerRecord() * row_bytes, "record.part_size",
                 f"{name}: part size {ps}, expected {rs.RowsPerRecord()} x {row_bytes}")
            covered[po:po + ps] = True
            part_end = po + ps
            if scale_row_bytes:
                # I8: the scales' part at the first 64-byte aligned offset after the values'.
                so, ss = t.ScalesRecordPartOffset(), rs.RowsPerRecord() * scale_row_bytes
                rule(so == align_up(part_end, ALIGN) and so + ss <= B,
                     "record.scales_part_layout",
                     f"{name}: scales part [{so}, +{ss}), expected right after the values' part "
                     f"at {align_up(part_end, ALIGN)} inside the {B}-byte record")
                covered[so:so + ss] = True
                part_end = so + ss
        offsets = []
        for r in range(count):
            ref = rs.Records(r)
            off = ref.Offset()
            rule(ref.Reserved() == 0, "record.reserved", f"record set {si} record {r}")
            rule(off % ALIGN == 0 and sec.Offset() <= off and off + B <= sec.Offset() + sec.Size(),
                 "record.inside_section",
                 f"record set {si} record {r} [{off}, +{B}) not 64-aligned or outside its section")
            rec = data[off:off + B]
            rule(zlib.crc32(rec) == ref.Crc32(), "record.crc32",
                 f"record set {si} record {r}: stored {ref.Crc32():#010x}, crc32 of its "
                 f"{B} bytes is {zlib.crc32(rec):#010x}")
            rule(not np.frombuffer(rec, np.uint8)[~covered].any(), "record.inner_padding_zero",
                 f"record set {si} record {r}: inner padding is not zero")
            offsets.append(off)
        for a, b in zip(offsets, offsets[1:]):
            rule(a + B <= b, "record.order", f"record set {si}: records at {a} and {b} overlap "
                 "or are out of order")
        # Placement ("Placement"): page-aware from the section's start, unless the gaps that
        # leaves exceed 2% of the records' bytes; then back to back, 64-byte aligned.
        aware = page_aware_offsets(sec.Offset(), B, count)
        gaps = (aware[-1] + B - sec.Offset()) - B * count
        tight = gaps * 50 <= B * count
        want = aware if tight else [sec.Offset() + align_up(B, ALIGN) * r for r in range(count)]
        rule(offsets == want, "record.placement",
             f"record set {si}: record offsets differ from the "
             f"{'page-aware' if tight else 'back-to-back'} placement (gaps {gaps} bytes of "
             f"{B * count})")
        placements["page_aware" if tight else "back_to_back"] += 1
        used = sum(v[0].RecordPartSize() + rs.RowsPerRecord() * v[5] for _, v in members) * count
        rule(sec.Padding() == sec.Size() - used, "sections.padding",
             f"section {(sec.Name() or b'').decode()}: padding {sec.Padding()}, size "
             f"{sec.Size()} minus tensor bytes {used} is {sec.Size() - used}")
        # Gather each routed tensor's remaining rows from the records by the row map.
        for name, (t, _, trows, row_bytes, out, srb, scales) in members:
            out.extend(bytes((trows - hot_rows) * row_bytes))
            scales.extend(bytes((trows - hot_rows) * srb))
            for row in range(hot_rows, trows):
                if path_tree:
                    rec, local = subtree_location(row, rs.HotLevels(), rs.ChunkLevels())
                else:
                    rec, local = row // rs.RowsPerRecord(), row % rs.RowsPerRecord()
                src = offsets[rec] + t.RecordPartOffset() + local * row_bytes
                out[row * row_bytes:(row + 1) * row_bytes] = data[src:src + row_bytes]
                if srb:
                    src = offsets[rec] + t.ScalesRecordPartOffset() + local * srb
                    scales[row * srb:(row + 1) * srb] = data[src:src + srb]
        n_records += count

    n_bytes = 0
    n_errors = 0
    for name, (t, dname, rows, row_bytes, out, _, scales) in stored.items():
        if dname == "I8":
            q, s = i8_quantize(weights[name])
            got_s = np.frombuffer(bytes(scales), "<f4")
            bad = np.flatnonzero(got_s.view(np.uint32) != s.view(np.uint32))
            rule(len(got_s) == len(s) and not len(bad), "tensor.i8_scales",
                 f"{name}: stored scale of row {bad[:1].tolist()} of the last dimension is "
                 f"{got_s[bad[:1]].tolist()}, max|w|/127 in float32 is {s[bad[:1]].tolist()}")
            rule(not (np.frombuffer(bytes(out), np.int8) == -128).any(), "tensor.i8_no_minus_128",
                 f"{name}: -128 is written")
        want = expected_bytes(weights[name], dname)
        rule(bytes(out) == want, "tensor.values",
             f"{name}: stored {dname} bytes differ from the weights' {dname} conversion")
        n_bytes += len(out) + len(scales)
        # "Storage error": recomputed in float64; the header holds float32.
        max_abs, rel_rms = storage_error(weights[name], dname)
        for field, got, exp in (("error_max_abs", t.ErrorMaxAbs(), max_abs),
                                ("error_rel_rms", t.ErrorRelRms(), rel_rms)):
            rule(abs(got - exp) <= 1e-5 * abs(exp) + 1e-30, "tensor.storage_error",
                 f"{name}: {field} {got!r}, recomputed from the source {exp!r}")
        n_errors += 1
    summary.update({
        "header_bytes": hdr_size, "sections": len(sections), "tensors": len(tensors),
        "record_sets": len(record_sets), "records": n_records, "tensor_bytes": n_bytes,
        "storage": sorted(weight_types), "file_bytes": len(data), "ok": True,
        "placement": placements, "i8_tensors": n_i8, "errors_checked": n_errors})
    return summary


if __name__ == "__main__":
    main()
