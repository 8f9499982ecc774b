/*
 * report.c - the disposition report as one self-contained HTML file
 * (plyledger/report.h).
 */
#include "plyledger/report.h"

#include "common/common_int.h"
#include "common/strbuf_int.h"
#include "plyledger/compare.h"
#include "plyledger/coverage.h"
#include "plyledger/criteria.h"
#include "plyledger/detect.h"
#include "plyledger/disposition.h"
#include "plyledger/history.h"
#include "plyledger/ledger.h"
#include "plyledger/plot.h"
#include "plyledger/register.h"
#include "plyledger/render.h"
#include "plyledger/track.h"
#include "plyledger/version.h"

#include <cjson/cJSON.h>
#include <sodium.h>

#include <assert.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

/* ---- writing HTML ------------------------------------------------------------ */

typedef struct rep {
    pl_strbuf h;
    pl_store *store;
    int verified;             /* 1: verify ran */
    pl_verify_result vr;
} rep;

/* Text into HTML: the five characters that mean something escaped, control
 * characters other than tab and line breaks left out. */
static void esc(pl_strbuf *b, const char *s)
{
    for (; s && *s; s++) {
        unsigned char c = (unsigned char)*s;
        switch (c) {
        case '&': pl_strbuf__append(b, "&amp;"); break;
        case '<': pl_strbuf__append(b, "&lt;"); break;
        case '>': pl_strbuf__append(b, "&gt;"); break;
        case '"': pl_strbuf__append(b, "&quot;"); break;
        case '\'': pl_strbuf__append(b, "&#39;"); break;
        default:
            if (c >= 0x20 || c == '\t' || c == '\n')
                pl_strbuf__append_n(b, (const char *)&c, 1);
        }
    }
}

static void escf(pl_strbuf *b, const char *fmt, ...) PL_PRINTF(2, 3);
static void escf(pl_strbuf *b, const char *fmt, ...)
{
    pl_strbuf t = PL_STRBUF_INIT;
    va_list ap;
    va_start(ap, fmt);
    pl_strbuf__vprintf(&t, fmt, ap);
    va_end(ap);
    if (pl_strbuf__failed(&t))
        b->failed = 1;
    esc(b, pl_strbuf__str(&t));
    pl_strbuf__release(&t);
}

static const char *fnum(char *buf, size_t size, double v, int prec)
{
    if (isfinite(v))
        snprintf(buf, size, "%.*f", prec, v);
    else
        snprintf(buf, size, "-");
    return buf;
}

static const char *gnum(char *buf, size_t size, double v, int prec)
{
    if (isfinite(v))
        snprintf(buf, size, "%.*g", prec, v);
    else
        snprintf(buf, size, "-");
    return buf;
}

/* One table row of a label and a value (escaped). */
static void row2(pl_strbuf *b, const char *label, const char *value)
{
    pl_strbuf__append(b, "<tr><th>");
    esc(b, label);
    pl_strbuf__append(b, "</th><td>");
    esc(b, value && *value ? value : "-");
    pl_strbuf__append(b, "</td></tr>\n");
}

/* An image embedded as a PNG data: URI, in a figure with its caption. */
static int embed(pl_strbuf *b, const pl_image *img, const char *alt, const char *caption,
                 const char *cls, pl_err *err)
{
    unsigned char *png = NULL;
    size_t n = 0;
    int rc = pl_image_encode_png(&png, &n, img, err);
    if (rc)
        return rc;
    size_t cap = sodium_base64_ENCODED_LEN(n, sodium_base64_VARIANT_ORIGINAL);
    char *b64 = malloc(cap);
    if (!b64) {
        free(png);
        return pl__err(err, PL_ENOMEM, "report: out of memory");
    }
    sodium_bin2base64(b64, cap, png, n, sodium_base64_VARIANT_ORIGINAL);
    free(png);
    pl_strbuf__printf(b, "<figure class=\"%s\"><img src=\"data:image/png;base64,", cls);
    pl_strbuf__append(b, b64);
    pl_strbuf__printf(b, "\" width=\"%u\" height=\"%u\" alt=\"", img->width, img->height);
    esc(b, alt);
    pl_strbuf__append(b, "\"><figcaption>");
    esc(b, caption);
    pl_strbuf__append(b, "</figcaption></figure>\n");
    free(b64);
    return PL_OK;
}

static const char STYLE[] =
    "body{font-family:'DejaVu Sans',Arial,sans-serif;color:#1b1b1b;margin:20px auto;"
    "max-width:1180px;font-size:13px;line-height:1.35}\n"
    "h1{font-size:22px;margin:0 0 6px}h2{font-size:18px;border-bottom:2px solid #2d4a66;"
    "padding-bottom:2px;margin-top:26px}h3{font-size:15px;margin:16px 0 4px}\n"
    "table{border-collapse:collapse;margin:6px 0 10px}th,td{border:1px solid #b8b8b8;"
    "padding:2px 6px;text-align:left;vertical-align:top}th{background:#eef1f4;font-weight:600}"
    "td.n{text-align:right;font-variant-numeric:tabular-nums}\n"
    ".caution{border:2px solid #9a5b00;background:#fff5e3;padding:6px 10px;margin:8px 0}\n"
    ".missed{border:3px solid #b00020;background:#fde7ea;color:#7a0015;padding:8px 12px;"
    "font-size:16px;font-weight:bold;margin:10px 0}\n"
    ".example{border:2px dashed #6a3d9a;background:#f4eefa;padding:4px 10px;font-weight:bold}\n"
    ".simulated{border:2px solid #555;background:#ececec;padding:4px 10px;font-weight:bold}\n"
    ".exceeds{color:#b00020;font-weight:bold}.fault{color:#b00020;font-weight:bold}"
    ".ok{color:#1d6b2f;font-weight:bold}\n"
    ".figs{display:flex;flex-wrap:wrap;gap:10px}figure{margin:0;flex:1 1 46%;max-width:49%}"
    "figure img{width:100%;height:auto;border:1px solid #ccc}"
    "figure.plot{flex:1 1 100%;max-width:760px}figcaption{font-size:11px;color:#444}\n"
    "code{font-size:11px;word-break:break-all}.meta{color:#444;font-size:12px}\n"
    "@media print{@page{size:A4;margin:12mm}body{margin:0;max-width:none;font-size:9pt}"
    "h2{break-after:avoid}section.site{break-before:page}table,figure{break-inside:avoid}"
    "figure{max-width:49%}figure.plot{max-width:100%}}\n";

static void head(pl_strbuf *b, const char *title)
{
    pl_strbuf__append(b, "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
                         "<meta name=\"generator\" content=\"plyledger " PL_VERSION_STRING
                         "\">\n<title>");
    esc(b, title);
    pl_strbuf__append(b, "</title>\n<style>\n");
    pl_strbuf__append(b, STYLE);
    pl_strbuf__append(b, "</style>\n</head>\n<body>\n");
}

static void caution(pl_strbuf *b)
{
    pl_strbuf__append(b, "<p class=\"caution\"><strong>Caution.</strong> ");
    esc(b, pl_caution());
    pl_strbuf__append(b, " A forecast supports, and does not replace, the engineer's judgement "
                         "and the design holder's data.</p>\n");
}

static void verify_block(rep *r)
{
    pl_strbuf *b = &r->h;
    pl_strbuf__append(b, "<p>");
    if (!r->verified) {
        pl_strbuf__append(b, "<span class=\"fault\">Record not verified for this report</span> "
                             "(run plyledger verify).");
    } else if (r->vr.faults == 0) {
        pl_strbuf__append(b, "<span class=\"ok\">Record verified:</span> ");
        escf(b, "%zu chain links, %zu rows, %zu maps and %zu signatures recomputed and checked; "
                "no fault%s.", r->vr.links, r->vr.rows, r->vr.maps, r->vr.signatures,
             r->vr.sealed ? " (sealed store)" : "");
    } else {
        pl_strbuf__append(b, "<span class=\"fault\">RECORD VERIFY FAILED:</span> ");
        escf(b, "%zu fault%s; the first: %s", r->vr.faults, r->vr.faults == 1 ? "" : "s",
             r->vr.message);
    }
    pl_strbuf__append(b, "</p>\n");
}

