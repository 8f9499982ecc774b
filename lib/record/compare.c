/*
 * compare.c - the recorded comparison of a site and of a whole check (see
 * plyledger/compare.h).
 */
#include "plyledger/compare.h"
#include "plyledger/coverage.h"
#include "plyledger/history.h"

#include "common/common_int.h"
#include "record/record_int.h"

#include <cjson/cJSON.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <time.h>

PL_EXPORT const char *pl_compare_against_name(pl_compare_against a)
{
    return a == PL_AGAINST_PREVIOUS ? "previous" : a == PL_AGAINST_BASELINE ? "baseline" : NULL;
}

/* The quantity a method's comparison looks at unless told otherwise
 * (common practice: thermal contrast for flash thermography, the gated
 * back-wall amplitude for an ultrasonic C-scan). */
static const char *default_quantity(const char *method)
{
    if (strcmp(method, "flash-thermography") == 0)
        return "temperature-contrast";
    if (strncmp(method, "ultrasonic", 10) == 0)
        return "ultrasonic-amplitude";
    return NULL;
}

/* ---- choosing the two inspections ------------------------------------- */

typedef struct insp_scan {
    pl_id want;                /* the current inspection, or 0: the latest */
    pl_inspection *all;
    size_t n, cap;
    int failed;
} insp_scan;

static int keep_inspection(void *ud, const pl_inspection *in)
{
    insp_scan *s = ud;
    if (s->n == s->cap) {
        size_t cap = s->cap ? 2 * s->cap : 16;
        pl_inspection *p = realloc(s->all, cap * sizeof *p);
        if (!p) {
            s->failed = 1;
            return 1;
        }
        s->all = p;
        s->cap = cap;
    }
    pl_inspection *c = &s->all[s->n++];
    *c = *in;
    c->parameters_json = NULL; /* not needed; owned by the listing */
    return 0;
}

static int is_baseline_kind(const char *kind)
{
    return strcmp(kind, "baseline") == 0 || strcmp(kind, "post-repair") == 0;
}

/* Pick the current inspection and its reference from the site's
 * inspections (oldest first). */
static int choose_pair(pl_site_comparison *sc, const insp_scan *s, pl_id want,
                       pl_compare_against against, pl_err *err)
{
    const char *sn = sc->site.airframe_serial, *code = sc->site.code;
    size_t cur = s->n;
    if (want) {
        for (size_t i = 0; i < s->n; i++)
            if (s->all[i].key == want)
                cur = i;
        if (cur == s->n)
            return pl__err(err, PL_ENOMATCH, "inspection %lld is not an inspection of %s site %s",
                           (long long)want, sn, code);
    } else {
        for (size_t i = s->n; i-- > 0;)
            if (!is_baseline_kind(s->all[i].kind)) {
                cur = i;
                break;
            }
        if (cur == s->n)
            return pl__err(err, PL_ENOTFOUND, "%s site %s has no inspection to compare", sn,
                           code);
    }
    size_t ref = s->n;
    for (size_t i = 0; i < cur; i++) {
        if (strcmp(s->all[i].performed_on, s->all[cur].performed_on) > 0)
            continue;
        if (against == PL_AGAINST_PREVIOUS || is_baseline_kind(s->all[i].kind))
            ref = i;
    }
    if (ref == s->n)
        return pl__err(err, PL_ENOTFOUND, against == PL_AGAINST_PREVIOUS
                       ? "%s site %s: inspection %lld has no earlier inspection to compare with"
                       : "%s site %s: inspection %lld has no baseline before it; record the "
                         "baseline first", sn, code, (long long)s->all[cur].key);
    sc->current = s->all[cur];
    sc->reference = s->all[ref];
    if (sc->reference.simulated == 1 && sc->current.simulated == 0)
        return pl__err(err, PL_EINVAL, "%s site %s: inspection %lld is simulated and cannot be "
                       "the reference of inspection %lld, which is real", sn, code,
                       (long long)sc->reference.key, (long long)sc->current.key);
    return PL_OK;
}

typedef struct first_map {
    pl_id id;
} first_map;

static int take_first_map(void *ud, const pl_map_record *m)
{
    first_map *f = ud;
    if (!f->id)
        f->id = m->id;
    return 0;
}

static int first_map_of(pl_store *store, const pl_inspection *in, const char *what, pl_id *id,
                        pl_err *err)
{
    first_map f = { 0 };
    int rc = pl_store_list_maps(store, in->key, take_first_map, &f, err);
    if (rc)
        return rc;
    if (!f.id)
        return pl__err(err, PL_ENOTFOUND, "%s site %s: the %s inspection %lld has no map",
                       in->airframe_serial, in->site_code, what, (long long)in->key);
    *id = f.id;
    return PL_OK;
}

/* ---- comparability ------------------------------------------------------ */

static void warn(pl_site_comparison *sc, const char *fmt, ...)
    __attribute__((format(printf, 2, 3)));
static void warn(pl_site_comparison *sc, const char *fmt, ...)
{
    if (sc->nwarnings == PL_COMPARE_MAX_WARNINGS)
        return;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(sc->warnings[sc->nwarnings++], PL_TEXT_SIZE, fmt, ap);
    va_end(ap);
}

/* The making's parameters of a map without what differs from one
 * acquisition to the next (the acquisition itself, the source file). */
static cJSON *making_of(const char *json)
{
    cJSON *j = json ? cJSON_Parse(json) : NULL;
    if (!cJSON_IsObject(j)) {
        cJSON_Delete(j);
        return NULL;
    }
    cJSON_DeleteItemFromObjectCaseSensitive(j, "acquisition");
    cJSON_DeleteItemFromObjectCaseSensitive(j, "source");
    cJSON_DeleteItemFromObjectCaseSensitive(j, "sequence");
    return j;
}

static void comparability_warnings(pl_site_comparison *sc, const pl_map_record *rr,
                                   const pl_map_record *cr)
{
    const pl_inspection *a = &sc->reference, *b = &sc->current;
    if (strcmp(a->procedure, b->procedure) != 0 || strcmp(a->procedure_rev, b->procedure_rev) != 0)
        warn(sc, "procedure differs: %s rev %s (reference) and %s rev %s (current)",
             a->procedure, a->procedure_rev, b->procedure, b->procedure_rev);
    if (strcmp(a->equipment, b->equipment) != 0)
        warn(sc, "equipment differs: \"%.100s\" (reference) and \"%.100s\" (current)",
             a->equipment, b->equipment);
    if (strcmp(rr->origin, cr->origin) != 0) {
        warn(sc, "the maps were made differently: %s (reference) and %s (current)", rr->origin,
             cr->origin);
    } else {
        cJSON *x = making_of(rr->parameters_json), *y = making_of(cr->parameters_json);
        if ((x || y) && !cJSON_Compare(x, y, 1))
            warn(sc, "the reduction parameters differ between the two maps");
        cJSON_Delete(x);
        cJSON_Delete(y);
    }
    if (fabs(rr->pitch_u - cr->pitch_u) > 1e-9 * rr->pitch_u ||
        fabs(rr->pitch_v - cr->pitch_v) > 1e-9 * rr->pitch_v)
        warn(sc, "pitch differs: %g x %g mm (reference) and %g x %g mm (current)", rr->pitch_u,
             rr->pitch_v, cr->pitch_u, cr->pitch_v);
    if (rr->width != cr->width || rr->height != cr->height)
        warn(sc, "map size differs: %ux%u px (reference) and %ux%u px (current)",
             (unsigned)rr->width, (unsigned)rr->height, (unsigned)cr->width,
             (unsigned)cr->height);
}

