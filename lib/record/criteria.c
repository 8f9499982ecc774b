/*
 * criteria.c - criteria sets: reading and checking the JSON file, its
 * canonical form, the site-pattern globs and the choice of the rule that
 * governs a site (plyledger/criteria.h). The store's side is in
 * store_criteria.c.
 *
 * Every refusal is one line: the input's label, the field as a JSON path
 * and what was expected ("limits.json: rules[2].area_growth_mm2: expected a
 * number, got a string"). The checks run in the order of the fields in the
 * header, so the first fault of a file is always the one named.
 */
#include "plyledger/criteria.h"

#include "common/common_int.h"
#include "plyledger/hash.h"

#include <assert.h>
#include <cjson/cJSON.h>
#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

/* ---- words ------------------------------------------------------------------------------ */

static const char *const kind_words[] = { "growth-limit", "no-growth" };
static const char *const vanished_words[] = { "report", "investigate" };
static const char *const scope_words[] = { "any", "zone", "site" };

#define COUNT(a) (sizeof a / sizeof a[0])

PL_EXPORT const char *pl_criteria_kind_name(pl_criteria_kind kind)
{
    return (unsigned)kind < COUNT(kind_words) ? kind_words[kind] : NULL;
}

PL_EXPORT const char *pl_criteria_vanished_name(pl_vanished_rule rule)
{
    return (unsigned)rule < COUNT(vanished_words) ? vanished_words[rule] : NULL;
}

PL_EXPORT const char *pl_criteria_scope_name(pl_criteria_scope scope)
{
    return (unsigned)scope < COUNT(scope_words) ? scope_words[scope] : NULL;
}

/* ---- globs ------------------------------------------------------------------------------ */

/*
 * '*' any run, '?' one character, the rest literal, ASCII case ignored. The
 * classic iterative match: on a mismatch after a '*', let that star take
 * one more character and retry from there; linear in practice and never
 * worse than pattern x text.
 */
PL_EXPORT int pl_criteria_glob(const char *pattern, const char *text)
{
    assert(pattern);
    if (!text)
        return 0;
    const char *p = pattern, *t = text, *star = NULL, *retry = NULL;
    while (*t) {
        if (*p == '*') {
            star = p++;
            retry = t;
        } else if (*p && (*p == '?' || tolower((unsigned char)*p) ==
                                           tolower((unsigned char)*t))) {
            p++;
            t++;
        } else if (star) {
            p = star + 1;
            t = ++retry;
        } else {
            return 0;
        }
    }
    while (*p == '*')
        p++;
    return *p == '\0';
}

/* ---- reading ---------------------------------------------------------------------------- */

typedef struct reader {
    const char *label;
    pl_err *err;
} reader;

/* "<label>: <path>: <message>" (path "" for the whole file). */
static int fail(const reader *r, int code, const char *path, const char *fmt, ...)
    PL_PRINTF(4, 5);
static int fail(const reader *r, int code, const char *path, const char *fmt, ...)
{
    char msg[PL_ERR_MSG_SIZE];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    if (path[0])
        return pl__err(r->err, code, "%s: %s: %s", r->label, path, msg);
    return pl__err(r->err, code, "%s: %s", r->label, msg);
}

static const char *type_name(const cJSON *v)
{
    if (cJSON_IsString(v))
        return "a string";
    if (cJSON_IsNumber(v))
        return "a number";
    if (cJSON_IsBool(v))
        return "a boolean";
    if (cJSON_IsNull(v))
        return "null";
    if (cJSON_IsArray(v))
        return "an array";
    if (cJSON_IsObject(v))
        return "an object";
    return "an unknown value";
}

/* "rules[2].name" from a prefix and a key. */
static void join(char *buf, size_t cap, const char *prefix, const char *key)
{
    snprintf(buf, cap, "%s%s%s", prefix, prefix[0] ? "." : "", key);
}

/*
 * An object's keys: each one of `allowed` (a typo is refused, not
 * ignored), none twice (cJSON keeps both, and which one counts would be a
 * guess).
 */
static int check_keys(const reader *r, const cJSON *o, const char *path,
                      const char *const *allowed, size_t nallowed)
{
    for (const cJSON *c = o->child; c; c = c->next) {
        char where[160];
        join(where, sizeof where, path, c->string);
        size_t i = 0;
        while (i < nallowed && strcmp(c->string, allowed[i]) != 0)
            i++;
        if (i == nallowed) {
            char list[512];
            size_t n = 0;
            list[0] = '\0';
            for (size_t k = 0; k < nallowed && n < sizeof list; k++)
                n += (size_t)snprintf(list + n, sizeof list - n, "%s%s", k ? ", " : "",
                                      allowed[k]);
            return fail(r, PL_EFORMAT, where, "unknown field (expected one of %s)", list);
        }
        for (const cJSON *d = o->child; d != c; d = d->next)
            if (strcmp(d->string, c->string) == 0)
                return fail(r, PL_EFORMAT, where, "the field is given twice");
    }
    return PL_OK;
}

