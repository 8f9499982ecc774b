/*
 * store_airframe.c - airframes, their operator history and their inspection sites
 * (plyledger/store.h), and the lookups of an airframe and a site by name.
 */
#include "record/store_int.h"

#include "common/common_int.h"

#include <assert.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---- lookups ------------------------------------------------------------------- */

/*
 * The key and current row of the record `sql` finds by a key given as
 * typed (the last argument; keys compare without regard to case). `sql`
 * selects stable_key, id and the key as stored, the exact spelling first,
 * at most two rows. A store written before keys were compared so may hold
 * two that differ only in case: the exact spelling wins, and a spelling
 * like neither is refused as ambiguous. PL_ENOTFOUND with `missing` when
 * there is none.
 */
static int current_key(pl_store *s, const char *sql, const pl_value *args, int nargs,
                       const char *typed, pl_id *key, pl_id *current, pl_err *err,
                       const char *label, const char *missing)
{
    sqlite3_stmt *st;
    int rc = pl_store__prepare_args(s, &st, sql, args, nargs, err);
    if (rc)
        return rc;
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW) {
        *key = sqlite3_column_int64(st, 0);
        if (current)
            *current = sqlite3_column_int64(st, 1);
        char first[PL_NAME_SIZE];
        pl_store__col_text(st, 2, first, sizeof first);
        if (strcmp(first, typed) != 0 && (r = sqlite3_step(st)) == SQLITE_ROW)
            rc = pl__err(err, PL_ENOMATCH, "%s: '%s' could be %s or %s, which differ only in "
                         "case; give it exactly", label, typed, first,
                         (const char *)sqlite3_column_text(st, 2));
        else if (r != SQLITE_ROW && r != SQLITE_DONE)
            rc = pl_store__fail(s, err, label);
    } else if (r == SQLITE_DONE) {
        rc = pl__err(err, PL_ENOTFOUND, "%s: %s", label, missing);
    } else {
        rc = pl_store__fail(s, err, label);
    }
    sqlite3_finalize(st);
    return rc;
}

int pl_store__airframe_key(pl_store *s, const char *serial, pl_id *key, pl_id *current,
                           pl_err *err, const char *label)
{
    char what[STORE_LABEL_SIZE + 16];
    snprintf(what, sizeof what, "%s: serial", label);
    int rc = pl_key_check(serial, what, err);
    if (rc)
        return rc;
    char missing[PL_NAME_SIZE + 32];
    snprintf(missing, sizeof missing, "no airframe with serial %.*s", PL_NAME_SIZE, serial);
    pl_value arg = pl_store__arg_text(serial);
    return current_key(s, "SELECT stable_key, id, serial FROM airframe_current WHERE "
                       "upper(serial) = upper(?1) ORDER BY serial = ?1 DESC, id LIMIT 2", &arg, 1,
                       serial, key, current, err, label, missing);
}

int pl_store__site_key(pl_store *s, pl_id af_key, const char *code, pl_id *key, pl_id *current,
                       pl_err *err, const char *label)
{
    char what[STORE_LABEL_SIZE + 16];
    snprintf(what, sizeof what, "%s: site code", label);
    int rc = pl_key_check(code, what, err);
    if (rc)
        return rc;
    pl_value args[2] = { pl_store__arg_id(af_key), pl_store__arg_text(code) };
    return current_key(s, "SELECT stable_key, id, code FROM site_current WHERE airframe_key = ?1 "
                       "AND upper(code) = upper(?2) ORDER BY code = ?2 DESC, id LIMIT 2", args, 2,
                       code, key, current, err, label, "no such site");
}

/* ---- airframes ------------------------------------------------------------------- */

static int insert_airframe(pl_store *s, const pl_airframe *af, pl_id key, pl_id supersedes,
                           const char *reason, pl_id *id, pl_err *err, const char *label)
{
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_AIRFRAME), af);
    pl_row__set_correction(&row, key, supersedes, reason);
    return pl_store__insert(s, &row, id, err, label);
}

static int insert_operator(pl_store *s, pl_id af_key, const char *name, const char *since,
                           pl_err *err, const char *label)
{
    pl_operator op;
    memset(&op, 0, sizeof op);
    op.airframe_key = af_key;
    snprintf(op.operator_name, sizeof op.operator_name, "%s", name);
    snprintf(op.since, sizeof op.since, "%s", since);
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_OPERATOR), &op);
    return pl_store__insert(s, &row, NULL, err, label);
}

