/*
 * test_package.c - the hand-over package (plyledger/package.h): export,
 * check and import, and the packages a receiver must refuse.
 *
 * External checks: the package is read here with SQLite's own API alone
 * (journal mode, application_id, the manifest and its signature, checked
 * with libsodium's Ed25519 through pl_sign_check(), itself checked against
 * RFC 8032 in test_sign.c); tests/cli/package.sh checks a package with the
 * sqlite3 shell, sha256sum and openssl as README.md says a receiver can.
 * Serials, people and references are invented.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <dirent.h>
#include <math.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "plyledger.h"
#include "testutil.h"

#define SERIAL "TLX-0001"

typedef struct fixture {
    char *dir;
    char *src;   /* the sending store */
    char *pkg;   /* the package */
    char *dst;   /* a receiving store */
    pl_sign_key src_key, dst_key, insp, eng;
    int64_t af_links, store_links;  /* the sending store's chains, as filled */
} fixture;

static void key_of(pl_sign_key *k, unsigned char b)
{
    unsigned char seed[32];
    memset(seed, b, sizeof seed);
    pl_sign_key_from_seed(k, seed);
}

/* A new store at `path`, sealed with `key`. */
static pl_store *sealed_store(const char *path, const pl_sign_key *key)
{
    pl_store *st;
    pl_err err = { 0 };
    TU_OK(pl_store_create(&st, path, &err));
    TU_OK(pl_store_seal(st, key, &err));
    TU_OK(pl_store_set_today(st, "2026-06-30", &err));
    return st;
}

static pl_store *open_store(const char *path, const pl_sign_key *key)
{
    pl_store *st;
    pl_err err = { 0 };
    TU_OK(pl_store_open(&st, path, 0, &err));
    TU_OK(pl_store_set_seal_key(st, key, &err));
    TU_OK(pl_store_set_today(st, "2026-06-30", &err));
    return st;
}

static void add_airframe(pl_store *st, const char *serial, const char *type)
{
    pl_airframe af;
    memset(&af, 0, sizeof af);
    snprintf(af.serial, sizeof af.serial, "%s", serial);
    snprintf(af.aircraft_type, sizeof af.aircraft_type, "%s", type);
    snprintf(af.manufactured, sizeof af.manufactured, "2015-06-30");
    pl_err err = { 0 };
    TU_OK(pl_store_add_airframe(st, &af, NULL, &err));
}

static void add_site(pl_store *st, const char *serial, const char *code)
{
    pl_site s;
    memset(&s, 0, sizeof s);
    snprintf(s.airframe_serial, sizeof s.airframe_serial, "%s", serial);
    snprintf(s.code, sizeof s.code, "%s", code);
    snprintf(s.zone, sizeof s.zone, "wing root");
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
    pl_err err = { 0 };
    TU_OK(pl_store_add_site(st, &s, NULL, &err));
}

/* An inspection of site F01 with a map of `channels` channels; its key. */
static pl_id add_inspection(pl_store *st, const char *kind, const char *date, int channels,
                            float offset)
{
    pl_inspection in;
    memset(&in, 0, sizeof in);
    snprintf(in.airframe_serial, sizeof in.airframe_serial, SERIAL);
    snprintf(in.site_code, sizeof in.site_code, "F01");
    snprintf(in.kind, sizeof in.kind, "%s", kind);
    snprintf(in.performed_on, sizeof in.performed_on, "%s", date);
    in.aircraft_hours = NAN;
    in.aircraft_cycles = -1;
    snprintf(in.procedure, sizeof in.procedure, "NDT-51-10-01");
    snprintf(in.procedure_rev, sizeof in.procedure_rev, "C");
    snprintf(in.equipment, sizeof in.equipment, "test rig");
    snprintf(in.calibration_ref, sizeof in.calibration_ref, "REF-STD-07");
    snprintf(in.inspector, sizeof in.inspector, "t.inspect");
    snprintf(in.inspector_level, sizeof in.inspector_level, "2");
    pl_id id;
    pl_err err = { 0 };
    TU_OK(pl_store_add_inspection(st, &in, &id, &err));
    pl_map *m;
    TU_OK(pl_map_new(&m, 8, 6, (size_t)channels, &err));
    for (size_t i = 0; i < 48 * (size_t)channels; i++)
        m->data[i] = 0.01f * (float)i + offset;
    TU_OK(pl_map_set_channel(m, 0, "temperature-contrast", "K", &err));
    if (channels > 1)
        TU_OK(pl_map_set_channel(m, 1, "depth", "mm", &err));
    m->pitch_u = m->pitch_v = 0.5;
    snprintf(m->placement.system, sizeof m->placement.system, "STA/BL/WL");
    pl_map_record r;
    memset(&r, 0, sizeof r);
    r.inspection_key = id;
    snprintf(r.source, sizeof r.source, "scans/F01-%s.npy", date);
    snprintf(r.origin, sizeof r.origin, "import-npy");
    TU_OK(pl_store_add_map(st, &r, m, NULL, &err));
    pl_map_free(m);
    pl_inspection back;
    TU_OK(pl_store_get_inspection(st, id, &back, &err));
    pl_id key = back.key;
    pl_inspection_clear(&back);
    return key;
}

