/*
 * test_plan.c - site plans: CSV to sites, strict columns and numbers, and
 * their all-or-none addition to an airframe.
 *
 * External references: Python's csv module (an RFC 4180 reader) parses the
 * same plan in tests/ref/store_plan_ref.py and must agree field for field;
 * SQLite's PRAGMA integrity_check / foreign_key_check after applying
 * (https://www.sqlite.org/pragma.html).
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

#include "plyledger/plan.h"
#include "plyledger/store.h"
#include "testutil.h"

typedef struct fixture {
    char *dir;
} fixture;

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    assert_non_null(f);
    f->dir = tu_tmpdir();
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    tu_rmtree(f->dir);
    free(f);
    return 0;
}

/* Write `text` to dir/name; returns the malloc'd path. */
static char *plan_file(const fixture *f, const char *name, const char *text)
{
    char *path = tu_path(f->dir, name);
    assert_int_equal(tu_write_file(path, text, strlen(text)), 0);
    return path;
}

#define HEADER "site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,pitch_mm\n"

/* Load `text` and expect failure `code` with exactly the message: the plan's
 * path followed by `want`. */
static void expect_refusal(const fixture *f, const char *text, int code, const char *want)
{
    char *path = plan_file(f, "plan.csv", text);
    pl_err err = { 0 };
    pl_plan *plan = (pl_plan *)&err;
    int rc = pl_plan_load(&plan, path, &err);
    char msg[1024];
    snprintf(msg, sizeof msg, "%s%s", path, want);
    if (rc != code)
        fail_msg("expected %d, got %d (%s)", code, rc, err.msg);
    assert_null(plan);
    assert_int_equal(err.code, code);
    assert_string_equal(err.msg, msg);
    free(path);
}

static void test_plan__loads_sites_with_exact_values(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    /* a byte order mark, columns in another order, a comment, CRLF on one
     * line, spaces around unquoted fields, quoted commas, doubled quotes and
     * a line break */
    char *path = plan_file(f, "plan.csv",
        "\xef\xbb\xbf# plan of the test type, revision A\n"
        "zone,site,description,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,"
        "pitch_mm,pitch_v_mm,thickness_mm,width_px,height_px,coord_system,coord_unit,"
        "frame,stringer,material,diffusivity_mm2_s\n"
        "231,F01,\"Crown skin, antenna \"\"A\"\" doubler\",flash-thermography,5200.5,-48,3480,"
        "1,0,0,0,1,0,0.5,,3.2,96,72,,,FR 6,STR 1,CFRP,0.42\r\n"
        "\n"
        "221,F02,\"Door surround,\nforward upper corner\",flash-thermography,6100,-1490,2520,"
        "1,0,0,0,0,-1,  1.25  ,0.75,,0,0,STA/BL/WL,mm,,,,\n"
        "# a comment between sites, with \"quotes\", commas, and all\n"
        "571,W01,,ultrasound-pulse-echo,1e4,2.5E1,-0.125,0,1,0,0,0,1,2,,,,,LOCAL,in,,,,\n");
    pl_plan *plan = NULL;
    TU_OK(pl_plan_load(&plan, path, &err));
    assert_int_equal(plan->nsites, 3);

    const pl_site *s = &plan->sites[0];
    assert_string_equal(s->code, "F01");
    assert_string_equal(s->airframe_serial, "");
    assert_string_equal(s->zone, "231");
    assert_string_equal(s->description, "Crown skin, antenna \"A\" doubler");
    assert_string_equal(s->method, "flash-thermography");
    assert_string_equal(s->frame, "FR 6");
    assert_string_equal(s->stringer, "STR 1");
    assert_string_equal(s->material, "CFRP");
    assert_true(s->map_frame.origin[0] == 5200.5 && s->map_frame.origin[1] == -48 &&
                s->map_frame.origin[2] == 3480);
    assert_true(s->map_frame.u[0] == 1 && s->map_frame.u[1] == 0 && s->map_frame.u[2] == 0);
    assert_true(s->map_frame.v[0] == 0 && s->map_frame.v[1] == 1 && s->map_frame.v[2] == 0);
    assert_true(s->pitch_u == 0.5 && s->pitch_v == 0.5); /* pitch_v_mm empty: pitch_mm */
    assert_true(s->thickness_mm == 3.2);
    assert_true(s->diffusivity_mm2_s == 0.42);
    assert_int_equal(s->width_px, 96);
    assert_int_equal(s->height_px, 72);
    assert_string_equal(s->map_frame.system, "STA/BL/WL"); /* defaults */
    assert_string_equal(s->map_frame.unit, "mm");

    s = &plan->sites[1];
    assert_string_equal(s->code, "F02");
    assert_string_equal(s->description, "Door surround,\nforward upper corner");
    assert_true(s->map_frame.v[2] == -1);
    assert_true(s->pitch_u == 1.25 && s->pitch_v == 0.75);
    assert_true(isnan(s->thickness_mm) && isnan(s->diffusivity_mm2_s));
    assert_int_equal(s->width_px, 0);
    assert_string_equal(s->frame, "");

    s = &plan->sites[2];
    assert_string_equal(s->code, "W01");
    assert_string_equal(s->method, "ultrasound-pulse-echo");
    assert_string_equal(s->description, "");
    assert_true(s->map_frame.origin[0] == 1e4 && s->map_frame.origin[1] == 25 &&
                s->map_frame.origin[2] == -0.125);
    assert_true(s->pitch_u == 2 && s->pitch_v == 2);
    assert_string_equal(s->map_frame.system, "LOCAL");
    assert_string_equal(s->map_frame.unit, "in");
    pl_plan_free(plan);
    pl_plan_free(NULL);
    free(path);
}

