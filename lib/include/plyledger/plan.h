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
 * Every row is checked with pl_site_check(); site codes must be unique.
 * Lines whose first field starts with '#' are comments.
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
} pl_plan;

/**
 * Read a site plan.
 * @param[out] out  free with pl_plan_free()
 * @return PL_OK, PL_EIO (cannot read), PL_EFORMAT (not CSV, missing or
 *         unknown column, a value that is not a number, "line N"), PL_EINVAL
 *         (a site that fails pl_site_check(), NaN or negative pitch),
 *         PL_EEXISTS (duplicate site code), PL_ENOMEM.
 */
PL_EXPORT int pl_plan_load(pl_plan **out, const char *path, pl_err *err);

/** Release a plan; NULL is accepted. */
PL_EXPORT void pl_plan_free(pl_plan *plan);

/**
 * Add every site of the plan to the airframe `serial`, all or none.
 * @param[out] added  sites added (may be NULL)
 * @return as pl_store_add_site(), naming the failing site.
 */
PL_EXPORT int pl_plan_apply(pl_store *store, const pl_plan *plan, const char *serial,
                            size_t *added, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
