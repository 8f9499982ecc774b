/*
 * ledger.c - the hash chain over every recorded row and its verification
 * (plyledger/ledger.h).
 */
#include "record/store_int.h"

#include "common/common_int.h"
#include "plyledger/ledger.h"
#include "plyledger/store_row.h"

#include <assert.h>
#include <cjson/cJSON.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* The chain of a row of each table: the airframe's stable key, or NULL for
 * the store's own chain. ?1 is the row's id; no row: the row is gone. */
static const char *const chain_sql[PL_TABLE_COUNT] = {
    [PL_TABLE_AIRFRAME] = "SELECT coalesce(key, id) FROM airframe WHERE id = ?1",
    [PL_TABLE_OPERATOR] = "SELECT airframe_key FROM airframe_operator WHERE id = ?1",
    [PL_TABLE_SITE] = "SELECT airframe_key FROM site WHERE id = ?1",
    [PL_TABLE_INSPECTION] = "SELECT s.airframe_key FROM inspection i "
                            "JOIN site s ON s.id = i.site_key WHERE i.id = ?1",
    [PL_TABLE_MAP] = "SELECT s.airframe_key FROM map m JOIN inspection i ON i.id = m.inspection_key "
                     "JOIN site s ON s.id = i.site_key WHERE m.id = ?1",
    [PL_TABLE_MAP_CHANNEL] = NULL,
    [PL_TABLE_REGISTRATION] = "SELECT s.airframe_key FROM registration r "
                              "JOIN map m ON m.id = r.current_map_id "
                              "JOIN inspection i ON i.id = m.inspection_key "
                              "JOIN site s ON s.id = i.site_key WHERE r.id = ?1",
    [PL_TABLE_COMPARISON] = "SELECT s.airframe_key FROM comparison c "
                            "JOIN site s ON s.id = c.site_key WHERE c.id = ?1",
    [PL_TABLE_CRITERIA] = "SELECT NULL FROM criteria WHERE id = ?1",
    [PL_TABLE_INDICATION] = "SELECT s.airframe_key FROM indication x "
                            "JOIN comparison c ON c.id = x.comparison_id "
                            "JOIN site s ON s.id = c.site_key WHERE x.id = ?1",
    [PL_TABLE_CHANGE] = "SELECT s.airframe_key FROM indication_change x "
                        "JOIN comparison c ON c.id = x.comparison_id "
                        "JOIN site s ON s.id = c.site_key WHERE x.id = ?1",
    [PL_TABLE_PERSON] = "SELECT NULL FROM person WHERE id = ?1",
    [PL_TABLE_PERSON_KEY] = "SELECT NULL FROM person_key WHERE id = ?1",
    [PL_TABLE_QUALIFICATION] = "SELECT NULL FROM person_qualification WHERE id = ?1",
    [PL_TABLE_PROCEDURE_LEVELS] = "SELECT NULL FROM procedure_level WHERE id = ?1",
    [PL_TABLE_INTERPRETATION] = "SELECT s.airframe_key FROM interpretation t "
                                "JOIN indication_change x ON x.id = t.change_id "
                                "JOIN comparison c ON c.id = x.comparison_id "
                                "JOIN site s ON s.id = c.site_key WHERE t.id = ?1",
    [PL_TABLE_DISPOSITION] = "SELECT s.airframe_key FROM disposition t "
                             "JOIN comparison c ON c.id = t.comparison_id "
                             "JOIN site s ON s.id = c.site_key WHERE t.id = ?1",
};

/* How a person names a record of each table. */
static const char *const record_word[PL_TABLE_COUNT] = {
    [PL_TABLE_AIRFRAME] = "airframe record",
    [PL_TABLE_OPERATOR] = "operator change",
    [PL_TABLE_SITE] = "site record",
    [PL_TABLE_INSPECTION] = "inspection",
    [PL_TABLE_MAP] = "map",
    [PL_TABLE_REGISTRATION] = "registration",
    [PL_TABLE_COMPARISON] = "comparison",
    [PL_TABLE_CRITERIA] = "criteria revision",
    [PL_TABLE_INDICATION] = "indication",
    [PL_TABLE_CHANGE] = "change",
    [PL_TABLE_PERSON] = "person",
    [PL_TABLE_PERSON_KEY] = "person's public key",
    [PL_TABLE_QUALIFICATION] = "qualification",
    [PL_TABLE_PROCEDURE_LEVELS] = "procedure's levels",
    [PL_TABLE_INTERPRETATION] = "interpretation",
    [PL_TABLE_DISPOSITION] = "disposition",
};

static const unsigned char zero_link[PL_SHA256_SIZE];

PL_EXPORT const char *pl_fault_name(pl_fault fault)
{
    static const char *const names[] = { "none",     "row-changed", "row-missing",
                                         "row-unchained", "link-broken", "sequence",
                                         "map-data", "wrong-chain", "trigger-missing",
                                         "head-differs", "seal", "signature" };
    return (unsigned)fault < sizeof names / sizeof names[0] ? names[fault] : NULL;
}

static void put_u32(pl_sha256_ctx *c, uint32_t v)
{
    unsigned char b[4] = { (unsigned char)v, (unsigned char)(v >> 8), (unsigned char)(v >> 16),
                           (unsigned char)(v >> 24) };
    pl_sha256_update(c, b, 4);
}

static void put_u64(pl_sha256_ctx *c, uint64_t v)
{
    unsigned char b[8];
    for (int i = 0; i < 8; i++)
        b[i] = (unsigned char)(v >> (8 * i));
    pl_sha256_update(c, b, 8);
}

PL_EXPORT void pl_ledger_link(unsigned char out[PL_SHA256_SIZE],
                              const unsigned char prev[PL_SHA256_SIZE], int64_t seq,
                              const char *table, pl_id row_id, uint32_t encoding,
                              const unsigned char row_sha256[PL_SHA256_SIZE])
{
    pl_sha256_ctx c;
    pl_sha256_init(&c);
    pl_sha256_update(&c, "PLLK", 4);
    put_u32(&c, PL_LEDGER_LINK_VERSION);
    pl_sha256_update(&c, prev, PL_SHA256_SIZE);
    put_u64(&c, (uint64_t)seq);
    size_t n = strlen(table);
    put_u32(&c, (uint32_t)n);
    pl_sha256_update(&c, table, n);
    put_u64(&c, (uint64_t)row_id);
    put_u32(&c, encoding);
    pl_sha256_update(&c, row_sha256, PL_SHA256_SIZE);
    pl_sha256_final(&c, out);
}

/* The chain of row `id` of `table`: *chain the airframe key (0: the store's
 * chain), *found 0 when the row does not exist. */
