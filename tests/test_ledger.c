/*
 * test_ledger.c - the hash chain and verify (plyledger/ledger.h).
 *
 * External checks: the links and row hashes of a whole store recomputed by
 * tests/ref/ledger_ref.py from the definitions in ledger.h and store_row.h
 * with Python's hashlib, struct and sqlite3 (Debian python3); SHA-256
 * itself is checked against FIPS 180-4 in test_hash.c. The faults made
 * here go through the library's own reader; tests/cli/tamper.sh attacks
 * the file with the sqlite3 shell and with raw bytes.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plyledger/criteria.h"
#include "plyledger/hash.h"
#include "plyledger/ledger.h"
#include "plyledger/map.h"
#include "plyledger/sign.h"
#include "plyledger/store_row.h"
#include "plyledger/store.h"
#include "testutil.h"

typedef struct fixture {
    char *dir;
    char *path;
} fixture;

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    assert_non_null(f);
    f->dir = tu_tmpdir();
    f->path = tu_path(f->dir, "fleet.db");
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    free(f->path);
    tu_rmtree(f->dir);
    free(f);
    return 0;
}

static void raw(const char *path, const char *sql)
{
    sqlite3 *db = NULL;
    assert_int_equal(sqlite3_open(path, &db), SQLITE_OK);
    char *msg = NULL;
    if (sqlite3_exec(db, sql, NULL, NULL, &msg) != SQLITE_OK)
        fail_msg("%s: %s", sql, msg ? msg : "?");
    sqlite3_close(db);
}

/* Run `sql` with the named triggers (comma separated) dropped first and put
 * back after, as they were: what someone who can write the file can do. */
static void tamper(const char *path, const char *triggers, const char *sql)
{
    sqlite3 *db = NULL;
    assert_int_equal(sqlite3_open(path, &db), SQLITE_OK);
    char names[512], *save = NULL, *defs[16];
    size_t n = 0;
    snprintf(names, sizeof names, "%s", triggers);
    for (char *t = strtok_r(names, ",", &save); t && n < 16; t = strtok_r(NULL, ",", &save)) {
        sqlite3_stmt *st;
        assert_int_equal(sqlite3_prepare_v2(db, "SELECT sql FROM sqlite_master WHERE name = ?1",
                                            -1, &st, NULL), SQLITE_OK);
        sqlite3_bind_text(st, 1, t, -1, SQLITE_STATIC);
        assert_int_equal(sqlite3_step(st), SQLITE_ROW);
        defs[n++] = strdup((const char *)sqlite3_column_text(st, 0));
        sqlite3_finalize(st);
        char drop[128];
        snprintf(drop, sizeof drop, "DROP TRIGGER %s", t);
        assert_int_equal(sqlite3_exec(db, drop, NULL, NULL, NULL), SQLITE_OK);
    }
    char *msg = NULL;
    if (sqlite3_exec(db, sql, NULL, NULL, &msg) != SQLITE_OK)
        fail_msg("%s: %s", sql, msg ? msg : "?");
    for (size_t i = 0; i < n; i++) {
        assert_int_equal(sqlite3_exec(db, defs[i], NULL, NULL, NULL), SQLITE_OK);
        free(defs[i]);
    }
    sqlite3_close(db);
}

static const char criteria_text[] =
    "{\"format\": \"plyledger-criteria\", \"format_version\": 1, \"name\": \"TEST-LIMITS\","
    " \"revision\": \"A\", \"source_document\": \"TEST-DOC-01\", \"example_values\": true,"
    " \"repeatability\": {\"area_mm2\": 10}, \"rules\": [{\"name\": \"skin\","
    " \"kind\": \"no-growth\", \"method\": \"flash-thermography\","
    " \"quantity\": \"temperature-contrast\", \"contrast_unit\": \"K\","
    " \"repeatability_contrast\": 0.05, \"min_reportable_area_mm2\": 20,"
    " \"new_reportable_area_mm2\": 20, \"vanished\": \"investigate\"}]}";

/* A store of two airframes (invented serials), an operator change, a site,
 * two inspections with a map each and a criteria set: every chain. */