static const cJSON *member(const cJSON *o, const char *key)
{
    return cJSON_GetObjectItemCaseSensitive(o, key);
}

/* How a text field is checked: a name is one line without outer spaces. */
enum { T_NAME, T_FREE };

static int get_text(const reader *r, const cJSON *o, const char *prefix, const char *key,
                    int required, int form, char *dst, size_t cap)
{
    char path[160];
    join(path, sizeof path, prefix, key);
    dst[0] = '\0';
    const cJSON *v = member(o, key);
    if (!v)
        return required ? fail(r, PL_EFORMAT, path, "required field missing (expected a string)")
                        : PL_OK;
    if (!cJSON_IsString(v))
        return fail(r, PL_EFORMAT, path, "expected a string, got %s", type_name(v));
    const char *s = v->valuestring;
    size_t n = strlen(s);
    if (n == 0)
        return fail(r, PL_EINVAL, path, "expected a non-empty string");
    if (n >= cap)
        return fail(r, PL_EINVAL, path, "expected at most %zu characters, got %zu", cap - 1, n);
    char what[256];
    snprintf(what, sizeof what, "%s: %s", r->label, path);
    int rc = pl_text_check(s, form == T_FREE ? PL_TEXT_LINES : 0, what, r->err);
    if (rc)
        return rc;
    if (form == T_NAME && (s[0] == ' ' || s[n - 1] == ' '))
        return fail(r, PL_EINVAL, path, "'%s' has leading or trailing spaces", s);
    memcpy(dst, s, n + 1);
    return PL_OK;
}

/* A number's range: [min, max], or (min, max] when above is set. */
typedef struct range {
    double min, max;
    int above;
    const char *unit;
} range;

static int get_number(const reader *r, const cJSON *o, const char *prefix, const char *key,
                      int required, range b, double *out)
{
    char path[160];
    join(path, sizeof path, prefix, key);
    *out = NAN;
    const cJSON *v = member(o, key);
    if (!v)
        return required ? fail(r, PL_EFORMAT, path, "required field missing (expected a number)")
                        : PL_OK;
    if (!cJSON_IsNumber(v))
        return fail(r, PL_EFORMAT, path, "expected a number, got %s", type_name(v));
    double d = v->valuedouble;
    if (!isfinite(d))
        return fail(r, PL_EINVAL, path, "expected a finite number");
    if (d < b.min || (b.above && d == b.min) || d > b.max)
        return fail(r, PL_ERANGE, path, "expected a number %s %g and <= %g%s%s, got %g",
                    b.above ? ">" : ">=", b.min, b.max, b.unit[0] ? " " : "", b.unit, d);
    *out = d;
    return PL_OK;
}

static const range AREA = { 0.0, PL_CRITERIA_MAX_AREA_MM2, 0, "mm^2" };
static const range AREA_POSITIVE = { 0.0, PL_CRITERIA_MAX_AREA_MM2, 1, "mm^2" };
static const range PERCENT = { 0.0, PL_CRITERIA_MAX_PERCENT, 1, "%" };

/* A word of a closed list; its position in *out. */
static int get_word(const reader *r, const cJSON *o, const char *prefix, const char *key,
                    const char *const *words, size_t nwords, int *out)
{
    char text[PL_NAME_SIZE], path[160];
    join(path, sizeof path, prefix, key);
    int rc = get_text(r, o, prefix, key, 1, T_NAME, text, sizeof text);
    if (rc)
        return rc;
    for (size_t i = 0; i < nwords; i++)
        if (strcmp(text, words[i]) == 0) {
            *out = (int)i;
            return PL_OK;
        }
    char list[256];
    size_t n = 0;
    for (size_t i = 0; i < nwords; i++)
        n += (size_t)snprintf(list + n, sizeof list - n, "%s\"%s\"",
                              i == 0 ? "" : i + 1 == nwords ? " or " : ", ", words[i]);
    return fail(r, PL_EINVAL, path, "expected %s, got \"%s\"", list, text);
}

