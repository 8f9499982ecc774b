#!/usr/bin/python3
"""Reference side of tests/test_reduce.c: numpy and scipy.

All binary files are raw little-endian arrays.

  reduce_ref.py polyfit IN DEG XLO XHI SCALE MIN_D2 MIN_SNR RATIO OUT [XQ...]
      IN holds float64 x[n], z[n] and frames[n] (the frames averaged in
      each sample). numpy.polyfit(x, z, DEG) fits them; OUT receives
      float64: the DEG + 1 coefficients, constant first; then for each XQ
      the values of the fit and of its first and second derivatives
      (numpy.polyder / numpy.polyval); then the abscissae of two interior
      maxima of the second derivative in (XLO, XHI), found from numpy.roots
      of the third derivative and the sign of the fourth (NaN when there is
      none):
        - the largest positive one;
        - the earliest significant one: its value d2 / SCALE^2 at least
          MIN_D2, its signal-to-noise ratio at least MIN_SNR and at least
          RATIO times the largest ratio among the maxima reaching MIN_D2.
          The noise of the fitted d2 at r is sigma * sqrt(sum_b w_b^2 /
          (frames_b R_b^2)), w = pinv(V)^T b(r) with numpy.linalg.pinv of
          the Vandermonde matrix V and b(r) the second derivatives of the
          monomials at r, R_b the fitted rise exp(fit) and sigma^2 =
          sum_b (z_b - fit_b)^2 frames_b R_b^2 / (n - DEG - 1).

  reduce_ref.py slab OUT V...
      The adiabatic slab's front-face response F(u) = 1 + 2 sum exp(-n^2
      pi^2 u) (Carslaw and Jaeger 1959, "Conduction of heat in solids",
      section 3.3) summed with numpy in its Fourier form only (30000 terms),
      at u = exp(V). OUT receives float64 triples: ln F and its first and
      second derivatives against ln u, from the term-by-term derivatives.

  reduce_ref.py slab-peak
      Checks with scipy.optimize.minimize_scalar on the same numpy series
      that d2 ln F / d ln u^2 peaks at u = 1/pi (t* = L^2 / (pi alpha)) and
      that d ln F / d ln u = -1/4 there. Exit 1 on a mismatch.

  reduce_ref.py phase OUT X...
      For each X = L / mu: arg coth((1 + i) X) in degrees (the 1-D phase
      contrast of a slab of thickness L over a semi-infinite body at the
      thermal diffusion length mu, from the Laplace transform of the slab
      solution) and arg(coth(z) - 1/z), z = (1 + i) X (the same transform
      without its plateau term C / (i omega), which a DFT of a truncated
      record at its own harmonics does not see). Checks first that
      arg coth((1+i)) = -14.075 degrees and arg coth((1+i) pi/2) = 0.

  reduce_ref.py rfft IN K OUT [ROWS]
      IN holds ROWS (default 1) records of float64 samples of equal length
      (float32 values, widened exactly); OUT receives, record after record,
      float64 pairs (real, imag) of numpy.fft.rfft(samples) at bins 0..K.
"""
import sys

import numpy as np


def polyfit(args):
    path, deg = args[0], int(args[1])
    xlo, xhi, scale = float(args[2]), float(args[3]), float(args[4])
    min_d2, min_snr, ratio, out = float(args[5]), float(args[6]), float(args[7]), args[8]
    xq = [float(a) for a in args[9:]]
    raw = np.fromfile(path, dtype='<f8')
    n = raw.size // 3
    x, z, frames = raw[:n], raw[n:2 * n], raw[2 * n:]
    p = np.polyfit(x, z, deg)
    res = list(p[::-1])
    d1, d2 = np.polyder(p, 1), np.polyder(p, 2)
    for q in xq:
        res += [np.polyval(p, q), np.polyval(d1, q), np.polyval(d2, q)]
    d3, d4 = np.polyder(p, 3), np.polyder(p, 4)
    maxima = []
    for root in np.roots(d3):
        if abs(root.imag) > 1e-9 * max(1.0, abs(root.real)):
            continue
        r = root.real
        if xlo < r < xhi and np.polyval(d4, r) < 0:
            maxima.append(r)
    maxima.sort()
    largest, largest_v = np.nan, 0.0
    for r in maxima:
        v = np.polyval(d2, r)
        if v > largest_v:
            largest, largest_v = r, v
    V = np.vander(x, deg + 1, increasing=True)
    P = np.linalg.pinv(V)
    fit = V @ P @ z
    rise = np.exp(fit)
    sigma2 = np.sum((z - fit) ** 2 * frames * rise ** 2) / (n - deg - 1)
    j = np.arange(deg + 1)
    cand = []
    for r in maxima:
        v = np.polyval(d2, r)
        if v > 0 and v / scale ** 2 >= min_d2:
            b = np.where(j >= 2, j * (j - 1) * r ** np.maximum(j - 2, 0), 0.0)
            w = P.T @ b
            cand.append((r, v / np.sqrt(sigma2 * np.sum(w ** 2 / (frames * rise ** 2)))))
    first = np.nan
    best = max([c[1] for c in cand], default=0.0)
    for r, snr in cand:
        if snr >= min_snr and snr >= ratio * best:
            first = r
            break
    res += [largest, first]
    np.asarray(res, dtype='<f8').tofile(out)


