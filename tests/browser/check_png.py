# SPDX-License-Identifier: GPL-3.0-or-later
"""check_png.py PNG WIDTH HEIGHT [LOG]: did the browser render the page?
Reads the PNG with the standard library only (zlib, struct): the size from
its header must be WIDTH x HEIGHT; decoded, the picture must not be blank
(at least 3% of the pixels not near-white and at least 16 distinct colours:
text, charts and their palette); the browser's log, when given, must hold
no console message (the page has no script, so any is an error)."""
import struct
import sys
import zlib


def decode(path):
    data = open(path, "rb").read()
    if data[:8] != b"\x89PNG\r\n\x1a\n":
        raise SystemExit(f"{path}: not a PNG file")
    pos, idat, hdr = 8, [], None
    while pos < len(data):
        (length,) = struct.unpack(">I", data[pos:pos + 4])
        kind, body = data[pos + 4:pos + 8], data[pos + 8:pos + 8 + length]
        if kind == b"IHDR":
            hdr = struct.unpack(">IIBBBBB", body)
        elif kind == b"IDAT":
            idat.append(body)
        pos += 12 + length
    if hdr is None:
        raise SystemExit(f"{path}: no IHDR chunk")
    w, h, depth, ctype, _, _, interlace = hdr
    if depth != 8 or ctype not in (2, 6) or interlace:
        raise SystemExit(f"{path}: unexpected PNG format (depth {depth}, colour type {ctype})")
    bpp = 3 if ctype == 2 else 4
    raw = zlib.decompress(b"".join(idat))
    stride = w * bpp
    prev = bytearray(stride)
    rows = []
    i = 0
    for _ in range(h):
        f = raw[i]
        line = bytearray(raw[i + 1:i + 1 + stride])
        i += 1 + stride
        # PNG filters (PNG specification, section 9)
        if f == 1:
            for x in range(bpp, stride):
                line[x] = (line[x] + line[x - bpp]) & 255
        elif f == 2:
            for x in range(stride):
                line[x] = (line[x] + prev[x]) & 255
        elif f == 3:
            for x in range(stride):
                a = line[x - bpp] if x >= bpp else 0
                line[x] = (line[x] + ((a + prev[x]) >> 1)) & 255
        elif f == 4:
            for x in range(stride):
                a = line[x - bpp] if x >= bpp else 0
                b = prev[x]
                c = prev[x - bpp] if x >= bpp else 0
                p = a + b - c
                pa, pb, pc = abs(p - a), abs(p - b), abs(p - c)
                line[x] = (line[x] + (a if pa <= pb and pa <= pc else b if pb <= pc else c)) & 255
        elif f != 0:
            raise SystemExit(f"{path}: bad filter {f}")
        rows.append(bytes(line))
        prev = line
    return w, h, bpp, rows


def main():
    path, want_w, want_h = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
    w, h, bpp, rows = decode(path)
    if (w, h) != (want_w, want_h):
        raise SystemExit(f"{path}: {w}x{h} pixels, expected {want_w}x{want_h}")
    inked = 0
    colours = set()
    for r in rows[::3]:
        for x in range(0, w * bpp, 3 * bpp):
            px = r[x:x + 3]
            colours.add(px)
            if min(px) < 235:
                inked += 1
    total = len(rows[::3]) * len(range(0, w * bpp, 3 * bpp))
    share = inked / total
    if share < 0.03 or len(colours) < 16:
        raise SystemExit(f"{path}: looks blank ({share:.1%} of pixels inked, {len(colours)} colours)")
    if len(sys.argv) > 4:
        console = [line for line in open(sys.argv[4], errors="replace") if ":CONSOLE" in line]
        if console:
            raise SystemExit("console messages:\n" + "".join(console[:10]))
    print(f"rendered {w}x{h}: {share:.1%} of pixels inked, {len(colours)} colours, no console message")


main()