/* 1 when `unit` is one of the quantity's accepted units. */
static int unit_of(const pl_quantity_info *q, const char *unit)
{
    size_t n = strlen(unit);
    for (const char *p = q->units; *p;) {
        size_t k = strcspn(p, " ");
        if (k == n && strncmp(p, unit, n) == 0)
            return 1;
        p += k;
        p += *p == ' ';
    }
    return 0;
}

/* A site pattern must be able to match a site code: key characters and
 * the two wildcards. */
static int site_pattern_char(unsigned char c)
{
    return isalnum(c) || c == '-' || c == '_' || c == '.' || c == '/' || c == '*' || c == '?';
}

static const char *const top_keys[] = { "format", "format_version", "name", "revision",
                                        "source_document", "example_values", "repeatability",
                                        "note", "rules" };
static const char *const repeatability_keys[] = { "area_mm2", "basis" };
static const char *const rule_keys[] = {
    "name", "kind", "method", "quantity", "site", "zone", "contrast_unit",
    "repeatability_contrast", "repeatability_area_mm2", "min_reportable_area_mm2",
    "new_reportable_area_mm2", "area_growth_mm2", "area_growth_percent", "contrast_growth",
    "vanished", "note"
};

static int read_rule(const reader *r, const cJSON *o, const char *path, double set_area,
                     pl_criteria_rule *rule)
{
    char f[160];
    if (!cJSON_IsObject(o))
        return fail(r, PL_EFORMAT, path, "expected a rule object, got %s", type_name(o));
    int rc = check_keys(r, o, path, rule_keys, COUNT(rule_keys));
    int kind = 0, vanished = 0;
    if (!rc)
        rc = get_text(r, o, path, "name", 1, T_NAME, rule->name, sizeof rule->name);
    if (!rc)
        rc = get_word(r, o, path, "kind", kind_words, COUNT(kind_words), &kind);
    if (!rc)
        rc = get_text(r, o, path, "method", 1, T_NAME, rule->method, sizeof rule->method);
    if (!rc && pl_vocabulary_index(PL_VOCAB_METHOD, rule->method) < 0) {
        char list[256];
        pl_vocabulary_text(list, sizeof list, PL_VOCAB_METHOD, " or ");
        join(f, sizeof f, path, "method");
        rc = fail(r, PL_EINVAL, f, "expected a site method (%s), got \"%s\"", list,
                  rule->method);
    }
    if (!rc)
        rc = get_text(r, o, path, "quantity", 1, T_NAME, rule->quantity, sizeof rule->quantity);
    const pl_quantity_info *q = rc ? NULL : pl_quantity_lookup(rule->quantity);
    if (!rc) {
        join(f, sizeof f, path, "quantity");
        if (!q)
            rc = fail(r, PL_EINVAL, f, "expected a quantity of the vocabulary (plyledger "
                      "quantities lists them), got \"%s\"", rule->quantity);
        else if (!pl_quantity_fits_method(rule->quantity, rule->method))
            rc = fail(r, PL_EINVAL, f, "expected a quantity that %s produces (%s comes from %s)",
                      rule->method, rule->quantity, q->methods);
    }
    char site[PL_NAME_SIZE], zone[PL_NAME_SIZE];
    if (!rc)
        rc = get_text(r, o, path, "site", 0, T_NAME, site, sizeof site);
    if (!rc)
        rc = get_text(r, o, path, "zone", 0, T_NAME, zone, sizeof zone);
    if (!rc && site[0] && zone[0]) {
        join(f, sizeof f, path, "zone");
        rc = fail(r, PL_EINVAL, f, "expected either site or zone, not both");
    }
    if (!rc && site[0]) {
        join(f, sizeof f, path, "site");
        for (const char *p = site; !rc && *p; p++)
            if (!site_pattern_char((unsigned char)*p))
                rc = fail(r, PL_EINVAL, f, "'%c' cannot match a site code (expected ASCII "
                          "letters, digits, - _ . / and the wildcards * ?)", *p);
    }
    if (!rc) {
        rule->scope = site[0] ? PL_CRITERIA_SITE : zone[0] ? PL_CRITERIA_ZONE
                                                            : PL_CRITERIA_ANY_SITE;
        memcpy(rule->pattern, site[0] ? site : zone, sizeof rule->pattern);
        rc = get_text(r, o, path, "contrast_unit", 1, T_NAME, rule->contrast_unit,
                      sizeof rule->contrast_unit);
    }
    if (!rc && !unit_of(q, rule->contrast_unit)) {
        join(f, sizeof f, path, "contrast_unit");
        rc = fail(r, PL_EINVAL, f, "expected a unit of %s (%s), got \"%s\"", rule->quantity,
                  q->units, rule->contrast_unit);
    }
    range contrast = { 0.0, PL_CRITERIA_MAX_CONTRAST, 1, rule->contrast_unit };
    if (!rc)
        rc = get_number(r, o, path, "repeatability_contrast", 1, contrast,
                        &rule->repeatability_contrast);
    if (!rc)
        rc = get_number(r, o, path, "repeatability_area_mm2", 0, AREA_POSITIVE,
                        &rule->repeatability_area_mm2);
    if (!rc)
        rc = get_number(r, o, path, "min_reportable_area_mm2", 1, AREA,
                        &rule->min_reportable_area_mm2);
    if (!rc)
        rc = get_number(r, o, path, "new_reportable_area_mm2", 1, AREA,
                        &rule->new_reportable_area_mm2);
    if (!rc && rule->new_reportable_area_mm2 < rule->min_reportable_area_mm2) {
        join(f, sizeof f, path, "new_reportable_area_mm2");
        rc = fail(r, PL_EINVAL, f, "expected at least min_reportable_area_mm2 (%g mm^2), got %g",
                  rule->min_reportable_area_mm2, rule->new_reportable_area_mm2);
    }
    if (!rc)
        rc = get_number(r, o, path, "area_growth_mm2", 0, AREA, &rule->area_growth_mm2);
    if (!rc)
        rc = get_number(r, o, path, "area_growth_percent", 0, PERCENT,
                        &rule->area_growth_percent);
    if (!rc)
        rc = get_number(r, o, path, "contrast_growth", 0, contrast, &rule->contrast_growth);
    if (!rc)
        rc = get_word(r, o, path, "vanished", vanished_words, COUNT(vanished_words), &vanished);
    if (!rc)
        rc = get_text(r, o, path, "note", 0, T_FREE, rule->note, sizeof rule->note);
    if (rc)
        return rc;
    rule->kind = (pl_criteria_kind)kind;
    rule->vanished = (pl_vanished_rule)vanished;

    /* the limits against the kind and the repeatability */
    double area_rep = isnan(rule->repeatability_area_mm2) ? set_area
                                                          : rule->repeatability_area_mm2;
    static const char *const growth[] = { "area_growth_mm2", "area_growth_percent",
                                          "contrast_growth" };
    const double given[] = { rule->area_growth_mm2, rule->area_growth_percent,
                             rule->contrast_growth };
    if (rule->kind == PL_CRITERIA_NO_GROWTH) {
        for (size_t i = 0; i < COUNT(growth); i++)
            if (!isnan(given[i])) {
                join(f, sizeof f, path, growth[i]);
                return fail(r, PL_EINVAL, f, "a no-growth rule takes no growth limit: its "
                            "limit is the stated repeatability");
            }
        return PL_OK;
    }
    if (isnan(rule->area_growth_mm2) && isnan(rule->area_growth_percent))
        return fail(r, PL_EFORMAT, path, "a growth-limit rule needs area_growth_mm2 or "
                    "area_growth_percent");
    if (!isnan(rule->area_growth_mm2) && rule->area_growth_mm2 < area_rep) {
        join(f, sizeof f, path, "area_growth_mm2");
        return fail(r, PL_EINVAL, f, "expected at least the area repeatability (%g mm^2): a "
                    "smaller growth cannot be measured, got %g", area_rep,
                    rule->area_growth_mm2);
    }
    if (!isnan(rule->contrast_growth) && rule->contrast_growth < rule->repeatability_contrast) {
        join(f, sizeof f, path, "contrast_growth");
        return fail(r, PL_EINVAL, f, "expected at least repeatability_contrast (%g %s): a "
                    "smaller growth cannot be measured, got %g", rule->repeatability_contrast,
                    rule->contrast_unit, rule->contrast_growth);
    }
    return PL_OK;
}

