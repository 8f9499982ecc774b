/*
 * history.c - the models behind every output (plyledger/history.h): a
 * site's history gathered from the store's listings, and their JSON forms
 * built from the row descriptions.
 */
#include "record/store_int.h"

#include "common/common_int.h"
#include "common/strbuf_int.h"
#include "plyledger/history.h"
#include "plyledger/render.h"

#include <assert.h>
#include <cjson/cJSON.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---- what every output shows ------------------------------------------------------ */

PL_EXPORT const char *pl_caution(void)
{
    return "plyledger supports certified NDT staff and approved data; it does not replace "
           "them. Local regulations and the design holder's data govern.";
}

PL_EXPORT const char *pl_history_data_word(int simulated)
{
    return simulated == 1 ? "simulated" : simulated == 0 ? "real" : "not recorded";
}

/* The inspection of stored map `map_id` into [out] in (clear it). */
static int map_inspection(pl_inspection *in, pl_store *store, pl_id map_id, pl_err *err)
{
    pl_id key = 0;
    int rc = pl_store__map_inspection(store, map_id, &key, err);
    memset(in, 0, sizeof *in);
    return rc ? rc : pl_store_get_inspection(store, key, in, err);
}

PL_EXPORT int pl_history_identification(char *buf, size_t size, int *simulated,
                                        pl_store *store, pl_id map_id, pl_id onto_map,
                                        const char *quantity, pl_err *err)
{
    assert(buf && size && store);
    buf[0] = '\0';
    if (simulated)
        *simulated = 0;
    pl_inspection in, base;
    int rc = map_inspection(&in, store, map_id, err);
    memset(&base, 0, sizeof base);
    if (!rc && onto_map)
        rc = map_inspection(&base, store, onto_map, err);
    if (!rc) {
        int n = pl_render_identification(buf, size, in.airframe_serial, in.site_code,
                                         in.performed_on, (long long)map_id, quantity);
        if (onto_map && n >= 0 && (size_t)n < size)
            snprintf(buf + n, size - (size_t)n, " onto %s map %lld", base.performed_on,
                     (long long)onto_map);
        for (char *p = buf; *p; p++)
            if ((unsigned char)*p < 0x20 || (unsigned char)*p > 0x7e)
                *p = '?';
        if (simulated)
            *simulated = in.simulated == 1 || base.simulated == 1;
    }
    pl_inspection_clear(&in);
    pl_inspection_clear(&base);
    return rc;
}

/* ---- gathering ------------------------------------------------------------------ */

/* Records of one table copied into a growing array. */
typedef struct gather {
    const pl_table_desc *t;
    void *items;
    size_t n, cap;
    int oom;
} gather;

static void gather_init(gather *g, pl_table table)
{
    memset(g, 0, sizeof *g);
    g->t = pl_row__table(table);
}

static int gather_one(gather *g, const void *rec)
{
    if (g->n == g->cap) {
        size_t cap = g->cap ? 2 * g->cap : 8;
        void *grown = realloc(g->items, cap * g->t->record_size);
        if (!grown) {
            g->oom = 1;
            return 1;
        }
        g->items = grown;
        g->cap = cap;
    }
    if (pl_row__copy(g->t, (char *)g->items + g->n * g->t->record_size, rec)) {
        g->oom = 1;
        return 1;
    }
    g->n++;
    return 0;
}

static int on_inspection(void *ud, const pl_inspection *in) { return gather_one(ud, in); }
static int on_map(void *ud, const pl_map_record *m) { return gather_one(ud, m); }
static int on_registration(void *ud, const pl_registration_record *g) { return gather_one(ud, g); }
static int on_comparison(void *ud, const pl_comparison_record *c) { return gather_one(ud, c); }

/* Finish a listing into a gather: the listing's status, or PL_ENOMEM. */
static int gathered(int rc, const gather *g, pl_err *err)
{
    if (!rc && g->oom)
        rc = pl__err(err, PL_ENOMEM, "out of memory");
    return rc;
}

static void release_all(const pl_table_desc *t, void *items, size_t n)
{
    for (size_t i = 0; i < n; i++)
        pl_row__release(t, (char *)items + i * t->record_size);
    free(items);
}

