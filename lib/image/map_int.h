/*
 * map_int.h - map internals shared by map*.c and visible to the tests;
 * never installed.
 */
#ifndef PLYLEDGER_MAP_INT_H
#define PLYLEDGER_MAP_INT_H

#include "plyledger/map.h"

#include <stddef.h>

/*
 * Number of values in a map of the given size, in [out] count, with the
 * byte count (count * sizeof(float)) known to fit a size_t.
 * @return PL_OK, or PL_EINVAL when a side is zero or the sizes exceed
 *         PL_MAP_MAX_SIDE / PL_MAP_MAX_CHANNELS or a size_t.
 */
int pl_map__count(size_t *count, uint32_t width, uint32_t height, uint32_t nchannels);

/*
 * Little-endian float32 bytes of n values into out (4 n bytes), whatever
 * the host's byte order: bit for bit, or with canonical_nan every NaN
 * written as the quiet NaN 0x7fc00000 (the store encoding).
 */
void pl_map__f32_to_le(unsigned char *out, const float *in, size_t n, int canonical_nan);

/*
 * Parse a decimal number as written in text files: optional sign, digits
 * with an optional fraction, optional exponent; surrounding blanks allowed.
 * No hex, no "inf", no "nan" (callers decide about those).
 * @return 0 and [out] v, or -1 when `s` is not such a number or overflows.
 */
int pl_map__parse_number(double *v, const char *s);

/*
 * Parse a pitch text: "PU PV" or one number for both, each finite and > 0.
 * @return 0 and [out] pu, pv, or -1.
 */
int pl_map__parse_pitch(double *pu, double *pv, const char *s);

#endif
