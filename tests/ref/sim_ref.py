#!/usr/bin/python3
"""Reference side of tests/test_sim.c: numpy, scipy and scikit-image.

  sim_ref.py series FILE
      FILE holds lines "tau front rear": the test's Fourier-series values of
      the insulated slab after an instantaneous surface pulse, normalised by
      Q / (rho c L), at tau = alpha t / L^2 (Carslaw & Jaeger 1959, Conduction
      of Heat in Solids, 2nd ed.; Parker et al. 1961). numpy recomputes them
      from the other classical form, the sum over image sources
          front = (pi tau)^-1/2 sum_m exp(-m^2 / tau)
          rear  = (pi tau)^-1/2 sum_m exp(-(2m - 1)^2 / (4 tau)),  m in Z,
      and every value must agree to 1e-9 relative.

  sim_ref.py areas FILE
      FILE holds lines "polygon AREA x1 y1 x2 y2 ..." (a convex polygon) and
      "ellipse AREA A B ANGLE_DEG" (full axes): the test's exact areas.
      scipy.spatial.ConvexHull gives the polygon's area (to 1e-9 relative);
      skimage.draw.ellipse rasterises the ellipse at 0.005 length units per
      pixel, whose pixel count must match to 0.2%.

  sim_ref.py cube NPY MANIFEST RAW TOLERANCE
      numpy.load reads the cube the simulator wrote; its shape must be the
      manifest's (frame_count, height, width) and its values, through the
      manifest's calibration, must lie within TOLERANCE kelvin of RAW (the
      frames the simulator handed to its callback, little-endian float32).
"""
import json
import math
import sys

import numpy as np


def series(path):
    rows = np.loadtxt(path, ndmin=2)
    m = np.arange(-400, 401, dtype=np.float64)
    bad = 0
    for tau, front, rear in rows:
        f = np.sum(np.exp(-m * m / tau)) / math.sqrt(math.pi * tau)
        r = np.sum(np.exp(-(2 * m - 1) ** 2 / (4 * tau))) / math.sqrt(math.pi * tau)
        if abs(f - front) > 1e-9 * abs(f) or abs(r - rear) > 1e-9 * max(abs(r), 1e-300):
            print(f"tau={tau}: front {front} vs {f}, rear {rear} vs {r}")
            bad += 1
    print(f"series: {len(rows)} values checked, {bad} disagree")
    return 1 if bad or len(rows) == 0 else 0


def areas(path):
    from scipy.spatial import ConvexHull
    from skimage.draw import ellipse

    bad = 0
    n = 0
    with open(path) as f:
        for line in f:
            p = line.split()
            if not p:
                continue
            n += 1
            area = float(p[1])
            if p[0] == "polygon":
                pts = np.array([float(v) for v in p[2:]]).reshape(-1, 2)
                ref = ConvexHull(pts).volume
                ok = abs(ref - area) <= 1e-9 * ref
            else:
                a, b, ang = float(p[2]), float(p[3]), float(p[4])
                step = 0.005
                half = max(a, b) / 2 / step + 4
                size = int(2 * half) + 1
                rr, _ = ellipse(half, half, b / 2 / step, a / 2 / step, shape=(size, size),
                                rotation=math.radians(ang))
                ref = len(rr) * step * step
                ok = abs(ref - area) <= 2e-3 * ref
            print(f"{p[0]}: {area} vs reference {ref}")
            bad += not ok
    return 1 if bad or n == 0 else 0


def cube(npy, manifest, raw, tol):
    data = np.load(npy)
    with open(manifest) as f:
        man = json.load(f)
    shape = (man["frame_count"], man["height"], man["width"])
    if data.shape != shape:
        print(f"shape {data.shape}, manifest says {shape}")
        return 1
    cal = man["calibration"]
    if cal["kind"] == "kelvin":
        if data.dtype != np.float32:
            print(f"dtype {data.dtype} for kelvin data")
            return 1
        kelvin = data.astype(np.float64)
    elif cal["kind"] == "linear":
        if data.dtype != np.uint16:
            print(f"dtype {data.dtype} for counts")
            return 1
        kelvin = cal["offset_k"] + cal["gain_k"] * data.astype(np.float64)
    else:
        print(f"unexpected calibration {cal}")
        return 1
    want = np.fromfile(raw, dtype="<f4").astype(np.float64).reshape(shape)
    err = np.max(np.abs(kelvin - want))
    print(f"cube {shape} {data.dtype}: largest difference {err:.3g} K (tolerance {tol})")
    return 0 if err <= float(tol) else 1


def main():
    if len(sys.argv) >= 3 and sys.argv[1] == "series":
        return series(sys.argv[2])
    if len(sys.argv) >= 3 and sys.argv[1] == "areas":
        return areas(sys.argv[2])
    if len(sys.argv) >= 6 and sys.argv[1] == "cube":
        return cube(sys.argv[2], sys.argv[3], sys.argv[4], sys.argv[5])
    print(__doc__)
    return 2


if __name__ == "__main__":
    sys.exit(main())
