/*
 * test_map.c - the map object, its vocabulary and geometry, the store
 * encoding (checked with Python's zlib and hashlib), PNG files (checked with
 * pypng) and CSV grids (checked with numpy.savetxt). The references run
 * through tests/ref/map_ref.py with Debian's python3.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <float.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <zlib.h>

#include "image/map_int.h"
#include "plyledger/hash.h"
#include "plyledger/store.h"
#include "testutil.h"

/* ---- helpers ---------------------------------------------------------- */

static uint32_t bits_of(float f)
{
    uint32_t u;
    memcpy(&u, &f, 4);
    return u;
}

static float float_of(uint32_t u)
{
    float f;
    memcpy(&f, &u, 4);
    return f;
}

/* The test map of blob-check in map_ref.py: (c*1000 + j*10 + i)*0.25 - 7,
 * no data where (i + j + c) % 5 == 0, each NaN with a different payload
 * and sign so that canonicalisation is exercised. */
static pl_map *reference_map(uint32_t w, uint32_t h, uint32_t nc)
{
    pl_map *m;
    assert_int_equal(pl_map_new(&m, w, h, nc, NULL), PL_OK);
    static const uint32_t nans[] = {0x7fc00000u, 0xffc00000u, 0x7f800001u, 0xffa5a5a5u,
                                    0x7fffffffu};
    size_t k = 0;
    for (uint32_t c = 0; c < nc; c++)
        for (uint32_t j = 0; j < h; j++)
            for (uint32_t i = 0; i < w; i++) {
                float *v = &m->data[((size_t)c * h + j) * w + i];
                if ((i + j + c) % 5 == 0)
                    *v = float_of(nans[k++ % 5]);
                else
                    *v = (float)((double)(c * 1000 + j * 10 + i) * 0.25 - 7);
            }
    return m;
}

/* ---- the object ------------------------------------------------------- */

static void test_map__new_sets_documented_defaults(void **state)
{
    (void)state;
    pl_map *m;
    assert_int_equal(pl_map_new(&m, 3, 2, 2, NULL), PL_OK);
    assert_int_equal(m->width, 3);
    assert_int_equal(m->height, 2);
    assert_int_equal(m->nchannels, 2);
    assert_true(m->pitch_u == 1.0 && m->pitch_v == 1.0);
    for (int k = 0; k < 3; k++) {
        assert_true(m->placement.origin[k] == 0.0);
        assert_true(m->placement.u[k] == (k == 0 ? 1.0 : 0.0));
        assert_true(m->placement.v[k] == (k == 1 ? 1.0 : 0.0));
    }
    assert_string_equal(m->placement.system, "local");
    assert_string_equal(m->placement.unit, "mm");
    assert_int_equal(pl_placement_check(&m->placement, NULL), PL_OK);
    for (size_t i = 0; i < 12; i++)
        assert_int_equal(bits_of(m->data[i]), 0);
    assert_string_equal(m->channels[1].quantity, "");
    assert_string_equal(m->channels[1].unit, "");
    /* channel c starts at c * height * width */
    assert_ptr_equal(pl_map_channel(m, 0), m->data);
    assert_ptr_equal(pl_map_channel(m, 1), m->data + 6);
    pl_map_free(m);
    pl_map_free(NULL);
}

static void test_map__new_refuses_bad_sizes(void **state)
{
    (void)state;
    static const uint32_t sizes[][3] = {
        {0, 1, 1}, {1, 0, 1}, {1, 1, 0},
        {PL_MAP_MAX_SIDE + 1, 1, 1}, {1, PL_MAP_MAX_SIDE + 1, 1},
        {1, 1, PL_MAP_MAX_CHANNELS + 1}, {UINT32_MAX, UINT32_MAX, UINT32_MAX},
    };
    for (size_t k = 0; k < sizeof sizes / sizeof sizes[0]; k++) {
        pl_map *m = (pl_map *)1;
        pl_err err = {0};
        assert_int_equal(pl_map_new(&m, sizes[k][0], sizes[k][1], sizes[k][2], &err),
                         PL_EINVAL);
        assert_null(m);
        assert_int_equal(err.code, PL_EINVAL);
        tu_assert_msg_has(err.msg, "cannot be made");
    }
    size_t n;
    assert_int_equal(pl_map__count(&n, PL_MAP_MAX_SIDE, PL_MAP_MAX_SIDE, 1), PL_OK);
    assert_true(n == (size_t)PL_MAP_MAX_SIDE * PL_MAP_MAX_SIDE);
}

static void test_map__clone_is_deep(void **state)
{
    (void)state;
    pl_map *m, *c;
    assert_int_equal(pl_map_new(&m, 4, 3, 2, NULL), PL_OK);
    for (size_t i = 0; i < 24; i++)
        m->data[i] = (float)i;
    assert_int_equal(pl_map_set_channel(m, 1, "depth", "mm", NULL), PL_OK);
    assert_int_equal(pl_map_set_pitch(m, 0.2, 0.3, NULL), PL_OK);
    snprintf(m->placement.system, sizeof m->placement.system, "STA/BL/WL");
    m->placement.origin[0] = 512.5;
    assert_int_equal(pl_map_clone(&c, m, NULL), PL_OK);
    assert_ptr_not_equal(c->data, m->data);
    assert_ptr_not_equal(c->channels, m->channels);
    assert_memory_equal(c->data, m->data, 24 * sizeof(float));
    assert_string_equal(c->channels[1].quantity, "depth");
    assert_true(c->pitch_u == 0.2 && c->pitch_v == 0.3);
    assert_string_equal(c->placement.system, "STA/BL/WL");
    assert_true(c->placement.origin[0] == 512.5);
    m->data[5] = -1;
    m->channels[1].quantity[0] = 'x';
    assert_true(c->data[5] == 5.0f);
    assert_string_equal(c->channels[1].quantity, "depth");
    pl_map_free(m);
    pl_map_free(c);
}

/* Every quantity names at least one inspection method, each of them a word of
 * the site method vocabulary; the thermography maps do not fit an ultrasonic
 * site and the ultrasonic ones do not fit a thermography site (common
 * practice: a flash thermography inspection yields no echo amplitude). */
