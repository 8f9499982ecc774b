/*
 * store_inspection.c - inspections of a site and the maps they produced
 * (plyledger/store.h).
 */
#include "record/store_int.h"

#include "common/common_int.h"
#include "plyledger/hash.h"

#include <assert.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---- inspections ------------------------------------------------------------------- */

/* Pitches of a map and its site agree within this fraction. */
#define PITCH_TOLERANCE 1e-3

PL_EXPORT void pl_inspection_clear(pl_inspection *insp)
{
    if (!insp)
        return;
    pl_row__release(pl_row__table(PL_TABLE_INSPECTION), insp);
    memset(insp, 0, sizeof *insp);
}

static int insert_inspection(pl_store *s, const pl_inspection *in, pl_id site, pl_id key,
                             pl_id supersedes, const char *reason, pl_id *id, pl_err *err,
                             const char *label)
{
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_INSPECTION), in);
    pl_row__set_id(&row, "site_key", site);
    pl_row__set_correction(&row, key, supersedes, reason);
    return pl_store__insert(s, &row, id, err, label);
}

/* Refuse a second current baseline of a site, naming the one that exists. */
static int check_baseline(pl_store *s, pl_id site, pl_id replacing, pl_err *err,
                          const char *label)
{
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st,
                               "SELECT stable_key, performed_on FROM inspection_current WHERE "
                               "site_key = ?1 AND kind = 'baseline' AND id IS DISTINCT FROM ?2",
                               err);
    if (rc)
        return rc;
    pl_value args[2] = { pl_store__arg_id(site), pl_store__arg_id(replacing) };
    pl_store__bind(st, 1, &args[0]);
    if (replacing)
        pl_store__bind(st, 2, &args[1]);
    else
        sqlite3_bind_null(st, 2);
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW)
        rc = pl__err(err, PL_EEXISTS,
                     "%s: site already has a baseline inspection (key %lld, performed on %s)",
                     label, (long long)sqlite3_column_int64(st, 0),
                     (const char *)sqlite3_column_text(st, 1));
    else if (r != SQLITE_DONE)
        rc = pl_store__fail(s, err, label);
    sqlite3_finalize(st);
    return rc;
}

/* ---- chronology ------------------------------------------------------------ */

/* One current inspection of a site, as its chronology sees it. */
typedef struct dated {
    pl_id key;
    char kind[PL_WORD_SIZE];
    char date[PL_DATE_SIZE];
    int simulated;  /* 1, 0, or -1 unknown */
} dated;

typedef struct dated_list {
    dated *items;
    size_t n, cap;
} dated_list;

/* The current inspections of `site` but the row `replacing` (0: none),
 * oldest first. */
static int site_inspections(pl_store *s, pl_id site, pl_id replacing, dated_list *out,
                            pl_err *err, const char *label)
{
    memset(out, 0, sizeof *out);
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st, "SELECT stable_key, kind, performed_on, simulated FROM "
                               "inspection_current WHERE site_key = ?1 AND id <> ?2 "
                               "ORDER BY performed_on, stable_key", err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, site);
    sqlite3_bind_int64(st, 2, replacing);
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        if (out->n == out->cap) {
            size_t cap = out->cap ? 2 * out->cap : 16;
            dated *grown = realloc(out->items, cap * sizeof *grown);
            if (!grown) {
                rc = pl__err(err, PL_ENOMEM, "%s: out of memory", label);
                break;
            }
            out->items = grown;
            out->cap = cap;
        }
        dated *d = &out->items[out->n++];
        d->key = sqlite3_column_int64(st, 0);
        pl_store__col_text(st, 1, d->kind, sizeof d->kind);
        pl_store__col_text(st, 2, d->date, sizeof d->date);
        d->simulated = sqlite3_column_type(st, 3) == SQLITE_NULL
                           ? -1 : sqlite3_column_int64(st, 3) != 0;
    }
    rc = pl_store__finish_listing(s, st, r, rc, err, label);
    if (rc) {
        free(out->items);
        memset(out, 0, sizeof *out);
    }
    return rc;
}

/*
 * The site's inspections in order, as they would stand with `in` recorded
 * (replacing the row `replacing`, whose kind was `replaced_kind`): a
 * scheduled inspection needs the site's baseline, no inspection comes
 * before the baseline, and a simulated baseline serves no real scheduled
 * inspection. Unscheduled and post-repair inspections need no baseline
 * (damage is found, and repaired, where none was ever recorded), but none
 * comes before one.
 */