/* ---- reading the record ------------------------------------------------------ */

typedef struct find_cmp {
    pl_id id;
    pl_comparison_record rec;
    char *params;
    int found;
} find_cmp;

static int find_cmp_cb(void *ud, const pl_comparison_record *c)
{
    find_cmp *f = ud;
    if (c->id != f->id)
        return PL_OK;
    f->rec = *c;
    f->rec.parameters_json = NULL;
    f->params = pl__strdup(c->parameters_json);
    f->found = 1;
    return c->parameters_json && !f->params ? PL_ENOMEM : PL_OK;
}

typedef struct find_reg {
    pl_id id;
    pl_registration_record rec;
    int found;
} find_reg;

static int find_reg_cb(void *ud, const pl_registration_record *g)
{
    find_reg *f = ud;
    if (g->id == f->id) {
        f->rec = *g;
        f->rec.parameters_json = NULL;
        f->found = 1;
    }
    return PL_OK;
}

typedef struct vec {
    void *v;
    size_t n, size;
    int failed;
} vec;

static void *vec_push(vec *a)
{
    void *p = realloc(a->v, (a->n + 1) * a->size);
    if (!p) {
        a->failed = 1;
        return NULL;
    }
    a->v = p;
    return (char *)p + a->size * a->n++;
}

typedef struct chg_rec {
    pl_change_record r;
    char blabels[PL_TEXT_SIZE], clabels[PL_TEXT_SIZE];
} chg_rec;

static int chg_cb(void *ud, const pl_change_record *c)
{
    chg_rec *d = vec_push(ud);
    if (!d)
        return PL_ENOMEM;
    d->r = *c;
    snprintf(d->blabels, sizeof d->blabels, "%s", c->baseline_labels ? c->baseline_labels : "[]");
    snprintf(d->clabels, sizeof d->clabels, "%s", c->current_labels ? c->current_labels : "[]");
    /* the labels point into the element once the listing is over
     * (chg_fix()): the vector may still move */
    d->r.baseline_labels = d->r.current_labels = NULL;
    return PL_OK;
}

/* Point each listed change's labels at its own copies. */
static void chg_fix(vec *a)
{
    chg_rec *c = a->v;
    for (size_t i = 0; i < a->n; i++) {
        c[i].r.baseline_labels = c[i].blabels;
        c[i].r.current_labels = c[i].clabels;
    }
}

typedef struct ind_rec {
    int baseline;
    long label;
    double col, row;
    char *outline;
} ind_rec;

static int ind_cb(void *ud, const pl_indication_record *x)
{
    ind_rec *d = vec_push(ud);
    if (!d)
        return PL_ENOMEM;
    d->baseline = strcmp(x->role, "baseline") == 0;
    d->label = (long)x->label;
    d->col = x->centroid_col;
    d->row = x->centroid_row;
    d->outline = pl__strdup(x->outline);
    return x->outline && !d->outline ? PL_ENOMEM : PL_OK;
}

static int interp_cb(void *ud, const pl_interpretation *in)
{
    pl_interpretation *d = vec_push(ud);
    if (!d)
        return PL_ENOMEM;
    *d = *in;
    return PL_OK;
}

static int disp_cb(void *ud, const pl_disposition *in)
{
    pl_disposition *d = vec_push(ud);
    if (!d)
        return PL_ENOMEM;
    *d = *in;
    return PL_OK;
}

static int label_in(const char *json, long label)
{
    cJSON *a = cJSON_Parse(json);
    int hit = 0;
    for (int i = 0; a && i < cJSON_GetArraySize(a) && !hit; i++) {
        cJSON *e = cJSON_GetArrayItem(a, i);
        hit = cJSON_IsNumber(e) && (long)e->valuedouble == label;
    }
    cJSON_Delete(a);
    return hit;
}

static const cJSON *obj(const cJSON *o, const char *k)
{
    return cJSON_GetObjectItemCaseSensitive(o, k);
}

static const char *jstr(const cJSON *o, const char *k)
{
    const char *s = cJSON_GetStringValue(obj(o, k));
    return s ? s : "";
}

static double jnum(const cJSON *o, const char *k)
{
    const cJSON *v = obj(o, k);
    return cJSON_IsNumber(v) ? v->valuedouble : NAN;
}

/* ---- pictures ---------------------------------------------------------------- */

/* The channel of `quantity` and `label` (any label when it is empty). */
static int channel_of(const pl_map *m, const char *quantity, const char *label)
{
    for (uint32_t c = 0; c < m->nchannels; c++)
        if (strcmp(m->channels[c].quantity, quantity) == 0 &&
            (!*label || strcmp(m->channels[c].label, label) == 0))
            return (int)c;
    return -1;
}

/* Marks for pl_render_outlined(): each change's member outlines (current
 * side, else baseline side) drawn with its number; a changed region by a
 * 3 x 3 mark at its centroid. */
static int make_marks(uint32_t **out, const pl_map *grid, const vec *chgs, const vec *inds,
                      pl_err *err)
{
    size_t w = grid->width, h = grid->height;
    uint32_t *m = calloc(w * h, sizeof *m);
    if (!m)
        return pl__err(err, PL_ENOMEM, "report: out of memory");
    const chg_rec *cs = chgs->v;
    const ind_rec *is = inds->v;
    for (size_t k = 0; k < chgs->n; k++) {
        const pl_change_record *c = &cs[k].r;
        uint32_t number = (uint32_t)c->number;
        int any = 0;
        for (int side = 0; side < 2 && !any; side++) {
            const char *labels = side == 0 ? c->current_labels : c->baseline_labels;
            for (size_t i = 0; i < inds->n; i++) {
                if (is[i].baseline != side || !is[i].outline || !label_in(labels, is[i].label))
                    continue;
                uint32_t *pts = NULL;
                size_t n = 0;
                if (pl_detect_outline_decode(&pts, &n, is[i].outline, NULL))
                    continue;
                for (size_t p = 0; p < n; p++)
                    if (pts[2 * p] < w && pts[2 * p + 1] < h)
                        m[(size_t)pts[2 * p + 1] * w + pts[2 * p]] = number;
                free(pts);
                any = 1;
            }
        }
        if (!any && isfinite(c->centroid_col) && isfinite(c->centroid_row)) {
            long c0 = lround(c->centroid_col), r0 = lround(c->centroid_row);
            for (long dr = -1; dr <= 1; dr++)
                for (long dc = -1; dc <= 1; dc++) {
                    long cc = c0 + dc, rr = r0 + dr;
                    if (cc >= 0 && rr >= 0 && (size_t)cc < w && (size_t)rr < h)
                        m[(size_t)rr * w + (size_t)cc] = number;
                }
        }
    }
    *out = m;
    return PL_OK;
}

typedef struct pictures {
    pl_map *baseline, *current, *aligned, *diff;
    int bc, ac;
} pictures;

static void pictures_free(pictures *p)
{
    pl_map_free(p->baseline);
    pl_map_free(p->current);
    pl_map_free(p->aligned);
    pl_map_free(p->diff);
}

