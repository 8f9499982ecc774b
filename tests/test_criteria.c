/*
 * test_criteria.c - criteria sets: the file read and checked (every
 * refusal one line naming the file, the field and what was expected), the
 * canonical form, the globs, the rule that governs a site, the no-growth
 * kind, and the record's append-only revisions.
 *
 * External references: the globs against POSIX fnmatch(3) (glibc, with the
 * GNU FNM_CASEFOLD flag) on random patterns of '*', '?' and letters; JSON
 * as RFC 8259 defines it (a document is one value; numbers cannot be NaN
 * or infinite, so 1e999 stands for an infinite value cJSON reads); UTF-8
 * well-formedness as RFC 3629 section 4 defines it; SHA-256 by libsodium
 * (checked against FIPS 180-4 vectors in test_hash.c). The no-growth
 * approach of composite certification: FAA AC 20-107B, EASA AMC 20-29,
 * MIL-HDBK-17-3F.
 */
#define _GNU_SOURCE /* FNM_CASEFOLD */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <fnmatch.h>
#include <math.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "record/store_int.h"
#include "plyledger/criteria.h"
#include "plyledger/hash.h"
#include "testutil.h"

/* A small valid set: a no-growth rule, a growth-limit rule. */
static const char base_set[] =
    "{\n"
    "  \"format\": \"plyledger-criteria\",\n"
    "  \"format_version\": 1,\n"
    "  \"name\": \"TEST-LIMITS\",\n"
    "  \"revision\": \"A\",\n"
    "  \"source_document\": \"TEST-DOC-01\",\n"
    "  \"example_values\": true,\n"
    "  \"repeatability\": { \"area_mm2\": 10, \"basis\": \"TEST-REPEAT\" },\n"
    "  \"note\": \"n\",\n"
    "  \"rules\": [\n"
    "    { \"name\": \"joint\", \"kind\": \"no-growth\", \"method\": \"flash-thermography\",\n"
    "      \"quantity\": \"temperature-contrast\", \"zone\": \"221\", \"contrast_unit\": \"K\",\n"
    "      \"repeatability_contrast\": 0.05, \"min_reportable_area_mm2\": 20,\n"
    "      \"new_reportable_area_mm2\": 20, \"vanished\": \"investigate\" },\n"
    "    { \"name\": \"skin\", \"kind\": \"growth-limit\", \"method\": \"flash-thermography\",\n"
    "      \"quantity\": \"temperature-contrast\", \"contrast_unit\": \"K\",\n"
    "      \"repeatability_contrast\": 0.05, \"repeatability_area_mm2\": 15,\n"
    "      \"min_reportable_area_mm2\": 25, \"new_reportable_area_mm2\": 50,\n"
    "      \"area_growth_mm2\": 40, \"area_growth_percent\": 25, \"contrast_growth\": 0.2,\n"
    "      \"vanished\": \"report\" }\n"
    "  ]\n"
    "}\n";

/* base_set with the first `from` replaced by `to` (malloc'd); fails the
 * test when `from` is not in it. */
static char *edited(const char *from, const char *to)
{
    const char *at = strstr(base_set, from);
    if (!at)
        fail_msg("'%s' is not in the base set", from);
    size_t n = strlen(base_set) - strlen(from) + strlen(to);
    char *s = malloc(n + 1);
    assert_non_null(s);
    size_t k = (size_t)(at - base_set);
    memcpy(s, base_set, k);
    strcpy(s + k, to);
    strcat(s, at + strlen(from));
    return s;
}

static pl_criteria *parse_ok(const char *text)
{
    pl_criteria *c = NULL;
    pl_err err = { 0 };
    TU_OK(pl_criteria_parse(&c, text, strlen(text), "test.json", &err));
    return c;
}

/* ---- reading ---------------------------------------------------------------------------- */

static void test_criteria__reads_every_field(void **state)
{
    (void)state;
    pl_criteria *c = parse_ok(base_set);
    assert_string_equal(c->name, "TEST-LIMITS");
    assert_string_equal(c->revision, "A");
    assert_string_equal(c->source_document, "TEST-DOC-01");
    assert_int_equal(c->example_values, 1);
    assert_true(c->repeatability_area_mm2 == 10.0);
    assert_string_equal(c->repeatability_basis, "TEST-REPEAT");
    assert_string_equal(c->note, "n");
    assert_int_equal(c->nrules, 2);
    const pl_criteria_rule *j = &c->rules[0], *s = &c->rules[1];
    assert_string_equal(j->name, "joint");
    assert_int_equal(j->kind, PL_CRITERIA_NO_GROWTH);
    assert_int_equal(j->scope, PL_CRITERIA_ZONE);
    assert_string_equal(j->pattern, "221");
    assert_true(isnan(j->repeatability_area_mm2));
    assert_true(isnan(j->area_growth_mm2) && isnan(j->area_growth_percent) &&
                isnan(j->contrast_growth));
    assert_int_equal(j->vanished, PL_VANISHED_INVESTIGATE);
    assert_int_equal(s->kind, PL_CRITERIA_GROWTH_LIMIT);
    assert_int_equal(s->scope, PL_CRITERIA_ANY_SITE);
    assert_string_equal(s->pattern, "");
    assert_true(s->repeatability_area_mm2 == 15.0);
    assert_true(s->area_growth_mm2 == 40.0 && s->area_growth_percent == 25.0 &&
                s->contrast_growth == 0.2);
    assert_int_equal(s->vanished, PL_VANISHED_REPORT);
    assert_string_equal(s->contrast_unit, "K");

    /* the digest is SHA-256 of the canonical text */
    unsigned char d[PL_SHA256_SIZE];
    char hex[PL_SHA256_HEX_SIZE];
    pl_sha256(d, c->canonical_json, strlen(c->canonical_json));
    pl_sha256_hex(hex, d);
    assert_string_equal(hex, c->sha256);
    pl_criteria_free(c);
    pl_criteria_free(NULL);
}

/* The canonical text reads back to itself, and a file that differs only in
 * layout, key order and number spelling has the same canonical text. */