static int load_map(pl_history_map *hm, pl_store *store, pl_err *err)
{
    gather g;
    gather_init(&g, PL_TABLE_REGISTRATION);
    int rc = gathered(pl_store_list_registrations(store, hm->map.id, on_registration, &g, err),
                      &g, err);
    hm->registrations = g.items;
    hm->nregistrations = g.n;
    return rc;
}

static int load_inspection(pl_history_inspection *hi, pl_store *store, pl_err *err)
{
    gather g;
    gather_init(&g, PL_TABLE_MAP);
    int rc = gathered(pl_store_list_maps(store, hi->inspection.key, on_map, &g, err), &g, err);
    pl_map_record *maps = g.items;
    if (g.n && !rc && !(hi->maps = calloc(g.n, sizeof *hi->maps)))
        rc = pl__err(err, PL_ENOMEM, "out of memory");
    if (rc) {
        release_all(g.t, g.items, g.n);
        return rc;
    }
    for (size_t i = 0; i < g.n; i++)
        hi->maps[i].map = maps[i];
    hi->nmaps = g.n;
    free(maps);
    for (size_t i = 0; !rc && i < hi->nmaps; i++)
        rc = load_map(&hi->maps[i], store, err);
    if (rc)
        return rc;
    gather_init(&g, PL_TABLE_COMPARISON);
    rc = gathered(pl_store_list_comparisons(store, hi->inspection.key, on_comparison, &g, err),
                  &g, err);
    hi->comparisons = g.items;
    hi->ncomparisons = g.n;
    return rc;
}

PL_EXPORT int pl_history_load(pl_history **out, pl_store *store, const char *serial,
                              const char *code, pl_err *err)
{
    assert(out && store);
    *out = NULL;
    pl_history *h = calloc(1, sizeof *h);
    if (!h)
        return pl__err(err, PL_ENOMEM, "out of memory");
    int rc = pl_store_get_site(store, serial, code, &h->site, err);
    gather g;
    gather_init(&g, PL_TABLE_INSPECTION);
    if (!rc) {
        pl_inspection_filter f = { serial, code, NULL, NULL, NULL };
        rc = gathered(pl_store_list_inspections(store, &f, on_inspection, &g, err), &g, err);
    }
    if (!rc && g.n && !(h->inspections = calloc(g.n, sizeof *h->inspections)))
        rc = pl__err(err, PL_ENOMEM, "out of memory");
    if (rc) {
        release_all(g.t, g.items, g.n);
        free(h);
        return rc;
    }
    pl_inspection *found = g.items;
    for (size_t i = 0; i < g.n; i++)
        h->inspections[i].inspection = found[i];
    h->ninspections = g.n;
    free(found);
    for (size_t i = 0; !rc && i < h->ninspections; i++)
        rc = load_inspection(&h->inspections[i], store, err);
    if (rc) {
        pl_history_free(h);
        return rc;
    }
    *out = h;
    return PL_OK;
}

PL_EXPORT void pl_history_free(pl_history *h)
{
    if (!h)
        return;
    for (size_t i = 0; i < h->ninspections; i++) {
        pl_history_inspection *hi = &h->inspections[i];
        for (size_t j = 0; j < hi->nmaps; j++) {
            pl_row__release(pl_row__table(PL_TABLE_MAP), &hi->maps[j].map);
            release_all(pl_row__table(PL_TABLE_REGISTRATION), hi->maps[j].registrations,
                        hi->maps[j].nregistrations);
        }
        free(hi->maps);
        release_all(pl_row__table(PL_TABLE_COMPARISON), hi->comparisons, hi->ncomparisons);
        pl_row__release(pl_row__table(PL_TABLE_INSPECTION), &hi->inspection);
    }
    free(h->inspections);
    free(h);
}

/* ---- JSON ------------------------------------------------------------------------- */

/* records[0..n) of `table` as a JSON array under `key` of `o`; 0 when out
 * of memory. */
static int add_records(cJSON *o, const char *key, pl_table table, const void *records,
                       size_t n, size_t stride)
{
    cJSON *a = cJSON_AddArrayToObject(o, key);
    for (size_t i = 0; a && i < n; i++) {
        cJSON *item = pl_row__json(pl_row__table(table), (const char *)records + i * stride);
        if (!item || !cJSON_AddItemToArray(a, item)) {
            cJSON_Delete(item);
            return 0;
        }
    }
    return a != NULL;
}

