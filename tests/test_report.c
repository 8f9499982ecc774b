/*
 * test_report.c - the disposition report (plyledger/report.h).
 *
 * The report is checked here for what it must hold and how it is built:
 * one document, no script, no reference outside it, every picture a PNG
 * (its signature, ISO/IEC 15948) that decodes, the record's text escaped
 * as HTML5 requires (the WHATWG HTML standard, "Escaping a string"), the
 * caution, the example marking, the missed site and the finding. The CLI
 * tests render reports in Debian's chromium and parse them with html5lib's
 * strict parser (tests/cli/check_report.py).
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <sodium.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plyledger.h"
#include "testsite.h"
#include "testutil.h"

static size_t count(const char *hay, const char *needle)
{
    size_t n = 0;
    for (const char *p = hay; (p = strstr(p, needle)); p += strlen(needle))
        n++;
    return n;
}

/* Every embedded picture: base64 that decodes to a PNG. Returns their number. */
static size_t check_images(const char *html)
{
    static const char tag[] = "src=\"data:image/png;base64,";
    size_t n = 0;
    for (const char *p = html; (p = strstr(p, tag)); n++) {
        p += strlen(tag);
        const char *end = strchr(p, '"');
        assert_non_null(end);
        size_t len = (size_t)(end - p), cap = len;
        unsigned char *bin = malloc(cap);
        assert_non_null(bin);
        size_t got = 0;
        assert_int_equal(sodium_base642bin(bin, cap, p, len, NULL, &got, NULL,
                                           sodium_base64_VARIANT_ORIGINAL), 0);
        assert_true(got > 100);
        assert_memory_equal(bin, "\x89PNG\r\n\x1a\n", 8);
        /* its IHDR: a width and height that are not 0 */
        assert_memory_equal(bin + 12, "IHDR", 4);
        assert_true(bin[16] | bin[17] | bin[18] | bin[19]);
        free(bin);
        p = end;
    }
    return n;
}

static void check_document(const char *html, size_t len)
{
    assert_int_equal(strlen(html), len);
    assert_true(strncmp(html, "<!DOCTYPE html>\n<html lang=\"en\">", 32) == 0);
    assert_int_equal(count(html, "<h1>"), 1);
    assert_int_equal(count(html, "<script"), 0);
    assert_int_equal(count(html, "http:"), 0);
    assert_int_equal(count(html, "https:"), 0);
    assert_non_null(strstr(html, "@media print{@page{size:A4"));
    assert_non_null(strstr(html, "does not replace"));
    assert_non_null(strstr(html, "</body>\n</html>\n"));
    assert_int_equal(count(html, "<section"), count(html, "</section>"));
    assert_int_equal(count(html, "<table"), count(html, "</table>"));
}

/* C01 (no growth) grows; C03 is not inspected at the check; the site's
 * description holds the characters HTML gives a meaning. */