/* Write what the library read as JSON, for the reference script. */
static void write_parsed(const pl_plan *plan, const char *path)
{
    cJSON *arr = cJSON_CreateArray();
    assert_non_null(arr);
    for (size_t i = 0; i < plan->nsites; i++) {
        const pl_site *s = &plan->sites[i];
        cJSON *o = cJSON_CreateObject();
        cJSON_AddStringToObject(o, "site", s->code);
        cJSON_AddStringToObject(o, "method", s->method);
        cJSON_AddStringToObject(o, "zone", s->zone);
        cJSON_AddStringToObject(o, "description", s->description);
        cJSON_AddStringToObject(o, "frame", s->frame);
        cJSON_AddStringToObject(o, "stringer", s->stringer);
        cJSON_AddStringToObject(o, "material", s->material);
        const double v[] = { s->map_frame.origin[0], s->map_frame.origin[1],
                             s->map_frame.origin[2], s->map_frame.u[0], s->map_frame.u[1],
                             s->map_frame.u[2], s->map_frame.v[0], s->map_frame.v[1],
                             s->map_frame.v[2], s->pitch_u, s->pitch_v };
        const char *names[] = { "origin_x", "origin_y", "origin_z", "u_x", "u_y", "u_z",
                                "v_x", "v_y", "v_z", "pitch_mm", "pitch_v_mm" };
        for (int k = 0; k < 11; k++) {
            char num[40];
            snprintf(num, sizeof num, "%.17g", v[k]);
            cJSON_AddStringToObject(o, names[k], num);
        }
        cJSON_AddItemToArray(arr, o);
    }
    char *text = cJSON_Print(arr);
    assert_non_null(text);
    assert_int_equal(tu_write_file(path, text, strlen(text)), 0);
    cJSON_free(text);
    cJSON_Delete(arr);
}

/*
 * RFC 4180 quoting as Python's csv module reads it: every text field and
 * every number of the library's parse equals the reference's.
 */
static void test_plan__agrees_with_python_csv(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    char *path = plan_file(f, "quoted.csv",
        "site,description,zone,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,"
        "pitch_mm,frame,stringer,material\n"
        "A-1,\"comma, inside\",\"\",flash-thermography,1,2,3,1,0,0,0,1,0,0.5,FR 1,,\n"
        "B2,\"quote \"\"inside\"\" and, comma\",12,eddy-current,-1.5e2,0.000001,7,"
        "0.6,0.8,0,-0.8,0.6,0,0.25,\"FR 2\",\"STR 3L\",\"CFRP, woven\"\n"
        "C3,\"two\r\nlines, CRLF\",\"z\",ultrasound-through-transmission,0,0,0,0,0,1,1,0,0,"
        "3,\"\",\"\",\"\"\r\n"
        "D4,\"tab\there\",,eddy-current,1,1,1,1,0,0,0,1,0,1,,,\n");
    pl_plan *plan = NULL;
    TU_OK(pl_plan_load(&plan, path, &err));
    assert_int_equal(plan->nsites, 4);
    assert_string_equal(plan->sites[0].code, "A-1");
    assert_string_equal(plan->sites[2].description, "two\r\nlines, CRLF");
    char *json = tu_path(f->dir, "parsed.json");
    write_parsed(plan, json);
    assert_int_equal(tu_python("store_plan_ref.py", path, json, NULL), 0);
    pl_plan_free(plan);
    free(json);
    free(path);
}

