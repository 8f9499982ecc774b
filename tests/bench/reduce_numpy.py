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
  - time of the peak second log-derivative: the second derivative evaluated
    on 256 points for all pixels (in chunks), the largest positive interior
    local maximum, refined by a parabola; depth = sqrt(pi alpha t*);
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
GRID, CHUNK, REF_MAX = 256, 32768, 16384


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

    # peak of the second log-derivative by dense evaluation
    xg = np.linspace(x[0], x[-1], GRID)
    j = np.arange(DEGREE + 1)
    B2 = np.where(j >= 2, j * (j - 1) * xg[:, None] ** np.maximum(j - 2, 0), 0.0).astype(np.float32)
    tstar = np.full(npix, np.nan, dtype=np.float32)
    d2peak = np.full(npix, np.nan, dtype=np.float32)
    pc = np.full(npix, np.nan, dtype=np.float32)
    pct = np.full(npix, np.nan, dtype=np.float32)
    Vf = V.astype(np.float32)
    ref_rise = np.exp(V @ cref).astype(np.float32)
    dx = xg[1] - xg[0]
    for a in range(0, npix, CHUNK):
        c = C[:, a:a + CHUNK]
        D = B2 @ c
        inner = D[1:-1]
        is_max = (inner > D[:-2]) & (inner >= D[2:]) & (inner > 0)
        val = np.where(is_max, inner, -np.inf)
        k = np.argmax(val, axis=0)
        has = np.isfinite(val[k, np.arange(val.shape[1])])
        k1 = k + 1
        cols = np.arange(D.shape[1])
        y0, y1, y2 = D[k1 - 1, cols], D[k1, cols], D[k1 + 1, cols]
        den = y0 - 2 * y1 + y2
        with np.errstate(invalid='ignore', divide='ignore'):
            delta = np.where(den != 0, 0.5 * (y0 - y2) / den, 0.0)
        xp = xg[k1] + delta * dx
        tstar[a:a + CHUNK] = np.where(has, np.exp(centre + scale * xp), np.nan)
        d2peak[a:a + CHUNK] = np.where(has, (y1 - 0.25 * (y0 - y2) * delta) / scale ** 2, np.nan)
        # peak contrast over the sample times, refined by a parabola
        R = np.exp(Vf @ c) - ref_rise[:, None]
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
