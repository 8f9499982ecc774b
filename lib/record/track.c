/*
 * track.c - indications followed through the inspections of a site, their
 * growth fits and forecasts (plyledger/track.h).
 */
#include "plyledger/track.h"

#include "common/common_int.h"
#include "common/strbuf_int.h"
#include "plyledger/change.h"
#include "plyledger/compare.h"
#include "plyledger/history.h"

#include <cjson/cJSON.h>

#include <assert.h>
#include <float.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---- the growth fit ------------------------------------------------------- */

const char *pl_growth_state_name(pl_growth_state state)
{
    switch (state) {
    case PL_GROWTH_TOO_FEW: return "too few points";
    case PL_GROWTH_NOT_GROWING: return "not growing";
    case PL_GROWTH_GROWING: return "growing";
    case PL_GROWTH_REACHED: return "limit reached";
    }
    return "unknown";
}

/* Fieller's interval: the x where (a + b x - L)^2 = k^2 var(a + b x), the
 * quadratic  (b^2 - k^2 Vbb) x^2 + 2 ((a - L) b - k^2 Vab) x
 *            + (a - L)^2 - k^2 Vaa = 0.
 * With the slope significant (b^2 > k^2 Vbb) the roots bound the interval. */
static void fieller(pl_growth_fit *f, double k)
{
    double a = f->intercept - f->limit, b = f->slope, k2 = k * k;
    double qa = b * b - k2 * f->var_slope;
    double qb = 2.0 * (a * b - k2 * f->covariance);
    double qc = a * a - k2 * f->var_intercept;
    double disc = qb * qb - 4.0 * qa * qc;
    f->crossing_low = f->crossing_high = NAN;
    if (!(qa > 0) || !(disc >= 0))
        return;
    double s = sqrt(disc);
    /* the numerically stable pair of roots */
    double q = -0.5 * (qb + (qb >= 0 ? s : -s));
    double r1 = q / qa, r2 = q != 0 ? qc / q : r1;
    f->crossing_low = fmin(r1, r2);
    f->crossing_high = fmax(r1, r2);
}

int pl_growth_fit_line(pl_growth_fit *out, const double *x, const double *y,
                       const double *sigma, size_t n, double limit, double k,
                       double last_area, pl_err *err)
{
    assert(out);
    memset(out, 0, sizeof *out);
    out->state = PL_GROWTH_TOO_FEW;
    out->intercept = out->slope = out->var_intercept = out->var_slope = NAN;
    out->covariance = out->u_slope = out->u_slope_repeatability = NAN;
    out->u_slope_scatter = out->chi2 = out->crossing = NAN;
    out->crossing_low = out->crossing_high = NAN;
    out->limit = limit;
    if (!(k > 0) || !isfinite(k))
        return pl__err(err, PL_EINVAL, "growth fit: coverage factor %g is not positive", k);
    /* weighted sums about the weighted mean of x (the centred form keeps
     * cycles of 10^4..10^5 from cancelling) */
    double sw = 0, swx = 0, swy = 0;
    size_t m = 0;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(x[i]) || !isfinite(y[i]) || !isfinite(sigma[i]) || !(sigma[i] > 0))
            continue;
        double w = 1.0 / (sigma[i] * sigma[i]);
        sw += w;
        swx += w * x[i];
        swy += w * y[i];
        m++;
    }
    out->n = m;
    if (m < 2)
        return PL_OK;
    double xm = swx / sw, ym = swy / sw, sxx = 0, sxy = 0;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(x[i]) || !isfinite(y[i]) || !isfinite(sigma[i]) || !(sigma[i] > 0))
            continue;
        double w = 1.0 / (sigma[i] * sigma[i]);
        sxx += w * (x[i] - xm) * (x[i] - xm);
        sxy += w * (x[i] - xm) * (y[i] - ym);
    }
    if (!(sxx > 0))
        return PL_OK; /* every point at one x: no slope */
    double b = sxy / sxx, a = ym - b * xm;
    double chi2 = 0;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(x[i]) || !isfinite(y[i]) || !isfinite(sigma[i]) || !(sigma[i] > 0))
            continue;
        double r = (y[i] - a - b * x[i]) / sigma[i];
        chi2 += r * r;
    }
    /* the unscaled covariance of (a, b): Vbb = 1/Sxx, Vab = -xm/Sxx,
     * Vaa = 1/Sw + xm^2/Sxx */
    double vbb = 1.0 / sxx, vab = -xm / sxx, vaa = 1.0 / sw + xm * xm / sxx;
    double scale = 1.0;
    out->u_slope_repeatability = sqrt(vbb);
    if (m >= 3) {
        double f = chi2 / (double)(m - 2);
        out->u_slope_scatter = sqrt(vbb * f);
        if (f > 1.0)
            scale = f;
    }
    out->intercept = a;
    out->slope = b;
    out->chi2 = chi2;
    out->var_intercept = vaa * scale;
    out->var_slope = vbb * scale;
    out->covariance = vab * scale;
    out->u_slope = sqrt(out->var_slope);
    int growing = b > k * out->u_slope;
    if (growing && isfinite(limit)) {
        out->crossing = (limit - a) / b;
        fieller(out, k);
    }
    if (isfinite(limit) && isfinite(last_area) && last_area >= limit)
        out->state = PL_GROWTH_REACHED;
    else
        out->state = growing ? PL_GROWTH_GROWING : PL_GROWTH_NOT_GROWING;
    return PL_OK;
}

/* ---- building the tracks ------------------------------------------------ */

/* One indication of a comparison, as the tracks need it. */
typedef struct ind {
    int baseline;          /* role */
    long label;
    double area, area_halfmax, major, peak, depth, px, py, pz, col, row;
    double c0, r0, c1, r1; /* bounding box */
    size_t node;           /* in the union-find */
} ind;

typedef struct chg {
    pl_id id;
    long number;
    char class_[PL_WORD_SIZE];
    int reportable, exceeds;
    long touches;
    long *blabels, *clabels;
    size_t nb, nc;
} chg;

typedef struct cmp {
    pl_id id;
    size_t inspection;     /* index */
    pl_id era;
    int halfmax;           /* the limits' sizing is half-maximum */
    char *params;          /* parameters_json (owned) */
    ind *inds;
    size_t ninds;
    chg *chgs;
    size_t nchgs;
} cmp;

typedef struct builder {
    pl_site_tracks *t;
    cmp *cmps;
    size_t ncmps;
    size_t *parent;        /* union-find over nodes */
    size_t nnodes, capnodes;
    /* node -> (comparison, indication) of its first occurrence; baseline
     * nodes of an era are shared by every comparison of it */
    size_t *node_cmp, *node_ind;
} builder;

static size_t uf_find(size_t *p, size_t i)
{
    while (p[i] != i) {
        p[i] = p[p[i]];
        i = p[i];
    }
    return i;
}

static void uf_union(size_t *p, size_t a, size_t b)
{
    a = uf_find(p, a);
    b = uf_find(p, b);
    if (a != b) {
        if (a < b)
            p[b] = a;
        else
            p[a] = b;
    }
}

static int new_node(builder *b, size_t c, size_t i, size_t *out)
{
    if (b->nnodes == b->capnodes) {
        size_t cap = b->capnodes ? 2 * b->capnodes : 64;
        size_t *p = realloc(b->parent, cap * sizeof *p);
        if (!p)
            return PL_ENOMEM;
        b->parent = p;
        p = realloc(b->node_cmp, cap * sizeof *p);
        if (!p)
            return PL_ENOMEM;
        b->node_cmp = p;
        p = realloc(b->node_ind, cap * sizeof *p);
        if (!p)
            return PL_ENOMEM;
        b->node_ind = p;
        b->capnodes = cap;
    }
    b->parent[b->nnodes] = b->nnodes;
    b->node_cmp[b->nnodes] = c;
    b->node_ind[b->nnodes] = i;
    *out = b->nnodes++;
    return PL_OK;
}

