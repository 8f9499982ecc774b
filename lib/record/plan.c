/*
 * plan.c - site plans: RFC 4180 CSV (parsed by libcsv) to pl_site records,
 * and their addition to an airframe in one savepoint.
 *
 * The file is fed to libcsv one physical line at a time so that every
 * message can name the line a record starts on, even when a quoted field
 * runs over several lines.
 */
#include "plyledger/plan.h"

#include "common/common_int.h"
#include "record/store_int.h"

#include <assert.h>
#include <csv.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

enum column {
    C_SITE, C_METHOD, C_OX, C_OY, C_OZ, C_UX, C_UY, C_UZ, C_VX, C_VY, C_VZ, C_PITCH,
    C_ZONE, C_DESCRIPTION, C_FRAME, C_STRINGER, C_MATERIAL, C_THICKNESS, C_DIFFUSIVITY,
    C_WIDTH, C_HEIGHT, C_PITCH_V, C_SYSTEM, C_UNIT,
    NCOLUMNS
};

static const struct {
    const char *name;
    int required;
} columns[NCOLUMNS] = {
    { "site", 1 }, { "method", 1 }, { "origin_x", 1 }, { "origin_y", 1 }, { "origin_z", 1 },
    { "u_x", 1 }, { "u_y", 1 }, { "u_z", 1 }, { "v_x", 1 }, { "v_y", 1 }, { "v_z", 1 },
    { "pitch_mm", 1 }, { "zone", 0 }, { "description", 0 }, { "frame", 0 }, { "stringer", 0 },
    { "material", 0 }, { "thickness_mm", 0 }, { "diffusivity_mm2_s", 0 }, { "width_px", 0 },
    { "height_px", 0 }, { "pitch_v_mm", 0 }, { "coord_system", 0 }, { "coord_unit", 0 },
};

#define DEFAULT_SYSTEM "STA/BL/WL"
#define DEFAULT_UNIT "mm"

/* Far above any plan (a thousand sites take some 150 kB); a wrong file of
 * gigabytes is refused instead of read. */
#define PLAN_MAX_BYTES ((size_t)64 << 20)

typedef struct reader {
    const char *path;
    pl_err *err;
    int rc;               /* first failure; later rows are ignored */
    size_t line;          /* physical line being fed (1-based) */
    size_t row_line;      /* line the current record began on */
    int in_row;           /* a record is open across a line end */
    int row_ended;        /* a record ended while feeding the current line */
    char **fields;        /* fields of the current record */
    size_t nfields, cap_fields;
    int have_header;
    int col_of[NCOLUMNS]; /* field index of each column, or -1 */
    size_t ncols;         /* fields in the header */
    pl_site *sites;
    size_t *site_lines;
    size_t nsites, cap_sites;
} reader;

static void drop_fields(reader *r)
{
    for (size_t i = 0; i < r->nfields; i++)
        free(r->fields[i]);
    r->nfields = 0;
}

static void on_field(void *data, size_t len, void *ud)
{
    reader *r = ud;
    r->in_row = 1;
    if (r->rc)
        return;
    if (data && memchr(data, '\0', len)) {
        r->rc = pl__err(r->err, PL_EFORMAT, "%s line %zu: a field contains a NUL byte", r->path,
                        r->row_line);
        return;
    }
    if (r->nfields == r->cap_fields) {
        size_t cap = r->cap_fields ? 2 * r->cap_fields : 32;
        char **f = realloc(r->fields, cap * sizeof *f);
        if (!f) {
            r->rc = pl__err(r->err, PL_ENOMEM, "%s: out of memory", r->path);
            return;
        }
        r->fields = f;
        r->cap_fields = cap;
    }
    char *copy = malloc(len + 1);
    if (!copy) {
        r->rc = pl__err(r->err, PL_ENOMEM, "%s: out of memory", r->path);
        return;
    }
    if (len)
        memcpy(copy, data, len);
    copy[len] = '\0';
    r->fields[r->nfields++] = copy;
}

