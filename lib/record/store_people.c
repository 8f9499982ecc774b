/*
 * store_people.c - the register of people, their keys and qualifications
 * (plyledger/people.h), the qualification check on recording an
 * inspection, and the signature checks of signed records.
 */
#include "record/store_int.h"

#include "common/common_int.h"
#include "plyledger/disposition.h"
#include "plyledger/people.h"

#include <assert.h>
#include <ctype.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

PL_STORE_CALLBACK(person, pl_person_fn)
PL_STORE_CALLBACK(person_key, pl_person_key_fn)
PL_STORE_CALLBACK(qualification, pl_qualification_fn)

/* The person of `handle` (any case): *found, and its id. */
static int find_person(pl_store *s, const char *handle, pl_person *p, int *found, pl_err *err,
                       const char *label)
{
    pl_value arg = pl_store__arg_text(handle);
    pl_person tmp;
    int rc = pl_store__get(s, PL_TABLE_PERSON, "WHERE t.handle = ?1 COLLATE NOCASE", &arg, 1,
                           p ? p : &tmp, found, err, label);
    if (!p && !rc && *found)
        pl_row__release(pl_row__table(PL_TABLE_PERSON), &tmp);
    return rc;
}

static int need_person(pl_store *s, const char *handle, pl_person *p, pl_err *err,
                       const char *label)
{
    int found = 0;
    int rc = find_person(s, handle, p, &found, err, label);
    if (!rc && !found)
        rc = pl__err(err, PL_ENOTFOUND, "%s: '%s' is not in the register of people", label,
                     handle);
    return rc;
}

PL_EXPORT int pl_store_add_person(pl_store *s, const pl_person *person, pl_id *id, pl_err *err)
{
    assert(s && person);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "person %.*s", FLD(person->handle));
    const pl_table_desc *t = pl_row__table(PL_TABLE_PERSON);
    int rc = pl_row__check(t, person, label, err);
    int owned;
    if (rc || (rc = pl_store__write_begin(s, &owned, err)))
        return rc;
    int found = 0;
    rc = find_person(s, person->handle, NULL, &found, err, label);
    if (!rc && found)
        rc = pl__err(err, PL_EEXISTS, "%s: the register has a person of that handle already",
                     label);
    pl_id newid = 0;
    if (!rc) {
        pl_row row;
        pl_row__from_record(&row, t, person);
        rc = pl_store__insert(s, &row, &newid, err, label);
    }
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_EXPORT int pl_store_get_person(pl_store *s, const char *handle, pl_person *person,
                                  pl_err *err)
{
    assert(s && handle && person);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "person %s", handle);
    return need_person(s, handle, person, err, label);
}

PL_EXPORT int pl_store_list_people(pl_store *s, pl_person_fn fn, void *ud, pl_err *err)
{
    assert(s && fn);
    person_cb cb = { fn, ud };
    return pl_store__list(s, PL_TABLE_PERSON, "ORDER BY t.handle COLLATE NOCASE", NULL, 0,
                          call_person, &cb, err, NULL);
}

static int is_hex64(const char *h)
{
    return strlen(h) == 64 && strspn(h, "0123456789abcdef") == 64;
}

