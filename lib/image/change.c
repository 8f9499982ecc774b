/*
 * change.c - the comparison of one site (plyledger/change.h): coverage,
 * matching of the two detections into groups, classification against the
 * limits, and the changed regions of the difference map.
 */
#include "plyledger/change.h"
#include "image/detect_int.h"
#include "common/common_int.h"

#include <assert.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

/* ---- names and limits ------------------------------------------------------- */

PL_EXPORT const char *pl_change_kind_name(pl_change_kind kind)
{
    switch (kind) {
    case PL_CHANGE_NEW:
        return "new";
    case PL_CHANGE_GROWN:
        return "grown";
    case PL_CHANGE_STABLE:
        return "stable";
    case PL_CHANGE_VANISHED:
        return "vanished";
    case PL_CHANGE_NOT_COMPARED:
        return "not-compared";
    case PL_CHANGE_REGION:
        return "changed-region";
    }
    return NULL;
}

PL_EXPORT const char *pl_limits_kind_name(pl_limits_kind kind)
{
    switch (kind) {
    case PL_LIMITS_GROWTH:
        return "growth";
    case PL_LIMITS_NO_GROWTH:
        return "no-growth";
    }
    return NULL;
}

/* A value that may be NaN ("not set") but is otherwise finite and >= 0. */
static int bad_optional(double v)
{
    return !isnan(v) && !(isfinite(v) && v >= 0);
}

PL_EXPORT int pl_change_limits_check(const pl_change_limits *l, pl_err *err)
{
    assert(l);
    if (l->version != PL_CHANGE_LIMITS_VERSION)
        return pl__err(err, PL_EINVAL, "change limits: unknown version %u", l->version);
    if (!pl_limits_kind_name(l->kind))
        return pl__err(err, PL_EINVAL, "change limits: kind: unknown value %d", (int)l->kind);
    if (!pl_sizing_name(l->sizing))
        return pl__err(err, PL_EINVAL, "change limits: sizing: unknown rule %d", (int)l->sizing);
    if (l->vanished != PL_VANISHED_FINDING && l->vanished != PL_VANISHED_NOTE)
        return pl__err(err, PL_EINVAL, "change limits: vanished: unknown action %d",
                       (int)l->vanished);
    if (!(isfinite(l->area_repeatability_mm2) && l->area_repeatability_mm2 >= 0))
        return pl__err(err, PL_EINVAL,
                       "change limits: area_repeatability_mm2: expected a number >= 0");
    if (!(isfinite(l->contrast_repeatability) && l->contrast_repeatability >= 0))
        return pl__err(err, PL_EINVAL,
                       "change limits: contrast_repeatability: expected a number >= 0");
    static const struct {
        const char *name;
        size_t off;
    } opt[] = {
        {"min_reportable_mm2", offsetof(pl_change_limits, min_reportable_mm2)},
        {"new_reportable_mm2", offsetof(pl_change_limits, new_reportable_mm2)},
        {"area_growth_mm2", offsetof(pl_change_limits, area_growth_mm2)},
        {"area_growth_percent", offsetof(pl_change_limits, area_growth_percent)},
        {"contrast_growth", offsetof(pl_change_limits, contrast_growth)},
    };
    for (size_t i = 0; i < sizeof opt / sizeof opt[0]; i++) {
        double v;
        memcpy(&v, (const char *)l + opt[i].off, sizeof v);
        if (bad_optional(v))
            return pl__err(err, PL_EINVAL, "change limits: %s: expected a number >= 0 or none",
                           opt[i].name);
    }
    return PL_OK;
}

/* ---- comparison life ---------------------------------------------------------- */

PL_EXPORT void pl_comparison_free(pl_comparison *cmp)
{
    if (!cmp)
        return;
    for (size_t k = 0; k < cmp->count; k++) {
        free(cmp->changes[k].baseline_labels);
        free(cmp->changes[k].current_labels);
    }
    free(cmp->changes);
    free(cmp->difference);
    free(cmp->region_labels);
    free(cmp);
}

/* ---- union-find over the indications of both maps ----------------------------- */

static uint32_t uf_find(uint32_t *parent, uint32_t x)
{
    while (parent[x] != x) {
        parent[x] = parent[parent[x]];
        x = parent[x];
    }
    return x;
}

/* Join, the smaller index the root, so that roots do not depend on order. */
static void uf_join(uint32_t *parent, uint32_t a, uint32_t b)
{
    a = uf_find(parent, a);
    b = uf_find(parent, b);
    if (a < b)
        parent[b] = a;
    else if (b < a)
        parent[a] = b;
}

static int cmp_u64(const void *a, const void *b)
{
    uint64_t x = *(const uint64_t *)a, y = *(const uint64_t *)b;
    return x < y ? -1 : x > y;
}

/* ---- the work ------------------------------------------------------------------ */

typedef struct work {
    const pl_change_input *in;
    const pl_detection *db, *dc;
    pl_change_limits lim;
    uint32_t w, h;
    size_t np;
    uint32_t nb, nc;          /* indications of each map */
    uint8_t *cov;             /* 1: compared */
    uint8_t *not_judged;      /* baseline label k: half or more not compared */
    uint8_t *overlap_edge;    /* node: matched by overlap */
    uint32_t *parent;         /* nb + nc nodes: baseline k -> k - 1, current k -> nb + k - 1 */
    long *group_of_node;      /* the change of each node */
} work;

static void work_free(work *wk)
{
    free(wk->cov);
    free(wk->not_judged);
    free(wk->overlap_edge);
    free(wk->parent);
    free(wk->group_of_node);
}

