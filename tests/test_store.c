/*
 * test_store.c - the inspection record: life and migrations, the append-only
 * triggers, corrections, maps, transactions, listings and the summary.
 *
 * External references: SQLite's own PRAGMA integrity_check and PRAGMA
 * foreign_key_check after the writes (https://www.sqlite.org/pragma.html),
 * SQLite's date() as the calendar for date validation
 * (https://www.sqlite.org/lang_datefunc.html), and the stored map blobs
 * read back by Python's sqlite3, zlib, hashlib and NumPy
 * (tests/ref/store_map_ref.py).
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <dirent.h>
#include <math.h>
#include <pthread.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include "record/store_int.h"
#include "plyledger/change.h"
#include "plyledger/hash.h"
#include "plyledger/map.h"
#include "plyledger/store.h"
#include "testutil.h"

/* ---- fixture --------------------------------------------------------------- */

typedef struct fixture {
    char *dir;
    char *path;     /* dir/fleet.db */
    pl_store *st;   /* open on path */
} fixture;

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    assert_non_null(f);
    f->dir = tu_tmpdir();
    f->path = tu_path(f->dir, "fleet.db");
    pl_err err = { 0 };
    int rc = pl_store_create(&f->st, f->path, &err);
    if (rc)
        fail_msg("create: %s", err.msg);
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    pl_store_close(f->st);
    free(f->path);
    tu_rmtree(f->dir);
    free(f);
    return 0;
}

static void expect_fail(int rc, int code, const pl_err *err, const char *needle)
{
    if (rc != code)
        fail_msg("expected %d, got %d (%s)", code, rc, err->msg);
    assert_int_equal(err->code, code);
    tu_assert_msg_has(err->msg, needle);
}

static sqlite3 *raw_open(const char *path)
{
    sqlite3 *db = NULL;
    assert_int_equal(sqlite3_open_v2(path, &db, SQLITE_OPEN_READWRITE | SQLITE_OPEN_CREATE,
                                     NULL), SQLITE_OK);
    sqlite3_extended_result_codes(db, 1);
    sqlite3_busy_timeout(db, 5000);
    return db;
}

static void raw_exec(sqlite3 *db, const char *sql)
{
    char *msg = NULL;
    if (sqlite3_exec(db, sql, NULL, NULL, &msg) != SQLITE_OK)
        fail_msg("%s: %s", sql, msg ? msg : "?");
}

static int64_t raw_int(sqlite3 *db, const char *sql)
{
    sqlite3_stmt *st;
    assert_int_equal(sqlite3_prepare_v2(db, sql, -1, &st, NULL), SQLITE_OK);
    assert_int_equal(sqlite3_step(st), SQLITE_ROW);
    int64_t v = sqlite3_column_int64(st, 0);
    sqlite3_finalize(st);
    return v;
}

/* The first column of the first row as a malloc'd string. */
static char *raw_text(sqlite3 *db, const char *sql)
{
    sqlite3_stmt *st;
    assert_int_equal(sqlite3_prepare_v2(db, sql, -1, &st, NULL), SQLITE_OK);
    assert_int_equal(sqlite3_step(st), SQLITE_ROW);
    const unsigned char *t = sqlite3_column_text(st, 0);
    char *s = strdup(t ? (const char *)t : "");
    sqlite3_finalize(st);
    return s;
}

/* A growing string. */
typedef struct sbuf {
    char *s;
    size_t n, cap;
} sbuf;

static void sb_add(sbuf *b, const char *s, size_t n)
{
    if (b->n + n + 1 > b->cap) {
        b->cap = 2 * (b->n + n + 1);
        b->s = realloc(b->s, b->cap);
        assert_non_null(b->s);
    }
    memcpy(b->s + b->n, s, n);
    b->n += n;
    b->s[b->n] = '\0';
}

static void sb_str(sbuf *b, const char *s)
{
    sb_add(b, s, strlen(s));
}

/*
 * Everything a store holds, as text: user_version, the schema and every row
 * of every table (quote() renders each value exactly, blobs as hex).
 */
static char *dump(const char *path)
{
    sqlite3 *db = raw_open(path);
    sbuf b = { 0 };
    char line[64];
    snprintf(line, sizeof line, "user_version %lld\n",
             (long long)raw_int(db, "PRAGMA user_version"));
    sb_str(&b, line);
    sqlite3_stmt *tables;
    assert_int_equal(sqlite3_prepare_v2(db, "SELECT name, sql FROM sqlite_master WHERE type = "
                                        "'table' ORDER BY name", -1, &tables, NULL), SQLITE_OK);
    while (sqlite3_step(tables) == SQLITE_ROW) {
        const char *name = (const char *)sqlite3_column_text(tables, 0);
        sb_str(&b, (const char *)sqlite3_column_text(tables, 1));
        sb_str(&b, "\n");
        char *sql = sqlite3_mprintf("SELECT * FROM \"%w\"", name);
        sqlite3_stmt *rows;
        assert_int_equal(sqlite3_prepare_v2(db, sql, -1, &rows, NULL), SQLITE_OK);
        sqlite3_free(sql);
        int ncol = sqlite3_column_count(rows);
        sqlite3_stmt *q;
        assert_int_equal(sqlite3_prepare_v2(db, "SELECT quote(?1)", -1, &q, NULL), SQLITE_OK);
        while (sqlite3_step(rows) == SQLITE_ROW) {
            for (int c = 0; c < ncol; c++) {
                sqlite3_reset(q);
                sqlite3_bind_value(q, 1, sqlite3_column_value(rows, c));
                assert_int_equal(sqlite3_step(q), SQLITE_ROW);
                sb_str(&b, (const char *)sqlite3_column_text(q, 0));
                sb_str(&b, "|");
            }
            sb_str(&b, "\n");
        }
        sqlite3_finalize(q);
        sqlite3_finalize(rows);
    }
    sqlite3_finalize(tables);
    sqlite3_close(db);
    return b.s;
}

/*
 * SQLite's own consistency checks: PRAGMA integrity_check answers the single
 * row "ok" on a sound database and PRAGMA foreign_key_check returns no rows
 * when every foreign key resolves (https://www.sqlite.org/pragma.html).
 */
static void check_integrity(const char *path)
{
    sqlite3 *db = raw_open(path);
    char *ok = raw_text(db, "PRAGMA integrity_check");
    assert_string_equal(ok, "ok");
    free(ok);
    sqlite3_stmt *st;
    assert_int_equal(sqlite3_prepare_v2(db, "PRAGMA foreign_key_check", -1, &st, NULL),
                     SQLITE_OK);
    assert_int_equal(sqlite3_step(st), SQLITE_DONE);
    sqlite3_finalize(st);
    sqlite3_close(db);
}

/* ---- records ------------------------------------------------------------------- */

static pl_airframe airframe(const char *serial, const char *type)
{
    pl_airframe af;
    memset(&af, 0, sizeof af);
    snprintf(af.serial, sizeof af.serial, "%s", serial);
    snprintf(af.aircraft_type, sizeof af.aircraft_type, "%s", type);
    snprintf(af.manufactured, sizeof af.manufactured, "2015-06-30");
    return af;
}

static void add_airframe(pl_store *st, const char *serial, const char *type)
{
    pl_airframe af = airframe(serial, type);
    pl_err err = { 0 };
    if (pl_store_add_airframe(st, &af, NULL, &err))
        fail_msg("add airframe: %s", err.msg);
}

static pl_site site(const char *serial, const char *code)
{
    pl_site s;
    memset(&s, 0, sizeof s);
    snprintf(s.airframe_serial, sizeof s.airframe_serial, "%s", serial);
    snprintf(s.code, sizeof s.code, "%s", code);
    snprintf(s.zone, sizeof s.zone, "231");
    snprintf(s.description, sizeof s.description, "crown skin, %s", code);
    snprintf(s.method, sizeof s.method, "flash-thermography");
    snprintf(s.material, sizeof s.material, "CFRP");
    s.thickness_mm = 3.2;
    s.diffusivity_mm2_s = NAN;
    s.map_frame.origin[0] = 5200;
    s.map_frame.origin[1] = -48;
    s.map_frame.origin[2] = 3480;
    s.map_frame.u[0] = 1;
    s.map_frame.v[1] = 1;
    snprintf(s.map_frame.system, sizeof s.map_frame.system, "STA/BL/WL");
    snprintf(s.map_frame.unit, sizeof s.map_frame.unit, "mm");
    s.width_px = 8;
    s.height_px = 6;
    s.pitch_u = 0.5;
    s.pitch_v = 0.5;
    return s;
}

static void add_site(pl_store *st, const char *serial, const char *code)
{
    pl_site s = site(serial, code);
    pl_err err = { 0 };
    if (pl_store_add_site(st, &s, NULL, &err))
        fail_msg("add site: %s", err.msg);
}

static pl_inspection inspection(const char *serial, const char *code, const char *kind,
                                const char *date)
{
    pl_inspection in;
    memset(&in, 0, sizeof in);
    snprintf(in.airframe_serial, sizeof in.airframe_serial, "%s", serial);
    snprintf(in.site_code, sizeof in.site_code, "%s", code);
    snprintf(in.kind, sizeof in.kind, "%s", kind);
    snprintf(in.performed_on, sizeof in.performed_on, "%s", date);
    in.aircraft_hours = NAN;
    in.aircraft_cycles = -1;
    snprintf(in.procedure, sizeof in.procedure, "NDT-51-10-01");
    snprintf(in.procedure_rev, sizeof in.procedure_rev, "C");
    snprintf(in.equipment, sizeof in.equipment, "flash lamp pair, LWIR camera 640x512");
    snprintf(in.calibration_ref, sizeof in.calibration_ref, "REF-STD-07");
    snprintf(in.inspector, sizeof in.inspector, "K. Varnholt");
    snprintf(in.inspector_level, sizeof in.inspector_level, "2");
    return in;
}

static pl_id add_inspection(pl_store *st, const char *serial, const char *code,
                            const char *kind, const char *date)
{
    pl_inspection in = inspection(serial, code, kind, date);
    pl_err err = { 0 };
    pl_id id = 0;
    if (pl_store_add_inspection(st, &in, &id, &err))
        fail_msg("add inspection: %s", err.msg);
    return id;
}

/* A w x h map of n channels with distinct values, a NaN hole and pitch 0.5. */
static pl_map *test_map(uint32_t w, uint32_t h, uint32_t n, float seed)
{
    pl_map *m = NULL;
    pl_err err = { 0 };
    if (pl_map_new(&m, w, h, n, &err))
        fail_msg("map: %s", err.msg);
    for (size_t i = 0; i < (size_t)w * h * n; i++)
        m->data[i] = seed + 0.001f * (float)i - 0.25f * (float)(i % 7);
    /* a NaN with a payload: the store keeps it as NaN (map.h) */
    uint32_t bits = 0xffc00123u;
    memcpy(&m->data[3], &bits, sizeof bits);
    m->data[(size_t)w * h * n - 1] = NAN;
    for (uint32_t c = 0; c < n; c++)
        if (pl_map_set_channel(m, c, c == 0 ? "temperature-contrast" : "log-derivative-2",
                               c == 0 ? "K" : "1", &err))
            fail_msg("channel: %s", err.msg);
    if (n > 1)
        snprintf(m->channels[1].label, sizeof m->channels[1].label, "t=0.50 s");
    m->pitch_u = 0.5;
    m->pitch_v = 0.5;
    m->placement.origin[0] = 5200;
    m->placement.origin[1] = -48;
    m->placement.origin[2] = 3480;
    snprintf(m->placement.system, sizeof m->placement.system, "STA/BL/WL");
    return m;
}

static pl_map_record map_record(pl_id inspection_key)
{
    pl_map_record r;
    memset(&r, 0, sizeof r);
    r.inspection_key = inspection_key;
    snprintf(r.source, sizeof r.source, "scans/2021/F01.npy");
    snprintf(r.origin, sizeof r.origin, "import-npy");
    return r;
}

/* ---- life --------------------------------------------------------------------------- */

/* A created store is stamped as ours, in WAL mode, and reopens with its records. */
static void test_store__create_and_reopen(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    assert_int_equal(pl_store_schema_version(f->st), PL_STORE_SCHEMA_VERSION);
    add_airframe(f->st, "PLX-0001", "PLX-T1");
    pl_store_summary sum;
    TU_OK(pl_store_summarize(f->st, &sum, &err));
    assert_int_equal(strlen(sum.store_id), 32);
    assert_int_equal(strspn(sum.store_id, "0123456789abcdef"), 32);
    assert_string_equal(sum.created_by, pl_version());
    assert_int_equal(strlen(sum.created_at), 24);
    pl_store_close(f->st);
    f->st = NULL;

    sqlite3 *db = raw_open(f->path);
    assert_int_equal(raw_int(db, "PRAGMA application_id"), PL_STORE_APPLICATION_ID);
    assert_int_equal(raw_int(db, "PRAGMA user_version"), PL_STORE_SCHEMA_VERSION);
    char *mode = raw_text(db, "PRAGMA journal_mode");
    assert_string_equal(mode, "wal");
    free(mode);
    sqlite3_close(db);

    /* creating over an existing file is refused and leaves it alone */
    char *before = dump(f->path);
    pl_store *other = NULL;
    expect_fail(pl_store_create(&other, f->path, &err), PL_EEXISTS, &err, f->path);
    assert_null(other);
    char *after = dump(f->path);
    assert_string_equal(before, after);
    free(after);

    TU_OK(pl_store_open(&f->st, f->path, 0, &err));
    pl_airframe af;
    TU_OK(pl_store_get_airframe(f->st, "PLX-0001", &af, &err));
    assert_string_equal(af.aircraft_type, "PLX-T1");
    pl_store_summary again;
    TU_OK(pl_store_summarize(f->st, &again, &err));
    assert_string_equal(again.store_id, sum.store_id);
    assert_int_equal(again.airframes, 1);
    pl_store_close(f->st);

    /* read-only: reads work, writes are refused and change nothing */
    TU_OK(pl_store_open(&f->st, f->path, PL_STORE_READONLY, &err));
    TU_OK(pl_store_get_airframe(f->st, "PLX-0001", &af, &err));
    pl_airframe b = airframe("PLX-0002", "PLX-T1");
    expect_fail(pl_store_add_airframe(f->st, &b, NULL, &err), PL_EDB, &err, "read-only");
    pl_store_close(f->st);
    f->st = NULL;
    after = dump(f->path);
    assert_string_equal(before, after);
    free(before);
    free(after);
    check_integrity(f->path);
}

static void test_store__open_missing_path(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    pl_store *st = (pl_store *)&err; /* must be reset to NULL */
    char *missing = tu_path(f->dir, "nothing.db");
    expect_fail(pl_store_open(&st, missing, 0, &err), PL_ENOTFOUND, &err, missing);
    assert_null(st);
    assert_int_equal(access(missing, F_OK), -1); /* not created */
    expect_fail(pl_store_open(&st, f->dir, 0, &err), PL_ENOTFOUND, &err, f->dir);
    free(missing);
}

/* A text file is not SQLite: refused, named, and not touched. */
static void test_store__open_refuses_a_file_that_is_not_sqlite(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    char *path = tu_path(f->dir, "notes.db");
    const char text[] = "site,method\nF01,flash-thermography\n"
                        "this is not a database, but it is long enough to look like one....";
    assert_int_equal(tu_write_file(path, text, sizeof text - 1), 0);
    pl_store *st = NULL;
    expect_fail(pl_store_open(&st, path, 0, &err), PL_ENOTSTORE, &err, path);
    assert_null(st);
    size_t len = 0;
    unsigned char *back = tu_read_file(path, &len);
    assert_int_equal(len, sizeof text - 1);
    assert_memory_equal(back, text, len);
    free(back);

    /* an empty file is an empty SQLite database, not a store */
    char *empty = tu_path(f->dir, "empty.db");
    assert_int_equal(tu_write_file(empty, "", 0), 0);
    expect_fail(pl_store_open(&st, empty, 0, &err), PL_ENOTSTORE, &err, empty);
    free(empty);
    free(path);
}

/* Another application's SQLite database is refused, named, and not touched. */
static void test_store__open_refuses_a_foreign_database(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    const char *ids[2] = { "PRAGMA application_id = 305419896", "PRAGMA application_id = 0" };
    for (int i = 0; i < 2; i++) {
        char name[32];
        snprintf(name, sizeof name, "other%d.db", i);
        char *path = tu_path(f->dir, name);
        sqlite3 *db = raw_open(path);
        raw_exec(db, ids[i]);
        raw_exec(db, "CREATE TABLE customer (id INTEGER PRIMARY KEY, name TEXT);"
                     "INSERT INTO customer (name) VALUES ('someone')");
        sqlite3_close(db);
        char *before = dump(path);
        pl_store *st = NULL;
        expect_fail(pl_store_open(&st, path, 0, &err), PL_ENOTSTORE, &err, path);
        assert_non_null(strstr(err.msg, "another application"));
        if (i == 0)
            assert_non_null(strstr(err.msg, "0x12345678"));
        assert_null(st);
        char *after = dump(path);
        assert_string_equal(before, after);
        free(before);
        free(after);
        free(path);
    }
}

/* A store written by a newer plyledger is refused with the exact advice. */
static void test_store__open_refuses_a_newer_schema(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    pl_store_close(f->st);
    f->st = NULL;
    sqlite3 *db = raw_open(f->path);
    char sql[64];
    snprintf(sql, sizeof sql, "PRAGMA user_version = %d", PL_STORE_SCHEMA_VERSION + 1);
    raw_exec(db, sql);
    sqlite3_close(db);
    pl_store *st = NULL;
    char want[1024];
    snprintf(want, sizeof want,
             "%s: store schema version %d is newer than this plyledger (%s, schema %d); "
             "use a newer plyledger", f->path, PL_STORE_SCHEMA_VERSION + 1, pl_version(),
             PL_STORE_SCHEMA_VERSION);
    for (unsigned flags = 0; flags <= PL_STORE_READONLY; flags++) {
        assert_int_equal(pl_store_open(&st, f->path, flags, &err), PL_EVERSION);
        assert_null(st);
        assert_string_equal(err.msg, want);
    }
    db = raw_open(f->path);
    assert_int_equal(raw_int(db, "PRAGMA user_version"), PL_STORE_SCHEMA_VERSION + 1);
    sqlite3_close(db);
}

