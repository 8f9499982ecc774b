/*
 * plyledger/compare.h - the recorded comparison of a site, and of a whole
 * check, against the governing baseline under a stored criteria revision.
 *
 * A site comparison (pl_compare_site()):
 *   1. chooses the two inspections: the current one (given, or the site's
 *      latest) and its reference: with PL_AGAINST_BASELINE the governing
 *      baseline, the latest inspection of kind "baseline" or "post-repair"
 *      performed on or before the current one (a post-repair baseline
 *      supersedes the delivery one); with PL_AGAINST_PREVIOUS the
 *      inspection just before the current one (for trend);
 *   2. guards comparability: both maps must hold the compared quantity
 *      (and label) in the same unit, and a simulated reference is never
 *      compared with a real inspection (refusals); a different procedure
 *      or revision, equipment, reduction parameters, pitch or map size is
 *      a warning, recorded with the comparison;
 *   3. resolves the limits from the criteria revision (plyledger/criteria.h:
 *      method, quantity, site code and zone) and refuses a site no rule
 *      covers, or a rule whose contrast unit is not the channel's;
 *   4. registers the current map onto the reference (plyledger/register.h),
 *      detects on both (plyledger/detect.h), matches and classifies
 *      (plyledger/change.h);
 *   5. records, in one transaction, the registration and the comparison
 *      (status "done", the criteria revision, the area not compared, and
 *      the whole result as its parameters: limits, warnings, counts and
 *      every change with its deltas, limits and margins). A refused
 *      registration is recorded with the comparison as not done and why.
 * A refusal of steps 2 and 3 records nothing and returns an error naming
 * the airframe, site and inspections.
 *
 * A check comparison (pl_compare_check()) does that for every inspection of
 * an airframe carrying the check's task reference, site by site, keeping
 * each site's refusal as that site's result (the others go on), and names
 * the sites of the airframe's plan that the check did not inspect.
 *
 * The comparison supports qualified NDT personnel; the design holder's
 * approved data and the inspection procedure govern any disposition.
 */
#ifndef PLYLEDGER_COMPARE_H
#define PLYLEDGER_COMPARE_H

#include "plyledger/change.h"
#include "plyledger/common.h"
#include "plyledger/criteria.h"
#include "plyledger/detect.h"
#include "plyledger/register.h"
#include "plyledger/store.h"