/* The checks of the inputs, each fault named. */
static int check_input(const pl_change_input *in, pl_err *err)
{
    if (in->version != PL_CHANGE_INPUT_VERSION)
        return pl__err(err, PL_EINVAL, "change input: unknown version %u", in->version);
    if (!in->baseline || !in->current || !in->baseline_detection || !in->current_detection)
        return pl__err(err, PL_EINVAL,
                       "change input: the baseline and current maps and detections are needed");
    const pl_map *b = in->baseline, *c = in->current;
    const pl_detection *db = in->baseline_detection, *dc = in->current_detection;
    if (in->baseline_channel >= b->nchannels)
        return pl__err(err, PL_EINVAL, "change input: baseline channel %u out of range (%u)",
                       in->baseline_channel, b->nchannels);
    if (in->current_channel >= c->nchannels)
        return pl__err(err, PL_EINVAL, "change input: current channel %u out of range (%u)",
                       in->current_channel, c->nchannels);
    if (b->width != c->width || b->height != c->height)
        return pl__err(err, PL_EINVAL,
                       "change input: current map %ux%u is not on the baseline grid %ux%u",
                       c->width, c->height, b->width, b->height);
    if (!(isfinite(b->pitch_u) && b->pitch_u > 0 && isfinite(b->pitch_v) && b->pitch_v > 0))
        return pl__err(err, PL_EINVAL, "change input: the baseline map's pitch is not known");
    if (b->pitch_u != c->pitch_u || b->pitch_v != c->pitch_v)
        return pl__err(err, PL_EINVAL,
                       "change input: current map pitch %g x %g mm differs from the "
                       "baseline's %g x %g mm",
                       c->pitch_u, c->pitch_v, b->pitch_u, b->pitch_v);
    const pl_channel *cb = &b->channels[in->baseline_channel];
    const pl_channel *cc = &c->channels[in->current_channel];
    if (strcmp(cb->quantity, cc->quantity) || strcmp(cb->unit, cc->unit))
        return pl__err(err, PL_EINVAL,
                       "change input: baseline channel is %s (%s), current channel %s (%s)",
                       cb->quantity, cb->unit, cc->quantity, cc->unit);
    if (db->width != b->width || db->height != b->height ||
        db->channel != in->baseline_channel || strcmp(db->quantity, cb->quantity))
        return pl__err(err, PL_EINVAL,
                       "change input: the baseline detection is not of baseline channel %u",
                       in->baseline_channel);
    if (dc->width != c->width || dc->height != c->height ||
        dc->channel != in->current_channel || strcmp(dc->quantity, cc->quantity))
        return pl__err(err, PL_EINVAL,
                       "change input: the current detection is not of current channel %u "
                       "on the baseline grid",
                       in->current_channel);
    if (db->polarity != dc->polarity)
        return pl__err(err, PL_EINVAL,
                       "change input: the detections' polarities differ (%+d, %+d)",
                       db->polarity, dc->polarity);
    if (!(isfinite(in->registration_uncertainty_px) && in->registration_uncertainty_px >= 0))
        return pl__err(err, PL_EINVAL,
                       "change input: registration_uncertainty_px: expected a number >= 0");
    return PL_OK;
}

/* Coverage, the not-compared area, and the baseline indications that
 * cannot be judged. */
static int coverage(work *wk, pl_comparison *cmp)
{
    const float *vb = pl_map_channel(wk->in->baseline, wk->in->baseline_channel);
    const float *vc = pl_map_channel(wk->in->current, wk->in->current_channel);
    const uint8_t *mask = wk->in->covered;
    wk->cov = malloc(wk->np);
    uint64_t *total = calloc((size_t)wk->nb + 1, sizeof *total);
    uint64_t *outside = calloc((size_t)wk->nb + 1, sizeof *outside);
    wk->not_judged = calloc((size_t)wk->nb + 1, 1);
    if (!wk->cov || !total || !outside || !wk->not_judged) {
        free(total);
        free(outside);
        return PL_ENOMEM;
    }
    const uint32_t *lb = wk->db->labels;
    for (size_t i = 0; i < wk->np; i++) {
        int data = isfinite(vb[i]);
        int c = data && isfinite(vc[i]) && (!mask || mask[i]);
        wk->cov[i] = (uint8_t)c;
        cmp->pixels_compared += (uint64_t)c;
        cmp->pixels_not_compared += (uint64_t)(data && !c);
        uint32_t k = lb[i];
        if (k && k <= wk->nb) {
            total[k]++;
            outside[k] += (uint64_t)!c;
        }
    }
    for (uint32_t k = 1; k <= wk->nb; k++)
        wk->not_judged[k] = (uint8_t)(total[k] > 0 && 2 * outside[k] >= total[k]);
    free(total);
    free(outside);
    double px = cmp->pitch_u * cmp->pitch_v;
    cmp->not_compared_mm2 = (double)cmp->pixels_not_compared * px;
    uint64_t with_data = cmp->pixels_compared + cmp->pixels_not_compared;
    cmp->not_compared_fraction =
        with_data ? (double)cmp->pixels_not_compared / (double)with_data : NAN;
    return PL_OK;
}

/* Edges by overlap: every distinct (baseline, current) label pair sharing
 * a pixel. */
static int match_overlap(work *wk)
{
    const uint32_t *lb = wk->db->labels, *lc = wk->dc->labels;
    size_t n = 0, cap = 64;
    uint64_t *pairs = malloc(cap * sizeof *pairs), last = UINT64_MAX;
    if (!pairs)
        return PL_ENOMEM;
    for (size_t i = 0; i < wk->np; i++) {
        uint32_t a = lb[i], b = lc[i];
        if (!a || !b || a > wk->nb || b > wk->nc)
            continue;
        uint64_t key = (uint64_t)a << 32 | b;
        if (key == last)
            continue;
        last = key;
        if (n == cap) {
            uint64_t *p = realloc(pairs, 2 * cap * sizeof *p);
            if (!p) {
                free(pairs);
                return PL_ENOMEM;
            }
            pairs = p;
            cap *= 2;
        }
        pairs[n++] = key;
    }
    qsort(pairs, n, sizeof *pairs, cmp_u64);
    for (size_t k = 0; k < n; k++) {
        if (k && pairs[k] == pairs[k - 1])
            continue;
        uint32_t a = (uint32_t)(pairs[k] >> 32), b = (uint32_t)pairs[k];
        uint32_t na = a - 1, nbn = wk->nb + b - 1;
        uf_join(wk->parent, na, nbn);
        wk->overlap_edge[na] = wk->overlap_edge[nbn] = 1;
    }
    free(pairs);
    return PL_OK;
}

static double dist2(const pl_indication *a, const pl_indication *b)
{
    double dx = a->centroid_col - b->centroid_col, dy = a->centroid_row - b->centroid_row;
    return dx * dx + dy * dy;
}