static int row_chain(pl_store *s, pl_table table, pl_id id, pl_id *chain, int *found,
                     pl_err *err, const char *label)
{
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st, chain_sql[table], err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, id);
    int r = sqlite3_step(st);
    *found = r == SQLITE_ROW;
    *chain = *found && sqlite3_column_type(st, 0) != SQLITE_NULL ? sqlite3_column_int64(st, 0)
                                                                 : 0;
    if (r != SQLITE_ROW && r != SQLITE_DONE)
        rc = pl_store__fail(s, err, label);
    sqlite3_finalize(st);
    return rc;
}

PL_EXPORT void pl_ledger_seal_message(unsigned char out[40],
                                      const unsigned char link[PL_SHA256_SIZE])
{
    memcpy(out, "PLSL", 4);
    for (int i = 0; i < 4; i++)
        out[4 + i] = (unsigned char)(PL_LEDGER_SEAL_VERSION >> (8 * i));
    memcpy(out + 8, link, PL_SHA256_SIZE);
}

/* The endorsement message of a received seal key: "PLRK" version:u32
 * public_key:32 bytes chain:i64 (0: the store's chain) through_seq:i64. */
void pl_ledger__endorsement_message(unsigned char out[56], const unsigned char pub[32],
                                    pl_id chain, int64_t through)
{
    memcpy(out, "PLRK", 4);
    for (int i = 0; i < 4; i++)
        out[4 + i] = (unsigned char)(PL_LEDGER_SEAL_VERSION >> (8 * i));
    memcpy(out + 8, pub, 32);
    for (int i = 0; i < 8; i++) {
        out[40 + i] = (unsigned char)((uint64_t)chain >> (8 * i));
        out[48 + i] = (unsigned char)((uint64_t)through >> (8 * i));
    }
}

/* Seal ledger row `ledger_id`, whose link is `link`, with the store's own key. */
static int seal_link(pl_store *s, pl_id ledger_id, const unsigned char link[PL_SHA256_SIZE],
                     pl_err *err, const char *label)
{
    unsigned char msg[40], sig[PL_SIGN_SIZE];
    pl_ledger_seal_message(msg, link);
    pl_sign(sig, msg, sizeof msg, &s->seal_secret);
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st,
                               "INSERT INTO ledger_seal (ledger_id, key_id, seal) "
                               "VALUES (?1, ?2, ?3)",
                               err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, ledger_id);
    sqlite3_bind_int64(st, 2, s->seal_key_id);
    sqlite3_bind_blob(st, 3, sig, sizeof sig, SQLITE_TRANSIENT);
    if (sqlite3_step(st) != SQLITE_DONE)
        rc = pl_store__fail(s, err, label);
    sqlite3_finalize(st);
    return rc;
}

int pl_ledger__load_seal(pl_store *s, pl_err *err)
{
    s->sealed = 0;
    s->seal_key_id = 0;
    if (s->schema_version < 7)
        return PL_OK;
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st,
                               "SELECT id, public_key FROM seal_key WHERE origin = 'own' "
                               "ORDER BY id LIMIT 1",
                               err);
    if (rc)
        return rc;
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW) {
        const char *hex = (const char *)sqlite3_column_text(st, 1);
        s->seal_key_id = sqlite3_column_int64(st, 0);
        /* a key that is not hex still marks the store sealed: writing then
         * fails on the key check, and verify names the fault */
        s->sealed = 1;
        if (!hex || pl_sha256_from_hex(s->seal_public, hex) != PL_OK)
            memset(s->seal_public, 0, sizeof s->seal_public);
    } else if (r != SQLITE_DONE) {
        rc = pl_store__fail(s, err, NULL);
    }
    sqlite3_finalize(st);
    return rc;
}

PL_EXPORT int pl_store_sealed(const pl_store *s, char out[PL_SIGN_FINGERPRINT_SIZE])
{
    assert(s);
    if (out) {
        out[0] = '\0';
        if (s->sealed)
            pl_sign_fingerprint(out, s->seal_public);
    }
    return s->sealed;
}

PL_EXPORT int pl_store_set_seal_key(pl_store *s, const pl_sign_key *key, pl_err *err)
{
    assert(s && key);
    char want[PL_SIGN_FINGERPRINT_SIZE], have[PL_SIGN_FINGERPRINT_SIZE];
    pl_sign_fingerprint(have, key->public_key);
    if (!s->sealed)
        return pl__err(err, PL_EREFUSED, "%s: the store is not sealed; seal key %s is not its key",
                       s->path, have);
    pl_sign_fingerprint(want, s->seal_public);
    if (memcmp(key->public_key, s->seal_public, PL_SIGN_PUBLIC_SIZE) != 0)
        return pl__err(err, PL_EREFUSED,
                       "%s: the seal key given (%s) is not this store's seal key (%s)", s->path,
                       have, want);
    s->seal_secret = *key;
    s->has_seal_secret = 1;
    return PL_OK;
}

PL_EXPORT int pl_store_seal(pl_store *s, const pl_sign_key *key, pl_err *err)
{
    assert(s && key);
    if (s->sealed) {
        char fp[PL_SIGN_FINGERPRINT_SIZE];
        pl_sign_fingerprint(fp, s->seal_public);
        return pl__err(err, PL_EEXISTS, "%s: the store is already sealed (seal key %s)", s->path,
                       fp);
    }
    int owned;
    int rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    char hex[PL_SHA256_HEX_SIZE], now[PL_DATE_SIZE];
    pl_sha256_hex(hex, key->public_key); /* 32 bytes as 64 hex digits */
    pl_store__now(now);
    sqlite3_stmt *st = NULL;
    rc = pl_store__prepare(s, &st,
                           "INSERT INTO seal_key (public_key, origin, recorded_at) "
                           "VALUES (?1, 'own', ?2)",
                           err);
    if (!rc) {
        sqlite3_bind_text(st, 1, hex, -1, SQLITE_STATIC);
        sqlite3_bind_text(st, 2, now, -1, SQLITE_STATIC);
        if (sqlite3_step(st) != SQLITE_DONE)
            rc = pl_store__fail(s, err, NULL);
        sqlite3_finalize(st);
        st = NULL;
    }
    if (!rc) {
        s->seal_key_id = sqlite3_last_insert_rowid(s->db);
        s->seal_secret = *key;
        memcpy(s->seal_public, key->public_key, PL_SIGN_PUBLIC_SIZE);
        rc = pl_store__prepare(s, &st,
                               "SELECT l.id, l.link FROM ledger l WHERE NOT EXISTS "
                               "(SELECT 1 FROM ledger_seal x WHERE x.ledger_id = l.id) "
                               "ORDER BY l.id",
                               err);
    }
    int r = SQLITE_DONE;
    while (!rc && (r = sqlite3_step(st)) == SQLITE_ROW) {
        unsigned char link[PL_SHA256_SIZE];
        const char *h = (const char *)sqlite3_column_text(st, 1);
        if (!h || pl_sha256_from_hex(link, h) != PL_OK)
            rc = pl__err(err, PL_EFORMAT,
                         "%s: ledger link %lld is not SHA-256 hex: run verify before sealing",
                         s->path, (long long)sqlite3_column_int64(st, 0));
        else
            rc = seal_link(s, sqlite3_column_int64(st, 0), link, err, NULL);
    }
    if (!rc && r != SQLITE_DONE)
        rc = pl_store__fail(s, err, NULL);
    sqlite3_finalize(st);
    rc = pl_store__write_end(s, owned, rc, err);
    if (rc) {
        pl_sign_key_wipe(&s->seal_secret);
        s->seal_key_id = 0;
        memset(s->seal_public, 0, sizeof s->seal_public);
        return rc;
    }
    s->sealed = 1;
    s->has_seal_secret = 1;
    return PL_OK;
}