static void test_map__quantities_belong_to_methods(void **state)
{
    (void)state;
    const pl_vocabulary *m = pl_vocabulary_get(PL_VOCAB_METHOD);
    assert_non_null(m);
    for (size_t i = 0; i < pl_quantity_count(); i++) {
        const pl_quantity_info *q = pl_quantity_at(i);
        assert_non_null(q->methods);
        int fits = 0;
        for (size_t k = 0; k < m->count; k++)
            fits += pl_quantity_fits_method(q->name, m->words[k]);
        if (fits < 1)
            fail_msg("%s: no method of the vocabulary produces it ('%s')", q->name, q->methods);
        /* every word it lists is a method of the vocabulary */
        char words[128];
        snprintf(words, sizeof words, "%s", q->methods);
        int listed = 0;
        for (char *w = strtok(words, " "); w; w = strtok(NULL, " "), listed++)
            assert_int_equal(pl_vocabulary_check(PL_VOCAB_METHOD, w, NULL), PL_OK);
        assert_int_equal(listed, fits);
    }
    assert_true(pl_quantity_fits_method("temperature-contrast", "flash-thermography"));
    assert_false(pl_quantity_fits_method("temperature-contrast", "ultrasound-pulse-echo"));
    assert_false(pl_quantity_fits_method("ultrasonic-amplitude", "flash-thermography"));
    assert_true(pl_quantity_fits_method("ultrasonic-amplitude", "ultrasound-through-transmission"));
    assert_true(pl_quantity_fits_method("depth", "ultrasound-pulse-echo"));
    assert_false(pl_quantity_fits_method("eddy-current-phase", "eddy"));
    assert_false(pl_quantity_fits_method("eddy-current-phase", "eddy-current-x"));
    assert_false(pl_quantity_fits_method("porosity-index", "flash-thermography"));
    assert_false(pl_quantity_fits_method("depth", ""));
}

static void test_map__channels_by_quantity(void **state)
{
    (void)state;
    pl_map *m;
    assert_int_equal(pl_map_new(&m, 2, 2, 3, NULL), PL_OK);
    assert_int_equal(pl_map_set_channel(m, 0, "phase", "deg", NULL), PL_OK);
    assert_int_equal(pl_map_set_channel(m, 1, "amplitude", "K", NULL), PL_OK);
    assert_int_equal(pl_map_set_channel(m, 2, "phase", "rad", NULL), PL_OK);
    assert_int_equal(pl_map_find_channel(m, "phase"), 0);
    assert_int_equal(pl_map_find_channel(m, "amplitude"), 1);
    assert_int_equal(pl_map_find_channel(m, "depth"), PL_ENOTFOUND);
    pl_err err = {0};
    assert_int_equal(pl_map_set_channel(m, 3, "depth", "mm", &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "channel 3");
    assert_int_equal(pl_map_set_channel(m, 0, "depth", "K", &err), PL_EINVAL);
    assert_string_equal(m->channels[0].quantity, "phase"); /* unchanged */
    assert_string_equal(m->channels[0].unit, "deg");
    pl_map_free(m);
}

/* ---- vocabulary -------------------------------------------------------- */

/* The quantities the design names, each with its accepted units (first is
 * the default). Units are SI or the trade's usual ones (common practice). */
static void test_map__vocabulary_has_the_documented_quantities(void **state)
{
    (void)state;
    static const struct {
        const char *name, *units;
    } want[] = {
        {"temperature-contrast", "K mK"}, {"normalised-contrast", "1 %"},
        {"log-derivative-1", "1"},        {"log-derivative-2", "1"},
        {"time-of-peak-d2", "s ms"},      {"depth", "mm"},
        {"phase", "rad deg"},             {"phase-contrast", "rad deg"},
        {"amplitude", "K 1"},             {"temperature", "K degC"},
        {"ultrasonic-amplitude", "%FSH dB"}, {"time-of-flight", "us ns"},
        {"ultrasonic-thickness", "mm"},   {"eddy-current-real", "V ohm 1"},
        {"eddy-current-imag", "V ohm 1"}, {"eddy-current-magnitude", NULL},
        {"eddy-current-phase", "deg rad"},
    };
    assert_true(pl_quantity_count() >= sizeof want / sizeof want[0]);
    for (size_t k = 0; k < sizeof want / sizeof want[0]; k++) {
        const pl_quantity_info *q = pl_quantity_lookup(want[k].name);
        if (!q)
            fail_msg("%s is not in the vocabulary", want[k].name);
        assert_string_equal(q->name, want[k].name);
        if (want[k].units)
            assert_string_equal(q->units, want[k].units);
    }
    for (size_t i = 0; i < pl_quantity_count(); i++) {
        const pl_quantity_info *q = pl_quantity_at(i);
        assert_non_null(q);
        assert_ptr_equal(pl_quantity_lookup(q->name), q);
        assert_true(strlen(q->description) > 10);
        assert_null(strchr(q->description, '\n'));
        /* the default is the first listed unit, and every listed unit passes */
        const char *d = pl_quantity_default_unit(q->name);
        assert_non_null(d);
        assert_int_equal(strncmp(q->units, d, strlen(d)), 0);
        assert_true(q->units[strlen(d)] == ' ' || q->units[strlen(d)] == '\0');
        char units[64];
        snprintf(units, sizeof units, "%s", q->units);
        for (char *u = strtok(units, " "); u; u = strtok(NULL, " ")) {
            pl_err err = {0};
            if (pl_quantity_check(q->name, u, &err))
                fail_msg("%s [%s]: %s", q->name, u, err.msg);
        }
        /* a unit outside the list is refused */
        assert_int_equal(pl_quantity_check(q->name, "furlong", NULL), PL_EINVAL);
        for (size_t j = 0; j < i; j++)
            assert_string_not_equal(pl_quantity_at(j)->name, q->name);
    }
    assert_null(pl_quantity_at(pl_quantity_count()));
    assert_null(pl_quantity_lookup("porosity-index"));
    assert_null(pl_quantity_default_unit("porosity-index"));
    assert_string_equal(pl_quantity_default_unit("temperature"), "K");
    assert_string_equal(pl_quantity_default_unit("ultrasonic-amplitude"), "%FSH");
}

static void test_map__quantity_check_rules(void **state)
{
    (void)state;
    static const struct {
        const char *q, *u;
        int ok;
        const char *says;
    } cases[] = {
        {"depth", "mm", 1, NULL},
        {"depth", "in", 0, "one of: mm"},
        {"phase", "deg", 1, NULL},
        {"temperature-contrast", "mK", 1, NULL},
        {"temperature-contrast", "k", 0, "does not fit"},
        {"porosity-index", "1", 1, NULL},            /* free quantity */
        {"my_quantity.v2", "counts/s", 1, NULL},     /* free, all allowed characters */
        {"porosity-index", "", 0, "no unit"},
        {"porosity-index", NULL, 0, "no unit"},
        {"", "mm", 0, "empty"},
        {NULL, "mm", 0, "empty"},
        {"Depth", "mm", 0, "outside [a-z0-9-_.]"},
        {"pit depth", "mm", 0, "outside"},
        {"free", "m m", 0, "space"},
        {"free", "\tmm", 0, "space"},
        {"a23456789012345678901234567890123456789012345678", "1", 0, "longer than 47"},
        {"a2345678901234567890123456789012345678901234567", "1", 1, NULL},
        {"free", "123456789012345678901234", 0, "longer than 23"},
        {"free", "12345678901234567890123", 1, NULL},
    };
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        pl_err err = {0};
        int rc = pl_quantity_check(cases[k].q, cases[k].u, &err);
        if (cases[k].ok) {
            if (rc)
                fail_msg("case %zu: %s", k, err.msg);
        } else {
            if (rc != PL_EINVAL)
                fail_msg("case %zu accepted", k);
            tu_assert_msg_has(err.msg, cases[k].says);
        }
    }
}

/* ---- geometry ---------------------------------------------------------- */

