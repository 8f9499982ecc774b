/*
 * test_track.c - tracks of indications through a site's inspections, their
 * growth fits and forecasts (plyledger/track.h).
 *
 * External references:
 *   - numpy.polyfit with weights w = 1/sigma and its covariance
 *     (cov='unscaled' and cov=True), Debian python3-numpy, and the
 *     forecast interval's ends found with scipy.optimize.brentq, Debian
 *     python3-scipy (tests/ref/track_ref.py, run from the test);
 *   - a constructed series whose answer is known in closed form;
 *   - analytic ground truth for the tracked discs (area pi r^2,
 *     tests/testsite.h).
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

static double uniform(uint64_t *s)
{
    *s = *s * 6364136223846793005ull + 1442695040888963407ull;
    return ((double)(*s >> 11) + 0.5) / 9007199254740992.0;
}

/* The weighted fit and its covariance against numpy.polyfit, and the
 * forecast interval's ends against scipy's brentq on the band itself. */
static void test_track__fit_equals_numpy_polyfit_with_weights(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *in = tu_path(dir, "cases.txt"), *out = tu_path(dir, "ref.txt");
    FILE *f = fopen(in, "w");
    assert_non_null(f);
    pl_err err = { 0 };
    enum { NCASES = 60 };
    pl_growth_fit fits[NCASES];
    uint64_t s = 7;
    for (int c = 0; c < NCASES; c++) {
        size_t n = 2 + (size_t)(c % 8);
        double x[10], y[10], sg[10];
        double a = 50 + 200 * uniform(&s), b = (c % 3 == 0 ? 0.0005 : 0.01) * uniform(&s);
        double xx = 0;
        for (size_t i = 0; i < n; i++) {
            xx += 1000 + 9000 * uniform(&s);
            x[i] = xx;
            sg[i] = 1 + 9 * uniform(&s);
            y[i] = a + b * x[i] + sg[i] * (2 * uniform(&s) - 1) * 1.5;
        }
        double lim = c % 5 == 4 ? NAN : a + b * (xx + 20000) + 30;
        TU_OK(pl_growth_fit_line(&fits[c], x, y, sg, n, lim, 2.0, y[n - 1] - 1e9, &err));
        fprintf(f, "%zu %.17g", n, lim);
        for (size_t i = 0; i < n; i++)
            fprintf(f, " %.17g", x[i]);
        for (size_t i = 0; i < n; i++)
            fprintf(f, " %.17g", y[i]);
        for (size_t i = 0; i < n; i++)
            fprintf(f, " %.17g", sg[i]);
        fprintf(f, "\n");
    }
    fclose(f);
    assert_int_equal(tu_python("track_ref.py", "fit", in, out, "2", NULL), 0);
    f = fopen(out, "r");
    assert_non_null(f);
    int growing_cases = 0, interval_cases = 0;
    for (int c = 0; c < NCASES; c++) {
        double b, a, vbb, vaa, vab, factor, xs, lo, hi;
        int growing;
        assert_int_equal(fscanf(f, "%lf %lf %lf %lf %lf %lf %d %lf %lf %lf", &b, &a, &vbb, &vaa,
                                &vab, &factor, &growing, &xs, &lo, &hi), 10);
        const pl_growth_fit *g = &fits[c];
        double sb = fmax(fabs(b), 1e-9);
        tu_assert_close(g->slope, b, 1e-9 * sb + 1e-12, "slope");
        tu_assert_close(g->intercept, a, 1e-9 * fabs(a) + 1e-9, "intercept");
        tu_assert_close(g->u_slope_repeatability, sqrt(vbb), 1e-9 * sqrt(vbb), "u(slope), unscaled");
        tu_assert_close(g->var_slope, vbb * factor, 1e-8 * vbb * factor, "var(slope) used");
        tu_assert_close(g->var_intercept, vaa * factor, 1e-8 * vaa * factor, "var(intercept)");
        tu_assert_close(g->covariance, vab * factor, 1e-8 * fabs(vab * factor), "cov(a, b)");
        if (g->n >= 3)
            tu_assert_close(g->u_slope_scatter * g->u_slope_scatter / vbb,
                            g->chi2 / (double)(g->n - 2), 1e-9, "scatter factor chi2/(n-2)");
        assert_int_equal(g->state == PL_GROWTH_GROWING, growing);
        growing_cases += growing;
        if (growing && isfinite(xs)) {
            tu_assert_close(g->crossing, xs, 1e-9 * fabs(xs), "forecast x*");
            if (isfinite(lo) && isfinite(hi)) {
                interval_cases++;
                tu_assert_close(g->crossing_low, lo, 1e-6 * fabs(xs) + 1e-6, "interval low");
                tu_assert_close(g->crossing_high, hi, 1e-6 * fabs(xs) + 1e-6, "interval high");
                assert_true(g->crossing_low < g->crossing && g->crossing < g->crossing_high);
            }
        }
    }
    fclose(f);
    /* both kinds of case were exercised */
    assert_true(growing_cases >= 10);
    assert_true(growing_cases <= NCASES - 10);
    assert_true(interval_cases >= 5);
    free(in);
    free(out);
    tu_rmtree(dir);
}

