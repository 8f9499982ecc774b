/*
 * plyledger/ledger.h - the hash chain over every recorded row, and its
 * verification.
 *
 * Triggers stop an UPDATE or DELETE made through SQLite, but anyone who can
 * write the file can drop a trigger, change a value and put the trigger
 * back. The ledger makes such a change evident. Every row that enters the
 * record (pl_store__insert(), the one insert path) is appended, in the same
 * transaction, to a chain: the chain of its airframe (the airframe itself,
 * its operators, sites, inspections, maps with their channels,
 * registrations, comparisons, indications and changes) or the store's own
 * chain (criteria sets, which belong to no airframe). A link holds
 *
 *   row_sha256 = SHA-256 of the row's canonical encoding
 *                (plyledger/store_row.h, version `encoding`; a map stands in
 *                it by the SHA-256 of its decoded content)
 *   link       = SHA-256 of the link encoding:
 *                "PLLK" version:u32 prev:32 bytes seq:u64 table:text
 *                row_id:i64 encoding:u32 row_sha256:32 bytes
 *
 * with the integers little-endian, text a u32 length and its bytes, `prev`
 * the previous link of the chain (32 zero bytes for the first) and seq
 * counting from 1. Hashes are stored as lower-case hex. Version is
 * PL_LEDGER_LINK_VERSION. A store written before the chain existed is
 * chained when schema migration 6 is applied, every row in the order it was
 * recorded (recorded_at, then the table order of pl_table, then id); the
 * store's summary says how many rows were chained so.
 *
 * pl_store_verify() recomputes every link and row hash, decodes every map
 * and compares its content with its stored SHA-256, checks that every
 * recorded row has exactly one link and every link a row, that the
 * sequence of each chain has no gap, and that the append-only triggers are
 * in place; it names the first fault in words (airframe, record, what
 * differs). A chain alone cannot tell a forged row appended with a
 * correctly recomputed link from a true one, nor a chain cut together with
 * the rows it covered: for that, keep each chain's head (pl_store_heads())
 * outside the store, and verify against it later (pl_verify_options.heads):
 * a chain that no longer holds the link it held at that sequence number, or
 * holds fewer links, fails.
 *
 * Seals. A store is sealed once pl_store_seal() gives it its own seal key
 * (an Ed25519 key pair, plyledger/sign.h): every link it holds then, and
 * every link it appends later, is signed with the secret half:
 *
 *   seal = Ed25519 over "PLSL" version:u32 link:32 bytes
 *
 * (version PL_LEDGER_SEAL_VERSION, little-endian). The public half is kept
 * in the store (table seal_key); the secret half lives only in a key file
 * outside it, which every writer must give (pl_store_set_seal_key()): a
 * sealed store refuses to record anything without it. Verify then holds
 * every link of a sealed store to a valid seal, so a row appended outside
 * plyledger, with its link recomputed correctly, is a fault unless its
 * writer also held the seal key. Links received with a hand-over package
 * keep their maker's seals; the maker's public key is kept as a received
 * key, valid for the one chain and the links it sealed, and endorsed by
 * this store's own key when it was received. A writer who could also
 * replace the store's own public key could reseal everything: against
 * that, keep the heads with the seal key's fingerprint outside the store
 * (pl_heads_json()), and verify against them.
 */
#ifndef PLYLEDGER_LEDGER_H
#define PLYLEDGER_LEDGER_H

#include "plyledger/common.h"
#include "plyledger/hash.h"
#include "plyledger/sign.h"
#include "plyledger/store.h"

#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

/** The version of the link encoding this library writes. */
#define PL_LEDGER_LINK_VERSION 1

/** The version of the seal message this library signs. */
#define PL_LEDGER_SEAL_VERSION 1

/** What verify found wrong (the first fault's kind). */
typedef enum pl_fault {
    PL_FAULT_NONE = 0,
    PL_FAULT_ROW_CHANGED = 1,   /**< a row's content differs from its link's hash */
    PL_FAULT_ROW_MISSING = 2,   /**< a link's row is gone */
    PL_FAULT_ROW_UNCHAINED = 3, /**< a row without a link (written outside plyledger,
                                     or its link removed) */
    PL_FAULT_LINK = 4,          /**< a link that does not follow from its fields and the
                                     link before it */
    PL_FAULT_SEQUENCE = 5,      /**< a gap or a repeat in a chain's sequence */
    PL_FAULT_MAP_DATA = 6,      /**< a map's data do not match its SHA-256 */
    PL_FAULT_WRONG_CHAIN = 7,   /**< a row's link lies in another airframe's chain */
    PL_FAULT_TRIGGER = 8,       /**< an append-only trigger is missing */
    PL_FAULT_HEAD = 9,          /**< a chain differs from a head kept outside the store */
    PL_FAULT_SEAL = 10,         /**< a link of a sealed store without a valid seal, or a
                                     seal key that is not what it should be */
    PL_FAULT_SIGNATURE = 11,    /**< a signed record whose signature does not hold */
} pl_fault;

/** The name of a fault: "row-changed", "row-missing", "row-unchained",
 * "link-broken", "sequence", "map-data", "wrong-chain", "trigger-missing",
 * "head-differs", "seal", "signature"; "none" for PL_FAULT_NONE; NULL when unknown. */
PL_EXPORT const char *pl_fault_name(pl_fault fault);

/** The head of one chain: its last link. */
typedef struct pl_chain_head {
    pl_id chain;                       /**< the airframe's key; 0: the store's chain */
    char serial[PL_NAME_SIZE];         /**< its serial now ("" for the store's chain) */
    int64_t seq;                       /**< the last link's number (0: an empty chain) */
    char link[PL_SHA256_HEX_SIZE];     /**< that link, hex ("" when empty) */
} pl_chain_head;