static void fill(const char *path)
{
    pl_store *st;
    pl_err err = { 0 };
    TU_OK(pl_store_create(&st, path, &err));
    for (int k = 0; k < 2; k++) {
        pl_airframe af;
        memset(&af, 0, sizeof af);
        snprintf(af.serial, sizeof af.serial, "TLX-%04d", k + 1);
        snprintf(af.aircraft_type, sizeof af.aircraft_type, "TLX-T1");
        snprintf(af.manufactured, sizeof af.manufactured, "2015-06-30");
        TU_OK(pl_store_add_airframe(st, &af, NULL, &err));
    }
    TU_OK(pl_store_add_operator(st, "TLX-0001", "Operator B", "2019-04-01", &err));
    pl_site s;
    memset(&s, 0, sizeof s);
    snprintf(s.airframe_serial, sizeof s.airframe_serial, "TLX-0001");
    snprintf(s.code, sizeof s.code, "F01");
    snprintf(s.method, sizeof s.method, "flash-thermography");
    s.thickness_mm = 3.2;
    s.diffusivity_mm2_s = NAN;
    s.map_frame.u[0] = 1;
    s.map_frame.v[1] = 1;
    snprintf(s.map_frame.system, sizeof s.map_frame.system, "STA/BL/WL");
    snprintf(s.map_frame.unit, sizeof s.map_frame.unit, "mm");
    s.width_px = 8;
    s.height_px = 6;
    s.pitch_u = s.pitch_v = 0.5;
    TU_OK(pl_store_add_site(st, &s, NULL, &err));
    const char *dates[2] = { "2016-01-10", "2022-03-01" }, *kinds[2] = { "baseline", "scheduled" };
    for (int k = 0; k < 2; k++) {
        pl_inspection in;
        memset(&in, 0, sizeof in);
        snprintf(in.airframe_serial, sizeof in.airframe_serial, "TLX-0001");
        snprintf(in.site_code, sizeof in.site_code, "F01");
        snprintf(in.kind, sizeof in.kind, "%s", kinds[k]);
        snprintf(in.performed_on, sizeof in.performed_on, "%s", dates[k]);
        in.aircraft_hours = NAN;
        in.aircraft_cycles = -1;
        snprintf(in.procedure, sizeof in.procedure, "NDT-51-10-01");
        snprintf(in.procedure_rev, sizeof in.procedure_rev, "C");
        snprintf(in.equipment, sizeof in.equipment, "test rig");
        snprintf(in.calibration_ref, sizeof in.calibration_ref, "REF-STD-07");
        snprintf(in.inspector, sizeof in.inspector, "T. Tester");
        snprintf(in.inspector_level, sizeof in.inspector_level, "2");
        pl_id id;
        TU_OK(pl_store_add_inspection(st, &in, &id, &err));
        pl_map *m;
        TU_OK(pl_map_new(&m, 8, 6, 1, &err));
        for (size_t i = 0; i < 48; i++)
            m->data[i] = 0.01f * (float)i + (float)k;
        TU_OK(pl_map_set_channel(m, 0, "temperature-contrast", "K", &err));
        m->pitch_u = m->pitch_v = 0.5;
        snprintf(m->placement.system, sizeof m->placement.system, "STA/BL/WL");
        pl_map_record r;
        memset(&r, 0, sizeof r);
        r.inspection_key = id;
        snprintf(r.source, sizeof r.source, "scans/F01-%d.npy", k);
        snprintf(r.origin, sizeof r.origin, "import-npy");
        TU_OK(pl_store_add_map(st, &r, m, NULL, &err));
        pl_map_free(m);
    }
    pl_criteria *c;
    TU_OK(pl_criteria_parse(&c, criteria_text, strlen(criteria_text), "criteria.json", &err));
    TU_OK(pl_store_add_criteria(st, c, NULL, NULL, &err));
    pl_criteria_free(c);
    pl_store_close(st);
}

static pl_verify_result verify(const char *path, const pl_verify_options *o)
{
    pl_store *st;
    pl_err err = { 0 };
    TU_OK(pl_store_open(&st, path, 0, &err));
    pl_verify_result res;
    TU_OK(pl_store_verify(st, &res, o, &err));
    pl_store_close(st);
    return res;
}

