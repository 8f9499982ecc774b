/*
 * sign.c - Ed25519 signatures and key files (plyledger/sign.h).
 */
#include "plyledger/sign.h"

#include "common/common_int.h"
#include "plyledger/hash.h"

#include <assert.h>
#include <errno.h>
#include <fcntl.h>
#include <sodium.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

_Static_assert(crypto_sign_PUBLICKEYBYTES == PL_SIGN_PUBLIC_SIZE, "public key size");
_Static_assert(crypto_sign_SECRETKEYBYTES == PL_SIGN_SECRET_SIZE, "secret key size");
_Static_assert(crypto_sign_BYTES == PL_SIGN_SIZE, "signature size");
_Static_assert(crypto_sign_SEEDBYTES == 32, "seed size");

PL_EXPORT void pl_sign_key_wipe(pl_sign_key *key)
{
    if (key)
        sodium_memzero(key, sizeof *key);
}

PL_EXPORT void pl_sign_key_from_seed(pl_sign_key *key, const unsigned char seed[32])
{
    assert(key && seed);
    crypto_sign_seed_keypair(key->public_key, key->secret_key, seed);
}

PL_EXPORT void pl_sign_fingerprint(char out[PL_SIGN_FINGERPRINT_SIZE],
                                   const unsigned char public_key[PL_SIGN_PUBLIC_SIZE])
{
    unsigned char d[PL_SHA256_SIZE];
    char hex[PL_SHA256_HEX_SIZE];
    pl_sha256(d, public_key, PL_SIGN_PUBLIC_SIZE);
    pl_sha256_hex(hex, d);
    memcpy(out, hex, PL_SIGN_FINGERPRINT_SIZE - 1);
    out[PL_SIGN_FINGERPRINT_SIZE - 1] = '\0';
}

PL_EXPORT void pl_sign(unsigned char sig[PL_SIGN_SIZE], const void *msg, size_t len,
                       const pl_sign_key *key)
{
    assert(sig && key && (msg || !len));
    crypto_sign_detached(sig, NULL, msg, len, key->secret_key);
}

PL_EXPORT int pl_sign_check(const unsigned char sig[PL_SIGN_SIZE], const void *msg, size_t len,
                            const unsigned char public_key[PL_SIGN_PUBLIC_SIZE])
{
    assert(sig && public_key && (msg || !len));
    return crypto_sign_verify_detached(sig, msg, len, public_key) == 0;
}

static void hex_of(char *out, const unsigned char *b, size_t n)
{
    static const char digits[] = "0123456789abcdef";
    for (size_t i = 0; i < n; i++) {
        out[2 * i] = digits[b[i] >> 4];
        out[2 * i + 1] = digits[b[i] & 15];
    }
    out[2 * n] = '\0';
}

static int from_hex(unsigned char *out, size_t n, const char *hex)
{
    if (strlen(hex) != 2 * n)
        return -1;
    for (size_t i = 0; i < 2 * n; i++) {
        char c = hex[i];
        int v = c >= '0' && c <= '9' ? c - '0' : c >= 'a' && c <= 'f' ? c - 'a' + 10 : -1;
        if (v < 0)
            return -1;
        out[i / 2] = (unsigned char)(i % 2 ? (out[i / 2] | v) : v << 4);
    }
    return 0;
}

