#!/usr/bin/python3
"""Reference side of bench_change: one site's comparison in scipy and
scikit-image, the same steps as pl_change_site(), timed in this process.

  change_pipeline.py DIR REPEATS

DIR/baseline.f4 and DIR/current.f4 are two-channel maps, raw little-endian
float32, channel-major then row-major, 640 x 512 (width x height), pitch
1 mm: channel 0 a phase map (what is registered), channel 1 the temperature
contrast (what is compared). Prints one line:
"median_s min_s dx dy rotation_deg new grown stable growth_mm2".

Steps (each from the library named):
  1. Rotation: the Hann-windowed (skimage.filters.window) phase maps'
     Fourier magnitudes in polar coordinates (skimage.transform.warp_polar,
     one row a degree) registered with
     skimage.registration.phase_cross_correlation (upsample 20): a turn of
     the image is a shift of its spectrum's angle (common practice); then
     refined by scipy.optimize.minimize_scalar on the misfit of the
     translation's cross-correlation after turning back.
  2. Translation: the current map turned back (scipy.ndimage.affine_transform,
     linear) and registered with phase_cross_correlation (both maps
     Hann-windowed, plain cross-correlation, upsample 100). The two composed into one affine_transform (order 3) that
     carries the current temperature contrast onto the baseline grid (NaN
     outside: cval).
  3. Detection of each map as plyledger/detect.h's defaults: the
     background the largest of four line medians (scipy.ndimage.median_filter
     with 41-pixel line footprints along u, v and both diagonals) of the
     residual from a Gaussian trend (scipy.ndimage.gaussian_filter, sigma
     10 px), added back; the noise the MAD of a high-pass residual (value
     minus its 3 x 3 mean, scaled by sqrt(9/8) and 1.4826); hysteresis at 8
     and 3 sigma (skimage.filters.apply_hysteresis_threshold); regions
     labelled with 8-connectivity (scipy.ndimage.label, a 3 x 3 structure),
     those under 6 mm2 dropped; measured with skimage.measure.regionprops.
  4. Matching by overlap: every pair of labels sharing a pixel is an edge;
     the groups are the graph's connected components
     (scipy.sparse.csgraph.connected_components); unmatched indications
     take a partner whose centroid lies within 3 u + 1 px (u = 0.25 px).
     Classified new / vanished / grown (area growth beyond 20 mm2) /
     stable.
  5. Changed regions: the same hysteresis on the difference of the two
     signals, with the difference's own noise, outside every indication.
"""
import sys
import time

import numpy as np
from scipy import ndimage, sparse
from scipy.optimize import minimize_scalar
from scipy.sparse.csgraph import connected_components
from skimage.filters import apply_hysteresis_threshold, window
from skimage.measure import regionprops
from skimage.registration import phase_cross_correlation
from skimage.transform import warp_polar

W, H = 640, 512
GROWTH_MM2 = 20.0
TOL_PX = 3 * 0.25 + 1


def load(path):
    v = np.fromfile(path, dtype="<f4").reshape(2, H, W)
    return v[0].astype(np.float64), v[1].astype(np.float64)


def rotation_deg(fixed, moving):
    win = window("hann", fixed.shape)
    fa = np.abs(np.fft.fftshift(np.fft.fft2((fixed - fixed.mean()) * win)))
    fb = np.abs(np.fft.fftshift(np.fft.fft2((moving - moving.mean()) * win)))
    radius = min(fixed.shape) // 2
    pa = warp_polar(np.log1p(fa), radius=radius, output_shape=(360, radius))
    pb = warp_polar(np.log1p(fb), radius=radius, output_shape=(360, radius))
    # only the middle frequencies: the lowest carry the window, the highest the noise
    lo, hi = 2, radius // 4
    s, _, _ = phase_cross_correlation(pa[:, lo:hi], pb[:, lo:hi], upsample_factor=20,
                                      normalization=None)
    return float(s[0])


def rot_matrix(theta_deg):
    t = np.deg2rad(theta_deg)
    # (row, col) coordinates: the turn from u toward v
    return np.array([[np.cos(t), np.sin(t)], [-np.sin(t), np.cos(t)]])


