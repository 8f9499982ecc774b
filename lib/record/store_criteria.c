/*
 * store_criteria.c - criteria sets in the record (plyledger/criteria.h):
 * one row per revision, through the one insert path.
 */
#include "record/store_int.h"

#include "common/common_int.h"
#include "plyledger/criteria.h"

#include <assert.h>
#include <cjson/cJSON.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

PL_EXPORT void pl_criteria_record_clear(pl_criteria_record *rec)
{
    if (!rec)
        return;
    pl_row__release(pl_row__table(PL_TABLE_CRITERIA), rec);
    memset(rec, 0, sizeof *rec);
}

/* The row of `name` and `revision` (revision NULL: the latest recorded). */
static int find(pl_store *s, const char *name, const char *revision, pl_criteria_record *rec,
                int *found, pl_err *err, const char *label)
{
    pl_value args[2] = { pl_store__arg_text(name), pl_store__arg_text(revision) };
    return pl_store__get(s, PL_TABLE_CRITERIA,
                         "WHERE t.name = ?1 AND (?2 IS NULL OR t.revision = ?2) "
                         "ORDER BY t.id DESC LIMIT 1", args, 2, rec, found, err, label);
}

PL_EXPORT int pl_store_add_criteria(pl_store *s, const pl_criteria *c, pl_id *id, int *already,
                                    pl_err *err)
{
    assert(s && c && c->canonical_json);
    if (already)
        *already = 0;
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "criteria %s revision %s", c->name, c->revision);
    pl_criteria_record rec;
    memset(&rec, 0, sizeof rec);
    snprintf(rec.name, sizeof rec.name, "%s", c->name);
    snprintf(rec.revision, sizeof rec.revision, "%s", c->revision);
    snprintf(rec.source_document, sizeof rec.source_document, "%s", c->source_document);
    rec.format_version = PL_CRITERIA_FORMAT_VERSION;
    rec.example_values = c->example_values ? 1 : 0;
    rec.repeatability_area_mm2 = c->repeatability_area_mm2;
    rec.rule_count = (int64_t)c->nrules;
    rec.content_json = c->canonical_json;
    snprintf(rec.sha256, sizeof rec.sha256, "%s", c->sha256);
    const pl_table_desc *t = pl_row__table(PL_TABLE_CRITERIA);
    int rc = pl_row__check(t, &rec, label, err);
    if (rc)
        return rc;
    int owned = 0;
    if ((rc = pl_store__write_begin(s, &owned, err)))
        return rc;
    /* looked up inside the write scope, so no other writer slips in between */
    pl_criteria_record old;
    int found = 0;
    rc = find(s, c->name, c->revision, &old, &found, err, label);
    pl_id newid = 0;
    if (!rc && found) {
        if (strcmp(old.content_json ? old.content_json : "", c->canonical_json) == 0) {
            newid = old.id;
            if (already)
                *already = 1;
        } else {
            rc = pl__err(err, PL_EEXISTS, "%s: already recorded (row %lld) with other content; "
                         "a changed set needs a new revision", label, (long long)old.id);
        }
        pl_criteria_record_clear(&old);
    } else if (!rc) {
        pl_row row;
        pl_row__from_record(&row, t, &rec);
        rc = pl_store__insert(s, &row, &newid, err, label);
    }
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_EXPORT int pl_store_get_criteria(pl_store *s, pl_id id, pl_criteria_record *rec, pl_err *err)
{
    assert(s && rec);
    pl_value arg = pl_store__arg_id(id);
    int found = 0;
    int rc = pl_store__get(s, PL_TABLE_CRITERIA, "WHERE t.id = ?1", &arg, 1, rec, &found, err,
                           NULL);
    if (!rc && !found)
        rc = pl__err(err, PL_ENOTFOUND, "%s: no criteria row %lld", s->path, (long long)id);
    return rc;
}

PL_EXPORT int pl_store_find_criteria(pl_store *s, const char *name, const char *revision,
                                     pl_criteria_record *rec, pl_err *err)
{
    assert(s && name && rec);
    int found = 0;
    int rc = find(s, name, revision, rec, &found, err, NULL);
    if (!rc && !found) {
        if (revision && revision[0])
            rc = pl__err(err, PL_ENOTFOUND, "%s: no criteria %s revision %s", s->path, name,
                         revision);
        else
            rc = pl__err(err, PL_ENOTFOUND, "%s: no criteria named %s", s->path, name);
    }
    return rc;
}

PL_STORE_CALLBACK(criteria, pl_criteria_fn)

PL_EXPORT int pl_store_list_criteria(pl_store *s, const char *name, pl_criteria_fn fn, void *ud,
                                     pl_err *err)
{
    assert(s && fn);
    criteria_cb cb = { fn, ud };
    pl_value arg = pl_store__arg_text(name);
    return pl_store__list(s, PL_TABLE_CRITERIA, "WHERE ?1 IS NULL OR t.name = ?1 "
                          "ORDER BY t.name, t.id", &arg, 1, call_criteria, &cb, err, NULL);
}

/* The JSON object of a record (NULL when out of memory). */
static cJSON *record_json(const pl_criteria_record *rec, int with_content, int already)
{
    cJSON *o = pl_row__json(pl_row__table(PL_TABLE_CRITERIA), rec);
    if (!o)
        return NULL;
    cJSON *marking = rec->example_values ? cJSON_CreateString(PL_CRITERIA_EXAMPLE_MARKING)
                                         : cJSON_CreateNull();
    int ok = marking && cJSON_AddItemToObject(o, "marking", marking);
    if (!ok)
        cJSON_Delete(marking);
    ok = ok && cJSON_ReplaceItemInObjectCaseSensitive(
                   o, "example_values", cJSON_CreateBool(rec->example_values != 0));
    if (ok && !with_content)
        cJSON_DeleteItemFromObjectCaseSensitive(o, "content");
    if (ok && already >= 0)
        ok = cJSON_AddBoolToObject(o, "already_recorded", already != 0) != NULL;
    if (!ok) {
        cJSON_Delete(o);
        return NULL;
    }
    return o;
}

PL_EXPORT int pl_criteria_record_json(char **out, const pl_criteria_record *rec,
                                      int with_content, int already, pl_err *err)
{
    assert(out && rec);
    *out = NULL;
    return pl_row__print_json(out, record_json(rec, with_content, already), err);
}

/* A listing's records into a JSON array: a pl_row_fn, failing with
 * PL_ENOMEM. */
static int add_to_array(void *ud, void *rec)
{
    cJSON *o = record_json(rec, 0, -1);
    if (!o || !cJSON_AddItemToArray(ud, o)) {
        cJSON_Delete(o);
        return PL_ENOMEM;
    }
    return 0;
}

PL_EXPORT int pl_criteria_list_json(char **out, pl_store *s, const char *name, pl_err *err)
{
    assert(out && s);
    *out = NULL;
    cJSON *a = cJSON_CreateArray();
    if (!a)
        return pl__err(err, PL_ENOMEM, "out of memory");
    pl_value arg = pl_store__arg_text(name);
    int rc = pl_store__list(s, PL_TABLE_CRITERIA, "WHERE ?1 IS NULL OR t.name = ?1 "
                            "ORDER BY t.name, t.id", &arg, 1, add_to_array, a, err, NULL);
    if (rc == PL_ENOMEM)
        rc = pl__err(err, PL_ENOMEM, "out of memory");
    if (rc) {
        cJSON_Delete(a);
        return rc;
    }
    return pl_row__print_json(out, a, err);
}