static const char criteria_text[] =
    "{\"format\": \"plyledger-criteria\", \"format_version\": 1, \"name\": \"TEST-LIMITS\","
    " \"revision\": \"A\", \"source_document\": \"TEST-DOC-01\", \"example_values\": true,"
    " \"repeatability\": {\"area_mm2\": 10}, \"rules\": [{\"name\": \"skin\","
    " \"kind\": \"no-growth\", \"method\": \"flash-thermography\","
    " \"quantity\": \"temperature-contrast\", \"contrast_unit\": \"K\","
    " \"repeatability_contrast\": 0.05, \"min_reportable_area_mm2\": 20,"
    " \"new_reportable_area_mm2\": 20, \"vanished\": \"investigate\"}]}";

static void person(pl_store *st, const char *handle, const char *role, const pl_sign_key *k)
{
    pl_person p;
    memset(&p, 0, sizeof p);
    snprintf(p.handle, sizeof p.handle, "%s", handle);
    snprintf(p.name, sizeof p.name, "Person %s", handle);
    snprintf(p.role, sizeof p.role, "%s", role);
    pl_err err = { 0 };
    TU_OK(pl_store_add_person(st, &p, NULL, &err));
    pl_person_key pk;
    memset(&pk, 0, sizeof pk);
    snprintf(pk.handle, sizeof pk.handle, "%s", handle);
    pl_sha256_hex(pk.public_key, k->public_key);
    snprintf(pk.valid_from, sizeof pk.valid_from, "2020-01-01");
    TU_OK(pl_store_add_person_key(st, &pk, NULL, &err));
}

/* The airframe's and the store's chain lengths in a store. */
static void chain_lengths(const char *path, int64_t *af, int64_t *store)
{
    sqlite3 *db;
    assert_int_equal(sqlite3_open_v2(path, &db, SQLITE_OPEN_READONLY, NULL), SQLITE_OK);
    sqlite3_stmt *st;
    assert_int_equal(sqlite3_prepare_v2(db,
                                        "SELECT (SELECT count(*) FROM ledger l JOIN airframe a "
                                        "ON a.id = l.chain WHERE a.serial = ?1), "
                                        "(SELECT count(*) FROM ledger WHERE chain IS NULL)",
                                        -1, &st, NULL),
                     SQLITE_OK);
    sqlite3_bind_text(st, 1, SERIAL, -1, SQLITE_STATIC);
    assert_int_equal(sqlite3_step(st), SQLITE_ROW);
    *af = sqlite3_column_int64(st, 0);
    *store = sqlite3_column_int64(st, 1);
    sqlite3_finalize(st);
    sqlite3_close(db);
}

/*
 * The sending store: two airframes (the second stays home), an operator
 * change, sites, two inspections of TLX-0001 with maps of one and two
 * channels, a criteria set, a comparison under it with a change, the
 * register's inspector and engineer with their keys, a signed
 * interpretation and a signed disposition: every kind of row and both
 * chains.
 */
static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    assert_non_null(f);
    f->dir = tu_tmpdir();
    f->src = tu_path(f->dir, "sender.db");
    f->pkg = tu_path(f->dir, "TLX-0001.package");
    f->dst = tu_path(f->dir, "receiver.db");
    key_of(&f->src_key, 0x21);
    key_of(&f->dst_key, 0x31);
    key_of(&f->insp, 0x41);
    key_of(&f->eng, 0x42);
    pl_store *st = sealed_store(f->src, &f->src_key);
    pl_err err = { 0 };
    add_airframe(st, SERIAL, "TLX-T1");
    add_airframe(st, "TLX-0002", "TLX-T1");
    TU_OK(pl_store_add_operator(st, SERIAL, "Operator B", "2019-04-01", &err));
    add_site(st, SERIAL, "F01");
    add_site(st, "TLX-0002", "F01");
    pl_id base = add_inspection(st, "baseline", "2016-01-10", 1, 0);
    pl_id cur = add_inspection(st, "scheduled", "2022-03-01", 2, 1);
    pl_criteria *c;
    pl_id crit;
    TU_OK(pl_criteria_parse(&c, criteria_text, strlen(criteria_text), "criteria.json", &err));
    TU_OK(pl_store_add_criteria(st, c, &crit, NULL, &err));
    pl_criteria_free(c);
    pl_comparison_record cmp;
    memset(&cmp, 0, sizeof cmp);
    cmp.baseline_inspection = base;
    cmp.current_inspection = cur;
    cmp.criteria_id = crit;
    snprintf(cmp.status, sizeof cmp.status, "done");
    cmp.uncompared_mm2 = cmp.uncompared_fraction = 0;
    pl_id cmp_id, chg;
    TU_OK(pl_store_add_comparison(st, &cmp, &cmp_id, &err));
    pl_change_record r;
    memset(&r, 0, sizeof r);
    r.comparison_id = cmp_id;
    r.number = 1;
    snprintf(r.class_, sizeof r.class_, "new");
    snprintf(r.matched_by, sizeof r.matched_by, "none");
    snprintf(r.sizing, sizeof r.sizing, "threshold");
    char none[] = "[]", one[] = "[1]";
    r.baseline_labels = none;
    r.current_labels = one;
    r.area_baseline_mm2 = r.area_delta_mm2 = r.area_delta_percent = NAN;
    r.area_current_mm2 = 180;
    r.area_baseline_halfmax_mm2 = r.area_current_halfmax_mm2 = r.area_delta_halfmax_mm2 = NAN;
    r.contrast_baseline = r.contrast_current = r.contrast_delta = NAN;
    r.centroid_col = r.centroid_row = 3;
    r.distance_px = NAN;
    r.area_limit_mm2 = 20;
    r.area_measured_mm2 = 180;
    r.area_margin_mm2 = -160;
    r.area_exceeds = 1;
    r.contrast_limit = r.contrast_margin = NAN;
    r.reportable = r.exceeds = 1;
    r.region_pixels = r.touches = -1;
    TU_OK(pl_store_add_change(st, &r, &chg, &err));
    person(st, "t.inspect", "inspector", &f->insp);
    person(st, "e.decide", "engineer", &f->eng);
    pl_interpretation in;
    memset(&in, 0, sizeof in);
    in.change_id = chg;
    snprintf(in.class_, sizeof in.class_, "relevant");
    snprintf(in.handle, sizeof in.handle, "t.inspect");
    snprintf(in.signed_on, sizeof in.signed_on, "2022-03-05");
    TU_OK(pl_store_add_interpretation(st, &in, &f->insp, NULL, &err));
    pl_disposition d;
    memset(&d, 0, sizeof d);
    d.comparison_id = cmp_id;
    snprintf(d.decision, sizeof d.decision, "accept");
    d.due_hours = NAN;
    d.due_cycles = -1;
    snprintf(d.handle, sizeof d.handle, "e.decide");
    snprintf(d.signed_on, sizeof d.signed_on, "2022-03-10");
    TU_OK(pl_store_add_disposition(st, &d, &chg, 1, &f->eng, NULL, &err));
    pl_store_close(st);
    chain_lengths(f->src, &f->af_links, &f->store_links);
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    free(f->src);
    free(f->pkg);
    free(f->dst);
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