/* Edges by distance: an indication that overlaps nothing and the nearest
 * such indication of the other map within the tolerance, when each is the
 * other's nearest. Quadratic in the unmatched indications, which are few. */
static void match_distance(work *wk, double tol)
{
    double tol2 = tol * tol;
    for (uint32_t a = 1; a <= wk->nb; a++) {
        if (wk->overlap_edge[a - 1])
            continue;
        const pl_indication *ia = &wk->db->indications[a - 1];
        uint32_t best = 0;
        double bd = tol2;
        for (uint32_t b = 1; b <= wk->nc; b++) {
            if (wk->overlap_edge[wk->nb + b - 1])
                continue;
            double d = dist2(ia, &wk->dc->indications[b - 1]);
            if (d <= bd) {
                if (d < bd || !best)
                    best = b;
                bd = d;
            }
        }
        if (!best)
            continue;
        /* mutual: no other unmatched baseline indication nearer to best */
        const pl_indication *ib = &wk->dc->indications[best - 1];
        int mutual = 1;
        for (uint32_t o = 1; o <= wk->nb && mutual; o++)
            if (o != a && !wk->overlap_edge[o - 1] &&
                dist2(&wk->db->indications[o - 1], ib) < bd)
                mutual = 0;
        if (mutual)
            uf_join(wk->parent, a - 1, wk->nb + best - 1);
    }
}

/* Fill a group's sums and class. */
static void fill_sizes(pl_change *ch, const work *wk)
{
    double wb = 0, wc = 0, cbx = 0, cby = 0, ccx = 0, ccy = 0;
    int pol = wk->db->polarity;
    ch->contrast_baseline = ch->contrast_current = NAN;
    for (int r = 0; r < PL_SIZING_COUNT; r++)
        ch->area_baseline_mm2[r] = ch->area_current_mm2[r] = 0;
    for (size_t k = 0; k < ch->nbaseline; k++) {
        const pl_indication *ind = &wk->db->indications[ch->baseline_labels[k] - 1];
        for (int r = 0; r < PL_SIZING_COUNT; r++)
            ch->area_baseline_mm2[r] += ind->size[r].area_mm2;
        double s = pol * ind->peak_contrast;
        if (isnan(ch->contrast_baseline) || s > ch->contrast_baseline)
            ch->contrast_baseline = s;
        double n = (double)ind->size[PL_SIZING_THRESHOLD].pixels;
        wb += n;
        cbx += n * ind->centroid_col;
        cby += n * ind->centroid_row;
    }
    for (size_t k = 0; k < ch->ncurrent; k++) {
        const pl_indication *ind = &wk->dc->indications[ch->current_labels[k] - 1];
        for (int r = 0; r < PL_SIZING_COUNT; r++)
            ch->area_current_mm2[r] += ind->size[r].area_mm2;
        double s = pol * ind->peak_contrast;
        if (isnan(ch->contrast_current) || s > ch->contrast_current)
            ch->contrast_current = s;
        double n = (double)ind->size[PL_SIZING_THRESHOLD].pixels;
        wc += n;
        ccx += n * ind->centroid_col;
        ccy += n * ind->centroid_row;
    }
    for (int r = 0; r < PL_SIZING_COUNT; r++) {
        ch->area_delta_mm2[r] = ch->area_current_mm2[r] - ch->area_baseline_mm2[r];
        ch->area_delta_percent[r] = ch->nbaseline && ch->area_baseline_mm2[r] > 0
                                        ? 100.0 * ch->area_delta_mm2[r] / ch->area_baseline_mm2[r]
                                        : NAN;
    }
    ch->contrast_delta = ch->nbaseline && ch->ncurrent
                             ? ch->contrast_current - ch->contrast_baseline
                             : NAN;
    if (wc > 0) {
        ch->centroid_col = ccx / wc;
        ch->centroid_row = ccy / wc;
    } else if (wb > 0) {
        ch->centroid_col = cbx / wb;
        ch->centroid_row = cby / wb;
    } else {
        ch->centroid_col = ch->centroid_row = NAN;
    }
    ch->distance_px = wb > 0 && wc > 0 ? hypot(ccx / wc - cbx / wb, ccy / wc - cby / wb) : NAN;
}

/* ---- an indication in one map only: looked for in the other ------------------ */

static int cmp_float(const void *a, const void *b)
{
    float x = *(const float *)a, y = *(const float *)b;
    return (x > y) - (x < y);
}

/* The level of the difference d around a group's pixels: the median of d
 * over the compared pixels within LOOK_RING px of the members' bounding
 * boxes that lie in no indication of either map (the change of the flash's
 * pattern or shading between the two acquisitions there); 0 with fewer
 * than LOOK_RING_MIN such pixels. */
#define LOOK_RING 4u
#define LOOK_RING_MIN 16u

typedef struct box {
    uint32_t c0, r0, c1, r1;
} box;

static box members_box(const pl_change *ch, const work *wk, int current)
{
    box bx = { UINT32_MAX, UINT32_MAX, 0, 0 };
    size_t n = current ? ch->ncurrent : ch->nbaseline;
    for (size_t k = 0; k < n; k++) {
        const pl_indication *ind = current ? &wk->dc->indications[ch->current_labels[k] - 1]
                                           : &wk->db->indications[ch->baseline_labels[k] - 1];
        if (ind->bbox_col0 < bx.c0)
            bx.c0 = ind->bbox_col0;
        if (ind->bbox_row0 < bx.r0)
            bx.r0 = ind->bbox_row0;
        if (ind->bbox_col1 > bx.c1)
            bx.c1 = ind->bbox_col1;
        if (ind->bbox_row1 > bx.r1)
            bx.r1 = ind->bbox_row1;
    }
    return bx;
}

