#!/usr/bin/python3
"""Check plyledger's colour maps against scikit-image's CIELAB conversion.

Usage: render_colormap_ref.py LEDGER_TABLE GREY_TABLE

Each table has 257 lines of 9 numbers. Lines 0..255 are the map's entries:
R G B (8-bit sRGB as drawn), the CIELAB colour plyledger computes for those
8-bit values (L a b), and the CIELAB colour the entry was designed to have
before 8-bit quantisation (L a b). Line 256 is the no-data colour (R G B,
then its CIELAB twice).

The reference is skimage.color.rgb2lab: CIE 1976 L*a*b* of sRGB
(IEC 61966-2-1 transfer function and primaries), D65 white, 2 degree
observer. Exits non-zero on the first failed check.
"""
import sys

import numpy as np
from skimage.color import rgb2lab

failures = []


def check(ok, what):
    if not ok:
        failures.append(what)


def load(path):
    d = np.loadtxt(path)
    if d.shape != (257, 9):
        sys.exit(f"{path}: expected 257 lines of 9 numbers, got {d.shape}")
    rgb8 = d[:256, 0:3]
    if np.any(rgb8 != np.round(rgb8)) or rgb8.min() < 0 or rgb8.max() > 255:
        sys.exit(f"{path}: entries are not 8-bit codes")
    # skimage.color.rgb2lab (CIE 1976 L*a*b*, D65): the outside reference.
    ref = rgb2lab((rgb8 / 255.0)[None, :, :])[0]
    nodata = rgb2lab((d[256, 0:3] / 255.0)[None, None, :])[0, 0]
    return d[:256, 3:6], d[:256, 6:9], ref, nodata


def delta_e(a, b):
    """CIE 1976 colour difference Delta E*ab (CIE 15:2004)."""
    return np.sqrt(((np.asarray(a) - np.asarray(b)) ** 2).sum(axis=-1))


def common(name, own, design, ref, nodata):
    # plyledger's own sRGB -> CIELAB must reproduce skimage's. The only
    # expected difference is the 4-digit IEC matrix against skimage's
    # 6-digit one: a few hundredths of a unit.
    err = delta_e(own, ref).max()
    check(err < 0.05, f"{name}: own CIELAB differs from skimage by {err:.4f} dE")
    # The 8-bit entries must stay close to the designed colours: the
    # quantiser allows at most 0.47 dE, skimage's matrix adds a few hundredths.
    err = delta_e(design, ref).max()
    check(err < 0.5, f"{name}: 8-bit entries are {err:.3f} dE from the design")
    # The design's lightness is linear from 20 to 95.
    lin = 20.0 + 75.0 * np.arange(256) / 255.0
    check(np.abs(design[:, 0] - lin).max() < 1e-6, f"{name}: designed L* is not linear 20..95")
    # No-data stays apart from every entry of the map.
    gap = delta_e(ref, nodata).min()
    check(gap > 10.0, f"{name}: no-data colour is only {gap:.2f} dE from an entry")
    check(abs(nodata[1]) < 1.0 and abs(nodata[2]) < 1.0,
          f"{name}: no-data colour is not neutral (a*={nodata[1]:.2f} b*={nodata[2]:.2f})")


def ledger(path):
    own, design, ref, nodata = load(path)
    common("ledger", own, design, ref, nodata)
    steps = delta_e(ref[1:], ref[:-1])
    # Lightness strictly increasing (so the map reads the same in grey).
    dl = np.diff(ref[:, 0])
    check(dl.min() > 0.0, f"ledger: L* falls between entries {int(dl.argmin())} and "
          f"{int(dl.argmin()) + 1}")
    # Uniformity between neighbours. Threshold 0.15: 8-bit sRGB codes on the
    # teal-green part of the path are about 1.2 dE apart along green, more
    # than the 0.89 dE designed step, so neighbour steps cannot all be
    # equal; rounding each designed colour to its nearest code gives a
    # coefficient of variation near 0.3 there. 0.15 keeps typical steps
    # within about +-0.13 dE of the mean, far below the just noticeable
    # difference of about 2.3 dE*ab (Mahy, Van Eycken & Oosterlinck 1994,
    # "Evaluation of uniform color spaces developed after the adoption of
    # CIELAB and CIELUV", Color Res. Appl. 19(2); value from memory).
    cv = steps.std() / steps.mean()
    check(cv < 0.15, f"ledger: neighbour dE coefficient of variation {cv:.3f} >= 0.15")
    check(steps.min() > 0.5 * steps.mean() and steps.max() < 1.6 * steps.mean(),
          f"ledger: neighbour steps range {steps.min():.3f}..{steps.max():.3f}, "
          f"mean {steps.mean():.3f}")
    # Over 8 entries the 8-bit noise averages out: what the eye sees as an
    # even gradient. The design alone is even to about 0.03 here.
    span = delta_e(ref[8::8], ref[:-8:8])
    cv8 = span.std() / span.mean()
    check(cv8 < 0.06, f"ledger: 8-entry dE coefficient of variation {cv8:.3f} >= 0.06")
    # Hue path (CIELAB hue angle h_ab, degrees): blue at the dark end,
    # yellow at the light end, turning one way through teal and green.
    hue = np.degrees(np.unwrap(np.arctan2(design[:, 2], design[:, 1])))
    h0, h1 = hue[0] % 360.0, hue[-1] % 360.0
    check(270.0 <= h0 <= 320.0, f"ledger: dark end hue {h0:.1f} is not blue")
    check(85.0 <= h1 <= 110.0, f"ledger: light end hue {h1:.1f} is not yellow")
    check(np.all(np.diff(hue) < 0.0), "ledger: hue does not turn one way")
    mid = hue[128] % 360.0
    check(140.0 <= mid <= 220.0, f"ledger: middle hue {mid:.1f} is not teal or green")
    chroma = np.hypot(ref[:, 1], ref[:, 2])
    check(chroma.min() > 20.0, f"ledger: chroma falls to {chroma.min():.1f}")


def grey(path):
    own, design, ref, nodata = load(path)
    common("grey", own, design, ref, nodata)
    check(np.abs(ref[:, 1:]).max() < 0.5, "grey: entries are not neutral")
    check(np.diff(ref[:, 0]).min() >= 0.0, "grey: L* falls")
    check(np.abs(design[:, 1:]).max() == 0.0, "grey: design is not neutral")


def main():
    if len(sys.argv) != 3:
        sys.exit(__doc__)
    ledger(sys.argv[1])
    grey(sys.argv[2])
    for f in failures:
        print("render_colormap_ref:", f, file=sys.stderr)
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
