/*
 * plyledger/people.h - the register of people: who inspects, interprets,
 * decides and reviews, what they are qualified for and when, and the
 * public keys their signatures are checked against.
 *
 * A person has a handle (a short name of the key alphabet, pl_key_check(),
 * unique in the store whatever its case), a name, a role (inspector,
 * engineer, reviewer) and an organisation. Rows are never changed: a new
 * key or a renewed qualification is a new row.
 *
 * Keys. A person's public key (Ed25519, plyledger/sign.h) is held from a
 * date; a signature made on a date is checked against the key its signer
 * held that day (the key with the latest valid_from on or before it), so a
 * key replaced later leaves older signatures good. The secret half stays in
 * the person's own key file (pl_key_create(): mode 0600).
 *
 * Qualifications. A certification for one method at one level (1-limited,
 * 1, 2, 3: EN 4179, NAS 410; ISO 9712 levels 1 to 3), valid between two
 * dates, both included. A written procedure may say which levels may
 * perform it (pl_store_set_procedure_levels(); the latest row for a
 * procedure governs, a row for one revision before a row for every
 * revision).
 *
 * The check on recording an inspection. Once the register holds an
 * inspector, every inspection recorded names one of the register's people
 * by handle as its inspector (a name the register does not hold is
 * refused), who on the day of the inspection holds a valid qualification
 * for the site's method at the level recorded; when the procedure's levels
 * are registered, that level must be one of them. Each refusal names the
 * reason (pl_store_check_inspector()).
 *
 * Every person, key, qualification and procedure row belongs to the
 * store's own chain of the ledger (plyledger/ledger.h).
 */
#ifndef PLYLEDGER_PEOPLE_H
#define PLYLEDGER_PEOPLE_H

#include "plyledger/common.h"
#include "plyledger/hash.h"
#include "plyledger/sign.h"
#include "plyledger/store.h"