PL_EXPORT int pl_store_add_person_key(pl_store *s, const pl_person_key *key, pl_id *id,
                                      pl_err *err)
{
    assert(s && key);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "key of %.*s", FLD(key->handle));
    const pl_table_desc *t = pl_row__table(PL_TABLE_PERSON_KEY);
    int rc = pl_row__check(t, key, label, err);
    if (!rc && !is_hex64(key->public_key))
        rc = pl__err(err, PL_EINVAL, "%s: public_key: expected 64 lower-case hex digits (an "
                     "Ed25519 public key)", label);
    if (!rc)
        rc = pl_store__not_after_today(s, key->valid_from, "valid_from", err, label);
    int owned;
    if (rc || (rc = pl_store__write_begin(s, &owned, err)))
        return rc;
    pl_person p;
    rc = need_person(s, key->handle, &p, err, label);
    sqlite3_stmt *st = NULL;
    if (!rc)
        rc = pl_store__prepare(s, &st,
                               "SELECT max(valid_from), (SELECT count(*) FROM person_key k "
                               "WHERE k.public_key = ?2) FROM person_key WHERE person_id = ?1",
                               err);
    if (!rc) {
        sqlite3_bind_int64(st, 1, p.id);
        sqlite3_bind_text(st, 2, key->public_key, -1, SQLITE_STATIC);
        if (sqlite3_step(st) != SQLITE_ROW) {
            rc = pl_store__fail(s, err, label);
        } else {
            const char *last = (const char *)sqlite3_column_text(st, 0);
            if (sqlite3_column_int64(st, 1) > 0)
                rc = pl__err(err, PL_EEXISTS, "%s: this public key is in the register already",
                             label);
            else if (last && strcmp(key->valid_from, last) <= 0)
                rc = pl__err(err, PL_EINVAL,
                             "%s: valid_from %s: a new key must start after the key held "
                             "from %s (signatures made until then stay checked against it)",
                             label, key->valid_from, last);
            else if (last && !key->reason[0])
                rc = pl__err(err, PL_EINVAL, "%s: reason: say why the key held from %s is "
                             "replaced", label, last);
        }
        sqlite3_finalize(st);
    }
    pl_id newid = 0;
    if (!rc) {
        pl_person_key rec = *key;
        rec.person_id = p.id;
        pl_row row;
        pl_row__from_record(&row, t, &rec);
        rc = pl_store__insert(s, &row, &newid, err, label);
    }
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_EXPORT int pl_store_list_person_keys(pl_store *s, const char *handle, pl_person_key_fn fn,
                                        void *ud, pl_err *err)
{
    assert(s && fn);
    person_key_cb cb = { fn, ud };
    pl_value arg = pl_store__arg_text(handle);
    return pl_store__list(s, PL_TABLE_PERSON_KEY,
                          "WHERE ?1 IS NULL OR p.handle = ?1 COLLATE NOCASE "
                          "ORDER BY p.handle COLLATE NOCASE, t.valid_from",
                          &arg, 1, call_person_key, &cb, err, NULL);
}

PL_EXPORT int pl_store_person_key_on(pl_store *s, pl_id person_id, const char *date,
                                     unsigned char pub[PL_SIGN_PUBLIC_SIZE], pl_err *err)
{
    assert(s && date && pub);
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st,
                               "SELECT k.public_key, p.handle FROM person_key k JOIN person p "
                               "ON p.id = k.person_id WHERE k.person_id = ?1 AND "
                               "k.valid_from <= ?2 ORDER BY k.valid_from DESC LIMIT 1",
                               err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, person_id);
    sqlite3_bind_text(st, 2, date, -1, SQLITE_TRANSIENT);
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW) {
        const char *hex = (const char *)sqlite3_column_text(st, 0);
        if (!hex || !is_hex64(hex) || pl_sha256_from_hex(pub, hex) != PL_OK)
            rc = pl__err(err, PL_EFORMAT, "person %lld: a public key in the register is not "
                         "64 hex digits", (long long)person_id);
    } else if (r == SQLITE_DONE) {
        rc = pl__err(err, PL_ENOTFOUND, "person %lld held no key in the register on %s",
                     (long long)person_id, date);
    } else {
        rc = pl_store__fail(s, err, NULL);
    }
    sqlite3_finalize(st);
    return rc;
}

PL_EXPORT int pl_store_add_qualification(pl_store *s, const pl_qualification *q, pl_id *id,
                                         pl_err *err)
{
    assert(s && q);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "qualification of %.*s", FLD(q->handle));
    const pl_table_desc *t = pl_row__table(PL_TABLE_QUALIFICATION);
    int rc = pl_row__check(t, q, label, err);
    if (!rc && strcmp(q->valid_until, q->valid_from) < 0)
        rc = pl__err(err, PL_EINVAL, "%s: valid_until %s is before valid_from %s", label,
                     q->valid_until, q->valid_from);
    if (!rc)
        rc = pl_store__not_after_today(s, q->valid_from, "valid_from", err, label);
    int owned;
    if (rc || (rc = pl_store__write_begin(s, &owned, err)))
        return rc;
    pl_person p;
    rc = need_person(s, q->handle, &p, err, label);
    pl_id newid = 0;
    if (!rc) {
        pl_qualification rec = *q;
        rec.person_id = p.id;
        pl_row row;
        pl_row__from_record(&row, t, &rec);
        rc = pl_store__insert(s, &row, &newid, err, label);
    }
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_EXPORT int pl_store_list_qualifications(pl_store *s, const char *handle,
                                           pl_qualification_fn fn, void *ud, pl_err *err)
{
    assert(s && fn);
    qualification_cb cb = { fn, ud };
    pl_value arg = pl_store__arg_text(handle);
    return pl_store__list(s, PL_TABLE_QUALIFICATION,
                          "WHERE ?1 IS NULL OR p.handle = ?1 COLLATE NOCASE "
                          "ORDER BY p.handle COLLATE NOCASE, t.method, t.valid_from",
                          &arg, 1, call_qualification, &cb, err, NULL);
}

