/*
 * test_change.c - the comparison of one site (plyledger/change.h).
 *
 * External checks: matching cases constructed analytically (a split, a
 * merge, a shift within the tolerance and one beyond it, a vanished
 * indication, growth exactly at the limit), a map compared with itself, a
 * noise-only re-acquisition of the same simulated truth, the simulator's
 * ground truth (lib/thermal/sim.c: seeded new and grown defects, their
 * exact areas), and an ultrasonic amplitude map in dB from a generator of
 * this file (an invented plate, clearly not measured data). The study
 * (argument "study") runs the ground-truth check over 100 simulated sites
 * under a uniform flash and 12 under a non-uniform one, and prints the
 * false calls and the sizing bias; "study-strict" also enforces the check
 * the library does not pass yet (see test_change__simulated_ground_truth);
 * "study-phase" runs it on the phase contrast instead, with disbonds of 10
 * to 13 mm and of 18 to 22 mm (grown to 23 to 33 mm: past 3/8 of the
 * detection's background window), by hand, and prints without judging
 * (tests/bench/README.md).
 */
#include "plyledger/change.h"
#include "plyledger/detect.h"
#include "plyledger/map.h"
#include "plyledger/reduce.h"
#include "plyledger/register.h"
#include "plyledger/sim.h"
#include "testutil.h"

#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>

static tu_group run_group;
/* Set by the argument "study-strict": the study with the checks that the
 * library does not pass yet enforced too (see main()). */
static int strict;
/* The ground truth's compared quantity and disbond diameters (mm): the
 * first phase-contrast channel in "study-phase". */
static const char *gt_quantity = "temperature-contrast";
static double gt_dmin = 10.0, gt_dspan = 3.0;
static int gt_report_only;

/* ---- analytic maps ----------------------------------------------------------------- */

static uint64_t rng_state = 0x853c49e6748fea9bull;
static double uniform01(void)
{
    rng_state = rng_state * 6364136223846793005ull + 1442695040888963407ull;
    return ((double)(rng_state >> 11) + 0.5) / 9007199254740992.0;
}
static double gauss(void)
{
    return sqrt(-2.0 * log(uniform01())) * cos(2.0 * M_PI * uniform01());
}

/* A w x h map of one channel, 1 mm pitch, level `level` plus white noise. */
static pl_map *flat_map(uint32_t w, uint32_t h, const char *quantity, const char *unit,
                        double level, double noise, uint64_t seed)
{
    pl_map *m = NULL;
    assert_int_equal(pl_map_new(&m, w, h, 1, NULL), PL_OK);
    assert_int_equal(pl_map_set_channel(m, 0, quantity, unit, NULL), PL_OK);
    m->pitch_u = m->pitch_v = 1.0;
    rng_state = seed;
    for (size_t i = 0; i < (size_t)w * h; i++)
        m->data[i] = (float)(level + noise * gauss());
    return m;
}

/* The same with the noise rounded to multiples of 2^-10, so that sums of
 * a few such values and dyadic amplitudes are exact in float. */
static pl_map *flat_map_dyadic(uint32_t w, uint32_t h, double noise, uint64_t seed)
{
    pl_map *m = flat_map(w, h, "temperature-contrast", "K", 0, noise, seed);
    for (size_t i = 0; i < (size_t)w * h; i++)
        m->data[i] = (float)(round(m->data[i] * 1024.0) / 1024.0);
    return m;
}

/* Add `amp` over the axis-aligned rectangle [c0, c1] x [r0, r1] (inclusive). */
static void add_rect(pl_map *m, uint32_t c0, uint32_t r0, uint32_t c1, uint32_t r1, double amp)
{
    for (uint32_t r = r0; r <= r1; r++)
        for (uint32_t c = c0; c <= c1; c++)
            m->data[(size_t)r * m->width + c] += (float)amp;
}

/* Add `amp` over the pixels whose centres lie within `radius` of (cx, cy)
 * and, when inner > 0, outside `inner`. */
static void add_disk(pl_map *m, double cx, double cy, double radius, double inner, double amp)
{
    for (uint32_t r = 0; r < m->height; r++)
        for (uint32_t c = 0; c < m->width; c++) {
            double d = hypot(c - cx, r - cy);
            if (d <= radius && d > inner)
                m->data[(size_t)r * m->width + c] += (float)amp;
        }
}

/* Detection of an analytic map: the median background, the stated noise,
 * one threshold (so that a region is exactly the shape drawn: the noise
 * reaches 8 sigma with a probability of 1e-15). */
static pl_detection *detect_flat(const pl_map *m, double noise)
{
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    o.background = PL_BACKGROUND_MEDIAN;
    o.noise = noise;
    o.high = o.low = 8.0;
    o.min_area_mm2 = 4.0;
    pl_detection *d = NULL;
    pl_err err = {0};
    TU_OK(pl_detect(&d, m, 0, &o, &err));
    return d;
}

static pl_change_limits test_limits(void)
{
    pl_change_limits l = PL_CHANGE_LIMITS_INIT;
    l.area_repeatability_mm2 = 2.0;
    l.contrast_repeatability = 0.05;
    l.min_reportable_mm2 = 4.0;
    l.new_reportable_mm2 = 10.0;
    l.area_growth_mm2 = 20.0;
    l.area_growth_percent = 50.0;
    l.contrast_growth = 0.2;
    return l;
}

/* Compare two analytic maps of one grid with the given uncertainty. */
static pl_comparison *compare_flat(const pl_map *b, const pl_map *c, double noise_b,
                                   double noise_c, double u, const pl_change_limits *l)
{
    pl_detection *db = detect_flat(b, noise_b), *dc = detect_flat(c, noise_c);
    pl_change_input in = PL_CHANGE_INPUT_INIT;
    in.baseline = b;
    in.baseline_detection = db;
    in.current = c;
    in.current_detection = dc;
    in.registration_uncertainty_px = u;
    pl_comparison *cmp = NULL;
    pl_err err = {0};
    TU_OK(pl_change_compare(&cmp, &in, l, &err));
    pl_detection_free(db);
    pl_detection_free(dc);
    return cmp;
}

static void print_changes(const char *what, const pl_comparison *cmp)
{
    printf("# %s: %lu changes, tolerance %.2f px, not compared %.0f mm2\n", what,
           (unsigned long)cmp->count, cmp->tolerance_px, cmp->not_compared_mm2);
    for (size_t k = 0; k < cmp->count; k++) {
        const pl_change *ch = &cmp->changes[k];
        printf("#   %-14s b%lu c%lu area %6.1f -> %6.1f mm2 (delta %+6.1f, limit %6.1f, margin "
               "%+6.1f) contrast %+.3g -> %+.3g%s\n",
               pl_change_kind_name(ch->kind), (unsigned long)ch->nbaseline,
               (unsigned long)ch->ncurrent, ch->area_baseline_mm2[0], ch->area_current_mm2[0],
               ch->area_measured_mm2, ch->area_limit_mm2, ch->area_margin_mm2,
               ch->contrast_baseline, ch->contrast_current, ch->exceeds ? " EXCEEDS" : "");
    }
}

/* ---- analytic cases ----------------------------------------------------------------- */

/*
 * A split and a merge (constructed: one 20 x 8 px rectangle against two
 * 9 x 8 px rectangles inside it, 2 px apart). The split is one group of one
 * baseline and two current indications, matched by overlap, whose area is
 * the sum of both (144 against 160 px: shrinking, stable); the merge is
 * the same pair the other way (growth of 16 mm2, within the 20 mm2 limit:
 * stable).
 */
