/*
 * coverage.c - what one check of an airframe covered (plyledger/coverage.h).
 */
#include "plyledger/coverage.h"

#include "common/common_int.h"
#include "common/strbuf_int.h"
#include "plyledger/history.h"

#include <cjson/cJSON.h>

#include <assert.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

const char *pl_coverage_state_name(pl_coverage_state state)
{
    switch (state) {
    case PL_COVERAGE_MISSED: return "missed";
    case PL_COVERAGE_REFUSED: return "refused";
    case PL_COVERAGE_NOT_COMPARED: return "not compared";
    case PL_COVERAGE_COMPARED: return "compared";
    }
    return "unknown";
}

typedef struct gather {
    pl_coverage *cov;
    int failed;
} gather;

static int site_cb(void *ud, const pl_site *s)
{
    gather *g = ud;
    pl_coverage *c = g->cov;
    pl_coverage_site *v = realloc(c->sites, (c->nsites + 1) * sizeof *v);
    if (!v)
        return PL_ENOMEM;
    c->sites = v;
    pl_coverage_site *cs = &v[c->nsites++];
    memset(cs, 0, sizeof *cs);
    snprintf(cs->code, sizeof cs->code, "%s", s->code);
    snprintf(cs->zone, sizeof cs->zone, "%s", s->zone);
    snprintf(cs->description, sizeof cs->description, "%s", s->description);
    cs->state = PL_COVERAGE_MISSED;
    cs->area_mm2 = s->width_px && s->height_px
                       ? (double)s->width_px * s->pitch_u * (double)s->height_px * s->pitch_v
                       : NAN;
    cs->overlap_fraction = cs->compared_fraction = cs->compared_mm2 = NAN;
    return PL_OK;
}

typedef struct insp_list {
    const char *task;
    pl_inspection *v;
    size_t n;
} insp_list;

static int insp_cb(void *ud, const pl_inspection *in)
{
    insp_list *l = ud;
    if (strcasecmp(in->task_ref, l->task) != 0)
        return PL_OK;
    pl_inspection *v = realloc(l->v, (l->n + 1) * sizeof *v);
    if (!v)
        return PL_ENOMEM;
    l->v = v;
    v[l->n] = *in;
    v[l->n].parameters_json = NULL; /* not kept: owned by the read */
    l->n++;
    return PL_OK;
}

typedef struct pick {
    pl_store *store;
    pl_comparison_record best;
    char *params;
    int have, best_done;
    int rc;
} pick;

static int cmp_cb(void *ud, const pl_comparison_record *c)
{
    pick *p = ud;
    pl_inspection ref;
    memset(&ref, 0, sizeof ref);
    pl_err e = { 0 };
    if (pl_store_get_inspection(p->store, c->baseline_inspection, &ref, &e))
        return PL_OK;
    int against_baseline = strcmp(ref.kind, "baseline") == 0 ||
                           strcmp(ref.kind, "post-repair") == 0;
    pl_inspection_clear(&ref);
    if (!against_baseline)
        return PL_OK;
    int done = strcmp(c->status, "done") == 0;
    /* the latest, a done one before one not done */
    if (p->have && p->best_done && !done)
        return PL_OK;
    free(p->params);
    p->params = pl__strdup(c->parameters_json);
    if (c->parameters_json && !p->params)
        return PL_ENOMEM;
    p->best = *c;
    p->best.parameters_json = NULL;
    p->have = 1;
    p->best_done = done;
    return PL_OK;
}

static int map_cb(void *ud, const pl_map_record *m)
{
    double *area = ud;
    if (isnan(*area) && m->pitch_u > 0 && m->pitch_v > 0)
        *area = (double)m->width * m->pitch_u * (double)m->height * m->pitch_v;
    return PL_OK;
}

static int last_insp_cb(void *ud, const pl_inspection *in)
{
    *(pl_id *)ud = in->key; /* oldest first: the last one stays */
    return PL_OK;
}

/* A missed site that sets no size: the size of its latest inspection's map
 * under any task. */