int pl_ledger__append(pl_store *s, pl_table table, pl_id id,
                      const unsigned char row_sha256[PL_SHA256_SIZE], pl_err *err,
                      const char *label)
{
    assert((unsigned)table < PL_TABLE_COUNT && chain_sql[table]);
    if (s->sealed && !s->has_seal_secret) {
        char fp[PL_SIGN_FINGERPRINT_SIZE];
        pl_sign_fingerprint(fp, s->seal_public);
        return pl__err(err, PL_EREFUSED,
                       "%s: the store is sealed, and recording needs its seal key (key file of "
                       "seal key %s): nothing was recorded",
                       s->path, fp);
    }
    pl_id chain;
    int found, rc = row_chain(s, table, id, &chain, &found, err, label);
    if (!rc && !found)
        rc = pl__err(err, PL_ENOTFOUND, "%s: the row to chain is not in the store", label);
    if (rc)
        return rc;
    sqlite3_stmt *st;
    if ((rc = pl_store__prepare(s, &st,
                                "SELECT seq, link FROM ledger WHERE coalesce(chain, 0) = ?1 "
                                "ORDER BY seq DESC LIMIT 1",
                                err)))
        return rc;
    sqlite3_bind_int64(st, 1, chain);
    unsigned char prev[PL_SHA256_SIZE];
    memcpy(prev, zero_link, sizeof prev);
    int64_t seq = 1;
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW) {
        seq = sqlite3_column_int64(st, 0) + 1;
        const char *hex = (const char *)sqlite3_column_text(st, 1);
        if (!hex || pl_sha256_from_hex(prev, hex) != PL_OK)
            rc = pl__err(err, PL_EFORMAT,
                         "%s: the ledger's last link (%lld) is not SHA-256 hex: run verify",
                         label, (long long)(seq - 1));
    } else if (r != SQLITE_DONE) {
        rc = pl_store__fail(s, err, label);
    }
    sqlite3_finalize(st);
    if (rc)
        return rc;
    const char *name = pl_table_name(table);
    unsigned char link[PL_SHA256_SIZE];
    pl_ledger_link(link, prev, seq, name, id, PL_ROW_ENCODING_VERSION, row_sha256);
    char h_row[PL_SHA256_HEX_SIZE], h_prev[PL_SHA256_HEX_SIZE], h_link[PL_SHA256_HEX_SIZE];
    pl_sha256_hex(h_row, row_sha256);
    pl_sha256_hex(h_prev, prev);
    pl_sha256_hex(h_link, link);
    char now[PL_DATE_SIZE];
    pl_store__now(now);
    if ((rc = pl_store__prepare(s, &st,
                                "INSERT INTO ledger (chain, seq, table_name, row_id, encoding, "
                                "row_sha256, prev_link, link, recorded_at) "
                                "VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
                                err)))
        return rc;
    if (chain)
        sqlite3_bind_int64(st, 1, chain);
    sqlite3_bind_int64(st, 2, seq);
    sqlite3_bind_text(st, 3, name, -1, SQLITE_STATIC);
    sqlite3_bind_int64(st, 4, id);
    sqlite3_bind_int(st, 5, PL_ROW_ENCODING_VERSION);
    sqlite3_bind_text(st, 6, h_row, -1, SQLITE_STATIC);
    sqlite3_bind_text(st, 7, h_prev, -1, SQLITE_STATIC);
    sqlite3_bind_text(st, 8, h_link, -1, SQLITE_STATIC);
    sqlite3_bind_text(st, 9, now, -1, SQLITE_STATIC);
    if (sqlite3_step(st) != SQLITE_DONE)
        rc = pl_store__fail(s, err, label);
    sqlite3_finalize(st);
    if (!rc && s->sealed)
        rc = seal_link(s, sqlite3_last_insert_rowid(s->db), link, err, label);
    return rc;
}

/* Append row `id` of `table` as stored (re-encoded). */
static int chain_stored(pl_store *s, pl_table table, pl_id id, pl_err *err)
{
    unsigned char *enc = NULL, sha[PL_SHA256_SIZE];
    size_t n = 0;
    int rc = pl_store_row_encode(&enc, &n, s, table, id, err);
    if (rc)
        return rc;
    pl_sha256(sha, enc, n);
    free(enc);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "%s: %s %lld", s->path, pl_table_name(table), (long long)id);
    return pl_ledger__append(s, table, id, sha, err, label);
}

int pl_ledger__chain_all(pl_store *s, int64_t *count, pl_err *err)
{
    /* every recorded row in the order it was recorded: the time, then the
     * table order (a parent before its children in one command), then id */
    char sql[2048];
    size_t len = 0;
    for (int t = 0; t < PL_TABLE_COUNT; t++) {
        if (!chain_sql[t] || t >= PL_TABLE_PERSON)
            continue; /* tables of later migrations held no rows before the chain */
        len += (size_t)snprintf(sql + len, sizeof sql - len,
                                "%sSELECT recorded_at AS at, %d AS t, id FROM %s",
                                len ? " UNION ALL " : "", t, pl_table_name((pl_table)t));
    }
    snprintf(sql + len, sizeof sql - len, " ORDER BY at, t, id");
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st, sql, err);
    if (rc)
        return rc;
    int64_t n = 0;
    int r;
    while (!rc && (r = sqlite3_step(st)) == SQLITE_ROW) {
        rc = chain_stored(s, (pl_table)sqlite3_column_int(st, 1), sqlite3_column_int64(st, 2),
                          err);
        n++;
    }
    if (!rc && r != SQLITE_DONE)
        rc = pl_store__fail(s, err, NULL);
    sqlite3_finalize(st);
    *count = n;
    return rc;
}