/* Patterns equal without regard to ASCII case (as they match). */
static int same_pattern(const char *a, const char *b)
{
    for (; *a && *b; a++, b++)
        if (tolower((unsigned char)*a) != tolower((unsigned char)*b))
            return 0;
    return *a == *b;
}

/* Two rules alike: the same name, or the same method, quantity and pattern. */
static int check_alike(const reader *r, const pl_criteria *c)
{
    for (size_t i = 1; i < c->nrules; i++)
        for (size_t k = 0; k < i; k++) {
            const pl_criteria_rule *a = &c->rules[k], *b = &c->rules[i];
            char path[64];
            if (strcmp(a->name, b->name) == 0) {
                snprintf(path, sizeof path, "rules[%zu].name", i);
                return fail(r, PL_EEXISTS, path, "\"%s\" is also the name of rules[%zu]",
                            b->name, k);
            }
            if (strcmp(a->method, b->method) == 0 && strcmp(a->quantity, b->quantity) == 0 &&
                a->scope == b->scope && same_pattern(a->pattern, b->pattern)) {
                snprintf(path, sizeof path, "rules[%zu]", i);
                return fail(r, PL_EEXISTS, path, "the same method, quantity and %s as "
                            "rules[%zu] (\"%s\")",
                            b->scope == PL_CRITERIA_ANY_SITE ? "sites (every site)"
                            : b->scope == PL_CRITERIA_ZONE   ? "zone pattern"
                                                             : "site pattern",
                            k, a->name);
            }
        }
    return PL_OK;
}