static int header(reader *r)
{
    for (int c = 0; c < NCOLUMNS; c++)
        r->col_of[c] = -1;
    for (size_t i = 0; i < r->nfields; i++) {
        const char *name = r->fields[i];
        int c = 0;
        while (c < NCOLUMNS && strcmp(name, columns[c].name) != 0)
            c++;
        if (c == NCOLUMNS)
            return pl__err(r->err, PL_EFORMAT, "%s: unknown column '%s'", r->path, name);
        if (r->col_of[c] >= 0)
            return pl__err(r->err, PL_EFORMAT, "%s: column %s appears twice", r->path, name);
        r->col_of[c] = (int)i;
    }
    for (int c = 0; c < NCOLUMNS; c++)
        if (columns[c].required && r->col_of[c] < 0)
            return pl__err(r->err, PL_EFORMAT, "%s: missing column %s", r->path, columns[c].name);
    r->ncols = r->nfields;
    r->have_header = 1;
    return PL_OK;
}

/* The field of column c in the current record, "" when the column is absent. */
static const char *field(const reader *r, int c)
{
    return r->col_of[c] >= 0 ? r->fields[r->col_of[c]] : "";
}

/*
 * Strict decimal number: what strtod reads must be the whole field, with no
 * blanks and no hexadecimal. Returns 1 when it is a number (which may be
 * NaN or infinite: the caller decides), 0 when it is not.
 */
static int parse_number(const char *s, double *out)
{
    if (!*s || strchr(" \t\r\n\f\v", s[0]) || strpbrk(s, "xX"))
        return 0;
    char *end;
    double v = strtod(s, &end);
    if (*end)
        return 0;
    *out = v;
    return 1;
}

/* Blanks around a number, as "F01, 1.5" leaves them, are not part of it. */
static int number(reader *r, int c, double *out, int *present)
{
    const char *raw = field(r, c);
    char s[128];
    size_t b = strspn(raw, " \t"), n = strlen(raw + b);
    while (n && (raw[b + n - 1] == ' ' || raw[b + n - 1] == '\t'))
        n--;
    snprintf(s, sizeof s, "%.*s", (int)(n < sizeof s ? n : sizeof s - 1), raw + b);
    if (n >= sizeof s)
        return pl__err(r->err, PL_EFORMAT, "%s line %zu: column %s: '%.20s...' is not a number",
                       r->path, r->row_line, columns[c].name, s);
    *present = *s != '\0';
    if (!*present)
        return columns[c].required
                   ? pl__err(r->err, PL_EFORMAT, "%s line %zu: column %s: a value is required",
                             r->path, r->row_line, columns[c].name)
                   : PL_OK;
    if (!parse_number(s, out))
        return pl__err(r->err, PL_EFORMAT, "%s line %zu: column %s: '%s' is not a number",
                       r->path, r->row_line, columns[c].name, s);
    if (!isfinite(*out))
        return pl__err(r->err, PL_EINVAL, "%s line %zu: column %s: '%s' is not a finite number",
                       r->path, r->row_line, columns[c].name, s);
    return PL_OK;
}

static int pixels(reader *r, int c, uint32_t *out)
{
    const char *s = field(r, c);
    *out = 0;
    while (*s == ' ' || *s == '\t')
        s++;
    if (!*s)
        return PL_OK;
    unsigned long v = 0;
    for (const char *p = s; *p; p++) {
        if (*p < '0' || *p > '9' || p - s > 9)
            return pl__err(r->err, PL_EFORMAT,
                           "%s line %zu: column %s: '%s' is not a whole number of pixels",
                           r->path, r->row_line, columns[c].name, s);
        v = v * 10 + (unsigned long)(*p - '0');
    }
    if (v > PL_MAP_MAX_SIDE)
        return pl__err(r->err, PL_EINVAL, "%s line %zu: column %s: %lu exceeds %u pixels",
                       r->path, r->row_line, columns[c].name, v, PL_MAP_MAX_SIDE);
    *out = (uint32_t)v;
    return PL_OK;
}

/*
 * A text column as written (libcsv trims nothing here): valid UTF-8, and
 * a name (flags 0) on one line without control characters, free text
 * (PL_TEXT_LINES) with line breaks allowed; the site code is a key. The
 * store checks again; this names the line and column.
 */