/*
 * The migrations are numbered 1..PL_STORE_SCHEMA_VERSION, a fresh store is
 * made by running them from version 0 and records each one, and a stamped
 * store at version 0 is migrated on open to the same schema (refused when
 * read-only).
 */
static void test_store__migrates_from_version_zero(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    assert_int_equal(pl__migration_count, PL_STORE_SCHEMA_VERSION);
    for (int i = 0; i < pl__migration_count; i++) {
        assert_int_equal(pl__migrations[i].version, i + 1);
        char prefix[16];
        snprintf(prefix, sizeof prefix, "%04d_", i + 1);
        assert_memory_equal(pl__migrations[i].name, prefix, 5);
    }
    pl_store_close(f->st);
    f->st = NULL;
    sqlite3 *db = raw_open(f->path);
    char *history = raw_text(db, "SELECT value FROM store_info WHERE name = 'schema.0001'");
    assert_non_null(strstr(history, pl__migrations[0].name));
    assert_non_null(strstr(history, pl_version()));
    free(history);
    sqlite3_close(db);

    char *zero = tu_path(f->dir, "zero.db");
    db = raw_open(zero);
    char stamp[64];
    snprintf(stamp, sizeof stamp, "PRAGMA application_id = %d", PL_STORE_APPLICATION_ID);
    raw_exec(db, stamp);
    sqlite3_close(db);
    pl_store *st = NULL;
    expect_fail(pl_store_open(&st, zero, PL_STORE_READONLY, &err), PL_EVERSION, &err,
                "older");
    assert_null(st);
    TU_OK(pl_store_open(&st, zero, 0, &err));
    assert_int_equal(pl_store_schema_version(st), PL_STORE_SCHEMA_VERSION);
    pl_store_summary sum;
    TU_OK(pl_store_summarize(st, &sum, &err));
    assert_int_equal(strlen(sum.store_id), 32);
    add_airframe(st, "PLX-0001", "PLX-T1");
    pl_store_close(st);

    sqlite3 *a = raw_open(f->path), *b = raw_open(zero);
    const char *schema = "SELECT group_concat(type || ' ' || name || ' ' || coalesce(sql, ''), "
                         "char(10)) FROM (SELECT * FROM sqlite_master ORDER BY name)";
    char *sa = raw_text(a, schema), *sb = raw_text(b, schema);
    assert_true(strlen(sa) > 1000);
    assert_string_equal(sa, sb);
    free(sa);
    free(sb);
    assert_int_equal(raw_int(b, "PRAGMA user_version"), PL_STORE_SCHEMA_VERSION);
    history = raw_text(b, "SELECT value FROM store_info WHERE name = 'schema.0001'");
    assert_non_null(strstr(history, pl__migrations[0].name));
    free(history);
    sqlite3_close(a);
    sqlite3_close(b);
    check_integrity(zero);
    free(zero);
}

/* ---- append-only --------------------------------------------------------------------- */

/* One row in every table: through the API where it has a call, raw otherwise. */
static void fill_every_table(fixture *f)
{
    pl_err err = { 0 };
    pl_airframe af = airframe("PLX-0001", "PLX-T1");
    snprintf(af.operator_name, sizeof af.operator_name, "Operator A");
    TU_OK(pl_store_add_airframe(f->st, &af, NULL, &err));
    add_site(f->st, "PLX-0001", "F01");
    pl_id base = add_inspection(f->st, "PLX-0001", "F01", "baseline", "2016-01-10");
    pl_id next = add_inspection(f->st, "PLX-0001", "F01", "scheduled", "2022-03-01");
    pl_map *m = test_map(8, 6, 1, 1.0f);
    pl_map_record r = map_record(base);
    TU_OK(pl_store_add_map(f->st, &r, m, NULL, &err));
    m->data[0] += 1.0f;
    r.inspection_key = next;
    TU_OK(pl_store_add_map(f->st, &r, m, NULL, &err));
    pl_map_free(m);
    pl_store_close(f->st);
    f->st = NULL;

    sqlite3 *db = raw_open(f->path);
    raw_exec(db, "PRAGMA foreign_keys = ON;"
             "INSERT INTO criteria (name, revision, format_version, example_values,"
             " rule_count, content_json, content_sha256, recorded_at) VALUES ('growth', 'A', 1,"
             " 1, 1, '{}', '" "0123456789abcdef0123456789abcdef0123456789abcdef0123456789abcdef"
             "', 'now');"
             "INSERT INTO registration (baseline_map_id, current_map_id, method, status,"
             " software_version, recorded_at) VALUES (1, 2, 'phase', 'aligned', '0', 'now');"
             "INSERT INTO comparison (site_key, baseline_inspection, current_inspection, status,"
             " software_version, recorded_at) VALUES (1, 1, 2, 'done', '0', 'now');"
             "INSERT INTO indication (comparison_id, role, map_id, channel, label, area_px,"
             " area_mm2, equivalent_diameter_mm, area_halfmax_px, area_halfmax_mm2,"
             " equivalent_diameter_halfmax_mm, centroid_col, centroid_row, bbox_col0,"
             " bbox_row0, bbox_col1, bbox_row1, peak_contrast, peak_col, peak_row,"
             " mean_contrast, recorded_at) VALUES (1, 'current', 2, 0, 1, 4, 1.0, 1.1, 2, 0.5,"
             " 0.8, 2.0, 3.0, 1, 2, 3, 4, 0.5, 2, 3, 0.3, 'now');"
             "INSERT INTO indication_change (comparison_id, number, class, matched_by,"
             " baseline_labels, current_labels, sizing, area_exceeds, contrast_exceeds,"
             " reportable, exceeds, recorded_at) VALUES (1, 1, 'new', 'none', '[]', '[1]',"
             " 'threshold', 0, 0, 1, 1, 'now');"
             "INSERT INTO person (handle, name, role, recorded_at)"
             " VALUES ('a.engineer', 'A. Engineer', 'engineer', 'now');"
             "INSERT INTO person_key (person_id, public_key, valid_from, recorded_at) VALUES (1, '"
             "0123456789abcdef0123456789abcdef0123456789abcdef0123456789abcdef', '2020-01-01',"
             " 'now');"
             "INSERT INTO person_qualification (person_id, method, level, valid_from,"
             " valid_until, recorded_at) VALUES (1, 'flash-thermography', '2', '2020-01-01',"
             " '2025-01-01', 'now');"
             "INSERT INTO procedure_level (procedure, levels, recorded_at)"
             " VALUES ('NDT-1', '2 3', 'now');"
             "INSERT INTO interpretation (change_id, class, person_id, signed_on, signature,"
             " recorded_at) VALUES (1, 'relevant', 1, '2021-01-01', zeroblob(64), 'now');"
             "INSERT INTO disposition (comparison_id, changes_json, decision, person_id,"
             " signed_on, signature, recorded_at)"
             " VALUES (1, '[1]', 'accept', 1, '2021-01-01', zeroblob(64), 'now');"
             "INSERT INTO ledger (chain, seq, table_name, row_id, encoding, row_sha256,"
             " prev_link, link, recorded_at) VALUES (1, 99, 'airframe', 999, 1, '"
             "0123456789abcdef0123456789abcdef0123456789abcdef0123456789abcdef', '"
             "0123456789abcdef0123456789abcdef0123456789abcdef0123456789abcdef', '"
             "0123456789abcdef0123456789abcdef0123456789abcdef0123456789abcdef', 'now');"
             "INSERT INTO seal_key (public_key, origin, recorded_at) VALUES ('"
             "0123456789abcdef0123456789abcdef0123456789abcdef0123456789abcdef', 'own', 'now');"
             "INSERT INTO ledger_seal (ledger_id, key_id, seal) VALUES ((SELECT max(id) FROM"
             " ledger), 1, zeroblob(64))");
    sqlite3_close(db);
}

/*
 * Every table of the schema refuses UPDATE and DELETE through a trigger.
 * The table list comes from sqlite_master, so a table added without its
 * triggers (or without a row here to prove them) fails this test.
 */
static void test_store__every_table_refuses_update_and_delete(void **state)
{
    fixture *f = *state;
    fill_every_table(f);
    char *before = dump(f->path);
    sqlite3 *db = raw_open(f->path);
    sqlite3_stmt *tables;
    assert_int_equal(sqlite3_prepare_v2(db, "SELECT name FROM sqlite_master WHERE type = 'table'"
                                        " AND name NOT LIKE 'sqlite_%' ORDER BY name", -1,
                                        &tables, NULL), SQLITE_OK);
    int ntables = 0;
    while (sqlite3_step(tables) == SQLITE_ROW) {
        char *name = strdup((const char *)sqlite3_column_text(tables, 0));
        ntables++;
        char *sql = sqlite3_mprintf("SELECT count(*) FROM \"%w\"", name);
        if (raw_int(db, sql) == 0)
            fail_msg("table %s has no row: add one in fill_every_table()", name);
        sqlite3_free(sql);
        /* first column of the table, to write it back unchanged */
        sql = sqlite3_mprintf("SELECT name FROM pragma_table_info('%q') ORDER BY cid", name);
        char *col = raw_text(db, sql);
        sqlite3_free(sql);
        char *update = sqlite3_mprintf("UPDATE \"%w\" SET \"%w\" = \"%w\"", name, col, col);
        char *delete = sqlite3_mprintf("DELETE FROM \"%w\"", name);
        const char *what[2] = { update, delete };
        for (int k = 0; k < 2; k++) {
            int rc = sqlite3_exec(db, what[k], NULL, NULL, NULL);
            if (rc == SQLITE_OK)
                fail_msg("%s was allowed", what[k]);
            assert_int_equal(sqlite3_extended_errcode(db), SQLITE_CONSTRAINT_TRIGGER);
            assert_non_null(strstr(sqlite3_errmsg(db), "append-only"));
        }
        sqlite3_free(update);
        sqlite3_free(delete);
        free(col);
        free(name);
    }
    sqlite3_finalize(tables);
    sqlite3_close(db);
    assert_true(ntables >= 15);
    char *after = dump(f->path);
    assert_string_equal(before, after);
    free(before);
    free(after);
    check_integrity(f->path);
}

/* ---- corrections ----------------------------------------------------------------------- */

static void test_store__corrections_supersede_and_keep_history(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    add_airframe(f->st, "PLX-0001", "PLX-T1");
    add_site(f->st, "PLX-0001", "F01");
    add_site(f->st, "PLX-0001", "F02");
    pl_site first;
    TU_OK(pl_store_get_site(f->st, "PLX-0001", "F01", &first, &err));
    assert_int_equal(first.id, first.key);

    /* a site */
    pl_site s = first;
    snprintf(s.description, sizeof s.description, "crown skin, antenna doubler");
    s.pitch_u = 0.25;
    s.pitch_v = 0.25;
    s.width_px = 16;
    s.height_px = 12;
    for (int k = 0; k < 2; k++) {
        const char *reason = k ? "" : NULL;
        expect_fail(pl_store_correct_site(f->st, &s, reason, NULL, &err), PL_EINVAL, &err,
                    "reason");
    }
    pl_id sid = 0;
    TU_OK(pl_store_correct_site(f->st, &s, "wrong description and pitch in the plan", &sid, &err));
    pl_site now;
    TU_OK(pl_store_get_site(f->st, "PLX-0001", "F01", &now, &err));
    assert_int_equal(now.id, sid);
    assert_int_equal(now.key, first.key);
    assert_string_equal(now.description, "crown skin, antenna doubler");
    assert_true(now.pitch_u == 0.25 && now.width_px == 16);
    /* a correction of a correction keeps the key */
    s.thickness_mm = 3.0;
    TU_OK(pl_store_correct_site(f->st, &s, "thickness from the drawing", &sid, &err));
    TU_OK(pl_store_get_site(f->st, "PLX-0001", "F01", &now, &err));
    assert_int_equal(now.key, first.key);
    assert_true(now.thickness_mm == 3.0);
    /* an unknown site cannot be corrected */
    pl_site ghost = site("PLX-0001", "F99");
    expect_fail(pl_store_correct_site(f->st, &ghost, "x", NULL, &err), PL_ENOTFOUND, &err,
                "F99");

    /* an inspection */
    pl_id key = add_inspection(f->st, "PLX-0001", "F01", "unscheduled", "2022-03-01");
    pl_inspection in = inspection("PLX-0001", "F01", "unscheduled", "2022-03-02");
    in.aircraft_cycles = 4100;
    in.aircraft_hours = 20512.5;
    char params[] = "{\"frames\": 400}";
    in.parameters_json = params;
    expect_fail(pl_store_correct_inspection(f->st, key, &in, "", NULL, &err), PL_EINVAL, &err,
                "reason");
    pl_id iid = 0;
    TU_OK(pl_store_correct_inspection(f->st, key, &in, "date misread from the work card", &iid,
                                   &err));
    assert_true(iid != key);
    pl_inspection got;
    TU_OK(pl_store_get_inspection(f->st, key, &got, &err));
    assert_int_equal(got.id, iid);
    assert_int_equal(got.key, key);
    assert_string_equal(got.performed_on, "2022-03-02");
    assert_int_equal(got.aircraft_cycles, 4100);
    assert_true(got.aircraft_hours == 20512.5);
    assert_string_equal(got.parameters_json, "{\"frames\": 400}");
    assert_string_equal(got.software_version, pl_version());
    pl_inspection_clear(&got);
    assert_null(got.parameters_json);
    /* it may not move to another site */
    pl_inspection moved = inspection("PLX-0001", "F02", "unscheduled", "2022-03-02");
    expect_fail(pl_store_correct_inspection(f->st, key, &moved, "wrong site", NULL, &err),
                PL_EINVAL, &err, "another site");
    expect_fail(pl_store_correct_inspection(f->st, 9999, &in, "x", NULL, &err), PL_ENOTFOUND,
                &err, "9999");

    /* an airframe */
    pl_airframe af = airframe("PLX-0001", "PLX-T1B");
    TU_OK(pl_store_correct_airframe(f->st, &af, "type designation corrected", NULL, &err));
    pl_airframe a;
    TU_OK(pl_store_get_airframe(f->st, "PLX-0001", &a, &err));
    assert_string_equal(a.aircraft_type, "PLX-T1B");
    assert_true(a.id != a.key);

    pl_store_summary sum;
    TU_OK(pl_store_summarize(f->st, &sum, &err));
    assert_int_equal(sum.corrections, 4);
    assert_int_equal(sum.sites, 2);
    assert_int_equal(sum.airframes, 1);
    assert_int_equal(sum.inspections, 1);
    pl_store_close(f->st);
    f->st = NULL;

    /* history keeps every version, each correction with its reason */
    sqlite3 *db = raw_open(f->path);
    char sql[1024];
    snprintf(sql, sizeof sql, "SELECT count(*) FROM site WHERE coalesce(key, id) = %lld",
             (long long)first.key);
    int nsites = (int)raw_int(db, sql);
    assert_int_equal(nsites, 3);
    snprintf(sql, sizeof sql, "SELECT description FROM site WHERE id = %lld",
             (long long)first.id);
    char *old = raw_text(db, sql);
    assert_string_equal(old, "crown skin, F01");
    free(old);
    snprintf(sql, sizeof sql, "SELECT performed_on || ' ' || coalesce(reason, '-') FROM "
             "inspection WHERE coalesce(key, id) = %lld ORDER BY id", (long long)key);
    sqlite3_stmt *st;
    assert_int_equal(sqlite3_prepare_v2(db, sql, -1, &st, NULL), SQLITE_OK);
    assert_int_equal(sqlite3_step(st), SQLITE_ROW);
    assert_string_equal((const char *)sqlite3_column_text(st, 0), "2022-03-01 -");
    assert_int_equal(sqlite3_step(st), SQLITE_ROW);
    assert_string_equal((const char *)sqlite3_column_text(st, 0),
                        "2022-03-02 date misread from the work card");
    assert_int_equal(sqlite3_step(st), SQLITE_DONE);
    sqlite3_finalize(st);
    /* the schema itself refuses a correction that changes a site's code */
    snprintf(sql, sizeof sql,
             "INSERT INTO site (key, supersedes, reason, airframe_key, code, method, "
             "coord_system, coord_unit, origin_x, origin_y, origin_z, u_x, u_y, u_z, v_x, v_y, "
             "v_z, width_px, height_px, pitch_u_mm, pitch_v_mm, recorded_at) SELECT key, id, "
             "'rename', airframe_key, 'F77', method, coord_system, coord_unit, 0, 0, 0, 1, 0, "
             "0, 0, 1, 0, 0, 0, 1, 1, 'now' FROM site_current WHERE stable_key = %lld",
             (long long)first.key);
    assert_int_not_equal(sqlite3_exec(db, sql, NULL, NULL, NULL), SQLITE_OK);
    assert_int_equal(sqlite3_extended_errcode(db), SQLITE_CONSTRAINT_TRIGGER);
    sqlite3_close(db);
    check_integrity(f->path);
}

/* ---- uniqueness and validation ----------------------------------------------------------- */

