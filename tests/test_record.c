/*
 * test_record.c - recording batches: sidecar parsing, completing maps from
 * the site, and all-or-nothing writes into a real store.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <cjson/cJSON.h>
#include <math.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plyledger.h"
#include "testutil.h"

typedef struct fixture {
    char *dir;
    char *store_path;
    pl_store *store;
} fixture;

static void write_text(const char *dir, const char *name, const char *text)
{
    char *p = tu_path(dir, name);
    assert_int_equal(tu_write_file(p, text, strlen(text)), 0);
    free(p);
}

/* A 6x4 float32 map written with pl_map_save_npy. */
static void write_npy(const char *dir, const char *name, uint32_t w, uint32_t h, float base)
{
    pl_map *m;
    assert_int_equal(pl_map_new(&m, w, h, 1, NULL), PL_OK);
    for (uint32_t i = 0; i < w * h; i++)
        m->data[i] = base + (float)i * 0.25f;
    char *p = tu_path(dir, name);
    assert_int_equal(pl_map_save_npy(m, p, NULL), PL_OK);
    free(p);
    pl_map_free(m);
}

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    f->dir = tu_tmpdir();
    f->store_path = tu_path(f->dir, "s.plyledger");
    pl_err err = { 0 };
    assert_int_equal(pl_store_create(&f->store, f->store_path, &err), PL_OK);
    pl_airframe af;
    memset(&af, 0, sizeof af);
    strcpy(af.serial, "REC-0001");
    strcpy(af.aircraft_type, "TX-1");
    assert_int_equal(pl_store_add_airframe(f->store, &af, NULL, &err), PL_OK);
    const char *plan =
        "site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,width_px,height_px,pitch_mm\n"
        "A1,flash-thermography,100,20,30,1,0,0,0,1,0,6,4,0.5\n"
        "A2,flash-thermography,200,20,30,1,0,0,0,0,-1,0,0,0.25\n";
    write_text(f->dir, "plan.csv", plan);
    char *pp = tu_path(f->dir, "plan.csv");
    pl_plan *p;
    assert_int_equal(pl_plan_load(&p, pp, &err), PL_OK);
    assert_int_equal(pl_plan_apply(f->store, p, "REC-0001", NULL, &err), PL_OK);
    pl_plan_free(p);
    free(pp);
    write_npy(f->dir, "a1.npy", 6, 4, 1.0f);
    write_npy(f->dir, "a2.npy", 6, 4, 2.0f);
    write_npy(f->dir, "wrong.npy", 7, 4, 3.0f);
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    pl_store_close(f->store);
    free(f->store_path);
    tu_rmtree(f->dir);
    free(f);
    return 0;
}

static const char sidecar_text[] =
    "{ \"airframe\": \"REC-0001\", \"kind\": \"baseline\", \"date\": \"2031-04-05\",\n"
    "  \"procedure\": \"P-1\", \"procedure_revision\": \"A\", \"equipment\": \"rig\",\n"
    "  \"calibration\": \"RS-1\", \"inspector\": \"someone\", \"inspector_level\": \"2\",\n"
    "  \"hours\": 12.5, \"cycles\": 7, \"parameters\": { \"k\": [1, 2] },\n"
    "  \"sites\": [\n"
    "    { \"site\": \"A1\", \"maps\": [ { \"file\": \"a1.npy\",\n"
    "        \"channels\": [ { \"quantity\": \"temperature-contrast\" } ] } ] },\n"
    "    { \"site\": \"A2\", \"inspector\": \"someone else\", \"maps\": [ { \"file\": \"a2.npy\",\n"
    "        \"channels\": [ { \"quantity\": \"phase\", \"unit\": \"deg\" } ],\n"
    "        \"placement\": { \"origin\": [1, 2, 3], \"u\": [0, 1, 0], \"v\": [0, 0, 1] } } ] }\n"
    "  ] }\n";

static void test_record__sidecar_gives_sites_overrides_and_paths(void **state)
{
    fixture *f = *state;
    write_text(f->dir, "c.json", sidecar_text);
    char *path = tu_path(f->dir, "c.json");
    pl_record *rec;
    pl_err err = { 0 };
    assert_int_equal(pl_record_load_sidecar(&rec, path, &err), PL_OK);
    assert_int_equal(rec->nsites, 2);
    assert_string_equal(rec->sites[0].insp.inspector, "someone");
    assert_string_equal(rec->sites[1].insp.inspector, "someone else");
    assert_string_equal(rec->sites[1].insp.site_code, "A2");
    assert_true(rec->sites[0].insp.aircraft_hours == 12.5);
    assert_int_equal(rec->sites[0].insp.aircraft_cycles, 7);
    assert_string_equal(rec->sites[1].insp.parameters_json, "{\"k\":[1,2]}");
    char *want = tu_path(f->dir, "a1.npy");
    assert_string_equal(rec->sites[0].maps[0].path, want);
    free(want);
    assert_string_equal(rec->sites[0].maps[0].channels[0].unit, "K");  /* default unit */
    assert_true(rec->sites[1].maps[0].has_placement);
    assert_true(rec->sites[1].maps[0].placement.origin[2] == 3.0);
    pl_record_free(rec);
    free(path);
}

