/*
 * npy.c - the .npy header: parse and write.
 *
 * The format is numpy's own (numpy.lib.format, "NEP 1 - A simple file
 * format for NumPy arrays", Kern, 2007): the magic "\x93NUMPY", a major
 * and minor version byte, a little-endian header length (u16 for 1.0, u32
 * for 2.0 and 3.0), then a Python dict literal padded with spaces and
 * ended by a newline. The dict is parsed here by a small, strict reader of
 * the subset numpy writes; it streams from the FILE so that nothing is
 * allocated and a hostile length cannot make it buffer more than it reads.
 */
#include "image/npy_int.h"
#include "common/common_int.h"
#include "common/num_int.h"
#include "common/strbuf_int.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

static const unsigned char npy_magic[6] = {0x93, 'N', 'U', 'M', 'P', 'Y'};

/* numpy pads the header so the data of a growing first axis can be
 * rewritten in place (GROWTH_AXIS_MAX_DIGITS in numpy.lib.format). */
#define GROWTH_AXIS_MAX_DIGITS 21
#define ARRAY_ALIGN 64

PL_EXPORT const char *pl_npy_dtype_name(pl_npy_dtype dtype)
{
    switch (dtype) {
    case PL_NPY_U8: return "uint8";
    case PL_NPY_U16: return "uint16";
    case PL_NPY_I16: return "int16";
    case PL_NPY_F32: return "float32";
    case PL_NPY_F64: return "float64";
    case PL_NPY_UNSUPPORTED: break;
    }
    return "unsupported";
}

/*
 * Split a simple descr string ("<f4", "|u1", "c16") into its byte order
 * character ('|' when none is written), kind letter and item size. Returns
 * 0, or -1 when the string is not of that form (no kind, no size, more
 * than 4 digits, anything after them); order and kind are set either way.
 */
static int split_descr(const char *descr, char *order, char *kind, unsigned long *size)
{
    const char *d = descr;
    *order = '|';
    if (*d == '<' || *d == '>' || *d == '|' || *d == '=')
        *order = *d++;
    *kind = *d;
    *size = 0;
    if (!*d)
        return -1;
    int digits = 0;
    for (const char *p = d + 1; *p; p++) {
        if (*p < '0' || *p > '9' || digits >= 4)
            return -1;
        *size = *size * 10 + (unsigned long)(*p - '0');
        digits++;
    }
    return digits ? 0 : -1;
}

char *pl_npy__descr_name(char *out, size_t cap, const char *descr)
{
    char order, kind;
    unsigned long bytes;
    const char *name = NULL;
    if (split_descr(descr, &order, &kind, &bytes) == 0 && bytes) {
        switch (kind) {
        case 'b': name = "bool"; break;
        case 'i': name = "int"; break;
        case 'u': name = "uint"; break;
        case 'f': name = "float"; break;
        case 'c': name = "complex"; break;
        default: break;
        }
    }
    if (!name)
        snprintf(out, cap, "'%s'", descr);
    else if (kind == 'b')
        snprintf(out, cap, "bool");
    else
        snprintf(out, cap, "%s%lu", name, bytes * 8);
    return out;
}

/* ---- header reader --------------------------------------------------- */

typedef struct hreader {
    FILE *f;
    uint64_t left;   /* header bytes not yet taken from the file */
    int ch;          /* the current character, EOF past the header's end */
    int io_error;    /* a read failed */
    int truncated;   /* the file ended inside the header */
    const char *name;
    pl_err *err;
} hreader;

static void advance(hreader *r)
{
    if (r->left == 0) {
        r->ch = EOF;
        return;
    }
    int c = getc(r->f);
    if (c == EOF) {
        if (ferror(r->f))
            r->io_error = 1;
        else
            r->truncated = 1;
        r->left = 0;
        r->ch = EOF;
        return;
    }
    r->left--;
    r->ch = c;
}

static int is_space(int c)
{
    return c == ' ' || c == '\t' || c == '\n' || c == '\r';
}

static void skip_space(hreader *r)
{
    while (is_space(r->ch))
        advance(r);
}

