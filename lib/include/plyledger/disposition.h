/*
 * plyledger/disposition.h - what the people of the register decide about
 * the changes a comparison found: the interpretation of each indication and
 * the signed disposition.
 *
 * The workflow follows the terms of ASTM E1316: an indication is first
 * interpreted as false (not caused by a discontinuity: a reflection, an
 * emissivity patch), nonrelevant (caused by a condition of the design, such
 * as a stiffener edge) or relevant (caused by a discontinuity); only a
 * relevant indication is evaluated against the criteria and disposed of.
 * Interpretations are made by an inspector or an engineer.
 *
 * A disposition covers relevant changes of one comparison, names the
 * criteria revision the comparison used, and decides:
 *   accept                  the indication may stay as it is;
 *   monitor                 reinspect it by a date, by flight hours or by
 *                           cycles (at least one; the earliest governs);
 *   repair                  repair it under the reference given; the next
 *                           inspection of the site must then be recorded as
 *                           its post-repair baseline (kind post-repair),
 *                           which becomes the site's baseline;
 *   refer-to-design-holder  ask the design holder, under the query
 *                           reference given.
 * It is made by an engineer or a reviewer and signed. Nothing is ever
 * edited: a later interpretation or disposition supersedes the earlier one
 * with a reason, and both stay in the record.
 *
 * Signatures. Each interpretation and disposition is signed with its
 * maker's Ed25519 key (plyledger/sign.h, their key file) over its signed
 * content: the message "PLSG" version:u32 digest:32 bytes, where digest is
 * the SHA-256 of the row's canonical encoding (plyledger/store_row.h) with
 * its id, recorded_at and signature entries null. The key given must be the
 * key the maker holds in the register on the signing date
 * (plyledger/people.h); verify checks every signature against the key held
 * that day (plyledger/ledger.h, fault "signature").
 *
 * plyledger supports certified NDT staff and approved data; it does not
 * replace them, and every output that shows a disposition says so
 * (pl_caution()). Local regulations and the design holder's data govern.
 */
#ifndef PLYLEDGER_DISPOSITION_H
#define PLYLEDGER_DISPOSITION_H

#include "plyledger/common.h"
#include "plyledger/sign.h"
#include "plyledger/store.h"

#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

/** The version of the signed-content message this library signs. */
#define PL_SIGNED_CONTENT_VERSION 1

/** An interpretation of one change's indication. */
typedef struct pl_interpretation {
    pl_id id;                            /**< (read) */
    pl_id change_id;                     /**< the change (pl_change_record.id); required */
    pl_id comparison_id;                 /**< (read) the change's comparison */
    int64_t change_number;               /**< (read) its number in the comparison */
    char class_[PL_WORD_SIZE];           /**< PL_VOCAB_INTERPRETATION */
    char note[PL_TEXT_SIZE];             /**< what it is taken to be; may be empty */
    pl_id supersedes;                    /**< the interpretation it replaces, or 0 */
    char reason[PL_TEXT_SIZE];           /**< why (required when it supersedes) */
    char handle[PL_NAME_SIZE];           /**< who interprets (the register); required */
    pl_id person_id;                     /**< (read) */
    char signed_on[PL_DATE_SIZE];        /**< YYYY-MM-DD; required */
    int superseded;                      /**< (read) 1: a later one replaces it */
    char recorded_at[PL_DATE_SIZE];      /**< (read) */
} pl_interpretation;