/* The sample fleet's plan loads, every site passes the checks, and Python's
 * csv module reads the same sites from it (tests/ref/store_plan_ref.py). */
static void test_plan__loads_the_sample_fleet_plan(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    const char *root = getenv("PL_SOURCE_ROOT");
    assert_non_null(root);
    char *path = tu_path(root, "sample-fleet/plan-cr7.csv");
    pl_plan *plan = NULL;
    TU_OK(pl_plan_load(&plan, path, &err));
    assert_true(plan->nsites >= 1);
    for (size_t i = 0; i < plan->nsites; i++)
        TU_OK(pl_site_check(&plan->sites[i], &err));
    char *json = tu_path(f->dir, "parsed.json");
    write_parsed(plan, json);
    assert_int_equal(tu_python("store_plan_ref.py", path, json, NULL), 0);
    pl_plan_free(plan);
    free(json);
    free(path);
}

static void test_plan__refuses_bad_columns(void **state)
{
    fixture *f = *state;
    expect_refusal(f, "site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,pitch_mm\n"
                   "F01,eddy-current,0,0,0,1,0,0,0,1,1\n",
                   PL_EFORMAT, ": missing column v_z");
    expect_refusal(f, "site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,pich_mm\n"
                   "F01,eddy-current,0,0,0,1,0,0,0,1,0,1\n",
                   PL_EFORMAT, ": unknown column 'pich_mm'");
    /* names are case-sensitive */
    expect_refusal(f, "Site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,pitch_mm\n",
                   PL_EFORMAT, ": unknown column 'Site'");
    expect_refusal(f, "site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,pitch_mm,"
                   "zone,zone\n", PL_EFORMAT, ": column zone appears twice");
    expect_refusal(f, HEADER "F01,eddy-current,0,0,0,1,0,0,0,1,0,1,7\n",
                   PL_EFORMAT, " line 2: 13 fields where the header has 12");
}