N = np.arange(1, 30001, dtype=np.float64)


def slab_series(v):
    u = np.exp(v)
    a = N * N * np.pi * np.pi * u
    e = np.exp(-a)
    f = 1.0 + 2.0 * e.sum()
    f1 = -2.0 * (a * e).sum()               # dF/dln u
    f2 = 2.0 * ((a * a - a) * e).sum()      # d2F/dln u^2
    return np.log(f), f1 / f, f2 / f - (f1 / f) ** 2


def slab_d2_many(vs):
    """slab_series(v)[2] for each v of vs at once (the same sums)."""
    u = np.exp(vs)[:, None]
    a = N * N * np.pi * np.pi * u
    e = np.exp(-a)
    f = 1.0 + 2.0 * e.sum(axis=1)
    f1 = -2.0 * (a * e).sum(axis=1)
    f2 = 2.0 * ((a * a - a) * e).sum(axis=1)
    return f2 / f - (f1 / f) ** 2


def slab(args):
    out = args[0]
    res = []
    for v in args[1:]:
        res += list(slab_series(float(v)))
    np.asarray(res, dtype='<f8').tofile(out)


def slab_peak(_args):
    from scipy.optimize import minimize_scalar  # only here: scipy is slow to import
    r = minimize_scalar(lambda v: -slab_series(v)[2], bracket=(-2.0, -1.2, -0.5),
                        tol=1e-12)
    u = np.exp(r.x)
    d1 = slab_series(r.x)[1]
    print('peak of d2 at u = %.12f (1/pi = %.12f), d1 there %.9f' % (u, 1 / np.pi, d1))
    bad = abs(u * np.pi - 1.0) > 1e-6 or abs(d1 + 0.25) > 1e-6
    # it is the global maximum over the range of interest
    grid = np.linspace(-8.0, 3.0, 2201)
    d2 = np.concatenate([slab_d2_many(grid[i:i + 100]) for i in range(0, grid.size, 100)])
    if abs(np.exp(grid[np.argmax(d2)]) * np.pi - 1.0) > 0.01:
        bad = True
    return 1 if bad else 0


def coth(z):
    return np.cosh(z) / np.sinh(z)


def phase(args):
    out = args[0]
    a1 = np.degrees(np.angle(coth((1 + 1j) * 1.0)))
    a2 = np.degrees(np.angle(coth((1 + 1j) * np.pi / 2)))
    print('arg coth((1+i)) = %.4f deg, arg coth((1+i) pi/2) = %.2e deg' % (a1, a2))
    if abs(a1 + 14.075) > 5e-4 or abs(a2) > 1e-9:
        return 1
    res = []
    for x in args[1:]:
        z = (1 + 1j) * float(x)
        res += [np.degrees(np.angle(coth(z))), np.degrees(np.angle(coth(z) - 1 / z))]
    np.asarray(res, dtype='<f8').tofile(out)
    return 0


def rfft(args):
    path, k, out = args[0], int(args[1]), args[2]
    rows = int(args[3]) if len(args) > 3 else 1
    x = np.fromfile(path, dtype='<f8').reshape(rows, -1)
    f = np.fft.rfft(x, axis=1)[:, :k + 1]
    np.stack([f.real, f.imag], axis=2).astype('<f8').tofile(out)


def main(argv):
    cmd, args = argv[1], argv[2:]
    if cmd == 'polyfit':
        polyfit(args)
    elif cmd == 'slab':
        slab(args)
    elif cmd == 'slab-peak':
        return slab_peak(args)
    elif cmd == 'phase':
        return phase(args)
    elif cmd == 'rfft':
        rfft(args)
    else:
        print('unknown command', cmd, file=sys.stderr)
        return 2
    return 0


if __name__ == '__main__':
    sys.exit(main(sys.argv))
