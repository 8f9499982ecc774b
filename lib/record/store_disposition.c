/*
 * store_disposition.c - interpretations and signed dispositions
 * (plyledger/disposition.h), and the post-repair baseline a repair asks
 * for.
 */
#include "record/store_int.h"

#include "common/common_int.h"
#include "plyledger/disposition.h"
#include "plyledger/people.h"

#include <assert.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

PL_STORE_CALLBACK(interpretation, pl_interpretation_fn)
PL_STORE_CALLBACK(disposition, pl_disposition_fn)

/* The date and comparison of change `change_id`: its comparison's id,
 * whether it is done, and the date of its current inspection. */
static int change_facts(pl_store *s, pl_id change_id, pl_id *comparison, int64_t *number,
                        char date[PL_DATE_SIZE], pl_err *err, const char *label)
{
    sqlite3_stmt *st;
    int rc = pl_store__row_by_id(s, &st,
                                 "SELECT x.comparison_id, x.number, i.performed_on "
                                 "FROM indication_change x JOIN comparison c ON "
                                 "c.id = x.comparison_id JOIN inspection_current i ON "
                                 "i.stable_key = c.current_inspection WHERE x.id = ?1",
                                 change_id, err, label, "no such change");
    if (rc)
        return rc;
    *comparison = sqlite3_column_int64(st, 0);
    *number = sqlite3_column_int64(st, 1);
    pl_store__col_text(st, 2, date, PL_DATE_SIZE);
    sqlite3_finalize(st);
    return PL_OK;
}

/* Dates a signature may carry: a calendar date, not after today, not before
 * the inspection it is about. */
static int check_signed_on(pl_store *s, const char *signed_on, const char *inspected,
                           pl_err *err, const char *label)
{
    int rc = pl_store__not_after_today(s, signed_on, "signed_on", err, label);
    if (!rc && inspected[0] && strcmp(signed_on, inspected) < 0)
        rc = pl__err(err, PL_EINVAL, "%s: signed_on %s is before the inspection it is about "
                     "(%s)", label, signed_on, inspected);
    return rc;
}

/* Sign `row` with `key` into sig (which must outlive the insert). */
static int sign_row(pl_row *row, const pl_sign_key *key, unsigned char sig[PL_SIGN_SIZE],
                    pl_err *err, const char *label)
{
    /* the signature's entry is null in the signed content */
    unsigned char msg[PL_SIGNED_MESSAGE_SIZE];
    int rc = pl_row__signed_message(row, msg, label, err);
    if (rc)
        return rc;
    pl_sign(sig, msg, sizeof msg, key);
    pl_row__set_blob(row, "signature", sig, PL_SIGN_SIZE);
    return PL_OK;
}

/* The row a record supersedes: it must exist in `table`, belong to the
 * same change / comparison (`scope_col` = scope), and not be superseded. */
static int check_supersedes(pl_store *s, const char *table, const char *scope_col, pl_id scope,
                            pl_id old, const char *reason, pl_err *err, const char *label)
{
    if (!old)
        return PL_OK;
    if (!reason || !reason[0])
        return pl__err(err, PL_EINVAL, "%s: reason: say why %s %lld is superseded", label,
                       table, (long long)old);
    char sql[256];
    snprintf(sql, sizeof sql,
             "SELECT %s, EXISTS (SELECT 1 FROM %s y WHERE y.supersedes = t.id) FROM %s t "
             "WHERE t.id = ?1",
             scope_col, table, table);
    sqlite3_stmt *st;
    char missing[64];
    snprintf(missing, sizeof missing, "no %s %lld to supersede", table, (long long)old);
    int rc = pl_store__row_by_id(s, &st, sql, old, err, label, missing);
    if (rc)
        return rc;
    if (sqlite3_column_int64(st, 0) != scope)
        rc = pl__err(err, PL_EREFUSED, "%s: %s %lld is about another %s", label, table,
                     (long long)old, strcmp(table, "disposition") ? "change" : "comparison");
    else if (sqlite3_column_int(st, 1))
        rc = pl__err(err, PL_EREFUSED, "%s: %s %lld is superseded already: supersede the "
                     "latest one", label, table, (long long)old);
    sqlite3_finalize(st);
    return rc;
}