/* A failure at the current point: the file's end or a read error explain
 * it better than the syntax does. */
static int fail(hreader *r, const char *what)
{
    if (r->io_error)
        return pl__err(r->err, PL_EIO, "%s: cannot read: %s", r->name, strerror(errno));
    if (r->truncated)
        return pl__err(r->err, PL_EFORMAT, "%s: truncated .npy header", r->name);
    return pl__err(r->err, PL_EFORMAT, "%s: malformed .npy header: %s", r->name, what);
}

/* A Python string literal in single or double quotes. Longer strings than
 * the buffer are read to their end and reported through *overlong. */
static int read_string(hreader *r, char *buf, size_t cap, int *overlong)
{
    int quote = r->ch;
    if (quote != '\'' && quote != '"')
        return fail(r, "a quoted string was expected");
    size_t n = 0;
    *overlong = 0;
    advance(r);
    for (;;) {
        if (r->ch == EOF)
            return fail(r, "unterminated string");
        if (r->ch == quote)
            break;
        if (r->ch == '\n')
            return fail(r, "unterminated string");
        if (r->ch == '\\') {
            advance(r);
            if (r->ch == EOF)
                return fail(r, "unterminated string");
        }
        if (n + 1 < cap)
            buf[n++] = (char)r->ch;
        else
            *overlong = 1;
        advance(r);
    }
    buf[n] = '\0';
    advance(r);
    return PL_OK;
}

/* Skip a bracketed value (a structured dtype's list of fields), minding
 * nested brackets and strings. */
static int skip_bracketed(hreader *r)
{
    int depth = 0;
    do {
        if (r->ch == EOF)
            return fail(r, "unbalanced brackets in 'descr'");
        if (r->ch == '\'' || r->ch == '"') {
            char scratch[2];
            int overlong;
            int rc = read_string(r, scratch, sizeof scratch, &overlong);
            if (rc)
                return rc;
            continue;
        }
        if (r->ch == '[' || r->ch == '(')
            depth++;
        else if (r->ch == ']' || r->ch == ')')
            depth--;
        if (depth > 64)
            return fail(r, "'descr' nested too deeply");
        advance(r);
    } while (depth > 0);
    return PL_OK;
}

/* Fill dtype, big_endian and itemsize from the descr string. */
static void classify_descr(pl_npy_header *hdr)
{
    char order, kind;
    unsigned long size;
    int ok = split_descr(hdr->descr, &order, &kind, &size) == 0;
    hdr->dtype = PL_NPY_UNSUPPORTED;
    hdr->itemsize = ok ? size : 0;
    hdr->big_endian = order == '>' || (order == '=' && pl__host_big_endian());
    if (!ok)
        return;
    if (kind == 'u' && size == 1)
        hdr->dtype = PL_NPY_U8;
    else if (kind == 'u' && size == 2)
        hdr->dtype = PL_NPY_U16;
    else if (kind == 'i' && size == 2)
        hdr->dtype = PL_NPY_I16;
    else if (kind == 'f' && size == 4)
        hdr->dtype = PL_NPY_F32;
    else if (kind == 'f' && size == 8)
        hdr->dtype = PL_NPY_F64;
    if (size == 1)
        hdr->big_endian = 0;
}

static int parse_descr(hreader *r, pl_npy_header *hdr)
{
    if (r->ch == '[') {
        int rc = skip_bracketed(r);
        if (rc)
            return rc;
        snprintf(hdr->descr, sizeof hdr->descr, "structured");
        hdr->dtype = PL_NPY_UNSUPPORTED;
        hdr->itemsize = 0;
        hdr->big_endian = 0;
        return PL_OK;
    }
    int overlong;
    int rc = read_string(r, hdr->descr, sizeof hdr->descr, &overlong);
    if (rc)
        return rc;
    if (hdr->descr[0] == '\0')
        return fail(r, "'descr' is empty");
    classify_descr(hdr);
    if (overlong) {
        hdr->dtype = PL_NPY_UNSUPPORTED;
        hdr->itemsize = 0;
    }
    return PL_OK;
}

