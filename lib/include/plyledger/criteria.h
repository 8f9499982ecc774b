/*
 * plyledger/criteria.h - written criteria for indication growth: the sets
 * of limits a comparison of a site with its baseline applies, read from a
 * JSON file, checked, stored in the record revision by revision, and
 * resolved to the numeric limits of one site, method and quantity.
 *
 * A criteria set is a JSON object of plyledger's own format (README.md,
 * "Criteria sets", shows a whole file):
 *
 *   format          "plyledger-criteria" (required)
 *   format_version  1 (required)
 *   name            the set's name: one line, 1-63 characters (required)
 *   revision        its revision: one line, 1-23 characters (required)
 *   source_document the document the limits come from, 1-255 characters
 *                   (required), e.g. a structural repair manual chapter
 *   example_values  true or false (required): true marks invented example
 *                   values, not approved data; every output of such a set
 *                   carries PL_CRITERIA_EXAMPLE_MARKING
 *   repeatability   { "area_mm2": A, "basis": "..." } (required): the
 *                   area repeatability of the measurement the limits rest
 *                   on (mm^2, > 0), and optionally what establishes it
 *                   (text up to 255 characters); a rule may state its own
 *   note            free text up to 255 characters (optional)
 *   rules           1 to PL_CRITERIA_MAX_RULES rule objects (required)
 *
 * A rule:
 *
 *   name                     unique in the set, 1-63 characters (required)
 *   kind                     "growth-limit" or "no-growth" (required)
 *   method                   a site method (PL_VOCAB_METHOD) (required)
 *   quantity                 a vocabulary quantity produced by that method
 *                            (pl_quantity_fits_method()) (required)
 *   site                     a glob over site codes (optional)
 *   zone                     a glob over site zones (optional; not with
 *                            site; neither: every site)
 *   contrast_unit            the unit of every contrast value of the rule,
 *                            one of the quantity's units (required)
 *   repeatability_contrast   the contrast repeatability (> 0, in
 *                            contrast_unit) (required)
 *   repeatability_area_mm2   the rule's own area repeatability (> 0;
 *                            optional, default the set's)
 *   min_reportable_area_mm2  indications smaller than this are not
 *                            reported (>= 0) (required)
 *   new_reportable_area_mm2  a new indication (none at the baseline) of
 *                            this area or larger is a finding (>= the
 *                            minimum reportable area) (required)
 *   area_growth_mm2          growth-limit: area increase beyond which an
 *                            indication has grown (>= the area repeatability)
 *   area_growth_percent      growth-limit: the same as a percentage of the
 *                            baseline area (> 0, <= 1000)
 *   contrast_growth          growth-limit: increase of the peak contrast, in
 *                            the direction the quantity moves over a defect
 *                            (pl_quantity_polarity()), beyond which an
 *                            indication has grown (>= the contrast
 *                            repeatability; in contrast_unit)
 *   vanished                 "report" or "investigate" (required): what a
 *                            baseline indication not found again is
 *   note                     free text up to 255 characters (optional)
 *
 * A growth-limit rule gives at least one of area_growth_mm2 and
 * area_growth_percent; an indication has grown when its growth exceeds any
 * limit given. A no-growth rule gives none of the three growth limits: any
 * growth beyond the stated repeatability (area or contrast) is a finding.
 * Composite structure is commonly certified on that basis: damage that does
 * not grow under repeated load (FAA AC 20-107B, Composite Aircraft
 * Structure; EASA AMC 20-29; MIL-HDBK-17-3F calls it the no-growth
 * approach), so a bonded joint's criteria rest on its measurement's
 * repeatability and on nothing wider.
 *
 * Globs: '*' matches any run of characters (none included), '?' exactly
 * one, every other character itself, without regard to ASCII case (as site
 * codes are compared). Nothing else is special; a pattern is 1-63
 * characters of one line.
 *
 * Which rule governs (pl_criteria_limits_for()): among the rules of the
 * same method and quantity whose pattern matches, a site pattern wins over
 * a zone pattern, which wins over a rule for every site; between two
 * patterns of the same kind the one with more literal characters (not '*'
 * or '?') wins, then the one with fewer '*'. Two matching rules still
 * equal are ambiguous: the look-up refuses, naming both. A site no rule
 * covers is refused too (PL_ENOTFOUND): it is never passed silently.
 *
 * Refusals. A file is refused, with one line naming the file, the field as
 * a JSON path (rules[2].area_growth_mm2) and what was expected, when it is
 * larger than PL_CRITERIA_MAX_BYTES, not UTF-8 or holds a NUL byte, not one
 * JSON object or has anything after it, repeats a key, holds an unknown
 * field (a typo is not silently lost), lacks a required one, has a value of
 * the wrong type, a word outside its vocabulary, a number that is not
 * finite, negative or beyond its bound (areas up to PL_CRITERIA_MAX_AREA_MM2,
 * 1 m^2; percentages up to PL_CRITERIA_MAX_PERCENT; contrasts up to
 * PL_CRITERIA_MAX_CONTRAST in their unit), limits that contradict each
 * other, no rules, or two rules of the same name or of the same method,
 * quantity and pattern.
 *
 * Storage. pl_store_add_criteria() records a set: its header fields and its
 * canonical JSON (every field in the order above, absent optional fields
 * left out, numbers as cJSON prints them), with the canonical text's
 * SHA-256. Revisions are append-only: a new revision of a name is a new
 * row; the same name and revision with other content is refused; the same
 * content again is a no-op that says so.
 *
 * pl_criteria_parse() and pl_criteria_load() allocate a pl_criteria;
 * pl_criteria_free() releases it. Records read from the store are released
 * with pl_criteria_record_clear().
 */