static int load_pictures(pictures *p, pl_store *store, pl_id bmap, pl_id cmap,
                         const char *quantity, const char *label, const pl_transform *t,
                         pl_err *err)
{
    memset(p, 0, sizeof *p);
    int rc = pl_store_load_map(store, bmap, &p->baseline, NULL, err);
    if (!rc)
        rc = pl_store_load_map(store, cmap, &p->current, NULL, err);
    if (rc)
        return rc;
    p->bc = channel_of(p->baseline, quantity, label);
    if (p->bc < 0)
        return pl__err(err, PL_ENOTFOUND, "map %lld has no channel %s %s", (long long)bmap,
                       quantity, label);
    pl_register_result res;
    rc = pl_register_apply(&res, &p->aligned, p->baseline, p->current, NULL, NULL, t,
                           PL_INTERP_BICUBIC, err);
    if (rc)
        return rc;
    p->ac = channel_of(p->aligned, quantity, label);
    if (p->ac < 0)
        return pl__err(err, PL_ENOTFOUND, "map %lld has no channel %s %s", (long long)cmap,
                       quantity, label);
    rc = pl_map_new(&p->diff, p->baseline->width, p->baseline->height, 1, err);
    if (!rc)
        rc = pl_map_set_channel(p->diff, 0, quantity, p->baseline->channels[p->bc].unit, err);
    if (rc)
        return rc;
    snprintf(p->diff->channels[0].label, sizeof p->diff->channels[0].label, "difference");
    p->diff->pitch_u = p->baseline->pitch_u;
    p->diff->pitch_v = p->baseline->pitch_v;
    p->diff->placement = p->baseline->placement;
    int pol = pl_quantity_polarity(quantity) == PL_POLARITY_FALLS ? -1 : 1;
    const float *a = pl_map_channel(p->aligned, (uint32_t)p->ac);
    const float *bb = pl_map_channel(p->baseline, (uint32_t)p->bc);
    float *d = pl_map_channel(p->diff, 0);
    for (size_t i = 0; i < (size_t)p->baseline->width * p->baseline->height; i++)
        d[i] = (float)pol * (a[i] - bb[i]);
    return PL_OK;
}

static int render_pictures(rep *r, const pictures *p, pl_id bmap, pl_id cmap,
                           const char *quantity, const vec *chgs, const vec *inds,
                           pl_err *err)
{
    uint32_t *marks = NULL;
    int rc = make_marks(&marks, p->baseline, chgs, inds, err);
    uint32_t count = 0;
    for (size_t k = 0; k < chgs->n; k++)
        if ((uint32_t)((const chg_rec *)chgs->v)[k].r.number > count)
            count = (uint32_t)((const chg_rec *)chgs->v)[k].r.number;
    static const char *what[4] = { "Baseline map", "Current map on the baseline grid",
                                    "Difference (toward a defect: current - baseline)",
                                    "Overlay: changes numbered as in the table" };
    pl_strbuf__append(&r->h, "<div class=\"figs\">\n");
    for (int i = 0; i < 4 && !rc; i++) {
        char ident[PL_RENDER_IDENTIFICATION_SIZE];
        int simulated = 0;
        rc = pl_history_identification(ident, sizeof ident, &simulated, r->store,
                                       i == 0 ? bmap : cmap, i == 0 ? 0 : bmap, quantity, err);
        if (rc)
            break;
        if (i == 2) {
            size_t n = strlen(ident);
            snprintf(ident + n, sizeof ident - n, " difference");
        }
        pl_render_options ro = PL_RENDER_OPTIONS_INIT;
        ro.identification = ident;
        ro.simulated = simulated;
        pl_image *img = NULL;
        if (i == 0)
            rc = pl_render_map(&img, p->baseline, (uint32_t)p->bc, &ro, err);
        else if (i == 1)
            rc = pl_render_map(&img, p->aligned, (uint32_t)p->ac, &ro, err);
        else if (i == 2)
            rc = pl_render_map(&img, p->diff, 0, &ro, err);
        else
            rc = pl_render_outlined(&img, p->aligned, (uint32_t)p->ac, marks, count, &ro, err);
        if (!rc)
            rc = embed(&r->h, img, what[i], what[i], "map", err);
        pl_image_free(img);
    }
    pl_strbuf__append(&r->h, "</div>\n");
    free(marks);
    return rc;
}

/* ---- tracks --------------------------------------------------------------- */

static int track_plot(rep *r, const pl_site_tracks *t, const pl_track *tr, pl_err *err)
{
    size_t n = tr->npoints;
    int which = 0; /* 0 cycles, 1 hours, 2 days */
    const pl_growth_fit *fit = &tr->by_cycles;
    if (fit->state == PL_GROWTH_TOO_FEW && tr->by_hours.state != PL_GROWTH_TOO_FEW) {
        which = 1;
        fit = &tr->by_hours;
    } else if (fit->state == PL_GROWTH_TOO_FEW && tr->by_days.state != PL_GROWTH_TOO_FEW) {
        which = 2;
        fit = &tr->by_days;
    }
    enum { BAND = 24 };
    double *x = calloc(n ? n : 1, sizeof *x), *y = calloc(n ? n : 1, sizeof *y),
           *e = calloc(n ? n : 1, sizeof *e);
    double lx[2], ly[2], bx[BAND], bu[BAND], bl[BAND], fx[2], fy[2];
    int rc = PL_OK;
    if (!x || !y || !e) {
        rc = pl__err(err, PL_ENOMEM, "report: out of memory");
        goto out;
    }
    long day0 = 0;
    if (n)
        (void)pl__date_days(&day0, t->inspections[tr->points[0].inspection].date);
    double xmin = INFINITY, xmax = -INFINITY;
    for (size_t i = 0; i < n; i++) {
        const pl_track_inspection *in = &t->inspections[tr->points[i].inspection];
        long d = 0;
        x[i] = which == 0 ? (in->cycles >= 0 ? (double)in->cycles : NAN)
               : which == 1 ? in->hours
               : (pl__date_days(&d, in->date) ? NAN : (double)(d - day0));
        y[i] = tr->points[i].seen ? tr->points[i].area_mm2 : NAN;
        e[i] = t->repeatability_area_mm2;
        if (isfinite(x[i]) && isfinite(y[i])) {
            xmin = fmin(xmin, x[i]);
            xmax = fmax(xmax, x[i]);
        }
    }
    pl_plot_series s[5];
    memset(s, 0, sizeof s);
    size_t ns = 0;
    s[ns] = (pl_plot_series){ "measured area (+- repeatability)", n, x, y, e, PL_PLOT_POINTS,
                              { 30, 90, 170 } };
    ns++;
    if (fit->state != PL_GROWTH_TOO_FEW && isfinite(xmin)) {
        double x1 = xmax;
        double span = fmax(xmax - xmin, 1.0);
        if (isfinite(fit->crossing) && fit->crossing > x1 && fit->crossing < xmax + 3 * span)
            x1 = fit->crossing;
        if (isfinite(fit->crossing_high) && fit->crossing_high > x1 &&
            fit->crossing_high < xmax + 3 * span)
            x1 = fit->crossing_high;
        lx[0] = xmin;
        lx[1] = x1;
        ly[0] = fit->intercept + fit->slope * xmin;
        ly[1] = fit->intercept + fit->slope * x1;
        s[ns++] = (pl_plot_series){ "linear fit", 2, lx, ly, NULL, PL_PLOT_LINE,
                                    { 20, 120, 70 } };
        for (int i = 0; i < BAND; i++) {
            double xx = xmin + (x1 - xmin) * i / (BAND - 1);
            double u = sqrt(fmax(fit->var_intercept + 2 * xx * fit->covariance +
                                     xx * xx * fit->var_slope, 0.0));
            bx[i] = xx;
            bu[i] = fit->intercept + fit->slope * xx + PL_TRACK_COVERAGE_FACTOR * u;
            bl[i] = fit->intercept + fit->slope * xx - PL_TRACK_COVERAGE_FACTOR * u;
        }
        s[ns++] = (pl_plot_series){ "band of the line (k = 2)", BAND, bx, bu, NULL,
                                    PL_PLOT_DASHED, { 110, 110, 110 } };
        s[ns++] = (pl_plot_series){ NULL, BAND, bx, bl, NULL, PL_PLOT_DASHED,
                                    { 110, 110, 110 } };
        if (isfinite(fit->crossing) && isfinite(tr->limit_area_mm2) && fit->crossing >= xmin &&
            fit->crossing <= x1) {
            fx[0] = fx[1] = fit->crossing;
            fy[0] = fmin(ly[0], ly[1]);
            fy[1] = tr->limit_area_mm2;
            s[ns++] = (pl_plot_series){ "forecast: the line at the limit", 2, fx, fy, NULL,
                                        PL_PLOT_DASHED, { 200, 120, 20 } };
        }
    }
    char title[160], limit[64], xl[64];
    snprintf(title, sizeof title, "%s site %s track %u: area", t->site.airframe_serial,
             t->site.code, tr->number);
    snprintf(limit, sizeof limit, "limit %.1f mm2", tr->limit_area_mm2);
    snprintf(xl, sizeof xl, "%s", which == 0 ? "flight cycles"
                                  : which == 1 ? "flight hours"
                                               : "days since the first point");
    pl_plot p = PL_PLOT_INIT;
    p.title = title;
    p.x_label = xl;
    p.y_label = "area (mm2)";
    p.nseries = ns;
    p.series = s;
    p.hline = tr->limit_area_mm2;
    p.hline_label = isfinite(tr->limit_area_mm2) ? limit : NULL;
    pl_image *img = NULL;
    rc = pl_plot_render(&img, &p, err);
    if (!rc) {
        char caption[256];
        snprintf(caption, sizeof caption,
                 "Track %u: area at each inspection against %s, the weighted linear fit, the "
                 "band of the line and the criteria limit", tr->number, xl);
        rc = embed(&r->h, img, caption, caption, "plot", err);
    }
    pl_image_free(img);
out:
    free(x);
    free(y);
    free(e);
    return rc;
}