static int check_site_order(pl_store *s, const pl_inspection *in, pl_id site, pl_id replacing,
                            const char *replaced_kind, pl_err *err, const char *label)
{
    dated_list l;
    int rc = site_inspections(s, site, replacing, &l, err, label);
    if (rc)
        return rc;
    int is_base = strcmp(in->kind, "baseline") == 0;
    const dated *base = NULL;
    for (size_t i = 0; !is_base && i < l.n; i++)
        if (strcmp(l.items[i].kind, "baseline") == 0)
            base = &l.items[i];
    const char *base_date = is_base ? in->performed_on : base ? base->date : NULL;
    int base_sim = is_base ? in->simulated : base ? base->simulated : -1;
    int sched = strcmp(in->kind, "scheduled") == 0;
    if (!base_date && sched && replaced_kind && strcmp(replaced_kind, "baseline") == 0)
        rc = pl__err(err, PL_EINVAL, "%s: it is the site's only baseline: as a scheduled "
                     "inspection it would leave the site without a baseline, which a scheduled "
                     "inspection is compared with", label);
    else if (!base_date && sched)
        rc = pl__err(err, PL_EINVAL, "%s: the site has no baseline inspection: record the "
                     "baseline first (a scheduled inspection is compared with it)", label);
    else if (!is_base && base && strcmp(in->performed_on, base->date) < 0)
        rc = pl__err(err, PL_EINVAL, "%s: performed_on %s is before the site's baseline "
                     "(inspection %lld, %s)", label, in->performed_on, (long long)base->key,
                     base->date);
    else if (sched && in->simulated == 0 && base_sim == 1)
        rc = pl__err(err, PL_EINVAL, "%s: the site's baseline (inspection %lld, %s) is simulated "
                     "and cannot be the baseline of a real inspection", label,
                     (long long)base->key, base->date);
    for (size_t i = 0; !rc && i < l.n; i++) {
        const dated *d = &l.items[i];
        int d_sched = strcmp(d->kind, "scheduled") == 0;
        if (strcmp(d->kind, "baseline") == 0)
            continue;
        if (!base_date && d_sched)
            rc = pl__err(err, PL_EINVAL, "%s: the site would be left without a baseline while its "
                         "scheduled inspection %lld (%s) is compared with it", label,
                         (long long)d->key, d->date);
        else if (base_date && strcmp(d->date, base_date) < 0)
            rc = pl__err(err, PL_EINVAL, "%s: inspection %lld (%s, %s) would come before the "
                         "site's baseline on %s; the baseline comes first", label,
                         (long long)d->key, d->kind, d->date, base_date);
        else if (is_base && d_sched && base_sim == 1 && d->simulated == 0)
            rc = pl__err(err, PL_EINVAL, "%s: a simulated baseline cannot be the baseline of the "
                         "site's real scheduled inspection %lld (%s)", label, (long long)d->key,
                         d->date);
    }
    free(l.items);
    return rc;
}

/* One side of the airframe's order of hours or cycles: the inspection that
 * `sql` (?1 airframe, ?2 the row replaced, ?3 the date, ?4 the value) finds
 * against `in`, refused with `words`. */
static int check_count_order(pl_store *s, const char *sql, pl_id af, pl_id replacing,
                             const char *date, double value, const char *what,
                             const char *words, pl_err *err, const char *label)
{
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st, sql, err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, af);
    sqlite3_bind_int64(st, 2, replacing);
    sqlite3_bind_text(st, 3, date, -1, SQLITE_STATIC);
    sqlite3_bind_double(st, 4, value);
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW)
        rc = pl__err(err, PL_EINVAL, "%s: flight %s %.15g are %s the %.15g of inspection %lld "
                     "(site %s, %s); when the aircraft's records were corrected, record the "
                     "reason (--hours-reason, or \"hours_reason\" in a sidecar)", label, what, value, words,
                     sqlite3_column_double(st, 1), (long long)sqlite3_column_int64(st, 0),
                     (const char *)sqlite3_column_text(st, 2),
                     (const char *)sqlite3_column_text(st, 3));
    else if (r != SQLITE_DONE)
        rc = pl_store__fail(s, err, label);
    sqlite3_finalize(st);
    return rc;
}

/* The inspections of the airframe that count: current, not the one
 * replaced, and not themselves out of order for a recorded reason. */
#define COUNTED(col)                                                                       \
    "SELECT i.stable_key, i." col ", c.code, i.performed_on FROM inspection_current i "    \
    "JOIN site_current c ON c.stable_key = i.site_key WHERE c.airframe_key = ?1 AND "      \
    "i.id <> ?2 AND i.hours_reason IS NULL AND i." col " IS NOT NULL AND "