static int ring_level(double *level, const work *wk, const float *d, const uint32_t *also,
                      box bx)
{
    uint32_t c0 = bx.c0 > LOOK_RING ? bx.c0 - LOOK_RING : 0;
    uint32_t r0 = bx.r0 > LOOK_RING ? bx.r0 - LOOK_RING : 0;
    uint32_t c1 = bx.c1 + LOOK_RING < wk->w ? bx.c1 + LOOK_RING : wk->w - 1;
    uint32_t r1 = bx.r1 + LOOK_RING < wk->h ? bx.r1 + LOOK_RING : wk->h - 1;
    size_t cap = (size_t)(c1 - c0 + 1) * (r1 - r0 + 1), n = 0;
    float *v = malloc(cap * sizeof *v);
    if (!v)
        return PL_ENOMEM;
    const uint32_t *lb = wk->db->labels, *lc = wk->dc->labels;
    for (uint32_t y = r0; y <= r1; y++)
        for (uint32_t x = c0; x <= c1; x++) {
            size_t i = (size_t)y * wk->w + x;
            if (wk->cov[i] && !lb[i] && !lc[i] && !(also && also[i]) && isfinite(d[i]))
                v[n++] = d[i];
        }
    *level = 0.0;
    if (n >= LOOK_RING_MIN) {
        qsort(v, n, sizeof *v, cmp_float);
        *level = n % 2 ? v[n / 2] : 0.5 * ((double)v[n / 2 - 1] + (double)v[n / 2]);
    }
    free(v);
    return PL_OK;
}

/* A group with indications in one map only (a candidate new or vanished
 * change) is looked for in the other map at the same pixels, with the
 * first map's background and thresholds: the other map's signal there is
 *     s' = s - (d - level)      (current members, the baseline's values)
 *     s' = s + (d - level)      (baseline members, the current's values)
 * s the members' own detection signal, d the difference polarity x
 * (current - baseline) and level its median around the group; s - s' is
 * then the change toward the members' map. When, summed over the members'
 * pixels, the change is at most half of their signal (less than half of
 * the departure came or went between the two inspections: an average
 * over the whole group, so that no single noisy pixel decides) and s'
 * reaches the low threshold somewhere, the other map shows the same
 * departure: its own detection left it out (its background, taken along
 * lines that the edge of the map or of the coverage cut short, rose with
 * it), and
 * the group is matched by signal (PL_MATCH_SIGNAL) with the other side's
 * sizes measured from s' and d: threshold, the members' pixels less those
 * that changed (s' short of the low threshold and the difference itself,
 * d - level, beyond the low multiple of its noise sqrt(sigma_b^2 +
 * sigma_c^2), toward the members' map); half-maximum, the members' pixels
 * at s' >= half of its peak; and its contrast the peak of s'. Counting
 * pixels at s' >= low instead would take from the other side every
 * pixel of the members' hysteresis fringe that its noise pushes under the
 * threshold, and call growth where nothing changed. */
static int look_across(pl_change *ch, const work *wk, const float *d)
{
    int current = ch->ncurrent > 0;
    const pl_detection *det = current ? wk->dc : wk->db;
    if (!(det->low_threshold > 0) || !(det->high_threshold > 0))
        return PL_OK;
    box bx = members_box(ch, wk, current);
    if (bx.c0 > bx.c1 || bx.r0 > bx.r1)
        return PL_OK;
    double level;
    int rc = ring_level(&level, wk, d, NULL, bx);
    if (rc)
        return rc;
    const uint32_t *lab = det->labels;
    const float *s = det->signal;
    const long *gon = wk->group_of_node;
    size_t base = current ? wk->nb : 0;
    long me = gon[base + (current ? ch->current_labels[0] : ch->baseline_labels[0]) - 1];
    uint64_t own = 0, low = 0, changed = 0, nfin = 0;
    double sum_s = 0, sum_change = 0;
    double peak = -INFINITY;
    /* a pixel changed: the other map short of the low threshold there and
     * the difference itself beyond the low multiple of its noise */
    double sd = hypot(wk->db->noise, wk->dc->noise);
    double dlow = isfinite(sd) && sd > 0 ? det->options.low * sd : det->low_threshold;
    for (int pass = 0; pass < 2; pass++) {
        uint64_t half = 0;
        for (uint32_t y = bx.r0; y <= bx.r1; y++)
            for (uint32_t x = bx.c0; x <= bx.c1; x++) {
                size_t i = (size_t)y * wk->w + x;
                uint32_t k = lab[i];
                if (!k)
                    continue;
                if (gon[base + k - 1] != me)
                    continue;
                double other = !isfinite(d[i]) ? NAN
                               : current       ? s[i] - (d[i] - level)
                                               : s[i] + (d[i] - level);
                if (pass == 0) {
                    own++;
                    if (isfinite(other)) {
                        nfin++;
                        sum_s += s[i];
                        sum_change += s[i] - other;
                    }
                    if (other >= det->low_threshold)
                        low++;
                    else if (isfinite(other) && s[i] - other >= dlow)
                        changed++;
                    if (other > peak)
                        peak = other;
                } else if (other >= 0.5 * peak) {
                    half++;
                }
            }
        if (pass == 0 && !(nfin > 0 && sum_change <= 0.5 * sum_s && peak >= det->low_threshold))
            return PL_OK;
        if (pass == 1) {
            double px = wk->in->baseline->pitch_u * wk->in->baseline->pitch_v;
            double *area = current ? ch->area_baseline_mm2 : ch->area_current_mm2;
            area[PL_SIZING_THRESHOLD] = (double)(own - changed) * px;
            area[PL_SIZING_HALF_MAX] = (double)half * px;
            if (current)
                ch->contrast_baseline = peak;
            else
                ch->contrast_current = peak;
        }
    }
    for (int r = 0; r < PL_SIZING_COUNT; r++) {
        ch->area_delta_mm2[r] = ch->area_current_mm2[r] - ch->area_baseline_mm2[r];
        ch->area_delta_percent[r] = ch->area_baseline_mm2[r] > 0
                                        ? 100.0 * ch->area_delta_mm2[r] / ch->area_baseline_mm2[r]
                                        : NAN;
    }
    ch->contrast_delta = ch->contrast_current - ch->contrast_baseline;
    ch->match = PL_MATCH_SIGNAL;
    return PL_OK;
}

/* The area growth limit for a baseline area a0 (see the header). */
double pl_change_area_limit(const pl_change_limits *l, double a0)
{
    if (l->kind == PL_LIMITS_NO_GROWTH)
        return l->area_repeatability_mm2;
    double lim = NAN;
    if (!isnan(l->area_growth_mm2))
        lim = l->area_growth_mm2;
    if (!isnan(l->area_growth_percent)) {
        double p = l->area_growth_percent / 100.0 * a0;
        lim = isnan(lim) ? p : fmin(lim, p);
    }
    return isnan(lim) ? NAN : fmax(lim, l->area_repeatability_mm2);
}