/* A series on an exact line: area = 100 + 0.005 cycles at 0, 5000, 10000,
 * 15000 cycles, each +-2 mm^2. The limit 200 mm^2 is reached at exactly
 * 20000 cycles. With no scatter the slope's uncertainty is the
 * repeatability's: Sxx = sum w (x - xm)^2 = (7500^2 + 2500^2) * 2 / 4 =
 * 3.125e7, u(b) = 1/sqrt(Sxx) = 1.7889e-4 mm^2 per cycle. */
static void test_track__a_constructed_series_crosses_where_it_must(void **state)
{
    (void)state;
    pl_err err = { 0 };
    double x[4] = { 0, 5000, 10000, 15000 }, y[4], s[4] = { 2, 2, 2, 2 };
    for (int i = 0; i < 4; i++)
        y[i] = 100 + 0.005 * x[i];
    pl_growth_fit g;
    TU_OK(pl_growth_fit_line(&g, x, y, s, 4, 200.0, 2.0, y[3], &err));
    assert_int_equal(g.state, PL_GROWTH_GROWING);
    tu_assert_close(g.slope, 0.005, 1e-12, "slope");
    tu_assert_close(g.intercept, 100, 1e-9, "intercept");
    tu_assert_close(g.u_slope, 1.0 / sqrt(3.125e7), 1e-12, "u(slope)");
    tu_assert_close(g.chi2, 0, 1e-12, "chi2");
    tu_assert_close(g.crossing, 20000, 1e-6, "cycles at the limit");
    /* at each end of the interval the band's edge is at the limit */
    double k = 2.0;
    double ends[2] = { g.crossing_low, g.crossing_high };
    for (int e = 0; e < 2; e++) {
        double t = ends[e];
        double u = sqrt(g.var_intercept + 2 * t * g.covariance + t * t * g.var_slope);
        double edge = g.intercept + g.slope * t + (e == 0 ? k : -k) * u;
        tu_assert_close(edge, 200, 1e-6, "band edge at the interval's end");
    }
    assert_true(g.crossing_low > 15000 && g.crossing_high > 20000);

    /* the same series at the limit already: reached, and where the line met it */
    TU_OK(pl_growth_fit_line(&g, x, y, s, 4, 160.0, 2.0, y[3], &err));
    assert_int_equal(g.state, PL_GROWTH_REACHED);
    tu_assert_close(g.crossing, 12000, 1e-6, "reached: where the line met the limit");

    /* flat within the repeatability: not growing, no forecast */
    double flat[4] = { 100, 101.5, 99.0, 100.5 };
    TU_OK(pl_growth_fit_line(&g, x, flat, s, 4, 200.0, 2.0, flat[3], &err));
    assert_int_equal(g.state, PL_GROWTH_NOT_GROWING);
    assert_true(isnan(g.crossing));

    /* shrinking: not growing */
    double fall[4] = { 140, 130, 120, 110 };
    TU_OK(pl_growth_fit_line(&g, x, fall, s, 4, 200.0, 2.0, fall[3], &err));
    assert_int_equal(g.state, PL_GROWTH_NOT_GROWING);

    /* one point, or every point at one x, or unknown x: too few */
    TU_OK(pl_growth_fit_line(&g, x, y, s, 1, 200.0, 2.0, y[0], &err));
    assert_int_equal(g.state, PL_GROWTH_TOO_FEW);
    double same[4] = { 5000, 5000, 5000, 5000 };
    TU_OK(pl_growth_fit_line(&g, same, y, s, 4, 200.0, 2.0, y[3], &err));
    assert_int_equal(g.state, PL_GROWTH_TOO_FEW);
    double unknown[4] = { NAN, 5000, NAN, NAN };
    TU_OK(pl_growth_fit_line(&g, unknown, y, s, 4, 200.0, 2.0, y[3], &err));
    assert_int_equal(g.state, PL_GROWTH_TOO_FEW);
    assert_int_equal(g.n, 1);

    /* a scatter larger than the repeatability widens the uncertainty */
    double scat[4] = { 100, 140, 135, 190 };
    TU_OK(pl_growth_fit_line(&g, x, scat, s, 4, 300.0, 2.0, scat[3], &err));
    assert_true(g.u_slope_scatter > g.u_slope_repeatability);
    tu_assert_close(g.u_slope, g.u_slope_scatter, 1e-15, "the larger uncertainty is used");

    assert_int_equal(pl_growth_fit_line(&g, x, y, s, 4, 200.0, 0.0, y[3], &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "coverage factor");
}

/* Radii (mm) of discs of the given areas (mm^2). */
static double radius(double area)
{
    return sqrt(area / M_PI);
}

static void compare_latest(ts_fixture *f, const char *code)
{
    pl_compare_options o = ts_options();
    pl_site_comparison *sc = NULL;
    pl_err err = { 0 };
    TU_OK(pl_compare_site(&sc, f->store, TS_SERIAL, code, 0, &o, &err));
    assert_true(sc->done);
    pl_site_comparison_free(sc);
}

static const pl_track *track_near(const pl_site_tracks *t, double col, double row)
{
    for (size_t k = 0; k < t->ntracks; k++) {
        const pl_track *tr = &t->tracks[k];
        for (size_t p = 0; p < tr->npoints; p++)
            if (tr->points[p].seen &&
                hypot(tr->points[p].centroid_col - col, tr->points[p].centroid_row - row) < 4)
                return tr;
    }
    return NULL;
}

/* Site C02 (growth limit: the smaller of 500 mm^2 and 400 % of the
 * baseline area) over four inspections: disc A grows by 30 mm^2 per 5000
 * cycles from 50 mm^2; disc B appears at the second reinspection; disc C
 * splits in two at the third. Then a post-repair baseline closes them. */
static void test_track__discs_followed_through_four_inspections(void **state)
{
    ts_fixture *f = *state;
    const char *dates[4] = { "2011-03-01", "2014-03-01", "2017-03-01", "2020-03-01" };
    double areas[4] = { 50, 80, 110, 140 };
    double shift[4][2] = { { 0, 0 }, { 1.3, -0.8 }, { -0.6, 1.1 }, { 0.9, 0.4 } };
    for (int i = 0; i < 4; i++) {
        ts_disc d[4] = { { 40, 40, radius(areas[i]), 1.0 },
                         { 95, 30, i >= 2 ? 4.0 : 0.0, 1.0 },
                         { 90, 72, i < 3 ? 4.0 : 0.0, 1.0 },
                         { 0, 0, 0, 0 } };
        size_t nd = 3;
        if (i == 3) {
            /* C splits: two discs of 2.2 mm radius inside its old outline */
            d[2] = (ts_disc){ 84, 72, 2.2, 1.0 };
            d[3] = (ts_disc){ 96, 72, 2.2, 1.0 };
            nd = 4;
        }
        ts_inspect_at(f->store, "C02", i ? "scheduled" : "baseline", dates[i], i ? "HC" : NULL,
                      1000.0 + 5000.0 * i * 1.1, 5000LL * i, 0, shift[i][0], shift[i][1], d, nd,
                      100 + (unsigned)i);
        if (i)
            compare_latest(f, "C02");
    }
    pl_site_tracks *t = NULL;
    pl_err err = { 0 };
    TU_OK(pl_tracks_load(&t, f->store, TS_SERIAL, "C02", NULL, &err));
    assert_string_equal(t->quantity, "temperature-contrast");
    assert_int_equal(t->ninspections, 4);
    assert_string_equal(t->inspections[0].comparison_status, "baseline");
    for (int i = 1; i < 4; i++)
        assert_string_equal(t->inspections[i].comparison_status, "done");
    tu_assert_close(t->repeatability_area_mm2, 8, 0, "repeatability from the criteria");

    /* A: present at the baseline, four points, its analytic areas */
    const pl_track *a = track_near(t, 40, 40);
    assert_non_null(a);
    assert_true(a->at_baseline);
    assert_int_equal(a->npoints, 4);
    for (int i = 0; i < 4; i++) {
        assert_true(a->points[i].seen);
        tu_assert_close(a->points[i].area_mm2, areas[i], 0.2 * areas[i], "disc A's area");
        tu_assert_close((double)t->inspections[a->points[i].inspection].cycles, 5000.0 * i, 0,
                        "cycles of the point");
    }
    assert_string_equal(a->points[0].classes, "baseline");
    /* its limit: baseline area + min(500, 400 % of it) */
    double a0 = a->points[0].area_mm2;
    tu_assert_close(a->limit_area_mm2, a0 + fmin(500, 4 * a0), 1e-9, "limit area");
    /* growing at about 30 mm^2 per 5000 cycles; reaches the limit beyond
     * the last inspection, inside its interval */
    assert_int_equal(a->by_cycles.state, PL_GROWTH_GROWING);
    tu_assert_close(a->by_cycles.slope, 30.0 / 5000, 0.25 * 30.0 / 5000, "growth rate");
    double want = (a->limit_area_mm2 - a->by_cycles.intercept) / a->by_cycles.slope;
    tu_assert_close(a->by_cycles.crossing, want, 1e-6 * want, "forecast cycles");
    assert_true(a->by_cycles.crossing > 15000);
    assert_true(a->by_cycles.crossing_low < a->by_cycles.crossing);
    assert_true(a->by_cycles.crossing_high > a->by_cycles.crossing);
    assert_int_equal(a->by_hours.state, PL_GROWTH_GROWING);
    assert_int_equal(a->by_days.state, PL_GROWTH_GROWING);
    assert_true(strcmp(a->forecast_date, "2020-03-01") > 0);
    assert_true(a->closed_by == 0);

    /* B: found at the second reinspection, new twice, one track */
    const pl_track *b = track_near(t, 95, 30);
    assert_non_null(b);
    assert_false(b->at_baseline);
    assert_int_equal(b->npoints, 2);
    assert_string_equal(b->points[0].event, "first found");
    assert_non_null(strstr(b->points[0].classes, "new"));
    assert_non_null(strstr(b->points[1].classes, "new"));
    tu_assert_close(b->reference_area_mm2, M_PI * 16.0, 0.2 * M_PI * 16.0, "B when first found");

    /* C: one track that split at the last inspection */
    const pl_track *c = track_near(t, 90, 72);
    assert_non_null(c);
    assert_true(c->at_baseline);
    assert_int_equal(c->npoints, 4);
    assert_int_equal(c->points[0].nindications, 1);
    assert_int_equal(c->points[3].nindications, 2);
    assert_string_equal(c->points[3].event, "split: 1 into 2");
    tu_assert_close(c->points[3].centroid_col, 90, 1.0, "the split pieces' centroid");
    /* the two pieces are not tracks of their own */
    size_t reportable = 0;
    for (size_t k = 0; k < t->ntracks; k++)
        reportable += t->tracks[k].reportable;
    assert_int_equal(reportable, 3);
    assert_true(a != b && b != c && a != c);

    char *json = NULL;
    TU_OK(pl_site_tracks_json(&json, t, &err));
    cJSON *o = cJSON_Parse(json);
    assert_non_null(o);
    assert_non_null(strstr(cJSON_GetStringValue(cJSON_GetObjectItem(o, "assumptions")),
                           "linearly"));
    assert_int_equal(cJSON_GetArraySize(cJSON_GetObjectItem(o, "tracks")), (int)t->ntracks);
    cJSON_Delete(o);
    free(json);
    char *csv = NULL;
    TU_OK(pl_site_tracks_csv(&csv, t, PL_TRACK_TABLE_POINTS, &err));
    /* a header and one row per point */
    size_t rows = 0, points = 0;
    for (const char *p = csv; *p; p++)
        rows += *p == '\n';
    for (size_t k = 0; k < t->ntracks; k++)
        points += t->tracks[k].npoints;
    assert_int_equal(rows, points + 1);
    assert_non_null(strstr(csv, "\"split: 1 into 2\""));
    free(csv);
    TU_OK(pl_site_tracks_csv(&csv, t, PL_TRACK_TABLE_GROWTH, &err));
    assert_non_null(strstr(csv, "\"growing\""));
    free(csv);
    assert_int_equal(pl_site_tracks_csv(&csv, t, (pl_track_table)7, &err), PL_EINVAL);
    char *text = NULL;
    TU_OK(pl_site_tracks_text(&text, t, &err));
    assert_non_null(strstr(text, "does not replace"));
    assert_non_null(strstr(text, "EXAMPLE VALUES"));
    free(text);
    pl_site_tracks_free(t);

    /* a post-repair baseline closes the tracks of the baseline before it */
    ts_disc none = { 0, 0, 0, 0 };
    pl_id pr = ts_inspect_at(f->store, "C02", "post-repair", "2020-06-01", "REPAIR", 21000.0,
                             15200, 0, 0, 0, &none, 1, 200);
    TU_OK(pl_tracks_load(&t, f->store, TS_SERIAL, "C02", NULL, &err));
    a = track_near(t, 40, 40);
    assert_non_null(a);
    assert_int_equal(a->closed_by, pr);
    assert_int_equal(a->npoints, 4);
    pl_site_tracks_free(t);

    /* a site without comparisons has inspections and no tracks; an unknown
     * site is refused */
    TU_OK(pl_tracks_load(&t, f->store, TS_SERIAL, "C01", NULL, &err));
    assert_int_equal(t->ntracks, 0);
    pl_site_tracks_free(t);
    assert_int_equal(pl_tracks_load(&t, f->store, TS_SERIAL, "C99", NULL, &err), PL_ENOTFOUND);
    pl_track_options bad = PL_TRACK_OPTIONS_INIT;
    bad.version = 99;
    assert_int_equal(pl_tracks_load(&t, f->store, TS_SERIAL, "C02", &bad, &err), PL_EINVAL);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_track__fit_equals_numpy_polyfit_with_weights),
        cmocka_unit_test(test_track__a_constructed_series_crosses_where_it_must),
        cmocka_unit_test_setup_teardown(test_track__discs_followed_through_four_inspections,
                                        ts_setup, ts_teardown),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
