/*
 * plyledger/store.h - the inspection record: one SQLite file per fleet.
 *
 * A store holds airframes (by serial), their inspection sites (by code,
 * unique per airframe), the inspections of each site, the maps each
 * inspection produced, and the registrations and comparisons made between
 * them; the schema also holds the tables that indication and disposition
 * work fills (see the schema folder).
 *
 * Append-only. Recorded rows are never updated or deleted; SQLite triggers
 * refuse it. A correction is a new row that supersedes the current version
 * and gives a reason. Every correctable record therefore has two ids:
 * `id`, the row of this version, and `key`, the id of its first version,
 * which never changes and which child records refer to. Reads return the
 * current version of each record unless they say otherwise.
 *
 * Life. pl_store_create() makes a new store, pl_store_open() opens one and
 * migrates it forward to the library's schema (refusing a store written by a
 * newer plyledger); pl_store_close() closes it. A pl_store is used from one
 * thread at a time.
 *
 * Transactions. Every writing call is atomic on its own (a savepoint). A
 * caller that makes several calls wraps them in pl_store_begin() and
 * pl_store_commit(), or pl_store_rollback() on failure, so that either all of
 * them land or the store is left exactly as it was.
 *
 * Several writers. Many processes may open one store; readers never wait,
 * and one writer at a time holds the write lock, from the start of its
 * transaction to its end. A writer that finds the lock taken waits for it,
 * sleeping with a back-off (1 ms doubling to 100 ms, randomised), for up to
 * PL_STORE_WAIT_DEFAULT_S seconds unless pl_store_set_wait() says otherwise;
 * when the wait runs out the call fails with PL_EBUSY ("another process is
 * writing to the store ...; nothing was recorded") and leaves the store as
 * it was. Callers keep the lock short by doing their costly work first:
 * pl_prepared_map_new() compresses and hashes a map before any lock, and
 * plyledger/record.h's batches prepare every map before they begin.
 *
 * Records are plain structs with fixed text buffers, filled by the caller
 * for writes and by the store for reads. Text that does not fit its buffer
 * is refused with PL_EINVAL. All text is valid UTF-8 (pl_text_check()).
 * Names (references, people) are one line without leading or trailing
 * spaces or control characters; free text (notes, descriptions, reasons)
 * may hold line breaks and tabs but no other control character; dates are
 * real calendar dates written YYYY-MM-DD.
 *
 * Keys. An airframe's serial and a site's code are its identity, and keep
 * to a key alphabet (pl_key_check()): 1 to PL_KEY_MAX ASCII letters,
 * digits, '-', '_', '.' and '/', starting with a letter or a digit; no
 * spaces, nothing else. A look-alike of one of these (U+2010 HYPHEN for
 * '-', a Cyrillic 'А' for 'A', a no-break space) is refused by name. Keys
 * are compared without regard to case: "cr7-0107" cannot be registered
 * beside "CR7-0107", and a look-up by "cr7-0107" finds "CR7-0107"; the key
 * keeps the spelling it was registered with, which every output shows. (A
 * store written before this rule may hold two keys that differ only in
 * case: a look-up then takes the one spelt exactly as given, and refuses
 * one spelt like neither as ambiguous.) A writing call on a store opened with
 * PL_STORE_READONLY returns PL_EDB. Numbers that are unknown are NaN (doubles) or
 * -1 (counts). Listing calls hand each record to a callback; the record is
 * borrowed for the callback's duration only. A callback returns 0 to go on
 * or non-zero to stop the listing (which then returns PL_OK).
 *
 * Each record's columns are described once inside the library; its JSON
 * form and its canonical byte encoding (what the hash chain will cover)
 * are in plyledger/store_row.h, the models built from several records (a
 * site's history, a summary) in plyledger/history.h.
 */
#ifndef PLYLEDGER_STORE_H
#define PLYLEDGER_STORE_H

#include "plyledger/common.h"
#include "plyledger/map.h"
#include "plyledger/schema_version.h" /* PL_STORE_SCHEMA_VERSION */

