#!/usr/bin/env python3
"""Read one map straight out of a plyledger store with Python's own sqlite3,
zlib and hashlib, and NumPy, independently of the library.

Usage: store_map_ref.py STORE.db MAP_ID EXPECTED.f32 WIDTH HEIGHT NCHANNELS

EXPECTED.f32 holds the map's values as little-endian float32, channel-major
then row-major. Checks (exit 1 on the first failure):
  * the encoding column says zlib-f32le and the size columns match;
  * zlib.decompress(data) has exactly 4 * width * height * nchannels bytes;
  * hashlib.sha256 of those bytes is the recorded sha256 column;
  * the values equal the expected ones, NaN where they are NaN;
  * every NaN is stored as the quiet NaN 0x7fc00000 (plyledger/map.h);
  * the map_channel rows number nchannels, idx 0..n-1.
"""
import hashlib
import sqlite3
import sys
import zlib

import numpy as np


def fail(msg):
    print('store_map_ref: ' + msg, file=sys.stderr)
    sys.exit(1)


def main():
    db, map_id, expected, w, h, n = sys.argv[1:7]
    w, h, n = int(w), int(h), int(n)
    con = sqlite3.connect('file:%s?mode=ro' % db, uri=True)
    row = con.execute('SELECT width, height, nchannels, encoding, data, sha256 FROM map '
                      'WHERE id = ?', (int(map_id),)).fetchone()
    if row is None:
        fail('no map %s' % map_id)
    width, height, nch, enc, blob, sha = row
    if (width, height, nch) != (w, h, n):
        fail('size %r, expected %r' % ((width, height, nch), (w, h, n)))
    if enc != 'zlib-f32le':
        fail('encoding %r' % enc)
    raw = zlib.decompress(blob)
    if len(raw) != 4 * w * h * n:
        fail('decoded %d bytes, expected %d' % (len(raw), 4 * w * h * n))
    if hashlib.sha256(raw).hexdigest() != sha:
        fail('sha256 %s, recorded %s' % (hashlib.sha256(raw).hexdigest(), sha))
    got = np.frombuffer(raw, dtype='<f4')
    want = np.fromfile(expected, dtype='<f4')
    if want.size != got.size:
        fail('expected file has %d values, map %d' % (want.size, got.size))
    if not np.array_equal(got, want, equal_nan=True):
        fail('values differ at %s' % np.flatnonzero(~((got == want) | (np.isnan(got) & np.isnan(want))))[:10])
    bits = np.frombuffer(raw, dtype='<u4')
    nan = np.isnan(got)
    if not nan.any():
        fail('the test map should hold NaN')
    if not np.all(bits[nan] == 0x7fc00000):
        fail('NaN stored as %s' % [hex(b) for b in bits[nan]])
    if not np.array_equal(bits[~nan], want.view('<u4')[~nan]):
        fail('finite values are not bit-exact')
    idx = [r[0] for r in con.execute('SELECT idx FROM map_channel WHERE map_id = ? ORDER BY idx',
                                     (int(map_id),))]
    if idx != list(range(n)):
        fail('map_channel idx %r' % idx)
    print('store_map_ref: map %s ok (%d values, %d NaN)' % (map_id, got.size, int(nan.sum())))


if __name__ == '__main__':
    main()
