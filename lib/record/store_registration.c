/*
 * store_registration.c - registrations of a map onto a baseline map and the
 * comparisons of a site's inspections (plyledger/store.h).
 */
#include "record/store_int.h"

#include "common/common_int.h"

#include <assert.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---- registrations ---------------------------------------------------------------- */

/* Where a map stands in its site's history: the site, and the key, kind and
 * date of the inspection it belongs to. */
typedef struct map_owner {
    pl_id site, inspection;
    char kind[PL_WORD_SIZE];
    char performed_on[PL_DATE_SIZE];
    int simulated;  /* 1, 0, or -1 not recorded */
} map_owner;

static int find_map_owner(pl_store *s, pl_id map_id, map_owner *o, const char *label,
                          pl_err *err)
{
    sqlite3_stmt *st;
    char missing[48];
    snprintf(missing, sizeof missing, "no map %lld", (long long)map_id);
    int rc = pl_store__row_by_id(s, &st,
                                 "SELECT i.site_key, i.stable_key, i.kind, i.performed_on, "
                                 "i.simulated FROM "
                                 "map m JOIN inspection_current i ON i.stable_key = "
                                 "m.inspection_key WHERE m.id = ?1", map_id, err, label, missing);
    if (rc)
        return rc;
    o->site = sqlite3_column_int64(st, 0);
    o->inspection = sqlite3_column_int64(st, 1);
    pl_store__col_text(st, 2, o->kind, sizeof o->kind);
    pl_store__col_text(st, 3, o->performed_on, sizeof o->performed_on);
    o->simulated = sqlite3_column_type(st, 4) == SQLITE_NULL ? -1
                                                             : sqlite3_column_int64(st, 4) != 0;
    sqlite3_finalize(st);
    return PL_OK;
}

/* Whether inspection `a` comes before `b` in a site's history: by date,
 * then as recorded (the order of pl_store_list_inspections()). */
static int inspected_before(const map_owner *a, const map_owner *b)
{
    int d = strcmp(a->performed_on, b->performed_on);
    return d < 0 || (d == 0 && a->inspection < b->inspection);
}

static int finite_all(const double *v, size_t n)
{
    for (size_t i = 0; i < n; i++)
        if (!isfinite(v[i]))
            return 0;
    return 1;
}

static int check_registration(const pl_registration_record *r, const char *label, pl_err *err)
{
    int rc = pl_row__check(pl_row__table(PL_TABLE_REGISTRATION), r, label, err);
    if (rc)
        return rc;
    int manual = strcmp(r->status, "manual") == 0;
    int refused = strcmp(r->status, "refused") == 0;
    if (refused && !r->refusal[0])
        return pl__err(err, PL_EINVAL, "%s: a refused registration needs its reason", label);
    if (manual && (!r->supplied_by[0] || !r->supplied_reason[0]))
        return pl__err(err, PL_EINVAL,
                       "%s: a manual registration needs who supplied it and why", label);
    if (!refused) {
        double t[] = { r->shift_col_px, r->shift_row_px, r->shift_u_mm, r->shift_v_mm,
                       r->rotation_deg, r->scale, r->overlap_fraction, r->overlap_mm2 };
        if (!finite_all(t, sizeof t / sizeof t[0]) || !(r->scale > 0))
            return pl__err(err, PL_EINVAL,
                           "%s: an applied registration needs a finite transform (scale > 0) "
                           "and its overlap", label);
        if (r->overlap_fraction < 0 || r->overlap_fraction > 1 || r->overlap_mm2 < 0)
            return pl__err(err, PL_EINVAL, "%s: overlap out of range", label);
    }
    return PL_OK;
}

PL_EXPORT int pl_store_add_registration(pl_store *s, const pl_registration_record *r, pl_id *id,
                                        pl_err *err)
{
    assert(s && r);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "registration of map %lld onto map %lld",
             (long long)r->current_map_id, (long long)r->baseline_map_id);
    int rc = check_registration(r, label, err);
    if (rc)
        return rc;
    map_owner base, cur;
    if ((rc = find_map_owner(s, r->baseline_map_id, &base, label, err)) ||
        (rc = find_map_owner(s, r->current_map_id, &cur, label, err)))
        return rc;
    if (base.site != cur.site)
        return pl__err(err, PL_ENOMATCH, "%s: the maps belong to different sites", label);
    if (r->baseline_map_id == r->current_map_id)
        return pl__err(err, PL_EINVAL, "%s: a map cannot be registered onto itself", label);
    if (strcmp(base.kind, "baseline") != 0 && !inspected_before(&base, &cur))
        return pl__err(err, PL_EINVAL,
                       "%s: map %lld is of a %s inspection (%s) that is not earlier than map "
                       "%lld's (%s)", label, (long long)r->baseline_map_id, base.kind,
                       base.performed_on, (long long)r->current_map_id, cur.performed_on);
    if (base.simulated == 1 && cur.simulated == 0)
        return pl__err(err, PL_EINVAL,
                       "%s: map %lld is of a simulated inspection (%lld, %s) and cannot be the "
                       "baseline of map %lld, which is of a real inspection", label,
                       (long long)r->baseline_map_id, (long long)base.inspection,
                       base.performed_on, (long long)r->current_map_id);
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_REGISTRATION), r);
    return pl_store__write_row(s, &row, id, err, label);
}