static void test_criteria__canonical_form_is_stable(void **state)
{
    (void)state;
    pl_criteria *a = parse_ok(base_set);
    pl_criteria *b = parse_ok(a->canonical_json);
    assert_string_equal(a->canonical_json, b->canonical_json);
    pl_criteria_free(b);
    char *other = edited("\"format\": \"plyledger-criteria\",\n  \"format_version\": 1,",
                         "\"format_version\": 1.0, \"format\":\"plyledger-criteria\",");
    char *other2 = NULL;
    {
        const char *from = "\"area_growth_mm2\": 40";
        char *at = strstr(other, from);
        assert_non_null(at);
        size_t k = (size_t)(at - other);
        other2 = malloc(strlen(other) + 8);
        assert_non_null(other2);
        memcpy(other2, other, k);
        strcpy(other2 + k, "\"area_growth_mm2\": 4.0e1");
        strcat(other2, at + strlen(from));
    }
    b = parse_ok(other2);
    assert_string_equal(a->canonical_json, b->canonical_json);
    assert_string_equal(a->sha256, b->sha256);
    pl_criteria_free(b);
    /* and a change of one value changes it */
    char *changed = edited("\"contrast_growth\": 0.2", "\"contrast_growth\": 0.25");
    b = parse_ok(changed);
    assert_string_not_equal(a->sha256, b->sha256);
    pl_criteria_free(b);
    free(changed);
    free(other);
    free(other2);
    pl_criteria_free(a);
}

/* The sample fleet's set: marked as example values, with a no-growth rule
 * for the door-corner bonded joints and a growth limit for acreage skin. */
static void test_criteria__the_sample_set_reads_and_is_marked(void **state)
{
    (void)state;
    const char *root = getenv("PL_SOURCE_ROOT");
    assert_non_null(root);
    char *path = tu_path(root, "sample-fleet/criteria-example.json");
    pl_criteria *c = NULL;
    pl_err err = { 0 };
    TU_OK(pl_criteria_load(&c, path, &err));
    assert_int_equal(c->example_values, 1);
    assert_non_null(strstr(c->source_document, "EXAMPLE-NDT-LIMITS-01"));
    pl_criteria_limits l;
    TU_OK(pl_criteria_limits_for(&l, c, "flash-thermography", "temperature-contrast", "F02",
                                 "221", &err));
    assert_int_equal(l.kind, PL_CRITERIA_NO_GROWTH);
    assert_int_equal(l.example_values, 1);
    TU_OK(pl_criteria_limits_for(&l, c, "flash-thermography", "temperature-contrast", "F09",
                                 "152", &err));
    assert_int_equal(l.kind, PL_CRITERIA_NO_GROWTH);
    TU_OK(pl_criteria_limits_for(&l, c, "flash-thermography", "temperature-contrast", "F04",
                                 "232", &err));
    assert_int_equal(l.kind, PL_CRITERIA_GROWTH_LIMIT);
    TU_OK(pl_criteria_limits_for(&l, c, "ultrasound-pulse-echo", "ultrasonic-amplitude", "U01",
                                 NULL, &err));
    assert_string_equal(l.contrast_unit, "dB");
    pl_criteria_free(c);
    free(path);
}

/* ---- refusals ----------------------------------------------------------------------------- */

typedef struct refusal {
    const char *what;
    const char *from, *to; /* the edit of base_set */
    int code;
    const char *says[2];   /* the field and what was expected */
} refusal;