static void test_map__pitch_must_be_finite_and_positive(void **state)
{
    (void)state;
    pl_map *m;
    assert_int_equal(pl_map_new(&m, 2, 2, 1, NULL), PL_OK);
    const double bad[][2] = {{NAN, 1}, {1, NAN}, {-0.1, 1}, {1, -2}, {0, 1}, {1, 0},
                             {INFINITY, 1}, {1, -INFINITY}};
    for (size_t k = 0; k < sizeof bad / sizeof bad[0]; k++) {
        pl_err err = {0};
        assert_int_equal(pl_map_set_pitch(m, bad[k][0], bad[k][1], &err), PL_EINVAL);
        tu_assert_msg_has(err.msg, "pitch");
        assert_true(m->pitch_u == 1.0 && m->pitch_v == 1.0);
    }
    assert_int_equal(pl_map_set_pitch(m, 0.125, 0.5, NULL), PL_OK);
    assert_true(m->pitch_u == 0.125 && m->pitch_v == 0.5);
    pl_map_free(m);
}

static void test_map__placement_checks(void **state)
{
    (void)state;
    const double s = sqrt(0.5);
    pl_placement good = {
        .origin = {12040.0, -850.5, 2210.0},
        .u = {s, s, 0},
        .v = {-s, s, 0},
        .system = "STA/BL/WL",
        .unit = "mm",
    };
    assert_int_equal(pl_placement_check(&good, NULL), PL_OK);
    struct {
        pl_placement p;
        const char *says;
    } bad[9];
    for (size_t k = 0; k < 9; k++)
        bad[k].p = good;
    bad[0].p.u[0] = 1.01, bad[0].says = "axis u has length";
    bad[1].p.v[2] = 0.1, bad[1].says = "axis v has length";
    bad[2].p.v[0] *= 0.998, bad[2].p.v[1] *= 0.998, bad[2].says = "axis v has length";
    /* unit vectors 88 degrees apart: not perpendicular */
    bad[3].p.u[0] = 1, bad[3].p.u[1] = 0, bad[3].p.v[0] = cos(88 * M_PI / 180),
    bad[3].p.v[1] = sin(88 * M_PI / 180), bad[3].p.v[2] = 0, bad[3].says = "perpendicular";
    bad[4].p.origin[1] = NAN, bad[4].says = "non-finite";
    bad[5].p.u[2] = INFINITY, bad[5].says = "non-finite";
    bad[6].p.v[0] = NAN, bad[6].says = "non-finite";
    bad[7].p.system[0] = '\0', bad[7].says = "reference system";
    bad[8].p.unit[0] = '\0', bad[8].says = "unit";
    for (size_t k = 0; k < 9; k++) {
        pl_err err = {0};
        if (pl_placement_check(&bad[k].p, &err) != PL_EINVAL)
            fail_msg("case %zu accepted", k);
        tu_assert_msg_has(err.msg, bad[k].says);
    }
    /* within the documented 1e-3 tolerances */
    pl_placement near = good;
    near.u[0] *= 1.0005;
    assert_int_equal(pl_placement_check(&near, NULL), PL_OK);
}

/* P(i, j) = origin + i*pitch_u*u + j*pitch_v*v, worked by hand for a frame
 * tilted in the BL/WL plane: u = (0, 0.6, 0.8), v = (0, -0.8, 0.6). */
static void test_map__pixel_to_part(void **state)
{
    (void)state;
    pl_map *m;
    assert_int_equal(pl_map_new(&m, 10, 10, 1, NULL), PL_OK);
    pl_placement p = {.origin = {1000, 200, 50}, .u = {0, 0.6, 0.8}, .v = {0, -0.8, 0.6},
                      .system = "STA/BL/WL", .unit = "mm"};
    assert_int_equal(pl_placement_check(&p, NULL), PL_OK);
    m->placement = p;
    assert_int_equal(pl_map_set_pitch(m, 0.5, 0.25, NULL), PL_OK);
    double xyz[3];
    pl_map_pixel_to_part(m, 4, 8, xyz);
    /* 4*0.5 = 2 along u, 8*0.25 = 2 along v: (1000, 200+1.2-1.6, 50+1.6+1.2) */
    tu_assert_close(xyz[0], 1000.0, 1e-12, NULL);
    tu_assert_close(xyz[1], 199.6, 1e-12, NULL);
    tu_assert_close(xyz[2], 52.8, 1e-12, NULL);
    pl_map_pixel_to_part(m, 0, 0, xyz);
    assert_true(xyz[0] == 1000 && xyz[1] == 200 && xyz[2] == 50);
    pl_map_pixel_to_part(m, -1.5, 0.5, xyz);  /* fractional, outside the grid */
    tu_assert_close(xyz[1], 200 - 0.45 - 0.1, 1e-12, NULL);
    tu_assert_close(xyz[2], 50 - 0.6 + 0.075, 1e-12, NULL);
    pl_map_free(m);
}

static void test_map__range_ignores_non_finite(void **state)
{
    (void)state;
    pl_map *m;
    assert_int_equal(pl_map_new(&m, 3, 2, 2, NULL), PL_OK);
    float c0[6] = {NAN, 2.5f, -1.0f, INFINITY, 7.0f, NAN};
    memcpy(m->data, c0, sizeof c0);
    for (int i = 6; i < 12; i++)
        m->data[i] = NAN;
    double lo, hi;
    assert_int_equal(pl_map_range(m, 0, &lo, &hi), 3);
    assert_true(lo == -1.0 && hi == 7.0);
    assert_int_equal(pl_map_range(m, 1, &lo, &hi), 0);
    assert_true(isnan(lo) && isnan(hi));
    assert_int_equal(pl_map_range(m, 0, NULL, NULL), 3);
    pl_map_free(m);
}

/* ---- store encoding ---------------------------------------------------- */

static void test_map__encode_round_trip_bit_exact(void **state)
{
    (void)state;
    pl_map *m = reference_map(37, 23, 2);
    m->data[1] = -0.0f;
    m->data[2] = float_of(0x00000001u); /* smallest subnormal */
    m->data[3] = FLT_MAX;
    m->data[4] = -FLT_MAX; /* an infinity is refused (encode_refuses_infinities...) */
    unsigned char *blob;
    size_t len;
    unsigned char sha[32];
    pl_err err = {0};
    assert_int_equal(pl_map_encode(&blob, &len, sha, m, &err), PL_OK);
    assert_true(len > 0 && len < 37 * 23 * 2 * 4);
    pl_map *d;
    assert_int_equal(pl_map_new(&d, 37, 23, 2, NULL), PL_OK);
    assert_int_equal(pl_map_decode(d, blob, len, sha, &err), PL_OK);
    for (size_t i = 0; i < 37 * 23 * 2; i++) {
        uint32_t a = bits_of(m->data[i]), b = bits_of(d->data[i]);
        if (isnan(m->data[i]))
            assert_int_equal(b, 0x7fc00000u); /* every NaN made canonical */
        else
            assert_int_equal(a, b);
    }
    /* equal content, equal digest: decoded map and original agree */
    unsigned char d1[32], d2[32];
    pl_map_digest(d1, m);
    pl_map_digest(d2, d);
    assert_memory_equal(d1, sha, 32);
    assert_memory_equal(d2, sha, 32);
    /* no digest given: decoding still works */
    assert_int_equal(pl_map_decode(d, blob, len, NULL, &err), PL_OK);
    free(blob);
    pl_map_free(m);
    pl_map_free(d);
}