/*
 * Flight hours and cycles only grow: an inspection may not have fewer than
 * one of the airframe's earlier inspections (any site), nor more than a
 * later one, unless it records why (a documented correction of the
 * aircraft's records). Inspections of the same day are not ordered.
 */
static int check_counts(pl_store *s, const pl_inspection *in, pl_id af, pl_id replacing,
                        pl_err *err, const char *label)
{
    if (in->hours_reason[0])
        return PL_OK;
    int rc = PL_OK;
    if (!isnan(in->aircraft_hours)) {
        rc = check_count_order(s, COUNTED("aircraft_hours") "i.performed_on < ?3 AND "
                               "i.aircraft_hours > ?4 ORDER BY i.aircraft_hours DESC LIMIT 1", af,
                               replacing, in->performed_on, in->aircraft_hours, "hours",
                               "fewer than", err, label);
        if (!rc)
            rc = check_count_order(s, COUNTED("aircraft_hours") "i.performed_on > ?3 AND "
                                   "i.aircraft_hours < ?4 ORDER BY i.aircraft_hours LIMIT 1", af,
                                   replacing, in->performed_on, in->aircraft_hours, "hours",
                                   "more than", err, label);
    }
    if (!rc && in->aircraft_cycles >= 0) {
        rc = check_count_order(s, COUNTED("aircraft_cycles") "i.performed_on < ?3 AND "
                               "i.aircraft_cycles > ?4 ORDER BY i.aircraft_cycles DESC LIMIT 1",
                               af, replacing, in->performed_on, (double)in->aircraft_cycles,
                               "cycles", "fewer than", err, label);
        if (!rc)
            rc = check_count_order(s, COUNTED("aircraft_cycles") "i.performed_on > ?3 AND "
                                   "i.aircraft_cycles < ?4 ORDER BY i.aircraft_cycles LIMIT 1",
                                   af, replacing, in->performed_on, (double)in->aircraft_cycles,
                                   "cycles", "more than", err, label);
    }
    return rc;
}

/*
 * Everything that places an inspection in time, checked as the record would
 * stand with it: not after today, not before the airframe was built, in
 * order with its site's baseline and with the airframe's hours and cycles.
 */
static int check_chronology(pl_store *s, const pl_inspection *in, pl_id af, pl_id site,
                            pl_id replacing, const char *replaced_kind, pl_err *err,
                            const char *label)
{
    int rc = pl_store__not_after_today(s, in->performed_on, "performed_on", err, label);
    if (rc)
        return rc;
    sqlite3_stmt *st;
    rc = pl_store__row_by_id(s, &st, "SELECT manufactured FROM airframe_current WHERE "
                             "stable_key = ?1", af, err, label, "no such airframe");
    if (rc)
        return rc;
    char made[PL_DATE_SIZE];
    pl_store__col_text(st, 0, made, sizeof made);
    sqlite3_finalize(st);
    if (made[0] && strcmp(in->performed_on, made) < 0)
        return pl__err(err, PL_EINVAL, "%s: performed_on %s is before the airframe's date of "
                       "manufacture %s", label, in->performed_on, made);
    rc = check_site_order(s, in, site, replacing, replaced_kind, err, label);
    if (!rc)
        rc = check_counts(s, in, af, replacing, err, label);
    return rc;
}

PL_EXPORT int pl_store_add_inspection(pl_store *s, const pl_inspection *in, pl_id *id,
                                      pl_err *err)
{
    assert(s && in);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "inspection of site %.*s on %.*s", FLD(in->site_code),
             FLD(in->airframe_serial));
    int rc = pl_row__check(pl_row__table(PL_TABLE_INSPECTION), in, label, err);
    if (!rc && in->simulated < 0)
        rc = pl__err(err, PL_EINVAL, "%s: simulated must say whether the data come from a "
                     "simulation (1) or from the part (0)", label);
    int owned;
    if (rc || (rc = pl_store__write_begin(s, &owned, err)))
        return rc;
    pl_id af = 0, site = 0, newid = 0;
    rc = pl_store__airframe_key(s, in->airframe_serial, &af, NULL, err, label);
    if (!rc)
        rc = pl_store__site_key(s, af, in->site_code, &site, NULL, err, label);
    if (!rc && strcmp(in->kind, "baseline") == 0)
        rc = check_baseline(s, site, 0, err, label);
    if (!rc)
        rc = check_chronology(s, in, af, site, 0, NULL, err, label);
    if (!rc)
        rc = pl_people__check_inspection(s, in, site, err, label);
    if (!rc)
        rc = pl_disposition__check_post_repair(s, in, site, err, label);
    if (!rc)
        rc = insert_inspection(s, in, site, 0, 0, NULL, &newid, err, label);
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_EXPORT int pl_store_get_inspection(pl_store *s, pl_id key, pl_inspection *in, pl_err *err)
{
    assert(s && in);
    pl_value arg = pl_store__arg_id(key);
    int found = 0;
    int rc = pl_store__get(s, PL_TABLE_INSPECTION, "WHERE t.stable_key = ?1", &arg, 1, in,
                           &found, err, NULL);
    if (!rc && !found)
        rc = pl__err(err, PL_ENOTFOUND, "inspection %lld: no such inspection", (long long)key);
    return rc;
}