/* ---- heads ------------------------------------------------------------------------------ */

/* The serial of airframe key `chain` now ("" for 0 or when gone). */
static void chain_serial(pl_store *s, pl_id chain, char out[PL_NAME_SIZE])
{
    out[0] = '\0';
    if (!chain)
        return;
    sqlite3_stmt *st;
    if (pl_store__prepare(s, &st, "SELECT serial FROM airframe_current WHERE stable_key = ?1",
                          NULL))
        return;
    sqlite3_bind_int64(st, 1, chain);
    if (sqlite3_step(st) == SQLITE_ROW && sqlite3_column_text(st, 0))
        snprintf(out, PL_NAME_SIZE, "%s", (const char *)sqlite3_column_text(st, 0));
    sqlite3_finalize(st);
}

PL_EXPORT int pl_store_heads(pl_store *s, pl_chain_head **out, size_t *n, pl_err *err)
{
    assert(s && out && n);
    *out = NULL;
    *n = 0;
    sqlite3_stmt *st;
    /* every airframe has a chain (its first row is its own); the store's
     * chain is listed even when empty */
    int rc = pl_store__prepare(
        s, &st,
        "SELECT c.k, (SELECT seq FROM ledger l WHERE coalesce(l.chain, 0) = c.k "
        "ORDER BY seq DESC LIMIT 1), (SELECT link FROM ledger l WHERE coalesce(l.chain, 0) = c.k "
        "ORDER BY seq DESC LIMIT 1) FROM (SELECT 0 AS k UNION SELECT DISTINCT coalesce(chain, 0) "
        "FROM ledger UNION SELECT coalesce(key, id) FROM airframe) c ORDER BY c.k",
        err);
    if (rc)
        return rc;
    pl_chain_head *h = NULL;
    size_t cap = 0, k = 0;
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        if (k == cap) {
            size_t nc = cap ? 2 * cap : 8;
            pl_chain_head *p = realloc(h, nc * sizeof *p);
            if (!p) {
                sqlite3_finalize(st);
                free(h);
                return pl__err(err, PL_ENOMEM, "%s: out of memory", s->path);
            }
            h = p;
            cap = nc;
        }
        pl_chain_head *e = &h[k++];
        memset(e, 0, sizeof *e);
        e->chain = sqlite3_column_int64(st, 0);
        e->seq = sqlite3_column_int64(st, 1);
        if (sqlite3_column_text(st, 2))
            snprintf(e->link, sizeof e->link, "%s", (const char *)sqlite3_column_text(st, 2));
    }
    if (r != SQLITE_DONE) {
        rc = pl_store__fail(s, err, NULL);
        free(h);
        h = NULL;
        k = 0;
    }
    sqlite3_finalize(st);
    for (size_t i = 0; i < k; i++)
        chain_serial(s, h[i].chain, h[i].serial);
    *out = h;
    *n = k;
    return rc;
}

PL_EXPORT int pl_heads_json(char **out, const char *store_id, const char *seal_key,
                            const pl_chain_head *heads, size_t n, pl_err *err)
{
    assert(out && (heads || !n));
    *out = NULL;
    cJSON *j = cJSON_CreateObject(), *list = NULL;
    int ok = j && cJSON_AddStringToObject(j, "format", "plyledger-heads") &&
             cJSON_AddNumberToObject(j, "format_version", 2) &&
             cJSON_AddStringToObject(j, "store_id", store_id ? store_id : "") &&
             (seal_key && seal_key[0] ? cJSON_AddStringToObject(j, "seal_key", seal_key) != NULL
                                      : cJSON_AddNullToObject(j, "seal_key") != NULL) &&
             (list = cJSON_AddArrayToObject(j, "heads"));
    for (size_t i = 0; ok && i < n; i++) {
        cJSON *h = cJSON_CreateObject();
        ok = h && (heads[i].chain ? cJSON_AddStringToObject(h, "airframe", heads[i].serial) != NULL
                                  : cJSON_AddNullToObject(h, "airframe") != NULL) &&
             cJSON_AddNumberToObject(h, "seq", (double)heads[i].seq) &&
             cJSON_AddStringToObject(h, "link", heads[i].link);
        if (h && !cJSON_AddItemToArray(list, h)) {
            cJSON_Delete(h);
            ok = 0;
        }
    }
    char *text = ok ? cJSON_Print(j) : NULL;
    cJSON_Delete(j);
    if (!text)
        return pl__err(err, PL_ENOMEM, "out of memory for the heads");
    *out = text;
    return PL_OK;
}

