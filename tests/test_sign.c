/*
 * test_sign.c - Ed25519 signatures and key files (plyledger/sign.h).
 *
 * External checks: RFC 8032 section 7.1, the Ed25519 test vectors TEST 1
 * (an empty message) and TEST 2 (one byte, 0x72): the public key from the
 * secret key (the seed) and the signature, byte for byte.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <dirent.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "plyledger/sign.h"
#include "testutil.h"

static void unhex(unsigned char *out, const char *hex)
{
    size_t n = strlen(hex) / 2;
    for (size_t i = 0; i < n; i++) {
        unsigned v;
        assert_int_equal(sscanf(hex + 2 * i, "%2x", &v), 1);
        out[i] = (unsigned char)v;
    }
}

/* RFC 8032 section 7.1, TEST 1 and TEST 2. */
static void test_sign__rfc8032_vectors(void **state)
{
    (void)state;
    static const struct {
        const char *secret, *public_key, *message, *signature;
    } v[] = {
        { "9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60",
          "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a", "",
          "e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bacc6"
          "1e39701cf9b46bd25bf5f0595bbe24655141438e7a100b" },
        { "4ccd089b28ff96da9db6c346ec114e0f5b8a319f35aba624da8cf6ed4fb8a6fb",
          "3d4017c3e843895a92b70aa74d1b7ebc9c982ccf2ec4968cc0cd55f12af4660c", "72",
          "92a009a9f0d4cab8720e820b5f642540a2b27b5416503f8fb3762223ebdb69da085ac1e43e15996e45"
          "8f3613d0f11d8c387b2eaeb4302aeeb00d291612bb0c00" },
    };
    for (size_t i = 0; i < sizeof v / sizeof v[0]; i++) {
        unsigned char seed[32], pub[32], msg[8], want[64], sig[64];
        unhex(seed, v[i].secret);
        unhex(pub, v[i].public_key);
        unhex(want, v[i].signature);
        size_t n = strlen(v[i].message) / 2;
        unhex(msg, v[i].message);
        pl_sign_key k;
        pl_sign_key_from_seed(&k, seed);
        assert_memory_equal(k.public_key, pub, 32);
        pl_sign(sig, msg, n, &k);
        assert_memory_equal(sig, want, 64);
        assert_int_equal(pl_sign_check(sig, msg, n, pub), 1);
        /* one bit of the signature, or of the message, and it fails */
        sig[17] ^= 0x04;
        assert_int_equal(pl_sign_check(sig, msg, n, pub), 0);
        sig[17] ^= 0x04;
        msg[n] = 0x01;
        assert_int_equal(pl_sign_check(sig, msg, n + 1, pub), 0);
        /* a signature checked against another key fails */
        pub[0] ^= 1;
        assert_int_equal(pl_sign_check(sig, msg, n, pub), 0);
    }
}

/* A key file: created 0600 and never replaced; read back whole; refused
 * when others may read it, when altered, or when it is not one. */
static void test_sign__key_files(void **state)
{
    (void)state;
    char *dir = tu_tmpdir(), *path = tu_path(dir, "engineer.key");
    pl_err err = { 0 };
    pl_sign_key k, back;
    TU_OK(pl_key_create(path, &k, &err));
    struct stat sb;
    assert_int_equal(stat(path, &sb), 0);
    assert_int_equal(sb.st_mode & 0777, 0600);
    TU_OK(pl_key_load(path, &back, &err));
    assert_memory_equal(back.public_key, k.public_key, 32);
    assert_memory_equal(back.secret_key, k.secret_key, 64);
    char fp[PL_SIGN_FINGERPRINT_SIZE];
    pl_sign_fingerprint(fp, k.public_key);
    assert_int_equal(strlen(fp), 32);
    /* never replaced */
    assert_int_equal(pl_key_create(path, NULL, &err), PL_EEXISTS);
    tu_assert_msg_has(err.msg, "never replaced");
    TU_OK(pl_key_load(path, &back, &err));
    assert_memory_equal(back.public_key, k.public_key, 32);
    /* readable by others */
    assert_int_equal(chmod(path, 0644), 0);
    assert_int_equal(pl_key_load(path, &back, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, "mode 644");
    assert_int_equal(chmod(path, 0660), 0);
    assert_int_equal(pl_key_load(path, &back, &err), PL_EREFUSED);
    assert_int_equal(chmod(path, 0600), 0);
    /* its public key altered */
    size_t n;
    char *text = (char *)tu_read_file(path, &n);
    assert_non_null(text);
    char *p = strstr(text, "public ") + 7;
    *p = *p == '0' ? '1' : '0';
    assert_int_equal(tu_write_file(path, text, n), 0);
    assert_int_equal(chmod(path, 0600), 0);
    assert_int_equal(pl_key_load(path, &back, &err), PL_EFORMAT);
    tu_assert_msg_has(err.msg, "does not follow from its seed");
    free(text);
    /* not a key file; no file */
    assert_int_equal(tu_write_file(path, "hello\n", 6), 0);
    assert_int_equal(chmod(path, 0600), 0);
    assert_int_equal(pl_key_load(path, &back, &err), PL_EFORMAT);
    tu_assert_msg_has(err.msg, "not a plyledger key file");
    char *none = tu_path(dir, "none.key");
    assert_int_equal(pl_key_load(none, &back, &err), PL_ENOTFOUND);
    /* nothing left beside it: the folder holds the key file alone */
    DIR *d = opendir(dir);
    assert_non_null(d);
    int entries = 0;
    for (struct dirent *e = readdir(d); e; e = readdir(d))
        entries += e->d_name[0] != '.';
    closedir(d);
    assert_int_equal(entries, 1);
    free(none);
    free(path);
    tu_rmtree(dir);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_sign__rfc8032_vectors),
        cmocka_unit_test(test_sign__key_files),
    };
    return cmocka_run_group_tests_name("sign", tests, NULL, NULL);
}
