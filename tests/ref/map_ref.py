#!/usr/bin/python3
"""Reference side of tests/test_map.c: pypng, numpy, zlib and hashlib.

  map_ref.py png-check PNG RAW QUANTITY UNIT PITCH
      pypng decodes PNG written by plyledger: it must be 16-bit greyscale
      without alpha, carry the plyledger.* tEXt chunks (QUANTITY, UNIT and
      PITCH as given, nodata 65535), and offset + scale * code must lie within
      scale / 2 of each value in RAW (little-endian float32 dump of the map),
      with NaN exactly where the code is 65535. Codes 0 and 65534 must both
      occur when the map has two or more finite values.

  map_ref.py png-write DIR
      pypng writes grayscale PNGs with plyledger.* text chunks (added as raw
      tEXt chunks through png.write_chunks, since png.Writer writes none) and
      NAME.raw: the values they stand for as little-endian float64 (NaN for
      nodata). Also PNGs plyledger must refuse.

  map_ref.py csv-write DIR
      numpy.savetxt writes grid.csv from float32 values with NaN, and
      grid.raw as little-endian float64.

  map_ref.py blob-check BLOB SHA256HEX WIDTH HEIGHT CHANNELS
      zlib.decompress(BLOB) must equal the little-endian float32 bytes of the
      test map (value (c*1000 + j*10 + i)*0.25 - 7, NaN where (i+j+c) % 5 == 0,
      built here with numpy), and hashlib.sha256 of those bytes must equal
      SHA256HEX.
"""
import hashlib
import io
import os
import sys
import zlib

import numpy as np
import png


def text_chunks(path):
    out = {}
    for tag, data in png.Reader(filename=path).chunks():
        if tag == b'tEXt':
            key, _, value = data.partition(b'\0')
            out[key.decode('latin-1')] = value.decode('latin-1')
    return out


def png_check(path, raw_path, quantity, unit, pitch):
    bad = []
    width, height, rows, info = png.Reader(filename=path).read()
    codes = np.array([list(r) for r in rows], dtype=np.int64)
    if info['bitdepth'] != 16 or not info['greyscale'] or info['alpha']:
        bad.append('not 16-bit greyscale without alpha: %r' % info)
    t = text_chunks(path)
    want = {'plyledger.quantity': quantity, 'plyledger.unit': unit,
            'plyledger.nodata': '65535'}
    for k, v in want.items():
        if t.get(k) != v:
            bad.append('%s is %r, %r expected' % (k, t.get(k), v))
    got_pitch = [float(x) for x in t.get('plyledger.pitch', '').split()]
    if got_pitch != [float(x) for x in pitch.split()]:
        bad.append('plyledger.pitch is %r, %r expected' % (t.get('plyledger.pitch'), pitch))
    scale = float(t['plyledger.scale'])
    offset = float(t['plyledger.offset'])
    raw = np.fromfile(raw_path, dtype='<f4').astype(np.float64)
    if raw.size != width * height:
        bad.append('%d raw values for %d x %d pixels' % (raw.size, width, height))
    else:
        raw = raw.reshape(height, width)
        nan = np.isnan(raw)
        if not np.array_equal(nan, codes == 65535):
            bad.append('nodata codes are not where the NaN values are')
        value = offset + scale * codes
        err = np.abs(value - raw)[~nan]
        # quantisation error at most half a step; float32 input adds nothing
        if err.size and err.max() > scale / 2 * (1 + 1e-9):
            bad.append('largest error %g exceeds scale/2 = %g' % (err.max(), scale / 2))
        finite = raw[~nan]
        if np.unique(finite).size >= 2 and (codes[~nan].min() != 0 or codes[~nan].max() != 65534):
            bad.append('codes span %d..%d, 0..65534 expected'
                       % (codes[~nan].min(), codes[~nan].max()))
    for b in bad:
        print('png-check: %s' % b)
    return 1 if bad else 0


def png_bytes(width, height, rows, **kw):
    buf = io.BytesIO()
    png.Writer(width, height, **kw).write(buf, rows)
    return buf.getvalue()


def add_text(data, before_idat, after_idat=()):
    """Insert tEXt chunks after IHDR and before IEND."""
    chunks = list(png.Reader(bytes=data).chunks())
    def t(k, v):
        return (b'tEXt', k.encode('latin-1') + b'\0' + v.encode('latin-1'))
    out = [chunks[0]] + [t(k, v) for k, v in before_idat] + chunks[1:-1]
    out += [t(k, v) for k, v in after_idat] + [chunks[-1]]
    buf = io.BytesIO()
    png.write_chunks(buf, out)
    return buf.getvalue()


def put(d, name, data):
    with open(os.path.join(d, name), 'wb') as f:
        f.write(data)