static int parse_bool(hreader *r, int *out)
{
    char word[8];
    size_t n = 0;
    while ((r->ch >= 'A' && r->ch <= 'Z') || (r->ch >= 'a' && r->ch <= 'z')) {
        if (n + 1 >= sizeof word)
            return fail(r, "'fortran_order' must be True or False");
        word[n++] = (char)r->ch;
        advance(r);
    }
    word[n] = '\0';
    if (strcmp(word, "True") == 0)
        *out = 1;
    else if (strcmp(word, "False") == 0)
        *out = 0;
    else
        return fail(r, "'fortran_order' must be True or False");
    return PL_OK;
}

/* A non-negative integer literal; Python 2 era files may carry an 'L'. */
static int parse_dim(hreader *r, uint64_t *out)
{
    if (r->ch < '0' || r->ch > '9')
        return fail(r, "'shape' must be a tuple of non-negative integers");
    uint64_t v = 0;
    while (r->ch >= '0' && r->ch <= '9') {
        unsigned d = (unsigned)(r->ch - '0');
        if (v > (UINT64_MAX - d) / 10)
            return fail(r, "a 'shape' dimension is too large");
        v = v * 10 + d;
        advance(r);
    }
    if (r->ch == 'L' || r->ch == 'l')
        advance(r);
    *out = v;
    return PL_OK;
}

/* A Python tuple of integers: (), (3,), (3, 4) or (3, 4,). A parenthesised
 * single number without its comma is not a tuple and is refused, as
 * numpy refuses it. */
static int parse_shape(hreader *r, pl_npy_header *hdr)
{
    if (r->ch != '(')
        return fail(r, "'shape' must be a tuple");
    advance(r);
    skip_space(r);
    int ndim = 0;
    int trailing_comma = 0;
    while (r->ch != ')') {
        if (ndim == PL_NPY_MAX_DIMS)
            return pl__err(r->err, PL_EFORMAT,
                           "%s: .npy shape has more than %d dimensions", r->name,
                           PL_NPY_MAX_DIMS);
        int rc = parse_dim(r, &hdr->shape[ndim]);
        if (rc)
            return rc;
        ndim++;
        skip_space(r);
        trailing_comma = 0;
        if (r->ch == ',') {
            trailing_comma = 1;
            advance(r);
            skip_space(r);
        } else if (r->ch != ')') {
            return fail(r, "',' or ')' expected in 'shape'");
        }
    }
    if (ndim == 1 && !trailing_comma)
        return fail(r, "'shape' (n) is not a tuple; (n,) expected");
    advance(r);
    hdr->ndim = ndim;
    uint64_t count = 1;
    for (int i = 0; i < ndim; i++) {
        uint64_t s = hdr->shape[i];
        if (s != 0 && count > UINT64_MAX / s)
            return pl__err(r->err, PL_EFORMAT,
                           "%s: .npy shape has more elements than can be counted",
                           r->name);
        count *= s;
    }
    hdr->count = count;
    return PL_OK;
}

enum { KEY_DESCR = 1, KEY_FORTRAN = 2, KEY_SHAPE = 4 };

