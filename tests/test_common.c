/*
 * test_common.c - status text, error buffers and the version string.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <stdio.h>
#include <string.h>

#include "common/common_int.h"
#include "plyledger/version.h"

/* Every code has its own text, and codes keep their published values. */
static void test_common__codes_have_fixed_values_and_distinct_text(void **state)
{
    (void)state;
    assert_int_equal(PL_OK, 0);
    assert_int_equal(PL_EINVAL, -1);
    assert_int_equal(PL_ENOMEM, -2);
    assert_int_equal(PL_EIO, -3);
    assert_int_equal(PL_EFORMAT, -4);
    assert_int_equal(PL_ENOTFOUND, -5);
    assert_int_equal(PL_EEXISTS, -6);
    assert_int_equal(PL_EDB, -7);
    assert_int_equal(PL_ENOMATCH, -8);
    assert_int_equal(PL_EVERSION, -9);
    assert_int_equal(PL_ENOTSTORE, -10);
    for (int a = 0; a >= PL_EREADONLY; a--) {
        assert_string_not_equal(pl_strerror(a), "unknown error");
        for (int b = a - 1; b >= PL_EREADONLY; b--)
            assert_string_not_equal(pl_strerror(a), pl_strerror(b));
    }
    assert_string_equal(pl_strerror(-999), "unknown error");
}

static void test_common__err_formats_one_line_and_returns_code(void **state)
{
    (void)state;
    pl_err err = { 0 };
    int rc = pl__err(&err, PL_EFORMAT, "%s: bad\nthing %d", "x.png", 7);
    assert_int_equal(rc, PL_EFORMAT);
    assert_int_equal(err.code, PL_EFORMAT);
    assert_string_equal(err.msg, "x.png: bad thing 7");
    assert_string_equal(pl_err_message(&err, rc), "x.png: bad thing 7");
    pl__err_clear(&err);
    assert_string_equal(pl_err_message(&err, PL_EIO), pl_strerror(PL_EIO));
    assert_int_equal(pl__err(NULL, PL_EIO, "ignored"), PL_EIO);
    assert_string_equal(pl_err_message(NULL, PL_ENOMEM), "out of memory");
}

static void test_common__long_messages_are_truncated_not_overflowed(void **state)
{
    (void)state;
    pl_err err = { 0 };
    char big[2000];
    memset(big, 'a', sizeof big - 1);
    big[sizeof big - 1] = '\0';
    pl__err(&err, PL_EINVAL, "%s", big);
    assert_int_equal(strlen(err.msg), PL_ERR_MSG_SIZE - 1);
}

static void test_common__copy_text_refuses_what_does_not_fit(void **state)
{
    (void)state;
    char buf[4];
    pl_err err = { 0 };
    assert_int_equal(pl__copy_text(buf, sizeof buf, "abc", "code", &err), PL_OK);
    assert_string_equal(buf, "abc");
    assert_int_equal(pl__copy_text(buf, sizeof buf, "abcd", "code", &err), PL_EINVAL);
    assert_non_null(strstr(err.msg, "code is too long"));
    assert_int_equal(pl__copy_text(buf, sizeof buf, NULL, "code", &err), PL_OK);
    assert_string_equal(buf, "");
}

static void test_common__version_matches_the_build(void **state)
{
    (void)state;
    assert_string_equal(pl_version(), PL_VERSION_STRING);
    char want[32];
    snprintf(want, sizeof want, "%d.%d.%d", PL_VERSION_MAJOR, PL_VERSION_MINOR, PL_VERSION_PATCH);
    assert_string_equal(pl_version(), want);
}

static void test_common__basename_names_the_file(void **state)
{
    (void)state;
    assert_string_equal(pl__basename("/a/b/c.png"), "c.png");
    assert_string_equal(pl__basename("c.png"), "c.png");
    assert_string_equal(pl__basename("dir/"), "dir/");
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_common__codes_have_fixed_values_and_distinct_text),
        cmocka_unit_test(test_common__err_formats_one_line_and_returns_code),
        cmocka_unit_test(test_common__long_messages_are_truncated_not_overflowed),
        cmocka_unit_test(test_common__copy_text_refuses_what_does_not_fit),
        cmocka_unit_test(test_common__version_matches_the_build),
        cmocka_unit_test(test_common__basename_names_the_file),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