/* ---- criteria ------------------------------------------------------------ */

static int resolve_limits(pl_site_comparison *sc, pl_store *store, const pl_compare_options *o,
                          pl_err *err)
{
    pl_criteria_record rec;
    memset(&rec, 0, sizeof rec);
    int rc;
    if (o->criteria_id)
        rc = pl_store_get_criteria(store, o->criteria_id, &rec, err);
    else if (o->criteria_name && *o->criteria_name)
        rc = pl_store_find_criteria(store, o->criteria_name, o->criteria_revision, &rec, err);
    else
        rc = pl__err(err, PL_EINVAL, "a comparison needs its criteria: name a recorded set");
    if (rc)
        return rc;
    pl_criteria *set = NULL;
    rc = pl_criteria_from_record(&set, &rec, err);
    if (!rc) {
        sc->criteria_id = rec.id;
        snprintf(sc->criteria_source, sizeof sc->criteria_source, "%s", rec.source_document);
        rc = pl_criteria_limits_for(&sc->limits, set, sc->site.method, sc->quantity,
                                    sc->site.code, sc->site.zone, err);
    }
    pl_criteria_free(set);
    pl_criteria_record_clear(&rec);
    if (rc)
        return rc;
    if (sc->limits.contrast_unit[0] && strcmp(sc->limits.contrast_unit, sc->unit) != 0)
        return pl__err(err, PL_ENOMATCH, "%s site %s: rule \"%s\" of criteria %s rev %s states "
                       "contrast in %s, but %s is in %s", sc->site.airframe_serial, sc->site.code,
                       sc->limits.rule_name, sc->limits.criteria_name,
                       sc->limits.criteria_revision, sc->limits.contrast_unit, sc->quantity,
                       sc->unit);
    return PL_OK;
}

/* The rule's numbers as the comparison's limits. */
static void change_limits_of(pl_change_limits *l, const pl_criteria_limits *c)
{
    pl_change_limits init = PL_CHANGE_LIMITS_INIT;
    *l = init;
    l->kind = c->kind == PL_CRITERIA_NO_GROWTH ? PL_LIMITS_NO_GROWTH : PL_LIMITS_GROWTH;
    l->sizing = PL_SIZING_THRESHOLD;
    l->area_repeatability_mm2 = c->repeatability_area_mm2;
    l->contrast_repeatability = c->repeatability_contrast;
    l->min_reportable_mm2 = c->min_reportable_area_mm2;
    l->new_reportable_mm2 = c->new_reportable_area_mm2;
    l->area_growth_mm2 = c->area_growth_mm2;
    l->area_growth_percent = c->area_growth_percent;
    l->contrast_growth = c->contrast_growth;
    l->vanished = c->vanished == PL_VANISHED_INVESTIGATE ? PL_VANISHED_FINDING : PL_VANISHED_NOTE;
}

/* ---- the comparison ------------------------------------------------------ */

PL_EXPORT void pl_site_comparison_free(pl_site_comparison *sc)
{
    if (!sc)
        return;
    pl_comparison_free(sc->cmp);
    pl_detection_free(sc->reference_detection);
    pl_detection_free(sc->current_detection);
    pl_map_free(sc->reference_data);
    pl_map_free(sc->aligned);
    free(sc);
}

/* The channel of `map` holding `quantity` (with `label` when given). */
static int channel_of(const pl_map *map, const char *quantity, const char *label)
{
    for (uint32_t c = 0; c < map->nchannels; c++)
        if (strcmp(map->channels[c].quantity, quantity) == 0 &&
            (!label || !*label || strcmp(map->channels[c].label, label) == 0))
            return (int)c;
    return -1;
}

/* ---- the indications and changes as rows ----------------------------------- */

/* Write the indications of one side of a done comparison. */
static int record_indications(pl_store *store, pl_id cid, const char *role, pl_id map,
                              uint32_t channel, const pl_detection *d, pl_err *err)
{
    for (size_t i = 0; i < d->count; i++) {
        const pl_indication *x = &d->indications[i];
        const pl_indication_size *t = &x->size[PL_SIZING_THRESHOLD];
        const pl_indication_size *h = &x->size[PL_SIZING_HALF_MAX];
        pl_indication_record r;
        memset(&r, 0, sizeof r);
        r.comparison_id = cid;
        snprintf(r.role, sizeof r.role, "%s", role);
        r.map_id = map;
        r.channel = channel;
        r.label = x->label;
        r.area_px = (int64_t)t->pixels;
        r.area_mm2 = t->area_mm2;
        r.equivalent_diameter_mm = t->equivalent_diameter_mm;
        r.area_halfmax_px = (int64_t)h->pixels;
        r.area_halfmax_mm2 = h->area_mm2;
        r.equivalent_diameter_halfmax_mm = h->equivalent_diameter_mm;
        r.centroid_col = x->centroid_col;
        r.centroid_row = x->centroid_row;
        r.part_x = x->centroid_part[0];
        r.part_y = x->centroid_part[1];
        r.part_z = x->centroid_part[2];
        r.bbox_col0 = x->bbox_col0;
        r.bbox_row0 = x->bbox_row0;
        r.bbox_col1 = x->bbox_col1;
        r.bbox_row1 = x->bbox_row1;
        r.major_axis_mm = x->major_axis_mm;
        r.minor_axis_mm = x->minor_axis_mm;
        r.orientation_deg = x->orientation_deg;
        r.peak_contrast = x->peak_contrast;
        r.peak_snr = x->peak_snr;
        r.peak_col = x->peak_col;
        r.peak_row = x->peak_row;
        r.mean_contrast = x->mean_contrast;
        r.depth_mm = x->depth_mm;
        r.perimeter_mm = x->perimeter_mm;
        r.outline = x->outline;
        int rc = pl_store_add_indication(store, &r, NULL, err);
        if (rc)
            return rc;
    }
    return PL_OK;
}

static int cmp_u32(const void *a, const void *b)
{
    uint32_t x = *(const uint32_t *)a, y = *(const uint32_t *)b;
    return (x > y) - (x < y);
}