static void test_plan__refuses_bad_numbers(void **state)
{
    fixture *f = *state;
    expect_refusal(f, HEADER "F01,eddy-current,0,0,0,1,0,0,0,1,0,1\n"
                   "F02,eddy-current,0,0,0,1,0,0,0,1,0,abc\n",
                   PL_EFORMAT, " line 3: column pitch_mm: 'abc' is not a number");
    expect_refusal(f, HEADER "F01,eddy-current,0,0,0x10,1,0,0,0,1,0,1\n",
                   PL_EFORMAT, " line 2: column origin_z: '0x10' is not a number");
    /* blanks around a number are not part of it, blanks inside are */
    expect_refusal(f, HEADER "F01,eddy-current,0,0,0,1,0,0,0,1,0,\"1. 5\"\n",
                   PL_EFORMAT, " line 2: column pitch_mm: '1. 5' is not a number");
    expect_refusal(f, HEADER "F01,eddy-current,0,,0,1,0,0,0,1,0,1\n",
                   PL_EFORMAT, " line 2: column origin_y: a value is required");
    expect_refusal(f, HEADER "F01,eddy-current,0,0,0,1,0,0,0,1,0,nan\n",
                   PL_EINVAL, " line 2: column pitch_mm: 'nan' is not a pitch > 0");
    expect_refusal(f, HEADER "F01,eddy-current,0,0,0,1,0,0,0,1,0,-0.5\n",
                   PL_EINVAL, " line 2: column pitch_mm: '-0.5' is not a pitch > 0");
    expect_refusal(f, HEADER "F01,eddy-current,0,0,0,1,0,0,0,1,0,0\n",
                   PL_EINVAL, " line 2: column pitch_mm: '0' is not a pitch > 0");
    expect_refusal(f, "site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,pitch_mm,"
                   "pitch_v_mm\nF01,eddy-current,0,0,0,1,0,0,0,1,0,1,-1\n",
                   PL_EINVAL, " line 2: column pitch_v_mm: '-1' is not a pitch > 0");
    expect_refusal(f, HEADER "F01,eddy-current,inf,0,0,1,0,0,0,1,0,1\n",
                   PL_EINVAL, " line 2: column origin_x: 'inf' is not a finite number");
    expect_refusal(f, "site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,pitch_mm,"
                   "width_px\nF01,eddy-current,0,0,0,1,0,0,0,1,0,1,12.5\n",
                   PL_EFORMAT, " line 2: column width_px: '12.5' is not a whole number of "
                   "pixels");
    expect_refusal(f, "site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,pitch_mm,"
                   "thickness_mm\nF01,eddy-current,0,0,0,1,0,0,0,1,0,1,-2\n",
                   PL_EINVAL, " line 2: site F01: thickness_mm must be > 0 or unknown (got -2)");
    /* finite, but out of all plausibility (the bounds of pl_bound_get()) */
    expect_refusal(f, HEADER "F01,eddy-current,0,0,0,1,0,0,0,1,0,1e308\n", PL_ERANGE,
                   " line 2: column pitch_mm: 1e+308 mm is outside the plausible pitch, 0.001 to "
                   "100 mm");
    expect_refusal(f, "site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,pitch_mm,"
                   "pitch_v_mm\nF01,eddy-current,0,0,0,1,0,0,0,1,0,1,0.0000001\n", PL_ERANGE,
                   " line 2: column pitch_v_mm: 1e-07 mm is outside the plausible pitch, 0.001 "
                   "to 100 mm");
    expect_refusal(f, "site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,pitch_mm,"
                   "thickness_mm\nF01,eddy-current,0,0,0,1,0,0,0,1,0,1,2e9\n", PL_ERANGE,
                   " line 2: column thickness_mm: 2000000000 mm is outside the plausible "
                   "thickness, 0.01 to 500 mm");
    expect_refusal(f, "site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,pitch_mm,"
                   "diffusivity_mm2_s\nF01,eddy-current,0,0,0,1,0,0,0,1,0,1,1e9\n", PL_ERANGE,
                   " line 2: column diffusivity_mm2_s: 1000000000 mm^2/s is outside the "
                   "plausible diffusivity, 0.001 to 500 mm^2/s");
    expect_refusal(f, HEADER "F01,eddy-current,0,1e300,0,1,0,0,0,1,0,1\n", PL_ERANGE,
                   " line 2: column origin_y: 1e+300 is outside the plausible part coordinate, "
                   "-1000000 to 1000000");
}

static void test_plan__refuses_bad_sites(void **state)
{
    fixture *f = *state;
    /* a quoted field over two lines: line numbers still count physical lines */
    expect_refusal(f, HEADER "F01,\"eddy-\ncurrent\",0,0,0,1,0,0,0,1,0,1\n",
                   PL_EINVAL, " line 2: column method contains a control character (U+000A)");
    expect_refusal(f, "site,description,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,"
                   "v_z,pitch_mm\n"
                   "S01,\"two\nlines\",eddy-current,0,0,0,1,0,0,0,1,0,1\n"
                   "S04,,eddy-current,0,0,0,1,0,0,0,1,0,1\n"
                   "# comment\n"
                   "S05,,eddy-current,0,0,0,1,0,0,0,1,0,1\n"
                   "S04,,eddy-current,0,0,0,1,0,0,0,1,0,1\n",
                   PL_EEXISTS, " line 7: duplicate site code S04 (first on line 4)");
    expect_refusal(f, HEADER "F01,eddy-current,0,0,0,1,0.1,0,0,1,0,1\n",
                   PL_EINVAL, " line 2: site F01: placement axis u has length 1.00499, not 1");
    expect_refusal(f, HEADER "F01,eddy-current,0,0,0,1,0,0,1,0,0,1\n",
                   PL_EINVAL, " line 2: site F01: placement axes u and v are not "
                   "perpendicular (u.v = 1)");
    expect_refusal(f, HEADER ",eddy-current,0,0,0,1,0,0,0,1,0,1\n",
                   PL_EFORMAT, " line 2: column site: a value is required");
}