static void fit_row(pl_strbuf *b, const char *what, const char *per, const pl_growth_fit *f,
                    const pl_track *tr, int dates)
{
    char s1[32], s2[32], c0[32], c1[32], c2[32];
    pl_strbuf__append(b, "<tr><th>");
    esc(b, what);
    pl_strbuf__append(b, "</th><td>");
    esc(b, pl_growth_state_name(f->state));
    pl_strbuf__append(b, "</td><td class=\"n\">");
    if (f->state != PL_GROWTH_TOO_FEW)
        escf(b, "%s +- %s mm2 per %s", gnum(s1, sizeof s1, f->slope, 4),
             gnum(s2, sizeof s2, f->u_slope, 2), per);
    pl_strbuf__append(b, "</td><td class=\"n\">");
    if (isfinite(f->crossing)) {
        if (dates)
            escf(b, "%s (%s to %s)", tr->forecast_date[0] ? tr->forecast_date : "-",
                 tr->forecast_date_low[0] ? tr->forecast_date_low : "unbounded",
                 tr->forecast_date_high[0] ? tr->forecast_date_high : "unbounded");
        else
            escf(b, "%s (%s to %s)", fnum(c0, sizeof c0, f->crossing, 0),
                 isfinite(f->crossing_low) ? fnum(c1, sizeof c1, f->crossing_low, 0)
                                           : "unbounded",
                 isfinite(f->crossing_high) ? fnum(c2, sizeof c2, f->crossing_high, 0)
                                            : "unbounded");
        if (f->state == PL_GROWTH_REACHED)
            pl_strbuf__append(b, " (already reached)");
    } else {
        pl_strbuf__append(b, "-");
    }
    pl_strbuf__append(b, "</td></tr>\n");
}

static int tracks_block(rep *r, const char *serial, const char *code, const char *quantity,
                        const char *label, pl_id cid, pl_err *err)
{
    pl_track_options to = PL_TRACK_OPTIONS_INIT;
    to.quantity = quantity;
    to.label = label;
    pl_site_tracks *t = NULL;
    int rc = pl_tracks_load(&t, r->store, serial, code, &to, err);
    if (rc)
        return rc;
    pl_strbuf *b = &r->h;
    pl_strbuf__append(b, "<h3>Tracks: growth and forecast</h3>\n<p class=\"meta\">");
    esc(b, pl_track_assumptions());
    pl_strbuf__append(b, "</p>\n");
    size_t shown = 0;
    for (size_t k = 0; k < t->ntracks && !rc; k++) {
        const pl_track *tr = &t->tracks[k];
        int here = 0;
        for (size_t p = 0; p < tr->npoints; p++)
            here |= tr->points[p].comparison_id == cid;
        if (!tr->reportable || !here)
            continue;
        shown++;
        pl_strbuf__printf(b, "<h3>Track %u</h3>\n<p>", tr->number);
        escf(b, "%s; limit: %s.", tr->at_baseline ? "Present at the baseline" : "Found after the "
                                                                                  "baseline",
             tr->limit_basis);
        if (tr->closed_by)
            escf(b, " Closed by the post-repair baseline (inspection %lld).",
                 (long long)tr->closed_by);
        pl_strbuf__append(b, "</p>\n<table><tr><th>date</th><th>cycles</th><th>hours</th>"
                             "<th>area mm2</th><th>length mm</th><th>contrast</th>"
                             "<th>depth mm</th><th>changes</th><th>event</th></tr>\n");
        for (size_t p = 0; p < tr->npoints; p++) {
            const pl_track_point *pt = &tr->points[p];
            const pl_track_inspection *in = &t->inspections[pt->inspection];
            char a[32], l[32], c[32], d[32], h[32];
            pl_strbuf__append(b, "<tr><td>");
            esc(b, in->date);
            pl_strbuf__printf(b, "</td><td class=\"n\">%lld</td><td class=\"n\">%s</td>"
                                 "<td class=\"n\">%s</td><td class=\"n\">%s</td>"
                                 "<td class=\"n\">%s</td><td class=\"n\">%s</td><td>",
                              (long long)in->cycles, fnum(h, sizeof h, in->hours, 1),
                              fnum(a, sizeof a, pt->area_mm2, 1),
                              fnum(l, sizeof l, pt->length_mm, 1),
                              gnum(c, sizeof c, pt->contrast, 4),
                              fnum(d, sizeof d, pt->depth_mm, 2));
            escf(b, "%s%s%s", pt->changes, pt->changes[0] ? " " : "", pt->classes);
            pl_strbuf__printf(b, "%s</td><td>", pt->exceeds ? " <span class=\"exceeds\">"
                                                              "EXCEEDS</span>" : "");
            esc(b, pt->event);
            pl_strbuf__append(b, "</td></tr>\n");
        }
        pl_strbuf__append(b, "</table>\n<table><tr><th>against</th><th>state</th>"
                             "<th>growth rate (standard uncertainty)</th>"
                             "<th>limit reached at (interval, k = 2)</th></tr>\n");
        fit_row(b, "flight cycles", "cycle", &tr->by_cycles, tr, 0);
        fit_row(b, "flight hours", "hour", &tr->by_hours, tr, 0);
        fit_row(b, "time", "day", &tr->by_days, tr, 1);
        pl_strbuf__append(b, "</table>\n");
        rc = track_plot(r, t, tr, err);
    }
    if (!shown && !rc)
        pl_strbuf__append(b, "<p>No reportable track has a point in this comparison.</p>\n");
    pl_site_tracks_free(t);
    return rc;
}

/* ---- one site ----------------------------------------------------------------- */