PL_EXPORT int pl_heads_parse(pl_chain_head **out, size_t *n,
                             char seal_key[PL_SIGN_FINGERPRINT_SIZE], const char *text,
                             const char *name, pl_err *err)
{
    assert(out && n && text && name);
    *out = NULL;
    *n = 0;
    if (seal_key)
        seal_key[0] = '\0';
    cJSON *j = cJSON_Parse(text);
    if (!j)
        return pl__err(err, PL_EFORMAT, "%s: not JSON (a heads file of plyledger verify)", name);
    const cJSON *f = cJSON_GetObjectItemCaseSensitive(j, "format");
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(j, "format_version");
    const cJSON *list = cJSON_GetObjectItemCaseSensitive(j, "heads");
    int rc = PL_OK;
    if (!cJSON_IsString(f) || strcmp(f->valuestring, "plyledger-heads") != 0)
        rc = pl__err(err, PL_EFORMAT, "%s: format: expected \"plyledger-heads\"", name);
    else if (!cJSON_IsNumber(v) || (v->valuedouble != 1 && v->valuedouble != 2))
        rc = pl__err(err, PL_EFORMAT, "%s: format_version: expected 1 or 2", name);
    else if (!cJSON_IsArray(list))
        rc = pl__err(err, PL_EFORMAT, "%s: heads: expected an array", name);
    const cJSON *sk = cJSON_GetObjectItemCaseSensitive(j, "seal_key");
    if (!rc && sk && !cJSON_IsNull(sk)) {
        if (!cJSON_IsString(sk) || strlen(sk->valuestring) != PL_SIGN_FINGERPRINT_SIZE - 1 ||
            strspn(sk->valuestring, "0123456789abcdef") != PL_SIGN_FINGERPRINT_SIZE - 1)
            rc = pl__err(err, PL_EFORMAT,
                         "%s: seal_key: expected a key fingerprint (32 lower-case hex digits) "
                         "or null", name);
        else if (seal_key)
            snprintf(seal_key, PL_SIGN_FINGERPRINT_SIZE, "%s", sk->valuestring);
    }
    size_t k = rc ? 0 : (size_t)cJSON_GetArraySize(list);
    pl_chain_head *h = rc ? NULL : calloc(k ? k : 1, sizeof *h);
    if (!rc && !h)
        rc = pl__err(err, PL_ENOMEM, "%s: out of memory", name);
    size_t i = 0;
    const cJSON *e, *from = rc ? NULL : list;
    cJSON_ArrayForEach(e, from)
    {
        const cJSON *a = cJSON_GetObjectItemCaseSensitive(e, "airframe");
        const cJSON *q = cJSON_GetObjectItemCaseSensitive(e, "seq");
        const cJSON *l = cJSON_GetObjectItemCaseSensitive(e, "link");
        unsigned char d[PL_SHA256_SIZE];
        if (!cJSON_IsObject(e)) {
            rc = pl__err(err, PL_EFORMAT, "%s: heads[%lu]: expected an object", name,
                         (unsigned long)i);
        } else if (!(cJSON_IsNull(a) || (cJSON_IsString(a) && a->valuestring[0] &&
                                         strlen(a->valuestring) < PL_NAME_SIZE))) {
            rc = pl__err(err, PL_EFORMAT,
                         "%s: heads[%lu].airframe: expected a serial, or null for the store's "
                         "chain", name, (unsigned long)i);
        } else if (!cJSON_IsNumber(q) || !(q->valuedouble >= 1 && q->valuedouble <= 9e15) ||
                   q->valuedouble != (double)(int64_t)q->valuedouble) {
            rc = pl__err(err, PL_EFORMAT, "%s: heads[%lu].seq: expected a whole number from 1",
                         name, (unsigned long)i);
        } else if (!cJSON_IsString(l) || strlen(l->valuestring) != 64 ||
                   pl_sha256_from_hex(d, l->valuestring) != PL_OK) {
            rc = pl__err(err, PL_EFORMAT, "%s: heads[%lu].link: expected 64 hex digits", name,
                         (unsigned long)i);
        } else {
            h[i].chain = cJSON_IsNull(a) ? 0 : -1;
            if (cJSON_IsString(a))
                snprintf(h[i].serial, sizeof h[i].serial, "%s", a->valuestring);
            h[i].seq = (int64_t)q->valuedouble;
            pl_sha256_hex(h[i].link, d);
        }
        if (rc)
            break;
        i++;
    }
    cJSON_Delete(j);
    if (rc) {
        free(h);
        return rc;
    }
    *out = h;
    *n = k;
    return PL_OK;
}

/* ---- verify ----------------------------------------------------------------------------- */

typedef struct verifier {
    pl_store *s;
    pl_verify_result *res;
    pl_err *err;
    int sealed;                         /* the store has its own seal key */
    unsigned char own[PL_SIGN_PUBLIC_SIZE];
} verifier;

/* Count a fault; the first one is kept in words. */
static void fault(verifier *v, pl_fault kind, const char *fmt, ...) PL_PRINTF(3, 4);
static void fault(verifier *v, pl_fault kind, const char *fmt, ...)
{
    if (v->res->faults++ == 0) {
        v->res->first = kind;
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(v->res->message, sizeof v->res->message, fmt, ap);
        va_end(ap);
    }
}

/* "airframe CR7-0107" or "the store's own chain (criteria)". */
static void chain_words(pl_store *s, pl_id chain, char *out, size_t cap)
{
    char serial[PL_NAME_SIZE];
    chain_serial(s, chain, serial);
    if (!chain)
        snprintf(out, cap, "the store's own chain (criteria sets, people)");
    else if (serial[0])
        snprintf(out, cap, "airframe %s", serial);
    else
        snprintf(out, cap, "airframe key %lld (no such airframe now)", (long long)chain);
}

static int table_of(const char *name)
{
    for (int t = 0; t < PL_TABLE_COUNT; t++)
        if (chain_sql[t] && name && strcmp(pl_table_name((pl_table)t), name) == 0)
            return t;
    return -1;
}

/* The append-only triggers a store of this schema has, from a fresh store
 * made in memory by the same migrations, each compared by its SQL text. */
static int check_triggers(verifier *v)
{
    sqlite3 *mem = NULL;
    int rc = PL_OK;
    if (sqlite3_open_v2(":memory:", &mem, SQLITE_OPEN_READWRITE | SQLITE_OPEN_CREATE, NULL) !=
        SQLITE_OK) {
        sqlite3_close(mem);
        return pl__err(v->err, PL_ENOMEM, "out of memory for the schema's reference copy");
    }
    for (int i = 0; i < pl__migration_count && !rc; i++)
        if (sqlite3_exec(mem, pl__migrations[i].sql, NULL, NULL, NULL) != SQLITE_OK)
            rc = pl__err(v->err, PL_EDB, "the schema's reference copy: %s", sqlite3_errmsg(mem));
    sqlite3_stmt *ref = NULL, *st = NULL;
    if (!rc && sqlite3_prepare_v2(mem,
                                  "SELECT name, sql FROM sqlite_master WHERE type = 'trigger' "
                                  "ORDER BY name",
                                  -1, &ref, NULL) != SQLITE_OK)
        rc = pl__err(v->err, PL_EDB, "the schema's reference copy: %s", sqlite3_errmsg(mem));
    if (!rc)
        rc = pl_store__prepare(v->s, &st,
                               "SELECT sql FROM sqlite_master WHERE type = 'trigger' AND name = ?1",
                               v->err);
    while (!rc && sqlite3_step(ref) == SQLITE_ROW) {
        const char *name = (const char *)sqlite3_column_text(ref, 0);
        const char *sql = (const char *)sqlite3_column_text(ref, 1);
        sqlite3_reset(st);
        sqlite3_bind_text(st, 1, name, -1, SQLITE_TRANSIENT);
        int r = sqlite3_step(st);
        if (r == SQLITE_ROW) {
            const char *have = (const char *)sqlite3_column_text(st, 0);
            if (!have || !sql || strcmp(have, sql) != 0)
                fault(v, PL_FAULT_TRIGGER,
                      "the store's trigger %s differs from the schema's: the store's rules "
                      "were edited outside plyledger",
                      name);
        } else if (r == SQLITE_DONE) {
            fault(v, PL_FAULT_TRIGGER,
                  "the store's trigger %s is missing: it keeps the record append-only, and "
                  "someone removed it outside plyledger",
                  name);
        } else {
            rc = pl_store__fail(v->s, v->err, NULL);
        }
    }
    sqlite3_finalize(st);
    sqlite3_finalize(ref);
    sqlite3_close(mem);
    return rc;
}