static double contrast_limit(const pl_change_limits *l)
{
    if (l->kind == PL_LIMITS_NO_GROWTH)
        return l->contrast_repeatability;
    return isnan(l->contrast_growth) ? NAN : fmax(l->contrast_growth, l->contrast_repeatability);
}

/* Growth of `measured` against `limit`: beyond it exceeds, at it does not. */
static void judge_growth(double limit, double measured, double *margin, int *exceeds)
{
    *margin = limit - measured;
    *exceeds = !isnan(limit) && measured > limit;
}

/* A new area against the reportable size: from that size on it exceeds. */
static void judge_new(double limit, double measured, double *margin, int *exceeds)
{
    *margin = limit - measured;
    *exceeds = measured >= limit;
}

static void classify(pl_change *ch, const work *wk)
{
    const pl_change_limits *l = &wk->lim;
    int r = (int)l->sizing;
    ch->area_limit_mm2 = ch->contrast_limit = NAN;
    ch->area_measured_mm2 = ch->area_margin_mm2 = ch->contrast_margin = NAN;
    ch->area_exceeds = ch->contrast_exceeds = 0;
    ch->touches = -1;
    double biggest = fmax(ch->area_baseline_mm2[r], ch->area_current_mm2[r]);
    ch->reportable = biggest >= l->min_reportable_mm2;
    if ((ch->nbaseline && ch->ncurrent) || ch->match == PL_MATCH_SIGNAL) {
        ch->area_limit_mm2 = pl_change_area_limit(l, ch->area_baseline_mm2[r]);
        ch->area_measured_mm2 = ch->area_delta_mm2[r];
        judge_growth(ch->area_limit_mm2, ch->area_measured_mm2, &ch->area_margin_mm2,
                     &ch->area_exceeds);
        ch->contrast_limit = contrast_limit(l);
        judge_growth(ch->contrast_limit, ch->contrast_delta, &ch->contrast_margin,
                     &ch->contrast_exceeds);
        ch->exceeds = ch->reportable && (ch->area_exceeds || ch->contrast_exceeds);
        ch->kind = ch->exceeds ? PL_CHANGE_GROWN : PL_CHANGE_STABLE;
        if (ch->match == PL_MATCH_SIGNAL)
            return;
        ch->match = PL_MATCH_DISTANCE;
        for (size_t k = 0; k < ch->nbaseline; k++)
            if (wk->overlap_edge[ch->baseline_labels[k] - 1])
                ch->match = PL_MATCH_OVERLAP;
    } else if (ch->ncurrent) {
        ch->kind = PL_CHANGE_NEW;
        ch->match = PL_MATCH_NONE;
        ch->area_limit_mm2 = l->new_reportable_mm2;
        ch->area_measured_mm2 = ch->area_current_mm2[r];
        judge_new(ch->area_limit_mm2, ch->area_measured_mm2, &ch->area_margin_mm2,
                  &ch->area_exceeds);
        ch->exceeds = ch->reportable && ch->area_exceeds;
    } else {
        ch->match = PL_MATCH_NONE;
        int judged = 0;
        for (size_t k = 0; k < ch->nbaseline; k++)
            judged |= !wk->not_judged[ch->baseline_labels[k]];
        ch->kind = judged ? PL_CHANGE_VANISHED : PL_CHANGE_NOT_COMPARED;
        ch->exceeds = judged && ch->reportable && l->vanished == PL_VANISHED_FINDING;
    }
}

/* The groups: connected components of the match graph, numbered in the
 * order of their first baseline, then current, label. */
static int make_groups(work *wk, pl_comparison *cmp)
{
    uint32_t nn = wk->nb + wk->nc;
    wk->group_of_node = malloc(((size_t)nn + 1) * sizeof *wk->group_of_node);
    long *group_of_root = malloc(((size_t)nn + 1) * sizeof *group_of_root);
    if (!wk->group_of_node || !group_of_root) {
        free(group_of_root);
        return PL_ENOMEM;
    }
    for (uint32_t i = 0; i < nn; i++)
        group_of_root[i] = -1;
    size_t ng = 0;
    for (uint32_t i = 0; i < nn; i++) {
        uint32_t r = uf_find(wk->parent, i);
        if (group_of_root[r] < 0)
            group_of_root[r] = (long)ng++;
        wk->group_of_node[i] = group_of_root[r];
    }
    free(group_of_root);
    cmp->changes = calloc(ng ? ng : 1, sizeof *cmp->changes);
    if (!cmp->changes)
        return PL_ENOMEM;
    cmp->count = ng;
    for (uint32_t i = 0; i < nn; i++) {
        pl_change *ch = &cmp->changes[wk->group_of_node[i]];
        if (i < wk->nb)
            ch->nbaseline++;
        else
            ch->ncurrent++;
    }
    for (size_t g = 0; g < ng; g++) {
        pl_change *ch = &cmp->changes[g];
        ch->baseline_labels = malloc((ch->nbaseline ? ch->nbaseline : 1) * sizeof(uint32_t));
        ch->current_labels = malloc((ch->ncurrent ? ch->ncurrent : 1) * sizeof(uint32_t));
        if (!ch->baseline_labels || !ch->current_labels)
            return PL_ENOMEM;
        ch->nbaseline = ch->ncurrent = 0;
    }
    for (uint32_t i = 0; i < nn; i++) {
        pl_change *ch = &cmp->changes[wk->group_of_node[i]];
        if (i < wk->nb)
            ch->baseline_labels[ch->nbaseline++] = i + 1;
        else
            ch->current_labels[ch->ncurrent++] = i - wk->nb + 1;
    }
    for (size_t g = 0; g < ng; g++) {
        pl_change *ch = &cmp->changes[g];
        fill_sizes(ch, wk);
        int judged = 0;
        for (size_t k = 0; k < ch->nbaseline; k++)
            judged |= !wk->not_judged[ch->baseline_labels[k]];
        if (!ch->nbaseline != !ch->ncurrent && (ch->ncurrent || judged)) {
            int rc = look_across(ch, wk, cmp->difference);
            if (rc)
                return rc;
        }
        classify(ch, wk);
    }
    return PL_OK;
}

