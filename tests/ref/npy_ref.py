#!/usr/bin/python3
"""Reference side of tests/test_npy.c: numpy writes and reads .npy files.

  npy_ref.py write DIR
      numpy writes NAME.npy files (numpy.save / numpy.lib.format.write_array)
      and, for each, NAME.raw: the same values as little-endian float64
      (ndarray.astype('<f8').tofile). Also a few files plyledger must refuse
      (for those holding infinities, NAME.raw is the load that makes them
      no data).

  npy_ref.py check DIR NAME:SHAPE...
      numpy.load reads NAME.npy written by plyledger and compares it bit for
      bit with NAME.raw (little-endian float32 written by the test), checks
      dtype '<f4', the shape (e.g. 3x4x5), C order, format 1.0 and that the
      data starts on a 64-byte boundary after a newline-terminated header.
      Exits non-zero on any mismatch.
"""
import os
import sys

import numpy as np
import numpy.lib.format as fmt


def values(shape, dtype):
    n = int(np.prod(shape))
    v = (np.arange(n, dtype=np.float64) * 1.37 - n / 2.0).reshape(shape)
    if np.dtype(dtype).kind == 'f':
        flat = v.reshape(-1)
        flat[0] = np.nan
        flat[1] = -0.0
        if n > 4:
            flat[2] = 1e-40 if np.dtype(dtype).itemsize == 4 else 1e-300
            flat[3] = 3.0e38  # near the top of float32, which every map is
            flat[4] = -123456.789
    elif np.dtype(dtype).kind == 'u':
        top = np.iinfo(np.dtype(dtype)).max
        v = (np.arange(n) * 977 % (top + 1)).reshape(shape)
        v.reshape(-1)[-1] = top
    else:
        info = np.iinfo(np.dtype(dtype))
        v = (np.arange(n) * 977 % 65536 - 32768).reshape(shape)
        v.reshape(-1)[0] = info.min
        v.reshape(-1)[-1] = info.max
    return v.astype(dtype)


def save(d, name, arr, version=None):
    path = os.path.join(d, name + '.npy')
    if version is None:
        np.save(path, arr)
    else:
        with open(path, 'wb') as f:
            fmt.write_array(f, arr, version=version)
    arr.astype('<f8').tofile(os.path.join(d, name + '.raw'))


def save_nodata(d, name, arr):
    np.save(os.path.join(d, name + '.npy'), arr)
    with np.errstate(over='ignore'):
        as_f4 = arr.astype('<f4').astype('<f8')
    as_f4[np.isinf(as_f4)] = np.nan
    as_f4.tofile(os.path.join(d, name + '.raw'))


def write(d):
    save(d, 'f4', values((5, 7), '<f4'))
    save(d, 'f8', values((6, 4), '<f8'))
    save(d, 'u2', values((3, 9), '<u2'))
    save(d, 'be_f4', values((4, 6), '>f4'))
    save(d, 'be_f8', values((2, 5), '>f8'))
    save(d, 'be_u2', values((5, 3), '>u2'))
    save(d, 'c3', values((3, 4, 5), '<f4'))
    save(d, 'v2', values((4, 3), '<f4'), version=(2, 0))
    save(d, 'v3', values((2, 3, 2), '>f8'), version=(3, 0))
    # dtypes plyledger converts through pl_npy_to_float but not as maps
    save(d, 'le_i2', values((3, 5), '<i2'))
    save(d, 'be_i2', values((3, 5), '>i2'))
    save(d, 'u1', values((2, 8), '|u1'))
    # infinities, and float64 values beyond float32's range (which become
    # infinities): refused as maps, or made no data on request; NAME.raw
    # holds what the request gives (numpy's own float32 conversion, then
    # every infinity replaced by NaN)
    v = values((4, 5), '<f4')
    v[1, 2] = np.inf
    v[3, 0] = -np.inf
    save_nodata(d, 'inf_f4', v)
    v = values((3, 4), '<f8')
    v[0, 1] = 1e300
    v[2, 3] = -1e39
    save_nodata(d, 'huge_f8', v)
    v = values((3, 4, 5), '>f4')
    v[2, 1, 4] = -np.inf
    save_nodata(d, 'inf_c3', v)
    np.save(os.path.join(d, 'all_nan.npy'), np.full((2, 3), np.nan, dtype='<f4'))
    v = np.full((2, 3), np.nan, dtype='<f4')
    v[1, 1] = np.inf
    np.save(os.path.join(d, 'nan_and_inf.npy'), v)
    # refused as maps
    np.save(os.path.join(d, 'i8.npy'), np.arange(12, dtype='<i8').reshape(3, 4))
    np.save(os.path.join(d, 'fortran.npy'),
            np.asfortranarray(np.arange(12, dtype='<f4').reshape(3, 4)))
    np.save(os.path.join(d, 'd4.npy'), np.zeros((2, 2, 3, 4), dtype='<f4'))
    np.save(os.path.join(d, 'd1.npy'), np.zeros((5,), dtype='<f4'))
    return 0


def check(d, specs):
    bad = 0
    for spec in specs:
        name, shape_text = spec.split(':')
        shape = tuple(int(s) for s in shape_text.split('x'))
        path = os.path.join(d, name + '.npy')
        arr = np.load(path)
        raw = np.fromfile(os.path.join(d, name + '.raw'), dtype='<f4')
        if arr.dtype != np.dtype('<f4'):
            print('%s: dtype %s, <f4 expected' % (name, arr.dtype.str))
            bad += 1
        if arr.shape != shape:
            print('%s: shape %s, %s expected' % (name, arr.shape, shape))
            bad += 1
        if not arr.flags['C_CONTIGUOUS']:
            print('%s: not C order' % name)
            bad += 1
        if arr.tobytes() != raw.tobytes():
            diff = np.flatnonzero(arr.reshape(-1).view('<u4') != raw.view('<u4'))
            print('%s: %d values differ, first at %s' % (name, diff.size, diff[:5]))
            bad += 1
        with open(path, 'rb') as f:
            major, minor = fmt.read_magic(f)
            hshape, fortran, dtype = fmt.read_array_header_1_0(f)
            offset = f.tell()
            f.seek(offset - 1)
            last = f.read(1)
        if (major, minor) != (1, 0):
            print('%s: format %d.%d, 1.0 expected' % (name, major, minor))
            bad += 1
        if hshape != shape or fortran or dtype != np.dtype('<f4'):
            print('%s: header says %s %s %s' % (name, hshape, fortran, dtype))
            bad += 1
        if offset % 64 != 0 or last != b'\n':
            print('%s: data at %d after %r; 64-byte aligned after a newline expected'
                  % (name, offset, last))
            bad += 1
        if os.path.getsize(path) != offset + arr.nbytes:
            print('%s: %d bytes, %d expected' % (name, os.path.getsize(path), offset + arr.nbytes))
            bad += 1
    return 1 if bad else 0


def main(argv):
    if len(argv) >= 3 and argv[1] == 'write':
        return write(argv[2])
    if len(argv) >= 4 and argv[1] == 'check':
        return check(argv[2], argv[3:])
    print(__doc__)
    return 2


if __name__ == '__main__':
    sys.exit(main(sys.argv))
