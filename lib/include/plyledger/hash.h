/*
 * plyledger/hash.h - SHA-256 (FIPS 180-4) for content digests.
 *
 * Maps carry the SHA-256 of their decoded content, and later the record's
 * hash chain links rows with it. The digest comes from libsodium; this
 * module only gives it plyledger's names and a hex form. A pl_sha256_ctx
 * lives on the caller's stack; nothing here allocates.
 */
#ifndef PLYLEDGER_HASH_H
#define PLYLEDGER_HASH_H

#include "plyledger/common.h"

#ifdef __cplusplus
extern "C" {
#endif

#define PL_SHA256_SIZE 32      /**< bytes in a digest */
#define PL_SHA256_HEX_SIZE 65  /**< hex digits plus the terminating NUL */

/** Incremental hashing state; opaque storage, large enough for libsodium's. */
typedef struct pl_sha256_ctx {
    _Alignas(16) unsigned char opaque[128];
} pl_sha256_ctx;

/** Start a digest. */
PL_EXPORT void pl_sha256_init(pl_sha256_ctx *ctx);
/** Feed `len` bytes. */
PL_EXPORT void pl_sha256_update(pl_sha256_ctx *ctx, const void *data, size_t len);
/** Finish into `out` ([out], 32 bytes). */
PL_EXPORT void pl_sha256_final(pl_sha256_ctx *ctx, unsigned char out[PL_SHA256_SIZE]);

/** One-shot digest of `len` bytes at `data` into `out` ([out]). */
PL_EXPORT void pl_sha256(unsigned char out[PL_SHA256_SIZE], const void *data, size_t len);

/** Lower-case hex of a digest into `hex` ([out], 65 bytes with NUL). */
PL_EXPORT void pl_sha256_hex(char hex[PL_SHA256_HEX_SIZE],
                             const unsigned char digest[PL_SHA256_SIZE]);

/**
 * Parse 64 hex digits into `digest` ([out]).
 * @return PL_OK, or PL_EFORMAT when `hex` is not 64 hex digits.
 */
PL_EXPORT int pl_sha256_from_hex(unsigned char digest[PL_SHA256_SIZE], const char *hex);

#ifdef __cplusplus
}
#endif
#endif