/* Labels as the JSON array the change rows hold, in increasing order. */
static int labels_text(char **out, const uint32_t *v, size_t n, pl_err *err)
{
    uint32_t *sorted = malloc((n ? n : 1) * sizeof *sorted);
    char *text = malloc(n * 11 + 3);
    if (!sorted || !text) {
        free(sorted);
        free(text);
        return pl__err(err, PL_ENOMEM, "out of memory");
    }
    if (n)
        memcpy(sorted, v, n * sizeof *sorted);
    qsort(sorted, n, sizeof *sorted, cmp_u32);
    size_t k = 0;
    text[k++] = '[';
    for (size_t i = 0; i < n; i++)
        k += (size_t)sprintf(text + k, i ? ",%u" : "%u", (unsigned)sorted[i]);
    text[k++] = ']';
    text[k] = '\0';
    free(sorted);
    *out = text;
    return PL_OK;
}

static const char *const match_words[] = { "none", "overlap", "distance", "signal" };

/* Write the classified changes of a done comparison, numbered from 1. */
static int record_changes(pl_store *store, pl_id cid, const pl_comparison *c, pl_err *err)
{
    for (size_t i = 0; i < c->count; i++) {
        const pl_change *x = &c->changes[i];
        pl_change_record r;
        memset(&r, 0, sizeof r);
        r.comparison_id = cid;
        r.number = (int64_t)i + 1;
        snprintf(r.class_, sizeof r.class_, "%s", pl_change_kind_name(x->kind));
        snprintf(r.matched_by, sizeof r.matched_by, "%s", match_words[x->match]);
        snprintf(r.sizing, sizeof r.sizing, "%s", pl_sizing_name(c->limits.sizing));
        r.area_baseline_mm2 = x->area_baseline_mm2[PL_SIZING_THRESHOLD];
        r.area_current_mm2 = x->area_current_mm2[PL_SIZING_THRESHOLD];
        r.area_delta_mm2 = x->area_delta_mm2[PL_SIZING_THRESHOLD];
        r.area_delta_percent = x->area_delta_percent[PL_SIZING_THRESHOLD];
        r.area_baseline_halfmax_mm2 = x->area_baseline_mm2[PL_SIZING_HALF_MAX];
        r.area_current_halfmax_mm2 = x->area_current_mm2[PL_SIZING_HALF_MAX];
        r.area_delta_halfmax_mm2 = x->area_delta_mm2[PL_SIZING_HALF_MAX];
        r.contrast_baseline = x->contrast_baseline;
        r.contrast_current = x->contrast_current;
        r.contrast_delta = x->contrast_delta;
        r.centroid_col = x->centroid_col;
        r.centroid_row = x->centroid_row;
        r.distance_px = x->distance_px;
        r.area_limit_mm2 = x->area_limit_mm2;
        r.area_measured_mm2 = x->area_measured_mm2;
        r.area_margin_mm2 = x->area_margin_mm2;
        r.area_exceeds = x->area_exceeds != 0;
        r.contrast_limit = x->contrast_limit;
        r.contrast_margin = x->contrast_margin;
        r.contrast_exceeds = x->contrast_exceeds != 0;
        r.reportable = x->reportable != 0;
        r.exceeds = x->exceeds != 0;
        r.region_pixels = x->kind == PL_CHANGE_REGION ? (int64_t)x->region_pixels : -1;
        r.touches = x->kind == PL_CHANGE_REGION && x->touches >= 0 ? x->touches + 1 : -1;
        int rc = labels_text(&r.baseline_labels, x->baseline_labels, x->nbaseline, err);
        if (!rc)
            rc = labels_text(&r.current_labels, x->current_labels, x->ncurrent, err);
        if (!rc)
            rc = pl_store_add_change(store, &r, NULL, err);
        free(r.baseline_labels);
        free(r.current_labels);
        if (rc)
            return rc;
    }
    return PL_OK;
}

PL_EXPORT int pl_compare_record(pl_store *store, pl_site_comparison *sc,
                                const pl_compare_options *opts, pl_err *err)
{
    pl_compare_options defaults = PL_COMPARE_OPTIONS_INIT;
    const pl_compare_options *o = opts ? opts : &defaults;
    if (sc->comparison_id || sc->registration_id)
        return pl__err(err, PL_EINVAL, "this comparison of %s site %s is already recorded",
                       sc->site.airframe_serial, sc->site.code);
    pl_record_pair pair = { sc->reference.key, sc->current.key, sc->reference_map,
                            sc->current_map };
    char *reg_params = NULL;
    int rc = pl_record_registration_parameters(&reg_params, o->register_quantity,
                                               o->register_label, &o->reg, err);
    char *detail = NULL;
    if (!rc && sc->done)
        rc = pl_site_comparison_json(&detail, sc, err);
    if (!rc)
        rc = pl_store_begin(store, err);
    if (rc) {
        free(reg_params);
        free(detail);
        return rc;
    }
    pl_id cid = 0;
    rc = pl_record__add_registration(store, &pair, &sc->reg, 0, "phase-correlation", NULL, NULL,
                                     reg_params, &sc->registration_id, &cid, err);
    if (!rc && sc->done) {
        pl_comparison_record c;
        memset(&c, 0, sizeof c);
        c.baseline_inspection = sc->reference.key;
        c.current_inspection = sc->current.key;
        c.registration_id = sc->registration_id;
        c.criteria_id = sc->criteria_id;
        snprintf(c.status, sizeof c.status, "done");
        c.uncompared_mm2 = sc->cmp->not_compared_mm2;
        c.uncompared_fraction = sc->cmp->not_compared_fraction;
        c.parameters_json = detail;
        rc = pl_store_add_comparison(store, &c, &cid, err);
        if (!rc)
            rc = record_indications(store, cid, "baseline", sc->reference_map,
                                    sc->reference_channel, sc->reference_detection, err);
        /* the aligned map keeps the current map's channels in their order */
        if (!rc)
            rc = record_indications(store, cid, "current", sc->current_map, sc->aligned_channel,
                                    sc->current_detection, err);
        if (!rc)
            rc = record_changes(store, cid, sc->cmp, err);
    }
    free(reg_params);
    free(detail);
    if (rc) {
        pl_store_rollback(store);
        sc->registration_id = 0;
        return rc;
    }
    if ((rc = pl_store_commit(store, err))) {
        sc->registration_id = 0;
        return rc;
    }
    sc->comparison_id = cid;
    return PL_OK;
}