static void test_store__refuses_duplicates(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    add_airframe(f->st, "PLX-0001", "PLX-T1");
    pl_airframe af = airframe("PLX-0001", "PLX-T2");
    char *before = dump(f->path);
    int rc = pl_store_add_airframe(f->st, &af, NULL, &err);
    assert_int_equal(rc, PL_EEXISTS);
    assert_string_equal(err.msg, "airframe PLX-0001: serial already registered");
    char *after = dump(f->path); /* the refusal wrote nothing */
    assert_string_equal(before, after);
    free(after);

    add_site(f->st, "PLX-0001", "F01");
    pl_site s = site("PLX-0001", "F01");
    rc = pl_store_add_site(f->st, &s, NULL, &err);
    assert_int_equal(rc, PL_EEXISTS);
    assert_string_equal(err.msg, "site F01 on PLX-0001: code already exists on this airframe");
    /* the same code on another airframe is a different site */
    add_airframe(f->st, "PLX-0002", "PLX-T1");
    add_site(f->st, "PLX-0002", "F01");

    pl_id base = add_inspection(f->st, "PLX-0001", "F01", "baseline", "2016-01-10");
    pl_inspection in = inspection("PLX-0001", "F01", "baseline", "2017-01-10");
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EEXISTS, &err,
                "already has a baseline");
    /* a scheduled inspection cannot be corrected into a second baseline... */
    pl_id sched = add_inspection(f->st, "PLX-0001", "F01", "scheduled", "2020-01-10");
    expect_fail(pl_store_correct_inspection(f->st, sched, &in, "x", NULL, &err), PL_EEXISTS,
                &err, "already has a baseline");
    /* ...but the baseline itself can be corrected */
    TU_OK(pl_store_correct_inspection(f->st, base, &in, "year typed wrong", NULL, &err));
    /* and a baseline on the other airframe's F01 is its own */
    add_inspection(f->st, "PLX-0002", "F01", "baseline", "2016-02-10");
    free(before);

    /* the triggers back the checks up for writers that bypass the library */
    pl_store_close(f->st);
    f->st = NULL;
    sqlite3 *db = raw_open(f->path);
    assert_int_not_equal(sqlite3_exec(db, "INSERT INTO airframe (serial, aircraft_type, "
                                      "recorded_at) VALUES ('PLX-0001', 'X', 'now')", NULL,
                                      NULL, NULL), SQLITE_OK);
    assert_non_null(strstr(sqlite3_errmsg(db), "already registered"));
    sqlite3_close(db);
    check_integrity(f->path);
}

/*
 * Serials and site codes keep to the key alphabet and compare without
 * regard to case (fault: "tst-0001" beside "TST-0001", and a serial with
 * U+2010 HYPHEN that reads like one with '-', were two airframes).
 */
static void test_store__keys_keep_to_one_alphabet_without_case(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    add_airframe(f->st, "PLX-0001", "PLX-T1");
    char *before = dump(f->path);
    static const struct {
        const char *key, *says;
    } bad[] = {
        { "plx-0001", "PLX-0001" },
        { "PLX\xe2\x80\x90" "0001", "U+2010 HYPHEN is not allowed; use '-'" },
        { "\xd0\xa0LX-0002", "CYRILLIC CAPITAL LETTER ER" },
        { "PLX-0002\xc2\xa0", "NO-BREAK SPACE" },
        { " PLX-0002", "spaces around it" },
        { "PLX 0002", "a space is not allowed" },
        { "PLX#0002", "'#' is not allowed" },
        { "-PLX-0002", "must start with a letter or a digit" },
        { "PLX\xff" "0002", "byte 0xff at position 4 is not valid UTF-8" },
        { "PLX-000000000000000000000000000002", "longer than 32" },
    };
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        pl_airframe af = airframe(bad[i].key, "PLX-T1");
        int rc = pl_store_add_airframe(f->st, &af, NULL, &err);
        if (rc != PL_EINVAL && rc != PL_EEXISTS)
            fail_msg("'%s': status %d", bad[i].key, rc);
        tu_assert_msg_has(err.msg, bad[i].says);
    }
    char *after = dump(f->path);
    assert_string_equal(before, after);
    free(before);
    free(after);
    TU_OK(pl_key_check("CR7-0107/B_2.a", "serial", &err));

    /* a look-up in another case finds the key as it was added */
    pl_airframe got;
    TU_OK(pl_store_get_airframe(f->st, "plx-0001", &got, &err));
    assert_string_equal(got.serial, "PLX-0001");
    add_site(f->st, "PLX-0001", "S01");
    pl_site s = site("PLX-0001", "s01");
    int rc = pl_store_add_site(f->st, &s, NULL, &err);
    if (rc != PL_EEXISTS && rc != PL_EINVAL)
        fail_msg("site s01 beside S01: status %d", rc);
    tu_assert_msg_has(err.msg, "S01");
}

static void test_store__validates_records_with_clear_messages(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    char *before = dump(f->path);
    pl_airframe af = airframe("PLX-0001", "PLX-T1");
    snprintf(af.manufactured, sizeof af.manufactured, "2021-02-29");
    int rc = pl_store_add_airframe(f->st, &af, NULL, &err);
    assert_int_equal(rc, PL_EINVAL);
    assert_string_equal(err.msg, "airframe PLX-0001: manufactured '2021-02-29' is not a calendar "
                        "date YYYY-MM-DD");
    af = airframe("", "PLX-T1");
    expect_fail(pl_store_add_airframe(f->st, &af, NULL, &err), PL_EINVAL, &err,
                "serial is required");
    af = airframe(" PLX-0001", "PLX-T1");
    expect_fail(pl_store_add_airframe(f->st, &af, NULL, &err), PL_EINVAL, &err, "spaces");
    af = airframe("PLX-0001", "PLX-T1");
    memset(af.notes, 'n', sizeof af.notes); /* not terminated */
    expect_fail(pl_store_add_airframe(f->st, &af, NULL, &err), PL_EINVAL, &err, "notes");
    af = airframe("PLX-0001", "PLX-T1");
    snprintf(af.operator_name, sizeof af.operator_name, "Operator A");
    snprintf(af.operator_since, sizeof af.operator_since, "2014-01-01");
    expect_fail(pl_store_add_airframe(f->st, &af, NULL, &err), PL_EINVAL, &err,
                "before the date of manufacture");
    af.manufactured[0] = '\0';
    af.operator_since[0] = '\0';
    expect_fail(pl_store_add_airframe(f->st, &af, NULL, &err), PL_EINVAL, &err,
                "needs operator_since");
    char *after = dump(f->path);
    assert_string_equal(before, after);
    free(after);

    pl_site s = site("PLX-0001", "S07");
    expect_fail(pl_store_add_site(f->st, &s, NULL, &err), PL_ENOTFOUND, &err, "PLX-0001");
    add_airframe(f->st, "PLX-0001", "PLX-T1");
    s.pitch_u = 0;
    rc = pl_store_add_site(f->st, &s, NULL, &err);
    assert_int_equal(rc, PL_EINVAL);
    assert_string_equal(err.msg, "site S07 on PLX-0001: pitch_u must be > 0 (got 0)");
    s = site("PLX-0001", "S07");
    s.pitch_v = NAN;
    expect_fail(pl_store_add_site(f->st, &s, NULL, &err), PL_EINVAL, &err, "pitch_v");
    s = site("PLX-0001", "S07");
    snprintf(s.method, sizeof s.method, "x-ray");
    expect_fail(pl_store_add_site(f->st, &s, NULL, &err), PL_EINVAL, &err, "x-ray");
    s = site("PLX-0001", "S07");
    s.map_frame.u[1] = 0.5; /* not a unit vector */
    expect_fail(pl_store_add_site(f->st, &s, NULL, &err), PL_EINVAL, &err, "site S07 on PLX-0001");
    s = site("PLX-0001", "S07");
    s.thickness_mm = -1;
    expect_fail(pl_store_add_site(f->st, &s, NULL, &err), PL_EINVAL, &err, "thickness_mm");
    s = site("", "S07");
    TU_OK(pl_site_check(&s, &err)); /* a plan's site has no airframe yet */
    expect_fail(pl_store_add_site(f->st, &s, NULL, &err), PL_EINVAL, &err, "airframe_serial");
    TU_OK(pl_method_check("eddy-current", &err));
    expect_fail(pl_method_check("thermography", &err), PL_EINVAL, &err, "thermography");
    TU_OK(pl_inspection_kind_check("post-repair", &err));
    expect_fail(pl_inspection_kind_check("annual", &err), PL_EINVAL, &err, "annual");

    add_site(f->st, "PLX-0001", "S07");
    pl_inspection in = inspection("PLX-0001", "S07", "scheduled", "2022-13-01");
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err,
                "inspection of site S07 on PLX-0001: performed_on '2022-13-01'");
    in = inspection("PLX-0001", "S07", "scheduled", "2022-03-01");
    in.inspector[0] = '\0';
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err,
                "inspector is required");
    in = inspection("PLX-0001", "S07", "annual", "2022-03-01");
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err, "annual");
    in = inspection("PLX-0001", "S07", "scheduled", "2022-03-01");
    char array[] = "[1, 2]", broken[] = "{\"a\": ";
    in.parameters_json = array;
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err,
                "parameters_json is not a JSON object");
    in.parameters_json = broken;
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err, "JSON");
    /* the inspector's level is a certification level (EN 4179, NAS 410,
     * ISO 9712), not free text */
    static const char *const not_levels[] = { "banana", "99", "Level 2", "II", "0" };
    for (size_t k = 0; k < sizeof not_levels / sizeof not_levels[0]; k++) {
        in = inspection("PLX-0001", "S07", "scheduled", "2022-03-01");
        snprintf(in.inspector_level, sizeof in.inspector_level, "%s", not_levels[k]);
        expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err,
                    "inspector level");
        tu_assert_msg_has(err.msg, not_levels[k]);
        tu_assert_msg_has(err.msg, "1-limited, 1, 2, 3");
    }
    in = inspection("PLX-0001", "S07", "scheduled", "2022-03-01");
    in.aircraft_hours = -3;
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err,
                "aircraft_hours");
    in = inspection("PLX-0001", "S09", "scheduled", "2022-03-01");
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_ENOTFOUND, &err, "S09");
    free(before);
    check_integrity(f->path);
}

/*
 * Numbers out of all plausibility are refused by the store itself, with
 * the bound named, whatever way they came in (fault: a pitch of 1e308 mm
 * or 1e30 flight cycles went in, and later broke rendering and
 * registration). One table holds the bounds (pl_bound_get()).
 */
static void test_store__numbers_keep_to_their_bounds(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    for (int b = 0; b < PL_BOUND_COUNT; b++) {
        const pl_bound_info *info = pl_bound_get((pl_bound)b);
        assert_non_null(info);
        assert_true(info->min < info->max);
        assert_true(info->name[0] && info->reason[0]);
        TU_OK(pl_bound_check((pl_bound)b, info->min, "x", &err));
        TU_OK(pl_bound_check((pl_bound)b, info->max, "x", &err));
        expect_fail(pl_bound_check((pl_bound)b, info->max * 1.5 + 1, "x", &err), PL_ERANGE, &err,
                    info->name);
        expect_fail(pl_bound_check((pl_bound)b, NAN, "x", &err), PL_EINVAL, &err, "finite");
    }
    assert_null(pl_bound_get(PL_BOUND_COUNT));
    expect_fail(pl_bound_check(PL_BOUND_CYCLES, 7.5, "--cycles", &err), PL_EINVAL, &err,
                "--cycles: 7.5 is not a whole number of flight cycles");
    expect_fail(pl_bound_check(PL_BOUND_PITCH, 1e308, "plan.csv line 2: column pitch_mm", &err),
                PL_ERANGE, &err, "plan.csv line 2: column pitch_mm: 1e+308 mm is outside the "
                "plausible pitch, 0.001 to 100 mm");
    expect_fail(pl_bound_check(PL_BOUND_CYCLES, 1e30, "c", &err), PL_ERANGE, &err,
                "c: 1e+30 is outside the plausible flight cycles, 0 to 1000000");

    add_airframe(f->st, "PLX-0001", "PLX-T1");
    char *before = dump(f->path);
    pl_site s = site("PLX-0001", "S07");
    s.pitch_u = s.pitch_v = 1e308;
    expect_fail(pl_store_add_site(f->st, &s, NULL, &err), PL_ERANGE, &err,
                "site S07 on PLX-0001: pitch_u: 1e+308 mm is outside the plausible pitch");
    s = site("PLX-0001", "S07");
    s.thickness_mm = 1e9;
    expect_fail(pl_store_add_site(f->st, &s, NULL, &err), PL_ERANGE, &err, "thickness");
    s = site("PLX-0001", "S07");
    s.diffusivity_mm2_s = 1e-9;
    expect_fail(pl_store_add_site(f->st, &s, NULL, &err), PL_ERANGE, &err, "diffusivity");
    s = site("PLX-0001", "S07");
    s.map_frame.origin[1] = -1e300;
    expect_fail(pl_store_add_site(f->st, &s, NULL, &err), PL_ERANGE, &err, "origin_y");
    add_site(f->st, "PLX-0001", "S08");
    char *with_site = dump(f->path);
    pl_inspection in = inspection("PLX-0001", "S08", "baseline", "2022-03-01");
    in.aircraft_hours = 1e30;
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_ERANGE, &err,
                "aircraft_hours: 1e+30 h is outside the plausible flight hours");
    in = inspection("PLX-0001", "S08", "baseline", "2022-03-01");
    in.aircraft_cycles = INT64_MAX;
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_ERANGE, &err,
                "aircraft_cycles");
    in.aircraft_cycles = 1000000;
    TU_OK(pl_store_add_inspection(f->st, &in, NULL, &err));
    /* a map whose own pitch or placement is out of bounds is refused before it is encoded */
    pl_map *m = test_map(8, 6, 1, 0.0f);
    pl_prepared_map *p = NULL;
    m->pitch_u = 1e308;
    expect_fail(pl_prepared_map_new(&p, m, &err), PL_ERANGE, &err, "pitch along u");
    assert_null(p);
    m->pitch_u = 0.5;
    m->placement.origin[2] = 1e7;
    pl_map_record r = map_record(1);
    expect_fail(pl_store_add_map(f->st, &r, m, NULL, &err), PL_ERANGE, &err,
                "placement origin z");
    pl_map_free(m);
    char *after = dump(f->path);
    assert_string_not_equal(with_site, after); /* the good inspection went in */
    assert_string_not_equal(before, with_site);
    free(before);
    free(with_site);
    free(after);
    check_integrity(f->path);
}

/*
 * Calendar dates: the library's check agrees with SQLite's date() calendar,
 * where date(d, '+0 days') gives d back only for a real date
 * (https://www.sqlite.org/lang_datefunc.html), across leap-year rules.
 */
/* ---- chronology -------------------------------------------------------------- */

static pl_inspection flown(const char *code, const char *kind, const char *date, double hours,
                           int64_t cycles)
{
    pl_inspection in = inspection("CHR-0001", code, kind, date);
    in.aircraft_hours = hours;
    in.aircraft_cycles = cycles;
    return in;
}

/*
 * Nothing a real inspection could not be: no inspection before the airframe
 * was built or after today (which the caller gives: the library reads no
 * clock for it), no scheduled inspection without the site's baseline or
 * before it, no flight hours or cycles that go back against the airframe's
 * other inspections unless the reason is recorded, no operator change after
 * today. Each refusal leaves the store as it was.
 */
static void test_store__refuses_inspections_out_of_chronology(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    expect_fail(pl_store_set_today(f->st, "2026-02-30", &err), PL_EINVAL, &err, "2026-02-30");
    TU_OK(pl_store_set_today(f->st, "2026-12-03", &err));
    add_airframe(f->st, "CHR-0001", "TX-1"); /* manufactured 2015-06-30 */
    add_site(f->st, "CHR-0001", "F01");
    add_site(f->st, "CHR-0001", "F02");
    add_site(f->st, "CHR-0001", "F03");
    char *before = dump(f->path);
    pl_inspection in = flown("F01", "baseline", "2015-06-01", 3, 2);
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err,
                "before the airframe's date of manufacture 2015-06-30");
    in = flown("F01", "scheduled", "2016-01-10", 300, 200);
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err,
                "record the baseline first");
    char *after = dump(f->path);
    assert_string_equal(before, after);
    free(after);
    free(before);

    in = flown("F01", "baseline", "2015-07-10", 12.5, 8);
    TU_OK(pl_store_add_inspection(f->st, &in, NULL, &err));
    in = flown("F01", "scheduled", "2015-07-01", 10, 7);
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err,
                "before the site's baseline");
    tu_assert_msg_has(err.msg, "2015-07-10");
    in = flown("F01", "scheduled", "2027-01-01", 20000, 14000);
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err,
                "after today (2026-12-03)");
    in = flown("F01", "scheduled", "2021-03-01", 9000.5, 6100);
    TU_OK(pl_store_add_inspection(f->st, &in, NULL, &err));
    in = flown("F02", "baseline", "2015-07-11", 12.5, 8);
    TU_OK(pl_store_add_inspection(f->st, &in, NULL, &err));

    /* hours and cycles of the airframe: across its sites, by date */
    before = dump(f->path);
    in = flown("F02", "unscheduled", "2022-05-01", 8000, 7000);
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err,
                "flight hours 8000 are fewer than the 9000.5");
    tu_assert_msg_has(err.msg, "site F01");
    in = flown("F02", "unscheduled", "2020-05-01", 9500, 5000);
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err,
                "flight hours 9500 are more than the 9000.5");
    in = flown("F02", "unscheduled", "2022-05-01", 9800, 6000);
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err,
                "flight cycles 6000 are fewer than the 6100");
    /* nor a scheduled inspection on a site without a baseline of its own */
    in = flown("F03", "scheduled", "2022-05-01", 9800, 6600);
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err,
                "site has no baseline inspection: record the baseline first");
    after = dump(f->path);
    assert_string_equal(before, after);
    free(after);
    free(before);

    /* a documented correction of the aircraft's records lets hours go down,
     * and the reason stays with the inspection */
    in = flown("F02", "unscheduled", "2022-05-01", 8000, 6000);
    snprintf(in.hours_reason, sizeof in.hours_reason,
             "aircraft log corrected after the 2021 records audit (memo TL-114)");
    pl_id key = 0;
    TU_OK(pl_store_add_inspection(f->st, &in, &key, &err));
    pl_inspection got;
    TU_OK(pl_store_get_inspection(f->st, key, &got, &err));
    assert_string_equal(got.hours_reason, in.hours_reason);
    assert_true(got.aircraft_hours == 8000);
    pl_inspection_clear(&got);

    /* an unscheduled inspection needs no baseline, but none comes before one */
    in = flown("F03", "unscheduled", "2023-02-01", 11000, 7400);
    TU_OK(pl_store_add_inspection(f->st, &in, NULL, &err));
    in = flown("F03", "baseline", "2023-03-01", 11100, 7450);
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err,
                "would come before the site's baseline");
    tu_assert_msg_has(err.msg, "2023-02-01");

    /* operators and airframes: nothing after today */
    expect_fail(pl_store_add_operator(f->st, "CHR-0001", "Operator Z", "2099-01-01", &err),
                PL_EINVAL, &err, "after today (2026-12-03)");
    pl_airframe af = airframe("CHR-0002", "TX-1");
    snprintf(af.manufactured, sizeof af.manufactured, "2027-05-01");
    expect_fail(pl_store_add_airframe(f->st, &af, NULL, &err), PL_EINVAL, &err,
                "after today (2026-12-03)");
    af = airframe("CHR-0002", "TX-1");
    snprintf(af.operator_name, sizeof af.operator_name, "Operator Y");
    snprintf(af.operator_since, sizeof af.operator_since, "2030-01-01");
    expect_fail(pl_store_add_airframe(f->st, &af, NULL, &err), PL_EINVAL, &err,
                "after today (2026-12-03)");
    TU_OK(pl_store_add_operator(f->st, "CHR-0001", "Operator Z", "2026-12-03", &err));
    check_integrity(f->path);
}