/* The seal of the link on row `st` (columns 8 to 13 of walk_chains()). */
static void check_seal(verifier *v, sqlite3_stmt *st, pl_id chain, int64_t seq,
                       const unsigned char link[PL_SHA256_SIZE], const char *where,
                       const char *what)
{
    int has = sqlite3_column_int(st, 13);
    if (!v->sealed)
        return; /* seals without the store's key: check_seal_keys() names it */
    if (!has) {
        fault(v, PL_FAULT_SEAL,
              "%s: %s carries no seal: it was appended without the store's seal key (outside "
              "plyledger), or its seal was removed",
              where, what);
        return;
    }
    v->res->seals++;
    const void *sig = sqlite3_column_blob(st, 8);
    int siglen = sqlite3_column_bytes(st, 8);
    const char *hex = (const char *)sqlite3_column_text(st, 9);
    const char *origin = (const char *)sqlite3_column_text(st, 10);
    unsigned char pub[PL_SIGN_PUBLIC_SIZE];
    if (!hex || !origin || pl_sha256_from_hex(pub, hex) != PL_OK) {
        fault(v, PL_FAULT_SEAL, "%s: %s is sealed by a key that is not in the store", where,
              what);
        return;
    }
    if (strcmp(origin, "own") == 0) {
        if (memcmp(pub, v->own, sizeof pub) != 0) {
            fault(v, PL_FAULT_SEAL, "%s: %s is sealed by a key that is not the store's own",
                  where, what);
            return;
        }
    } else if (sqlite3_column_int64(st, 11) != chain ||
               seq > sqlite3_column_int64(st, 12)) {
        char fp[PL_SIGN_FINGERPRINT_SIZE];
        pl_sign_fingerprint(fp, pub);
        fault(v, PL_FAULT_SEAL,
              "%s: %s is sealed by key %s, which this store received for %s only: the link "
              "was added outside plyledger",
              where, what, fp,
              sqlite3_column_int64(st, 11) != chain ? "another chain" : "earlier links");
        return;
    }
    unsigned char msg[40];
    pl_ledger_seal_message(msg, link);
    if (siglen != PL_SIGN_SIZE || !sig || !pl_sign_check(sig, msg, sizeof msg, pub))
        fault(v, PL_FAULT_SEAL,
              "%s: %s: its seal does not hold: the link, or its seal, was altered outside "
              "plyledger",
              where, what);
}

/* The seal keys: the store's own (at most one, as the schema says), and
 * each received key endorsed by it. */
static int check_seal_keys(verifier *v)
{
    pl_store *s = v->s;
    v->sealed = 0;
    int64_t nkeys = 0, nseals = 0;
    int rc = pl_store__query_int(s, "SELECT count(*) FROM seal_key", &nkeys, v->err);
    if (!rc)
        rc = pl_store__query_int(s, "SELECT count(*) FROM ledger_seal", &nseals, v->err);
    if (rc)
        return rc;
    sqlite3_stmt *st;
    if ((rc = pl_store__prepare(s, &st,
                                "SELECT public_key FROM seal_key WHERE origin = 'own' "
                                "ORDER BY id",
                                v->err)))
        return rc;
    int r = sqlite3_step(st), own = 0;
    if (r == SQLITE_ROW) {
        own = 1;
        const char *hex = (const char *)sqlite3_column_text(st, 0);
        if (!hex || pl_sha256_from_hex(v->own, hex) != PL_OK)
            fault(v, PL_FAULT_SEAL, "the store's own seal key is not 64 hex digits: it was "
                  "edited outside plyledger");
        v->sealed = 1;
        v->res->sealed = 1;
        pl_sign_fingerprint(v->res->seal_key, v->own);
    } else if (r != SQLITE_DONE) {
        rc = pl_store__fail(s, v->err, NULL);
    }
    sqlite3_finalize(st);
    if (rc)
        return rc;
    if (!own && (nkeys > 0 || nseals > 0)) {
        fault(v, PL_FAULT_SEAL,
              "the store's own seal key is gone while %lld links carry seals: the seal was "
              "removed outside plyledger",
              (long long)nseals);
        return PL_OK;
    }
    if ((rc = pl_store__prepare(s, &st,
                                "SELECT public_key, coalesce(chain, 0), through_seq, endorsement "
                                "FROM seal_key WHERE origin = 'received' ORDER BY id",
                                v->err)))
        return rc;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        unsigned char pub[PL_SIGN_PUBLIC_SIZE], msg[56];
        const char *hex = (const char *)sqlite3_column_text(st, 0);
        pl_id chain = sqlite3_column_int64(st, 1);
        const void *sig = sqlite3_column_blob(st, 3);
        char where[128];
        chain_words(s, chain, where, sizeof where);
        if (!hex || pl_sha256_from_hex(pub, hex) != PL_OK) {
            fault(v, PL_FAULT_SEAL, "%s: a received seal key is not 64 hex digits", where);
            continue;
        }
        pl_ledger__endorsement_message(msg, pub, chain, sqlite3_column_int64(st, 2));
        char fp[PL_SIGN_FINGERPRINT_SIZE];
        pl_sign_fingerprint(fp, pub);
        if (!sig || sqlite3_column_bytes(st, 3) != PL_SIGN_SIZE ||
            !pl_sign_check(sig, msg, sizeof msg, v->own))
            fault(v, PL_FAULT_SEAL,
                  "%s: received seal key %s is not endorsed by the store's own seal key: it "
                  "was added outside plyledger",
                  where, fp);
    }
    rc = r == SQLITE_DONE ? PL_OK : pl_store__fail(s, v->err, NULL);
    sqlite3_finalize(st);
    return rc;
}

/* One link: its sequence, its previous link, its own hash, its seal, its
 * row's chain, content and (a map) data. */
