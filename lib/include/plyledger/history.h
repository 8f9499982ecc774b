/*
 * plyledger/history.h - what the record says, built once for every output.
 *
 * A site's history (the site, its inspections oldest first, each with its
 * maps, their registrations onto a baseline and the inspection's
 * comparisons), a registration's summary and a reduction's outcome are
 * models built here in the library. The command line prints them as text
 * or as JSON (the *_json() functions below); later outputs (the HTML report,
 * the hand-over package) show the same models, so every output tells the
 * same story in the same words.
 *
 * Life. pl_history_load() allocates a history that owns everything in it;
 * pl_history_free() releases it. The summaries are plain structs filled by
 * the caller or by the library, as each function says.
 */
#ifndef PLYLEDGER_HISTORY_H
#define PLYLEDGER_HISTORY_H

#include "plyledger/common.h"
#include "plyledger/map.h"
#include "plyledger/record.h"
#include "plyledger/reduce.h"
#include "plyledger/store.h"

#ifdef __cplusplus
extern "C" {
#endif

/* ---- what every output shows -------------------------------------------- */

/**
 * The caution every output carries where a record is shown to support a
 * decision (a history, a summary, a registration): one line, static
 * storage. Text outputs print it; JSON forms hold it as "caution".
 */
PL_EXPORT const char *pl_caution(void);

/**
 * The word outputs use for an inspection's pl_inspection.simulated:
 * "simulated" (1), "real" (0), "not recorded" (-1: recorded before the
 * store kept it). Static storage.
 */
PL_EXPORT const char *pl_history_data_word(int simulated);

/**
 * The identification line of a rendering of stored map `map_id`, as
 * pl_render_identification() writes it (airframe serial, site, inspection
 * date, map id and `quantity`, which may be NULL), followed, when
 * `onto_map` is not 0, by " onto DATE map ID" of the baseline map it was
 * aligned to. Bytes that are not printable ASCII are written as '?'.
 * @param[out] simulated  1 when either inspection's data are simulated (for
 *                        pl_render_options.simulated), else 0; may be NULL
 * @return PL_OK, PL_ENOTFOUND (no such map), PL_EDB.
 */
PL_EXPORT int pl_history_identification(char *buf, size_t size, int *simulated,
                                        pl_store *store, pl_id map_id, pl_id onto_map,
                                        const char *quantity, pl_err *err);

/* ---- a site's history --------------------------------------------------- */

/** One map of an inspection with the registrations made of it. */
typedef struct pl_history_map {
    pl_map_record map;                       /**< with its channels */
    size_t nregistrations;
    pl_registration_record *registrations;   /**< onto a baseline map, oldest first */
} pl_history_map;

/** One inspection of the site. */
typedef struct pl_history_inspection {
    pl_inspection inspection;
    size_t nmaps;
    pl_history_map *maps;                    /**< in the order recorded */
    size_t ncomparisons;
    pl_comparison_record *comparisons;       /**< of this inspection with a baseline */
} pl_history_inspection;

/** A site and everything recorded of it. */
typedef struct pl_history {
    pl_site site;
    size_t ninspections;
    pl_history_inspection *inspections;      /**< oldest first (by date, then as recorded) */
} pl_history;

/**
 * The whole history of site `code` on airframe `serial`, current versions.
 * @param[out] out  free with pl_history_free(); everything in it is owned by it
 * @return PL_OK, PL_ENOTFOUND (no such airframe or site), PL_EDB, PL_ENOMEM.
 */
PL_EXPORT int pl_history_load(pl_history **out, pl_store *store, const char *serial,
                              const char *code, pl_err *err);

/** Release a history; NULL is accepted. */
PL_EXPORT void pl_history_free(pl_history *history);

/**
 * A history as JSON: { "caution": pl_caution(), "site": {...},
 * "inspections": [ {..., "maps": [ {..., "registrations": [...] } ],
 * "comparisons": [...] } ] }, each record in its pl_row_json() form (an
 * inspection's "simulated" says whether its data are simulated).
 * @param[out] out  free with free()
 * @return PL_OK, PL_ENOMEM.
 */
PL_EXPORT int pl_history_json(char **out, const pl_history *history, pl_err *err);

/**
 * A history as CSV (RFC 4180, every field quoted by libcsv, CRLF line ends):
 * a header row, then one row per inspection, oldest first, with the
 * inspection's traceability, its maps' ids (space-separated), and its latest
 * comparison with a baseline: id, the inspection compared against, status,
 * criteria ("NAME rev R"), the counts of new, grown, stable, vanished, not
 * compared, changed regions and changes beyond their limits, the area not
 * compared, the reason when not done, and how many comparisons it has.
 * Empty fields are unknown or not applicable. README.md ("Tables") names
 * every column.
 * @param[out] out  free with free()
 * @return PL_OK, PL_ENOMEM.
 */
PL_EXPORT int pl_history_csv(char **out, const pl_history *history, pl_err *err);

/**
 * The operator history of an airframe as JSON: { "airframe": serial,
 * "operators": [ {"operator", "since", "recorded_at"}, ... ] }, oldest first.
 * @param[out] out  free with free()
 * @return PL_OK, PL_ENOTFOUND, PL_EDB, PL_ENOMEM.
 */
PL_EXPORT int pl_operators_json(char **out, pl_store *store, const char *serial, pl_err *err);

/* ---- a registration's summary ------------------------------------------ */

/** What one registration of a site did, as recorded. */
typedef struct pl_registration_summary {
    char airframe_serial[PL_NAME_SIZE];
    char site_code[PL_NAME_SIZE];
    pl_record_pair pair;                   /**< the inspections and maps aligned */
    pl_registration_record registration;   /**< as recorded; parameters_json owned */
    pl_id comparison_not_done;             /**< the comparison it stopped, or 0 */
    int simulated;                         /**< 1 when either inspection's data are
                                                simulated */
    const char *aligned;                   /**< file the aligned map went to, or NULL
                                                (borrowed; set by the caller) */
    const char *view;                      /**< file the picture went to, or NULL (idem) */
} pl_registration_summary;

/**
 * The summary of registration `registration_id` (made of `pair` of site
 * `code` on `serial`), read back from the store; `comparison_id` is the
 * comparison it stopped (0: none).
 * @param[out] out  release with pl_registration_summary_clear()
 * @return PL_OK, PL_ENOTFOUND (no such registration of that map), PL_EDB,
 *         PL_ENOMEM.
 */
PL_EXPORT int pl_registration_summary_load(pl_registration_summary *out, pl_store *store,
                                           const char *serial, const char *code,
                                           const pl_record_pair *pair, pl_id registration_id,
                                           pl_id comparison_id, pl_err *err);

/** Free what a load put in `summary` and zero it; NULL is accepted. */
PL_EXPORT void pl_registration_summary_clear(pl_registration_summary *summary);

/**
 * A summary as JSON: "caution", "airframe", "site", "baseline_inspection",
 * "current_inspection", "simulated", the registration in its pl_row_json()
 * form (the same shape a history shows), "comparison_not_done", "aligned"
 * and "view" (null when absent).
 * @param[out] out  free with free()
 * @return PL_OK, PL_ENOMEM.
 */
PL_EXPORT int pl_registration_summary_json(char **out, const pl_registration_summary *summary,
                                           pl_err *err);

/* ---- a store's summary -------------------------------------------------- */

/**
 * A store's summary (pl_store_summarize()) as JSON: "caution", "store"
 * (`path`), "store_id", "schema_version", "created_at", "created_by", the
 * counts, "inspections_by_kind" (by the kind vocabulary's words),
 * "simulated_inspections", "simulated_unknown" (inspections recorded before
 * the store said), "map_bytes", "first_inspection" and "last_inspection"
 * (null when there is none).
 * @param[out] out  free with free()
 * @return PL_OK, PL_ENOMEM.
 */
PL_EXPORT int pl_summary_json(char **out, const pl_store_summary *summary, const char *path,
                              pl_err *err);

/* ---- a reduction's outcome --------------------------------------------- */

/** What one reduction of a sequence made; every pointer is borrowed. */
typedef struct pl_reduction_summary {
    const char *sequence;          /**< the manifest reduced */
    const pl_map *map;             /**< the maps it made */
    pl_reduce_stats stats;
    const char *parameters_json;   /**< the reduction's parameters (a JSON object) */
    const char *output;            /**< file the maps went to, or NULL */
    pl_id inspection_key;          /**< the inspection recorded, or 0 */
    pl_id map_id;                  /**< the map recorded, or 0 */
} pl_reduction_summary;

/**
 * A reduction as JSON: "sequence", "width", "height", the statistics
 * ("frames_used", "samples_used", "saturated_values", "pixels_masked",
 * "pixels_partial"), "channels" (each in its pl_row_json() form),
 * "parameters", "output", "inspection" and "map" (null when absent).
 * @param[out] out  free with free()
 * @return PL_OK, PL_ENOMEM.
 */
PL_EXPORT int pl_reduction_json(char **out, const pl_reduction_summary *reduction, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