static const refusal refusals[] = {
    { "unknown top field", "\"note\": \"n\"", "\"nite\": \"n\"", PL_EFORMAT,
      { "test.json: nite: unknown field", "expected one of format, format_version" } },
    { "unknown rule field (a typo)", "\"area_growth_mm2\": 40", "\"area_grow_mm2\": 40",
      PL_EFORMAT, { "rules[1].area_grow_mm2: unknown field", "area_growth_mm2" } },
    { "infinite number", "\"area_growth_mm2\": 40", "\"area_growth_mm2\": 1e999", PL_EINVAL,
      { "rules[1].area_growth_mm2", "expected a finite number" } },
    { "negative area", "\"min_reportable_area_mm2\": 20", "\"min_reportable_area_mm2\": -5",
      PL_ERANGE, { "rules[0].min_reportable_area_mm2", "expected a number >= 0" } },
    { "percent beyond 1000", "\"area_growth_percent\": 25", "\"area_growth_percent\": 1001",
      PL_ERANGE, { "rules[1].area_growth_percent", "<= 1000" } },
    { "zero percent", "\"area_growth_percent\": 25", "\"area_growth_percent\": 0", PL_ERANGE,
      { "rules[1].area_growth_percent", "expected a number > 0" } },
    { "area beyond 1 m2", "\"area_growth_mm2\": 40", "\"area_growth_mm2\": 2e6", PL_ERANGE,
      { "rules[1].area_growth_mm2", "<= 1e+06 mm^2" } },
    { "absurd contrast", "\"contrast_growth\": 0.2", "\"contrast_growth\": 1e5", PL_ERANGE,
      { "rules[1].contrast_growth", "<= 10000 K" } },
    { "zero repeatability", "\"area_mm2\": 10", "\"area_mm2\": 0", PL_ERANGE,
      { "repeatability.area_mm2", "expected a number > 0" } },
    { "number as string", "\"area_growth_mm2\": 40", "\"area_growth_mm2\": \"40\"", PL_EFORMAT,
      { "rules[1].area_growth_mm2", "expected a number, got a string" } },
    { "marking not boolean", "\"example_values\": true", "\"example_values\": \"yes\"",
      PL_EFORMAT, { "example_values", "expected true or false, got a string" } },
    { "marking missing", "\"example_values\": true,", "", PL_EFORMAT,
      { "example_values", "required field missing" } },
    { "revision missing", "\"revision\": \"A\",", "", PL_EFORMAT,
      { "revision", "required field missing (expected a string)" } },
    { "name empty", "\"name\": \"TEST-LIMITS\"", "\"name\": \"\"", PL_EINVAL,
      { "test.json: name", "expected a non-empty string" } },
    { "name with outer spaces", "\"name\": \"TEST-LIMITS\"", "\"name\": \" TEST \"", PL_EINVAL,
      { "test.json: name", "leading or trailing spaces" } },
    { "control character in a name", "\"name\": \"TEST-LIMITS\"", "\"name\": \"TE\\u0007ST\"",
      PL_EINVAL, { "test.json: name", "control character" } },
    { "revision too long", "\"revision\": \"A\"", "\"revision\": \"ABCDEFGHIJKLMNOPQRSTUVWXYZ\"",
      PL_EINVAL, { "revision", "expected at most 23 characters" } },
    { "key given twice", "\"note\": \"n\"", "\"note\": \"n\", \"note\": \"m\"", PL_EFORMAT,
      { "test.json: note", "given twice" } },
    { "other format", "\"format\": \"plyledger-criteria\"", "\"format\": \"limits\"", PL_EFORMAT,
      { "test.json: format", "expected \"plyledger-criteria\"" } },
    { "newer format version", "\"format_version\": 1", "\"format_version\": 2", PL_EFORMAT,
      { "format_version", "expected 1" } },
    { "unknown method", "\"method\": \"flash-thermography\"", "\"method\": \"x-ray\"",
      PL_EINVAL, { "rules[0].method", "expected a site method" } },
    { "unknown quantity", "\"quantity\": \"temperature-contrast\"", "\"quantity\": \"heat\"",
      PL_EINVAL, { "rules[0].quantity", "expected a quantity of the vocabulary" } },
    { "quantity of another method", "\"quantity\": \"temperature-contrast\"",
      "\"quantity\": \"ultrasonic-amplitude\"", PL_EINVAL,
      { "rules[0].quantity", "expected a quantity that flash-thermography produces" } },
    { "contrast unit of another quantity", "\"contrast_unit\": \"K\"", "\"contrast_unit\": \"dB\"",
      PL_EINVAL, { "rules[0].contrast_unit", "expected a unit of temperature-contrast" } },
    { "unknown kind", "\"kind\": \"no-growth\"", "\"kind\": \"no_growth\"", PL_EINVAL,
      { "rules[0].kind", "expected \"growth-limit\" or \"no-growth\", got \"no_growth\"" } },
    { "unknown vanished rule", "\"vanished\": \"investigate\"", "\"vanished\": \"ignore\"",
      PL_EINVAL, { "rules[0].vanished", "expected \"report\" or \"investigate\"" } },
    { "site and zone", "\"zone\": \"221\"", "\"zone\": \"221\", \"site\": \"F0*\"", PL_EINVAL,
      { "rules[0].zone", "either site or zone" } },
    { "site pattern no code can match", "\"zone\": \"221\"", "\"site\": \"F#1\"", PL_EINVAL,
      { "rules[0].site", "'#' cannot match a site code" } },
    { "no-growth with a growth limit", "\"new_reportable_area_mm2\": 20, \"vanished\"",
      "\"new_reportable_area_mm2\": 20, \"area_growth_mm2\": 30, \"vanished\"", PL_EINVAL,
      { "rules[0].area_growth_mm2", "a no-growth rule takes no growth limit" } },
    { "growth limit without an area limit",
      "\"area_growth_mm2\": 40, \"area_growth_percent\": 25,", "", PL_EFORMAT,
      { "rules[1]", "needs area_growth_mm2 or area_growth_percent" } },
    { "area limit below repeatability", "\"area_growth_mm2\": 40", "\"area_growth_mm2\": 12",
      PL_EINVAL, { "rules[1].area_growth_mm2", "at least the area repeatability (15 mm^2)" } },
    { "contrast limit below repeatability", "\"contrast_growth\": 0.2",
      "\"contrast_growth\": 0.01", PL_EINVAL,
      { "rules[1].contrast_growth", "at least repeatability_contrast (0.05 K)" } },
    { "new smaller than reportable", "\"new_reportable_area_mm2\": 50",
      "\"new_reportable_area_mm2\": 10", PL_EINVAL,
      { "rules[1].new_reportable_area_mm2", "at least min_reportable_area_mm2 (25 mm^2)" } },
    { "duplicate rule name", "\"name\": \"skin\"", "\"name\": \"joint\"", PL_EEXISTS,
      { "rules[1].name", "also the name of rules[0]" } },
    { "duplicate rule selector", "\"zone\": \"221\",", "", PL_EEXISTS,
      { "rules[1]", "the same method, quantity and sites (every site) as rules[0]" } },
    { "rule not an object", "\"rules\": [", "\"rules\": [ 3, ", PL_EFORMAT,
      { "rules[0]", "expected a rule object, got a number" } },
    { "trailing garbage", "  ]\n}\n", "  ]\n}\n{}", PL_EFORMAT,
      { "test.json: bytes after the JSON object at line 23, column 1", "" } },
    { "not JSON", "\"note\": \"n\",", "\"note\": n,", PL_EFORMAT,
      { "test.json: not valid JSON at line 9, column 11", "" } },
    { "invalid UTF-8", "\"note\": \"n\"", "\"note\": \"\xff\"", PL_EFORMAT,
      { "test.json: line 9: byte 0xff at position 12", "is not valid UTF-8" } },
    { "overlong UTF-8", "\"note\": \"n\"", "\"note\": \"\xc0\xaf\"", PL_EFORMAT,
      { "test.json: line 9: byte 0xc0 at position 12", "is not valid UTF-8" } },
};

static void expect_refusal(const char *what, const char *text, size_t len, int code,
                           const char *const says[2])
{
    pl_criteria *c = (pl_criteria *)1;
    pl_err err = { 0 };
    int rc = pl_criteria_parse(&c, text, len, "test.json", &err);
    if (rc != code)
        fail_msg("%s: got %d (%s), expected %d", what, rc, err.msg, code);
    assert_null(c);
    assert_int_equal(err.code, code);
    /* one line that names the file */
    if (strncmp(err.msg, "test.json: ", 11) != 0)
        fail_msg("%s: '%s' does not start with the file", what, err.msg);
    for (int k = 0; k < 2; k++)
        if (says[k][0])
            tu_assert_msg_has(err.msg, says[k]);
}

