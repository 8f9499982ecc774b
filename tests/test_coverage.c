/*
 * test_coverage.c - what one check of an airframe covered
 * (plyledger/coverage.h).
 *
 * External reference: the plan's areas in closed form: each synthetic site
 * is a 128 x 96 px map at 0.5 mm pitch, 64 x 48 mm = 3072 mm^2
 * (tests/testsite.h); the compared fraction is the comparison's own
 * record (1 - its uncompared fraction).
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>
#include <cjson/cJSON.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plyledger.h"
#include "testsite.h"
#include "testutil.h"

static void compare(ts_fixture *f, const char *code, double min_ncc)
{
    pl_compare_options o = ts_options();
    if (isfinite(min_ncc))
        o.reg.min_ncc = min_ncc;
    pl_site_comparison *sc = NULL;
    pl_err err = { 0 };
    TU_OK(pl_compare_site(&sc, f->store, TS_SERIAL, code, 0, &o, &err));
    pl_site_comparison_free(sc);
}

/* Four sites; the check inspects three: C01 compared, C02's registration
 * refused by its quality limit, C03 inspected and never compared; C04 is
 * not inspected. */
static void test_coverage__a_missed_site_and_a_refused_registration(void **state)
{
    ts_fixture *f = *state;
    ts_add_site(f->store, "C03");
    ts_add_site(f->store, "C04");
    ts_disc d = { 64, 48, 5.0, 1.0 };
    const char *codes[4] = { "C01", "C02", "C03", "C04" };
    for (int i = 0; i < 4; i++)
        ts_inspect(f->store, codes[i], "baseline", "2011-03-01", NULL, 0, 0, 0, &d, 1,
                   10 + (unsigned)i);
    for (int i = 0; i < 3; i++)
        ts_inspect(f->store, codes[i], "scheduled", "2016-03-01", "HC-1", 0, 6.0, -4.0, &d, 1,
                   20 + (unsigned)i);
    compare(f, "C01", NAN);
    compare(f, "C02", 0.999999); /* above what this pair reaches: refused */
    pl_coverage *c = NULL;
    pl_err err = { 0 };
    TU_OK(pl_coverage_load(&c, f->store, TS_SERIAL, "hc-1", &err));
    assert_int_equal(c->nsites, 4);
    assert_int_equal(c->missed, 1);
    assert_int_equal(c->refused, 1);
    assert_int_equal(c->not_compared, 1);
    assert_int_equal(c->compared, 1);
    /* missed first */
    assert_string_equal(c->sites[0].code, "C04");
    assert_int_equal(c->sites[0].state, PL_COVERAGE_MISSED);
    assert_int_equal(c->sites[0].inspection, 0);
    const pl_coverage_site *s1 = &c->sites[1], *s2 = &c->sites[2], *s3 = &c->sites[3];
    assert_string_equal(s1->code, "C01");
    assert_int_equal(s1->state, PL_COVERAGE_COMPARED);
    assert_string_equal(s2->code, "C02");
    assert_int_equal(s2->state, PL_COVERAGE_REFUSED);
    tu_assert_msg_has(s2->reason, "cross-correlation");
    assert_string_equal(s3->code, "C03");
    assert_int_equal(s3->state, PL_COVERAGE_NOT_COMPARED);
    double site_mm2 = TS_W * TS_PITCH * TS_H * TS_PITCH;
    for (size_t i = 0; i < 4; i++)
        tu_assert_close(c->sites[i].area_mm2, site_mm2, 1e-9, "site area");
    /* C01: shifted by (6, -4) px, so about (1 - 6/128)(1 - 4/96) of it overlaps */
    double overlap = (1 - 6.0 / TS_W) * (1 - 4.0 / TS_H);
    tu_assert_close(s1->overlap_fraction, overlap, 0.02, "C01 overlap");
    tu_assert_close(s1->compared_fraction, overlap, 0.03, "C01 compared fraction");
    tu_assert_close(s1->compared_mm2, site_mm2 * s1->compared_fraction, 1e-9, "C01 compared");
    /* the comparison's own record */
    tu_assert_close(c->plan_mm2, 4 * site_mm2, 1e-9, "plan area");
    tu_assert_close(c->inspected_mm2, 3 * site_mm2, 1e-9, "inspected area");
    tu_assert_close(c->inspected_percent, 75.0, 1e-9, "inspected percent");
    tu_assert_close(c->compared_mm2, s1->compared_mm2, 1e-9, "compared area");
    tu_assert_close(c->compared_percent, 100.0 * s1->compared_mm2 / (4 * site_mm2), 1e-9,
                    "compared percent");

    /* the missed site leads every output */
    char line[512];
    assert_int_equal(pl_coverage_missed_line(line, sizeof line, c), 1);
    assert_string_equal(line, "NOT INSPECTED in check hc-1 of CMP-0001: 1 site of 4 (C04)");
    char *text = NULL;
    TU_OK(pl_coverage_text(&text, c, &err));
    assert_true(strncmp(text, line, strlen(line)) == 0);
    assert_non_null(strstr(text, "refused: "));
    assert_non_null(strstr(text, "does not replace"));
    free(text);
    char *json = NULL;
    TU_OK(pl_coverage_json(&json, c, &err));
    cJSON *o = cJSON_Parse(json);
    assert_non_null(o);
    assert_string_equal(cJSON_GetStringValue(cJSON_GetObjectItem(o, "missed_warning")), line);
    assert_string_equal(cJSON_GetStringValue(cJSON_GetArrayItem(cJSON_GetObjectItem(o, "missed"),
                                                                0)), "C04");
    cJSON_Delete(o);
    free(json);
    char *csv = NULL;
    TU_OK(pl_coverage_csv(&csv, c, &err));
    assert_true(strncmp(csv, "\"airframe\",\"task\",\"site\",", 25) == 0);
    assert_non_null(strstr(csv, "\"C04\",\"300\",\"missed\""));
    size_t rows = 0;
    for (const char *p = csv; *p; p++)
        rows += *p == '\n';
    assert_int_equal(rows, 5);
    free(csv);
    pl_coverage_free(c);

    /* the check's comparison names the missed site too */
    pl_compare_options co = ts_options();
    co.dry_run = 1;
    pl_check_comparison *cc = NULL;
    TU_OK(pl_compare_check(&cc, f->store, TS_SERIAL, "HC-1", &co, NULL, NULL, &err));
    assert_int_equal(cc->nsites, 3);
    assert_int_equal(cc->missed, 1);
    assert_string_equal(cc->missed_warning,
                        "NOT INSPECTED in check HC-1 of CMP-0001: 1 site of 4 (C04)");
    TU_OK(pl_check_comparison_json(&json, cc, &err));
    o = cJSON_Parse(json);
    assert_non_null(o);
    assert_string_equal(cJSON_GetStringValue(cJSON_GetObjectItem(o, "missed_warning")),
                        cc->missed_warning);
    cJSON_Delete(o);
    free(json);
    pl_check_comparison_free(cc);

    /* no inspection under a task, no task, no airframe: refused, named */
    assert_int_equal(pl_coverage_load(&c, f->store, TS_SERIAL, "HC-9", &err), PL_ENOTFOUND);
    tu_assert_msg_has(err.msg, "HC-9");
    assert_int_equal(pl_coverage_load(&c, f->store, TS_SERIAL, "", &err), PL_EINVAL);
    assert_int_equal(pl_coverage_load(&c, f->store, "NO-SUCH", "HC-1", &err), PL_ENOTFOUND);
}

