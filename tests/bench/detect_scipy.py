#!/usr/bin/python3
"""Reference side of bench_detect: scipy.ndimage timed on the same images.

Masks are raw uint8 (0 or 1), labels raw little-endian uint32, signals raw
little-endian float32, row-major.

  detect_scipy.py label MASK W H REPEATS
      Times scipy.ndimage.label(mask, structure=np.ones((3, 3))) REPEATS
      times (after one untimed call); prints "median_s min_s components".

  detect_scipy.py measure LABELS SIGNAL W H N REPEATS
      Times the area, centroid and peak of labels 1..N with
      scipy.ndimage.sum(ones, labels, index), center_of_mass(ones, labels,
      index) and maximum(signal, labels, index), index = 1..N, REPEATS
      times (after one untimed call); prints "median_s min_s area_total
      peak_sum" (the last two for a check against plyledger's).
"""
import sys
import time

import numpy as np
from scipy import ndimage


def timed(fn, repeats):
    fn()
    t = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        t.append(time.perf_counter() - t0)
    return float(np.median(t)), min(t), out


def main(argv):
    if len(argv) == 6 and argv[1] == 'label':
        w, h, reps = int(argv[3]), int(argv[4]), int(argv[5])
        mask = np.fromfile(argv[2], dtype=np.uint8).reshape(h, w)
        st = np.ones((3, 3), dtype=int)
        med, mn, (_, n) = timed(lambda: ndimage.label(mask, structure=st), reps)
        print('%.6f %.6f %d' % (med, mn, n))
        return 0
    if len(argv) == 8 and argv[1] == 'measure':
        w, h, n, reps = int(argv[4]), int(argv[5]), int(argv[6]), int(argv[7])
        lab = np.fromfile(argv[2], dtype='<u4').reshape(h, w).astype(np.int32)
        sig = np.fromfile(argv[3], dtype='<f4').reshape(h, w)
        ones = np.ones((h, w), dtype=np.float32)
        idx = np.arange(1, n + 1)

        def measure():
            area = ndimage.sum(ones, lab, idx)
            com = ndimage.center_of_mass(ones, lab, idx)
            peak = ndimage.maximum(sig, lab, idx)
            return area, com, peak

        med, mn, (area, _, peak) = timed(measure, reps)
        print('%.6f %.6f %.0f %.6f' % (med, mn, area.sum(), float(np.sum(peak))))
        return 0
    sys.exit(__doc__)


if __name__ == '__main__':
    sys.exit(main(sys.argv))
