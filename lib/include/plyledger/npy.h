/*
 * plyledger/npy.h - the NumPy .npy array file format (format versions 1.0,
 * 2.0 and 3.0, as numpy's numpy.lib.format documents it).
 *
 * A .npy file is a magic string, a version, a header length and a Python
 * dict literal giving 'descr' (dtype), 'fortran_order' and 'shape', then the
 * raw array bytes. This module parses and writes that header; callers read
 * or memory-map the data that follows at `data_offset`. Maps (map.h) and
 * thermal sequences (seq.h) build on it. Nothing here allocates beyond the
 * caller's structs.
 */
#ifndef PLYLEDGER_NPY_H
#define PLYLEDGER_NPY_H

#include "plyledger/common.h"

#include <stdio.h>

#ifdef __cplusplus
extern "C" {
#endif

#define PL_NPY_MAX_DIMS 8

/** Element types plyledger reads. */
typedef enum pl_npy_dtype {
    PL_NPY_UNSUPPORTED = 0, /**< anything else (the header parses, the data is refused) */
    PL_NPY_U8,              /**< '|u1' */
    PL_NPY_U16,             /**< '<u2' / '>u2' */
    PL_NPY_I16,             /**< '<i2' / '>i2' */
    PL_NPY_F32,             /**< '<f4' / '>f4' */
    PL_NPY_F64,             /**< '<f8' / '>f8' */
} pl_npy_dtype;

/** A parsed header. */
typedef struct pl_npy_header {
    pl_npy_dtype dtype;
    char descr[16];         /**< the dtype string as written, e.g. "<f4" */
    int big_endian;         /**< 1 when the data is big-endian */
    size_t itemsize;        /**< bytes per element */
    int fortran_order;      /**< 1 when column-major */
    int ndim;               /**< 0..PL_NPY_MAX_DIMS */
    uint64_t shape[PL_NPY_MAX_DIMS];
    uint64_t count;         /**< product of shape (1 for ndim 0) */
    uint64_t data_offset;   /**< byte offset of the first element */
} pl_npy_header;

/**
 * Parse the header at the start of `f` (positioned at offset 0). On success
 * `f` is left at data_offset. `name` is used in messages only.
 * The dict may list its keys in any order with any spacing; a key other
 * than the three, a repeated key, more than PL_NPY_MAX_DIMS dimensions, a
 * shape whose element count overflows 64 bits and a header longer than
 * 1 MiB are refused. A structured dtype (a list) parses with descr
 * "structured".
 * @param[out] hdr  the header
 * @return PL_OK, PL_EIO (read error), PL_EFORMAT (bad magic or version,
 *         truncated or malformed header, missing key, unsupported descr
 *         string syntax). An unknown dtype is PL_OK with dtype
 *         PL_NPY_UNSUPPORTED.
 */
PL_EXPORT int pl_npy_read_header(pl_npy_header *hdr, FILE *f, const char *name, pl_err *err);

/**
 * Write a version 1.0 header for a C-order array of `descr` ("<f4", "<u2"...)
 * and `shape`, laid out as numpy writes it: padded with spaces (including
 * numpy's spare room for a growing first axis) and a newline so the data
 * starts on a 64-byte boundary.
 * @return PL_OK, PL_EINVAL (ndim out of range, descr empty, longer than 15
 *         characters or holding a quote), PL_ENOMEM, PL_EIO.
 */
PL_EXPORT int pl_npy_write_header(FILE *f, const char *descr, int ndim,
                                  const uint64_t *shape, const char *name, pl_err *err);

/**
 * Convert `n` elements of `hdr`'s dtype and byte order at `src` to float
 * ([out] dst), whatever the host's byte order. Supported dtypes only; an
 * unsupported one gives NaN.
 */
PL_EXPORT void pl_npy_to_float(float *dst, const void *src, size_t n, const pl_npy_header *hdr);

/** Name of a dtype for messages ("float32", "uint16", ...). */
PL_EXPORT const char *pl_npy_dtype_name(pl_npy_dtype dtype);

#ifdef __cplusplus
}
#endif
#endif