/* Every recorded row has one link; verify finds the record intact, and
 * the Python reference recomputes the same row hashes and links. */
static void test_ledger__every_row_is_chained_and_verifies(void **state)
{
    fixture *f = *state;
    fill(f->path);
    pl_verify_result res = verify(f->path, NULL);
    if (res.faults)
        fail_msg("%s", res.message);
    /* two airframes, an operator change, a site, two inspections, two
     * maps, one criteria set */
    assert_int_equal(res.links, 9);
    assert_int_equal(res.rows, 9);
    assert_int_equal(res.maps, 2);
    assert_int_equal(res.chains, 3);
    /* Python's hashlib over the documented encodings (tests/ref/ledger_ref.py) */
    char *out = tu_path(f->dir, "ref.txt");
    assert_int_equal(tu_python("ledger_ref.py", f->path, out, NULL), 0);
    size_t n;
    char *text = (char *)tu_read_file(out, &n);
    assert_non_null(text);
    assert_true(strncmp(text, "ok 9\n", 5) == 0);
    free(text);
    /* and it sees a changed row as we do */
    raw(f->path, "DROP TRIGGER site_no_update; UPDATE site SET thickness_mm = 3.3");
    assert_int_equal(tu_python("ledger_ref.py", f->path, out, NULL), 0);
    text = (char *)tu_read_file(out, &n);
    assert_non_null(text);
    assert_true(strncmp(text, "fault site", 10) == 0);
    free(text);
    res = verify(f->path, NULL);
    assert_int_equal(res.first, PL_FAULT_ROW_CHANGED);
    tu_assert_msg_has(res.message, "airframe TLX-0001: site record");
    tu_assert_msg_has(res.message, "differs from what was recorded");
    /* the trigger removed is a fault of its own, named after the data */
    assert_int_equal(res.faults, 2);
    free(out);
}

/* A link computed by hand from the encoding in ledger.h, with the
 * library's SHA-256 (FIPS 180-4, test_hash.c), equals pl_ledger_link(). */
static void test_ledger__link_follows_its_definition(void **state)
{
    (void)state;
    unsigned char prev[32], row[32], want[32], got[32];
    for (int i = 0; i < 32; i++) {
        prev[i] = (unsigned char)i;
        row[i] = (unsigned char)(255 - i);
    }
    unsigned char buf[4 + 4 + 32 + 8 + 4 + 10 + 8 + 4 + 32];
    size_t n = 0;
    memcpy(buf + n, "PLLK", 4), n += 4;
    buf[n++] = 1, buf[n++] = 0, buf[n++] = 0, buf[n++] = 0;
    memcpy(buf + n, prev, 32), n += 32;
    const unsigned char seq[8] = { 0x39, 0x05, 0, 0, 0, 0, 0, 0 }; /* 1337 */
    memcpy(buf + n, seq, 8), n += 8;
    buf[n++] = 10, buf[n++] = 0, buf[n++] = 0, buf[n++] = 0;
    memcpy(buf + n, "inspection", 10), n += 10;
    const unsigned char id[8] = { 0xfe, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff }; /* -2 */
    memcpy(buf + n, id, 8), n += 8;
    buf[n++] = 1, buf[n++] = 0, buf[n++] = 0, buf[n++] = 0;
    memcpy(buf + n, row, 32), n += 32;
    assert_int_equal(n, sizeof buf);
    pl_sha256(want, buf, n);
    pl_ledger_link(got, prev, 1337, "inspection", -2, 1, row);
    assert_memory_equal(got, want, 32);
}

/* A store written before the chain existed (schema 5, its ledger empty) is
 * chained when it is opened, and the migration says so. */