PL_EXPORT int pl_store_correct_inspection(pl_store *s, pl_id key, const pl_inspection *in,
                                          const char *reason, pl_id *id, pl_err *err)
{
    assert(s && in);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "inspection %lld", (long long)key);
    int rc = pl_row__check(pl_row__table(PL_TABLE_INSPECTION), in, label, err);
    int owned;
    if (rc || (rc = pl_store__correction_begin(s, reason, &owned, err, label)))
        return rc;
    pl_id current = 0, site = 0, af = 0, named_site = 0, newid = 0;
    sqlite3_stmt *st;
    rc = pl_store__row_by_id(s, &st, "SELECT id, site_key FROM inspection_current WHERE "
                             "stable_key = ?1", key, err, label, "no such inspection");
    if (!rc) {
        current = sqlite3_column_int64(st, 0);
        site = sqlite3_column_int64(st, 1);
        sqlite3_finalize(st);
    }
    if (!rc)
        rc = pl_store__airframe_key(s, in->airframe_serial, &af, NULL, err, label);
    if (!rc)
        rc = pl_store__site_key(s, af, in->site_code, &named_site, NULL, err, label);
    if (!rc && named_site != site)
        rc = pl__err(err, PL_EINVAL, "%s: a correction cannot move the inspection to another "
                     "site (%s on %s)", label, in->site_code, in->airframe_serial);
    pl_inspection cur;
    memset(&cur, 0, sizeof cur);
    if (!rc)
        rc = pl_store_get_inspection(s, key, &cur, err);
    if (!rc)
        rc = pl_store__check_changes(pl_row__table(PL_TABLE_INSPECTION), &cur, in, err, label);
    if (!rc && in->simulated < 0 && cur.simulated >= 0)
        rc = pl__err(err, PL_EINVAL, "%s: simulated must stay said: 1 for data from a "
                     "simulation, 0 for data from the part", label);
    if (!rc && strcmp(in->kind, "baseline") == 0)
        rc = check_baseline(s, site, current, err, label);
    if (!rc)
        rc = check_chronology(s, in, af, site, current, cur.kind, err, label);
    /* a correction of who did it, at what level, when or under which
     * procedure meets the register as a new inspection would */
    if (!rc && (strcmp(in->inspector, cur.inspector) || strcmp(in->inspector_level,
                                                              cur.inspector_level) ||
                strcmp(in->performed_on, cur.performed_on) ||
                strcmp(in->procedure, cur.procedure) ||
                strcmp(in->procedure_rev, cur.procedure_rev)))
        rc = pl_people__check_inspection(s, in, site, err, label);
    pl_inspection_clear(&cur);
    if (!rc)
        rc = insert_inspection(s, in, site, key, current, reason, &newid, err, label);
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_STORE_CALLBACK(inspection, pl_inspection_fn)