#ifdef __cplusplus
extern "C" {
#endif

/** What the current inspection is compared with. */
typedef enum pl_compare_against {
    PL_AGAINST_BASELINE = 0, /**< the governing baseline */
    PL_AGAINST_PREVIOUS = 1, /**< the inspection before it (trend) */
} pl_compare_against;

#define PL_COMPARE_MAX_WARNINGS 8

/** Options; initialise with PL_COMPARE_OPTIONS_INIT. */
typedef struct pl_compare_options {
    unsigned version;                /**< PL_COMPARE_OPTIONS_VERSION */
    pl_compare_against against;
    const char *quantity;            /**< compared channel; NULL: the method's default */
    const char *label;               /**< its label; NULL: the first of that quantity */
    pl_id criteria_id;               /**< the revision; 0: by name */
    const char *criteria_name;       /**< with criteria_id 0 (required then) */
    const char *criteria_revision;   /**< NULL or "": the latest of that name */
    const char *register_quantity;   /**< registered on (NULL: pl_register_maps()' choice) */
    const char *register_label;
    pl_register_options reg;         /**< registration options */
    pl_detect_options detect;        /**< detection options, both maps */
    double registration_uncertainty_px; /**< NaN: PL_CHANGE_DEFAULT_REGISTRATION_UNCERTAINTY_PX */
    int dry_run;                     /**< 1: compare, record nothing */
} pl_compare_options;

#define PL_COMPARE_OPTIONS_VERSION 1
#define PL_COMPARE_OPTIONS_INIT                                                          \
    { PL_COMPARE_OPTIONS_VERSION, PL_AGAINST_BASELINE, NULL, NULL, 0, NULL, NULL,      \
      NULL, NULL, PL_REGISTER_OPTIONS_INIT, PL_DETECT_OPTIONS_INIT, NAN, 0 }

/** The comparison of one site; owns every pointer. */
typedef struct pl_site_comparison {
    pl_site site;
    pl_inspection reference;         /**< baseline (or previous) inspection */
    pl_inspection current;
    pl_compare_against against;
    pl_id reference_map, current_map;
    char quantity[PL_QUANTITY_SIZE];
    char label[PL_NAME_SIZE];
    char unit[PL_UNIT_SIZE];
    uint32_t reference_channel;      /**< in reference_map */
    uint32_t aligned_channel;        /**< in `aligned` */
    pl_criteria_limits limits;       /**< the rule applied */
    char criteria_source[PL_TEXT_SIZE];
    pl_id criteria_id;
    size_t nwarnings;
    char warnings[PL_COMPARE_MAX_WARNINGS][PL_TEXT_SIZE];
    pl_register_result reg;
    int done;                        /**< 0: not done (registration refused) */
    char not_done_reason[PL_TEXT_SIZE];
    pl_comparison *cmp;              /**< NULL when not done */
    pl_detection *reference_detection, *current_detection; /**< NULL when not done */
    pl_map *reference_data;          /**< the reference map */
    pl_map *aligned;                 /**< the current map on its grid (NULL: not done) */
    pl_id registration_id, comparison_id; /**< 0 on a dry run */
} pl_site_comparison;

/**
 * Compare site `code` of `serial` (see the introduction).
 * @param current_inspection  the key, or 0 for the site's latest inspection
 * @param[out] out  free with pl_site_comparison_free(); NULL on failure
 * @return PL_OK (check done), PL_ENOTFOUND (no site, reference, map,
 *         criteria or rule), PL_ENOMATCH (a quantity or unit that does not
 *         match), PL_EINVAL (options; a simulated reference for a real
 *         inspection), or the store's, registration's, detection's codes.
 */
PL_EXPORT int pl_compare_site(pl_site_comparison **out, pl_store *store, const char *serial,
                              const char *code, pl_id current_inspection,
                              const pl_compare_options *opts, pl_err *err);

PL_EXPORT void pl_site_comparison_free(pl_site_comparison *sc);

/**
 * Record a comparison made with dry_run set (so that a caller can write its
 * outputs first): the registration and the comparison, one transaction.
 * @return PL_OK, PL_EINVAL (already recorded), or the store's codes.
 */
PL_EXPORT int pl_compare_record(pl_store *store, pl_site_comparison *sc,
                                const pl_compare_options *opts, pl_err *err);

/**
 * The marks of a done comparison for pl_render_outlined(): on the
 * reference grid, k where the pixel belongs to change k (numbered from 1
 * as in the JSON), the current map's indications first, then the
 * reference's, then changed regions.
 * @param[out] out  width x height, free with free()
 * @return PL_OK, PL_EINVAL (not done), PL_ENOMEM.
 */
PL_EXPORT int pl_site_comparison_marks(uint32_t **out, const pl_site_comparison *sc,
                                       pl_err *err);

/**
 * The difference map of a done comparison (polarity x (current -
 * reference) on the reference grid, NaN where not compared) as a one-channel
 * map of the compared quantity labelled "difference", with the reference's
 * pitch and placement.
 * @param[out] out  free with pl_map_free()
 */
PL_EXPORT int pl_site_comparison_difference(pl_map **out, const pl_site_comparison *sc,
                                            pl_err *err);

/**
 * A site comparison as JSON: airframe, site (zone, location), reference and
 * current inspections, quantity, criteria (name, revision, rule, kind,
 * marking when example values), limits, registration, warnings, coverage,
 * counts, every change, and the caution. This is also what the comparison
 * row records as its parameters.
 * @param[out] out  free with free()
 */
PL_EXPORT int pl_site_comparison_json(char **out, const pl_site_comparison *sc, pl_err *err);

/** The counts of one site or a check, by kind, and the findings. */
typedef struct pl_compare_counts {
    size_t sites;          /**< sites attempted */
    size_t compared;       /**< done */
    size_t refused;        /**< not done, or refused before (comparability, criteria) */
    size_t kinds[PL_CHANGE_KIND_COUNT]; /**< reportable changes of each kind */
    size_t below_min;      /**< changes below the minimum reportable size (listed only) */
    size_t exceeding;      /**< changes beyond their limits */
    double not_compared_mm2;
} pl_compare_counts;

/** One site of a check: its comparison, or why there is none. */
typedef struct pl_check_site {
    char code[PL_NAME_SIZE];
    pl_id current_inspection;
    pl_site_comparison *sc;          /**< NULL when refused before comparing */
    int status;                      /**< PL_OK, or the refusal's code */
    char refusal[PL_ERR_MSG_SIZE];
} pl_check_site;

typedef struct pl_check_comparison {
    char serial[PL_NAME_SIZE];
    char task[PL_NAME_SIZE];
    pl_compare_against against;
    size_t nsites;
    pl_check_site *sites;            /**< by site code */
    pl_compare_counts counts;
    double seconds;                  /**< wall time of the whole check */
    size_t missed;                   /**< sites of the airframe's plan not inspected under
                                          the task (plyledger/coverage.h) */
    char missed_warning[PL_ERR_MSG_SIZE]; /**< pl_coverage_missed_line(), "" when none:
                                          every output of the check shows it first */
} pl_check_comparison;

/**
 * Compare every inspection of `serial` whose task reference is `task`
 * (ASCII case ignored), site by site (see the introduction). `progress`
 * is told the fraction done after each site.
 * @return PL_OK (check each site's status), PL_ENOTFOUND (no such airframe
 *         or no inspection under that task), PL_ECANCELED, PL_EDB.
 */
PL_EXPORT int pl_compare_check(pl_check_comparison **out, pl_store *store, const char *serial,
                               const char *task, const pl_compare_options *opts,
                               pl_progress_fn progress, void *ud, pl_err *err);

PL_EXPORT void pl_check_comparison_free(pl_check_comparison *cc);

/** The counts of one site comparison. */
PL_EXPORT void pl_compare_counts_of(pl_compare_counts *out, const pl_site_comparison *sc);

/** A check as JSON: serial, task, "missed_warning" (null when none),
 * "missed" (the count), counts, each site's comparison or refusal. */
PL_EXPORT int pl_check_comparison_json(char **out, const pl_check_comparison *cc, pl_err *err);

/**
 * A recorded comparison's result as lines of text for a history: its
 * criteria (with the example marking), its counts, and each reportable
 * change (number, kind, area before and now, margin, EXCEEDS), each line
 * led by `indent`. A row without a recorded result says so.
 * @param[out] out  free with free()
 */
PL_EXPORT int pl_comparison_text(char **out, const pl_comparison_record *c, const char *indent,
                                 pl_err *err);

/** The name of a reference: "baseline", "previous". */
PL_EXPORT const char *pl_compare_against_name(pl_compare_against a);

#ifdef __cplusplus
}
#endif
#endif
