#!/usr/bin/python3
"""Reference side of test_render.c's sRGB and CIELAB checks: skimage.color.

Usage: render_lab_ref.py IN OUT

IN holds one request a line; OUT receives one line of numbers for each:
  rgb R G B    8-bit sRGB -> CIE 1976 L*a*b*: skimage.color.rgb2lab (D65
               white, 2 degree observer), "L a b"
  lab L A B    CIELAB -> sRGB: skimage.color.lab2rgb (which clips each
               channel to [0, 1]), "r g b" in [0, 1]
  decode C     the linear value of 8-bit code C: Y of skimage.color.rgb2xyz
               of the grey (C, C, C) (the Y row of its sRGB matrix sums to
               one, so Y is the decoded channel)
  encode V     the sRGB encoding of linear V: skimage.color.xyz2rgb of V
               times the XYZ of the white (1, 1, 1), one channel
"""
import sys
import warnings

import numpy as np
from skimage import color


def main():
    src, out = sys.argv[1], sys.argv[2]
    white = color.rgb2xyz(np.ones((1, 1, 3)))[0, 0]
    lines = []
    for line in open(src):
        what, *vals = line.split()
        v = np.array([float(x) for x in vals])
        if what == "rgb":
            r = color.rgb2lab((v / 255.0)[None, None, :])[0, 0]
        elif what == "lab":
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # out of gamut: clipped, as asked
                r = color.lab2rgb(v[None, None, :])[0, 0]
        elif what == "decode":
            r = [color.rgb2xyz(np.full((1, 1, 3), v[0] / 255.0))[0, 0, 1]]
        elif what == "encode":
            r = [color.xyz2rgb((v[0] * white)[None, None, :])[0, 0, 0]]
        else:
            sys.exit("unknown request " + what)
        lines.append(" ".join("%.12g" % x for x in r))
    with open(out, "w") as f:
        f.write("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