PL_EXPORT int pl_store_add_interpretation(pl_store *s, const pl_interpretation *in,
                                          const pl_sign_key *key, pl_id *id, pl_err *err)
{
    assert(s && in && key);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "interpretation of change %lld", (long long)in->change_id);
    const pl_table_desc *t = pl_row__table(PL_TABLE_INTERPRETATION);
    int rc = pl_row__check(t, in, label, err);
    if (!rc && in->change_id <= 0)
        rc = pl__err(err, PL_EINVAL, "%s: change_id: expected a change", label);
    int owned;
    if (rc || (rc = pl_store__write_begin(s, &owned, err)))
        return rc;
    pl_id comparison = 0, person = 0, newid = 0;
    int64_t number = 0;
    char date[PL_DATE_SIZE] = "";
    rc = change_facts(s, in->change_id, &comparison, &number, date, err, label);
    if (!rc)
        rc = check_signed_on(s, in->signed_on, date, err, label);
    if (!rc)
        rc = pl_people__signer(s, in->handle, in->signed_on, key, "inspector engineer", &person,
                               err, label);
    if (!rc)
        rc = check_supersedes(s, "interpretation", "change_id", in->change_id, in->supersedes,
                              in->reason, err, label);
    if (!rc && !in->supersedes) {
        sqlite3_stmt *st;
        if (!(rc = pl_store__prepare(s, &st,
                                     "SELECT id FROM interpretation t WHERE change_id = ?1 AND "
                                     "NOT EXISTS (SELECT 1 FROM interpretation y WHERE "
                                     "y.supersedes = t.id)",
                                     err))) {
            sqlite3_bind_int64(st, 1, in->change_id);
            if (sqlite3_step(st) == SQLITE_ROW)
                rc = pl__err(err, PL_EREFUSED, "%s: the change is interpreted already "
                             "(interpretation %lld): supersede it, with a reason", label,
                             (long long)sqlite3_column_int64(st, 0));
            sqlite3_finalize(st);
        }
    }
    unsigned char sig[PL_SIGN_SIZE];
    if (!rc) {
        pl_interpretation rec = *in;
        rec.person_id = person;
        pl_row row;
        pl_row__from_record(&row, t, &rec);
        rc = sign_row(&row, key, sig, err, label);
        if (!rc)
            rc = pl_store__insert(s, &row, &newid, err, label);
    }
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_EXPORT int pl_store_list_interpretations(pl_store *s, pl_id comparison_id,
                                            pl_interpretation_fn fn, void *ud, pl_err *err)
{
    assert(s && fn);
    interpretation_cb cb = { fn, ud };
    pl_value arg = pl_store__arg_id(comparison_id);
    return pl_store__list(s, PL_TABLE_INTERPRETATION,
                          "WHERE ?1 = 0 OR x.comparison_id = ?1 "
                          "ORDER BY x.comparison_id, x.number, t.id",
                          &arg, 1, call_interpretation, &cb, err, NULL);
}

PL_EXPORT long pl_disposition_change_ids(const char *changes, pl_id *ids, size_t cap)
{
    if (!changes)
        return -1;
    const char *p = changes;
    while (*p == ' ')
        p++;
    if (*p++ != '[')
        return -1;
    long n = 0;
    for (;;) {
        while (*p == ' ')
            p++;
        if (*p == ']' && n == 0)
            break;
        char *end;
        errno = 0;
        long long v = strtoll(p, &end, 10);
        if (end == p || errno || v <= 0)
            return -1;
        if ((size_t)n < cap)
            ids[n] = v;
        n++;
        p = end;
        while (*p == ' ')
            p++;
        if (*p == ']')
            break;
        if (*p++ != ',')
            return -1;
    }
    return p[1] == '\0' ? n : -1;
}

static int cmp_id(const void *a, const void *b)
{
    pl_id x = *(const pl_id *)a, y = *(const pl_id *)b;
    return x < y ? -1 : x > y;
}

#define MAX_CHANGES 64