static int check_link(verifier *v, sqlite3_stmt *st, pl_id chain, int64_t want_seq,
                      unsigned char prev[PL_SHA256_SIZE], const char *where)
{
    pl_store *s = v->s;
    int64_t seq = sqlite3_column_int64(st, 0);
    const char *tname = (const char *)sqlite3_column_text(st, 1);
    pl_id row_id = sqlite3_column_int64(st, 2);
    uint32_t encoding = (uint32_t)sqlite3_column_int64(st, 3);
    const char *h_row = (const char *)sqlite3_column_text(st, 4);
    const char *h_prev = (const char *)sqlite3_column_text(st, 5);
    const char *h_link = (const char *)sqlite3_column_text(st, 6);
    const char *at = (const char *)sqlite3_column_text(st, 7);
    int t = table_of(tname);
    char what[160];
    snprintf(what, sizeof what, "%s %lld (link %lld, recorded %s)",
             t >= 0 ? record_word[t] : (tname ? tname : "?"), (long long)row_id,
             (long long)seq, at ? at : "?");
    unsigned char row_sha[PL_SHA256_SIZE], sprev[PL_SHA256_SIZE], slink[PL_SHA256_SIZE];
    v->res->links++;
    if (seq != want_seq) {
        if (seq > want_seq)
            fault(v, PL_FAULT_SEQUENCE,
                  "%s: link %lld is missing before %s: a link was removed from the ledger",
                  where, (long long)want_seq, what);
        else
            fault(v, PL_FAULT_SEQUENCE, "%s: link %lld appears twice", where, (long long)seq);
    }
    if (!h_row || !h_prev || !h_link || pl_sha256_from_hex(row_sha, h_row) != PL_OK ||
        pl_sha256_from_hex(sprev, h_prev) != PL_OK || pl_sha256_from_hex(slink, h_link) != PL_OK) {
        fault(v, PL_FAULT_LINK, "%s: %s: the link's hashes are not SHA-256 hex", where, what);
        return PL_OK;
    }
    if (memcmp(sprev, prev, PL_SHA256_SIZE) != 0)
        fault(v, PL_FAULT_LINK,
              "%s: %s does not follow the link before it: the ledger was reordered, or a link "
              "was put in or taken out",
              where, what);
    unsigned char link[PL_SHA256_SIZE];
    pl_ledger_link(link, sprev, seq, tname ? tname : "", row_id, encoding, row_sha);
    if (memcmp(link, slink, PL_SHA256_SIZE) != 0)
        fault(v, PL_FAULT_LINK,
              "%s: %s: the link's own hash does not follow from what it records: the ledger "
              "entry was altered",
              where, what);
    memcpy(prev, slink, PL_SHA256_SIZE);
    check_seal(v, st, chain, seq, slink, where, what);
    if (t < 0) {
        fault(v, PL_FAULT_LINK, "%s: %s names a table that holds no recorded rows", where, what);
        return PL_OK;
    }
    pl_id rchain;
    int found;
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "%s: %s", s->path, what);
    int rc = row_chain(s, (pl_table)t, row_id, &rchain, &found, v->err, label);
    if (rc)
        return rc;
    if (!found) {
        fault(v, PL_FAULT_ROW_MISSING,
              "%s: %s is gone from the store: the row was deleted after it was recorded",
              where, what);
        return PL_OK;
    }
    if (rchain != chain) {
        char other[96];
        chain_words(s, rchain, other, sizeof other);
        fault(v, PL_FAULT_WRONG_CHAIN,
              "%s: %s now belongs to %s: its references were changed after it was recorded",
              where, what, other);
    }
    if (encoding != PL_ROW_ENCODING_VERSION) {
        fault(v, PL_FAULT_LINK, "%s: %s was hashed with row encoding %u, which this plyledger "
              "does not know", where, what, (unsigned)encoding);
        return PL_OK;
    }
    unsigned char *enc = NULL, sha[PL_SHA256_SIZE];
    size_t n = 0;
    pl_err e = { 0 };
    rc = pl_store_row_encode(&enc, &n, s, (pl_table)t, row_id, &e);
    if (rc == PL_EINVAL) {
        fault(v, PL_FAULT_ROW_CHANGED,
              "%s: %s holds a value no recorded row can hold (%s): it was changed after it "
              "was recorded",
              where, what, e.msg);
        return PL_OK;
    }
    if (rc)
        return pl__err(v->err, rc, "%s", e.msg);
    pl_sha256(sha, enc, n);
    free(enc);
    v->res->rows++;
    if (memcmp(sha, row_sha, PL_SHA256_SIZE) != 0)
        fault(v, PL_FAULT_ROW_CHANGED,
              "%s: %s differs from what was recorded: its content no longer matches the hash "
              "kept in its link (a value, a reference or a map's stored digest was changed)",
              where, what);
    if (t == PL_TABLE_INTERPRETATION || t == PL_TABLE_DISPOSITION) {
        int ok = 0;
        char why[512];
        if ((rc = pl_people__check_signature(s, (pl_table)t, row_id, &ok, why, sizeof why,
                                             v->err)))
            return rc;
        v->res->signatures++;
        if (!ok)
            fault(v, PL_FAULT_SIGNATURE, "%s: %s: %s", where, what, why);
    }
    if (t == PL_TABLE_MAP) {
        pl_map *m = NULL;
        rc = pl_store_load_map(s, row_id, &m, NULL, &e);
        pl_map_free(m);
        v->res->maps++;
        if (rc == PL_ENOMATCH || rc == PL_EFORMAT || rc == PL_EINVAL)
            fault(v, PL_FAULT_MAP_DATA,
                  "%s: %s: its data do not match the SHA-256 recorded with it (the map's "
                  "values were replaced): %s",
                  where, what, e.msg);
        else if (rc)
            return pl__err(v->err, rc, "%s", e.msg);
    }
    return PL_OK;
}

static int walk_chains(verifier *v, const pl_verify_options *o, size_t total)
{
    pl_store *s = v->s;
    sqlite3_stmt *chains, *st = NULL;
    int rc = pl_store__prepare(s, &chains,
                               "SELECT DISTINCT coalesce(chain, 0) FROM ledger ORDER BY 1",
                               v->err);
    if (rc)
        return rc;
    rc = pl_store__prepare(s, &st,
                           "SELECT l.seq, l.table_name, l.row_id, l.encoding, l.row_sha256, "
                           "l.prev_link, l.link, l.recorded_at, x.seal, k.public_key, k.origin, "
                           "coalesce(k.chain, 0), k.through_seq, x.ledger_id IS NOT NULL "
                           "FROM ledger l LEFT JOIN ledger_seal x ON x.ledger_id = l.id "
                           "LEFT JOIN seal_key k ON k.id = x.key_id "
                           "WHERE coalesce(l.chain, 0) = ?1 ORDER BY l.seq, l.id",
                           v->err);
    size_t done = 0;
    while (!rc && sqlite3_step(chains) == SQLITE_ROW) {
        pl_id chain = sqlite3_column_int64(chains, 0);
        char where[128];
        chain_words(s, chain, where, sizeof where);
        v->res->chains++;
        unsigned char prev[PL_SHA256_SIZE];
        memcpy(prev, zero_link, sizeof prev);
        sqlite3_reset(st);
        sqlite3_bind_int64(st, 1, chain);
        int64_t want = 1;
        int r;
        while (!rc && (r = sqlite3_step(st)) == SQLITE_ROW) {
            int64_t seq = sqlite3_column_int64(st, 0);
            rc = check_link(v, st, chain, want, prev, where);
            want = seq + 1;
            done++;
            if (!rc && o->progress && total && (done % 64 == 0 || done == total) &&
                o->progress(o->userdata, (double)done / (double)total))
                rc = pl__err(v->err, PL_ECANCELED, "verify stopped");
        }
        if (!rc && r != SQLITE_DONE)
            rc = pl_store__fail(s, v->err, NULL);
    }
    sqlite3_finalize(st);
    sqlite3_finalize(chains);
    return rc;
}