static void test_ledger__migration_chains_an_older_store(void **state)
{
    fixture *f = *state;
    fill(f->path);
    /* back to schema 5: the ledger as migration 1 made it, empty */
    raw(f->path,
        "DROP TRIGGER ledger_no_update; DROP TRIGGER ledger_no_delete; DROP TABLE ledger;"
        "CREATE TABLE ledger (id INTEGER PRIMARY KEY, airframe_key INTEGER NOT NULL"
        " REFERENCES airframe(id), seq INTEGER NOT NULL, table_name TEXT NOT NULL,"
        " row_id INTEGER NOT NULL, row_sha256 TEXT NOT NULL, prev_link TEXT NOT NULL,"
        " link TEXT NOT NULL, recorded_at TEXT NOT NULL, UNIQUE (airframe_key, seq));"
        "CREATE TRIGGER ledger_no_update BEFORE UPDATE ON ledger"
        " BEGIN SELECT RAISE(ABORT, 'ledger is append-only'); END;"
        "CREATE TRIGGER ledger_no_delete BEFORE DELETE ON ledger"
        " BEGIN SELECT RAISE(ABORT, 'ledger is append-only'); END;"
        "DROP TABLE ledger_seal; DROP TABLE seal_key;"
        "DROP TABLE interpretation; DROP TABLE disposition; DROP TABLE person_key;"
        " DROP TABLE person_qualification; DROP TABLE procedure_level; DROP TABLE person;"
        "CREATE TABLE disposition (id INTEGER PRIMARY KEY);"
        "CREATE TABLE disposition_change (disposition_id INTEGER, change_id INTEGER);"
        "CREATE TRIGGER disposition_no_update BEFORE UPDATE ON disposition BEGIN SELECT 1; END;"
        "CREATE TRIGGER disposition_no_delete BEFORE DELETE ON disposition BEGIN SELECT 1; END;"
        "CREATE TRIGGER disposition_change_no_update BEFORE UPDATE ON disposition_change"
        " BEGIN SELECT 1; END;"
        "CREATE TRIGGER disposition_change_no_delete BEFORE DELETE ON disposition_change"
        " BEGIN SELECT 1; END;"
        "PRAGMA user_version = 5");
    tamper(f->path, "store_info_no_delete",
           "DELETE FROM store_info WHERE name IN ('schema.0006', 'schema.0007', 'schema.0008')");
    pl_store *st;
    pl_err err = { 0 };
    TU_OK(pl_store_open(&st, f->path, 0, &err));
    tu_assert_msg_has(pl_store_migration_note(st), "chained the 9 rows recorded before");
    pl_store_summary sum;
    TU_OK(pl_store_summarize(st, &sum, &err));
    assert_int_equal(sum.ledger_links, 9);
    pl_store_close(st);
    pl_verify_result res = verify(f->path, NULL);
    if (res.faults)
        fail_msg("%s", res.message);
    /* a store opened again is not migrated again */
    TU_OK(pl_store_open(&st, f->path, 0, &err));
    assert_string_equal(pl_store_migration_note(st), "");
    pl_store_close(st);
}

/* Heads kept outside the store: a chain rewritten or cut before them fails. */
static void test_ledger__heads_kept_outside_catch_a_cut(void **state)
{
    fixture *f = *state;
    fill(f->path);
    pl_store *st;
    pl_err err = { 0 };
    TU_OK(pl_store_open(&st, f->path, 0, &err));
    pl_chain_head *h;
    size_t n;
    TU_OK(pl_store_heads(st, &h, &n, &err));
    pl_store_close(st);
    assert_int_equal(n, 3);
    assert_string_equal(h[1].serial, "TLX-0001");
    assert_int_equal(h[1].seq, 7);
    char *text;
    TU_OK(pl_heads_json(&text, "id", NULL, h, n, &err));
    pl_chain_head *back;
    size_t nb;
    char fp[PL_SIGN_FINGERPRINT_SIZE] = "x";
    TU_OK(pl_heads_parse(&back, &nb, fp, text, "heads.json", &err));
    assert_string_equal(fp, "");
    free(text);
    assert_int_equal(nb, n);
    for (size_t i = 0; i < n; i++) {
        assert_string_equal(back[i].serial, h[i].serial);
        assert_int_equal(back[i].seq, h[i].seq);
        assert_string_equal(back[i].link, h[i].link);
    }
    pl_verify_options o = PL_VERIFY_OPTIONS_INIT;
    o.heads = back;
    o.nheads = nb;
    assert_int_equal(verify(f->path, &o).faults, 0);
    /* the last map and its inspection's links cut away together */
    tamper(f->path, "ledger_no_delete,map_no_delete,map_channel_no_delete",
           "DELETE FROM map_channel WHERE map_id = (SELECT max(id) FROM map);"
           " DELETE FROM map WHERE id = (SELECT max(id) FROM map);"
           " DELETE FROM ledger WHERE table_name = 'map' AND row_id = (SELECT max(row_id)"
           " FROM ledger WHERE table_name = 'map')");
    /* the chain alone cannot tell: it is whole, only shorter */
    assert_int_equal(verify(f->path, NULL).faults, 0);
    pl_verify_result res = verify(f->path, &o);
    assert_int_equal(res.first, PL_FAULT_HEAD);
    tu_assert_msg_has(res.message, "airframe TLX-0001: the chain no longer reaches link 7");
    free(back);
    free(h);
}