static int compare_loaded(pl_site_comparison *sc, const pl_map *cur, const pl_compare_options *o,
                          pl_err *err)
{
    /* registered on the channel registration prefers (the phase of a
     * thermography map: least sensitive to the flash's uneven heating),
     * unless told; every channel is carried onto the reference grid */
    int rc = pl_register_maps(&sc->reg, &sc->aligned, sc->reference_data, cur,
                              o->register_quantity, o->register_label, &o->reg, err);
    if (rc)
        return rc;
    if (sc->reg.refused) {
        pl_map_free(sc->aligned);
        sc->aligned = NULL;
        snprintf(sc->not_done_reason, sizeof sc->not_done_reason, "registration refused: %.200s",
                 sc->reg.reason);
        return PL_OK;
    }
    int ac = channel_of(sc->aligned, sc->quantity, sc->label);
    if (ac < 0)
        return pl__err(err, PL_ENOTFOUND, "the aligned map lost its %s channel", sc->quantity);
    sc->aligned_channel = (uint32_t)ac;
    pl_detect_options d = o->detect;
    if (strcmp(sc->quantity, "depth") == 0 && isnan(d.nominal))
        d.nominal = sc->site.thickness_mm;
    if ((rc = pl_detect(&sc->reference_detection, sc->reference_data, sc->reference_channel, &d,
                        err)))
        return rc;
    /* the current map's noise from its own grid: resampling onto the
     * reference grid smooths the noise, which the high-pass estimate
     * would then find too small (thresholds too low, noise called) */
    pl_detect_options dcur = d;
    int rcc = channel_of(cur, sc->quantity, sc->label);
    if (isnan(dcur.noise) && rcc >= 0 &&
        (rc = pl_detect_noise(&dcur.noise, NULL, cur, (uint32_t)rcc, &d, err)))
        return rc;
    /* a quantity whose sound level is the part's takes the reference's
     * level too (pl_detect_on_reference()) */
    rc = pl_detect_reference_level(sc->quantity)
             ? pl_detect_on_reference(&sc->current_detection, sc->aligned, sc->aligned_channel,
                                      sc->reference_detection, &dcur, err)
             : pl_detect(&sc->current_detection, sc->aligned, sc->aligned_channel, &dcur, err);
    if (rc)
        return rc;
    pl_change_input in = PL_CHANGE_INPUT_INIT;
    in.baseline = sc->reference_data;
    in.baseline_channel = sc->reference_channel;
    in.baseline_detection = sc->reference_detection;
    in.current = sc->aligned;
    in.current_channel = sc->aligned_channel;
    in.current_detection = sc->current_detection;
    in.registration_uncertainty_px = isnan(o->registration_uncertainty_px)
                                         ? PL_CHANGE_DEFAULT_REGISTRATION_UNCERTAINTY_PX
                                         : o->registration_uncertainty_px;
    pl_change_limits lim;
    change_limits_of(&lim, &sc->limits);
    if ((rc = pl_change_compare(&sc->cmp, &in, &lim, err)))
        return rc;
    sc->done = 1;
    return PL_OK;
}

PL_EXPORT int pl_compare_site(pl_site_comparison **out, pl_store *store, const char *serial,
                              const char *code, pl_id current_inspection,
                              const pl_compare_options *opts, pl_err *err)
{
    *out = NULL;
    pl_compare_options defaults = PL_COMPARE_OPTIONS_INIT;
    const pl_compare_options *o = opts ? opts : &defaults;
    if (o->version != PL_COMPARE_OPTIONS_VERSION)
        return pl__err(err, PL_EINVAL, "compare options of version %u (this library knows %u)",
                       o->version, PL_COMPARE_OPTIONS_VERSION);
    if (!pl_compare_against_name(o->against))
        return pl__err(err, PL_EINVAL, "unknown reference %d", (int)o->against);
    pl_site_comparison *sc = calloc(1, sizeof *sc);
    if (!sc)
        return pl__err(err, PL_ENOMEM, "out of memory");
    sc->against = o->against;
    int rc = pl_store_get_site(store, serial, code, &sc->site, err);
    insp_scan s;
    memset(&s, 0, sizeof s);
    if (!rc) {
        pl_inspection_filter f = { sc->site.airframe_serial, sc->site.code, NULL, NULL, NULL };
        rc = pl_store_list_inspections(store, &f, keep_inspection, &s, err);
        if (!rc && s.failed)
            rc = pl__err(err, PL_ENOMEM, "out of memory");
    }
    if (!rc)
        rc = choose_pair(sc, &s, current_inspection, o->against, err);
    free(s.all);
    const char *q = o->quantity && *o->quantity ? o->quantity : NULL;
    if (!rc && !q && !(q = default_quantity(sc->site.method)))
        rc = pl__err(err, PL_EINVAL, "%s site %s: no default quantity for method %s; name the "
                     "quantity to compare", sc->site.airframe_serial, sc->site.code,
                     sc->site.method);
    if (!rc) {
        snprintf(sc->quantity, sizeof sc->quantity, "%s", q);
        snprintf(sc->label, sizeof sc->label, "%s", o->label ? o->label : "");
        rc = first_map_of(store, &sc->reference, "reference", &sc->reference_map, err);
    }
    if (!rc)
        rc = first_map_of(store, &sc->current, "current", &sc->current_map, err);
    pl_map *cur = NULL;
    pl_map_record rr, cr;
    memset(&rr, 0, sizeof rr);
    memset(&cr, 0, sizeof cr);
    if (!rc)
        rc = pl_store_load_map(store, sc->reference_map, &sc->reference_data, &rr, err);
    if (!rc)
        rc = pl_store_load_map(store, sc->current_map, &cur, &cr, err);
    if (!rc) {
        int bc = channel_of(sc->reference_data, sc->quantity, sc->label);
        int cc = channel_of(cur, sc->quantity, sc->label);
        const char *lab = sc->label[0] ? sc->label : NULL;
        if (bc < 0 || cc < 0)
            rc = pl__err(err, PL_ENOMATCH, "%s site %s: inspections %lld and %lld cannot be "
                         "compared: the %s map (%lld) has no %s%s%s%s channel",
                         sc->site.airframe_serial, sc->site.code, (long long)sc->reference.key,
                         (long long)sc->current.key, bc < 0 ? "reference" : "current",
                         (long long)(bc < 0 ? sc->reference_map : sc->current_map), sc->quantity,
                         lab ? " \"" : "", lab ? lab : "", lab ? "\"" : "");
        else if (strcmp(sc->reference_data->channels[bc].unit, cur->channels[cc].unit) != 0)
            rc = pl__err(err, PL_ENOMATCH, "%s site %s: %s is in %s in the reference map and in "
                         "%s in the current one; maps in different units are not compared",
                         sc->site.airframe_serial, sc->site.code, sc->quantity,
                         sc->reference_data->channels[bc].unit, cur->channels[cc].unit);
        else {
            sc->reference_channel = (uint32_t)bc;
            snprintf(sc->unit, sizeof sc->unit, "%s", cur->channels[cc].unit);
            if (!sc->label[0])
                snprintf(sc->label, sizeof sc->label, "%s", cur->channels[cc].label);
            comparability_warnings(sc, &rr, &cr);
        }
    }
    free(rr.parameters_json);
    free(cr.parameters_json);
    if (!rc)
        rc = resolve_limits(sc, store, o, err);
    if (!rc)
        rc = compare_loaded(sc, cur, o, err);
    pl_map_free(cur);
    if (!rc && !o->dry_run)
        rc = pl_compare_record(store, sc, o, err);
    if (rc) {
        pl_site_comparison_free(sc);
        return rc;
    }
    *out = sc;
    return PL_OK;
}