static int64_t raw_int(const char *path, const char *sql)
{
    sqlite3 *db = NULL;
    assert_int_equal(sqlite3_open_v2(path, &db, SQLITE_OPEN_READONLY, NULL), SQLITE_OK);
    sqlite3_stmt *st;
    if (sqlite3_prepare_v2(db, sql, -1, &st, NULL) != SQLITE_OK)
        fail_msg("%s: %s", sql, sqlite3_errmsg(db));
    assert_int_equal(sqlite3_step(st), SQLITE_ROW);
    int64_t v = sqlite3_column_int64(st, 0);
    sqlite3_finalize(st);
    sqlite3_close(db);
    return v;
}

/* The first column of the first row `sql` gives, as text (malloc'd). */
static char *raw_text(const char *path, const char *sql)
{
    sqlite3 *db = NULL;
    assert_int_equal(sqlite3_open_v2(path, &db, SQLITE_OPEN_READONLY, NULL), SQLITE_OK);
    sqlite3_stmt *st;
    if (sqlite3_prepare_v2(db, sql, -1, &st, NULL) != SQLITE_OK)
        fail_msg("%s: %s", sql, sqlite3_errmsg(db));
    assert_int_equal(sqlite3_step(st), SQLITE_ROW);
    const unsigned char *t = sqlite3_column_text(st, 0);
    char *v = strdup(t ? (const char *)t : "");
    sqlite3_finalize(st);
    sqlite3_close(db);
    return v;
}

/* Everything a failed import must leave as it was: every link in order,
 * the seals, the seal keys and the rows of every table. */
static char *store_state(const char *path)
{
    return raw_text(path,
                    "SELECT (SELECT count(*) FROM ledger) || '/' || (SELECT count(*) FROM "
                    "ledger_seal) || '/' || (SELECT count(*) FROM seal_key) || '/' || "
                    "(SELECT count(*) FROM airframe) || '/' || (SELECT count(*) FROM map) || "
                    "'/' || (SELECT count(*) FROM map_channel) || '/' || (SELECT count(*) FROM "
                    "person) || '/' || coalesce((SELECT group_concat(link, ',') FROM (SELECT "
                    "link FROM ledger ORDER BY id)), '')");
}

static void copy_file(const char *from, const char *to)
{
    size_t n = 0;
    unsigned char *b = tu_read_file(from, &n);
    assert_non_null(b);
    assert_int_equal(tu_write_file(to, b, n), 0);
    free(b);
}

/* Files in the folder whose name ends in ".partial" (none may be left). */
static int partial_files(const char *dir)
{
    DIR *d = opendir(dir);
    assert_non_null(d);
    int n = 0;
    struct dirent *e;
    while ((e = readdir(d))) {
        size_t len = strlen(e->d_name);
        n += len > 8 && strcmp(e->d_name + len - 8, ".partial") == 0;
    }
    closedir(d);
    return n;
}

static void export_package(fixture *f, pl_package_result *res)
{
    pl_store *st = open_store(f->src, &f->src_key);
    pl_err err = { 0 };
    TU_OK(pl_package_export(st, SERIAL, f->pkg, NULL, res, &err));
    pl_store_close(st);
}

static pl_verify_result verify(const char *path, unsigned flags)
{
    pl_store *st;
    pl_err err = { 0 };
    TU_OK(pl_store_open(&st, path, flags, &err));
    pl_verify_result res;
    TU_OK(pl_store_verify(st, &res, NULL, &err));
    pl_store_close(st);
    return res;
}

