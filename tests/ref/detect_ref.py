#!/usr/bin/python3
"""Reference side of tests/test_detect.c: scipy.ndimage and skimage.measure.

Masks are raw uint8 (0 or 1), labels raw little-endian uint32, signals raw
little-endian float32, all row-major; outputs raw little-endian float64.

  detect_ref.py label DIR
      DIR/cases.txt holds one line per case, "NAME W H". For each,
      scipy.ndimage.label(mask, structure=np.ones((3, 3))) of DIR/NAME.mask
      is compared with plyledger's labels DIR/NAME.labels: the same number
      of components, zero exactly where the mask is, and the same partition
      (each plyledger label meets one scipy label and each scipy label one
      plyledger label). Prints one line per case; exits 1 on any mismatch.

  detect_ref.py measure LABELS SIGNAL W H N OUT
      For labels 1..N: scipy.ndimage.sum(signal), sum(ones) (the area),
      center_of_mass(ones) (row, col), maximum(signal), and
      skimage.measure.regionprops: area, centroid (row, col), orientation,
      major_axis_length, minor_axis_length, perimeter, bbox (min_row,
      min_col, max_row, max_col: the maxima exclusive). 16 values a label,
      label by label, in that order.
"""
import sys

import numpy as np
from scipy import ndimage
from skimage import measure


def read(path, dtype, h, w):
    x = np.fromfile(path, dtype=dtype)
    if x.size != h * w:
        sys.exit('%s: %d values, not %d x %d' % (path, x.size, h, w))
    return x.reshape(h, w)


def label(folder):
    bad = 0
    with open(folder + '/cases.txt') as f:
        cases = [line.split() for line in f if line.strip()]
    for name, w, h in cases:
        w, h = int(w), int(h)
        mask = read('%s/%s.mask' % (folder, name), np.uint8, h, w)
        ours = read('%s/%s.labels' % (folder, name), '<u4', h, w).astype(np.int64)
        theirs, n = ndimage.label(mask, structure=np.ones((3, 3), dtype=int))
        fg = mask != 0
        problems = []
        if ours.max() != n:
            problems.append('%d components, scipy %d' % (ours.max(), n))
        if np.any((ours != 0) != fg):
            problems.append('labels do not cover the mask exactly')
        pairs = np.unique(ours[fg] * (n + 1) + theirs[fg])
        if pairs.size != n:
            problems.append('%d (ours, scipy) label pairs for %d components' % (pairs.size, n))
        print('%s: %d x %d, density %.3f, %d components%s' %
              (name, w, h, fg.mean(), n, ': ' + '; '.join(problems) if problems else ''))
        bad += bool(problems)
    return 1 if bad else 0


def measures(labels_path, signal_path, w, h, n, out):
    lab = read(labels_path, '<u4', h, w).astype(np.int64)
    sig = read(signal_path, '<f4', h, w).astype(np.float64)
    idx = np.arange(1, n + 1)
    ones = np.ones_like(sig)
    s = ndimage.sum(sig, lab, idx)
    area = ndimage.sum(ones, lab, idx)
    com = np.array(ndimage.center_of_mass(ones, lab, idx))
    mx = ndimage.maximum(sig, lab, idx)
    res = np.full((n, 16), np.nan)
    res[:, 0] = s
    res[:, 1] = area
    res[:, 2:4] = com
    res[:, 4] = mx
    for p in measure.regionprops(lab):
        r = res[p.label - 1]
        r[5] = p.area
        r[6:8] = p.centroid
        r[8] = p.orientation
        r[9] = p.major_axis_length
        r[10] = p.minor_axis_length
        r[11] = p.perimeter
        r[12:16] = p.bbox
    res.astype('<f8').tofile(out)
    return 0


def main(argv):
    if len(argv) == 3 and argv[1] == 'label':
        return label(argv[2])
    if len(argv) == 8 and argv[1] == 'measure':
        return measures(argv[2], argv[3], int(argv[4]), int(argv[5]), int(argv[6]), argv[7])
    sys.exit(__doc__)


if __name__ == '__main__':
    sys.exit(main(sys.argv))