/* ---- pictures -------------------------------------------------------------- */

PL_EXPORT int pl_site_comparison_marks(uint32_t **out, const pl_site_comparison *sc, pl_err *err)
{
    *out = NULL;
    if (!sc->done)
        return pl__err(err, PL_EINVAL, "%s site %s: the comparison was not done",
                       sc->site.airframe_serial, sc->site.code);
    const pl_comparison *c = sc->cmp;
    size_t n = (size_t)c->width * c->height;
    uint32_t *m = calloc(n ? n : 1, sizeof *m);
    /* a label's change: for the reference's and the current's labels */
    uint32_t *ref = calloc(sc->reference_detection->count + 1, sizeof *ref);
    uint32_t *cur = calloc(sc->current_detection->count + 1, sizeof *cur);
    if (!m || !ref || !cur) {
        free(m);
        free(ref);
        free(cur);
        return pl__err(err, PL_ENOMEM, "out of memory");
    }
    for (size_t i = 0; i < c->count; i++) {
        const pl_change *ch = &c->changes[i];
        for (size_t k = 0; k < ch->nbaseline; k++)
            if (ch->baseline_labels[k] <= sc->reference_detection->count)
                ref[ch->baseline_labels[k]] = (uint32_t)(i + 1);
        for (size_t k = 0; k < ch->ncurrent; k++)
            if (ch->current_labels[k] <= sc->current_detection->count)
                cur[ch->current_labels[k]] = (uint32_t)(i + 1);
    }
    for (size_t p = 0; p < n; p++) {
        uint32_t lc = sc->current_detection->labels[p], lb = sc->reference_detection->labels[p];
        if (lc && cur[lc])
            m[p] = cur[lc];
        else if (lb && ref[lb])
            m[p] = ref[lb];
        else if (c->region_labels && c->region_labels[p]) {
            for (size_t i = 0; i < c->count; i++)
                if (c->changes[i].kind == PL_CHANGE_REGION &&
                    c->changes[i].region_label == c->region_labels[p])
                    m[p] = (uint32_t)(i + 1);
        }
    }
    free(ref);
    free(cur);
    *out = m;
    return PL_OK;
}

PL_EXPORT int pl_site_comparison_difference(pl_map **out, const pl_site_comparison *sc,
                                            pl_err *err)
{
    *out = NULL;
    if (!sc->done)
        return pl__err(err, PL_EINVAL, "%s site %s: the comparison was not done",
                       sc->site.airframe_serial, sc->site.code);
    const pl_comparison *c = sc->cmp;
    pl_map *m = NULL;
    int rc = pl_map_new(&m, c->width, c->height, 1, err);
    if (!rc)
        rc = pl_map_set_channel(m, 0, sc->quantity, sc->unit, err);
    if (!rc)
        rc = pl_map_set_pitch(m, sc->reference_data->pitch_u, sc->reference_data->pitch_v, err);
    if (rc) {
        pl_map_free(m);
        return rc;
    }
    snprintf(m->channels[0].label, sizeof m->channels[0].label, "difference");
    m->placement = sc->reference_data->placement;
    memcpy(m->data, c->difference, (size_t)c->width * c->height * sizeof *m->data);
    *out = m;
    return PL_OK;
}

/* ---- counts ---------------------------------------------------------------- */

PL_EXPORT void pl_compare_counts_of(pl_compare_counts *out, const pl_site_comparison *sc)
{
    memset(out, 0, sizeof *out);
    out->sites = 1;
    if (!sc || !sc->done) {
        out->refused = 1;
        return;
    }
    out->compared = 1;
    for (size_t i = 0; i < sc->cmp->count; i++) {
        const pl_change *c = &sc->cmp->changes[i];
        if (c->reportable)
            out->kinds[c->kind]++;
        else
            out->below_min++;
    }
    out->exceeding = sc->cmp->exceeding;
    out->not_compared_mm2 = sc->cmp->not_compared_mm2;
}

static void add_counts(pl_compare_counts *a, const pl_compare_counts *b)
{
    a->sites += b->sites;
    a->compared += b->compared;
    a->refused += b->refused;
    for (int k = 0; k < PL_CHANGE_KIND_COUNT; k++)
        a->kinds[k] += b->kinds[k];
    a->exceeding += b->exceeding;
    a->below_min += b->below_min;
    a->not_compared_mm2 += b->not_compared_mm2;
}

/* ---- JSON ------------------------------------------------------------------ */

static void add_num(cJSON *o, const char *k, double v)
{
    if (isfinite(v))
        cJSON_AddNumberToObject(o, k, v);
    else
        cJSON_AddNullToObject(o, k);
}

static cJSON *inspection_json(const pl_inspection *in, pl_id map)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddNumberToObject(o, "inspection", (double)in->key);
    cJSON_AddStringToObject(o, "kind", in->kind);
    cJSON_AddStringToObject(o, "date", in->performed_on);
    cJSON_AddStringToObject(o, "task", in->task_ref);
    add_num(o, "hours", in->aircraft_hours);
    if (in->aircraft_cycles >= 0)
        cJSON_AddNumberToObject(o, "cycles", (double)in->aircraft_cycles);
    else
        cJSON_AddNullToObject(o, "cycles");
    cJSON_AddStringToObject(o, "procedure", in->procedure);
    cJSON_AddStringToObject(o, "procedure_revision", in->procedure_rev);
    cJSON_AddBoolToObject(o, "simulated", in->simulated == 1);
    cJSON_AddNumberToObject(o, "map", (double)map);
    return o;
}

static cJSON *labels_json(const uint32_t *v, size_t n)
{
    cJSON *a = cJSON_CreateArray();
    for (size_t i = 0; i < n; i++)
        cJSON_AddItemToArray(a, cJSON_CreateNumber(v[i]));
    return a;
}

/* Airframe coordinates of a map pixel position through its placement. */
static void part_xyz(double xyz[3], const pl_map *m, double col, double row)
{
    for (int i = 0; i < 3; i++)
        xyz[i] = m->placement.origin[i] + m->placement.u[i] * col * m->pitch_u +
                 m->placement.v[i] * row * m->pitch_v;
}

/* A detection as pl_detection_json() gives it; null when it cannot be made. */
static cJSON *detection_json(const pl_detection *d)
{
    char *text = NULL;
    if (pl_detection_json(&text, d, NULL))
        return cJSON_CreateNull();
    cJSON *o = cJSON_Parse(text);
    free(text);
    return o ? o : cJSON_CreateNull();
}