PL_EXPORT int pl_store_add_disposition(pl_store *s, const pl_disposition *d,
                                       const pl_id *changes, size_t n, const pl_sign_key *key,
                                       pl_id *id, pl_err *err)
{
    assert(s && d && key && (changes || !n));
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "disposition of comparison %lld", (long long)d->comparison_id);
    const pl_table_desc *t = pl_row__table(PL_TABLE_DISPOSITION);
    int rc = pl_row__check(t, d, label, err);
    if (!rc && (n == 0 || n > MAX_CHANGES))
        rc = pl__err(err, PL_EINVAL, "%s: changes: expected 1 to %d changes it covers", label,
                     MAX_CHANGES);
    if (rc)
        return rc;
    pl_id ids[MAX_CHANGES];
    memcpy(ids, changes, n * sizeof *ids);
    qsort(ids, n, sizeof *ids, cmp_id);
    for (size_t i = 1; i < n; i++)
        if (ids[i] == ids[i - 1])
            return pl__err(err, PL_EINVAL, "%s: changes: change %lld is named twice", label,
                           (long long)ids[i]);
    /* what each decision needs */
    const char *dec = d->decision;
    int monitor = strcmp(dec, "monitor") == 0;
    if (monitor && !d->due_date[0] && isnan(d->due_hours) && d->due_cycles < 0)
        return pl__err(err, PL_EINVAL, "%s: monitor: say when the next inspection is due (a "
                       "date, flight hours or cycles)", label);
    if (!monitor && (d->due_date[0] || !isnan(d->due_hours) || d->due_cycles >= 0))
        return pl__err(err, PL_EINVAL, "%s: a due inspection belongs to a monitor decision, "
                       "not %s", label, dec);
    if (d->due_cycles == 0 || d->due_cycles < -1)
        return pl__err(err, PL_EINVAL, "%s: due_cycles: expected a count from 1", label);
    if (strcmp(dec, "repair") == 0 && !d->repair_ref[0])
        return pl__err(err, PL_EINVAL, "%s: repair: give the repair reference", label);
    if (strcmp(dec, "repair") && d->repair_ref[0])
        return pl__err(err, PL_EINVAL, "%s: a repair reference belongs to a repair decision",
                       label);
    if (strcmp(dec, "refer-to-design-holder") == 0 && !d->query_ref[0])
        return pl__err(err, PL_EINVAL, "%s: refer-to-design-holder: give the query reference",
                       label);
    if (d->due_date[0] && strcmp(d->due_date, d->signed_on) <= 0)
        return pl__err(err, PL_EINVAL, "%s: due_date %s is not after the signing date %s",
                       label, d->due_date, d->signed_on);
    int owned;
    if ((rc = pl_store__write_begin(s, &owned, err)))
        return rc;
    sqlite3_stmt *st = NULL;
    pl_id criteria = 0, person = 0, newid = 0;
    char date[PL_DATE_SIZE] = "";
    rc = pl_store__row_by_id(s, &st,
                             "SELECT c.status, c.criteria_id, i.performed_on FROM comparison c "
                             "JOIN inspection_current i ON i.stable_key = c.current_inspection "
                             "WHERE c.id = ?1",
                             d->comparison_id, err, label, "no such comparison");
    if (!rc) {
        const char *status = (const char *)sqlite3_column_text(st, 0);
        if (!status || strcmp(status, "done") != 0)
            rc = pl__err(err, PL_EREFUSED, "%s: the comparison was not done: there is nothing "
                         "it found to dispose of", label);
        criteria = sqlite3_column_int64(st, 1);
        pl_store__col_text(st, 2, date, sizeof date);
        sqlite3_finalize(st);
    }
    st = NULL;
    if (!rc)
        rc = check_signed_on(s, d->signed_on, date, err, label);
    if (!rc)
        rc = pl_people__signer(s, d->handle, d->signed_on, key, "engineer reviewer", &person,
                               err, label);
    if (!rc)
        rc = check_supersedes(s, "disposition", "comparison_id", d->comparison_id, d->supersedes,
                              d->reason, err, label);
    /* each change: of this comparison, interpreted as relevant (the latest
     * interpretation), and covered by no disposition in force but the one
     * superseded */
    if (!rc)
        rc = pl_store__prepare(s, &st,
                               "SELECT x.comparison_id, x.number, (SELECT class FROM "
                               "interpretation t WHERE t.change_id = x.id AND NOT EXISTS "
                               "(SELECT 1 FROM interpretation y WHERE y.supersedes = t.id)) "
                               "FROM indication_change x WHERE x.id = ?1",
                               err);
    for (size_t i = 0; !rc && i < n; i++) {
        sqlite3_reset(st);
        sqlite3_bind_int64(st, 1, ids[i]);
        int r = sqlite3_step(st);
        if (r == SQLITE_DONE) {
            rc = pl__err(err, PL_ENOTFOUND, "%s: no change %lld", label, (long long)ids[i]);
        } else if (r != SQLITE_ROW) {
            rc = pl_store__fail(s, err, label);
        } else if (sqlite3_column_int64(st, 0) != d->comparison_id) {
            rc = pl__err(err, PL_EREFUSED, "%s: change %lld belongs to comparison %lld", label,
                         (long long)ids[i], (long long)sqlite3_column_int64(st, 0));
        } else {
            const char *cls = (const char *)sqlite3_column_text(st, 2);
            long long num = (long long)sqlite3_column_int64(st, 1);
            if (!cls)
                rc = pl__err(err, PL_EREFUSED, "%s: change %lld (number %lld) is not "
                             "interpreted yet: interpret it first (false, nonrelevant or "
                             "relevant, ASTM E1316); only a relevant indication is disposed of",
                             label, (long long)ids[i], num);
            else if (strcmp(cls, "relevant") != 0)
                rc = pl__err(err, PL_EREFUSED, "%s: change %lld (number %lld) is interpreted "
                             "as %s: only a relevant indication is evaluated and disposed of",
                             label, (long long)ids[i], num, cls);
        }
    }
    sqlite3_finalize(st);
    st = NULL;
    /* dispositions in force over this comparison */
    if (!rc)
        rc = pl_store__prepare(s, &st,
                               "SELECT id, changes_json FROM disposition t WHERE "
                               "comparison_id = ?1 AND NOT EXISTS (SELECT 1 FROM disposition y "
                               "WHERE y.supersedes = t.id) AND t.id IS NOT ?2",
                               err);
    if (!rc) {
        sqlite3_bind_int64(st, 1, d->comparison_id);
        if (d->supersedes)
            sqlite3_bind_int64(st, 2, d->supersedes);
        int r;
        while (!rc && (r = sqlite3_step(st)) == SQLITE_ROW) {
            pl_id have[MAX_CHANGES];
            long k = pl_disposition_change_ids((const char *)sqlite3_column_text(st, 1), have,
                                               MAX_CHANGES);
            for (long a = 0; !rc && a < k && a < MAX_CHANGES; a++)
                for (size_t b = 0; !rc && b < n; b++)
                    if (have[a] == ids[b])
                        rc = pl__err(err, PL_EREFUSED, "%s: change %lld is covered by "
                                     "disposition %lld, which is in force: supersede it, with "
                                     "a reason", label, (long long)ids[b],
                                     (long long)sqlite3_column_int64(st, 0));
        }
    }
    sqlite3_finalize(st);
    unsigned char sig[PL_SIGN_SIZE];
    if (!rc) {
        pl_disposition rec = *d;
        size_t len = 0;
        len += (size_t)snprintf(rec.changes + len, sizeof rec.changes - len, "[");
        for (size_t i = 0; i < n && len < sizeof rec.changes; i++)
            len += (size_t)snprintf(rec.changes + len, sizeof rec.changes - len, "%s%lld",
                                    i ? "," : "", (long long)ids[i]);
        if (len + 2 > sizeof rec.changes)
            rc = pl__err(err, PL_EINVAL, "%s: changes: too many to record", label);
        else
            snprintf(rec.changes + len, sizeof rec.changes - len, "]");
        rec.criteria_id = criteria;
        rec.person_id = person;
        pl_row row;
        pl_row__from_record(&row, t, &rec);
        if (!rc)
            rc = sign_row(&row, key, sig, err, label);
        if (!rc)
            rc = pl_store__insert(s, &row, &newid, err, label);
    }
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_EXPORT int pl_store_list_dispositions(pl_store *s, const char *serial, const char *code,
                                         pl_id comparison_id, pl_disposition_fn fn, void *ud,
                                         pl_err *err)
{
    assert(s && fn);
    disposition_cb cb = { fn, ud };
    pl_value args[3] = { pl_store__arg_text(serial), pl_store__arg_text(code),
                         pl_store__arg_id(comparison_id) };
    return pl_store__list(s, PL_TABLE_DISPOSITION,
                          "WHERE (?1 IS NULL OR s.airframe_key = (SELECT stable_key FROM "
                          "airframe_current WHERE serial = ?1 COLLATE NOCASE)) AND "
                          "(?2 IS NULL OR coalesce(s.key, s.id) = (SELECT stable_key FROM "
                          "site_current z WHERE z.airframe_key = s.airframe_key AND "
                          "z.code = ?2 COLLATE NOCASE)) AND (?3 = 0 OR "
                          "t.comparison_id = ?3) ORDER BY t.signed_on, t.id",
                          args, 3, call_disposition, &cb, err, NULL);
}

