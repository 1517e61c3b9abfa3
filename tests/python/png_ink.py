"""Decodes a PNG file (8-bit greyscale, RGB or RGBA, not interlaced) with zlib and NumPy and
prints, as JSON, its size, the share of pixels that are not white and the number of distinct
colours. The decoding follows the PNG specification (ISO/IEC 15948: chunks, zlib stream,
per-scanline filters 0-4 with the Paeth predictor)."""
import json
import struct
import sys
import zlib

import numpy as np


def read_png(path):
    data = open(path, 'rb').read()
    if data[:8] != b'\x89PNG\r\n\x1a\n':
        raise SystemExit(path + ' is not a PNG file')
    pos, idat, header = 8, b'', None
    while pos < len(data):
        (length,) = struct.unpack('>I', data[pos:pos + 4])
        kind = data[pos + 4:pos + 8]
        body = data[pos + 8:pos + 8 + length]
        if kind == b'IHDR':
            header = struct.unpack('>IIBBBBB', body)
        elif kind == b'IDAT':
            idat += body
        pos += 12 + length
    width, height, depth, colour, _, _, interlace = header
    channels = {0: 1, 2: 3, 6: 4}.get(colour)
    if depth != 8 or channels is None or interlace != 0:
        raise SystemExit('unsupported PNG layout: depth %d, colour type %d' % (depth, colour))
    raw = np.frombuffer(zlib.decompress(idat), dtype=np.uint8)
    stride = width * channels
    rows = raw.reshape(height, stride + 1)
    out = np.zeros((height, stride), dtype=np.uint8)
    prev = np.zeros(stride, dtype=np.int32)
    for y in range(height):
        kind, line = rows[y, 0], rows[y, 1:].astype(np.int32)
        if kind == 0:
            cur = line
        elif kind == 1:  # Sub: add the byte one pixel to the left (a running sum per channel)
            cur = np.cumsum(line.reshape(width, channels), axis=0).reshape(-1) & 0xFF
        elif kind == 2:  # Up
            cur = (line + prev) & 0xFF
        else:  # Average and Paeth depend on the decoded left pixel: pixel by pixel
            cur = np.zeros(stride, dtype=np.int32)
            for x in range(0, stride, channels):
                a = cur[x - channels:x] if x else np.zeros(channels, dtype=np.int32)
                b = prev[x:x + channels]
                if kind == 3:
                    pred = (a + b) // 2
                else:
                    c = prev[x - channels:x] if x else np.zeros(channels, dtype=np.int32)
                    p = a + b - c
                    pa, pb, pc = np.abs(p - a), np.abs(p - b), np.abs(p - c)
                    pred = np.where((pa <= pb) & (pa <= pc), a, np.where(pb <= pc, b, c))
                cur[x:x + channels] = (line[x:x + channels] + pred) & 0xFF
        out[y] = cur
        prev = cur
    return out.reshape(height, width, channels)


def main():
    pixels = read_png(sys.argv[1])
    rgb = pixels[:, :, :3] if pixels.shape[2] >= 3 else np.repeat(pixels, 3, axis=2)
    non_white = np.any(rgb < 250, axis=2)
    colours = np.unique(rgb.reshape(-1, 3), axis=0).shape[0]
    print(json.dumps({'width': int(pixels.shape[1]), 'height': int(pixels.shape[0]),
                      'non_white_fraction': float(non_white.mean()), 'colours': int(colours)}))


if __name__ == '__main__':
    main()