#ifdef __cplusplus
extern "C" {
#endif

/** PRAGMA application_id of a plyledger store: "PlyL". */
#define PL_STORE_APPLICATION_ID 0x506c794c

#define PL_NAME_SIZE 64   /**< serials, codes, names, references */
#define PL_TEXT_SIZE 256  /**< descriptions, notes */
#define PL_DATE_SIZE 32   /**< ISO 8601 dates and timestamps */
#define PL_WORD_SIZE 24   /**< kinds, levels, revisions, versions */

typedef int64_t pl_id;
typedef struct pl_store pl_store;

/** pl_store_open() flags. */
enum {
    PL_STORE_READONLY = 1 /**< open without writing (no migration; an older
                               schema is refused with PL_EVERSION) */
};

/* ---- life ---------------------------------------------------------------- */

/**
 * Create a new, empty store at `path` (WAL journal, foreign keys on, busy
 * timeout 5 s). `path` must not exist.
 * @param[out] out  close with pl_store_close()
 * @return PL_OK, PL_EEXISTS, PL_EIO, PL_EDB, PL_ENOMEM.
 */
PL_EXPORT int pl_store_create(pl_store **out, const char *path, pl_err *err);

/**
 * Open an existing store and migrate it forward to PL_STORE_SCHEMA_VERSION.
 * @param[out] out  close with pl_store_close()
 * @return PL_OK, PL_ENOTFOUND (no such file, or not a regular file),
 *         PL_ENOTSTORE (not SQLite, an empty database, or another
 *         application's database), PL_EVERSION (newer schema, or an older one
 *         with PL_STORE_READONLY), PL_EIO (cannot be opened or read), PL_EDB,
 *         PL_ENOMEM.
 */
PL_EXPORT int pl_store_open(pl_store **out, const char *path, unsigned flags, pl_err *err);

/**
 * Set the date the store takes for today (YYYY-MM-DD). No inspection,
 * date of manufacture or operator change may lie after it. The library
 * reads no clock for this: the caller says (the command line gives the
 * local date). NULL or "" forgets it; dates are then not checked against
 * today.
 * @return PL_OK, PL_EINVAL (not a calendar date).
 */
PL_EXPORT int pl_store_set_today(pl_store *store, const char *today, pl_err *err);

/** Close; rolls back an open transaction. NULL is accepted. */
PL_EXPORT void pl_store_close(pl_store *store);

/** Schema version of the open store. */
PL_EXPORT int pl_store_schema_version(const pl_store *store);

/** The schema version that brought the hash chain (plyledger/ledger.h). */
#define PL_STORE_LEDGER_SCHEMA 6

/** What opening the store migrated that a person should hear of (a store
 * written before the hash chain existed is chained when it is migrated),
 * one sentence; "" when nothing. Valid until the store is closed. */
PL_EXPORT const char *pl_store_migration_note(const pl_store *store);

/** How long a writer waits for another's write lock by default (seconds). */
#define PL_STORE_WAIT_DEFAULT_S 60.0
/** The longest wait pl_store_set_wait() takes (seconds): one hour. */
#define PL_STORE_WAIT_MAX_S 3600.0

/**
 * Set how long a write on this handle waits for another process's write
 * lock before it fails with PL_EBUSY (0: not at all).
 * @return PL_OK, PL_EINVAL (NaN, negative, above PL_STORE_WAIT_MAX_S).
 */
PL_EXPORT int pl_store_set_wait(pl_store *store, double seconds, pl_err *err);

/** The wait of pl_store_set_wait() (seconds). */
PL_EXPORT double pl_store_wait(const pl_store *store);

/** Begin a transaction spanning several calls (it takes the write lock,
 * waiting for another writer as pl_store_set_wait() says).
 * @return PL_OK, PL_EBUSY, PL_EDB. */
PL_EXPORT int pl_store_begin(pl_store *store, pl_err *err);
/** Commit it. @return PL_OK, PL_EBUSY, PL_EDB. */
PL_EXPORT int pl_store_commit(pl_store *store, pl_err *err);
/** Roll it back; harmless when none is open. */
PL_EXPORT void pl_store_rollback(pl_store *store);

/* ---- vocabularies ------------------------------------------------------- */

/** The closed vocabularies of the record. Each has one source, this
 * library; the schema's CHECK lists and triggers carry the same words (a
 * test holds them equal). Values are fixed; new vocabularies are appended. */
typedef enum pl_vocab {
    PL_VOCAB_INSPECTION_KIND = 0,     /**< baseline, scheduled, unscheduled, post-repair */
    PL_VOCAB_METHOD = 1,              /**< a site's inspection method */
    PL_VOCAB_REGISTRATION_STATUS = 2, /**< aligned, refused, manual */
    PL_VOCAB_COMPARISON_STATUS = 3,   /**< done, not-done */
    PL_VOCAB_INSPECTOR_LEVEL = 4,     /**< 1-limited, 1, 2, 3 (EN 4179, NAS 410, ISO 9712) */
    PL_VOCAB_INDICATION_ROLE = 5,     /**< baseline, current */
    PL_VOCAB_CHANGE_CLASS = 6,        /**< new, grown, stable, vanished, not-compared,
                                           changed-region (pl_change_kind_name()) */
    PL_VOCAB_CHANGE_MATCH = 7,        /**< none, overlap, distance, signal */
    PL_VOCAB_SIZING = 8,              /**< threshold, half-maximum (pl_sizing_name()) */
    PL_VOCAB_ROLE = 9,                /**< inspector, engineer, reviewer (plyledger/people.h) */
    PL_VOCAB_INTERPRETATION = 10,     /**< false, nonrelevant, relevant (ASTM E1316) */
    PL_VOCAB_DECISION = 11,           /**< accept, monitor, repair, refer-to-design-holder */
    PL_VOCAB_COUNT
} pl_vocab;

/** A vocabulary: its name (for messages) and its words, in a fixed order. */
typedef struct pl_vocabulary {
    const char *name;            /**< e.g. "inspection kind" */
    size_t count;
    const char *const *words;
} pl_vocabulary;

/** Number of inspection kinds (PL_VOCAB_INSPECTION_KIND). */
#define PL_INSPECTION_KIND_COUNT 4

/** The vocabulary `which` (static storage); NULL out of range. */
PL_EXPORT const pl_vocabulary *pl_vocabulary_get(pl_vocab which);

/** Position of `word` in vocabulary `which`, or -1. */
PL_EXPORT int pl_vocabulary_index(pl_vocab which, const char *word);

/** Check a word: PL_OK, or PL_EINVAL with "<name> '<word>' is not one of
 * <words>". */
PL_EXPORT int pl_vocabulary_check(pl_vocab which, const char *word, pl_err *err);

/**
 * The words of `which` as prose into `buf`: "a, b, c or d" (the last
 * joined by `last`, e.g. " or "; NULL gives ", "). Always terminated.
 * @return the length the whole text needs (as snprintf).
 */
PL_EXPORT size_t pl_vocabulary_text(char *buf, size_t cap, pl_vocab which, const char *last);

/* ---- keys and text -------------------------------------------------------- */

/** Longest key (airframe serial, site code), in characters. */
#define PL_KEY_MAX 32

/**
 * Check a key (see "Keys" above).
 * @param what  names it at the start of the message, e.g. "--serial"
 * @return PL_OK, PL_EINVAL naming what is wrong: "... ' F01 ' has spaces
 *         around it", "...: U+2010 HYPHEN is not allowed; use '-'", "...:
 *         byte 0xe2 at position 3 is not valid UTF-8", ...
 */
PL_EXPORT int pl_key_check(const char *key, const char *what, pl_err *err);

/** pl_text_check() flags. */
enum {
    PL_TEXT_LINES = 1  /**< free text: line feeds, carriage returns and tabs allowed */
};

/**
 * Check that text can be stored: valid UTF-8 (RFC 3629), and no control
 * character (C0, DEL, C1) but, with PL_TEXT_LINES, tab, line feed and
 * carriage return.
 * @param what  names it at the start of the message
 * @return PL_OK, PL_EINVAL ("<what>: byte 0xff at position 2 is not valid
 *         UTF-8", "<what>: contains a control character (U+0007)").
 */
PL_EXPORT int pl_text_check(const char *text, unsigned flags, const char *what, pl_err *err);

/* ---- bounds of numbers ---------------------------------------------------- */

/** The quantities whose numbers the record bounds. Each has one range,
 * here, used by every way in (site plans, sidecars, the command line) and
 * by the store itself. Values are fixed; new bounds are appended. */
typedef enum pl_bound {
    PL_BOUND_PITCH = 0,       /**< map pitch, mm per pixel */
    PL_BOUND_THICKNESS = 1,   /**< a site's nominal thickness, mm */
    PL_BOUND_DIFFUSIVITY = 2, /**< through-thickness thermal diffusivity, mm^2/s */
    PL_BOUND_HOURS = 3,       /**< aircraft flight hours at an inspection */
    PL_BOUND_CYCLES = 4,      /**< aircraft flight cycles at an inspection (whole) */
    PL_BOUND_COORDINATE = 5,  /**< a part coordinate: a map frame's origin, in its unit */
    PL_BOUND_MAP_SIDE = 6,    /**< a map's width or height, pixels (whole) */
    PL_BOUND_COUNT
} pl_bound;

/** One bound: the plausible range of a number, inclusive. */
typedef struct pl_bound_info {
    const char *name;    /**< what it is, for messages: "flight cycles" */
    const char *unit;    /**< "mm", "" for a count */
    double min, max;     /**< the range, both ends allowed */
    int whole;           /**< 1: whole numbers only */
    const char *reason;  /**< why the range is this (README lists them) */
} pl_bound_info;

/** The bound `which` (static storage); NULL out of range. */
PL_EXPORT const pl_bound_info *pl_bound_get(pl_bound which);

/**
 * Check a number against its bound: finite, whole when the bound says so,
 * inside [min, max].
 * @param what  names the value at the start of the message (a file and
 *              field, an option), e.g. "plan.csv line 4: column pitch_mm"
 * @return PL_OK, PL_EINVAL (not finite, not whole), PL_ERANGE ("<what>:
 *         1e+30 is outside the plausible flight cycles, 0 to 1000000").
 */
PL_EXPORT int pl_bound_check(pl_bound which, double value, const char *what, pl_err *err);

/* ---- airframes ------------------------------------------------------------ */

typedef struct pl_airframe {
    pl_id id;                            /**< (read) row of this version */
    pl_id key;                           /**< (read) stable identity */
    char serial[PL_NAME_SIZE];           /**< manufacturer serial number; required */
    char aircraft_type[PL_NAME_SIZE];    /**< type designation; required */
    char manufactured[PL_DATE_SIZE];     /**< date of manufacture, YYYY-MM-DD; optional */
    char operator_name[PL_TEXT_SIZE];    /**< current operator (on add: the first) */
    char operator_since[PL_DATE_SIZE];   /**< date the current operator took it over */
    char notes[PL_TEXT_SIZE];
    char recorded_at[PL_DATE_SIZE];      /**< (read) UTC timestamp of this version */
} pl_airframe;

/**
 * Register an airframe; when operator_name is set it starts the operator
 * history from operator_since (or the date of manufacture; one of the two
 * is then required, and operator_since may not precede manufacture).
 * Neither date may lie after today (pl_store_set_today()).
 * @param[out] id  the new row (may be NULL)
 * @return PL_OK, PL_EINVAL (missing serial or type, bad date, operator
 *         without a date), PL_EEXISTS (serial already registered), PL_EDB.
 */
PL_EXPORT int pl_store_add_airframe(pl_store *store, const pl_airframe *af, pl_id *id, pl_err *err);

/**
 * Current version of the airframe with this serial into [out] af.
 * @return PL_OK, PL_ENOTFOUND, PL_EDB.
 */
PL_EXPORT int pl_store_get_airframe(pl_store *store, const char *serial, pl_airframe *af, pl_err *err);

/**
 * Record that `operator_name` operates the airframe from `since`
 * (YYYY-MM-DD). Dates must not go backwards: `since` may not precede the
 * current operator's start or the date of manufacture, nor lie after today.
 * @return PL_OK, PL_EINVAL, PL_ENOTFOUND, PL_EDB.
 */
PL_EXPORT int pl_store_add_operator(pl_store *store, const char *serial, const char *operator_name,
                                    const char *since, pl_err *err);

/** One entry of an airframe's operator history, as read. */
typedef struct pl_operator {
    pl_id id;                            /**< (read) */
    pl_id airframe_key;                  /**< (read) the airframe's key */
    char operator_name[PL_TEXT_SIZE];
    char since[PL_DATE_SIZE];            /**< YYYY-MM-DD */
    char recorded_at[PL_DATE_SIZE];      /**< (read) */
} pl_operator;

typedef int (*pl_operator_fn)(void *ud, const char *operator_name, const char *since,
                              const char *recorded_at);
/** The operator history of an airframe, oldest first (by since, then as
 * recorded). @return PL_OK, PL_ENOTFOUND, PL_EDB. */
PL_EXPORT int pl_store_list_operators(pl_store *store, const char *serial, pl_operator_fn fn,
                                      void *ud, pl_err *err);

/** Filter for pl_store_list_airframes(); NULL or "" fields match all. */
typedef struct pl_airframe_filter {
    const char *aircraft_type;
    const char *operator_name;
} pl_airframe_filter;

typedef int (*pl_airframe_fn)(void *ud, const pl_airframe *af);
/** Current airframes ordered by serial. `filter` may be NULL. */
PL_EXPORT int pl_store_list_airframes(pl_store *store, const pl_airframe_filter *filter,
                                      pl_airframe_fn fn, void *ud, pl_err *err);

/**
 * Correct an airframe: `af` holds the full corrected record (serial names
 * the airframe and cannot itself change). `reason` is required. The
 * correction must change something, and a corrected date of manufacture may
 * not lie after today, after any inspection of the airframe or after the
 * start of its operator history.
 * operator_name and operator_since are ignored: the operator history only
 * grows, through pl_store_add_operator().
 * @return PL_OK, PL_EINVAL, PL_ENOTFOUND, PL_EDB.
 */
PL_EXPORT int pl_store_correct_airframe(pl_store *store, const pl_airframe *af, const char *reason,
                                        pl_id *id, pl_err *err);

/* ---- sites --------------------------------------------------------------- */

typedef struct pl_site {
    pl_id id;                          /**< (read) row of this version */
    pl_id key;                         /**< (read) stable identity */
    char airframe_serial[PL_NAME_SIZE];/**< the airframe; required */
    char code[PL_NAME_SIZE];           /**< site code, unique per airframe; required */
    char zone[PL_NAME_SIZE];           /**< zone of the airframe */
    char description[PL_TEXT_SIZE];
    char frame[PL_NAME_SIZE];          /**< structural frame, e.g. "FR 41" */
    char stringer[PL_NAME_SIZE];       /**< stringer, e.g. "STR 12L" */
    char method[PL_NAME_SIZE];         /**< PL_VOCAB_METHOD; required */
    char material[PL_NAME_SIZE];       /**< laminate or material name */
    double thickness_mm;               /**< nominal thickness; NaN unknown */
    double diffusivity_mm2_s;          /**< through-thickness thermal diffusivity; NaN unknown */
    pl_placement map_frame;            /**< where the site's maps lie on the part */
    uint32_t width_px;                 /**< expected map width; 0 any */
    uint32_t height_px;                /**< expected map height; 0 any */
    double pitch_u;                    /**< expected mm per pixel along u; > 0 */
    double pitch_v;                    /**< expected mm per pixel along v; > 0 */
    char recorded_at[PL_DATE_SIZE];    /**< (read) */
} pl_site;

/**
 * Check a site record: code, method and placement valid, pitches finite and
 * positive, thickness and diffusivity NaN or positive, expected size at most
 * PL_MAP_MAX_SIDE. airframe_serial may be empty (a site of a plan).
 * @return PL_OK, PL_EINVAL.
 */
PL_EXPORT int pl_site_check(const pl_site *site, pl_err *err);

/** Check an inspection method name (PL_VOCAB_METHOD). @return PL_OK, PL_EINVAL. */
PL_EXPORT int pl_method_check(const char *method, pl_err *err);

/**
 * Add a site to an airframe.
 * @return PL_OK, PL_EINVAL, PL_ENOTFOUND (airframe), PL_EEXISTS (code), PL_EDB.
 */
PL_EXPORT int pl_store_add_site(pl_store *store, const pl_site *site, pl_id *id, pl_err *err);

/** Current version of a site into [out] site. @return PL_OK, PL_ENOTFOUND, PL_EDB. */
PL_EXPORT int pl_store_get_site(pl_store *store, const char *serial, const char *code,
                                pl_site *site, pl_err *err);

/** Correct a site (airframe_serial and code name it); it must change
 * something ("nothing to correct"). @return as add. */
PL_EXPORT int pl_store_correct_site(pl_store *store, const pl_site *site, const char *reason,
                                    pl_id *id, pl_err *err);

typedef struct pl_site_filter {
    const char *airframe_serial;
    const char *zone;
    const char *method;
} pl_site_filter;

typedef int (*pl_site_fn)(void *ud, const pl_site *site);
/** Current sites ordered by airframe serial, then code. */
PL_EXPORT int pl_store_list_sites(pl_store *store, const pl_site_filter *filter, pl_site_fn fn,
                                  void *ud, pl_err *err);

/* ---- inspections ---------------------------------------------------------- */

typedef struct pl_inspection {
    pl_id id;                             /**< (read) row of this version */
    pl_id key;                            /**< (read) stable identity */
    char airframe_serial[PL_NAME_SIZE];   /**< required */
    char site_code[PL_NAME_SIZE];         /**< required */
    char kind[PL_WORD_SIZE];              /**< PL_VOCAB_INSPECTION_KIND */
    char task_ref[PL_NAME_SIZE];          /**< maintenance task or check reference */
    char performed_on[PL_DATE_SIZE];      /**< YYYY-MM-DD; required */
    double aircraft_hours;                /**< flight hours at inspection; NaN unknown */
    int64_t aircraft_cycles;              /**< flight cycles; -1 unknown */
    char procedure[PL_NAME_SIZE];         /**< approved procedure reference; required */
    char procedure_rev[PL_WORD_SIZE];     /**< its revision; required */
    char equipment[PL_TEXT_SIZE];         /**< equipment used; required */
    char calibration_ref[PL_TEXT_SIZE];   /**< calibration / reference standard; required */
    char inspector[PL_NAME_SIZE];         /**< who performed it; required */
    char inspector_level[PL_WORD_SIZE];   /**< PL_VOCAB_INSPECTOR_LEVEL; required */
    char software_version[PL_WORD_SIZE];  /**< empty: this library's version */
    char notes[PL_TEXT_SIZE];
    char *parameters_json;                /**< processing parameters (JSON object) or NULL;
                                               on read owned by the record: see
                                               pl_inspection_clear() */
    char recorded_at[PL_DATE_SIZE];       /**< (read) */
    int simulated;                        /**< 1: the data come from a simulation, 0: from
                                               the part; (read) -1: recorded before the
                                               store kept it (schema 2 and older) */
    char hours_reason[PL_TEXT_SIZE];      /**< why hours or cycles go against the airframe's
                                               other inspections (a documented records
                                               correction); empty when they are in order */
} pl_inspection;

/** Free what a read put in `insp` (parameters_json) and zero it. */
PL_EXPORT void pl_inspection_clear(pl_inspection *insp);

/** Check an inspection kind word (PL_VOCAB_INSPECTION_KIND). @return PL_OK, PL_EINVAL. */
PL_EXPORT int pl_inspection_kind_check(const char *kind, pl_err *err);

/**
 * Record an inspection of a site. parameters_json, when given, must parse as
 * a JSON object; simulated must be 0 or 1. A site has at most one baseline
 * that is not superseded. Chronology (every message says which record it
 * conflicts with):
 *  - performed_on lies neither before the airframe's date of manufacture
 *    nor after today (pl_store_set_today(); unchecked when none is set);
 *  - a scheduled inspection needs the site's baseline ("record the
 *    baseline first") and, when it is real, a baseline that is not
 *    simulated; unscheduled and post-repair inspections need none (damage
 *    is found, and repaired, where no baseline was recorded);
 *  - no inspection of the site comes before its baseline (a baseline may
 *    not be dated after the site's other inspections either);
 *  - flight hours and cycles do not go back: not fewer than those of an
 *    earlier inspection of the airframe (any site), not more than a later
 *    one's, unless hours_reason says why (a documented correction of the
 *    aircraft's records; it is recorded with the inspection, and such an
 *    inspection is no reference for the order of others). Inspections of
 *    the same day are not ordered.
 * @return PL_OK, PL_EINVAL, PL_ENOTFOUND (airframe or site), PL_EEXISTS
 *         (a second baseline), PL_EDB.
 */
PL_EXPORT int pl_store_add_inspection(pl_store *store, const pl_inspection *insp, pl_id *id,
                                      pl_err *err);

/**
 * Current version of the inspection with key `key` into [out] insp (free
 * with pl_inspection_clear()). @return PL_OK, PL_ENOTFOUND, PL_EDB.
 */
PL_EXPORT int pl_store_get_inspection(pl_store *store, pl_id key, pl_inspection *insp,
                                      pl_err *err);

/**
 * Correct the inspection whose key is `key`; `insp` is the full corrected
 * record (its airframe and site must stay the same). `reason` is required.
 * The correction must change something ("nothing to correct"), and the
 * record must stand the chronology of pl_store_add_inspection() after it:
 * the site's only baseline cannot become another kind while scheduled
 * inspections rest on it (nor become scheduled itself), a baseline cannot
 * move after the site's other inspections. simulated may stay -1 only on a
 * record that was -1.
 * @return PL_OK, PL_EINVAL, PL_ENOTFOUND, PL_EEXISTS (it would become a
 *         second baseline), PL_EDB.
 */
PL_EXPORT int pl_store_correct_inspection(pl_store *store, pl_id key, const pl_inspection *insp,
                                          const char *reason, pl_id *id, pl_err *err);

typedef struct pl_inspection_filter {
    const char *airframe_serial;
    const char *site_code;
    const char *kind;
    const char *from;  /**< performed_on >= from */
    const char *to;    /**< performed_on <= to */
} pl_inspection_filter;

typedef int (*pl_inspection_fn)(void *ud, const pl_inspection *insp);
/** Current inspections, oldest first (performed_on, then key).
 * @return PL_OK, PL_EINVAL (a filter date or kind that is not valid), PL_EDB. */
PL_EXPORT int pl_store_list_inspections(pl_store *store, const pl_inspection_filter *filter,
                                        pl_inspection_fn fn, void *ud, pl_err *err);

/* ---- maps ------------------------------------------------------------------ */

/** What the store knows about a stored map besides its data. */
typedef struct pl_map_record {
    pl_id id;                             /**< (read) */
    pl_id inspection_key;                 /**< the inspection it belongs to */
    char source[PL_TEXT_SIZE];            /**< file it came from (only its base name
                                               is stored); optional */
    char origin[PL_NAME_SIZE];            /**< how it was made: "import-png",
                                               "import-npy", "import-csv", "reduce" ...;
                                               required */
    char software_version[PL_WORD_SIZE];  /**< empty: this library's version */
    char *parameters_json;                /**< parameters of its making, or NULL */
    uint32_t width, height, nchannels;    /**< (read) */
    double pitch_u, pitch_v;              /**< (read) */
    pl_placement placement;               /**< (read) */
    const pl_channel *channels;           /**< (read) nchannels, borrowed */
    char sha256[65];                      /**< (read) digest of the decoded content */
    size_t stored_bytes;                  /**< (read) compressed size */
    char recorded_at[PL_DATE_SIZE];       /**< (read) */
} pl_map_record;

/**
 * Check a map against what its site expects: the site's size (when set),
 * its pitches within 0.1 %.
 * @return PL_OK, PL_ENOMATCH naming what differs.
 */
PL_EXPORT int pl_site_check_map(const pl_site *site, const pl_map *map, pl_err *err);

/**
 * Store a map for an inspection. The map's size must equal the site's
 * expected size (when set), its pitches the site's within 0.1 %, every
 * channel must have a valid quantity and unit (pl_quantity_check()), its
 * placement must pass pl_placement_check() and is stored as the map's own,
 * and no other map of the inspection may have the same content (SHA-256 of
 * the decoded data). Only inspection_key, source, origin, software_version
 * and parameters_json are read from `rec`. The map is compressed and
 * hashed inside the call; pl_prepared_map_new() does that ahead of a
 * transaction instead.
 * @return PL_OK, PL_EINVAL, PL_ENOTFOUND (inspection), PL_ENOMATCH (size or
 *         pitch differs from the site's), PL_EEXISTS (same content),
 *         PL_EBUSY, PL_EDB.
 */
PL_EXPORT int pl_store_add_map(pl_store *store, const pl_map_record *rec, const pl_map *map,
                               pl_id *id, pl_err *err);

/** A map made ready for the store: checked, compressed and hashed, without
 * its float data (see "Several writers" above). */
typedef struct pl_prepared_map pl_prepared_map;

/**
 * Check `map` as pl_store_add_map() does (all but what needs its site) and
 * encode it for the store; the map itself is not kept.
 * @param[out] out  free with pl_prepared_map_free()
 * @return PL_OK, PL_EINVAL, PL_ENOMEM.
 */
PL_EXPORT int pl_prepared_map_new(pl_prepared_map **out, const pl_map *map, pl_err *err);

/** Release a prepared map; NULL is accepted. */
PL_EXPORT void pl_prepared_map_free(pl_prepared_map *prepared);

/** The geometry and channels of a prepared map (data NULL); borrowed for
 * the prepared map's life. */
PL_EXPORT const pl_map *pl_prepared_map_header(const pl_prepared_map *prepared);

/**
 * pl_store_add_map() for a prepared map: the same checks against the
 * inspection's site and the other maps, then the insert.
 * @return as pl_store_add_map().
 */
PL_EXPORT int pl_store_add_prepared_map(pl_store *store, const pl_map_record *rec,
                                        const pl_prepared_map *prepared, pl_id *id,
                                        pl_err *err);

/**
 * Load map `id` with its data, checking the stored digest.
 * @param[out] map  free with pl_map_free()
 * @param[out] rec  when not NULL: its record; parameters_json is owned by
 *                  the caller (free()), channels points into `map`.
 * @return PL_OK, PL_ENOTFOUND, PL_ENOMATCH (digest mismatch), PL_EFORMAT, PL_EDB.
 */
PL_EXPORT int pl_store_load_map(pl_store *store, pl_id id, pl_map **map, pl_map_record *rec,
                                pl_err *err);

typedef int (*pl_map_fn)(void *ud, const pl_map_record *rec);
/** Maps of one inspection (by key), in the order they were recorded. */
PL_EXPORT int pl_store_list_maps(pl_store *store, pl_id inspection_key, pl_map_fn fn, void *ud,
                                 pl_err *err);

/* ---- registrations ---------------------------------------------------------- */

/** One alignment of a current map onto a baseline map of the same site. */
typedef struct pl_registration_record {
    pl_id id;                             /**< (read) */
    pl_id baseline_map_id;                /**< the map aligned to; required */
    pl_id current_map_id;                 /**< the map aligned; required */
    char method[PL_NAME_SIZE];            /**< how, e.g. "phase-correlation"; required */
    char status[PL_WORD_SIZE];            /**< PL_VOCAB_REGISTRATION_STATUS */
    char refusal[PL_TEXT_SIZE];           /**< why, when refused (required then) */
    double shift_col_px, shift_row_px;    /**< transform shift, baseline pixels */
    double shift_u_mm, shift_v_mm;        /**< the same in mm along u, v */
    double rotation_deg;                  /**< transform rotation */
    double scale;                         /**< transform scale */
    double ncc;                           /**< correlation over the overlap; NaN unknown */
    double peak_sidelobe;                 /**< peak-to-sidelobe ratio; NaN unknown */
    double overlap_fraction;              /**< of the baseline grid */
    double overlap_mm2;                   /**< overlap area */
    char supplied_by[PL_NAME_SIZE];       /**< manual: who gave the transform (required) */
    char supplied_reason[PL_TEXT_SIZE];   /**< manual: why (required) */
    char *parameters_json;                /**< options used (JSON object) or NULL; on read
                                               valid for the callback's duration */
    char software_version[PL_WORD_SIZE];  /**< empty: this library's version */
    char recorded_at[PL_DATE_SIZE];       /**< (read) */
} pl_registration_record;

/**
 * Record a registration. Both maps must exist and belong to inspections of
 * the same site, the baseline map to a baseline inspection or to one
 * earlier than the current map's (by date, then as recorded);
 * "aligned" and "manual" need the transform (finite shift, rotation, scale
 * > 0) and the overlap; "refused" needs the refusal; "manual" needs who and
 * why. A map of a simulated inspection is never the baseline of a map of a
 * real one.
 * @return PL_OK, PL_EINVAL (including a baseline map that is not earlier),
 *         PL_ENOTFOUND (a map), PL_ENOMATCH (maps of different sites), PL_EDB.
 */
PL_EXPORT int pl_store_add_registration(pl_store *store, const pl_registration_record *reg,
                                        pl_id *id, pl_err *err);

typedef int (*pl_registration_fn)(void *ud, const pl_registration_record *reg);
/** Registrations whose current map is `current_map_id` (0: all), oldest first. */
PL_EXPORT int pl_store_list_registrations(pl_store *store, pl_id current_map_id,
                                          pl_registration_fn fn, void *ud, pl_err *err);

/* ---- comparisons ------------------------------------------------------------- */

/** A comparison of a site's current inspection with its baseline. */
typedef struct pl_comparison_record {
    pl_id id;                             /**< (read) */
    pl_id baseline_inspection;            /**< key; required */
    pl_id current_inspection;             /**< key; required, same site */
    pl_id registration_id;                /**< the registration it rests on, or 0 */
    pl_id criteria_id;                    /**< the criteria revision applied, or 0 */
    char status[PL_WORD_SIZE];            /**< PL_VOCAB_COMPARISON_STATUS */
    char not_done_reason[PL_TEXT_SIZE];   /**< why, when not done (required then) */
    double uncompared_mm2;                /**< area that could not be compared; NaN unknown */
    double uncompared_fraction;           /**< the same as a fraction of the site */
    char *parameters_json;                /**< or NULL; on read valid for the callback */
    char software_version[PL_WORD_SIZE];  /**< empty: this library's version */
    char recorded_at[PL_DATE_SIZE];       /**< (read) */
} pl_comparison_record;

/**
 * Record a comparison (its classified changes come with later work). A
 * simulated inspection is never the baseline of a real one.
 * @return PL_OK, PL_EINVAL, PL_ENOTFOUND, PL_ENOMATCH (inspections of
 *         different sites), PL_EDB.
 */
PL_EXPORT int pl_store_add_comparison(pl_store *store, const pl_comparison_record *cmp, pl_id *id,
                                      pl_err *err);

typedef int (*pl_comparison_fn)(void *ud, const pl_comparison_record *cmp);
/** Comparisons whose current inspection is `current_inspection` (0: all), oldest first. */
PL_EXPORT int pl_store_list_comparisons(pl_store *store, pl_id current_inspection,
                                        pl_comparison_fn fn, void *ud, pl_err *err);

/* ---- indications and changes ---------------------------------------------- */

/** One indication found by a comparison (schema/0005_indications.sql). */
typedef struct pl_indication_record {
    pl_id id;                             /**< (read) */
    pl_id comparison_id;                  /**< the comparison that found it; required */
    char role[PL_WORD_SIZE];              /**< PL_VOCAB_INDICATION_ROLE: "baseline" (the
                                               comparison's reference, own grid) or
                                               "current" (on the reference's grid) */
    pl_id map_id;                         /**< the map of that side's inspection */
    int64_t channel;                      /**< channel examined, >= 0 */
    int64_t label;                        /**< its number in that side's detection, >= 1 */
    int64_t area_px;                      /**< threshold sizing: pixels */
    double area_mm2;                      /**< and mm^2 */
    double equivalent_diameter_mm;        /**< sqrt(4 area / pi) */
    int64_t area_halfmax_px;              /**< half-maximum sizing: pixels */
    double area_halfmax_mm2;
    double equivalent_diameter_halfmax_mm;
    double centroid_col, centroid_row;    /**< pixels of the grid its role names */
    double part_x, part_y, part_z;        /**< centroid on the airframe; NaN: no frame */
    int64_t bbox_col0, bbox_row0, bbox_col1, bbox_row1; /**< inclusive */
    double major_axis_mm, minor_axis_mm;  /**< principal axes' lengths; NaN unknown */
    double orientation_deg;               /**< major axis from u toward v, (-90, 90] */
    double peak_contrast;                 /**< channel units, toward a defect */
    double peak_snr;                      /**< over the noise; NaN without one */
    int64_t peak_col, peak_row;
    double mean_contrast;
    double depth_mm;                      /**< median of the depth channel inside; NaN */
    double perimeter_mm;                  /**< NaN without a pitch */
    char *outline;                        /**< chain code (plyledger/detect.h) or NULL */
    char recorded_at[PL_DATE_SIZE];       /**< (read) */
} pl_indication_record;

/** Record an indication of a done comparison; its map must be the map of the
 * comparison's inspection on its side.
 * @return PL_OK, PL_EINVAL, PL_EEXISTS (the label is taken), PL_EDB. */
PL_EXPORT int pl_store_add_indication(pl_store *store, const pl_indication_record *ind,
                                      pl_id *id, pl_err *err);

typedef int (*pl_indication_fn)(void *ud, const pl_indication_record *ind);
/** Indications of comparison `comparison_id` (0: all), baseline side first, by label. */
PL_EXPORT int pl_store_list_indications(pl_store *store, pl_id comparison_id,
                                        pl_indication_fn fn, void *ud, pl_err *err);

/** One classified change of a comparison (plyledger/change.h's pl_change). */
typedef struct pl_change_record {
    pl_id id;                             /**< (read) */
    pl_id comparison_id;                  /**< required, a done comparison */
    int64_t number;                       /**< its number in the comparison, >= 1 */
    char class_[PL_WORD_SIZE];            /**< PL_VOCAB_CHANGE_CLASS */
    char matched_by[PL_WORD_SIZE];        /**< PL_VOCAB_CHANGE_MATCH */
    char *baseline_labels;                /**< JSON array of member labels ("[]": none) */
    char *current_labels;
    char sizing[PL_WORD_SIZE];            /**< PL_VOCAB_SIZING: the rule the limits use */
    double area_baseline_mm2, area_current_mm2;  /**< threshold sizing; NaN: none */
    double area_delta_mm2, area_delta_percent;
    double area_baseline_halfmax_mm2, area_current_halfmax_mm2, area_delta_halfmax_mm2;
    double contrast_baseline, contrast_current, contrast_delta;
    double centroid_col, centroid_row;    /**< on the reference's grid */
    double distance_px;                   /**< between the two sides' centroids */
    double area_limit_mm2, area_measured_mm2, area_margin_mm2; /**< margin = limit - measured */
    int area_exceeds;                     /**< 0 or 1 */
    double contrast_limit, contrast_margin;
    int contrast_exceeds;
    int reportable;                       /**< 0: below the minimum reportable area */
    int exceeds;                          /**< a finding against the limits */
    int64_t region_pixels;                /**< a changed region: its pixels; -1 none */
    int64_t touches;                      /**< a changed region: the number of the change
                                               it borders; -1 none */
    char recorded_at[PL_DATE_SIZE];       /**< (read) */
} pl_change_record;

/** Record a change of a done comparison.
 * @return PL_OK, PL_EINVAL, PL_EEXISTS (the number is taken), PL_EDB. */
PL_EXPORT int pl_store_add_change(pl_store *store, const pl_change_record *chg, pl_id *id,
                                  pl_err *err);

typedef int (*pl_change_fn)(void *ud, const pl_change_record *chg);
/** Changes of comparison `comparison_id` (0: all), by number. */
PL_EXPORT int pl_store_list_changes(pl_store *store, pl_id comparison_id, pl_change_fn fn,
                                    void *ud, pl_err *err);

/* ---- summary ------------------------------------------------------------- */

typedef struct pl_store_summary {
    int schema_version;
    char store_id[40];                 /**< random id given at creation */
    char created_at[PL_DATE_SIZE];
    char created_by[PL_WORD_SIZE];     /**< plyledger version that created it */
    int64_t airframes, sites, inspections, maps;
    int64_t inspections_by_kind[PL_INSPECTION_KIND_COUNT]; /**< in PL_VOCAB_INSPECTION_KIND order */
    int64_t corrections;               /**< rows that supersede another */
    int64_t indications, comparisons, dispositions, ledger_links;
    int64_t registrations;             /**< registrations recorded (any status) */
    int64_t map_bytes;                 /**< compressed map data */
    char first_inspection[PL_DATE_SIZE];
    char last_inspection[PL_DATE_SIZE];
    int64_t simulated_inspections;     /**< current inspections of simulated data */
    int64_t unknown_inspections;       /**< current inspections recorded before the store
                                            said whether they were simulated (schema 2) */
    char seal_key[33];                 /**< the fingerprint of the store's seal key
                                            (plyledger/ledger.h), "" when not sealed */
    int64_t people;                    /**< people in the register, current versions */
    int64_t received;                  /**< hand-over packages received */
} pl_store_summary;

/** Counts and dates of the whole store into [out] sum. @return PL_OK, PL_EDB. */
PL_EXPORT int pl_store_summarize(pl_store *store, pl_store_summary *sum, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
