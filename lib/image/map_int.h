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

/*
 * pl_map_check_values() for a loader: `code` is the status of a refusal
 * (PL_EFORMAT for a file), `note` (may be NULL) is said after the count of
 * infinities, e.g. where they come from.
 */
int pl_map__check_values(pl_map_load_info *info, pl_map *map, const pl_map_load_options *opts,
                         const char *name, const char *note, int code, pl_err *err);

/*
 * The infinities among channels [c0, c1) of a map: their count, and the
 * first one's channel, row, column and sign (> 0: +inf) when there is one.
 */
size_t pl_map__count_infinite(const pl_map *map, uint32_t c0, uint32_t c1, uint32_t *channel,
                              uint32_t *row, uint32_t *col, int *sign);

/* The loaders with options (NULL: the defaults); info may be NULL. */
int pl_map__load_png(pl_map **out, pl_map_load_info *info, const char *path,
                     const pl_map_load_options *opts, pl_err *err);
int pl_map__load_npy(pl_map **out, pl_map_load_info *info, const char *path,
                     const pl_map_load_options *opts, pl_err *err);
int pl_map__load_csv(pl_map **out, pl_map_load_info *info, const char *path,
                     const pl_map_load_options *opts, pl_err *err);

#endif