/* ---- the canonical form ----------------------------------------------------------------- */

static int add_text(cJSON *o, const char *key, const char *v)
{
    return !v[0] || cJSON_AddStringToObject(o, key, v) != NULL;
}

static int add_number(cJSON *o, const char *key, double v)
{
    return isnan(v) || cJSON_AddNumberToObject(o, key, v) != NULL;
}

static cJSON *rule_json(const pl_criteria_rule *u)
{
    cJSON *o = cJSON_CreateObject();
    int ok = o && add_text(o, "name", u->name) &&
             add_text(o, "kind", pl_criteria_kind_name(u->kind)) &&
             add_text(o, "method", u->method) && add_text(o, "quantity", u->quantity) &&
             add_text(o, u->scope == PL_CRITERIA_SITE ? "site" : "zone", u->pattern) &&
             add_text(o, "contrast_unit", u->contrast_unit) &&
             add_number(o, "repeatability_contrast", u->repeatability_contrast) &&
             add_number(o, "repeatability_area_mm2", u->repeatability_area_mm2) &&
             add_number(o, "min_reportable_area_mm2", u->min_reportable_area_mm2) &&
             add_number(o, "new_reportable_area_mm2", u->new_reportable_area_mm2) &&
             add_number(o, "area_growth_mm2", u->area_growth_mm2) &&
             add_number(o, "area_growth_percent", u->area_growth_percent) &&
             add_number(o, "contrast_growth", u->contrast_growth) &&
             add_text(o, "vanished", pl_criteria_vanished_name(u->vanished)) &&
             add_text(o, "note", u->note);
    if (!ok) {
        cJSON_Delete(o);
        return NULL;
    }
    return o;
}

/* Every field in the header's order, absent optional ones left out; cJSON
 * prints each number the shortest way that reads back the same double. */
static char *canonical_text(const pl_criteria *c)
{
    cJSON *o = cJSON_CreateObject(), *rep = NULL, *rules = NULL;
    int ok = o && add_text(o, "format", PL_CRITERIA_FORMAT) &&
             add_number(o, "format_version", PL_CRITERIA_FORMAT_VERSION) &&
             add_text(o, "name", c->name) && add_text(o, "revision", c->revision) &&
             add_text(o, "source_document", c->source_document) &&
             cJSON_AddBoolToObject(o, "example_values", c->example_values) &&
             (rep = cJSON_AddObjectToObject(o, "repeatability")) &&
             add_number(rep, "area_mm2", c->repeatability_area_mm2) &&
             add_text(rep, "basis", c->repeatability_basis) && add_text(o, "note", c->note) &&
             (rules = cJSON_AddArrayToObject(o, "rules"));
    for (size_t i = 0; ok && i < c->nrules; i++) {
        cJSON *u = rule_json(&c->rules[i]);
        ok = u && cJSON_AddItemToArray(rules, u);
        if (!ok)
            cJSON_Delete(u);
    }
    char *text = ok ? cJSON_PrintUnformatted(o) : NULL;
    cJSON_Delete(o);
    return text;
}

/* ---- the whole file --------------------------------------------------------------------- */

/* Line and column (from 1) of byte `at` in text. */
static void position(const char *text, size_t at, size_t *line, size_t *col)
{
    *line = 1;
    *col = 1;
    for (size_t i = 0; i < at; i++) {
        if (text[i] == '\n') {
            (*line)++;
            *col = 1;
        } else {
            (*col)++;
        }
    }
}

