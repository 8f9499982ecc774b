#!/usr/bin/python3
"""Reference side of tests/test_fft.c: numpy's FFTs.

Inputs are raw little-endian float32, row-major; outputs raw little-endian
float64, each complex value as its real then its imaginary part.

  fft_ref.py rfft IN N OUT
      numpy.fft.rfft of the N values of IN (in float64): N // 2 + 1 values.

  fft_ref.py rfft2 IN H W OUT
      numpy.fft.rfft2 of the H x W image in IN (in float64): H rows of
      W // 2 + 1 values.
"""
import sys

import numpy as np


def write_complex(path, z):
    out = np.empty(z.shape + (2,), dtype='<f8')
    out[..., 0] = z.real
    out[..., 1] = z.imag
    out.tofile(path)


def main(argv):
    if len(argv) == 5 and argv[1] == 'rfft':
        x = np.fromfile(argv[2], dtype='<f4').astype(np.float64)
        n = int(argv[3])
        if x.size != n:
            sys.exit('rfft: %d values in %s, not %d' % (x.size, argv[2], n))
        write_complex(argv[4], np.fft.rfft(x))
    elif len(argv) == 6 and argv[1] == 'rfft2':
        x = np.fromfile(argv[2], dtype='<f4').astype(np.float64)
        h, w = int(argv[3]), int(argv[4])
        if x.size != h * w:
            sys.exit('rfft2: %d values in %s, not %d x %d' % (x.size, argv[2], h, w))
        write_complex(argv[5], np.fft.rfft2(x.reshape(h, w)))
    else:
        sys.exit(__doc__)


if __name__ == '__main__':
    main(sys.argv)
