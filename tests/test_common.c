/*
 * test_common.c - status text, error buffers and the version string (against
 * the version meson.build declares).
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "common/common_int.h"
#include "plyledger/version.h"
#include "testutil.h"

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

/* The version declared in project() of the source tree's meson.build
 * ($PL_SOURCE_ROOT, set by the test runner), read from the file: the
 * quoted value after the first "version". */
static void project_version(char *out, size_t cap)
{
    const char *root = getenv("PL_SOURCE_ROOT");
    if (!root)
        fail_msg("PL_SOURCE_ROOT must be set (run through meson test)");
    char *path = tu_path(root, "meson.build");
    size_t len = 0;
    char *text = (char *)tu_read_file(path, &len);
    if (!text)
        fail_msg("cannot read %s", path);
    char *nul = realloc(text, len + 1);
    assert_non_null(nul);
    text = nul;
    text[len] = '\0';
    const char *v = strstr(text, "version");
    const char *q = v ? strchr(v, '\'') : NULL;
    const char *e = q ? strchr(q + 1, '\'') : NULL;
    if (!e || (size_t)(e - q - 1) >= cap)
        fail_msg("%s: no version : '...' in project()", path);
    memcpy(out, q + 1, (size_t)(e - q - 1));
    out[e - q - 1] = '\0';
    free(text);
    free(path);
}

/* The library reports the version meson.build declares, and the header's
 * numbers are its parts. */
static void test_common__version_matches_the_build(void **state)
{
    (void)state;
    char want[32];
    project_version(want, sizeof want);
    assert_string_equal(pl_version(), want);
    assert_string_equal(PL_VERSION_STRING, want);
    char parts[32];
    snprintf(parts, sizeof parts, "%d.%d.%d", PL_VERSION_MAJOR, PL_VERSION_MINOR, PL_VERSION_PATCH);
    assert_string_equal(parts, want);
}

static void test_common__basename_names_the_file(void **state)
{
    (void)state;
    assert_string_equal(pl__basename("/a/b/c.png"), "c.png");
    assert_string_equal(pl__basename("c.png"), "c.png");
    assert_string_equal(pl__basename("dir/"), "dir/");
}

/* Day numbers from Python's datetime (date(y, m, d) - date(1970, 1, 1)).days,
 * the proleptic Gregorian calendar; every day of years 1..9999 goes and
 * comes back. */
static void test_common__dates_count_days_as_the_calendar_does(void **state)
{
    (void)state;
    static const struct { const char *date; long days; } known[] = {
        { "0001-01-01", -719162 }, { "1900-02-28", -25509 }, { "1900-03-01", -25508 },
        { "1970-01-01", 0 },       { "2000-02-29", 11016 },  { "2000-03-01", 11017 },
        { "2009-04-22", 14356 },   { "2026-12-04", 20791 },  { "9999-12-31", 2932896 },
    };
    for (size_t i = 0; i < sizeof known / sizeof *known; i++) {
        long d = 0;
        assert_int_equal(pl__date_days(&d, known[i].date), PL_OK);
        assert_int_equal(d, known[i].days);
    }
    char buf[16], prev[16] = "";
    for (long d = -719162; d <= 2932896; d++) {
        long back = 0;
        assert_int_equal(pl__days_date(buf, sizeof buf, d), PL_OK);
        assert_int_equal(pl__date_days(&back, buf), PL_OK);
        assert_int_equal(back, d);
        assert_true(strcmp(buf, prev) > 0);
        memcpy(prev, buf, sizeof buf);
    }
    static const char *bad[] = { "1900-02-29", "2021-13-01", "2021-04-31", "0000-01-01",
                                 "2021-1-01", "2021/01/01", "", "2021-01-01x" };
    for (size_t i = 0; i < sizeof bad / sizeof *bad; i++) {
        long d;
        assert_int_equal(pl__date_days(&d, bad[i]), PL_EINVAL);
    }
    assert_int_equal(pl__days_date(buf, sizeof buf, 2932897), PL_EINVAL);
    assert_int_equal(pl__days_date(buf, sizeof buf, -719163), PL_EINVAL);
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
        cmocka_unit_test(test_common__dates_count_days_as_the_calendar_does),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