/* Levels "2, 3" or "2 3" into "2 3" (each of the vocabulary, none twice). */
static int normalise_levels(const char *in, char *out, size_t cap, pl_err *err,
                            const char *label)
{
    char buf[PL_NAME_SIZE];
    snprintf(buf, sizeof buf, "%s", in);
    out[0] = '\0';
    size_t n = 0;
    int count = 0;
    char *save = NULL;
    for (char *w = strtok_r(buf, " ,", &save); w; w = strtok_r(NULL, " ,", &save)) {
        if (pl_vocabulary_index(PL_VOCAB_INSPECTOR_LEVEL, w) < 0) {
            char words[128];
            pl_vocabulary_text(words, sizeof words, PL_VOCAB_INSPECTOR_LEVEL, " or ");
            return pl__err(err, PL_EINVAL, "%s: levels: '%s' is not a level (%s)", label, w,
                           words);
        }
        char padded[PL_NAME_SIZE + 2];
        snprintf(padded, sizeof padded, " %s ", out);
        char needle[PL_WORD_SIZE + 2];
        snprintf(needle, sizeof needle, " %s ", w);
        if (strstr(padded, needle))
            return pl__err(err, PL_EINVAL, "%s: levels: '%s' is named twice", label, w);
        n += (size_t)snprintf(out + n, cap - n, "%s%s", count++ ? " " : "", w);
    }
    if (!count)
        return pl__err(err, PL_EINVAL, "%s: levels: expected one or more levels", label);
    return PL_OK;
}

PL_EXPORT int pl_store_set_procedure_levels(pl_store *s, const pl_procedure_levels *p, pl_id *id,
                                            pl_err *err)
{
    assert(s && p);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "procedure %.*s", FLD(p->procedure));
    const pl_table_desc *t = pl_row__table(PL_TABLE_PROCEDURE_LEVELS);
    int rc = pl_row__check(t, p, label, err);
    pl_procedure_levels rec = *p;
    if (!rc)
        rc = normalise_levels(p->levels, rec.levels, sizeof rec.levels, err, label);
    if (rc)
        return rc;
    pl_row row;
    pl_row__from_record(&row, t, &rec);
    return pl_store__write_row(s, &row, id, err, label);
}

/* Whether `level` is a word of the levels text `levels`. */
static int level_in(const char *levels, const char *level)
{
    char padded[PL_NAME_SIZE + 2], needle[PL_WORD_SIZE + 2];
    snprintf(padded, sizeof padded, " %s ", levels);
    snprintf(needle, sizeof needle, " %s ", level);
    return strstr(padded, needle) != NULL;
}

