#!/usr/bin/python3
"""The reduction of plyledger/reduce.h written the way one would in NumPy,
for bench_reduce: same defaults, same products, vectorised over all pixels.

  reduce_numpy.py MANIFEST [--chunked]

Reads a plyledger-sequence-1 manifest with a float32 .npy cube, then:
  - cold reference: mean of the pre-flash frames per pixel;
  - one pass over the frames: numpy.add.reduceat sums the frames of every
    segment between consecutive bin boundaries (the union of the 64
    log-spaced bins' and the 64 uniform pulse-phase bins' boundaries), and
    the segments are combined into both binnings;
  - ln of the mean rise per log bin; one shared Vandermonde matrix in the
    centred and scaled ln t, numpy.linalg.pinv applied to all pixels at once
    (a pixel with any invalid bin is masked, not refitted);
  - time of the peak second log-derivative by the default rule of
    plyledger/reduce.h: the third derivative on 64 grid points for all
    pixels (in chunks); at each sign change from + to - (an interior
    maximum of d2) d2 at the secant root and its noise (the per-frame noise
    from the weighted residuals, propagated through the pseudo-inverse);
    the earliest maximum with d2 >= 0.04 (per (ln t)^2), d2 / noise >= 6
    and >= 0.3 of the pixel's largest such ratio, refined by three Newton
    steps; depth = sqrt(pi alpha t*);
  - contrast against the per-bin median over the valid pixels of every s-th
    row (at most 16384 pixels), peak
    contrast over the sample times refined by a parabola, and its time;
  - pulse phase: numpy.fft.rfft over the 64 uniform bins, phase, amplitude
    and phase contrast at the first 4 harmonics.
By default the cube is opened with np.load(mmap_mode='r'); --chunked reads
each segment's frames with numpy.fromfile in blocks of 16 frames instead,
so the cube is never mapped whole.
"""
import json
import os
import sys

import numpy as np

START, END, SAMPLES, DEGREE = 0.05, 20.0, 64, 10   # PL_REDUCE_DEFAULT_*
NFREQ, M, ALPHA = 4, 64, 0.4
GRID, CHUNK, REF_MAX = 64, 32768, 16384
MIN_D2, MIN_SNR, LOBE = 0.04, 6.0, 0.3                # PL_REDUCE_DEFAULT_PEAK_*


def npy_layout(path):
    with open(path, 'rb') as f:
        version = np.lib.format.read_magic(f)
        if version == (1, 0):
            shape, _, dtype = np.lib.format.read_array_header_1_0(f)
        else:
            shape, _, dtype = np.lib.format.read_array_header_2_0(f)
        return shape, dtype, f.tell()


