/*
 * plyledger/plan.h - site plans: the list of inspection sites of an aircraft
 * type, read from CSV, ready to be added to an airframe in the store.
 *
 * A plan file is RFC 4180 CSV with a header row. Column names (any order,
 * case-sensitive; unknown columns are refused so a typo is not silently
 * lost):
 *
 *   required: site, method, origin_x, origin_y, origin_z,
 *             u_x, u_y, u_z, v_x, v_y, v_z, pitch_mm
 *   optional: zone, description, frame, stringer, material, thickness_mm,
 *             diffusivity_mm2_s, width_px, height_px, pitch_v_mm,
 *             coord_system (default "STA/BL/WL"), coord_unit (default "mm")
 *
 * pitch_mm is the pitch along u, and along v too unless pitch_v_mm is given.
 * An empty optional field takes its default: no text, thickness and
 * diffusivity unknown (NaN), width and height 0 (any). Numbers are decimal
 * as strtod() reads them, filling the whole field (no hexadecimal, no
 * blanks inside quotes); width_px and height_px are whole numbers. Every
 * row is checked with pl_site_check(); site codes must be unique.
 * Lines whose first field starts with '#' are comments; blank lines and rows
 * of empty fields are skipped; LF or CRLF line ends and a leading UTF-8 byte
 * order mark are accepted. Messages name the file as given and the line a
 * record starts on ("plan.csv line 7: column pitch_mm: 'abc' is not a
 * number").
 *
 * pl_plan_load() allocates a pl_plan; pl_plan_free() releases it.
 */
#ifndef PLYLEDGER_PLAN_H
#define PLYLEDGER_PLAN_H

#include "plyledger/common.h"
#include "plyledger/store.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef struct pl_plan {
    size_t nsites;
    pl_site *sites;  /**< nsites records, airframe_serial empty; owned */
    char *path;      /**< the file it was read from, for messages; owned */
    size_t *lines;   /**< nsites line numbers: where each site's row starts; owned */
} pl_plan;

/**
 * Read a site plan.
 * @param[out] out  free with pl_plan_free()
 * @return PL_OK, PL_EIO (cannot read), PL_EFORMAT (not CSV, empty, no
 *         sites, missing, unknown or repeated column, a row with another
 *         number of fields than the header, a required value missing, a
 *         value that is not a number), PL_EINVAL (a site that fails
 *         pl_site_check(), a pitch that is NaN or not > 0, a number that is
 *         not finite, text too long for its field), PL_EEXISTS (duplicate
 *         site code), PL_ENOMEM (out of memory, or a file of 64 MiB or more).
 */
PL_EXPORT int pl_plan_load(pl_plan **out, const char *path, pl_err *err);

/** Release a plan; NULL is accepted. */
PL_EXPORT void pl_plan_free(pl_plan *plan);

/**
 * Add every site of the plan to the airframe `serial`, all or none (one
 * savepoint: inside a caller's transaction it rolls back with it).
 * @param[out] added  sites added (may be NULL); 0 on failure
 * @return as pl_store_add_site(), naming the plan file, the line and the
 *         failing site ("plan.csv line 7: site F03 on CR7-0107: ...").
 */
PL_EXPORT int pl_plan_apply(pl_store *store, const pl_plan *plan, const char *serial,
                            size_t *added, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