static int ind_cb(void *ud, const pl_indication_record *r)
{
    cmp *c = ud;
    ind *v = realloc(c->inds, (c->ninds + 1) * sizeof *v);
    if (!v)
        return PL_ENOMEM;
    c->inds = v;
    ind *d = &v[c->ninds++];
    memset(d, 0, sizeof *d);
    d->baseline = strcmp(r->role, "baseline") == 0;
    d->label = (long)r->label;
    d->area = r->area_mm2;
    d->area_halfmax = r->area_halfmax_mm2;
    d->major = r->major_axis_mm;
    d->peak = r->peak_contrast;
    d->depth = r->depth_mm;
    d->px = r->part_x;
    d->py = r->part_y;
    d->pz = r->part_z;
    d->col = r->centroid_col;
    d->row = r->centroid_row;
    d->c0 = (double)r->bbox_col0;
    d->r0 = (double)r->bbox_row0;
    d->c1 = (double)r->bbox_col1;
    d->r1 = (double)r->bbox_row1;
    return PL_OK;
}

static int labels_of(long **out, size_t *n, const char *json)
{
    *out = NULL;
    *n = 0;
    cJSON *a = cJSON_Parse(json ? json : "[]");
    if (!a || !cJSON_IsArray(a)) {
        cJSON_Delete(a);
        return PL_EFORMAT;
    }
    int cnt = cJSON_GetArraySize(a);
    if (cnt > 0) {
        *out = calloc((size_t)cnt, sizeof **out);
        if (!*out) {
            cJSON_Delete(a);
            return PL_ENOMEM;
        }
    }
    for (int i = 0; i < cnt; i++) {
        cJSON *e = cJSON_GetArrayItem(a, i);
        if (!cJSON_IsNumber(e)) {
            cJSON_Delete(a);
            free(*out);
            *out = NULL;
            return PL_EFORMAT;
        }
        (*out)[i] = (long)e->valuedouble;
    }
    *n = (size_t)cnt;
    cJSON_Delete(a);
    return PL_OK;
}

static int chg_cb(void *ud, const pl_change_record *r)
{
    cmp *c = ud;
    chg *v = realloc(c->chgs, (c->nchgs + 1) * sizeof *v);
    if (!v)
        return PL_ENOMEM;
    c->chgs = v;
    chg *d = &v[c->nchgs];
    memset(d, 0, sizeof *d);
    d->id = r->id;
    d->number = (long)r->number;
    snprintf(d->class_, sizeof d->class_, "%s", r->class_);
    d->reportable = r->reportable;
    d->exceeds = r->exceeds;
    d->touches = (long)r->touches;
    if (strcmp(r->sizing, "half-maximum") == 0)
        c->halfmax = 1;
    int rc = labels_of(&d->blabels, &d->nb, r->baseline_labels);
    if (!rc)
        rc = labels_of(&d->clabels, &d->nc, r->current_labels);
    if (rc) {
        free(d->blabels);
        free(d->clabels);
        return rc;
    }
    c->nchgs++;
    return PL_OK;
}

static ind *find_ind(cmp *c, int baseline, long label)
{
    for (size_t i = 0; i < c->ninds; i++)
        if (c->inds[i].baseline == baseline && c->inds[i].label == label)
            return &c->inds[i];
    return NULL;
}

/* The channel a recorded comparison compared, from its parameters. */
static int channel_of(const char *params, char *q, size_t qs, char *l, size_t ls, char *u,
                      size_t us)
{
    cJSON *o = cJSON_Parse(params ? params : "");
    cJSON *ch = o ? cJSON_GetObjectItemCaseSensitive(o, "channel") : NULL;
    const char *qq = cJSON_GetStringValue(cJSON_GetObjectItemCaseSensitive(ch, "quantity"));
    const char *ll = cJSON_GetStringValue(cJSON_GetObjectItemCaseSensitive(ch, "label"));
    const char *uu = cJSON_GetStringValue(cJSON_GetObjectItemCaseSensitive(ch, "unit"));
    int ok = qq != NULL;
    if (ok) {
        snprintf(q, qs, "%s", qq);
        snprintf(l, ls, "%s", ll ? ll : "");
        if (u)
            snprintf(u, us, "%s", uu ? uu : "");
    }
    cJSON_Delete(o);
    return ok;
}

static double num_of(const cJSON *o, const char *k)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(o, k);
    return cJSON_IsNumber(v) ? v->valuedouble : NAN;
}

/* The limits a comparison applied, from the criteria block it recorded. */
static int limits_of(pl_change_limits *l, pl_site_tracks *t, const cmp *c)
{
    pl_change_limits init = PL_CHANGE_LIMITS_INIT;
    *l = init;
    cJSON *o = cJSON_Parse(c->params ? c->params : "");
    cJSON *cr = o ? cJSON_GetObjectItemCaseSensitive(o, "criteria") : NULL;
    if (!cr) {
        cJSON_Delete(o);
        return 0;
    }
    const char *kind = cJSON_GetStringValue(cJSON_GetObjectItemCaseSensitive(cr, "kind"));
    l->kind = kind && strcmp(kind, "no-growth") == 0 ? PL_LIMITS_NO_GROWTH : PL_LIMITS_GROWTH;
    l->sizing = c->halfmax ? PL_SIZING_HALF_MAX : PL_SIZING_THRESHOLD;
    l->area_repeatability_mm2 = num_of(cr, "repeatability_area_mm2");
    l->contrast_repeatability = num_of(cr, "repeatability_contrast");
    l->min_reportable_mm2 = num_of(cr, "min_reportable_area_mm2");
    l->new_reportable_mm2 = num_of(cr, "new_reportable_area_mm2");
    l->area_growth_mm2 = num_of(cr, "area_growth_mm2");
    l->area_growth_percent = num_of(cr, "area_growth_percent");
    l->contrast_growth = num_of(cr, "contrast_growth");
    const char *s;
    if ((s = cJSON_GetStringValue(cJSON_GetObjectItemCaseSensitive(cr, "name"))))
        snprintf(t->criteria_name, sizeof t->criteria_name, "%s", s);
    if ((s = cJSON_GetStringValue(cJSON_GetObjectItemCaseSensitive(cr, "revision"))))
        snprintf(t->criteria_revision, sizeof t->criteria_revision, "%s", s);
    if ((s = cJSON_GetStringValue(cJSON_GetObjectItemCaseSensitive(cr, "rule"))))
        snprintf(t->criteria_rule, sizeof t->criteria_rule, "%s", s);
    t->example_values = cJSON_IsTrue(cJSON_GetObjectItemCaseSensitive(cr, "example_values"));
    t->repeatability_area_mm2 = l->area_repeatability_mm2;
    cJSON_Delete(o);
    return 1;
}

static int is_baseline_kind(const char *kind)
{
    return strcmp(kind, "baseline") == 0 || strcmp(kind, "post-repair") == 0;
}

static void list_add(char *buf, size_t cap, const char *word)
{
    size_t len = strlen(buf);
    /* a word already listed is not repeated */
    const char *p = buf;
    size_t wl = strlen(word);
    while ((p = strstr(p, word))) {
        if ((p == buf || p[-1] == ',') && (p[wl] == ',' || p[wl] == 0))
            return;
        p += wl;
    }
    snprintf(buf + len, cap - len, "%s%s", len ? "," : "", word);
}