def main(argv):
    manifest, chunked = argv[1], '--chunked' in argv[2:]
    with open(manifest) as f:
        man = json.load(f)
    path = os.path.join(os.path.dirname(manifest), man['data'])
    rate, flash, pre = man['frame_rate_hz'], man['flash_time_s'], man['preflash_frames']
    if chunked:
        shape, dtype, offset = npy_layout(path)
        fh = open(path, 'rb')
        npix = shape[1] * shape[2]

        def segment_sum(i0, i1):
            acc = np.zeros(npix, dtype=np.float32)
            for j in range(i0, i1, 16):
                k = min(16, i1 - j)
                fh.seek(offset + j * npix * dtype.itemsize)
                block = np.fromfile(fh, dtype=dtype, count=k * npix).reshape(k, npix)
                acc += block.sum(axis=0, dtype=np.float32)
            return acc
    else:
        cube = np.load(path, mmap_mode='r')
        shape = cube.shape
        npix = shape[1] * shape[2]
        flat = cube.reshape(shape[0], npix)
    nframes, height, width = shape
    t = np.arange(nframes) / rate - flash

    cold = (segment_sum(0, pre) if chunked else flat[:pre].sum(axis=0, dtype=np.float64)) / pre
    cold = cold.astype(np.float32)
    first = pre + int(np.argmax(t[pre:] > 0))
    start, end = max(START, t[first]), min(END, t[-1])
    edges = start * (end / start) ** (np.arange(SAMPLES + 1) / SAMPLES)
    edges[0], edges[-1] = start, end
    idx = np.arange(first, nframes)
    tt = t[idx]
    lbin = np.where((tt >= start) & (tt <= end),
                    np.clip(np.searchsorted(edges, tt, side='right') - 1, 0, SAMPLES - 1), -1)
    trunc = end
    pbin = np.where((tt > 0) & (tt < trunc), np.minimum((tt / (trunc / M)).astype(int), M - 1), -1)
    # segments: runs of frames with the same (log bin, phase bin)
    key = lbin * (M + 1) + pbin
    used = (lbin >= 0) | (pbin >= 0)
    starts = [i for i in range(len(idx)) if used[i] and (i == 0 or key[i] != key[i - 1])]
    seg_start = idx[starts]
    seg_end = np.append(seg_start[1:], idx[np.nonzero(used)[0][-1]] + 1)
    if chunked:
        sums = np.stack([segment_sum(a, b) for a, b in zip(seg_start, seg_end)])
    else:
        sums = np.add.reduceat(flat[seg_start[0]:seg_end[-1]], seg_start - seg_start[0], axis=0,
                               dtype=np.float32)
    counts = (seg_end - seg_start).astype(np.float32)
    seg_l, seg_p = lbin[starts], pbin[starts]

    # log bins: ln of the mean rise
    bins = [b for b in range(SAMPLES) if np.any(seg_l == b)]
    Z = np.empty((len(bins), npix), dtype=np.float32)
    lnt = np.empty(len(bins))
    for r, b in enumerate(bins):
        sel = np.nonzero(seg_l == b)[0]
        n = counts[sel].sum()
        Z[r] = sums[sel].sum(axis=0) / n - cold
        lnt[r] = np.log(tt[lbin == b]).mean()
    with np.errstate(invalid='ignore', divide='ignore'):
        np.log(Z, out=Z)
    centre, scale = 0.5 * (lnt[0] + lnt[-1]), 0.5 * (lnt[-1] - lnt[0])
    x = (lnt - centre) / scale
    V = np.vander(x, DEGREE + 1, increasing=True)
    P = np.linalg.pinv(V)
    valid = np.isfinite(Z).all(axis=0)
    Z[:, ~valid] = 0
    C = P.astype(np.float32) @ Z                      # (k, npix) coefficients
    C[:, ~valid] = np.nan

    # uniform bins for pulse phase
    U = np.zeros((M, npix), dtype=np.float32)
    for m in range(M):
        sel = np.nonzero(seg_p == m)[0]
        if len(sel):
            U[m] = sums[sel].sum(axis=0) / counts[sel].sum() - cold

    # reference: median over a strided sample of valid pixels
    rows = max(1, REF_MAX // width)
    ystride = -(-height // rows)
    sample = (np.arange(0, height, ystride)[:, None] * width + np.arange(width)[None, :]).ravel()
    sample = sample[valid[sample] & np.isfinite(U[:, sample]).all(axis=0)]
    zref = np.median(Z[:, sample], axis=1)
    cref = P @ zref
    uref = np.median(U[:, sample], axis=1)

    # peak of the second log-derivative: the first significant maximum
    xg = np.linspace(x[0], x[-1], GRID)
    j = np.arange(DEGREE + 1)

    def basis(xs, order):
        """d^order/dx^order of x^j at xs: (len(xs), DEGREE + 1)"""
        f = np.ones_like(j, dtype=float)
        for o in range(order):
            f = f * (j - o)
        return np.where(j >= order, f * xs[:, None] ** np.maximum(j - order, 0), 0.0)

    B3 = basis(xg, 3).astype(np.float32)
    W2 = (basis(xg, 2) @ P) ** 2                         # squared weights of d2 (GRID, n)
    frames = np.array([np.count_nonzero(lbin == b) for b in bins], dtype=float)
    tstar = np.full(npix, np.nan, dtype=np.float32)
    d2peak = np.full(npix, np.nan, dtype=np.float32)
    pc = np.full(npix, np.nan, dtype=np.float32)
    pct = np.full(npix, np.nan, dtype=np.float32)
    Vf = V.astype(np.float32)
    ref_rise = np.exp(V @ cref).astype(np.float32)
    h = xg[1] - xg[0]
    for a in range(0, npix, CHUNK):
        c = C[:, a:a + CHUNK]
        cols = np.arange(c.shape[1])
        D3 = B3 @ c                                      # (GRID, chunk)
        is_max = (D3[:-1] > 0) & (D3[1:] <= 0)           # interval g - 1 .. g
        with np.errstate(invalid='ignore', divide='ignore'):
            frac = np.where(is_max, D3[:-1] / (D3[:-1] - D3[1:]), 0.5)
        xs = xg[:-1, None] + frac * h                    # secant roots
        cd = c.astype(np.float64)
        v = np.zeros_like(xs)
        for i in range(DEGREE, 1, -1):                   # d2 by Horner
            v = v * xs + i * (i - 1) * cd[i]
        Yf = Vf @ c
        R = np.exp(Yf)
        sigma2 = ((Z[:, a:a + CHUNK] - Yf) ** 2 * frames[:, None] * R ** 2).sum(axis=0) / (
            len(x) - DEGREE - 1)
        Q = 1.0 / (frames[:, None] * R ** 2)
        var = ((1 - frac) * (W2[:-1] @ Q) + frac * (W2[1:] @ Q)) * sigma2
        with np.errstate(invalid='ignore', divide='ignore'):
            snr = np.where(is_max & (v > 0) & (v >= MIN_D2 * scale ** 2), v / np.sqrt(var), np.nan)
        best = np.nanmax(np.where(np.isnan(snr), -np.inf, snr), axis=0)
        ok = (snr >= MIN_SNR) & (snr >= LOBE * best)
        first = np.argmax(ok, axis=0)
        has = ok[first, cols]
        xr = xs[first, cols]
        c3 = np.array([[i * (i - 1) * (i - 2) for i in range(DEGREE + 1)]]).T * cd
        for _ in range(3):                               # Newton on d3
            f3 = np.zeros_like(xr)
            f4 = np.zeros_like(xr)
            for i in range(DEGREE, 2, -1):
                f3 = f3 * xr + c3[i]
            for i in range(DEGREE, 3, -1):
                f4 = f4 * xr + (i - 3) * c3[i]
            with np.errstate(invalid='ignore', divide='ignore'):
                xr = np.clip(xr - f3 / f4, xg[first], xg[first + 1])
        vr = np.zeros_like(xr)
        for i in range(DEGREE, 1, -1):
            vr = vr * xr + i * (i - 1) * cd[i]
        tstar[a:a + CHUNK] = np.where(has, np.exp(centre + scale * xr), np.nan)
        d2peak[a:a + CHUNK] = np.where(has, vr / scale ** 2, np.nan)
        # peak contrast over the sample times, refined by a parabola
        R = R - ref_rise[:, None]
        braw = np.argmax(R, axis=0)
        inside = (braw > 0) & (braw < len(x) - 1)
        b = np.clip(braw, 1, len(x) - 2)
        r0, r1, r2 = R[b - 1, cols], R[b, cols], R[b + 1, cols]
        x0, x1, x2 = x[b - 1], x[b], x[b + 1]
        d01, d12 = (r1 - r0) / (x1 - x0), (r2 - r1) / (x2 - x1)
        curv = (d12 - d01) / (x2 - x0)
        with np.errstate(invalid='ignore', divide='ignore'):
            xv = np.clip(0.5 * (x0 + x1) - d01 / (2 * curv), x0, x2)
        Xv = xv[None, :] ** j[:, None]
        yv = np.exp((c * Xv).sum(axis=0)) - np.exp(cref @ Xv)
        better = inside & (curv < 0) & (yv > r1)
        best = R[braw, cols]
        pc[a:a + CHUNK] = np.where(better, yv, best)
        pct[a:a + CHUNK] = np.exp(centre + scale * np.where(better, xv, x[braw]))
    depth = np.sqrt(np.pi * ALPHA * tstar)

    F = np.fft.rfft(U, axis=0)[1:NFREQ + 1]
    Fr = np.fft.rfft(uref)[1:NFREQ + 1]
    phase = np.angle(F)
    amplitude = 2 * np.abs(F) / M
    contrast = np.angle(F * np.conj(Fr)[:, None])

    maps = np.concatenate([tstar[None], d2peak[None], depth[None], pc[None], pct[None],
                           phase, amplitude, contrast]).astype(np.float32)
    maps = maps.reshape(-1, height, width)
    print('  numpy%s: %d frames, %d samples, depth %.3f mm (0.5) and %.3f mm (4.0), %d maps'
          % (' chunked' if chunked else '', int(counts.sum()) + pre, len(bins),
             maps[2, 128, 80], maps[2, 10, 10], maps.shape[0]))
    return 0


if __name__ == '__main__':
    sys.exit(main(sys.argv))