static int area_from_any(pl_store *store, pl_coverage_site *cs, const char *serial,
                         pl_err *err)
{
    pl_id key = 0;
    pl_inspection_filter f = { serial, cs->code, NULL, NULL, NULL };
    int rc = pl_store_list_inspections(store, &f, last_insp_cb, &key, err);
    if (!rc && key)
        rc = pl_store_list_maps(store, key, map_cb, &cs->area_mm2, err);
    return rc;
}

static double json_num(const cJSON *o, const char *k)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(o, k);
    return cJSON_IsNumber(v) ? v->valuedouble : NAN;
}

static int site_order(const void *pa, const void *pb)
{
    const pl_coverage_site *a = pa, *b = pb;
    int ma = a->state == PL_COVERAGE_MISSED, mb = b->state == PL_COVERAGE_MISSED;
    if (ma != mb)
        return ma ? -1 : 1;
    return strcasecmp(a->code, b->code);
}

/* The inspected site `cs`: its inspection `in`, its comparison. */
static int fill_site(pl_store *store, pl_coverage_site *cs, const pl_inspection *in,
                     pl_err *err)
{
    cs->inspection = in->key;
    snprintf(cs->performed_on, sizeof cs->performed_on, "%s", in->performed_on);
    cs->simulated = in->simulated == 1;
    if (isnan(cs->area_mm2)) {
        int rc = pl_store_list_maps(store, in->key, map_cb, &cs->area_mm2, err);
        if (rc)
            return rc;
    }
    pick p;
    memset(&p, 0, sizeof p);
    p.store = store;
    int rc = pl_store_list_comparisons(store, in->key, cmp_cb, &p, err);
    if (rc) {
        free(p.params);
        return rc;
    }
    if (!p.have) {
        cs->state = PL_COVERAGE_NOT_COMPARED;
        return PL_OK;
    }
    cs->comparison = p.best.id;
    cJSON *o = cJSON_Parse(p.params ? p.params : "");
    free(p.params);
    cJSON *reg = o ? cJSON_GetObjectItemCaseSensitive(o, "registration") : NULL;
    cs->overlap_fraction = json_num(reg, "overlap_fraction");
    if (!p.best_done) {
        cs->state = PL_COVERAGE_REFUSED;
        snprintf(cs->reason, sizeof cs->reason, "%s", p.best.not_done_reason);
    } else {
        cs->state = PL_COVERAGE_COMPARED;
        cs->compared_fraction = isfinite(p.best.uncompared_fraction)
                                    ? 1.0 - p.best.uncompared_fraction
                                    : NAN;
        cs->compared_mm2 = cs->area_mm2 * cs->compared_fraction;
        double ex = json_num(cJSON_GetObjectItemCaseSensitive(o, "counts"), "exceeding");
        cs->exceeding = isfinite(ex) && ex > 0 ? (size_t)ex : 0;
    }
    cJSON_Delete(o);
    return PL_OK;
}