/* A track's points from the members of component `root`. */
typedef struct acc {
    size_t n;
    double area, halfmax, major, peak, depth_w, depth_a, px, py, pz, pw, col, row;
} acc;

static void acc_add(acc *a, const ind *d, int halfmax)
{
    double w = halfmax ? d->area_halfmax : d->area;
    a->n++;
    a->area += w;
    a->halfmax += d->area_halfmax;
    if (isfinite(d->major) && !(d->major <= a->major))
        a->major = d->major;
    if (isfinite(d->peak) && !(d->peak <= a->peak))
        a->peak = d->peak;
    if (isfinite(d->depth)) {
        a->depth_w += d->depth * w;
        a->depth_a += w;
    }
    if (isfinite(d->px) && isfinite(d->py) && isfinite(d->pz)) {
        a->px += d->px * w;
        a->py += d->py * w;
        a->pz += d->pz * w;
        a->pw += w;
    }
    a->col += d->col * w;
    a->row += d->row * w;
}

static void acc_point(pl_track_point *p, const acc *a)
{
    p->nindications = a->n;
    p->seen = a->n > 0;
    p->area_mm2 = a->n ? a->area : 0.0;
    p->area_halfmax_mm2 = a->n ? a->halfmax : 0.0;
    p->length_mm = a->n && isfinite(a->major) ? a->major : NAN;
    p->contrast = a->n && isfinite(a->peak) ? a->peak : NAN;
    p->depth_mm = a->depth_a > 0 ? a->depth_w / a->depth_a : NAN;
    p->part_x = a->pw > 0 ? a->px / a->pw : NAN;
    p->part_y = a->pw > 0 ? a->py / a->pw : NAN;
    p->part_z = a->pw > 0 ? a->pz / a->pw : NAN;
    p->centroid_col = a->n && a->area > 0 ? a->col / a->area : NAN;
    p->centroid_row = a->n && a->area > 0 ? a->row / a->area : NAN;
}

static int push_point(pl_track *tr, const pl_track_point *p)
{
    pl_track_point *v = realloc(tr->points, (tr->npoints + 1) * sizeof *v);
    if (!v)
        return PL_ENOMEM;
    tr->points = v;
    v[tr->npoints++] = *p;
    return PL_OK;
}

static void init_point(pl_track_point *p, size_t insp, pl_id cmp_id)
{
    memset(p, 0, sizeof *p);
    p->inspection = insp;
    p->comparison_id = cmp_id;
    p->area_mm2 = p->area_halfmax_mm2 = p->length_mm = p->contrast = p->depth_mm = NAN;
    p->part_x = p->part_y = p->part_z = p->centroid_col = p->centroid_row = NAN;
}

static double x_of(const pl_site_tracks *t, size_t insp, int which, long day0)
{
    const pl_track_inspection *in = &t->inspections[insp];
    if (which == 0)
        return in->cycles >= 0 ? (double)in->cycles : NAN;
    if (which == 1)
        return in->hours;
    long d;
    if (pl__date_days(&d, in->date))
        return NAN;
    return (double)(d - day0);
}

static int fit_track(pl_site_tracks *t, pl_track *tr, const pl_change_limits *lim, pl_err *err)
{
    size_t n = tr->npoints;
    double *x = calloc(n ? 3 * n : 1, sizeof *x), *y = calloc(n ? n : 1, sizeof *y),
           *s = calloc(n ? n : 1, sizeof *s);
    int rc = PL_OK;
    if (!x || !y || !s) {
        rc = pl__err(err, PL_ENOMEM, "tracks: out of memory");
        goto out;
    }
    long day0 = 0;
    if (n)
        (void)pl__date_days(&day0, t->inspections[tr->points[0].inspection].date);
    double last = NAN, sigma = t->repeatability_area_mm2;
    for (size_t i = 0; i < n; i++) {
        const pl_track_point *p = &tr->points[i];
        y[i] = p->seen ? p->area_mm2 : NAN;
        s[i] = sigma;
        if (p->seen)
            last = p->area_mm2;
        for (int w = 0; w < 3; w++)
            x[w * n + i] = x_of(t, p->inspection, w, day0);
    }
    tr->limit_area_mm2 = NAN;
    tr->reference_area_mm2 = NAN;
    for (size_t i = 0; i < n; i++)
        if (tr->points[i].seen) {
            tr->reference_area_mm2 = tr->points[i].area_mm2;
            break;
        }
    double allow = lim ? pl_change_area_limit(lim, tr->reference_area_mm2) : NAN;
    if (isfinite(allow) && isfinite(tr->reference_area_mm2)) {
        tr->limit_area_mm2 = tr->reference_area_mm2 + allow;
        snprintf(tr->limit_basis, sizeof tr->limit_basis,
                 "%s area %.1f mm2 + %.1f mm2 allowed growth (%s rule)",
                 tr->at_baseline ? "baseline" : "first-found", tr->reference_area_mm2, allow,
                 lim->kind == PL_LIMITS_NO_GROWTH ? "no-growth" : "growth-limit");
    } else {
        snprintf(tr->limit_basis, sizeof tr->limit_basis, "the rule gives no area limit");
    }
    pl_growth_fit *fits[3] = { &tr->by_cycles, &tr->by_hours, &tr->by_days };
    for (int w = 0; w < 3 && !rc; w++)
        rc = pl_growth_fit_line(fits[w], x + w * n, y, s, n, tr->limit_area_mm2,
                                PL_TRACK_COVERAGE_FACTOR, last, err);
    if (!rc && isfinite(tr->by_days.crossing)) {
        double v[3] = { tr->by_days.crossing, tr->by_days.crossing_low,
                        tr->by_days.crossing_high };
        char *d[3] = { tr->forecast_date, tr->forecast_date_low, tr->forecast_date_high };
        for (int i = 0; i < 3; i++)
            if (isfinite(v[i]) && fabs(v[i]) < 1e7)
                (void)pl__days_date(d[i], PL_DATE_SIZE, day0 + (long)floor(v[i] + 0.5));
    }
out:
    free(x);
    free(y);
    free(s);
    return rc;
}

static int track_order(const void *pa, const void *pb)
{
    const pl_track *a = pa, *b = pb;
    if (a->era != b->era)
        return a->era < b->era ? -1 : 1;
    size_t ia = a->npoints ? a->points[0].inspection : 0;
    size_t ib = b->npoints ? b->points[0].inspection : 0;
    if (ia != ib)
        return ia < ib ? -1 : 1;
    if (a->reportable != b->reportable)
        return a->reportable ? -1 : 1;
    double ra = a->npoints ? a->points[0].centroid_row : 0;
    double rb = b->npoints ? b->points[0].centroid_row : 0;
    if (ra != rb)
        return ra < rb ? -1 : 1;
    double ca = a->npoints ? a->points[0].centroid_col : 0;
    double cb = b->npoints ? b->points[0].centroid_col : 0;
    return ca < cb ? -1 : ca > cb;
}

static int disp_cb(void *ud, const pl_disposition *d)
{
    pl_site_tracks *t = ud;
    pl_disposition *v = realloc(t->dispositions, (t->ndispositions + 1) * sizeof *v);
    if (!v)
        return PL_ENOMEM;
    t->dispositions = v;
    v[t->ndispositions++] = *d;
    return PL_OK;
}

static void free_cmps(cmp *c, size_t n)
{
    for (size_t i = 0; i < n; i++) {
        for (size_t j = 0; j < c[i].nchgs; j++) {
            free(c[i].chgs[j].blabels);
            free(c[i].chgs[j].clabels);
        }
        free(c[i].chgs);
        free(c[i].inds);
        free(c[i].params);
    }
    free(c);
}