/*
 * A correction is held to the same chronology as a new record, as the site
 * and the airframe stand after it: the only baseline cannot become a
 * scheduled inspection, a baseline cannot move after the inspections
 * compared with it, and a correction that changes nothing is no correction.
 */
static void test_store__corrections_keep_the_record_sound(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    TU_OK(pl_store_set_today(f->st, "2026-12-03", &err));
    add_airframe(f->st, "CHR-0001", "TX-1");
    add_site(f->st, "CHR-0001", "F01");
    add_site(f->st, "CHR-0001", "F02");
    pl_id only = 0, base = 0, next = 0;
    pl_inspection in = flown("F02", "baseline", "2015-08-01", 20, 11);
    TU_OK(pl_store_add_inspection(f->st, &in, &only, &err));
    in = flown("F01", "baseline", "2015-07-10", 12.5, 8);
    TU_OK(pl_store_add_inspection(f->st, &in, &base, &err));
    in = flown("F01", "scheduled", "2021-03-01", 9000, 6100);
    TU_OK(pl_store_add_inspection(f->st, &in, &next, &err));
    char *before = dump(f->path);

    pl_inspection got;
    TU_OK(pl_store_get_inspection(f->st, only, &got, &err));
    expect_fail(pl_store_correct_inspection(f->st, only, &got, "same again", NULL, &err),
                PL_EINVAL, &err, "nothing to correct");
    snprintf(got.kind, sizeof got.kind, "scheduled");
    expect_fail(pl_store_correct_inspection(f->st, only, &got, "kind mistyped", NULL, &err),
                PL_EINVAL, &err, "without a baseline");
    tu_assert_msg_has(err.msg, "baseline");
    pl_inspection_clear(&got);

    TU_OK(pl_store_get_inspection(f->st, base, &got, &err));
    snprintf(got.performed_on, sizeof got.performed_on, "2021-04-01");
    expect_fail(pl_store_correct_inspection(f->st, base, &got, "date misread", NULL, &err),
                PL_EINVAL, &err, "would come before the site's baseline");
    tu_assert_msg_has(err.msg, "2021-03-01");
    snprintf(got.performed_on, sizeof got.performed_on, "2015-07-10");
    snprintf(got.kind, sizeof got.kind, "unscheduled");
    expect_fail(pl_store_correct_inspection(f->st, base, &got, "not a baseline", NULL, &err),
                PL_EINVAL, &err, "without a baseline");
    pl_inspection_clear(&got);

    TU_OK(pl_store_get_inspection(f->st, next, &got, &err));
    snprintf(got.performed_on, sizeof got.performed_on, "2015-07-01");
    expect_fail(pl_store_correct_inspection(f->st, next, &got, "date misread", NULL, &err),
                PL_EINVAL, &err, "before the site's baseline");
    snprintf(got.performed_on, sizeof got.performed_on, "2027-03-01");
    expect_fail(pl_store_correct_inspection(f->st, next, &got, "date misread", NULL, &err),
                PL_EINVAL, &err, "after today");
    snprintf(got.performed_on, sizeof got.performed_on, "2021-03-01");
    got.aircraft_hours = 10;
    expect_fail(pl_store_correct_inspection(f->st, next, &got, "hours misread", NULL, &err),
                PL_EINVAL, &err, "flight hours 10 are fewer than the 20");
    pl_inspection_clear(&got);

    pl_airframe af;
    TU_OK(pl_store_get_airframe(f->st, "CHR-0001", &af, &err));
    expect_fail(pl_store_correct_airframe(f->st, &af, "same again", NULL, &err), PL_EINVAL,
                &err, "nothing to correct");
    snprintf(af.manufactured, sizeof af.manufactured, "2015-07-20");
    expect_fail(pl_store_correct_airframe(f->st, &af, "date misread", NULL, &err), PL_EINVAL,
                &err, "2015-07-10");
    snprintf(af.manufactured, sizeof af.manufactured, "2027-01-01");
    expect_fail(pl_store_correct_airframe(f->st, &af, "date misread", NULL, &err), PL_EINVAL,
                &err, "after today");
    pl_site s;
    TU_OK(pl_store_get_site(f->st, "CHR-0001", "F01", &s, &err));
    expect_fail(pl_store_correct_site(f->st, &s, "same again", NULL, &err), PL_EINVAL, &err,
                "nothing to correct");
    char *after = dump(f->path);
    assert_string_equal(before, after);
    free(after);
    free(before);

    /* what a correction may do: hours with their reason, a date in order */
    TU_OK(pl_store_get_inspection(f->st, next, &got, &err));
    got.aircraft_hours = 10;
    snprintf(got.hours_reason, sizeof got.hours_reason, "log page transcribed wrongly");
    TU_OK(pl_store_correct_inspection(f->st, next, &got, "hours from the corrected log", NULL,
                                      &err));
    pl_inspection_clear(&got);
    TU_OK(pl_store_get_inspection(f->st, base, &got, &err));
    snprintf(got.performed_on, sizeof got.performed_on, "2015-07-12");
    TU_OK(pl_store_correct_inspection(f->st, base, &got, "date misread", NULL, &err));
    pl_inspection_clear(&got);
    check_integrity(f->path);
}

/*
 * Simulated data are marked as such and never stand as the baseline of
 * real data: not for a real scheduled inspection, not for a registration of
 * a real map; simulated inspections are counted apart.
 */
static void test_store__simulated_never_serves_as_a_real_baseline(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    add_airframe(f->st, "SIM-0001", "TX-1");
    add_site(f->st, "SIM-0001", "F01");
    pl_inspection in = inspection("SIM-0001", "F01", "baseline", "2016-01-10");
    in.simulated = 1;
    pl_id base = 0, sim = 0, real = 0;
    TU_OK(pl_store_add_inspection(f->st, &in, &base, &err));
    pl_inspection got;
    TU_OK(pl_store_get_inspection(f->st, base, &got, &err));
    assert_int_equal(got.simulated, 1);
    pl_inspection_clear(&got);
    in = inspection("SIM-0001", "F01", "scheduled", "2021-01-10");
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err,
                "is simulated and cannot be the baseline of a real inspection");
    in.simulated = 1;
    TU_OK(pl_store_add_inspection(f->st, &in, &sim, &err));
    in = inspection("SIM-0001", "F01", "unscheduled", "2022-01-10");
    TU_OK(pl_store_add_inspection(f->st, &in, &real, &err)); /* rests on no baseline */
    in.simulated = 7;
    expect_fail(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EINVAL, &err, "simulated");

    pl_map *m = test_map(8, 6, 1, 1.0f);
    pl_map_record r = map_record(base);
    pl_id mb = 0, ms = 0, mr = 0;
    TU_OK(pl_store_add_map(f->st, &r, m, &mb, &err));
    m->data[0] += 1.0f;
    r.inspection_key = sim;
    TU_OK(pl_store_add_map(f->st, &r, m, &ms, &err));
    m->data[0] += 1.0f;
    r.inspection_key = real;
    TU_OK(pl_store_add_map(f->st, &r, m, &mr, &err));
    pl_map_free(m);
    pl_registration_record g;
    memset(&g, 0, sizeof g);
    g.baseline_map_id = mb;
    g.current_map_id = mr;
    snprintf(g.method, sizeof g.method, "phase-correlation");
    snprintf(g.status, sizeof g.status, "aligned");
    g.scale = 1.0;
    g.ncc = 0.93;
    g.peak_sidelobe = 41.0;
    g.overlap_fraction = 0.9;
    g.overlap_mm2 = 10.8;
    char *before = dump(f->path);
    expect_fail(pl_store_add_registration(f->st, &g, NULL, &err), PL_EINVAL, &err,
                "simulated");
    tu_assert_msg_has(err.msg, "real");
    char *after = dump(f->path);
    assert_string_equal(before, after);
    free(after);
    free(before);
    g.current_map_id = ms; /* simulated onto simulated */
    TU_OK(pl_store_add_registration(f->st, &g, NULL, &err));
    pl_comparison_record c;
    memset(&c, 0, sizeof c);
    c.baseline_inspection = base;
    c.current_inspection = real;
    snprintf(c.status, sizeof c.status, "not-done");
    snprintf(c.not_done_reason, sizeof c.not_done_reason, "not registered");
    c.uncompared_mm2 = c.uncompared_fraction = NAN;
    expect_fail(pl_store_add_comparison(f->st, &c, NULL, &err), PL_EINVAL, &err,
                "is simulated and cannot be the baseline");
    c.current_inspection = sim;
    TU_OK(pl_store_add_comparison(f->st, &c, NULL, &err));

    /* nor may a correction make a real scheduled inspection rest on a
     * simulated baseline */
    TU_OK(pl_store_get_inspection(f->st, sim, &got, &err));
    got.simulated = 0;
    expect_fail(pl_store_correct_inspection(f->st, sim, &got, "was real", NULL, &err),
                PL_EINVAL, &err, "simulated");
    pl_inspection_clear(&got);

    pl_store_summary sum;
    TU_OK(pl_store_summarize(f->st, &sum, &err));
    assert_int_equal(sum.inspections, 3);
    assert_int_equal(sum.simulated_inspections, 2);
    check_integrity(f->path);
}

static void test_store__dates_agree_with_sqlite_calendar(void **state)
{
    (void)state;
    sqlite3 *db = NULL;
    assert_int_equal(sqlite3_open(":memory:", &db), SQLITE_OK);
    sqlite3_stmt *st;
    assert_int_equal(sqlite3_prepare_v2(db, "SELECT date(?1, '+0 days') IS ?1", -1, &st, NULL),
                     SQLITE_OK);
    static const int years[] = { 1, 1600, 1700, 1899, 1900, 1999, 2000, 2001, 2004, 2023,
                                 2024, 2100, 2400, 9999 };
    int valid = 0;
    for (size_t y = 0; y < sizeof years / sizeof years[0]; y++)
        for (int m = 0; m <= 13; m++)
            for (int d = 0; d <= 32; d++) {
                char s[16];
                snprintf(s, sizeof s, "%04d-%02d-%02d", years[y], m, d);
                sqlite3_reset(st);
                sqlite3_bind_text(st, 1, s, -1, SQLITE_TRANSIENT);
                assert_int_equal(sqlite3_step(st), SQLITE_ROW);
                int ref = sqlite3_column_int(st, 0);
                if (pl_store__valid_date(s) != ref)
                    fail_msg("%s: library %d, SQLite %d", s, pl_store__valid_date(s), ref);
                valid += ref;
            }
    /* 14 years, 5 of them leap (1600, 2000, 2004, 2024, 2400) by the Gregorian
     * rule: every fourth year, centuries only when divisible by 400 (common
     * practice) */
    assert_int_equal(valid, 14 * 365 + 5);
    sqlite3_finalize(st);
    sqlite3_close(db);
    const char *bad[] = { "2021-1-01", "2021-01-1", "20210101", "2021/01/01", " 2021-01-01",
                          "2021-01-01 ", "0000-01-01", "", "2021-01-0a" };
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++)
        assert_false(pl_store__valid_date(bad[i]));
    assert_false(pl_store__valid_date(NULL));
}

/*
 * SQLite's refusals become the right status codes. Each case is a real
 * failure of a raw statement on a store, so the schema's CHECKs and
 * triggers are exercised at the same time.
 */
static void test_store__sqlite_refusals_map_to_status_codes(void **state)
{
    fixture *f = *state;
    add_airframe(f->st, "PLX-0001", "PLX-T1");
    add_site(f->st, "PLX-0001", "F01");
    pl_store_close(f->st);
    f->st = NULL;
    sqlite3 *db = raw_open(f->path);
    raw_exec(db, "PRAGMA foreign_keys = ON");
    const struct {
        const char *sql;
        int xcode;
        int status;
    } cases[] = {
        { "UPDATE airframe SET notes = 'x'", SQLITE_CONSTRAINT_TRIGGER, PL_EREADONLY },
        { "DELETE FROM store_info", SQLITE_CONSTRAINT_TRIGGER, PL_EREADONLY },
        { "INSERT INTO airframe (serial, aircraft_type, recorded_at) "
          "VALUES ('PLX-0001', 'X', 'now')", SQLITE_CONSTRAINT_TRIGGER, PL_EEXISTS },
        { "INSERT INTO store_info (name, value) VALUES ('store_id', 'x')",
          SQLITE_CONSTRAINT_PRIMARYKEY, PL_EEXISTS },
        { "INSERT INTO airframe (key, supersedes, reason, serial, aircraft_type, recorded_at) "
          "VALUES (1, 1, 'rename', 'PLX-0009', 'PLX-T1', 'now')",
          SQLITE_CONSTRAINT_TRIGGER, PL_EINVAL },
        { "INSERT INTO airframe (key, supersedes, serial, aircraft_type, recorded_at) "
          "VALUES (1, 1, 'PLX-0001', 'PLX-T1', 'now')", SQLITE_CONSTRAINT_CHECK, PL_EINVAL },
        { "INSERT INTO airframe_operator (airframe_key, operator_name, since, recorded_at) "
          "VALUES (1, 'Operator A', '2021-02-30', 'now')", SQLITE_CONSTRAINT_CHECK, PL_EINVAL },
        { "INSERT INTO airframe_operator (airframe_key, operator_name, since, recorded_at) "
          "VALUES (999, 'Operator A', '2021-02-28', 'now')",
          SQLITE_CONSTRAINT_FOREIGNKEY, PL_ENOTFOUND },
        { "INSERT INTO airframe (serial, recorded_at) VALUES ('PLX-0002', 'now')",
          SQLITE_CONSTRAINT_NOTNULL, PL_EINVAL },
        { "SELECT * FROM no_such_table", SQLITE_ERROR, PL_EDB },
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        if (sqlite3_exec(db, cases[i].sql, NULL, NULL, NULL) == SQLITE_OK)
            fail_msg("%s was allowed", cases[i].sql);
        int x = sqlite3_extended_errcode(db);
        if (x != cases[i].xcode)
            fail_msg("%s: SQLite code %d (%s), expected %d", cases[i].sql, x,
                     sqlite3_errmsg(db), cases[i].xcode);
        assert_int_equal(pl_store__status(x, sqlite3_errmsg(db)), cases[i].status);
    }
    sqlite3_close(db);
    assert_int_equal(pl_store__status(SQLITE_NOTADB, "file is not a database"), PL_ENOTSTORE);
    assert_int_equal(pl_store__status(SQLITE_IOERR_READ, "disk I/O error"), PL_EIO);
    assert_int_equal(pl_store__status(SQLITE_NOMEM, "out of memory"), PL_ENOMEM);
    assert_int_equal(pl_store__status(SQLITE_BUSY, "database is locked"), PL_EBUSY);
    assert_int_equal(pl_store__status(SQLITE_BUSY_SNAPSHOT, "database is locked"), PL_EBUSY);
    assert_int_equal(pl_store__status(SQLITE_LOCKED, "database table is locked"), PL_EBUSY);
    assert_int_equal(pl_store__status(SQLITE_READONLY, "attempt to write a readonly database"),
                     PL_EDB);
    check_integrity(f->path);
}

/* ---- maps ------------------------------------------------------------------------------ */