static void test_criteria__refuses_each_fault_naming_file_and_field(void **state)
{
    (void)state;
    for (size_t i = 0; i < sizeof refusals / sizeof refusals[0]; i++) {
        const refusal *r = &refusals[i];
        char *text = edited(r->from, r->to);
        expect_refusal(r->what, text, strlen(text), r->code, r->says);
        free(text);
    }
}

/* Faults an edit of the text cannot make: an empty rule list, a NUL byte,
 * an oversize file, too many rules, a root that is not an object, nothing
 * at all. */
static void test_criteria__refuses_faults_of_the_whole_file(void **state)
{
    (void)state;
    char *s = edited("\"rules\": [", "\"rules\": [] , \"unused\": [");
    /* the unknown key is named first, as it comes first in the checks */
    const char *const unknown[2] = { "test.json: unused: unknown field", "" };
    expect_refusal("unknown", s, strlen(s), PL_EFORMAT, unknown);
    free(s);

    const char empty_rules[] = "{\"format\":\"plyledger-criteria\",\"format_version\":1,"
                               "\"name\":\"N\",\"revision\":\"A\",\"source_document\":\"D\","
                               "\"example_values\":false,\"repeatability\":{\"area_mm2\":1},"
                               "\"rules\":[]}";
    const char *const none[2] = { "test.json: rules", "expected at least one rule, got none" };
    expect_refusal("empty rules", empty_rules, strlen(empty_rules), PL_EFORMAT, none);

    const char rules_object[] = "{\"format\":\"plyledger-criteria\",\"format_version\":1,"
                                "\"name\":\"N\",\"revision\":\"A\",\"source_document\":\"D\","
                                "\"example_values\":false,\"repeatability\":{\"area_mm2\":1},"
                                "\"rules\":{}}";
    const char *const object[2] = { "test.json: rules",
                                    "expected an array of rules, got an object" };
    expect_refusal("rules object", rules_object, strlen(rules_object), PL_EFORMAT, object);

    const char *const nul[2] = { "test.json: a NUL byte at position 6", "" };
    expect_refusal("NUL byte", "{\"a\":\0}", 7, PL_EFORMAT, nul);

    const char *const control[2] = { "test.json: line 2 contains a control character (U+0001)",
                                     "" };
    expect_refusal("control character", "{\n\001}", 4, PL_EFORMAT, control);

    const char *const array[2] = { "test.json: expected one JSON object, got an array", "" };
    expect_refusal("array", "[1, 2]", 6, PL_EFORMAT, array);

    const char *const nothing[2] = { "test.json: not valid JSON at line 1, column 1", "" };
    expect_refusal("empty file", "", 0, PL_EFORMAT, nothing);

    /* larger than the bound: refused before it is parsed */
    size_t big = PL_CRITERIA_MAX_BYTES + 1;
    char *huge = malloc(big);
    assert_non_null(huge);
    memset(huge, ' ', big);
    memcpy(huge, base_set, strlen(base_set));
    const char *const large[2] = { "test.json: larger than 1048576 bytes", "" };
    expect_refusal("oversize", huge, big, PL_EFORMAT, large);
    /* at the bound, spaces after the object are fine */
    pl_criteria *c = NULL;
    pl_err err = { 0 };
    TU_OK(pl_criteria_parse(&c, huge, big - 1, "test.json", &err));
    pl_criteria_free(c);
    free(huge);

    /* one rule more than the most a set takes */
    size_t cap = 400 * (PL_CRITERIA_MAX_RULES + 2) + 1024, n = 0;
    char *many = malloc(cap);
    assert_non_null(many);
    n += (size_t)snprintf(many + n, cap - n, "{\"format\":\"plyledger-criteria\","
                          "\"format_version\":1,\"name\":\"N\",\"revision\":\"A\","
                          "\"source_document\":\"D\",\"example_values\":false,"
                          "\"repeatability\":{\"area_mm2\":1},\"rules\":[");
    for (unsigned i = 0; i <= PL_CRITERIA_MAX_RULES; i++)
        n += (size_t)snprintf(many + n, cap - n, "%s{\"name\":\"r%u\",\"kind\":\"no-growth\","
                              "\"method\":\"flash-thermography\",\"quantity\":\"phase\","
                              "\"site\":\"S%u\",\"contrast_unit\":\"rad\","
                              "\"repeatability_contrast\":1,\"min_reportable_area_mm2\":1,"
                              "\"new_reportable_area_mm2\":1,\"vanished\":\"report\"}",
                              i ? "," : "", i, i);
    snprintf(many + n, cap - n, "]}");
    const char *const too_many[2] = { "test.json: rules", "expected at most 1000 rules, got 1001" };
    expect_refusal("too many rules", many, strlen(many), PL_ERANGE, too_many);
    free(many);
}

/* A file that cannot be read, and a file on disk, name their path. */
static void test_criteria__load_names_the_file(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *path = tu_path(dir, "limits.json");
    pl_criteria *c = NULL;
    pl_err err = { 0 };
    assert_int_equal(pl_criteria_load(&c, path, &err), PL_EIO);
    tu_assert_msg_has(err.msg, "limits.json: cannot open");
    char *bad = edited("\"area_growth_mm2\": 40", "\"area_growth_mm2\": -1");
    assert_int_equal(tu_write_file(path, bad, strlen(bad)), 0);
    assert_int_equal(pl_criteria_load(&c, path, &err), PL_ERANGE);
    tu_assert_msg_has(err.msg, "limits.json: rules[1].area_growth_mm2: expected a number >= 0");
    assert_int_equal(pl_criteria_load(&c, dir, &err), PL_EIO);
    free(bad);
    free(path);
    tu_rmtree(dir);
}

/* ---- globs -------------------------------------------------------------------------------- */

