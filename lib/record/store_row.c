/*
 * store_row.c - the recorded tables described once, and what the
 * descriptions drive: checks of a caller's record, the one insert path,
 * reads into the public structs, copies, the JSON form and the canonical
 * encoding (plyledger/store_row.h); and the record's closed vocabularies.
 *
 * A description lists a table's columns in the order its JSON form shows
 * them. Each entry says where the value lives in the public struct (or that
 * the store supplies it, or that a read takes it from a join), its SQL type,
 * whether it may be absent, and how a caller's value is checked.
 */
#include "record/store_int.h"

#include "common/common_int.h"
#include "plyledger/criteria.h"
#include "plyledger/disposition.h"
#include "plyledger/people.h"
#include "plyledger/hash.h"

#include <assert.h>
#include <cjson/cJSON.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---- vocabularies ------------------------------------------------------------ */

static const char *const inspection_kinds[PL_INSPECTION_KIND_COUNT] = {
    "baseline", "scheduled", "unscheduled", "post-repair"
};
static const char *const methods[] = {
    "flash-thermography", "ultrasound-pulse-echo", "ultrasound-through-transmission",
    "eddy-current"
};
static const char *const registration_statuses[] = { "aligned", "refused", "manual" };
static const char *const comparison_statuses[] = { "done", "not-done" };
/* The certification levels of NDT personnel: EN 4179 and NAS 410 define
 * Level 1 Limited, 1, 2 and 3; ISO 9712 levels 1, 2 and 3 (from memory).
 * A trainee is not certified and signs no inspection. */
static const char *const inspector_levels[] = { "1-limited", "1", "2", "3" };
static const char *const indication_roles[] = { "baseline", "current" };
/* In pl_change_kind, pl_change_match and pl_sizing order (plyledger/change.h,
 * detect.h), so that an enum indexes its word. */
static const char *const change_classes[] = {
    "new", "grown", "stable", "vanished", "not-compared", "changed-region"
};
static const char *const change_matches[] = { "none", "overlap", "distance", "signal" };
static const char *const sizings[] = { "threshold", "half-maximum" };
static const char *const roles[] = { "inspector", "engineer", "reviewer" };
/* ASTM E1316's interpretation of an indication. */
static const char *const interpretations[] = { "false", "nonrelevant", "relevant" };
static const char *const decisions[] = { "accept", "monitor", "repair",
                                         "refer-to-design-holder" };

#define WORDS(a) sizeof a / sizeof a[0], a
static const pl_vocabulary vocabularies[PL_VOCAB_COUNT] = {
    { "inspection kind", WORDS(inspection_kinds) },
    { "method", WORDS(methods) },
    { "registration status", WORDS(registration_statuses) },
    { "comparison status", WORDS(comparison_statuses) },
    { "inspector level", WORDS(inspector_levels) },
    { "indication role", WORDS(indication_roles) },
    { "change class", WORDS(change_classes) },
    { "change match", WORDS(change_matches) },
    { "sizing rule", WORDS(sizings) },
    { "role", WORDS(roles) },
    { "interpretation", WORDS(interpretations) },
    { "decision", WORDS(decisions) },
};

PL_EXPORT const pl_vocabulary *pl_vocabulary_get(pl_vocab which)
{
    return (unsigned)which < PL_VOCAB_COUNT ? &vocabularies[which] : NULL;
}

PL_EXPORT int pl_vocabulary_index(pl_vocab which, const char *word)
{
    const pl_vocabulary *v = pl_vocabulary_get(which);
    if (v && word)
        for (size_t i = 0; i < v->count; i++)
            if (strcmp(word, v->words[i]) == 0)
                return (int)i;
    return -1;
}

PL_EXPORT size_t pl_vocabulary_text(char *buf, size_t cap, pl_vocab which, const char *last)
{
    const pl_vocabulary *v = pl_vocabulary_get(which);
    size_t n = 0;
    if (cap)
        buf[0] = '\0';
    for (size_t i = 0; v && i < v->count; i++) {
        const char *sep = i == 0 ? "" : (i + 1 == v->count && last) ? last : ", ";
        int k = snprintf(buf + (n < cap ? n : cap), n < cap ? cap - n : 0, "%s%s", sep,
                         v->words[i]);
        n += (size_t)(k > 0 ? k : 0);
    }
    return n;
}

PL_EXPORT int pl_vocabulary_check(pl_vocab which, const char *word, pl_err *err)
{
    const pl_vocabulary *v = pl_vocabulary_get(which);
    assert(v);
    if (pl_vocabulary_index(which, word) >= 0)
        return PL_OK;
    char list[256];
    pl_vocabulary_text(list, sizeof list, which, NULL);
    return pl__err(err, PL_EINVAL, "%s '%s' is not one of %s", v->name, word ? word : "",
                   list);
}

PL_EXPORT int pl_inspection_kind_check(const char *kind, pl_err *err)
{
    return pl_vocabulary_check(PL_VOCAB_INSPECTION_KIND, kind, err);
}

PL_EXPORT int pl_method_check(const char *method, pl_err *err)
{
    return pl_vocabulary_check(PL_VOCAB_METHOD, method, err);
}

/* ---- bounds ------------------------------------------------------------------- */

/*
 * The plausible range of each number the record takes. The ranges are wide
 * on purpose, a hundred times or more beyond what the trade meets, so that
 * they only stop what no inspection could produce (a pitch of 1e308 mm, a
 * cycle count of 1e30) and never a real but unusual part.
 */
static const pl_bound_info bounds[PL_BOUND_COUNT] = {
    { "pitch", "mm", 1e-3, 100.0, 0,
      "cameras and C-scans resolve about 0.05 to 5 mm on the part (common practice)" },
    { "thickness", "mm", 1e-2, 500.0, 0,
      "composite skins are about 0.5 to 20 mm thick, sandwich panels up to about 100 mm "
      "(common practice)" },
    { "diffusivity", "mm^2/s", 1e-3, 500.0, 0,
      "through-thickness diffusivity of CFRP is about 0.4 mm^2/s, of aluminium about "
      "97 mm^2/s (from memory)" },
    { "flight hours", "h", 0.0, 1e6, 0,
      "the longest-serving airframes log of the order of 1e5 flight hours (from memory)" },
    { "flight cycles", "", 0.0, 1e6, 1,
      "the most-cycled airframes log of the order of 1e5 flight cycles (from memory)" },
    { "part coordinate", "", -1e6, 1e6, 0,
      "airframes measure under 100 m, 1e5 mm (from memory)" },
    { "map side", "px", 1.0, (double)PL_MAP_MAX_SIDE, 1,
      "the largest map the library holds (PL_MAP_MAX_SIDE)" },
};

PL_EXPORT const pl_bound_info *pl_bound_get(pl_bound which)
{
    return (unsigned)which < PL_BOUND_COUNT ? &bounds[which] : NULL;
}

/* A number as people write it: whole values without an exponent. */
static void number_text(char *buf, size_t cap, double v)
{
    if (v == floor(v) && fabs(v) < 1e15)
        snprintf(buf, cap, "%.0f", v);
    else
        snprintf(buf, cap, "%g", v);
}

PL_EXPORT int pl_bound_check(pl_bound which, double v, const char *what, pl_err *err)
{
    const pl_bound_info *b = pl_bound_get(which);
    assert(b && what);
    char got[40], lo[40], hi[40];
    number_text(got, sizeof got, v);
    if (!isfinite(v))
        return pl__err(err, PL_EINVAL, "%s: %s is not a finite number", what, got);
    if (b->whole && v != floor(v))
        return pl__err(err, PL_EINVAL, "%s: %s is not a whole number of %s", what, got,
                       b->name);
    if (v >= b->min && v <= b->max)
        return PL_OK;
    number_text(lo, sizeof lo, b->min);
    number_text(hi, sizeof hi, b->max);
    return pl__err(err, PL_ERANGE, "%s: %s%s%s is outside the plausible %s, %s to %s%s%s", what,
                   got, b->unit[0] ? " " : "", b->unit, b->name, lo, hi, b->unit[0] ? " " : "",
                   b->unit);
}

/* ---- keys and text ----------------------------------------------------------- */

/*
 * The length of the well-formed UTF-8 sequence at p (n bytes left), its
 * code point in *cp (may be NULL); 0 when it is not one (RFC 3629: no
 * overlong forms, no surrogates, nothing above U+10FFFF).
 */
static size_t utf8_next(const unsigned char *p, size_t n, uint32_t *cp)
{
    unsigned c = p[0];
    size_t len;
    unsigned lo = 0x80, hi = 0xbf;
    uint32_t v;
    if (c < 0x80) {
        len = 1;
        v = c;
    } else if (c >= 0xc2 && c <= 0xdf) {
        len = 2;
        v = c & 0x1f;
    } else if (c >= 0xe0 && c <= 0xef) {
        len = 3;
        v = c & 0x0f;
        if (c == 0xe0)
            lo = 0xa0;
        if (c == 0xed)
            hi = 0x9f;
    } else if (c >= 0xf0 && c <= 0xf4) {
        len = 4;
        v = c & 0x07;
        if (c == 0xf0)
            lo = 0x90;
        if (c == 0xf4)
            hi = 0x8f;
    } else {
        return 0;
    }
    if (len > n)
        return 0;
    for (size_t k = 1; k < len; k++) {
        unsigned b = p[k];
        if (b < (k == 1 ? lo : 0x80) || b > (k == 1 ? hi : 0xbf))
            return 0;
        v = (v << 6) | (b & 0x3f);
    }
    if (cp)
        *cp = v;
    return len;
}

/* Whether p[0..n) is well-formed UTF-8 (utf8_next()). */
static int valid_utf8(const unsigned char *p, size_t n)
{
    for (size_t i = 0, len; i < n; i += len)
        if (!(len = utf8_next(p + i, n - i, NULL)))
            return 0;
    return 1;
}

/* Characters that pass for one of the key alphabet's (or for a space), by
 * their Unicode names, with what to type instead (0: nothing). */
static const struct lookalike {
    uint32_t cp;
    const char *name;
    char ascii;
} lookalikes[] = {
    { 0x00a0, "NO-BREAK SPACE", ' ' },
    { 0x00ad, "SOFT HYPHEN", 0 },
    { 0x00b7, "MIDDLE DOT", '.' },
    { 0x0391, "GREEK CAPITAL LETTER ALPHA", 'A' },
    { 0x0392, "GREEK CAPITAL LETTER BETA", 'B' },
    { 0x0395, "GREEK CAPITAL LETTER EPSILON", 'E' },
    { 0x0396, "GREEK CAPITAL LETTER ZETA", 'Z' },
    { 0x0397, "GREEK CAPITAL LETTER ETA", 'H' },
    { 0x0399, "GREEK CAPITAL LETTER IOTA", 'I' },
    { 0x039a, "GREEK CAPITAL LETTER KAPPA", 'K' },
    { 0x039c, "GREEK CAPITAL LETTER MU", 'M' },
    { 0x039d, "GREEK CAPITAL LETTER NU", 'N' },
    { 0x039f, "GREEK CAPITAL LETTER OMICRON", 'O' },
    { 0x03a1, "GREEK CAPITAL LETTER RHO", 'P' },
    { 0x03a4, "GREEK CAPITAL LETTER TAU", 'T' },
    { 0x03a5, "GREEK CAPITAL LETTER UPSILON", 'Y' },
    { 0x03a7, "GREEK CAPITAL LETTER CHI", 'X' },
    { 0x03bf, "GREEK SMALL LETTER OMICRON", 'o' },
    { 0x0405, "CYRILLIC CAPITAL LETTER DZE", 'S' },
    { 0x0406, "CYRILLIC CAPITAL LETTER BYELORUSSIAN-UKRAINIAN I", 'I' },
    { 0x0408, "CYRILLIC CAPITAL LETTER JE", 'J' },
    { 0x0410, "CYRILLIC CAPITAL LETTER A", 'A' },
    { 0x0412, "CYRILLIC CAPITAL LETTER VE", 'B' },
    { 0x0415, "CYRILLIC CAPITAL LETTER IE", 'E' },
    { 0x041a, "CYRILLIC CAPITAL LETTER KA", 'K' },
    { 0x041c, "CYRILLIC CAPITAL LETTER EM", 'M' },
    { 0x041d, "CYRILLIC CAPITAL LETTER EN", 'H' },
    { 0x041e, "CYRILLIC CAPITAL LETTER O", 'O' },
    { 0x0420, "CYRILLIC CAPITAL LETTER ER", 'P' },
    { 0x0421, "CYRILLIC CAPITAL LETTER ES", 'C' },
    { 0x0422, "CYRILLIC CAPITAL LETTER TE", 'T' },
    { 0x0425, "CYRILLIC CAPITAL LETTER HA", 'X' },
    { 0x0430, "CYRILLIC SMALL LETTER A", 'a' },
    { 0x0435, "CYRILLIC SMALL LETTER IE", 'e' },
    { 0x043e, "CYRILLIC SMALL LETTER O", 'o' },
    { 0x0440, "CYRILLIC SMALL LETTER ER", 'p' },
    { 0x0441, "CYRILLIC SMALL LETTER ES", 'c' },
    { 0x0443, "CYRILLIC SMALL LETTER U", 'y' },
    { 0x0445, "CYRILLIC SMALL LETTER HA", 'x' },
    { 0x2002, "EN SPACE", ' ' },
    { 0x2003, "EM SPACE", ' ' },
    { 0x2009, "THIN SPACE", ' ' },
    { 0x200a, "HAIR SPACE", ' ' },
    { 0x200b, "ZERO WIDTH SPACE", 0 },
    { 0x200c, "ZERO WIDTH NON-JOINER", 0 },
    { 0x200d, "ZERO WIDTH JOINER", 0 },
    { 0x2010, "HYPHEN", '-' },
    { 0x2011, "NON-BREAKING HYPHEN", '-' },
    { 0x2012, "FIGURE DASH", '-' },
    { 0x2013, "EN DASH", '-' },
    { 0x2014, "EM DASH", '-' },
    { 0x2015, "HORIZONTAL BAR", '-' },
    { 0x2024, "ONE DOT LEADER", '.' },
    { 0x202f, "NARROW NO-BREAK SPACE", ' ' },
    { 0x2044, "FRACTION SLASH", '/' },
    { 0x2212, "MINUS SIGN", '-' },
    { 0x2215, "DIVISION SLASH", '/' },
    { 0x3000, "IDEOGRAPHIC SPACE", ' ' },
    { 0xfe63, "SMALL HYPHEN-MINUS", '-' },
    { 0xfeff, "ZERO WIDTH NO-BREAK SPACE", 0 },
};

