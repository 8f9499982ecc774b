#!/usr/bin/python3
"""Check plyledger's automatic render range against numpy.percentile.

Usage: render_percentile_ref.py VALUES_FILE P1 P99

VALUES_FILE holds one number a line, NaN for no data. P1 and P99 are the
limits plyledger chose. numpy.percentile with its default linear method
(numpy 1.24) is the reference; the finite values are float32 in the map.
"""
import sys

import numpy as np


def main():
    if len(sys.argv) != 4:
        sys.exit(__doc__)
    v = np.loadtxt(sys.argv[1], dtype=np.float64)
    v = v[np.isfinite(v)].astype(np.float32).astype(np.float64)
    want = np.percentile(v, [1.0, 99.0])  # default method "linear"
    got = np.array([float(sys.argv[2]), float(sys.argv[3])])
    tol = 1e-9 * max(1.0, np.abs(want).max())
    if np.abs(got - want).max() > tol:
        print(f"render_percentile_ref: plyledger {got}, numpy {want}", file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