#ifndef PLYLEDGER_CRITERIA_H
#define PLYLEDGER_CRITERIA_H

#include "plyledger/common.h"
#include "plyledger/map.h"
#include "plyledger/store.h"

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif

/** The format tag and the version this library reads and writes. */
#define PL_CRITERIA_FORMAT "plyledger-criteria"
#define PL_CRITERIA_FORMAT_VERSION 1

/** The marking every output of an example-values set carries. */
#define PL_CRITERIA_EXAMPLE_MARKING "EXAMPLE VALUES, NOT APPROVED DATA"

/** Largest criteria file read (bytes): 1 MiB. */
#define PL_CRITERIA_MAX_BYTES (1024u * 1024u)
/** Most rules in one set. */
#define PL_CRITERIA_MAX_RULES 1000u
/** Largest area a criteria value may give (mm^2): 1 m^2, larger than any
 * inspection site. */
#define PL_CRITERIA_MAX_AREA_MM2 1e6
/** Largest percentage of area growth. */
#define PL_CRITERIA_MAX_PERCENT 1000.0
/** Largest contrast value, in its unit (a thermal contrast of 10 K is
 * already far beyond flash thermography's, a dB loss of 1e4 meaningless). */
#define PL_CRITERIA_MAX_CONTRAST 1e4

#define PL_CRITERIA_UNIT_SIZE 16  /**< a contrast unit, NUL included */

/** A rule's kind. Values are fixed. */
typedef enum pl_criteria_kind {
    PL_CRITERIA_GROWTH_LIMIT = 0, /**< "growth-limit": growth beyond stated limits */
    PL_CRITERIA_NO_GROWTH = 1,    /**< "no-growth": any growth beyond repeatability */
} pl_criteria_kind;

/** What a vanished indication (at the baseline, not found again) is. */
typedef enum pl_vanished_rule {
    PL_VANISHED_REPORT = 0,      /**< "report": listed as vanished */
    PL_VANISHED_INVESTIGATE = 1, /**< "investigate": a finding until registration,
                                      coverage and procedure are shown sound */
} pl_vanished_rule;

/** How a rule selects sites. */
typedef enum pl_criteria_scope {
    PL_CRITERIA_ANY_SITE = 0, /**< no pattern: every site */
    PL_CRITERIA_ZONE = 1,     /**< the pattern is over zones */
    PL_CRITERIA_SITE = 2,     /**< the pattern is over site codes */
} pl_criteria_scope;

/** One rule, as read. Numbers not given are NaN. */
typedef struct pl_criteria_rule {
    char name[PL_NAME_SIZE];
    pl_criteria_kind kind;
    char method[PL_NAME_SIZE];
    char quantity[PL_QUANTITY_SIZE];
    pl_criteria_scope scope;
    char pattern[PL_NAME_SIZE];              /**< "" for PL_CRITERIA_ANY_SITE */
    char contrast_unit[PL_CRITERIA_UNIT_SIZE];
    double repeatability_contrast;
    double repeatability_area_mm2;           /**< the rule's own; NaN: the set's */
    double min_reportable_area_mm2;
    double new_reportable_area_mm2;
    double area_growth_mm2;
    double area_growth_percent;
    double contrast_growth;
    pl_vanished_rule vanished;
    char note[PL_TEXT_SIZE];
} pl_criteria_rule;