PL_EXPORT int pl_store_add_airframe(pl_store *s, const pl_airframe *af, pl_id *id, pl_err *err)
{
    assert(s && af);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "airframe %.*s", FLD(af->serial));
    int rc = pl_row__check(pl_row__table(PL_TABLE_AIRFRAME), af, label, err);
    if (!rc)
        rc = pl_row__check_name(err, label, "operator_name", af->operator_name,
                                sizeof af->operator_name, 0);
    if (!rc)
        rc = pl_row__check_date(err, label, "operator_since", af->operator_since,
                                sizeof af->operator_since, 0);
    if (rc)
        return rc;
    const char *since = af->operator_since[0] ? af->operator_since : af->manufactured;
    if (af->operator_name[0] && !since[0])
        return pl__err(err, PL_EINVAL,
                       "%s: operator %s needs operator_since (or the date of manufacture)",
                       label, af->operator_name);
    if (!af->operator_name[0] && af->operator_since[0])
        return pl__err(err, PL_EINVAL, "%s: operator_since is given without operator_name",
                       label);
    if (af->operator_name[0] && af->manufactured[0] && strcmp(since, af->manufactured) < 0)
        return pl__err(err, PL_EINVAL, "%s: operator_since %s is before the date of manufacture %s",
                       label, since, af->manufactured);
    if ((rc = pl_store__not_after_today(s, af->manufactured, "date of manufacture", err, label)))
        return rc;
    if (af->operator_name[0] &&
        (rc = pl_store__not_after_today(s, since, "operator_since", err, label)))
        return rc;

    int owned;
    rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    sqlite3_stmt *st;
    int found = 0;
    pl_id newid = 0;
    char other[PL_NAME_SIZE] = "";
    rc = pl_store__prepare(s, &st, "SELECT serial FROM airframe WHERE upper(serial) = "
                           "upper(?1) ORDER BY serial = ?1 DESC", err);
    if (!rc) {
        sqlite3_bind_text(st, 1, af->serial, -1, SQLITE_STATIC);
        int r = sqlite3_step(st);
        found = r == SQLITE_ROW;
        if (found)
            pl_store__col_text(st, 0, other, sizeof other);
        else if (r != SQLITE_DONE)
            rc = pl_store__fail(s, err, label);
        sqlite3_finalize(st);
    }
    if (!rc && found && strcmp(other, af->serial) == 0)
        rc = pl__err(err, PL_EEXISTS, "%s: serial already registered", label);
    else if (!rc && found)
        rc = pl__err(err, PL_EEXISTS, "%s: serial already registered as %s (serials are "
                     "compared without regard to case)", label, other);
    if (!rc)
        rc = insert_airframe(s, af, 0, 0, NULL, &newid, err, label);
    if (!rc && af->operator_name[0])
        rc = insert_operator(s, newid, af->operator_name, since, err, label);
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_EXPORT int pl_store_get_airframe(pl_store *s, const char *serial, pl_airframe *af,
                                    pl_err *err)
{
    assert(s && af);
    if (!serial)
        serial = "";
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "airframe %.*s", PL_NAME_SIZE, serial);
    pl_id key = 0;
    int rc = pl_store__airframe_key(s, serial, &key, NULL, err, label);
    if (rc == PL_ENOTFOUND)
        return pl__err(err, PL_ENOTFOUND, "airframe %s: not registered", serial);
    if (rc)
        return rc;
    pl_value arg = pl_store__arg_id(key);
    int found = 0;
    rc = pl_store__get(s, PL_TABLE_AIRFRAME, "WHERE t.stable_key = ?1", &arg, 1, af, &found,
                       err, NULL);
    if (!rc && !found)
        rc = pl__err(err, PL_ENOTFOUND, "airframe %s: not registered", serial);
    return rc;
}