static void test_criteria__globs_match_as_documented(void **state)
{
    (void)state;
    static const struct {
        const char *pattern, *text;
        int match;
    } cases[] = {
        { "F0*", "F02", 1 }, { "F0*", "F0", 1 }, { "F0*", "G02", 0 }, { "f0?", "F02", 1 },
        { "F0?", "F0", 0 }, { "*", "", 1 }, { "?", "", 0 }, { "*-DC*", "F02-DC-L", 1 },
        { "*-DC*", "F02-D", 0 }, { "2*1", "221", 1 }, { "2*1", "2210", 0 }, { "[ab]", "a", 0 },
        { "[ab]", "[AB]", 1 }, { "a**b", "ab", 1 }, { "*a*a*", "banana", 1 },
        { "*x*", "banana", 0 },
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++)
        if (pl_criteria_glob(cases[i].pattern, cases[i].text) != cases[i].match)
            fail_msg("glob '%s' on '%s' should give %d", cases[i].pattern, cases[i].text,
                     cases[i].match);
    assert_int_equal(pl_criteria_glob("*", NULL), 0);

    /* against POSIX fnmatch(3) (glibc, FNM_CASEFOLD) on random patterns of the
     * characters the two read alike: letters, '*' and '?' */
    const char pat_chars[] = "aAb*?", text_chars[] = "aAbB";
    unsigned seed = 12345;
    for (int k = 0; k < 20000; k++) {
        char p[9], t[9];
        int np = (int)((seed = seed * 1103515245u + 12345u) >> 16) % 9;
        int nt = (int)((seed = seed * 1103515245u + 12345u) >> 16) % 9;
        for (int i = 0; i < np; i++)
            p[i] = pat_chars[((seed = seed * 1103515245u + 12345u) >> 16) % 5];
        for (int i = 0; i < nt; i++)
            t[i] = text_chars[((seed = seed * 1103515245u + 12345u) >> 16) % 4];
        p[np] = t[nt] = '\0';
        int want = fnmatch(p, t, FNM_CASEFOLD) == 0;
        if (pl_criteria_glob(p, t) != want)
            fail_msg("glob '%s' on '%s': fnmatch says %d", p, t, want);
    }
}

/* ---- the rule that governs a site --------------------------------------------------------- */

/* A rule of temperature-contrast by flash thermography with a pattern. */
static void add_rule(char *buf, size_t cap, size_t *n, const char *name, const char *scope,
                     const char *pattern)
{
    char sel[96] = "";
    if (scope)
        snprintf(sel, sizeof sel, "\"%s\":\"%s\",", scope, pattern);
    *n += (size_t)snprintf(buf + *n, cap - *n,
                           "%s{\"name\":\"%s\",\"kind\":\"growth-limit\","
                           "\"method\":\"flash-thermography\","
                           "\"quantity\":\"temperature-contrast\",%s\"contrast_unit\":\"K\","
                           "\"repeatability_contrast\":0.05,\"min_reportable_area_mm2\":1,"
                           "\"new_reportable_area_mm2\":1,\"area_growth_mm2\":20,"
                           "\"vanished\":\"report\"}",
                           buf[*n - 1] == '[' ? "" : ",", name, sel);
}

static pl_criteria *selection_set(int with_tie)
{
    char buf[8192];
    size_t n = (size_t)snprintf(buf, sizeof buf,
                                "{\"format\":\"plyledger-criteria\",\"format_version\":1,"
                                "\"name\":\"SEL\",\"revision\":\"1\","
                                "\"source_document\":\"D\",\"example_values\":false,"
                                "\"repeatability\":{\"area_mm2\":10},\"rules\":[");
    add_rule(buf, sizeof buf, &n, "any", NULL, NULL);
    add_rule(buf, sizeof buf, &n, "zone-2x", "zone", "2*");
    add_rule(buf, sizeof buf, &n, "zone-221", "zone", "221");
    add_rule(buf, sizeof buf, &n, "site-F0-star", "site", "F0*");
    add_rule(buf, sizeof buf, &n, "site-F0-one", "site", "F0?");
    add_rule(buf, sizeof buf, &n, "site-F02", "site", "F02");
    if (with_tie) {
        add_rule(buf, sizeof buf, &n, "site-F1-star", "site", "F1*");
        add_rule(buf, sizeof buf, &n, "site-star-1X", "site", "*1X");
    }
    snprintf(buf + n, sizeof buf - n, "]}");
    return parse_ok(buf);
}

static const char *governing(const pl_criteria *c, const char *code, const char *zone)
{
    static pl_criteria_limits l;
    pl_err err = { 0 };
    TU_OK(pl_criteria_limits_for(&l, c, "flash-thermography", "temperature-contrast", code,
                                 zone, &err));
    assert_string_equal(c->rules[l.rule_index].name, l.rule_name);
    return l.rule_name;
}

static void test_criteria__the_most_specific_rule_governs(void **state)
{
    (void)state;
    pl_criteria *c = selection_set(0);
    /* a site pattern over a zone pattern over every site; more literals first */
    assert_string_equal(governing(c, "F02", "221"), "site-F02");
    assert_string_equal(governing(c, "f02", "221"), "site-F02");
    /* equal literals: fewer stars */
    assert_string_equal(governing(c, "F03", "221"), "site-F0-one");
    assert_string_equal(governing(c, "F031", "221"), "site-F0-star");
    assert_string_equal(governing(c, "G01", "221"), "zone-221");
    assert_string_equal(governing(c, "G01", "231"), "zone-2x");
    assert_string_equal(governing(c, "G01", "131"), "any");
    assert_string_equal(governing(c, "G01", NULL), "any");
    assert_string_equal(governing(c, "G01", ""), "any");

    /* another quantity or method: no rule covers it, said plainly */
    pl_criteria_limits l;
    pl_err err = { 0 };
    assert_int_equal(pl_criteria_limits_for(&l, c, "flash-thermography", "phase-contrast",
                                            "F02", "221", &err), PL_ENOTFOUND);
    tu_assert_msg_has(err.msg, "criteria SEL revision 1: no rule covers phase-contrast by "
                               "flash-thermography at site F02 (zone 221)");
    assert_int_equal(pl_criteria_limits_for(&l, c, "eddy-current", "temperature-contrast",
                                            "F02", NULL, &err), PL_ENOTFOUND);
    tu_assert_msg_has(err.msg, "at site F02");
    pl_criteria_free(c);

    /* two rules equally specific: refused, both named */
    c = selection_set(1);
    assert_int_equal(pl_criteria_limits_for(&l, c, "flash-thermography", "temperature-contrast",
                                            "F1X", NULL, &err), PL_ENOMATCH);
    tu_assert_msg_has(err.msg, "rules[6] (\"site-F1-star\") and rules[7] (\"site-star-1X\") "
                               "match site F1X equally");
    assert_string_equal(governing(c, "F1Y", NULL), "site-F1-star");
    pl_criteria_free(c);
}