static int import_package(fixture *f, const char *pkg, pl_package_result *res, pl_err *err)
{
    pl_store *st = open_store(f->dst, &f->dst_key);
    int rc = pl_package_import(st, pkg, NULL, res, err);
    pl_store_close(st);
    return rc;
}

/* ---- export and check ------------------------------------------------------------- */

/* The package holds the airframe's chain and the store's, nothing of the
 * other airframe, checks sound, and is a plain SQLite file in rollback
 * mode with the package's application_id and a manifest signed by the
 * sending store's seal key. */
static void test_package__export_is_a_sound_plain_sqlite_file(void **state)
{
    fixture *f = *state;
    /* eleven links of the airframe: itself, the operator change, the site,
     * two inspections, two maps, the comparison, the change, the
     * interpretation and the disposition; five of the store: the criteria
     * set, two people and their keys */
    assert_int_equal(f->af_links, 11);
    assert_int_equal(f->store_links, 5);
    pl_package_result res;
    export_package(f, &res);
    assert_int_equal(res.faults, 0);
    assert_string_equal(res.serial, SERIAL);
    assert_int_equal(res.airframe_links, f->af_links);
    assert_int_equal(res.store_links, f->store_links);
    assert_int_equal(res.maps, 2);
    assert_int_equal(res.seals, f->af_links + f->store_links);
    struct stat sb;
    assert_int_equal(stat(f->pkg, &sb), 0);
    assert_int_equal(res.bytes, (int64_t)sb.st_size);
    print_message("package of a small airframe (%lld links, 2 maps of 8 x 6): %lld bytes\n",
                  (long long)(res.airframe_links + res.store_links), (long long)res.bytes);
    char fp[PL_SIGN_FINGERPRINT_SIZE];
    pl_sign_fingerprint(fp, f->src_key.public_key);
    assert_string_equal(res.seal_key, fp);
    assert_int_equal(partial_files(f->dir), 0);

    /* plain SQLite */
    char *mode = raw_text(f->pkg, "PRAGMA journal_mode");
    assert_string_equal(mode, "delete");
    free(mode);
    assert_int_equal(raw_int(f->pkg, "PRAGMA application_id"), PL_PACKAGE_APPLICATION_ID);
    assert_int_equal(raw_int(f->pkg, "PRAGMA user_version"), PL_STORE_SCHEMA_VERSION);
    assert_int_equal(raw_int(f->pkg, "SELECT count(*) FROM airframe"), 1);
    assert_int_equal(raw_int(f->pkg, "SELECT count(*) FROM site"), 1);
    assert_int_equal(raw_int(f->pkg, "SELECT count(*) FROM map_channel"), 3);
    assert_int_equal(raw_int(f->pkg, "SELECT count(*) FROM person"), 2);
    assert_int_equal(raw_int(f->pkg, "SELECT count(*) FROM person_key"), 2);
    assert_int_equal(raw_int(f->pkg, "SELECT count(*) FROM disposition"), 1);
    assert_int_equal(raw_int(f->pkg, "SELECT count(*) FROM ledger"), f->af_links + f->store_links);
    assert_int_equal(raw_int(f->pkg, "SELECT count(*) FROM seal_key WHERE origin = 'own'"), 1);
    assert_int_equal(raw_int(f->pkg, "SELECT count(*) FROM package_manifest WHERE name = "
                                     "'rows.map_channel' AND value = '3'"), 1);
    /* rows keep their ids: the sender's site of TLX-0001 is row 1, its maps
     * rows 1 and 2 */
    assert_int_equal(raw_int(f->pkg, "SELECT count(*) FROM site WHERE id = 1"), 1);
    assert_int_equal(raw_int(f->pkg, "SELECT count(*) FROM map WHERE id IN (1, 2)"), 2);

    /* the manifest's signature, rebuilt from its rows as package.h says */
    char *text = raw_text(f->pkg,
                          "SELECT 'plyledger-package-manifest 1' || char(10) || group_concat("
                          "name || '=' || value || char(10), '') FROM (SELECT name, value FROM "
                          "package_manifest WHERE name <> 'manifest_signature' ORDER BY name)");
    char *sig_hex = raw_text(f->pkg, "SELECT value FROM package_manifest WHERE name = "
                                     "'manifest_signature'");
    assert_int_equal(strlen(sig_hex), 128);
    unsigned char sig[64];
    for (int i = 0; i < 64; i++) {
        unsigned v;
        assert_int_equal(sscanf(sig_hex + 2 * i, "%2x", &v), 1);
        sig[i] = (unsigned char)v;
    }
    assert_true(pl_sign_check(sig, text, strlen(text), f->src_key.public_key));
    text[strlen(text) - 2] ^= 1;
    assert_false(pl_sign_check(sig, text, strlen(text), f->src_key.public_key));
    free(text);
    free(sig_hex);

    /* a read-only store: verify passes, the listings read it; never written */
    pl_verify_result v = verify(f->pkg, PL_STORE_READONLY);
    if (v.faults)
        fail_msg("%s", v.message);
    assert_int_equal(v.links, (size_t)(f->af_links + f->store_links));
    assert_int_equal(v.signatures, 2);
    pl_store *st;
    pl_err err = { 0 };
    TU_OK(pl_store_open(&st, f->pkg, PL_STORE_READONLY, &err));
    pl_airframe af;
    TU_OK(pl_store_get_airframe(st, SERIAL, &af, &err));
    assert_string_equal(af.operator_name, "Operator B");
    assert_int_equal(pl_store_get_airframe(st, "TLX-0002", &af, &err), PL_ENOTFOUND);
    pl_store_close(st);
    assert_int_equal(pl_store_open(&st, f->pkg, 0, &err), PL_ENOTSTORE);
    tu_assert_msg_has(err.msg, "hand-over package");

    /* check on its own, with the sender's fingerprint and with another */
    pl_package_result c;
    pl_package_options o = PL_PACKAGE_OPTIONS_INIT;
    o.sender_key = fp;
    TU_OK(pl_package_check(f->pkg, &o, &c, &err));
    assert_int_equal(c.faults, 0);
    assert_int_equal(c.rows, res.rows);
    char other[PL_SIGN_FINGERPRINT_SIZE];
    pl_sign_fingerprint(other, f->dst_key.public_key);
    o.sender_key = other;
    TU_OK(pl_package_check(f->pkg, &o, &c, &err));
    assert_int_equal(c.fault, PL_PACKAGE_FAULT_MANIFEST);
    tu_assert_msg_has(c.message, "as its sender said");
}