static void test_store__map_round_trip_is_bit_exact(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    add_airframe(f->st, "PLX-0001", "PLX-T1");
    add_site(f->st, "PLX-0001", "F01");
    pl_id key = add_inspection(f->st, "PLX-0001", "F01", "baseline", "2016-01-10");
    pl_map *m = test_map(8, 6, 2, -3.5f);
    pl_map_record r = map_record(key);
    char params[] = "{\"order\": 7}";
    r.parameters_json = params;
    pl_id id = 0;
    TU_OK(pl_store_add_map(f->st, &r, m, &id, &err));
    assert_true(id > 0);

    /* the same content again is refused, even under another name */
    snprintf(r.source, sizeof r.source, "copy.npy");
    char *before = dump(f->path);
    expect_fail(pl_store_add_map(f->st, &r, m, NULL, &err), PL_EEXISTS, &err,
                "already stored as map");
    char *after = dump(f->path);
    assert_string_equal(before, after);
    free(before);
    free(after);

    pl_map *back = NULL;
    pl_map_record rec;
    TU_OK(pl_store_load_map(f->st, id, &back, &rec, &err));
    assert_int_equal(back->width, 8);
    assert_int_equal(back->height, 6);
    assert_int_equal(back->nchannels, 2);
    assert_string_equal(back->channels[0].label, "");
    assert_string_equal(back->channels[1].label, "t=0.50 s");
    assert_string_equal(back->channels[1].quantity, "log-derivative-2");
    size_t n = 8 * 6 * 2;
    for (size_t i = 0; i < n; i++) {
        if (isnan(m->data[i]))
            assert_true(isnan(back->data[i]));
        else
            assert_memory_equal(&back->data[i], &m->data[i], 4);
    }
    unsigned char digest[PL_SHA256_SIZE];
    char hex[PL_SHA256_HEX_SIZE];
    pl_map_digest(digest, back);
    pl_sha256_hex(hex, digest);
    assert_string_equal(rec.sha256, hex);
    assert_true(rec.pitch_u == 0.5 && rec.pitch_v == 0.5);
    assert_true(back->pitch_u == 0.5);
    assert_true(rec.placement.origin[0] == 5200 && rec.placement.u[0] == 1);
    assert_string_equal(rec.placement.system, "STA/BL/WL");
    assert_string_equal(rec.source, "F01.npy"); /* base name only */
    assert_string_equal(rec.origin, "import-npy");
    assert_string_equal(rec.software_version, pl_version());
    assert_string_equal(rec.parameters_json, "{\"order\": 7}");
    assert_ptr_equal(rec.channels, back->channels);
    assert_string_equal(rec.channels[1].quantity, "log-derivative-2");
    assert_string_equal(rec.channels[0].unit, "K");
    assert_true(rec.stored_bytes > 0);
    assert_int_equal(rec.inspection_key, key);
    free(rec.parameters_json);
    pl_map_free(back);

    expect_fail(pl_store_load_map(f->st, 4242, &back, NULL, &err), PL_ENOTFOUND, &err, "4242");
    assert_null(back);

    /* a second, different map of the same inspection; listing keeps order */
    m->data[10] = 99.0f;
    pl_id id2 = 0;
    TU_OK(pl_store_add_map(f->st, &r, m, &id2, &err));
    assert_true(id2 > id);
    pl_store_close(f->st);
    f->st = NULL;

    /* Python's sqlite3, zlib, hashlib and NumPy read the stored blob: it is
     * zlib of little-endian float32, its SHA-256 is the recorded one, the
     * values are the map's and NaN is the quiet NaN 0x7fc00000 (map.h). */
    char *raw = tu_path(f->dir, "map.f32");
    pl_store *st = NULL;
    TU_OK(pl_store_open(&st, f->path, PL_STORE_READONLY, &err));
    TU_OK(pl_store_load_map(st, id2, &back, NULL, &err));
    assert_true(back->data[10] == 99.0f);
    pl_store_close(st);
    tu_write_f4(raw, m->data, (size_t)m->width * m->height * m->nchannels);
    char ids[32];
    snprintf(ids, sizeof ids, "%lld", (long long)id2);
    assert_int_equal(tu_python("store_map_ref.py", f->path, ids, raw, "8", "6", "2", NULL), 0);
    pl_map_free(back);
    pl_map_free(m);
    free(raw);
    check_integrity(f->path);
}

static int count_maps(void *ud, const pl_map_record *rec)
{
    int *n = ud;
    assert_non_null(rec->channels);
    assert_int_equal(rec->nchannels, 1);
    assert_string_equal(rec->channels[0].quantity, "temperature-contrast");
    assert_int_equal(strlen(rec->sha256), 64);
    (*n)++;
    return 0;
}

/*
 * A stored blob whose content no longer matches its digest is reported, not
 * returned. The triggers forbid altering a map, so the damage is done to a
 * copy of the store with the map trigger dropped.
 */
static void test_store__load_map_detects_tampering(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    add_airframe(f->st, "PLX-0001", "PLX-T1");
    add_site(f->st, "PLX-0001", "F01");
    pl_id key = add_inspection(f->st, "PLX-0001", "F01", "baseline", "2016-01-10");
    pl_map *m = test_map(8, 6, 1, 2.0f);
    pl_map_record r = map_record(key);
    pl_id id = 0;
    TU_OK(pl_store_add_map(f->st, &r, m, &id, &err));
    int nmaps = 0;
    TU_OK(pl_store_list_maps(f->st, key, count_maps, &nmaps, &err));
    assert_int_equal(nmaps, 1);
    pl_store_close(f->st);
    f->st = NULL;

    /* another valid zlib stream of the same size: decodes, digest differs */
    m->data[0] += 1.0f;
    unsigned char *other = NULL;
    size_t other_len = 0;
    unsigned char digest[PL_SHA256_SIZE];
    TU_OK(pl_map_encode(&other, &other_len, digest, m, &err));

    const char *damage[3] = { "sha256", "data", "corrupt" };
    const int expect[3] = { PL_ENOMATCH, PL_ENOMATCH, PL_EFORMAT };
    for (int k = 0; k < 3; k++) {
        char name[32];
        snprintf(name, sizeof name, "copy%d.db", k);
        char *copy = tu_path(f->dir, name);
        size_t len = 0;
        unsigned char *bytes = tu_read_file(f->path, &len);
        assert_non_null(bytes);
        assert_int_equal(tu_write_file(copy, bytes, len), 0);
        free(bytes);
        sqlite3 *db = raw_open(copy);
        /* the copy is still protected */
        assert_int_not_equal(sqlite3_exec(db, "UPDATE map SET sha256 = sha256", NULL, NULL,
                                          NULL), SQLITE_OK);
        raw_exec(db, "DROP TRIGGER map_no_update");
        sqlite3_stmt *st;
        if (k == 0) {
            raw_exec(db, "UPDATE map SET sha256 = 'e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b9"
                         "34ca495991b7852b855'");
        } else if (k == 1) {
            assert_int_equal(sqlite3_prepare_v2(db, "UPDATE map SET data = ?1", -1, &st, NULL),
                             SQLITE_OK);
            sqlite3_bind_blob(st, 1, other, (int)other_len, SQLITE_STATIC);
            assert_int_equal(sqlite3_step(st), SQLITE_DONE);
            sqlite3_finalize(st);
        } else {
            /* flip bytes inside the deflate stream */
            assert_int_equal(sqlite3_prepare_v2(db, "SELECT data FROM map", -1, &st, NULL),
                             SQLITE_OK);
            assert_int_equal(sqlite3_step(st), SQLITE_ROW);
            int n = sqlite3_column_bytes(st, 0);
            assert_true(n > 16);
            unsigned char *bad = malloc((size_t)n);
            assert_non_null(bad);
            memcpy(bad, sqlite3_column_blob(st, 0), (size_t)n);
            sqlite3_finalize(st);
            for (int i = 6; i < 14; i++)
                bad[i] ^= 0x5a;
            assert_int_equal(sqlite3_prepare_v2(db, "UPDATE map SET data = ?1", -1, &st, NULL),
                             SQLITE_OK);
            sqlite3_bind_blob(st, 1, bad, n, SQLITE_TRANSIENT);
            assert_int_equal(sqlite3_step(st), SQLITE_DONE);
            sqlite3_finalize(st);
            free(bad);
        }
        sqlite3_close(db);
        pl_store *cs = NULL;
        pl_map *back = (pl_map *)&err;
        TU_OK(pl_store_open(&cs, copy, PL_STORE_READONLY, &err));
        int rc = pl_store_load_map(cs, id, &back, NULL, &err);
        if (rc != expect[k])
            fail_msg("%s: expected %d, got %d (%s)", damage[k], expect[k], rc, err.msg);
        assert_null(back);
        assert_non_null(strstr(err.msg, copy));
        pl_store_close(cs);
        free(copy);
    }
    free(other);
    pl_map_free(m);
}

/* A map that does not fit its site is refused with nothing written. */
static void test_store__map_must_fit_its_site(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    add_airframe(f->st, "PLX-0001", "PLX-T1");
    add_site(f->st, "PLX-0001", "F01"); /* 8 x 6 px, 0.5 mm */
    pl_id key = add_inspection(f->st, "PLX-0001", "F01", "baseline", "2016-01-10");
    pl_map_record r = map_record(key);
    char *before = dump(f->path);

    pl_map *wide = test_map(9, 6, 1, 0.0f);
    expect_fail(pl_store_add_map(f->st, &r, wide, NULL, &err), PL_ENOMATCH, &err,
                "width 9 px differs from the site's 8 px");
    pl_map_free(wide);
    pl_map *tall = test_map(8, 5, 1, 0.0f);
    expect_fail(pl_store_add_map(f->st, &r, tall, NULL, &err), PL_ENOMATCH, &err, "height 5");
    pl_map_free(tall);
    pl_map *m = test_map(8, 6, 1, 0.0f);
    m->pitch_u = 0.5 * 1.002; /* 0.2 % off */
    expect_fail(pl_store_add_map(f->st, &r, m, NULL, &err), PL_ENOMATCH, &err, "pitch_u");
    m->pitch_u = 0.5;
    m->pitch_v = 0.5 * 0.998;
    expect_fail(pl_store_add_map(f->st, &r, m, NULL, &err), PL_ENOMATCH, &err, "pitch_v");
    m->pitch_v = 0.5;
    snprintf(m->channels[0].unit, sizeof m->channels[0].unit, "mm");
    expect_fail(pl_store_add_map(f->st, &r, m, NULL, &err), PL_EINVAL, &err, "channel 0");
    snprintf(m->channels[0].unit, sizeof m->channels[0].unit, "K");
    r.origin[0] = '\0';
    expect_fail(pl_store_add_map(f->st, &r, m, NULL, &err), PL_EINVAL, &err, "origin");
    r = map_record(key + 100);
    expect_fail(pl_store_add_map(f->st, &r, m, NULL, &err), PL_ENOTFOUND, &err, "inspection");
    char *after = dump(f->path);
    assert_string_equal(before, after);
    free(after);
    free(before);

    /* within 0.1 % is the same pitch */
    r = map_record(key);
    m->pitch_u = 0.5 * 1.0005;
    TU_OK(pl_store_add_map(f->st, &r, m, NULL, &err));
    pl_map_free(m);
    check_integrity(f->path);
}

/* ---- transactions ---------------------------------------------------------------------- */

static void test_store__rollback_leaves_the_store_as_it_was(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    add_airframe(f->st, "PLX-0001", "PLX-T1");
    add_site(f->st, "PLX-0001", "F01");
    char *before = dump(f->path);

    TU_OK(pl_store_begin(f->st, &err));
    add_airframe(f->st, "PLX-0002", "PLX-T1");
    add_site(f->st, "PLX-0002", "F01");
    add_site(f->st, "PLX-0001", "F02");
    pl_id key = add_inspection(f->st, "PLX-0002", "F01", "baseline", "2016-01-10");
    pl_map *m = test_map(8, 6, 1, 0.0f);
    pl_map_record r = map_record(key);
    TU_OK(pl_store_add_map(f->st, &r, m, NULL, &err));
    TU_OK(pl_store_add_operator(f->st, "PLX-0001", "Operator B", "2020-01-01", &err));
    pl_site s = site("PLX-0001", "F01");
    snprintf(s.zone, sizeof s.zone, "232");
    TU_OK(pl_store_correct_site(f->st, &s, "checking rollback", NULL, &err));
    pl_store_rollback(f->st);
    pl_store_rollback(f->st); /* harmless when none is open */
    char *after = dump(f->path);
    assert_string_equal(before, after);
    free(after);

    /* a failing call inside a transaction undoes only itself */
    TU_OK(pl_store_begin(f->st, &err));
    add_airframe(f->st, "PLX-0003", "PLX-T1");
    pl_site bad = site("PLX-0003", "F01");
    bad.pitch_u = 0.7;
    TU_OK(pl_store_add_site(f->st, &bad, NULL, &err));
    pl_id k3 = add_inspection(f->st, "PLX-0003", "F01", "baseline", "2016-01-10");
    r = map_record(k3);
    expect_fail(pl_store_add_map(f->st, &r, m, NULL, &err), PL_ENOMATCH, &err, "pitch_u");
    TU_OK(pl_store_commit(f->st, &err));
    pl_store_summary sum;
    TU_OK(pl_store_summarize(f->st, &sum, &err));
    assert_int_equal(sum.airframes, 2);
    assert_int_equal(sum.inspections, 1);
    assert_int_equal(sum.maps, 0);

    /* a transaction cannot be opened twice */
    TU_OK(pl_store_begin(f->st, &err));
    expect_fail(pl_store_begin(f->st, &err), PL_EDB, &err, f->path);
    pl_store_rollback(f->st);
    pl_map_free(m);
    free(before);
    check_integrity(f->path);
}

/* ---- listings ---------------------------------------------------------------------------- */

typedef struct collect {
    char out[1024];
    int stop_after;
    int seen;
} collect;

static void collect_add(collect *c, const char *s)
{
    size_t n = strlen(c->out);
    snprintf(c->out + n, sizeof c->out - n, "%s%s", n ? " " : "", s);
}

static int on_airframe(void *ud, const pl_airframe *af)
{
    collect *c = ud;
    char s[400];
    snprintf(s, sizeof s, "%s/%s", af->serial, af->operator_name[0] ? af->operator_name : "-");
    collect_add(c, s);
    return ++c->seen == c->stop_after;
}

static int on_site(void *ud, const pl_site *site)
{
    collect *c = ud;
    char s[200];
    snprintf(s, sizeof s, "%s:%s", site->airframe_serial, site->code);
    collect_add(c, s);
    return ++c->seen == c->stop_after;
}

static int on_inspection(void *ud, const pl_inspection *in)
{
    collect *c = ud;
    char s[200];
    snprintf(s, sizeof s, "%s:%s@%s", in->airframe_serial, in->site_code, in->performed_on);
    collect_add(c, s);
    return ++c->seen == c->stop_after;
}

static int on_operator(void *ud, const char *name, const char *since, const char *recorded_at)
{
    collect *c = ud;
    char s[300];
    assert_int_equal(strlen(recorded_at), 24);
    snprintf(s, sizeof s, "%s@%s", name, since);
    collect_add(c, s);
    return 0;
}

static void test_store__listings_filter_and_order(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    collect c;
    /* registered out of order on purpose */
    add_airframe(f->st, "PLX-0003", "PLX-T2");
    add_airframe(f->st, "PLX-0001", "PLX-T1");
    add_airframe(f->st, "PLX-0002", "PLX-T1");
    TU_OK(pl_store_add_operator(f->st, "PLX-0001", "Operator A", "2016-01-01", &err));
    TU_OK(pl_store_add_operator(f->st, "PLX-0001", "Operator B", "2019-05-01", &err));
    TU_OK(pl_store_add_operator(f->st, "PLX-0002", "Operator A", "2017-01-01", &err));
    expect_fail(pl_store_add_operator(f->st, "PLX-0001", "Operator C", "2018-01-01", &err),
                PL_EINVAL, &err, "goes back");
    expect_fail(pl_store_add_operator(f->st, "PLX-0003", "Operator C", "2015-01-01", &err),
                PL_EINVAL, &err, "goes back");
    expect_fail(pl_store_add_operator(f->st, "PLX-0009", "Operator C", "2019-01-01", &err),
                PL_ENOTFOUND, &err, "PLX-0009");

    memset(&c, 0, sizeof c);
    TU_OK(pl_store_list_operators(f->st, "PLX-0001", on_operator, &c, &err));
    assert_string_equal(c.out, "Operator A@2016-01-01 Operator B@2019-05-01");

    memset(&c, 0, sizeof c);
    TU_OK(pl_store_list_airframes(f->st, NULL, on_airframe, &c, &err));
    assert_string_equal(c.out, "PLX-0001/Operator B PLX-0002/Operator A PLX-0003/-");
    memset(&c, 0, sizeof c);
    pl_airframe_filter af = { .aircraft_type = "PLX-T1" };
    TU_OK(pl_store_list_airframes(f->st, &af, on_airframe, &c, &err));
    assert_string_equal(c.out, "PLX-0001/Operator B PLX-0002/Operator A");
    /* operator filter: the current operator only */
    memset(&c, 0, sizeof c);
    af = (pl_airframe_filter){ .operator_name = "Operator A" };
    TU_OK(pl_store_list_airframes(f->st, &af, on_airframe, &c, &err));
    assert_string_equal(c.out, "PLX-0002/Operator A");
    memset(&c, 0, sizeof c);
    af = (pl_airframe_filter){ .aircraft_type = "", .operator_name = "" };
    c.stop_after = 2;
    TU_OK(pl_store_list_airframes(f->st, &af, on_airframe, &c, &err));
    assert_string_equal(c.out, "PLX-0001/Operator B PLX-0002/Operator A");

    add_site(f->st, "PLX-0002", "F02");
    add_site(f->st, "PLX-0001", "F02");
    add_site(f->st, "PLX-0001", "F01");
    pl_site s = site("PLX-0001", "W01");
    snprintf(s.zone, sizeof s.zone, "571");
    snprintf(s.method, sizeof s.method, "ultrasound-pulse-echo");
    TU_OK(pl_store_add_site(f->st, &s, NULL, &err));
    memset(&c, 0, sizeof c);
    TU_OK(pl_store_list_sites(f->st, NULL, on_site, &c, &err));
    assert_string_equal(c.out, "PLX-0001:F01 PLX-0001:F02 PLX-0001:W01 PLX-0002:F02");
    pl_site_filter sf = { .airframe_serial = "PLX-0001", .zone = "231" };
    memset(&c, 0, sizeof c);
    TU_OK(pl_store_list_sites(f->st, &sf, on_site, &c, &err));
    assert_string_equal(c.out, "PLX-0001:F01 PLX-0001:F02");
    sf = (pl_site_filter){ .method = "ultrasound-pulse-echo" };
    memset(&c, 0, sizeof c);
    TU_OK(pl_store_list_sites(f->st, &sf, on_site, &c, &err));
    assert_string_equal(c.out, "PLX-0001:W01");

    add_inspection(f->st, "PLX-0001", "F02", "unscheduled", "2022-03-01");
    add_inspection(f->st, "PLX-0001", "F01", "baseline", "2016-01-10");
    add_inspection(f->st, "PLX-0002", "F02", "baseline", "2016-01-10");
    add_inspection(f->st, "PLX-0001", "F01", "unscheduled", "2019-07-15");
    add_inspection(f->st, "PLX-0001", "F01", "post-repair", "2019-08-01");
    memset(&c, 0, sizeof c);
    TU_OK(pl_store_list_inspections(f->st, NULL, on_inspection, &c, &err));
    /* same date: in key order (PLX-0001:F01 was recorded before PLX-0002:F02) */
    assert_string_equal(c.out, "PLX-0001:F01@2016-01-10 PLX-0002:F02@2016-01-10 "
                        "PLX-0001:F01@2019-07-15 PLX-0001:F01@2019-08-01 "
                        "PLX-0001:F02@2022-03-01");
    pl_inspection_filter inf = { .airframe_serial = "PLX-0001", .site_code = "F01",
                                 .from = "2019-01-01", .to = "2019-07-31" };
    memset(&c, 0, sizeof c);
    TU_OK(pl_store_list_inspections(f->st, &inf, on_inspection, &c, &err));
    assert_string_equal(c.out, "PLX-0001:F01@2019-07-15");
    inf = (pl_inspection_filter){ .kind = "baseline" };
    memset(&c, 0, sizeof c);
    TU_OK(pl_store_list_inspections(f->st, &inf, on_inspection, &c, &err));
    assert_string_equal(c.out, "PLX-0001:F01@2016-01-10 PLX-0002:F02@2016-01-10");
    inf = (pl_inspection_filter){ .to = "2016-01-10" };
    memset(&c, 0, sizeof c);
    TU_OK(pl_store_list_inspections(f->st, &inf, on_inspection, &c, &err));
    assert_string_equal(c.out, "PLX-0001:F01@2016-01-10 PLX-0002:F02@2016-01-10");
    inf = (pl_inspection_filter){ .from = "2019-02-30" };
    expect_fail(pl_store_list_inspections(f->st, &inf, on_inspection, &c, &err), PL_EINVAL,
                &err, "2019-02-30");
    expect_fail(pl_store_list_operators(f->st, "PLX-0404", on_operator, &c, &err),
                PL_ENOTFOUND, &err, "PLX-0404");
    check_integrity(f->path);
}