/* The rows of `table` that `where` selects with `id` as ?1, oldest first. */
static int list_for(pl_store *s, pl_table table, const char *where, pl_id id, pl_row_fn fn,
                    void *cb, pl_err *err)
{
    pl_value arg = pl_store__arg_id(id);
    return pl_store__list(s, table, where, &arg, 1, fn, cb, err, NULL);
}

PL_STORE_CALLBACK(registration, pl_registration_fn)

PL_EXPORT int pl_store_list_registrations(pl_store *s, pl_id current_map_id,
                                          pl_registration_fn fn, void *ud, pl_err *err)
{
    assert(s && fn);
    registration_cb cb = { fn, ud };
    return list_for(s, PL_TABLE_REGISTRATION, "WHERE ?1 = 0 OR t.current_map_id = ?1 "
                    "ORDER BY t.id", current_map_id, call_registration, &cb, err);
}

/* ---- comparisons --------------------------------------------------------------------- */

/* The site key of an inspection (by key), and whether it is simulated (1,
 * 0, or -1 not recorded). */
static int inspection_site_key(pl_store *s, pl_id key, pl_id *site, int *simulated,
                               const char *label, pl_err *err)
{
    char missing[64];
    snprintf(missing, sizeof missing, "no inspection with key %lld", (long long)key);
    sqlite3_stmt *st;
    int rc = pl_store__row_by_id(s, &st, "SELECT site_key, simulated FROM inspection_current "
                                 "WHERE stable_key = ?1", key, err, label, missing);
    if (rc)
        return rc;
    *site = sqlite3_column_int64(st, 0);
    *simulated = sqlite3_column_type(st, 1) == SQLITE_NULL ? -1
                                                           : sqlite3_column_int64(st, 1) != 0;
    sqlite3_finalize(st);
    return PL_OK;
}

static int check_comparison(const pl_comparison_record *c, const char *label, pl_err *err)
{
    int rc = pl_row__check(pl_row__table(PL_TABLE_COMPARISON), c, label, err);
    if (rc)
        return rc;
    if (strcmp(c->status, "not-done") == 0 && !c->not_done_reason[0])
        return pl__err(err, PL_EINVAL, "%s: a comparison not done needs its reason", label);
    if (c->baseline_inspection == c->current_inspection)
        return pl__err(err, PL_EINVAL, "%s: an inspection cannot be compared with itself", label);
    return PL_OK;
}

PL_EXPORT int pl_store_add_comparison(pl_store *s, const pl_comparison_record *c, pl_id *id,
                                      pl_err *err)
{
    assert(s && c);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "comparison of inspection %lld with %lld",
             (long long)c->current_inspection, (long long)c->baseline_inspection);
    int rc = check_comparison(c, label, err);
    pl_id bsite = 0, csite = 0;
    int bsim = -1, csim = -1;
    if (!rc)
        rc = inspection_site_key(s, c->baseline_inspection, &bsite, &bsim, label, err);
    if (!rc)
        rc = inspection_site_key(s, c->current_inspection, &csite, &csim, label, err);
    if (rc)
        return rc;
    if (bsite != csite)
        return pl__err(err, PL_ENOMATCH, "%s: the inspections are of different sites", label);
    if (bsim == 1 && csim == 0)
        return pl__err(err, PL_EINVAL, "%s: inspection %lld is simulated and cannot be the "
                       "baseline of inspection %lld, which is real", label,
                       (long long)c->baseline_inspection, (long long)c->current_inspection);
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_COMPARISON), c);
    pl_row__set_id(&row, "site_key", bsite);
    return pl_store__write_row(s, &row, id, err, label);
}

PL_STORE_CALLBACK(comparison, pl_comparison_fn)

PL_EXPORT int pl_store_list_comparisons(pl_store *s, pl_id current_inspection,
                                        pl_comparison_fn fn, void *ud, pl_err *err)
{
    assert(s && fn);
    comparison_cb cb = { fn, ud };
    return list_for(s, PL_TABLE_COMPARISON, "WHERE ?1 = 0 OR t.current_inspection = ?1 "
                    "ORDER BY t.id", current_inspection, call_comparison, &cb, err);
}

/* ---- indications and changes ------------------------------------------------------ */

static int check_count(int64_t v, int64_t min, const char *field, const char *label,
                       pl_err *err)
{
    if (v < min)
        return pl__err(err, PL_EINVAL, "%s: %s must be %lld or more (got %lld)", label, field,
                       (long long)min, (long long)v);
    return PL_OK;
}