/* Append a forged site row to airframe TLX-0001 with its link computed as
 * plyledger would (row hash from the library's own encoder, link from
 * pl_ledger_link()): what a writer who knows the encoding can do. */
static void forge_append(const char *path)
{
    raw(path, "CREATE TEMP TABLE t AS SELECT * FROM site WHERE code = 'F01';"
              " UPDATE t SET id = (SELECT max(id) + 1 FROM site), code = 'F99';"
              " INSERT INTO site SELECT * FROM t");
    pl_store *st;
    pl_err err = { 0 };
    TU_OK(pl_store_open(&st, path, PL_STORE_READONLY, &err));
    sqlite3 *db = NULL;
    assert_int_equal(sqlite3_open(path, &db), SQLITE_OK);
    sqlite3_stmt *q;
    assert_int_equal(sqlite3_prepare_v2(db,
                                        "SELECT (SELECT id FROM site WHERE code = 'F99'),"
                                        " seq, link FROM ledger WHERE chain = 1 ORDER BY seq DESC"
                                        " LIMIT 1",
                                        -1, &q, NULL),
                     SQLITE_OK);
    assert_int_equal(sqlite3_step(q), SQLITE_ROW);
    pl_id id = sqlite3_column_int64(q, 0);
    int64_t seq = sqlite3_column_int64(q, 1) + 1;
    unsigned char prev[32], row[32], link[32];
    TU_OK(pl_sha256_from_hex(prev, (const char *)sqlite3_column_text(q, 2)));
    sqlite3_finalize(q);
    unsigned char *enc;
    size_t n;
    TU_OK(pl_store_row_encode(&enc, &n, st, PL_TABLE_SITE, id, &err));
    pl_store_close(st);
    pl_sha256(row, enc, n);
    free(enc);
    pl_ledger_link(link, prev, seq, "site", id, PL_ROW_ENCODING_VERSION, row);
    char hr[65], hp[65], hl[65], sql[1024];
    pl_sha256_hex(hr, row);
    pl_sha256_hex(hp, prev);
    pl_sha256_hex(hl, link);
    snprintf(sql, sizeof sql,
             "INSERT INTO ledger (chain, seq, table_name, row_id, encoding, row_sha256,"
             " prev_link, link, recorded_at) VALUES (1, %lld, 'site', %lld, 1, '%s', '%s', '%s',"
             " '2030-01-01T00:00:00.000Z')",
             (long long)seq, (long long)id, hr, hp, hl);
    assert_int_equal(sqlite3_exec(db, sql, NULL, NULL, NULL), SQLITE_OK);
    sqlite3_close(db);
}

static void tu_copy_file(const char *from, const char *to)
{
    size_t n;
    unsigned char *b = tu_read_file(from, &n);
    assert_non_null(b);
    assert_int_equal(tu_write_file(to, b, n), 0);
    free(b);
}

static void make_key(pl_sign_key *key, unsigned char fill_byte)
{
    unsigned char seed[32];
    memset(seed, fill_byte, sizeof seed);
    pl_sign_key_from_seed(key, seed);
}

/* A forged append with a correctly computed link: whole to an unsealed
 * store's chain, a fault in a sealed one. */