PL_EXPORT int pl_key_create(const char *path, pl_sign_key *key, pl_err *err)
{
    assert(path);
    if (sodium_init() < 0)
        return pl__err(err, PL_EIO, "%s: cannot initialise the random source", path);
    pl_sign_key k;
    unsigned char seed[32];
    randombytes_buf(seed, sizeof seed);
    pl_sign_key_from_seed(&k, seed);
    char pub[65], sd[65];
    hex_of(pub, k.public_key, 32);
    hex_of(sd, seed, 32);
    sodium_memzero(seed, sizeof seed);
    size_t tl = strlen(path) + 32;
    char *tmp = malloc(tl);
    if (!tmp)
        return pl__err(err, PL_ENOMEM, "%s: out of memory", path);
    snprintf(tmp, tl, "%s.%ld.partial", path, (long)getpid());
    int fd = open(tmp, O_WRONLY | O_CREAT | O_EXCL | O_CLOEXEC, 0600);
    int rc = PL_OK;
    if (fd < 0) {
        rc = pl__err(err, PL_EIO, "%s: cannot create the key file: %s", path, strerror(errno));
    } else {
        char text[256];
        int n = snprintf(text, sizeof text, "plyledger-key 1\nkind ed25519\npublic %s\nseed %s\n",
                         pub, sd);
        /* the mode asked for may have been narrowed by the umask, never widened */
        if (fchmod(fd, 0600) != 0 || write(fd, text, (size_t)n) != n || fsync(fd) != 0)
            rc = pl__err(err, PL_EIO, "%s: cannot write the key file: %s", path,
                         strerror(errno));
        sodium_memzero(text, sizeof text);
        if (close(fd) != 0 && !rc)
            rc = pl__err(err, PL_EIO, "%s: cannot write the key file: %s", path,
                         strerror(errno));
        /* link, not rename: an existing key file is never replaced */
        if (!rc && link(tmp, path) != 0)
            rc = errno == EEXIST
                     ? pl__err(err, PL_EEXISTS, "%s: a file is already there; a key file is "
                               "never replaced", path)
                     : pl__err(err, PL_EIO, "%s: cannot create the key file: %s", path,
                               strerror(errno));
        unlink(tmp);
    }
    free(tmp);
    sodium_memzero(sd, sizeof sd);
    if (!rc && key)
        *key = k;
    sodium_memzero(&k, sizeof k);
    return rc;
}

PL_EXPORT int pl_key_load(const char *path, pl_sign_key *key, pl_err *err)
{
    assert(path && key);
    int fd = open(path, O_RDONLY | O_CLOEXEC | O_NOFOLLOW);
    if (fd < 0 && errno == ELOOP)
        fd = open(path, O_RDONLY | O_CLOEXEC);
    if (fd < 0)
        return errno == ENOENT
                   ? pl__err(err, PL_ENOTFOUND, "%s: no such key file", path)
                   : pl__err(err, PL_EIO, "%s: cannot open the key file: %s", path,
                             strerror(errno));
    struct stat sb;
    int rc = PL_OK;
    if (fstat(fd, &sb) != 0)
        rc = pl__err(err, PL_EIO, "%s: cannot read the key file: %s", path, strerror(errno));
    else if (!S_ISREG(sb.st_mode))
        rc = pl__err(err, PL_EREFUSED, "%s: not a regular file, so not a key file", path);
    else if (sb.st_mode & 077)
        rc = pl__err(err, PL_EREFUSED,
                     "%s: the key file may be read or written by others (mode %03o); a secret "
                     "key must be its owner's alone: chmod 600 it, and make a new key if others "
                     "could have read it",
                     path, (unsigned)(sb.st_mode & 0777));
    char text[512];
    ssize_t n = rc ? 0 : read(fd, text, sizeof text - 1);
    close(fd);
    if (rc)
        return rc;
    if (n < 0)
        return pl__err(err, PL_EIO, "%s: cannot read the key file: %s", path, strerror(errno));
    text[n] = '\0';
    char pub[80], sd[80];
    unsigned char seed[32], want[32];
    int fields = sscanf(text, "plyledger-key 1\nkind ed25519\npublic %79s\nseed %79s", pub, sd);
    sodium_memzero(text, sizeof text);
    if (fields != 2 || from_hex(want, 32, pub) || from_hex(seed, 32, sd)) {
        sodium_memzero(sd, sizeof sd);
        return pl__err(err, PL_EFORMAT,
                       "%s: not a plyledger key file (expected the lines 'plyledger-key 1', "
                       "'kind ed25519', 'public' and 'seed' with 64 hex digits each)",
                       path);
    }
    sodium_memzero(sd, sizeof sd);
    pl_sign_key_from_seed(key, seed);
    sodium_memzero(seed, sizeof seed);
    if (memcmp(key->public_key, want, 32) != 0) {
        sodium_memzero(key, sizeof *key);
        return pl__err(err, PL_EFORMAT,
                       "%s: the key file's public key does not follow from its seed: the file "
                       "was altered",
                       path);
    }
    return PL_OK;
}