/**
 * Every chain's head, the store's chain first, then the airframes' by key.
 * @param[out] out  free with free(); NULL when *n is 0
 * @return PL_OK, PL_EDB, PL_ENOMEM.
 */
PL_EXPORT int pl_store_heads(pl_store *store, pl_chain_head **out, size_t *n, pl_err *err);

/**
 * Heads as a JSON document of our own ("format": "plyledger-heads",
 * "format_version": 2, "store_id", "seal_key": the fingerprint of the
 * store's own seal key or null when it is not sealed, "heads":
 * [{"airframe": serial or null for the store's chain, "seq", "link"}]), to
 * keep outside the store.
 * @param seal_key  fingerprint, or NULL / "" for an unsealed store
 * @param[out] out  free with free()
 * @return PL_OK, PL_ENOMEM.
 */
PL_EXPORT int pl_heads_json(char **out, const char *store_id, const char *seal_key,
                            const pl_chain_head *heads, size_t n, pl_err *err);

/**
 * Read such a document (format_version 1, without a seal key, too). `name`
 * (the file) is named in every message.
 * @param[out] out       free with free()
 * @param[out] seal_key  the fingerprint kept, "" when none (may be NULL)
 * @return PL_OK, PL_EFORMAT (not such a document: the message names the
 *         field and what was expected), PL_ENOMEM.
 */
PL_EXPORT int pl_heads_parse(pl_chain_head **out, size_t *n,
                             char seal_key[PL_SIGN_FINGERPRINT_SIZE], const char *text,
                             const char *name, pl_err *err);

/**
 * Seal the store (see "Seals"): record `key`'s public half as its own seal
 * key, seal every link it holds, and seal every link appended from now on
 * with it (the key is kept for this handle as by pl_store_set_seal_key()).
 * @return PL_OK, PL_EEXISTS (already sealed), PL_EDB, PL_ENOMEM.
 */
PL_EXPORT int pl_store_seal(pl_store *store, const pl_sign_key *key, pl_err *err);

/**
 * Give a sealed store its seal key, for this handle: what it appends is
 * sealed with it.
 * @return PL_OK, PL_EREFUSED (the store is not sealed, or is sealed with
 *         another key: both fingerprints named).
 */
PL_EXPORT int pl_store_set_seal_key(pl_store *store, const pl_sign_key *key, pl_err *err);

/** 1 when the store is sealed, with its own key's fingerprint into `out`
 * (may be NULL; "" when not sealed). */
PL_EXPORT int pl_store_sealed(const pl_store *store, char out[PL_SIGN_FINGERPRINT_SIZE]);

/** The seal message of a link (see "Seals"): 40 bytes. */
PL_EXPORT void pl_ledger_seal_message(unsigned char out[40],
                                      const unsigned char link[PL_SHA256_SIZE]);

/** Options of pl_store_verify(). Initialise with PL_VERIFY_OPTIONS_INIT. */
typedef struct pl_verify_options {
    unsigned version;             /**< PL_VERIFY_OPTIONS_VERSION */
    const pl_chain_head *heads;   /**< heads kept earlier (matched by serial; the
                                       store's chain by ""); NULL: none */
    size_t nheads;
    const char *seal_key;         /**< the fingerprint kept with them; NULL or "": none */
    pl_progress_fn progress;      /**< may be NULL; nonzero stops (PL_ECANCELED) */
    void *userdata;
} pl_verify_options;

#define PL_VERIFY_OPTIONS_VERSION 1
#define PL_VERIFY_OPTIONS_INIT { PL_VERIFY_OPTIONS_VERSION, NULL, 0, NULL, NULL, NULL }

/** What pl_store_verify() found. */
typedef struct pl_verify_result {
    size_t chains;          /**< chains walked (the store's own included) */
    size_t links;           /**< links recomputed */
    size_t rows;            /**< rows re-encoded and hashed */
    size_t maps;            /**< maps decoded and compared with their SHA-256 */
    size_t seals;           /**< seals checked */
    size_t signatures;      /**< signatures of records checked */
    int sealed;             /**< 1: the store is sealed */
    char seal_key[PL_SIGN_FINGERPRINT_SIZE]; /**< its own seal key's fingerprint, or "" */
    size_t faults;          /**< faults found in all (0: the record is intact) */
    pl_fault first;         /**< the first fault's kind (PL_FAULT_NONE: none) */
    char message[1024];     /**< the first fault in words; "" when none */
} pl_verify_result;

/**
 * Verify the whole store (see the introduction). A fault is no failure of
 * the call: it returns PL_OK with result->faults > 0.
 * @param opts  NULL for PL_VERIFY_OPTIONS_INIT
 * @return PL_OK, PL_EINVAL (options), PL_ECANCELED, PL_EDB, PL_ENOMEM.
 */
PL_EXPORT int pl_store_verify(pl_store *store, pl_verify_result *result,
                              const pl_verify_options *opts, pl_err *err);

/**
 * The link that follows `prev` (32 bytes) for a row (the link encoding of
 * the introduction). For the tests and for readers who check a store
 * without plyledger.
 */
PL_EXPORT void pl_ledger_link(unsigned char out[PL_SHA256_SIZE],
                              const unsigned char prev[PL_SHA256_SIZE], int64_t seq,
                              const char *table, pl_id row_id, uint32_t encoding,
                              const unsigned char row_sha256[PL_SHA256_SIZE]);

#ifdef __cplusplus
}
#endif
#endif