int pl_coverage_load(pl_coverage **out, pl_store *store, const char *serial, const char *task,
                     pl_err *err)
{
    assert(out && store && serial);
    *out = NULL;
    if (!task || !*task)
        return pl__err(err, PL_EINVAL, "a check is named by its task reference");
    pl_airframe af;
    int rc = pl_store_get_airframe(store, serial, &af, err);
    if (rc)
        return rc;
    pl_coverage *c = calloc(1, sizeof *c);
    if (!c)
        return pl__err(err, PL_ENOMEM, "coverage: out of memory");
    snprintf(c->serial, sizeof c->serial, "%s", af.serial);
    snprintf(c->task, sizeof c->task, "%s", task);
    gather g = { c, 0 };
    pl_site_filter sf = { af.serial, NULL, NULL };
    insp_list l = { task, NULL, 0 };
    rc = pl_store_list_sites(store, &sf, site_cb, &g, err);
    if (!rc && !c->nsites)
        rc = pl__err(err, PL_ENOTFOUND, "%s has no sites in its plan", af.serial);
    pl_inspection_filter inf = { af.serial, NULL, NULL, NULL, NULL };
    if (!rc)
        rc = pl_store_list_inspections(store, &inf, insp_cb, &l, err);
    if (!rc && !l.n)
        rc = pl__err(err, PL_ENOTFOUND, "%s has no inspection under task \"%s\"", af.serial,
                     task);
    for (size_t i = 0; !rc && i < c->nsites; i++) {
        pl_coverage_site *cs = &c->sites[i];
        const pl_inspection *latest = NULL;
        for (size_t k = 0; k < l.n; k++) /* oldest first: the last one wins */
            if (strcasecmp(l.v[k].site_code, cs->code) == 0)
                latest = &l.v[k];
        if (latest)
            rc = fill_site(store, cs, latest, err);
        else if (isnan(cs->area_mm2))
            rc = area_from_any(store, cs, af.serial, err);
    }
    free(l.v);
    if (rc) {
        pl_coverage_free(c);
        return rc == PL_ENOMEM ? pl__err(err, rc, "coverage: out of memory") : rc;
    }
    qsort(c->sites, c->nsites, sizeof *c->sites, site_order);
    for (size_t i = 0; i < c->nsites; i++) {
        const pl_coverage_site *cs = &c->sites[i];
        switch (cs->state) {
        case PL_COVERAGE_MISSED: c->missed++; break;
        case PL_COVERAGE_REFUSED: c->refused++; break;
        case PL_COVERAGE_NOT_COMPARED: c->not_compared++; break;
        case PL_COVERAGE_COMPARED: c->compared++; break;
        }
        if (isnan(cs->area_mm2)) {
            c->unknown_area++;
            continue;
        }
        c->plan_mm2 += cs->area_mm2;
        if (cs->state != PL_COVERAGE_MISSED)
            c->inspected_mm2 += cs->area_mm2;
        if (isfinite(cs->compared_mm2))
            c->compared_mm2 += cs->compared_mm2;
    }
    c->inspected_percent = c->plan_mm2 > 0 ? 100.0 * c->inspected_mm2 / c->plan_mm2 : NAN;
    c->compared_percent = c->plan_mm2 > 0 ? 100.0 * c->compared_mm2 / c->plan_mm2 : NAN;
    *out = c;
    return PL_OK;
}

void pl_coverage_free(pl_coverage *c)
{
    if (!c)
        return;
    free(c->sites);
    free(c);
}

size_t pl_coverage_missed_line(char *buf, size_t size, const pl_coverage *c)
{
    if (size)
        buf[0] = '\0';
    if (!c->missed || !size)
        return c->missed;
    pl_strbuf s = PL_STRBUF_INIT;
    pl_strbuf__printf(&s, "NOT INSPECTED in check %s of %s: %zu site%s of %zu (", c->task,
                      c->serial, c->missed, c->missed == 1 ? "" : "s", c->nsites);
    size_t k = 0;
    for (size_t i = 0; i < c->nsites; i++)
        if (c->sites[i].state == PL_COVERAGE_MISSED)
            pl_strbuf__printf(&s, "%s%s", k++ ? ", " : "", c->sites[i].code);
    pl_strbuf__append(&s, ")");
    snprintf(buf, size, "%s", pl_strbuf__str(&s));
    pl_strbuf__release(&s);
    return c->missed;
}

static const char *num(char *b, size_t n, double v, int prec)
{
    if (isfinite(v))
        snprintf(b, n, "%.*f", prec, v);
    else
        snprintf(b, n, "-");
    return b;
}