static cJSON *inspection_json(const pl_history_inspection *hi)
{
    cJSON *o = pl_row__json(pl_row__table(PL_TABLE_INSPECTION), &hi->inspection);
    cJSON *maps = o ? cJSON_AddArrayToObject(o, "maps") : NULL;
    int ok = maps != NULL;
    for (size_t j = 0; ok && j < hi->nmaps; j++) {
        const pl_history_map *hm = &hi->maps[j];
        cJSON *m = pl_row__json(pl_row__table(PL_TABLE_MAP), &hm->map);
        ok = m && cJSON_AddItemToArray(maps, m);
        if (!ok)
            cJSON_Delete(m);
        ok = ok && add_records(m, "registrations", PL_TABLE_REGISTRATION, hm->registrations,
                               hm->nregistrations, sizeof *hm->registrations);
    }
    ok = ok && add_records(o, "comparisons", PL_TABLE_COMPARISON, hi->comparisons,
                           hi->ncomparisons, sizeof *hi->comparisons);
    if (!ok) {
        cJSON_Delete(o);
        return NULL;
    }
    return o;
}

PL_EXPORT int pl_history_json(char **out, const pl_history *h, pl_err *err)
{
    assert(out && h);
    cJSON *root = cJSON_CreateObject();
    cJSON *site = pl_row__json(pl_row__table(PL_TABLE_SITE), &h->site);
    int ok = root && site && cJSON_AddStringToObject(root, "caution", pl_caution())
             && cJSON_AddItemToObject(root, "site", site);
    if (!ok)
        cJSON_Delete(site);
    cJSON *list = ok ? cJSON_AddArrayToObject(root, "inspections") : NULL;
    ok = list != NULL;
    for (size_t i = 0; ok && i < h->ninspections; i++) {
        cJSON *o = inspection_json(&h->inspections[i]);
        ok = o && cJSON_AddItemToArray(list, o);
        if (!ok)
            cJSON_Delete(o);
    }
    if (!ok) {
        cJSON_Delete(root);
        root = NULL;
    }
    return pl_row__print_json(out, root, err);
}

static int on_operator(void *ud, const char *name, const char *since, const char *recorded_at)
{
    pl_operator op;
    memset(&op, 0, sizeof op);
    snprintf(op.operator_name, sizeof op.operator_name, "%s", name);
    snprintf(op.since, sizeof op.since, "%s", since);
    snprintf(op.recorded_at, sizeof op.recorded_at, "%s", recorded_at);
    return gather_one(ud, &op);
}

PL_EXPORT int pl_operators_json(char **out, pl_store *store, const char *serial, pl_err *err)
{
    assert(out && store);
    *out = NULL;
    gather g;
    gather_init(&g, PL_TABLE_OPERATOR);
    int rc = gathered(pl_store_list_operators(store, serial, on_operator, &g, err), &g, err);
    cJSON *root = rc ? NULL : cJSON_CreateObject();
    if (root && !(cJSON_AddStringToObject(root, "airframe", serial ? serial : "") &&
                  add_records(root, "operators", PL_TABLE_OPERATOR, g.items, g.n,
                              g.t->record_size))) {
        cJSON_Delete(root);
        root = NULL;
    }
    release_all(g.t, g.items, g.n);
    return rc ? rc : pl_row__print_json(out, root, err);
}

/* ---- a registration's summary ----------------------------------------------------- */

typedef struct find_registration {
    pl_id id;
    pl_registration_record *out;
    int found, oom;
} find_registration;

static int on_summary_registration(void *ud, const pl_registration_record *g)
{
    find_registration *f = ud;
    if (g->id != f->id)
        return 0;
    f->found = 1;
    f->oom = pl_row__copy(pl_row__table(PL_TABLE_REGISTRATION), f->out, g) != PL_OK;
    return 1;
}

