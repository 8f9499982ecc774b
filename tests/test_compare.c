/*
 * test_compare.c - the recorded comparison of a site and of a check.
 *
 * External reference: analytic ground truth. Each map is drawn from a
 * formula: a smooth texture (a sum of sinusoids, the phase channel the
 * registration locks on) and a flat-topped disc of known radius in the
 * thermal contrast, over Gaussian noise; the current map is the same
 * formula evaluated at positions shifted by a known amount. The area of a
 * disc is pi r^2 (so a disc growing from r0 to r1 grows by
 * pi (r1^2 - r0^2)); the sizing of a sampled disc is held to 20 % of it, as
 * the change-detection issue asks of the simulator's ground truth.
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

static int64_t comparisons(pl_store *st)
{
    pl_store_summary sum;
    pl_err err = { 0 };
    TU_OK(pl_store_summarize(st, &sum, &err));
    return (int64_t)sum.comparisons;
}

typedef struct recorded_json {
    pl_id id;
    char *json;
} recorded_json;

/* Keep the parameters of the comparison with the given id. */
static int keep_json(void *ud, const pl_comparison_record *c)
{
    recorded_json *r = ud;
    if (c->id == r->id && c->parameters_json)
        r->json = strdup(c->parameters_json);
    return 0;
}

/* The indication and change rows of one comparison, as read back. */
typedef struct rows {
    int nind, nchg;
    struct {
        char role[PL_WORD_SIZE];
        pl_id map_id;
        double area_mm2, area_halfmax_mm2;
        int has_outline;
    } ind[8];
    struct {
        int64_t number;
        char class_[24], baseline_labels[32], current_labels[32];
        double area_delta_mm2, area_limit_mm2, area_margin_mm2;
        int exceeds;
    } chg[8];
} rows;

static int keep_indication(void *ud, const pl_indication_record *x)
{
    rows *r = ud;
    if (r->nind < 8) {
        snprintf(r->ind[r->nind].role, sizeof r->ind[0].role, "%s", x->role);
        r->ind[r->nind].map_id = x->map_id;
        r->ind[r->nind].area_mm2 = x->area_mm2;
        r->ind[r->nind].area_halfmax_mm2 = x->area_halfmax_mm2;
        r->ind[r->nind].has_outline = x->outline && x->outline[0];
    }
    r->nind++;
    return 0;
}

static int keep_change(void *ud, const pl_change_record *x)
{
    rows *r = ud;
    if (r->nchg < 8) {
        r->chg[r->nchg].number = x->number;
        snprintf(r->chg[r->nchg].class_, sizeof r->chg[0].class_, "%s", x->class_);
        snprintf(r->chg[r->nchg].baseline_labels, sizeof r->chg[0].baseline_labels, "%s",
                 x->baseline_labels);
        snprintf(r->chg[r->nchg].current_labels, sizeof r->chg[0].current_labels, "%s",
                 x->current_labels);
        r->chg[r->nchg].area_delta_mm2 = x->area_delta_mm2;
        r->chg[r->nchg].area_limit_mm2 = x->area_limit_mm2;
        r->chg[r->nchg].area_margin_mm2 = x->area_margin_mm2;
        r->chg[r->nchg].exceeds = x->exceeds;
    }
    r->nchg++;
    return 0;
}

/* A ts_disc growing from 6 to 9 mm radius at a no-growth site, seen 2.3 and
 * -1.7 px off: one change, grown, its area change within 20 % of
 * pi (9^2 - 6^2) mm^2, beyond the no-growth limit; recorded with its
 * registration and the criteria revision. */