static void test_plan__refuses_files_that_are_not_plans(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    expect_refusal(f, "", PL_EFORMAT, ": empty: no header row");
    expect_refusal(f, "# only a comment\n\n", PL_EFORMAT, ": empty: no header row");
    expect_refusal(f, HEADER, PL_EFORMAT, ": no sites below the header");
    expect_refusal(f, HEADER "F01,\"eddy-current,0,0,0,1,0,0,0,1,0,1\n",
                   PL_EFORMAT, " line 2: a quoted field is not closed");
    expect_refusal(f, HEADER "F01,eddy\"current,0,0,0,1,0,0,0,1,0,1\n",
                   PL_EFORMAT, " line 2: not valid CSV (a quote inside an unquoted field, or "
                   "text after a closing quote)");
    char *missing = tu_path(f->dir, "absent.csv");
    pl_plan *plan = NULL;
    assert_int_equal(pl_plan_load(&plan, missing, &err), PL_EIO);
    assert_non_null(strstr(err.msg, missing));
    assert_null(plan);
    free(missing);
}

/* ---- apply --------------------------------------------------------------------- */

/* Every row of every table, as text. */
static char *dump(const char *path)
{
    sqlite3 *db = NULL;
    assert_int_equal(sqlite3_open(path, &db), SQLITE_OK);
    sqlite3_stmt *t;
    assert_int_equal(sqlite3_prepare_v2(db, "SELECT name FROM sqlite_master WHERE type = 'table'"
                                        " ORDER BY name", -1, &t, NULL), SQLITE_OK);
    size_t cap = 1 << 16, n = 0;
    char *out = calloc(1, cap);
    assert_non_null(out);
    while (sqlite3_step(t) == SQLITE_ROW) {
        char *sql = sqlite3_mprintf("SELECT * FROM \"%w\"", (const char *)sqlite3_column_text(t, 0));
        sqlite3_stmt *r;
        assert_int_equal(sqlite3_prepare_v2(db, sql, -1, &r, NULL), SQLITE_OK);
        sqlite3_free(sql);
        while (sqlite3_step(r) == SQLITE_ROW) {
            for (int c = 0; c < sqlite3_column_count(r); c++) {
                const unsigned char *v = sqlite3_column_text(r, c);
                size_t len = v ? strlen((const char *)v) : 4;
                if (n + len + 2 >= cap) {
                    cap = 2 * (n + len + 2);
                    out = realloc(out, cap);
                    assert_non_null(out);
                }
                memcpy(out + n, v ? (const char *)v : "NULL", len);
                n += len;
                out[n++] = '|';
            }
            out[n++] = '\n';
            out[n] = '\0';
        }
        sqlite3_finalize(r);
    }
    sqlite3_finalize(t);
    sqlite3_close(db);
    return out;
}

/* SQLite's own checks (https://www.sqlite.org/pragma.html): integrity_check
 * answers "ok" and foreign_key_check returns no rows. */
static void check_integrity(const char *path)
{
    sqlite3 *db = NULL;
    assert_int_equal(sqlite3_open(path, &db), SQLITE_OK);
    sqlite3_stmt *st;
    assert_int_equal(sqlite3_prepare_v2(db, "PRAGMA integrity_check", -1, &st, NULL), SQLITE_OK);
    assert_int_equal(sqlite3_step(st), SQLITE_ROW);
    assert_string_equal((const char *)sqlite3_column_text(st, 0), "ok");
    sqlite3_finalize(st);
    assert_int_equal(sqlite3_prepare_v2(db, "PRAGMA foreign_key_check", -1, &st, NULL),
                     SQLITE_OK);
    assert_int_equal(sqlite3_step(st), SQLITE_DONE);
    sqlite3_finalize(st);
    sqlite3_close(db);
}

static int count_sites(void *ud, const pl_site *site)
{
    (void)site;
    (*(int *)ud)++;
    return 0;
}