/* ---- summary ----------------------------------------------------------------------------- */

static void test_store__summary_counts_the_record(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    pl_store_summary sum;
    TU_OK(pl_store_summarize(f->st, &sum, &err));
    assert_int_equal(sum.schema_version, PL_STORE_SCHEMA_VERSION);
    assert_int_equal(sum.airframes + sum.sites + sum.inspections + sum.maps, 0);
    assert_string_equal(sum.first_inspection, "");

    add_airframe(f->st, "PLX-0001", "PLX-T1");
    add_airframe(f->st, "PLX-0002", "PLX-T1");
    add_site(f->st, "PLX-0001", "F01");
    add_site(f->st, "PLX-0001", "F02");
    add_site(f->st, "PLX-0002", "F01");
    pl_id b1 = add_inspection(f->st, "PLX-0001", "F01", "baseline", "2016-01-10");
    add_inspection(f->st, "PLX-0001", "F02", "baseline", "2016-01-11");
    pl_id s1 = add_inspection(f->st, "PLX-0001", "F01", "scheduled", "2021-06-01");
    add_inspection(f->st, "PLX-0002", "F01", "post-repair", "2023-02-03");
    pl_map *m = test_map(8, 6, 1, 0.0f);
    pl_map_record r = map_record(b1);
    pl_map_record out1, out2;
    pl_id id1 = 0, id2 = 0;
    TU_OK(pl_store_add_map(f->st, &r, m, &id1, &err));
    r.inspection_key = s1;
    TU_OK(pl_store_add_map(f->st, &r, m, &id2, &err));
    pl_map *tmp = NULL;
    TU_OK(pl_store_load_map(f->st, id1, &tmp, &out1, &err));
    pl_map_free(tmp);
    TU_OK(pl_store_load_map(f->st, id2, &tmp, &out2, &err));
    pl_map_free(tmp);
    free(out1.parameters_json);
    free(out2.parameters_json);
    pl_inspection in = inspection("PLX-0001", "F01", "unscheduled", "2021-06-02");
    TU_OK(pl_store_correct_inspection(f->st, s1, &in, "it was an unscheduled check", NULL, &err));

    TU_OK(pl_store_summarize(f->st, &sum, &err));
    assert_int_equal(sum.airframes, 2);
    assert_int_equal(sum.sites, 3);
    assert_int_equal(sum.inspections, 4);
    assert_int_equal(sum.maps, 2);
    assert_int_equal(sum.inspections_by_kind[0], 2);
    assert_int_equal(sum.inspections_by_kind[1], 0);
    assert_int_equal(sum.inspections_by_kind[2], 1);
    assert_int_equal(sum.inspections_by_kind[3], 1);
    assert_int_equal(sum.corrections, 1);
    assert_int_equal(sum.indications + sum.comparisons + sum.dispositions, 0);
    /* one ledger link for every recorded row (plyledger/ledger.h) */
    sqlite3 *db = raw_open(f->path);
    assert_int_equal(sum.ledger_links,
                     raw_int(db, "SELECT (SELECT count(*) FROM airframe) + (SELECT count(*) "
                                 "FROM airframe_operator) + (SELECT count(*) FROM site) + "
                                 "(SELECT count(*) FROM inspection) + (SELECT count(*) FROM map)"));
    sqlite3_close(db);
    assert_int_equal(sum.map_bytes, (int64_t)(out1.stored_bytes + out2.stored_bytes));
    assert_string_equal(sum.first_inspection, "2016-01-10");
    assert_string_equal(sum.last_inspection, "2023-02-03");
    pl_map_free(m);
    check_integrity(f->path);
}

typedef struct reg_list {
    int n;
    pl_registration_record last;
    char params[128];        /* of the last */
    char first_params[128];  /* of the first */
} reg_list;

static int on_registration(void *ud, const pl_registration_record *r)
{
    reg_list *l = ud;
    l->n++;
    l->last = *r;
    snprintf(l->params, sizeof l->params, "%s", r->parameters_json ? r->parameters_json : "");
    if (l->n == 1)
        snprintf(l->first_params, sizeof l->first_params, "%s", l->params);
    l->last.parameters_json = NULL;
    return 0;
}

static int on_comparison(void *ud, const pl_comparison_record *c)
{
    pl_comparison_record *out = ud;
    *out = *c;
    out->parameters_json = NULL;
    return 0;
}

/* Registrations tie two maps of one site with the transform and its
 * quality; refusals and manual transforms carry who and why; a comparison
 * that could not be made says so. */
static void test_store__registrations_and_comparisons(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    add_airframe(f->st, "PLX-0001", "PLX-T1");
    add_site(f->st, "PLX-0001", "F01");
    add_site(f->st, "PLX-0001", "F02");
    pl_id base = add_inspection(f->st, "PLX-0001", "F01", "baseline", "2016-01-10");
    pl_id next = add_inspection(f->st, "PLX-0001", "F01", "scheduled", "2022-03-01");
    pl_id other = add_inspection(f->st, "PLX-0001", "F02", "baseline", "2016-01-10");
    pl_map *m = test_map(8, 6, 1, 1.0f);
    pl_map_record r = map_record(base);
    pl_id mb = 0, mc = 0, mo = 0;
    TU_OK(pl_store_add_map(f->st, &r, m, &mb, &err));
    m->data[0] += 1.0f;
    r.inspection_key = next;
    TU_OK(pl_store_add_map(f->st, &r, m, &mc, &err));
    m->data[0] += 1.0f;
    r.inspection_key = other;
    TU_OK(pl_store_add_map(f->st, &r, m, &mo, &err));
    pl_map_free(m);

    pl_registration_record g;
    memset(&g, 0, sizeof g);
    g.baseline_map_id = mb;
    g.current_map_id = mc;
    snprintf(g.method, sizeof g.method, "phase-correlation");
    snprintf(g.status, sizeof g.status, "aligned");
    g.shift_col_px = 2.25;
    g.shift_row_px = -1.5;
    g.shift_u_mm = 1.125;
    g.shift_v_mm = -0.75;
    g.rotation_deg = 0.4;
    g.scale = 1.0;
    g.ncc = 0.93;
    g.peak_sidelobe = 41.0;
    g.overlap_fraction = 0.9;
    g.overlap_mm2 = 10.8;
    char params[] = "{\"upsample\":100}";
    g.parameters_json = params;
    pl_id gid = 0;
    TU_OK(pl_store_add_registration(f->st, &g, &gid, &err));
    assert_true(gid > 0);

    /* what is refused, and why */
    pl_registration_record bad = g;
    bad.current_map_id = mo;
    expect_fail(pl_store_add_registration(f->st, &bad, NULL, &err), PL_ENOMATCH, &err,
                "different sites");
    bad = g;
    bad.current_map_id = 999;
    expect_fail(pl_store_add_registration(f->st, &bad, NULL, &err), PL_ENOTFOUND, &err,
                "no map 999");
    bad = g;
    snprintf(bad.status, sizeof bad.status, "refused");
    expect_fail(pl_store_add_registration(f->st, &bad, NULL, &err), PL_EINVAL, &err,
                "needs its reason");
    bad = g;
    snprintf(bad.status, sizeof bad.status, "manual");
    expect_fail(pl_store_add_registration(f->st, &bad, NULL, &err), PL_EINVAL, &err,
                "who supplied it and why");
    bad = g;
    bad.scale = 0;
    expect_fail(pl_store_add_registration(f->st, &bad, NULL, &err), PL_EINVAL, &err,
                "finite transform");
    bad = g;
    snprintf(bad.status, sizeof bad.status, "maybe");
    expect_fail(pl_store_add_registration(f->st, &bad, NULL, &err), PL_EINVAL, &err,
                "'maybe'");
    bad = g;
    snprintf(bad.supplied_by, sizeof bad.supplied_by, "A. Engineer ");
    expect_fail(pl_store_add_registration(f->st, &bad, NULL, &err), PL_EINVAL, &err,
                "supplied_by 'A. Engineer ' has leading or trailing spaces");
    bad = g;
    memset(bad.refusal, 'r', sizeof bad.refusal); /* not terminated */
    expect_fail(pl_store_add_registration(f->st, &bad, NULL, &err), PL_EINVAL, &err,
                "refusal is too long");
    /* the baseline map must come first: the scheduled map onto the baseline's */
    bad = g;
    bad.baseline_map_id = mc;
    bad.current_map_id = mb;
    expect_fail(pl_store_add_registration(f->st, &bad, NULL, &err), PL_EINVAL, &err,
                "is of a scheduled inspection (2022-03-01) that is not earlier");

    /* a refusal, then a manual transform */
    pl_registration_record refused;
    memset(&refused, 0, sizeof refused);
    refused.baseline_map_id = mb;
    refused.current_map_id = mc;
    snprintf(refused.method, sizeof refused.method, "phase-correlation");
    snprintf(refused.status, sizeof refused.status, "refused");
    snprintf(refused.refusal, sizeof refused.refusal, "ncc 0.12 below the limit 0.5");
    refused.shift_col_px = refused.shift_row_px = refused.shift_u_mm = refused.shift_v_mm = NAN;
    refused.rotation_deg = refused.scale = refused.overlap_fraction = refused.overlap_mm2 = NAN;
    refused.ncc = 0.12;
    refused.peak_sidelobe = NAN;
    pl_id rid = 0;
    TU_OK(pl_store_add_registration(f->st, &refused, &rid, &err));
    pl_registration_record manual = g;
    snprintf(manual.status, sizeof manual.status, "manual");
    snprintf(manual.method, sizeof manual.method, "manual");
    snprintf(manual.supplied_by, sizeof manual.supplied_by, "A. Engineer");
    snprintf(manual.supplied_reason, sizeof manual.supplied_reason, "repainted surface");
    manual.peak_sidelobe = NAN;
    manual.parameters_json = NULL;
    TU_OK(pl_store_add_registration(f->st, &manual, NULL, &err));

    reg_list l;
    memset(&l, 0, sizeof l);
    TU_OK(pl_store_list_registrations(f->st, mc, on_registration, &l, &err));
    assert_int_equal(l.n, 3);
    assert_string_equal(l.last.status, "manual");
    assert_string_equal(l.last.supplied_by, "A. Engineer");
    assert_true(isnan(l.last.peak_sidelobe));
    assert_string_equal(l.last.supplied_reason, "repainted surface");
    assert_true(l.last.shift_col_px == 2.25 && l.last.shift_v_mm == -0.75);
    assert_true(l.last.rotation_deg == 0.4 && l.last.overlap_mm2 == 10.8);
    assert_string_equal(l.last.software_version, pl_version());
    assert_string_equal(l.params, "");
    assert_string_equal(l.first_params, "{\"upsample\":100}");
    memset(&l, 0, sizeof l);
    TU_OK(pl_store_list_registrations(f->st, 0, on_registration, &l, &err));
    assert_int_equal(l.n, 3);
    /* the filter is on the current map: none has the baseline map there */
    memset(&l, 0, sizeof l);
    TU_OK(pl_store_list_registrations(f->st, mb, on_registration, &l, &err));
    assert_int_equal(l.n, 0);

    /* the comparison that needed the refused registration is not done */
    pl_comparison_record c;
    memset(&c, 0, sizeof c);
    c.baseline_inspection = base;
    c.current_inspection = next;
    c.registration_id = rid;
    snprintf(c.status, sizeof c.status, "not-done");
    c.uncompared_mm2 = c.uncompared_fraction = NAN;
    expect_fail(pl_store_add_comparison(f->st, &c, NULL, &err), PL_EINVAL, &err,
                "needs its reason");
    snprintf(c.not_done_reason, sizeof c.not_done_reason, "registration refused: %.200s",
             refused.refusal);
    pl_comparison_record wrong = c;
    wrong.current_inspection = other;
    expect_fail(pl_store_add_comparison(f->st, &wrong, NULL, &err), PL_ENOMATCH, &err,
                "different sites");
    wrong = c;
    memset(wrong.not_done_reason, 'x', sizeof wrong.not_done_reason); /* not terminated */
    expect_fail(pl_store_add_comparison(f->st, &wrong, NULL, &err), PL_EINVAL, &err,
                "not_done_reason is too long");
    pl_id cid = 0;
    TU_OK(pl_store_add_comparison(f->st, &c, &cid, &err));
    pl_comparison_record back;
    memset(&back, 0, sizeof back);
    TU_OK(pl_store_list_comparisons(f->st, next, on_comparison, &back, &err));
    assert_int_equal(back.id, cid);
    assert_string_equal(back.status, "not-done");
    assert_int_equal(back.registration_id, rid);
    assert_non_null(strstr(back.not_done_reason, "ncc 0.12"));
    /* the filter is on the current inspection: the baseline is none's */
    memset(&back, 0, sizeof back);
    TU_OK(pl_store_list_comparisons(f->st, base, on_comparison, &back, &err));
    assert_int_equal(back.id, 0);

    pl_store_summary sum;
    TU_OK(pl_store_summarize(f->st, &sum, &err));
    assert_int_equal(sum.registrations, 3);
    assert_int_equal(sum.comparisons, 1);

    /* between two later inspections the earlier one is the baseline map's,
     * and on the same date the one recorded first */
    pl_id later = add_inspection(f->st, "PLX-0001", "F01", "scheduled", "2024-05-02");
    pl_id same_day = add_inspection(f->st, "PLX-0001", "F01", "unscheduled", "2024-05-02");
    m = test_map(8, 6, 1, 5.0f);
    r.inspection_key = later;
    pl_id ml = 0, ms = 0;
    TU_OK(pl_store_add_map(f->st, &r, m, &ml, &err));
    m->data[0] += 1.0f;
    r.inspection_key = same_day;
    TU_OK(pl_store_add_map(f->st, &r, m, &ms, &err));
    pl_map_free(m);
    pl_registration_record step = g;
    step.baseline_map_id = mc;
    step.current_map_id = ml;
    TU_OK(pl_store_add_registration(f->st, &step, NULL, &err));
    step.baseline_map_id = ml;
    step.current_map_id = ms;
    TU_OK(pl_store_add_registration(f->st, &step, NULL, &err));
    step.baseline_map_id = ms;
    step.current_map_id = ml;
    expect_fail(pl_store_add_registration(f->st, &step, NULL, &err), PL_EINVAL, &err,
                "not earlier");
    step.baseline_map_id = ml;
    step.current_map_id = mc;
    expect_fail(pl_store_add_registration(f->st, &step, NULL, &err), PL_EINVAL, &err,
                "not earlier");
    check_integrity(f->path);
}

/* ---- writers waiting for each other ------------------------------------------------------ */

/* Another handle on the same store, in a thread of its own: it takes the
 * write lock (a transaction that registers an airframe), says so, holds the
 * lock for hold_s seconds and commits. */
typedef struct holder {
    const char *path;
    double hold_s;
    int ready, rc;
    pl_err err;
    pthread_mutex_t mu;
    pthread_cond_t cv;
} holder;

static void *hold_write_lock(void *ud)
{
    holder *h = ud;
    pl_store *st = NULL;
    h->rc = pl_store_open(&st, h->path, 0, &h->err);
    if (!h->rc)
        h->rc = pl_store_begin(st, &h->err);
    if (!h->rc) {
        pl_airframe af = airframe("PLX-0100", "PLX-T1");
        h->rc = pl_store_add_airframe(st, &af, NULL, &h->err);
    }
    pthread_mutex_lock(&h->mu);
    h->ready = 1;
    pthread_cond_signal(&h->cv);
    pthread_mutex_unlock(&h->mu);
    if (!h->rc) {
        struct timespec ts = { (time_t)h->hold_s,
                               (long)((h->hold_s - (double)(time_t)h->hold_s) * 1e9) };
        nanosleep(&ts, NULL);
        h->rc = pl_store_commit(st, &h->err);
    }
    pl_store_close(st);
    return NULL;
}

static void start_holder(holder *h, pthread_t *t, const char *path, double hold_s)
{
    memset(h, 0, sizeof *h);
    h->path = path;
    h->hold_s = hold_s;
    pthread_mutex_init(&h->mu, NULL);
    pthread_cond_init(&h->cv, NULL);
    assert_int_equal(pthread_create(t, NULL, hold_write_lock, h), 0);
    pthread_mutex_lock(&h->mu);
    while (!h->ready)
        pthread_cond_wait(&h->cv, &h->mu);
    pthread_mutex_unlock(&h->mu);
    if (h->rc)
        fail_msg("the other writer: %s", h->err.msg);
}

static void join_holder(holder *h, pthread_t t)
{
    assert_int_equal(pthread_join(t, NULL), 0);
    if (h->rc)
        fail_msg("the other writer: %s", h->err.msg);
    pthread_cond_destroy(&h->cv);
    pthread_mutex_destroy(&h->mu);
}