static void inspection_rows(pl_strbuf *b, const pl_inspection *bi, const pl_inspection *ci,
                            const pl_map_record *bm, const pl_map_record *cm)
{
    const pl_inspection *in[2] = { bi, ci };
    const pl_map_record *m[2] = { bm, cm };
    static const char *labels[] = { "date", "kind", "task", "flight hours", "flight cycles",
                                    "data", "procedure", "equipment", "calibration",
                                    "inspector (level)", "software", "map", "map SHA-256",
                                    "reduction parameters" };
    for (size_t k = 0; k < sizeof labels / sizeof *labels; k++) {
        pl_strbuf__append(b, "<tr><th>");
        esc(b, labels[k]);
        pl_strbuf__append(b, "</th>");
        for (int s = 0; s < 2; s++) {
            char v[64];
            const pl_inspection *x = in[s];
            pl_strbuf__append(b, k == 12 || k == 13 ? "<td><code>" : "<td>");
            switch (k) {
            case 0: esc(b, x->performed_on); break;
            case 1: escf(b, "%s (inspection %lld)", x->kind, (long long)x->key); break;
            case 2: esc(b, x->task_ref[0] ? x->task_ref : "-"); break;
            case 3: esc(b, fnum(v, sizeof v, x->aircraft_hours, 1)); break;
            case 4:
                if (x->aircraft_cycles >= 0)
                    pl_strbuf__printf(b, "%lld", (long long)x->aircraft_cycles);
                else
                    pl_strbuf__append(b, "-");
                break;
            case 5:
                pl_strbuf__append(b, x->simulated == 1 ? "<strong>SIMULATED</strong>"
                                     : x->simulated == 0 ? "real" : "not recorded");
                break;
            case 6: escf(b, "%s rev %s", x->procedure, x->procedure_rev); break;
            case 7: esc(b, x->equipment); break;
            case 8: esc(b, x->calibration_ref); break;
            case 9: escf(b, "%s (%s)", x->inspector, x->inspector_level); break;
            case 10: esc(b, x->software_version); break;
            case 11:
                escf(b, "%lld: %ux%u px at %g x %g mm", (long long)m[s]->id, m[s]->width,
                     m[s]->height, m[s]->pitch_u, m[s]->pitch_v);
                break;
            case 12: esc(b, m[s]->sha256); break;
            default: esc(b, x->parameters_json ? x->parameters_json : "-"); break;
            }
            pl_strbuf__append(b, k == 12 || k == 13 ? "</code></td>" : "</td>");
        }
        pl_strbuf__append(b, "</tr>\n");
    }
}

static void changes_table(pl_strbuf *b, const vec *chgs, const cJSON *jchanges,
                          const char *unit)
{
    const chg_rec *cs = chgs->v;
    size_t below = 0, shown = 0;
    for (size_t k = 0; k < chgs->n; k++)
        if (!cs[k].r.reportable)
            below++;
    pl_strbuf__append(b, "<table><tr><th>no.</th><th>class</th><th>matched by</th>"
                         "<th>area mm2 baseline &rarr; current (change)</th>"
                         "<th>contrast baseline &rarr; current (change)</th>"
                         "<th>area: limit / measured / margin mm2</th>"
                         "<th>contrast: limit / margin</th><th>finding</th>"
                         "<th>position (airframe)</th></tr>\n");
    for (size_t k = 0; k < chgs->n; k++) {
        const pl_change_record *c = &cs[k].r;
        if (!c->reportable)
            continue;
        shown++;
        char a0[32], a1[32], ad[32], ap[32], c0[32], c1[32], cd[32], l[32], m[32], g[32],
            cl[32], cg[32];
        pl_strbuf__printf(b, "<tr><td class=\"n\">%lld</td><td>", (long long)c->number);
        esc(b, c->class_);
        pl_strbuf__append(b, "</td><td>");
        esc(b, c->matched_by);
        pl_strbuf__printf(b, "</td><td class=\"n\">%s &rarr; %s (%s, %s %%)</td>",
                          fnum(a0, sizeof a0, c->area_baseline_mm2, 1),
                          fnum(a1, sizeof a1, c->area_current_mm2, 1),
                          fnum(ad, sizeof ad, c->area_delta_mm2, 1),
                          fnum(ap, sizeof ap, c->area_delta_percent, 0));
        pl_strbuf__printf(b, "<td class=\"n\">%s &rarr; %s (%s) ",
                          gnum(c0, sizeof c0, c->contrast_baseline, 4),
                          gnum(c1, sizeof c1, c->contrast_current, 4),
                          gnum(cd, sizeof cd, c->contrast_delta, 3));
        esc(b, unit);
        pl_strbuf__printf(b, "</td><td class=\"n\">%s / %s / %s</td><td class=\"n\">%s / %s</td>",
                          fnum(l, sizeof l, c->area_limit_mm2, 1),
                          fnum(m, sizeof m, c->area_measured_mm2, 1),
                          fnum(g, sizeof g, c->area_margin_mm2, 1),
                          gnum(cl, sizeof cl, c->contrast_limit, 3),
                          gnum(cg, sizeof cg, c->contrast_margin, 3));
        pl_strbuf__append(b, c->exceeds ? "<td class=\"exceeds\">EXCEEDS</td>" : "<td>within</td>");
        pl_strbuf__append(b, "<td class=\"n\">");
        const cJSON *jc = cJSON_GetArrayItem(jchanges, (int)c->number - 1);
        const cJSON *pos = obj(jc, "centroid_part");
        if (cJSON_GetArraySize(pos) == 3)
            escf(b, "%.1f, %.1f, %.1f", cJSON_GetArrayItem(pos, 0)->valuedouble,
                 cJSON_GetArrayItem(pos, 1)->valuedouble, cJSON_GetArrayItem(pos, 2)->valuedouble);
        else
            pl_strbuf__append(b, "-");
        pl_strbuf__append(b, "</td></tr>\n");
    }
    if (!shown)
        pl_strbuf__append(b, "<tr><td colspan=\"9\">no reportable change</td></tr>\n");
    pl_strbuf__append(b, "</table>\n");
    if (below)
        pl_strbuf__printf(b, "<p class=\"meta\">%zu more change%s below the minimum reportable "
                             "area (in plyledger compare --json).</p>\n", below,
                          below == 1 ? "" : "s");
}

static void decisions_block(rep *r, const vec *interps, const vec *disps)
{
    pl_strbuf *b = &r->h;
    pl_strbuf__append(b, "<h3>Interpretations and dispositions</h3>\n");
    const pl_interpretation *is = interps->v;
    if (!interps->n)
        pl_strbuf__append(b, "<p>No change of this comparison has been interpreted yet.</p>\n");
    else {
        pl_strbuf__append(b, "<table><tr><th>change</th><th>interpreted as</th><th>note</th>"
                             "<th>signed by</th><th>on</th><th>status</th></tr>\n");
        for (size_t i = 0; i < interps->n; i++) {
            pl_strbuf__printf(b, "<tr><td class=\"n\">%lld</td><td>",
                              (long long)is[i].change_number);
            esc(b, is[i].class_);
            pl_strbuf__append(b, "</td><td>");
            esc(b, is[i].note);
            pl_strbuf__append(b, "</td><td>");
            esc(b, is[i].handle);
            pl_strbuf__append(b, "</td><td>");
            esc(b, is[i].signed_on);
            pl_strbuf__append(b, is[i].superseded ? "</td><td>superseded</td></tr>\n"
                                                  : "</td><td>current</td></tr>\n");
        }
        pl_strbuf__append(b, "</table>\n");
    }
    const pl_disposition *ds = disps->v;
    if (!disps->n) {
        pl_strbuf__append(b, "<p>No disposition has been recorded for this comparison.</p>\n");
    } else {
        pl_strbuf__append(b, "<table><tr><th>disposition</th><th>decision</th><th>changes</th>"
                             "<th>rationale</th><th>signed by</th><th>on</th><th>status</th>"
                             "</tr>\n");
        for (size_t i = 0; i < disps->n; i++) {
            const pl_disposition *d = &ds[i];
            char h[32];
            pl_strbuf__printf(b, "<tr><td class=\"n\">%lld</td><td><strong>", (long long)d->id);
            esc(b, d->decision);
            pl_strbuf__append(b, "</strong>");
            if (d->due_date[0])
                escf(b, "; due by %s", d->due_date);
            if (isfinite(d->due_hours))
                escf(b, "; by %s flight hours", fnum(h, sizeof h, d->due_hours, 1));
            if (d->due_cycles >= 0)
                escf(b, "; by %lld cycles", (long long)d->due_cycles);
            if (d->repair_ref[0])
                escf(b, "; repair %s (the next inspection is a post-repair baseline)",
                     d->repair_ref);
            if (d->query_ref[0])
                escf(b, "; query %s", d->query_ref);
            pl_strbuf__append(b, "</td><td>");
            escf(b, "change ids %s", d->changes);
            pl_strbuf__append(b, "</td><td>");
            esc(b, d->rationale);
            if (d->supersedes)
                escf(b, " (supersedes %lld: %s)", (long long)d->supersedes, d->reason);
            pl_strbuf__append(b, "</td><td>");
            esc(b, d->handle);
            pl_strbuf__append(b, "</td><td>");
            esc(b, d->signed_on);
            pl_strbuf__append(b, "</td><td>");
            pl_strbuf__append(b, d->superseded ? "superseded" : "current");
            if (!r->verified)
                pl_strbuf__append(b, "; signature not checked");
            else if (r->vr.faults == 0)
                pl_strbuf__append(b, "; signature verified");
            else
                pl_strbuf__append(b, "; <span class=\"fault\">the record fails to verify</span>");
            pl_strbuf__append(b, "</td></tr>\n");
        }
        pl_strbuf__append(b, "</table>\n");
    }
}