/* No growth: the limit is the repeatability, the rule's own or the set's;
 * a growth limit gives its own limits, NaN for one it leaves out. */
static void test_criteria__no_growth_limits_are_the_repeatability(void **state)
{
    (void)state;
    pl_criteria *c = parse_ok(base_set);
    pl_criteria_limits l;
    pl_err err = { 0 };
    TU_OK(pl_criteria_limits_for(&l, c, "flash-thermography", "temperature-contrast", "F02",
                                 "221", &err));
    assert_int_equal(l.kind, PL_CRITERIA_NO_GROWTH);
    assert_string_equal(l.rule_name, "joint");
    assert_int_equal(l.rule_index, 0);
    assert_int_equal(l.scope, PL_CRITERIA_ZONE);
    assert_string_equal(l.criteria_name, "TEST-LIMITS");
    assert_string_equal(l.criteria_revision, "A");
    assert_int_equal(l.example_values, 1);
    assert_true(l.repeatability_area_mm2 == 10.0); /* the set's */
    assert_true(l.area_growth_mm2 == 10.0);
    assert_true(isnan(l.area_growth_percent));
    assert_true(l.contrast_growth == 0.05);
    assert_true(l.min_reportable_area_mm2 == 20.0 && l.new_reportable_area_mm2 == 20.0);
    assert_int_equal(l.vanished, PL_VANISHED_INVESTIGATE);

    TU_OK(pl_criteria_limits_for(&l, c, "flash-thermography", "temperature-contrast", "F04",
                                 "232", &err));
    assert_int_equal(l.kind, PL_CRITERIA_GROWTH_LIMIT);
    assert_true(l.repeatability_area_mm2 == 15.0); /* the rule's own */
    assert_true(l.area_growth_mm2 == 40.0 && l.area_growth_percent == 25.0 &&
                l.contrast_growth == 0.2);
    assert_int_equal(l.vanished, PL_VANISHED_REPORT);
    pl_criteria_free(c);

    /* a growth limit without a contrast limit leaves it NaN */
    char *s = edited(", \"contrast_growth\": 0.2", "");
    c = parse_ok(s);
    TU_OK(pl_criteria_limits_for(&l, c, "flash-thermography", "temperature-contrast", "F04",
                                 NULL, &err));
    assert_true(isnan(l.contrast_growth));
    pl_criteria_free(c);
    free(s);
    assert_string_equal(pl_criteria_kind_name(PL_CRITERIA_NO_GROWTH), "no-growth");
    assert_string_equal(pl_criteria_vanished_name(PL_VANISHED_INVESTIGATE), "investigate");
    assert_string_equal(pl_criteria_scope_name(PL_CRITERIA_SITE), "site");
    assert_null(pl_criteria_kind_name((pl_criteria_kind)2));
}

/* ---- in the store ------------------------------------------------------------------------- */

typedef struct fixture {
    char *dir, *path;
    pl_store *st;
} fixture;

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    assert_non_null(f);
    f->dir = tu_tmpdir();
    f->path = tu_path(f->dir, "fleet.db");
    pl_err err = { 0 };
    if (pl_store_create(&f->st, f->path, &err))
        fail_msg("create: %s", err.msg);
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    pl_store_close(f->st);
    free(f->path);
    tu_rmtree(f->dir);
    free(f);
    return 0;
}

static int64_t criteria_rows(pl_store *st)
{
    int64_t n = -1;
    pl_err err = { 0 };
    TU_OK(pl_store__query_int(st, "SELECT count(*) FROM criteria", &n, &err));
    return n;
}

typedef struct seen {
    char text[512];
} seen;

static int collect(void *ud, const pl_criteria_record *rec)
{
    seen *s = ud;
    size_t n = strlen(s->text);
    snprintf(s->text + n, sizeof s->text - n, "%s%s/%s/%lld", n ? " " : "", rec->name,
             rec->revision, (long long)rec->rule_count);
    return 0;
}

