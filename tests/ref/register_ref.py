#!/usr/bin/python3
"""Reference side of tests/test_register.c: numpy, scipy and scikit-image.

Images are raw little-endian float32, row-major. Every transform is given
in the convention of plyledger/register.h: what the moving image shows at
pixel p_c lies on the fixed image at p_b = c + R(theta) (p_c - c) + d,
c the centre of the grid, (x, y) = (column, row), R turning from +x
toward +y.

  register_ref.py make OUTDIR
      Writes the test pairs into OUTDIR and lists them in OUTDIR/pairs.txt,
      one per line:  id kind width height dx dy theta_deg snr photo
      with files id.fixed and id.moving. Photographs come from
      scikit-image's bundled data (skimage.data.camera, astronaut in grey
      by skimage.color.rgb2gray, coffee in grey), as float32 in [0, 255].
        shift:  the whole photograph shifted by d with the Fourier shift
                theorem (scipy.ndimage.fourier_shift; a circular shift,
                exact for the band-limited image) and the central
                384 x 448 pixels of both kept, so that the borders differ
                as in real pairs;
        circ:   the same shift without the crop (a circular pair);
        rot:    the photograph rotated by theta about its centre and
                shifted by d with scipy.ndimage.affine_transform (spline
                of order 5), and the central 320 x 352 pixels of both
                kept (the rotated grid stays inside the photograph);
        roll:   numpy.roll by whole pixels (a circular integer shift), on
                384 x 448 and on an odd 61 x 97;
        weak:   as rot, with noise at an SNR of 3 (for the quality limits);
        scale:  as rot, the moving image also scaled: what it shows at p
                lies on the fixed one at c + s R(theta) (p - c) + d, s is
                written after the photograph's name on the line;
        large:  a 640 x 512 map-sized pair: coffee in grey enlarged by
                1.4 (skimage.transform.rescale, cubic, anti-aliased), then
                as rot (rotations of 0.25 to 2 degrees about the centre)
                with the central 512 x 640 pixels kept;
        photo:  a photograph alone (id.fixed only), cropped to 384 x 448,
                for pairs without common content.
      snr is the signal's standard deviation over the noise's: Gaussian
      noise of std std(fixed) / snr, drawn independently for both images
      (numpy.random.default_rng); "inf" for none.

  register_ref.py skimage OUTDIR
      For every shift, circ and roll pair of OUTDIR/pairs.txt, runs
      skimage.registration.phase_cross_correlation(fixed, moving,
      upsample_factor=100) and writes OUTDIR/skimage.txt, one line per
      pair: id dx dy (its shift, (row, col) turned into our (x, y): the
      shift it returns is the one "required to register moving with
      reference", which in our convention is d).

  register_ref.py windows N ALPHA OUT
      Writes float64 scipy.signal.windows.hann(N, sym=True) then
      scipy.signal.windows.tukey(N, ALPHA, sym=True) to OUT.
"""
import os
import sys

import numpy as np
from scipy import ndimage
from scipy.signal import windows
from skimage import color, data, transform
from skimage.registration import phase_cross_correlation


def photo(name):
    if name == "camera":
        img = data.camera().astype(np.float64)
    elif name == "astronaut":
        img = color.rgb2gray(data.astronaut()) * 255.0
    elif name == "coffee":
        img = color.rgb2gray(data.coffee()) * 255.0
    else:
        raise SystemExit("unknown photograph " + name)
    return img.astype(np.float64)


def crop(img, h, w):
    H, W = img.shape
    assert (H - h) % 2 == 0 and (W - w) % 2 == 0
    oy, ox = (H - h) // 2, (W - w) // 2
    return img[oy:oy + h, ox:ox + w]


def fourier_shift(img, dx, dy):
    # moving(q) = fixed(q + d): the content moves by -d
    F = np.fft.fft2(img)
    return np.real(np.fft.ifft2(ndimage.fourier_shift(F, shift=(-dy, -dx))))


def rigid(img, theta_deg, dx, dy, scale=1.0):
    """moving(p) = img(C + s R(theta) (p - C) + d), C the centre, by an
    order-5 spline. affine_transform maps output index o (row, col) to input
    index matrix @ o + offset."""
    t = np.deg2rad(theta_deg)
    cs, sn = np.cos(t), np.sin(t)
    # R(theta) on (x, y) is [[cs, -sn], [sn, cs]]; on (y, x) it reads:
    m = scale * np.array([[cs, sn], [-sn, cs]])
    C = (np.array(img.shape, dtype=np.float64) - 1.0) / 2.0
    offset = C - m @ C + np.array([dy, dx])
    return ndimage.affine_transform(img, m, offset=offset, order=5, mode="reflect")


def noisy(img, snr, rng):
    if snr == np.inf:
        return img
    return img + rng.normal(0.0, img.std() / snr, img.shape)


def write(path, img):
    np.ascontiguousarray(img, dtype="<f4").tofile(path)