static void vec_free_inds(vec *v)
{
    ind_rec *is = v->v;
    for (size_t i = 0; i < v->n; i++)
        free(is[i].outline);
    free(v->v);
}

/* The section of recorded comparison `cid`. */
static int site_section(rep *r, pl_id cid, pl_err *err)
{
    pl_strbuf *b = &r->h;
    find_cmp fc;
    memset(&fc, 0, sizeof fc);
    fc.id = cid;
    int rc = pl_store_list_comparisons(r->store, 0, find_cmp_cb, &fc, err);
    if (!rc && !fc.found)
        rc = pl__err(err, PL_ENOTFOUND, "no comparison %lld in the record", (long long)cid);
    if (rc) {
        free(fc.params);
        return rc;
    }
    cJSON *o = cJSON_Parse(fc.params ? fc.params : "");
    free(fc.params);
    const cJSON *site_o = obj(o, "site"), *ref_o = obj(o, "reference"),
                *cur_o = obj(o, "current");
    if (!o || !site_o || !ref_o || !cur_o) {
        cJSON_Delete(o);
        return pl__err(err, PL_EFORMAT, "comparison %lld: its recorded result is not a "
                       "comparison plyledger can read", (long long)cid);
    }
    const char *serial = jstr(o, "airframe"), *code = jstr(site_o, "code");
    const cJSON *ch = obj(o, "channel"), *cr = obj(o, "criteria");
    const char *quantity = jstr(ch, "quantity"), *label = jstr(ch, "label"),
               *unit = jstr(ch, "unit");
    pl_id bmap = (pl_id)jnum(ref_o, "map"), cmap = (pl_id)jnum(cur_o, "map");
    pl_site site;
    pl_inspection bi, ci;
    memset(&bi, 0, sizeof bi);
    memset(&ci, 0, sizeof ci);
    pl_map_record bm, cm;
    memset(&bm, 0, sizeof bm);
    memset(&cm, 0, sizeof cm);
    vec chgs = { NULL, 0, sizeof(chg_rec), 0 }, inds = { NULL, 0, sizeof(ind_rec), 0 },
        interps = { NULL, 0, sizeof(pl_interpretation), 0 },
        disps = { NULL, 0, sizeof(pl_disposition), 0 };
    pictures pics;
    memset(&pics, 0, sizeof pics);
    rc = pl_store_get_site(r->store, serial, code, &site, err);
    if (!rc)
        rc = pl_store_get_inspection(r->store, fc.rec.baseline_inspection, &bi, err);
    if (!rc)
        rc = pl_store_get_inspection(r->store, fc.rec.current_inspection, &ci, err);
    pl_map *tmp = NULL;
    if (!rc)
        rc = pl_store_load_map(r->store, bmap, &tmp, &bm, err);
    pl_map_free(tmp);
    tmp = NULL;
    if (!rc)
        rc = pl_store_load_map(r->store, cmap, &tmp, &cm, err);
    /* the corners of the site's map on the airframe */
    double corner[4][3];
    int corners = 0;
    if (!rc && tmp && isfinite(tmp->pitch_u)) {
        double cc[4][2] = { { 0, 0 },
                            { tmp->width - 1.0, 0 },
                            { 0, tmp->height - 1.0 },
                            { tmp->width - 1.0, tmp->height - 1.0 } };
        for (int i = 0; i < 4; i++)
            pl_map_pixel_to_part(tmp, cc[i][0], cc[i][1], corner[i]);
        corners = 1;
    }
    pl_map_free(tmp);
    bm.channels = cm.channels = NULL; /* they pointed into the maps */
    if (!rc)
        rc = pl_store_list_changes(r->store, cid, chg_cb, &chgs, err);
    chg_fix(&chgs);
    if (!rc)
        rc = pl_store_list_indications(r->store, cid, ind_cb, &inds, err);
    if (!rc)
        rc = pl_store_list_interpretations(r->store, cid, interp_cb, &interps, err);
    if (!rc)
        rc = pl_store_list_dispositions(r->store, serial, code, cid, disp_cb, &disps, err);
    find_reg fr;
    memset(&fr, 0, sizeof fr);
    fr.id = fc.rec.registration_id;
    if (!rc && fr.id)
        rc = pl_store_list_registrations(r->store, cmap, find_reg_cb, &fr, err);
    if (rc)
        goto out;
    int done = strcmp(fc.rec.status, "done") == 0;
    int simulated = bi.simulated == 1 || ci.simulated == 1;

    pl_strbuf__printf(b, "<section class=\"site\" id=\"site-");
    esc(b, code);
    pl_strbuf__append(b, "\">\n<h2>");
    escf(b, "%s site %s: %s of %s against the %s of %s", serial, code, ci.kind,
         ci.performed_on, bi.kind, bi.performed_on);
    pl_strbuf__append(b, "</h2>\n");
    if (simulated)
        pl_strbuf__append(b, "<p class=\"simulated\">SIMULATED DATA: this comparison rests on "
                             "simulated inspections, not on the part.</p>\n");
    if (cJSON_IsTrue(obj(cr, "example_values")))
        pl_strbuf__append(b, "<p class=\"example\">Criteria " PL_CRITERIA_EXAMPLE_MARKING
                             "</p>\n");
    if (!done) {
        pl_strbuf__append(b, "<p class=\"missed\">NOT COMPARED: ");
        esc(b, fc.rec.not_done_reason);
        pl_strbuf__append(b, "</p>\n");
    }
    const cJSON *counts = obj(o, "counts");
    pl_strbuf__printf(b, "<p>Comparison %lld (recorded ", (long long)cid);
    esc(b, fc.rec.recorded_at);
    pl_strbuf__append(b, "): ");
    escf(b, "%.0f new, %.0f grown, %.0f stable, %.0f vanished, %.0f not compared, %.0f changed "
            "regions; %.0f beyond their limits.", jnum(counts, "new"), jnum(counts, "grown"),
         jnum(counts, "stable"), jnum(counts, "vanished"), jnum(counts, "not-compared"),
         jnum(counts, "changed-region"), jnum(counts, "exceeding"));
    pl_strbuf__append(b, "</p>\n");

    /* where the site is */
    pl_strbuf__append(b, "<h3>Site</h3>\n<table>\n");
    char v[1024];
    row2(b, "zone / frame / stringer", (snprintf(v, sizeof v, "%s / %s / %s",
                                                 site.zone[0] ? site.zone : "-",
                                                 site.frame[0] ? site.frame : "-",
                                                 site.stringer[0] ? site.stringer : "-"), v));
    row2(b, "description", site.description);
    snprintf(v, sizeof v, "%s; %s%s", site.method, site.material[0] ? site.material : "-",
             isfinite(site.thickness_mm) ? "" : "");
    row2(b, "method; material", v);
    if (isfinite(site.thickness_mm)) {
        snprintf(v, sizeof v, "%g mm", site.thickness_mm);
        row2(b, "nominal thickness", v);
    }
    const pl_placement *pf = &site.map_frame;
    snprintf(v, sizeof v, "origin %g, %g, %g %s (%s); u (%g, %g, %g); v (%g, %g, %g)",
             pf->origin[0], pf->origin[1], pf->origin[2], pf->unit, pf->system, pf->u[0],
             pf->u[1], pf->u[2], pf->v[0], pf->v[1], pf->v[2]);
    row2(b, "map frame on the airframe", v);
    if (corners) {
        snprintf(v, sizeof v, "(%.1f, %.1f, %.1f) (%.1f, %.1f, %.1f) (%.1f, %.1f, %.1f) "
                 "(%.1f, %.1f, %.1f) %s", corner[0][0], corner[0][1], corner[0][2],
                 corner[1][0], corner[1][1], corner[1][2], corner[2][0], corner[2][1],
                 corner[2][2], corner[3][0], corner[3][1], corner[3][2], pf->unit);
        row2(b, "map corners (first row, last row)", v);
    }
    pl_strbuf__append(b, "</table>\n");

    if (done) {
        pl_transform t = { fr.rec.shift_col_px, fr.rec.shift_row_px, fr.rec.rotation_deg,
                           fr.rec.scale };
        rc = load_pictures(&pics, r->store, bmap, cmap, quantity, label, &t, err);
        if (!rc) {
            pl_strbuf__append(b, "<h3>Maps</h3>\n<p class=\"meta\">");
            escf(b, "%s %s in %s; the current map is carried onto the baseline grid by the "
                    "recorded registration.", quantity, label, unit);
            pl_strbuf__append(b, "</p>\n");
            rc = render_pictures(r, &pics, bmap, cmap, quantity, &chgs, &inds, err);
        }
        if (rc)
            goto out;
        pl_strbuf__append(b, "<h3>Changes</h3>\n");
        changes_table(b, &chgs, obj(o, "changes"), unit);
        const cJSON *cov = obj(o, "coverage");
        char a[32], f[32];
        pl_strbuf__append(b, "<p>");
        escf(b, "Not compared: %s mm2 (%s %% of the baseline's data), outside the overlap of "
                "the two maps.", fnum(a, sizeof a, jnum(cov, "not_compared_mm2"), 0),
             fnum(f, sizeof f, 100.0 * jnum(cov, "not_compared_fraction"), 1));
        pl_strbuf__append(b, "</p>\n");
    }

    /* registration */
    pl_strbuf__append(b, "<h3>Registration</h3>\n<table>\n");
    if (!fr.found) {
        row2(b, "registration", "none recorded");
    } else {
        char x1[32], x2[32], x3[32], x4[32];
        snprintf(v, sizeof v, "%lld, %s (%s)", (long long)fr.rec.id, fr.rec.status,
                 fr.rec.method);
        row2(b, "registration", v);
        if (strcmp(fr.rec.status, "refused") == 0)
            row2(b, "refused", fr.rec.refusal);
        snprintf(v, sizeof v, "%s, %s px (%s, %s mm)", fnum(x1, sizeof x1, fr.rec.shift_col_px, 2),
                 fnum(x2, sizeof x2, fr.rec.shift_row_px, 2),
                 fnum(x3, sizeof x3, fr.rec.shift_u_mm, 2), fnum(x4, sizeof x4, fr.rec.shift_v_mm, 2));
        row2(b, "shift (columns, rows)", v);
        snprintf(v, sizeof v, "%s deg; scale %s", fnum(x1, sizeof x1, fr.rec.rotation_deg, 3),
                 fnum(x2, sizeof x2, fr.rec.scale, 4));
        row2(b, "rotation", v);
        snprintf(v, sizeof v, "normalised cross-correlation %s; peak-to-sidelobe %s",
                 fnum(x1, sizeof x1, fr.rec.ncc, 3), fnum(x2, sizeof x2, fr.rec.peak_sidelobe, 1));
        row2(b, "quality", v);
        snprintf(v, sizeof v, "%s %% of the baseline grid (%s mm2)",
                 fnum(x1, sizeof x1, 100.0 * fr.rec.overlap_fraction, 1),
                 fnum(x2, sizeof x2, fr.rec.overlap_mm2, 0));
        row2(b, "overlap", v);
        if (fr.rec.supplied_by[0]) {
            snprintf(v, sizeof v, "%s: %s", fr.rec.supplied_by, fr.rec.supplied_reason);
            row2(b, "transform supplied by", v);
        }
    }
    const cJSON *warn = obj(o, "warnings");
    for (int i = 0; i < cJSON_GetArraySize(warn); i++)
        row2(b, "comparability warning", cJSON_GetStringValue(cJSON_GetArrayItem(warn, i)));
    pl_strbuf__append(b, "</table>\n");

    /* criteria */
    pl_strbuf__append(b, "<h3>Criteria</h3>\n<table>\n");
    snprintf(v, sizeof v, "%s rev %s (record %.0f)", jstr(cr, "name"), jstr(cr, "revision"),
             jnum(cr, "id"));
    row2(b, "criteria", v);
    row2(b, "source document", jstr(cr, "source_document"));
    snprintf(v, sizeof v, "%s (%s); vanished indications: %s", jstr(cr, "rule"),
             jstr(cr, "kind"), jstr(cr, "vanished"));
    row2(b, "rule", v);
    {
        char x1[32], x2[32], x3[32], x4[32], x5[32], x6[32];
        snprintf(v, sizeof v, "area %s mm2, contrast %s %s",
                 gnum(x1, sizeof x1, jnum(cr, "repeatability_area_mm2"), 4),
                 gnum(x2, sizeof x2, jnum(cr, "repeatability_contrast"), 4), unit);
        row2(b, "measurement repeatability", v);
        snprintf(v, sizeof v, "reportable from %s mm2; a new indication from %s mm2; growth "
                 "limit %s mm2 or %s %%; contrast growth %s",
                 gnum(x1, sizeof x1, jnum(cr, "min_reportable_area_mm2"), 4),
                 gnum(x2, sizeof x2, jnum(cr, "new_reportable_area_mm2"), 4),
                 gnum(x3, sizeof x3, jnum(cr, "area_growth_mm2"), 4),
                 gnum(x4, sizeof x4, jnum(cr, "area_growth_percent"), 4),
                 gnum(x5, sizeof x5, jnum(cr, "contrast_growth"), 4));
        (void)x6;
        row2(b, "limits", v);
    }
    if (cJSON_IsTrue(obj(cr, "example_values")))
        row2(b, "marking", PL_CRITERIA_EXAMPLE_MARKING);
    pl_strbuf__append(b, "</table>\n");

    if (done) {
        rc = tracks_block(r, serial, code, quantity, label, cid, err);
        if (rc)
            goto out;
    }
    decisions_block(r, &interps, &disps);

    pl_strbuf__append(b, "<h3>Traceability</h3>\n<table><tr><th></th><th>baseline</th>"
                         "<th>current</th></tr>\n");
    inspection_rows(b, &bi, &ci, &bm, &cm);
    pl_strbuf__append(b, "</table>\n</section>\n");
out:
    pictures_free(&pics);
    pl_inspection_clear(&bi);
    pl_inspection_clear(&ci);
    free(bm.parameters_json);
    free(cm.parameters_json);
    free(chgs.v);
    vec_free_inds(&inds);
    free(interps.v);
    free(disps.v);
    cJSON_Delete(o);
    if (!rc && (chgs.failed || inds.failed || interps.failed || disps.failed))
        rc = pl__err(err, PL_ENOMEM, "report: out of memory");
    return rc;
}