PL_EXPORT int pl_store_check_inspector(pl_store *s, const char *inspector, const char *method,
                                       const char *level, const char *date,
                                       const char *procedure, const char *rev, pl_err *err)
{
    assert(s && inspector && method && level && date);
    int64_t inspectors = 0;
    int rc = pl_store__query_int(s, "SELECT count(*) FROM person WHERE role = 'inspector'",
                                 &inspectors, err);
    if (rc || inspectors == 0)
        return rc;
    pl_person p;
    int found = 0;
    if ((rc = find_person(s, inspector, &p, &found, err, NULL)))
        return rc;
    if (!found)
        return pl__err(err, PL_EREFUSED,
                       "inspector '%s' is not in the register of people: once the register "
                       "holds an inspector, every inspection names a registered person by "
                       "handle (plyledger people list)",
                       inspector);
    sqlite3_stmt *st;
    if ((rc = pl_store__prepare(s, &st,
                                "SELECT level, valid_from, valid_until FROM person_qualification "
                                "WHERE person_id = ?1 AND method = ?2 "
                                "ORDER BY (level = ?3) DESC, valid_until DESC",
                                err)))
        return rc;
    sqlite3_bind_int64(st, 1, p.id);
    sqlite3_bind_text(st, 2, method, -1, SQLITE_TRANSIENT);
    sqlite3_bind_text(st, 3, level, -1, SQLITE_TRANSIENT);
    int any = 0, valid_here = 0, r;
    char lapsed[160] = "", other[96] = "";
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        const char *lv = (const char *)sqlite3_column_text(st, 0);
        const char *from = (const char *)sqlite3_column_text(st, 1);
        const char *until = (const char *)sqlite3_column_text(st, 2);
        if (!lv || !from || !until)
            continue;
        any = 1;
        int in_date = strcmp(from, date) <= 0 && strcmp(date, until) <= 0;
        if (strcmp(lv, level) == 0) {
            if (in_date)
                valid_here = 1;
            else if (!lapsed[0])
                snprintf(lapsed, sizeof lapsed, "%s its level %s qualification for %s is "
                         "valid from %s to %s", strcmp(date, from) < 0 ? "not yet valid:" :
                         "lapsed:", lv, method, from, until);
        } else if (in_date && !other[0]) {
            snprintf(other, sizeof other, "level %s", lv);
        }
    }
    rc = r == SQLITE_DONE ? PL_OK : pl_store__fail(s, err, NULL);
    sqlite3_finalize(st);
    if (rc)
        return rc;
    if (!any)
        return pl__err(err, PL_EREFUSED, "inspector %s holds no qualification for %s in the "
                       "register", p.handle, method);
    if (!valid_here && lapsed[0])
        return pl__err(err, PL_EREFUSED, "inspector %s may not perform this inspection on %s, "
                       "%s", p.handle, date, lapsed);
    if (!valid_here)
        return pl__err(err, PL_EREFUSED, "inspector %s holds %s for %s on %s, not level %s as "
                       "recorded", p.handle, other[0] ? other : "another level", method, date,
                       level);
    if (!procedure || !procedure[0])
        return PL_OK;
    if ((rc = pl_store__prepare(s, &st,
                                "SELECT levels, procedure_rev FROM procedure_level "
                                "WHERE procedure = ?1 AND (procedure_rev IS NULL OR "
                                "procedure_rev = ?2) ORDER BY (procedure_rev IS NULL), id DESC "
                                "LIMIT 1",
                                err)))
        return rc;
    sqlite3_bind_text(st, 1, procedure, -1, SQLITE_TRANSIENT);
    sqlite3_bind_text(st, 2, rev ? rev : "", -1, SQLITE_TRANSIENT);
    r = sqlite3_step(st);
    if (r == SQLITE_ROW) {
        const char *levels = (const char *)sqlite3_column_text(st, 0);
        if (levels && !level_in(levels, level))
            rc = pl__err(err, PL_EREFUSED, "procedure %s%s%s lets levels %s perform it, not "
                         "level %s (inspector %s)", procedure, rev && rev[0] ? " revision " : "",
                         rev ? rev : "", levels, level, p.handle);
    } else if (r != SQLITE_DONE) {
        rc = pl_store__fail(s, err, NULL);
    }
    sqlite3_finalize(st);
    return rc;
}

int pl_people__check_inspection(pl_store *s, const pl_inspection *in, pl_id site_key,
                                pl_err *err, const char *label)
{
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st, "SELECT method FROM site_current WHERE stable_key = ?1",
                               err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, site_key);
    char method[PL_NAME_SIZE] = "";
    if (sqlite3_step(st) == SQLITE_ROW)
        pl_store__col_text(st, 0, method, sizeof method);
    sqlite3_finalize(st);
    pl_err e = { 0 };
    rc = pl_store_check_inspector(s, in->inspector, method, in->inspector_level,
                                  in->performed_on, in->procedure, in->procedure_rev, &e);
    if (rc)
        return pl__err(err, rc, "%s: %s", label, e.msg);
    return PL_OK;
}

