#!/usr/bin/python3
# make_reports.py - build the small fixture reports that check_report_selftest.sh
# runs check_report.py on: one good disposition report (two colour map
# renderings, ~300x200 PNG, embedded as data: URIs) and bad variants of it,
# each broken in one way the checker must name. The PNGs are written here
# with numpy + zlib + struct, so that the fixtures depend on nothing of
# plyledger's.
#
# Usage: make_reports.py OUTDIR      (writes OUTDIR/*.html, prints their names)
import base64
import struct
import sys
import zlib

import numpy as np


def png_bytes(rgb):
    h, w, _ = rgb.shape
    raw = b"".join(b"\x00" + rgb[y].tobytes() for y in range(h))

    def chunk(t, d):
        return struct.pack(">I", len(d)) + t + d + struct.pack(">I", zlib.crc32(t + d) & 0xFFFFFFFF)
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, 8, 2, 0, 0, 0))
            + chunk(b"IDAT", zlib.compress(raw, 9)) + chunk(b"IEND", b""))


def colour_map(t):
    """t in [0,1] -> RGB, dark blue through teal and green to yellow."""
    anchors = np.array([[48, 18, 80], [40, 80, 140], [30, 140, 140], [80, 190, 100], [250, 230, 40]], float)
    x = np.clip(t, 0, 1) * (len(anchors) - 1)
    i = np.minimum(x.astype(int), len(anchors) - 2)
    f = (x - i)[..., None]
    return (anchors[i] * (1 - f) + anchors[i + 1] * f).round().astype(np.uint8)


def map_image(seed, blobs, w=300, h=200):
    rng = np.random.default_rng(seed)
    y, x = np.mgrid[0:h, 0:w].astype(float)
    field = 0.3 * x / w + 0.1 * np.sin(y / 17.0)
    for cx, cy, r, a in blobs:
        field += a * np.exp(-((x - cx) ** 2 + (y - cy) ** 2) / (2 * r * r))
    field += rng.normal(0, 0.01, field.shape)
    field = (field - field.min()) / (field.max() - field.min())   # use the whole colour map
    return png_bytes(colour_map(field))


def data_uri(png):
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


STYLE = """
body { font: 11pt/1.4 sans-serif; color: #111; margin: 2em; }
h1 { font-size: 18pt; border-bottom: 2px solid #333; }
table { border-collapse: collapse; margin: 1em 0; }
td, th { border: 1px solid #999; padding: 3px 8px; text-align: left; }
figure { display: inline-block; margin: 0 1em 1em 0; }
.note { display: none; }
.decision { background: #fde9c8; padding: 0.5em 1em; border-left: 4px solid #c60; }
"""
PRINT = """
@media print {
  @page { size: A4 portrait; margin: 15mm; }
  body { margin: 0; }
  .page-break { break-before: page; }
}
"""


def report(style=STYLE + PRINT, images=None, extra_body="", h1="Disposition report: site WL-07"):
    if images is None:
        images = [("Baseline map, site WL-07, 2015-03-02", data_uri(map_image(1, [(90, 80, 14, 0.6)]))),
                  ("Current map, site WL-07, 2027-06-14",
                   data_uri(map_image(2, [(92, 81, 20, 0.7), (220, 140, 10, 0.5)])))]
    figs = "\n".join('<figure><img alt="%s" src="%s" width="300" height="200">'
                     '<figcaption>%s</figcaption></figure>' % (alt, src, alt) for alt, src in images)
    return """<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>Disposition report TST-0001 WL-07</title>
<style>%s</style>
</head>
<body>
<h1>%s</h1>
<table>
<tr><th>Airframe</th><td>TST-0001</td></tr>
<tr><th>Site</th><td>WL-07, left wing lower skin</td></tr>
<tr><th>Inspection</th><td>2027-06-14, scheduled check</td></tr>
</table>
<section>
%s
</section>
<p class="note">Hidden note: not rendered.</p>
<section class="page-break">
<h2>Indications</h2>
<table>
<tr><th>Indication</th><th>Area (mm&sup2;)</th><th>Change</th></tr>
<tr><td>I-1</td><td>41.0 &rarr; 57.5</td><td>grown</td></tr>
<tr><td>I-2</td><td>&mdash; &rarr; 12.2</td><td>new</td></tr>
</table>
<p class="decision">Disposition: accepted for continued service, reinspect at next check.</p>
%s
</section>
</body>
</html>
""" % (style, h1, figs, extra_body)


def main():
    out = sys.argv[1]
    base = map_image(1, [(90, 80, 14, 0.6)])
    fixtures = {
        "good": report(),
        # strict html5lib: </b> closing across <i>, and a <div> never closed
        "misnested": report(extra_body="<p><b>grown <i>by 40 %</b></i></p>\n<div>unclosed"),
        "external-image": report(images=[("Baseline map", data_uri(base)),
                                         ("Current map", "https://example.org/maps/wl-07.png")]),
        "script": report(extra_body="<script>document.title = 'changed';</script>"),
        # base64 with characters outside its alphabet: neither Python nor the
        # browser can decode it
        "corrupt-base64": report(images=[("Baseline map", data_uri(base)),
                                         ("Current map", data_uri(base)[:400] + "!*!*" + data_uri(base)[404:])]),
        # valid base64 of half a PNG: the browser draws it anyway
        "truncated-png": report(images=[("Baseline map", data_uri(base)),
                                        ("Current map", data_uri(base[:len(base) // 2]))]),
        # structurally fine, but nothing visible: white on white, no images
        "blank": report(style=STYLE + PRINT + "\n* { color: #fff !important; background: #fff !important;"
                        " border-color: #fff !important; }", images=[]),
        "no-print-style": report(style=STYLE),
    }
    for name, html in fixtures.items():
        with open("%s/%s.html" % (out, name), "w", encoding="utf-8") as f:
            f.write(html)
        print(name)


if __name__ == "__main__":
    main()