/* Rows of every chained table without a link. */
static int check_unchained(verifier *v)
{
    for (int t = 0; t < PL_TABLE_COUNT; t++) {
        if (!chain_sql[t])
            continue;
        const char *name = pl_table_name((pl_table)t);
        char sql[512];
        snprintf(sql, sizeof sql,
                 "SELECT x.id, x.recorded_at FROM %s x WHERE NOT EXISTS (SELECT 1 FROM ledger l "
                 "WHERE l.table_name = '%s' AND l.row_id = x.id) ORDER BY x.id",
                 name, name);
        sqlite3_stmt *st;
        int rc = pl_store__prepare(v->s, &st, sql, v->err);
        if (rc)
            return rc;
        int r;
        while ((r = sqlite3_step(st)) == SQLITE_ROW) {
            pl_id id = sqlite3_column_int64(st, 0), chain = 0;
            int found = 0;
            char where[128] = "";
            if (row_chain(v->s, (pl_table)t, id, &chain, &found, NULL, NULL) == PL_OK)
                chain_words(v->s, chain, where, sizeof where);
            const char *at = (const char *)sqlite3_column_text(st, 1);
            fault(v, PL_FAULT_ROW_UNCHAINED,
                  "%s: %s %lld (recorded %s) has no link in the ledger: it was added outside "
                  "plyledger, or the ledger was cut",
                  where[0] ? where : "the store", record_word[t], (long long)id, at ? at : "?");
        }
        rc = r == SQLITE_DONE ? PL_OK : pl_store__fail(v->s, v->err, NULL);
        sqlite3_finalize(st);
        if (rc)
            return rc;
    }
    return PL_OK;
}

/* Each head kept earlier must still be a link of its chain, and the seal
 * key kept with them the store's. */
static int check_heads(verifier *v, const pl_verify_options *o)
{
    if (o->seal_key && o->seal_key[0]) {
        if (!v->res->sealed)
            fault(v, PL_FAULT_HEAD,
                  "the store is not sealed, but it was sealed with key %s when the heads were "
                  "kept: its seal was removed outside plyledger",
                  o->seal_key);
        else if (strcmp(o->seal_key, v->res->seal_key) != 0)
            fault(v, PL_FAULT_HEAD,
                  "the store's seal key is %s, not %s as kept with the heads: the store was "
                  "resealed with another key outside plyledger",
                  v->res->seal_key, o->seal_key);
    }
    for (size_t i = 0; i < o->nheads; i++) {
        const pl_chain_head *h = &o->heads[i];
        if (h->seq <= 0)
            continue;
        sqlite3_stmt *st;
        int rc = pl_store__prepare(
            v->s, &st,
            h->serial[0]
                ? "SELECT l.link FROM ledger l JOIN airframe_current a "
                  "ON a.stable_key = coalesce(l.chain, 0) WHERE a.serial = ?1 AND l.seq = ?2"
                : "SELECT link FROM ledger WHERE chain IS NULL AND ?1 = '' AND seq = ?2",
            v->err);
        if (rc)
            return rc;
        sqlite3_bind_text(st, 1, h->serial, -1, SQLITE_TRANSIENT);
        sqlite3_bind_int64(st, 2, h->seq);
        int r = sqlite3_step(st);
        char where[128];
        if (h->serial[0])
            snprintf(where, sizeof where, "airframe %s", h->serial);
        else
            snprintf(where, sizeof where, "the store's own chain (criteria sets, people)");
        if (r == SQLITE_ROW) {
            const char *link = (const char *)sqlite3_column_text(st, 0);
            if (!link || strcmp(link, h->link) != 0)
                fault(v, PL_FAULT_HEAD,
                      "%s: link %lld is not the one kept outside the store (%.16s...): the "
                      "chain was rewritten from there on",
                      where, (long long)h->seq, h->link);
        } else if (r == SQLITE_DONE) {
            fault(v, PL_FAULT_HEAD,
                  "%s: the chain no longer reaches link %lld, which was kept outside the "
                  "store: rows and their links were removed",
                  where, (long long)h->seq);
        } else {
            rc = pl_store__fail(v->s, v->err, NULL);
        }
        sqlite3_finalize(st);
        if (rc)
            return rc;
    }
    return PL_OK;
}

PL_EXPORT int pl_store_verify(pl_store *s, pl_verify_result *res, const pl_verify_options *opts,
                              pl_err *err)
{
    assert(s && res);
    memset(res, 0, sizeof *res);
    pl_verify_options o = PL_VERIFY_OPTIONS_INIT;
    if (opts) {
        if (opts->version != PL_VERIFY_OPTIONS_VERSION)
            return pl__err(err, PL_EINVAL, "verify options: version %u is not %u",
                           opts->version, PL_VERIFY_OPTIONS_VERSION);
        if (opts->nheads && !opts->heads)
            return pl__err(err, PL_EINVAL, "verify options: %lu heads and no list",
                           (unsigned long)opts->nheads);
        o = *opts;
    }
    verifier v = { s, res, err, 0, { 0 } };
    int64_t total = 0;
    /* one read transaction: the store does not change under the walk */
    int rc = pl_store__exec(s, "BEGIN", err);
    if (rc)
        return rc;
    rc = pl_store__query_int(s, "SELECT count(*) FROM ledger", &total, err);
    /* the data first: a changed value is the fault a person needs named,
     * the trigger removed to change it comes after */
    if (!rc)
        rc = check_seal_keys(&v);
    if (!rc)
        rc = walk_chains(&v, &o, (size_t)total);
    if (!rc)
        rc = check_unchained(&v);
    if (!rc)
        rc = check_triggers(&v);
    if (!rc)
        rc = check_heads(&v, &o);
    sqlite3_exec(s->db, "COMMIT", NULL, NULL, NULL);
    return rc;
}