void pl_site_tracks_free(pl_site_tracks *t)
{
    if (!t)
        return;
    for (size_t i = 0; i < t->ntracks; i++) {
        free(t->tracks[i].points);
        free(t->tracks[i].dispositions);
    }
    free(t->tracks);
    free(t->inspections);
    free(t->dispositions);
    free(t);
}

/* Pick each inspection's comparison and read its indications and changes. */
static int gather(builder *b, pl_store *store, const pl_history *h, const pl_track_options *o,
                  pl_err *err)
{
    pl_site_tracks *t = b->t;
    /* the channel: given, or that of the latest done comparison */
    pl_id latest = 0;
    for (size_t i = 0; i < h->ninspections; i++)
        for (size_t j = 0; j < h->inspections[i].ncomparisons; j++) {
            const pl_comparison_record *c = &h->inspections[i].comparisons[j];
            char q[PL_QUANTITY_SIZE], l[PL_NAME_SIZE], u[PL_UNIT_SIZE];
            if (strcmp(c->status, "done") || !channel_of(c->parameters_json, q, sizeof q, l,
                                                         sizeof l, u, sizeof u))
                continue;
            if (o->quantity && strcmp(o->quantity, q))
                continue;
            if (o->quantity && o->label && strcmp(o->label, l))
                continue;
            if (c->id > latest) {
                latest = c->id;
                snprintf(t->quantity, sizeof t->quantity, "%s", q);
                snprintf(t->label, sizeof t->label, "%s", l);
                snprintf(t->unit, sizeof t->unit, "%s", u);
            }
        }
    if (o->quantity && !latest)
        snprintf(t->quantity, sizeof t->quantity, "%s", o->quantity);
    for (size_t i = 0; i < h->ninspections; i++) {
        const pl_history_inspection *hi = &h->inspections[i];
        pl_track_inspection *ti = &t->inspections[i];
        const pl_inspection *in = &hi->inspection;
        ti->key = in->key;
        snprintf(ti->date, sizeof ti->date, "%s", in->performed_on);
        snprintf(ti->kind, sizeof ti->kind, "%s", in->kind);
        snprintf(ti->task_ref, sizeof ti->task_ref, "%s", in->task_ref);
        ti->hours = in->aircraft_hours;
        ti->cycles = in->aircraft_cycles;
        ti->simulated = in->simulated;
        snprintf(ti->comparison_status, sizeof ti->comparison_status, "none recorded");
        if (is_baseline_kind(in->kind)) {
            ti->era = in->key;
            snprintf(ti->comparison_status, sizeof ti->comparison_status, "baseline");
        }
        if (!latest)
            continue;
        const pl_comparison_record *pick = NULL, *not_done = NULL;
        for (size_t j = 0; j < hi->ncomparisons; j++) {
            const pl_comparison_record *c = &hi->comparisons[j];
            char q[PL_QUANTITY_SIZE], l[PL_NAME_SIZE];
            if (!channel_of(c->parameters_json, q, sizeof q, l, sizeof l, NULL, 0)) {
                if (strcmp(c->status, "done"))
                    not_done = c; /* a refusal records no channel */
                continue;
            }
            if (strcmp(q, t->quantity) || strcmp(l, t->label))
                continue;
            /* against a baseline (not a trend comparison with the previous) */
            int ref_is_baseline = 0;
            for (size_t k = 0; k < h->ninspections; k++)
                if (h->inspections[k].inspection.key == c->baseline_inspection)
                    ref_is_baseline = is_baseline_kind(h->inspections[k].inspection.kind);
            if (!ref_is_baseline)
                continue;
            if (strcmp(c->status, "done") == 0)
                pick = c;
            else
                not_done = c;
        }
        if (!pick) {
            if (not_done && !is_baseline_kind(in->kind))
                snprintf(ti->comparison_status, sizeof ti->comparison_status, "not done: %.*s",
                         (int)sizeof ti->comparison_status - 11, not_done->not_done_reason);
            continue;
        }
        snprintf(ti->comparison_status, sizeof ti->comparison_status, "done");
        ti->comparison_id = pick->id;
        if (!is_baseline_kind(in->kind))
            ti->era = pick->baseline_inspection;
        cmp *v = realloc(b->cmps, (b->ncmps + 1) * sizeof *v);
        if (!v)
            return pl__err(err, PL_ENOMEM, "tracks: out of memory");
        b->cmps = v;
        cmp *c = &v[b->ncmps++];
        memset(c, 0, sizeof *c);
        c->id = pick->id;
        c->inspection = i;
        c->era = pick->baseline_inspection;
        c->params = pl__strdup(pick->parameters_json);
        if (pick->parameters_json && !c->params)
            return pl__err(err, PL_ENOMEM, "tracks: out of memory");
        int rc = pl_store_list_indications(store, c->id, ind_cb, c, err);
        if (!rc)
            rc = pl_store_list_changes(store, c->id, chg_cb, c, err);
        if (rc == PL_EFORMAT)
            return pl__err(err, rc, "%s site %s: comparison %lld: a change's labels are not "
                           "a JSON array of numbers", t->site.airframe_serial, t->site.code,
                           (long long)c->id);
        if (rc)
            return rc;
    }
    return PL_OK;
}

/* Links: rules 1 to 3 of the header. */
static int link_nodes(builder *b, pl_err *err)
{
    for (size_t ci = 0; ci < b->ncmps; ci++) {
        cmp *c = &b->cmps[ci];
        for (size_t k = 0; k < c->ninds; k++) {
            ind *d = &c->inds[k];
            int found = 0;
            if (d->baseline) {
                /* rule 2: the baseline's indications, shared in the era */
                for (size_t cj = 0; cj < ci && !found; cj++) {
                    if (b->cmps[cj].era != c->era)
                        continue;
                    for (size_t m = 0; m < b->cmps[cj].ninds; m++) {
                        ind *e = &b->cmps[cj].inds[m];
                        if (e->baseline && hypot(e->col - d->col, e->row - d->row) <= 1.5) {
                            d->node = e->node;
                            found = 1;
                            break;
                        }
                    }
                }
            }
            if (!found && new_node(b, ci, k, &d->node))
                return pl__err(err, PL_ENOMEM, "tracks: out of memory");
        }
    }
    for (size_t ci = 0; ci < b->ncmps; ci++) {
        cmp *c = &b->cmps[ci];
        /* rule 1: the members of one change */
        for (size_t k = 0; k < c->nchgs; k++) {
            chg *g = &c->chgs[k];
            ind *first = NULL;
            for (size_t m = 0; m < g->nb + g->nc; m++) {
                int base = m < g->nb;
                ind *d = find_ind(c, base, base ? g->blabels[m] : g->clabels[m - g->nb]);
                if (!d)
                    continue;
                if (first)
                    uf_union(b->parent, first->node, d->node);
                else
                    first = d;
            }
        }
        /* rule 3: current indications of earlier inspections of the era */
        for (size_t k = 0; k < c->ninds; k++) {
            ind *d = &c->inds[k];
            if (d->baseline)
                continue;
            for (size_t cj = 0; cj < ci; cj++) {
                cmp *e = &b->cmps[cj];
                if (e->era != c->era)
                    continue;
                for (size_t m = 0; m < e->ninds; m++) {
                    ind *f = &e->inds[m];
                    if (f->baseline)
                        continue;
                    double g = PL_TRACK_LINK_MARGIN_PX;
                    int in_f = d->col >= f->c0 - g && d->col <= f->c1 + g &&
                               d->row >= f->r0 - g && d->row <= f->r1 + g;
                    int in_d = f->col >= d->c0 - g && f->col <= d->c1 + g &&
                               f->row >= d->r0 - g && f->row <= d->r1 + g;
                    if (in_f || in_d)
                        uf_union(b->parent, f->node, d->node);
                }
            }
        }
    }
    return PL_OK;
}

