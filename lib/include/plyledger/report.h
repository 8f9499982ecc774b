/*
 * plyledger/report.h - the disposition report: one self-contained HTML
 * file for a recorded site comparison, or for a whole check, to put the
 * whole picture in front of an engineer or a reviewer.
 *
 * A report is HTML5 in one file, UTF-8: every picture is a PNG embedded as
 * a data: URI, there is no script, no external reference and no network
 * access, and a print stylesheet lays it out on A4. It is built from the
 * record alone (never from a new comparison), so it shows what was
 * recorded:
 *   - the airframe, the site and where it is in airframe coordinates (its
 *     map frame and the corners of its map), and every change's position;
 *   - the baseline map, the current map carried onto the baseline grid
 *     through the recorded registration (pl_register_apply() with the
 *     recorded transform), their difference (polarity x (current -
 *     baseline)) and an overlay with each change's outline numbered as
 *     the comparison numbers it (the outlines recorded with its
 *     indications; a changed region, which has no outline recorded, by a
 *     mark at its centroid);
 *   - the table of changes with their limits and margins, as recorded;
 *   - each reportable track's history plot (plyledger/track.h) with the
 *     fitted line, its band and the limit, and its forecast;
 *   - the registration's quality; the criteria revision (and its marking
 *     when it holds example values); the traceability of both
 *     inspections; the interpretations and dispositions with who signed
 *     them, and whether the whole record verifies (plyledger/ledger.h);
 *   - for a check: its coverage (plyledger/coverage.h), missed sites first,
 *     a line per site, and the sections of the sites with a reportable
 *     change that is new, grown or vanished, or beyond its limits;
 *   - the caution, at the top and at the end.
 * Data of a simulated inspection are marked SIMULATED wherever they show.
 *
 * Life. The functions hand out a malloc'd NUL-terminated document.
 */
#ifndef PLYLEDGER_REPORT_H
#define PLYLEDGER_REPORT_H

#include "plyledger/common.h"
#include "plyledger/store.h"

#ifdef __cplusplus
extern "C" {
#endif

/** Options; initialise with PL_REPORT_OPTIONS_INIT. */
typedef struct pl_report_options {
    unsigned version;          /**< PL_REPORT_OPTIONS_VERSION */
    int verify;                /**< 1 (default): verify the store and show the result;
                                    0: say that it was not verified */
    const char *generated_on;  /**< the date shown as the report's; NULL: today (UTC) */
} pl_report_options;

#define PL_REPORT_OPTIONS_VERSION 1
#define PL_REPORT_OPTIONS_INIT { PL_REPORT_OPTIONS_VERSION, 1, NULL }

/**
 * The report of recorded comparison `comparison_id` (see the
 * introduction).
 * @param[out] html  malloc'd, NUL terminated; free with free()
 * @param[out] len   its length (may be NULL)
 * @return PL_OK, PL_ENOTFOUND (no such comparison, or a map or inspection
 *         of it), PL_EFORMAT (a comparison whose recorded result cannot be
 *         read), PL_EINVAL (options), PL_EDB, PL_ENOMEM.
 */
PL_EXPORT int pl_report_site(char **html, size_t *len, pl_store *store, pl_id comparison_id,
                             const pl_report_options *opts, pl_err *err);

/**
 * The report of check `task` of airframe `serial` (see the introduction).
 * `progress` is told the fraction done after each site (may be NULL).
 * @return as pl_report_site(), and PL_ENOTFOUND (no inspection under the
 *         task), PL_ECANCELED.
 */
PL_EXPORT int pl_report_check(char **html, size_t *len, pl_store *store, const char *serial,
                              const char *task, const pl_report_options *opts,
                              pl_progress_fn progress, void *ud, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