PL_EXPORT int pl_store_list_inspections(pl_store *s, const pl_inspection_filter *filter,
                                        pl_inspection_fn fn, void *ud, pl_err *err)
{
    assert(s && fn);
    if (filter) {
        const char *label = "inspection filter";
        int rc = pl_row__check_date(err, label, "from", filter->from, PL_DATE_SIZE, 0);
        if (!rc)
            rc = pl_row__check_date(err, label, "to", filter->to, PL_DATE_SIZE, 0);
        if (!rc && filter->kind && *filter->kind) {
            pl_err e = { 0 };
            if (pl_inspection_kind_check(filter->kind, &e))
                rc = pl__err(err, PL_EINVAL, "%s: %s", label, e.msg);
        }
        if (rc)
            return rc;
    }
    pl_value args[5] = {
        pl_store__arg_text(filter ? filter->airframe_serial : NULL),
        pl_store__arg_text(filter ? filter->site_code : NULL),
        pl_store__arg_text(filter ? filter->kind : NULL),
        pl_store__arg_text(filter ? filter->from : NULL),
        pl_store__arg_text(filter ? filter->to : NULL),
    };
    inspection_cb cb = { fn, ud };
    return pl_store__list(s, PL_TABLE_INSPECTION,
                          "WHERE (?1 IS NULL OR upper(a.serial) = upper(?1)) "
                          "AND (?2 IS NULL OR upper(s.code) = upper(?2)) "
                          "AND (?3 IS NULL OR t.kind = ?3) "
                          "AND (?4 IS NULL OR t.performed_on >= ?4) "
                          "AND (?5 IS NULL OR t.performed_on <= ?5) "
                          "ORDER BY t.performed_on, t.stable_key", args, 5, call_inspection, &cb,
                          err, NULL);
}

/* ---- maps -------------------------------------------------------------------------- */

/* Inspection `key` and the current version of its site. */
static int inspection_site(pl_store *s, pl_id key, pl_site *site, pl_err *err,
                           const char *label)
{
    pl_value arg = pl_store__arg_id(key);
    int found = 0;
    int rc = pl_store__get(s, PL_TABLE_SITE,
                           "JOIN inspection_current i ON i.site_key = t.stable_key "
                           "WHERE i.stable_key = ?1", &arg, 1, site, &found, err, label);
    if (!rc && !found)
        rc = pl__err(err, PL_ENOTFOUND, "%s: no inspection with key %lld", label, (long long)key);
    return rc;
}

/* The map itself, whatever its site: size, pitches, placement, channels. */
static int check_map_header(const pl_map *map, const char *label, pl_err *err)
{
    if (!map->channels || map->width == 0 || map->height == 0 || map->nchannels == 0 ||
        map->width > PL_MAP_MAX_SIDE || map->height > PL_MAP_MAX_SIDE ||
        map->nchannels > PL_MAP_MAX_CHANNELS)
        return pl__err(err, PL_EINVAL, "%s: map has no data or an impossible size (%ux%u, %u "
                       "channels)", label, map->width, map->height, map->nchannels);
    if (!(isfinite(map->pitch_u) && map->pitch_u > 0 && isfinite(map->pitch_v) &&
          map->pitch_v > 0))
        return pl__err(err, PL_EINVAL, "%s: map pitches must be > 0 (got %g, %g)", label,
                       map->pitch_u, map->pitch_v);
    char what[STORE_LABEL_SIZE + 32];
    int rc = PL_OK;
    for (int k = 0; !rc && k < 2; k++) {
        snprintf(what, sizeof what, "%s: map pitch along %c", label, k ? 'v' : 'u');
        rc = pl_bound_check(PL_BOUND_PITCH, k ? map->pitch_v : map->pitch_u, what, err);
    }
    for (int k = 0; !rc && k < 3; k++) {
        snprintf(what, sizeof what, "%s: placement origin %c", label, "xyz"[k]);
        rc = pl_bound_check(PL_BOUND_COORDINATE, map->placement.origin[k], what, err);
    }
    if (rc)
        return rc;
    pl_err e = { 0 };
    if (strnlen(map->placement.system, PL_SYSTEM_SIZE) == PL_SYSTEM_SIZE ||
        strnlen(map->placement.unit, PL_UNIT_SIZE) == PL_UNIT_SIZE ||
        pl_placement_check(&map->placement, &e))
        return pl__err(err, PL_EINVAL, "%s: placement: %s", label,
                       e.msg[0] ? e.msg : "system or unit is not terminated");
    for (uint32_t c = 0; c < map->nchannels; c++) {
        const pl_channel *ch = &map->channels[c];
        if (strnlen(ch->quantity, PL_QUANTITY_SIZE) == PL_QUANTITY_SIZE ||
            strnlen(ch->unit, PL_UNIT_SIZE) == PL_UNIT_SIZE ||
            strnlen(ch->label, PL_LABEL_SIZE) == PL_LABEL_SIZE)
            return pl__err(err, PL_EINVAL,
                           "%s: channel %u: quantity, unit or label is not terminated", label, c);
        if (pl_quantity_check(ch->quantity, ch->unit, &e))
            return pl__err(err, PL_EINVAL, "%s: channel %u: %s", label, c, e.msg);
    }
    return PL_OK;
}