int pl_people__signer(pl_store *s, const char *handle, const char *date, const pl_sign_key *key,
                      const char *roles, pl_id *person_id, pl_err *err, const char *label)
{
    pl_person p;
    int rc = need_person(s, handle, &p, err, label);
    if (rc)
        return rc;
    if (!level_in(roles, p.role))
        return pl__err(err, PL_EREFUSED, "%s: %s is registered as %s; this is signed by a "
                       "person of role %s", label, p.handle, p.role, roles);
    unsigned char pub[PL_SIGN_PUBLIC_SIZE];
    pl_err e = { 0 };
    rc = pl_store_person_key_on(s, p.id, date, pub, &e);
    if (rc == PL_ENOTFOUND)
        return pl__err(err, PL_EREFUSED, "%s: %s holds no key in the register on %s: register "
                       "one first (plyledger people add-key)", label, p.handle, date);
    if (rc)
        return pl__err(err, rc, "%s: %s", label, e.msg);
    if (memcmp(pub, key->public_key, sizeof pub) != 0) {
        char want[PL_SIGN_FINGERPRINT_SIZE], got[PL_SIGN_FINGERPRINT_SIZE];
        pl_sign_fingerprint(want, pub);
        pl_sign_fingerprint(got, key->public_key);
        return pl__err(err, PL_EREFUSED, "%s: the key given (%s) is not the key %s holds on %s "
                       "(%s): nothing was signed", label, got, p.handle, date, want);
    }
    *person_id = p.id;
    return PL_OK;
}

int pl_people__check_signature(pl_store *s, pl_table table, pl_id id, int *ok, char *why,
                               size_t cap, pl_err *err)
{
    *ok = 0;
    why[0] = '\0';
    unsigned char msg[PL_SIGNED_MESSAGE_SIZE];
    const void *sig = NULL;
    size_t siglen = 0;
    sqlite3_stmt *keep = NULL;
    pl_err e = { 0 };
    int rc = pl_store__signed_message(s, table, id, msg, &sig, &siglen, &keep, &e);
    if (rc == PL_EINVAL) {
        sqlite3_finalize(keep);
        snprintf(why, cap, "holds a value no record can hold (%s)", e.msg);
        return PL_OK;
    }
    if (rc) {
        sqlite3_finalize(keep);
        return pl__err(err, rc, "%s", e.msg);
    }
    unsigned char sigb[PL_SIGN_SIZE];
    int have_sig = sig && siglen == PL_SIGN_SIZE;
    if (have_sig)
        memcpy(sigb, sig, sizeof sigb);
    sqlite3_finalize(keep);
    char sql[160];
    snprintf(sql, sizeof sql,
             "SELECT t.person_id, t.signed_on, p.handle FROM %s t LEFT JOIN person p ON "
             "p.id = t.person_id WHERE t.id = ?1",
             pl_table_name(table));
    sqlite3_stmt *st;
    if ((rc = pl_store__prepare(s, &st, sql, err)))
        return rc;
    sqlite3_bind_int64(st, 1, id);
    pl_id person = 0;
    char date[PL_DATE_SIZE] = "", handle[PL_NAME_SIZE] = "";
    if (sqlite3_step(st) == SQLITE_ROW) {
        person = sqlite3_column_int64(st, 0);
        pl_store__col_text(st, 1, date, sizeof date);
        pl_store__col_text(st, 2, handle, sizeof handle);
    }
    sqlite3_finalize(st);
    if (!handle[0]) {
        snprintf(why, cap, "its signer (person %lld) is not in the register", (long long)person);
        return PL_OK;
    }
    if (!have_sig) {
        snprintf(why, cap, "signed by %s on %s, but its signature is not 64 bytes", handle,
                 date);
        return PL_OK;
    }
    unsigned char pub[PL_SIGN_PUBLIC_SIZE];
    rc = pl_store_person_key_on(s, person, date, pub, &e);
    if (rc == PL_ENOTFOUND || rc == PL_EFORMAT) {
        snprintf(why, cap, "signed by %s on %s, who held no usable key in the register that "
                 "day: the register was altered", handle, date);
        return PL_OK;
    }
    if (rc)
        return pl__err(err, rc, "%s", e.msg);
    if (!pl_sign_check(sigb, msg, sizeof msg, pub)) {
        char fp[PL_SIGN_FINGERPRINT_SIZE];
        pl_sign_fingerprint(fp, pub);
        snprintf(why, cap, "its signature by %s on %s does not hold against the key they held "
                 "that day (%s): the record, its signature or the key in the register was "
                 "altered after it was signed", handle, date, fp);
        return PL_OK;
    }
    *ok = 1;
    return PL_OK;
}