PL_EXPORT int pl_store_add_operator(pl_store *s, const char *serial, const char *operator_name,
                                    const char *since, pl_err *err)
{
    assert(s);
    if (!serial)
        serial = "";
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "airframe %.*s", PL_NAME_SIZE, serial);
    pl_operator op;
    memset(&op, 0, sizeof op);
    int rc = pl_row__check_name(err, label, "operator_name", operator_name,
                                sizeof op.operator_name, 1);
    if (!rc)
        rc = pl_row__check_date(err, label, "since", since, sizeof op.since, 1);
    if (!rc)
        rc = pl_store__not_after_today(s, since, "operator since", err, label);
    int owned;
    if (rc || (rc = pl_store__write_begin(s, &owned, err)))
        return rc;
    pl_id key = 0;
    rc = pl_store__airframe_key(s, serial, &key, NULL, err, label);
    sqlite3_stmt *st = NULL;
    if (!rc)
        rc = pl_store__prepare(s, &st,
                               "SELECT (SELECT max(since) FROM airframe_operator "
                               "WHERE airframe_key = ?1), "
                               "(SELECT manufactured FROM airframe_current WHERE stable_key = ?1)",
                               err);
    if (!rc) {
        sqlite3_bind_int64(st, 1, key);
        if (sqlite3_step(st) != SQLITE_ROW) {
            rc = pl_store__fail(s, err, label);
        } else {
            /* the later of the current operator's start and the manufacture */
            const char *latest = "";
            for (int i = 0; i < 2; i++) {
                const char *d = (const char *)sqlite3_column_text(st, i);
                if (d && strcmp(d, latest) > 0)
                    latest = d;
            }
            if (strcmp(since, latest) < 0)
                rc = pl__err(err, PL_EINVAL,
                             "%s: operator since %s goes back before %s (the current operator's "
                             "start or the date of manufacture)", label, since, latest);
        }
        sqlite3_finalize(st);
    }
    if (!rc)
        rc = insert_operator(s, key, operator_name, since, err, label);
    return pl_store__write_end(s, owned, rc, err);
}

typedef struct operator_cb {
    pl_operator_fn fn;
    void *ud;
} operator_cb;

static int call_operator(void *ud, void *rec)
{
    operator_cb *c = ud;
    const pl_operator *op = rec;
    return c->fn(c->ud, op->operator_name, op->since, op->recorded_at) ? 1 : 0;
}

PL_EXPORT int pl_store_list_operators(pl_store *s, const char *serial, pl_operator_fn fn,
                                      void *ud, pl_err *err)
{
    assert(s && fn);
    if (!serial)
        serial = "";
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "airframe %.*s", PL_NAME_SIZE, serial);
    pl_id key = 0;
    int rc = pl_store__airframe_key(s, serial, &key, NULL, err, label);
    if (rc)
        return rc;
    operator_cb cb = { fn, ud };
    pl_value arg = pl_store__arg_id(key);
    return pl_store__list(s, PL_TABLE_OPERATOR, "WHERE t.airframe_key = ?1 ORDER BY t.since, t.id",
                          &arg, 1, call_operator, &cb, err, label);
}

PL_STORE_CALLBACK(airframe, pl_airframe_fn)

PL_EXPORT int pl_store_list_airframes(pl_store *s, const pl_airframe_filter *filter,
                                      pl_airframe_fn fn, void *ud, pl_err *err)
{
    assert(s && fn);
    pl_value args[2] = { pl_store__arg_text(filter ? filter->aircraft_type : NULL),
                         pl_store__arg_text(filter ? filter->operator_name : NULL) };
    airframe_cb cb = { fn, ud };
    return pl_store__list(s, PL_TABLE_AIRFRAME,
                          "WHERE (?1 IS NULL OR t.aircraft_type = ?1) AND (?2 IS NULL OR "
                          "?2 = " PL_STORE_LATEST_OPERATOR("operator_name") ") ORDER BY t.serial",
                          args, 2, call_airframe, &cb, err, NULL);
}

/* The first date of `sql` (?1: the airframe's key) with what it belongs to:
 * its first column the date, the second an id (0 for none), the third a
 * site code (may be NULL). */
static int first_dated(pl_store *s, const char *sql, pl_id key, char *date, pl_id *what,
                       char *code, pl_err *err, const char *label)
{
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st, sql, err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, key);
    int r = sqlite3_step(st);
    date[0] = code[0] = '\0';
    *what = 0;
    if (r == SQLITE_ROW) {
        pl_store__col_text(st, 0, date, PL_DATE_SIZE);
        *what = sqlite3_column_int64(st, 1);
        pl_store__col_text(st, 2, code, PL_NAME_SIZE);
    } else if (r != SQLITE_DONE) {
        rc = pl_store__fail(s, err, label);
    }
    sqlite3_finalize(st);
    return rc;
}

/*
 * A corrected airframe must change something, and its date of manufacture
 * may not come after today, after any of its inspections or after the
 * start of its operator history.
 */
