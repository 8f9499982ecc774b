/*
 * plyledger/sign.h - Ed25519 signatures (libsodium) and the key files that
 * hold a secret key.
 *
 * Signatures are Ed25519 (RFC 8032), made and checked by libsodium's
 * crypto_sign_detached() and crypto_sign_verify_detached(). A key is named
 * by its fingerprint: the first 16 bytes of the SHA-256 of its 32-byte
 * public key, in hex.
 *
 * Key file. A secret key lives in a file of our own, four lines of text:
 *
 *   plyledger-key 1
 *   kind ed25519
 *   public <64 hex digits: the public key>
 *   seed <64 hex digits: the 32-byte seed the secret key is made from>
 *
 * pl_key_create() writes a new one readable and writable by its owner only
 * (mode 0600): to a temporary file beside it, synced, then linked into
 * place, so that an existing file is never replaced and a failure leaves
 * no file. pl_key_load() refuses a file that its group or others may read
 * or write, a file that is not a regular file, and a file whose public key
 * does not follow from its seed.
 */
#ifndef PLYLEDGER_SIGN_H
#define PLYLEDGER_SIGN_H

#include "plyledger/common.h"

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif

#define PL_SIGN_PUBLIC_SIZE 32     /**< bytes of a public key */
#define PL_SIGN_SECRET_SIZE 64     /**< bytes of a secret key (seed and public key) */
#define PL_SIGN_SIZE 64            /**< bytes of a signature */
#define PL_SIGN_FINGERPRINT_SIZE 33 /**< 32 hex digits and the NUL */

/** A key pair in memory. */
typedef struct pl_sign_key {
    unsigned char public_key[PL_SIGN_PUBLIC_SIZE];
    unsigned char secret_key[PL_SIGN_SECRET_SIZE];
} pl_sign_key;

/** The key pair of a 32-byte seed (RFC 8032's "secret key"). */
PL_EXPORT void pl_sign_key_from_seed(pl_sign_key *key, const unsigned char seed[32]);

/** Overwrite a key pair in memory with zeros (one the compiler keeps); NULL
 * is accepted. */
PL_EXPORT void pl_sign_key_wipe(pl_sign_key *key);

/** The fingerprint of a public key (see the introduction). */
PL_EXPORT void pl_sign_fingerprint(char out[PL_SIGN_FINGERPRINT_SIZE],
                                   const unsigned char public_key[PL_SIGN_PUBLIC_SIZE]);

/** Sign `len` bytes of `msg`. */
PL_EXPORT void pl_sign(unsigned char sig[PL_SIGN_SIZE], const void *msg, size_t len,
                       const pl_sign_key *key);

/** 1 when `sig` is a valid signature of the message by `public_key`, else 0. */
PL_EXPORT int pl_sign_check(const unsigned char sig[PL_SIGN_SIZE], const void *msg, size_t len,
                            const unsigned char public_key[PL_SIGN_PUBLIC_SIZE]);

/**
 * Make a new random key pair and write it to a new key file at `path`.
 * @param[out] key  the pair (may be NULL)
 * @return PL_OK, PL_EEXISTS (the file exists: never replaced), PL_EIO.
 */
PL_EXPORT int pl_key_create(const char *path, pl_sign_key *key, pl_err *err);

/**
 * Read a key file.
 * @return PL_OK, PL_ENOTFOUND (no such file), PL_EREFUSED (readable or
 *         writable by its group or others, or not a regular file: the
 *         message says which and how to put it right), PL_EFORMAT (not a
 *         key file, or its public key does not follow from its seed),
 *         PL_EIO.
 */
PL_EXPORT int pl_key_load(const char *path, pl_sign_key *key, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