/* The change of comparison c that holds indication d, or NULL. */
static const chg *change_of(const cmp *c, const ind *d)
{
    for (size_t k = 0; k < c->nchgs; k++) {
        const chg *g = &c->chgs[k];
        const long *ls = d->baseline ? g->blabels : g->clabels;
        size_t n = d->baseline ? g->nb : g->nc;
        for (size_t m = 0; m < n; m++)
            if (ls[m] == d->label)
                return g;
    }
    return NULL;
}

static int class_rank(const char *c)
{
    static const char *order[] = { "grown", "new", "vanished", "stable", "not-compared",
                                   "changed-region" };
    for (int i = 0; i < 6; i++)
        if (strcmp(c, order[i]) == 0)
            return i;
    return 6;
}

/* One component's track. */
static int build_track(builder *b, size_t root, pl_track *tr, pl_err *err)
{
    pl_site_tracks *t = b->t;
    memset(tr, 0, sizeof *tr);
    size_t prev_n = 0;
    int started = 0;
    pl_id era = 0;
    for (size_t ci = 0; ci < b->ncmps; ci++) {
        cmp *c = &b->cmps[ci];
        int mine = 0;
        for (size_t k = 0; k < c->ninds && !mine; k++)
            mine = uf_find(b->parent, c->inds[k].node) == root;
        if (!mine && !started)
            continue;
        if (started && c->era != era)
            break; /* another era: this track's ended */
        if (!started) {
            era = c->era;
            tr->era = era;
            /* the baseline's own point */
            acc a;
            memset(&a, 0, sizeof a);
            a.major = a.peak = -INFINITY;
            for (size_t k = 0; k < c->ninds; k++)
                if (c->inds[k].baseline && uf_find(b->parent, c->inds[k].node) == root)
                    acc_add(&a, &c->inds[k], c->halfmax);
            if (a.n) {
                size_t bi = 0;
                for (size_t i = 0; i < t->ninspections; i++)
                    if (t->inspections[i].key == era)
                        bi = i;
                pl_track_point p;
                init_point(&p, bi, c->id);
                acc_point(&p, &a);
                snprintf(p.classes, sizeof p.classes, "baseline");
                tr->at_baseline = 1;
                prev_n = a.n;
                if (push_point(tr, &p))
                    return pl__err(err, PL_ENOMEM, "tracks: out of memory");
            }
            started = 1;
        }
        pl_track_point p;
        init_point(&p, c->inspection, c->id);
        acc a;
        memset(&a, 0, sizeof a);
        a.major = a.peak = -INFINITY;
        int best = 99;
        for (size_t k = 0; k < c->ninds; k++) {
            ind *d = &c->inds[k];
            if (uf_find(b->parent, d->node) != root)
                continue;
            if (!d->baseline)
                acc_add(&a, d, c->halfmax);
            const chg *g = change_of(c, d);
            if (!g)
                continue;
            char num[24];
            snprintf(num, sizeof num, "%ld", g->number);
            list_add(p.changes, sizeof p.changes, num);
            list_add(p.classes, sizeof p.classes, g->class_);
            if (g->reportable)
                tr->reportable = 1;
            if (g->exceeds)
                p.exceeds = 1;
            if (class_rank(g->class_) < best)
                best = class_rank(g->class_);
            /* a changed region at its edge */
            for (size_t r = 0; r < c->nchgs; r++)
                if (strcmp(c->chgs[r].class_, "changed-region") == 0 &&
                    c->chgs[r].touches == g->number) {
                    snprintf(num, sizeof num, "%ld", c->chgs[r].number);
                    list_add(p.changes, sizeof p.changes, num);
                    list_add(p.classes, sizeof p.classes, "changed-region");
                    if (c->chgs[r].exceeds && c->chgs[r].reportable)
                        p.exceeds = 1;
                }
        }
        acc_point(&p, &a);
        if (strstr(p.classes, "not-compared") && !a.n) {
            p.area_mm2 = p.area_halfmax_mm2 = NAN;
            snprintf(p.event, sizeof p.event, "not compared");
        } else if (!a.n) {
            snprintf(p.event, sizeof p.event, "not found");
        } else if (!tr->npoints) {
            snprintf(p.event, sizeof p.event, "first found");
        } else if (prev_n && a.n > prev_n) {
            snprintf(p.event, sizeof p.event, "split: %zu into %zu", prev_n, a.n);
        } else if (prev_n && a.n < prev_n) {
            snprintf(p.event, sizeof p.event, "merged: %zu into %zu", prev_n, a.n);
        }
        if (a.n)
            prev_n = a.n;
        if (push_point(tr, &p))
            return pl__err(err, PL_ENOMEM, "tracks: out of memory");
    }
    /* a later era closes it */
    for (size_t i = 0; i < t->ninspections; i++) {
        const pl_track_inspection *in = &t->inspections[i];
        if (in->era && in->era == in->key && in->key != era && tr->npoints &&
            strcmp(in->date, t->inspections[tr->points[0].inspection].date) >= 0 &&
            i > tr->points[0].inspection) {
            tr->closed_by = in->key;
            break;
        }
    }
    /* the limits of the era's latest comparison */
    const cmp *last = NULL;
    for (size_t ci = 0; ci < b->ncmps; ci++)
        if (b->cmps[ci].era == era)
            last = &b->cmps[ci];
    pl_change_limits lim;
    int have = last && limits_of(&lim, t, last);
    return fit_track(t, tr, have ? &lim : NULL, err);
}

static int attach_dispositions(builder *b, pl_err *err)
{
    pl_site_tracks *t = b->t;
    for (size_t i = 0; i < t->ndispositions; i++) {
        pl_id ids[64];
        long n = pl_disposition_change_ids(t->dispositions[i].changes, ids, 64);
        for (long j = 0; j < n; j++)
            for (size_t ci = 0; ci < b->ncmps; ci++) {
                cmp *c = &b->cmps[ci];
                for (size_t k = 0; k < c->nchgs; k++) {
                    if (c->chgs[k].id != ids[j])
                        continue;
                    char num[24];
                    snprintf(num, sizeof num, "%ld", c->chgs[k].number);
                    for (size_t tk = 0; tk < t->ntracks; tk++) {
                        pl_track *tr = &t->tracks[tk];
                        int hit = 0;
                        for (size_t p = 0; p < tr->npoints && !hit; p++) {
                            if (tr->points[p].comparison_id != c->id ||
                                !tr->points[p].changes[0])
                                continue;
                            char tmp[PL_TEXT_SIZE];
                            snprintf(tmp, sizeof tmp, "%s", tr->points[p].changes);
                            for (char *s = strtok(tmp, ","); s && !hit; s = strtok(NULL, ","))
                                hit = strcmp(s, num) == 0;
                        }
                        if (!hit)
                            continue;
                        int dup = 0;
                        for (size_t q = 0; q < tr->ndispositions; q++)
                            dup |= tr->dispositions[q] == t->dispositions[i].id;
                        if (dup)
                            continue;
                        pl_id *v = realloc(tr->dispositions,
                                           (tr->ndispositions + 1) * sizeof *v);
                        if (!v)
                            return pl__err(err, PL_ENOMEM, "tracks: out of memory");
                        tr->dispositions = v;
                        v[tr->ndispositions++] = t->dispositions[i].id;
                    }
                }
            }
    }
    return PL_OK;
}

