/*
 * plyledger/record.h - recording inspections: one or many sites of an
 * airframe, each with its traceability and the map files it produced.
 *
 * A pl_record is a batch to be written into the store as one unit. It is
 * built either from a JSON sidecar file (pl_record_load_sidecar()) or call by
 * call (pl_record_add_site(), pl_record_add_map()), then written by
 * pl_record_apply(), which loads each map file, completes what the file does
 * not say (quantity, unit, pitch, placement) from the request or the site,
 * and adds the inspections and maps, all or nothing. After a successful
 * apply, each site's `inspection_key` and each map's `map_id` say what was
 * recorded.
 *
 * Sidecar format (a JSON object; every key of the top level may be repeated
 * inside a site entry to override it there):
 *
 *   {
 *     "airframe": "serial",            "kind": "baseline",
 *     "date": "YYYY-MM-DD",            "task": "task or check reference",
 *     "hours": 1234.5,                 "cycles": 789,
 *     "procedure": "reference",        "procedure_revision": "B",
 *     "equipment": "equipment used",   "calibration": "reference standard",
 *     "inspector": "name",             "inspector_level": "level",
 *     "software_version": "x.y.z",     "notes": "text",
 *     "simulated": false,              true: the data come from a simulation
 *     "hours_reason": "text",          why hours or cycles go back (see
 *                                      pl_store_add_inspection())
 *     "parameters": { ...processing parameters... },
 *     "sites": [
 *       { "site": "code",
 *         "maps": [ { "file": "relative/to/sidecar.npy",
 *                     "channels": [ {"quantity": "...", "unit": "..."} ],
 *                     "pitch_mm": 0.5  or  [0.5, 0.5],
 *                     "infinite_as_no_data": false,   true: infinities become
 *                                                     no data (recorded)
 *                     "placement": { "origin": [x,y,z], "u": [..], "v": [..],
 *                                    "system": "STA/BL/WL", "unit": "mm" } } ] }
 *     ]
 *   }
 *
 * Unknown keys are refused, so a misspelt field is never silently lost.
 * Every site entry lists at least one map, and a batch names each site of
 * an airframe once (site codes and serials compared without regard to
 * case). Every refusal names the sidecar file and, below the top level,
 * the site and the map entry ("check.json: site F03: map 2: ...").
 * pl_record_new() / pl_record_load_sidecar() allocate; pl_record_free()
 * releases everything, including the strings the record owns.
 */
#ifndef PLYLEDGER_RECORD_H
#define PLYLEDGER_RECORD_H

#include "plyledger/common.h"
#include "plyledger/map.h"
#include "plyledger/register.h"
#include "plyledger/store.h"