/* ---- the documents -------------------------------------------------------------- */

static int begin(rep *r, pl_store *store, const pl_report_options *o, pl_err *err)
{
    memset(r, 0, sizeof *r);
    pl_strbuf__init(&r->h);
    r->store = store;
    if (o->version != PL_REPORT_OPTIONS_VERSION)
        return pl__err(err, PL_EINVAL, "report options: version %u, expected %u", o->version,
                       PL_REPORT_OPTIONS_VERSION);
    if (sodium_init() < 0)
        return pl__err(err, PL_ENOMEM, "report: libsodium could not start");
    if (o->verify) {
        int rc = pl_store_verify(store, &r->vr, NULL, err);
        if (rc)
            return rc;
        r->verified = 1;
    }
    return PL_OK;
}

static void generated(rep *r, const pl_report_options *o)
{
    char today[16];
    if (o->generated_on && *o->generated_on) {
        snprintf(today, sizeof today, "%.10s", o->generated_on);
    } else {
        time_t now = time(NULL);
        struct tm tm;
        gmtime_r(&now, &tm);
        strftime(today, sizeof today, "%Y-%m-%d", &tm);
    }
    pl_strbuf__append(&r->h, "<p class=\"meta\">Made by plyledger " PL_VERSION_STRING " on ");
    esc(&r->h, today);
    pl_strbuf__append(&r->h, " from the record; every picture is embedded.</p>\n");
}