def register(fixed, moving):
    """The transform carrying `moving` onto `fixed`: the output pixel o
    (row, col) takes moving at M o + offset."""
    c = (np.array(fixed.shape, dtype=np.float64) - 1) / 2
    theta = rotation_deg(fixed, moving)

    win = window("hann", fixed.shape)
    fw = (fixed - fixed.mean()) * win

    def aligned_at(th, up):
        m = rot_matrix(-th)
        derot = ndimage.affine_transform(moving, m, offset=c - m @ c, order=1, cval=np.nan)
        derot = np.nan_to_num(derot, nan=np.nanmean(derot))
        # windowed, plain cross-correlation: a smooth map's edges would
        # otherwise pull the peak toward zero
        s, _, _ = phase_cross_correlation(fw, (derot - derot.mean()) * win,
                                          upsample_factor=up, normalization=None)
        return ndimage.affine_transform(moving, m, offset=c - m @ (s + c), order=1,
                                        cval=np.nan), s

    def misfit(th):
        a, _ = aligned_at(th, 10)
        ok = np.isfinite(a)
        x, y = fixed[ok] - fixed[ok].mean(), a[ok] - a[ok].mean()
        return -float(x @ y / np.sqrt((x @ x) * (y @ y)))

    # the polar estimate is coarse (a smooth part has its energy in a few
    # low frequencies) and its sign depends on the axes' order: keep the
    # better sign, then refine the angle on the normalised cross-correlation
    # over the overlap (scipy.optimize.minimize_scalar, bounded, to 0.01
    # degree)
    th0 = min((theta, -theta), key=misfit)
    r = minimize_scalar(misfit, bounds=(th0 - 0.3, th0 + 0.3), method="bounded",
                        options={"xatol": 0.01})
    th = float(r.x)
    s = aligned_at(th, 100)[1]
    m = rot_matrix(-th)
    # aligned(o) = derot(o - s) = moving(m (o - s - c) + c)
    offset = c - m @ (s + c)
    return th, s, m, offset


def line_median_background(v):
    trend = ndimage.gaussian_filter(v, 10.0)
    r = v - trend
    n = 41
    fps = [np.ones((1, n), bool), np.ones((n, 1), bool), np.eye(n, dtype=bool),
           np.fliplr(np.eye(n, dtype=bool))]
    meds = [ndimage.median_filter(r, footprint=fp, mode="nearest") for fp in fps]
    return trend + np.max(meds, axis=0)


def noise_of(v):
    valid = np.isfinite(v)
    f = np.where(valid, v, 0.0)
    hp = f - ndimage.uniform_filter(f, 3)
    # only where the whole 3 x 3 neighbourhood holds data (a running sum
    # would carry a NaN along its line)
    hp = hp[ndimage.binary_erosion(valid, np.ones((3, 3), bool))]
    return 1.4826 * np.median(np.abs(hp - np.median(hp))) * np.sqrt(9.0 / 8.0)


def regions(signal, sigma, min_px=6):
    s = np.nan_to_num(signal, nan=-np.inf)
    mask = apply_hysteresis_threshold(s, 3 * sigma, 8 * sigma)
    lab, n = ndimage.label(mask, structure=np.ones((3, 3), int))
    if n:
        sizes = np.bincount(lab.ravel())
        keep = sizes >= min_px
        keep[0] = False
        lab = np.where(keep[lab], lab, 0)
        lab, n = ndimage.label(lab > 0, structure=np.ones((3, 3), int))
    return lab, n


def detect(v):
    valid = np.isfinite(v)
    filled = np.where(valid, v, np.nanmedian(v))
    signal = filled - line_median_background(filled)  # temperature contrast rises
    signal[~valid] = np.nan
    sigma = noise_of(v)
    lab, n = regions(signal, sigma)
    props = regionprops(lab)
    return lab, props, signal, sigma