static int check_airframe_correction(pl_store *s, pl_id key, const pl_airframe *af,
                                     pl_err *err, const char *label)
{
    pl_airframe cur;
    pl_value arg = pl_store__arg_id(key);
    int found = 0;
    int rc = pl_store__get(s, PL_TABLE_AIRFRAME, "WHERE t.stable_key = ?1", &arg, 1, &cur,
                           &found, err, label);
    if (rc)
        return rc;
    rc = pl_store__check_changes(pl_row__table(PL_TABLE_AIRFRAME), &cur, af, err, label);
    pl_row__release(pl_row__table(PL_TABLE_AIRFRAME), &cur);
    if (rc || !af->manufactured[0])
        return rc;
    if ((rc = pl_store__not_after_today(s, af->manufactured, "date of manufacture", err, label)))
        return rc;
    char date[PL_DATE_SIZE], code[PL_NAME_SIZE];
    pl_id what = 0;
    rc = first_dated(s, "SELECT i.performed_on, i.stable_key, c.code FROM inspection_current i "
                     "JOIN site_current c ON c.stable_key = i.site_key WHERE c.airframe_key = ?1 "
                     "ORDER BY i.performed_on, i.stable_key LIMIT 1", key, date, &what, code, err,
                     label);
    if (!rc && what && strcmp(date, af->manufactured) < 0)
        return pl__err(err, PL_EINVAL, "%s: inspection %lld (site %s, %s) would come before the "
                       "date of manufacture %s", label, (long long)what, code, date,
                       af->manufactured);
    if (!rc)
        rc = first_dated(s, "SELECT since, id, NULL FROM airframe_operator WHERE airframe_key = ?1 "
                         "ORDER BY since, id LIMIT 1", key, date, &what, code, err, label);
    if (!rc && what && strcmp(date, af->manufactured) < 0)
        return pl__err(err, PL_EINVAL, "%s: the operator history starts on %s, before the date of "
                       "manufacture %s", label, date, af->manufactured);
    return rc;
}

PL_EXPORT int pl_store_correct_airframe(pl_store *s, const pl_airframe *af, const char *reason,
                                        pl_id *id, pl_err *err)
{
    assert(s && af);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "airframe %.*s", FLD(af->serial));
    int rc = pl_row__check(pl_row__table(PL_TABLE_AIRFRAME), af, label, err);
    int owned;
    if (rc || (rc = pl_store__correction_begin(s, reason, &owned, err, label)))
        return rc;
    pl_id key = 0, current = 0, newid = 0;
    rc = pl_store__airframe_key(s, af->serial, &key, &current, err, label);
    if (!rc)
        rc = check_airframe_correction(s, key, af, err, label);
    if (!rc)
        rc = insert_airframe(s, af, key, current, reason, &newid, err, label);
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

/* ---- sites ------------------------------------------------------------------------- */

static void site_label(char *label, const pl_site *site)
{
    if (strnlen(site->airframe_serial, sizeof site->airframe_serial))
        snprintf(label, STORE_LABEL_SIZE, "site %.*s on %.*s", FLD(site->code),
                 FLD(site->airframe_serial));
    else
        snprintf(label, STORE_LABEL_SIZE, "site %.*s", FLD(site->code));
}

static int check_site(const pl_site *site, const char *label, pl_err *err)
{
    int rc = pl_row__check(pl_row__table(PL_TABLE_SITE), site, label, err);
    if (rc)
        return rc;
    pl_err e = { 0 };
    if (pl_placement_check(&site->map_frame, &e))
        return pl__err(err, PL_EINVAL, "%s: %s", label, e.msg);
    if (site->width_px > PL_MAP_MAX_SIDE || site->height_px > PL_MAP_MAX_SIDE)
        return pl__err(err, PL_EINVAL, "%s: expected map size %ux%u exceeds %u pixels a side",
                       label, site->width_px, site->height_px, PL_MAP_MAX_SIDE);
    return PL_OK;
}

PL_EXPORT int pl_site_check(const pl_site *site, pl_err *err)
{
    assert(site);
    char label[STORE_LABEL_SIZE];
    site_label(label, site);
    return check_site(site, label, err);
}

/* A site to add or correct: checked, with its airframe named. */
static int check_named_site(const pl_site *site, const char *label, pl_err *err)
{
    int rc = check_site(site, label, err);
    if (!rc && !site->airframe_serial[0])
        rc = pl__err(err, PL_EINVAL, "%s: airframe_serial is required", label);
    return rc;
}

static int insert_site(pl_store *s, const pl_site *site, pl_id af_key, pl_id key,
                       pl_id supersedes, const char *reason, pl_id *id, pl_err *err,
                       const char *label)
{
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_SITE), site);
    pl_row__set_id(&row, "airframe_key", af_key);
    pl_row__set_correction(&row, key, supersedes, reason);
    return pl_store__insert(s, &row, id, err, label);
}