int pl_tracks_load(pl_site_tracks **out, pl_store *store, const char *serial, const char *code,
                   const pl_track_options *opts, pl_err *err)
{
    assert(out && store);
    *out = NULL;
    pl_track_options dflt = PL_TRACK_OPTIONS_INIT;
    const pl_track_options *o = opts ? opts : &dflt;
    if (o->version != PL_TRACK_OPTIONS_VERSION)
        return pl__err(err, PL_EINVAL, "track options: version %u, expected %u", o->version,
                       PL_TRACK_OPTIONS_VERSION);
    pl_history *h = NULL;
    int rc = pl_history_load(&h, store, serial, code, err);
    if (rc)
        return rc;
    builder b;
    memset(&b, 0, sizeof b);
    pl_site_tracks *t = calloc(1, sizeof *t);
    b.t = t;
    if (!t || (h->ninspections &&
               !(t->inspections = calloc(h->ninspections, sizeof *t->inspections)))) {
        rc = pl__err(err, PL_ENOMEM, "tracks: out of memory");
        goto fail;
    }
    t->site = h->site;
    t->ninspections = h->ninspections;
    t->repeatability_area_mm2 = NAN;
    rc = gather(&b, store, h, o, err);
    if (!rc)
        rc = link_nodes(&b, err);
    if (!rc)
        rc = pl_store_list_dispositions(store, t->site.airframe_serial, t->site.code, 0,
                                        disp_cb, t, err);
    if (rc)
        goto fail;
    for (size_t ci = 0; ci < b.ncmps; ci++)
        if (b.cmps[ci].nchgs) {
            snprintf(t->sizing, sizeof t->sizing, "%s",
                     b.cmps[ci].halfmax ? "half-maximum" : "threshold");
            pl_change_limits lim;
            (void)limits_of(&lim, t, &b.cmps[ci]);
        }
    if (!t->sizing[0])
        snprintf(t->sizing, sizeof t->sizing, "threshold");
    /* one track per component (its root) */
    for (size_t node = 0; node < b.nnodes; node++) {
        if (uf_find(b.parent, node) != node)
            continue;
        pl_track *v = realloc(t->tracks, (t->ntracks + 1) * sizeof *v);
        if (!v) {
            rc = pl__err(err, PL_ENOMEM, "tracks: out of memory");
            goto fail;
        }
        t->tracks = v;
        rc = build_track(&b, node, &v[t->ntracks], err);
        t->ntracks++;
        if (rc)
            goto fail;
    }
    if (t->ntracks)
        qsort(t->tracks, t->ntracks, sizeof *t->tracks, track_order);
    for (size_t i = 0; i < t->ntracks; i++)
        t->tracks[i].number = (unsigned)(i + 1);
    rc = attach_dispositions(&b, err);
    if (rc)
        goto fail;
    free_cmps(b.cmps, b.ncmps);
    free(b.parent);
    free(b.node_cmp);
    free(b.node_ind);
    pl_history_free(h);
    *out = t;
    return PL_OK;
fail:
    free_cmps(b.cmps, b.ncmps);
    free(b.parent);
    free(b.node_cmp);
    free(b.node_ind);
    pl_history_free(h);
    pl_site_tracks_free(t);
    return rc;
}

/* ---- outputs --------------------------------------------------------------- */

const char *pl_track_assumptions(void)
{
    return "Growth model: the area grows linearly with cycles (hours, time) between "
           "inspections; the fit weights each area by its stated repeatability and the "
           "interval is about 95 % (k = 2). A forecast supports, and does not replace, the "
           "engineer's judgement and the design holder's data.";
}

/* v with `prec` decimals ('f') or significant digits ('g'); "-" unknown */
static const char *fmt_num(char *buf, size_t size, double v, char style, int prec)
{
    if (!isfinite(v))
        snprintf(buf, size, "-");
    else if (style == 'g')
        snprintf(buf, size, "%.*g", prec, v);
    else
        snprintf(buf, size, "%.*f", prec, v);
    return buf;
}

static void fit_text(pl_strbuf *s, const char *what, const char *unit, const pl_growth_fit *f,
                     const pl_track *tr)
{
    char a[32], b[32], c[32], d[32];
    pl_strbuf__printf(s, "    growth by %-7s %s", what, pl_growth_state_name(f->state));
    if (f->state != PL_GROWTH_TOO_FEW)
        pl_strbuf__printf(s, ": %s +- %s mm2 per %s (%zu points)",
                          fmt_num(a, sizeof a, f->slope * (strcmp(unit, "cycle") ? 1 : 1000), 'g', 4),
                          fmt_num(b, sizeof b,
                                  f->u_slope * (strcmp(unit, "cycle") ? 1 : 1000), 'g', 2),
                          strcmp(unit, "cycle") ? unit : "1000 cycles", f->n);
    if (isfinite(f->crossing)) {
        if (f->state == PL_GROWTH_REACHED)
            pl_strbuf__printf(s, "; the line crossed %.1f mm2 at %s %ss", tr->limit_area_mm2,
                              fmt_num(a, sizeof a, f->crossing, 'f', 0), unit);
        else if (strcmp(unit, "day") == 0)
            pl_strbuf__printf(s, "; reaches %.1f mm2 about %s (%s to %s)", tr->limit_area_mm2,
                              tr->forecast_date[0] ? tr->forecast_date : "-",
                              tr->forecast_date_low[0] ? tr->forecast_date_low : "unbounded",
                              tr->forecast_date_high[0] ? tr->forecast_date_high
                                                        : "unbounded");
        else
            pl_strbuf__printf(s, "; reaches %.1f mm2 at %s %ss (%s to %s)",
                              tr->limit_area_mm2, fmt_num(a, sizeof a, f->crossing, 'f', 0),
                              unit, fmt_num(c, sizeof c, f->crossing_low, 'f', 0),
                              fmt_num(d, sizeof d, f->crossing_high, 'f', 0));
    }
    pl_strbuf__append(s, "\n");
}

