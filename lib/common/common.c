/*
 * common.c - status text, error buffers and small string helpers.
 */
#include "common/common_int.h"
#include "plyledger/version.h"

#include <errno.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

PL_EXPORT const char *pl_strerror(int code)
{
    switch (code) {
    case PL_OK: return "success";
    case PL_EINVAL: return "invalid argument";
    case PL_ENOMEM: return "out of memory";
    case PL_EIO: return "input/output error";
    case PL_EFORMAT: return "malformed input";
    case PL_ENOTFOUND: return "not found";
    case PL_EEXISTS: return "already exists";
    case PL_EDB: return "database error";
    case PL_ENOMATCH: return "inputs do not match";
    case PL_EVERSION: return "store is newer than this plyledger";
    case PL_ENOTSTORE: return "not a plyledger store";
    case PL_ERANGE: return "value out of range";
    case PL_EREFUSED: return "refused by a quality limit";
    case PL_ECANCELED: return "canceled";
    case PL_EREADONLY: return "record is append-only";
    case PL_EBUSY: return "another process is writing to the store";
    default: return "unknown error";
    }
}

PL_EXPORT const char *pl_err_message(const pl_err *err, int code)
{
    if (err && err->msg[0])
        return err->msg;
    return pl_strerror(code);
}

PL_EXPORT const char *pl_version(void)
{
    return PL_VERSION_STRING;
}

int pl__err(pl_err *err, int code, const char *fmt, ...)
{
    if (err) {
        va_list ap;
        err->code = code;
        va_start(ap, fmt);
        vsnprintf(err->msg, sizeof err->msg, fmt, ap);
        va_end(ap);
        /* one line only */
        for (char *p = err->msg; *p; p++)
            if (*p == '\n' || *p == '\r')
                *p = ' ';
    }
    return code;
}

void pl__err_clear(pl_err *err)
{
    if (err) {
        err->code = PL_OK;
        err->msg[0] = '\0';
    }
}

const char *pl__basename(const char *path)
{
    if (!path)
        return "(null)";
    const char *slash = strrchr(path, '/');
    return slash && slash[1] ? slash + 1 : path;
}

char *pl__strdup(const char *s)
{
    if (!s)
        return NULL;
    size_t n = strlen(s) + 1;
    char *d = malloc(n);
    if (d)
        memcpy(d, s, n);
    return d;
}

int pl__copy_text(char *dst, size_t cap, const char *src, const char *what,
                  pl_err *err)
{
    if (!src)
        src = "";
    size_t n = strlen(src);
    if (n >= cap)
        return pl__err(err, PL_EINVAL, "%s is too long (%zu characters, at most %zu)",
                       what, n, cap - 1);
    memcpy(dst, src, n + 1);
    return PL_OK;
}

int pl__read_text(char **out, size_t *len, const char *path, size_t max, pl_err *err)
{
    *out = NULL;
    FILE *f = fopen(path, "rb");
    if (!f)
        return pl__err(err, PL_EIO, "%s: cannot open (%s)", path, strerror(errno));
    size_t cap = 1 << 14, n = 0, got;
    char *buf = malloc(cap);
    while (buf && (got = fread(buf + n, 1, cap - n - 1, f)) > 0) {
        n += got;
        if (n + 1 == cap) {
            char *nb = cap < max ? realloc(buf, cap * 2) : NULL;
            if (!nb) {
                free(buf);
                buf = NULL;
                break;
            }
            buf = nb;
            cap *= 2;
        }
    }
    int bad = ferror(f);
    fclose(f);
    if (!buf)
        return pl__err(err, PL_ENOMEM, "%s: too large or out of memory", path);
    if (bad) {
        free(buf);
        return pl__err(err, PL_EIO, "%s: read error", path);
    }
    buf[n] = '\0';
    *out = buf;
    if (len)
        *len = n;
    return PL_OK;
}

/* Hinnant's days_from_civil: March-based years, so that the leap day ends
 * the year; era = 400-year cycle of 146097 days. */
int pl__date_days(long *days, const char *ymd)
{
    static const int mdays[12] = { 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31 };
    if (!ymd || strlen(ymd) != 10 || ymd[4] != '-' || ymd[7] != '-')
        return PL_EINVAL;
    for (int i = 0; i < 10; i++)
        if (i != 4 && i != 7 && (ymd[i] < '0' || ymd[i] > '9'))
            return PL_EINVAL;
    long y = (ymd[0] - '0') * 1000 + (ymd[1] - '0') * 100 + (ymd[2] - '0') * 10 + (ymd[3] - '0');
    int m = (ymd[5] - '0') * 10 + (ymd[6] - '0');
    int d = (ymd[8] - '0') * 10 + (ymd[9] - '0');
    if (y < 1 || m < 1 || m > 12 || d < 1)
        return PL_EINVAL;
    int leap = (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
    if (d > mdays[m - 1] + (m == 2 && leap))
        return PL_EINVAL;
    y -= m <= 2;
    long era = y / 400;
    long yoe = y - era * 400;
    long doy = (153L * (m > 2 ? m - 3 : m + 9) + 2) / 5 + d - 1;
    long doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    *days = era * 146097 + doe - 719468;
    return PL_OK;
}

int pl__days_date(char *out, size_t size, long days)
{
    /* 0001-01-01 is day -719162, 9999-12-31 day 2932896 */
    if (days < -719162 || days > 2932896 || size < 11)
        return PL_EINVAL;
    long z = days + 719468;
    long era = z / 146097;
    long doe = z - era * 146097;
    long yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;
    long y = yoe + era * 400;
    long doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    long mp = (5 * doy + 2) / 153;
    long d = doy - (153 * mp + 2) / 5 + 1;
    long m = mp < 10 ? mp + 3 : mp - 9;
    y += m <= 2;
    snprintf(out, size, "%04ld-%02ld-%02ld", y, m, d);
    return PL_OK;
}