/* A map must be what its site expects: same size when set, pitch within 0.1 %. */
static int check_fits_site(const pl_site *site, const pl_map *map, const char *label,
                           pl_err *err)
{
    if (site->width_px && map->width != site->width_px)
        return pl__err(err, PL_ENOMATCH, "%s: map width %u px differs from the site's %u px",
                       label, map->width, site->width_px);
    if (site->height_px && map->height != site->height_px)
        return pl__err(err, PL_ENOMATCH, "%s: map height %u px differs from the site's %u px",
                       label, map->height, site->height_px);
    if (fabs(map->pitch_u - site->pitch_u) > PITCH_TOLERANCE * site->pitch_u)
        return pl__err(err, PL_ENOMATCH, "%s: map pitch_u %g mm differs from the site's %g mm by "
                       "more than 0.1 %%", label, map->pitch_u, site->pitch_u);
    if (fabs(map->pitch_v - site->pitch_v) > PITCH_TOLERANCE * site->pitch_v)
        return pl__err(err, PL_ENOMATCH, "%s: map pitch_v %g mm differs from the site's %g mm by "
                       "more than 0.1 %%", label, map->pitch_v, site->pitch_v);
    /* a map's quantities come from the site's method (fault: an ultrasonic
     * amplitude map was accepted on a thermography site) */
    for (uint32_t c = 0; site->method[0] && c < map->nchannels; c++)
        if (!pl_quantity_fits_method(map->channels[c].quantity, site->method)) {
            const pl_quantity_info *q = pl_quantity_lookup(map->channels[c].quantity);
            return pl__err(err, PL_ENOMATCH, "%s: channel %u's quantity '%s' comes from %s, "
                           "not from the site's method %s", label, c,
                           map->channels[c].quantity, q ? q->methods : "no known method",
                           site->method);
        }
    return PL_OK;
}

PL_EXPORT int pl_site_check_map(const pl_site *site, const pl_map *map, pl_err *err)
{
    assert(site && map);
    char label[STORE_LABEL_SIZE];
    if (strnlen(site->airframe_serial, sizeof site->airframe_serial))
        snprintf(label, sizeof label, "site %.*s on %.*s", FLD(site->code),
                 FLD(site->airframe_serial));
    else
        snprintf(label, sizeof label, "site %.*s", FLD(site->code));
    return check_fits_site(site, map, label, err);
}

struct pl_prepared_map {
    pl_map header;         /* geometry and channels (owned); data NULL */
    unsigned char *blob;   /* the stored form (pl_map_encode()) */
    size_t blob_len;
    char hex[PL_SHA256_HEX_SIZE];
};

PL_EXPORT void pl_prepared_map_free(pl_prepared_map *p)
{
    if (!p)
        return;
    free(p->header.channels);
    free(p->blob);
    free(p);
}

PL_EXPORT const pl_map *pl_prepared_map_header(const pl_prepared_map *p)
{
    assert(p);
    return &p->header;
}

PL_EXPORT int pl_prepared_map_new(pl_prepared_map **out, const pl_map *map, pl_err *err)
{
    assert(out && map);
    *out = NULL;
    int rc = check_map_header(map, "map", err);
    if (rc)
        return rc;
    if (!map->data)
        return pl__err(err, PL_EINVAL, "map: no data");
    pl_prepared_map *p = calloc(1, sizeof *p);
    if (!p || !(p->header.channels = malloc(map->nchannels * sizeof *map->channels))) {
        free(p);
        return pl__err(err, PL_ENOMEM, "map: out of memory");
    }
    p->header = (pl_map){ map->width, map->height, map->nchannels, map->pitch_u, map->pitch_v,
                          map->placement, p->header.channels, NULL };
    memcpy(p->header.channels, map->channels, map->nchannels * sizeof *map->channels);
    unsigned char digest[PL_SHA256_SIZE];
    pl_err e = { 0 };
    if ((rc = pl_map_encode(&p->blob, &p->blob_len, digest, map, &e))) {
        pl_prepared_map_free(p);
        return pl__err(err, rc, "map: %s", e.msg);
    }
    pl_sha256_hex(p->hex, digest);
    *out = p;
    return PL_OK;
}

/* The map record as stored: the caller's fields, the map's geometry and
 * channels, the source's base name and the content digest. */