int pl_coverage_text(char **out, const pl_coverage *c, pl_err *err)
{
    pl_strbuf s = PL_STRBUF_INIT;
    char line[1024];
    if (pl_coverage_missed_line(line, sizeof line, c)) {
        pl_strbuf__printf(&s, "%s\n", line);
        for (size_t i = 0; i < c->nsites; i++) {
            const pl_coverage_site *cs = &c->sites[i];
            if (cs->state == PL_COVERAGE_MISSED)
                pl_strbuf__printf(&s, "  NOT INSPECTED  %-8s zone %s%s%s\n", cs->code,
                                  cs->zone[0] ? cs->zone : "-",
                                  cs->description[0] ? ", " : "", cs->description);
        }
        pl_strbuf__append(&s, "\n");
    }
    pl_strbuf__printf(&s, "coverage of check %s of %s: %zu sites in the plan; %zu compared, "
                          "%zu refused, %zu not compared, %zu missed\n",
                      c->task, c->serial, c->nsites, c->compared, c->refused, c->not_compared,
                      c->missed);
    pl_strbuf__append(&s, "  site      state         inspected   area mm2  overlap %  "
                          "compared %  compared mm2  beyond limits\n");
    for (size_t i = 0; i < c->nsites; i++) {
        const pl_coverage_site *cs = &c->sites[i];
        char a[32], o[32], f[32], m[32];
        pl_strbuf__printf(&s, "  %-8s  %-12s  %-10s %9s %10s %11s %13s  %zu%s%s%s\n", cs->code,
                          cs->state == PL_COVERAGE_MISSED ? "NOT INSPECTED"
                                                          : pl_coverage_state_name(cs->state),
                          cs->performed_on[0] ? cs->performed_on : "-",
                          num(a, sizeof a, cs->area_mm2, 0),
                          num(o, sizeof o, 100.0 * cs->overlap_fraction, 1),
                          num(f, sizeof f, 100.0 * cs->compared_fraction, 1),
                          num(m, sizeof m, cs->compared_mm2, 0), cs->exceeding,
                          cs->simulated ? "  (simulated)" : "", cs->reason[0] ? "  refused: " : "",
                          cs->reason);
    }
    char p[32], ip[32], cp[32], im[32], cm[32];
    pl_strbuf__printf(&s, "plan %s mm2; inspected %s mm2 (%s %%); compared %s mm2 (%s %%)\n",
                      num(p, sizeof p, c->plan_mm2, 0), num(im, sizeof im, c->inspected_mm2, 0),
                      num(ip, sizeof ip, c->inspected_percent, 1),
                      num(cm, sizeof cm, c->compared_mm2, 0),
                      num(cp, sizeof cp, c->compared_percent, 1));
    if (c->unknown_area)
        pl_strbuf__printf(&s, "%zu site%s of unknown area left out of the totals\n",
                          c->unknown_area, c->unknown_area == 1 ? "" : "s");
    if (c->missed)
        pl_strbuf__printf(&s, "%s\n", line);
    pl_strbuf__printf(&s, "%s\n", pl_caution());
    *out = pl_strbuf__detach(&s);
    return *out ? PL_OK : pl__err(err, PL_ENOMEM, "coverage: out of memory");
}

static void add_num(cJSON *o, const char *k, double v)
{
    if (isfinite(v))
        cJSON_AddNumberToObject(o, k, v);
    else
        cJSON_AddNullToObject(o, k);
}