/** A disposition. */
typedef struct pl_disposition {
    pl_id id;                            /**< (read) */
    pl_id comparison_id;                 /**< required */
    char changes[PL_TEXT_SIZE];          /**< (read) the change ids covered, a JSON array */
    pl_id criteria_id;                   /**< (read) the comparison's criteria revision */
    char decision[PL_WORD_SIZE];         /**< PL_VOCAB_DECISION */
    char due_date[PL_DATE_SIZE];         /**< monitor: reinspect by (YYYY-MM-DD) */
    double due_hours;                    /**< monitor: by these aircraft hours; NaN none */
    int64_t due_cycles;                  /**< monitor: by these aircraft cycles; -1 none */
    char repair_ref[PL_NAME_SIZE];       /**< repair: the repair reference */
    char query_ref[PL_NAME_SIZE];        /**< refer-to-design-holder: the query reference */
    char rationale[PL_TEXT_SIZE];        /**< the engineer's reasoning; may be empty */
    pl_id supersedes;                    /**< the disposition it replaces, or 0 */
    char reason[PL_TEXT_SIZE];           /**< why (required when it supersedes) */
    char handle[PL_NAME_SIZE];           /**< who decides (the register); required */
    pl_id person_id;                     /**< (read) */
    char signed_on[PL_DATE_SIZE];        /**< YYYY-MM-DD; required */
    char airframe_serial[PL_NAME_SIZE];  /**< (read) */
    char site_code[PL_NAME_SIZE];        /**< (read) */
    int superseded;                      /**< (read) 1: a later one replaces it */
    char recorded_at[PL_DATE_SIZE];      /**< (read) */
} pl_disposition;

/**
 * Record an interpretation signed with `key` (see the introduction).
 * @return PL_OK, PL_EINVAL (a field), PL_ENOTFOUND (no such change or
 *         person), PL_EREFUSED (the key is not the one the maker holds that
 *         day, a role that does not interpret, the change interpreted
 *         already and not superseded, a superseded one superseded again),
 *         PL_EDB.
 */
PL_EXPORT int pl_store_add_interpretation(pl_store *store, const pl_interpretation *in,
                                          const pl_sign_key *key, pl_id *id, pl_err *err);

typedef int (*pl_interpretation_fn)(void *ud, const pl_interpretation *in);
/** Interpretations of the changes of comparison `comparison_id` (0: all), by
 * change number, then as recorded. */
PL_EXPORT int pl_store_list_interpretations(pl_store *store, pl_id comparison_id,
                                            pl_interpretation_fn fn, void *ud, pl_err *err);

/**
 * Record a disposition of changes `changes` (n of them, ids of changes of
 * d->comparison_id) signed with `key`.
 * @return PL_OK, PL_EINVAL (a field, a due date not after the signing
 *         date), PL_ENOTFOUND, PL_EREFUSED (a change that is not
 *         interpreted as relevant, or is covered already by a disposition
 *         not superseded; the comparison not done; the key or the role;
 *         the signing date before the inspection or after today), PL_EDB.
 */
PL_EXPORT int pl_store_add_disposition(pl_store *store, const pl_disposition *d,
                                       const pl_id *changes, size_t n, const pl_sign_key *key,
                                       pl_id *id, pl_err *err);

typedef int (*pl_disposition_fn)(void *ud, const pl_disposition *d);
/** Dispositions of airframe `serial` (NULL: all), site `code` (NULL: all),
 * comparison `comparison_id` (0: all), oldest first. */
PL_EXPORT int pl_store_list_dispositions(pl_store *store, const char *serial, const char *code,
                                         pl_id comparison_id, pl_disposition_fn fn, void *ud,
                                         pl_err *err);

/**
 * The latest done comparison of site `code` of airframe `serial` (any case),
 * of the inspection with task reference `task` (NULL: any), by the
 * inspection's date. @return PL_OK, PL_ENOTFOUND (named), PL_EDB.
 */
PL_EXPORT int pl_store_find_comparison(pl_store *store, const char *serial, const char *code,
                                       const char *task, pl_id *id, pl_err *err);

/** Disposition `id` into `d`. @return PL_OK, PL_ENOTFOUND, PL_EDB. */
PL_EXPORT int pl_store_get_disposition(pl_store *store, pl_id id, pl_disposition *d,
                                       pl_err *err);

/** The change ids of a disposition's `changes` text into ids (up to cap);
 * returns how many it holds, or -1 when it is not such an array. */
PL_EXPORT long pl_disposition_change_ids(const char *changes, pl_id *ids, size_t cap);

#ifdef __cplusplus
}
#endif
#endif