#ifdef __cplusplus
extern "C" {
#endif

/** A person of the register. */
typedef struct pl_person {
    pl_id id;                             /**< (read) */
    char handle[PL_NAME_SIZE];            /**< required: key alphabet */
    char name[PL_NAME_SIZE];              /**< required */
    char role[PL_WORD_SIZE];              /**< PL_VOCAB_ROLE: inspector, engineer, reviewer */
    char organisation[PL_NAME_SIZE];      /**< may be empty */
    char recorded_at[PL_DATE_SIZE];       /**< (read) */
} pl_person;

/** A public key a person holds from a date. */
typedef struct pl_person_key {
    pl_id id;                             /**< (read) */
    pl_id person_id;                      /**< (read) */
    char handle[PL_NAME_SIZE];            /**< required on add: whose key */
    char public_key[PL_SHA256_HEX_SIZE];  /**< 64 hex digits; required */
    char valid_from[PL_DATE_SIZE];        /**< YYYY-MM-DD; required */
    char reason[PL_TEXT_SIZE];            /**< why (a replaced key: required) */
    char recorded_at[PL_DATE_SIZE];       /**< (read) */
} pl_person_key;

/** A qualification. */
typedef struct pl_qualification {
    pl_id id;                             /**< (read) */
    pl_id person_id;                      /**< (read) */
    char handle[PL_NAME_SIZE];            /**< required on add */
    char method[PL_NAME_SIZE];            /**< PL_VOCAB_METHOD */
    char level[PL_WORD_SIZE];             /**< PL_VOCAB_INSPECTOR_LEVEL */
    char valid_from[PL_DATE_SIZE];        /**< YYYY-MM-DD; required */
    char valid_until[PL_DATE_SIZE];       /**< YYYY-MM-DD, not before valid_from; required */
    char certificate[PL_NAME_SIZE];       /**< certificate reference; may be empty */
    char recorded_at[PL_DATE_SIZE];       /**< (read) */
} pl_qualification;

/** The levels that may perform a procedure. */
typedef struct pl_procedure_levels {
    pl_id id;                             /**< (read) */
    char procedure[PL_NAME_SIZE];         /**< required */
    char procedure_rev[PL_WORD_SIZE];     /**< empty: every revision */
    char levels[PL_NAME_SIZE];            /**< levels separated by spaces or commas,
                                               each of PL_VOCAB_INSPECTOR_LEVEL */
    char recorded_at[PL_DATE_SIZE];       /**< (read) */
} pl_procedure_levels;

/** Add a person. @return PL_OK, PL_EINVAL (a field: named), PL_EEXISTS (the
 * handle is taken, in any case), PL_EDB. */
PL_EXPORT int pl_store_add_person(pl_store *store, const pl_person *person, pl_id *id,
                                  pl_err *err);

/** The person with `handle` (any case). @return PL_OK, PL_ENOTFOUND, PL_EDB. */
PL_EXPORT int pl_store_get_person(pl_store *store, const char *handle, pl_person *person,
                                  pl_err *err);

typedef int (*pl_person_fn)(void *ud, const pl_person *person);
/** Every person, by handle. */
PL_EXPORT int pl_store_list_people(pl_store *store, pl_person_fn fn, void *ud, pl_err *err);

/**
 * Add a public key for key->handle, held from key->valid_from. A key that
 * follows an earlier one must start after it and give a reason.
 * @return PL_OK, PL_EINVAL, PL_ENOTFOUND (no such person), PL_EEXISTS (the
 *         key is registered already, or the person has a key from that
 *         date), PL_EDB.
 */
PL_EXPORT int pl_store_add_person_key(pl_store *store, const pl_person_key *key, pl_id *id,
                                      pl_err *err);

typedef int (*pl_person_key_fn)(void *ud, const pl_person_key *key);
/** Keys of `handle` (NULL: everyone's), by person and date. */
PL_EXPORT int pl_store_list_person_keys(pl_store *store, const char *handle,
                                        pl_person_key_fn fn, void *ud, pl_err *err);

/**
 * The key person `person_id` held on `date` into `pub`.
 * @return PL_OK, PL_ENOTFOUND (no key held that day: named), PL_EFORMAT (a
 *         stored key that is not hex), PL_EDB.
 */
PL_EXPORT int pl_store_person_key_on(pl_store *store, pl_id person_id, const char *date,
                                     unsigned char pub[PL_SIGN_PUBLIC_SIZE], pl_err *err);

/** Add a qualification. @return PL_OK, PL_EINVAL, PL_ENOTFOUND, PL_EDB. */
PL_EXPORT int pl_store_add_qualification(pl_store *store, const pl_qualification *q,
                                         pl_id *id, pl_err *err);

typedef int (*pl_qualification_fn)(void *ud, const pl_qualification *q);
/** Qualifications of `handle` (NULL: everyone's), by person, method, date. */
PL_EXPORT int pl_store_list_qualifications(pl_store *store, const char *handle,
                                           pl_qualification_fn fn, void *ud, pl_err *err);

/** Record the levels that may perform a procedure. @return PL_OK, PL_EINVAL, PL_EDB. */
PL_EXPORT int pl_store_set_procedure_levels(pl_store *store, const pl_procedure_levels *p,
                                            pl_id *id, pl_err *err);

/**
 * Check that `inspector` may perform an inspection by `method` at `level`
 * under `procedure` revision `rev` on `date` (see the introduction). The
 * check inspection recording makes; for a dry run too.
 * @return PL_OK (also when the register holds no inspector), PL_EREFUSED
 *         (the reason named: not in the register, not an inspector's role
 *         that may inspect, no qualification for the method, lapsed or not
 *         yet valid on that date, a level the person does not hold, a level
 *         the procedure does not allow), PL_EDB.
 */
PL_EXPORT int pl_store_check_inspector(pl_store *store, const char *inspector,
                                       const char *method, const char *level, const char *date,
                                       const char *procedure, const char *rev, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