PL_EXPORT int pl_registration_summary_load(pl_registration_summary *out, pl_store *store,
                                           const char *serial, const char *code,
                                           const pl_record_pair *pair, pl_id registration_id,
                                           pl_id comparison_id, pl_err *err)
{
    assert(out && store && pair);
    memset(out, 0, sizeof *out);
    snprintf(out->airframe_serial, sizeof out->airframe_serial, "%s", serial ? serial : "");
    snprintf(out->site_code, sizeof out->site_code, "%s", code ? code : "");
    out->pair = *pair;
    out->comparison_not_done = comparison_id;
    find_registration f = { registration_id, &out->registration, 0, 0 };
    int rc = pl_store_list_registrations(store, pair->current_map, on_summary_registration, &f,
                                         err);
    if (!rc && f.oom)
        rc = pl__err(err, PL_ENOMEM, "out of memory");
    if (!rc && !f.found)
        rc = pl__err(err, PL_ENOTFOUND, "registration %lld of map %lld: not recorded",
                     (long long)registration_id, (long long)pair->current_map);
    for (int k = 0; !rc && k < 2; k++) {
        pl_inspection in;
        memset(&in, 0, sizeof in);
        rc = pl_store_get_inspection(store, k ? pair->current_inspection
                                              : pair->baseline_inspection, &in, err);
        out->simulated |= !rc && in.simulated == 1;
        pl_inspection_clear(&in);
    }
    if (rc) {
        pl_row__release(pl_row__table(PL_TABLE_REGISTRATION), &out->registration);
        memset(out, 0, sizeof *out);
    }
    return rc;
}

PL_EXPORT void pl_registration_summary_clear(pl_registration_summary *s)
{
    if (!s)
        return;
    pl_row__release(pl_row__table(PL_TABLE_REGISTRATION), &s->registration);
    memset(s, 0, sizeof *s);
}

/* Text under `key`, or null when it is NULL; 0 when out of memory. */
static int add_text_or_null(cJSON *o, const char *key, const char *v)
{
    return v ? cJSON_AddStringToObject(o, key, v) != NULL : cJSON_AddNullToObject(o, key) != NULL;
}

static int add_id_or_null(cJSON *o, const char *key, pl_id v)
{
    return v ? cJSON_AddNumberToObject(o, key, (double)v) != NULL
             : cJSON_AddNullToObject(o, key) != NULL;
}

/* `o` with `first` before its own items; NULL (and o deleted) when out of
 * memory. */
static cJSON *prepend(cJSON *first, cJSON *o)
{
    if (!first || !o) {
        cJSON_Delete(first);
        cJSON_Delete(o);
        return NULL;
    }
    while (o->child) {
        cJSON *item = cJSON_DetachItemViaPointer(o, o->child);
        char *key = item->string; /* moved over: cJSON would free it first */
        item->string = NULL;
        int ok = cJSON_AddItemToObject(first, key, item);
        cJSON_free(key);
        if (!ok) {
            cJSON_Delete(item);
            cJSON_Delete(o);
            cJSON_Delete(first);
            return NULL;
        }
    }
    cJSON_Delete(o);
    return first;
}

PL_EXPORT int pl_registration_summary_json(char **out, const pl_registration_summary *s,
                                           pl_err *err)
{
    assert(out && s);
    cJSON *head = cJSON_CreateObject();
    int ok = head && cJSON_AddStringToObject(head, "caution", pl_caution())
             && cJSON_AddStringToObject(head, "airframe", s->airframe_serial)
             && cJSON_AddStringToObject(head, "site", s->site_code)
             && add_id_or_null(head, "baseline_inspection", s->pair.baseline_inspection)
             && add_id_or_null(head, "current_inspection", s->pair.current_inspection)
             && cJSON_AddBoolToObject(head, "simulated", s->simulated);
    cJSON *o = prepend(ok ? head : (cJSON_Delete(head), NULL),
                       pl_row__json(pl_row__table(PL_TABLE_REGISTRATION), &s->registration));
    if (o && !(add_id_or_null(o, "comparison_not_done", s->comparison_not_done)
               && add_text_or_null(o, "aligned", s->aligned)
               && add_text_or_null(o, "view", s->view))) {
        cJSON_Delete(o);
        o = NULL;
    }
    return pl_row__print_json(out, o, err);
}

/* ---- a reduction's outcome ------------------------------------------------------------- */