def png_write(d):
    w, h = 11, 7
    codes = (np.arange(w * h, dtype=np.int64).reshape(h, w) * 853) % 65535
    codes[2, 3] = 65535
    codes[6, 10] = 65535
    codes[0, 0] = 0
    codes[0, 1] = 65534
    scale, offset = 0.125, -3.5
    vals = offset + scale * codes.astype(np.float64)
    vals[codes == 65535] = np.nan
    data = png_bytes(w, h, codes.tolist(), greyscale=True, bitdepth=16)
    data = add_text(data,
                    [('plyledger.scale', '0.125'), ('plyledger.offset', '-3.5'),
                     ('plyledger.nodata', '65535'), ('plyledger.quantity', 'depth'),
                     ('plyledger.unit', 'mm'), ('Comment', 'written by pypng')],
                    [('plyledger.pitch', '0.25 0.5')])
    put(d, 'g16.png', data)
    vals.astype('<f8').tofile(os.path.join(d, 'g16.raw'))

    # interlaced (Adam7), no nodata: values straight from the codes
    data = png_bytes(w, h, codes.tolist(), greyscale=True, bitdepth=16, interlace=True)
    data = add_text(data, [('plyledger.scale', '2e-3'), ('plyledger.offset', '10'),
                           ('plyledger.pitch', '0.3')])
    put(d, 'g16i.png', data)
    (10 + 2e-3 * codes.astype(np.float64)).astype('<f8').tofile(os.path.join(d, 'g16i.raw'))

    # 8-bit, no text: value = code
    c8 = (np.arange(w * h).reshape(h, w) * 7) % 256
    put(d, 'g8.png', png_bytes(w, h, c8.tolist(), greyscale=True, bitdepth=8))
    c8.astype('<f8').tofile(os.path.join(d, 'g8.raw'))

    small = [[0, 1, 2], [3, 4, 5]]
    rgb = [[v for p in r for v in (p, p, p)] for r in small]
    put(d, 'rgb.png', png_bytes(3, 2, rgb, greyscale=False, bitdepth=8))
    ga = [[v for p in r for v in (p, 255)] for r in small]
    put(d, 'gray_alpha.png', png_bytes(3, 2, ga, greyscale=True, alpha=True, bitdepth=8))
    put(d, 'palette.png', png_bytes(3, 2, small, palette=[(i, i, i) for i in range(6)],
                                    bitdepth=8))
    put(d, 'g4.png', png_bytes(3, 2, small, greyscale=True, bitdepth=4))
    g = png_bytes(3, 2, small, greyscale=True, bitdepth=16)
    put(d, 'bad_scale.png', add_text(g, [('plyledger.scale', 'abc')]))
    put(d, 'bad_offset.png', add_text(g, [('plyledger.offset', '1.5x')]))
    put(d, 'bad_pitch.png', add_text(g, [('plyledger.pitch', '-0.5')]))
    put(d, 'bad_nodata.png', add_text(g, [('plyledger.nodata', '70000')]))
    put(d, 'bad_unit.png', add_text(g, [('plyledger.quantity', 'depth'),
                                        ('plyledger.unit', 'K')]))
    # offset + scale * code beyond float32's range (3.4e38) for codes 4 and 5
    put(d, 'overflow.png', add_text(g, [('plyledger.scale', '1e38')]))
    # every code the nodata code
    put(d, 'all_nodata.png', add_text(png_bytes(3, 2, [[7, 7, 7], [7, 7, 7]], greyscale=True,
                                                bitdepth=16), [('plyledger.nodata', '7')]))
    return 0


def csv_write(d):
    rng = np.random.default_rng(20240611)
    v = (rng.standard_normal((6, 9)) * 1000).astype(np.float32)
    v[1, 2] = np.nan
    v[5, 8] = np.nan
    v[3, 3] = np.float32(1.5e-7)
    # '%.9g' carries every float32 exactly (IEEE 754: 9 significant digits)
    np.savetxt(os.path.join(d, 'grid.csv'), v, fmt='%.9g', delimiter=',',
               header='test grid from numpy.savetxt')
    v.astype('<f8').tofile(os.path.join(d, 'grid.raw'))
    return 0


def blob_check(blob_path, hexdigest, w, h, c):
    with open(blob_path, 'rb') as f:
        blob = f.read()
    cc, jj, ii = np.meshgrid(np.arange(c), np.arange(h), np.arange(w), indexing='ij')
    v = ((cc * 1000 + jj * 10 + ii) * 0.25 - 7).astype('<f4')
    v[(ii + jj + cc) % 5 == 0] = np.float32('nan')
    want = v.tobytes()
    bad = 0
    got = zlib.decompress(blob)
    if got != want:
        print('blob-check: decompressed bytes differ from the reference (%d vs %d bytes)'
              % (len(got), len(want)))
        bad = 1
    digest = hashlib.sha256(want).hexdigest()
    if digest != hexdigest:
        print('blob-check: sha256 %s, plyledger says %s' % (digest, hexdigest))
        bad = 1
    return bad


def main(argv):
    cmd = argv[1] if len(argv) > 1 else ''
    if cmd == 'png-check' and len(argv) == 7:
        return png_check(*argv[2:])
    if cmd == 'png-write' and len(argv) == 3:
        return png_write(argv[2])
    if cmd == 'csv-write' and len(argv) == 3:
        return csv_write(argv[2])
    if cmd == 'blob-check' and len(argv) == 7:
        return blob_check(argv[2], argv[3], int(argv[4]), int(argv[5]), int(argv[6]))
    print(__doc__)
    return 2


if __name__ == '__main__':
    sys.exit(main(sys.argv))