static double seconds_now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

/*
 * A writer that finds the store locked by another waits for it (with the
 * default wait, PL_STORE_WAIT_DEFAULT_S) and then writes: here the other
 * holds the lock for 5.5 s, longer than SQLite's busy timeout of 5 s that
 * the store once used.
 */
static void test_store__a_writer_waits_for_another_and_writes(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    holder h;
    pthread_t t;
    start_holder(&h, &t, f->path, 5.5);
    double t0 = seconds_now();
    pl_airframe af = airframe("PLX-0001", "PLX-T1");
    int rc = pl_store_add_airframe(f->st, &af, NULL, &err);
    double waited = seconds_now() - t0;
    join_holder(&h, t); /* first: the other writer uses this test's memory */
    if (rc)
        fail_msg("the waiting write failed after %.2f s: %s", waited, err.msg);
    if (waited < 4.0)
        fail_msg("the write went in after %.2f s, while the other held the lock", waited);
    pl_store_summary sum;
    TU_OK(pl_store_summarize(f->st, &sum, &err));
    assert_int_equal(sum.airframes, 2);
    check_integrity(f->path);
}

/*
 * When the wait runs out the write fails with PL_EBUSY and a sentence that
 * says what happened and that nothing was recorded, never SQLite's own
 * text; the store holds only what the other writer committed.
 */
static void test_store__a_writer_that_waits_too_long_says_so_plainly(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    expect_fail(pl_store_set_wait(f->st, -1.0, &err), PL_EINVAL, &err, "wait");
    expect_fail(pl_store_set_wait(f->st, NAN, &err), PL_EINVAL, &err, "wait");
    TU_OK(pl_store_set_wait(f->st, 0.3, &err));
    holder h;
    pthread_t t;
    start_holder(&h, &t, f->path, 2.0);
    double t0 = seconds_now();
    pl_airframe af = airframe("PLX-0001", "PLX-T1");
    pl_err e1 = { 0 }, e2 = { 0 };
    int rc1 = pl_store_add_airframe(f->st, &af, NULL, &e1);
    double waited = seconds_now() - t0;
    /* the same for a caller's own transaction */
    int rc2 = pl_store_begin(f->st, &e2);
    join_holder(&h, t); /* first: the other writer uses this test's memory */
    expect_fail(rc1, PL_EBUSY, &e1, "another process is writing to the store");
    tu_assert_msg_has(e1.msg, "nothing was recorded");
    assert_null(strstr(e1.msg, "locked"));
    assert_null(strstr(e1.msg, "database"));
    if (waited < 0.25 || waited > 1.5)
        fail_msg("gave up after %.2f s with a wait of 0.3 s", waited);
    expect_fail(rc2, PL_EBUSY, &e2, "nothing was recorded");
    assert_null(strstr(e2.msg, "locked"));
    pl_store_summary sum;
    TU_OK(pl_store_summarize(f->st, &sum, &err));
    assert_int_equal(sum.airframes, 1);
    pl_airframe back;
    TU_OK(pl_store_get_airframe(f->st, "PLX-0100", &back, &err));
    expect_fail(pl_store_get_airframe(f->st, "PLX-0001", &back, &err), PL_ENOTFOUND, &err,
                "PLX-0001");
    TU_OK(pl_store_add_airframe(f->st, &af, NULL, &err)); /* free again: it goes in */
    check_integrity(f->path);
}

/* ---- vocabularies and the previous schema ------------------------------------------ */

/* The quoted words of the first "<opener> ... )" list in `sql` (as
 * 'a', 'b'), NUL-separated into words[] (room for n). Returns the count. */
static int sql_list(const char *sql, const char *opener, char words[][64], int n)
{
    assert_non_null(sql);
    const char *p = strstr(sql, opener);
    if (!p) {
        /* (the opener not printed: GCC 12's -Wformat-overflow with the
         * sanitizers takes it for a null argument) */
        print_error("the list's opener is not in: %s\n", sql);
        fail();
    }
    p += strlen(opener);
    int k = 0;
    while (*p && *p != ')') {
        if (*p++ != '\'')
            continue;
        const char *end = strchr(p, '\'');
        assert_non_null(end);
        assert_true(k < n && end - p < 64);
        memcpy(words[k], p, (size_t)(end - p));
        words[k++][end - p] = '\0';
        p = end + 1;
    }
    return k;
}

/*
 * Every closed vocabulary has one source, the library: the schema's CHECK
 * lists (inspection kinds, registration and comparison statuses) and the
 * trigger on site methods carry the same words in the same order, and the
 * trigger refuses a word the vocabulary lacks while taking each it has.
 */
static void test_store__schema_checks_equal_the_vocabularies(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    add_airframe(f->st, "PLX-0001", "PLX-T1");
    pl_store_close(f->st);
    f->st = NULL;
    sqlite3 *db = raw_open(f->path);
    static const struct {
        const char *object, *opener;
        pl_vocab vocab;
    } lists[] = {
        { "inspection", "kind IN (", PL_VOCAB_INSPECTION_KIND },
        { "registration", "status IN (", PL_VOCAB_REGISTRATION_STATUS },
        { "comparison", "status IN (", PL_VOCAB_COMPARISON_STATUS },
        { "site_method_known", "NEW.method NOT IN (", PL_VOCAB_METHOD },
        { "indication", "role IN (", PL_VOCAB_INDICATION_ROLE },
        { "indication_change", "class IN (", PL_VOCAB_CHANGE_CLASS },
        { "indication_change", "matched_by IN (", PL_VOCAB_CHANGE_MATCH },
        { "indication_change", "sizing IN (", PL_VOCAB_SIZING },
    };
    for (size_t i = 0; i < sizeof lists / sizeof lists[0]; i++) {
        char *q = sqlite3_mprintf("SELECT sql FROM sqlite_master WHERE name = '%q'",
                                  lists[i].object);
        char *sql = raw_text(db, q);
        sqlite3_free(q);
        char words[16][64];
        int n = sql_list(sql, lists[i].opener, words, 16);
        const pl_vocabulary *v = pl_vocabulary_get(lists[i].vocab);
        if ((size_t)n != v->count)
            fail_msg("%s: %d words in the schema, %zu in the library", lists[i].object, n,
                     v->count);
        for (int k = 0; k < n; k++)
            assert_string_equal(words[k], v->words[k]);
        free(sql);
    }
    assert_int_equal(pl_vocabulary_get(PL_VOCAB_INSPECTION_KIND)->count,
                     PL_INSPECTION_KIND_COUNT);
    /* the change classes and sizing rules are the comparison's own words,
     * indexed by its enums */
    assert_int_equal(pl_vocabulary_get(PL_VOCAB_CHANGE_CLASS)->count, PL_CHANGE_KIND_COUNT);
    for (int k = 0; k < PL_CHANGE_KIND_COUNT; k++)
        assert_string_equal(pl_vocabulary_get(PL_VOCAB_CHANGE_CLASS)->words[k],
                            pl_change_kind_name((pl_change_kind)k));
    assert_int_equal(pl_vocabulary_get(PL_VOCAB_SIZING)->count, PL_SIZING_COUNT);
    for (int k = 0; k < PL_SIZING_COUNT; k++)
        assert_string_equal(pl_vocabulary_get(PL_VOCAB_SIZING)->words[k],
                            pl_sizing_name((pl_sizing)k));
    assert_null(pl_vocabulary_get(PL_VOCAB_COUNT));
    char text[128];
    pl_vocabulary_text(text, sizeof text, PL_VOCAB_INSPECTION_KIND, " or ");
    assert_string_equal(text, "baseline, scheduled, unscheduled or post-repair");

    /* the trigger: every method of the vocabulary goes in, another does not */
    const pl_vocabulary *m = pl_vocabulary_get(PL_VOCAB_METHOD);
    for (size_t k = 0; k <= m->count; k++) {
        char *sql = sqlite3_mprintf(
            "INSERT INTO site (airframe_key, code, method, coord_system, coord_unit, origin_x, "
            "origin_y, origin_z, u_x, u_y, u_z, v_x, v_y, v_z, width_px, height_px, pitch_u_mm, "
            "pitch_v_mm, recorded_at) VALUES (1, 'M%02d', '%q', 'STA/BL/WL', 'mm', 0, 0, 0, 1, "
            "0, 0, 0, 1, 0, 0, 0, 1, 1, 'now')", (int)k,
            k < m->count ? m->words[k] : "x-ray");
        int rc = sqlite3_exec(db, sql, NULL, NULL, NULL);
        sqlite3_free(sql);
        if (k < m->count) {
            assert_int_equal(rc, SQLITE_OK);
        } else {
            assert_int_equal(sqlite3_extended_errcode(db), SQLITE_CONSTRAINT_TRIGGER);
            assert_int_equal(pl_store__status(SQLITE_CONSTRAINT_TRIGGER, sqlite3_errmsg(db)),
                             PL_EINVAL);
        }
    }
    sqlite3_close(db);
    (void)err;
}

static void make_old_store(const char *path, int version);

/* A recorded comparison's indication (its side's map) and change. */
static pl_indication_record indication_on(pl_id cid, const char *role, pl_id map, int64_t label)
{
    pl_indication_record r;
    memset(&r, 0, sizeof r);
    r.comparison_id = cid;
    snprintf(r.role, sizeof r.role, "%s", role);
    r.map_id = map;
    r.label = label;
    r.area_px = 12;
    r.area_mm2 = 3.0;
    r.equivalent_diameter_mm = 1.954;
    r.area_halfmax_px = 8;
    r.area_halfmax_mm2 = 2.0;
    r.equivalent_diameter_halfmax_mm = 1.596;
    r.centroid_col = 4.0;
    r.centroid_row = 2.5;
    r.part_x = r.part_y = r.part_z = NAN;
    r.bbox_col0 = 2;
    r.bbox_row0 = 1;
    r.bbox_col1 = 6;
    r.bbox_row1 = 4;
    r.major_axis_mm = 4.0;
    r.minor_axis_mm = 2.0;
    r.orientation_deg = 10.0;
    r.peak_contrast = 0.5;
    r.peak_snr = 9.0;
    r.peak_col = 4;
    r.peak_row = 2;
    r.mean_contrast = 0.3;
    r.depth_mm = NAN;
    r.perimeter_mm = 11.0;
    return r;
}

static pl_change_record change_of(pl_id cid, int64_t number, const char *klass,
                                  char *baseline_labels, char *current_labels)
{
    pl_change_record r;
    memset(&r, 0, sizeof r);
    r.comparison_id = cid;
    r.number = number;
    snprintf(r.class_, sizeof r.class_, "%s", klass);
    snprintf(r.matched_by, sizeof r.matched_by, "overlap");
    snprintf(r.sizing, sizeof r.sizing, "threshold");
    r.baseline_labels = baseline_labels;
    r.current_labels = current_labels;
    r.area_baseline_mm2 = 3.0;
    r.area_current_mm2 = 3.25;
    r.area_delta_mm2 = 0.25;
    r.area_delta_percent = 8.3;
    r.area_baseline_halfmax_mm2 = r.area_current_halfmax_mm2 = 2.0;
    r.area_delta_halfmax_mm2 = 0.0;
    r.contrast_baseline = r.contrast_current = 0.5;
    r.contrast_delta = 0.0;
    r.centroid_col = 4.0;
    r.centroid_row = 2.5;
    r.distance_px = 0.1;
    r.area_limit_mm2 = 1.0;
    r.area_measured_mm2 = 0.25;
    r.area_margin_mm2 = 0.75;
    r.contrast_limit = 0.1;
    r.contrast_margin = 0.1;
    r.reportable = 1;
    r.region_pixels = r.touches = -1;
    return r;
}

typedef struct row_list {
    int n;
    char what[8][48];
} row_list;

static int note_indication(void *ud, const pl_indication_record *r)
{
    row_list *l = ud;
    if (l->n < 8)
        snprintf(l->what[l->n], sizeof l->what[0], "%s %lld %.2f", r->role, (long long)r->label,
                 r->area_mm2);
    l->n++;
    return 0;
}

static int note_change(void *ud, const pl_change_record *r)
{
    row_list *l = ud;
    if (l->n < 8)
        snprintf(l->what[l->n], sizeof l->what[0], "%lld %s %s %s", (long long)r->number,
                 r->class_, r->baseline_labels, r->current_labels);
    l->n++;
    return 0;
}

/*
 * A done comparison's indications and changes go in through the one insert
 * path, read back in their order, and whatever no comparison could produce
 * is refused with the field named: a role or class outside the
 * vocabulary, a map of another inspection, a label taken twice, numbers
 * that are not finite, a box inside out, labels that are not a sorted
 * JSON array, a change of a comparison not done.
 */
static void test_store__indications_and_changes_of_a_comparison(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    add_airframe(f->st, "PLX-0001", "PLX-T1");
    add_site(f->st, "PLX-0001", "F01");
    pl_id base = add_inspection(f->st, "PLX-0001", "F01", "baseline", "2016-01-10");
    pl_id next = add_inspection(f->st, "PLX-0001", "F01", "scheduled", "2022-03-01");
    pl_map *m = test_map(8, 6, 1, 1.0f);
    pl_map_record mr = map_record(base);
    pl_id mb = 0, mc = 0;
    TU_OK(pl_store_add_map(f->st, &mr, m, &mb, &err));
    m->data[0] += 1.0f;
    mr.inspection_key = next;
    TU_OK(pl_store_add_map(f->st, &mr, m, &mc, &err));
    pl_map_free(m);
    pl_comparison_record c;
    memset(&c, 0, sizeof c);
    c.baseline_inspection = base;
    c.current_inspection = next;
    snprintf(c.status, sizeof c.status, "done");
    c.uncompared_mm2 = c.uncompared_fraction = 0.0;
    pl_id cid = 0, undone = 0;
    TU_OK(pl_store_add_comparison(f->st, &c, &cid, &err));
    snprintf(c.status, sizeof c.status, "not-done");
    snprintf(c.not_done_reason, sizeof c.not_done_reason, "registration refused: too little "
             "texture");
    TU_OK(pl_store_add_comparison(f->st, &c, &undone, &err));

    pl_indication_record b1 = indication_on(cid, "baseline", mb, 1);
    pl_indication_record c1 = indication_on(cid, "current", mc, 1);
    pl_indication_record c2 = indication_on(cid, "current", mc, 2);
    c2.area_mm2 = 4.5;
    TU_OK(pl_store_add_indication(f->st, &c2, NULL, &err));
    TU_OK(pl_store_add_indication(f->st, &c1, NULL, &err));
    TU_OK(pl_store_add_indication(f->st, &b1, NULL, &err));

    static const struct {
        const char *what, *needle;
        int code;
    } bad_indications[] = {
        { "role", "indication role 'both' is not one of baseline, current", PL_EINVAL },
        { "other map", "the map of that comparison's inspection on its side", PL_EINVAL },
        { "taken label", "", PL_EEXISTS },
        { "peak", "peak_contrast must be a finite number (got inf)", PL_EINVAL },
        { "area", "area_mm2 must be > 0 (got nan)", PL_EINVAL },
        { "box", "bounding box (6, 1)-(2, 4) is not first corner then last", PL_EINVAL },
        { "orientation", "orientation_deg must lie in (-90, 90] (got -90)", PL_EINVAL },
        { "label", "label must be 1 or more (got 0)", PL_EINVAL },
        { "not done", "belongs to a comparison that was done", PL_EINVAL },
    };
    for (size_t i = 0; i < sizeof bad_indications / sizeof bad_indications[0]; i++) {
        pl_indication_record r = indication_on(cid, "current", mc, 3);
        switch (i) {
        case 0: snprintf(r.role, sizeof r.role, "both"); break;
        case 1: r.map_id = mb; break;
        case 2: r.label = 2; break;
        case 3: r.peak_contrast = INFINITY; break;
        case 4: r.area_mm2 = NAN; break;
        case 5: r.bbox_col0 = 6; r.bbox_col1 = 2; break;
        case 6: r.orientation_deg = -90.0; break;
        case 7: r.label = 0; break;
        default: r.comparison_id = undone; break;
        }
        int rc = pl_store_add_indication(f->st, &r, NULL, &err);
        if (rc != bad_indications[i].code)
            fail_msg("%s: expected %d, got %d (%s)", bad_indications[i].what,
                     bad_indications[i].code, rc, err.msg);
        tu_assert_msg_has(err.msg, bad_indications[i].needle);
    }
    row_list l = { 0 };
    TU_OK(pl_store_list_indications(f->st, cid, note_indication, &l, &err));
    assert_int_equal(l.n, 3);
    assert_string_equal(l.what[0], "baseline 1 3.00");
    assert_string_equal(l.what[1], "current 1 3.00");
    assert_string_equal(l.what[2], "current 2 4.50");

    char none[] = "[]", one[] = "[1]", both[] = "[1,2]";
    pl_change_record g = change_of(cid, 2, "changed-region", none, none);
    g.region_pixels = 9;
    g.touches = 1;
    TU_OK(pl_store_add_change(f->st, &g, NULL, &err));
    g = change_of(cid, 1, "grown", one, both);
    TU_OK(pl_store_add_change(f->st, &g, NULL, &err));
    char unsorted[] = "[2,1]", spaced[] = "[1, 2]", zero[] = "[0]", object[] = "{}";
    static const struct {
        const char *what, *needle;
        int code;
    } bad_changes[] = {
        { "class", "change class 'unchanged' is not one of new, grown", PL_EINVAL },
        { "unsorted", "current_labels must be a JSON array of labels in increasing order",
          PL_EINVAL },
        { "spaced", "current_labels must be a JSON array", PL_EINVAL },
        { "zero", "baseline_labels must be a JSON array", PL_EINVAL },
        { "object", "baseline_labels must be a JSON array", PL_EINVAL },
        { "missing", "baseline_labels must be a JSON array", PL_EINVAL },
        { "margin", "area_margin_mm2 must be a finite number or unknown (got -inf)",
          PL_EINVAL },
        { "flag", "exceeds must be 0 or 1 (got 2)", PL_EINVAL },
        { "taken number", "", PL_EEXISTS },
        { "number", "number must be 1 or more (got 0)", PL_EINVAL },
        { "touches", "touches must be 1 or more (got 0)", PL_EINVAL },
        { "sizing", "sizing rule 'area' is not one of threshold, half-maximum", PL_EINVAL },
        { "not done", "a change belongs to a comparison that was done", PL_EINVAL },
    };
    for (size_t i = 0; i < sizeof bad_changes / sizeof bad_changes[0]; i++) {
        pl_change_record r = change_of(cid, 3, "stable", one, one);
        switch (i) {
        case 0: snprintf(r.class_, sizeof r.class_, "unchanged"); break;
        case 1: r.current_labels = unsorted; break;
        case 2: r.current_labels = spaced; break;
        case 3: r.baseline_labels = zero; break;
        case 4: r.baseline_labels = object; break;
        case 5: r.baseline_labels = NULL; break;
        case 6: r.area_margin_mm2 = -INFINITY; break;
        case 7: r.exceeds = 2; break;
        case 8: r.number = 1; break;
        case 9: r.number = 0; break;
        case 10: r.touches = 0; break;
        case 11: snprintf(r.sizing, sizeof r.sizing, "area"); break;
        default: r.comparison_id = undone; break;
        }
        int rc = pl_store_add_change(f->st, &r, NULL, &err);
        if (rc != bad_changes[i].code)
            fail_msg("%s: expected %d, got %d (%s)", bad_changes[i].what, bad_changes[i].code,
                     rc, err.msg);
        tu_assert_msg_has(err.msg, bad_changes[i].needle);
    }
    memset(&l, 0, sizeof l);
    TU_OK(pl_store_list_changes(f->st, 0, note_change, &l, &err));
    assert_int_equal(l.n, 2);
    assert_string_equal(l.what[0], "1 grown [1] [1,2]");
    assert_string_equal(l.what[1], "2 changed-region [] []");
    pl_store_summary sum;
    TU_OK(pl_store_summarize(f->st, &sum, &err));
    assert_int_equal(sum.indications, 3);
}