PL_EXPORT int pl_reduction_json(char **out, const pl_reduction_summary *r, pl_err *err)
{
    assert(out && r && r->map);
    const pl_map *m = r->map;
    cJSON *o = cJSON_CreateObject();
    int ok = o && add_text_or_null(o, "sequence", r->sequence)
             && cJSON_AddNumberToObject(o, "width", m->width)
             && cJSON_AddNumberToObject(o, "height", m->height)
             && cJSON_AddNumberToObject(o, "frames_used", r->stats.frames_used)
             && cJSON_AddNumberToObject(o, "samples_used", r->stats.samples_used)
             && cJSON_AddNumberToObject(o, "saturated_values", (double)r->stats.saturated_values)
             && cJSON_AddNumberToObject(o, "pixels_masked", r->stats.pixels_masked)
             && cJSON_AddNumberToObject(o, "pixels_partial", r->stats.pixels_partial)
             && add_records(o, "channels", PL_TABLE_MAP_CHANNEL, m->channels, m->nchannels,
                            sizeof *m->channels);
    cJSON *params = ok && r->parameters_json ? cJSON_Parse(r->parameters_json) : NULL;
    ok = ok && (params ? cJSON_AddItemToObject(o, "parameters", params)
                       : (cJSON_AddNullToObject(o, "parameters") != NULL));
    ok = ok && add_text_or_null(o, "output", r->output)
         && add_id_or_null(o, "inspection", r->inspection_key)
         && add_id_or_null(o, "map", r->map_id);
    if (!ok) {
        cJSON_Delete(o);
        o = NULL;
    }
    return pl_row__print_json(out, o, err);
}

/* ---- a store's summary ------------------------------------------------------------------ */

PL_EXPORT int pl_summary_json(char **out, const pl_store_summary *s, const char *path,
                              pl_err *err)
{
    assert(out && s);
    const pl_vocabulary *kinds = pl_vocabulary_get(PL_VOCAB_INSPECTION_KIND);
    cJSON *o = cJSON_CreateObject();
    int ok = o && cJSON_AddStringToObject(o, "caution", pl_caution())
             && add_text_or_null(o, "store", path)
             && cJSON_AddStringToObject(o, "store_id", s->store_id)
             && cJSON_AddNumberToObject(o, "schema_version", s->schema_version)
             && cJSON_AddStringToObject(o, "created_at", s->created_at)
             && cJSON_AddStringToObject(o, "created_by", s->created_by);
    const struct {
        const char *key;
        int64_t n;
    } counts[] = {
        { "airframes", s->airframes }, { "sites", s->sites }, { "inspections", s->inspections },
    }, more[] = {
        { "maps", s->maps }, { "map_bytes", s->map_bytes }, { "corrections", s->corrections },
        { "indications", s->indications }, { "registrations", s->registrations },
        { "comparisons", s->comparisons }, { "dispositions", s->dispositions },
        { "ledger_links", s->ledger_links }, { "people", s->people },
        { "packages_received", s->received },
    };
    for (size_t i = 0; ok && i < sizeof counts / sizeof counts[0]; i++)
        ok = cJSON_AddNumberToObject(o, counts[i].key, (double)counts[i].n) != NULL;
    cJSON *by = ok ? cJSON_AddObjectToObject(o, "inspections_by_kind") : NULL;
    ok = by != NULL;
    for (size_t i = 0; ok && i < kinds->count; i++)
        ok = cJSON_AddNumberToObject(by, kinds->words[i], (double)s->inspections_by_kind[i])
             != NULL;
    ok = ok && cJSON_AddNumberToObject(o, "simulated_inspections",
                                       (double)s->simulated_inspections)
         && cJSON_AddNumberToObject(o, "simulated_unknown", (double)s->unknown_inspections);
    for (size_t i = 0; ok && i < sizeof more / sizeof more[0]; i++)
        ok = cJSON_AddNumberToObject(o, more[i].key, (double)more[i].n) != NULL;
    ok = ok && add_text_or_null(o, "seal_key", s->seal_key[0] ? s->seal_key : NULL);
    int dated = s->first_inspection[0] != '\0';
    ok = ok && add_text_or_null(o, "first_inspection", dated ? s->first_inspection : NULL)
         && add_text_or_null(o, "last_inspection", dated ? s->last_inspection : NULL);
    if (!ok) {
        cJSON_Delete(o);
        o = NULL;
    }
    return pl_row__print_json(out, o, err);
}

/* ---- a site's history as a table -------------------------------------------------- */

/* The counts a done comparison recorded in its parameters ("counts"). */
static double count_at(const cJSON *counts, const char *key)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(counts, key);
    return cJSON_IsNumber(v) ? v->valuedouble : NAN;
}