static void test_change__split_and_merge_are_groups(void **state)
{
    (void)state;
    pl_map *one = flat_map(64, 48, "temperature-contrast", "K", 0, 0.01, 1);
    pl_map *two = flat_map(64, 48, "temperature-contrast", "K", 0, 0.01, 2);
    add_rect(one, 20, 20, 39, 27, 1.0);
    add_rect(two, 20, 20, 28, 27, 1.0);
    add_rect(two, 31, 20, 39, 27, 1.0);
    pl_change_limits l = test_limits();
    pl_comparison *split = compare_flat(one, two, 0.01, 0.01, 0.25, &l);
    print_changes("split", split);
    assert_int_equal(split->count, 1);
    const pl_change *ch = &split->changes[0];
    assert_int_equal(ch->nbaseline, 1);
    assert_int_equal(ch->ncurrent, 2);
    assert_int_equal(ch->match, PL_MATCH_OVERLAP);
    assert_int_equal(ch->kind, PL_CHANGE_STABLE);
    tu_assert_close(ch->area_baseline_mm2[PL_SIZING_THRESHOLD], 160, 0, "split baseline area");
    tu_assert_close(ch->area_current_mm2[PL_SIZING_THRESHOLD], 144, 0, "split current area");
    tu_assert_close(ch->area_delta_percent[PL_SIZING_THRESHOLD], -10, 1e-9, "split percent");
    assert_false(ch->exceeds);
    pl_comparison_free(split);

    pl_comparison *merge = compare_flat(two, one, 0.01, 0.01, 0.25, &l);
    print_changes("merge", merge);
    assert_int_equal(merge->count, 1);
    ch = &merge->changes[0];
    assert_int_equal(ch->nbaseline, 2);
    assert_int_equal(ch->ncurrent, 1);
    assert_int_equal(ch->kind, PL_CHANGE_STABLE);
    tu_assert_close(ch->area_measured_mm2, 16, 0, "merge growth");
    tu_assert_close(ch->area_limit_mm2, 20, 0, "limit: min(20 mm2, 50 % of 144 mm2)");
    tu_assert_close(ch->area_margin_mm2, 4, 0, "merge margin");
    pl_comparison_free(merge);
    pl_map_free(one);
    pl_map_free(two);
}

/*
 * A small indication (a disk of radius 2 px, 13 px) that moved 6 px
 * between the maps no longer overlaps itself. With a registration
 * uncertainty of 2 px the tolerance is 3 x 2 + 1 = 7 px: matched by
 * distance, stable. With 1 px (tolerance 4 px) it is not: one new and one
 * vanished indication.
 */
static void test_change__shift_within_tolerance_matches(void **state)
{
    (void)state;
    pl_map *b = flat_map(64, 48, "temperature-contrast", "K", 0, 0.01, 3);
    pl_map *c = flat_map(64, 48, "temperature-contrast", "K", 0, 0.01, 4);
    add_disk(b, 30, 24, 2.0, 0, 1.0);
    add_disk(c, 36, 24, 2.0, 0, 1.0);
    pl_change_limits l = test_limits();
    pl_comparison *cmp = compare_flat(b, c, 0.01, 0.01, 2.0, &l);
    print_changes("shift 6 px, u 2 px", cmp);
    tu_assert_close(cmp->tolerance_px, 7.0, 0, "tolerance 3 u + 1");
    assert_int_equal(cmp->count, 1);
    assert_int_equal(cmp->changes[0].kind, PL_CHANGE_STABLE);
    assert_int_equal(cmp->changes[0].match, PL_MATCH_DISTANCE);
    tu_assert_close(cmp->changes[0].distance_px, 6.0, 1e-9, "distance");
    pl_comparison_free(cmp);

    cmp = compare_flat(b, c, 0.01, 0.01, 1.0, &l);
    print_changes("shift 6 px, u 1 px", cmp);
    tu_assert_close(cmp->tolerance_px, 4.0, 0, "tolerance 3 u + 1");
    assert_int_equal(cmp->count, 2);
    assert_int_equal(cmp->counts[PL_CHANGE_VANISHED], 1);
    assert_int_equal(cmp->counts[PL_CHANGE_NEW], 1);
    /* 13 mm2 is above the 10 mm2 at which a new indication is reportable */
    assert_int_equal(cmp->exceeding, 2);
    pl_comparison_free(cmp);
    pl_map_free(b);
    pl_map_free(c);
}

/*
 * A vanished indication: a finding under PL_VANISHED_FINDING, listed but
 * not exceeding under PL_VANISHED_NOTE; and when the current map does not
 * cover it (no data over it), not compared instead, the uncovered area
 * counted in mm2 and as a fraction.
 */
static void test_change__vanished_and_not_compared(void **state)
{
    (void)state;
    pl_map *b = flat_map(64, 48, "temperature-contrast", "K", 0, 0.01, 5);
    pl_map *c = flat_map(64, 48, "temperature-contrast", "K", 0, 0.01, 6);
    add_rect(b, 10, 10, 19, 19, 1.0);
    pl_change_limits l = test_limits();
    pl_comparison *cmp = compare_flat(b, c, 0.01, 0.01, 0.25, &l);
    assert_int_equal(cmp->count, 1);
    assert_int_equal(cmp->changes[0].kind, PL_CHANGE_VANISHED);
    assert_true(cmp->changes[0].exceeds);
    assert_int_equal(cmp->pixels_not_compared, 0);
    pl_comparison_free(cmp);
    l.vanished = PL_VANISHED_NOTE;
    cmp = compare_flat(b, c, 0.01, 0.01, 0.25, &l);
    assert_int_equal(cmp->changes[0].kind, PL_CHANGE_VANISHED);
    assert_false(cmp->changes[0].exceeds);
    pl_comparison_free(cmp);
    /* the current map ends at column 13: 4 x 10 of the 100 pixels covered */
    for (uint32_t r = 0; r < 48; r++)
        for (uint32_t col = 14; col < 64; col++)
            c->data[r * 64 + col] = NAN;
    l.vanished = PL_VANISHED_FINDING;
    cmp = compare_flat(b, c, 0.01, 0.01, 0.25, &l);
    print_changes("half covered", cmp);
    assert_int_equal(cmp->counts[PL_CHANGE_NOT_COMPARED], 1);
    assert_int_equal(cmp->counts[PL_CHANGE_VANISHED], 0);
    assert_int_equal(cmp->exceeding, 0);
    assert_int_equal(cmp->pixels_not_compared, 48 * 50);
    tu_assert_close(cmp->not_compared_mm2, 48 * 50, 0, "not compared mm2");
    tu_assert_close(cmp->not_compared_fraction, 50.0 / 64, 1e-12, "not compared fraction");
    pl_comparison_free(cmp);
    pl_map_free(b);
    pl_map_free(c);
}

/*
 * Growth exactly at the limit (a 10 x 10 px square grown to 12 x 10, 20
 * mm2 at 1 mm pitch) is within it: margin 0, not exceeded; with a limit of
 * 19 mm2 it exceeds by 1 (margin -1). Under no-growth the limit is the
 * repeatability (2 mm2). The percent limit applies when tighter (15 % of
 * 100 mm2). A contrast rise of exactly the limit (0.2) does not exceed,
 * 0.25 does. A new indication exactly at the reportable size exceeds
 * (margin 0): "the size at which a new indication is reportable".
 */