/** A criteria set, as read and checked. */
typedef struct pl_criteria {
    char name[PL_NAME_SIZE];
    char revision[PL_WORD_SIZE];
    char source_document[PL_TEXT_SIZE];
    int example_values;                  /**< 1: example values, not approved data */
    double repeatability_area_mm2;
    char repeatability_basis[PL_TEXT_SIZE];
    char note[PL_TEXT_SIZE];
    size_t nrules;
    pl_criteria_rule *rules;             /**< nrules, owned */
    char *canonical_json;                /**< the canonical text, owned */
    char sha256[65];                     /**< of canonical_json, hex */
} pl_criteria;

/**
 * Read and check a criteria set from text.
 * @param[out] out  free with pl_criteria_free()
 * @param text      the file's bytes (need not be NUL terminated)
 * @param len       their number
 * @param label     names the input at the start of every message (a path)
 * @return PL_OK, PL_EFORMAT (too large, not UTF-8, not one JSON object,
 *         trailing bytes, repeated, unknown or missing fields, wrong types,
 *         unknown format or version), PL_EINVAL (a value outside its
 *         vocabulary or form, a number not finite; limits that contradict
 *         each other), PL_ERANGE (a number outside its bound, too many
 *         rules), PL_EEXISTS (two rules alike), PL_ENOMEM.
 */
PL_EXPORT int pl_criteria_parse(pl_criteria **out, const char *text, size_t len,
                                const char *label, pl_err *err);

/**
 * pl_criteria_parse() of the file at `path` (messages name it as given).
 * @return as pl_criteria_parse(), and PL_EIO (cannot be read).
 */
PL_EXPORT int pl_criteria_load(pl_criteria **out, const char *path, pl_err *err);

/** Release a set; NULL is accepted. */
PL_EXPORT void pl_criteria_free(pl_criteria *criteria);

/** The words of a kind ("growth-limit", "no-growth"), of a vanished rule
 * ("report", "investigate") and of a scope ("any", "zone", "site");
 * static storage, NULL out of range. */
PL_EXPORT const char *pl_criteria_kind_name(pl_criteria_kind kind);
PL_EXPORT const char *pl_criteria_vanished_name(pl_vanished_rule rule);
PL_EXPORT const char *pl_criteria_scope_name(pl_criteria_scope scope);

/**
 * 1 when `text` matches `pattern` (the globs of the introduction: '*',
 * '?', ASCII case ignored), else 0. NULL text matches nothing.
 */
PL_EXPORT int pl_criteria_glob(const char *pattern, const char *text);

/**
 * The limits that govern one site, method and quantity: plain numbers, for
 * a comparison to apply. Self-contained; nothing in it points into the set.
 */
typedef struct pl_criteria_limits {
    char criteria_name[PL_NAME_SIZE];
    char criteria_revision[PL_WORD_SIZE];
    int example_values;                      /**< 1: say PL_CRITERIA_EXAMPLE_MARKING */
    size_t rule_index;                       /**< position in the set's rules */
    char rule_name[PL_NAME_SIZE];
    pl_criteria_kind kind;
    pl_criteria_scope scope;                 /**< how the rule selected the site */
    char contrast_unit[PL_CRITERIA_UNIT_SIZE];
    double repeatability_area_mm2;           /**< the rule's, else the set's */
    double repeatability_contrast;           /**< in contrast_unit */
    double min_reportable_area_mm2;
    double new_reportable_area_mm2;
    /** Growth beyond which an indication has grown. A no-growth rule: the
     * area and contrast repeatability, the percentage NaN. A growth-limit
     * rule: its limits, NaN for one it does not give. */
    double area_growth_mm2;
    double area_growth_percent;
    double contrast_growth;                  /**< in contrast_unit */
    pl_vanished_rule vanished;
} pl_criteria_limits;

/**
 * Resolve the governing rule (the order of the introduction) for a site.
 * @param[out] out   filled on PL_OK
 * @param method     the site's method
 * @param quantity   the map channel's quantity
 * @param site_code  the site's code (required)
 * @param zone       the site's zone, NULL or "" when it has none (zone
 *                   patterns then do not match)
 * @return PL_OK, PL_ENOTFOUND ("... no rule covers <quantity> by <method>
 *         at site <code> (zone <zone>)"), PL_ENOMATCH (two rules match
 *         equally; both named).
 */