static void test_report__site_and_check_reports_hold_the_record(void **state)
{
    ts_fixture *f = *state;
    pl_err err = { 0 };
    pl_site s;
    TU_OK(pl_store_get_site(f->store, TS_SERIAL, "C01", &s, &err));
    ts_add_site(f->store, "C03");
    /* C01: a disc that grows and one that does not, so that the site has
     * several changes (their listing grows the report's vectors) */
    ts_disc d0 = { 64, 48, 4.0, 1.0 }, d1 = { 64, 48, 6.0, 1.0 }, d2 = { 64, 48, 7.5, 1.0 };
    ts_disc c01[3][2] = { { d0, { 24, 20, 3.0, 1.0 } },
                          { d1, { 24, 20, 3.0, 1.0 } },
                          { d2, { 24, 20, 3.0, 1.0 } } };
    ts_inspect_at(f->store, "C01", "baseline", "2011-03-01", NULL, 10, 5, 0, 0, 0, c01[0], 2, 1);
    ts_inspect_at(f->store, "C02", "baseline", "2011-03-01", NULL, 10, 5, 0, 0, 0, &d0, 1, 2);
    ts_inspect_at(f->store, "C03", "baseline", "2011-03-01", NULL, 10, 5, 0, 0, 0, &d0, 1, 3);
    pl_compare_options o = ts_options();
    pl_site_comparison *sc = NULL;
    ts_inspect_at(f->store, "C01", "scheduled", "2015-03-01", "HC-1", 9000, 6000, 0, 1.2, -0.7,
                  c01[1], 2, 4);
    TU_OK(pl_compare_site(&sc, f->store, TS_SERIAL, "C01", 0, &o, &err));
    pl_site_comparison_free(sc);
    ts_inspect_at(f->store, "C01", "scheduled", "2019-03-01", "HC-2", 18000, 12000, 0, -0.9,
                  0.5, c01[2], 2, 5);
    ts_inspect_at(f->store, "C02", "scheduled", "2019-03-02", "HC-2", 18000, 12000, 0, 0.4,
                  0.3, &d0, 1, 6);
    pl_check_comparison *cc = NULL;
    TU_OK(pl_compare_check(&cc, f->store, TS_SERIAL, "HC-2", &o, NULL, NULL, &err));
    assert_int_equal(cc->missed, 1);
    pl_id cid = cc->sites[0].sc->comparison_id;
    assert_string_equal(cc->sites[0].code, "C01");
    pl_check_comparison_free(cc);

    pl_report_options ro = PL_REPORT_OPTIONS_INIT;
    ro.generated_on = "2026-12-04";
    char *html = NULL;
    size_t len = 0;
    TU_OK(pl_report_site(&html, &len, f->store, cid, &ro, &err));
    check_document(html, len);
    /* the four maps and the two tracks' plots */
    assert_int_equal(check_images(html), 6);
    assert_non_null(strstr(html, "Track 2"));
    assert_non_null(strstr(html, "CMP-0001 site C01: scheduled of 2019-03-01 against the "
                                 "baseline of 2011-03-01"));
    assert_non_null(strstr(html, "EXCEEDS"));
    assert_non_null(strstr(html, "EXAMPLE VALUES, NOT APPROVED DATA"));
    assert_non_null(strstr(html, "Record verified:"));
    assert_non_null(strstr(html, "Track 1"));
    assert_non_null(strstr(html, "linearly"));
    assert_non_null(strstr(html, "2026-12-04"));
    assert_non_null(strstr(html, "TEST-DOC-1 (invented)"));
    assert_non_null(strstr(html, "No disposition has been recorded"));
    assert_null(strstr(html, "SIMULATED DATA"));
    free(html);

    /* not verified: it says so */
    ro.verify = 0;
    TU_OK(pl_report_site(&html, &len, f->store, cid, &ro, &err));
    assert_non_null(strstr(html, "Record not verified"));
    free(html);
    ro.verify = 1;

    /* the check: the missed site first, C01's section, C02 (stable) a row */
    TU_OK(pl_report_check(&html, &len, f->store, TS_SERIAL, "hc-2", &ro, NULL, NULL, &err));
    check_document(html, len);
    const char *missed = strstr(html, "NOT INSPECTED in check hc-2 of CMP-0001: 1 site of 3 (C03)");
    assert_non_null(missed);
    assert_true(missed < strstr(html, "Coverage of the check"));
    assert_int_equal(count(html, "<section class=\"site\""), 1);
    assert_non_null(strstr(html, "id=\"site-C01\""));
    assert_int_equal(check_images(html), 6);
    free(html);

    /* refusals */
    assert_int_equal(pl_report_site(&html, &len, f->store, 999999, &ro, &err), PL_ENOTFOUND);
    assert_null(html);
    tu_assert_msg_has(err.msg, "999999");
    assert_int_equal(pl_report_check(&html, &len, f->store, TS_SERIAL, "HC-9", &ro, NULL, NULL,
                                     &err), PL_ENOTFOUND);
    pl_report_options bad = PL_REPORT_OPTIONS_INIT;
    bad.version = 7;
    assert_int_equal(pl_report_site(&html, &len, f->store, cid, &bad, &err), PL_EINVAL);
}

/* Text from the record is escaped: a site described with markup shows it
 * as text. */
static void test_report__record_text_is_escaped(void **state)
{
    ts_fixture *f = *state;
    pl_err err = { 0 };
    pl_site s;
    TU_OK(pl_store_get_site(f->store, TS_SERIAL, "C02", &s, &err));
    snprintf(s.description, sizeof s.description, "door <frame> & \"seal\" 'aft'");
    TU_OK(pl_store_correct_site(f->store, &s, "description of the test", NULL, &err));
    ts_disc d = { 64, 48, 4.0, 1.0 };
    ts_inspect(f->store, "C02", "baseline", "2011-03-01", NULL, 0, 0, 0, &d, 1, 7);
    ts_inspect(f->store, "C02", "scheduled", "2016-03-01", "HC-1", 0, 0.5, 0.5, &d, 1, 8);
    pl_compare_options o = ts_options();
    pl_site_comparison *sc = NULL;
    TU_OK(pl_compare_site(&sc, f->store, TS_SERIAL, "C02", 0, &o, &err));
    pl_id cid = sc->comparison_id;
    pl_site_comparison_free(sc);
    char *html = NULL;
    size_t len = 0;
    TU_OK(pl_report_site(&html, &len, f->store, cid, NULL, &err));
    assert_non_null(strstr(html, "door &lt;frame&gt; &amp; &quot;seal&quot; &#39;aft&#39;"));
    assert_null(strstr(html, "<frame>"));
    free(html);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_report__site_and_check_reports_hold_the_record,
                                        ts_setup, ts_teardown),
        cmocka_unit_test_setup_teardown(test_report__record_text_is_escaped, ts_setup,
                                        ts_teardown),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
