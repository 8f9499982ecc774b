/*
 * plyledger/coverage.h - what one check of an airframe covered: which
 * sites of its plan were inspected, which were not, how much of each
 * inspected site was compared with its baseline, and the plan's area
 * covered.
 *
 * The plan of an airframe is its current sites (plyledger import-plan).
 * A check is the airframe's inspections whose task reference is the
 * check's (ASCII case ignored), as plyledger compare --task takes it; a
 * site inspected more than once under it counts its latest inspection.
 * For each inspected site the comparison used is the latest recorded one
 * of that inspection against a baseline or post-repair inspection (a done
 * one before one not done).
 *
 * Per site: its planned area (the site's expected map size times its
 * pitch, or the size of the inspection's first map when the site sets no
 * size, or for a missed site that of its latest inspection under any task;
 * NaN when none is known), the registration's overlap fraction
 * (of the baseline grid), the compared fraction (1 - the comparison's
 * uncompared fraction) and the compared area. A site not inspected is
 * "missed"; one inspected whose comparison was not done is "refused", with
 * the reason; one inspected and never compared is "not compared".
 * Totals: the plan's area, the area inspected and the area compared, in
 * mm^2 and as percentages of the plan's known area (sites of unknown area
 * are counted apart). Missed sites lead every output of a coverage, in
 * capitals, so that a missed site cannot be overlooked.
 *
 * Life. pl_coverage_load() allocates a pl_coverage that owns everything in
 * it; pl_coverage_free() releases it.
 */
#ifndef PLYLEDGER_COVERAGE_H
#define PLYLEDGER_COVERAGE_H

#include "plyledger/common.h"
#include "plyledger/store.h"

#ifdef __cplusplus
extern "C" {
#endif

/** What became of one site of the plan in the check. */
typedef enum pl_coverage_state {
    PL_COVERAGE_MISSED = 0,       /**< not inspected under the check */
    PL_COVERAGE_REFUSED = 1,      /**< inspected; its comparison was not done */
    PL_COVERAGE_NOT_COMPARED = 2, /**< inspected; no comparison recorded */
    PL_COVERAGE_COMPARED = 3,     /**< inspected and compared */
} pl_coverage_state;

/** One site of the plan. */
typedef struct pl_coverage_site {
    char code[PL_NAME_SIZE];
    char zone[PL_NAME_SIZE];
    char description[PL_TEXT_SIZE];
    pl_coverage_state state;
    pl_id inspection;              /**< its inspection under the check, or 0 */
    char performed_on[PL_DATE_SIZE];
    int simulated;                 /**< the inspection's data are simulated */
    pl_id comparison;              /**< the comparison used, or 0 */
    char reason[PL_TEXT_SIZE];     /**< refused: why the comparison was not done */
    double area_mm2;               /**< planned area; NaN unknown */
    double overlap_fraction;       /**< registration overlap; NaN without one */
    double compared_fraction;      /**< of the site; NaN unless compared */
    double compared_mm2;           /**< NaN unless compared with a known area */
    size_t exceeding;              /**< changes beyond their limits (compared) */
} pl_coverage_site;

/** A check's coverage. */
typedef struct pl_coverage {
    char serial[PL_NAME_SIZE];
    char task[PL_NAME_SIZE];
    size_t nsites;                 /**< the plan */
    pl_coverage_site *sites;       /**< missed first, then by code */
    size_t missed, refused, not_compared, compared;
    size_t unknown_area;           /**< sites of unknown area */
    double plan_mm2;               /**< the plan's known area */
    double inspected_mm2;          /**< of the inspected sites */
    double compared_mm2;           /**< compared, summed over sites */
    double inspected_percent;      /**< of plan_mm2 (NaN when it is 0) */
    double compared_percent;
} pl_coverage;

/**
 * The coverage of check `task` of airframe `serial` (see the
 * introduction).
 * @param[out] out  free with pl_coverage_free()
 * @return PL_OK, PL_EINVAL (no task), PL_ENOTFOUND (no such airframe, no
 *         site in its plan, or no inspection under the task: named),
 *         PL_EDB, PL_ENOMEM.
 */
PL_EXPORT int pl_coverage_load(pl_coverage **out, pl_store *store, const char *serial,
                               const char *task, pl_err *err);

/** Release a coverage; NULL is accepted. */
PL_EXPORT void pl_coverage_free(pl_coverage *coverage);

/** "missed", "refused", "not compared", "compared". */
PL_EXPORT const char *pl_coverage_state_name(pl_coverage_state state);

/**
 * The warning line of the missed sites, "NOT INSPECTED in check T of S: 1
 * site of 12 (F07)", into buf ("" when none are missed). Every output of a
 * check (coverage, the check's comparison, the check report) prints it
 * first.
 * @return the number of missed sites.
 */
PL_EXPORT size_t pl_coverage_missed_line(char *buf, size_t size, const pl_coverage *coverage);

/**
 * A coverage as text: the missed-site line first, the sites (missed,
 * refused, not compared, compared) with their fractions and areas, the
 * totals, and the caution.
 * @param[out] out  free with free()
 */
PL_EXPORT int pl_coverage_text(char **out, const pl_coverage *coverage, pl_err *err);

/**
 * A coverage as JSON: "caution", "airframe", "task", "missed_warning"
 * (null when none), "missed" (codes), "counts", "totals", "sites" [...].
 * @param[out] out  free with free()
 */
PL_EXPORT int pl_coverage_json(char **out, const pl_coverage *coverage, pl_err *err);

/**
 * A coverage as CSV (libcsv, RFC 4180): a header row and one row per site:
 * airframe, task, site, zone, state, inspection, performed_on, simulated,
 * comparison, area_mm2, overlap_fraction, compared_fraction, compared_mm2,
 * exceeding, reason (README.md, "Tables").
 * @param[out] out  free with free()
 */
PL_EXPORT int pl_coverage_csv(char **out, const pl_coverage *coverage, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
