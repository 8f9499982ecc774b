/*
 * strbuf.c - the growing string of strbuf_int.h.
 */
#include "common/strbuf_int.h"

#include <csv.h>
#include <math.h>

#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void pl_strbuf__init(pl_strbuf *b)
{
    b->s = NULL;
    b->len = b->cap = 0;
    b->failed = 0;
}

static void mark_failed(pl_strbuf *b)
{
    free(b->s);
    b->s = NULL;
    b->len = b->cap = 0;
    b->failed = 1;
}

/* Room for `more` characters after the text and its NUL; 0 on failure
 * (then b is failed). Capacity at least doubles, so appending n
 * characters one at a time costs O(n). */
static int reserve(pl_strbuf *b, size_t more)
{
    if (b->failed)
        return 0;
    if (more > SIZE_MAX / 2 - b->len) {
        mark_failed(b);
        return 0;
    }
    size_t need = b->len + more + 1;
    if (need <= b->cap)
        return 1;
    size_t cap = b->cap ? b->cap : 64;
    while (cap < need)
        cap *= 2;
    char *s = realloc(b->s, cap);
    if (!s) {
        mark_failed(b);
        return 0;
    }
    b->s = s;
    b->cap = cap;
    return 1;
}

void pl_strbuf__append_n(pl_strbuf *b, const char *s, size_t n)
{
    if (!reserve(b, n))
        return;
    memcpy(b->s + b->len, s, n);
    b->len += n;
    b->s[b->len] = '\0';
}

void pl_strbuf__append(pl_strbuf *b, const char *s)
{
    pl_strbuf__append_n(b, s, strlen(s));
}

void pl_strbuf__vprintf(pl_strbuf *b, const char *fmt, va_list ap)
{
    if (b->failed)
        return;
    va_list again;
    va_copy(again, ap);
    char small[256];
    int n = vsnprintf(small, sizeof small, fmt, ap);
    if (n < 0) {
        va_end(again);
        mark_failed(b);
        return;
    }
    if ((size_t)n < sizeof small) {
        va_end(again);
        pl_strbuf__append_n(b, small, (size_t)n);
        return;
    }
    if (reserve(b, (size_t)n)) {
        vsnprintf(b->s + b->len, (size_t)n + 1, fmt, again);
        b->len += (size_t)n;
    }
    va_end(again);
}

void pl_strbuf__printf(pl_strbuf *b, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    pl_strbuf__vprintf(b, fmt, ap);
    va_end(ap);
}

void pl_strbuf__repeat(pl_strbuf *b, char c, size_t n)
{
    if (!reserve(b, n))
        return;
    memset(b->s + b->len, c, n);
    b->len += n;
    b->s[b->len] = '\0';
}

size_t pl_strbuf__len(const pl_strbuf *b)
{
    return b->len;
}

const char *pl_strbuf__str(const pl_strbuf *b)
{
    return b->s ? b->s : "";
}

int pl_strbuf__failed(const pl_strbuf *b)
{
    return b->failed;
}

char *pl_strbuf__detach(pl_strbuf *b)
{
    char *s = b->failed ? NULL : b->s ? b->s : pl__strdup("");
    pl_strbuf__init(b);
    return s;
}

void pl_strbuf__release(pl_strbuf *b)
{
    free(b->s);
    pl_strbuf__init(b);
}

/* ---- CSV fields (RFC 4180, quoted by libcsv) ---- */

void pl__csv_field(pl_strbuf *s, const char *text, int last)
{
    size_t n = strlen(text);
    size_t need = csv_write(NULL, 0, text, n);
    char *q = malloc(need + 1);
    if (!q) {
        s->failed = 1;
        return;
    }
    csv_write(q, need, text, n);
    pl_strbuf__append_n(s, q, need);
    free(q);
    pl_strbuf__append(s, last ? "\r\n" : ",");
}

void pl__csv_number(pl_strbuf *s, double v, int last)
{
    char b[40] = "";
    if (isfinite(v))
        snprintf(b, sizeof b, "%.17g", v);
    pl__csv_field(s, b, last);
}