static void test_record__sidecar_refuses_unknown_keys_and_bad_types(void **state)
{
    fixture *f = *state;
    static const struct { const char *json, *needle; } cases[] = {
        { "{ \"airframe\": \"X\", \"inspectr\": \"a\", \"sites\": [ { \"site\": \"A1\" } ] }", "inspectr" },
        { "{ \"airframe\": \"X\", \"sites\": [] }", "sites" },
        { "{ \"airframe\": 5, \"sites\": [ { \"site\": \"A1\" } ] }", "airframe" },
        { "{ \"cycles\": 1.5, \"sites\": [ { \"site\": \"A1\" } ] }", "cycles" },
        { "{ \"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a.npy\", \"pitch_mm\": -1 } ] } ] }", "pitch_mm" },
        { "{ \"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"fil\": \"a.npy\" } ] } ] }", "fil" },
        { "{ \"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a.npy\",\n"
          "   \"placement\": { \"origin\": [0,0,0], \"u\": [1,1,0], \"v\": [0,0,1] } } ] } ] }", "u" },
        { "[1, 2]", "object" },
        /* numbers out of range: a huge count is not cast, 2^53 + 1 is not rounded */
        { "{ \"cycles\": 1e30, \"sites\": [ { \"site\": \"A1\" } ] }", "bad.json: top level: \"cycles\": 1e+30 is 2^53 or more" },
        { "{ \"cycles\": 9007199254740993, \"sites\": [ { \"site\": \"A1\" } ] }", "\"cycles\": 9.0072e+15 is 2^53 or more" },
        { "{ \"sites\": [ { \"site\": \"A1\", \"cycles\": -4 } ] }", "bad.json: site A1: \"cycles\" must not be negative" },
        { "{ \"cycles\": 1000001, \"sites\": [ { \"site\": \"A1\" } ] }", "\"cycles\": 1000001 is outside the plausible flight cycles" },
        { "{ \"hours\": 1e30, \"sites\": [ { \"site\": \"A1\" } ] }", "\"hours\": 1e+30 h is outside the plausible flight hours" },
        { "{ \"hours\": \"12\", \"sites\": [ { \"site\": \"A1\" } ] }", "\"hours\" must be a number" },
        { "{ \"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a.npy\", \"pitch_mm\": 1e308 } ] } ] }", "bad.json: site A1: map 1: \"pitch_mm\": 1e+308 mm is outside the plausible pitch" },
        { "{ \"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a.npy\", \"pitch_mm\": [0.5, 1e-9] } ] } ] }", "pitch" },
        { "{ \"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a.npy\",\n"
          "   \"placement\": { \"origin\": [0,1e300,0], \"u\": [1,0,0], \"v\": [0,1,0] } } ] } ] }", "site A1: map 1: placement origin y: 1e+300 is outside the plausible part coordinate" },
        { "{ \"sites\": [ { \"site\": \"A1\" } ] ", "line 1" },
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        write_text(f->dir, "bad.json", cases[i].json);
        char *path = tu_path(f->dir, "bad.json");
        pl_record *rec = NULL;
        pl_err err = { 0 };
        int rc = pl_record_load_sidecar(&rec, path, &err);
        if (rc == PL_OK || !strstr(err.msg, cases[i].needle))
            fail_msg("case %zu: rc %d, message '%s'", i, rc, err.msg);
        assert_null(rec);
        free(path);
    }
}

/* The head of a sidecar every case below shares: a valid top level. */
#define SIDECAR_HEAD \
    "{ \"airframe\": \"REC-0001\", \"kind\": \"baseline\", \"date\": \"2021-04-05\",\n" \
    "  \"procedure\": \"P-1\", \"procedure_revision\": \"A\", \"equipment\": \"rig\",\n" \
    "  \"calibration\": \"RS-1\", \"inspector\": \"someone\", \"inspector_level\": \"2\",\n"

/* An inspection without maps, or one site twice in a batch, is refused at
 * the sidecar, naming the file and the site. */
static void test_record__sidecar_refuses_empty_and_repeated_sites(void **state)
{
    fixture *f = *state;
    static const struct { const char *json, *needle; } cases[] = {
        { SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": [] } ] }", "site A1" },
        { SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\" } ] }", "site A1" },
        { SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a1.npy\" } ] },\n"
          "  { \"site\": \"A2\", \"maps\": [ { \"file\": \"a2.npy\" } ] },\n"
          "  { \"site\": \"A1\", \"maps\": [ { \"file\": \"a2.npy\" } ] } ] }", "site A1" },
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        write_text(f->dir, "batch.json", cases[i].json);
        char *path = tu_path(f->dir, "batch.json");
        pl_record *rec = NULL;
        pl_err err = { 0 };
        int rc = pl_record_load_sidecar(&rec, path, &err);
        if (rc == 0 || !strstr(err.msg, "batch.json") || !strstr(err.msg, cases[i].needle))
            fail_msg("case %zu: rc %d, message '%s'", i, rc, err.msg);
        tu_assert_msg_has(err.msg, i < 2 ? "map" : "twice");
        assert_null(rec);
        free(path);
    }
}

static int count_all(void *ud, const pl_inspection *in)
{
    (void)in;
    (*(int *)ud)++;
    return 0;
}