/* What an export refuses, leaving no file behind and a file it may not
 * replace as it was. */
static void test_package__export_refusals(void **state)
{
    fixture *f = *state;
    pl_package_result res;
    pl_err err = { 0 };
    pl_store *st;
    /* no seal key given */
    TU_OK(pl_store_open(&st, f->src, 0, &err));
    assert_int_equal(pl_package_export(st, SERIAL, f->pkg, NULL, &res, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, "needs the store's seal key");
    pl_store_close(st);
    /* an unsealed store */
    char *plain = tu_path(f->dir, "unsealed.db");
    TU_OK(pl_store_create(&st, plain, &err));
    assert_int_equal(pl_package_export(st, SERIAL, f->pkg, NULL, &res, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, "not sealed");
    pl_store_close(st);
    st = open_store(f->src, &f->src_key);
    /* no such airframe */
    assert_int_equal(pl_package_export(st, "TLX-9999", f->pkg, NULL, &res, &err), PL_ENOTFOUND);
    /* onto the store, its -wal, or another store */
    assert_int_equal(pl_package_export(st, SERIAL, f->src, NULL, &res, &err), PL_EINVAL);
    char *wal = tu_path(f->dir, "sender.db-wal");
    assert_int_equal(pl_package_export(st, SERIAL, wal, NULL, &res, &err), PL_EINVAL);
    free(wal);
    size_t before_n = 0;
    unsigned char *before = tu_read_file(plain, &before_n);
    assert_int_equal(pl_package_export(st, SERIAL, plain, NULL, &res, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, "never replaces");
    size_t after_n = 0;
    unsigned char *after = tu_read_file(plain, &after_n);
    assert_true(before_n == after_n && memcmp(before, after, before_n) == 0);
    free(before);
    free(after);
    free(plain);
    pl_store_close(st);
    assert_int_equal(access(f->pkg, F_OK), -1);
    /* a record that does not verify is not handed over */
    tamper(f->src, "site_no_update", "UPDATE site SET zone = 'fin' WHERE id = 1");
    st = open_store(f->src, &f->src_key);
    assert_int_equal(pl_package_export(st, SERIAL, f->pkg, NULL, &res, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, "did not check");
    tu_assert_msg_has(err.msg, "site record 1");
    /* ... but the other airframe's record still is */
    char *other = tu_path(f->dir, "TLX-0002.package");
    TU_OK(pl_package_export(st, "TLX-0002", other, NULL, &res, &err));
    assert_int_equal(res.airframe_links, 2);
    free(other);
    pl_store_close(st);
    assert_int_equal(access(f->pkg, F_OK), -1);
    assert_int_equal(partial_files(f->dir), 0);
}

/* ---- import ------------------------------------------------------------------------ */

/* Into a fresh sealed store: every row, verify passes, the sender's key
 * is a received key of both chains, and the receiver can go on recording;
 * a second import changes nothing and says so. */
static void test_package__import_into_a_fresh_store(void **state)
{
    fixture *f = *state;
    pl_package_result res;
    export_package(f, &res);
    pl_store *st = sealed_store(f->dst, &f->dst_key);
    pl_store_close(st);
    pl_err err = { 0 };
    /* inside a caller's transaction, it goes with it */
    char *empty = store_state(f->dst);
    st = open_store(f->dst, &f->dst_key);
    TU_OK(pl_store_begin(st, &err));
    TU_OK(pl_package_import(st, f->pkg, NULL, &res, &err));
    assert_int_equal(res.imported_airframe_links, f->af_links);
    pl_store_rollback(st);
    pl_store_close(st);
    char *still = store_state(f->dst);
    assert_string_equal(empty, still);
    free(empty);
    free(still);
    TU_OK(import_package(f, f->pkg, &res, &err));
    assert_int_equal(res.already, 0);
    assert_int_equal(res.imported_airframe_links, f->af_links);
    assert_int_equal(res.imported_store_links, f->store_links);
    assert_int_equal(res.received_keys, 2);
    /* every recorded row, with its channels */
    assert_int_equal(res.imported_rows, f->af_links + f->store_links + 3);
    pl_verify_result v = verify(f->dst, 0);
    if (v.faults)
        fail_msg("%s", v.message);
    assert_int_equal(v.links, (size_t)(f->af_links + f->store_links));
    assert_int_equal(v.signatures, 2);
    static const char *const tables[] = { "airframe", "airframe_operator", "site", "inspection",
                                          "map", "map_channel", "comparison", "indication_change",
                                          "criteria", "person", "person_key", "interpretation",
                                          "disposition", "ledger", "ledger_seal" };
    for (size_t i = 0; i < sizeof tables / sizeof tables[0]; i++) {
        char sql[128];
        snprintf(sql, sizeof sql, "SELECT count(*) FROM %s", tables[i]);
        int64_t want = raw_int(f->pkg, sql), got = raw_int(f->dst, sql);
        if (want != got)
            fail_msg("%s: %lld rows received, the package has %lld", tables[i], (long long)got,
                     (long long)want);
    }
    /* the same rows, byte for byte, map data included */
    char *a = raw_text(f->pkg, "SELECT group_concat(hex(data)) FROM (SELECT data FROM map "
                               "ORDER BY id)");
    char *b = raw_text(f->dst, "SELECT group_concat(hex(data)) FROM (SELECT data FROM map "
                               "ORDER BY id)");
    assert_string_equal(a, b);
    free(a);
    free(b);
    assert_int_equal(raw_int(f->dst, "SELECT count(*) FROM seal_key WHERE origin = 'received' "
                                     "AND source LIKE 'package TLX-0001.package from store %'"),
                     2);
    assert_int_equal(raw_int(f->dst, "SELECT max(through_seq) FROM seal_key WHERE origin = "
                                     "'received' AND chain IS NOT NULL"), f->af_links);
    /* the receiver records on; its own key seals it */
    st = open_store(f->dst, &f->dst_key);
    TU_OK(pl_store_add_operator(st, SERIAL, "Operator C", "2026-01-15", &err));
    pl_store_close(st);
    v = verify(f->dst, 0);
    if (v.faults)
        fail_msg("%s", v.message);
    /* again: nothing new */
    char *before = store_state(f->dst);
    TU_OK(import_package(f, f->pkg, &res, &err));
    assert_int_equal(res.already, 1);
    assert_int_equal(res.imported_airframe_links + res.imported_store_links, 0);
    char *after = store_state(f->dst);
    assert_string_equal(before, after);
    free(before);
    free(after);
}

/* Handed back: the receiver's later links come home to the sender, whose
 * chain is the beginning of the package's; an older package after a newer
 * one is nothing new. */
static void test_package__handed_back_with_more(void **state)
{
    fixture *f = *state;
    pl_package_result res;
    pl_err err = { 0 };
    export_package(f, &res);
    pl_store *st = sealed_store(f->dst, &f->dst_key);
    pl_store_close(st);
    TU_OK(import_package(f, f->pkg, &res, &err));
    st = open_store(f->dst, &f->dst_key);
    TU_OK(pl_store_add_operator(st, SERIAL, "Operator C", "2026-01-15", &err));
    char *back = tu_path(f->dir, "back.package");
    TU_OK(pl_package_export(st, SERIAL, back, NULL, &res, &err));
    pl_store_close(st);
    assert_int_equal(res.airframe_links, f->af_links + 1);
    /* links sealed by the sender, received there, and one of the receiver's */
    assert_int_equal(res.seal_keys, 3);
    st = open_store(f->src, &f->src_key);
    TU_OK(pl_package_import(st, back, NULL, &res, &err));
    pl_store_close(st);
    assert_int_equal(res.already, 0);
    assert_int_equal(res.imported_airframe_links, 1);
    assert_int_equal(res.imported_store_links, 0);
    assert_int_equal(res.received_keys, 1);
    pl_verify_result v = verify(f->src, 0);
    if (v.faults)
        fail_msg("%s", v.message);
    assert_int_equal(raw_int(f->src, "SELECT count(*) FROM airframe_operator WHERE "
                                     "operator_name = 'Operator C'"), 1);
    /* the first package again, at the sender: all of it is there */
    st = open_store(f->src, &f->src_key);
    TU_OK(pl_package_import(st, f->pkg, NULL, &res, &err));
    assert_int_equal(res.already, 1);
    pl_store_close(st);
    free(back);
}

/* A later package of the same sender cannot extend a chain that sender's
 * key was received for: the store keeps one received row per key and
 * chain (schema 7), so it is refused and nothing imported. */
static void test_package__a_later_package_of_the_same_sender_is_refused(void **state)
{
    fixture *f = *state;
    pl_package_result res;
    pl_err err = { 0 };
    export_package(f, &res);
    pl_store *st = sealed_store(f->dst, &f->dst_key);
    pl_store_close(st);
    TU_OK(import_package(f, f->pkg, &res, &err));
    st = open_store(f->src, &f->src_key);
    TU_OK(pl_store_add_operator(st, SERIAL, "Operator C", "2026-01-15", &err));
    char *later = tu_path(f->dir, "later.package");
    TU_OK(pl_package_export(st, SERIAL, later, NULL, &res, &err));
    pl_store_close(st);
    char *before = store_state(f->dst);
    assert_int_equal(import_package(f, later, &res, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, "one received row per key and chain");
    char *after = store_state(f->dst);
    assert_string_equal(before, after);
    free(before);
    free(after);
    free(later);
}

/* Each attack on a copy of the package: check names the fault, import
 * refuses it and leaves the receiving store exactly as it was. */
static void refused(fixture *f, const char *pkg, pl_package_fault kind, pl_fault record,
                    const char *words)
{
    pl_package_result res;
    pl_err err = { 0 };
    TU_OK(pl_package_check(pkg, NULL, &res, &err));
    if (res.faults == 0)
        fail_msg("%s: the check found no fault (expected: %s)", pkg, words);
    if (res.fault != kind || (kind == PL_PACKAGE_FAULT_RECORD && res.record_fault != record))
        fail_msg("%s: fault %s (%s), expected %s: %s", pkg, pl_package_fault_name(res.fault),
                 pl_fault_name(res.record_fault), pl_package_fault_name(kind), res.message);
    tu_assert_msg_has(res.message, words);
    char *before = store_state(f->dst);
    assert_int_equal(import_package(f, pkg, &res, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, words);
    tu_assert_msg_has(err.msg, "nothing was imported");
    char *after = store_state(f->dst);
    assert_string_equal(before, after);
    free(before);
    free(after);
}

static void test_package__tampered_packages_are_refused(void **state)
{
    fixture *f = *state;
    pl_package_result res;
    export_package(f, &res);
    pl_store *st = sealed_store(f->dst, &f->dst_key);
    pl_store_close(st);
    char *p = tu_path(f->dir, "tampered.package");

    /* a value changed with the triggers dropped and put back */
    copy_file(f->pkg, p);
    tamper(p, "site_no_update", "UPDATE site SET zone = 'fin' WHERE id = 1");
    refused(f, p, PL_PACKAGE_FAULT_RECORD, PL_FAULT_ROW_CHANGED,
            "differs from what was recorded");
    /* a manifest value changed */
    copy_file(f->pkg, p);
    raw(p, "UPDATE package_manifest SET value = '2030-01-01T00:00:00.000Z' WHERE name = "
           "'exported_at'");
    refused(f, p, PL_PACKAGE_FAULT_MANIFEST, PL_FAULT_NONE, "signature");
    /* a map's data replaced by the other map's (its stored digest left) */
    copy_file(f->pkg, p);
    tamper(p, "map_no_update", "UPDATE map SET data = (SELECT data FROM map WHERE id = 2) "
                               "WHERE id = 1");
    refused(f, p, PL_PACKAGE_FAULT_RECORD, PL_FAULT_MAP_DATA, "do not match the SHA-256");
    /* a disposition's signature altered */
    copy_file(f->pkg, p);
    tamper(p, "disposition_no_update", "UPDATE disposition SET signature = zeroblob(64)");
    refused(f, p, PL_PACKAGE_FAULT_RECORD, PL_FAULT_ROW_CHANGED, "disposition");
    /* a trigger left out */
    copy_file(f->pkg, p);
    raw(p, "DROP TRIGGER site_no_update");
    refused(f, p, PL_PACKAGE_FAULT_FILE, PL_FAULT_NONE, "trigger site_no_update is missing");
    /* a view rewritten to hide a row */
    copy_file(f->pkg, p);
    raw(p, "DROP VIEW airframe_current; CREATE VIEW airframe_current AS SELECT a.*, "
           "coalesce(a.key, a.id) AS stable_key FROM airframe a WHERE 0");
    refused(f, p, PL_PACKAGE_FAULT_FILE, PL_FAULT_NONE, "view airframe_current differs");
    /* a manifest re-signed by another key, with the package's own key
     * swapped for it: the sender's fingerprint tells */
    copy_file(f->pkg, p);
    pl_package_options o = PL_PACKAGE_OPTIONS_INIT;
    char fp[PL_SIGN_FINGERPRINT_SIZE];
    pl_sign_fingerprint(fp, f->src_key.public_key);
    o.sender_key = fp;
    raw(p, "DELETE FROM package_manifest WHERE name = 'seal_key'");
    pl_err err = { 0 };
    TU_OK(pl_package_check(p, &o, &res, &err));
    assert_int_equal(res.fault, PL_PACKAGE_FAULT_MANIFEST);
    tu_assert_msg_has(res.message, "has no seal_key");
    /* a store, and not SQLite at all */
    refused(f, f->src, PL_PACKAGE_FAULT_FILE, PL_FAULT_NONE, "is a plyledger store");
    assert_int_equal(tu_write_file(p, "plyledger\n", 10), 0);
    refused(f, p, PL_PACKAGE_FAULT_FILE, PL_FAULT_NONE, "too short");
    free(p);
    /* the package the receiver was given is still sound, and received */
    TU_OK(import_package(f, f->pkg, &res, &err));
    assert_int_equal(res.imported_airframe_links, f->af_links);
}

static void test_package__truncated_packages_are_refused(void **state)
{
    fixture *f = *state;
    pl_package_result res;
    export_package(f, &res);
    pl_store *st = sealed_store(f->dst, &f->dst_key);
    pl_store_close(st);
    char *p = tu_path(f->dir, "cut.package");
    /* the file cut at half its size */
    size_t n = 0;
    unsigned char *b = tu_read_file(f->pkg, &n);
    assert_non_null(b);
    assert_int_equal(tu_write_file(p, b, n / 2), 0);
    free(b);
    refused(f, p, PL_PACKAGE_FAULT_FILE, PL_FAULT_NONE, "cut short");
    /* the chain's last link removed with its row and seal, the triggers
     * put back and the manifest left: a chain that verifies, shorter than
     * the manifest says */
    copy_file(f->pkg, p);
    tamper(p, "disposition_no_delete,ledger_no_delete,ledger_seal_no_delete",
           "DELETE FROM ledger_seal WHERE ledger_id = (SELECT max(id) FROM ledger);"
           "DELETE FROM disposition;"
           "DELETE FROM ledger WHERE id = (SELECT max(id) FROM ledger)");
    pl_verify_result v = verify(p, PL_STORE_READONLY);
    assert_int_equal(v.faults, 0);
    refused(f, p, PL_PACKAGE_FAULT_CONTENT, PL_FAULT_NONE, "links were removed after export");
    /* a journal beside it: written to after export */
    copy_file(f->pkg, p);
    char *journal = tu_path(f->dir, "cut.package-journal");
    assert_int_equal(tu_write_file(journal, "x", 1), 0);
    refused(f, p, PL_PACKAGE_FAULT_FILE, PL_FAULT_NONE, "journal");
    unlink(journal);
    free(journal);
    free(p);
}

/* An airframe of the same serial with another history, and a store whose
 * own chain is not the package's: refused, not merged. */
static void test_package__a_different_history_is_refused(void **state)
{
    fixture *f = *state;
    pl_package_result res;
    pl_err err = { 0 };
    export_package(f, &res);
    /* the same serial, recorded here: its first link differs */
    pl_store *st = sealed_store(f->dst, &f->dst_key);
    add_airframe(st, SERIAL, "TLX-T1");
    pl_store_close(st);
    char *before = store_state(f->dst);
    assert_int_equal(import_package(f, f->pkg, &res, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, "airframe " SERIAL " already exists in this store with a "
                               "different history from link 1: refused, not merged");
    char *after = store_state(f->dst);
    assert_string_equal(before, after);
    free(before);
    free(after);
    unlink(f->dst);
    /* the same serial under another key */
    char wal[4200];
    snprintf(wal, sizeof wal, "%s-wal", f->dst);
    unlink(wal);
    snprintf(wal, sizeof wal, "%s-shm", f->dst);
    unlink(wal);
    st = sealed_store(f->dst, &f->dst_key);
    add_airframe(st, "ZZZ-0001", "ZZ-1");
    add_airframe(st, SERIAL, "TLX-T1");
    pl_store_close(st);
    assert_int_equal(import_package(f, f->pkg, &res, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, "refused, not merged");
    tu_assert_msg_has(err.msg, "ZZZ-0001");
    /* a store with criteria of its own */
    char *third = tu_path(f->dir, "third.db");
    st = sealed_store(third, &f->dst_key);
    pl_criteria *c;
    TU_OK(pl_criteria_parse(&c, criteria_text, strlen(criteria_text), "criteria.json", &err));
    TU_OK(pl_store_add_criteria(st, c, NULL, NULL, &err));
    pl_criteria_free(c);
    before = store_state(third);
    assert_int_equal(pl_package_import(st, f->pkg, NULL, &res, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, "the store's own chain");
    tu_assert_msg_has(err.msg, "differs from the package's from link 1: refused, not merged");
    pl_store_close(st);
    after = store_state(third);
    assert_string_equal(before, after);
    free(before);
    free(after);
    free(third);
}

/* A receiving store must be sealed and have its key. */
static void test_package__import_needs_a_sealed_store_and_its_key(void **state)
{
    fixture *f = *state;
    pl_package_result res;
    pl_err err = { 0 };
    export_package(f, &res);
    pl_store *st;
    TU_OK(pl_store_create(&st, f->dst, &err));
    assert_int_equal(pl_package_import(st, f->pkg, NULL, &res, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, "not sealed");
    TU_OK(pl_store_seal(st, &f->dst_key, &err));
    pl_store_close(st);
    TU_OK(pl_store_open(&st, f->dst, 0, &err));
    assert_int_equal(pl_package_import(st, f->pkg, NULL, &res, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, "needs the store's seal key");
    assert_int_equal(pl_package_import(st, "no-such.package", NULL, &res, &err), PL_EREFUSED);
    pl_store_close(st);
    assert_int_equal(pl_package_check("no-such.package", NULL, &res, &err), PL_ENOTFOUND);
    assert_int_equal(raw_int(f->dst, "SELECT count(*) FROM ledger"), 0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_package__export_is_a_sound_plain_sqlite_file, setup,
                                        teardown),
        cmocka_unit_test_setup_teardown(test_package__export_refusals, setup, teardown),
        cmocka_unit_test_setup_teardown(test_package__import_into_a_fresh_store, setup,
                                        teardown),
        cmocka_unit_test_setup_teardown(test_package__handed_back_with_more, setup, teardown),
        cmocka_unit_test_setup_teardown(test_package__a_later_package_of_the_same_sender_is_refused,
                                        setup, teardown),
        cmocka_unit_test_setup_teardown(test_package__tampered_packages_are_refused, setup,
                                        teardown),
        cmocka_unit_test_setup_teardown(test_package__truncated_packages_are_refused, setup,
                                        teardown),
        cmocka_unit_test_setup_teardown(test_package__a_different_history_is_refused, setup,
                                        teardown),
        cmocka_unit_test_setup_teardown(test_package__import_needs_a_sealed_store_and_its_key,
                                        setup, teardown),
    };
    return cmocka_run_group_tests_name("package", tests, NULL, NULL);
}