static int read_set(const reader *r, const cJSON *root, pl_criteria *c)
{
    if (!cJSON_IsObject(root))
        return fail(r, PL_EFORMAT, "", "expected one JSON object, got %s", type_name(root));
    int rc = check_keys(r, root, "", top_keys, COUNT(top_keys));
    char format[64];
    if (!rc)
        rc = get_text(r, root, "", "format", 1, T_NAME, format, sizeof format);
    if (!rc && strcmp(format, PL_CRITERIA_FORMAT) != 0)
        rc = fail(r, PL_EFORMAT, "format", "expected \"%s\", got \"%s\"", PL_CRITERIA_FORMAT,
                  format);
    double version;
    range any_version = { 0.0, 1e9, 0, "" };
    if (!rc)
        rc = get_number(r, root, "", "format_version", 1, any_version, &version);
    if (!rc && version != PL_CRITERIA_FORMAT_VERSION)
        rc = fail(r, PL_EFORMAT, "format_version", "expected %d (this plyledger reads that "
                  "version), got %g", PL_CRITERIA_FORMAT_VERSION, version);
    if (!rc)
        rc = get_text(r, root, "", "name", 1, T_NAME, c->name, sizeof c->name);
    if (!rc)
        rc = get_text(r, root, "", "revision", 1, T_NAME, c->revision, sizeof c->revision);
    if (!rc)
        rc = get_text(r, root, "", "source_document", 1, T_NAME, c->source_document,
                      sizeof c->source_document);
    if (rc)
        return rc;
    const cJSON *ex = member(root, "example_values");
    if (!ex)
        return fail(r, PL_EFORMAT, "example_values", "required field missing (expected true "
                    "or false)");
    if (!cJSON_IsBool(ex))
        return fail(r, PL_EFORMAT, "example_values", "expected true or false, got %s",
                    type_name(ex));
    c->example_values = cJSON_IsTrue(ex);
    const cJSON *rep = member(root, "repeatability");
    if (!rep)
        return fail(r, PL_EFORMAT, "repeatability", "required field missing (expected an "
                    "object with area_mm2)");
    if (!cJSON_IsObject(rep))
        return fail(r, PL_EFORMAT, "repeatability", "expected an object, got %s",
                    type_name(rep));
    if ((rc = check_keys(r, rep, "repeatability", repeatability_keys,
                         COUNT(repeatability_keys))) ||
        (rc = get_number(r, rep, "repeatability", "area_mm2", 1, AREA_POSITIVE,
                         &c->repeatability_area_mm2)) ||
        (rc = get_text(r, rep, "repeatability", "basis", 0, T_NAME, c->repeatability_basis,
                       sizeof c->repeatability_basis)) ||
        (rc = get_text(r, root, "", "note", 0, T_FREE, c->note, sizeof c->note)))
        return rc;
    const cJSON *rules = member(root, "rules");
    if (!rules)
        return fail(r, PL_EFORMAT, "rules", "required field missing (expected an array of "
                    "rules)");
    if (!cJSON_IsArray(rules))
        return fail(r, PL_EFORMAT, "rules", "expected an array of rules, got %s",
                    type_name(rules));
    size_t n = (size_t)cJSON_GetArraySize(rules);
    if (n == 0)
        return fail(r, PL_EFORMAT, "rules", "expected at least one rule, got none");
    if (n > PL_CRITERIA_MAX_RULES)
        return fail(r, PL_ERANGE, "rules", "expected at most %u rules, got %zu",
                    PL_CRITERIA_MAX_RULES, n);
    if (!(c->rules = calloc(n, sizeof *c->rules)))
        return fail(r, PL_ENOMEM, "", "out of memory");
    size_t i = 0;
    for (const cJSON *u = rules->child; u; u = u->next, i++) {
        char path[32];
        snprintf(path, sizeof path, "rules[%zu]", i);
        if ((rc = read_rule(r, u, path, c->repeatability_area_mm2, &c->rules[i])))
            return rc;
        c->nrules = i + 1;
    }
    return check_alike(r, c);
}

