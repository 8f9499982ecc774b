/*
 * hash.c - SHA-256 through libsodium.
 */
#include "plyledger/hash.h"

#include <sodium.h>
#include <string.h>

_Static_assert(sizeof(crypto_hash_sha256_state) <= sizeof(((pl_sha256_ctx *)0)->opaque),
               "pl_sha256_ctx too small for libsodium's state");

PL_EXPORT void pl_sha256_init(pl_sha256_ctx *ctx)
{
    crypto_hash_sha256_init((crypto_hash_sha256_state *)(void *)ctx->opaque);
}

PL_EXPORT void pl_sha256_update(pl_sha256_ctx *ctx, const void *data, size_t len)
{
    crypto_hash_sha256_update((crypto_hash_sha256_state *)(void *)ctx->opaque,
                              data, (unsigned long long)len);
}

PL_EXPORT void pl_sha256_final(pl_sha256_ctx *ctx, unsigned char out[PL_SHA256_SIZE])
{
    crypto_hash_sha256_final((crypto_hash_sha256_state *)(void *)ctx->opaque, out);
}

PL_EXPORT void pl_sha256(unsigned char out[PL_SHA256_SIZE], const void *data, size_t len)
{
    crypto_hash_sha256(out, data, (unsigned long long)len);
}

PL_EXPORT void pl_sha256_hex(char hex[PL_SHA256_HEX_SIZE],
                             const unsigned char digest[PL_SHA256_SIZE])
{
    static const char digits[] = "0123456789abcdef";
    for (int i = 0; i < PL_SHA256_SIZE; i++) {
        hex[2 * i] = digits[digest[i] >> 4];
        hex[2 * i + 1] = digits[digest[i] & 15];
    }
    hex[2 * PL_SHA256_SIZE] = '\0';
}

static int hexval(char c)
{
    if (c >= '0' && c <= '9') return c - '0';
    if (c >= 'a' && c <= 'f') return c - 'a' + 10;
    if (c >= 'A' && c <= 'F') return c - 'A' + 10;
    return -1;
}

PL_EXPORT int pl_sha256_from_hex(unsigned char digest[PL_SHA256_SIZE], const char *hex)
{
    if (!hex || strlen(hex) != 2 * PL_SHA256_SIZE)
        return PL_EFORMAT;
    for (int i = 0; i < PL_SHA256_SIZE; i++) {
        int hi = hexval(hex[2 * i]), lo = hexval(hex[2 * i + 1]);
        if (hi < 0 || lo < 0)
            return PL_EFORMAT;
        digest[i] = (unsigned char)(hi << 4 | lo);
    }
    return PL_OK;
}