/* The blob is a plain zlib stream of little-endian float32 with canonical
 * NaN, and its digest is SHA-256 of those bytes: Python's zlib.decompress
 * and hashlib.sha256 (outside references) rebuild both from the formula. */
static void test_map__blob_and_digest_match_python_zlib_hashlib(void **state)
{
    (void)state;
    pl_map *m = reference_map(13, 7, 3);
    unsigned char *blob;
    size_t len;
    unsigned char sha[32];
    assert_int_equal(pl_map_encode(&blob, &len, sha, m, NULL), PL_OK);
    char hex[65];
    pl_sha256_hex(hex, sha);
    char *dir = tu_tmpdir();
    char *path = tu_path(dir, "map.zlib");
    assert_int_equal(tu_write_file(path, blob, len), 0);
    assert_int_equal(tu_python("map_ref.py", "blob-check", path, hex, "13", "7", "3", NULL), 0);
    /* the reference can fail: a digest off by one digit */
    hex[0] = hex[0] == '0' ? '1' : '0';
    assert_int_not_equal(tu_python("map_ref.py", "blob-check", path, hex, "13", "7", "3", NULL),
                         0);
    free(path);
    tu_rmtree(dir);
    free(blob);
    pl_map_free(m);
}

static void test_map__decode_detects_digest_mismatch(void **state)
{
    (void)state;
    pl_map *m = reference_map(8, 8, 1);
    unsigned char *blob;
    size_t len;
    unsigned char sha[32];
    assert_int_equal(pl_map_encode(&blob, &len, sha, m, NULL), PL_OK);
    pl_map *d;
    assert_int_equal(pl_map_new(&d, 8, 8, 1, NULL), PL_OK);
    pl_err err = {0};
    unsigned char wrong[32];
    memcpy(wrong, sha, 32);
    wrong[17] ^= 0x40;
    assert_int_equal(pl_map_decode(d, blob, len, wrong, &err), PL_ENOMATCH);
    tu_assert_msg_has(err.msg, "digest");
    for (size_t i = 0; i < 64; i++) /* nothing that passes for content is left */
        assert_true(isnan(d->data[i]));
    /* a well-formed blob of other content, same length, same recorded digest */
    m->data[9] += 1.0f;
    unsigned char raw[256];
    for (size_t i = 0; i < 64; i++) {
        uint32_t u = bits_of(m->data[i]);
        if (isnan(m->data[i]))
            u = 0x7fc00000u;
        for (int k = 0; k < 4; k++)
            raw[4 * i + (size_t)k] = (unsigned char)(u >> (8 * k));
    }
    unsigned char other[512];
    uLongf olen = sizeof other;
    assert_int_equal(compress(other, &olen, raw, sizeof raw), Z_OK);
    assert_int_equal(pl_map_decode(d, other, olen, NULL, &err), PL_OK);
    assert_int_equal(pl_map_decode(d, other, olen, sha, &err), PL_ENOMATCH);
    /* a flipped byte inside the compressed stream is caught as corruption */
    blob[len / 2] ^= 0x5a;
    int rc = pl_map_decode(d, blob, len, sha, &err);
    assert_true(rc == PL_EFORMAT || rc == PL_ENOMATCH);
    free(blob);
    pl_map_free(m);
    pl_map_free(d);
}

static void test_map__decode_detects_wrong_length(void **state)
{
    (void)state;
    pl_map *m = reference_map(4, 4, 1);
    unsigned char *blob;
    size_t len;
    unsigned char sha[32];
    assert_int_equal(pl_map_encode(&blob, &len, sha, m, NULL), PL_OK);
    pl_map *shorter, *longer;
    assert_int_equal(pl_map_new(&shorter, 4, 3, 1, NULL), PL_OK);
    assert_int_equal(pl_map_new(&longer, 4, 5, 1, NULL), PL_OK);
    pl_err err = {0};
    assert_int_equal(pl_map_decode(shorter, blob, len, NULL, &err), PL_EFORMAT);
    tu_assert_msg_has(err.msg, "more than the 48 bytes");
    assert_int_equal(pl_map_decode(longer, blob, len, NULL, &err), PL_EFORMAT);
    tu_assert_msg_has(err.msg, "64 bytes, 80 expected");
    /* a cut blob, an empty one, and bytes that are not zlib at all */
    assert_int_equal(pl_map_decode(m, blob, len - 3, NULL, &err), PL_EFORMAT);
    assert_int_equal(pl_map_decode(m, blob, 0, NULL, &err), PL_EFORMAT);
    assert_int_equal(pl_map_decode(m, "not a zlib stream", 17, NULL, &err), PL_EFORMAT);
    tu_assert_msg_has(err.msg, "corrupt");
    /* trailing bytes after the stream */
    unsigned char *padded = malloc(len + 2);
    memcpy(padded, blob, len);
    padded[len] = padded[len + 1] = 0;
    assert_int_equal(pl_map_decode(m, padded, len + 2, NULL, &err), PL_EFORMAT);
    tu_assert_msg_has(err.msg, "after the compressed data");
    free(padded);
    free(blob);
    pl_map_free(m);
    pl_map_free(shorter);
    pl_map_free(longer);
}

/* A map that compresses across many zlib buffers and chunks. */
static void test_map__encode_large_map(void **state)
{
    (void)state;
    pl_map *m;
    assert_int_equal(pl_map_new(&m, 640, 512, 2, NULL), PL_OK);
    uint32_t x = 12345;
    for (size_t i = 0; i < 640 * 512 * 2; i++) {
        x = x * 1103515245u + 12345u; /* noise that does not compress away */
        m->data[i] = (float)(x >> 8) / 65536.0f;
    }
    unsigned char *blob;
    size_t len;
    unsigned char sha[32];
    assert_int_equal(pl_map_encode(&blob, &len, sha, m, NULL), PL_OK);
    pl_map *d;
    assert_int_equal(pl_map_new(&d, 640, 512, 2, NULL), PL_OK);
    assert_int_equal(pl_map_decode(d, blob, len, sha, NULL), PL_OK);
    assert_memory_equal(d->data, m->data, 640 * 512 * 2 * sizeof(float));
    free(blob);
    pl_map_free(m);
    pl_map_free(d);
}

/* ---- PNG -------------------------------------------------------------- */