static void test_compare__a_growing_disc_is_grown_by_its_analytic_area(void **state)
{
    ts_fixture *f = *state;
    ts_disc d0 = { 64, 48, 6.0, 1.0 }, d1 = { 64, 48, 9.0, 1.0 };
    pl_id base = ts_inspect(f->store, "C01", "baseline", "2011-03-01", NULL, 0, 0, 0, &d0, 1, 1);
    pl_id cur = ts_inspect(f->store, "C01", "scheduled", "2016-03-01", "HC-1", 0, 2.3, -1.7, &d1,
                        1, 2);
    int64_t before = comparisons(f->store);
    pl_compare_options o = ts_options();
    pl_site_comparison *sc = NULL;
    pl_err err = { 0 };
    TU_OK(pl_compare_site(&sc, f->store, TS_SERIAL, "C01", 0, &o, &err));
    assert_int_equal(sc->reference.key, base);
    assert_int_equal(sc->current.key, cur);
    assert_true(sc->done);
    assert_string_equal(sc->limits.rule_name, "joint");
    assert_int_equal(sc->criteria_id, f->criteria);
    /* the transform carries the current map onto the baseline: pixel i of
     * the current shows part position i + 2.3 */
    tu_assert_close(sc->reg.transform.dx, 2.3, 0.1, "registration shift (columns)");
    tu_assert_close(sc->reg.transform.dy, -1.7, 0.1, "registration shift (rows)");
    size_t grown = 0, other = 0;
    for (size_t i = 0; i < sc->cmp->count; i++) {
        const pl_change *c = &sc->cmp->changes[i];
        if (!c->reportable)
            continue;
        if (c->kind == PL_CHANGE_GROWN) {
            grown++;
            double want = M_PI * (9.0 * 9.0 - 6.0 * 6.0);
            double got = c->area_delta_mm2[PL_SIZING_THRESHOLD];
            tu_assert_close(got, want, 0.2 * want, "area change (threshold sizing)");
            assert_true(c->exceeds);
            assert_true(c->area_margin_mm2 < 0);
        } else if (c->kind != PL_CHANGE_REGION) {
            other++;
        }
    }
    assert_int_equal(grown, 1);
    assert_int_equal(other, 0);
    assert_true(sc->comparison_id > 0);
    assert_true(sc->registration_id > 0);
    assert_int_equal(comparisons(f->store), before + 1);
    char *json = NULL;
    TU_OK(pl_site_comparison_json(&json, sc, &err));
    assert_non_null(strstr(json, "EXAMPLE VALUES, NOT APPROVED DATA"));
    assert_non_null(strstr(json, "does not replace"));
    assert_non_null(strstr(json, "\"kind\":\t\"grown\""));
    free(json);
    /* the record holds every indication of both maps, measured, with its
     * outline: read back from the store, the discs are pi r^2 within 15 %
     * (analytic; the threshold rule's pixels on a 1 mm grid) */
    recorded_json rj = { sc->comparison_id, NULL };
    TU_OK(pl_store_list_comparisons(f->store, cur, keep_json, &rj, &err));
    assert_non_null(rj.json);
    cJSON *j = cJSON_Parse(rj.json);
    assert_non_null(j);
    const cJSON *det = cJSON_GetObjectItem(j, "detection");
    const double radius[2] = { 6.0, 9.0 };
    const char *side[2] = { "reference", "current" };
    for (int k = 0; k < 2; k++) {
        const cJSON *inds = cJSON_GetObjectItem(cJSON_GetObjectItem(det, side[k]), "indications");
        assert_int_equal(cJSON_GetArraySize(inds), 1);
        const cJSON *ind = cJSON_GetArrayItem(inds, 0);
        const cJSON *sz = cJSON_GetArrayItem(cJSON_GetObjectItem(ind, "sizes"), 0);
        double want = M_PI * radius[k] * radius[k];
        tu_assert_close(cJSON_GetObjectItem(sz, "area_mm2")->valuedouble, want, 0.15 * want,
                        "recorded indication area");
        assert_true(cJSON_IsString(cJSON_GetObjectItem(ind, "outline")));
    }
    cJSON_Delete(j);
    free(rj.json);
    /* and as rows of their own: each side's ts_disc with its map and outline,
     * and each change with its class, deltas, limit and margin */
    rows r = { 0 };
    TU_OK(pl_store_list_indications(f->store, sc->comparison_id, keep_indication, &r, &err));
    assert_int_equal(r.nind, 2);
    for (int k = 0; k < 2; k++) {
        assert_string_equal(r.ind[k].role, side[k][0] == 'r' ? "baseline" : "current");
        assert_int_equal(r.ind[k].map_id, k == 0 ? sc->reference_map : sc->current_map);
        double want = M_PI * radius[k] * radius[k];
        tu_assert_close(r.ind[k].area_mm2, want, 0.15 * want, "indication row area");
        assert_true(r.ind[k].area_halfmax_mm2 > 0);
        assert_true(r.ind[k].has_outline);
    }
    TU_OK(pl_store_list_changes(f->store, sc->comparison_id, keep_change, &r, &err));
    assert_int_equal(r.nchg, (int)sc->cmp->count);
    for (int k = 0; k < r.nchg && k < 8; k++) {
        const pl_change *c = &sc->cmp->changes[k];
        assert_int_equal(r.chg[k].number, k + 1);
        assert_string_equal(r.chg[k].class_, pl_change_kind_name(c->kind));
        assert_int_equal(r.chg[k].exceeds, c->exceeds != 0);
        if (c->kind == PL_CHANGE_GROWN) {
            assert_string_equal(r.chg[k].baseline_labels, "[1]");
            assert_string_equal(r.chg[k].current_labels, "[1]");
            assert_true(r.chg[k].area_delta_mm2 == c->area_delta_mm2[PL_SIZING_THRESHOLD]);
            assert_true(r.chg[k].area_margin_mm2 < 0);
            assert_true(r.chg[k].area_limit_mm2 == c->area_limit_mm2);
        }
    }
    pl_site_comparison_free(sc);
}

