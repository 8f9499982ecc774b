/*
 * npy_int.h - npy internals visible to the tests; never installed.
 */
#ifndef PLYLEDGER_NPY_INT_H
#define PLYLEDGER_NPY_INT_H

#include "plyledger/npy.h"

/* Longest header (the dict and its padding) accepted, in bytes. numpy
 * itself writes a few hundred bytes; the bound stops a hostile length field
 * from making the reader walk gigabytes of padding. */
#define PL_NPY__MAX_HEADER_LEN (1u << 20)

/*
 * A readable name for a descr string, for messages: "<i8" -> "int64",
 * "|b1" -> "bool", "<c16" -> "complex128"; anything else is returned as
 * written. Writes at most `cap` bytes including the NUL into `out` and
 * returns `out`.
 */
char *pl_npy__descr_name(char *out, size_t cap, const char *descr);

#endif
