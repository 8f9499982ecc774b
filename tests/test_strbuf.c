/*
 * test_strbuf.c - the growing string (lib/common/strbuf.c).
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <wchar.h>

#include "common/strbuf_int.h"

static void test_strbuf__appends_and_formats(void **state)
{
    (void)state;
    pl_strbuf b = PL_STRBUF_INIT;
    assert_string_equal(pl_strbuf__str(&b), "");
    assert_int_equal(pl_strbuf__len(&b), 0);
    pl_strbuf__append(&b, "site ");
    pl_strbuf__printf(&b, "%s-%02d: %.3f mm", "F", 7, 1.25);
    pl_strbuf__repeat(&b, '.', 3);
    pl_strbuf__append_n(&b, "xyz", 2);
    pl_strbuf__append(&b, "");
    pl_strbuf__repeat(&b, ' ', 0);
    assert_string_equal(pl_strbuf__str(&b), "site F-07: 1.250 mm...xy");
    assert_int_equal(pl_strbuf__len(&b), strlen("site F-07: 1.250 mm...xy"));
    assert_false(pl_strbuf__failed(&b));
    char *s = pl_strbuf__detach(&b);
    assert_string_equal(s, "site F-07: 1.250 mm...xy");
    free(s);
    /* detached, the buffer is empty and usable again */
    assert_string_equal(pl_strbuf__str(&b), "");
    pl_strbuf__append(&b, "again");
    assert_string_equal(pl_strbuf__str(&b), "again");
    pl_strbuf__release(&b);
    assert_int_equal(pl_strbuf__len(&b), 0);
    /* nothing appended: an empty string of its own */
    s = pl_strbuf__detach(&b);
    assert_non_null(s);
    assert_string_equal(s, "");
    free(s);
}

/* Long text, appended a piece at a time and in one formatted piece larger
 * than any fixed buffer, comes out whole, NULs of append_n included. */
static void test_strbuf__grows_past_any_fixed_size(void **state)
{
    (void)state;
    pl_strbuf b;
    pl_strbuf__init(&b);
    size_t n = 0;
    for (int i = 0; i < 20000; i++) {
        pl_strbuf__printf(&b, "%d,", i);
        char tmp[16];
        n += (size_t)snprintf(tmp, sizeof tmp, "%d,", i);
    }
    assert_int_equal(pl_strbuf__len(&b), n);
    assert_int_equal(strlen(pl_strbuf__str(&b)), n);
    assert_memory_equal(pl_strbuf__str(&b), "0,1,2,", 6);
    assert_string_equal(pl_strbuf__str(&b) + n - 6, "19999,");
    char *big = malloc(100001);
    assert_non_null(big);
    memset(big, 'a', 100000);
    big[100000] = '\0';
    pl_strbuf__printf(&b, "[%s]", big);
    assert_int_equal(pl_strbuf__len(&b), n + 100002);
    assert_int_equal(pl_strbuf__str(&b)[n], '[');
    assert_int_equal(pl_strbuf__str(&b)[n + 100001], ']');
    assert_int_equal(pl_strbuf__str(&b)[n + 100002], '\0');
    free(big);
    pl_strbuf__release(&b);
    pl_strbuf__append_n(&b, "a\0b", 3);
    assert_int_equal(pl_strbuf__len(&b), 3);
    assert_memory_equal(pl_strbuf__str(&b), "a\0b", 4);
    pl_strbuf__release(&b);
}

/* A failed append (here a wide character the C locale cannot encode,
 * which makes vsnprintf fail with EILSEQ) sticks: later appends do
 * nothing and detach gives NULL; release makes the buffer usable again. */
static void test_strbuf__failure_is_sticky(void **state)
{
    (void)state;
    static const wchar_t accented[] = { 0xe9, 0 };
    pl_strbuf b = PL_STRBUF_INIT;
    pl_strbuf__append(&b, "before ");
    pl_strbuf__printf(&b, "%ls", accented);
    assert_true(pl_strbuf__failed(&b));
    assert_int_equal(pl_strbuf__len(&b), 0);
    assert_string_equal(pl_strbuf__str(&b), "");
    pl_strbuf__append(&b, "after");
    pl_strbuf__printf(&b, "%d", 1);
    pl_strbuf__repeat(&b, 'x', 4);
    assert_true(pl_strbuf__failed(&b));
    assert_string_equal(pl_strbuf__str(&b), "");
    assert_null(pl_strbuf__detach(&b));
    /* detach reset it */
    assert_false(pl_strbuf__failed(&b));
    pl_strbuf__printf(&b, "%ls", accented);
    assert_true(pl_strbuf__failed(&b));
    pl_strbuf__release(&b);
    assert_false(pl_strbuf__failed(&b));
    pl_strbuf__append(&b, "fine");
    char *s = pl_strbuf__detach(&b);
    assert_string_equal(s, "fine");
    free(s);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_strbuf__appends_and_formats),
        cmocka_unit_test(test_strbuf__grows_past_any_fixed_size),
        cmocka_unit_test(test_strbuf__failure_is_sticky),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