static void test_criteria__revisions_are_append_only(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    pl_criteria *a = parse_ok(base_set);
    pl_id id = 0, again = 0;
    int already = -1;
    TU_OK(pl_store_add_criteria(f->st, a, &id, &already, &err));
    assert_true(id > 0);
    assert_int_equal(already, 0);
    assert_int_equal(criteria_rows(f->st), 1);

    /* the same content again (another layout): a no-op that says so */
    pl_criteria *same = parse_ok(a->canonical_json);
    TU_OK(pl_store_add_criteria(f->st, same, &again, &already, &err));
    assert_int_equal(already, 1);
    assert_int_equal(again, id);
    assert_int_equal(criteria_rows(f->st), 1);
    pl_criteria_free(same);

    /* the same name and revision with other content: refused, nothing stored */
    char *s = edited("\"contrast_growth\": 0.2", "\"contrast_growth\": 0.3");
    pl_criteria *other = parse_ok(s);
    free(s);
    assert_int_equal(pl_store_add_criteria(f->st, other, &again, &already, &err), PL_EEXISTS);
    tu_assert_msg_has(err.msg, "criteria TEST-LIMITS revision A: already recorded (row 1) "
                               "with other content; a changed set needs a new revision");
    assert_int_equal(criteria_rows(f->st), 1);
    pl_criteria_free(other);

    /* a new revision is a new row; the first stays as it was */
    s = edited("\"revision\": \"A\"", "\"revision\": \"B\"");
    char *s2 = malloc(strlen(s) + 1);
    assert_non_null(s2);
    strcpy(s2, s);
    free(s);
    pl_criteria *b = parse_ok(s2);
    free(s2);
    pl_id idb = 0;
    TU_OK(pl_store_add_criteria(f->st, b, &idb, &already, &err));
    assert_int_equal(already, 0);
    assert_true(idb > id);
    assert_int_equal(criteria_rows(f->st), 2);

    /* the latest, a named revision, a row by id */
    pl_criteria_record rec;
    TU_OK(pl_store_find_criteria(f->st, "TEST-LIMITS", NULL, &rec, &err));
    assert_int_equal(rec.id, idb);
    assert_string_equal(rec.revision, "B");
    pl_criteria_record_clear(&rec);
    TU_OK(pl_store_find_criteria(f->st, "TEST-LIMITS", "A", &rec, &err));
    assert_int_equal(rec.id, id);
    assert_string_equal(rec.content_json, a->canonical_json);
    assert_string_equal(rec.sha256, a->sha256);
    assert_int_equal(rec.example_values, 1);
    assert_int_equal(rec.rule_count, 2);
    assert_int_equal(rec.format_version, PL_CRITERIA_FORMAT_VERSION);
    assert_true(rec.repeatability_area_mm2 == 10.0);
    pl_criteria_record_clear(&rec);
    assert_int_equal(pl_store_find_criteria(f->st, "TEST-LIMITS", "C", &rec, &err),
                     PL_ENOTFOUND);
    tu_assert_msg_has(err.msg, "no criteria TEST-LIMITS revision C");
    assert_int_equal(pl_store_find_criteria(f->st, "NONE", NULL, &rec, &err), PL_ENOTFOUND);
    tu_assert_msg_has(err.msg, "no criteria named NONE");
    TU_OK(pl_store_get_criteria(f->st, idb, &rec, &err));
    assert_string_equal(rec.content_json, b->canonical_json);
    pl_criteria_record_clear(&rec);
    assert_int_equal(pl_store_get_criteria(f->st, 99, &rec, &err), PL_ENOTFOUND);

    seen all = { "" };
    TU_OK(pl_store_list_criteria(f->st, NULL, collect, &all, &err));
    assert_string_equal(all.text, "TEST-LIMITS/A/2 TEST-LIMITS/B/2");
    seen none = { "" };
    TU_OK(pl_store_list_criteria(f->st, "OTHER", collect, &none, &err));
    assert_string_equal(none.text, "");

    /* the rows refuse an update and a correction at the SQL level too */
    pl_store_close(f->st);
    f->st = NULL;
    sqlite3 *db = NULL;
    assert_int_equal(sqlite3_open(f->path, &db), SQLITE_OK);
    assert_int_not_equal(sqlite3_exec(db, "UPDATE criteria SET revision = 'Z'", NULL, NULL,
                                      NULL), SQLITE_OK);
    assert_int_not_equal(sqlite3_exec(db, "INSERT INTO criteria (key, supersedes, reason, name, "
                                      "revision, format_version, example_values, rule_count, "
                                      "content_json, content_sha256, recorded_at) SELECT 1, 1, "
                                      "'r', name, 'C', format_version, example_values, "
                                      "rule_count, content_json, content_sha256, 'now' FROM "
                                      "criteria WHERE id = 1", NULL, NULL, NULL), SQLITE_OK);
    assert_non_null(strstr(sqlite3_errmsg(db), "record a new revision"));
    assert_int_not_equal(sqlite3_exec(db, "INSERT INTO criteria (name, revision, recorded_at) "
                                      "VALUES ('X', 'A', 'now')", NULL, NULL, NULL), SQLITE_OK);
    sqlite3_close(db);
    TU_OK(pl_store_open(&f->st, f->path, 0, &err));
    assert_int_equal(criteria_rows(f->st), 2);
    pl_criteria_free(a);
    pl_criteria_free(b);
}

/* Import, list, get: the set read back from the record is the set imported,
 * and a record whose content does not match its digest is refused. */
static void test_criteria__round_trip_through_the_record(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    const char *root = getenv("PL_SOURCE_ROOT");
    assert_non_null(root);
    char *path = tu_path(root, "sample-fleet/criteria-example.json");
    pl_criteria *c = NULL;
    TU_OK(pl_criteria_load(&c, path, &err));
    free(path);
    pl_id id = 0;
    TU_OK(pl_store_add_criteria(f->st, c, &id, NULL, &err));
    pl_criteria_record rec;
    TU_OK(pl_store_get_criteria(f->st, id, &rec, &err));
    pl_criteria *back = NULL;
    TU_OK(pl_criteria_from_record(&back, &rec, &err));
    assert_string_equal(back->canonical_json, c->canonical_json);
    assert_int_equal(back->nrules, c->nrules);
    for (size_t i = 0; i < c->nrules; i++) {
        pl_criteria_limits x, y;
        const pl_criteria_rule *u = &c->rules[i];
        const char *code = u->scope == PL_CRITERIA_SITE ? u->pattern : "Z99";
        const char *zone = u->scope == PL_CRITERIA_ZONE ? u->pattern : "999";
        TU_OK(pl_criteria_limits_for(&x, c, u->method, u->quantity, code, zone, &err));
        TU_OK(pl_criteria_limits_for(&y, back, u->method, u->quantity, code, zone, &err));
        assert_int_equal(x.rule_index, i);
        assert_memory_equal(&x, &y, sizeof x);
    }
    pl_criteria_free(back);

    /* the JSON form: the marking, the boolean, the content when asked */
    char *json = NULL;
    TU_OK(pl_criteria_record_json(&json, &rec, 0, -1, &err));
    assert_non_null(strstr(json, "\"marking\":\t\"" PL_CRITERIA_EXAMPLE_MARKING "\""));
    assert_non_null(strstr(json, "\"example_values\":\ttrue"));
    assert_null(strstr(json, "\"content\""));
    assert_null(strstr(json, "already_recorded"));
    free(json);
    TU_OK(pl_criteria_list_json(&json, f->st, NULL, &err));
    assert_int_equal(json[0], '[');
    assert_non_null(strstr(json, "\"marking\":\t\"" PL_CRITERIA_EXAMPLE_MARKING "\""));
    assert_non_null(strstr(json, "\"name\":\t\"EXAMPLE-CR7-GROWTH\""));
    free(json);
    TU_OK(pl_criteria_record_json(&json, &rec, 1, 1, &err));
    assert_non_null(strstr(json, "\"already_recorded\":\ttrue"));
    assert_non_null(strstr(json, "\"content\":\t{"));
    assert_non_null(strstr(json, "door-corner-bonded-joint-fwd-pax"));
    free(json);

    /* one byte of the content changed: refused */
    char *orig = rec.content_json;
    char *tampered = malloc(strlen(orig) + 1);
    assert_non_null(tampered);
    strcpy(tampered, orig);
    *strstr(tampered, "\"area_growth_mm2\":40") = ' ';
    rec.content_json = tampered;
    assert_int_equal(pl_criteria_from_record(&back, &rec, &err), PL_ENOMATCH);
    tu_assert_msg_has(err.msg, "does not match its recorded SHA-256");
    rec.content_json = orig;
    free(tampered);
    pl_criteria_record_clear(&rec);
    pl_criteria_record_clear(NULL);
    pl_criteria_free(c);
}