static cJSON *change_json(const pl_change *c, size_t number, const pl_map *grid)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddNumberToObject(o, "number", (double)number);
    cJSON_AddStringToObject(o, "kind", pl_change_kind_name(c->kind));
    cJSON_AddStringToObject(o, "match", c->match == PL_MATCH_OVERLAP    ? "overlap"
                                        : c->match == PL_MATCH_DISTANCE ? "distance"
                                        : c->match == PL_MATCH_SIGNAL   ? "signal"
                                                                        : "none");
    cJSON_AddItemToObject(o, "reference_labels", labels_json(c->baseline_labels, c->nbaseline));
    cJSON_AddItemToObject(o, "current_labels", labels_json(c->current_labels, c->ncurrent));
    cJSON *sz = cJSON_AddObjectToObject(o, "area_mm2");
    for (int r = 0; r < PL_SIZING_COUNT; r++) {
        cJSON *x = cJSON_AddObjectToObject(sz, pl_sizing_name((pl_sizing)r));
        add_num(x, "reference", c->area_baseline_mm2[r]);
        add_num(x, "current", c->area_current_mm2[r]);
        add_num(x, "change", c->area_delta_mm2[r]);
        add_num(x, "change_percent", c->area_delta_percent[r]);
    }
    add_num(o, "contrast_reference", c->contrast_baseline);
    add_num(o, "contrast_current", c->contrast_current);
    add_num(o, "contrast_change", c->contrast_delta);
    add_num(o, "centroid_col", c->centroid_col);
    add_num(o, "centroid_row", c->centroid_row);
    if (isfinite(c->centroid_col) && isfinite(grid->pitch_u)) {
        double xyz[3];
        part_xyz(xyz, grid, c->centroid_col, c->centroid_row);
        cJSON *p = cJSON_AddArrayToObject(o, "centroid_part");
        for (int i = 0; i < 3; i++)
            cJSON_AddItemToArray(p, cJSON_CreateNumber(xyz[i]));
    }
    add_num(o, "distance_px", c->distance_px);
    add_num(o, "area_limit_mm2", c->area_limit_mm2);
    add_num(o, "area_measured_mm2", c->area_measured_mm2);
    add_num(o, "area_margin_mm2", c->area_margin_mm2);
    add_num(o, "contrast_limit", c->contrast_limit);
    add_num(o, "contrast_margin", c->contrast_margin);
    cJSON_AddBoolToObject(o, "reportable", c->reportable);
    cJSON_AddBoolToObject(o, "exceeds", c->exceeds);
    if (c->kind == PL_CHANGE_REGION)
        cJSON_AddNumberToObject(o, "touches", c->touches >= 0 ? (double)(c->touches + 1) : 0);
    return o;
}

static cJSON *counts_json(const pl_compare_counts *k)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddNumberToObject(o, "sites", (double)k->sites);
    cJSON_AddNumberToObject(o, "compared", (double)k->compared);
    cJSON_AddNumberToObject(o, "refused", (double)k->refused);
    for (int i = 0; i < PL_CHANGE_KIND_COUNT; i++)
        cJSON_AddNumberToObject(o, pl_change_kind_name((pl_change_kind)i), (double)k->kinds[i]);
    cJSON_AddNumberToObject(o, "below_min_reportable", (double)k->below_min);
    cJSON_AddNumberToObject(o, "exceeding", (double)k->exceeding);
    add_num(o, "not_compared_mm2", k->not_compared_mm2);
    return o;
}

static cJSON *site_json(const pl_site_comparison *sc)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddStringToObject(o, "caution", pl_caution());
    cJSON_AddStringToObject(o, "airframe", sc->site.airframe_serial);
    cJSON *s = cJSON_AddObjectToObject(o, "site");
    cJSON_AddStringToObject(s, "code", sc->site.code);
    cJSON_AddStringToObject(s, "zone", sc->site.zone);
    cJSON_AddStringToObject(s, "method", sc->site.method);
    cJSON_AddStringToObject(s, "description", sc->site.description);
    cJSON *org = cJSON_AddArrayToObject(s, "origin");
    for (int i = 0; i < 3; i++)
        cJSON_AddItemToArray(org, cJSON_CreateNumber(sc->site.map_frame.origin[i]));
    cJSON_AddStringToObject(s, "coordinates", sc->site.map_frame.system);
    cJSON_AddStringToObject(o, "against", pl_compare_against_name(sc->against));
    cJSON_AddItemToObject(o, "reference", inspection_json(&sc->reference, sc->reference_map));
    cJSON_AddItemToObject(o, "current", inspection_json(&sc->current, sc->current_map));
    cJSON_AddBoolToObject(o, "simulated", sc->current.simulated == 1);
    cJSON *ch = cJSON_AddObjectToObject(o, "channel");
    cJSON_AddStringToObject(ch, "quantity", sc->quantity);
    cJSON_AddStringToObject(ch, "label", sc->label);
    cJSON_AddStringToObject(ch, "unit", sc->unit);
    const pl_criteria_limits *l = &sc->limits;
    cJSON *cr = cJSON_AddObjectToObject(o, "criteria");
    cJSON_AddNumberToObject(cr, "id", (double)sc->criteria_id);
    cJSON_AddStringToObject(cr, "name", l->criteria_name);
    cJSON_AddStringToObject(cr, "revision", l->criteria_revision);
    cJSON_AddStringToObject(cr, "source_document", sc->criteria_source);
    cJSON_AddBoolToObject(cr, "example_values", l->example_values);
    if (l->example_values)
        cJSON_AddStringToObject(cr, "marking", PL_CRITERIA_EXAMPLE_MARKING);
    else
        cJSON_AddNullToObject(cr, "marking");
    cJSON_AddStringToObject(cr, "rule", l->rule_name);
    cJSON_AddStringToObject(cr, "kind", pl_criteria_kind_name(l->kind));
    cJSON_AddStringToObject(cr, "vanished", pl_criteria_vanished_name(l->vanished));
    add_num(cr, "repeatability_area_mm2", l->repeatability_area_mm2);
    add_num(cr, "repeatability_contrast", l->repeatability_contrast);
    add_num(cr, "min_reportable_area_mm2", l->min_reportable_area_mm2);
    add_num(cr, "new_reportable_area_mm2", l->new_reportable_area_mm2);
    add_num(cr, "area_growth_mm2", l->area_growth_mm2);
    add_num(cr, "area_growth_percent", l->area_growth_percent);
    add_num(cr, "contrast_growth", l->contrast_growth);
    cJSON *w = cJSON_AddArrayToObject(o, "warnings");
    for (size_t i = 0; i < sc->nwarnings; i++)
        cJSON_AddItemToArray(w, cJSON_CreateString(sc->warnings[i]));
    cJSON *r = cJSON_AddObjectToObject(o, "registration");
    cJSON_AddNumberToObject(r, "id", (double)sc->registration_id);
    cJSON_AddStringToObject(r, "status", sc->reg.refused ? "refused" : "aligned");
    if (sc->reg.refused)
        cJSON_AddStringToObject(r, "refusal", sc->reg.reason);
    add_num(r, "shift_col_px", sc->reg.refused ? NAN : sc->reg.transform.dx);
    add_num(r, "shift_row_px", sc->reg.refused ? NAN : sc->reg.transform.dy);
    add_num(r, "rotation_deg", sc->reg.refused ? NAN : sc->reg.transform.rotation_deg);
    add_num(r, "ncc", sc->reg.ncc);
    add_num(r, "overlap_fraction", sc->reg.refused ? NAN : sc->reg.overlap_fraction);
    cJSON_AddStringToObject(o, "status", sc->done ? "done" : "not-done");
    if (!sc->done)
        cJSON_AddStringToObject(o, "not_done_reason", sc->not_done_reason);
    pl_compare_counts k;
    pl_compare_counts_of(&k, sc);
    cJSON_AddItemToObject(o, "counts", counts_json(&k));
    if (sc->done) {
        const pl_comparison *c = sc->cmp;
        cJSON *cov = cJSON_AddObjectToObject(o, "coverage");
        add_num(cov, "not_compared_mm2", c->not_compared_mm2);
        add_num(cov, "not_compared_fraction", c->not_compared_fraction);
        add_num(cov, "matching_tolerance_px", c->tolerance_px);
        cJSON *det = cJSON_AddObjectToObject(o, "detection");
        add_num(det, "reference_noise", sc->reference_detection->noise);
        add_num(det, "current_noise", sc->current_detection->noise);
        add_num(det, "difference_noise", c->difference_noise);
        cJSON_AddNumberToObject(det, "reference_indications",
                                (double)sc->reference_detection->count);
        cJSON_AddNumberToObject(det, "current_indications", (double)sc->current_detection->count);
        /* every indication of both maps with its measures and outline, and
         * the options as used: the current map's on the reference grid */
        cJSON_AddItemToObject(det, "reference", detection_json(sc->reference_detection));
        cJSON_AddItemToObject(det, "current", detection_json(sc->current_detection));
        cJSON_AddStringToObject(det, "current_grid", "reference (through the registration)");
        cJSON *chs = cJSON_AddArrayToObject(o, "changes");
        for (size_t i = 0; i < c->count; i++)
            cJSON_AddItemToArray(chs, change_json(&c->changes[i], i + 1, sc->reference_data));
    }
    return o;
}