static int parse_dict(hreader *r, pl_npy_header *hdr)
{
    unsigned seen = 0;
    skip_space(r);
    if (r->ch != '{')
        return fail(r, "the header is not a dict");
    advance(r);
    for (;;) {
        skip_space(r);
        if (r->ch == '}')
            break;
        char key[32];
        int overlong;
        int rc = read_string(r, key, sizeof key, &overlong);
        if (rc)
            return rc;
        unsigned which = 0;
        if (!overlong && strcmp(key, "descr") == 0)
            which = KEY_DESCR;
        else if (!overlong && strcmp(key, "fortran_order") == 0)
            which = KEY_FORTRAN;
        else if (!overlong && strcmp(key, "shape") == 0)
            which = KEY_SHAPE;
        else
            return pl__err(r->err, PL_EFORMAT, "%s: .npy header has an unknown key '%s%s'",
                           r->name, key, overlong ? "..." : "");
        if (seen & which)
            return pl__err(r->err, PL_EFORMAT, "%s: .npy header repeats the key '%s'",
                           r->name, key);
        seen |= which;
        skip_space(r);
        if (r->ch != ':')
            return fail(r, "':' expected after a key");
        advance(r);
        skip_space(r);
        if (which == KEY_DESCR)
            rc = parse_descr(r, hdr);
        else if (which == KEY_FORTRAN)
            rc = parse_bool(r, &hdr->fortran_order);
        else
            rc = parse_shape(r, hdr);
        if (rc)
            return rc;
        skip_space(r);
        if (r->ch == ',')
            advance(r);
        else if (r->ch != '}')
            return fail(r, "',' or '}' expected after a value");
    }
    advance(r);
    /* what follows the dict is padding: spaces and the final newline */
    while (r->ch != EOF) {
        if (!is_space(r->ch))
            return fail(r, "text after the closing '}'");
        advance(r);
    }
    if (r->io_error || r->truncated)
        return fail(r, "");
    static const struct { unsigned bit; const char *name; } keys[] = {
        {KEY_DESCR, "descr"}, {KEY_FORTRAN, "fortran_order"}, {KEY_SHAPE, "shape"}};
    for (size_t i = 0; i < sizeof keys / sizeof keys[0]; i++)
        if (!(seen & keys[i].bit))
            return pl__err(r->err, PL_EFORMAT, "%s: .npy header has no '%s' key", r->name,
                           keys[i].name);
    return PL_OK;
}

PL_EXPORT int pl_npy_read_header(pl_npy_header *hdr, FILE *f, const char *name, pl_err *err)
{
    memset(hdr, 0, sizeof *hdr);
    unsigned char pre[12];
    size_t got = fread(pre, 1, 10, f);
    if (got < 10 && ferror(f))
        return pl__err(err, PL_EIO, "%s: cannot read: %s", name, strerror(errno));
    if (got < sizeof npy_magic || memcmp(pre, npy_magic, sizeof npy_magic) != 0)
        return pl__err(err, PL_EFORMAT, "%s: not a .npy file (no \\x93NUMPY magic)", name);
    if (got < 8)
        return pl__err(err, PL_EFORMAT, "%s: truncated .npy header", name);
    unsigned major = pre[6], minor = pre[7];
    if ((major != 1 && major != 2 && major != 3) || minor != 0)
        return pl__err(err, PL_EFORMAT, "%s: .npy format version %u.%u not supported "
                       "(1.0, 2.0 or 3.0 expected)", name, major, minor);
    size_t lenbytes = major == 1 ? 2 : 4;
    if (lenbytes == 4 && got == 10)
        got += fread(pre + 10, 1, 2, f);
    if (got < 8 + lenbytes) {
        if (ferror(f))
            return pl__err(err, PL_EIO, "%s: cannot read: %s", name, strerror(errno));
        return pl__err(err, PL_EFORMAT, "%s: truncated .npy header", name);
    }
    uint32_t hlen = (uint32_t)pre[8] | (uint32_t)pre[9] << 8;
    if (lenbytes == 4)
        hlen |= (uint32_t)pre[10] << 16 | (uint32_t)pre[11] << 24;
    if (hlen > PL_NPY__MAX_HEADER_LEN)
        return pl__err(err, PL_EFORMAT, "%s: .npy header length %lu exceeds the limit of %u",
                       name, (unsigned long)hlen, PL_NPY__MAX_HEADER_LEN);
    hdr->data_offset = 8 + lenbytes + hlen;

    hreader r = {.f = f, .left = hlen, .name = name, .err = err};
    advance(&r);
    return parse_dict(&r, hdr);
}

/* ---- header writer --------------------------------------------------- */

static int valid_descr(const char *descr)
{
    size_t n = strlen(descr);
    if (n == 0 || n >= sizeof ((pl_npy_header *)0)->descr)
        return 0;
    for (size_t i = 0; i < n; i++)
        if (descr[i] < 0x21 || descr[i] > 0x7e || descr[i] == '\'' || descr[i] == '\\')
            return 0;
    return 1;
}

