#!/usr/bin/python3
"""Decode a plyledger rendering with pypng and compare it to the image.

Usage: render_png_ref.py PNG RAW WIDTH HEIGHT [TITLE]

RAW holds the image's bytes as plyledger had them in memory (row-major RGB).
pypng (png.Reader) is the reference decoder: the PNG must be 8-bit RGB
without alpha, of the given size, with exactly those pixels. With TITLE,
the file must also hold exactly one tEXt chunk with the keyword "Title"
(PNG specification, predefined keywords), whose text is TITLE.
"""
import sys

import png


def main():
    if len(sys.argv) not in (5, 6):
        sys.exit(__doc__)
    path, raw_path, width, height = sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4])
    w, h, rows, info = png.Reader(filename=path).read()
    fail = []
    if len(sys.argv) == 6:
        titles = [data.split(b"\0", 1)[1].decode("latin-1")
                  for kind, data in png.Reader(filename=path).chunks()
                  if kind == b"tEXt" and data.split(b"\0", 1)[0] == b"Title"]
        if titles != [sys.argv[5]]:
            fail.append(f"Title text chunks {titles!r}, expected [{sys.argv[5]!r}]")
    if (w, h) != (width, height):
        fail.append(f"size {w}x{h}, expected {width}x{height}")
    if info["bitdepth"] != 8 or info["planes"] != 3 or info["alpha"] or info["greyscale"]:
        fail.append(f"not 8-bit RGB: {info}")
    data = b"".join(bytes(r) for r in rows)
    with open(raw_path, "rb") as f:
        raw = f.read()
    if data != raw:
        fail.append(f"pixels differ ({len(data)} decoded bytes, {len(raw)} expected)")
    for f in fail:
        print(f"render_png_ref: {path}: {f}", file=sys.stderr)
    return 1 if fail else 0


if __name__ == "__main__":
    sys.exit(main())
