#!/usr/bin/python3
"""Reference side of tests/test_seq.c: numpy and pypng write sequences that
plyledger reads, and read the sequences plyledger writes.

  seq_ref.py table DIR
      numpy writes uint16 cubes (little- and big-endian) with a manifest that
      gives a calibration table, frame_times_s and a saturation count, and a
      big-endian float32 cube of kelvin. Beside them, what plyledger must
      read, computed by numpy itself:
        table.f4        numpy.interp(counts, table counts, table kelvin) as
                        float32, NaN where counts >= saturation_count
        table_nsat.i4   saturated pixels per frame
        table_times.f8  frame_times_s - flash_time_s
        kelvin.f4       the float32 cube's values
      (all little-endian raw).

  seq_ref.py png DIR
      pypng writes folders of 16-bit greyscale PNG frames (plain and Adam7
      interlaced) with manifests of a linear calibration; png.f4 and
      png_nsat.i4 hold offset_k + gain_k * count as float32 (NaN where
      saturated) and the saturated count per frame. Also frames plyledger
      must refuse: 8-bit, RGB, and a frame of another size.

  seq_ref.py check DIR MANIFEST...
      For each manifest plyledger wrote, numpy.load reads the cube (or pypng
      the PNG frames) and compares it with what the kelvin values the test
      wrote to <stem>_in.f4 must give: the same float32 bits for a kelvin
      cube; counts = clip(floor((K - offset_k) / gain_k + 0.5), 0,
      saturation_count), NaN and +inf -> saturation_count, for counts.
      Also checks the manifest's keys. Exits non-zero on any mismatch.
"""
import json
import os
import sys

import numpy as np
import png

TABLE_COUNTS = [1000.0, 5000.0, 12000.0, 30000.0, 50000.0]
TABLE_KELVIN = [280.125, 295.3, 310.7, 340.2, 371.9]
SATURATION = 60000


def table_counts(frames, rows, cols):
    """Counts that cover the table's ends (clamped), its points exactly,
    the segments in between and the saturated range."""
    rng = np.random.default_rng(20240611)
    c = rng.integers(0, 65536, size=(frames, rows, cols), dtype=np.int64)
    flat = c.reshape(-1)
    specials = [0, 999, 1000, 1001, 4999, 5000, 29999, 30000, 49999, 50000, 50001,
                59999, 60000, 60001, 65535]
    flat[:len(specials)] = specials
    return c.astype(np.uint16)


def write_manifest(path, obj):
    with open(path, 'w') as f:
        json.dump(obj, f, indent=1)


def cmd_table(d):
    frames, rows, cols = 12, 7, 9
    counts = table_counts(frames, rows, cols)
    flash = 10.005
    # non-uniform times on a camera clock that does not start at zero
    times = 10.0 + np.array([0.0, 0.001, 0.0025, 0.004, 0.0065, 0.01, 0.016, 0.025,
                             0.04, 0.063, 0.1, 0.16])
    np.save(os.path.join(d, 'table_le.npy'), counts.astype('<u2'))
    np.save(os.path.join(d, 'table_be.npy'), counts.astype('>u2'))
    base = {
        'format': 'plyledger-sequence-1',
        'frame_times_s': [float(t) for t in times],
        'flash_time_s': flash,
        'calibration': {'kind': 'table', 'counts': TABLE_COUNTS, 'kelvin': TABLE_KELVIN},
        'saturation_count': SATURATION,
        'pitch_mm': [0.4, 0.5],
        'acquisition': {'camera': 'MWIR 640', 'flash_energy_j': 4800, 'ambient_k': 294.2},
    }
    le = dict(base, data='table_le.npy', width=cols, height=rows, frame_count=frames)
    write_manifest(os.path.join(d, 'table_le.json'), le)
    be = dict(base, data='table_be.npy', preflash_frames=2)
    write_manifest(os.path.join(d, 'table_be.json'), be)

    # the calibrated values as numpy computes them: numpy.interp clamps to
    # the end values outside the table
    k = np.interp(counts.astype(np.float64), TABLE_COUNTS, TABLE_KELVIN).astype(np.float32)
    k[counts >= SATURATION] = np.nan
    k.astype('<f4').tofile(os.path.join(d, 'table.f4'))
    nsat = (counts >= SATURATION).reshape(frames, -1).sum(axis=1)
    nsat.astype('<i4').tofile(os.path.join(d, 'table_nsat.i4'))
    (times - flash).astype('<f8').tofile(os.path.join(d, 'table_times.f8'))

    kel = (290.0 + np.random.default_rng(7).normal(0, 5, size=(5, 4, 6))).astype('>f4')
    kel.reshape(-1)[3] = np.nan
    np.save(os.path.join(d, 'kelvin_be.npy'), kel)
    write_manifest(os.path.join(d, 'kelvin_be.json'), {
        'format': 'plyledger-sequence-1', 'data': 'kelvin_be.npy', 'frame_rate_hz': 60.0,
        'flash_time_s': 0.02, 'calibration': {'kind': 'kelvin'}})
    kel.astype('<f4').tofile(os.path.join(d, 'kelvin.f4'))
    return 0