static int text(reader *r, int c, char *dst, size_t cap, const char *fallback, unsigned flags)
{
    char what[PL_ERR_MSG_SIZE / 2];
    const char *s = field(r, c);
    snprintf(what, sizeof what, "%s line %zu: column %s", r->path, r->row_line,
             columns[c].name);
    int rc = c == C_SITE && *s ? pl_key_check(s, what, r->err) : pl_text_check(s, flags, what,
                                                                               r->err);
    return rc ? rc : pl__copy_text(dst, cap, *s ? s : fallback, what, r->err);
}

/* A present number of column c inside bound b. */
static int bounded(reader *r, int c, double v, int present, pl_bound b)
{
    if (!present)
        return PL_OK;
    char what[PL_ERR_MSG_SIZE / 2];
    snprintf(what, sizeof what, "%s line %zu: column %s", r->path, r->row_line,
             columns[c].name);
    return pl_bound_check(b, v, what, r->err);
}

static int pitch(reader *r, int c, double *out, int *present)
{
    int rc = number(r, c, out, present);
    if (rc == PL_EINVAL || (!rc && *present && !(*out > 0)))
        return pl__err(r->err, PL_EINVAL, "%s line %zu: column %s: '%s' is not a pitch > 0",
                       r->path, r->row_line, columns[c].name, field(r, c));
    return rc ? rc : bounded(r, c, *out, *present, PL_BOUND_PITCH);
}

/* One data record to one site, checked; duplicates of code are refused. */
static int site_row(reader *r)
{
    if (r->nfields != r->ncols)
        return pl__err(r->err, PL_EFORMAT, "%s line %zu: %zu fields where the header has %zu",
                       r->path, r->row_line, r->nfields, r->ncols);
    pl_site site;
    memset(&site, 0, sizeof site);
    int rc = text(r, C_SITE, site.code, sizeof site.code, "", 0);
    const struct {
        int col;
        char *dst;
        size_t cap;
        const char *fallback;
        unsigned flags;
    } texts[] = {
        { C_METHOD, site.method, sizeof site.method, "", 0 },
        { C_ZONE, site.zone, sizeof site.zone, "", 0 },
        { C_DESCRIPTION, site.description, sizeof site.description, "", PL_TEXT_LINES },
        { C_FRAME, site.frame, sizeof site.frame, "", 0 },
        { C_STRINGER, site.stringer, sizeof site.stringer, "", 0 },
        { C_MATERIAL, site.material, sizeof site.material, "", 0 },
        { C_SYSTEM, site.map_frame.system, sizeof site.map_frame.system, DEFAULT_SYSTEM, 0 },
        { C_UNIT, site.map_frame.unit, sizeof site.map_frame.unit, DEFAULT_UNIT, 0 },
    };
    for (size_t i = 0; !rc && i < sizeof texts / sizeof texts[0]; i++)
        rc = text(r, texts[i].col, texts[i].dst, texts[i].cap, texts[i].fallback,
                  texts[i].flags);
    if (!rc && !site.code[0])
        rc = pl__err(r->err, PL_EFORMAT, "%s line %zu: column site: a value is required",
                     r->path, r->row_line);
    int present;
    double *vec[9] = { &site.map_frame.origin[0], &site.map_frame.origin[1],
                       &site.map_frame.origin[2], &site.map_frame.u[0], &site.map_frame.u[1],
                       &site.map_frame.u[2], &site.map_frame.v[0], &site.map_frame.v[1],
                       &site.map_frame.v[2] };
    for (int k = 0; !rc && k < 9; k++)
        rc = number(r, C_OX + k, vec[k], &present);
    for (int k = 0; !rc && k < 3; k++)
        rc = bounded(r, C_OX + k, *vec[k], 1, PL_BOUND_COORDINATE);
    /* Absent optional numbers keep these defaults: number() leaves them. */
    if (!rc)
        rc = pitch(r, C_PITCH, &site.pitch_u, &present);
    site.pitch_v = site.pitch_u;
    if (!rc)
        rc = pitch(r, C_PITCH_V, &site.pitch_v, &present);
    site.thickness_mm = NAN;
    site.diffusivity_mm2_s = NAN;
    if (!rc)
        rc = number(r, C_THICKNESS, &site.thickness_mm, &present);
    if (!rc && site.thickness_mm > 0)
        rc = bounded(r, C_THICKNESS, site.thickness_mm, present, PL_BOUND_THICKNESS);
    if (!rc)
        rc = number(r, C_DIFFUSIVITY, &site.diffusivity_mm2_s, &present);
    if (!rc && site.diffusivity_mm2_s > 0)
        rc = bounded(r, C_DIFFUSIVITY, site.diffusivity_mm2_s, present, PL_BOUND_DIFFUSIVITY);
    if (!rc)
        rc = pixels(r, C_WIDTH, &site.width_px);
    if (!rc)
        rc = pixels(r, C_HEIGHT, &site.height_px);
    if (rc)
        return rc;

    pl_err e = { 0 };
    rc = pl_site_check(&site, &e);
    if (rc)
        return pl__err(r->err, rc, "%s line %zu: %s", r->path, r->row_line, e.msg);
    /* codes compare without regard to case, as in the store (store.h, "Keys") */
    for (size_t i = 0; i < r->nsites; i++) {
        if (strcasecmp(r->sites[i].code, site.code) != 0)
            continue;
        if (strcmp(r->sites[i].code, site.code) == 0)
            return pl__err(r->err, PL_EEXISTS, "%s line %zu: duplicate site code %s (first on "
                           "line %zu)", r->path, r->row_line, site.code, r->site_lines[i]);
        return pl__err(r->err, PL_EEXISTS, "%s line %zu: site code %s is %s of line %zu in "
                       "another case (codes are compared without regard to case)", r->path,
                       r->row_line, site.code, r->sites[i].code, r->site_lines[i]);
    }
    if (r->nsites == r->cap_sites) {
        size_t cap = r->cap_sites ? 2 * r->cap_sites : 16;
        pl_site *ns = realloc(r->sites, cap * sizeof *ns);
        if (ns)
            r->sites = ns;
        size_t *nl = ns ? realloc(r->site_lines, cap * sizeof *nl) : NULL;
        if (!nl)
            return pl__err(r->err, PL_ENOMEM, "%s: out of memory", r->path);
        r->site_lines = nl;
        r->cap_sites = cap;
    }
    r->site_lines[r->nsites] = r->row_line;
    r->sites[r->nsites++] = site;
    return PL_OK;
}