/* A check that inspected and compared every site has no missed line. */
static void test_coverage__a_complete_check_says_nothing_is_missed(void **state)
{
    ts_fixture *f = *state;
    ts_disc d = { 64, 48, 5.0, 1.0 };
    const char *codes[2] = { "C01", "C02" };
    for (int i = 0; i < 2; i++) {
        ts_inspect(f->store, codes[i], "baseline", "2011-03-01", NULL, 0, 0, 0, &d, 1,
                   30 + (unsigned)i);
        ts_inspect(f->store, codes[i], "scheduled", "2016-03-01", "HC-1", 0, 0, 0, &d, 1,
                   40 + (unsigned)i);
        compare(f, codes[i], NAN);
    }
    pl_coverage *c = NULL;
    pl_err err = { 0 };
    TU_OK(pl_coverage_load(&c, f->store, TS_SERIAL, "HC-1", &err));
    assert_int_equal(c->missed, 0);
    assert_int_equal(c->compared, 2);
    char line[256];
    assert_int_equal(pl_coverage_missed_line(line, sizeof line, c), 0);
    assert_string_equal(line, "");
    tu_assert_close(c->inspected_percent, 100.0, 1e-9, "inspected percent");
    assert_true(c->compared_percent > 95.0);
    pl_coverage_free(c);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_coverage__a_missed_site_and_a_refused_registration,
                                        ts_setup, ts_teardown),
        cmocka_unit_test_setup_teardown(test_coverage__a_complete_check_says_nothing_is_missed,
                                        ts_setup, ts_teardown),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