PL_EXPORT int pl_store_add_site(pl_store *s, const pl_site *site, pl_id *id, pl_err *err)
{
    assert(s && site);
    char label[STORE_LABEL_SIZE];
    site_label(label, site);
    int rc = check_named_site(site, label, err);
    int owned;
    if (rc || (rc = pl_store__write_begin(s, &owned, err)))
        return rc;
    pl_id af = 0, newid = 0;
    rc = pl_store__airframe_key(s, site->airframe_serial, &af, NULL, err, label);
    if (!rc) {
        sqlite3_stmt *st;
        int found = 0;
        char other[PL_NAME_SIZE] = "";
        rc = pl_store__prepare(s, &st, "SELECT code FROM site WHERE airframe_key = ?1 AND "
                               "upper(code) = upper(?2) ORDER BY code = ?2 DESC", err);
        if (!rc) {
            sqlite3_bind_int64(st, 1, af);
            sqlite3_bind_text(st, 2, site->code, -1, SQLITE_STATIC);
            int r = sqlite3_step(st);
            found = r == SQLITE_ROW;
            if (found)
                pl_store__col_text(st, 0, other, sizeof other);
            else if (r != SQLITE_DONE)
                rc = pl_store__fail(s, err, label);
            sqlite3_finalize(st);
        }
        if (!rc && found && strcmp(other, site->code) == 0)
            rc = pl__err(err, PL_EEXISTS, "%s: code already exists on this airframe", label);
        else if (!rc && found)
            rc = pl__err(err, PL_EEXISTS, "%s: code already exists on this airframe as %s "
                         "(codes are compared without regard to case)", label, other);
    }
    if (!rc)
        rc = insert_site(s, site, af, 0, 0, NULL, &newid, err, label);
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_EXPORT int pl_store_get_site(pl_store *s, const char *serial, const char *code, pl_site *site,
                                pl_err *err)
{
    assert(s && site);
    if (!serial)
        serial = "";
    if (!code)
        code = "";
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "site %.*s on %.*s", PL_NAME_SIZE, code, PL_NAME_SIZE, serial);
    pl_id af = 0, key = 0;
    int rc = pl_store__airframe_key(s, serial, &af, NULL, err, label);
    if (!rc)
        rc = pl_store__site_key(s, af, code, &key, NULL, err, label);
    if (rc == PL_ENOTFOUND)
        return pl__err(err, PL_ENOTFOUND, "site %s on %s: no such site", code, serial);
    if (rc)
        return rc;
    pl_value arg = pl_store__arg_id(key);
    int found = 0;
    rc = pl_store__get(s, PL_TABLE_SITE, "WHERE t.stable_key = ?1", &arg, 1, site, &found, err,
                       NULL);
    if (!rc && !found)
        rc = pl__err(err, PL_ENOTFOUND, "site %s on %s: no such site", code, serial);
    return rc;
}

PL_EXPORT int pl_store_correct_site(pl_store *s, const pl_site *site, const char *reason,
                                    pl_id *id, pl_err *err)
{
    assert(s && site);
    char label[STORE_LABEL_SIZE];
    site_label(label, site);
    int rc = check_named_site(site, label, err);
    int owned;
    if (rc || (rc = pl_store__correction_begin(s, reason, &owned, err, label)))
        return rc;
    pl_id af = 0, key = 0, current = 0, newid = 0;
    rc = pl_store__airframe_key(s, site->airframe_serial, &af, NULL, err, label);
    if (!rc)
        rc = pl_store__site_key(s, af, site->code, &key, &current, err, label);
    if (!rc) {
        pl_site cur;
        pl_value arg = pl_store__arg_id(key);
        int found = 0;
        rc = pl_store__get(s, PL_TABLE_SITE, "WHERE t.stable_key = ?1", &arg, 1, &cur, &found,
                           err, label);
        if (!rc)
            rc = pl_store__check_changes(pl_row__table(PL_TABLE_SITE), &cur, site, err, label);
    }
    if (!rc)
        rc = insert_site(s, site, af, key, current, reason, &newid, err, label);
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_STORE_CALLBACK(site, pl_site_fn)

PL_EXPORT int pl_store_list_sites(pl_store *s, const pl_site_filter *filter, pl_site_fn fn,
                                  void *ud, pl_err *err)
{
    assert(s && fn);
    pl_value args[3] = { pl_store__arg_text(filter ? filter->airframe_serial : NULL),
                         pl_store__arg_text(filter ? filter->zone : NULL),
                         pl_store__arg_text(filter ? filter->method : NULL) };
    site_cb cb = { fn, ud };
    return pl_store__list(s, PL_TABLE_SITE,
                          "WHERE (?1 IS NULL OR upper(a.serial) = upper(?1)) "
                          "AND (?2 IS NULL OR t.zone = ?2) "
                          "AND (?3 IS NULL OR t.method = ?3) ORDER BY a.serial, t.code",
                          args, 3, call_site, &cb, err, NULL);
}