def write_frames(folder, pattern, first, frames, **kw):
    os.makedirs(folder, exist_ok=True)
    for i, f in enumerate(frames):
        h, w = f.shape[:2]
        path = os.path.join(folder, pattern % (first + i))
        with open(path, 'wb') as out:
            writer = png.Writer(width=w, height=h, **kw)
            writer.write(out, f.reshape(h, -1).tolist())


def cmd_png(d):
    frames, rows, cols = 6, 5, 11
    rng = np.random.default_rng(99)
    counts = rng.integers(0, 65536, size=(frames, rows, cols)).astype(np.uint16)
    counts.reshape(-1)[:4] = [0, 64999, 65000, 65535]
    gain, offset, sat = 0.0125, 250.0, 65000
    write_frames(os.path.join(d, 'frames'), 'img_%04d.png', 3, counts,
                 greyscale=True, bitdepth=16)
    write_frames(os.path.join(d, 'frames_i'), 'f%d.png', 0, counts,
                 greyscale=True, bitdepth=16, interlace=True)
    cal = {'kind': 'linear', 'gain_k': gain, 'offset_k': offset}
    write_manifest(os.path.join(d, 'png.json'), {
        'format': 'plyledger-sequence-1',
        'data': {'folder': 'frames', 'pattern': 'img_%04d.png', 'first': 3},
        'frame_count': frames, 'frame_rate_hz': 200.0, 'flash_time_s': 0.007,
        'calibration': cal, 'saturation_count': sat, 'pitch_mm': 0.25})
    write_manifest(os.path.join(d, 'png_i.json'), {
        'format': 'plyledger-sequence-1', 'data': {'folder': 'frames_i', 'pattern': 'f%d.png'},
        'width': cols, 'height': rows,
        'frame_times_s': [0.0, 0.005, 0.01, 0.015, 0.02, 0.025], 'flash_time_s': 0.007,
        'calibration': cal, 'saturation_count': sat})
    k = (offset + gain * counts.astype(np.float64)).astype(np.float32)
    k[counts >= sat] = np.nan
    k.astype('<f4').tofile(os.path.join(d, 'png.f4'))
    (counts >= sat).reshape(frames, -1).sum(axis=1).astype('<i4').tofile(
        os.path.join(d, 'png_nsat.i4'))

    # frames to refuse: frame 2 of each folder is wrong
    def bad(name, frame2, **kw):
        folder = os.path.join(d, name)
        good = counts[:3]
        write_frames(folder, 'b%02d.png', 0, good[:2], greyscale=True, bitdepth=16)
        write_frames(folder, 'b%02d.png', 2, [frame2], **kw)
        write_manifest(os.path.join(d, name + '.json'), {
            'format': 'plyledger-sequence-1', 'data': {'folder': name, 'pattern': 'b%02d.png'},
            'frame_count': 3, 'frame_rate_hz': 10.0, 'flash_time_s': 0.05,
            'calibration': cal})
    bad('bad8', (counts[2] >> 8).astype(np.uint8), greyscale=True, bitdepth=8)
    rgb = np.stack([counts[2]] * 3, axis=-1)
    bad('badrgb', rgb, greyscale=False, bitdepth=16)
    bad('badsize', counts[2][:, :-1], greyscale=True, bitdepth=16)
    return 0