int pl_site_tracks_text(char **out, const pl_site_tracks *t, pl_err *err)
{
    pl_strbuf s = PL_STRBUF_INIT;
    pl_strbuf__printf(&s, "tracks of %s site %s", t->site.airframe_serial, t->site.code);
    if (t->quantity[0])
        pl_strbuf__printf(&s, ", %s%s%s%s (%s sizing)", t->quantity, t->label[0] ? " \"" : "",
                          t->label, t->label[0] ? "\"" : "", t->sizing);
    pl_strbuf__append(&s, "\n");
    if (t->criteria_name[0])
        pl_strbuf__printf(&s, "criteria %s rev %s, rule %s, area repeatability %.3g mm2%s\n",
                          t->criteria_name, t->criteria_revision, t->criteria_rule,
                          t->repeatability_area_mm2,
                          t->example_values ? " -- " PL_CRITERIA_EXAMPLE_MARKING : "");
    pl_strbuf__append(&s, "inspections:\n");
    for (size_t i = 0; i < t->ninspections; i++) {
        const pl_track_inspection *in = &t->inspections[i];
        char h[32];
        pl_strbuf__printf(&s, "  %s %-11s %9s h %6lld cycles  %s%s\n", in->date, in->kind,
                          fmt_num(h, sizeof h, in->hours, 'f', 1), (long long)in->cycles,
                          in->comparison_status, in->simulated == 1 ? "  (simulated)" : "");
    }
    size_t shown = 0, hidden = 0;
    for (size_t k = 0; k < t->ntracks; k++) {
        const pl_track *tr = &t->tracks[k];
        if (!tr->reportable) {
            hidden++;
            continue;
        }
        shown++;
        pl_strbuf__printf(&s, "track %u%s%s\n", tr->number,
                          tr->at_baseline ? " (present at the baseline)" : " (found later)",
                          tr->closed_by ? ", closed by the post-repair baseline" : "");
        pl_strbuf__append(&s, "    date        cycles     hours   area mm2  length mm  "
                              "contrast  depth mm  changes\n");
        for (size_t p = 0; p < tr->npoints; p++) {
            const pl_track_point *pt = &tr->points[p];
            const pl_track_inspection *in = &t->inspections[pt->inspection];
            char h[32], a[32], l[32], c[32], d[32];
            pl_strbuf__printf(&s, "    %s %7lld %9s %10s %10s %9s %9s  %s%s%s%s%s\n", in->date,
                              (long long)in->cycles, fmt_num(h, sizeof h, in->hours, 'f', 1),
                              fmt_num(a, sizeof a, pt->area_mm2, 'f', 1),
                              fmt_num(l, sizeof l, pt->length_mm, 'f', 1),
                              fmt_num(c, sizeof c, pt->contrast, 'g', 4),
                              fmt_num(d, sizeof d, pt->depth_mm, 'f', 2),
                              pt->changes[0] ? pt->changes : "", pt->changes[0] ? " " : "",
                              pt->classes, pt->event[0] ? "; " : "", pt->event);
        }
        pl_strbuf__printf(&s, "    limit: %s\n", tr->limit_basis);
        fit_text(&s, "cycles", "cycle", &tr->by_cycles, tr);
        fit_text(&s, "hours", "hour", &tr->by_hours, tr);
        fit_text(&s, "time", "day", &tr->by_days, tr);
        for (size_t q = 0; q < tr->ndispositions; q++)
            for (size_t i = 0; i < t->ndispositions; i++) {
                const pl_disposition *d = &t->dispositions[i];
                if (d->id != tr->dispositions[q])
                    continue;
                pl_strbuf__printf(&s, "    disposition %lld: %s by %s on %s%s\n",
                                  (long long)d->id, d->decision, d->handle, d->signed_on,
                                  d->superseded ? " (superseded)" : "");
            }
    }
    if (!shown)
        pl_strbuf__append(&s, "no reportable tracks\n");
    if (hidden)
        pl_strbuf__printf(&s, "%zu more below the minimum reportable area (in --json and "
                              "--csv)\n", hidden);
    pl_strbuf__printf(&s, "%s\n%s\n", pl_track_assumptions(), pl_caution());
    *out = pl_strbuf__detach(&s);
    if (!*out)
        return pl__err(err, PL_ENOMEM, "tracks: out of memory");
    return PL_OK;
}

static void add_num(cJSON *o, const char *k, double v)
{
    if (isfinite(v))
        cJSON_AddNumberToObject(o, k, v);
    else
        cJSON_AddNullToObject(o, k);
}

static void add_str_or_null(cJSON *o, const char *k, const char *v)
{
    if (v && *v)
        cJSON_AddStringToObject(o, k, v);
    else
        cJSON_AddNullToObject(o, k);
}

static cJSON *fit_json(const pl_growth_fit *f)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddStringToObject(o, "state", pl_growth_state_name(f->state));
    cJSON_AddNumberToObject(o, "n", (double)f->n);
    add_num(o, "intercept", f->intercept);
    add_num(o, "slope", f->slope);
    add_num(o, "u_slope", f->u_slope);
    add_num(o, "u_slope_repeatability", f->u_slope_repeatability);
    add_num(o, "u_slope_scatter", f->u_slope_scatter);
    add_num(o, "chi2", f->chi2);
    add_num(o, "limit", f->limit);
    add_num(o, "crossing", f->crossing);
    add_num(o, "crossing_low", f->crossing_low);
    add_num(o, "crossing_high", f->crossing_high);
    return o;
}

int pl_site_tracks_json(char **out, const pl_site_tracks *t, pl_err *err)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddStringToObject(o, "caution", pl_caution());
    cJSON_AddStringToObject(o, "assumptions", pl_track_assumptions());
    cJSON_AddStringToObject(o, "airframe", t->site.airframe_serial);
    cJSON_AddStringToObject(o, "site", t->site.code);
    add_str_or_null(o, "quantity", t->quantity);
    cJSON_AddStringToObject(o, "label", t->label);
    cJSON_AddStringToObject(o, "unit", t->unit);
    cJSON_AddStringToObject(o, "sizing", t->sizing);
    cJSON *cr = cJSON_AddObjectToObject(o, "criteria");
    add_str_or_null(cr, "name", t->criteria_name);
    add_str_or_null(cr, "revision", t->criteria_revision);
    add_str_or_null(cr, "rule", t->criteria_rule);
    cJSON_AddBoolToObject(cr, "example_values", t->example_values);
    if (t->example_values)
        cJSON_AddStringToObject(cr, "marking", PL_CRITERIA_EXAMPLE_MARKING);
    else
        cJSON_AddNullToObject(cr, "marking");
    add_num(cr, "repeatability_area_mm2", t->repeatability_area_mm2);
    cJSON *ins = cJSON_AddArrayToObject(o, "inspections");
    for (size_t i = 0; i < t->ninspections; i++) {
        const pl_track_inspection *in = &t->inspections[i];
        cJSON *e = cJSON_CreateObject();
        cJSON_AddNumberToObject(e, "inspection", (double)in->key);
        cJSON_AddStringToObject(e, "date", in->date);
        cJSON_AddStringToObject(e, "kind", in->kind);
        cJSON_AddStringToObject(e, "task", in->task_ref);
        add_num(e, "hours", in->hours);
        add_num(e, "cycles", in->cycles >= 0 ? (double)in->cycles : NAN);
        cJSON_AddBoolToObject(e, "simulated", in->simulated == 1);
        if (in->era)
            cJSON_AddNumberToObject(e, "baseline", (double)in->era);
        else
            cJSON_AddNullToObject(e, "baseline");
        if (in->comparison_id)
            cJSON_AddNumberToObject(e, "comparison", (double)in->comparison_id);
        else
            cJSON_AddNullToObject(e, "comparison");
        cJSON_AddStringToObject(e, "comparison_status", in->comparison_status);
        cJSON_AddItemToArray(ins, e);
    }
    cJSON *trs = cJSON_AddArrayToObject(o, "tracks");
    for (size_t k = 0; k < t->ntracks; k++) {
        const pl_track *tr = &t->tracks[k];
        cJSON *e = cJSON_CreateObject();
        cJSON_AddNumberToObject(e, "number", tr->number);
        cJSON_AddNumberToObject(e, "baseline", (double)tr->era);
        if (tr->closed_by)
            cJSON_AddNumberToObject(e, "closed_by", (double)tr->closed_by);
        else
            cJSON_AddNullToObject(e, "closed_by");
        cJSON_AddBoolToObject(e, "reportable", tr->reportable);
        cJSON_AddBoolToObject(e, "at_baseline", tr->at_baseline);
        add_num(e, "reference_area_mm2", tr->reference_area_mm2);
        add_num(e, "limit_area_mm2", tr->limit_area_mm2);
        cJSON_AddStringToObject(e, "limit_basis", tr->limit_basis);
        cJSON *pts = cJSON_AddArrayToObject(e, "points");
        for (size_t p = 0; p < tr->npoints; p++) {
            const pl_track_point *pt = &tr->points[p];
            const pl_track_inspection *in = &t->inspections[pt->inspection];
            cJSON *q = cJSON_CreateObject();
            cJSON_AddNumberToObject(q, "inspection", (double)in->key);
            cJSON_AddStringToObject(q, "date", in->date);
            add_num(q, "hours", in->hours);
            add_num(q, "cycles", in->cycles >= 0 ? (double)in->cycles : NAN);
            cJSON_AddNumberToObject(q, "comparison", (double)pt->comparison_id);
            cJSON_AddStringToObject(q, "changes", pt->changes);
            cJSON_AddStringToObject(q, "classes", pt->classes);
            cJSON_AddBoolToObject(q, "seen", pt->seen);
            cJSON_AddBoolToObject(q, "exceeds", pt->exceeds);
            cJSON_AddNumberToObject(q, "indications", (double)pt->nindications);
            add_num(q, "area_mm2", pt->area_mm2);
            add_num(q, "area_halfmax_mm2", pt->area_halfmax_mm2);
            add_num(q, "length_mm", pt->length_mm);
            add_num(q, "contrast", pt->contrast);
            add_num(q, "depth_mm", pt->depth_mm);
            add_num(q, "part_x", pt->part_x);
            add_num(q, "part_y", pt->part_y);
            add_num(q, "part_z", pt->part_z);
            add_num(q, "centroid_col", pt->centroid_col);
            add_num(q, "centroid_row", pt->centroid_row);
            cJSON_AddStringToObject(q, "event", pt->event);
            cJSON_AddItemToArray(pts, q);
        }
        cJSON *g = cJSON_AddObjectToObject(e, "growth");
        cJSON_AddItemToObject(g, "cycles", fit_json(&tr->by_cycles));
        cJSON_AddItemToObject(g, "hours", fit_json(&tr->by_hours));
        cJSON_AddItemToObject(g, "days", fit_json(&tr->by_days));
        add_str_or_null(e, "forecast_date", tr->forecast_date);
        add_str_or_null(e, "forecast_date_low", tr->forecast_date_low);
        add_str_or_null(e, "forecast_date_high", tr->forecast_date_high);
        cJSON *ds = cJSON_AddArrayToObject(e, "dispositions");
        for (size_t q = 0; q < tr->ndispositions; q++)
            cJSON_AddItemToArray(ds, cJSON_CreateNumber((double)tr->dispositions[q]));
        cJSON_AddItemToArray(trs, e);
    }
    *out = cJSON_Print(o);
    cJSON_Delete(o);
    if (!*out)
        return pl__err(err, PL_ENOMEM, "tracks: out of memory");
    return PL_OK;
}