PL_EXPORT int pl_history_csv(char **out, const pl_history *h, pl_err *err)
{
    assert(out && h);
    static const char *const cols[] = {
        "airframe", "site", "inspection", "version", "performed_on", "kind", "task",
        "flight_hours", "flight_cycles", "simulated", "procedure", "procedure_rev",
        "inspector", "inspector_level", "equipment", "calibration", "software", "maps",
        "comparison", "against_inspection", "comparison_status", "criteria", "new", "grown",
        "stable", "vanished", "not_compared", "changed_regions", "exceeding",
        "not_compared_mm2", "not_done_reason", "comparisons"
    };
    const size_t nc = sizeof cols / sizeof *cols;
    pl_strbuf s = PL_STRBUF_INIT;
    for (size_t i = 0; i < nc; i++)
        pl__csv_field(&s, cols[i], i + 1 == nc);
    for (size_t i = 0; i < h->ninspections; i++) {
        const pl_history_inspection *hi = &h->inspections[i];
        const pl_inspection *in = &hi->inspection;
        pl__csv_field(&s, in->airframe_serial, 0);
        pl__csv_field(&s, in->site_code, 0);
        pl__csv_number(&s, (double)in->key, 0);
        pl__csv_number(&s, (double)in->id, 0);
        pl__csv_field(&s, in->performed_on, 0);
        pl__csv_field(&s, in->kind, 0);
        pl__csv_field(&s, in->task_ref, 0);
        pl__csv_number(&s, in->aircraft_hours, 0);
        pl__csv_number(&s, in->aircraft_cycles >= 0 ? (double)in->aircraft_cycles : NAN, 0);
        pl__csv_field(&s, pl_history_data_word(in->simulated), 0);
        pl__csv_field(&s, in->procedure, 0);
        pl__csv_field(&s, in->procedure_rev, 0);
        pl__csv_field(&s, in->inspector, 0);
        pl__csv_field(&s, in->inspector_level, 0);
        pl__csv_field(&s, in->equipment, 0);
        pl__csv_field(&s, in->calibration_ref, 0);
        pl__csv_field(&s, in->software_version, 0);
        /* the maps' ids, space-separated */
        pl_strbuf ids = PL_STRBUF_INIT;
        for (size_t j = 0; j < hi->nmaps; j++)
            pl_strbuf__printf(&ids, "%s%lld", j ? " " : "", (long long)hi->maps[j].map.id);
        if (pl_strbuf__failed(&ids))
            s.failed = 1;
        pl__csv_field(&s, pl_strbuf__str(&ids), 0);
        pl_strbuf__release(&ids);
        /* the latest comparison of the inspection (the record keeps them all;
         * "comparisons" says how many) */
        const pl_comparison_record *c = hi->ncomparisons ? &hi->comparisons[hi->ncomparisons - 1]
                                                         : NULL;
        cJSON *j = c && c->parameters_json ? cJSON_Parse(c->parameters_json) : NULL;
        const cJSON *k = cJSON_GetObjectItemCaseSensitive(j, "counts");
        const cJSON *cr = cJSON_GetObjectItemCaseSensitive(j, "criteria");
        pl__csv_number(&s, c ? (double)c->id : NAN, 0);
        pl__csv_number(&s, c ? (double)c->baseline_inspection : NAN, 0);
        pl__csv_field(&s, c ? c->status : "", 0);
        char crit[2 * PL_NAME_SIZE] = "";
        const cJSON *cn = cJSON_GetObjectItemCaseSensitive(cr, "name");
        const cJSON *cv = cJSON_GetObjectItemCaseSensitive(cr, "revision");
        if (cJSON_IsString(cn) && cJSON_IsString(cv))
            snprintf(crit, sizeof crit, "%s rev %s", cn->valuestring, cv->valuestring);
        pl__csv_field(&s, crit, 0);
        static const char *const kinds[] = { "new", "grown", "stable", "vanished",
                                             "not-compared", "changed-region", "exceeding" };
        for (size_t q = 0; q < sizeof kinds / sizeof *kinds; q++)
            pl__csv_number(&s, count_at(k, kinds[q]), 0);
        cJSON_Delete(j);
        pl__csv_number(&s, c ? c->uncompared_mm2 : NAN, 0);
        pl__csv_field(&s, c ? c->not_done_reason : "", 0);
        pl__csv_number(&s, (double)hi->ncomparisons, 1);
    }
    *out = pl_strbuf__detach(&s);
    return *out ? PL_OK : pl__err(err, PL_ENOMEM, "history: out of memory");
}