static int check_indication(const pl_indication_record *r, const char *label, pl_err *err)
{
    int rc = pl_row__check(pl_row__table(PL_TABLE_INDICATION), r, label, err);
    if (!rc)
        rc = check_count(r->channel, 0, "channel", label, err);
    if (!rc)
        rc = check_count(r->label, 1, "label", label, err);
    if (!rc)
        rc = check_count(r->area_px, 1, "area_px", label, err);
    if (!rc)
        rc = check_count(r->area_halfmax_px, 1, "area_halfmax_px", label, err);
    if (!rc && (r->bbox_col0 < 0 || r->bbox_row0 < 0 || r->bbox_col1 < r->bbox_col0 ||
                r->bbox_row1 < r->bbox_row0))
        rc = pl__err(err, PL_EINVAL, "%s: the bounding box (%lld, %lld)-(%lld, %lld) is not "
                     "first corner then last", label, (long long)r->bbox_col0,
                     (long long)r->bbox_row0, (long long)r->bbox_col1, (long long)r->bbox_row1);
    if (!rc && !isnan(r->orientation_deg) &&
        !(r->orientation_deg > -90.0 && r->orientation_deg <= 90.0))
        rc = pl__err(err, PL_EINVAL, "%s: orientation_deg must lie in (-90, 90] (got %g)", label,
                     r->orientation_deg);
    return rc;
}

PL_EXPORT int pl_store_add_indication(pl_store *s, const pl_indication_record *r, pl_id *id,
                                      pl_err *err)
{
    assert(s && r);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "indication %lld (%s) of comparison %lld", (long long)r->label,
             r->role, (long long)r->comparison_id);
    int rc = check_indication(r, label, err);
    if (rc)
        return rc;
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_INDICATION), r);
    return pl_store__write_row(s, &row, id, err, label);
}

PL_STORE_CALLBACK(indication, pl_indication_fn)

PL_EXPORT int pl_store_list_indications(pl_store *s, pl_id comparison_id, pl_indication_fn fn,
                                        void *ud, pl_err *err)
{
    assert(s && fn);
    indication_cb cb = { fn, ud };
    return list_for(s, PL_TABLE_INDICATION, "WHERE ?1 = 0 OR t.comparison_id = ?1 "
                    "ORDER BY t.comparison_id, t.role, t.label", comparison_id,
                    call_indication, &cb, err);
}

/* A JSON array of distinct labels >= 1, in increasing order. */
static int check_labels(const char *text, const char *field, const char *label, pl_err *err)
{
    const char *p = text ? text : "";
    int ok = *p++ == '[';
    long long last = 0;
    while (ok && *p != ']') {
        if (last && *p++ != ',') {
            ok = 0;
            break;
        }
        char *end;
        if (*p < '1' || *p > '9') {
            ok = 0;
            break;
        }
        long long v = strtoll(p, &end, 10);
        ok = v > last && end != p;
        last = v;
        p = end;
    }
    if (ok && p[1] != '\0')
        ok = 0;
    if (!ok)
        return pl__err(err, PL_EINVAL, "%s: %s must be a JSON array of labels in increasing "
                       "order, like [1,4] or [] (got '%.40s')", label, field, text ? text : "");
    return PL_OK;
}

PL_EXPORT int pl_store_add_change(pl_store *s, const pl_change_record *r, pl_id *id,
                                  pl_err *err)
{
    assert(s && r);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "change %lld of comparison %lld", (long long)r->number,
             (long long)r->comparison_id);
    int rc = pl_row__check(pl_row__table(PL_TABLE_CHANGE), r, label, err);
    if (!rc)
        rc = check_count(r->number, 1, "number", label, err);
    if (!rc)
        rc = check_labels(r->baseline_labels, "baseline_labels", label, err);
    if (!rc)
        rc = check_labels(r->current_labels, "current_labels", label, err);
    if (!rc && r->touches != -1)
        rc = check_count(r->touches, 1, "touches", label, err);
    if (!rc && r->region_pixels != -1)
        rc = check_count(r->region_pixels, 1, "region_pixels", label, err);
    if (rc)
        return rc;
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_CHANGE), r);
    return pl_store__write_row(s, &row, id, err, label);
}

PL_STORE_CALLBACK(change, pl_change_fn)

PL_EXPORT int pl_store_list_changes(pl_store *s, pl_id comparison_id, pl_change_fn fn, void *ud,
                                    pl_err *err)
{
    assert(s && fn);
    change_cb cb = { fn, ud };
    return list_for(s, PL_TABLE_CHANGE, "WHERE ?1 = 0 OR t.comparison_id = ?1 "
                    "ORDER BY t.comparison_id, t.number", comparison_id, call_change, &cb, err);
}
