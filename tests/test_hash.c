/*
 * test_hash.c - SHA-256 against the FIPS 180-4 example vectors.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <string.h>

#include "plyledger/hash.h"

static void hex_of(char out[65], const void *data, size_t len)
{
    unsigned char d[32];
    pl_sha256(d, data, len);
    pl_sha256_hex(out, d);
}

/* FIPS 180-4 / NIST CSRC example "SHA256.pdf": SHA-256("abc"). */
static void test_hash__fips_abc(void **state)
{
    (void)state;
    char hex[65];
    hex_of(hex, "abc", 3);
    assert_string_equal(hex, "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
}

/* SHA-256 of the empty message (FIPS 180-4 padding of a zero-length
 * message; the value published with NIST's SHA test vectors). */
static void test_hash__fips_empty(void **state)
{
    (void)state;
    char hex[65];
    hex_of(hex, "", 0);
    assert_string_equal(hex, "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855");
}

/* NIST example: the two-block message
 * "abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq". */
static void test_hash__fips_two_blocks(void **state)
{
    (void)state;
    const char *msg = "abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq";
    char hex[65];
    hex_of(hex, msg, strlen(msg));
    assert_string_equal(hex, "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1");
}

/* Feeding in pieces gives the one-shot digest. */
static void test_hash__incremental_equals_one_shot(void **state)
{
    (void)state;
    const char *msg = "abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq";
    unsigned char a[32], b[32];
    pl_sha256(a, msg, strlen(msg));
    pl_sha256_ctx ctx;
    pl_sha256_init(&ctx);
    for (size_t i = 0; i < strlen(msg); i += 7)
        pl_sha256_update(&ctx, msg + i, strlen(msg) - i < 7 ? strlen(msg) - i : 7);
    pl_sha256_final(&ctx, b);
    assert_memory_equal(a, b, 32);
}

static void test_hash__hex_round_trip_and_rejects_bad_hex(void **state)
{
    (void)state;
    unsigned char d[32], e[32];
    char hex[65];
    pl_sha256(d, "abc", 3);
    pl_sha256_hex(hex, d);
    assert_int_equal(pl_sha256_from_hex(e, hex), PL_OK);
    assert_memory_equal(d, e, 32);
    hex[10] = 'g';
    assert_int_equal(pl_sha256_from_hex(e, hex), PL_EFORMAT);
    assert_int_equal(pl_sha256_from_hex(e, "abcd"), PL_EFORMAT);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_hash__fips_abc),
        cmocka_unit_test(test_hash__fips_empty),
        cmocka_unit_test(test_hash__fips_two_blocks),
        cmocka_unit_test(test_hash__incremental_equals_one_shot),
        cmocka_unit_test(test_hash__hex_round_trip_and_rejects_bad_hex),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
