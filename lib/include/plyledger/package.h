/*
 * plyledger/package.h - the hand-over package: one airframe's whole
 * record in one self-contained SQLite file, and receiving it into another
 * store.
 *
 * When an airframe changes hands, its inspection record goes with it. A
 * package is an SQLite database in rollback-journal mode (never WAL, so
 * it is one file), with application_id PL_PACKAGE_APPLICATION_ID ("PlyP")
 * and the same schema as a store (every migration, user_version
 * PL_STORE_SCHEMA_VERSION). It holds, with the ids they have in the
 * sending store:
 *
 *   - every row linked in the airframe's chain (the airframe, its
 *     operators, sites, inspections, maps, registrations, comparisons,
 *     indications, changes and whatever else is chained to it), with the
 *     rows that belong to them without a link of their own (a map's
 *     channels: every row of an unchained table whose references all lead
 *     to rows in the package);
 *   - every row of the sending store's own chain (criteria sets, the
 *     register of people, their keys and qualifications);
 *   - the ledger rows of both chains, their seals, the sending store's own
 *     seal key (origin 'own' in the package) and the received seal keys
 *     that sealed links of these chains, with their endorsements;
 *   - the sending store's store_info rows;
 *   - the table package_manifest(name, value), described below.
 *
 * The package is therefore itself a store that pl_store_open() opens
 * read-only (never for writing): pl_store_verify() on it passes, and every
 * read-only call (listings, history, maps) works on it.
 *
 * Manifest. One text value per name:
 *
 *   format                "plyledger-package"
 *   format_version        "1" (PL_PACKAGE_FORMAT_VERSION)
 *   schema_version        the schema the package was made with
 *   airframe.serial       the airframe's serial
 *   airframe.key          its stable key (the id of its first row): the
 *                         ledger's chain column for its links
 *   source.store_id       the sending store's id
 *   exported_at           UTC time of the export, 2024-05-01T12:34:56.789Z
 *   exported_by           "plyledger" and the library's version
 *   seal_key              the sending store's own seal key: 64 hex digits
 *                         of its Ed25519 public key
 *   chain.airframe.seq    the airframe chain's last link: its number
 *   chain.airframe.link   and its link (hex)
 *   chain.store.seq       the same for the store's own chain ("0" and ""
 *   chain.store.link      when it is empty)
 *   rows.<table>          the number of rows of every table in the file
 *                         but package_manifest itself
 *   maps.count            the number of maps
 *   maps.sha256           SHA-256 of the text that has, for each map by
 *                         id, the line "map <id> <sha256>\n" (<sha256>:
 *                         the map's sha256 column, the SHA-256 of its
 *                         decoded content)
 *   manifest_signature    Ed25519 by the sending store's seal key (128 hex
 *                         digits) over the manifest text: the line
 *                         "plyledger-package-manifest 1\n" and then, for
 *                         every other name in bytewise order, the line
 *                         "<name>=<value>\n". No name holds '=' and no name
 *                         or value holds a line break.
 *
 * README.md ("Hand-over package") shows how to check all of it with the
 * sqlite3 shell, sha256sum and openssl alone.
 *
 * Export (pl_package_export()) needs a sealed store and its seal key (the
 * manifest is signed with it). It writes a temporary file beside the
 * target, checks it as pl_package_check() does, syncs it and renames it
 * into place: on any failure no file is left and an existing one is kept.
 * The target may not be the store or one of its SQLite files, nor any
 * plyledger store.
 *
 * Check (pl_package_check()) takes a package on its own: the file (an
 * SQLite database in rollback mode, whole, not truncated, no journal left
 * beside it, this schema), the manifest (every name, the signature by the
 * package's own seal key), the record inside (pl_store_verify()) and the
 * content against the manifest (the chains' heads, every table's count,
 * the maps' digest). It names the first fault. A package is signed by its
 * sender's own seal key, which it carries: a check shows the package is
 * as its sender sealed it; who the sender is, only the key's fingerprint
 * shows, given apart from the package (pl_package_options.sender_key).
 *
 * Import (pl_package_import()) receives a package into a sealed store
 * opened for writing with its seal key, in one transaction: a package with
 * any fault is refused and nothing imported. For each of the package's two
 * chains, the receiving store's chain of the same key must be a prefix of
 * it or have it as a prefix, link for link; otherwise the import is
 * refused ("different history from link N: refused, not merged"), as it is
 * when an airframe of the same serial exists under another key or a row
 * id the package needs is taken. Links beyond the receiving chain are
 * appended with their rows (same ids), their ledger rows (new ledger ids)
 * and their makers' seals; each public key that sealed them becomes a
 * received seal key of that chain (through the highest link it sealed),
 * endorsed by the receiving store's own key. Nothing new: PL_OK with
 * result->already set, and the store is as it was.
 */
#ifndef PLYLEDGER_PACKAGE_H
#define PLYLEDGER_PACKAGE_H

#include "plyledger/common.h"
#include "plyledger/ledger.h"
#include "plyledger/sign.h"
#include "plyledger/store.h"

#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

/** PRAGMA application_id of a hand-over package: "PlyP". */
#define PL_PACKAGE_APPLICATION_ID 0x506c7950

/** The manifest's format_version this library writes and reads. */
#define PL_PACKAGE_FORMAT_VERSION 1

