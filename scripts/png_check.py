#!/usr/bin/env python3
"""Checks that a screenshot PNG exists and is not blank: it must decode and hold more than a few
distinct colours. Standard library only (zlib), so CI needs no image package.

Usage: scripts/png_check.py FILE.png [MIN_COLOURS]
Exits 0 when the image passes, 1 with one line saying why when it does not.
"""

import struct
import sys
import zlib


def pixels(path):
    """Yields each row of an 8-bit PNG, unfiltered, with its bytes per pixel."""
    data = open(path, "rb").read()
    if data[:8] != b"\x89PNG\r\n\x1a\n":
        raise ValueError("not a PNG file")
    pos, idat, header = 8, b"", None
    while pos < len(data):
        (length,) = struct.unpack(">I", data[pos : pos + 4])
        kind, body = data[pos + 4 : pos + 8], data[pos + 8 : pos + 8 + length]
        pos += 12 + length
        if kind == b"IHDR":
            header = struct.unpack(">IIBBBBB", body)
        elif kind == b"IDAT":
            idat += body
    if header is None:
        raise ValueError("no IHDR chunk")
    width, height, depth, colour, _, _, interlace = header
    channels = {0: 1, 2: 3, 4: 2, 6: 4}.get(colour)
    if depth != 8 or channels is None or interlace != 0:
        raise ValueError(f"unsupported PNG layout (depth {depth}, colour type {colour}, interlace {interlace})")
    raw, stride, bpp = zlib.decompress(idat), width * channels, channels
    previous, i = bytearray(stride), 0
    for _ in range(height):
        kind, line = raw[i], bytearray(raw[i + 1 : i + 1 + stride])
        i += 1 + stride
        for x in range(stride):
            a = line[x - bpp] if x >= bpp else 0
            b = previous[x]
            c = previous[x - bpp] if x >= bpp else 0
            if kind == 1:
                line[x] = (line[x] + a) & 255
            elif kind == 2:
                line[x] = (line[x] + b) & 255
            elif kind == 3:
                line[x] = (line[x] + ((a + b) >> 1)) & 255
            elif kind == 4:
                p = a + b - c
                pa, pb, pc = abs(p - a), abs(p - b), abs(p - c)
                line[x] = (line[x] + (a if pa <= pb and pa <= pc else b if pb <= pc else c)) & 255
        previous = line
        yield bytes(line), bpp


def main():
    if len(sys.argv) < 2:
        print("usage: png_check.py FILE.png [MIN_COLOURS]")
        return 2
    path, wanted = sys.argv[1], int(sys.argv[2]) if len(sys.argv) > 2 else 16
    colours = set()
    try:
        for n, (line, bpp) in enumerate(pixels(path)):
            # Every fourth row is plenty to tell a real page from a blank one, and four times faster.
            if n % 4 == 0:
                colours.update(line[x : x + bpp] for x in range(0, len(line), bpp))
    except (OSError, ValueError, zlib.error) as e:
        print(f"{path}: {e}")
        return 1
    if len(colours) <= wanted:
        print(f"{path}: only {len(colours)} distinct colours: the page looks blank")
        return 1
    print(f"{path}: {len(colours)} distinct colours")
    return 0


if __name__ == "__main__":
    sys.exit(main())