static int print_json(char **out, cJSON *o, pl_err *err)
{
    *out = o ? cJSON_Print(o) : NULL;
    cJSON_Delete(o);
    return *out ? PL_OK : pl__err(err, PL_ENOMEM, "out of memory");
}

PL_EXPORT int pl_site_comparison_json(char **out, const pl_site_comparison *sc, pl_err *err)
{
    return print_json(out, site_json(sc), err);
}

/* ---- a recorded comparison, told ---------------------------------------------- */

static double num_at(const cJSON *o, const char *k)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(o, k);
    return cJSON_IsNumber(v) ? v->valuedouble : NAN;
}

static const char *str_at(const cJSON *o, const char *k)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(o, k);
    return cJSON_IsString(v) ? v->valuestring : "";
}

PL_EXPORT int pl_comparison_text(char **out, const pl_comparison_record *c, const char *indent,
                                 pl_err *err)
{
    *out = NULL;
    cJSON *j = c->parameters_json ? cJSON_Parse(c->parameters_json) : NULL;
    const cJSON *cr = cJSON_GetObjectItemCaseSensitive(j, "criteria");
    const cJSON *k = cJSON_GetObjectItemCaseSensitive(j, "counts");
    const cJSON *ch = cJSON_GetObjectItemCaseSensitive(j, "changes");
    size_t cap = 16384, n = 0;
    char *buf = malloc(cap);
    if (!buf) {
        cJSON_Delete(j);
        return pl__err(err, PL_ENOMEM, "out of memory");
    }
    buf[0] = '\0';
#define ADD(...)                                                                          \
    do {                                                                                  \
        int m_ = snprintf(buf + n, cap - n, __VA_ARGS__);                                 \
        if (m_ > 0)                                                                       \
            n = (size_t)m_ < cap - n ? n + (size_t)m_ : cap - 1;                          \
    } while (0)
    if (!cJSON_IsObject(cr) || !cJSON_IsObject(k)) {
        ADD("%s(no recorded result)\n", indent);
    } else {
        ADD("%scriteria %s rev %s, rule \"%s\" (%s)%s%s\n", indent, str_at(cr, "name"),
            str_at(cr, "revision"), str_at(cr, "rule"), str_at(cr, "kind"),
            *str_at(cr, "marking") ? " -- " : "", str_at(cr, "marking"));
        ADD("%s%.0f new, %.0f grown, %.0f stable, %.0f vanished, %.0f not compared, %.0f changed "
            "region(s); %.0f beyond their limits\n", indent, num_at(k, "new"),
            num_at(k, "grown"), num_at(k, "stable"), num_at(k, "vanished"),
            num_at(k, "not-compared"), num_at(k, "changed-region"), num_at(k, "exceeding"));
        /* the indications of both maps in their labels' order (at most
         * eight a map here; the record holds them all) */
        const cJSON *det = cJSON_GetObjectItemCaseSensitive(j, "detection");
        static const char *const sides[2] = { "reference", "current" };
        for (int sd = 0; sd < 2 && cJSON_IsObject(det); sd++) {
            const cJSON *inds = cJSON_GetObjectItemCaseSensitive(
                cJSON_GetObjectItemCaseSensitive(det, sides[sd]), "indications");
            if (!cJSON_IsArray(inds))
                continue;
            int total = cJSON_GetArraySize(inds), shown = 0;
            ADD("%sindications in the %s map: %d%s\n", indent, sides[sd], total,
                total > 8 ? " (the first 8)" : "");
            const cJSON *ind;
            cJSON_ArrayForEach(ind, inds)
            {
                if (shown++ == 8)
                    break;
                const cJSON *sz = cJSON_GetArrayItem(
                    cJSON_GetObjectItemCaseSensitive(ind, "sizes"), 0);
                const cJSON *at = cJSON_GetObjectItemCaseSensitive(ind, "centroid_part");
                ADD("%s  #%.0f %.0f mm^2 (diameter %.1f mm)", indent, num_at(ind, "label"),
                    num_at(sz, "area_mm2"), num_at(sz, "equivalent_diameter_mm"));
                if (cJSON_GetArraySize(at) == 3)
                    ADD(" at %.0f, %.0f, %.0f mm", cJSON_GetArrayItem(at, 0)->valuedouble,
                        cJSON_GetArrayItem(at, 1)->valuedouble,
                        cJSON_GetArrayItem(at, 2)->valuedouble);
                ADD("\n");
            }
        }
        const cJSON *x;
        cJSON_ArrayForEach(x, ch)
        {
            if (!cJSON_IsTrue(cJSON_GetObjectItemCaseSensitive(x, "reportable")))
                continue;
            const cJSON *a = cJSON_GetObjectItemCaseSensitive(
                cJSON_GetObjectItemCaseSensitive(x, "area_mm2"), "threshold");
            ADD("%s  %.0f %-14s %6.1f -> %6.1f mm^2, margin %+.1f mm^2%s\n", indent,
                num_at(x, "number"), str_at(x, "kind"), num_at(a, "reference"),
                num_at(a, "current"), num_at(x, "area_margin_mm2"),
                cJSON_IsTrue(cJSON_GetObjectItemCaseSensitive(x, "exceeds")) ? "  EXCEEDS" : "");
        }
    }
#undef ADD
    cJSON_Delete(j);
    *out = buf;
    return PL_OK;
}