static void test_change__growth_at_the_limit(void **state)
{
    (void)state;
    pl_map *b = flat_map(64, 48, "temperature-contrast", "K", 0, 0.01, 7);
    pl_map *c = flat_map(64, 48, "temperature-contrast", "K", 0, 0.01, 8);
    add_rect(b, 10, 10, 19, 19, 1.0);
    add_rect(c, 10, 10, 21, 19, 1.0);
    add_rect(c, 40, 30, 44, 31, 1.0); /* a new indication of 10 px */
    pl_change_limits l = test_limits();
    pl_comparison *cmp = compare_flat(b, c, 0.01, 0.01, 0.25, &l);
    print_changes("at the limit", cmp);
    assert_int_equal(cmp->count, 2);
    const pl_change *g = &cmp->changes[0], *n = &cmp->changes[1];
    assert_int_equal(g->kind, PL_CHANGE_STABLE);
    tu_assert_close(g->area_measured_mm2, 20, 0, "growth");
    tu_assert_close(g->area_limit_mm2, 20, 0, "limit");
    assert_true(g->area_margin_mm2 == 0.0 && !g->area_exceeds && !g->exceeds);
    assert_int_equal(n->kind, PL_CHANGE_NEW);
    tu_assert_close(n->area_measured_mm2, 10, 0, "new area");
    assert_true(n->area_margin_mm2 == 0.0 && n->exceeds);
    pl_comparison_free(cmp);

    l.area_growth_mm2 = 19;
    cmp = compare_flat(b, c, 0.01, 0.01, 0.25, &l);
    g = &cmp->changes[0];
    assert_int_equal(g->kind, PL_CHANGE_GROWN);
    assert_true(g->area_margin_mm2 == -1.0 && g->area_exceeds && g->exceeds);
    pl_comparison_free(cmp);

    l.area_growth_mm2 = 50;
    l.area_growth_percent = 15; /* 15 mm2 of 100 */
    cmp = compare_flat(b, c, 0.01, 0.01, 0.25, &l);
    tu_assert_close(cmp->changes[0].area_limit_mm2, 15, 1e-12, "percent limit");
    assert_int_equal(cmp->changes[0].kind, PL_CHANGE_GROWN);
    pl_comparison_free(cmp);

    l.kind = PL_LIMITS_NO_GROWTH;
    cmp = compare_flat(b, c, 0.01, 0.01, 0.25, &l);
    tu_assert_close(cmp->changes[0].area_limit_mm2, 2, 0, "no-growth: the repeatability");
    tu_assert_close(cmp->changes[0].area_margin_mm2, -18, 0, "no-growth margin");
    assert_int_equal(cmp->changes[0].kind, PL_CHANGE_GROWN);
    pl_comparison_free(cmp);

    /* contrast: the same square 0.25 brighter over the same noise field,
     * every value dyadic so that the peak contrasts differ by exactly 0.25 */
    pl_map *b2 = flat_map_dyadic(64, 48, 0.01, 9), *c2 = flat_map_dyadic(64, 48, 0.01, 9);
    add_rect(b2, 10, 10, 19, 19, 1.0);
    add_rect(c2, 10, 10, 19, 19, 1.25);
    l = test_limits();
    l.contrast_growth = 0.25;
    cmp = compare_flat(b2, c2, 0.01, 0.01, 0.25, &l);
    print_changes("contrast at the limit", cmp);
    g = &cmp->changes[0];
    assert_true(g->contrast_delta == 0.25 && g->contrast_margin == 0.0 && !g->contrast_exceeds);
    assert_int_equal(g->kind, PL_CHANGE_STABLE);
    pl_comparison_free(cmp);
    l.contrast_growth = 0.125;
    cmp = compare_flat(b2, c2, 0.01, 0.01, 0.25, &l);
    g = &cmp->changes[0];
    assert_true(g->contrast_margin == -0.125 && g->contrast_exceeds);
    assert_int_equal(g->kind, PL_CHANGE_GROWN);
    pl_comparison_free(cmp);
    pl_map_free(b2);
    pl_map_free(c2);
    pl_map_free(b);
    pl_map_free(c);
}

/*
 * Changed regions of the difference map: a disk of radius 8 px grown by a
 * faint ring to radius 11 px and a faint new spot (6 x 6 px), both 0.15,
 * below the single-map thresholds (the maps detected with a stated noise
 * of 0.03: 8 sigma = 0.24) but 10 times the difference's own noise (white
 * noise of 0.01 in each map: sqrt(2) x 0.01). The ring borders the disk's
 * change, the spot nothing.
 */
static void test_change__difference_finds_faint_growth(void **state)
{
    (void)state;
    pl_map *b = flat_map(96, 72, "temperature-contrast", "K", 0, 0.01, 10);
    pl_map *c = flat_map(96, 72, "temperature-contrast", "K", 0, 0.01, 11);
    add_disk(b, 30, 30, 8, 0, 1.0);
    add_disk(c, 30, 30, 8, 0, 1.0);
    add_disk(c, 30, 30, 11, 8, 0.15);
    add_rect(c, 70, 50, 75, 55, 0.15);
    pl_change_limits l = test_limits();
    pl_comparison *cmp = compare_flat(b, c, 0.03, 0.03, 0.25, &l);
    print_changes("faint growth", cmp);
    tu_assert_close(cmp->difference_noise, sqrt(2) * 0.01, 0.003, "noise of the difference");
    assert_int_equal(cmp->counts[PL_CHANGE_STABLE], 1);
    assert_int_equal(cmp->counts[PL_CHANGE_REGION], 2);
    const pl_change *ring = NULL, *spot = NULL;
    for (size_t k = 0; k < cmp->count; k++)
        if (cmp->changes[k].kind == PL_CHANGE_REGION)
            *(cmp->changes[k].touches >= 0 ? &ring : &spot) = &cmp->changes[k];
    assert_non_null(ring);
    assert_non_null(spot);
    assert_int_equal(ring->touches, 0);
    /* the ring: pixels within 11 px and beyond 8 px of the centre */
    double ring_px = 0;
    for (int r = 0; r < 72; r++)
        for (int col = 0; col < 96; col++) {
            double d = hypot(col - 30, r - 30);
            ring_px += d <= 11 && d > 8;
        }
    tu_assert_close(ring->area_measured_mm2, ring_px, 0.1 * ring_px, "ring area");
    tu_assert_close(ring->area_limit_mm2, 20, 0, "ring: growth of the disk's baseline area");
    assert_true(ring->exceeds);
    tu_assert_close(spot->area_measured_mm2, 36, 4, "spot area");
    tu_assert_close(spot->centroid_col, 72.5, 0.5, "spot column");
    tu_assert_close(spot->centroid_row, 52.5, 0.5, "spot row");
    assert_true(spot->exceeds);
    assert_int_equal(cmp->region_labels[52 * 96 + 72], spot->region_label);
    pl_comparison_free(cmp);
    pl_map_free(b);
    pl_map_free(c);
}