PL_EXPORT int pl_criteria_parse(pl_criteria **out, const char *text, size_t len,
                                const char *label, pl_err *err)
{
    assert(out && (text || !len));
    *out = NULL;
    reader r = { label ? label : "criteria", err };
    if (len > PL_CRITERIA_MAX_BYTES)
        return fail(&r, PL_EFORMAT, "", "larger than %u bytes (a criteria file is at most "
                    "1 MiB)", PL_CRITERIA_MAX_BYTES);
    const char *nul = len ? memchr(text, '\0', len) : NULL;
    if (nul)
        return fail(&r, PL_EFORMAT, "", "a NUL byte at position %zu (expected UTF-8 JSON text)",
                    (size_t)(nul - text) + 1);
    /* a leading byte order mark is allowed, as text editors write it */
    size_t skip = len >= 3 && memcmp(text, "\xef\xbb\xbf", 3) == 0 ? 3 : 0;
    char *buf = malloc(len + 1);
    if (!buf)
        return fail(&r, PL_ENOMEM, "", "out of memory");
    if (len)
        memcpy(buf, text, len);
    buf[len] = '\0';
    /* line by line, so that a bad byte is named by its line */
    int rc = PL_OK;
    for (size_t at = skip, line = 1; !rc && at < len; line++) {
        char *eol = memchr(buf + at, '\n', len - at);
        size_t end = eol ? (size_t)(eol - buf) : len;
        char what[200];
        snprintf(what, sizeof what, "%s: line %zu", r.label, line);
        buf[end] = '\0';
        rc = pl_text_check(buf + at, PL_TEXT_LINES, what, err);
        buf[end] = eol ? '\n' : '\0';
        at = end + 1;
    }
    if (rc) {
        free(buf);
        if (err)
            err->code = PL_EFORMAT;
        return PL_EFORMAT;
    }
    const char *end = NULL;
    cJSON *root = cJSON_ParseWithLengthOpts(buf + skip, len - skip, &end, 0);
    if (!root) {
        size_t line, col, at = end ? (size_t)(end - buf) : skip;
        position(buf, at > len ? len : at, &line, &col);
        free(buf);
        return fail(&r, PL_EFORMAT, "", "not valid JSON at line %zu, column %zu", line, col);
    }
    size_t at = (size_t)(end - buf);
    while (at < len && strchr(" \t\r\n", buf[at]))
        at++;
    if (at < len) {
        size_t line, col;
        position(buf, at, &line, &col);
        cJSON_Delete(root);
        free(buf);
        return fail(&r, PL_EFORMAT, "", "bytes after the JSON object at line %zu, column %zu "
                    "(expected the end of the file)", line, col);
    }
    pl_criteria *c = calloc(1, sizeof *c);
    if (!c)
        rc = fail(&r, PL_ENOMEM, "", "out of memory");
    else
        rc = read_set(&r, root, c);
    cJSON_Delete(root);
    free(buf);
    if (!rc && !(c->canonical_json = canonical_text(c)))
        rc = fail(&r, PL_ENOMEM, "", "out of memory");
    if (rc) {
        pl_criteria_free(c);
        return rc;
    }
    unsigned char digest[PL_SHA256_SIZE];
    pl_sha256(digest, c->canonical_json, strlen(c->canonical_json));
    pl_sha256_hex(c->sha256, digest);
    *out = c;
    return PL_OK;
}

PL_EXPORT int pl_criteria_load(pl_criteria **out, const char *path, pl_err *err)
{
    assert(out && path);
    *out = NULL;
    reader r = { path, err };
    FILE *f = fopen(path, "rb");
    if (!f)
        return fail(&r, PL_EIO, "", "cannot open (%s)", strerror(errno));
    struct stat sb;
    if (fstat(fileno(f), &sb) != 0 || !S_ISREG(sb.st_mode)) {
        fclose(f);
        return fail(&r, PL_EIO, "", "not a regular file");
    }
    /* read one byte past the bound, so a file that grows while read is caught too */
    char *buf = malloc(PL_CRITERIA_MAX_BYTES + 1);
    if (!buf) {
        fclose(f);
        return fail(&r, PL_ENOMEM, "", "out of memory");
    }
    size_t n = fread(buf, 1, PL_CRITERIA_MAX_BYTES + 1, f);
    int bad = ferror(f);
    fclose(f);
    int rc = bad ? fail(&r, PL_EIO, "", "read error")
                 : pl_criteria_parse(out, buf, n, path, err);
    free(buf);
    return rc;
}

PL_EXPORT void pl_criteria_free(pl_criteria *c)
{
    if (!c)
        return;
    free(c->rules);
    free(c->canonical_json);
    free(c);
}

/* ---- the rule that governs a site -------------------------------------------------------- */

/* How specific a matching rule is: scope first, then literal characters,
 * then fewer stars (the order of the header). */
typedef struct specificity {
    int scope;
    int literals;
    int stars;
} specificity;

static specificity specificity_of(const pl_criteria_rule *u)
{
    specificity s = { (int)u->scope, 0, 0 };
    for (const char *p = u->pattern; *p; p++) {
        s.stars += *p == '*';
        s.literals += *p != '*' && *p != '?';
    }
    return s;
}

static int compare_specificity(specificity a, specificity b)
{
    if (a.scope != b.scope)
        return a.scope < b.scope ? -1 : 1;
    if (a.literals != b.literals)
        return a.literals < b.literals ? -1 : 1;
    if (a.stars != b.stars)
        return a.stars > b.stars ? -1 : 1;
    return 0;
}