/* A ts_disc where the baseline had none is new; the same part seen again
 * with other noise shows no reportable change; against the previous
 * inspection the new ts_disc is stable. */
static void test_compare__new_stable_and_the_previous_inspection(void **state)
{
    ts_fixture *f = *state;
    ts_disc none = { 64, 48, 0, 0 }, d = { 50, 40, 5.0, 0.8 };
    ts_inspect(f->store, "C02", "baseline", "2011-03-01", NULL, 0, 0, 0, &none, 1, 3);
    pl_id hc1 = ts_inspect(f->store, "C02", "scheduled", "2016-03-01", "HC-1", 0, 1.2, 0.8, &d, 1, 4);
    pl_id hc2 = ts_inspect(f->store, "C02", "scheduled", "2021-03-01", "HC-2", 0, -0.7, 1.1, &d, 1, 5);
    pl_compare_options o = ts_options();
    o.dry_run = 1;
    int64_t before = comparisons(f->store);
    pl_site_comparison *sc = NULL;
    pl_err err = { 0 };
    TU_OK(pl_compare_site(&sc, f->store, TS_SERIAL, "C02", hc1, &o, &err));
    assert_string_equal(sc->limits.rule_name, "skin");
    assert_int_equal(sc->cmp->counts[PL_CHANGE_NEW], 1);
    assert_int_equal(sc->cmp->counts[PL_CHANGE_GROWN], 0);
    assert_int_equal(sc->cmp->exceeding, 1); /* 78.5 mm^2 beyond the 20 mm^2 reportable size */
    assert_int_equal(sc->comparison_id, 0);
    pl_site_comparison_free(sc);
    assert_int_equal(comparisons(f->store), before); /* a dry run records nothing */

    o.against = PL_AGAINST_PREVIOUS;
    TU_OK(pl_compare_site(&sc, f->store, TS_SERIAL, "C02", hc2, &o, &err));
    assert_int_equal(sc->reference.key, hc1);
    assert_int_equal(sc->cmp->counts[PL_CHANGE_NEW], 0);
    assert_int_equal(sc->cmp->counts[PL_CHANGE_STABLE], 1);
    assert_int_equal(sc->cmp->exceeding, 0);
    pl_site_comparison_free(sc);

    /* a map compared with a re-acquisition of the same truth */
    o.against = PL_AGAINST_BASELINE;
    pl_id again = ts_inspect(f->store, "C02", "unscheduled", "2021-04-01", NULL, 0, 0, 0, &none, 1,
                          6);
    TU_OK(pl_compare_site(&sc, f->store, TS_SERIAL, "C02", again, &o, &err));
    size_t reportable = 0;
    for (size_t i = 0; i < sc->cmp->count; i++)
        reportable += (size_t)sc->cmp->changes[i].reportable;
    assert_int_equal(reportable, 0);
    assert_int_equal(sc->cmp->exceeding, 0);
    pl_site_comparison_free(sc);
}

/* Refusals record nothing and say where: no baseline, a quantity the maps
 * do not hold, unknown criteria. (A simulated baseline never gets a real
 * inspection after it: the store refuses to record one.) */