#ifdef __cplusplus
extern "C" {
#endif

/** One map file to record. */
typedef struct pl_record_map {
    char *path;               /**< file to import (.png, .npy, .csv); owned */
    uint32_t nchannels;       /**< channel descriptions given (0: from the file) */
    pl_channel *channels;     /**< nchannels entries; owned */
    double pitch_u, pitch_v;  /**< mm per pixel; NaN: from the file, else the site */
    int has_placement;        /**< 1: use `placement`, else the site's map frame */
    pl_placement placement;
    pl_id map_id;             /**< (after apply) the stored map */
    int infinite_as_nodata;   /**< 1: an infinite value becomes no data (NaN) instead
                                   of refusing the file (PL_MAP_INFINITE_TO_NAN); the
                                   option and its count are recorded with the map */
} pl_record_map;

/** One site's inspection. */
typedef struct pl_record_site {
    pl_inspection insp;       /**< airframe, site and traceability; parameters_json owned */
    size_t nmaps;
    pl_record_map *maps;      /**< owned */
    pl_id inspection_key;     /**< (after apply) the recorded inspection */
} pl_record_site;

typedef struct pl_record {
    size_t nsites;
    pl_record_site *sites;    /**< owned */
    char *source;             /**< the sidecar it was read from, named first in the
                                   messages of pl_record_apply(); NULL for a batch
                                   made by calls; owned */
} pl_record;

/** An empty batch. @param[out] out  free with pl_record_free(). */
PL_EXPORT int pl_record_new(pl_record **out, pl_err *err);

/** Release a batch; NULL is accepted. */
PL_EXPORT void pl_record_free(pl_record *rec);

/**
 * Append a site's inspection (copied, parameters_json included).
 * @param[out] index  its position (may be NULL)
 * @return PL_OK, PL_ENOMEM.
 */
PL_EXPORT int pl_record_add_site(pl_record *rec, const pl_inspection *insp, size_t *index,
                                 pl_err *err);

/**
 * Append a map file to site `site`. `quantities` and `units` are comma
 * separated lists, one entry per channel (or NULL / "" to take them from the
 * file); pitches NaN to take them from the file or the site.
 * @return PL_OK, PL_EINVAL (site out of range, lists of different lengths,
 *         bad quantity or unit), PL_ENOMEM.
 */
PL_EXPORT int pl_record_add_map(pl_record *rec, size_t site, const char *path,
                                const char *quantities, const char *units,
                                double pitch_u, double pitch_v, pl_err *err);

/**
 * Read a JSON sidecar (see the introduction). Map paths are taken relative
 * to the sidecar's folder.
 * @param[out] out  free with pl_record_free()
 * @return PL_OK, PL_EIO, PL_EFORMAT (not JSON, wrong type, unknown key,
 *         naming the key), PL_EINVAL (a value that fails its check), PL_ENOMEM.
 */
PL_EXPORT int pl_record_load_sidecar(pl_record **out, const char *path, pl_err *err);

/**
 * Write the batch into the store: every inspection and map, or nothing.
 * Each site must have at least one map and appear once in the batch. Each
 * map file is loaded (pl_map_load_v2(): an infinity refuses the file unless
 * the map asks for infinite_as_nodata) and checked against its site (size,
 * pitch); the map's parameters record what the load did
 * (pl_map_load_info_json()).
 * `progress` (may be NULL) is told after each map.
 * @return PL_OK, or the first failure (PL_EIO, PL_EFORMAT, PL_ENOTFOUND,
 *         PL_ENOMATCH, PL_EEXISTS, PL_EINVAL (also a site without maps or
 *         twice in the batch), PL_EDB, PL_ECANCELED), with a message naming
 *         the sidecar (rec->source), the site and the map file.
 */
PL_EXPORT int pl_record_apply(pl_store *store, pl_record *rec, pl_progress_fn progress,
                              void *userdata, pl_err *err);

/**
 * Record one inspection of a site with one map made in memory (a
 * reduction's output, say), in one transaction. The map's pitch, where NaN,
 * is taken from the site, and its placement is set to the site's map frame.
 * When `parameters_json` says the data were simulated (its "acquisition"
 * holds the "simulation" object the simulator writes into a sequence's
 * manifest, which a reduction records), the inspection is recorded as
 * simulated whatever insp->simulated says.
 * @param map              completed in place (pitch, placement)
 * @param made_by          how the map was made ("reduce", ...)
 * @param source           what it was made from (a file name), or NULL
 * @param parameters_json  the making's parameters (JSON object) or NULL
 * @param[out] inspection_key  the recorded inspection (may be NULL)
 * @param[out] map_id          the stored map (may be NULL)
 * @return as pl_store_add_inspection() and pl_store_add_map(), with the
 *         site named in the message.
 */
PL_EXPORT int pl_record_map_inspection(pl_store *store, const pl_inspection *insp, pl_map *map,
                                       const char *made_by, const char *source,
                                       const char *parameters_json, pl_id *inspection_key,
                                       pl_id *map_id, pl_err *err);

/** The two maps a registration of a site aligns, and their inspections. */
typedef struct pl_record_pair {
    pl_id baseline_inspection;  /**< key of the site's current baseline */
    pl_id current_inspection;   /**< key of the inspection being compared */
    pl_id baseline_map;         /**< its map (the first recorded, unless chosen) */
    pl_id current_map;
} pl_record_pair;

/**
 * Find what a registration of site `code` on `serial` aligns: the site's
 * baseline inspection and, unless given (non-zero in `pair`), the latest
 * other inspection and the first map of each. Given ids are checked.
 * @param[in,out] pair  zeros to choose, or ids to check
 * @return PL_OK, PL_ENOTFOUND (no such site, no baseline, no later
 *         inspection, an inspection without maps), PL_ENOMATCH (a given map
 *         or inspection of another site or inspection), PL_EINVAL (the
 *         baseline itself given as current, a simulated baseline for a real
 *         inspection), PL_EDB.
 */
PL_EXPORT int pl_record_find_pair(pl_store *store, const char *serial, const char *code,
                                  pl_record_pair *pair, pl_err *err);

/**
 * Record a registration's outcome: the registration (aligned, refused or
 * manual, from `res`) and, when it was refused, the comparison it was
 * needed for, as not done and why. One transaction.
 * @param method           "phase-correlation", "manual", ...
 * @param supplied_by      manual: who (else NULL)
 * @param supplied_reason  manual: why (else NULL)
 * @param parameters_json  the options used, or NULL
 * @param[out] registration_id  may be NULL
 * @param[out] comparison_id    (refused only) may be NULL; 0 otherwise
 * @return as pl_store_add_registration() and pl_store_add_comparison().
 */
PL_EXPORT int pl_record_registration(pl_store *store, const pl_record_pair *pair,
                                     const pl_register_result *res, int manual,
                                     const char *method, const char *supplied_by,
                                     const char *supplied_reason, const char *parameters_json,
                                     pl_id *registration_id, pl_id *comparison_id, pl_err *err);

/**
 * The parameters recorded with a registration: the channel asked for
 * (`quantity`, `label`; NULL for the default) and the options used.
 * @param[out] out  a JSON object; free with free()
 * @param opts      the options, or NULL for PL_REGISTER_OPTIONS_INIT
 * @return PL_OK, PL_ENOMEM.
 */
PL_EXPORT int pl_record_registration_parameters(char **out, const char *quantity,
                                                const char *label,
                                                const pl_register_options *opts, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