static int rule_matches(const pl_criteria_rule *u, const char *method, const char *quantity,
                        const char *code, const char *zone)
{
    if (strcmp(u->method, method) != 0 || strcmp(u->quantity, quantity) != 0)
        return 0;
    switch (u->scope) {
    case PL_CRITERIA_SITE: return pl_criteria_glob(u->pattern, code);
    case PL_CRITERIA_ZONE: return zone && zone[0] && pl_criteria_glob(u->pattern, zone);
    default: return 1;
    }
}

PL_EXPORT int pl_criteria_limits_for(pl_criteria_limits *out, const pl_criteria *c,
                                     const char *method, const char *quantity,
                                     const char *site_code, const char *zone, pl_err *err)
{
    assert(out && c && method && quantity && site_code);
    memset(out, 0, sizeof *out);
    size_t best = c->nrules, tie = c->nrules;
    specificity bs = { -1, 0, 0 };
    for (size_t i = 0; i < c->nrules; i++) {
        if (!rule_matches(&c->rules[i], method, quantity, site_code, zone))
            continue;
        specificity s = specificity_of(&c->rules[i]);
        int cmp = best == c->nrules ? 1 : compare_specificity(s, bs);
        if (cmp > 0) {
            best = i;
            bs = s;
            tie = c->nrules;
        } else if (cmp == 0 && tie == c->nrules) {
            tie = i;
        }
    }
    char where[160];
    snprintf(where, sizeof where, "site %s%s%s%s", site_code, zone && zone[0] ? " (zone " : "",
             zone && zone[0] ? zone : "", zone && zone[0] ? ")" : "");
    if (best == c->nrules)
        return pl__err(err, PL_ENOTFOUND, "criteria %s revision %s: no rule covers %s by %s at "
                       "%s", c->name, c->revision, quantity, method, where);
    if (tie != c->nrules)
        return pl__err(err, PL_ENOMATCH, "criteria %s revision %s: rules[%zu] (\"%s\") and "
                       "rules[%zu] (\"%s\") match %s equally; make one pattern more specific",
                       c->name, c->revision, best, c->rules[best].name, tie,
                       c->rules[tie].name, where);
    const pl_criteria_rule *u = &c->rules[best];
    snprintf(out->criteria_name, sizeof out->criteria_name, "%s", c->name);
    snprintf(out->criteria_revision, sizeof out->criteria_revision, "%s", c->revision);
    out->example_values = c->example_values;
    out->rule_index = best;
    snprintf(out->rule_name, sizeof out->rule_name, "%s", u->name);
    out->kind = u->kind;
    out->scope = u->scope;
    snprintf(out->contrast_unit, sizeof out->contrast_unit, "%s", u->contrast_unit);
    out->repeatability_area_mm2 = isnan(u->repeatability_area_mm2) ? c->repeatability_area_mm2
                                                                    : u->repeatability_area_mm2;
    out->repeatability_contrast = u->repeatability_contrast;
    out->min_reportable_area_mm2 = u->min_reportable_area_mm2;
    out->new_reportable_area_mm2 = u->new_reportable_area_mm2;
    out->vanished = u->vanished;
    if (u->kind == PL_CRITERIA_NO_GROWTH) {
        out->area_growth_mm2 = out->repeatability_area_mm2;
        out->area_growth_percent = NAN;
        out->contrast_growth = out->repeatability_contrast;
    } else {
        out->area_growth_mm2 = u->area_growth_mm2;
        out->area_growth_percent = u->area_growth_percent;
        out->contrast_growth = u->contrast_growth;
    }
    return PL_OK;
}

/* ---- a stored set ------------------------------------------------------------------------ */

PL_EXPORT int pl_criteria_from_record(pl_criteria **out, const pl_criteria_record *rec,
                                      pl_err *err)
{
    assert(out && rec);
    *out = NULL;
    char label[160];
    snprintf(label, sizeof label, "criteria %s revision %s (row %lld)", rec->name,
             rec->revision, (long long)rec->id);
    const char *text = rec->content_json ? rec->content_json : "";
    unsigned char digest[PL_SHA256_SIZE];
    char hex[PL_SHA256_HEX_SIZE];
    pl_sha256(digest, text, strlen(text));
    pl_sha256_hex(hex, digest);
    if (strcmp(hex, rec->sha256) != 0)
        return pl__err(err, PL_ENOMATCH, "%s: the content does not match its recorded SHA-256",
                       label);
    return pl_criteria_parse(out, text, strlen(text), label, err);
}