/* ---- CSV --------------------------------------------------------------------- */

static void csv_fit(pl_strbuf *s, const pl_growth_fit *f, int last)
{
    pl__csv_field(s, pl_growth_state_name(f->state), 0);
    pl__csv_number(s, (double)f->n, 0);
    pl__csv_number(s, f->slope, 0);
    pl__csv_number(s, f->u_slope, 0);
    pl__csv_number(s, f->crossing, 0);
    pl__csv_number(s, f->crossing_low, 0);
    pl__csv_number(s, f->crossing_high, last);
}

int pl_site_tracks_csv(char **out, const pl_site_tracks *t, pl_track_table table, pl_err *err)
{
    pl_strbuf s = PL_STRBUF_INIT;
    if (table == PL_TRACK_TABLE_POINTS) {
        static const char *cols[] = { "airframe", "site", "track", "reportable", "date", "kind",
                                      "hours", "cycles", "inspection", "comparison", "changes",
                                      "classes", "exceeds", "indications", "area_mm2",
                                      "area_halfmax_mm2", "length_mm", "contrast", "depth_mm",
                                      "part_x", "part_y", "part_z", "event" };
        size_t nc = sizeof cols / sizeof *cols;
        for (size_t i = 0; i < nc; i++)
            pl__csv_field(&s, cols[i], i + 1 == nc);
        for (size_t k = 0; k < t->ntracks; k++) {
            const pl_track *tr = &t->tracks[k];
            for (size_t p = 0; p < tr->npoints; p++) {
                const pl_track_point *pt = &tr->points[p];
                const pl_track_inspection *in = &t->inspections[pt->inspection];
                pl__csv_field(&s, t->site.airframe_serial, 0);
                pl__csv_field(&s, t->site.code, 0);
                pl__csv_number(&s, tr->number, 0);
                pl__csv_number(&s, tr->reportable, 0);
                pl__csv_field(&s, in->date, 0);
                pl__csv_field(&s, in->kind, 0);
                pl__csv_number(&s, in->hours, 0);
                pl__csv_number(&s, in->cycles >= 0 ? (double)in->cycles : NAN, 0);
                pl__csv_number(&s, (double)in->key, 0);
                pl__csv_number(&s, (double)pt->comparison_id, 0);
                pl__csv_field(&s, pt->changes, 0);
                pl__csv_field(&s, pt->classes, 0);
                pl__csv_number(&s, pt->exceeds, 0);
                pl__csv_number(&s, (double)pt->nindications, 0);
                pl__csv_number(&s, pt->area_mm2, 0);
                pl__csv_number(&s, pt->area_halfmax_mm2, 0);
                pl__csv_number(&s, pt->length_mm, 0);
                pl__csv_number(&s, pt->contrast, 0);
                pl__csv_number(&s, pt->depth_mm, 0);
                pl__csv_number(&s, pt->part_x, 0);
                pl__csv_number(&s, pt->part_y, 0);
                pl__csv_number(&s, pt->part_z, 0);
                pl__csv_field(&s, pt->event, 1);
            }
        }
    } else if (table == PL_TRACK_TABLE_GROWTH) {
        static const char *cols[] = {
            "airframe", "site", "track", "reportable", "at_baseline", "closed_by",
            "reference_area_mm2", "limit_area_mm2", "cycles_state", "cycles_points",
            "cycles_slope_mm2", "cycles_u_slope_mm2", "cycles_crossing", "cycles_crossing_low",
            "cycles_crossing_high", "hours_state", "hours_points", "hours_slope_mm2",
            "hours_u_slope_mm2", "hours_crossing", "hours_crossing_low", "hours_crossing_high",
            "days_state", "days_points", "days_slope_mm2", "days_u_slope_mm2", "days_crossing",
            "days_crossing_low", "days_crossing_high", "forecast_date", "forecast_date_low",
            "forecast_date_high", "criteria", "criteria_revision", "example_values" };
        size_t nc = sizeof cols / sizeof *cols;
        for (size_t i = 0; i < nc; i++)
            pl__csv_field(&s, cols[i], i + 1 == nc);
        for (size_t k = 0; k < t->ntracks; k++) {
            const pl_track *tr = &t->tracks[k];
            pl__csv_field(&s, t->site.airframe_serial, 0);
            pl__csv_field(&s, t->site.code, 0);
            pl__csv_number(&s, tr->number, 0);
            pl__csv_number(&s, tr->reportable, 0);
            pl__csv_number(&s, tr->at_baseline, 0);
            pl__csv_number(&s, tr->closed_by ? (double)tr->closed_by : NAN, 0);
            pl__csv_number(&s, tr->reference_area_mm2, 0);
            pl__csv_number(&s, tr->limit_area_mm2, 0);
            csv_fit(&s, &tr->by_cycles, 0);
            csv_fit(&s, &tr->by_hours, 0);
            csv_fit(&s, &tr->by_days, 0);
            pl__csv_field(&s, tr->forecast_date, 0);
            pl__csv_field(&s, tr->forecast_date_low, 0);
            pl__csv_field(&s, tr->forecast_date_high, 0);
            pl__csv_field(&s, t->criteria_name, 0);
            pl__csv_field(&s, t->criteria_revision, 0);
            pl__csv_number(&s, t->example_values, 1);
        }
    } else {
        return pl__err(err, PL_EINVAL, "tracks: table %d is not one of points, growth",
                       (int)table);
    }
    *out = pl_strbuf__detach(&s);
    if (!*out)
        return pl__err(err, PL_ENOMEM, "tracks: out of memory");
    return PL_OK;
}