static int insert_map(pl_store *s, const pl_map_record *rec, const pl_prepared_map *p,
                      pl_id *id, pl_err *err, const char *label)
{
    const pl_map *map = &p->header;
    pl_map_record r = *rec;
    snprintf(r.source, sizeof r.source, "%s", rec->source[0] ? pl__basename(rec->source) : "");
    r.width = map->width;
    r.height = map->height;
    r.nchannels = map->nchannels;
    r.pitch_u = map->pitch_u;
    r.pitch_v = map->pitch_v;
    r.placement = map->placement;
    r.channels = map->channels;
    snprintf(r.sha256, sizeof r.sha256, "%s", p->hex);
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_MAP), &r);
    pl_row__set_text(&row, "encoding", "zlib-f32le");
    pl_row__set_blob(&row, "data", p->blob, p->blob_len);
    return pl_store__insert(s, &row, id, err, label);
}

PL_EXPORT int pl_store_add_prepared_map(pl_store *s, const pl_map_record *rec,
                                        const pl_prepared_map *p, pl_id *id, pl_err *err)
{
    assert(s && rec && p);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "map for inspection %lld", (long long)rec->inspection_key);
    int rc = pl_row__check(pl_row__table(PL_TABLE_MAP), rec, label, err);
    if (!rc)
        rc = check_map_header(&p->header, label, err);
    int owned;
    if (rc || (rc = pl_store__write_begin(s, &owned, err)))
        return rc;
    pl_site site;
    pl_id newid = 0;
    rc = inspection_site(s, rec->inspection_key, &site, err, label);
    if (!rc) {
        snprintf(label, sizeof label, "map for inspection %lld (site %s on %s)",
                 (long long)rec->inspection_key, site.code, site.airframe_serial);
        rc = check_fits_site(&site, &p->header, label, err);
    }
    if (!rc) {
        sqlite3_stmt *st;
        rc = pl_store__prepare(s, &st, "SELECT id FROM map WHERE inspection_key = ?1 AND "
                               "sha256 = ?2", err);
        if (!rc) {
            int found = 0;
            int64_t other = 0;
            sqlite3_bind_int64(st, 1, rec->inspection_key);
            sqlite3_bind_text(st, 2, p->hex, -1, SQLITE_STATIC);
            rc = pl_store__finish_int(s, st, &found, &other, err, label);
            if (!rc && found)
                rc = pl__err(err, PL_EEXISTS, "%s: the same content is already stored as map %lld",
                             label, (long long)other);
        }
    }
    if (!rc)
        rc = insert_map(s, rec, p, &newid, err, label);
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_EXPORT int pl_store_add_map(pl_store *s, const pl_map_record *rec, const pl_map *map,
                               pl_id *id, pl_err *err)
{
    assert(s && rec && map);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "map for inspection %lld", (long long)rec->inspection_key);
    int rc = pl_row__check(pl_row__table(PL_TABLE_MAP), rec, label, err);
    if (!rc)
        rc = check_map_header(map, label, err);
    if (rc)
        return rc;
    pl_prepared_map *p = NULL;
    pl_err e = { 0 };
    if ((rc = pl_prepared_map_new(&p, map, &e)))
        return pl__err(err, rc, "%s: %s", label, e.msg + (strncmp(e.msg, "map: ", 5) ? 0 : 5));
    rc = pl_store_add_prepared_map(s, rec, p, id, err);
    pl_prepared_map_free(p);
    return rc;
}

int pl_store__map_inspection(pl_store *s, pl_id map_id, pl_id *inspection_key, pl_err *err)
{
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "%s: map %lld", s->path, (long long)map_id);
    sqlite3_stmt *st;
    int rc = pl_store__row_by_id(s, &st, "SELECT inspection_key FROM map WHERE id = ?1", map_id,
                                 err, label, "no such map");
    if (rc)
        return rc;
    *inspection_key = sqlite3_column_int64(st, 0);
    sqlite3_finalize(st);
    return PL_OK;
}

/* Channels of map `id` into `ch` (room for n), checking they are 0..n-1. */
static int read_channels(pl_store *s, pl_id id, pl_channel *ch, uint32_t n, pl_err *err,
                         const char *label)
{
    const pl_table_desc *t = pl_row__table(PL_TABLE_MAP_CHANNEL);
    char sql[1024];
    pl_row__select(sql, sizeof sql, t, "t.idx");
    size_t len = strlen(sql);
    snprintf(sql + len, sizeof sql - len, "WHERE t.map_id = ?1 ORDER BY t.idx");
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st, sql, err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, id);
    int idx_col = pl_row__select_count(t);
    uint32_t got = 0;
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        if (sqlite3_column_int64(st, idx_col) != got || got >= n) {
            rc = pl__err(err, PL_EFORMAT, "%s: channel list does not match its %u channels",
                         label, n);
            break;
        }
        pl_row__read(t, st, &ch[got++]);
    }
    rc = pl_store__finish_listing(s, st, r, rc, err, label);
    if (!rc && got != n)
        rc = pl__err(err, PL_EFORMAT, "%s: %u channel records for %u channels", label, got, n);
    return rc;
}