def compare(lb, pb, lc, pc):
    nb, nc = len(pb), len(pc)
    both = (lb > 0) & (lc > 0)
    pairs = np.unique(np.stack([lb[both], lc[both]]), axis=1) if both.any() else np.zeros((2, 0), int)
    rows = list(pairs[0] - 1)
    cols = list(nb + pairs[1] - 1)
    matched_b = set(pairs[0]) if pairs.size else set()
    matched_c = set(pairs[1]) if pairs.size else set()
    for i, p in enumerate(pb, 1):
        if i in matched_b:
            continue
        best = None
        for j, q in enumerate(pc, 1):
            if j in matched_c:
                continue
            d = np.hypot(*(np.array(p.centroid) - np.array(q.centroid)))
            if d <= TOL_PX and (best is None or d < best[0]):
                best = (d, j)
        if best:
            rows.append(i - 1)
            cols.append(nb + best[1] - 1)
            matched_c.add(best[1])
    g = sparse.coo_matrix((np.ones(len(rows)), (rows, cols)), shape=(nb + nc, nb + nc))
    ncomp, comp = connected_components(g, directed=False)
    area_b = np.zeros(ncomp)
    area_c = np.zeros(ncomp)
    has_b = np.zeros(ncomp, bool)
    has_c = np.zeros(ncomp, bool)
    for i, p in enumerate(pb):
        area_b[comp[i]] += p.area
        has_b[comp[i]] = True
    for j, q in enumerate(pc):
        area_c[comp[nb + j]] += q.area
        has_c[comp[nb + j]] = True
    kinds = []
    for k in range(ncomp):
        if has_c[k] and not has_b[k]:
            kinds.append(("new", area_c[k]))
        elif has_b[k] and not has_c[k]:
            kinds.append(("vanished", -area_b[k]))
        elif area_c[k] - area_b[k] > GROWTH_MM2:
            kinds.append(("grown", area_c[k] - area_b[k]))
        else:
            kinds.append(("stable", area_c[k] - area_b[k]))
    return kinds


def pipeline(b_phase, b_tc, c_phase, c_tc):
    th, s, m, offset = register(b_phase, c_phase)
    aligned = ndimage.affine_transform(c_tc, m, offset=offset, order=3, cval=0.0)
    # the coverage: where the current map has data (a NaN cval would spread
    # through the spline's prefilter)
    cover = ndimage.affine_transform(np.ones_like(c_tc), m, offset=offset, order=0, cval=0.0)
    aligned[cover < 0.5] = np.nan
    lb, pb, sb, sigb = detect(b_tc)
    lc, pc, sc, sigc = detect(aligned)
    kinds = compare(lb, pb, lc, pc)
    d = sc - sb
    d[~np.isfinite(d)] = np.nan
    dl, dn = regions(d, noise_of(d))
    outside = (dl > 0) & (lb == 0) & (lc == 0)
    rl, rn = ndimage.label(outside, structure=np.ones((3, 3), int))
    return th, s, kinds, rn


def main(argv):
    if len(argv) != 3:
        sys.exit(__doc__)
    b_phase, b_tc = load(argv[1] + "/baseline.f4")
    c_phase, c_tc = load(argv[1] + "/current.f4")
    reps = int(argv[2])
    out = pipeline(b_phase, b_tc, c_phase, c_tc)
    times = []
    for _ in range(reps):
        t0 = time.perf_counter()
        out = pipeline(b_phase, b_tc, c_phase, c_tc)
        times.append(time.perf_counter() - t0)
    th, s, kinds, _ = out
    # the shift in plyledger's convention: what the current map shows at p
    # lies on the baseline at p + d, x along columns; phase_cross_correlation's
    # shift is what moves the current map onto the baseline: that d
    count = {k: sum(1 for kk, _ in kinds if kk == k) for k in ("new", "grown", "stable")}
    growth = sum(a for kk, a in kinds if kk == "grown")
    print("%.6f %.6f %.4f %.4f %.4f %d %d %d %.1f" % (
        float(np.median(times)), min(times), s[1], s[0], th,
        count["new"], count["grown"], count["stable"], growth))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