static void test_compare__refusals_record_nothing(void **state)
{
    ts_fixture *f = *state;
    ts_disc d = { 64, 48, 4.0, 1.0 };
    pl_compare_options o = ts_options();
    pl_site_comparison *sc = NULL;
    pl_err err = { 0 };
    int64_t before = comparisons(f->store);
    assert_int_equal(pl_compare_site(&sc, f->store, TS_SERIAL, "C01", 0, &o, &err),
                     PL_ENOTFOUND);
    tu_assert_msg_has(err.msg, "C01");
    assert_null(sc);
    ts_inspect(f->store, "C01", "baseline", "2011-03-01", NULL, 0, 0, 0, &d, 1, 7);
    pl_id cur = ts_inspect(f->store, "C01", "scheduled", "2016-03-01", NULL, 0, 0, 0, &d, 1, 8);
    o.quantity = "phase-contrast";
    assert_int_equal(pl_compare_site(&sc, f->store, TS_SERIAL, "C01", cur, &o, &err),
                     PL_ENOMATCH);
    tu_assert_msg_has(err.msg, "phase-contrast");
    o = ts_options();
    o.criteria_name = "NO-SUCH-SET";
    assert_int_equal(pl_compare_site(&sc, f->store, TS_SERIAL, "C01", cur, &o, &err),
                     PL_ENOTFOUND);
    tu_assert_msg_has(err.msg, "NO-SUCH-SET");
    assert_int_equal(comparisons(f->store), before);
}

/* A whole check: every site under the task reference (case ignored), one
 * refused (no rule of the set covers it) and kept as that site's result
 * while the other is compared. */
static void test_compare__a_check_goes_site_by_site(void **state)
{
    ts_fixture *f = *state;
    ts_disc d0 = { 64, 48, 5.0, 1.0 }, d1 = { 64, 48, 5.0, 1.0 };
    ts_inspect(f->store, "C01", "baseline", "2011-03-01", NULL, 0, 0, 0, &d0, 1, 9);
    ts_inspect(f->store, "C01", "scheduled", "2016-03-01", "HC-1", 0, 1.0, 1.0, &d1, 1, 10);
    ts_inspect(f->store, "C02", "baseline", "2011-03-01", NULL, 0, 0, 0, &d0, 1, 12);
    ts_inspect(f->store, "C02", "scheduled", "2016-03-02", "hc-1", 0, 0, 0, &d1, 1, 11);
    /* a set whose only rule is for C01 */
    char text[4096];
    assert_true(strlen(ts_criteria_text) < sizeof text);
    snprintf(text, sizeof text, "%s", ts_criteria_text);
    char *skin = strstr(text, ",\n   { \"name\": \"skin\"");
    assert_non_null(skin);
    strcpy(skin, " ] }\n");
    memcpy(strstr(text, "TEST-LIMITS"), "TEST-C01ONL", 11);
    pl_criteria *c = NULL;
    pl_err err = { 0 };
    TU_OK(pl_criteria_parse(&c, text, strlen(text), "test", &err));
    TU_OK(pl_store_add_criteria(f->store, c, NULL, NULL, &err));
    pl_criteria_free(c);
    pl_compare_options o = ts_options();
    o.criteria_name = "TEST-C01ONL";
    pl_check_comparison *cc = NULL;
    TU_OK(pl_compare_check(&cc, f->store, TS_SERIAL, "HC-1", &o, NULL, NULL, &err));
    assert_int_equal(cc->nsites, 2);
    assert_string_equal(cc->sites[0].code, "C01");
    assert_int_equal(cc->sites[0].status, PL_OK);
    assert_int_equal(cc->sites[1].status, PL_ENOTFOUND);
    tu_assert_msg_has(cc->sites[1].refusal, "C02");
    tu_assert_msg_has(cc->sites[1].refusal, "no rule");
    assert_int_equal(cc->counts.sites, 2);
    assert_int_equal(cc->counts.compared, 1);
    assert_int_equal(cc->counts.refused, 1);
    assert_int_equal(cc->counts.kinds[PL_CHANGE_STABLE], 1);
    assert_int_equal(cc->counts.exceeding, 0);
    char *json = NULL;
    TU_OK(pl_check_comparison_json(&json, cc, &err));
    assert_non_null(strstr(json, "\"refused\""));
    free(json);
    pl_check_comparison_free(cc);
    assert_int_equal(pl_compare_check(&cc, f->store, TS_SERIAL, "HC-9", &o, NULL, NULL, &err),
                     PL_ENOTFOUND);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_compare__a_growing_disc_is_grown_by_its_analytic_area,
                                        ts_setup, ts_teardown),
        cmocka_unit_test_setup_teardown(test_compare__new_stable_and_the_previous_inspection,
                                        ts_setup, ts_teardown),
        cmocka_unit_test_setup_teardown(test_compare__refusals_record_nothing, ts_setup, ts_teardown),
        cmocka_unit_test_setup_teardown(test_compare__a_check_goes_site_by_site, ts_setup,
                                        ts_teardown),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