PL_EXPORT int pl_npy_write_header(FILE *f, const char *descr, int ndim,
                                  const uint64_t *shape, const char *name, pl_err *err)
{
    if (ndim < 0 || ndim > PL_NPY_MAX_DIMS)
        return pl__err(err, PL_EINVAL, "%s: %d dimensions cannot be written (0 to %d)", name,
                       ndim, PL_NPY_MAX_DIMS);
    if (!descr || !valid_descr(descr))
        return pl__err(err, PL_EINVAL, "%s: invalid dtype string for a .npy header", name);
    pl_strbuf h = PL_STRBUF_INIT;
    pl_strbuf__printf(&h, "{'descr': '%s', 'fortran_order': False, 'shape': (", descr);
    for (int i = 0; i < ndim; i++)
        pl_strbuf__printf(&h, "%s%llu", i ? ", " : "", (unsigned long long)shape[i]);
    pl_strbuf__printf(&h, "%s), }", ndim == 1 ? "," : "");
    if (ndim > 0) {
        char first[24];
        int digits = snprintf(first, sizeof first, "%llu", (unsigned long long)shape[0]);
        pl_strbuf__repeat(&h, ' ', (size_t)(GROWTH_AXIS_MAX_DIGITS - digits));
    }
    /* magic (6) + version (2) + length (2) + dict + padding + '\n' */
    pl_strbuf__repeat(&h, ' ', ARRAY_ALIGN - (10 + pl_strbuf__len(&h) + 1) % ARRAY_ALIGN);
    pl_strbuf__append(&h, "\n");
    if (pl_strbuf__failed(&h))
        return pl__err(err, PL_ENOMEM, "%s: out of memory for a .npy header", name);
    size_t n = pl_strbuf__len(&h);

    unsigned char pre[10];
    memcpy(pre, npy_magic, sizeof npy_magic);
    pre[6] = 1;
    pre[7] = 0;
    pre[8] = (unsigned char)(n & 0xff);
    pre[9] = (unsigned char)(n >> 8);
    int ok = fwrite(pre, 1, sizeof pre, f) == sizeof pre
             && fwrite(pl_strbuf__str(&h), 1, n, f) == n;
    pl_strbuf__release(&h);
    if (!ok)
        return pl__err(err, PL_EIO, "%s: cannot write: %s", name, strerror(errno));
    return PL_OK;
}

/* ---- conversion ------------------------------------------------------ */

static uint64_t load_uint(const unsigned char *s, size_t n, int big_endian)
{
    uint64_t v = 0;
    if (big_endian)
        for (size_t k = 0; k < n; k++)
            v = v << 8 | s[k];
    else
        for (size_t k = n; k > 0; k--)
            v = v << 8 | s[k - 1];
    return v;
}

PL_EXPORT void pl_npy_to_float(float *dst, const void *src, size_t n, const pl_npy_header *hdr)
{
    const unsigned char *s = src;
    int big = hdr->big_endian;
    for (size_t i = 0; i < n; i++) {
        switch (hdr->dtype) {
        case PL_NPY_U8:
            dst[i] = (float)s[i];
            break;
        case PL_NPY_U16:
            dst[i] = (float)load_uint(s + 2 * i, 2, big);
            break;
        case PL_NPY_I16: {
            long v = (long)load_uint(s + 2 * i, 2, big);
            dst[i] = (float)(v >= 0x8000 ? v - 0x10000 : v);
            break;
        }
        case PL_NPY_F32: {
            uint32_t bits = (uint32_t)load_uint(s + 4 * i, 4, big);
            memcpy(&dst[i], &bits, sizeof bits);
            break;
        }
        case PL_NPY_F64: {
            uint64_t bits = load_uint(s + 8 * i, 8, big);
            double d;
            memcpy(&d, &bits, sizeof d);
            dst[i] = (float)d;
            break;
        }
        case PL_NPY_UNSUPPORTED:
        default:
            dst[i] = NAN;
            break;
        }
    }
}