static void on_row(int terminator, void *ud)
{
    reader *r = ud;
    (void)terminator;
    r->in_row = 0;
    r->row_ended = 1;
    if (!r->rc && r->nfields > 0) {
        int blank = 1;
        for (size_t i = 0; i < r->nfields && blank; i++)
            blank = r->fields[i][0] == '\0';
        if (r->fields[0][0] == '#' || blank)
            ; /* a comment, or a row of empty fields as spreadsheets leave */
        else if (!r->have_header)
            r->rc = header(r);
        else
            r->rc = site_row(r);
    }
    drop_fields(r);
}

/* Whether a line holds anything but blanks and its end. */
static int blank_line(const char *s, size_t n)
{
    for (size_t i = 0; i < n; i++)
        if (!strchr(" \t\r\n", s[i]))
            return 0;
    return 1;
}

static int csv_failure(reader *r, struct csv_parser *p)
{
    int e = csv_error(p);
    if (e == CSV_ENOMEM || e == CSV_ETOOBIG)
        return pl__err(r->err, PL_ENOMEM, "%s: out of memory", r->path);
    return pl__err(r->err, PL_EFORMAT,
                   "%s line %zu: not valid CSV (a quote inside an unquoted field, or text after "
                   "a closing quote)", r->path, r->line);
}

static int no_blanks(unsigned char c)
{
    (void)c;
    return 0;
}

