/*
 * test_record.c - recording batches: sidecar parsing, completing maps from
 * the site, and all-or-nothing writes into a real store.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
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
    assert_int_equal(pl_map_new(&m, w, h, 1, NULL), 0);
    for (uint32_t i = 0; i < w * h; i++)
        m->data[i] = base + (float)i * 0.25f;
    char *p = tu_path(dir, name);
    assert_int_equal(pl_map_save_npy(m, p, NULL), 0);
    free(p);
    pl_map_free(m);
}

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    f->dir = tu_tmpdir();
    f->store_path = tu_path(f->dir, "s.plyledger");
    pl_err err = { 0 };
    assert_int_equal(pl_store_create(&f->store, f->store_path, &err), 0);
    pl_airframe af;
    memset(&af, 0, sizeof af);
    strcpy(af.serial, "REC-0001");
    strcpy(af.aircraft_type, "TX-1");
    assert_int_equal(pl_store_add_airframe(f->store, &af, NULL, &err), 0);
    const char *plan =
        "site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,width_px,height_px,pitch_mm\n"
        "A1,flash-thermography,100,20,30,1,0,0,0,1,0,6,4,0.5\n"
        "A2,flash-thermography,200,20,30,1,0,0,0,0,-1,0,0,0.25\n";
    write_text(f->dir, "plan.csv", plan);
    char *pp = tu_path(f->dir, "plan.csv");
    pl_plan *p;
    assert_int_equal(pl_plan_load(&p, pp, &err), 0);
    assert_int_equal(pl_plan_apply(f->store, p, "REC-0001", NULL, &err), 0);
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
    assert_int_equal(pl_record_load_sidecar(&rec, path, &err), 0);
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
        { "{ \"sites\": [ { \"site\": \"A1\" } ] ", "line 1" },
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        write_text(f->dir, "bad.json", cases[i].json);
        char *path = tu_path(f->dir, "bad.json");
        pl_record *rec = NULL;
        pl_err err = { 0 };
        int rc = pl_record_load_sidecar(&rec, path, &err);
        if (rc == 0 || !strstr(err.msg, cases[i].needle))
            fail_msg("case %zu: rc %d, message '%s'", i, rc, err.msg);
        assert_null(rec);
        free(path);
    }
}

static void test_record__apply_records_and_completes_from_the_site(void **state)
{
    fixture *f = *state;
    write_text(f->dir, "c.json", sidecar_text);
    char *path = tu_path(f->dir, "c.json");
    pl_record *rec;
    pl_err err = { 0 };
    assert_int_equal(pl_record_load_sidecar(&rec, path, &err), 0);
    int rc = pl_record_apply(f->store, rec, NULL, NULL, &err);
    if (rc)
        fail_msg("apply: %s", err.msg);
    assert_true(rec->sites[0].inspection_key > 0);
    assert_true(rec->sites[1].maps[0].map_id > 0);

    /* Site A1's pitch and frame came from the site; A2 kept its placement. */
    pl_map *m;
    pl_map_record mr;
    assert_int_equal(pl_store_load_map(f->store, rec->sites[0].maps[0].map_id, &m, &mr, &err), 0);
    assert_true(m->pitch_u == 0.5 && m->pitch_v == 0.5);
    assert_true(m->placement.origin[0] == 100.0);
    assert_string_equal(m->channels[0].quantity, "temperature-contrast");
    assert_true(m->data[5] == 1.0f + 5 * 0.25f);
    free(mr.parameters_json);
    pl_map_free(m);
    assert_int_equal(pl_store_load_map(f->store, rec->sites[1].maps[0].map_id, &m, &mr, &err), 0);
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
    assert_int_equal(pl_record_new(&rec, &err), 0);
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
    assert_int_equal(pl_record_add_site(rec, &in, &s0, &err), 0);
    strcpy(in.site_code, "A1");
    assert_int_equal(pl_record_add_site(rec, &in, &s1, &err), 0);
    char *a2 = tu_path(f->dir, "a2.npy"), *wrong = tu_path(f->dir, "wrong.npy");
    assert_int_equal(pl_record_add_map(rec, s0, a2, "depth", NULL, NAN, NAN, &err), 0);
    assert_int_equal(pl_record_add_map(rec, s1, wrong, "depth", "mm", NAN, NAN, &err), 0);
    int rc = pl_record_apply(f->store, rec, NULL, NULL, &err);
    assert_int_equal(rc, PL_ENOMATCH);
    assert_non_null(strstr(err.msg, "A1"));
    assert_int_equal(rec->sites[0].inspection_key, 0);
    int n = 0;
    assert_int_equal(pl_store_list_inspections(f->store, NULL, count_rows, &n, &err), 0);
    assert_int_equal(n, 0);
    pl_record_free(rec);
    free(a2);
    free(wrong);
}

static void test_record__add_map_checks_lists(void **state)
{
    (void)state;
    pl_record *rec;
    pl_err err = { 0 };
    assert_int_equal(pl_record_new(&rec, &err), 0);
    pl_inspection in;
    memset(&in, 0, sizeof in);
    assert_int_equal(pl_record_add_site(rec, &in, NULL, &err), 0);
    assert_int_equal(pl_record_add_map(rec, 0, "x.npy", "depth,phase", "mm", NAN, NAN, &err), PL_EINVAL);
    assert_int_equal(pl_record_add_map(rec, 0, "x.npy", "depth", "K", NAN, NAN, &err), PL_EINVAL);
    assert_int_equal(pl_record_add_map(rec, 0, "x.npy", "my-quantity", NULL, NAN, NAN, &err), PL_EINVAL);
    assert_int_equal(pl_record_add_map(rec, 0, "x.npy", "depth", NULL, -1.0, NAN, &err), PL_EINVAL);
    assert_int_equal(pl_record_add_map(rec, 1, "x.npy", "depth", NULL, NAN, NAN, &err), PL_EINVAL);
    assert_int_equal(pl_record_add_map(rec, 0, "x.npy", " depth , phase ", "mm,rad", NAN, NAN, &err), 0);
    assert_string_equal(rec->sites[0].maps[0].channels[1].quantity, "phase");
    assert_int_equal(rec->sites[0].nmaps, 1);
    pl_record_free(rec);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_record__sidecar_gives_sites_overrides_and_paths, setup, teardown),
        cmocka_unit_test_setup_teardown(test_record__sidecar_refuses_unknown_keys_and_bad_types, setup, teardown),
        cmocka_unit_test_setup_teardown(test_record__apply_records_and_completes_from_the_site, setup, teardown),
        cmocka_unit_test_setup_teardown(test_record__apply_is_all_or_nothing, setup, teardown),
        cmocka_unit_test(test_record__add_map_checks_lists),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