/* The migration that gives the criteria table its content: a store of the
 * schema before it, holding a criteria row of the first schema's form,
 * migrates, keeps that row as it was, lists it, refuses to apply it (it
 * has no content to check), and takes new sets. */
static void test_criteria__a_store_before_the_migration_keeps_its_criteria(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    char *old = tu_path(f->dir, "old.db");
    sqlite3 *db = NULL;
    assert_int_equal(sqlite3_open(old, &db), SQLITE_OK);
    char sql[256];
    snprintf(sql, sizeof sql, "PRAGMA application_id = %d", PL_STORE_APPLICATION_ID);
    assert_int_equal(sqlite3_exec(db, sql, NULL, NULL, NULL), SQLITE_OK);
    int last = -1;
    for (int i = 0; i < pl__migration_count; i++)
        if (strstr(pl__migrations[i].name, "_criteria.sql"))
            last = i;
    assert_true(last > 0);
    for (int i = 0; i < last; i++)
        assert_int_equal(sqlite3_exec(db, pl__migrations[i].sql, NULL, NULL, NULL), SQLITE_OK);
    snprintf(sql, sizeof sql, "PRAGMA user_version = %d; INSERT INTO store_info (name, value) "
             "VALUES ('store_id', '0123456789abcdef0123456789abcdef'), ('created_at', "
             "'2030-01-01T00:00:00.000Z'), ('created_by', '0.1.0')", last);
    assert_int_equal(sqlite3_exec(db, sql, NULL, NULL, NULL), SQLITE_OK);
    assert_int_equal(sqlite3_exec(db, "INSERT INTO criteria (name, revision, source_document, "
                                  "min_area_mm2, area_growth_mm2, recorded_at) VALUES ('OLD', "
                                  "'1', 'OLD-DOC', 20, 40, '2030-01-01T00:00:00.000Z')", NULL,
                                  NULL, NULL), SQLITE_OK);
    sqlite3_close(db);

    pl_store *st = NULL;
    TU_OK(pl_store_open(&st, old, 0, &err));
    assert_int_equal(pl_store_schema_version(st), PL_STORE_SCHEMA_VERSION);
    pl_criteria_record rec;
    TU_OK(pl_store_find_criteria(st, "OLD", NULL, &rec, &err));
    assert_string_equal(rec.source_document, "OLD-DOC");
    assert_null(rec.content_json);
    assert_int_equal(rec.format_version, -1);
    pl_criteria *c = NULL;
    assert_int_equal(pl_criteria_from_record(&c, &rec, &err), PL_ENOMATCH);
    assert_null(c);
    pl_criteria_record_clear(&rec);
    c = parse_ok(base_set);
    pl_id id = 0;
    TU_OK(pl_store_add_criteria(st, c, &id, NULL, &err));
    assert_int_equal(id, 2);
    seen all = { "" };
    TU_OK(pl_store_list_criteria(st, NULL, collect, &all, &err));
    assert_string_equal(all.text, "OLD/1/-1 TEST-LIMITS/A/2");
    pl_criteria_free(c);
    pl_store_close(st);
    assert_int_equal(sqlite3_open(old, &db), SQLITE_OK);
    sqlite3_stmt *q;
    assert_int_equal(sqlite3_prepare_v2(db, "SELECT min_area_mm2, area_growth_mm2 FROM "
                                        "criteria WHERE id = 1", -1, &q, NULL), SQLITE_OK);
    assert_int_equal(sqlite3_step(q), SQLITE_ROW);
    assert_true(sqlite3_column_double(q, 0) == 20.0 && sqlite3_column_double(q, 1) == 40.0);
    sqlite3_finalize(q);
    sqlite3_close(db);
    free(old);
}

int main(void)
{
#define T(t) cmocka_unit_test(t)
#define TF(t) cmocka_unit_test_setup_teardown(t, setup, teardown)
    const struct CMUnitTest tests[] = {
        T(test_criteria__reads_every_field),
        T(test_criteria__canonical_form_is_stable),
        T(test_criteria__the_sample_set_reads_and_is_marked),
        T(test_criteria__refuses_each_fault_naming_file_and_field),
        T(test_criteria__refuses_faults_of_the_whole_file),
        T(test_criteria__load_names_the_file),
        T(test_criteria__globs_match_as_documented),
        T(test_criteria__the_most_specific_rule_governs),
        T(test_criteria__no_growth_limits_are_the_repeatability),
        TF(test_criteria__revisions_are_append_only),
        TF(test_criteria__round_trip_through_the_record),
        TF(test_criteria__a_store_before_the_migration_keeps_its_criteria),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