static int parse(reader *r, const char *buf, size_t len)
{
    struct csv_parser p;
    if (csv_init(&p, CSV_STRICT | CSV_STRICT_FINI | CSV_APPEND_NULL) != 0)
        return pl__err(r->err, PL_ENOMEM, "%s: out of memory", r->path);
    /* libcsv would trim blanks around unquoted fields; a site code " F01 "
     * must be refused, not quietly read as "F01" */
    csv_set_space_func(&p, no_blanks);
    /* A UTF-8 byte order mark, as some spreadsheets write, is not data. */
    if (len >= 3 && memcmp(buf, "\xef\xbb\xbf", 3) == 0) {
        buf += 3;
        len -= 3;
    }
    size_t pos = 0;
    r->line = 0;
    while (pos < len && !r->rc) {
        const char *nl = memchr(buf + pos, '\n', len - pos);
        size_t n = nl ? (size_t)(nl - (buf + pos)) + 1 : len - pos;
        const char *s = buf + pos;
        pos += n;
        r->line++;
        if (!r->in_row) {
            r->row_line = r->line;
            size_t k = 0;
            while (k < n && (s[k] == ' ' || s[k] == '\t'))
                k++;
            if (k < n && s[k] == '#')
                continue; /* a comment line, whatever it holds */
        }
        int was_open = r->in_row;
        r->row_ended = 0;
        if (csv_parse(&p, s, n, on_field, on_row, r) != n && !r->rc)
            r->rc = csv_failure(r, &p);
        /* Open after this line: a quoted field runs on, or the line ended
         * without a newline. */
        if (!r->row_ended)
            r->in_row = was_open || !blank_line(s, n);
    }
    if (!r->rc && csv_fini(&p, on_field, on_row, r) != 0 && !r->rc)
        r->rc = pl__err(r->err, PL_EFORMAT, "%s line %zu: a quoted field is not closed",
                        r->path, r->row_line);
    csv_free(&p);
    drop_fields(r);
    return r->rc;
}

PL_EXPORT int pl_plan_load(pl_plan **out, const char *path, pl_err *err)
{
    assert(out && path);
    *out = NULL;
    char *buf = NULL;
    size_t len = 0;
    int rc = pl__read_text(&buf, &len, path, PLAN_MAX_BYTES, err);
    if (rc)
        return rc;

    reader r;
    memset(&r, 0, sizeof r);
    r.path = path;
    r.err = err;
    rc = parse(&r, buf, len);
    free(buf);
    free(r.fields);
    if (!rc && !r.have_header)
        rc = pl__err(err, PL_EFORMAT, "%s: empty: no header row", path);
    if (!rc && r.nsites == 0)
        rc = pl__err(err, PL_EFORMAT, "%s: no sites below the header", path);
    pl_plan *plan = NULL;
    if (!rc && !(plan = calloc(1, sizeof *plan)))
        rc = pl__err(err, PL_ENOMEM, "%s: out of memory", path);
    if (!rc && !(plan->path = pl__strdup(path)))
        rc = pl__err(err, PL_ENOMEM, "%s: out of memory", path);
    if (rc) {
        free(plan);
        free(r.site_lines);
        free(r.sites);
        return rc;
    }
    plan->nsites = r.nsites;
    plan->sites = r.sites;
    plan->lines = r.site_lines;
    *out = plan;
    return PL_OK;
}

PL_EXPORT void pl_plan_free(pl_plan *plan)
{
    if (!plan)
        return;
    free(plan->sites);
    free(plan->lines);
    free(plan->path);
    free(plan);
}

PL_EXPORT int pl_plan_apply(pl_store *store, const pl_plan *plan, const char *serial,
                            size_t *added, pl_err *err)
{
    assert(store && plan);
    if (added)
        *added = 0;
    int owned;
    int rc = pl_store__write_begin(store, &owned, err);
    if (rc)
        return rc;
    size_t n = 0;
    for (; n < plan->nsites && !rc; n++) {
        pl_site site = plan->sites[n];
        rc = pl__copy_text(site.airframe_serial, sizeof site.airframe_serial, serial,
                           "airframe serial", err);
        if (!rc)
            rc = pl_store_add_site(store, &site, NULL, err);
        if (rc && plan->path && err) {
            /* name the plan and the line the site came from */
            char msg[PL_ERR_MSG_SIZE];
            snprintf(msg, sizeof msg, "%s", err->msg);
            if (plan->lines)
                pl__err(err, rc, "%.200s line %zu: %.280s", plan->path, plan->lines[n], msg);
            else
                pl__err(err, rc, "%.200s: %.280s", plan->path, msg);
        }
    }
    rc = pl_store__write_end(store, owned, rc, err);
    if (!rc && added)
        *added = n;
    return rc;
}