PL_EXPORT int pl_store_find_comparison(pl_store *s, const char *serial, const char *code,
                                       const char *task, pl_id *id, pl_err *err)
{
    assert(s && serial && code && id);
    sqlite3_stmt *st;
    int rc = pl_store__prepare(
        s, &st,
        "SELECT c.id FROM comparison c JOIN site_current z ON z.stable_key = c.site_key "
        "JOIN airframe_current a ON a.stable_key = z.airframe_key "
        "JOIN inspection_current i ON i.stable_key = c.current_inspection "
        "WHERE a.serial = ?1 COLLATE NOCASE AND z.code = ?2 COLLATE NOCASE "
        "AND c.status = 'done' AND (?3 IS NULL OR i.task_ref = ?3) "
        "ORDER BY i.performed_on DESC, c.id DESC LIMIT 1",
        err);
    if (rc)
        return rc;
    sqlite3_bind_text(st, 1, serial, -1, SQLITE_TRANSIENT);
    sqlite3_bind_text(st, 2, code, -1, SQLITE_TRANSIENT);
    pl_store__bind_opt_text(st, 3, task);
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW)
        *id = sqlite3_column_int64(st, 0);
    else if (r == SQLITE_DONE)
        rc = pl__err(err, PL_ENOTFOUND, "site %s of %s has no comparison that was done%s%s",
                     code, serial, task ? " for task " : "", task ? task : "");
    else
        rc = pl_store__fail(s, err, NULL);
    sqlite3_finalize(st);
    return rc;
}