/* d = polarity x (current - baseline) on the compared pixels. */
static int difference(work *wk, pl_comparison *cmp)
{
    const float *vb = pl_map_channel(wk->in->baseline, wk->in->baseline_channel);
    const float *vc = pl_map_channel(wk->in->current, wk->in->current_channel);
    cmp->difference = malloc(wk->np * sizeof *cmp->difference);
    cmp->region_labels = calloc(wk->np, sizeof *cmp->region_labels);
    if (!cmp->difference || !cmp->region_labels)
        return PL_ENOMEM;
    float pol = (float)wk->db->polarity;
    for (size_t i = 0; i < wk->np; i++)
        cmp->difference[i] = wk->cov[i] ? pol * (vc[i] - vb[i]) : NAN;
    return PL_OK;
}

/* Append one changed region (the part of a difference region outside
 * every indication) to the changes. */
static int add_region(pl_comparison *cmp, const work *wk, uint32_t label, uint64_t pixels,
                      double peak, double sc, double sr, long touches)
{
    pl_change *p = realloc(cmp->changes, (cmp->count + 1) * sizeof *p);
    if (!p)
        return PL_ENOMEM;
    cmp->changes = p;
    pl_change *ch = &cmp->changes[cmp->count];
    memset(ch, 0, sizeof *ch);
    ch->baseline_labels = malloc(sizeof(uint32_t));
    ch->current_labels = malloc(sizeof(uint32_t));
    cmp->count++;
    if (!ch->baseline_labels || !ch->current_labels)
        return PL_ENOMEM;
    const pl_change_limits *l = &wk->lim;
    int r = (int)l->sizing;
    double area = (double)pixels * cmp->pitch_u * cmp->pitch_v;
    ch->kind = PL_CHANGE_REGION;
    ch->match = PL_MATCH_NONE;
    for (int k = 0; k < PL_SIZING_COUNT; k++) {
        ch->area_baseline_mm2[k] = 0;
        ch->area_current_mm2[k] = area;
        ch->area_delta_mm2[k] = area;
        ch->area_delta_percent[k] = NAN;
    }
    ch->contrast_baseline = NAN;
    ch->contrast_current = peak;
    ch->contrast_delta = NAN;
    ch->centroid_col = sc / (double)pixels;
    ch->centroid_row = sr / (double)pixels;
    ch->distance_px = NAN;
    ch->contrast_limit = ch->contrast_margin = NAN;
    ch->region_pixels = pixels;
    ch->region_label = label;
    ch->touches = touches;
    ch->area_measured_mm2 = area;
    ch->reportable = area >= l->min_reportable_mm2;
    const pl_change *t = touches >= 0 ? &cmp->changes[touches] : NULL;
    if (t && t->nbaseline) {
        ch->area_limit_mm2 = pl_change_area_limit(l, t->area_baseline_mm2[r]);
        judge_growth(ch->area_limit_mm2, area, &ch->area_margin_mm2, &ch->area_exceeds);
    } else {
        ch->area_limit_mm2 = l->new_reportable_mm2;
        judge_new(ch->area_limit_mm2, area, &ch->area_margin_mm2, &ch->area_exceeds);
    }
    ch->exceeds = ch->reportable && ch->area_exceeds;
    return PL_OK;
}

/* Whether changed region k is a change of the maps themselves: summed
 * over its pixels, the difference d less its level around the region (the
 * median over the compared pixels near it in no indication and no region)
 * is at least half of the region's signal s_c - s_b. Where the two maps'
 * backgrounds part (the line windows of one ran short at the edge of the
 * map or of the coverage), s_c - s_b departs while d, the maps' values,
 * does not: no change. */
static int region_supported(int *yes, const work *wk, const float *d, const float *sig,
                            const uint32_t *lab, uint32_t k, const pl_detect__sums *sk)
{
    box bx = { sk->col0, sk->row0, sk->col1, sk->row1 };
    double level;
    int rc = ring_level(&level, wk, d, lab, bx);
    if (rc)
        return rc;
    double sum_sig = 0, sum_d = 0;
    for (uint32_t y = sk->row0; y <= sk->row1; y++)
        for (uint32_t x = sk->col0; x <= sk->col1; x++) {
            size_t i = (size_t)y * wk->w + x;
            if (lab[i] != k || !isfinite(d[i]) || !isfinite(sig[i]))
                continue;
            sum_sig += sig[i];
            sum_d += d[i] - level;
        }
    *yes = sum_sig > 0 && sum_d >= 0.5 * sum_sig;
    return PL_OK;
}

/* The changed regions: pl_detect() on the difference of the two signals
 * (each map's departure from its own background, in polarity), then the
 * parts of its regions outside every indication of both maps. */