/* ---- a whole check ----------------------------------------------------------- */

typedef struct check_scan {
    const char *task;
    pl_check_site *sites;
    size_t n, cap;
    int failed;
} check_scan;

static int keep_check_inspection(void *ud, const pl_inspection *in)
{
    check_scan *s = ud;
    if (strcasecmp(in->task_ref, s->task) != 0)
        return 0;
    for (size_t i = 0; i < s->n; i++)
        if (strcmp(s->sites[i].code, in->site_code) == 0) {
            s->sites[i].current_inspection = in->key; /* the latest of the check */
            return 0;
        }
    if (s->n == s->cap) {
        size_t cap = s->cap ? 2 * s->cap : 16;
        pl_check_site *p = realloc(s->sites, cap * sizeof *p);
        if (!p) {
            s->failed = 1;
            return 1;
        }
        s->sites = p;
        s->cap = cap;
    }
    pl_check_site *c = &s->sites[s->n++];
    memset(c, 0, sizeof *c);
    snprintf(c->code, sizeof c->code, "%s", in->site_code);
    c->current_inspection = in->key;
    return 0;
}

static int by_code(const void *a, const void *b)
{
    return strcmp(((const pl_check_site *)a)->code, ((const pl_check_site *)b)->code);
}

PL_EXPORT void pl_check_comparison_free(pl_check_comparison *cc)
{
    if (!cc)
        return;
    for (size_t i = 0; i < cc->nsites; i++)
        pl_site_comparison_free(cc->sites[i].sc);
    free(cc->sites);
    free(cc);
}

static double now_s(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

PL_EXPORT int pl_compare_check(pl_check_comparison **out, pl_store *store, const char *serial,
                               const char *task, const pl_compare_options *opts,
                               pl_progress_fn progress, void *ud, pl_err *err)
{
    *out = NULL;
    if (!task || !*task)
        return pl__err(err, PL_EINVAL, "a check is named by its task reference");
    double t0 = now_s();
    pl_airframe af;
    memset(&af, 0, sizeof af);
    int rc = pl_store_get_airframe(store, serial, &af, err);
    if (rc)
        return rc;
    check_scan s;
    memset(&s, 0, sizeof s);
    s.task = task;
    pl_inspection_filter f = { af.serial, NULL, NULL, NULL, NULL };
    rc = pl_store_list_inspections(store, &f, keep_check_inspection, &s, err);
    if (!rc && s.failed)
        rc = pl__err(err, PL_ENOMEM, "out of memory");
    if (!rc && !s.n)
        rc = pl__err(err, PL_ENOTFOUND, "%s has no inspection under task \"%s\"", serial, task);
    pl_check_comparison *cc = NULL;
    if (!rc && !(cc = calloc(1, sizeof *cc)))
        rc = pl__err(err, PL_ENOMEM, "out of memory");
    if (rc) {
        free(s.sites);
        return rc;
    }
    qsort(s.sites, s.n, sizeof *s.sites, by_code);
    cc->sites = s.sites;
    cc->nsites = s.n;
    snprintf(cc->serial, sizeof cc->serial, "%s", serial);
    snprintf(cc->task, sizeof cc->task, "%s", task);
    cc->against = opts ? opts->against : PL_AGAINST_BASELINE;
    for (size_t i = 0; i < cc->nsites && !rc; i++) {
        pl_check_site *site = &cc->sites[i];
        pl_err e = { 0 };
        site->status = pl_compare_site(&site->sc, store, serial, site->code,
                                       site->current_inspection, opts, &e);
        if (site->status == PL_ENOMEM || site->status == PL_EDB || site->status == PL_EBUSY ||
            site->status == PL_EIO) {
            /* the store or the machine failed, not the site: stop */
            rc = pl__err(err, site->status, "%s", e.msg);
            break;
        }
        if (site->status)
            snprintf(site->refusal, sizeof site->refusal, "%s", e.msg);
        pl_compare_counts k;
        pl_compare_counts_of(&k, site->sc);
        add_counts(&cc->counts, &k);
        if (progress && progress(ud, (double)(i + 1) / (double)cc->nsites))
            rc = pl__err(err, PL_ECANCELED, "comparison canceled after %zu of %zu sites", i + 1,
                         cc->nsites);
    }
    if (!rc) {
        /* the sites of the plan that the check did not inspect */
        pl_coverage *cov = NULL;
        pl_err e = { 0 };
        int cr = pl_coverage_load(&cov, store, af.serial, task, &e);
        if (cr == PL_OK)
            cc->missed = pl_coverage_missed_line(cc->missed_warning, sizeof cc->missed_warning,
                                                 cov);
        else if (cr != PL_ENOTFOUND)
            rc = pl__err(err, cr, "%s", e.msg);
        pl_coverage_free(cov);
    }
    cc->seconds = now_s() - t0;
    if (rc) {
        pl_check_comparison_free(cc);
        return rc;
    }
    *out = cc;
    return PL_OK;
}

PL_EXPORT int pl_check_comparison_json(char **out, const pl_check_comparison *cc, pl_err *err)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddStringToObject(o, "caution", pl_caution());
    cJSON_AddStringToObject(o, "airframe", cc->serial);
    cJSON_AddStringToObject(o, "task", cc->task);
    cJSON_AddStringToObject(o, "against", pl_compare_against_name(cc->against));
    if (cc->missed)
        cJSON_AddStringToObject(o, "missed_warning", cc->missed_warning);
    else
        cJSON_AddNullToObject(o, "missed_warning");
    cJSON_AddNumberToObject(o, "missed", (double)cc->missed);
    cJSON_AddItemToObject(o, "counts", counts_json(&cc->counts));
    add_num(o, "seconds", cc->seconds);
    cJSON *a = cJSON_AddArrayToObject(o, "sites");
    for (size_t i = 0; i < cc->nsites; i++) {
        const pl_check_site *s = &cc->sites[i];
        if (s->sc) {
            cJSON *x = site_json(s->sc);
            cJSON_DeleteItemFromObjectCaseSensitive(x, "caution");
            cJSON_AddItemToArray(a, x);
        } else {
            cJSON *x = cJSON_CreateObject();
            cJSON_AddStringToObject(x, "site", s->code);
            cJSON_AddNumberToObject(x, "current_inspection", (double)s->current_inspection);
            cJSON_AddStringToObject(x, "status", "refused");
            cJSON_AddStringToObject(x, "refusal", s->refusal);
            cJSON_AddItemToArray(a, x);
        }
    }
    return print_json(out, o, err);
}