static void test_plan__apply_is_all_or_none(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    char *db = tu_path(f->dir, "fleet.db");
    pl_store *st = NULL;
    TU_OK(pl_store_create(&st, db, &err));
    pl_airframe af;
    memset(&af, 0, sizeof af);
    snprintf(af.serial, sizeof af.serial, "PLX-0001");
    snprintf(af.aircraft_type, sizeof af.aircraft_type, "PLX-T1");
    TU_OK(pl_store_add_airframe(st, &af, NULL, &err));

    char *path = plan_file(f, "plan.csv", HEADER
                           "F01,flash-thermography,0,0,0,1,0,0,0,1,0,0.5\n"
                           "F02,flash-thermography,10,0,0,1,0,0,0,1,0,0.5\n"
                           "F03,flash-thermography,20,0,0,1,0,0,0,1,0,0.5\n");
    pl_plan *plan = NULL;
    TU_OK(pl_plan_load(&plan, path, &err));

    /* F03 already exists on the airframe: the first two must not land either */
    pl_site s = plan->sites[2];
    snprintf(s.airframe_serial, sizeof s.airframe_serial, "PLX-0001");
    TU_OK(pl_store_add_site(st, &s, NULL, &err));
    char *before = dump(db);
    size_t added = 99;
    int rc = pl_plan_apply(st, plan, "PLX-0001", &added, &err);
    assert_int_equal(rc, PL_EEXISTS);
    /* the refusal names the plan file and the line of the site */
    char want[1024];
    snprintf(want, sizeof want, "%s line 4: site F03 on PLX-0001: code already exists on this "
             "airframe", path);
    assert_string_equal(err.msg, want);
    assert_int_equal(added, 0);
    char *after = dump(db);
    assert_string_equal(before, after);
    free(after);

    /* unknown airframe */
    rc = pl_plan_apply(st, plan, "PLX-0404", &added, &err);
    assert_int_equal(rc, PL_ENOTFOUND);
    assert_non_null(strstr(err.msg, "PLX-0404"));
    after = dump(db);
    assert_string_equal(before, after);
    free(after);

    /* inside a caller's transaction it nests, and rolls back with it */
    memset(&af, 0, sizeof af);
    snprintf(af.serial, sizeof af.serial, "PLX-0002");
    snprintf(af.aircraft_type, sizeof af.aircraft_type, "PLX-T1");
    TU_OK(pl_store_add_airframe(st, &af, NULL, &err));
    free(before);
    before = dump(db);
    TU_OK(pl_store_begin(st, &err));
    TU_OK(pl_plan_apply(st, plan, "PLX-0002", &added, &err));
    assert_int_equal(added, 3);
    pl_store_rollback(st);
    after = dump(db);
    assert_string_equal(before, after);
    free(after);

    TU_OK(pl_plan_apply(st, plan, "PLX-0002", &added, &err));
    assert_int_equal(added, 3);
    pl_site got;
    TU_OK(pl_store_get_site(st, "PLX-0002", "F02", &got, &err));
    assert_true(got.map_frame.origin[0] == 10 && got.pitch_v == 0.5);
    int n = 0;
    pl_site_filter filter = { .airframe_serial = "PLX-0002" };
    TU_OK(pl_store_list_sites(st, &filter, count_sites, &n, &err));
    assert_int_equal(n, 3);
    /* applying it twice adds nothing */
    assert_int_equal(pl_plan_apply(st, plan, "PLX-0002", NULL, &err), PL_EEXISTS);
    n = 0;
    TU_OK(pl_store_list_sites(st, &filter, count_sites, &n, &err));
    assert_int_equal(n, 3);

    pl_store_close(st);
    check_integrity(db);
    pl_plan_free(plan);
    free(before);
    free(path);
    free(db);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
#define T(name) cmocka_unit_test_setup_teardown(name, setup, teardown)
        T(test_plan__loads_sites_with_exact_values),
        T(test_plan__agrees_with_python_csv),
        T(test_plan__loads_the_sample_fleet_plan),
        T(test_plan__refuses_bad_columns),
        T(test_plan__refuses_bad_numbers),
        T(test_plan__refuses_bad_sites),
        T(test_plan__refuses_files_that_are_not_plans),
        T(test_plan__apply_is_all_or_none),
#undef T
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