static pl_map *png_test_map(void)
{
    pl_map *m;
    assert_int_equal(pl_map_new(&m, 19, 13, 2, NULL), PL_OK);
    for (uint32_t j = 0; j < 13; j++)
        for (uint32_t i = 0; i < 19; i++)
            m->data[j * 19 + i] = (float)(sin(i * 0.4) * cos(j * 0.3) * 0.8 + 0.05 * j);
    m->data[5] = NAN;
    m->data[100] = NAN;
    m->data[200] = -0.75f;
    m->data[201] = 1.25f;
    for (size_t i = 0; i < 19 * 13; i++)
        m->data[19 * 13 + i] = 42.0f;
    assert_int_equal(pl_map_set_channel(m, 0, "temperature-contrast", "K", NULL), PL_OK);
    assert_int_equal(pl_map_set_channel(m, 1, "depth", "mm", NULL), PL_OK);
    assert_int_equal(pl_map_set_pitch(m, 0.25, 0.5, NULL), PL_OK);
    return m;
}

/* pypng decodes what plyledger writes: 16-bit greyscale, the plyledger.*
 * tEXt chunks, values within scale / 2 and NaN on the nodata code. */
static void test_map__png_written_reads_in_pypng(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    pl_map *m = png_test_map();
    char *png = tu_path(dir, "c0.png"), *raw = tu_path(dir, "c0.raw");
    pl_err err = {0};
    assert_int_equal(pl_map_save_png(m, 0, png, &err), PL_OK);
    tu_write_f4(raw, m->data, 19 * 13);
    assert_int_equal(tu_python("map_ref.py", "png-check", png, raw, "temperature-contrast", "K",
                               "0.25 0.5", NULL), 0);
    /* the check can fail: values moved by more than half a step */
    double lo, hi;
    pl_map_range(m, 0, &lo, &hi);
    m->data[7] += (float)((hi - lo) / 65534 * 3);
    tu_write_f4(raw, m->data, 19 * 13);
    assert_int_not_equal(tu_python("map_ref.py", "png-check", png, raw, "temperature-contrast",
                                   "K", "0.25 0.5", NULL), 0);
    /* a constant channel: scale 1, offset the value */
    char *png1 = tu_path(dir, "c1.png"), *raw1 = tu_path(dir, "c1.raw");
    assert_int_equal(pl_map_save_png(m, 1, png1, &err), PL_OK);
    tu_write_f4(raw1, m->data + 19 * 13, 19 * 13);
    assert_int_equal(tu_python("map_ref.py", "png-check", png1, raw1, "depth", "mm", "0.25 0.5",
                               NULL), 0);
    pl_map_free(m);
    free(png);
    free(raw);
    free(png1);
    free(raw1);
    tu_rmtree(dir);
}

/* pypng writes 16-bit greyscale with text chunks (before and after IDAT),
 * an Adam7-interlaced one and an 8-bit one; plyledger reads the values
 * pypng's script computed as offset + scale * code, to the float. */
static void test_map__pypng_written_png_loads(void **state)
{
    (void)state;
    static const struct {
        const char *name;
        uint32_t w, h;
        const char *quantity, *unit;
        double pu, pv;
    } files[] = {
        {"g16", 11, 7, "depth", "mm", 0.25, 0.5},
        {"g16i", 11, 7, "", "", 0.3, 0.3},
        {"g8", 11, 7, "", "", NAN, NAN}, /* no pitch chunk: not known */
    };
    char *dir = tu_tmpdir();
    assert_int_equal(tu_python("map_ref.py", "png-write", dir, NULL), 0);
    for (size_t k = 0; k < sizeof files / sizeof files[0]; k++) {
        char name[32];
        snprintf(name, sizeof name, "%s.png", files[k].name);
        char *png = tu_path(dir, name);
        snprintf(name, sizeof name, "%s.raw", files[k].name);
        char *raw = tu_path(dir, name);
        pl_map *m;
        pl_err err = {0};
        if (pl_map_load_png(&m, png, &err))
            fail_msg("%s: %s", files[k].name, err.msg);
        assert_int_equal(m->width, files[k].w);
        assert_int_equal(m->height, files[k].h);
        assert_int_equal(m->nchannels, 1);
        assert_string_equal(m->channels[0].quantity, files[k].quantity);
        assert_string_equal(m->channels[0].unit, files[k].unit);
        if (isnan(files[k].pu))
            assert_true(isnan(m->pitch_u) && isnan(m->pitch_v));
        else
            assert_true(m->pitch_u == files[k].pu && m->pitch_v == files[k].pv);
        size_t n;
        double *want = tu_read_f8(raw, &n);
        assert_int_equal(n, (size_t)files[k].w * files[k].h);
        for (size_t i = 0; i < n; i++)
            tu_assert_same_float(m->data[i], (float)want[i], files[k].name, i);
        free(want);
        pl_map_free(m);
        free(png);
        free(raw);
    }
    tu_rmtree(dir);
}

/* Save then load: within scale / 2 (plus float32 rounding of the result),
 * NaN kept, quantity, unit and pitch kept. */
