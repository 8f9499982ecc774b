/*
 * common_int.h - helpers shared inside the library; never installed.
 */
#ifndef PLYLEDGER_COMMON_INT_H
#define PLYLEDGER_COMMON_INT_H

#include "plyledger/common.h"

#if defined(__GNUC__)
#define PL_PRINTF(a, b) __attribute__((format(printf, a, b)))
#else
#define PL_PRINTF(a, b)
/* Days from 1970-01-01 to the date `ymd` (YYYY-MM-DD, checked: a calendar
 * date of years 1..9999) into *days: PL_OK, or PL_EINVAL without a message.
 * The civil-calendar arithmetic of H. Hinnant, "chrono-Compatible Low-Level
 * Date Algorithms" (days_from_civil / civil_from_days). */
int pl__date_days(long *days, const char *ymd);

/* The date `days` after 1970-01-01 as YYYY-MM-DD into out (11 bytes at
 * least); PL_EINVAL when it falls outside years 1..9999. */
int pl__days_date(char *out, size_t size, long days);

#endif

/*
 * Fill `err` (when not NULL) with `code` and a formatted one-line message and
 * return `code`, so that a failure reads `return pl__err(err, PL_EIO, ...)`.
 */
int pl__err(pl_err *err, int code, const char *fmt, ...) PL_PRINTF(3, 4);

/* Clear `err` (when not NULL) to PL_OK and an empty message. */
void pl__err_clear(pl_err *err);

/* The base name of a path, for messages ("dir/x.png" -> "x.png"). */
const char *pl__basename(const char *path);

/* strdup that returns NULL for NULL. */
char *pl__strdup(const char *s);

/* Read a whole text file (at most `max` bytes) into a malloc'd,
 * NUL-terminated buffer (*out, its length in *len, may be NULL).
 * PL_EIO (cannot open or read, the message naming `path`), PL_ENOMEM (too
 * large or out of memory). */
int pl__read_text(char **out, size_t *len, const char *path, size_t max, pl_err *err);

/* Copy src into a fixed buffer; PL_EINVAL (with a message naming `what`)
 * when it does not fit. NULL src gives an empty string. */
int pl__copy_text(char *dst, size_t cap, const char *src, const char *what,
                  pl_err *err);

/* Days from 1970-01-01 to the date `ymd` (YYYY-MM-DD, checked: a calendar
 * date of years 1..9999) into *days: PL_OK, or PL_EINVAL without a message.
 * The civil-calendar arithmetic of H. Hinnant, "chrono-Compatible Low-Level
 * Date Algorithms" (days_from_civil / civil_from_days). */
int pl__date_days(long *days, const char *ymd);

/* The date `days` after 1970-01-01 as YYYY-MM-DD into out (11 bytes at
 * least); PL_EINVAL when it falls outside years 1..9999. */
int pl__days_date(char *out, size_t size, long days);

#endif