PL_EXPORT int pl_criteria_limits_for(pl_criteria_limits *out, const pl_criteria *criteria,
                                     const char *method, const char *quantity,
                                     const char *site_code, const char *zone, pl_err *err);

/* ---- in the store -------------------------------------------------------------- */

/** A stored criteria set, as read. */
typedef struct pl_criteria_record {
    pl_id id;                            /**< (read) the row: one revision */
    char name[PL_NAME_SIZE];
    char revision[PL_WORD_SIZE];
    char source_document[PL_TEXT_SIZE];
    int64_t format_version;
    int64_t example_values;              /**< 1: example values, not approved data */
    double repeatability_area_mm2;
    int64_t rule_count;
    char *content_json;                  /**< the canonical JSON; owned by the record
                                              (pl_criteria_record_clear()), or valid
                                              for a listing callback's duration */
    char sha256[65];                     /**< of content_json */
    char recorded_at[PL_DATE_SIZE];      /**< (read) */
} pl_criteria_record;

/** Free what a read put in `rec` and zero it. NULL is accepted. */
PL_EXPORT void pl_criteria_record_clear(pl_criteria_record *rec);

/**
 * Record a criteria set (one transaction of its own, or inside the
 * caller's).
 * @param[out] id       the row (new, or the one already holding this
 *                      content); may be NULL
 * @param[out] already  1 when the same name, revision and content were
 *                      already recorded (nothing written), else 0; may be
 *                      NULL
 * @return PL_OK, PL_EINVAL (a set not made by pl_criteria_parse()),
 *         PL_EEXISTS (the name and revision hold other content), PL_EBUSY,
 *         PL_EDB, PL_ENOMEM.
 */
PL_EXPORT int pl_store_add_criteria(pl_store *store, const pl_criteria *criteria, pl_id *id,
                                    int *already, pl_err *err);

/** Criteria row `id` into [out] rec. @return PL_OK, PL_ENOTFOUND, PL_EDB. */
PL_EXPORT int pl_store_get_criteria(pl_store *store, pl_id id, pl_criteria_record *rec,
                                    pl_err *err);

/**
 * Revision `revision` of the set `name`, or with revision NULL or "" the
 * latest recorded one, into [out] rec.
 * @return PL_OK, PL_ENOTFOUND, PL_EDB.
 */
PL_EXPORT int pl_store_find_criteria(pl_store *store, const char *name, const char *revision,
                                     pl_criteria_record *rec, pl_err *err);

typedef int (*pl_criteria_fn)(void *ud, const pl_criteria_record *rec);
/** Every recorded revision (of `name`; NULL or "": of every set), by name,
 * then in the order recorded. @return PL_OK, PL_EDB, PL_ENOMEM. */
PL_EXPORT int pl_store_list_criteria(pl_store *store, const char *name, pl_criteria_fn fn,
                                     void *ud, pl_err *err);

/**
 * The set of a stored record, parsed again from its canonical JSON (what a
 * comparison applies). @param[out] out  free with pl_criteria_free().
 * @return as pl_criteria_parse(); PL_ENOMATCH when the content does not
 *         match its recorded digest.
 */
PL_EXPORT int pl_criteria_from_record(pl_criteria **out, const pl_criteria_record *rec,
                                      pl_err *err);

/**
 * A record as a JSON object: its header fields, "example_values" as a
 * boolean, "marking" (PL_CRITERIA_EXAMPLE_MARKING or null), when
 * with_content the set itself under "content", and when `already` is 0 or
 * 1 "already_recorded" (what pl_store_add_criteria() said; -1 leaves it
 * out).
 * @param[out] out  free with free()
 * @return PL_OK, PL_ENOMEM.
 */
PL_EXPORT int pl_criteria_record_json(char **out, const pl_criteria_record *rec,
                                      int with_content, int already, pl_err *err);

/**
 * Every recorded revision (of `name`; NULL or "": of all), in the order of
 * pl_store_list_criteria(), as one JSON array of pl_criteria_record_json()
 * objects without content.
 * @param[out] out  free with free()
 * @return PL_OK, PL_EDB, PL_ENOMEM.
 */
PL_EXPORT int pl_criteria_list_json(char **out, pl_store *store, const char *name, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