PL_EXPORT int pl_store_get_disposition(pl_store *s, pl_id id, pl_disposition *d, pl_err *err)
{
    assert(s && d);
    pl_value arg = pl_store__arg_id(id);
    int found = 0;
    int rc = pl_store__get(s, PL_TABLE_DISPOSITION, "WHERE t.id = ?1", &arg, 1, d, &found, err,
                           NULL);
    if (!rc && !found)
        rc = pl__err(err, PL_ENOTFOUND, "disposition %lld: no such disposition", (long long)id);
    return rc;
}

int pl_disposition__check_post_repair(pl_store *s, const pl_inspection *in, pl_id site_key,
                                      pl_err *err, const char *label)
{
    if (strcmp(in->kind, "post-repair") == 0 || strcmp(in->kind, "baseline") == 0)
        return PL_OK;
    /* the latest repair in force at this site whose comparison's inspection
     * was before this one, and no inspection of the site since that */
    sqlite3_stmt *st;
    int rc = pl_store__prepare(
        s, &st,
        "SELECT t.id, t.repair_ref, t.signed_on, i.performed_on FROM disposition t "
        "JOIN comparison c ON c.id = t.comparison_id "
        "JOIN inspection_current i ON i.stable_key = c.current_inspection "
        "WHERE c.site_key = ?1 AND t.decision = 'repair' AND i.performed_on < ?2 "
        "AND NOT EXISTS (SELECT 1 FROM disposition y WHERE y.supersedes = t.id) "
        "AND NOT EXISTS (SELECT 1 FROM inspection_current j WHERE j.site_key = ?1 "
        "AND j.performed_on > i.performed_on AND j.performed_on <= ?2) "
        "ORDER BY i.performed_on DESC LIMIT 1",
        err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, site_key);
    sqlite3_bind_text(st, 2, in->performed_on, -1, SQLITE_TRANSIENT);
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW)
        rc = pl__err(err, PL_EREFUSED,
                     "%s: disposition %lld (signed %s) decided a repair of this site (%s) "
                     "after the inspection of %s: its next inspection is the site's post-repair "
                     "baseline; record it with kind post-repair",
                     label, (long long)sqlite3_column_int64(st, 0),
                     (const char *)sqlite3_column_text(st, 2),
                     (const char *)sqlite3_column_text(st, 1),
                     (const char *)sqlite3_column_text(st, 3));
    else if (r != SQLITE_DONE)
        rc = pl_store__fail(s, err, label);
    sqlite3_finalize(st);
    return rc;
}