/** What was wrong with a package (the first fault's kind). */
typedef enum pl_package_fault {
    PL_PACKAGE_FAULT_NONE = 0,
    PL_PACKAGE_FAULT_FILE = 1,     /**< not a package, truncated, damaged, in WAL mode, a
                                        journal beside it, another schema */
    PL_PACKAGE_FAULT_MANIFEST = 2, /**< the manifest is missing, malformed, its signature
                                        does not hold, or it is sealed by another key than
                                        the one expected */
    PL_PACKAGE_FAULT_RECORD = 3,   /**< the record inside does not verify (record_fault
                                        says how) */
    PL_PACKAGE_FAULT_CONTENT = 4,  /**< the content differs from the manifest: a chain's
                                        head, a table's count, the maps' digest */
} pl_package_fault;

/** "none", "file", "manifest", "record", "content"; NULL when unknown. */
PL_EXPORT const char *pl_package_fault_name(pl_package_fault fault);

/** Options of the package calls. Initialise with PL_PACKAGE_OPTIONS_INIT. */
typedef struct pl_package_options {
    unsigned version;          /**< PL_PACKAGE_OPTIONS_VERSION */
    const char *sender_key;    /**< check, import: the fingerprint (32 hex digits) of the
                                    seal key the package must be sealed with, as the
                                    sender gave it apart from the package; NULL or "": any
                                    key (the package then only shows it is unchanged
                                    since its sender sealed it, not who the sender is) */
    pl_progress_fn progress;   /**< may be NULL; nonzero stops (PL_ECANCELED) */
    void *userdata;
} pl_package_options;

#define PL_PACKAGE_OPTIONS_VERSION 1
#define PL_PACKAGE_OPTIONS_INIT { PL_PACKAGE_OPTIONS_VERSION, NULL, NULL, NULL }

/** What a package holds, what was wrong with it, and what an import took. */
typedef struct pl_package_result {
    char serial[PL_NAME_SIZE];          /**< the airframe (from the manifest) */
    pl_id airframe_key;                 /**< its stable key */
    char source_store[40];              /**< the sending store's id */
    char exported_at[PL_DATE_SIZE];
    char exported_by[PL_NAME_SIZE];
    char seal_key[PL_SIGN_FINGERPRINT_SIZE]; /**< the sending store's seal key's fingerprint */
    int64_t bytes;                      /**< the package file's size */
    int64_t airframe_links;             /**< links of the airframe's chain */
    int64_t store_links;                /**< links of the sending store's own chain */
    int64_t rows;                       /**< rows of every table but the manifest */
    int64_t maps;
    int64_t seals;
    int64_t seal_keys;
    size_t faults;                      /**< 0: the package is sound */
    pl_package_fault fault;             /**< the first fault's kind */
    pl_fault record_fault;              /**< PL_PACKAGE_FAULT_RECORD: verify's kind */
    char message[1024];                 /**< the first fault in words; "" when none */
    /* import */
    int already;                        /**< 1: nothing was new; nothing imported */
    int64_t imported_airframe_links;    /**< links appended to the airframe's chain */
    int64_t imported_store_links;       /**< links appended to the store's own chain */
    int64_t imported_rows;              /**< rows inserted, ledger and seals aside */
    int64_t received_keys;              /**< seal keys recorded as received */
} pl_package_result;

/**
 * Export the record of airframe `serial` to a new package at `path` (see
 * the introduction).
 * @param opts  NULL for PL_PACKAGE_OPTIONS_INIT
 * @param[out] result  what the package holds (result->bytes its size)
 * @return PL_OK; PL_EREFUSED (the store is not sealed or its seal key was
 *         not given, the target is a plyledger store or not a regular
 *         file, the package did not check: the message names the fault);
 *         PL_ENOTFOUND (no such airframe), PL_EINVAL (the target is the
 *         store or one of its files, or a folder), PL_EIO, PL_EDB,
 *         PL_ECANCELED, PL_ENOMEM.
 */
PL_EXPORT int pl_package_export(pl_store *store, const char *serial, const char *path,
                                const pl_package_options *opts, pl_package_result *result,
                                pl_err *err);

/**
 * Check a package on its own (see the introduction). A fault is no failure
 * of the call: it returns PL_OK with result->faults > 0 and the first
 * fault in result->message.
 * @param opts  NULL for PL_PACKAGE_OPTIONS_INIT
 * @return PL_OK, PL_ENOTFOUND (no such file), PL_EIO, PL_EDB, PL_ECANCELED,
 *         PL_ENOMEM.
 */
PL_EXPORT int pl_package_check(const char *path, const pl_package_options *opts,
                               pl_package_result *result, pl_err *err);

/**
 * Receive a package into `store`, opened for writing with its seal key
 * (see the introduction): one atomic call, inside a caller's transaction
 * (pl_store_begin()) a part of it.
 * @param opts  NULL for PL_PACKAGE_OPTIONS_INIT
 * @param[out] result  what the package holds and what was imported;
 *                     result->already 1 when nothing was new
 * @return PL_OK; PL_EREFUSED (the package has a fault, the store holds the
 *         airframe or its own chain with a different history, a row id is
 *         taken, the store is not sealed or lacks its seal key: the
 *         message names it, and nothing was imported); PL_ENOTFOUND (no
 *         such file), PL_EINVAL (options), PL_EBUSY, PL_EIO,
 *         PL_EDB, PL_ECANCELED, PL_ENOMEM.
 */
PL_EXPORT int pl_package_import(pl_store *store, const char *path,
                                const pl_package_options *opts, pl_package_result *result,
                                pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