def make(out):
    os.makedirs(out, exist_ok=True)
    rng = np.random.default_rng(20240611)
    lines = []

    def add(kind, name, fixed, moving, dx, dy, theta, snr):
        pid = "p%02d" % len(lines)
        write(os.path.join(out, pid + ".fixed"), fixed)
        if moving is not None:
            write(os.path.join(out, pid + ".moving"), moving)
        h, w = fixed.shape
        lines.append("%s %s %d %d %.6f %.6f %.6f %s %s" % (pid, kind, w, h, dx, dy, theta,
                                                         "inf" if snr == np.inf else "%g" % snr,
                                                         name))

    shifts = [(3.27, -5.61), (-12.43, 7.88), (0.5, 0.25), (21.09, 14.66)]
    for name in ("camera", "astronaut"):
        img = photo(name)
        for k, (dx, dy) in enumerate(shifts):
            mov = fourier_shift(img, dx, dy)
            for snr in (np.inf, 10.0):
                f, m = noisy(img, snr, rng), noisy(mov, snr, rng)
                add("shift", name, crop(f, 384, 448), crop(m, 384, 448), dx, dy, 0.0, snr)
                if k < 2:
                    add("circ", name, f, m, dx, dy, 0.0, snr)
    rots = [(0.7, 2.31, -1.62), (-2.3, -4.4, 3.05), (3.9, 0.0, 0.0), (5.0, 6.72, -2.18),
            (-5.0, -1.25, -7.5), (12.0, 3.3, 1.1), (-30.0, -2.5, 4.0)]
    for name in ("camera", "astronaut"):
        img = photo(name)
        for theta, dx, dy in rots:
            mov = rigid(img, theta, dx, dy)
            add("rot", name, crop(img, 320, 352), crop(mov, 320, 352), dx, dy, theta, np.inf)
        for theta, dx, dy in rots[:4]:
            mov = rigid(img, theta, dx, dy)
            f, m = noisy(img, 10.0, rng), noisy(mov, 10.0, rng)
            add("rot", name, crop(f, 320, 352), crop(m, 320, 352), dx, dy, theta, 10.0)
    for name, theta, dx, dy in (("camera", 4.2, -3.3, 5.1), ("astronaut", -3.1, 2.7, 1.9)):
        img = photo(name)
        mov = rigid(img, theta, dx, dy)
        f, m = noisy(img, 3.0, rng), noisy(mov, 3.0, rng)
        add("weak", name, crop(f, 320, 352), crop(m, 320, 352), dx, dy, theta, 3.0)
    for name, s, theta, dx, dy in (("camera", 1.06, 2.0, 1.7, -2.4),
                                   ("astronaut", 0.95, -1.5, -3.1, 0.8)):
        img = photo(name)
        mov = rigid(img, theta, dx, dy, s)
        add("scale", name + " %g" % s, crop(img, 320, 352), crop(mov, 320, 352), dx, dy, theta,
            np.inf)
    big = transform.rescale(photo("coffee"), 1.4, order=3, anti_aliasing=True, mode="reflect")
    big = big[:, 80:760]  # 560 x 680: margins that hold the rotated grid
    for theta, dx, dy in ((0.25, 1.37, -0.82), (0.5, -2.61, 1.94), (1.0, 3.21, 2.47),
                          (2.0, -1.73, -3.36), (-1.5, 0.58, 4.12)):
        mov = rigid(big, theta, dx, dy)
        add("large", "coffee", crop(big, 512, 640), crop(mov, 512, 640), dx, dy, theta, np.inf)
    img = crop(photo("camera"), 384, 448)
    # np.roll by (+7, -19) rows, columns: moving(q) = fixed(q - roll), d = -roll
    add("roll", "camera", img, np.roll(img, (7, -19), axis=(0, 1)), 19.0, -7.0, 0.0, np.inf)
    img = photo("camera")[200:261, 150:247]  # 61 x 97: odd sides
    add("roll", "camera", img, np.roll(img, (-4, 11), axis=(0, 1)), -11.0, 4.0, 0.0, np.inf)
    for name in ("camera", "astronaut", "coffee"):
        img = photo(name)
        if name == "coffee":
            img = img[:, 76:524]  # 400 x 448
            img = img[8:392, :]
        else:
            img = crop(img, 384, 448)
        add("photo", name, img, None, 0.0, 0.0, 0.0, np.inf)
    with open(os.path.join(out, "pairs.txt"), "w") as f:
        f.write("\n".join(lines) + "\n")


def skimage_shifts(out):
    res = []
    with open(os.path.join(out, "pairs.txt")) as f:
        for line in f:
            p = line.split()
            if p[1] not in ("shift", "circ", "roll"):
                continue
            w, h = int(p[2]), int(p[3])
            fixed = np.fromfile(os.path.join(out, p[0] + ".fixed"), "<f4").reshape(h, w)
            moving = np.fromfile(os.path.join(out, p[0] + ".moving"), "<f4").reshape(h, w)
            s, _, _ = phase_cross_correlation(fixed.astype(np.float64),
                                              moving.astype(np.float64), upsample_factor=100)
            res.append("%s %.6f %.6f" % (p[0], s[1], s[0]))
    with open(os.path.join(out, "skimage.txt"), "w") as f:
        f.write("\n".join(res) + "\n")


def write_windows(n, alpha, out):
    v = np.concatenate([windows.hann(n, sym=True), windows.tukey(n, alpha, sym=True)])
    np.ascontiguousarray(v, dtype="<f8").tofile(out)


def main():
    if len(sys.argv) == 5 and sys.argv[1] == "windows":
        write_windows(int(sys.argv[2]), float(sys.argv[3]), sys.argv[4])
        return
    if len(sys.argv) != 3:
        raise SystemExit(__doc__)
    if sys.argv[1] == "make":
        make(sys.argv[2])
    elif sys.argv[1] == "skimage":
        skimage_shifts(sys.argv[2])
    else:
        raise SystemExit(__doc__)


if __name__ == "__main__":
    main()