static int regions(work *wk, pl_comparison *cmp, pl_err *err)
{
    const pl_map *b = wk->in->baseline;
    pl_map *dm = NULL;
    int rc = pl_map_new(&dm, wk->w, wk->h, 1, err);
    if (rc)
        return rc;
    dm->pitch_u = b->pitch_u;
    dm->pitch_v = b->pitch_v;
    dm->placement = b->placement;
    snprintf(dm->channels[0].quantity, sizeof dm->channels[0].quantity, "change-difference");
    snprintf(dm->channels[0].unit, sizeof dm->channels[0].unit, "%s",
             cmp->unit[0] ? cmp->unit : "1");
    const float *sig_b = wk->db->signal, *sig_c = wk->dc->signal;
    for (size_t i = 0; i < wk->np; i++)
        dm->data[i] = wk->cov[i] ? sig_c[i] - sig_b[i] : NAN;
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    const pl_detect_options *bo = &wk->db->options;
    o.high = bo->high;
    o.low = bo->low;
    o.min_area_mm2 = bo->min_area_mm2;
    o.polarity = PL_POLARITY_RISES;
    o.background = PL_BACKGROUND_ZERO;
    /* the difference's own noise; where it cannot be estimated or is nil
     * (a map against itself), that of the difference of two independent
     * maps with the detections' noises */
    double sd = NAN;
    pl_err e2 = {0};
    rc = pl_detect_noise(&sd, NULL, dm, 0, &o, &e2);
    if (rc && rc != PL_EINVAL) {
        pl_map_free(dm);
        return pl__err(err, rc, "difference of the two maps: %s", e2.msg);
    }
    if (rc || !(sd > 0))
        sd = hypot(wk->db->noise, wk->dc->noise);
    if (!(sd > 0)) {
        /* neither map has a noise (a quantity compared with nominal on
         * mostly empty maps): no changed regions */
        pl_map_free(dm);
        cmp->difference_noise = cmp->difference_high = cmp->difference_low = NAN;
        return PL_OK;
    }
    o.noise = sd;
    pl_detection *dd = NULL;
    rc = pl_detect(&dd, dm, 0, &o, &e2);
    pl_map_free(dm);
    if (rc)
        return pl__err(err, rc, "difference of the two maps: %s", e2.msg);
    cmp->difference_noise = dd->noise;
    cmp->difference_high = dd->high_threshold;
    cmp->difference_low = dd->low_threshold;
    const uint32_t *lb = wk->db->labels, *lc = wk->dc->labels;
    uint8_t *outside = malloc(wk->np);
    uint32_t *lab = malloc(wk->np * sizeof *lab), nreg = 0;
    if (!outside || !lab) {
        rc = PL_ENOMEM;
        goto done;
    }
    for (size_t i = 0; i < wk->np; i++)
        outside[i] = (uint8_t)(dd->labels[i] && !lb[i] && !lc[i]);
    if ((rc = pl_detect__label(lab, &nreg, outside, wk->w, wk->h)))
        goto done;
    if (nreg) {
        pl_detect__sums *s = malloc((size_t)nreg * sizeof *s);
        /* per region: the change it borders most (8-neighbours in an indication) */
        long *best = malloc((size_t)nreg * sizeof *best);
        uint64_t *bestn = calloc(nreg, sizeof *bestn);
        if (!s || !best || !bestn) {
            free(s);
            free(best);
            free(bestn);
            rc = PL_ENOMEM;
            goto done;
        }
        pl_detect__accumulate(s, nreg, lab, dd->signal, wk->w, wk->h);
        /* counts of bordering pixels per (region, change): kept small by
         * taking, per region, a running tally over its border pixels */
        size_t nch = cmp->count;
        uint64_t *tally = calloc(nch ? nch : 1, sizeof *tally);
        if (!tally) {
            free(s);
            free(best);
            free(bestn);
            rc = PL_ENOMEM;
            goto done;
        }
        for (uint32_t k = 0; k < nreg; k++)
            best[k] = -1;
        for (uint32_t k = 1; k <= nreg && nch; k++) {
            const pl_detect__sums *sk = &s[k - 1];
            memset(tally, 0, nch * sizeof *tally);
            for (uint32_t y = sk->row0; y <= sk->row1; y++)
                for (uint32_t x = sk->col0; x <= sk->col1; x++) {
                    if (lab[(size_t)y * wk->w + x] != k)
                        continue;
                    for (int dy = -1; dy <= 1; dy++)
                        for (int dx = -1; dx <= 1; dx++) {
                            long xx = (long)x + dx, yy = (long)y + dy;
                            if (xx < 0 || yy < 0 || xx >= wk->w || yy >= wk->h)
                                continue;
                            size_t j = (size_t)yy * wk->w + (size_t)xx;
                            if (lb[j] && lb[j] <= wk->nb)
                                tally[wk->group_of_node[lb[j] - 1]]++;
                            else if (lc[j] && lc[j] <= wk->nc)
                                tally[wk->group_of_node[wk->nb + lc[j] - 1]]++;
                        }
                }
            for (size_t g = 0; g < nch; g++)
                if (tally[g] > bestn[k - 1]) {
                    bestn[k - 1] = tally[g];
                    best[k - 1] = (long)g;
                }
        }
        free(tally);
        uint64_t min_px = 0;
        if (dd->options.min_area_mm2 > 0)
            min_px = (uint64_t)ceil(dd->options.min_area_mm2 / (cmp->pitch_u * cmp->pitch_v) -
                                    1e-9);
        uint32_t next = 0;
        uint32_t *renum = calloc((size_t)nreg + 1, sizeof *renum);
        if (!renum) {
            free(s);
            free(best);
            free(bestn);
            rc = PL_ENOMEM;
            goto done;
        }
        for (uint32_t k = 1; k <= nreg && !rc; k++) {
            const pl_detect__sums *sk = &s[k - 1];
            if (sk->n < min_px || sk->n == 0)
                continue;
            int yes = 0;
            if ((rc = region_supported(&yes, wk, cmp->difference, dd->signal, lab, k, sk)))
                break;
            if (!yes)
                continue;
            renum[k] = ++next;
            double sc = sk->sc + (double)sk->ref_col * (double)sk->n;
            double sr = sk->sr + (double)sk->ref_row * (double)sk->n;
            rc = add_region(cmp, wk, next, sk->n, (double)sk->peak, sc, sr, best[k - 1]);
        }
        for (size_t i = 0; i < wk->np && !rc; i++)
            cmp->region_labels[i] = renum[lab[i]];
        free(renum);
        free(s);
        free(best);
        free(bestn);
        if (rc)
            rc = pl__err(err, rc, "out of memory for changed regions");
    }
done:
    if (rc == PL_ENOMEM && (!err || !err->msg[0]))
        pl__err(err, rc, "out of memory for changed regions");
    free(outside);
    free(lab);
    pl_detection_free(dd);
    return rc;
}