/* A batch made call by call is held to the same rules when applied. */
static void test_record__apply_refuses_empty_and_repeated_sites(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    pl_inspection in;
    memset(&in, 0, sizeof in);
    in.aircraft_hours = NAN;
    in.aircraft_cycles = -1;
    strcpy(in.airframe_serial, "REC-0001");
    strcpy(in.kind, "baseline");
    strcpy(in.performed_on, "2021-04-05");
    strcpy(in.procedure, "P");
    strcpy(in.procedure_rev, "A");
    strcpy(in.equipment, "E");
    strcpy(in.calibration_ref, "C");
    strcpy(in.inspector, "I");
    strcpy(in.inspector_level, "2");
    char *a1 = tu_path(f->dir, "a1.npy"), *a2 = tu_path(f->dir, "a2.npy");

    pl_record *rec;
    TU_OK(pl_record_new(&rec, &err));
    strcpy(in.site_code, "A1");
    TU_OK(pl_record_add_site(rec, &in, NULL, &err));
    TU_OK(pl_record_add_map(rec, 0, a1, "depth", NULL, NAN, NAN, &err));
    strcpy(in.site_code, "A2");
    TU_OK(pl_record_add_site(rec, &in, NULL, &err));
    assert_int_equal(pl_record_apply(f->store, rec, NULL, NULL, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "REC-0001 site A2");
    tu_assert_msg_has(err.msg, "no map");
    pl_record_free(rec);

    TU_OK(pl_record_new(&rec, &err));
    strcpy(in.site_code, "A1");
    TU_OK(pl_record_add_site(rec, &in, NULL, &err));
    TU_OK(pl_record_add_map(rec, 0, a1, "depth", NULL, NAN, NAN, &err));
    TU_OK(pl_record_add_site(rec, &in, NULL, &err));
    TU_OK(pl_record_add_map(rec, 1, a2, "depth", NULL, NAN, NAN, &err));
    assert_int_equal(pl_record_apply(f->store, rec, NULL, NULL, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "REC-0001 site A1");
    tu_assert_msg_has(err.msg, "twice");
    pl_record_free(rec);

    int n = 0;
    TU_OK(pl_store_list_inspections(f->store, NULL, count_all, &n, &err));
    assert_int_equal(n, 0);
    free(a1);
    free(a2);
}

/* Every refusal of a sidecar names the file and, below the top level, the
 * site: a placement axis of no length among them. */
static void test_record__sidecar_messages_name_file_and_site(void **state)
{
    fixture *f = *state;
    static const char *const cases[] = {
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a1.npy\",\n"
        "  \"placement\": { \"origin\": [0,0,0], \"u\": [0,0,0], \"v\": [0,1,0] } } ] } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a1.npy\",\n"
        "  \"placement\": { \"origin\": [0,0,0], \"u\": [1,0,0] } } ] } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a1.npy\",\n"
        "  \"placement\": { \"origin\": [0,0,0], \"u\": [1,0], \"v\": [0,1,0] } } ] } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a1.npy\",\n"
        "  \"placement\": { \"origin\": [0,0,0], \"u\": [1,0,0], \"v\": [0,1,0], \"w\": 1 } } ] } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a1.npy\",\n"
        "  \"placement\": { \"origin\": [0,0,0], \"u\": [1,0,0], \"v\": [0,1,0],\n"
        "                 \"system\": \"0123456789012345678901234567890123456789012345678901234567890123456789\" } } ] } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a1.npy\", \"pitch_mm\": -1 } ] } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a1.npy\", \"pitch_mm\": \"x\" } ] } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a1.npy\",\n"
        "  \"channels\": [ { \"quantity\": \"depth\", \"unit\": \"K\" } ] } ] } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a1.npy\",\n"
        "  \"channels\": [ { \"quantity\": 3 } ] } ] } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a1.npy\", \"channels\": 3 } ] } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"\" } ] } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": [ 7 ] } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a1.npy\", \"x\": 1 } ] } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"maps\": 1 } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"hours\": -3, \"maps\": [ { \"file\": \"a1.npy\" } ] } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"notes\": 4, \"maps\": [ { \"file\": \"a1.npy\" } ] } ] }",
        SIDECAR_HEAD "\"sites\": [ { \"site\": \"A1\", \"parameters\": 4, \"maps\": [ { \"file\": \"a1.npy\" } ] } ] }",
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        write_text(f->dir, "where.json", cases[i]);
        char *path = tu_path(f->dir, "where.json");
        pl_record *rec = NULL;
        pl_err err = { 0 };
        int rc = pl_record_load_sidecar(&rec, path, &err);
        if (rc == 0 || !strstr(err.msg, path) || !strstr(err.msg, "site A1"))
            fail_msg("case %zu: rc %d, message '%s'", i, rc, err.msg);
        assert_null(rec);
        free(path);
    }
}

/* A sidecar batch that the store refuses names the sidecar too. */
static void test_record__apply_of_a_sidecar_names_it(void **state)
{
    fixture *f = *state;
    write_text(f->dir, "wrong.json", SIDECAR_HEAD
               "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"wrong.npy\" ,\n"
               "  \"channels\": [ { \"quantity\": \"depth\" } ] } ] } ] }");
    char *path = tu_path(f->dir, "wrong.json");
    pl_record *rec = NULL;
    pl_err err = { 0 };
    TU_OK(pl_record_load_sidecar(&rec, path, &err));
    assert_int_equal(pl_record_apply(f->store, rec, NULL, NULL, &err), PL_ENOMATCH);
    tu_assert_msg_has(err.msg, path);
    tu_assert_msg_has(err.msg, "site A1");
    tu_assert_msg_has(err.msg, "wrong.npy");
    pl_record_free(rec);
    free(path);
}

static void test_record__apply_records_and_completes_from_the_site(void **state)
{
    fixture *f = *state;
    write_text(f->dir, "c.json", sidecar_text);
    char *path = tu_path(f->dir, "c.json");
    pl_record *rec;
    pl_err err = { 0 };
    assert_int_equal(pl_record_load_sidecar(&rec, path, &err), PL_OK);
    int rc = pl_record_apply(f->store, rec, NULL, NULL, &err);
    if (rc)
        fail_msg("apply: %s", err.msg);
    assert_true(rec->sites[0].inspection_key > 0);
    assert_true(rec->sites[1].maps[0].map_id > 0);

    /* Site A1's pitch and frame came from the site; A2 kept its placement. */
    pl_map *m;
    pl_map_record mr;
    assert_int_equal(pl_store_load_map(f->store, rec->sites[0].maps[0].map_id, &m, &mr, &err), PL_OK);
    assert_true(m->pitch_u == 0.5 && m->pitch_v == 0.5);
    assert_true(m->placement.origin[0] == 100.0);
    assert_string_equal(m->channels[0].quantity, "temperature-contrast");
    assert_true(m->data[5] == 1.0f + 5 * 0.25f);
    free(mr.parameters_json);
    pl_map_free(m);
    assert_int_equal(pl_store_load_map(f->store, rec->sites[1].maps[0].map_id, &m, &mr, &err), PL_OK);
    assert_true(m->pitch_u == 0.25);
    assert_true(m->placement.origin[0] == 1.0 && m->placement.u[1] == 1.0);
    assert_string_equal(m->channels[0].unit, "deg");
    free(mr.parameters_json);
    pl_map_free(m);
    pl_record_free(rec);
    free(path);
}

static int count_rows(void *ud, const pl_inspection *in)
{
    (void)in;
    (*(int *)ud)++;
    return 0;
}

/* A bad map in the second site leaves nothing of the first behind. */
static void test_record__apply_is_all_or_nothing(void **state)
{
    fixture *f = *state;
    pl_record *rec;
    pl_err err = { 0 };
    assert_int_equal(pl_record_new(&rec, &err), PL_OK);
    pl_inspection in;
    memset(&in, 0, sizeof in);
    in.aircraft_hours = NAN;
    in.aircraft_cycles = -1;
    strcpy(in.airframe_serial, "REC-0001");
    strcpy(in.kind, "baseline");
    strcpy(in.performed_on, "2031-04-05");
    strcpy(in.procedure, "P");
    strcpy(in.procedure_rev, "A");
    strcpy(in.equipment, "E");
    strcpy(in.calibration_ref, "C");
    strcpy(in.inspector, "I");
    strcpy(in.inspector_level, "2");
    size_t s0, s1;
    strcpy(in.site_code, "A2");
    assert_int_equal(pl_record_add_site(rec, &in, &s0, &err), PL_OK);
    strcpy(in.site_code, "A1");
    assert_int_equal(pl_record_add_site(rec, &in, &s1, &err), PL_OK);
    char *a2 = tu_path(f->dir, "a2.npy"), *wrong = tu_path(f->dir, "wrong.npy");
    assert_int_equal(pl_record_add_map(rec, s0, a2, "depth", NULL, NAN, NAN, &err), PL_OK);
    assert_int_equal(pl_record_add_map(rec, s1, wrong, "depth", "mm", NAN, NAN, &err), PL_OK);
    int rc = pl_record_apply(f->store, rec, NULL, NULL, &err);
    assert_int_equal(rc, PL_ENOMATCH);
    assert_non_null(strstr(err.msg, "A1"));
    assert_int_equal(rec->sites[0].inspection_key, 0);
    int n = 0;
    assert_int_equal(pl_store_list_inspections(f->store, NULL, count_rows, &n, &err), PL_OK);
    assert_int_equal(n, 0);
    pl_record_free(rec);
    free(a2);
    free(wrong);
}

/* What the progress of a recording saw: each call, another connection
 * tries to take the write lock at once (no waiting). */
typedef struct lock_probe {
    const char *path;
    int calls, free;
} lock_probe;

static int probe_write_lock(void *ud, double fraction)
{
    (void)fraction;
    lock_probe *p = ud;
    sqlite3 *db = NULL;
    assert_int_equal(sqlite3_open_v2(p->path, &db, SQLITE_OPEN_READWRITE, NULL), SQLITE_OK);
    sqlite3_busy_timeout(db, 0);
    if (sqlite3_exec(db, "BEGIN IMMEDIATE", NULL, NULL, NULL) == SQLITE_OK) {
        p->free++;
        sqlite3_exec(db, "ROLLBACK", NULL, NULL, NULL);
    }
    sqlite3_close(db);
    p->calls++;
    return 0;
}

/*
 * The costly part of a recording (reading, checking, compressing and
 * hashing each map) is done before the write lock is taken: while the
 * progress is told about each map, another writer could take the lock.
 * The lock is held only for the inserts.
 */
static void test_record__apply_prepares_maps_before_taking_the_write_lock(void **state)
{
    fixture *f = *state;
    write_text(f->dir, "c.json", sidecar_text);
    char *path = tu_path(f->dir, "c.json");
    pl_record *rec;
    pl_err err = { 0 };
    TU_OK(pl_record_load_sidecar(&rec, path, &err));
    lock_probe p = { f->store_path, 0, 0 };
    TU_OK(pl_record_apply(f->store, rec, probe_write_lock, &p, &err));
    assert_int_equal(p.calls, 2);
    assert_int_equal(p.free, 2);
    assert_true(rec->sites[1].maps[0].map_id > 0);
    pl_record_free(rec);
    free(path);
}

static void test_record__add_map_checks_lists(void **state)
{
    (void)state;
    pl_record *rec;
    pl_err err = { 0 };
    assert_int_equal(pl_record_new(&rec, &err), PL_OK);
    pl_inspection in;
    memset(&in, 0, sizeof in);
    assert_int_equal(pl_record_add_site(rec, &in, NULL, &err), PL_OK);
    assert_int_equal(pl_record_add_map(rec, 0, "x.npy", "depth,phase", "mm", NAN, NAN, &err), PL_EINVAL);
    assert_int_equal(pl_record_add_map(rec, 0, "x.npy", "depth", "K", NAN, NAN, &err), PL_EINVAL);
    assert_int_equal(pl_record_add_map(rec, 0, "x.npy", "my-quantity", NULL, NAN, NAN, &err), PL_EINVAL);
    assert_int_equal(pl_record_add_map(rec, 0, "x.npy", "depth", NULL, -1.0, NAN, &err), PL_EINVAL);
    assert_int_equal(pl_record_add_map(rec, 0, "x.npy", "depth", NULL, 0.5, 1e308, &err), PL_ERANGE);
    assert_non_null(strstr(err.msg, "x.npy: pitch: 1e+308 mm is outside the plausible pitch"));
    assert_int_equal(pl_record_add_map(rec, 1, "x.npy", "depth", NULL, NAN, NAN, &err), PL_EINVAL);
    assert_int_equal(pl_record_add_map(rec, 0, "x.npy", " depth , phase ", "mm,rad", NAN, NAN, &err), PL_OK);
    assert_string_equal(rec->sites[0].maps[0].channels[1].quantity, "phase");
    assert_int_equal(rec->sites[0].nmaps, 1);
    pl_record_free(rec);
}

static pl_inspection traced(const char *site, const char *kind, const char *date)
{
    pl_inspection in;
    memset(&in, 0, sizeof in);
    in.aircraft_hours = NAN;
    in.aircraft_cycles = -1;
    strcpy(in.airframe_serial, "REC-0001");
    strcpy(in.site_code, site);
    strcpy(in.kind, kind);
    strcpy(in.performed_on, date);
    strcpy(in.procedure, "P");
    strcpy(in.procedure_rev, "A");
    strcpy(in.equipment, "E");
    strcpy(in.calibration_ref, "C");
    strcpy(in.inspector, "I");
    strcpy(in.inspector_level, "2");
    return in;
}

static pl_id record_one(pl_store *st, const char *site, const char *kind, const char *date,
                        float base, pl_id *map_id)
{
    pl_inspection in = traced(site, kind, date);
    pl_map *m;
    assert_int_equal(pl_map_new(&m, 6, 4, 1, NULL), PL_OK);
    for (uint32_t i = 0; i < 24; i++)
        m->data[i] = base + (float)i;
    assert_int_equal(pl_map_set_channel(m, 0, "phase", "rad", NULL), PL_OK);
    m->pitch_u = m->pitch_v = NAN;
    pl_id key = 0;
    pl_err err = { 0 };
    if (pl_record_map_inspection(st, &in, m, "reduce", "seq.json", "{\"k\":1}", &key, map_id, &err))
        fail_msg("%s", err.msg);
    pl_map_free(m);
    return key;
}

/* The pair a registration aligns: the site's baseline and the latest later
 * inspection, first maps, unless chosen; and its outcome recorded, a
 * refusal with the comparison it stops. */
static void test_record__registration_pair_and_outcome(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    pl_record_pair pair;
    memset(&pair, 0, sizeof pair);
    assert_int_equal(pl_record_find_pair(f->store, "REC-0001", "A1", &pair, &err), PL_ENOTFOUND);
    assert_non_null(strstr(err.msg, "no baseline"));
    pl_id mb = 0, m1 = 0, m2 = 0;
    pl_id kb = record_one(f->store, "A1", "baseline", "2030-01-01", 0.0f, &mb);
    memset(&pair, 0, sizeof pair);
    assert_int_equal(pl_record_find_pair(f->store, "REC-0001", "A1", &pair, &err), PL_ENOTFOUND);
    assert_non_null(strstr(err.msg, "no inspection after its baseline"));
    pl_id k1 = record_one(f->store, "A1", "scheduled", "2034-01-01", 1.0f, &m1);
    pl_id k2 = record_one(f->store, "A1", "unscheduled", "2036-05-05", 2.0f, &m2);
    memset(&pair, 0, sizeof pair);
    assert_int_equal(pl_record_find_pair(f->store, "REC-0001", "A1", &pair, &err), PL_OK);
    assert_int_equal(pair.baseline_inspection, kb);
    assert_int_equal(pair.current_inspection, k2); /* the latest */
    assert_int_equal(pair.baseline_map, mb);
    assert_int_equal(pair.current_map, m2);
    memset(&pair, 0, sizeof pair);
    pair.current_inspection = k1;
    assert_int_equal(pl_record_find_pair(f->store, "REC-0001", "A1", &pair, &err), PL_OK);
    assert_int_equal(pair.current_map, m1);
    pair.current_map = m2; /* not a map of inspection k1 */
    assert_int_equal(pl_record_find_pair(f->store, "REC-0001", "A1", &pair, &err), PL_ENOMATCH);
    memset(&pair, 0, sizeof pair);
    pair.current_inspection = kb;
    assert_int_equal(pl_record_find_pair(f->store, "REC-0001", "A1", &pair, &err), PL_EINVAL);

    /* a refused registration records the comparison it stops */
    memset(&pair, 0, sizeof pair);
    assert_int_equal(pl_record_find_pair(f->store, "REC-0001", "A1", &pair, &err), PL_OK);
    pl_register_result res;
    memset(&res, 0, sizeof res);
    res.refused = 1;
    snprintf(res.reason, sizeof res.reason, "normalised cross-correlation 0.1 below the limit 0.6");
    res.ncc = 0.1;
    res.psr = 3.0;
    pl_id rid = 0, cid = 0;
    assert_int_equal(pl_record_registration(f->store, &pair, &res, 0, "phase-correlation", NULL,
                                            NULL, "{\"upsample\":100}", &rid, &cid, &err), PL_OK);
    assert_true(rid > 0 && cid > 0);
    /* an aligned one records no comparison */
    memset(&res, 0, sizeof res);
    res.transform.dx = 1.5;
    res.transform.dy = -0.5;
    res.transform.scale = 1.0;
    res.shift_u_mm = 0.75;
    res.shift_v_mm = -0.25;
    res.ncc = 0.99;
    res.psr = 20.0;
    res.overlap_fraction = 0.9;
    res.overlap_mm2 = 5.4;
    pl_id rid2 = 0, cid2 = 7;
    assert_int_equal(pl_record_registration(f->store, &pair, &res, 0, "phase-correlation", NULL,
                                            NULL, NULL, &rid2, &cid2, &err), PL_OK);
    assert_true(rid2 > rid);
    assert_int_equal(cid2, 0);
    pl_store_summary sum;
    assert_int_equal(pl_store_summarize(f->store, &sum, &err), PL_OK);
    assert_int_equal(sum.registrations, 2);
    assert_int_equal(sum.comparisons, 1);
    /* the reduced map took the site's pitch and frame */
    pl_map *back;
    assert_int_equal(pl_store_load_map(f->store, m1, &back, NULL, &err), PL_OK);
    assert_true(back->pitch_u == 0.5 && back->placement.origin[0] == 100.0);
    pl_map_free(back);
}

static pl_id record_params(pl_store *st, const char *site, const char *kind, const char *date,
                           float base, int simulated, const char *params, pl_id *map_id)
{
    pl_inspection in = traced(site, kind, date);
    in.simulated = simulated;
    pl_map *m;
    assert_int_equal(pl_map_new(&m, 6, 4, 1, NULL), 0);
    for (uint32_t i = 0; i < 24; i++)
        m->data[i] = base + (float)i;
    assert_int_equal(pl_map_set_channel(m, 0, "phase", "rad", NULL), 0);
    m->pitch_u = m->pitch_v = NAN;
    pl_id key = 0;
    pl_err err = { 0 };
    TU_OK(pl_record_map_inspection(st, &in, m, "reduce", "seq.json", params, &key, map_id, &err));
    pl_map_free(m);
    return key;
}

static int simulated_of(pl_store *st, pl_id key)
{
    pl_inspection in;
    pl_err err = { 0 };
    TU_OK(pl_store_get_inspection(st, key, &in, &err));
    int v = in.simulated;
    pl_inspection_clear(&in);
    return v;
}

/*
 * A map reduced from a simulated sequence (the simulator writes its
 * "simulation" object into the manifest's acquisition, which the reduction
 * records) makes a simulated inspection, whatever the caller said; and a
 * simulated baseline is refused for a real reinspection before any
 * registration is computed.
 */
static void test_record__simulated_sequences_make_simulated_inspections(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    pl_id mb = 0, mr = 0;
    const char *sim = "{\"acquisition\":{\"camera\":\"x\",\"simulation\":{\"software\":"
                      "\"plyledger simulator\",\"seed\":7}},\"degree\":10}";
    pl_id kb = record_params(f->store, "A1", "baseline", "2020-01-01", 0.0f, 0, sim, &mb);
    assert_int_equal(simulated_of(f->store, kb), 1);
    pl_id kr = record_params(f->store, "A1", "unscheduled", "2021-01-01", 1.0f, 0,
                             "{\"acquisition\":{\"camera\":\"x\"},\"degree\":10}", &mr);
    assert_int_equal(simulated_of(f->store, kr), 0);
    pl_id kt = record_params(f->store, "A2", "baseline", "2020-01-01", 2.0f, 1, NULL, NULL);
    assert_int_equal(simulated_of(f->store, kt), 1);
    pl_record_pair pair;
    memset(&pair, 0, sizeof pair);
    assert_int_equal(pl_record_find_pair(f->store, "REC-0001", "A1", &pair, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "simulated");
    tu_assert_msg_has(err.msg, "real");
}

/* A sidecar says whether its data are simulated, and why hours go back. */
static void test_record__sidecar_says_simulated_and_hours_reason(void **state)
{
    fixture *f = *state;
    write_text(f->dir, "sim.json", SIDECAR_HEAD
               "\"simulated\": true, \"hours_reason\": \"log corrected (memo 4)\",\n"
               "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"a1.npy\" } ] },\n"
               "  { \"site\": \"A2\", \"simulated\": false, \"maps\": [ { \"file\": \"a2.npy\" } ] } ] }");
    char *path = tu_path(f->dir, "sim.json");
    pl_record *rec = NULL;
    pl_err err = { 0 };
    TU_OK(pl_record_load_sidecar(&rec, path, &err));
    assert_int_equal(rec->sites[0].insp.simulated, 1);
    assert_int_equal(rec->sites[1].insp.simulated, 0);
    assert_string_equal(rec->sites[1].insp.hours_reason, "log corrected (memo 4)");
    pl_record_free(rec);
    write_text(f->dir, "sim.json", SIDECAR_HEAD
               "\"sites\": [ { \"site\": \"A1\", \"simulated\": \"yes\", \"maps\": [ { \"file\": \"a1.npy\" } ] } ] }");
    assert_int_equal(pl_record_load_sidecar(&rec, path, &err), PL_EFORMAT);
    tu_assert_msg_has(err.msg, path);
    tu_assert_msg_has(err.msg, "simulated");
    assert_null(rec);
    free(path);
}

static void expect_status(int rc, int want, const pl_err *err)
{
    if (rc != want)
        fail_msg("expected %d, got %d (%s)", want, rc, err->msg);
}

/* A 6x4 float32 .npy written byte by byte (the NumPy format 1.0 header:
 * magic, version, header length, a dict padded to 128 bytes in all), with
 * +inf at row 1, column 2: pl_map_save_npy() writes no infinities. */
static void write_npy_with_inf(const char *dir, const char *name)
{
    char head[128];
    const char *dict = "{'descr': '<f4', 'fortran_order': False, 'shape': (4, 6), }";
    size_t n = strlen(dict);
    memcpy(head, "\x93NUMPY\x01\x00", 8);
    head[8] = (char)(128 - 10);
    head[9] = 0;
    memset(head + 10, ' ', 118);
    memcpy(head + 10, dict, n);
    head[127] = '\n';
    float v[24];
    for (int i = 0; i < 24; i++)
        v[i] = 1.0f + 0.25f * (float)i;
    v[1 * 6 + 2] = INFINITY;
    unsigned char buf[128 + sizeof v];
    memcpy(buf, head, 128);
    for (int i = 0; i < 24; i++) { /* little-endian on any host */
        uint32_t b;
        memcpy(&b, &v[i], 4);
        for (int k = 0; k < 4; k++)
            buf[128 + 4 * i + k] = (unsigned char)(b >> (8 * k));
    }
    char *p = tu_path(dir, name);
    assert_int_equal(tu_write_file(p, buf, sizeof buf), 0);
    free(p);
}

/*
 * A map holding an infinity is refused unless the caller asks, on an
 * explicit option, for infinities to be no data; the option in force and
 * how many values it changed are then recorded with the map.
 */
static void test_record__infinities_become_no_data_only_when_asked(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    write_npy_with_inf(f->dir, "inf.npy");
    char *inf = tu_path(f->dir, "inf.npy");
    pl_inspection in = traced("A1", "baseline", "2021-04-05");
    pl_record *rec;
    TU_OK(pl_record_new(&rec, &err));
    TU_OK(pl_record_add_site(rec, &in, NULL, &err));
    TU_OK(pl_record_add_map(rec, 0, inf, "temperature-contrast", NULL, NAN, NAN, &err));
    expect_status(pl_record_apply(f->store, rec, NULL, NULL, &err), PL_EFORMAT, &err);
    tu_assert_msg_has(err.msg, "infinite value");
    rec->sites[0].maps[0].infinite_as_nodata = 1;
    TU_OK(pl_record_apply(f->store, rec, NULL, NULL, &err));
    pl_map *m = NULL;
    pl_map_record mr;
    TU_OK(pl_store_load_map(f->store, rec->sites[0].maps[0].map_id, &m, &mr, &err));
    assert_true(isnan(m->data[1 * 6 + 2]));
    assert_true(m->data[0] == 1.0f);
    cJSON *j = cJSON_Parse(mr.parameters_json);
    assert_non_null(j);
    assert_string_equal(cJSON_GetObjectItem(j, "infinite_values")->valuestring, "to-nan");
    assert_int_equal(cJSON_GetObjectItem(j, "infinite_values_made_nodata")->valueint, 1);
    cJSON_Delete(j);
    free(mr.parameters_json);
    pl_map_free(m);
    pl_record_free(rec);

    /* a sidecar asks per map; a map without the option records that too */
    write_text(f->dir, "inf.json", SIDECAR_HEAD
               "\"sites\": [ { \"site\": \"A1\", \"kind\": \"unscheduled\", \"date\": \"2022-01-01\",\n"
               "  \"maps\": [ { \"file\": \"inf.npy\", \"infinite_as_no_data\": true,\n"
               "    \"channels\": [ { \"quantity\": \"depth\" } ] },\n"
               "  { \"file\": \"a1.npy\", \"channels\": [ { \"quantity\": \"depth\" } ] } ] } ] }");
    char *path = tu_path(f->dir, "inf.json");
    TU_OK(pl_record_load_sidecar(&rec, path, &err));
    assert_int_equal(rec->sites[0].maps[0].infinite_as_nodata, 1);
    assert_int_equal(rec->sites[0].maps[1].infinite_as_nodata, 0);
    TU_OK(pl_record_apply(f->store, rec, NULL, NULL, &err));
    TU_OK(pl_store_load_map(f->store, rec->sites[0].maps[1].map_id, &m, &mr, &err));
    tu_assert_msg_has(mr.parameters_json, "\"refuse\"");
    free(mr.parameters_json);
    pl_map_free(m);
    pl_record_free(rec);
    write_text(f->dir, "inf.json", SIDECAR_HEAD
               "\"sites\": [ { \"site\": \"A1\", \"maps\": [ { \"file\": \"inf.npy\", "
               "\"infinite_as_no_data\": 1 } ] } ] }");
    assert_int_equal(pl_record_load_sidecar(&rec, path, &err), PL_EFORMAT);
    tu_assert_msg_has(err.msg, "infinite_as_no_data");
    free(path);
    free(inf);
}

/*
 * Every quantity a reduction records is one `plyledger quantities` lists,
 * with a unit it accepts: the reducer and the vocabulary agree. The frames
 * are the semi-infinite body's cooling after a flash, dT = 1 / sqrt(t)
 * (Carslaw & Jaeger, Conduction of Heat in Solids, 2nd ed., 1959, §10.3),
 * with every product at one time, depth and pulse phase asked for.
 */
static void test_record__reduced_quantities_are_in_the_vocabulary(void **state)
{
    (void)state;
    pl_err err = { 0 };
    enum { W = 8, H = 8, N = 800, PRE = 5 };
    double *times = malloc(N * sizeof *times);
    float *frame = malloc(W * H * sizeof *frame);
    assert_non_null(times);
    assert_non_null(frame);
    for (int i = 0; i < N; i++)
        times[i] = (i - PRE + 1) * 0.02;
    double at[1] = { 0.5 };
    pl_reduce_options o = PL_REDUCE_OPTIONS_INIT;
    o.times_s = at;
    o.ntimes = 1;
    o.time_products = PL_REDUCE_AT_ALL;
    o.diffusivity_mm2_s = 0.42;
    o.depth_method = PL_DEPTH_BOTH;
    o.threads = 1;
    pl_reducer *r = NULL;
    TU_OK(pl_reducer_new(&r, W, H, times, N, PRE, &o, &err));
    for (uint32_t i = 0; i < N; i++) {
        if (!pl_reducer_frame_needed(r, i))
            continue;
        for (int p = 0; p < W * H; p++)
            frame[p] = 293.15f + (times[i] > 0
                                      ? (float)(1.0 / sqrt(times[i])) * (1.0f + 0.01f * (float)p)
                                      : 0.0f);
        TU_OK(pl_reducer_frame(r, i, frame, &err));
    }
    pl_map *m = NULL;
    TU_OK(pl_reducer_finish(r, &m, NULL, &err));
    pl_reducer_free(r);
    assert_true(m->nchannels >= 10);
    for (uint32_t c = 0; c < m->nchannels; c++) {
        const pl_quantity_info *q = pl_quantity_lookup(m->channels[c].quantity);
        if (!q)
            fail_msg("channel %u: quantity %s is not in the vocabulary", c,
                     m->channels[c].quantity);
        TU_OK(pl_quantity_check(m->channels[c].quantity, m->channels[c].unit, &err));
    }
    pl_map_free(m);
    free(frame);
    free(times);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_record__sidecar_gives_sites_overrides_and_paths, setup, teardown),
        cmocka_unit_test_setup_teardown(test_record__sidecar_refuses_unknown_keys_and_bad_types, setup, teardown),
        cmocka_unit_test_setup_teardown(test_record__sidecar_refuses_empty_and_repeated_sites, setup, teardown),
        cmocka_unit_test_setup_teardown(test_record__apply_refuses_empty_and_repeated_sites, setup, teardown),
        cmocka_unit_test_setup_teardown(test_record__sidecar_messages_name_file_and_site, setup, teardown),
        cmocka_unit_test_setup_teardown(test_record__apply_of_a_sidecar_names_it, setup, teardown),
        cmocka_unit_test_setup_teardown(test_record__apply_records_and_completes_from_the_site, setup, teardown),
        cmocka_unit_test_setup_teardown(test_record__apply_is_all_or_nothing, setup, teardown),
        cmocka_unit_test_setup_teardown(test_record__apply_prepares_maps_before_taking_the_write_lock, setup, teardown),
        cmocka_unit_test(test_record__add_map_checks_lists),
        cmocka_unit_test_setup_teardown(test_record__registration_pair_and_outcome, setup, teardown),
        cmocka_unit_test_setup_teardown(test_record__simulated_sequences_make_simulated_inspections, setup, teardown),
        cmocka_unit_test_setup_teardown(test_record__sidecar_says_simulated_and_hours_reason, setup, teardown),
        cmocka_unit_test_setup_teardown(test_record__infinities_become_no_data_only_when_asked, setup, teardown),
        cmocka_unit_test(test_record__reduced_quantities_are_in_the_vocabulary),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