static void test_ledger__a_seal_catches_a_forged_append(void **state)
{
    fixture *f = *state;
    fill(f->path);
    char *copy = tu_path(f->dir, "unsealed.db");
    tu_copy_file(f->path, copy);
    forge_append(copy);
    assert_int_equal(verify(copy, NULL).faults, 0); /* the limit of a chain alone */
    free(copy);

    pl_store *st;
    pl_err err = { 0 };
    pl_sign_key key;
    make_key(&key, 7);
    TU_OK(pl_store_open(&st, f->path, 0, &err));
    assert_int_equal(pl_store_sealed(st, NULL), 0);
    TU_OK(pl_store_seal(st, &key, &err));
    assert_int_equal(pl_store_seal(st, &key, &err), PL_EEXISTS);
    /* what it records from now on is sealed too */
    TU_OK(pl_store_add_operator(st, "TLX-0002", "Operator C", "2021-01-01", &err));
    pl_store_close(st);
    pl_verify_result res = verify(f->path, NULL);
    if (res.faults)
        fail_msg("%s", res.message);
    assert_int_equal(res.sealed, 1);
    assert_int_equal(res.seals, 10);
    char fp[PL_SIGN_FINGERPRINT_SIZE];
    pl_sign_fingerprint(fp, key.public_key);
    assert_string_equal(res.seal_key, fp);

    forge_append(f->path);
    res = verify(f->path, NULL);
    assert_int_equal(res.first, PL_FAULT_SEAL);
    assert_int_equal(res.faults, 1);
    tu_assert_msg_has(res.message, "airframe TLX-0001: site record");
    tu_assert_msg_has(res.message, "carries no seal");
}