def expected_counts(k, man):
    gain = man['calibration']['gain_k']
    offset = man['calibration']['offset_k']
    sat = man['saturation_count']
    with np.errstate(invalid='ignore'):
        q = np.floor((k.astype(np.float64) - offset) / gain + 0.5)
    q[np.isnan(k)] = sat
    return np.clip(q, 0, sat).astype(np.int64)


def cmd_check(d, names):
    bad = 0
    for name in names:
        path = os.path.join(d, name)
        with open(path) as f:
            man = json.load(f)
        stem = os.path.splitext(name)[0]
        w, h, n = man['width'], man['height'], man['frame_count']
        k = np.fromfile(os.path.join(d, stem + '_in.f4'), dtype='<f4').reshape(n, h, w)
        if man['format'] != 'plyledger-sequence-1':
            print('%s: format %r' % (name, man['format']))
            bad += 1
        for key in ('frame_rate_hz', 'flash_time_s', 'preflash_frames', 'acquisition'):
            if key not in man:
                print('%s: no %s' % (name, key))
                bad += 1
        kind = man['calibration']['kind']
        if isinstance(man['data'], str):
            arr = np.load(os.path.join(d, man['data']))
            if arr.shape != (n, h, w):
                print('%s: shape %s' % (name, arr.shape))
                bad += 1
                continue
            if kind == 'kelvin':
                if arr.dtype != np.dtype('<f4') or arr.tobytes() != k.tobytes():
                    print('%s: float32 cube differs from the input (dtype %s)' % (name, arr.dtype))
                    bad += 1
                continue
            if arr.dtype != np.dtype('<u2'):
                print('%s: dtype %s, <u2 expected' % (name, arr.dtype.str))
                bad += 1
            got = arr.astype(np.int64)
        else:
            data = man['data']
            folder = os.path.join(d, data['folder'])
            frames = []
            for i in range(n):
                r = png.Reader(filename=os.path.join(folder, data['pattern'] % (data['first'] + i)))
                fw, fh, rows, info = r.read()
                if info['bitdepth'] != 16 or not info['greyscale'] or info['alpha']:
                    print('%s: frame %d is not 16-bit greyscale: %s' % (name, i, info))
                    bad += 1
                frames.append(np.array([list(row) for row in rows], dtype=np.int64))
            got = np.stack(frames)
            if len(os.listdir(folder)) != n:
                print('%s: %d files in the folder, %d expected' % (name, len(os.listdir(folder)), n))
                bad += 1
        want = expected_counts(k, man)
        if got.shape != want.shape or not np.array_equal(got, want):
            diff = np.flatnonzero(got.reshape(-1) != want.reshape(-1))
            print('%s: %d counts differ, first at %s: %s vs %s' % (
                name, diff.size, diff[:5], got.reshape(-1)[diff[:5]], want.reshape(-1)[diff[:5]]))
            bad += 1
    return 1 if bad else 0


def main(argv):
    if len(argv) == 3 and argv[1] == 'table':
        return cmd_table(argv[2])
    if len(argv) == 3 and argv[1] == 'png':
        return cmd_png(argv[2])
    if len(argv) >= 4 and argv[1] == 'check':
        return cmd_check(argv[2], argv[3:])
    print(__doc__)
    return 2


if __name__ == '__main__':
    sys.exit(main(sys.argv))
