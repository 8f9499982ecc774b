/*
 * history.c - the models behind every output (plyledger/history.h): a
 * site's history gathered from the store's listings, and their JSON forms
 * built from the row descriptions.
 */
#include "record/store_int.h"

#include "common/common_int.h"
#include "plyledger/history.h"

#include <assert.h>
#include <cjson/cJSON.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

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
    int ok = root && site && cJSON_AddItemToObject(root, "site", site);
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