static void test_map__png_round_trip(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    pl_map *m = png_test_map();
    char *png = tu_path(dir, "rt.png");
    pl_err err = {0};
    for (uint32_t c = 0; c < 2; c++) {
        assert_int_equal(pl_map_save_png(m, c, png, &err), PL_OK);
        pl_map *back;
        assert_int_equal(pl_map_load(&back, png, &err), PL_OK);
        assert_int_equal(back->width, 19);
        assert_int_equal(back->height, 13);
        assert_string_equal(back->channels[0].quantity, m->channels[c].quantity);
        assert_string_equal(back->channels[0].unit, m->channels[c].unit);
        assert_true(back->pitch_u == 0.25 && back->pitch_v == 0.5);
        double lo, hi;
        pl_map_range(m, c, &lo, &hi);
        double scale = hi > lo ? (hi - lo) / 65534 : 1;
        const float *a = pl_map_channel(m, c);
        for (size_t i = 0; i < 19 * 13; i++) {
            if (isnan(a[i])) {
                assert_true(isnan(back->data[i]));
                continue;
            }
            double e = fabs((double)back->data[i] - a[i]);
            if (e > scale / 2 + fabs(a[i]) * FLT_EPSILON)
                fail_msg("channel %u value %zu: %.9g back as %.9g (scale %g)", c, i,
                         (double)a[i], (double)back->data[i], scale);
        }
        pl_map_free(back);
    }
    /* an all-NaN channel is written as all nodata, and such a file holds
     * no map: it is refused on reading */
    for (size_t i = 0; i < 19 * 13; i++)
        m->data[i] = NAN;
    assert_int_equal(pl_map_save_png(m, 0, png, &err), PL_OK);
    pl_map *back = (pl_map *)1;
    assert_int_equal(pl_map_load_png(&back, png, &err), PL_EFORMAT);
    assert_null(back);
    tu_assert_msg_has(err.msg, "no data");
    assert_int_equal(pl_map_save_png(m, 2, png, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "channel 2");
    assert_int_equal(pl_map_save_png(m, 0, "/nonexistent-dir/x.png", &err), PL_EIO);
    tu_assert_msg_has(err.msg, "/nonexistent-dir/x.png");
    pl_map_free(m);
    free(png);
    tu_rmtree(dir);
}

static void put_chunk(unsigned char **p, const char *type, const unsigned char *data,
                      uint32_t len)
{
    unsigned char *q = *p;
    for (int k = 0; k < 4; k++)
        q[k] = (unsigned char)(len >> (24 - 8 * k));
    memcpy(q + 4, type, 4);
    if (len)
        memcpy(q + 8, data, len);
    uLong crc = crc32(0, q + 4, 4 + len); /* PNG spec: CRC over type and data */
    for (int k = 0; k < 4; k++)
        q[8 + len + (uint32_t)k] = (unsigned char)(crc >> (24 - 8 * k));
    *p = q + 12 + len;
}

/* A small, well-formed PNG (PNG specification, ISO/IEC 15948: signature,
 * IHDR, IDAT, IEND) whose header claims w x h 16-bit gray pixels. */
static void write_png_claiming(const char *path, uint32_t w, uint32_t h)
{
    unsigned char buf[256], *p = buf;
    memcpy(p, "\x89PNG\r\n\x1a\n", 8);
    p += 8;
    unsigned char ihdr[13] = {0};
    for (int k = 0; k < 4; k++) {
        ihdr[k] = (unsigned char)(w >> (24 - 8 * k));
        ihdr[4 + k] = (unsigned char)(h >> (24 - 8 * k));
    }
    ihdr[8] = 16; /* bit depth; colour type 0, no interlace */
    put_chunk(&p, "IHDR", ihdr, 13);
    unsigned char zeros[64] = {0}, z[128];
    uLongf zlen = sizeof z;
    assert_int_equal(compress(z, &zlen, zeros, sizeof zeros), Z_OK);
    put_chunk(&p, "IDAT", z, (uint32_t)zlen);
    put_chunk(&p, "IEND", NULL, 0);
    assert_int_equal(tu_write_file(path, buf, (size_t)(p - buf)), 0);
}

/* Colour PNGs (written by pypng), other bit depths, bad chunk values, a
 * truncated file and a file that is no PNG: each refused, naming the file. */
static void test_map__png_refusals(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    assert_int_equal(tu_python("map_ref.py", "png-write", dir, NULL), 0);
    /* cut a valid file in half */
    pl_map *m = png_test_map();
    char *whole = tu_path(dir, "whole.png");
    assert_int_equal(pl_map_save_png(m, 0, whole, NULL), PL_OK);
    size_t len;
    unsigned char *b = tu_read_file(whole, &len);
    char *half = tu_path(dir, "half.png");
    assert_int_equal(tu_write_file(half, b, len / 2), 0);
    /* and a file whose IDAT CRC is damaged */
    b[len - 20] ^= 0xff;
    char *crc = tu_path(dir, "crc.png");
    assert_int_equal(tu_write_file(crc, b, len), 0);
    free(b);
    char *giant = tu_path(dir, "giant.png");
    write_png_claiming(giant, 60000, 60000);
    char *wide = tu_path(dir, "wide.png");
    write_png_claiming(wide, PL_MAP_MAX_SIDE + 1, 1);
    char *small = tu_path(dir, "small.png");
    write_png_claiming(small, 8, 8);
    char *text = tu_path(dir, "text.png");
    assert_int_equal(tu_write_file(text, "P5 2 2 255\n", 11), 0);
    static const struct {
        const char *file;
        int code;
        const char *says;
    } cases[] = {
        {"rgb.png", PL_EFORMAT, "not a grayscale PNG (colour type 2, RGB)"},
        {"gray_alpha.png", PL_EFORMAT, "colour type 4"},
        {"palette.png", PL_EFORMAT, "colour type 3, palette"},
        {"g4.png", PL_EFORMAT, "bit depth 4"},
        {"bad_scale.png", PL_EFORMAT, "plyledger.scale 'abc' is not a non-zero number"},
        {"bad_offset.png", PL_EFORMAT, "plyledger.offset '1.5x'"},
        {"bad_pitch.png", PL_EFORMAT, "plyledger.pitch '-0.5'"},
        {"bad_nodata.png", PL_EFORMAT, "plyledger.nodata '70000'"},
        {"bad_unit.png", PL_EFORMAT, "unit 'K' does not fit quantity 'depth'"},
        {"overflow.png", PL_EFORMAT, "2 infinite values (offset + scale * code beyond the "
                                     "float32 range), the first (+inf) at channel 0, row 1, "
                                     "column 1"},
        {"all_nodata.png", PL_EFORMAT, "no data (every value is NaN)"},
        {"half.png", PL_EFORMAT, "truncated"},
        {"crc.png", PL_EFORMAT, "corrupt"},
        {"text.png", PL_EFORMAT, "not a PNG file"},
        {"giant.png", PL_EFORMAT, "60000 x 60000 pixels cannot fit"},
        {"wide.png", PL_EFORMAT, "exceeds 65536 per side"},
        {"small.png", PL_EFORMAT, "corrupt"}, /* 64 bytes of rows, 8 x 17 needed */
        {"missing.png", PL_EIO, "cannot open"},
    };
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        char *path = tu_path(dir, cases[k].file);
        pl_map *out = (pl_map *)1;
        pl_err err = {0};
        int rc = pl_map_load_png(&out, path, &err);
        if (rc != cases[k].code)
            fail_msg("%s: code %d, %d expected (%s)", cases[k].file, rc, cases[k].code,
                     err.msg);
        assert_null(out);
        tu_assert_msg_has(err.msg, path);
        tu_assert_msg_has(err.msg, cases[k].says);
        free(path);
    }
    pl_map_free(m);
    free(whole);
    free(half);
    free(crc);
    free(giant);
    free(wide);
    free(small);
    free(text);
    tu_rmtree(dir);
}

/* ---- values a map cannot hold ------------------------------------------ */

/* A 16-bit PNG code stands for a finite value or no data: an infinity has
 * no code, and writing one as an end code (it used to be 65534 and 0)
 * would read back as an ordinary value. Refused, channel and position
 * named, and no file is left; .npy output refuses it too. */
static void test_map__export_refuses_infinities(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *png = tu_path(dir, "inf.png"), *npy = tu_path(dir, "inf.npy");
    const float bad[2] = {INFINITY, -INFINITY};
    for (int k = 0; k < 2; k++) {
        pl_map *m = png_test_map();
        m->data[19 * 13 + 2 * 19 + 7] = bad[k]; /* channel 1, row 2, column 7 */
        pl_err err = {0};
        assert_int_equal(pl_map_save_png(m, 0, png, &err), PL_OK); /* channel 0 is finite */
        remove(png);
        assert_int_equal(pl_map_save_png(m, 1, png, &err), PL_EINVAL);
        tu_assert_msg_has(err.msg, png);
        tu_assert_msg_has(err.msg, k ? "(-inf) at channel 1, row 2, column 7" :
                                       "(+inf) at channel 1, row 2, column 7");
        assert_null(fopen(png, "rb"));
        assert_int_equal(pl_map_save_npy(m, npy, &err), PL_EINVAL);
        tu_assert_msg_has(err.msg, npy);
        tu_assert_msg_has(err.msg, "1 infinite value");
        assert_null(fopen(npy, "rb"));
        pl_map_free(m);
    }
    free(png);
    free(npy);
    tu_rmtree(dir);
}

