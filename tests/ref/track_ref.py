#!/usr/bin/python3
"""Reference side of tests/test_track.c: numpy.polyfit with weights and its
covariance, and the forecast interval found by scipy's root finder.

  track_ref.py fit IN OUT K
      IN holds one case a line: "n L x1..xn y1..yn s1..sn". For each case,
      numpy.polyfit(x, y, 1, w=1/s, cov='unscaled') and cov=True (the
      covariance scaled by chi2 / (n - 2), numpy's convention) give the
      slope b, intercept a and the covariances. The covariance a forecast
      uses is the unscaled one times max(1, chi2 / (n - 2)) (n >= 3). When
      b > K sqrt(Vbb), the limit L is finite and the band a + b x +- K
      sqrt(Vaa + 2 x Vab + x^2 Vbb) reaches L on both sides, the two
      crossings are found with scipy.optimize.brentq (an independent root
      finder, not the closed form). OUT gets one line a case:
      "b a Vbb_unscaled Vaa_unscaled Vab_unscaled factor growing x* lo hi",
      nan where a value does not exist.
"""
import math
import sys

import numpy as np
from scipy.optimize import brentq


def crossing(f, x0, step):
    """A root of f beyond x0 in the direction of step, bracketed by doubling."""
    a, fa = x0, f(x0)
    for _ in range(200):
        b = a + step
        fb = f(b)
        if fa == 0:
            return a
        if fa * fb <= 0:
            return brentq(f, a, b, xtol=1e-12, rtol=1e-14, maxiter=500)
        a, fa = b, fb
        step *= 2
    return float('nan')


def fit(path_in, path_out, k):
    out = []
    with open(path_in) as f:
        for line in f:
            v = [float(t) for t in line.split()]
            if not v:
                continue
            n = int(v[0])
            lim = v[1]
            x = np.array(v[2:2 + n])
            y = np.array(v[2 + n:2 + 2 * n])
            s = np.array(v[2 + 2 * n:2 + 3 * n])
            p, cu = np.polyfit(x, y, 1, w=1.0 / s, cov='unscaled')
            b, a = p
            vbb, vab, vaa = cu[0, 0], cu[0, 1], cu[1, 1]
            factor = 1.0
            if n >= 3:
                _, cs = np.polyfit(x, y, 1, w=1.0 / s, cov=True)
                factor = max(1.0, cs[0, 0] / vbb)
            Vbb, Vab, Vaa = vbb * factor, vab * factor, vaa * factor
            growing = b > k * math.sqrt(Vbb)
            xs = lo = hi = float('nan')
            if growing and math.isfinite(lim):
                xs = (lim - a) / b
                scale = max(abs(xs), float(np.ptp(x)), 1.0) * 1e-3

                def band(sign):
                    return lambda t: a + b * t + sign * k * math.sqrt(
                        max(Vaa + 2 * t * Vab + t * t * Vbb, 0.0)) - lim
                # the upper band reaches L first (lower end), the lower band last
                lo = crossing(band(+1), xs, -scale)
                hi = crossing(band(-1), xs, +scale)
            out.append('%.17g %.17g %.17g %.17g %.17g %.17g %d %.17g %.17g %.17g' %
                       (b, a, vbb, vaa, vab, factor, int(growing), xs, lo, hi))
    with open(path_out, 'w') as f:
        f.write('\n'.join(out) + '\n')
    print('track_ref fit: %d cases' % len(out))


if __name__ == '__main__':
    if len(sys.argv) == 5 and sys.argv[1] == 'fit':
        fit(sys.argv[2], sys.argv[3], float(sys.argv[4]))
    else:
        sys.exit(__doc__)