PL_EXPORT int pl_change_compare(pl_comparison **out, const pl_change_input *in,
                                const pl_change_limits *limits, pl_err *err)
{
    assert(out && in && limits);
    *out = NULL;
    int rc = pl_change_limits_check(limits, err);
    if (rc)
        return rc;
    if ((rc = check_input(in, err)))
        return rc;
    work wk;
    memset(&wk, 0, sizeof wk);
    wk.in = in;
    wk.db = in->baseline_detection;
    wk.dc = in->current_detection;
    wk.lim = *limits;
    if (isnan(wk.lim.min_reportable_mm2))
        wk.lim.min_reportable_mm2 = 0;
    if (isnan(wk.lim.new_reportable_mm2))
        wk.lim.new_reportable_mm2 = wk.lim.min_reportable_mm2;
    wk.w = in->baseline->width;
    wk.h = in->baseline->height;
    wk.np = (size_t)wk.w * wk.h;
    if (wk.db->count > UINT32_MAX / 2 || wk.dc->count > UINT32_MAX / 2)
        return pl__err(err, PL_EINVAL, "change input: too many indications");
    wk.nb = (uint32_t)wk.db->count;
    wk.nc = (uint32_t)wk.dc->count;
    pl_comparison *cmp = calloc(1, sizeof *cmp);
    if (!cmp)
        return pl__err(err, PL_ENOMEM, "out of memory for a comparison");
    cmp->width = wk.w;
    cmp->height = wk.h;
    memcpy(cmp->quantity, wk.db->quantity, sizeof cmp->quantity);
    memcpy(cmp->unit, wk.db->unit, sizeof cmp->unit);
    cmp->polarity = wk.db->polarity;
    cmp->pitch_u = in->baseline->pitch_u;
    cmp->pitch_v = in->baseline->pitch_v;
    cmp->registration_uncertainty_px = in->registration_uncertainty_px;
    cmp->tolerance_px = 3.0 * in->registration_uncertainty_px + 1.0;
    cmp->limits = wk.lim;
    uint32_t nn = wk.nb + wk.nc;
    wk.parent = malloc(((size_t)nn + 1) * sizeof *wk.parent);
    wk.overlap_edge = calloc((size_t)nn + 1, 1);
    rc = PL_ENOMEM;
    if (!wk.parent || !wk.overlap_edge)
        goto fail;
    for (uint32_t i = 0; i < nn; i++)
        wk.parent[i] = i;
    if (coverage(&wk, cmp) || match_overlap(&wk))
        goto fail;
    match_distance(&wk, cmp->tolerance_px);
    if (difference(&wk, cmp) || make_groups(&wk, cmp))
        goto fail;
    if ((rc = regions(&wk, cmp, err)))
        goto fail_msg;
    for (size_t k = 0; k < cmp->count; k++) {
        cmp->counts[cmp->changes[k].kind]++;
        cmp->exceeding += (size_t)(cmp->changes[k].exceeds != 0);
    }
    work_free(&wk);
    *out = cmp;
    return PL_OK;
fail:
    pl__err(err, rc, "out of memory comparing %s", cmp->quantity);
fail_msg:
    work_free(&wk);
    pl_comparison_free(cmp);
    return rc;
}

/* ---- a whole site ---------------------------------------------------------------- */

PL_EXPORT int pl_change_site(pl_comparison **out, pl_register_result *reg,
                             const pl_map *baseline, uint32_t baseline_channel,
                             const pl_map *current, const pl_change_limits *limits,
                             const pl_change_site_options *opts, pl_err *err)
{
    assert(out && baseline && current && limits);
    *out = NULL;
    pl_change_site_options o = PL_CHANGE_SITE_OPTIONS_INIT;
    if (opts)
        o = *opts;
    if (o.version != PL_CHANGE_SITE_OPTIONS_VERSION)
        return pl__err(err, PL_EINVAL, "change site options: unknown version %u", o.version);
    if (baseline_channel >= baseline->nchannels)
        return pl__err(err, PL_EINVAL, "baseline channel %u out of range (%u)",
                       baseline_channel, baseline->nchannels);
    int rc = pl_change_limits_check(limits, err);
    if (rc)
        return rc;
    double u = isnan(o.registration_uncertainty_px)
                   ? PL_CHANGE_DEFAULT_REGISTRATION_UNCERTAINTY_PX
                   : o.registration_uncertainty_px;
    pl_register_result rr;
    pl_map *aligned = NULL;
    rc = pl_register_maps(&rr, &aligned, baseline, current, o.register_quantity,
                          o.register_label, &o.reg, err);
    if (reg)
        *reg = rr;
    if (rc)
        return rc;
    if (rr.refused) {
        pl_map_free(aligned);
        return PL_OK;
    }
    const pl_channel *bc = &baseline->channels[baseline_channel];
    int cc = -1;
    for (uint32_t c = 0; c < aligned->nchannels && cc < 0; c++)
        if (!strcmp(aligned->channels[c].quantity, bc->quantity) &&
            !strcmp(aligned->channels[c].label, bc->label))
            cc = (int)c;
    if (cc < 0) {
        pl_map_free(aligned);
        return pl__err(err, PL_ENOTFOUND, "current map: no channel %s \"%s\"", bc->quantity,
                       bc->label);
    }
    /* the current map's noise from its own grid: resampling onto the
     * baseline's smooths the noise, which the high-pass estimate would
     * then find too small (thresholds too low, noise called) */
    pl_detect_options dcur = o.detect;
    int rc_own = -1;
    for (uint32_t c = 0; c < current->nchannels && rc_own < 0; c++)
        if (!strcmp(current->channels[c].quantity, bc->quantity) &&
            !strcmp(current->channels[c].label, bc->label))
            rc_own = (int)c;
    pl_detection *db = NULL, *dc = NULL;
    if (isnan(dcur.noise) && rc_own >= 0 &&
        (rc = pl_detect_noise(&dcur.noise, NULL, current, (uint32_t)rc_own, &o.detect, err))) {
        pl_map_free(aligned);
        return rc;
    }
    /* a quantity whose sound level is the part's takes the baseline's
     * level too, so that an indication that grew is not taken into the
     * current map's own background (pl_detect_on_reference()) */
    if ((rc = pl_detect(&db, baseline, baseline_channel, &o.detect, err)) ||
        (rc = pl_detect_reference_level(bc->quantity)
                  ? pl_detect_on_reference(&dc, aligned, (uint32_t)cc, db, &dcur, err)
                  : pl_detect(&dc, aligned, (uint32_t)cc, &dcur, err))) {
        pl_detection_free(db);
        pl_map_free(aligned);
        return rc;
    }
    pl_change_input in = PL_CHANGE_INPUT_INIT;
    in.baseline = baseline;
    in.baseline_channel = baseline_channel;
    in.baseline_detection = db;
    in.current = aligned;
    in.current_channel = (uint32_t)cc;
    in.current_detection = dc;
    in.registration_uncertainty_px = u;
    rc = pl_change_compare(out, &in, limits, err);
    pl_detection_free(db);
    pl_detection_free(dc);
    pl_map_free(aligned);
    return rc;
}