/* Refusals name the field or the input. */
static void test_change__refusals_name_the_fault(void **state)
{
    (void)state;
    pl_map *b = flat_map(32, 32, "temperature-contrast", "K", 0, 0.01, 12);
    pl_map *c = flat_map(32, 24, "temperature-contrast", "K", 0, 0.01, 13);
    pl_detection *db = detect_flat(b, 0.01), *dc = detect_flat(c, 0.01);
    pl_change_limits l = test_limits();
    pl_change_input in = PL_CHANGE_INPUT_INIT;
    in.baseline = b;
    in.baseline_detection = db;
    in.current = c;
    in.current_detection = dc;
    in.registration_uncertainty_px = 0.25;
    pl_comparison *cmp = (pl_comparison *)&l;
    pl_err err = {0};
    assert_int_equal(pl_change_compare(&cmp, &in, &l, &err), PL_EINVAL);
    assert_null(cmp);
    tu_assert_msg_has(err.msg, "not on the baseline grid");
    in.current = b;
    in.current_detection = db;
    in.registration_uncertainty_px = -1;
    assert_int_equal(pl_change_compare(&cmp, &in, &l, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "registration_uncertainty_px");
    in.registration_uncertainty_px = 0.25;
    l.area_repeatability_mm2 = NAN;
    assert_int_equal(pl_change_compare(&cmp, &in, &l, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "area_repeatability_mm2");
    l = test_limits();
    l.area_growth_percent = -5;
    assert_int_equal(pl_change_compare(&cmp, &in, &l, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "area_growth_percent");
    l = test_limits();
    in.current_detection = dc;
    assert_int_equal(pl_change_compare(&cmp, &in, &l, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "current detection");
    in.current_detection = db;
    b->pitch_u = NAN;
    assert_int_equal(pl_change_compare(&cmp, &in, &l, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "pitch");
    b->pitch_u = 1;
    assert_int_equal(pl_change_compare(&cmp, &in, &l, &err), PL_OK);
    pl_comparison_free(cmp);
    assert_string_equal(pl_change_kind_name(PL_CHANGE_REGION), "changed-region");
    assert_string_equal(pl_limits_kind_name(PL_LIMITS_NO_GROWTH), "no-growth");
    assert_null(pl_change_kind_name((pl_change_kind)99));
    pl_comparison_free(NULL);
    pl_detection_free(db);
    pl_detection_free(dc);
    pl_map_free(b);
    pl_map_free(c);
}

/* ---- one map's detection leaves out what the other calls -------------------------- */

/* Detection with a stated background (line-median or the map's median). */
static pl_detection *detect_with(const pl_map *m, pl_background bg, double noise)
{
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    o.background = bg;
    o.background_mm = 40.0;
    o.noise = noise;
    o.high = 5.0;
    o.low = 2.5;
    o.min_area_mm2 = 4.0;
    pl_detection *d = NULL;
    pl_err err = {0};
    TU_OK(pl_detect(&d, m, 0, &o, &err));
    return d;
}

static pl_comparison *compare_with(const pl_map *b, pl_background bgb, const pl_map *c,
                                   pl_background bgc, double noise, const pl_change_limits *l)
{
    pl_detection *db = detect_with(b, bgb, noise), *dc = detect_with(c, bgc, noise);
    pl_change_input in = PL_CHANGE_INPUT_INIT;
    in.baseline = b;
    in.baseline_detection = db;
    in.current = c;
    in.current_detection = dc;
    in.registration_uncertainty_px = 0.1;
    pl_comparison *cmp = NULL;
    pl_err err = {0};
    TU_OK(pl_change_compare(&cmp, &in, l, &err));
    pl_detection_free(db);
    pl_detection_free(dc);
    return cmp;
}

/* The change whose centroid lies inside [c0, c1] x [r0, r1]; -1 none. */
static long change_in(const pl_comparison *cmp, double c0, double r0, double c1, double r1)
{
    for (size_t k = 0; k < cmp->count; k++) {
        const pl_change *ch = &cmp->changes[k];
        if (ch->kind != PL_CHANGE_REGION && ch->centroid_col >= c0 && ch->centroid_col <= c1 &&
            ch->centroid_row >= r0 && ch->centroid_row <= r1)
            return (long)k;
    }
    return -1;
}

/*
 * The same feature in both maps, called by one map's detection only (the
 * fault found on the sample fleet: a stringer flange's or frame tie's end
 * at the edge of the aligned map, where the line windows of the current
 * map's background ran short, was called "new" at every heavy check).
 * Constructed: a band 16 px wide and 0.3 K high across a 96 x 72 map
 * (substructure), in both maps with independent noise of 0.02 K; the
 * baseline's background follows it (line median along the band), the
 * current's does not (the map's median), so only the current detection
 * holds it. The difference of the two maps is noise there: the band is
 * matched by signal and stable, its baseline area measured within 5 % of
 * its current area (the band is 96 x 16 = 1536 px, analytic), not new.
 * A disc of radius 5 px seeded in the current map only is still new, and
 * the same the other way round: the band called by the baseline only is
 * not vanished, a disc in the baseline only is; and the two backgrounds'
 * departures beside the band (s_c - s_b) are no changed regions.
 */
static void test_change__same_feature_one_detection_is_not_new(void **state)
{
    (void)state;
    pl_change_limits l = test_limits();
    l.new_reportable_mm2 = 20.0;
    for (int way = 0; way < 2; way++) {
        pl_map *b = flat_map(96, 72, "temperature-contrast", "K", 0, 0.02, 101 + way);
        pl_map *c = flat_map(96, 72, "temperature-contrast", "K", 0, 0.02, 202 + way);
        add_rect(b, 0, 40, 95, 55, 0.3);
        add_rect(c, 0, 40, 95, 55, 0.3);
        add_disk(way == 0 ? c : b, 20, 14, 5, 0, 0.3);
        pl_comparison *cmp =
            way == 0 ? compare_with(b, PL_BACKGROUND_LINE_MEDIAN, c, PL_BACKGROUND_MEDIAN, 0.02, &l)
                     : compare_with(b, PL_BACKGROUND_MEDIAN, c, PL_BACKGROUND_LINE_MEDIAN, 0.02, &l);
        print_changes(way == 0 ? "band called in the current only"
                               : "band called in the baseline only", cmp);
        long band = change_in(cmp, 30, 44, 66, 52);
        assert_true(band >= 0);
        const pl_change *ch = &cmp->changes[band];
        assert_int_equal(ch->kind, PL_CHANGE_STABLE);
        assert_int_equal(ch->match, PL_MATCH_SIGNAL);
        assert_false(ch->exceeds);
        double a_b = ch->area_baseline_mm2[PL_SIZING_THRESHOLD];
        double a_c = ch->area_current_mm2[PL_SIZING_THRESHOLD];
        assert_true(fabs(a_b - 1536.0) <= 0.05 * 1536.0);
        assert_true(fabs(a_c - 1536.0) <= 0.05 * 1536.0);
        long disc = change_in(cmp, 15, 9, 25, 19);
        assert_true(disc >= 0);
        assert_int_equal(cmp->changes[disc].kind, way == 0 ? PL_CHANGE_NEW : PL_CHANGE_VANISHED);
        assert_true(cmp->changes[disc].exceeds);
        assert_int_equal(cmp->counts[PL_CHANGE_NEW] + cmp->counts[PL_CHANGE_VANISHED], 1);
        /* nor do the two backgrounds' departures beside the band make
         * changed regions: the maps' own difference is noise there */
        assert_int_equal(cmp->counts[PL_CHANGE_REGION], 0);
        pl_comparison_free(cmp);
        pl_map_free(b);
        pl_map_free(c);
    }
}

/* ---- a whole site: the current map resampled onto the baseline's grid ------------- */

/* The truth of an invented site in the baseline's pixel frame (col, row):
 * a flange strip 14 px wide along the columns that cools faster (-0.4 K,
 * not a defect for a rising quantity) and a disc of radius 7 px (+0.4 K),
 * each with edges smoothed over about a pixel. */
static double site_truth(double x, double y)
{
    double strip = 0.5 * (tanh((y - 40.0) / 0.8) - tanh((y - 54.0) / 0.8));
    double disc = 0.5 * (1.0 - tanh((hypot(x - 30.0, y - 20.0) - 7.0) / 0.8));
    return -0.4 * strip + 0.4 * disc;
}

/*
 * A noise-only re-acquisition placed off by a rotation and a sub-pixel
 * shift, through pl_change_site() (register, carry onto the baseline grid,
 * detect both, compare): nothing changed, so nothing is new, grown or
 * vanished (under a no-growth rule: the disc's area and contrast within
 * their repeatability), no changed region is reportable, and the disc is
 * sized alike in both maps on average. The current map is the
 * analytic truth at p_b = R(theta) p_c + t (theta 1 deg, t (2.3, -1.7)
 * px) plus independent white noise of the baseline's sigma. The fault this
 * keeps: the aligned map's noise, smoothed by the resampling, was taken
 * by the high-pass estimate on the baseline grid as smaller than it is,
 * so its detection's thresholds fell: the disc came out some 6 mm^2
 * larger in the current map (its fringe reached further), which a
 * no-growth rule calls growth.
 */
static void test_change__resampled_reacquisition_is_no_change(void **state)
{
    (void)state;
    const uint32_t w = 96, h = 72;
    const double th = 1.0 * M_PI / 180.0, tx = 2.3, ty = -1.7, sigma = 0.02;
    int calls = 0;
    double bias = 0;
    for (uint64_t seed = 1; seed <= 6; seed++) {
        pl_map *b = flat_map(w, h, "temperature-contrast", "K", 0, sigma, 1000 + seed);
        pl_map *c = flat_map(w, h, "temperature-contrast", "K", 0, sigma, 2000 + seed);
        for (uint32_t r = 0; r < h; r++)
            for (uint32_t q = 0; q < w; q++) {
                b->data[(size_t)r * w + q] += (float)site_truth(q, r);
                double xb = cos(th) * q - sin(th) * r + tx, yb = sin(th) * q + cos(th) * r + ty;
                c->data[(size_t)r * w + q] += (float)site_truth(xb, yb);
            }
        /* no growth beyond the repeatability: 8 mm^2 is the disc's edge
         * (44 px round) moving by under 0.2 px all round; the contrast's
         * 0.1 K is five times the noise */
        pl_change_limits l = test_limits();
        l.kind = PL_LIMITS_NO_GROWTH;
        l.area_repeatability_mm2 = 8.0;
        l.contrast_repeatability = 0.1;
        pl_change_site_options o = PL_CHANGE_SITE_OPTIONS_INIT;
        pl_register_result rr;
        pl_comparison *cmp = NULL;
        pl_err err = {0};
        TU_OK(pl_change_site(&cmp, &rr, b, 0, c, &l, &o, &err));
        assert_non_null(cmp);
        print_changes("re-acquisition, 1 deg and (2.3, -1.7) px off", cmp);
        for (size_t k = 0; k < cmp->count; k++) {
            const pl_change *ch = &cmp->changes[k];
            if (ch->reportable && ch->kind != PL_CHANGE_STABLE && ch->kind != PL_CHANGE_NOT_COMPARED)
                calls++;
        }
        long disc = change_in(cmp, 25, 15, 35, 25);
        assert_true(disc >= 0);
        assert_int_equal(cmp->changes[disc].kind, PL_CHANGE_STABLE);
        bias += cmp->changes[disc].area_delta_mm2[PL_SIZING_THRESHOLD] / 6.0;
        pl_comparison_free(cmp);
        pl_map_free(b);
        pl_map_free(c);
    }
    printf("# re-acquisitions: %d reportable calls in 6 (aim: none); the disc's area, "
           "current - baseline, %+.1f mm2 on average\n", calls, bias);
    assert_int_equal(calls, 0);
    /* the disc is 154 px (pi 7^2): both detections size it alike, within
     * 2 % of it on average over the six */
    assert_true(fabs(bias) <= 3.0);
}

/* ---- a map against itself, a noise-only re-acquisition -------------------------- */

/*
 * A map compared with itself (analytic: d = 0 everywhere): every group is
 * stable with zero deltas, no changed region, nothing exceeds, and the
 * difference map is exactly 0 on every pixel.
 */
static void test_change__map_against_itself_is_no_change(void **state)
{
    (void)state;
    pl_map *b = flat_map(64, 48, "temperature-contrast", "K", 0, 0.01, 21);
    add_disk(b, 20, 20, 6, 0, 1.0);
    add_rect(b, 40, 30, 49, 37, 0.6);
    pl_change_limits l = test_limits();
    l.kind = PL_LIMITS_NO_GROWTH; /* the strictest: any growth beyond 2 mm2 */
    pl_comparison *cmp = compare_flat(b, b, 0.01, 0.01, 0.0, &l);
    print_changes("itself", cmp);
    assert_int_equal(cmp->count, 2);
    assert_int_equal(cmp->counts[PL_CHANGE_STABLE], 2);
    assert_int_equal(cmp->exceeding, 0);
    for (size_t k = 0; k < cmp->count; k++) {
        assert_true(cmp->changes[k].area_delta_mm2[PL_SIZING_THRESHOLD] == 0.0);
        assert_true(cmp->changes[k].area_delta_mm2[PL_SIZING_HALF_MAX] == 0.0);
        assert_true(cmp->changes[k].contrast_delta == 0.0);
    }
    for (size_t i = 0; i < 64 * 48; i++)
        assert_true(cmp->difference[i] == 0.0f);
    pl_comparison_free(cmp);
    pl_map_free(b);
}

/* ---- simulated sites ---------------------------------------------------------------- */

/*
 * A simulated site (lib/thermal/sim.c): a 3 mm CFRP skin as the sample
 * fleet's (sample-fleet/genscenes.c) with a stringer flange bonded behind
 * along u and a shear tie across it (`flange`), seen by an 80 x 60 camera of 1 mm pitch at 25 Hz for 8 s (the
 * thermal time of a 1 mm deep delamination, d^2 / alpha_z with alpha_z =
 * 0.4 mm^2/s, is 2.5 s), with 20 mK NETD and 10 mK fixed pattern, and a
 * placement error. Defects are disbonds (interface resistances) given as
 * circles: `ndef` of (centre u, v, diameter, depth) in mm.
 */
#define SITE_W 80
#define SITE_H 60
typedef struct site_defect {
    double u, v, diameter, depth;
} site_defect;

typedef struct sim_feed {
    pl_reducer *r;
} sim_feed;

static int sim_feed_frame(void *ud, uint32_t index, double time_s, const float *kelvin)
{
    (void)time_s;
    return pl_reducer_frame(((sim_feed *)ud)->r, index, kelvin, NULL);
}

static pl_map *simulate_site(unsigned seed, double du, double dv, double rot,
                             const site_defect *def, size_t ndef, double nonuniformity,
                             int flange)
{
    char defects[2048] = "";
    size_t len = 0;
    for (size_t k = 0; k < ndef; k++)
        len += (size_t)snprintf(defects + len, sizeof defects - len,
                                "%s{\"kind\": \"disbond\", \"depth_mm\": %.3f, \"outline\": "
                                "{\"shape\": \"circle\", \"centre_mm\": [%.3f, %.3f], "
                                "\"diameter_mm\": %.3f}}",
                                k ? ", " : "", def[k].depth, def[k].u, def[k].v, def[k].diameter);
    char json[4096];
    snprintf(json, sizeof json,
             "{\"seed\": %u, \"laminate\": {\"thickness_mm\": 2.0, \"density_kg_m3\": 1560, "
             "\"specific_heat_j_kgk\": 1200, \"conductivity_along_w_mk\": 2.6, "
             "\"conductivity_across_w_mk\": 1.9, \"conductivity_through_w_mk\": 0.75}, "
             "\"flash\": {\"energy_j_m2\": 7500, \"nonuniformity\": %.3f}, "
             "\"surface\": {\"ambient_k\": 294.15, \"front_h_w_m2k\": 8, \"emissivity\": 0.92}, "
             "\"camera\": {\"width\": %d, \"height\": %d, \"pitch_mm\": 1.0, "
             "\"frame_rate_hz\": 25, \"frame_count\": 300, \"netd_k\": 0.02, "
             "\"fixed_pattern_k\": 0.01}, "
             "\"placement_error\": {\"shift_mm\": [%.3f, %.3f], \"rotation_deg\": %.3f}, "
             "\"substructure\": [%s], \"defects\": [%s]}",
             seed, nonuniformity, SITE_W, SITE_H, du, dv, rot,
             flange ? "{\"kind\": \"flange\", \"outline\": {\"shape\": \"rectangle\", "
                      "\"centre_mm\": [32, 6], \"size_mm\": [120, 14], \"angle_deg\": 0}, "
                      "\"thickness_mm\": 2.5, \"bond_resistance_m2k_w\": 0.0002}, "
                      "{\"kind\": \"flange\", \"outline\": {\"shape\": \"rectangle\", "
                      "\"centre_mm\": [10, 30], \"size_mm\": [10, 120], \"angle_deg\": 0}, "
                      "\"thickness_mm\": 2.0, \"bond_resistance_m2k_w\": 0.0002}"
                    : "",
             defects);
    pl_sim_scene *sc;
    pl_err err = { 0 };
    if (pl_sim_scene_parse(&sc, json, "site.json", &err))
        fail_msg("%s", err.msg);
    pl_sim_info info;
    pl_sim_scene_info(sc, &info);
    double *times = malloc(info.frame_count * sizeof *times);
    assert_non_null(times);
    for (uint32_t i = 0; i < info.frame_count; i++)
        times[i] = i / info.frame_rate_hz - info.flash_time_s;
    sim_feed f;
    if (pl_reducer_new(&f.r, info.width, info.height, times, info.frame_count,
                       info.preflash_frames, NULL, &err))
        fail_msg("%s", err.msg);
    if (pl_sim_run_frames(sc, sim_feed_frame, &f, NULL, NULL, &err))
        fail_msg("%s", err.msg);
    pl_map *m = NULL;
    if (pl_reducer_finish(f.r, &m, NULL, &err))
        fail_msg("%s", err.msg);
    pl_reducer_free(f.r);
    pl_sim_scene_free(sc);
    free(times);
    m->pitch_u = m->pitch_v = 1.0;
    const double origin[3] = { 5410.0, -320.0, 1280.0 };
    memcpy(m->placement.origin, origin, sizeof origin);
    snprintf(m->placement.system, sizeof m->placement.system, "STA/BL/WL");
    return m;
}

/* The limits of the simulated comparisons: growth beyond 20 mm2 (about a
 * third of a 9 mm disbond) and no contrast limit, the repeatability 6 mm2
 * (a one-pixel ring around a 12 mm disbond is 38 mm2, so the area of a
 * stable disbond moves by more than a few mm2 with the sampling alone). */
static pl_change_limits sim_limits(void)
{
    pl_change_limits l = PL_CHANGE_LIMITS_INIT;
    l.area_repeatability_mm2 = 6.0;
    l.contrast_repeatability = 0.05;
    l.min_reportable_mm2 = 6.0;
    l.new_reportable_mm2 = 10.0;
    l.area_growth_mm2 = 20.0;
    return l;
}

/* pl_change_site() on the first temperature-contrast channel of both maps
 * (the compared quantity of a flash-thermography comparison, see
 * lib/record/compare.c), registered on the default (phase). */
static int allow_refusal; /* 1: a refused registration returns NULL */
static pl_comparison *compare_sites_on(const pl_map *b, const pl_map *c, pl_register_result *reg,
                                       const char *quantity)
{
    int ch = pl_map_find_channel(b, quantity);
    assert_true(ch >= 0);
    pl_change_limits l = sim_limits();
    pl_comparison *cmp = NULL;
    pl_err err = { 0 };
    pl_change_site_options o = PL_CHANGE_SITE_OPTIONS_INIT;
    TU_OK(pl_change_site(&cmp, reg, b, (uint32_t)ch, c, &l, &o, &err));
    if (!cmp && !allow_refusal)
        fail_msg("registration refused: %s", reg->reason);
    return cmp;
}

static pl_comparison *compare_sites(const pl_map *b, const pl_map *c, pl_register_result *reg)
{
    return compare_sites_on(b, c, reg, "temperature-contrast");
}

/* The change whose centroid lies nearest (col, row), of `kind` (or any
 * when kind < 0) and not a changed region; NULL when none within `tol`. */
static const pl_change *change_near(const pl_comparison *cmp, double col, double row,
                                    double tol)
{
    const pl_change *best = NULL;
    double bd = tol;
    for (size_t k = 0; k < cmp->count; k++) {
        const pl_change *ch = &cmp->changes[k];
        if (ch->kind == PL_CHANGE_REGION)
            continue;
        double d = hypot(ch->centroid_col - col, ch->centroid_row - row);
        if (d <= bd) {
            bd = d;
            best = ch;
        }
    }
    return best;
}

/*
 * A noise-only re-acquisition: the same site and defect, another noise
 * seed, no placement error. Every group is stable and nothing exceeds
 * (the noise of a 20 mK camera moves a 12 mm disbond's area by a few
 * pixels at most, below the 6 mm2 repeatability: common practice is
 * that a repeat scan reproduces the sizes within the repeatability).
 */
static void test_change__noise_only_reacquisition_is_no_change(void **state)
{
    (void)state;
    const site_defect d = { 40, 28, 12, 1.0 };
    pl_map *b = simulate_site(31, 0, 0, 0, &d, 1, 0.0, 0), *c = simulate_site(32, 0, 0, 0, &d, 1, 0.0, 0);
    pl_register_result reg;
    pl_comparison *cmp = compare_sites(b, c, &reg);
    print_changes("noise-only re-acquisition", cmp);
    assert_int_equal(cmp->exceeding, 0);
    assert_int_equal(cmp->counts[PL_CHANGE_NEW] + cmp->counts[PL_CHANGE_GROWN]
                         + cmp->counts[PL_CHANGE_VANISHED],
                     0);
    const pl_change *g = change_near(cmp, 40, 28, 3);
    assert_non_null(g);
    assert_int_equal(g->kind, PL_CHANGE_STABLE);
    pl_comparison_free(cmp);
    /* and the reinspection against itself: nothing at all changes */
    cmp = compare_sites(c, c, &reg);
    assert_int_equal(cmp->exceeding, 0);
    assert_int_equal(cmp->count, cmp->counts[PL_CHANGE_STABLE]);
    pl_comparison_free(cmp);
    pl_map_free(b);
    pl_map_free(c);
}

/*
 * A disbond that grew past 3/8 of the detection's background window: 14 to
 * 30 mm across (a 40 mm window), compared on the phase contrast of the
 * lowest frequency. The current map's own line-median background rises
 * under a 30 mm disbond and its growth came out at about half; the
 * baseline's level, taken while it was 14 mm, sizes it
 * (pl_detect_on_reference()). The change is grown and its area change
 * (threshold rule) within 20 % of the simulated pi (d1^2 - d0^2) / 4
 * (analytic, the outlines are circles); the bound is the issue's.
 */
static void test_change__large_growth_on_phase_keeps_its_size(void **state)
{
    (void)state;
    const site_defect d0 = { 44, 32, 14, 1.0 }, d1 = { 44, 32, 30, 1.0 };
    pl_map *b = simulate_site(41, 0, 0, 0, &d0, 1, 0.0, 1);
    pl_map *c = simulate_site(42, 1.5, -1.0, 0.5, &d1, 1, 0.0, 1);
    pl_register_result reg;
    pl_comparison *cmp = compare_sites_on(b, c, &reg, "phase-contrast");
    print_changes("large growth on phase contrast", cmp);
    const pl_change *g = change_near(cmp, 44, 32, 3);
    assert_non_null(g);
    assert_int_equal(g->kind, PL_CHANGE_GROWN);
    double truth = M_PI * (d1.diameter * d1.diameter - d0.diameter * d0.diameter) / 4;
    double e = g->area_delta_mm2[PL_SIZING_THRESHOLD] / truth - 1;
    printf("# growth %.0f mm2 against %.0f simulated (%+.1f %%)\n",
           g->area_delta_mm2[PL_SIZING_THRESHOLD], truth, 100 * e);
    assert_true(fabs(e) <= 0.20);
    pl_comparison_free(cmp);
    pl_map_free(b);
    pl_map_free(c);
}

/* ---- an ultrasonic amplitude comparison --------------------------------------------- */

/*
 * An ultrasonic C-scan back-wall amplitude map in dB (quantity
 * "ultrasonic-amplitude", whose polarity falls: the back-wall echo drops
 * over a delamination, which shadows it). The generator is this test's
 * own invention, no measured data: a 96 x 72 scan of 1 mm index, the back
 * wall at 0 dB with a slow coupling drift of +-0.3 dB across the part and
 * 0.25 dB of white noise; the baseline has one old defect (a 14 mm disk at
 * -12 dB), the reinspection the same plus a loss of 6 dB over a 10 x 8 mm
 * region (new) and the old defect grown to 20 mm (grown). Detection with
 * the defaults (its polarity from the vocabulary) but for the background:
 * the back wall's own level, the channel's median, as a C-scan is read
 * against its reference back-wall echo (common practice; the default
 * line-median window of 40 mm would take half of a 20 mm shadow into the
 * background).
 */
static pl_map *ut_map(uint64_t seed, double old_radius, int with_new)
{
    pl_map *m = NULL;
    assert_int_equal(pl_map_new(&m, 96, 72, 1, NULL), PL_OK);
    assert_int_equal(pl_map_set_channel(m, 0, "ultrasonic-amplitude", "dB", NULL), PL_OK);
    m->pitch_u = m->pitch_v = 1.0;
    rng_state = seed;
    for (uint32_t r = 0; r < 72; r++)
        for (uint32_t c = 0; c < 96; c++)
            m->data[r * 96 + c] = (float)(0.3 * sin(2 * M_PI * c / 192.0)
                                          * cos(2 * M_PI * r / 144.0) + 0.25 * gauss());
    add_disk(m, 28, 30, old_radius, 0, -12.0);
    if (with_new)
        add_rect(m, 65, 45, 74, 52, -6.0);
    return m;
}

static void test_change__ultrasonic_amplitude_loss_is_new(void **state)
{
    (void)state;
    pl_map *b = ut_map(41, 7, 0), *c = ut_map(42, 10, 1);
    pl_detection *db = NULL, *dc = NULL;
    pl_err err = { 0 };
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    o.background = PL_BACKGROUND_MEDIAN;
    TU_OK(pl_detect(&db, b, 0, &o, &err));
    TU_OK(pl_detect(&dc, c, 0, &o, &err));
    assert_int_equal(db->polarity, PL_POLARITY_FALLS);
    pl_change_input in = PL_CHANGE_INPUT_INIT;
    in.baseline = b;
    in.baseline_detection = db;
    in.current = c;
    in.current_detection = dc;
    in.registration_uncertainty_px = PL_CHANGE_DEFAULT_REGISTRATION_UNCERTAINTY_PX;
    pl_change_limits l = PL_CHANGE_LIMITS_INIT;
    l.area_repeatability_mm2 = 4;
    l.contrast_repeatability = 1.0; /* dB */
    l.min_reportable_mm2 = 6;
    l.new_reportable_mm2 = 10;
    l.area_growth_mm2 = 20;
    pl_comparison *cmp = NULL;
    TU_OK(pl_change_compare(&cmp, &in, &l, &err));
    print_changes("ultrasonic dB", cmp);
    assert_int_equal(cmp->polarity, PL_POLARITY_FALLS);
    const pl_change *n = change_near(cmp, 69.5, 48.5, 2);
    assert_non_null(n);
    assert_int_equal(n->kind, PL_CHANGE_NEW);
    assert_true(n->exceeds);
    /* analytic: 10 x 8 px of 1 mm; the -6 dB step is 24 noise sigmas, so
     * the threshold region is the rectangle within a pixel's ring */
    tu_assert_close(n->area_current_mm2[PL_SIZING_THRESHOLD], 80, 12, "new loss area");
    /* its contrast is positive when it looks more like a defect: 6 dB */
    tu_assert_close(n->contrast_current, 6.0, 1.0, "new loss depth, dB");
    const pl_change *g = change_near(cmp, 28, 30, 2);
    assert_non_null(g);
    assert_int_equal(g->kind, PL_CHANGE_GROWN);
    /* analytic: pixels within 10 px minus those within 7 px (pi (100 - 49)
     * = 160 mm2); the 12 dB shadow is sized to its edge within a pixel */
    tu_assert_close(g->area_delta_mm2[PL_SIZING_THRESHOLD], M_PI * (100 - 49), 25, "growth");
    assert_int_equal(cmp->counts[PL_CHANGE_VANISHED], 0);
    pl_comparison_free(cmp);
    pl_detection_free(db);
    pl_detection_free(dc);
    pl_map_free(b);
    pl_map_free(c);
}

/* ---- the simulator's ground truth ---------------------------------------------------- */

/*
 * Simulated sites of four kinds, in turn: sound (the flange alone);
 * a new disbond at the reinspection; a disbond that grows (the same centre,
 * its diameter 1.3 to 1.5 times the baseline's); a stable disbond. Each
 * site's reinspection has a placement error drawn uniformly within +-3 mm
 * along u and v and +-1 degree, and the camera's noise of its own seed.
 * The baseline camera is placed without error, so a defect centred at
 * (u, v) mm lies at column u, row v of the baseline grid, where the
 * comparison reports it. Two passes: a uniform flash (100 sites, 25 of
 * each kind), then a flash of 3 % non-uniformity whose pattern is drawn
 * anew for each acquisition (6 sound and 6 stable sites: the false
 * calls of a flash that is not the same twice).
 *
 * Checks against the truth (the disbonds' outlines are exact circles, so
 * the areas are pi d^2 / 4 mm^2: analytic):
 *   - every seeded new disbond is a change of kind "new" within 3 px of
 *     its centre, and exceeds;
 *   - every grown disbond is "grown", its area change under the threshold
 *     rule within 20 % of the simulated pi (d1^2 - d0^2) / 4;
 *   - every stable disbond is "stable";
 *   - under the uniform flash, no false call: on the sound and stable
 *     sites, no other change that exceeds;
 * and, with the argument "study-strict" only (kept out of `meson test`:
 * the library does not pass it yet, see tests/bench/README.md):
 *   - no false call under the non-uniform flash either.
 * Printed: a line a site, the sizing bias of each rule (measured / true
 * area over every disbond sized, baseline and current), the error of the
 * area change of each rule, and the area change of the stable disbonds
 * (current - baseline, the bias of the comparison itself).
 */
typedef struct gt_stats {
    size_t sites[4], ok[4], refused[4];
    size_t false_calls, false_listed, false_sites, false_edge;
    size_t false_kind[PL_CHANGE_KIND_COUNT];
    double ratio_sum[PL_SIZING_COUNT], ratio_min[PL_SIZING_COUNT], ratio_max[PL_SIZING_COUNT];
    size_t ratio_n;
    double dgrow_sum[PL_SIZING_COUNT], dgrow_min[PL_SIZING_COUNT], dgrow_max[PL_SIZING_COUNT];
    size_t dgrow_n;
    double stable_sum[PL_SIZING_COUNT], stable_min[PL_SIZING_COUNT], stable_max[PL_SIZING_COUNT];
    size_t stable_n;
} gt_stats;

static const char *const gt_kind[4] = { "sound", "new", "grown", "stable" };

static void gt_size(gt_stats *st, const double *measured, double truth)
{
    for (int r = 0; r < PL_SIZING_COUNT; r++) {
        double q = measured[r] / truth;
        if (st->ratio_n == 0 || q < st->ratio_min[r])
            st->ratio_min[r] = q;
        if (st->ratio_n == 0 || q > st->ratio_max[r])
            st->ratio_max[r] = q;
        st->ratio_sum[r] += q;
    }
    st->ratio_n++;
}

/* One site of kind `kind` (0..3) and index `i`, the flash's
 * non-uniformity `nonu`; returns the number of failed checks that are
 * enforced (each printed). */
static int gt_site(gt_stats *st, int kind, unsigned i, double nonu)
{
    rng_state = 0x9e3779b97f4a7c15ull ^ ((uint64_t)(kind + 1) << 32) ^ i;
    double du = 6 * uniform01() - 3, dv = 6 * uniform01() - 3, rot = 2 * uniform01() - 1;
    site_defect d = { 32 + 24 * uniform01(), 30 + 10 * uniform01(),
                      gt_dmin + gt_dspan * uniform01(), 0.5 + 0.5 * uniform01() };
    site_defect d1 = d;
    d1.diameter = d.diameter * (1.3 + 0.2 * uniform01());
    unsigned seed = 1000u + 10u * i + (unsigned)kind;
    pl_map *b = simulate_site(seed, 0, 0, 0, &d, kind >= 2, nonu, 1);
    pl_map *c = simulate_site(seed + 500u, du, dv, rot, kind == 2 ? &d1 : &d, kind >= 1, nonu, 1);
    pl_register_result reg;
    allow_refusal = 1;
    pl_comparison *cmp = compare_sites_on(b, c, &reg, gt_quantity);
    allow_refusal = 0;
    st->sites[kind]++;
    if (!cmp) {
        /* not a fault of the comparison: counted and printed, not judged */
        st->refused[kind]++;
        printf("  %3u %-6s %+5.2f %+5.2f %+6.3f | registration refused: %s\n", i, gt_kind[kind],
               du, dv, rot, reg.reason);
        pl_map_free(b);
        pl_map_free(c);
        return 0;
    }
    int fails = 0;
    const pl_change *hit = kind ? change_near(cmp, d.u, d.v, 3) : NULL;
    const pl_change_kind want[4] = { 0, PL_CHANGE_NEW, PL_CHANGE_GROWN, PL_CHANGE_STABLE };
    double a0 = M_PI * d.diameter * d.diameter / 4, a1 = M_PI * d1.diameter * d1.diameter / 4;
    char what[160] = "";
    if (kind) {
        if (!hit || hit->kind != want[kind] || (kind == 1 && !hit->exceeds)) {
            snprintf(what, sizeof what, "seeded %s: %s", gt_kind[kind],
                     hit ? pl_change_kind_name(hit->kind) : "nothing there");
            fails++;
        }
        if (kind == 3 && hit && hit->nbaseline && hit->ncurrent) {
            for (int r = 0; r < PL_SIZING_COUNT; r++) {
                double e = hit->area_delta_mm2[r];
                if (st->stable_n == 0 || e < st->stable_min[r])
                    st->stable_min[r] = e;
                if (st->stable_n == 0 || e > st->stable_max[r])
                    st->stable_max[r] = e;
                st->stable_sum[r] += e;
            }
            st->stable_n++;
        }
        if (hit && kind == 2 && hit->kind == PL_CHANGE_GROWN) {
            double truth = a1 - a0;
            for (int r = 0; r < PL_SIZING_COUNT; r++) {
                double e = hit->area_delta_mm2[r] / truth - 1;
                if (st->dgrow_n == 0 || e < st->dgrow_min[r])
                    st->dgrow_min[r] = e;
                if (st->dgrow_n == 0 || e > st->dgrow_max[r])
                    st->dgrow_max[r] = e;
                st->dgrow_sum[r] += e;
            }
            st->dgrow_n++;
            /* the bound on the area change: 20 % of the simulated change */
            if (fabs(hit->area_delta_mm2[PL_SIZING_THRESHOLD] / truth - 1) > 0.20) {
                snprintf(what, sizeof what, "growth %.1f mm2 against %.1f simulated",
                         hit->area_delta_mm2[PL_SIZING_THRESHOLD], truth);
                fails++;
            }
        }
        if (hit && hit->nbaseline == 1 && hit->ncurrent == 1) {
            if (kind >= 2)
                gt_size(st, hit->area_baseline_mm2, a0);
            gt_size(st, hit->area_current_mm2, kind == 2 ? a1 : a0);
        } else if (hit && kind == 1 && hit->ncurrent == 1)
            gt_size(st, hit->area_current_mm2, a0);
    }
    if (kind == 0 || kind == 3) {
        size_t fc = 0, fl = 0;
        for (size_t k = 0; k < cmp->count; k++) {
            const pl_change *ch = &cmp->changes[k];
            if (ch == hit || ch->kind == PL_CHANGE_STABLE || ch->kind == PL_CHANGE_NOT_COMPARED)
                continue;
            fl++;
            fc += ch->exceeds != 0;
            /* within 8 px (twice the largest placement error) of the map's
             * border: where the coverage and the detections' windows end */
            int edge = ch->centroid_col < 8 || ch->centroid_row < 8
                       || ch->centroid_col > SITE_W - 9 || ch->centroid_row > SITE_H - 9;
            if (ch->exceeds) {
                st->false_edge += edge;
                st->false_kind[ch->kind]++;
            }
            if (ch->exceeds)
                printf("#   false call: %s of %.0f mm2 at column %.1f, row %.1f, "
                       "contrast %.3g %s\n",
                       pl_change_kind_name(ch->kind), ch->area_measured_mm2, ch->centroid_col,
                       ch->centroid_row, ch->contrast_current, cmp->unit);
        }
        st->false_calls += fc;
        st->false_listed += fl;
        st->false_sites += fc > 0;
        if (fc)
            snprintf(what, sizeof what, "%lu false call(s)", (unsigned long)fc);
    }
    if (!fails && !(kind == 0 || kind == 3 ? what[0] : 0))
        st->ok[kind]++;
    printf("  %3u %-6s %+5.2f %+5.2f %+6.3f | %+6.2f %+6.2f %+7.3f | %5.1f %5.1f | n%lu g%lu s%lu "
           "v%lu r%lu x%lu %s\n",
           i, gt_kind[kind], du, dv, rot, reg.transform.dx, reg.transform.dy,
           reg.transform.rotation_deg, d.diameter, kind == 2 ? d1.diameter : d.diameter,
           (unsigned long)cmp->counts[PL_CHANGE_NEW], (unsigned long)cmp->counts[PL_CHANGE_GROWN],
           (unsigned long)cmp->counts[PL_CHANGE_STABLE],
           (unsigned long)cmp->counts[PL_CHANGE_VANISHED],
           (unsigned long)cmp->counts[PL_CHANGE_REGION], (unsigned long)cmp->exceeding, what);
    if (fails || what[0])
        print_changes(gt_kind[kind], cmp);
    pl_comparison_free(cmp);
    pl_map_free(b);
    pl_map_free(c);
    return fails;
}

/* per_kind sites of the kinds in `kinds` (bit k: kind k). */
static void gt_run(size_t per_kind, unsigned kinds, double nonu)
{
    gt_stats st;
    memset(&st, 0, sizeof st);
    int fails = 0;
    printf("# %s, disbonds of %.0f to %.0f mm, flash non-uniformity %.2f, %lu sites of each "
           "kind in turn\n",
           gt_quantity, gt_dmin, gt_dmin + gt_dspan, nonu, (unsigned long)per_kind);
    printf("# site kind   placement (mm, mm, deg) | registered (px, px, deg) | d0 d1 mm | "
           "counts: new grown stable vanished region exceeding\n");
    size_t total = 0;
    for (unsigned i = 0; i < per_kind; i++)
        for (int kind = 0; kind < 4; kind++)
            if (kinds & (1u << kind)) {
                fails += gt_site(&st, kind, i, nonu);
                total++;
            }
    printf("# summary over %lu simulated sites, flash non-uniformity %.2f\n",
           (unsigned long)total, nonu);
    printf("#   kind    sites  refused  as seeded (sound, stable: and no false call)\n");
    for (int k = 0; k < 4; k++)
        printf("#   %-7s %5lu  %7lu  %5lu\n", gt_kind[k], (unsigned long)st.sites[k],
               (unsigned long)st.refused[k], (unsigned long)st.ok[k]);
    printf("#   false calls (exceeding, on sound and stable sites): %lu on %lu of %lu sites; "
           "listed non-stable entries %lu\n",
           (unsigned long)st.false_calls, (unsigned long)st.false_sites,
           (unsigned long)(st.sites[0] + st.sites[3]), (unsigned long)st.false_listed);
    printf("#   of them within 8 px of the map's border %lu; new %lu, grown %lu, vanished %lu, "
           "changed-region %lu\n",
           (unsigned long)st.false_edge, (unsigned long)st.false_kind[PL_CHANGE_NEW],
           (unsigned long)st.false_kind[PL_CHANGE_GROWN],
           (unsigned long)st.false_kind[PL_CHANGE_VANISHED],
           (unsigned long)st.false_kind[PL_CHANGE_REGION]);
    for (int r = 0; r < PL_SIZING_COUNT; r++) {
        printf("#   sizing %-12s measured/true area: mean %.3f (%.3f .. %.3f) over %lu sizes\n",
               pl_sizing_name((pl_sizing)r), st.ratio_sum[r] / (double)st.ratio_n,
               st.ratio_min[r], st.ratio_max[r], (unsigned long)st.ratio_n);
        if (st.dgrow_n)
            printf("#   growth %-12s measured/true - 1:  mean %+.3f (%+.3f .. %+.3f) over %lu "
                   "grown disbonds\n",
                   pl_sizing_name((pl_sizing)r), st.dgrow_sum[r] / (double)st.dgrow_n,
                   st.dgrow_min[r], st.dgrow_max[r], (unsigned long)st.dgrow_n);
    }
    for (int r = 0; r < PL_SIZING_COUNT; r++)
        if (st.stable_n)
            printf("#   stable %-12s area change current - baseline: mean %+.1f mm2 (%+.0f .. "
                   "%+.0f) over %lu stable disbonds\n",
                   pl_sizing_name((pl_sizing)r), st.stable_sum[r] / (double)st.stable_n,
                   st.stable_min[r], st.stable_max[r], (unsigned long)st.stable_n);
    if (gt_report_only) /* "study-phase": a measurement, printed only */
        return;
    assert_int_equal(fails, 0);
    /* the aim, no false call, holds under a uniform flash; under a flash
     * that differs between the acquisitions only study-strict enforces it */
    if (nonu == 0.0 || strict)
        assert_int_equal(st.false_calls, 0);
}

/* One site of each kind in every build; the study runs 25 of each under a
 * uniform flash and 6 sound and 6 stable sites under a non-uniform one. */
static void test_change__simulated_ground_truth(void **state)
{
    (void)state;
    if (run_group == TU_STUDY && strcmp(gt_quantity, "temperature-contrast") != 0) {
        gt_run(25, 0xf, 0.0);
        gt_dmin = 18.0;
        gt_dspan = 4.0;
        gt_run(12, 0xf, 0.0);
        return;
    }
    gt_run(run_group == TU_STUDY ? 25 : 1, 0xf, 0.0);
    if (run_group == TU_STUDY)
        gt_run(6, 0x9, 0.03);
}

int main(int argc, char **argv)
{
    const struct CMUnitTest unit[] = {
        cmocka_unit_test(test_change__split_and_merge_are_groups),
        cmocka_unit_test(test_change__shift_within_tolerance_matches),
        cmocka_unit_test(test_change__vanished_and_not_compared),
        cmocka_unit_test(test_change__growth_at_the_limit),
        cmocka_unit_test(test_change__difference_finds_faint_growth),
        cmocka_unit_test(test_change__refusals_name_the_fault),
        cmocka_unit_test(test_change__same_feature_one_detection_is_not_new),
        cmocka_unit_test(test_change__resampled_reacquisition_is_no_change),
        cmocka_unit_test(test_change__map_against_itself_is_no_change),
        cmocka_unit_test(test_change__noise_only_reacquisition_is_no_change),
        cmocka_unit_test(test_change__ultrasonic_amplitude_loss_is_new),
        cmocka_unit_test(test_change__large_growth_on_phase_keeps_its_size),
        cmocka_unit_test(test_change__simulated_ground_truth),
    };
    const struct CMUnitTest study[] = {
        cmocka_unit_test(test_change__simulated_ground_truth),
    };
    /* "study-strict": the study with the check the library does not pass
     * yet enforced too (no false call under a flash whose pattern differs
     * between the acquisitions). Kept out of `meson test` until the library
     * passes it (see tests/bench/README.md); run it by hand. */
    if (argc == 2 && strcmp(argv[1], "study-phase") == 0) {
        static char study_arg[] = "study";
        gt_quantity = "phase-contrast";
        gt_report_only = 1;
        argv[1] = study_arg;
    }
    if (argc == 2 && strcmp(argv[1], "study-strict") == 0) {
        static char study_arg[] = "study";
        strict = 1;
        argv[1] = study_arg;
    }
    run_group = tu_group_of(argc, argv);
    if (run_group == TU_STUDY)
        return cmocka_run_group_tests_name("change study", study, NULL, NULL);
    return cmocka_run_group_tests_name("change", unit, NULL, NULL);
}
