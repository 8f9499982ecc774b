#!/usr/bin/python3
"""Reference side of tests/test_filter.c: scipy.ndimage and numpy.

Images are raw little-endian float32, row-major, NaN for no data; outputs
raw little-endian float64.

  filter_ref.py gauss IN H W SIGMA TRUNCATE OUT
      Normalised convolution by scipy.ndimage.gaussian_filter(sigma,
      truncate=TRUNCATE, mode='constant'): the blur of the image with its
      pixels without data set to 0, over the blur of its mask of pixels
      with data; NaN where the image has none. On an image with every
      pixel, and on a single row or column with holes, this is what
      plyledger's separable blur means by renormalising the weights over
      the taps that fall on data.

  filter_ref.py median IN H W K OUT
      scipy.ndimage.median_filter(size=K, mode='reflect'); the test reads
      it only where the K x K window lies inside the image.

  filter_ref.py nanmedian IN H W K OUT
      numpy.nanmedian of each pixel's K x K window cut to the image, NaN
      where the pixel has no data.
"""
import sys

import numpy as np
from scipy import ndimage


def load(path, h, w):
    x = np.fromfile(path, dtype='<f4')
    if x.size != h * w:
        sys.exit('%s: %d values, not %d x %d' % (path, x.size, h, w))
    return x.reshape(h, w).astype(np.float64)


def gauss(x, sigma, truncate):
    ok = np.isfinite(x)
    num = ndimage.gaussian_filter(np.where(ok, x, 0.0), sigma, truncate=truncate,
                                  mode='constant', cval=0.0)
    den = ndimage.gaussian_filter(ok.astype(np.float64), sigma, truncate=truncate,
                                  mode='constant', cval=0.0)
    out = num / den
    out[~ok] = np.nan
    return out


def nanmedian(x, k):
    h, w = x.shape
    r = k // 2
    out = np.full_like(x, np.nan)
    for y in range(h):
        for i in range(w):
            if np.isfinite(x[y, i]):
                win = x[max(0, y - r):y + r + 1, max(0, i - r):i + r + 1]
                out[y, i] = np.nanmedian(win)
    return out


def main(argv):
    if len(argv) == 8 and argv[1] == 'gauss':
        x = load(argv[2], int(argv[3]), int(argv[4]))
        out = gauss(x, float(argv[5]), float(argv[6]))
        dst = argv[7]
    elif len(argv) == 7 and argv[1] in ('median', 'nanmedian'):
        x = load(argv[2], int(argv[3]), int(argv[4]))
        k = int(argv[5])
        if argv[1] == 'median':
            out = ndimage.median_filter(x, size=k, mode='reflect')
        else:
            out = nanmedian(x, k)
        dst = argv[6]
    else:
        sys.exit(__doc__)
    out.astype('<f8').tofile(dst)


if __name__ == '__main__':
    main(sys.argv)