int pl_coverage_json(char **out, const pl_coverage *c, pl_err *err)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddStringToObject(o, "caution", pl_caution());
    cJSON_AddStringToObject(o, "airframe", c->serial);
    cJSON_AddStringToObject(o, "task", c->task);
    char line[1024];
    if (pl_coverage_missed_line(line, sizeof line, c))
        cJSON_AddStringToObject(o, "missed_warning", line);
    else
        cJSON_AddNullToObject(o, "missed_warning");
    cJSON *m = cJSON_AddArrayToObject(o, "missed");
    for (size_t i = 0; i < c->nsites; i++)
        if (c->sites[i].state == PL_COVERAGE_MISSED)
            cJSON_AddItemToArray(m, cJSON_CreateString(c->sites[i].code));
    cJSON *k = cJSON_AddObjectToObject(o, "counts");
    cJSON_AddNumberToObject(k, "sites", (double)c->nsites);
    cJSON_AddNumberToObject(k, "missed", (double)c->missed);
    cJSON_AddNumberToObject(k, "refused", (double)c->refused);
    cJSON_AddNumberToObject(k, "not_compared", (double)c->not_compared);
    cJSON_AddNumberToObject(k, "compared", (double)c->compared);
    cJSON_AddNumberToObject(k, "unknown_area", (double)c->unknown_area);
    cJSON *t = cJSON_AddObjectToObject(o, "totals");
    add_num(t, "plan_mm2", c->plan_mm2);
    add_num(t, "inspected_mm2", c->inspected_mm2);
    add_num(t, "inspected_percent", c->inspected_percent);
    add_num(t, "compared_mm2", c->compared_mm2);
    add_num(t, "compared_percent", c->compared_percent);
    cJSON *ss = cJSON_AddArrayToObject(o, "sites");
    for (size_t i = 0; i < c->nsites; i++) {
        const pl_coverage_site *cs = &c->sites[i];
        cJSON *e = cJSON_CreateObject();
        cJSON_AddStringToObject(e, "site", cs->code);
        cJSON_AddStringToObject(e, "zone", cs->zone);
        cJSON_AddStringToObject(e, "state", pl_coverage_state_name(cs->state));
        add_num(e, "inspection", cs->inspection ? (double)cs->inspection : NAN);
        if (cs->performed_on[0])
            cJSON_AddStringToObject(e, "performed_on", cs->performed_on);
        else
            cJSON_AddNullToObject(e, "performed_on");
        cJSON_AddBoolToObject(e, "simulated", cs->simulated);
        add_num(e, "comparison", cs->comparison ? (double)cs->comparison : NAN);
        add_num(e, "area_mm2", cs->area_mm2);
        add_num(e, "overlap_fraction", cs->overlap_fraction);
        add_num(e, "compared_fraction", cs->compared_fraction);
        add_num(e, "compared_mm2", cs->compared_mm2);
        cJSON_AddNumberToObject(e, "exceeding", (double)cs->exceeding);
        if (cs->reason[0])
            cJSON_AddStringToObject(e, "refusal", cs->reason);
        else
            cJSON_AddNullToObject(e, "refusal");
        cJSON_AddItemToArray(ss, e);
    }
    *out = cJSON_Print(o);
    cJSON_Delete(o);
    return *out ? PL_OK : pl__err(err, PL_ENOMEM, "coverage: out of memory");
}

int pl_coverage_csv(char **out, const pl_coverage *c, pl_err *err)
{
    static const char *cols[] = { "airframe", "task", "site", "zone", "state", "inspection",
                                  "performed_on", "simulated", "comparison", "area_mm2",
                                  "overlap_fraction", "compared_fraction", "compared_mm2",
                                  "exceeding", "reason" };
    size_t nc = sizeof cols / sizeof *cols;
    pl_strbuf s = PL_STRBUF_INIT;
    for (size_t i = 0; i < nc; i++)
        pl__csv_field(&s, cols[i], i + 1 == nc);
    for (size_t i = 0; i < c->nsites; i++) {
        const pl_coverage_site *cs = &c->sites[i];
        pl__csv_field(&s, c->serial, 0);
        pl__csv_field(&s, c->task, 0);
        pl__csv_field(&s, cs->code, 0);
        pl__csv_field(&s, cs->zone, 0);
        pl__csv_field(&s, pl_coverage_state_name(cs->state), 0);
        pl__csv_number(&s, cs->inspection ? (double)cs->inspection : NAN, 0);
        pl__csv_field(&s, cs->performed_on, 0);
        pl__csv_number(&s, cs->simulated, 0);
        pl__csv_number(&s, cs->comparison ? (double)cs->comparison : NAN, 0);
        pl__csv_number(&s, cs->area_mm2, 0);
        pl__csv_number(&s, cs->overlap_fraction, 0);
        pl__csv_number(&s, cs->compared_fraction, 0);
        pl__csv_number(&s, cs->compared_mm2, 0);
        pl__csv_number(&s, (double)cs->exceeding, 0);
        pl__csv_field(&s, cs->reason, 1);
    }
    *out = pl_strbuf__detach(&s);
    return *out ? PL_OK : pl__err(err, PL_ENOMEM, "coverage: out of memory");
}