/* A sealed store records nothing without its key, or with another key. */
static void test_ledger__a_sealed_store_needs_its_key(void **state)
{
    fixture *f = *state;
    fill(f->path);
    pl_store *st;
    pl_err err = { 0 };
    pl_sign_key key, other;
    make_key(&key, 7);
    make_key(&other, 8);
    TU_OK(pl_store_open(&st, f->path, 0, &err));
    TU_OK(pl_store_seal(st, &key, &err));
    pl_store_close(st);
    TU_OK(pl_store_open(&st, f->path, 0, &err));
    assert_int_equal(pl_store_sealed(st, NULL), 1);
    assert_int_equal(pl_store_add_operator(st, "TLX-0002", "Operator C", "2021-01-01", &err),
                     PL_EREFUSED);
    tu_assert_msg_has(err.msg, "needs its seal key");
    assert_int_equal(pl_store_set_seal_key(st, &other, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, "is not this store's seal key");
    pl_store_summary sum;
    TU_OK(pl_store_summarize(st, &sum, &err));
    assert_int_equal(sum.ledger_links, 9); /* nothing was recorded */
    TU_OK(pl_store_set_seal_key(st, &key, &err));
    TU_OK(pl_store_add_operator(st, "TLX-0002", "Operator C", "2021-01-01", &err));
    pl_store_close(st);
    assert_int_equal(verify(f->path, NULL).faults, 0);
}

/* Seals altered or removed, and a store resealed with another key. */
static void test_ledger__seal_attacks_are_named(void **state)
{
    fixture *f = *state;
    fill(f->path);
    pl_store *st;
    pl_err err = { 0 };
    pl_sign_key key, other;
    make_key(&key, 7);
    make_key(&other, 8);
    TU_OK(pl_store_open(&st, f->path, 0, &err));
    TU_OK(pl_store_seal(st, &key, &err));
    pl_store_close(st);
    char fp[PL_SIGN_FINGERPRINT_SIZE];
    pl_sign_fingerprint(fp, key.public_key);
    char *a = tu_path(f->dir, "a.db"), *b = tu_path(f->dir, "b.db"), *c = tu_path(f->dir, "c.db");
    tu_copy_file(f->path, a);
    tu_copy_file(f->path, b);
    tu_copy_file(f->path, c);
    /* one seal's bytes changed */
    tamper(a, "ledger_seal_no_update",
           "UPDATE ledger_seal SET seal = zeroblob(64) WHERE ledger_id = 3");
    pl_verify_result res = verify(a, NULL);
    assert_int_equal(res.first, PL_FAULT_SEAL);
    tu_assert_msg_has(res.message, "its seal does not hold");
    /* the own key removed, the seals left */
    tamper(b, "seal_key_no_delete", "PRAGMA foreign_keys = OFF; DELETE FROM seal_key");
    res = verify(b, NULL);
    assert_int_equal(res.first, PL_FAULT_SEAL);
    tu_assert_msg_has(res.message, "own seal key is gone");
    /* everything about the seal removed and resealed with another key:
     * whole to the store alone, caught by the fingerprint kept */
    tamper(c, "seal_key_no_delete,ledger_seal_no_delete",
           "DELETE FROM ledger_seal; DELETE FROM seal_key");
    TU_OK(pl_store_open(&st, c, 0, &err));
    TU_OK(pl_store_seal(st, &other, &err));
    pl_store_close(st);
    assert_int_equal(verify(c, NULL).faults, 0);
    pl_verify_options o = PL_VERIFY_OPTIONS_INIT;
    o.seal_key = fp;
    res = verify(c, &o);
    assert_int_equal(res.first, PL_FAULT_HEAD);
    tu_assert_msg_has(res.message, "resealed with another key");
    free(a);
    free(b);
    free(c);
}

/* A heads file that is not one: the field named. */
static void test_ledger__heads_file_faults_are_named(void **state)
{
    (void)state;
    static const struct {
        const char *text, *part;
    } cases[] = {
        { "[1]", "format: expected \"plyledger-heads\"" },
        { "{\"format\": \"plyledger-heads\", \"format_version\": 3, \"heads\": []}",
          "format_version: expected 1 or 2" },
        { "{\"format\": \"plyledger-heads\", \"format_version\": 2, \"seal_key\": \"AB\","
          " \"heads\": []}",
          "seal_key: expected a key fingerprint" },
        { "{\"format\": \"plyledger-heads\", \"format_version\": 1}", "heads: expected an array" },
        { "{\"format\": \"plyledger-heads\", \"format_version\": 1, \"heads\": [{\"airframe\": 7,"
          " \"seq\": 1, \"link\": \"00\"}]}",
          "heads[0].airframe" },
        { "{\"format\": \"plyledger-heads\", \"format_version\": 1, \"heads\": [{\"airframe\":"
          " null, \"seq\": 0.5, \"link\": \"00\"}]}",
          "heads[0].seq" },
        { "{\"format\": \"plyledger-heads\", \"format_version\": 1, \"heads\": [{\"airframe\":"
          " \"X\", \"seq\": 3, \"link\": \"zz\"}]}",
          "heads[0].link: expected 64 hex digits" },
        { "not json", "not JSON" },
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        pl_chain_head *h = (pl_chain_head *)1;
        size_t n = 9;
        pl_err err = { 0 };
        assert_int_equal(pl_heads_parse(&h, &n, NULL, cases[i].text, "heads.json", &err),
                         PL_EFORMAT);
        assert_null(h);
        assert_int_equal(n, 0);
        tu_assert_msg_has(err.msg, "heads.json: ");
        tu_assert_msg_has(err.msg, cases[i].part);
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_ledger__every_row_is_chained_and_verifies, setup,
                                        teardown),
        cmocka_unit_test(test_ledger__link_follows_its_definition),
        cmocka_unit_test_setup_teardown(test_ledger__migration_chains_an_older_store, setup,
                                        teardown),
        cmocka_unit_test_setup_teardown(test_ledger__heads_kept_outside_catch_a_cut, setup,
                                        teardown),
        cmocka_unit_test(test_ledger__heads_file_faults_are_named),
        cmocka_unit_test_setup_teardown(test_ledger__a_seal_catches_a_forged_append, setup,
                                        teardown),
        cmocka_unit_test_setup_teardown(test_ledger__a_sealed_store_needs_its_key, setup,
                                        teardown),
        cmocka_unit_test_setup_teardown(test_ledger__seal_attacks_are_named, setup, teardown),
    };
    return cmocka_run_group_tests_name("ledger", tests, NULL, NULL);
}