PL_EXPORT int pl_store_load_map(pl_store *s, pl_id id, pl_map **out, pl_map_record *rec,
                                pl_err *err)
{
    assert(s && out);
    *out = NULL;
    const pl_table_desc *t = pl_row__table(PL_TABLE_MAP);
    char label[STORE_LABEL_SIZE], sql[2048];
    snprintf(label, sizeof label, "%s: map %lld", s->path, (long long)id);
    /* only a load reads the blob; a listing leaves it on disk */
    pl_row__select(sql, sizeof sql, t, "t.data");
    size_t len = strlen(sql);
    snprintf(sql + len, sizeof sql - len, "WHERE t.id = ?1");
    sqlite3_stmt *st;
    int rc = pl_store__row_by_id(s, &st, sql, id, err, label, "no such map");
    if (rc)
        return rc;
    pl_map_record tmp;
    pl_map *map = NULL;
    pl_err e = { 0 };
    unsigned char digest[PL_SHA256_SIZE];
    rc = pl_row__read(t, st, &tmp);
    if (rc)
        pl__err(err, rc, "%s: out of memory", label);
    if (!rc && (rc = pl_map_new(&map, tmp.width, tmp.height, tmp.nchannels, &e)))
        pl__err(err, rc == PL_ENOMEM ? PL_ENOMEM : PL_EFORMAT, "%s: %s", label, e.msg);
    if (!rc) {
        map->pitch_u = tmp.pitch_u;
        map->pitch_v = tmp.pitch_v;
        map->placement = tmp.placement;
        rc = read_channels(s, id, map->channels, map->nchannels, err, label);
    }
    if (!rc && pl_sha256_from_hex(digest, tmp.sha256) != PL_OK)
        rc = pl__err(err, PL_EFORMAT, "%s: stored digest is not SHA-256 hex", label);
    if (!rc) {
        int data = pl_row__select_count(t);
        const void *blob = sqlite3_column_blob(st, data);
        size_t blob_len = (size_t)sqlite3_column_bytes(st, data);
        rc = pl_map_decode(map, blob, blob_len, digest, &e);
        if (rc == PL_ENOMATCH)
            pl__err(err, rc, "%s: content does not match its stored SHA-256 (%s)", label, e.msg);
        else if (rc)
            pl__err(err, rc, "%s: %s", label, e.msg);
    }
    sqlite3_finalize(st);
    if (rc || !rec)
        free(tmp.parameters_json);
    if (rc) {
        pl_map_free(map);
        return rc;
    }
    if (rec) {
        tmp.channels = map->channels;
        *rec = tmp;
    }
    *out = map;
    return PL_OK;
}

typedef struct map_cb {
    pl_store *s;
    pl_map_fn fn;
    void *ud;
    pl_err *err;
    const char *label;
} map_cb;

/* A listed map with its channels (freed with the record after the call). */
static int call_map(void *ud, void *rec)
{
    map_cb *c = ud;
    pl_map_record *m = rec;
    pl_channel *ch = calloc(m->nchannels ? m->nchannels : 1, sizeof *ch);
    if (!ch)
        return pl__err(c->err, PL_ENOMEM, "%s: out of memory", c->label);
    m->channels = ch;
    int rc = read_channels(c->s, m->id, ch, m->nchannels, c->err, c->label);
    if (rc)
        return rc;
    return c->fn(c->ud, m) ? 1 : 0;
}

PL_EXPORT int pl_store_list_maps(pl_store *s, pl_id inspection_key, pl_map_fn fn, void *ud,
                                 pl_err *err)
{
    assert(s && fn);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "maps of inspection %lld", (long long)inspection_key);
    map_cb cb = { s, fn, ud, err, label };
    pl_value arg = pl_store__arg_id(inspection_key);
    return pl_store__list(s, PL_TABLE_MAP,
                          "WHERE t.inspection_key = ?1 AND NOT EXISTS "
                          "(SELECT 1 FROM map n WHERE n.supersedes = t.id) ORDER BY t.id",
                          &arg, 1, call_map, &cb, err, label);
}
