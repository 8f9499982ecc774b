/*
 * testsite.h - a store of synthetic inspections for the tests of the
 * record's comparison, tracks, coverage and reports (test_compare.c,
 * test_track.c, test_coverage.c, test_report.c).
 *
 * Each map is drawn from a formula: a smooth texture (a sum of sinusoids,
 * the "phase" channel the registration locks on) and flat-topped discs of
 * known radius in the "temperature-contrast" channel, over Gaussian noise;
 * a reinspection is the same formula evaluated at positions shifted by a
 * known amount. A disc's area is pi r^2: the analytic ground truth.
 */
#ifndef PLYLEDGER_TESTSITE_H
#define PLYLEDGER_TESTSITE_H

#include "plyledger.h"

#define TS_W 128
#define TS_H 96
#define TS_PITCH 0.5
#define TS_SERIAL "CMP-0001"

/* A criteria set TEST-LIMITS rev 1: no growth at site C01 (area
 * repeatability 8 mm^2), written growth limits elsewhere (500 mm^2 or
 * 400 %). Example values. */
extern const char ts_criteria_text[];

typedef struct ts_fixture {
    char *dir;
    char *path;
    pl_store *store;
    pl_id criteria;
} ts_fixture;

/* Setup and teardown for cmocka: a new store holding airframe CMP-0001
 * with sites C01 and C02 (0.5 mm pitch, frame at STA 5000) and the
 * criteria set. */
int ts_setup(void **state);
int ts_teardown(void **state);

/* Add site `code` to CMP-0001. */
void ts_add_site(pl_store *st, const char *code);

/* A disc defect: centre (cx, cy) px, radius r_mm (0: none), contrast k K,
 * its edge smoothed over about a pixel. */
typedef struct ts_disc {
    double cx, cy, r_mm, k;
} ts_disc;

/* One inspection of `code` with a map of the part seen shifted by (sx, sy)
 * px (pixel (i, j) shows part position (i + sx, j + sy)), at aircraft
 * `hours` and `cycles` (NaN / -1: unknown). Returns its key. */
pl_id ts_inspect_at(pl_store *st, const char *code, const char *kind, const char *date,
                    const char *task, double hours, long long cycles, int simulated, double sx,
                    double sy, const ts_disc *d, size_t nd, unsigned long long seed);

/* ts_inspect_at() with hours and cycles unknown. */
pl_id ts_inspect(pl_store *st, const char *code, const char *kind, const char *date,
                 const char *task, int simulated, double sx, double sy, const ts_disc *d,
                 size_t nd, unsigned long long seed);

/* Compare options naming TEST-LIMITS. */
pl_compare_options ts_options(void);

#endif