/*
 * Migration 5 recreates the indication tables, which no earlier version
 * wrote. A store that holds a row in them all the same is not migrated:
 * the open fails naming the guard, and the store stays at version 4 with
 * its row.
 */
static void test_store__migration_5_keeps_a_store_whose_indication_tables_hold_rows(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    char *old = tu_path(f->dir, "old4.db");
    make_old_store(old, 4);
    sqlite3 *db = raw_open(old);
    raw_exec(db, "INSERT INTO indication (map_id, channel, label, area_px, area_mm2,"
             " centroid_col, centroid_row, recorded_at) VALUES (1, 0, 1, 4, 1.0, 2.0, 3.0,"
             " '2030-01-01T00:00:00.000Z')");
    sqlite3_close(db);
    pl_store *st = NULL;
    int rc = pl_store_open(&st, old, 0, &err);
    assert_null(st);
    assert_int_equal(rc, PL_EDB);
    tu_assert_msg_has(err.msg, "indication_tables_must_be_empty");
    db = raw_open(old);
    assert_int_equal(raw_int(db, "PRAGMA user_version"), 4);
    assert_int_equal(raw_int(db, "SELECT count(*) FROM indication"), 1);
    assert_int_equal(raw_int(db, "SELECT count(*) FROM pragma_table_info('indication')"
                     " WHERE name = 'role'"), 0);
    /* emptied (as every store before it is), it migrates */
    raw_exec(db, "DROP TRIGGER indication_no_delete; DELETE FROM indication");
    sqlite3_close(db);
    TU_OK(pl_store_open(&st, old, 0, &err));
    pl_store_close(st);
    db = raw_open(old);
    assert_int_equal(raw_int(db, "PRAGMA user_version"), PL_STORE_SCHEMA_VERSION);
    assert_int_equal(raw_int(db, "SELECT count(*) FROM pragma_table_info('indication')"
                     " WHERE name = 'role'"), 1);
    sqlite3_close(db);
    free(old);
}

/* A store of schema version `version`: the migrations up to it applied by
 * hand, as that plyledger left it (identity and history rows included). */
static void make_old_store(const char *path, int version)
{
    sqlite3 *db = raw_open(path);
    char sql[256];
    snprintf(sql, sizeof sql, "PRAGMA application_id = %d", PL_STORE_APPLICATION_ID);
    raw_exec(db, sql);
    raw_exec(db, "PRAGMA journal_mode = WAL");
    for (int i = 0; i < version; i++) {
        raw_exec(db, pl__migrations[i].sql);
        snprintf(sql, sizeof sql, "INSERT INTO store_info (name, value) VALUES ('schema.%04d', "
                 "'%s applied 2030-01-01T00:00:00.000Z by plyledger 0.1.0')", i + 1,
                 pl__migrations[i].name);
        raw_exec(db, sql);
    }
    snprintf(sql, sizeof sql, "PRAGMA user_version = %d", version);
    raw_exec(db, sql);
    raw_exec(db, "INSERT INTO store_info (name, value) VALUES ('store_id', "
             "'0123456789abcdef0123456789abcdef'), ('created_at', '2030-01-01T00:00:00.000Z'), "
             "('created_by', '0.1.0')");
    sqlite3_close(db);
}

/*
 * A store written by the previous schema (version 1) opens, migrates to
 * this library's version, records the migration, and keeps every row of
 * every table exactly; its records read back through the library, and the
 * new rule (known methods only) holds from then on.
 */
static void test_store__previous_schema_migrates_and_keeps_its_rows(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    assert_true(PL_STORE_SCHEMA_VERSION >= 3);
    char *old = tu_path(f->dir, "old.db");
    /* rows as schema 2 wrote them (before an inspection said whether it
     * was simulated) go through every later migration */
    make_old_store(old, 2);
    pl_map *m = test_map(8, 6, 2, 1.0f);
    unsigned char *blob = NULL, digest[PL_SHA256_SIZE];
    size_t blob_len = 0;
    char hex[PL_SHA256_HEX_SIZE];
    TU_OK(pl_map_encode(&blob, &blob_len, digest, m, &err));
    pl_sha256_hex(hex, digest);
    sqlite3 *db = raw_open(old);
    raw_exec(db, "PRAGMA foreign_keys = ON;"
             "INSERT INTO airframe (serial, aircraft_type, manufactured, recorded_at) VALUES "
             "('OLD-0001', 'TX-1', '2029-01-02', '2030-01-01T00:00:01.000Z');"
             "INSERT INTO airframe_operator (airframe_key, operator_name, since, recorded_at) "
             "VALUES (1, 'Operator A', '2029-01-02', '2030-01-01T00:00:01.000Z');"
             "INSERT INTO site (airframe_key, code, method, coord_system, coord_unit, origin_x, "
             "origin_y, origin_z, u_x, u_y, u_z, v_x, v_y, v_z, width_px, height_px, pitch_u_mm, "
             "pitch_v_mm, recorded_at) VALUES (1, 'F01', 'flash-thermography', 'STA/BL/WL', "
             "'mm', 5200, -48, 3480, 1, 0, 0, 0, 1, 0, 8, 6, 0.5, 0.5, "
             "'2030-01-01T00:00:02.000Z');"
             "INSERT INTO inspection (site_key, kind, performed_on, procedure, procedure_rev, "
             "equipment, calibration_ref, inspector, inspector_level, software_version, "
             "recorded_at) VALUES (1, 'baseline', '2030-01-05', 'P', 'A', 'E', 'C', 'I', '2', "
             "'0.1.0', '2030-01-05T00:00:00.000Z'), (1, 'scheduled', '2035-01-05', 'P', 'A', "
             "'E', 'C', 'I', '2', '0.1.0', '2035-01-05T00:00:00.000Z');");
    sqlite3_stmt *st;
    for (int k = 1; k <= 2; k++) {
        assert_int_equal(sqlite3_prepare_v2(db,
            "INSERT INTO map (inspection_key, made_by, software_version, width, height, "
            "nchannels, pitch_u_mm, pitch_v_mm, coord_system, coord_unit, origin_x, origin_y, "
            "origin_z, u_x, u_y, u_z, v_x, v_y, v_z, encoding, data, sha256, recorded_at) "
            "VALUES (?1, 'import-npy', '0.1.0', 8, 6, 2, 0.5, 0.5, 'STA/BL/WL', 'mm', 5200, "
            "-48, 3480, 1, 0, 0, 0, 1, 0, 'zlib-f32le', ?2, ?3, '2035-01-05T00:00:00.000Z')",
            -1, &st, NULL), SQLITE_OK);
        sqlite3_bind_int64(st, 1, k);
        sqlite3_bind_blob(st, 2, blob, (int)blob_len, SQLITE_STATIC);
        sqlite3_bind_text(st, 3, hex, -1, SQLITE_STATIC);
        assert_int_equal(sqlite3_step(st), SQLITE_DONE);
        sqlite3_finalize(st);
    }
    raw_exec(db, "INSERT INTO map_channel (map_id, idx, quantity, unit, label) VALUES "
             "(1, 0, 'temperature-contrast', 'K', ''), (1, 1, 'log-derivative-2', '1', "
             "'t=0.50 s'), (2, 0, 'temperature-contrast', 'K', ''), (2, 1, "
             "'log-derivative-2', '1', 't=0.50 s');"
             "INSERT INTO registration (baseline_map_id, current_map_id, method, status, "
             "refusal, ncc, software_version, recorded_at) VALUES (1, 2, 'phase-correlation', "
             "'refused', 'ncc 0.1 below the limit 0.6', 0.1, '0.1.0', "
             "'2035-01-06T00:00:00.000Z');"
             "INSERT INTO comparison (site_key, baseline_inspection, current_inspection, "
             "registration_id, status, not_done_reason, software_version, recorded_at) VALUES "
             "(1, 1, 2, 1, 'not-done', 'registration refused', '0.1.0', "
             "'2035-01-06T00:00:00.000Z')");
    sqlite3_close(db);
    free(blob);
    pl_map_free(m);

    /* every table but store_info, which gains the migration's row */
    const char *rows = "SELECT group_concat(t, char(10)) FROM ("
        "SELECT 'a|' || quote(id) || quote(serial) || quote(manufactured) AS t FROM airframe "
        "UNION ALL SELECT 'o|' || quote(operator_name) || quote(since) FROM airframe_operator "
        "UNION ALL SELECT 's|' || quote(id) || quote(code) || quote(method) || quote(origin_x) "
        "FROM site UNION ALL SELECT 'i|' || quote(id) || quote(kind) || quote(performed_on) "
        "FROM inspection UNION ALL SELECT 'm|' || quote(id) || quote(sha256) || quote(data) "
        "FROM map UNION ALL SELECT 'c|' || quote(map_id) || quote(idx) || quote(label) FROM "
        "map_channel UNION ALL SELECT 'r|' || quote(id) || quote(status) || quote(ncc) FROM "
        "registration UNION ALL SELECT 'x|' || quote(id) || quote(not_done_reason) FROM "
        "comparison)";
    db = raw_open(old);
    char *before = raw_text(db, rows);
    sqlite3_close(db);

    pl_store *st2 = NULL;
    expect_fail(pl_store_open(&st2, old, PL_STORE_READONLY, &err), PL_EVERSION, &err, "older");
    TU_OK(pl_store_open(&st2, old, 0, &err));
    assert_int_equal(pl_store_schema_version(st2), PL_STORE_SCHEMA_VERSION);
    pl_map *back = NULL;
    pl_map_record rec;
    TU_OK(pl_store_load_map(st2, 2, &back, &rec, &err)); /* the digest still holds */
    assert_string_equal(rec.channels[1].label, "t=0.50 s");
    free(rec.parameters_json);
    pl_map_free(back);
    pl_store_close(st2);

    db = raw_open(old);
    assert_int_equal(raw_int(db, "PRAGMA user_version"), PL_STORE_SCHEMA_VERSION);
    char name[64];
    snprintf(name, sizeof name, "SELECT value FROM store_info WHERE name = 'schema.%04d'",
             PL_STORE_SCHEMA_VERSION);
    char *history = raw_text(db, name);
    assert_non_null(strstr(history, pl__migrations[PL_STORE_SCHEMA_VERSION - 1].name));
    assert_non_null(strstr(history, pl_version()));
    free(history);
    char *after = raw_text(db, rows);
    assert_string_equal(before, after);
    /* from now on a site's method must be a known one */
    assert_int_not_equal(sqlite3_exec(db, "INSERT INTO site (airframe_key, code, method, "
                                      "coord_system, coord_unit, origin_x, origin_y, origin_z, "
                                      "u_x, u_y, u_z, v_x, v_y, v_z, width_px, height_px, "
                                      "pitch_u_mm, pitch_v_mm, recorded_at) VALUES (1, 'F09', "
                                      "'x-ray', 'STA', 'mm', 0, 0, 0, 1, 0, 0, 0, 1, 0, 0, 0, "
                                      "1, 1, 'now')", NULL, NULL, NULL), SQLITE_OK);
    assert_int_equal(sqlite3_extended_errcode(db), SQLITE_CONSTRAINT_TRIGGER);
    /* from schema 3 on a new inspection says whether it is simulated */
    assert_int_not_equal(sqlite3_exec(db, "INSERT INTO inspection (site_key, kind, "
                                      "performed_on, procedure, procedure_rev, equipment, "
                                      "calibration_ref, inspector, inspector_level, "
                                      "software_version, recorded_at) VALUES (1, 'unscheduled', "
                                      "'2035-02-01', 'P', 'A', 'E', 'C', 'I', '2', '0.1.0', "
                                      "'now')", NULL, NULL, NULL), SQLITE_OK);
    assert_int_equal(sqlite3_extended_errcode(db), SQLITE_CONSTRAINT_TRIGGER);
    sqlite3_close(db);
    TU_OK(pl_store_open(&st2, old, 0, &err));
    pl_site s = site("OLD-0001", "F02");
    TU_OK(pl_store_add_site(st2, &s, NULL, &err));
    /* rows recorded before schema 3 do not say whether they were simulated,
     * and a correction of one may leave it unsaid; a new record must say */
    pl_inspection got;
    memset(&got, 0, sizeof got);
    TU_OK(pl_store_get_inspection(st2, 1, &got, &err));
    assert_int_equal(got.simulated, -1);
    snprintf(got.notes, sizeof got.notes, "baseline of the old store");
    TU_OK(pl_store_correct_inspection(st2, 1, &got, "notes added", NULL, &err));
    pl_inspection_clear(&got);
    TU_OK(pl_store_get_inspection(st2, 1, &got, &err));
    assert_int_equal(got.simulated, -1);
    assert_string_equal(got.notes, "baseline of the old store");
    snprintf(got.performed_on, sizeof got.performed_on, "2035-03-01");
    snprintf(got.kind, sizeof got.kind, "unscheduled");
    expect_fail(pl_store_add_inspection(st2, &got, NULL, &err), PL_EINVAL, &err, "simulated");
    pl_inspection_clear(&got);
    pl_store_close(st2);
    free(before);
    free(after);
    check_integrity(old);
    free(old);
}

/*
 * The schema version is made, not written: the build counts the numbered
 * files in schema/ (schema/embed.py), so PL_STORE_SCHEMA_VERSION, the
 * migrations compiled in and the files in the source tree all agree, and
 * a schema file forgotten in lib/meson.build is noticed.
 */
static void test_store__schema_version_is_the_number_of_schema_files(void **state)
{
    (void)state;
    const char *root = getenv("PL_SOURCE_ROOT");
    if (!root)
        fail_msg("PL_SOURCE_ROOT is not set (run through meson test)");
    char *dir = tu_path(root, "schema");
    DIR *d = opendir(dir);
    if (!d)
        fail_msg("%s: cannot list", dir);
    int files = 0;
    for (struct dirent *e; (e = readdir(d));) {
        const char *n = e->d_name;
        size_t len = strlen(n);
        if (len > 9 && strspn(n, "0123456789") == 4 && n[4] == '_' &&
            strcmp(n + len - 4, ".sql") == 0)
            files++;
    }
    closedir(d);
    free(dir);
    assert_int_equal(files, PL_STORE_SCHEMA_VERSION);
    assert_int_equal(pl__migration_count, PL_STORE_SCHEMA_VERSION);
    assert_int_equal(pl__migrations[pl__migration_count - 1].version, PL_STORE_SCHEMA_VERSION);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
#define T(name) cmocka_unit_test_setup_teardown(name, setup, teardown)
        T(test_store__create_and_reopen),
        T(test_store__open_missing_path),
        T(test_store__open_refuses_a_file_that_is_not_sqlite),
        T(test_store__open_refuses_a_foreign_database),
        T(test_store__open_refuses_a_newer_schema),
        T(test_store__migrates_from_version_zero),
        T(test_store__every_table_refuses_update_and_delete),
        T(test_store__corrections_supersede_and_keep_history),
        T(test_store__refuses_duplicates),
        T(test_store__keys_keep_to_one_alphabet_without_case),
        T(test_store__validates_records_with_clear_messages),
        T(test_store__numbers_keep_to_their_bounds),
        T(test_store__dates_agree_with_sqlite_calendar),
        T(test_store__sqlite_refusals_map_to_status_codes),
        T(test_store__map_round_trip_is_bit_exact),
        T(test_store__load_map_detects_tampering),
        T(test_store__map_must_fit_its_site),
        T(test_store__rollback_leaves_the_store_as_it_was),
        T(test_store__listings_filter_and_order),
        T(test_store__summary_counts_the_record),
        T(test_store__registrations_and_comparisons),
        T(test_store__schema_checks_equal_the_vocabularies),
        T(test_store__refuses_inspections_out_of_chronology),
        T(test_store__corrections_keep_the_record_sound),
        T(test_store__simulated_never_serves_as_a_real_baseline),
        T(test_store__previous_schema_migrates_and_keeps_its_rows),
        T(test_store__indications_and_changes_of_a_comparison),
        T(test_store__migration_5_keeps_a_store_whose_indication_tables_hold_rows),
        T(test_store__schema_version_is_the_number_of_schema_files),
        T(test_store__a_writer_waits_for_another_and_writes),
        T(test_store__a_writer_that_waits_too_long_says_so_plainly),
#undef T
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