#define KEY_ALPHABET "ASCII letters, digits and - _ . /"

static int key_char(unsigned char c)
{
    return (c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z') || (c >= '0' && c <= '9') ||
           c == '-' || c == '_' || c == '.' || c == '/';
}

/* "U+2010 HYPHEN is not allowed; use '-'" for a character outside ASCII. */
static int refuse_char(pl_err *err, const char *what, const char *key, uint32_t cp)
{
    const char *name = NULL;
    char ascii = 0, buf[64];
    for (size_t i = 0; i < sizeof lookalikes / sizeof lookalikes[0]; i++)
        if (lookalikes[i].cp == cp) {
            name = lookalikes[i].name;
            ascii = lookalikes[i].ascii;
        }
    /* the fullwidth forms of ASCII (U+FF01..U+FF5E) are ASCII + 0xFEE0 */
    if (!name && cp >= 0xff01 && cp <= 0xff5e) {
        ascii = (char)(cp - 0xfee0);
        snprintf(buf, sizeof buf, "FULLWIDTH %s '%c'",
                 ascii >= '0' && ascii <= '9' ? "DIGIT" :
                 (ascii >= 'A' && ascii <= 'Z') || (ascii >= 'a' && ascii <= 'z') ? "LETTER"
                                                                                  : "SIGN", ascii);
        name = buf;
    }
    if (name && ascii == ' ')
        return pl__err(err, PL_EINVAL, "%s '%s': U+%04X %s is not allowed; a key has no spaces",
                       what, key, (unsigned)cp, name);
    if (name && !ascii)
        return pl__err(err, PL_EINVAL, "%s '%s': U+%04X %s is not allowed; remove it", what, key,
                       (unsigned)cp, name);
    if (name && key_char((unsigned char)ascii))
        return pl__err(err, PL_EINVAL, "%s '%s': U+%04X %s is not allowed; use '%c'", what, key,
                       (unsigned)cp, name, ascii);
    if (name)
        return pl__err(err, PL_EINVAL, "%s '%s': U+%04X %s is not allowed (a key is "
                       KEY_ALPHABET ")", what, key, (unsigned)cp, name);
    return pl__err(err, PL_EINVAL, "%s '%s': U+%04X is not allowed (a key is " KEY_ALPHABET ")",
                   what, key, (unsigned)cp);
}

/* "byte 0xff at position 3 is not valid UTF-8" (positions from 1). */
static int refuse_utf8(pl_err *err, const char *what, const unsigned char *s, size_t at)
{
    return pl__err(err, PL_EINVAL, "%s: byte 0x%02x at position %zu is not valid UTF-8", what,
                   s[at], at + 1);
}

PL_EXPORT int pl_text_check(const char *text, unsigned flags, const char *what, pl_err *err)
{
    assert(what);
    const unsigned char *s = (const unsigned char *)(text ? text : "");
    size_t n = strlen((const char *)s);
    for (size_t i = 0, len; i < n; i += len) {
        uint32_t cp;
        if (!(len = utf8_next(s + i, n - i, &cp)))
            return refuse_utf8(err, what, s, i);
        int lines = (flags & PL_TEXT_LINES) && (cp == '\t' || cp == '\n' || cp == '\r');
        if ((cp < 0x20 || (cp >= 0x7f && cp <= 0x9f)) && !lines)
            return pl__err(err, PL_EINVAL, "%s contains a control character (U+%04X)", what,
                           (unsigned)cp);
    }
    return PL_OK;
}

PL_EXPORT int pl_key_check(const char *key, const char *what, pl_err *err)
{
    assert(what);
    const unsigned char *s = (const unsigned char *)(key ? key : "");
    size_t n = strlen((const char *)s);
    if (n == 0)
        return pl__err(err, PL_EINVAL, "%s is required", what);
    for (size_t i = 0, len; i < n; i += len) {
        uint32_t cp;
        if (!(len = utf8_next(s + i, n - i, &cp)))
            return refuse_utf8(err, what, s, i);
        if (cp >= 0x80)
            return refuse_char(err, what, key, cp);
    }
    int rc = pl_text_check(key, 0, what, err);
    if (rc)
        return rc;
    if (s[0] == ' ' || s[n - 1] == ' ')
        return pl__err(err, PL_EINVAL, "%s '%s' has spaces around it; a key has none", what, key);
    if (n > PL_KEY_MAX)
        return pl__err(err, PL_EINVAL, "%s '%s' is longer than %d characters", what, key,
                       PL_KEY_MAX);
    for (size_t i = 0; i < n; i++) {
        if (key_char(s[i]))
            continue;
        char shown[16];
        snprintf(shown, sizeof shown, s[i] == ' ' ? "a space" : "'%c'", s[i]);
        return pl__err(err, PL_EINVAL, "%s '%s': %s is not allowed (a key is " KEY_ALPHABET ")",
                       what, key, shown);
    }
    if (!((s[0] >= 'A' && s[0] <= 'Z') || (s[0] >= 'a' && s[0] <= 'z') ||
          (s[0] >= '0' && s[0] <= '9')))
        return pl__err(err, PL_EINVAL, "%s '%s' must start with a letter or a digit", what, key);
    return PL_OK;
}

/* ---- the descriptions --------------------------------------------------------- */

#define NUL PL_COL_NULLABLE
#define REQ PL_COL_REQUIRED
#define IN PL_COL_INPUT
#define FSIZE(T, f) sizeof(((T *)0)->f)

/* A stored column held in field f of T (whose number keeps to bound b+1 - 1). */
#define BCOLUMN(T, f, name, col, json_, st, ct, fl, form_, b) \
    { .column = col, .field = name, .json = json_, .stype = st, .ctype = ct, \
      .offset = offsetof(T, f), .size = FSIZE(T, f), .flags = fl, .form = form_, .vocab = -1, \
      .bound = b }
#define COLUMN(T, f, name, col, json_, st, ct, fl, form_) \
    BCOLUMN(T, f, name, col, json_, st, ct, fl, form_, 0)
#define TEXT(T, f, col, js, fl, form) COLUMN(T, f, #f, col, js, PL_S_TEXT, PL_C_TEXT, fl, form)
#define REAL(T, f, col, js, fl, form) COLUMN(T, f, #f, col, js, PL_S_REAL, PL_C_F64, fl, form)
#define INT(T, f, col, js, ct, fl, form) COLUMN(T, f, #f, col, js, PL_S_INTEGER, ct, fl, form)
/* A number that keeps to bound b (pl_bound). */
#define BREAL(T, f, col, js, fl, form, b) \
    BCOLUMN(T, f, #f, col, js, PL_S_REAL, PL_C_F64, fl, form, 1 + (b))
#define BINT(T, f, col, js, ct, fl, form, b) \
    BCOLUMN(T, f, #f, col, js, PL_S_INTEGER, ct, fl, form, 1 + (b))
#define FLAG(T, f, col, js, fl) COLUMN(T, f, #f, col, js, PL_S_INTEGER, PL_C_FLAG, fl, PL_F_ANY)
#define WORD(T, f, col, js, vocab_) \
    { .column = col, .field = #f, .json = js, .stype = PL_S_TEXT, .ctype = PL_C_TEXT, \
      .offset = offsetof(T, f), .size = FSIZE(T, f), .flags = IN | REQ, .form = PL_F_NAME, \
      .vocab = vocab_ }
#define PARAMETERS(T) \
    COLUMN(T, parameters_json, "parameters_json", "parameters_json", "parameters", PL_S_TEXT, \
           PL_C_STR, IN | NUL, PL_F_JSON)
#define SOFTWARE(T) \
    TEXT(T, software_version, "software_version", "software_version", IN | PL_COL_VERSION, \
         PL_F_NAME)
/* A field a read takes from `expr` (a join or a subquery). */
#define JOINED(T, f, expr, json_, ct, fl, form_) \
    { .field = #f, .json = json_, .read = expr, .ctype = ct, .offset = offsetof(T, f), \
      .size = FSIZE(T, f), .flags = fl, .form = form_, .vocab = -1 }
#define ROWID(T, json_) \
    { .column = "id", .field = "id", .json = json_, .stype = PL_S_INTEGER, .ctype = PL_C_ID, \
      .offset = offsetof(T, id), .size = sizeof(pl_id), .flags = PL_COL_ROWID, .vocab = -1 }
#define STABLE_KEY(T, js) JOINED(T, key, "t.stable_key", js, PL_C_ID, 0, PL_F_ANY)
#define RECORDED(T) \
    { .column = "recorded_at", .field = "recorded_at", .json = "recorded_at", \
      .stype = PL_S_TEXT, .ctype = PL_C_TEXT, .offset = offsetof(T, recorded_at), \
      .size = FSIZE(T, recorded_at), .flags = PL_COL_STORE, .vocab = -1 }
/* A column the store supplies, not held in the struct. */
#define SUPPLIED(col, st, fl) \
    { .column = col, .field = col, .stype = st, .flags = PL_COL_STORE | (fl), .vocab = -1 }
/* What a correction adds to a row: the record's key, the row superseded, why. */
#define CORRECTION \
    SUPPLIED("key", PL_S_INTEGER, NUL), SUPPLIED("supersedes", PL_S_INTEGER, NUL), \
    SUPPLIED("reason", PL_S_TEXT, NUL)
/* The eleven columns of a placement in field p of T, under JSON object `json`; the
 * origin's coordinates keep to their bound (checked when ofl holds IN). */
#define PLACEMENT_AXIS(T, p, axis, k, xyz, js, fl, b) \
    BCOLUMN(T, p.axis[k], #axis "_" #xyz, #axis "_" #xyz, js "." #axis "." #k, PL_S_REAL, \
            PL_C_F64, fl, PL_F_ANY, b)
#define PLACEMENT_VEC(T, p, axis, js, fl, b) \
    PLACEMENT_AXIS(T, p, axis, 0, x, js, fl, b), PLACEMENT_AXIS(T, p, axis, 1, y, js, fl, b), \
    PLACEMENT_AXIS(T, p, axis, 2, z, js, fl, b)
#define PLACEMENT(T, p, js, fl, ofl) \
    PLACEMENT_VEC(T, p, origin, js, ofl, 1 + PL_BOUND_COORDINATE), \
    PLACEMENT_VEC(T, p, u, js, 0, 0), PLACEMENT_VEC(T, p, v, js, 0, 0), \
    COLUMN(T, p.system, "coordinate system", "coord_system", js ".system", PL_S_TEXT, \
           PL_C_TEXT, fl, PL_F_NAME), \
    COLUMN(T, p.unit, "coordinate unit", "coord_unit", js ".unit", PL_S_TEXT, PL_C_TEXT, fl, \
           PL_F_NAME)

static const pl_column airframe_cols[] = {
    TEXT(pl_airframe, serial, "serial", "serial", IN | REQ, PL_F_KEY),
    TEXT(pl_airframe, aircraft_type, "aircraft_type", "aircraft_type", IN | REQ, PL_F_NAME),
    TEXT(pl_airframe, manufactured, "manufactured", "manufactured", IN | NUL, PL_F_DATE),
    JOINED(pl_airframe, operator_name, PL_STORE_LATEST_OPERATOR("operator_name"), "operator",
           PL_C_TEXT, 0, PL_F_ANY),
    JOINED(pl_airframe, operator_since, PL_STORE_LATEST_OPERATOR("since"), "operator_since",
           PL_C_TEXT, 0, PL_F_ANY),
    TEXT(pl_airframe, notes, "notes", "notes", IN | NUL, PL_F_TEXT),
    STABLE_KEY(pl_airframe, "key"),
    ROWID(pl_airframe, "version_id"),
    RECORDED(pl_airframe),
    CORRECTION,
};

static const pl_column operator_cols[] = {
    ROWID(pl_operator, NULL),
    INT(pl_operator, airframe_key, "airframe_key", NULL, PL_C_ID, 0, PL_F_ANY),
    TEXT(pl_operator, operator_name, "operator_name", "operator", IN | REQ, PL_F_NAME),
    TEXT(pl_operator, since, "since", "since", IN | REQ, PL_F_DATE),
    RECORDED(pl_operator),
};

static const pl_column site_cols[] = {
    JOINED(pl_site, airframe_serial, "a.serial", "airframe", PL_C_TEXT, IN, PL_F_KEY),
    TEXT(pl_site, code, "code", "site", IN | REQ, PL_F_KEY),
    TEXT(pl_site, zone, "zone", "zone", IN | NUL, PL_F_NAME),
    TEXT(pl_site, description, "description", "description", IN | NUL, PL_F_TEXT),
    TEXT(pl_site, frame, "frame", "frame", IN | NUL, PL_F_NAME),
    TEXT(pl_site, stringer, "stringer", "stringer", IN | NUL, PL_F_NAME),
    WORD(pl_site, method, "method", "method", PL_VOCAB_METHOD),
    TEXT(pl_site, material, "material", "material", IN | NUL, PL_F_NAME),
    BREAL(pl_site, thickness_mm, "thickness_mm", "thickness_mm", IN | NUL, PL_F_POSITIVE,
          PL_BOUND_THICKNESS),
    BREAL(pl_site, diffusivity_mm2_s, "diffusivity_mm2_s", "diffusivity_mm2_s", IN | NUL,
          PL_F_POSITIVE, PL_BOUND_DIFFUSIVITY),
    PLACEMENT(pl_site, map_frame, "map_frame", IN | REQ, IN),
    INT(pl_site, width_px, "width_px", "width_px", PL_C_U32, 0, PL_F_ANY),
    INT(pl_site, height_px, "height_px", "height_px", PL_C_U32, 0, PL_F_ANY),
    BREAL(pl_site, pitch_u, "pitch_u_mm", "pitch_u_mm", IN | REQ, PL_F_POSITIVE, PL_BOUND_PITCH),
    BREAL(pl_site, pitch_v, "pitch_v_mm", "pitch_v_mm", IN | REQ, PL_F_POSITIVE, PL_BOUND_PITCH),
    STABLE_KEY(pl_site, "key"),
    ROWID(pl_site, "version_id"),
    RECORDED(pl_site),
    CORRECTION,
    SUPPLIED("airframe_key", PL_S_INTEGER, 0),
};

static const pl_column inspection_cols[] = {
    STABLE_KEY(pl_inspection, "inspection"),
    ROWID(pl_inspection, "version_id"),
    JOINED(pl_inspection, airframe_serial, "a.serial", "airframe", PL_C_TEXT, IN | REQ,
           PL_F_KEY),
    JOINED(pl_inspection, site_code, "s.code", "site", PL_C_TEXT, IN | REQ, PL_F_KEY),
    WORD(pl_inspection, kind, "kind", "kind", PL_VOCAB_INSPECTION_KIND),
    FLAG(pl_inspection, simulated, "simulated", "simulated", IN | NUL),
    TEXT(pl_inspection, performed_on, "performed_on", "date", IN | REQ, PL_F_DATE),
    TEXT(pl_inspection, task_ref, "task_ref", "task", IN | NUL, PL_F_NAME),
    BREAL(pl_inspection, aircraft_hours, "aircraft_hours", "hours", IN | NUL, PL_F_NONNEGATIVE,
          PL_BOUND_HOURS),
    BINT(pl_inspection, aircraft_cycles, "aircraft_cycles", "cycles", PL_C_I64, IN | NUL,
         PL_F_NONNEGATIVE, PL_BOUND_CYCLES),
    TEXT(pl_inspection, hours_reason, "hours_reason", "hours_reason", IN | NUL, PL_F_TEXT),
    TEXT(pl_inspection, procedure, "procedure", "procedure", IN | REQ, PL_F_NAME),
    TEXT(pl_inspection, procedure_rev, "procedure_rev", "procedure_revision", IN | REQ,
         PL_F_NAME),
    TEXT(pl_inspection, equipment, "equipment", "equipment", IN | REQ, PL_F_TEXT),
    TEXT(pl_inspection, calibration_ref, "calibration_ref", "calibration", IN | REQ, PL_F_NAME),
    TEXT(pl_inspection, inspector, "inspector", "inspector", IN | REQ, PL_F_NAME),
    WORD(pl_inspection, inspector_level, "inspector_level", "inspector_level",
         PL_VOCAB_INSPECTOR_LEVEL),
    SOFTWARE(pl_inspection),
    TEXT(pl_inspection, notes, "notes", "notes", IN | NUL, PL_F_TEXT),
    PARAMETERS(pl_inspection),
    RECORDED(pl_inspection),
    CORRECTION,
    SUPPLIED("site_key", PL_S_INTEGER, 0),
};

static const pl_column channel_cols[] = {
    SUPPLIED("map_id", PL_S_INTEGER, 0),
    SUPPLIED("idx", PL_S_INTEGER, 0),
    TEXT(pl_channel, quantity, "quantity", "quantity", 0, PL_F_ANY),
    TEXT(pl_channel, unit, "unit", "unit", 0, PL_F_ANY),
    TEXT(pl_channel, label, "label", "label", 0, PL_F_ANY),
};

static const pl_table_desc channel_table = {
    PL_TABLE_MAP_CHANNEL, "map_channel", "map_channel t", channel_cols,
    sizeof channel_cols / sizeof channel_cols[0], sizeof(pl_channel), "map_id", "idx"
};

static const pl_column map_cols[] = {
    ROWID(pl_map_record, "map"),
    INT(pl_map_record, inspection_key, "inspection_key", "inspection", PL_C_ID, 0, PL_F_ANY),
    TEXT(pl_map_record, source, "source", "source", IN | NUL, PL_F_TEXT),
    TEXT(pl_map_record, origin, "made_by", "made_by", IN | REQ, PL_F_NAME),
    INT(pl_map_record, width, "width", "width", PL_C_U32, 0, PL_F_ANY),
    INT(pl_map_record, height, "height", "height", PL_C_U32, 0, PL_F_ANY),
    INT(pl_map_record, nchannels, "nchannels", NULL, PL_C_U32, 0, PL_F_ANY),
    REAL(pl_map_record, pitch_u, "pitch_u_mm", "pitch_u_mm", 0, PL_F_ANY),
    REAL(pl_map_record, pitch_v, "pitch_v_mm", "pitch_v_mm", 0, PL_F_ANY),
    { .field = "channels", .json = "channels", .stype = PL_S_ROWS, .ctype = PL_C_ROWS,
      .offset = offsetof(pl_map_record, channels), .vocab = -1, .child = &channel_table,
      .count_offset = offsetof(pl_map_record, nchannels) },
    PLACEMENT(pl_map_record, placement, "placement", 0, 0),
    TEXT(pl_map_record, sha256, "sha256", "sha256", 0, PL_F_ANY),
    JOINED(pl_map_record, stored_bytes, "length(t.data)", "stored_bytes", PL_C_SIZE, 0,
           PL_F_ANY),
    SOFTWARE(pl_map_record),
    PARAMETERS(pl_map_record),
    RECORDED(pl_map_record),
    SUPPLIED("supersedes", PL_S_INTEGER, NUL),
    SUPPLIED("reason", PL_S_TEXT, NUL),
    SUPPLIED("encoding", PL_S_TEXT, 0),
    SUPPLIED("data", PL_S_BLOB, PL_COL_NOCONTENT),
};

static const pl_column registration_cols[] = {
    ROWID(pl_registration_record, "registration"),
    INT(pl_registration_record, baseline_map_id, "baseline_map_id", "baseline_map", PL_C_ID,
        0, PL_F_ANY),
    INT(pl_registration_record, current_map_id, "current_map_id", "current_map", PL_C_ID, 0,
        PL_F_ANY),
    TEXT(pl_registration_record, method, "method", "method", IN | REQ, PL_F_NAME),
    WORD(pl_registration_record, status, "status", "status", PL_VOCAB_REGISTRATION_STATUS),
    TEXT(pl_registration_record, refusal, "refusal", "refusal", IN | NUL, PL_F_TEXT),
    REAL(pl_registration_record, shift_col_px, "shift_col_px", "transform.shift_col_px", NUL,
         PL_F_ANY),
    REAL(pl_registration_record, shift_row_px, "shift_row_px", "transform.shift_row_px", NUL,
         PL_F_ANY),
    REAL(pl_registration_record, shift_u_mm, "shift_u_mm", "transform.shift_u_mm", NUL,
         PL_F_ANY),
    REAL(pl_registration_record, shift_v_mm, "shift_v_mm", "transform.shift_v_mm", NUL,
         PL_F_ANY),
    REAL(pl_registration_record, rotation_deg, "rotation_deg", "transform.rotation_deg", NUL,
         PL_F_ANY),
    REAL(pl_registration_record, scale, "scale", "transform.scale", NUL, PL_F_ANY),
    REAL(pl_registration_record, ncc, "ncc", "quality.ncc", NUL, PL_F_ANY),
    REAL(pl_registration_record, peak_sidelobe, "peak_sidelobe", "quality.peak_sidelobe", NUL,
         PL_F_ANY),
    REAL(pl_registration_record, overlap_fraction, "overlap_fraction",
         "quality.overlap_fraction", NUL, PL_F_ANY),
    REAL(pl_registration_record, overlap_mm2, "overlap_mm2", "quality.overlap_mm2", NUL,
         PL_F_ANY),
    TEXT(pl_registration_record, supplied_by, "supplied_by", "supplied_by", IN | NUL,
         PL_F_NAME),
    TEXT(pl_registration_record, supplied_reason, "supplied_reason", "supplied_reason",
         IN | NUL, PL_F_TEXT),
    PARAMETERS(pl_registration_record),
    SOFTWARE(pl_registration_record),
    RECORDED(pl_registration_record),
};

static const pl_column comparison_cols[] = {
    ROWID(pl_comparison_record, "comparison"),
    SUPPLIED("site_key", PL_S_INTEGER, 0),
    INT(pl_comparison_record, baseline_inspection, "baseline_inspection",
        "baseline_inspection", PL_C_ID, 0, PL_F_ANY),
    INT(pl_comparison_record, current_inspection, "current_inspection", "current_inspection",
        PL_C_ID, 0, PL_F_ANY),
    INT(pl_comparison_record, criteria_id, "criteria_id", "criteria", PL_C_ID, NUL, PL_F_ANY),
    INT(pl_comparison_record, registration_id, "registration_id", "registration", PL_C_ID, NUL,
        PL_F_ANY),
    WORD(pl_comparison_record, status, "status", "status", PL_VOCAB_COMPARISON_STATUS),
    TEXT(pl_comparison_record, not_done_reason, "not_done_reason", "not_done_reason", IN | NUL,
         PL_F_TEXT),
    REAL(pl_comparison_record, uncompared_mm2, "uncompared_mm2", "uncompared_mm2", NUL,
         PL_F_ANY),
    REAL(pl_comparison_record, uncompared_fraction, "uncompared_fraction",
         "uncompared_fraction", NUL, PL_F_ANY),
    PARAMETERS(pl_comparison_record),
    SOFTWARE(pl_comparison_record),
    RECORDED(pl_comparison_record),
};

/* A criteria set: its header fields and its whole canonical JSON (content).
 * The per-set limit columns of the first schema stay NULL: the limits are
 * per rule, inside the content. */
static const pl_column criteria_cols[] = {
    ROWID(pl_criteria_record, "criteria"),
    TEXT(pl_criteria_record, name, "name", "name", IN | REQ, PL_F_NAME),
    TEXT(pl_criteria_record, revision, "revision", "revision", IN | REQ, PL_F_NAME),
    TEXT(pl_criteria_record, source_document, "source_document", "source_document", IN | REQ,
         PL_F_NAME),
    INT(pl_criteria_record, format_version, "format_version", "format_version", PL_C_I64, 0,
        PL_F_ANY),
    INT(pl_criteria_record, example_values, "example_values", "example_values", PL_C_I64, 0,
        PL_F_ANY),
    REAL(pl_criteria_record, repeatability_area_mm2, "repeatability_area_mm2",
         "repeatability_area_mm2", IN | REQ, PL_F_POSITIVE),
    INT(pl_criteria_record, rule_count, "rule_count", "rule_count", PL_C_I64, 0, PL_F_ANY),
    TEXT(pl_criteria_record, sha256, "content_sha256", "sha256", 0, PL_F_ANY),
    COLUMN(pl_criteria_record, content_json, "content_json", "content_json", "content",
           PL_S_TEXT, PL_C_STR, IN | REQ, PL_F_JSON),
    RECORDED(pl_criteria_record),
    CORRECTION,
    SUPPLIED("min_area_mm2", PL_S_REAL, NUL),
    SUPPLIED("area_growth_mm2", PL_S_REAL, NUL),
    SUPPLIED("area_growth_ratio", PL_S_REAL, NUL),
    SUPPLIED("contrast_growth", PL_S_REAL, NUL),
    SUPPLIED("depth_change_mm", PL_S_REAL, NUL),
    SUPPLIED("parameters_json", PL_S_TEXT, NUL),
    SUPPLIED("approved_by", PL_S_TEXT, NUL),
};

/* An indication a comparison found (schema/0005_indications.sql). */
static const pl_column indication_cols[] = {
    ROWID(pl_indication_record, "indication"),
    INT(pl_indication_record, comparison_id, "comparison_id", "comparison", PL_C_ID, IN | REQ,
        PL_F_ANY),
    WORD(pl_indication_record, role, "role", "role", PL_VOCAB_INDICATION_ROLE),
    INT(pl_indication_record, map_id, "map_id", "map", PL_C_ID, IN | REQ, PL_F_ANY),
    INT(pl_indication_record, channel, "channel", "channel", PL_C_I64, IN | REQ, PL_F_ANY),
    INT(pl_indication_record, label, "label", "label", PL_C_I64, IN | REQ, PL_F_ANY),
    INT(pl_indication_record, area_px, "area_px", "threshold.pixels", PL_C_I64, IN | REQ,
        PL_F_ANY),
    REAL(pl_indication_record, area_mm2, "area_mm2", "threshold.area_mm2", IN | REQ,
         PL_F_POSITIVE),
    REAL(pl_indication_record, equivalent_diameter_mm, "equivalent_diameter_mm",
         "threshold.equivalent_diameter_mm", IN | REQ, PL_F_POSITIVE),
    INT(pl_indication_record, area_halfmax_px, "area_halfmax_px", "half_maximum.pixels",
        PL_C_I64, IN | REQ, PL_F_ANY),
    REAL(pl_indication_record, area_halfmax_mm2, "area_halfmax_mm2", "half_maximum.area_mm2",
         IN | REQ, PL_F_POSITIVE),
    REAL(pl_indication_record, equivalent_diameter_halfmax_mm, "equivalent_diameter_halfmax_mm",
         "half_maximum.equivalent_diameter_mm", IN | REQ, PL_F_POSITIVE),
    REAL(pl_indication_record, centroid_col, "centroid_col", "centroid_px.0", IN | REQ,
         PL_F_ANY),
    REAL(pl_indication_record, centroid_row, "centroid_row", "centroid_px.1", IN | REQ,
         PL_F_ANY),
    REAL(pl_indication_record, part_x, "part_x", "centroid_part.0", IN | NUL, PL_F_ANY),
    REAL(pl_indication_record, part_y, "part_y", "centroid_part.1", IN | NUL, PL_F_ANY),
    REAL(pl_indication_record, part_z, "part_z", "centroid_part.2", IN | NUL, PL_F_ANY),
    INT(pl_indication_record, bbox_col0, "bbox_col0", "bbox.0", PL_C_I64, IN | REQ, PL_F_ANY),
    INT(pl_indication_record, bbox_row0, "bbox_row0", "bbox.1", PL_C_I64, IN | REQ, PL_F_ANY),
    INT(pl_indication_record, bbox_col1, "bbox_col1", "bbox.2", PL_C_I64, IN | REQ, PL_F_ANY),
    INT(pl_indication_record, bbox_row1, "bbox_row1", "bbox.3", PL_C_I64, IN | REQ, PL_F_ANY),
    REAL(pl_indication_record, major_axis_mm, "major_axis_mm", "major_axis_mm", IN | NUL,
         PL_F_NONNEGATIVE),
    REAL(pl_indication_record, minor_axis_mm, "minor_axis_mm", "minor_axis_mm", IN | NUL,
         PL_F_NONNEGATIVE),
    REAL(pl_indication_record, orientation_deg, "orientation_deg", "orientation_deg", IN | NUL,
         PL_F_ANY),
    REAL(pl_indication_record, peak_contrast, "peak_contrast", "peak_contrast", IN | REQ,
         PL_F_ANY),
    REAL(pl_indication_record, peak_snr, "peak_snr", "peak_snr", IN | NUL, PL_F_ANY),
    INT(pl_indication_record, peak_col, "peak_col", "peak_px.0", PL_C_I64, IN | REQ, PL_F_ANY),
    INT(pl_indication_record, peak_row, "peak_row", "peak_px.1", PL_C_I64, IN | REQ, PL_F_ANY),
    REAL(pl_indication_record, mean_contrast, "mean_contrast", "mean_contrast", IN | REQ,
         PL_F_ANY),
    REAL(pl_indication_record, depth_mm, "depth_mm", "depth_mm", IN | NUL, PL_F_ANY),
    REAL(pl_indication_record, perimeter_mm, "perimeter_mm", "perimeter_mm", IN | NUL,
         PL_F_NONNEGATIVE),
    COLUMN(pl_indication_record, outline, "outline", "outline", "outline", PL_S_TEXT, PL_C_STR,
           IN | NUL, PL_F_ANY),
    RECORDED(pl_indication_record),
};

/* A classified change of a comparison. */
static const pl_column change_cols[] = {
    ROWID(pl_change_record, "change"),
    INT(pl_change_record, comparison_id, "comparison_id", "comparison", PL_C_ID, IN | REQ,
        PL_F_ANY),
    INT(pl_change_record, number, "number", "number", PL_C_I64, IN | REQ, PL_F_ANY),
    WORD(pl_change_record, class_, "class", "class", PL_VOCAB_CHANGE_CLASS),
    WORD(pl_change_record, matched_by, "matched_by", "matched_by", PL_VOCAB_CHANGE_MATCH),
    COLUMN(pl_change_record, baseline_labels, "baseline_labels", "baseline_labels",
           "baseline_labels", PL_S_TEXT, PL_C_STR, IN | REQ, PL_F_ANY),
    COLUMN(pl_change_record, current_labels, "current_labels", "current_labels",
           "current_labels", PL_S_TEXT, PL_C_STR, IN | REQ, PL_F_ANY),
    WORD(pl_change_record, sizing, "sizing", "sizing", PL_VOCAB_SIZING),
    REAL(pl_change_record, area_baseline_mm2, "area_baseline_mm2", "threshold.baseline_mm2",
         IN | NUL, PL_F_NONNEGATIVE),
    REAL(pl_change_record, area_current_mm2, "area_current_mm2", "threshold.current_mm2",
         IN | NUL, PL_F_NONNEGATIVE),
    REAL(pl_change_record, area_delta_mm2, "area_delta_mm2", "threshold.delta_mm2", IN | NUL,
         PL_F_ANY),
    REAL(pl_change_record, area_delta_percent, "area_delta_percent", "threshold.delta_percent",
         IN | NUL, PL_F_ANY),
    REAL(pl_change_record, area_baseline_halfmax_mm2, "area_baseline_halfmax_mm2",
         "half_maximum.baseline_mm2", IN | NUL, PL_F_NONNEGATIVE),
    REAL(pl_change_record, area_current_halfmax_mm2, "area_current_halfmax_mm2",
         "half_maximum.current_mm2", IN | NUL, PL_F_NONNEGATIVE),
    REAL(pl_change_record, area_delta_halfmax_mm2, "area_delta_halfmax_mm2",
         "half_maximum.delta_mm2", IN | NUL, PL_F_ANY),
    REAL(pl_change_record, contrast_baseline, "contrast_baseline", "contrast.baseline",
         IN | NUL, PL_F_ANY),
    REAL(pl_change_record, contrast_current, "contrast_current", "contrast.current", IN | NUL,
         PL_F_ANY),
    REAL(pl_change_record, contrast_delta, "contrast_delta", "contrast.delta", IN | NUL,
         PL_F_ANY),
    REAL(pl_change_record, centroid_col, "centroid_col", "centroid_px.0", IN | NUL, PL_F_ANY),
    REAL(pl_change_record, centroid_row, "centroid_row", "centroid_px.1", IN | NUL, PL_F_ANY),
    REAL(pl_change_record, distance_px, "distance_px", "distance_px", IN | NUL,
         PL_F_NONNEGATIVE),
    REAL(pl_change_record, area_limit_mm2, "area_limit_mm2", "area_limit.limit_mm2", IN | NUL,
         PL_F_NONNEGATIVE),
    REAL(pl_change_record, area_measured_mm2, "area_measured_mm2", "area_limit.measured_mm2",
         IN | NUL, PL_F_ANY),
    REAL(pl_change_record, area_margin_mm2, "area_margin_mm2", "area_limit.margin_mm2",
         IN | NUL, PL_F_ANY),
    FLAG(pl_change_record, area_exceeds, "area_exceeds", "area_limit.exceeds", IN | REQ),
    REAL(pl_change_record, contrast_limit, "contrast_limit", "contrast_limit.limit", IN | NUL,
         PL_F_NONNEGATIVE),
    REAL(pl_change_record, contrast_margin, "contrast_margin", "contrast_limit.margin",
         IN | NUL, PL_F_ANY),
    FLAG(pl_change_record, contrast_exceeds, "contrast_exceeds", "contrast_limit.exceeds",
         IN | REQ),
    FLAG(pl_change_record, reportable, "reportable", "reportable", IN | REQ),
    FLAG(pl_change_record, exceeds, "exceeds", "exceeds", IN | REQ),
    INT(pl_change_record, region_pixels, "region_pixels", "region_pixels", PL_C_I64, IN | NUL,
        PL_F_ANY),
    INT(pl_change_record, touches, "touches", "touches", PL_C_I64, IN | NUL, PL_F_ANY),
    RECORDED(pl_change_record),
};

static const pl_column person_cols[] = {
    ROWID(pl_person, "person"),
    TEXT(pl_person, handle, "handle", "handle", IN | REQ, PL_F_KEY),
    TEXT(pl_person, name, "name", "name", IN | REQ, PL_F_NAME),
    WORD(pl_person, role, "role", "role", PL_VOCAB_ROLE),
    TEXT(pl_person, organisation, "organisation", "organisation", IN | NUL, PL_F_NAME),
    RECORDED(pl_person),
};

static const pl_column person_key_cols[] = {
    ROWID(pl_person_key, "key"),
    INT(pl_person_key, person_id, "person_id", "person", PL_C_ID, 0, PL_F_ANY),
    JOINED(pl_person_key, handle, "p.handle", "handle", PL_C_TEXT, IN | REQ, PL_F_KEY),
    TEXT(pl_person_key, public_key, "public_key", "public_key", IN | REQ, PL_F_NAME),
    TEXT(pl_person_key, valid_from, "valid_from", "valid_from", IN | REQ, PL_F_DATE),
    TEXT(pl_person_key, reason, "reason", "reason", IN | NUL, PL_F_TEXT),
    RECORDED(pl_person_key),
};

static const pl_column qualification_cols[] = {
    ROWID(pl_qualification, "qualification"),
    INT(pl_qualification, person_id, "person_id", "person", PL_C_ID, 0, PL_F_ANY),
    JOINED(pl_qualification, handle, "p.handle", "handle", PL_C_TEXT, IN | REQ, PL_F_KEY),
    WORD(pl_qualification, method, "method", "method", PL_VOCAB_METHOD),
    WORD(pl_qualification, level, "level", "level", PL_VOCAB_INSPECTOR_LEVEL),
    TEXT(pl_qualification, valid_from, "valid_from", "valid_from", IN | REQ, PL_F_DATE),
    TEXT(pl_qualification, valid_until, "valid_until", "valid_until", IN | REQ, PL_F_DATE),
    TEXT(pl_qualification, certificate, "certificate", "certificate", IN | NUL, PL_F_NAME),
    RECORDED(pl_qualification),
};

static const pl_column procedure_cols[] = {
    ROWID(pl_procedure_levels, "procedure_levels"),
    TEXT(pl_procedure_levels, procedure, "procedure", "procedure", IN | REQ, PL_F_NAME),
    TEXT(pl_procedure_levels, procedure_rev, "procedure_rev", "procedure_rev", IN | NUL,
         PL_F_NAME),
    TEXT(pl_procedure_levels, levels, "levels", "levels", IN | REQ, PL_F_NAME),
    RECORDED(pl_procedure_levels),
};

#define SUPERSEDED(T, table) \
    JOINED(T, superseded, "EXISTS (SELECT 1 FROM " table " y WHERE y.supersedes = t.id)", \
           "superseded", PL_C_FLAG, 0, PL_F_ANY)

static const pl_column interpretation_cols[] = {
    ROWID(pl_interpretation, "interpretation"),
    INT(pl_interpretation, change_id, "change_id", "change", PL_C_ID, 0, PL_F_ANY),
    JOINED(pl_interpretation, comparison_id, "x.comparison_id", "comparison", PL_C_ID, 0,
           PL_F_ANY),
    JOINED(pl_interpretation, change_number, "x.number", "change_number", PL_C_I64, 0,
           PL_F_ANY),
    WORD(pl_interpretation, class_, "class", "class", PL_VOCAB_INTERPRETATION),
    TEXT(pl_interpretation, note, "note", "note", IN | NUL, PL_F_TEXT),
    INT(pl_interpretation, supersedes, "supersedes", "supersedes", PL_C_ID, NUL, PL_F_ANY),
    TEXT(pl_interpretation, reason, "reason", "reason", IN | NUL, PL_F_TEXT),
    JOINED(pl_interpretation, handle, "p.handle", "signed_by", PL_C_TEXT, IN | REQ, PL_F_KEY),
    INT(pl_interpretation, person_id, "person_id", "person", PL_C_ID, 0, PL_F_ANY),
    TEXT(pl_interpretation, signed_on, "signed_on", "signed_on", IN | REQ, PL_F_DATE),
    SUPERSEDED(pl_interpretation, "interpretation"),
    SUPPLIED("signature", PL_S_BLOB, 0),
    RECORDED(pl_interpretation),
};

static const pl_column disposition_cols[] = {
    ROWID(pl_disposition, "disposition"),
    JOINED(pl_disposition, airframe_serial, "a.serial", "airframe", PL_C_TEXT, 0, PL_F_ANY),
    JOINED(pl_disposition, site_code, "s.code", "site", PL_C_TEXT, 0, PL_F_ANY),
    INT(pl_disposition, comparison_id, "comparison_id", "comparison", PL_C_ID, 0, PL_F_ANY),
    TEXT(pl_disposition, changes, "changes_json", "changes", 0, PL_F_ANY),
    INT(pl_disposition, criteria_id, "criteria_id", "criteria", PL_C_ID, NUL, PL_F_ANY),
    WORD(pl_disposition, decision, "decision", "decision", PL_VOCAB_DECISION),
    TEXT(pl_disposition, due_date, "due_date", "due.date", IN | NUL, PL_F_DATE),
    REAL(pl_disposition, due_hours, "due_hours", "due.hours", IN | NUL, PL_F_POSITIVE),
    INT(pl_disposition, due_cycles, "due_cycles", "due.cycles", PL_C_I64, NUL, PL_F_ANY),
    TEXT(pl_disposition, repair_ref, "repair_ref", "repair_ref", IN | NUL, PL_F_NAME),
    TEXT(pl_disposition, query_ref, "query_ref", "query_ref", IN | NUL, PL_F_NAME),
    TEXT(pl_disposition, rationale, "rationale", "rationale", IN | NUL, PL_F_TEXT),
    INT(pl_disposition, supersedes, "supersedes", "supersedes", PL_C_ID, NUL, PL_F_ANY),
    TEXT(pl_disposition, reason, "reason", "reason", IN | NUL, PL_F_TEXT),
    JOINED(pl_disposition, handle, "p.handle", "signed_by", PL_C_TEXT, IN | REQ, PL_F_KEY),
    INT(pl_disposition, person_id, "person_id", "person", PL_C_ID, 0, PL_F_ANY),
    TEXT(pl_disposition, signed_on, "signed_on", "signed_on", IN | REQ, PL_F_DATE),
    SUPERSEDED(pl_disposition, "disposition"),
    SUPPLIED("signature", PL_S_BLOB, 0),
    RECORDED(pl_disposition),
};

#define TABLE(id, name, from, cols, T) \
    { id, name, from, cols, sizeof cols / sizeof cols[0], sizeof(T), NULL, NULL }
static const pl_table_desc tables[PL_TABLE_COUNT] = {
    TABLE(PL_TABLE_AIRFRAME, "airframe", "airframe_current t", airframe_cols, pl_airframe),
    TABLE(PL_TABLE_OPERATOR, "airframe_operator", "airframe_operator t", operator_cols,
          pl_operator),
    TABLE(PL_TABLE_SITE, "site", "site_current t JOIN airframe a ON a.id = t.airframe_key",
          site_cols, pl_site),
    TABLE(PL_TABLE_INSPECTION, "inspection",
          "inspection_current t JOIN site s ON s.id = t.site_key "
          "JOIN airframe a ON a.id = s.airframe_key", inspection_cols, pl_inspection),
    TABLE(PL_TABLE_MAP, "map", "map t", map_cols, pl_map_record),
    channel_table,
    TABLE(PL_TABLE_REGISTRATION, "registration", "registration t", registration_cols,
          pl_registration_record),
    TABLE(PL_TABLE_COMPARISON, "comparison", "comparison t", comparison_cols,
          pl_comparison_record),
    TABLE(PL_TABLE_CRITERIA, "criteria", "criteria t", criteria_cols, pl_criteria_record),
    TABLE(PL_TABLE_INDICATION, "indication", "indication t", indication_cols,
          pl_indication_record),
    TABLE(PL_TABLE_CHANGE, "indication_change", "indication_change t", change_cols,
          pl_change_record),
    TABLE(PL_TABLE_PERSON, "person", "person t", person_cols, pl_person),
    TABLE(PL_TABLE_PERSON_KEY, "person_key", "person_key t JOIN person p ON p.id = t.person_id",
          person_key_cols, pl_person_key),
    TABLE(PL_TABLE_QUALIFICATION, "person_qualification",
          "person_qualification t JOIN person p ON p.id = t.person_id", qualification_cols,
          pl_qualification),
    TABLE(PL_TABLE_PROCEDURE_LEVELS, "procedure_level", "procedure_level t", procedure_cols,
          pl_procedure_levels),
    TABLE(PL_TABLE_INTERPRETATION, "interpretation",
          "interpretation t JOIN indication_change x ON x.id = t.change_id "
          "JOIN person p ON p.id = t.person_id",
          interpretation_cols, pl_interpretation),
    TABLE(PL_TABLE_DISPOSITION, "disposition",
          "disposition t JOIN person p ON p.id = t.person_id "
          "JOIN comparison c ON c.id = t.comparison_id JOIN site s ON s.id = c.site_key "
          "JOIN airframe a ON a.id = s.airframe_key",
          disposition_cols, pl_disposition),
};

const pl_table_desc *pl_row__table(pl_table table)
{
    assert((unsigned)table < PL_TABLE_COUNT && tables[table].id == table);
    assert(tables[table].ncols <= PL_ROW_MAX_COLUMNS);
    return &tables[table];
}

PL_EXPORT const char *pl_table_name(pl_table table)
{
    return (unsigned)table < PL_TABLE_COUNT ? tables[table].name : NULL;
}

size_t pl_row__column(const pl_table_desc *t, const char *column)
{
    for (size_t i = 0; i < t->ncols; i++)
        if (t->cols[i].column && strcmp(t->cols[i].column, column) == 0)
            return i;
    assert(!"no such column in the description");
    return 0;
}

/* Where a field lives in a record. */
static const void *cfield(const pl_column *c, const void *rec)
{
    return (const char *)rec + c->offset;
}

static void *field(const pl_column *c, void *rec)
{
    return (char *)rec + c->offset;
}

static int stored(const pl_column *c)
{
    return c->stype != PL_S_NONE && c->stype != PL_S_ROWS;
}

/* Fields a read fills (pl_row__select() order). */
static int is_read(const pl_column *c)
{
    return c->ctype != PL_C_NONE && c->ctype != PL_C_ROWS;
}

/* A record's child rows: their array and count. */
static const void *children_of(const pl_column *c, const void *rec, size_t *n)
{
    const void *p;
    uint32_t count;
    memcpy(&p, cfield(c, rec), sizeof p);
    memcpy(&count, (const char *)rec + c->count_offset, sizeof count);
    *n = p ? count : 0;
    return p;
}

/* ---- checks --------------------------------------------------------------------- */

/*
 * A name (serial, code, reference, person) is one line of text without
 * leading or trailing blanks, so that it prints and compares as typed.
 * Fixed buffers from the caller must be NUL terminated inside their size.
 */
int pl_row__check_name(pl_err *err, const char *label, const char *field_name, const char *v,
                       size_t cap, int required)
{
    if (!v)
        v = "";
    size_t n = strnlen(v, cap);
    if (n == cap)
        return pl__err(err, PL_EINVAL, "%s: %s is too long (at most %zu characters)", label,
                       field_name, cap - 1);
    if (n == 0)
        return required ? pl__err(err, PL_EINVAL, "%s: %s is required", label, field_name)
                        : PL_OK;
    char what[STORE_LABEL_SIZE + 64];
    snprintf(what, sizeof what, "%s: %s", label, field_name);
    int rc = pl_text_check(v, 0, what, err);
    if (rc)
        return rc;
    if (v[0] == ' ' || v[n - 1] == ' ')
        return pl__err(err, PL_EINVAL, "%s: %s '%s' has leading or trailing spaces", label,
                       field_name, v);
    return PL_OK;
}

/* A key (serial, site code): a name in the key alphabet. */
int pl_row__check_key(pl_err *err, const char *label, const char *field_name, const char *v,
                      size_t cap, int required)
{
    if (!v)
        v = "";
    size_t n = strnlen(v, cap);
    if (n == cap)
        return pl__err(err, PL_EINVAL, "%s: %s is too long (at most %d characters)", label,
                       field_name, PL_KEY_MAX);
    if (n == 0 && !required)
        return PL_OK;
    char what[STORE_LABEL_SIZE + 64];
    snprintf(what, sizeof what, "%s: %s", label, field_name);
    return pl_key_check(v, what, err);
}

/* Free text (notes, descriptions): valid UTF-8 within its buffer, line
 * breaks and tabs allowed but no other control character. */
int pl_row__check_text(pl_err *err, const char *label, const char *field_name, const char *v,
                       size_t cap, int required)
{
    size_t n = v ? strnlen(v, cap) : 0;
    if (n == cap)
        return pl__err(err, PL_EINVAL, "%s: %s is too long (at most %zu characters)", label,
                       field_name, cap - 1);
    if (n == 0 && required)
        return pl__err(err, PL_EINVAL, "%s: %s is required", label, field_name);
    char what[STORE_LABEL_SIZE + 64];
    snprintf(what, sizeof what, "%s: %s", label, field_name);
    return pl_text_check(v, PL_TEXT_LINES, what, err);
}

int pl_row__check_date(pl_err *err, const char *label, const char *field_name, const char *v,
                       size_t cap, int required)
{
    int rc = pl_row__check_text(err, label, field_name, v, cap, required);
    if (rc)
        return rc;
    if (v && *v && !pl_store__valid_date(v))
        return pl__err(err, PL_EINVAL, "%s: %s '%s' is not a calendar date YYYY-MM-DD", label,
                       field_name, v);
    return PL_OK;
}

/* JSON text must be a JSON object, and only that (nothing after it). */
static int check_json_object(pl_err *err, const char *label, const char *field_name,
                             const char *json)
{
    if (!json)
        return PL_OK;
    if (!valid_utf8((const unsigned char *)json, strlen(json)))
        return pl__err(err, PL_EINVAL, "%s: %s is not valid UTF-8", label, field_name);
    cJSON *j = cJSON_ParseWithOpts(json, NULL, 1);
    int ok = cJSON_IsObject(j);
    cJSON_Delete(j);
    return ok ? PL_OK : pl__err(err, PL_EINVAL, "%s: %s is not a JSON object", label, field_name);
}

/* A number's bound, after its form: "<label>: <field>: ... outside ...". */
static int check_bound(const pl_column *c, double v, const char *label, pl_err *err)
{
    if (!c->bound)
        return PL_OK;
    char what[STORE_LABEL_SIZE + 64];
    snprintf(what, sizeof what, "%s: %s", label, c->field);
    return pl_bound_check((pl_bound)(c->bound - 1), v, what, err);
}

static int check_number(const pl_column *c, double v, const char *label, pl_err *err)
{
    int nullable = (c->flags & PL_COL_NULLABLE) != 0;
    if (nullable && isnan(v))
        return PL_OK;
    if (c->form != PL_F_POSITIVE && c->form != PL_F_NONNEGATIVE) {
        if (!isfinite(v))
            return pl__err(err, PL_EINVAL, "%s: %s must be a finite number%s (got %g)", label,
                           c->field, nullable ? " or unknown" : "", v);
        return check_bound(c, v, label, err);
    }
    int positive = c->form == PL_F_POSITIVE;
    if (isfinite(v) && (positive ? v > 0 : v >= 0))
        return check_bound(c, v, label, err);
    return pl__err(err, PL_EINVAL, "%s: %s must be %s 0%s (got %g)", label, c->field,
                   positive ? ">" : ">=", nullable ? " or unknown" : "", v);
}

static int check_field(const pl_column *c, const void *rec, const char *label, pl_err *err)
{
    int required = (c->flags & PL_COL_REQUIRED) != 0;
    switch (c->ctype) {
    case PL_C_TEXT: {
        const char *v = cfield(c, rec);
        int rc = c->form == PL_F_NAME   ? pl_row__check_name(err, label, c->field, v, c->size,
                                                             required)
                 : c->form == PL_F_KEY  ? pl_row__check_key(err, label, c->field, v, c->size,
                                                            required)
                 : c->form == PL_F_DATE ? pl_row__check_date(err, label, c->field, v, c->size,
                                                             required)
                                        : pl_row__check_text(err, label, c->field, v, c->size,
                                                             required);
        if (rc || c->vocab < 0 || !v[0])
            return rc;
        pl_err e = { 0 };
        if (pl_vocabulary_check((pl_vocab)c->vocab, v, &e))
            return pl__err(err, PL_EINVAL, "%s: %s", label, e.msg);
        return PL_OK;
    }
    case PL_C_STR: {
        const char *v;
        memcpy(&v, cfield(c, rec), sizeof v);
        return c->form == PL_F_JSON ? check_json_object(err, label, c->field, v) : PL_OK;
    }
    case PL_C_F64: {
        double v;
        memcpy(&v, cfield(c, rec), sizeof v);
        return check_number(c, v, label, err);
    }
    case PL_C_FLAG: {
        int v;
        memcpy(&v, cfield(c, rec), sizeof v);
        if (v != 0 && v != 1 && !((c->flags & PL_COL_NULLABLE) && v == -1))
            return pl__err(err, PL_EINVAL, "%s: %s must be 0 or 1%s (got %d)", label, c->field,
                           (c->flags & PL_COL_NULLABLE) ? ", or -1 for unknown" : "", v);
        return PL_OK;
    }
    case PL_C_I64: {
        int64_t v;
        memcpy(&v, cfield(c, rec), sizeof v);
        if ((c->flags & PL_COL_NULLABLE) && v == -1)
            return PL_OK;
        if (c->form == PL_F_NONNEGATIVE && v < 0)
            return pl__err(err, PL_EINVAL, "%s: %s must be >= 0 or -1 for unknown (got %lld)",
                           label, c->field, (long long)v);
        return check_bound(c, (double)v, label, err);
    }
    default:
        return PL_OK;
    }
}

int pl_row__check(const pl_table_desc *t, const void *rec, const char *label, pl_err *err)
{
    for (size_t i = 0; i < t->ncols; i++) {
        if (!(t->cols[i].flags & PL_COL_INPUT))
            continue;
        int rc = check_field(&t->cols[i], rec, label, err);
        if (rc)
            return rc;
    }
    return PL_OK;
}

/* ---- rows on their way in ------------------------------------------------------------ */

static pl_value null_value(void)
{
    pl_value v = { PL_S_NONE, 0, 0.0, NULL, 0 };
    return v;
}

static pl_value int_value(int64_t i)
{
    pl_value v = { PL_S_INTEGER, i, 0.0, NULL, 0 };
    return v;
}

static pl_value text_value(const char *p, size_t n)
{
    pl_value v = { PL_S_TEXT, 0, 0.0, p, n };
    return v;
}

/* Field c of rec as a value (ids, counts and sizes as integers), and
 * whether it holds the field's "absent" value. */
static pl_value field_value(const pl_column *c, const void *rec, int *absent)
{
    const void *f = cfield(c, rec);
    int64_t i = 0;
    *absent = 0;
    switch (c->ctype) {
    case PL_C_ID:
    case PL_C_I64: {
        memcpy(&i, f, sizeof i);
        *absent = c->ctype == PL_C_ID ? i == 0 : i < 0;
        return int_value(i);
    }
    case PL_C_U32: {
        uint32_t v;
        memcpy(&v, f, sizeof v);
        *absent = v == 0;
        return int_value(v);
    }
    case PL_C_FLAG: {
        int v;
        memcpy(&v, f, sizeof v);
        *absent = v < 0;
        return int_value(v);
    }
    case PL_C_SIZE: {
        size_t v;
        memcpy(&v, f, sizeof v);
        return int_value((int64_t)v);
    }
    case PL_C_F64: {
        pl_value v = { PL_S_REAL, 0, 0.0, NULL, 0 };
        memcpy(&v.r, f, sizeof v.r);
        *absent = isnan(v.r);
        return v;
    }
    case PL_C_TEXT:
        *absent = strnlen(f, c->size) == 0;
        return text_value(f, strnlen(f, c->size));
    case PL_C_STR: {
        const char *p;
        memcpy(&p, f, sizeof p);
        *absent = !p || !*p;
        return text_value(p ? p : "", p ? strlen(p) : 0);
    }
    default:
        *absent = 1;
        return null_value();
    }
}

/* The stored value of field c of rec: absent is NULL where the column
 * allows it (a real always: SQLite keeps no NaN), the library's version
 * for a software version. */
static pl_value value_of(const pl_column *c, const void *rec)
{
    int absent;
    pl_value v = field_value(c, rec, &absent);
    if (absent && (c->flags & PL_COL_VERSION))
        return text_value(pl_version(), strlen(pl_version()));
    if (absent && ((c->flags & PL_COL_NULLABLE) || c->ctype == PL_C_F64))
        return null_value();
    return v;
}

static int same_value(const pl_value *a, const pl_value *b)
{
    if (a->type != b->type)
        return 0;
    switch (a->type) {
    case PL_S_NONE: return 1;
    case PL_S_INTEGER: return a->i == b->i;
    case PL_S_REAL: return a->r == b->r;
    default: return a->n == b->n && (a->n == 0 || memcmp(a->p, b->p, a->n) == 0);
    }
}

int pl_row__same_input(const pl_table_desc *t, const void *a, const void *b)
{
    for (size_t i = 0; i < t->ncols; i++) {
        const pl_column *c = &t->cols[i];
        if (!(c->flags & PL_COL_INPUT))
            continue;
        pl_value va = value_of(c, a), vb = value_of(c, b);
        if (!same_value(&va, &vb))
            return 0;
    }
    return 1;
}

void pl_row__from_record(pl_row *row, const pl_table_desc *t, const void *rec)
{
    memset(row, 0, sizeof *row);
    row->t = t;
    for (size_t i = 0; i < t->ncols; i++) {
        const pl_column *c = &t->cols[i];
        row->v[i] = null_value();
        if (c->stype == PL_S_ROWS)
            row->children = children_of(c, rec, &row->nchildren);
        else if (stored(c) && c->ctype != PL_C_NONE &&
                 !(c->flags & (PL_COL_STORE | PL_COL_ROWID)))
            row->v[i] = value_of(c, rec);
    }
}

void pl_row__set_id(pl_row *row, const char *column, pl_id v)
{
    row->v[pl_row__column(row->t, column)] = v ? int_value(v) : null_value();
}

void pl_row__set_text(pl_row *row, const char *column, const char *v)
{
    row->v[pl_row__column(row->t, column)] = v ? text_value(v, strlen(v)) : null_value();
}

void pl_row__set_blob(pl_row *row, const char *column, const void *p, size_t n)
{
    pl_value v = { PL_S_BLOB, 0, 0.0, p, n };
    row->v[pl_row__column(row->t, column)] = v;
}

void pl_row__set_correction(pl_row *row, pl_id key, pl_id supersedes, const char *reason)
{
    pl_row__set_id(row, "key", key);
    pl_row__set_id(row, "supersedes", supersedes);
    pl_row__set_text(row, "reason", supersedes ? reason : NULL);
}

int pl_store__prepare_args(pl_store *s, sqlite3_stmt **st, const char *sql, const pl_value *args,
                           int nargs, pl_err *err)
{
    int rc = pl_store__prepare(s, st, sql, err);
    for (int i = 0; !rc && i < nargs; i++)
        pl_store__bind(*st, i + 1, &args[i]);
    return rc;
}

pl_value pl_store__arg_text(const char *v)
{
    return v && *v ? text_value(v, strlen(v)) : null_value();
}

pl_value pl_store__arg_id(pl_id v)
{
    return int_value(v);
}

/* ---- the canonical encoding ---------------------------------------------------------- */

typedef struct enc {
    unsigned char *p;
    size_t n, cap;
    int oom;
} enc;

static void put(enc *e, const void *src, size_t n)
{
    if (e->oom)
        return;
    if (e->n + n > e->cap) {
        size_t cap = e->cap ? e->cap : 256;
        while (cap < e->n + n)
            cap *= 2;
        unsigned char *p = realloc(e->p, cap);
        if (!p) {
            e->oom = 1;
            return;
        }
        e->p = p;
        e->cap = cap;
    }
    memcpy(e->p + e->n, src, n);
    e->n += n;
}

static void put_byte(enc *e, unsigned char b)
{
    put(e, &b, 1);
}

static void put_u32(enc *e, uint32_t v)
{
    unsigned char b[4] = { (unsigned char)v, (unsigned char)(v >> 8), (unsigned char)(v >> 16),
                           (unsigned char)(v >> 24) };
    put(e, b, 4);
}

static void put_u64(enc *e, uint64_t v)
{
    put_u32(e, (uint32_t)v);
    put_u32(e, (uint32_t)(v >> 32));
}

static void patch_u32(enc *e, size_t at, uint32_t v)
{
    if (e->oom)
        return;
    for (int k = 0; k < 4; k++)
        e->p[at + (size_t)k] = (unsigned char)(v >> (8 * k));
}

static int put_bytes(enc *e, const void *p, size_t n, const char *label, const char *what,
                     pl_err *err)
{
    if (n > UINT32_MAX)
        return pl__err(err, PL_EINVAL, "%s: %s is too long to encode", label, what);
    put_u32(e, (uint32_t)n);
    put(e, p, n);
    return PL_OK;
}

/* One value, typed by the declared type of its column. */
static int put_value(enc *e, pl_stype declared, const pl_value *v, const char *label,
                     const char *column, pl_err *err)
{
    if (v->type == PL_S_NONE) {
        put_byte(e, 0x00);
        return PL_OK;
    }
    switch (declared) {
    case PL_S_INTEGER:
        put_byte(e, 0x01);
        put_u64(e, (uint64_t)(v->type == PL_S_REAL ? (int64_t)v->r : v->i));
        return PL_OK;
    case PL_S_REAL: {
        double d = v->type == PL_S_INTEGER ? (double)v->i : v->r;
        if (isnan(d))
            return pl__err(err, PL_EINVAL, "%s: %s is NaN, which has no canonical form", label,
                           column);
        if (d == 0.0)
            d = 0.0; /* -0.0 is written as +0.0 */
        uint64_t bits;
        memcpy(&bits, &d, sizeof bits);
        put_byte(e, 0x02);
        put_u64(e, bits);
        return PL_OK;
    }
    case PL_S_TEXT:
        if (!valid_utf8(v->p, v->n))
            return pl__err(err, PL_EINVAL, "%s: %s is not valid UTF-8", label, column);
        put_byte(e, 0x03);
        return put_bytes(e, v->p, v->n, label, column, err);
    case PL_S_BLOB:
        put_byte(e, 0x04);
        return put_bytes(e, v->p, v->n, label, column, err);
    default:
        assert(!"not a stored type");
        return PL_EINVAL;
    }
}

/* Child rows, one at a time: 1 with `v` filled, 0 at the end, or a failure. */
typedef struct child_source {
    int (*next)(void *ctx, pl_value *v, pl_err *err);
    void *ctx;
} child_source;

static int content(const pl_column *c)
{
    return c->stype == PL_S_ROWS || (stored(c) && !(c->flags & PL_COL_NOCONTENT));
}

static const char *entry_name(const pl_column *c)
{
    return c->stype == PL_S_ROWS ? c->child->name : c->column;
}

/* body = count:u32 entry*, entries sorted by name. */
static int put_body(enc *e, const pl_table_desc *t, const pl_value *v, const child_source *kids,
                    const char *label, pl_err *err)
{
    size_t order[PL_ROW_MAX_COLUMNS], n = 0;
    for (size_t i = 0; i < t->ncols; i++) {
        if (!content(&t->cols[i]))
            continue;
        size_t k = n++;
        while (k > 0 && strcmp(entry_name(&t->cols[order[k - 1]]),
                               entry_name(&t->cols[i])) > 0) {
            order[k] = order[k - 1];
            k--;
        }
        order[k] = i;
    }
    put_u32(e, (uint32_t)n);
    for (size_t k = 0; k < n; k++) {
        const pl_column *c = &t->cols[order[k]];
        const char *name = entry_name(c);
        put_bytes(e, name, strlen(name), label, "a name", err);
        if (c->stype != PL_S_ROWS) {
            int rc = put_value(e, c->stype, &v[order[k]], label, c->column, err);
            if (rc)
                return rc;
            continue;
        }
        assert(kids);
        put_byte(e, 0x05);
        size_t at = e->n;
        put_u32(e, 0);
        uint32_t count = 0;
        pl_value cv[PL_ROW_MAX_COLUMNS];
        int r;
        while ((r = kids->next(kids->ctx, cv, err)) == 1) {
            int rc = put_body(e, c->child, cv, NULL, label, err);
            if (rc)
                return rc;
            count++;
        }
        if (r < 0)
            return r;
        patch_u32(e, at, count);
    }
    return PL_OK;
}

static int encode(enc *e, const pl_table_desc *t, const pl_value *v, const child_source *kids,
                  const char *label, pl_err *err)
{
    put(e, "PLRW", 4);
    put_u32(e, PL_ROW_ENCODING_VERSION);
    put_bytes(e, t->name, strlen(t->name), label, "the table name", err);
    int rc = put_body(e, t, v, kids, label, err);
    if (!rc && e->oom)
        rc = pl__err(err, PL_ENOMEM, "%s: out of memory", label);
    return rc;
}

/* Child rows of a row on its way in: each child struct, with its
 * record's id and its position. */
typedef struct insert_kids {
    const pl_table_desc *t;
    const void *recs;
    size_t n, next;
    pl_id parent;
} insert_kids;

static void child_row(pl_row *cr, const insert_kids *k, size_t i)
{
    pl_row__from_record(cr, k->t, (const char *)k->recs + i * k->t->record_size);
    pl_row__set_id(cr, k->t->parent_column, k->parent);
    cr->v[pl_row__column(k->t, k->t->index_column)] = int_value((int64_t)i);
}

static int next_insert_kid(void *ctx, pl_value *v, pl_err *err)
{
    (void)err;
    insert_kids *k = ctx;
    if (k->next == k->n)
        return 0;
    pl_row cr;
    child_row(&cr, k, k->next++);
    memcpy(v, cr.v, sizeof cr.v);
    return 1;
}

/* ---- the one insert path ---------------------------------------------------------------- */

/* Append the texts (up to a NULL) to the SQL in buf; descriptions are
 * static, so a statement that does not fit is a programming error. */
static void add_sql(char *buf, size_t cap, size_t *n, ...)
{
    va_list ap;
    va_start(ap, n);
    for (const char *s; (s = va_arg(ap, const char *));) {
        size_t len = strlen(s);
        assert(*n + len < cap);
        memcpy(buf + *n, s, len + 1);
        *n += len;
    }
    va_end(ap);
}

/* The table's INSERT, prepared once per store. */
static int insert_statement(pl_store *s, const pl_table_desc *t, sqlite3_stmt **out, pl_err *err)
{
    if (s->insert[t->id]) {
        *out = s->insert[t->id];
        return PL_OK;
    }
    char cols[2048], vals[512];
    size_t nc = 0, nv = 0;
    int k = 0;
    add_sql(cols, sizeof cols, &nc, "INSERT INTO ", t->name, " (", (char *)NULL);
    vals[0] = '\0';
    for (size_t i = 0; i < t->ncols; i++) {
        if (!stored(&t->cols[i]) || (t->cols[i].flags & PL_COL_ROWID))
            continue;
        char param[16];
        snprintf(param, sizeof param, "?%d", ++k);
        const char *sep = k > 1 ? ", " : "";
        add_sql(cols, sizeof cols, &nc, sep, t->cols[i].column, (char *)NULL);
        add_sql(vals, sizeof vals, &nv, sep, param, (char *)NULL);
    }
    char sql[2600];
    snprintf(sql, sizeof sql, "%s) VALUES (%s)", cols, vals);
    if (sqlite3_prepare_v3(s->db, sql, -1, SQLITE_PREPARE_PERSISTENT, &s->insert[t->id], NULL)
        != SQLITE_OK) {
        s->insert[t->id] = NULL;
        return pl_store__fail(s, err, NULL);
    }
    *out = s->insert[t->id];
    return PL_OK;
}

int pl_store__bind(sqlite3_stmt *st, int i, const pl_value *v)
{
    switch (v->type) {
    case PL_S_INTEGER: return sqlite3_bind_int64(st, i, v->i);
    case PL_S_REAL: return sqlite3_bind_double(st, i, v->r);
    case PL_S_TEXT: return sqlite3_bind_text64(st, i, v->p, v->n, SQLITE_STATIC, SQLITE_UTF8);
    case PL_S_BLOB: return sqlite3_bind_blob64(st, i, v->p, v->n, SQLITE_STATIC);
    default: return sqlite3_bind_null(st, i);
    }
}

/* Bind and run one row's INSERT; *id gets the new rowid. */
static int insert_one(pl_store *s, const pl_row *row, pl_id *id, pl_err *err, const char *label)
{
    sqlite3_stmt *st;
    int rc = insert_statement(s, row->t, &st, err);
    if (rc)
        return rc;
    int k = 0, b = SQLITE_OK;
    for (size_t i = 0; i < row->t->ncols; i++)
        if (stored(&row->t->cols[i]) && !(row->t->cols[i].flags & PL_COL_ROWID))
            b |= pl_store__bind(st, ++k, &row->v[i]);
    if (b != SQLITE_OK || sqlite3_step(st) != SQLITE_DONE)
        rc = pl_store__fail(s, err, label);
    else
        *id = sqlite3_last_insert_rowid(s->db);
    sqlite3_reset(st);
    sqlite3_clear_bindings(st);
    return rc;
}

int pl_store__insert(pl_store *s, pl_row *row, pl_id *id, pl_err *err, const char *label)
{
    assert(s && row && row->t);
    /* always inside a command's write scope, never a statement of its own */
    assert(!sqlite3_get_autocommit(s->db));
    const pl_table_desc *t = row->t;
    char now[PL_DATE_SIZE];
    pl_store__now(now);
    for (size_t i = 0; i < t->ncols; i++)
        if (t->cols[i].column && strcmp(t->cols[i].column, "recorded_at") == 0)
            row->v[i] = text_value(now, strlen(now));
    pl_id newid = 0;
    int rc = insert_one(s, row, &newid, err, label);
    const pl_column *rows = NULL;
    for (size_t i = 0; i < t->ncols; i++) {
        if (t->cols[i].flags & PL_COL_ROWID)
            row->v[i] = int_value(newid);
        if (t->cols[i].stype == PL_S_ROWS)
            rows = &t->cols[i];
    }
    insert_kids kids = { rows ? rows->child : NULL, row->children, row->nchildren, 0, newid };
    for (size_t i = 0; !rc && rows && i < row->nchildren; i++) {
        pl_row cr;
        pl_id ignored;
        child_row(&cr, &kids, i);
        rc = insert_one(s, &cr, &ignored, err, label);
    }
    if (!rc) {
        enc e = { 0 };
        child_source src = { next_insert_kid, &kids };
        rc = encode(&e, t, row->v, &src, label, err);
        if (!rc)
            pl_sha256(s->last_row, e.p, e.n);
        free(e.p);
    }
    if (!rc)
        rc = pl_ledger__append(s, t->id, newid, s->last_row, err, label);
    if (!rc && id)
        *id = newid;
    return rc;
}

/* ---- reads ------------------------------------------------------------------------------ */

int pl_row__select_count(const pl_table_desc *t)
{
    int n = 0;
    for (size_t i = 0; i < t->ncols; i++)
        n += is_read(&t->cols[i]);
    return n;
}

void pl_row__select(char *buf, size_t cap, const pl_table_desc *t, const char *extra)
{
    size_t n = 0;
    int k = 0;
    add_sql(buf, cap, &n, "SELECT ", (char *)NULL);
    for (size_t i = 0; i < t->ncols; i++) {
        const pl_column *c = &t->cols[i];
        if (!is_read(c))
            continue;
        const char *sep = k++ ? ", " : "";
        if (c->read)
            add_sql(buf, cap, &n, sep, c->read, " AS ", c->field, (char *)NULL);
        else
            add_sql(buf, cap, &n, sep, "t.", c->column, (char *)NULL);
    }
    if (extra)
        add_sql(buf, cap, &n, ", ", extra, (char *)NULL);
    add_sql(buf, cap, &n, " FROM ", t->from, " ", (char *)NULL);
}

int pl_row__read(const pl_table_desc *t, sqlite3_stmt *st, void *rec)
{
    memset(rec, 0, t->record_size);
    int k = 0, oom = 0;
    for (size_t i = 0; i < t->ncols; i++) {
        const pl_column *c = &t->cols[i];
        if (!is_read(c))
            continue;
        int col = k++, null = sqlite3_column_type(st, col) == SQLITE_NULL;
        void *f = field(c, rec);
        switch (c->ctype) {
        case PL_C_ID: {
            pl_id v = sqlite3_column_int64(st, col);
            memcpy(f, &v, sizeof v);
            break;
        }
        case PL_C_I64: {
            int64_t v = null ? -1 : sqlite3_column_int64(st, col);
            memcpy(f, &v, sizeof v);
            break;
        }
        case PL_C_U32: {
            uint32_t v = (uint32_t)sqlite3_column_int64(st, col);
            memcpy(f, &v, sizeof v);
            break;
        }
        case PL_C_FLAG: {
            int v = null ? -1 : sqlite3_column_int64(st, col) != 0;
            memcpy(f, &v, sizeof v);
            break;
        }
        case PL_C_SIZE: {
            size_t v = (size_t)sqlite3_column_int64(st, col);
            memcpy(f, &v, sizeof v);
            break;
        }
        case PL_C_F64: {
            double v = null ? NAN : sqlite3_column_double(st, col);
            memcpy(f, &v, sizeof v);
            break;
        }
        case PL_C_TEXT:
            pl_store__col_text(st, col, f, c->size);
            break;
        case PL_C_STR: {
            const unsigned char *txt = sqlite3_column_text(st, col);
            char *d = txt ? pl__strdup((const char *)txt) : NULL;
            oom |= txt && !d;
            memcpy(f, &d, sizeof d);
            break;
        }
        default:
            break;
        }
    }
    if (oom) {
        pl_row__release(t, rec);
        return PL_ENOMEM;
    }
    return PL_OK;
}

int pl_store__list(pl_store *s, pl_table table, const char *tail, const pl_value *args,
                   int nargs, pl_row_fn fn, void *ud, pl_err *err, const char *label)
{
    const pl_table_desc *t = pl_row__table(table);
    char sql[4096];
    pl_row__select(sql, sizeof sql, t, NULL);
    size_t n = strlen(sql);
    int k = snprintf(sql + n, sizeof sql - n, "%s", tail);
    assert(k >= 0 && (size_t)k < sizeof sql - n);
    sqlite3_stmt *st;
    int rc = pl_store__prepare_args(s, &st, sql, args, nargs, err);
    if (rc)
        return rc;
    void *rec = malloc(t->record_size);
    if (!rec) {
        sqlite3_finalize(st);
        return pl__err(err, PL_ENOMEM, "%s: out of memory", label ? label : s->path);
    }
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        if (pl_row__read(t, st, rec)) {
            rc = pl__err(err, PL_ENOMEM, "%s: out of memory", label ? label : s->path);
            break;
        }
        int stop = fn(ud, rec);
        pl_row__release(t, rec);
        if (stop < 0)
            rc = stop;
        if (stop)
            break;
    }
    free(rec);
    return pl_store__finish_listing(s, st, r, rc, err, label);
}

typedef struct take_one {
    void *dst;
    size_t size;
    int found;
} take_one;

/* Hand the record over to the caller, so the listing releases nothing. */
static int take_first(void *ud, void *rec)
{
    take_one *o = ud;
    memcpy(o->dst, rec, o->size);
    memset(rec, 0, o->size);
    o->found = 1;
    return 1;
}

int pl_store__get(pl_store *s, pl_table table, const char *tail, const pl_value *args,
                  int nargs, void *rec, int *found, pl_err *err, const char *label)
{
    take_one o = { rec, pl_row__table(table)->record_size, 0 };
    int rc = pl_store__list(s, table, tail, args, nargs, take_first, &o, err, label);
    *found = o.found;
    return rc;
}

void pl_row__release(const pl_table_desc *t, void *rec)
{
    for (size_t i = 0; i < t->ncols; i++) {
        const pl_column *c = &t->cols[i];
        void *p;
        if (c->ctype != PL_C_STR && c->ctype != PL_C_ROWS)
            continue;
        memcpy(&p, field(c, rec), sizeof p);
        if (p && c->ctype == PL_C_ROWS) {
            size_t n;
            children_of(c, rec, &n);
            for (size_t k = 0; k < n; k++)
                pl_row__release(c->child, (char *)p + k * c->child->record_size);
        }
        free(p);
        p = NULL;
        memcpy(field(c, rec), &p, sizeof p);
    }
}

int pl_row__copy(const pl_table_desc *t, void *dst, const void *src)
{
    memcpy(dst, src, t->record_size);
    for (size_t i = 0; i < t->ncols; i++) {
        const pl_column *c = &t->cols[i];
        void *copy = NULL;
        if (c->ctype == PL_C_STR) {
            const char *s;
            memcpy(&s, cfield(c, src), sizeof s);
            memcpy(field(c, dst), &copy, sizeof copy);
            if (s && !(copy = pl__strdup(s)))
                goto oom;
            memcpy(field(c, dst), &copy, sizeof copy);
        } else if (c->ctype == PL_C_ROWS) {
            size_t n;
            const char *kids = children_of(c, src, &n);
            memcpy(field(c, dst), &copy, sizeof copy);
            if (!kids)
                continue;
            if (!(copy = calloc(n ? n : 1, c->child->record_size)))
                goto oom;
            memcpy(field(c, dst), &copy, sizeof copy);
            for (size_t k = 0; k < n; k++)
                if (pl_row__copy(c->child, (char *)copy + k * c->child->record_size,
                                 kids + k * c->child->record_size))
                    goto oom;
        }
    }
    return PL_OK;
oom:
    /* fields not reached yet still hold src's pointers: clear them first */
    for (size_t i = 0; i < t->ncols; i++) {
        const pl_column *c = &t->cols[i];
        void *mine, *theirs;
        if (c->ctype != PL_C_STR && c->ctype != PL_C_ROWS)
            continue;
        memcpy(&mine, field(c, dst), sizeof mine);
        memcpy(&theirs, cfield(c, src), sizeof theirs);
        if (mine == theirs) {
            mine = NULL;
            memcpy(field(c, dst), &mine, sizeof mine);
        }
    }
    pl_row__release(t, dst);
    return PL_ENOMEM;
}

/* ---- JSON ----------------------------------------------------------------------------------- */

/* Put `value` at `path` under `o`: "a.b.0" is object a, its key b, element 0
 * of that array (elements are appended in order). */
static int json_put(cJSON *o, const char *path, cJSON *value)
{
    if (!value)
        return 0;
    cJSON *cur = o;
    for (const char *p = path;;) {
        size_t n = strcspn(p, ".");
        char seg[64];
        assert(n < sizeof seg);
        memcpy(seg, p, n);
        seg[n] = '\0';
        int array = cJSON_IsArray(cur);
        if (!p[n]) {
            int ok = array ? cJSON_AddItemToArray(cur, value)
                           : cJSON_AddItemToObject(cur, seg, value);
            if (!ok)
                cJSON_Delete(value);
            return ok;
        }
        p += n + 1;
        cJSON *child = array ? cJSON_GetArrayItem(cur, atoi(seg))
                             : cJSON_GetObjectItemCaseSensitive(cur, seg);
        if (!child) {
            child = *p >= '0' && *p <= '9' ? cJSON_CreateArray() : cJSON_CreateObject();
            if (!child || !(array ? cJSON_AddItemToArray(cur, child)
                                  : cJSON_AddItemToObject(cur, seg, child))) {
                cJSON_Delete(child);
                cJSON_Delete(value);
                return 0;
            }
        }
        cur = child;
    }
}

static cJSON *json_number(double v)
{
    return isfinite(v) ? cJSON_CreateNumber(v) : cJSON_CreateNull();
}

/* A field's JSON value: absent is null, recorded JSON an object. */
static cJSON *json_value(const pl_column *c, const void *rec)
{
    if (c->ctype == PL_C_ROWS) {
        size_t n;
        const char *kids = children_of(c, rec, &n);
        cJSON *a = cJSON_CreateArray();
        for (size_t k = 0; a && k < n; k++) {
            cJSON *item = pl_row__json(c->child, kids + k * c->child->record_size);
            if (!item || !cJSON_AddItemToArray(a, item)) {
                cJSON_Delete(item);
                cJSON_Delete(a);
                return NULL;
            }
        }
        return a;
    }
    int absent;
    pl_value v = field_value(c, rec, &absent);
    if (absent)
        return cJSON_CreateNull();
    if (c->ctype == PL_C_FLAG)
        return cJSON_CreateBool(v.i != 0);
    switch (v.type) {
    case PL_S_INTEGER: return cJSON_CreateNumber((double)v.i);
    case PL_S_REAL: return json_number(v.r);
    case PL_S_TEXT:
        if (c->form == PL_F_JSON) {
            cJSON *j = cJSON_Parse(v.p);
            return j ? j : cJSON_CreateNull();
        }
        return cJSON_CreateString(v.p);
    default: return cJSON_CreateNull();
    }
}

cJSON *pl_row__json(const pl_table_desc *t, const void *rec)
{
    cJSON *o = cJSON_CreateObject();
    for (size_t i = 0; o && i < t->ncols; i++) {
        const pl_column *c = &t->cols[i];
        if (c->json && !json_put(o, c->json, json_value(c, rec))) {
            cJSON_Delete(o);
            return NULL;
        }
    }
    return o;
}

int pl_row__print_json(char **out, cJSON *value, pl_err *err)
{
    *out = value ? cJSON_Print(value) : NULL;
    cJSON_Delete(value);
    return *out ? PL_OK : pl__err(err, PL_ENOMEM, "out of memory");
}

PL_EXPORT int pl_row_json(char **out, pl_table table, const void *record, pl_err *err)
{
    assert(out && record);
    return pl_row__print_json(out, pl_row__json(pl_row__table(table), record), err);
}

struct pl_json_list {
    cJSON *array;
};

PL_EXPORT int pl_json_list_new(pl_json_list **out, pl_err *err)
{
    pl_json_list *l = malloc(sizeof *l);
    if (!l || !(l->array = cJSON_CreateArray())) {
        free(l);
        return pl__err(err, PL_ENOMEM, "out of memory");
    }
    *out = l;
    return PL_OK;
}

PL_EXPORT int pl_json_list_add(pl_json_list *list, pl_table table, const void *record,
                               pl_err *err)
{
    assert(list && record);
    cJSON *o = pl_row__json(pl_row__table(table), record);
    if (!o || !cJSON_AddItemToArray(list->array, o)) {
        cJSON_Delete(o);
        return pl__err(err, PL_ENOMEM, "out of memory");
    }
    return PL_OK;
}

PL_EXPORT int pl_json_list_text(char **out, const pl_json_list *list, pl_err *err)
{
    assert(out && list);
    *out = cJSON_Print(list->array);
    return *out ? PL_OK : pl__err(err, PL_ENOMEM, "out of memory");
}

PL_EXPORT void pl_json_list_free(pl_json_list *list)
{
    if (!list)
        return;
    cJSON_Delete(list->array);
    free(list);
}

/* ---- encoding a stored row ------------------------------------------------------------------- */

/* A stored column's value from a statement, borrowed until the next step. */
static pl_value column_value(sqlite3_stmt *st, int col, pl_stype declared)
{
    pl_value v = null_value();
    if (sqlite3_column_type(st, col) == SQLITE_NULL)
        return v;
    v.type = declared;
    switch (declared) {
    case PL_S_INTEGER: v.i = sqlite3_column_int64(st, col); break;
    case PL_S_REAL: v.r = sqlite3_column_double(st, col); break;
    case PL_S_TEXT:
        v.p = sqlite3_column_text(st, col);
        v.n = (size_t)sqlite3_column_bytes(st, col);
        break;
    default:
        v.p = sqlite3_column_blob(st, col);
        v.n = (size_t)sqlite3_column_bytes(st, col);
        break;
    }
    return v;
}

/* "SELECT <content columns> FROM <table> t WHERE t.<key> = ?1 [ORDER BY ...]" */
static void content_select(char *buf, size_t cap, const pl_table_desc *t, const char *key,
                           const char *order)
{
    size_t n = 0;
    int k = 0;
    add_sql(buf, cap, &n, "SELECT ", (char *)NULL);
    for (size_t i = 0; i < t->ncols; i++) {
        if (!content(&t->cols[i]) || t->cols[i].stype == PL_S_ROWS)
            continue;
        add_sql(buf, cap, &n, k++ ? ", t." : "t.", t->cols[i].column, (char *)NULL);
    }
    add_sql(buf, cap, &n, " FROM ", t->name, " t WHERE t.", key, " = ?1", (char *)NULL);
    if (order)
        add_sql(buf, cap, &n, " ORDER BY t.", order, (char *)NULL);
}

static void content_values(sqlite3_stmt *st, const pl_table_desc *t, pl_value *v)
{
    int k = 0;
    for (size_t i = 0; i < t->ncols; i++) {
        v[i] = null_value();
        if (content(&t->cols[i]) && t->cols[i].stype != PL_S_ROWS)
            v[i] = column_value(st, k++, t->cols[i].stype);
    }
}

typedef struct stored_kids {
    pl_store *s;
    sqlite3_stmt *st;
    const pl_table_desc *t;
    const char *label;
} stored_kids;

static int next_stored_kid(void *ctx, pl_value *v, pl_err *err)
{
    stored_kids *k = ctx;
    int r = sqlite3_step(k->st);
    if (r == SQLITE_DONE)
        return 0;
    if (r != SQLITE_ROW)
        return pl_store__fail(k->s, err, k->label);
    content_values(k->st, k->t, v);
    return 1;
}

PL_EXPORT int pl_store_row_encode(unsigned char **out, size_t *len, pl_store *s, pl_table table,
                                  pl_id id, pl_err *err)
{
    assert(out && len && s);
    *out = NULL;
    *len = 0;
    if ((unsigned)table >= PL_TABLE_COUNT || table == PL_TABLE_MAP_CHANNEL)
        return pl__err(err, PL_EINVAL, "table %d has no rows of its own to encode", (int)table);
    const pl_table_desc *t = pl_row__table(table);
    char label[STORE_LABEL_SIZE], sql[2048];
    snprintf(label, sizeof label, "%s: %s %lld", s->path, t->name, (long long)id);
    content_select(sql, sizeof sql, t, "id", NULL);
    sqlite3_stmt *st = NULL, *kst = NULL;
    int rc = pl_store__row_by_id(s, &st, sql, id, err, label, "no such row");
    if (rc)
        return rc;
    pl_value v[PL_ROW_MAX_COLUMNS];
    content_values(st, t, v);
    stored_kids kids = { s, NULL, NULL, label };
    for (size_t i = 0; !rc && i < t->ncols; i++) {
        const pl_table_desc *ct = t->cols[i].child;
        if (t->cols[i].stype != PL_S_ROWS)
            continue;
        content_select(sql, sizeof sql, ct, ct->parent_column, ct->index_column);
        if (!(rc = pl_store__prepare(s, &kst, sql, err))) {
            sqlite3_bind_int64(kst, 1, id);
            kids.st = kst;
            kids.t = ct;
        }
    }
    enc e = { 0 };
    child_source src = { next_stored_kid, &kids };
    if (!rc)
        rc = encode(&e, t, v, &src, label, err);
    sqlite3_finalize(kst);
    sqlite3_finalize(st);
    if (rc) {
        free(e.p);
        return rc;
    }
    *out = e.p;
    *len = e.n;
    return PL_OK;
}

/* For the tests: the canonical encoding of a row given as values. */
int pl_row__encode(unsigned char **out, size_t *len, const pl_row *row, pl_id id, pl_err *err)
{
    enc e = { 0 };
    const pl_column *rows = NULL;
    for (size_t i = 0; i < row->t->ncols; i++)
        if (row->t->cols[i].stype == PL_S_ROWS)
            rows = &row->t->cols[i];
    insert_kids kids = { rows ? rows->child : NULL, row->children, row->nchildren, 0, id };
    child_source src = { next_insert_kid, &kids };
    int rc = encode(&e, row->t, row->v, &src, "row", err);
    if (rc) {
        free(e.p);
        return rc;
    }
    *out = e.p;
    *len = e.n;
    return PL_OK;
}

/* ---- signed content ------------------------------------------------------------------- */

/* The signed-content message (plyledger/disposition.h) of a row's values:
 * the id, recorded_at and signature entries made null. */
static int signed_message(const pl_table_desc *t, const pl_value *values,
                          unsigned char out[PL_SIGNED_MESSAGE_SIZE], const char *label,
                          pl_err *err)
{
    pl_value v[PL_ROW_MAX_COLUMNS];
    for (size_t i = 0; i < t->ncols; i++) {
        v[i] = values[i];
        const char *c = t->cols[i].column;
        if ((t->cols[i].flags & PL_COL_ROWID) ||
            (c && (strcmp(c, "recorded_at") == 0 || strcmp(c, "signature") == 0)))
            v[i] = null_value();
    }
    enc e = { 0 };
    child_source none = { NULL, NULL };
    int rc = encode(&e, t, v, &none, label, err);
    if (!rc) {
        memcpy(out, "PLSG", 4);
        for (int i = 0; i < 4; i++)
            out[4 + i] = (unsigned char)(PL_SIGNED_CONTENT_VERSION >> (8 * i));
        pl_sha256(out + 8, e.p, e.n);
    }
    free(e.p);
    return rc;
}

int pl_row__signed_message(const pl_row *row, unsigned char out[PL_SIGNED_MESSAGE_SIZE],
                           const char *label, pl_err *err)
{
    return signed_message(row->t, row->v, out, label, err);
}

int pl_store__signed_message(pl_store *s, pl_table table, pl_id id,
                             unsigned char out[PL_SIGNED_MESSAGE_SIZE], const void **sig,
                             size_t *siglen, sqlite3_stmt **keep, pl_err *err)
{
    const pl_table_desc *t = pl_row__table(table);
    char label[STORE_LABEL_SIZE], sql[2048];
    snprintf(label, sizeof label, "%s: %s %lld", s->path, t->name, (long long)id);
    content_select(sql, sizeof sql, t, "id", NULL);
    sqlite3_stmt *st = NULL;
    int rc = pl_store__row_by_id(s, &st, sql, id, err, label, "no such row");
    if (rc)
        return rc;
    pl_value v[PL_ROW_MAX_COLUMNS];
    content_values(st, t, v);
    rc = signed_message(t, v, out, label, err);
    *sig = NULL;
    *siglen = 0;
    for (size_t i = 0; i < t->ncols; i++)
        if (t->cols[i].column && strcmp(t->cols[i].column, "signature") == 0 &&
            v[i].type == PL_S_BLOB) {
            *sig = v[i].p;
            *siglen = v[i].n;
        }
    *keep = st; /* the signature's bytes live in it */
    return rc;
}
