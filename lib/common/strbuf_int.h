/*
 * strbuf_int.h - a growing string for messages and reports; never
 * installed.
 *
 * A pl_strbuf starts as PL_STRBUF_INIT (or pl_strbuf__init()) and grows
 * as text is appended. Failure is sticky: once an allocation (or a
 * format) fails, the buffer is marked failed, later appends do nothing,
 * and pl_strbuf__detach() gives NULL, so a caller appends freely and
 * checks once at the end. pl_strbuf__detach() hands over the string;
 * pl_strbuf__release() drops it.
 */
#ifndef PLYLEDGER_STRBUF_INT_H
#define PLYLEDGER_STRBUF_INT_H

#include "common/common_int.h"

#include <stdarg.h>
#include <stddef.h>

typedef struct pl_strbuf {
    char *s;    /* len characters and a NUL, or NULL while empty */
    size_t len, cap;
    int failed;
} pl_strbuf;

#define PL_STRBUF_INIT { NULL, 0, 0, 0 }

void pl_strbuf__init(pl_strbuf *b);

/* Append the n bytes at s (which may hold NULs). */
void pl_strbuf__append_n(pl_strbuf *b, const char *s, size_t n);

/* Append a NUL-terminated string. */
void pl_strbuf__append(pl_strbuf *b, const char *s);

/* Append formatted text (printf's formats). */
void pl_strbuf__printf(pl_strbuf *b, const char *fmt, ...) PL_PRINTF(2, 3);
void pl_strbuf__vprintf(pl_strbuf *b, const char *fmt, va_list ap) PL_PRINTF(2, 0);

/* Append n copies of the character c. */
void pl_strbuf__repeat(pl_strbuf *b, char c, size_t n);

/* The length so far (0 once failed). */
size_t pl_strbuf__len(const pl_strbuf *b);

/* The text so far, NUL terminated, owned by b ("" while empty or once
 * failed); valid until the next change to b. */
const char *pl_strbuf__str(const pl_strbuf *b);

/* 1 once an append has failed. */
int pl_strbuf__failed(const pl_strbuf *b);

/* The malloc'd string ("" when nothing was appended), or NULL when an
 * append failed or there is no memory; b is empty again afterwards. */
char *pl_strbuf__detach(pl_strbuf *b);

/* Free the text; b is empty again (and no longer failed). */
void pl_strbuf__release(pl_strbuf *b);

/* Append `text` as one CSV field, quoted the RFC 4180 way by libcsv's
 * csv_write(), then "," or, when `last`, the record's "\r\n". */
void pl__csv_field(pl_strbuf *b, const char *text, int last);

/* A number as a CSV field: %.17g (full precision), empty when not finite. */
void pl__csv_number(pl_strbuf *b, double v, int last);

#endif