/* The store encoding takes what a caller filled in: an infinity and a map
 * without a single number are refused there too. */
static void test_map__encode_refuses_infinities_and_no_data(void **state)
{
    (void)state;
    pl_map *m = reference_map(6, 4, 2);
    m->data[6 * 4 + 3 * 6 + 5] = -INFINITY;
    m->data[6 * 4 + 3 * 6 + 4] = INFINITY;
    unsigned char *blob = (unsigned char *)1, digest[32];
    size_t len = 1;
    pl_err err = {0};
    assert_int_equal(pl_map_encode(&blob, &len, digest, m, &err), PL_EINVAL);
    assert_null(blob);
    assert_int_equal(len, 0);
    tu_assert_msg_has(err.msg, "2 infinite values");
    tu_assert_msg_has(err.msg, "the first (+inf) at channel 1, row 3, column 4");
    for (size_t i = 0; i < 6 * 4 * 2; i++)
        m->data[i] = NAN;
    assert_int_equal(pl_map_encode(&blob, &len, digest, m, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "no data (every value is NaN)");
    m->data[30] = 0.0f;
    TU_OK(pl_map_encode(&blob, &len, digest, m, &err));
    free(blob);
    pl_map_free(m);
}

/* The one check of a map's values, as a caller that filled a map itself
 * calls it: infinities counted with the first one's place (channel-major
 * order), refused, or made no data on the explicit option; no data at all
 * refused; unknown options refused. PNG values past float32 (pypng wrote
 * overflow.png with scale 1e38: codes 4 and 5 give 4e38 and 5e38) are made
 * no data the same way. */
static void test_map__check_values(void **state)
{
    (void)state;
    pl_map *m = reference_map(5, 4, 3);
    m->data[(2 * 4 + 0) * 5 + 1] = -INFINITY; /* channel 2, row 0, column 1 */
    m->data[(1 * 4 + 2) * 5 + 3] = INFINITY;  /* channel 1, row 2, column 3: the first */
    pl_err err = {0};
    pl_map_load_info info;
    assert_int_equal(pl_map_check_values(&info, m, NULL, "caller.bin", &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "caller.bin: 2 infinite values, the first (+inf) at channel 1, "
                               "row 2, column 3");
    assert_true(isinf(m->data[(1 * 4 + 2) * 5 + 3])); /* refusing changes nothing */
    assert_int_equal(pl_map_check_values(NULL, m, NULL, NULL, &err), PL_EINVAL);
    assert_true(strncmp(err.msg, "2 infinite values", 17) == 0);
    pl_map_load_options o = PL_MAP_LOAD_OPTIONS_INIT;
    o.version = 2;
    assert_int_equal(pl_map_check_values(NULL, m, &o, NULL, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "version 2");
    o.version = PL_MAP_LOAD_OPTIONS_VERSION;
    o.infinite = (pl_map_infinite)7;
    assert_int_equal(pl_map_check_values(NULL, m, &o, NULL, &err), PL_EINVAL);
    o.infinite = PL_MAP_INFINITE_TO_NAN;
    TU_OK(pl_map_check_values(&info, m, &o, NULL, &err));
    assert_int_equal(info.infinite_to_nan, 2);
    assert_true(isnan(m->data[(2 * 4 + 0) * 5 + 1]) && isnan(m->data[(1 * 4 + 2) * 5 + 3]));
    assert_int_equal(pl_map__count_infinite(m, 0, 3, &(uint32_t){0}, &(uint32_t){0},
                                            &(uint32_t){0}, &(int){0}), 0);
    TU_OK(pl_map_check_values(&info, m, NULL, NULL, &err));
    assert_int_equal(info.infinite_to_nan, 0);
    pl_map_free(m);

    char *dir = tu_tmpdir();
    assert_int_equal(tu_python("map_ref.py", "png-write", dir, NULL), 0);
    char *png = tu_path(dir, "overflow.png");
    TU_OK(pl_map_load_v2(&m, &info, png, &o, &err));
    assert_int_equal(info.infinite_to_nan, 2);
    const float want[6] = {0, 1e38f, 2e38f, 3e38f, NAN, NAN}; /* codes 0..5 times 1e38 */
    for (size_t i = 0; i < 6; i++)
        tu_assert_same_float(m->data[i], want[i], "overflow.png", i);
    pl_map_free(m);
    free(png);
    tu_rmtree(dir);
}

/* ---- CSV -------------------------------------------------------------- */

/* numpy.savetxt's grid (a '#' header line, '%.9g' values, "nan") loads to
 * the float32 values numpy started from. */
static void test_map__csv_from_numpy_savetxt(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    assert_int_equal(tu_python("map_ref.py", "csv-write", dir, NULL), 0);
    char *csv = tu_path(dir, "grid.csv"), *raw = tu_path(dir, "grid.raw");
    pl_map *m;
    pl_err err = {0};
    if (pl_map_load(&m, csv, &err))
        fail_msg("%s", err.msg);
    assert_int_equal(m->width, 9);
    assert_int_equal(m->height, 6);
    size_t n;
    double *want = tu_read_f8(raw, &n);
    assert_int_equal(n, 54);
    for (size_t i = 0; i < n; i++)
        tu_assert_same_float(m->data[i], (float)want[i], "grid.csv", i);
    free(want);
    pl_map_free(m);
    free(csv);
    free(raw);
    tu_rmtree(dir);
}

static void test_map__csv_grammar(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *path = tu_path(dir, "good.csv");
    const char *text = "\xEF\xBB\xBF# site 14, frame 3\r\n"
                       "1, 2.5 ,-3e2\r\n"
                       "\r\n"
                       ",nan,NaN\r\n"
                       "# trailing comment\n"
                       "+0.125,1E-3,\t7\n"
                       "\n";
    assert_int_equal(tu_write_file(path, text, strlen(text)), 0);
    pl_map *m;
    pl_err err = {0};
    if (pl_map_load_csv(&m, path, &err))
        fail_msg("%s", err.msg);
    assert_int_equal(m->width, 3);
    assert_int_equal(m->height, 3);
    assert_int_equal(m->nchannels, 1);
    const float want[9] = {1, 2.5f, -300, NAN, NAN, NAN, 0.125f, 1e-3f, 7};
    for (size_t i = 0; i < 9; i++) {
        if (isnan(want[i]))
            assert_true(isnan(m->data[i]));
        else
            assert_true(m->data[i] == want[i]);
    }
    pl_map_free(m);
    free(path);
    tu_rmtree(dir);
}

static void test_map__csv_refusals(void **state)
{
    (void)state;
    static const struct {
        const char *file, *text;
        int code;
        const char *says;
    } cases[] = {
        {"ragged.csv", "1,2,3\n4,5\n", PL_EFORMAT, "line 2 has 2 fields, line 1 has 3"},
        {"long.csv", "1,2\n3,4,5\n", PL_EFORMAT, "line 2 has more than the 2 fields"},
        {"word.csv", "1,2\n3,abc\n", PL_EFORMAT, "line 2, field 2: 'abc' is not a number"},
        {"unit.csv", "1,2mm\n", PL_EFORMAT, "'2mm' is not a number"},
        {"hex.csv", "0x10,1\n", PL_EFORMAT, "'0x10' is not a number"},
        {"inf.csv", "inf,1\n", PL_EFORMAT, "'inf' is not a number"},
        {"huge.csv", "1e39,1\n", PL_EFORMAT, "outside the float32 range"},
        {"dots.csv", "1,.\n", PL_EFORMAT, "'.' is not a number"},
        {"empty.csv", "", PL_EFORMAT, "no data rows"},
        {"comments.csv", "# nothing\n\n# here\n", PL_EFORMAT, "no data rows"},
        {"nul.csv", "1,2\n3,\0004\n", PL_EFORMAT, "NUL"},
        {"nodata.csv", "nan,\n,NaN\n", PL_EFORMAT, "no data (every value is NaN)"},
    };
    char *dir = tu_tmpdir();
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        char *path = tu_path(dir, cases[k].file);
        size_t len = strcmp(cases[k].file, "nul.csv") == 0 ? 9 : strlen(cases[k].text);
        assert_int_equal(tu_write_file(path, cases[k].text, len), 0);
        pl_map *m = (pl_map *)1;
        pl_err err = {0};
        int rc = pl_map_load_csv(&m, path, &err);
        if (rc != cases[k].code)
            fail_msg("%s: code %d (%s)", cases[k].file, rc, err.msg);
        assert_null(m);
        tu_assert_msg_has(err.msg, path);
        tu_assert_msg_has(err.msg, cases[k].says);
        free(path);
    }
    char *missing = tu_path(dir, "missing.csv");
    pl_map *m;
    pl_err err = {0};
    assert_int_equal(pl_map_load_csv(&m, missing, &err), PL_EIO);
    tu_assert_msg_has(err.msg, "missing.csv");
    free(missing);
    tu_rmtree(dir);
}

/* ---- loading by name, text helpers -------------------------------------- */

static void test_map__load_chooses_by_ending(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    pl_map *m = png_test_map();
    char *png = tu_path(dir, "Upper.PNG"), *npy = tu_path(dir, "a.Npy");
    char *csv = tu_path(dir, "b.CSV"), *tif = tu_path(dir, "c.tif");
    char *none = tu_path(dir, "noext");
    assert_int_equal(pl_map_save_png(m, 0, png, NULL), PL_OK);
    assert_int_equal(pl_map_save_npy(m, npy, NULL), PL_OK);
    assert_int_equal(tu_write_file(csv, "1,2\n", 4), 0);
    pl_map *out;
    pl_err err = {0};
    assert_int_equal(pl_map_load(&out, png, &err), PL_OK);
    assert_string_equal(out->channels[0].quantity, "temperature-contrast");
    pl_map_free(out);
    assert_int_equal(pl_map_load(&out, npy, &err), PL_OK);
    assert_int_equal(out->nchannels, 2);
    assert_memory_equal(out->data + 19 * 13, m->data + 19 * 13, 19 * 13 * sizeof(float));
    pl_map_free(out);
    assert_int_equal(pl_map_load(&out, csv, &err), PL_OK);
    assert_int_equal(out->width, 2);
    pl_map_free(out);
    assert_int_equal(pl_map_load(&out, tif, &err), PL_EFORMAT);
    assert_null(out);
    tu_assert_msg_has(err.msg, "c.tif: unknown map file type");
    assert_int_equal(pl_map_load(&out, none, &err), PL_EFORMAT);
    tu_assert_msg_has(err.msg, "noext");
    pl_map_free(m);
    free(png);
    free(npy);
    free(csv);
    free(tif);
    free(none);
    tu_rmtree(dir);
}

static void test_map__number_and_pitch_text(void **state)
{
    (void)state;
    double v, a, b;
    assert_int_equal(pl_map__parse_number(&v, " -1.5e-3 "), 0);
    assert_true(v == -1.5e-3);
    assert_int_equal(pl_map__parse_number(&v, "7."), 0);
    assert_true(v == 7.0);
    assert_int_equal(pl_map__parse_number(&v, ".5"), 0);
    assert_true(v == 0.5);
    const char *bad[] = {"", " ", "abc", "1.2.3", "1e", "1e+", "--1", "0x1p3", "nan", "inf",
                         "1e999", "1 2", "1,5"};
    for (size_t k = 0; k < sizeof bad / sizeof bad[0]; k++)
        if (pl_map__parse_number(&v, bad[k]) == 0)
            fail_msg("'%s' parsed as a number", bad[k]);
    assert_int_equal(pl_map__parse_pitch(&a, &b, "0.2 0.3"), 0);
    assert_true(a == 0.2 && b == 0.3);
    assert_int_equal(pl_map__parse_pitch(&a, &b, "0.4"), 0);
    assert_true(a == 0.4 && b == 0.4);
    const char *badp[] = {"", "0", "-1", "1 0", "1 2 3", "x", "1 x"};
    for (size_t k = 0; k < sizeof badp / sizeof badp[0]; k++)
        if (pl_map__parse_pitch(&a, &b, badp[k]) == 0)
            fail_msg("pitch '%s' accepted", badp[k]);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_map__new_sets_documented_defaults),
        cmocka_unit_test(test_map__new_refuses_bad_sizes),
        cmocka_unit_test(test_map__clone_is_deep),
        cmocka_unit_test(test_map__channels_by_quantity),
        cmocka_unit_test(test_map__vocabulary_has_the_documented_quantities),
        cmocka_unit_test(test_map__quantities_belong_to_methods),
        cmocka_unit_test(test_map__quantity_check_rules),
        cmocka_unit_test(test_map__pitch_must_be_finite_and_positive),
        cmocka_unit_test(test_map__placement_checks),
        cmocka_unit_test(test_map__pixel_to_part),
        cmocka_unit_test(test_map__range_ignores_non_finite),
        cmocka_unit_test(test_map__encode_round_trip_bit_exact),
        cmocka_unit_test(test_map__blob_and_digest_match_python_zlib_hashlib),
        cmocka_unit_test(test_map__decode_detects_digest_mismatch),
        cmocka_unit_test(test_map__decode_detects_wrong_length),
        cmocka_unit_test(test_map__encode_large_map),
        cmocka_unit_test(test_map__png_written_reads_in_pypng),
        cmocka_unit_test(test_map__pypng_written_png_loads),
        cmocka_unit_test(test_map__png_round_trip),
        cmocka_unit_test(test_map__png_refusals),
        cmocka_unit_test(test_map__export_refuses_infinities),
        cmocka_unit_test(test_map__encode_refuses_infinities_and_no_data),
        cmocka_unit_test(test_map__check_values),
        cmocka_unit_test(test_map__csv_from_numpy_savetxt),
        cmocka_unit_test(test_map__csv_grammar),
        cmocka_unit_test(test_map__csv_refusals),
        cmocka_unit_test(test_map__load_chooses_by_ending),
        cmocka_unit_test(test_map__number_and_pitch_text),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
