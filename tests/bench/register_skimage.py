#!/usr/bin/python3
"""Reference side of bench_register: the pairs, and scikit-image's
phase_cross_correlation timed on them.

Images are raw little-endian float32, row-major, 640 x 512 (width x
height). Shifts are in the convention of plyledger/register.h: what the
moving image shows at p lies on the fixed image at p + d (d = (dx, dy),
x along columns); scikit-image's returned shift (row, col) is that d.

  register_skimage.py make DIR
      The photograph: skimage.data.coffee() in grey (skimage.color.rgb2gray,
      times 255), enlarged by 1.4 with skimage.transform.rescale (cubic
      spline, anti-aliased) to 560 x 840. Pair "shift": that image shifted
      by d = (7.37, -4.62) with the Fourier shift theorem
      (scipy.ndimage.fourier_shift) and the central 512 x 640 of both
      kept. Pair "rot": the image rotated by 3.2 degrees about its centre
      and shifted by (-5.25, 2.81) with scipy.ndimage.affine_transform
      (spline of order 5), the same crop. Writes DIR/{shift,rot}.{fixed,
      moving} and DIR/pairs.txt: "name width height dx dy theta_deg".

  register_skimage.py time DIR REPEATS
      Loads DIR/shift.{fixed,moving} as float64 and times
      skimage.registration.phase_cross_correlation(fixed, moving,
      upsample_factor=100) REPEATS times (after one untimed call); prints
      "median_s min_s dx dy".
"""
import os
import sys
import time

import numpy as np
from scipy import ndimage
from skimage import color, data, transform
from skimage.registration import phase_cross_correlation

W, H = 640, 512


def crop(img):
    h, w = img.shape
    oy, ox = (h - H) // 2, (w - W) // 2
    return img[oy:oy + H, ox:ox + W]


def write(path, img):
    np.ascontiguousarray(img, dtype="<f4").tofile(path)


def make(out):
    os.makedirs(out, exist_ok=True)
    img = color.rgb2gray(data.coffee()) * 255.0
    img = transform.rescale(img, 1.4, order=3, anti_aliasing=True, mode="reflect")
    assert img.shape == (560, 840), img.shape
    lines = []
    dx, dy = 7.37, -4.62
    F = np.fft.fft2(img)
    mov = np.real(np.fft.ifft2(ndimage.fourier_shift(F, shift=(-dy, -dx))))
    write(os.path.join(out, "shift.fixed"), crop(img))
    write(os.path.join(out, "shift.moving"), crop(mov))
    lines.append("shift %d %d %.6f %.6f %.6f" % (W, H, dx, dy, 0.0))
    theta, dx, dy = 3.2, -5.25, 2.81
    t = np.deg2rad(theta)
    m = np.array([[np.cos(t), np.sin(t)], [-np.sin(t), np.cos(t)]])  # R(theta) on (y, x)
    C = (np.array(img.shape, dtype=np.float64) - 1.0) / 2.0
    rot = ndimage.affine_transform(img, m, offset=C - m @ C + np.array([dy, dx]), order=5,
                                   mode="reflect")
    write(os.path.join(out, "rot.fixed"), crop(img))
    write(os.path.join(out, "rot.moving"), crop(rot))
    lines.append("rot %d %d %.6f %.6f %.6f" % (W, H, dx, dy, theta))
    with open(os.path.join(out, "pairs.txt"), "w") as f:
        f.write("\n".join(lines) + "\n")


def time_it(out, repeats):
    fixed = np.fromfile(os.path.join(out, "shift.fixed"), "<f4").reshape(H, W).astype(np.float64)
    moving = np.fromfile(os.path.join(out, "shift.moving"), "<f4").reshape(H, W).astype(np.float64)
    phase_cross_correlation(fixed, moving, upsample_factor=100)
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        s, _, _ = phase_cross_correlation(fixed, moving, upsample_factor=100)
        times.append(time.perf_counter() - t0)
    print("%.6f %.6f %.6f %.6f" % (float(np.median(times)), min(times), s[1], s[0]))


def main():
    if len(sys.argv) == 3 and sys.argv[1] == "make":
        make(sys.argv[2])
    elif len(sys.argv) == 4 and sys.argv[1] == "time":
        time_it(sys.argv[2], int(sys.argv[3]))
    else:
        raise SystemExit(__doc__)


if __name__ == "__main__":
    main()
