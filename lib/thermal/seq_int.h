/*
 * seq_int.h - sequence internals visible to the tests; never installed.
 */
#ifndef PLYLEDGER_SEQ_INT_H
#define PLYLEDGER_SEQ_INT_H

#include "plyledger/seq.h"

#include <stddef.h>

/* Largest manifest read, in bytes: a frame_times_s list of a million
 * frames fits many times over; a hostile file cannot make us buffer more. */
#define PL_SEQ__MAX_MANIFEST_BYTES (64u << 20)

/* Largest frame side, as for maps. */
#define PL_SEQ__MAX_SIDE 65536u

/* Largest frame, in pixels (1 GiB of float32). */
#define PL_SEQ__MAX_PIXELS (1u << 28)

/* A frame file name pattern split around its one number conversion:
 * "frame-%05d.png" -> prefix "frame-", width 5, suffix ".png". */
typedef struct pl_seq__pattern {
    char prefix[256];
    char suffix[256];
    int width;        /* zero-padded width; 0 for a plain %d */
} pl_seq__pattern;

/*
 * Parse a frame name pattern. Allowed: any text without '/', '\\' or
 * control characters, "%%" for a literal '%', and exactly one conversion
 * "%d" or "%0Nd" (N from 1 to 20). `name` and `key` are used in messages.
 * @return PL_OK and [out] pat, or PL_EFORMAT.
 */
int pl_seq__parse_pattern(pl_seq__pattern *pat, const char *pattern, const char *name,
                          const char *key, pl_err *err);

/*
 * The file name of frame `number` under `pat` into `out` (cap bytes).
 * @return 0, or -1 when it does not fit.
 */
int pl_seq__frame_name(char *out, size_t cap, const pl_seq__pattern *pat, long number);

/*
 * The calibrated value of one count under a table calibration: the same
 * piecewise-linear rule as numpy.interp (clamped to the end values outside
 * the table), computed in double. `n` >= 2, `counts` strictly increasing.
 */
double pl_seq__table_value(double count, const double *counts, const double *kelvin, size_t n);

#endif
