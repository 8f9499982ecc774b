/*
 * map_csv.c - maps from CSV grids: one map row per line, comma separated.
 *
 * The grammar is small enough that a plain line reader is clearer than a
 * general CSV parser: no quoting, no embedded commas, numbers only.
 */
#include "image/map_int.h"
#include "common/common_int.h"

#include <errno.h>
#include <float.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

typedef struct grid {
    float *v;
    size_t n, cap;
    size_t width;   /* fields per line, set by the first data line */
    size_t height;  /* data lines so far */
    unsigned long first_line;
} grid;

static int push(grid *g, float x)
{
    if (g->n == g->cap) {
        size_t cap = g->cap ? g->cap * 2 : 1024;
        if (cap < g->cap || cap > SIZE_MAX / sizeof(float))
            return -1;
        float *nv = realloc(g->v, cap * sizeof(float));
        if (!nv)
            return -1;
        g->v = nv;
        g->cap = cap;
    }
    g->v[g->n++] = x;
    return 0;
}

static int is_blank(const char *s)
{
    for (; *s; s++)
        if (*s != ' ' && *s != '\t')
            return 0;
    return 1;
}

/* One field, already cut at its comma: blank, "nan" (any case) or a
 * decimal number within float32's range. */
static int parse_field(float *out, char *field, const char *path, unsigned long line,
                       size_t col, pl_err *err)
{
    char *s = field;
    while (*s == ' ' || *s == '\t')
        s++;
    size_t n = strlen(s);
    while (n && (s[n - 1] == ' ' || s[n - 1] == '\t'))
        s[--n] = '\0';
    if (n == 0 || strcasecmp(s, "nan") == 0) {
        *out = NAN;
        return PL_OK;
    }
    double d;
    if (pl_map__parse_number(&d, s))
        return pl__err(err, PL_EFORMAT, "%s: line %lu, field %zu: '%.40s' is not a number",
                       path, line, col, s);
    if (fabs(d) > FLT_MAX)
        return pl__err(err, PL_EFORMAT,
                       "%s: line %lu, field %zu: %s is outside the float32 range", path, line,
                       col, s);
    *out = (float)d;
    return PL_OK;
}

static int parse_line(grid *g, char *line, const char *path, unsigned long lineno,
                      pl_err *err)
{
    size_t fields = 0;
    char *p = line;
    for (;;) {
        char *comma = strchr(p, ',');
        if (comma)
            *comma = '\0';
        float x = NAN;
        int rc = parse_field(&x, p, path, lineno, fields + 1, err);
        if (rc)
            return rc;
        fields++;
        if (g->height > 0 && fields > g->width)
            return pl__err(err, PL_EFORMAT, "%s: line %lu has more than the %zu fields of "
                           "line %lu", path, lineno, g->width, g->first_line);
        if (fields > PL_MAP_MAX_SIDE)
            return pl__err(err, PL_EFORMAT, "%s: line %lu has more than %u fields", path,
                           lineno, PL_MAP_MAX_SIDE);
        if (push(g, x))
            return pl__err(err, PL_ENOMEM, "%s: out of memory at line %lu", path, lineno);
        if (!comma)
            break;
        p = comma + 1;
    }
    if (g->height == 0) {
        g->width = fields;
        g->first_line = lineno;
    } else if (fields != g->width) {
        return pl__err(err, PL_EFORMAT, "%s: line %lu has %zu fields, line %lu has %zu", path,
                       lineno, fields, g->first_line, g->width);
    }
    g->height++;
    if (g->height > PL_MAP_MAX_SIDE)
        return pl__err(err, PL_EFORMAT, "%s: more than %u rows", path, PL_MAP_MAX_SIDE);
    return PL_OK;
}

static int read_grid(grid *g, FILE *f, const char *path, pl_err *err)
{
    char *line = NULL;
    size_t cap = 0;
    unsigned long lineno = 0;
    ssize_t len;
    int rc = PL_OK;
    errno = 0;
    while (rc == PL_OK && (len = getline(&line, &cap, f)) >= 0) {
        lineno++;
        if ((size_t)len != strlen(line)) {
            rc = pl__err(err, PL_EFORMAT, "%s: line %lu contains a NUL byte", path, lineno);
            break;
        }
        while (len > 0 && (line[len - 1] == '\n' || line[len - 1] == '\r'))
            line[--len] = '\0';
        char *text = line;
        /* a UTF-8 byte order mark, as spreadsheets write one */
        if (lineno == 1 && strncmp(text, "\xEF\xBB\xBF", 3) == 0)
            text += 3;
        if (text[0] == '#' || is_blank(text))
            continue;
        rc = parse_line(g, text, path, lineno, err);
    }
    if (rc == PL_OK && ferror(f))
        rc = pl__err(err, PL_EIO, "%s: cannot read: %s", path, strerror(errno));
    free(line);
    if (rc == PL_OK && g->height == 0)
        rc = pl__err(err, PL_EFORMAT, "%s: no data rows", path);
    return rc;
}

int pl_map__load_csv(pl_map **out, pl_map_load_info *info, const char *path,
                     const pl_map_load_options *opts, pl_err *err)
{
    *out = NULL;
    FILE *f = fopen(path, "rb");
    if (!f)
        return pl__err(err, PL_EIO, "%s: cannot open: %s", path, strerror(errno));
    grid g = {0};
    int rc = read_grid(&g, f, path, err);
    fclose(f);
    if (rc == PL_OK) {
        pl_map *m;
        rc = pl_map_new(&m, (uint32_t)g.width, (uint32_t)g.height, 1, err);
        if (rc == PL_OK) {
            memcpy(m->data, g.v, g.n * sizeof(float));
            m->pitch_u = m->pitch_v = NAN; /* a CSV grid carries no pitch */
            /* the grammar admits no infinity; a grid of no data is refused here */
            rc = pl_map__check_values(info, m, opts, path, NULL, PL_EFORMAT, err);
            if (rc)
                pl_map_free(m);
            else
                *out = m;
        }
    }
    free(g.v);
    return rc;
}

PL_EXPORT int pl_map_load_csv(pl_map **out, const char *path, pl_err *err)
{
    return pl_map__load_csv(out, NULL, path, NULL, err);
}