static int finish(rep *r, char **html, size_t *len, pl_err *err)
{
    caution(&r->h);
    pl_strbuf__append(&r->h, "</body>\n</html>\n");
    size_t n = pl_strbuf__len(&r->h);
    *html = pl_strbuf__detach(&r->h);
    if (!*html)
        return pl__err(err, PL_ENOMEM, "report: out of memory");
    if (len)
        *len = n;
    return PL_OK;
}

int pl_report_site(char **html, size_t *len, pl_store *store, pl_id comparison_id,
                   const pl_report_options *opts, pl_err *err)
{
    assert(html && store);
    *html = NULL;
    pl_report_options dflt = PL_REPORT_OPTIONS_INIT;
    const pl_report_options *o = opts ? opts : &dflt;
    rep r;
    int rc = begin(&r, store, o, err);
    if (rc) {
        pl_strbuf__release(&r.h);
        return rc;
    }
    char title[128];
    snprintf(title, sizeof title, "Disposition report: comparison %lld", (long long)comparison_id);
    head(&r.h, title);
    pl_strbuf__append(&r.h, "<h1>Disposition report</h1>\n");
    generated(&r, o);
    caution(&r.h);
    verify_block(&r);
    rc = site_section(&r, comparison_id, err);
    if (rc) {
        pl_strbuf__release(&r.h);
        return rc;
    }
    return finish(&r, html, len, err);
}

int pl_report_check(char **html, size_t *len, pl_store *store, const char *serial,
                    const char *task, const pl_report_options *opts, pl_progress_fn progress,
                    void *ud, pl_err *err)
{
    assert(html && store && serial);
    *html = NULL;
    pl_report_options dflt = PL_REPORT_OPTIONS_INIT;
    const pl_report_options *o = opts ? opts : &dflt;
    pl_coverage *cov = NULL;
    int rc = pl_coverage_load(&cov, store, serial, task, err);
    if (rc)
        return rc;
    rep r;
    rc = begin(&r, store, o, err);
    if (rc) {
        pl_strbuf__release(&r.h);
        pl_coverage_free(cov);
        return rc;
    }
    pl_strbuf *b = &r.h;
    char title[256];
    snprintf(title, sizeof title, "Check report: %s, %s", cov->serial, cov->task);
    head(b, title);
    pl_strbuf__append(b, "<h1>");
    escf(b, "Check report: %s, %s", cov->serial, cov->task);
    pl_strbuf__append(b, "</h1>\n");
    generated(&r, o);
    char line[1024];
    if (pl_coverage_missed_line(line, sizeof line, cov)) {
        pl_strbuf__append(b, "<p class=\"missed\">");
        esc(b, line);
        pl_strbuf__append(b, "</p>\n");
    }
    caution(b);
    verify_block(&r);
    pl_strbuf__append(b, "<h2>Coverage of the check</h2>\n");
    {
        char p[32], im[32], ip[32], cm[32], cp[32];
        pl_strbuf__append(b, "<p>");
        escf(b, "%zu sites in the plan: %zu compared, %zu refused, %zu not compared, %zu NOT "
                "INSPECTED. Plan %s mm2; inspected %s mm2 (%s %%); compared %s mm2 (%s %%).",
             cov->nsites, cov->compared, cov->refused, cov->not_compared, cov->missed,
             fnum(p, sizeof p, cov->plan_mm2, 0), fnum(im, sizeof im, cov->inspected_mm2, 0),
             fnum(ip, sizeof ip, cov->inspected_percent, 1),
             fnum(cm, sizeof cm, cov->compared_mm2, 0),
             fnum(cp, sizeof cp, cov->compared_percent, 1));
        pl_strbuf__append(b, "</p>\n");
    }
    pl_strbuf__append(b, "<table><tr><th>site</th><th>zone</th><th>state</th><th>inspected</th>"
                         "<th>overlap %</th><th>compared %</th><th>compared mm2</th>"
                         "<th>beyond limits</th><th>note</th></tr>\n");
    size_t nsections = 0;
    for (size_t i = 0; i < cov->nsites; i++) {
        const pl_coverage_site *cs = &cov->sites[i];
        char a[32], f[32], m[32];
        pl_strbuf__append(b, "<tr><td>");
        esc(b, cs->code);
        pl_strbuf__append(b, "</td><td>");
        esc(b, cs->zone);
        pl_strbuf__append(b, cs->state == PL_COVERAGE_MISSED ? "</td><td class=\"fault\">NOT "
                                                               "INSPECTED"
                                                             : "</td><td>");
        if (cs->state != PL_COVERAGE_MISSED)
            esc(b, pl_coverage_state_name(cs->state));
        pl_strbuf__append(b, "</td><td>");
        esc(b, cs->performed_on[0] ? cs->performed_on : "-");
        pl_strbuf__printf(b, "%s</td><td class=\"n\">%s</td><td class=\"n\">%s</td>"
                             "<td class=\"n\">%s</td><td class=\"n%s\">%zu</td><td>",
                          cs->simulated ? " (simulated)" : "",
                          fnum(a, sizeof a, 100.0 * cs->overlap_fraction, 1),
                          fnum(f, sizeof f, 100.0 * cs->compared_fraction, 1),
                          fnum(m, sizeof m, cs->compared_mm2, 0),
                          cs->exceeding ? " exceeds" : "", cs->exceeding);
        esc(b, cs->state == PL_COVERAGE_MISSED ? (cs->description[0] ? cs->description : "")
                                               : cs->reason);
        pl_strbuf__append(b, "</td></tr>\n");
        if (cs->comparison)
            nsections++;
    }
    pl_strbuf__append(b, "</table>\n");
    if (cov->missed) {
        pl_strbuf__append(b, "<p class=\"missed\">");
        esc(b, line);
        pl_strbuf__append(b, "</p>\n");
    }
    pl_strbuf__append(b, "<p class=\"meta\">The sections below are the sites with a reportable "
                         "change that is new, grown or vanished, or beyond its limits, and "
                         "the sites whose comparison was refused; the others are stable or "
                         "quiet (the table above).</p>\n");
    size_t done = 0;
    for (size_t i = 0; i < cov->nsites && !rc; i++) {
        const pl_coverage_site *cs = &cov->sites[i];
        if (!cs->comparison)
            continue;
        /* a site with something to decide gets its section */
        int wanted = cs->state == PL_COVERAGE_REFUSED || cs->exceeding;
        if (!wanted) {
            vec chgs = { NULL, 0, sizeof(chg_rec), 0 };
            rc = pl_store_list_changes(store, cs->comparison, chg_cb, &chgs, err);
            const chg_rec *c = chgs.v;
            for (size_t k = 0; k < chgs.n && !rc; k++)
                wanted |= c[k].r.reportable && (strcmp(c[k].r.class_, "new") == 0 ||
                                                strcmp(c[k].r.class_, "grown") == 0 ||
                                                strcmp(c[k].r.class_, "vanished") == 0);
            free(chgs.v);
        }
        if (!rc && wanted)
            rc = site_section(&r, cs->comparison, err);
        done++;
        if (!rc && progress && progress(ud, (double)done / (double)(nsections ? nsections : 1)))
            rc = pl__err(err, PL_ECANCELED, "report canceled after %zu sites", done);
    }
    pl_coverage_free(cov);
    if (rc) {
        pl_strbuf__release(&r.h);
        return rc;
    }
    return finish(&r, html, len, err);
}
