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
#include "plyledger/store.h"

#ifdef __cplusplus
extern "C" {
#endif

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
 * A history as JSON: { "site": {...}, "inspections": [ {..., "maps": [ {...,
 * "registrations": [...] } ], "comparisons": [...] } ] }, each record in
 * its pl_row_json() form.
 * @param[out] out  free with free()
 * @return PL_OK, PL_ENOMEM.
 */
PL_EXPORT int pl_history_json(char **out, const pl_history *history, pl_err *err);

/**
 * The operator history of an airframe as JSON: { "airframe": serial,
 * "operators": [ {"operator", "since", "recorded_at"}, ... ] }, oldest first.
 * @param[out] out  free with free()
 * @return PL_OK, PL_ENOTFOUND, PL_EDB, PL_ENOMEM.
 */
PL_EXPORT int pl_operators_json(char **out, pl_store *store, const char *serial, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
