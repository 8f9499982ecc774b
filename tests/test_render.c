/*
 * test_render.c - colour maps, sRGB and CIELAB against scikit-image, map
 * renderings, PNG output against pypng, the font.
 *
 * Maps are built by hand (the pl_map struct is public) so that these tests
 * depend on nothing of the map module but its header.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plyledger/render.h"
#include "image/render_int.h"
#include "testutil.h"

/* ---- helpers ----------------------------------------------------------- */

static pl_map *map_alloc(uint32_t w, uint32_t h, uint32_t nch)
{
    pl_map *m = calloc(1, sizeof *m);
    assert_non_null(m);
    m->width = w;
    m->height = h;
    m->nchannels = nch;
    m->pitch_u = 1.0;
    m->pitch_v = 1.0;
    m->channels = calloc(nch, sizeof *m->channels);
    m->data = calloc((size_t)w * h * nch, sizeof *m->data);
    assert_non_null(m->channels);
    assert_non_null(m->data);
    snprintf(m->channels[0].quantity, sizeof m->channels[0].quantity, "temperature-contrast");
    snprintf(m->channels[0].unit, sizeof m->channels[0].unit, "K");
    return m;
}

static void map_release(pl_map *m)
{
    if (!m)
        return;
    free(m->channels);
    free(m->data);
    free(m);
}

static int is_colour(const unsigned char *p, unsigned char r, unsigned char g, unsigned char b)
{
    return p[0] == r && p[1] == g && p[2] == b;
}

static const unsigned char *px(const pl_image *img, int x, int y)
{
    assert_true(x >= 0 && y >= 0 && (uint32_t)x < img->width && (uint32_t)y < img->height);
    return img->rgb + ((size_t)y * img->width + (size_t)x) * 3;
}

static const unsigned char INK[3] = {PL_RENDER_INK};
static const unsigned char PAPER[3] = {PL_RENDER_BACKGROUND};

static int count_ink(const pl_image *img, int x, int y, int w, int h)
{
    int n = 0;
    for (int yy = y; yy < y + h; yy++)
        for (int xx = x; xx < x + w; xx++)
            if (memcmp(px(img, xx, yy), INK, 3) == 0)
                n++;
    return n;
}

/* The text drawn at (x, y) must match, pixel for pixel, `text` drawn by
 * pl_image_text on a blank image: ink where the font has ink, paper
 * elsewhere within the text's box. */
static void assert_text_at(const pl_image *img, int x, int y, const char *text, unsigned s)
{
    uint32_t w = (uint32_t)(strlen(text) * PL_FONT_ADVANCE * s - s);
    uint32_t h = PL_FONT_HEIGHT * s;
    pl_image *ref;
    assert_int_equal(pl_image_new(&ref, w, h, NULL), PL_OK);
    pl_render__fill(ref, 0, 0, w, h, PAPER);
    assert_int_equal(pl_image_text(ref, 0, 0, text, s, INK), w);
    for (uint32_t yy = 0; yy < h; yy++)
        for (uint32_t xx = 0; xx < w; xx++)
            if (memcmp(px(img, x + (int)xx, y + (int)yy), px(ref, (int)xx, (int)yy), 3) != 0)
                fail_msg("text \"%s\" differs at (%d, %d)", text, x + (int)xx, y + (int)yy);
    pl_image_free(ref);
}

static void assert_inside(const pl_image *img, int x, int y, int w, int h)
{
    assert_true(x >= 0 && y >= 0);
    assert_true((int64_t)x + w <= (int64_t)img->width);
    assert_true((int64_t)y + h <= (int64_t)img->height);
}

/* Every part of the layout lies inside the image, frames included. */
static void assert_layout_inside(const pl_image *img, const pl_render_layout *lay)
{
    unsigned s = lay->text_scale;
    int gh = PL_FONT_HEIGHT * (int)s;
    assert_inside(img, lay->map_x - 1, lay->map_y - 1, lay->map_w + 2, lay->map_h + 2);
    assert_inside(img, lay->caption_x, lay->caption_y,
                  (int)(strlen(lay->caption) * PL_FONT_ADVANCE * s - s), gh);
    if (lay->bar_w) {
        assert_inside(img, lay->bar_x - 1, lay->bar_y - 1, lay->bar_w + 2, lay->bar_h + 2);
        for (int i = 0; i < 3; i++)
            if (lay->labels[i][0])
                assert_inside(img, lay->label_x, lay->label_y[i],
                              (int)(strlen(lay->labels[i]) * PL_FONT_ADVANCE * s - s), gh);
        if (lay->unit[0])
            assert_inside(img, lay->unit_x, lay->unit_y,
                          (int)(strlen(lay->unit) * PL_FONT_ADVANCE * s - s), gh);
    }
    if (lay->scale_w) {
        assert_inside(img, lay->scale_x, lay->scale_y, lay->scale_w, lay->scale_h);
        assert_inside(img, lay->scale_label_x, lay->scale_label_y,
                      (int)(strlen(lay->scale_label) * PL_FONT_ADVANCE * s - s), gh);
    }
}

/* ---- colour tables: thread-safe first use ------------------------------ */

static void *first_use(void *arg)
{
    unsigned char *out = arg;
    pl_colormap_rgb(PL_COLORMAP_LEDGER, 0.25, out);
    pl_colormap_rgb(PL_COLORMAP_GREY, 0.75, out + 3);
    return NULL;
}

/* Runs first: several threads race to build the tables; all must see the
 * same, finished colours (pthread_once). */
static void test_render__tables_built_once_across_threads(void **state)
{
    (void)state;
    enum { N = 4 };
    pthread_t th[N];
    unsigned char got[N][6];
    for (int i = 0; i < N; i++)
        assert_int_equal(pthread_create(&th[i], NULL, first_use, got[i]), 0);
    for (int i = 0; i < N; i++)
        assert_int_equal(pthread_join(th[i], NULL), 0);
    unsigned char table[256 * 3];
    pl_render__colormap_table(PL_COLORMAP_LEDGER, table, NULL);
    for (int i = 0; i < N; i++) {
        assert_memory_equal(got[i], table + 3 * 64, 3); /* round(0.25 * 255) = 64 */
        assert_memory_equal(got[i], got[0], 6);
    }
}

/* ---- colour science ---------------------------------------------------- */

/* skimage.color's answers (tests/ref/render_lab_ref.py) to the requests
 * req[0..n) ("rgb R G B", "lab L A B", "decode C", "encode V"), three
 * numbers a request (the unused ones NaN). */
static void skimage_colour(const char *const *req, size_t n, double (*got)[3])
{
    char *dir = tu_tmpdir(), *in = tu_path(dir, "colour.in"), *out = tu_path(dir, "colour.out");
    FILE *f = fopen(in, "w");
    assert_non_null(f);
    for (size_t i = 0; i < n; i++)
        fprintf(f, "%s\n", req[i]);
    assert_int_equal(fclose(f), 0);
    assert_int_equal(tu_python("render_lab_ref.py", in, out, (char *)NULL), 0);
    f = fopen(out, "r");
    assert_non_null(f);
    char line[256];
    for (size_t i = 0; i < n; i++) {
        got[i][0] = got[i][1] = got[i][2] = NAN;
        assert_non_null(fgets(line, sizeof line, f));
        assert_true(sscanf(line, "%lf %lf %lf", &got[i][0], &got[i][1], &got[i][2]) >= 1);
    }
    fclose(f);
    free(in);
    free(out);
    tu_rmtree(dir);
}

/* The sRGB transfer function (IEC 61966-2-1): 12.92 x up to linear
 * 0.0031308 (encoded 0.04045), 1.055 x^(1/2.4) - 0.055 above. Values
 * inside both pieces against skimage.color (render_lab_ref.py: the Y of
 * rgb2xyz of a grey, xyz2rgb of a scaled white). */
static void test_render__srgb_transfer_matches_iec_61966(void **state)
{
    (void)state;
    /* The two pieces meet at the published breakpoint (IEC 61966-2-1). */
    assert_float_equal(pl_render__srgb_encode(0.0031308), 0.04045, 1e-5);
    assert_float_equal(pl_render__srgb_decode(0.04045), 0.0031308, 1e-7);
    /* Linear segment slope 12.92 (IEC 61966-2-1). */
    assert_float_equal(pl_render__srgb_encode(0.001), 0.01292, 1e-12);
    /* skimage.color on both pieces */
    static const char *const req[] = { "decode 128", "decode 5", "decode 255", "encode 0.5",
                                       "encode 0.002", "encode 0.9" };
    static const double arg[] = { 128.0 / 255.0, 5.0 / 255.0, 1.0, 0.5, 0.002, 0.9 };
    double ref[6][3];
    skimage_colour(req, 6, ref);
    for (int i = 0; i < 6; i++) {
        double own = i < 3 ? pl_render__srgb_decode(arg[i]) : pl_render__srgb_encode(arg[i]);
        if (!(fabs(own - ref[i][0]) <= 1e-6))
            fail_msg("%s: %.9f, skimage %.9f", req[i], own, ref[i][0]);
    }
    /* End points and clamping. */
    assert_true(pl_render__srgb_encode(0.0) == 0.0);
    assert_true(pl_render__srgb_encode(1.0) == 1.0);
    assert_true(pl_render__srgb_encode(-0.5) == 0.0);
    assert_true(pl_render__srgb_decode(2.0) == 1.0);
    /* Round trip over every 8-bit code. */
    for (int c = 0; c < 256; c++)
        assert_float_equal(pl_render__srgb_encode(pl_render__srgb_decode(c / 255.0)), c / 255.0,
                           1e-12);
}

/* 8-bit sRGB -> CIELAB (D65, 2 degree observer) against
 * skimage.color.rgb2lab: the primaries, white, black, a grey and two
 * mixed colours, within 0.05 (the tolerance of the colour-map check; the
 * two differ in how many digits of the D65 white they keep: skimage's
 * white itself comes out at a* -0.002, b* 0.005). */
static void test_render__srgb_to_lab_matches_skimage(void **state)
{
    (void)state;
    static const unsigned char rgb[][3] = { { 255, 0, 0 },     { 0, 255, 0 },  { 0, 0, 255 },
                                            { 255, 255, 255 }, { 0, 0, 0 },    { 128, 128, 128 },
                                            { 12, 200, 77 },   { 240, 190, 10 } };
    enum { N = sizeof rgb / sizeof rgb[0] };
    char text[N][32];
    const char *req[N];
    for (int i = 0; i < N; i++) {
        snprintf(text[i], sizeof text[i], "rgb %d %d %d", rgb[i][0], rgb[i][1], rgb[i][2]);
        req[i] = text[i];
    }
    double ref[N][3], worst = 0.0;
    skimage_colour(req, N, ref);
    for (int i = 0; i < N; i++) {
        double lab[3];
        pl_render__srgb8_to_lab(rgb[i], lab);
        for (int k = 0; k < 3; k++) {
            if (!(fabs(lab[k] - ref[i][k]) <= 0.05))
                fail_msg("rgb (%d,%d,%d): Lab[%d] = %.4f, skimage %.4f", rgb[i][0], rgb[i][1],
                         rgb[i][2], k, lab[k], ref[i][k]);
            worst = fmax(worst, fabs(lab[k] - ref[i][k]));
        }
    }
    printf("# largest difference from skimage.color.rgb2lab: %.4f\n", worst);
}

/* CIELAB -> 8-bit sRGB against skimage.color.lab2rgb (clipped per
 * channel, as ours): white, black, the L* = 50 neutral, pure red's CIELAB
 * (as skimage gives it) and an out-of-gamut colour; each 8-bit code is
 * skimage's value rounded (within half a code). */
static void test_render__lab_to_srgb_matches_skimage(void **state)
{
    (void)state;
    static const char *const red_req[] = { "rgb 255 0 0" };
    double red[1][3];
    skimage_colour(red_req, 1, red);
    const double lab[][3] = { { 100.0, 0.0, 0.0 }, { 0.0, 0.0, 0.0 }, { 50.0, 0.0, 0.0 },
                              { red[0][0], red[0][1], red[0][2] }, { 50.0, 200.0, 0.0 },
                              { 70.0, -20.0, 35.0 } };
    enum { N = sizeof lab / sizeof lab[0] };
    char text[N][96];
    const char *req[N];
    for (int i = 0; i < N; i++) {
        snprintf(text[i], sizeof text[i], "lab %.12g %.12g %.12g", lab[i][0], lab[i][1],
                 lab[i][2]);
        req[i] = text[i];
    }
    double ref[N][3];
    skimage_colour(req, N, ref);
    for (int i = 0; i < N; i++) {
        unsigned char rgb[3];
        pl_render__lab_to_srgb8(lab[i], rgb);
        for (int k = 0; k < 3; k++)
            if (!(fabs(rgb[k] - 255.0 * ref[i][k]) <= 0.5 + 1e-6))
                fail_msg("%s: channel %d is %d, skimage %.3f", req[i], k, rgb[k],
                         255.0 * ref[i][k]);
    }
    /* Delta E*ab is the Euclidean distance (CIE 15:2004). */
    assert_float_equal(pl_render__delta_e76((const double[3]){50, 3, 4},
                                            (const double[3]){50, 0, 0}), 5.0, 1e-12);
}

/* ---- the colour maps --------------------------------------------------- */

static void write_table(const char *path, pl_colormap cmap)
{
    unsigned char rgb[256 * 3];
    double design[256 * 3];
    pl_render__colormap_table(cmap, rgb, design);
    FILE *f = fopen(path, "w");
    assert_non_null(f);
    for (int i = 0; i < 256; i++) {
        double own[3];
        pl_render__srgb8_to_lab(rgb + 3 * i, own);
        fprintf(f, "%d %d %d %.9f %.9f %.9f %.9f %.9f %.9f\n", rgb[3 * i], rgb[3 * i + 1],
                rgb[3 * i + 2], own[0], own[1], own[2], design[3 * i], design[3 * i + 1],
                design[3 * i + 2]);
    }
    unsigned char nd[3];
    double ndlab[3];
    pl_render__nodata_rgb(cmap, nd);
    pl_render__srgb8_to_lab(nd, ndlab);
    fprintf(f, "%d %d %d %.9f %.9f %.9f %.9f %.9f %.9f\n", nd[0], nd[1], nd[2], ndlab[0],
            ndlab[1], ndlab[2], ndlab[0], ndlab[1], ndlab[2]);
    assert_int_equal(fclose(f), 0);
}

/* Reference: skimage.color.rgb2lab (CIE 1976 L*a*b*, D65, 2 degree
 * observer), run by tests/ref/render_colormap_ref.py: L* strictly rising,
 * neighbour Delta E*ab even (coefficient of variation < 0.15, threshold
 * justified in the script), 8-bit entries within 0.5 dE of the design,
 * plyledger's own CIELAB within 0.05 of skimage's, hue from blue through
 * teal/green to yellow, no-data grey neutral and apart from both maps. */
static void test_render__colormaps_match_skimage(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *ledger = tu_path(dir, "ledger.txt");
    char *grey = tu_path(dir, "grey.txt");
    write_table(ledger, PL_COLORMAP_LEDGER);
    write_table(grey, PL_COLORMAP_GREY);
    assert_int_equal(tu_python("render_colormap_ref.py", ledger, grey, (char *)NULL), 0);
    free(ledger);
    free(grey);
    tu_rmtree(dir);
}

/* The grey map has the ledger map's designed lightness, entry by entry. */
static void test_render__grey_has_ledger_lightness(void **state)
{
    (void)state;
    double a[256 * 3], b[256 * 3];
    pl_render__colormap_table(PL_COLORMAP_LEDGER, NULL, a);
    pl_render__colormap_table(PL_COLORMAP_GREY, NULL, b);
    for (int i = 0; i < 256; i++)
        assert_float_equal(a[3 * i], b[3 * i], 1e-9);
    assert_float_equal(a[0], 20.0, 1e-9);
    assert_float_equal(a[3 * 255], 95.0, 1e-9);
}

static void test_render__colormap_rgb_clamps_and_marks_nan(void **state)
{
    (void)state;
    for (int m = 0; m < 2; m++) {
        pl_colormap cmap = m ? PL_COLORMAP_GREY : PL_COLORMAP_LEDGER;
        unsigned char table[256 * 3], rgb[3], nd[3];
        pl_render__colormap_table(cmap, table, NULL);
        pl_colormap_rgb(cmap, -3.0, rgb);
        assert_memory_equal(rgb, table, 3);
        pl_colormap_rgb(cmap, 7.0, rgb);
        assert_memory_equal(rgb, table + 3 * 255, 3);
        pl_colormap_rgb(cmap, 0.5, rgb); /* round(127.5) = 128 */
        assert_memory_equal(rgb, table + 3 * 128, 3);
        pl_colormap_rgb(cmap, 10.0 / 255.0, rgb);
        assert_memory_equal(rgb, table + 3 * 10, 3);
        pl_colormap_rgb(cmap, NAN, rgb);
        pl_render__nodata_rgb(cmap, nd);
        assert_memory_equal(rgb, nd, 3);
        assert_true(rgb[0] == rgb[1] && rgb[1] == rgb[2]); /* neutral */
        assert_memory_not_equal(rgb, table, 3);
        assert_memory_not_equal(rgb, table + 3 * 255, 3);
    }
    /* The two ends of the ledger map: dark blue, light yellow. */
    unsigned char lo[3], hi[3];
    pl_colormap_rgb(PL_COLORMAP_LEDGER, 0.0, lo);
    pl_colormap_rgb(PL_COLORMAP_LEDGER, 1.0, hi);
    assert_true(lo[2] > lo[0] && lo[2] > lo[1] && lo[2] < 160);
    assert_true(hi[0] > 200 && hi[1] > 200 && hi[2] < hi[0] - 80);
}

/* ---- numbers ----------------------------------------------------------- */

static void test_render__nice_length_is_1_2_5(void **state)
{
    (void)state;
    static const double cases[][2] = {
        {8.0, 5.0},   {37.0, 20.0}, {1.0, 1.0},     {0.26, 0.2},     {999.0, 500.0},
        {1000.0, 1000.0}, {2.0, 2.0}, {4.99, 2.0},  {0.05, 0.05},    {1e-3, 1e-3},
        {3e6, 2e6},   {19.999, 10.0}, {0.3, 0.2},   {0.7, 0.5},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        double got = pl_render__nice_length(cases[i][0]);
        if (fabs(got - cases[i][1]) > 1e-12 * cases[i][1])
            fail_msg("nice(%g) = %.17g, expected %g", cases[i][0], got, cases[i][1]);
    }
}

static void test_render__format_value_is_compact(void **state)
{
    (void)state;
    char b[32];
    pl_render__format_value(b, sizeof b, 2.5, 3);
    assert_string_equal(b, "2.5");
    pl_render__format_value(b, sizeof b, -0.0, 3);
    assert_string_equal(b, "0");
    pl_render__format_value(b, sizeof b, 1234567.0, 3);
    assert_string_equal(b, "1.23e+06");
    pl_render__format_value(b, sizeof b, 0.000125, 3);
    assert_string_equal(b, "0.000125");
}

/* A small deterministic generator for test data. */
static uint32_t lcg(uint32_t *s)
{
    *s = *s * 1664525u + 1013904223u;
    return *s >> 8;
}

/* The automatic range is numpy.percentile(finite values, [1, 99]) with the
 * default linear method (reference run by tests/ref/render_percentile_ref.py). */
static void test_render__auto_range_matches_numpy_percentile(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    static const uint32_t sizes[][2] = {{37, 23}, {1, 1}, {3, 1}, {200, 150}};
    for (size_t k = 0; k < sizeof sizes / sizeof sizes[0]; k++) {
        uint32_t w = sizes[k][0], h = sizes[k][1], seed = 12345u + (uint32_t)k;
        pl_map *m = map_alloc(w, h, 1);
        for (size_t i = 0; i < (size_t)w * h; i++) {
            uint32_t r = lcg(&seed);
            /* Many ties, some NaN and infinities (not counted), a skew. */
            m->data[i] = (i > 0 && r % 11 == 0)   ? NAN
                         : (i > 0 && r % 97 == 0) ? INFINITY
                         : (r % 5 == 0)           ? 3.0f
                                                  : (float)pow((r % 100000) / 1000.0, 1.7) - 40.0f;
        }
        pl_image *img;
        pl_render_layout lay;
        assert_int_equal(pl_render__map(&img, &lay, m, 0, NULL, NULL), PL_OK);
        char *vals = tu_path(dir, "values.txt");
        FILE *f = fopen(vals, "w");
        assert_non_null(f);
        for (size_t i = 0; i < (size_t)w * h; i++)
            fprintf(f, "%.9g\n", (double)m->data[i]);
        assert_int_equal(fclose(f), 0);
        if (w * h == 1) {
            /* One value: a constant map, widened by 1 % either side. */
            assert_float_equal(lay.vmin, m->data[0] - fabs(m->data[0]) * 0.01, 1e-9);
            assert_float_equal(lay.vmax, m->data[0] + fabs(m->data[0]) * 0.01, 1e-9);
        } else {
            char lo[64], hi[64];
            snprintf(lo, sizeof lo, "%.17g", lay.vmin);
            snprintf(hi, sizeof hi, "%.17g", lay.vmax);
            assert_int_equal(tu_python("render_percentile_ref.py", vals, lo, hi, (char *)NULL), 0);
        }
        free(vals);
        pl_image_free(img);
        map_release(m);
    }
    tu_rmtree(dir);
}

/* ---- rendering --------------------------------------------------------- */

/* A ramp along the columns renders, column by column, the colour map's
 * entries in order: lightness strictly rising along the ramp. */
static void test_render__ramp_renders_monotonic_colours(void **state)
{
    (void)state;
    pl_map *m = map_alloc(256, 3, 1);
    for (uint32_t j = 0; j < 3; j++)
        for (uint32_t i = 0; i < 256; i++)
            m->data[j * 256 + i] = (float)i * 0.5f - 20.0f;
    pl_render_options o = PL_RENDER_OPTIONS_INIT;
    o.vmin = -20.0;
    o.vmax = 107.5;
    o.zoom = 1;
    pl_image *img;
    pl_render_layout lay;
    assert_int_equal(pl_render__map(&img, &lay, m, 0, &o, NULL), PL_OK);
    assert_int_equal(lay.map_w, 256);
    assert_int_equal(lay.map_h, 3);
    unsigned char table[256 * 3];
    pl_render__colormap_table(PL_COLORMAP_LEDGER, table, NULL);
    double prev = -1.0;
    for (int i = 0; i < 256; i++) {
        for (int j = 0; j < 3; j++)
            assert_memory_equal(px(img, lay.map_x + i, lay.map_y + j), table + 3 * i, 3);
        double lab[3];
        pl_render__srgb8_to_lab(px(img, lay.map_x + i, lay.map_y + 1), lab);
        assert_true(lab[0] > prev);
        prev = lab[0];
    }
    pl_image_free(img);

    /* Automatic range, grey map, zoom 2: monotonic along the ramp too. */
    o = (pl_render_options)PL_RENDER_OPTIONS_INIT;
    o.colormap = PL_COLORMAP_GREY;
    o.zoom = 2;
    assert_int_equal(pl_render__map(&img, &lay, m, 0, &o, NULL), PL_OK);
    prev = -1.0;
    for (int i = 0; i < 512; i++) {
        const unsigned char *p = px(img, lay.map_x + i, lay.map_y + 3);
        assert_true(p[0] == p[1] && p[1] == p[2]);
        assert_true(p[0] >= prev);
        prev = p[0];
    }
    /* The two zoomed copies of a map pixel are the same colour. */
    assert_memory_equal(px(img, lay.map_x + 100, lay.map_y), px(img, lay.map_x + 101, lay.map_y + 1), 3);
    pl_image_free(img);
    map_release(m);
}

/* NaN pixels get the no-data grey; finite neighbours do not. */
static void test_render__nan_pixels_are_nodata_grey(void **state)
{
    (void)state;
    pl_map *m = map_alloc(8, 8, 2);
    float *ch1 = m->data + 64;
    for (int i = 0; i < 64; i++)
        ch1[i] = (float)i;
    ch1[9] = NAN;
    ch1[63] = NAN;
    for (int c = 0; c < 2; c++) {
        pl_colormap cmap = c ? PL_COLORMAP_GREY : PL_COLORMAP_LEDGER;
        pl_render_options o = PL_RENDER_OPTIONS_INIT;
        o.colormap = cmap;
        pl_image *img;
        pl_render_layout lay;
        assert_int_equal(pl_render__map(&img, &lay, m, 1, &o, NULL), PL_OK);
        assert_int_equal(lay.zoom, 32); /* smallest making 8 px at least 256 wide */
        unsigned char nd[3];
        pl_render__nodata_rgb(cmap, nd);
        int z = (int)lay.zoom;
        for (int dy = 0; dy < z; dy++)
            for (int dx = 0; dx < z; dx++) {
                assert_memory_equal(px(img, lay.map_x + 1 * z + dx, lay.map_y + 1 * z + dy), nd, 3);
                assert_memory_equal(px(img, lay.map_x + 7 * z + dx, lay.map_y + 7 * z + dy), nd, 3);
                assert_memory_not_equal(px(img, lay.map_x + 2 * z + dx, lay.map_y + z + dy), nd, 3);
            }
        pl_image_free(img);
    }
    map_release(m);
}

/* Colour bar, labels, unit, caption and scale bar are where the layout says
 * and show what they should: the bar runs the map from top (vmax) to
 * bottom (vmin); the labels read vmax, mid and vmin; the scale bar is the
 * largest 1-2-5 length within a quarter of the map's width, and its length
 * in pixels is that length / pitch * zoom. */
static void test_render__colour_bar_and_scale_bar(void **state)
{
    (void)state;
    pl_map *m = map_alloc(64, 48, 1);
    m->pitch_u = 0.5;
    m->pitch_v = 0.5;
    for (int i = 0; i < 64 * 48; i++)
        m->data[i] = (float)(i % 64);
    pl_render_options o = PL_RENDER_OPTIONS_INIT;
    o.vmin = -2.5;
    o.vmax = 7.5;
    pl_image *img;
    pl_render_layout lay;
    assert_int_equal(pl_render__map(&img, &lay, m, 0, &o, NULL), PL_OK);
    assert_layout_inside(img, &lay);
    assert_int_equal(lay.zoom, 4);
    assert_int_equal(lay.text_scale, 2);
    unsigned s = lay.text_scale;
    int gh = PL_FONT_HEIGHT * (int)s;

    /* Paper in the corners. */
    assert_memory_equal(px(img, 0, 0), PAPER, 3);
    assert_memory_equal(px(img, (int)img->width - 1, (int)img->height - 1), PAPER, 3);

    /* The colour bar: right of the map, entry 255 on top, 0 at the bottom,
     * lightness falling down the bar. */
    assert_true(lay.bar_x > lay.map_x + lay.map_w);
    unsigned char table[256 * 3];
    pl_render__colormap_table(PL_COLORMAP_LEDGER, table, NULL);
    int cx = lay.bar_x + lay.bar_w / 2;
    assert_memory_equal(px(img, cx, lay.bar_y), table + 3 * 255, 3);
    assert_memory_equal(px(img, cx, lay.bar_y + lay.bar_h - 1), table, 3);
    double prev = 1e9;
    for (int y = lay.bar_y; y < lay.bar_y + lay.bar_h; y++) {
        double lab[3];
        pl_render__srgb8_to_lab(px(img, cx, y), lab);
        assert_true(lab[0] <= prev);
        prev = lab[0];
    }
    /* Its frame is ink. */
    assert_memory_equal(px(img, cx, lay.bar_y - 1), INK, 3);
    assert_memory_equal(px(img, lay.bar_x - 1, lay.bar_y + 5), INK, 3);

    /* Tick labels: vmax, mid, vmin, written with %g digits. */
    assert_string_equal(lay.labels[0], "7.5");
    assert_string_equal(lay.labels[1], "2.5");
    assert_string_equal(lay.labels[2], "-2.5");
    for (int i = 0; i < 3; i++) {
        assert_true(lay.label_x > lay.bar_x + lay.bar_w);
        assert_true(count_ink(img, lay.label_x, lay.label_y[i],
                              (int)(strlen(lay.labels[i]) * 6 * s - s), gh) > 0);
        assert_text_at(img, lay.label_x, lay.label_y[i], lay.labels[i], s);
        /* The tick mark joins the bar at the label's middle row. */
        assert_memory_equal(px(img, lay.bar_x + lay.bar_w + 1, lay.tick_y[i]), INK, 3);
        assert_true(abs(lay.label_y[i] + gh / 2 - lay.tick_y[i]) <= 1);
    }
    assert_int_equal(lay.tick_y[0], lay.bar_y);
    assert_int_equal(lay.tick_y[2], lay.bar_y + lay.bar_h - 1);

    /* The unit above the bar, the quantity on top. */
    assert_string_equal(lay.unit, "K");
    assert_text_at(img, lay.unit_x, lay.unit_y, "K", s);
    assert_true(lay.unit_y + gh <= lay.bar_y);
    assert_string_equal(lay.caption, "temperature-contrast");
    assert_text_at(img, lay.caption_x, lay.caption_y, "temperature-contrast", s);
    assert_true(lay.caption_y + gh <= lay.map_y);

    /* Scale bar: the map is 64 x 0.5 = 32 mm wide; a quarter is 8 mm; the
     * largest 1-2-5 length within it is 5 mm = 10 map px = 40 image px. */
    assert_float_equal(lay.scale_mm, 5.0, 1e-12);
    assert_string_equal(lay.scale_label, "5 mm");
    assert_true(lay.scale_y > lay.map_y + lay.map_h);
    int run = 0;
    int row = lay.scale_y + lay.scale_h / 2;
    for (int x = lay.scale_x; x < (int)img->width && memcmp(px(img, x, row), INK, 3) == 0; x++)
        run++;
    assert_memory_not_equal(px(img, lay.scale_x - 1, row), INK, 3);
    double want = lay.scale_mm / m->pitch_u * lay.zoom;
    assert_true(fabs(run - want) <= 1.0);
    assert_int_equal(run, 40);
    assert_text_at(img, lay.scale_label_x, lay.scale_label_y, "5 mm", s);
    assert_true(lay.scale_label_y >= lay.scale_y + lay.scale_h);
    pl_image_free(img);

    /* Without colour bar and scale bar: the image is narrower and shorter
     * and no ink lies right of or below the map's frame. */
    o.colorbar = 0;
    o.scalebar = 0;
    pl_image *bare;
    pl_render_layout lb;
    assert_int_equal(pl_render__map(&bare, &lb, m, 0, &o, NULL), PL_OK);
    assert_int_equal(lb.bar_w, 0);
    assert_int_equal(lb.scale_w, 0);
    assert_int_equal(count_ink(bare, lb.map_x + lb.map_w + 1, 0,
                               (int)bare->width - (lb.map_x + lb.map_w + 1), (int)bare->height),
                     0);
    assert_int_equal(count_ink(bare, 0, lb.map_y + lb.map_h + 1, (int)bare->width,
                               (int)bare->height - (lb.map_y + lb.map_h + 1)),
                     0);
    pl_image_free(bare);
    map_release(m);
}

/* Scale bars for other pitches and sizes keep length = mm / pitch * zoom
 * within 1 px, with a 1-2-5 length. */
static void test_render__scale_bar_length_matches_pitch(void **state)
{
    (void)state;
    static const struct {
        uint32_t w, h;
        double pitch;
        unsigned zoom;
    } cases[] = {{100, 80, 0.37, 0}, {300, 20, 2.0, 1}, {7, 9, 0.05, 0}, {500, 500, 1.3, 3},
                 {1, 1, 1.0, 0}};
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        pl_map *m = map_alloc(cases[k].w, cases[k].h, 1);
        m->pitch_u = cases[k].pitch;
        pl_render_options o = PL_RENDER_OPTIONS_INIT;
        o.zoom = cases[k].zoom;
        pl_image *img;
        pl_render_layout lay;
        assert_int_equal(pl_render__map(&img, &lay, m, 0, &o, NULL), PL_OK);
        assert_layout_inside(img, &lay);
        double mant = lay.scale_mm / pow(10.0, floor(log10(lay.scale_mm) + 1e-9));
        assert_true(fabs(mant - 1) < 1e-9 || fabs(mant - 2) < 1e-9 || fabs(mant - 5) < 1e-9);
        int row = lay.scale_y + lay.scale_h / 2, run = 0;
        for (int x = lay.scale_x; x < (int)img->width && memcmp(px(img, x, row), INK, 3) == 0; x++)
            run++;
        double want = lay.scale_mm / cases[k].pitch * lay.zoom;
        if (fabs(run - want) > 1.0)
            fail_msg("case %zu: scale bar %d px, %g mm / %g * %u = %g", k, run, lay.scale_mm,
                     cases[k].pitch, lay.zoom, want);
        /* About a quarter of the map's width (at least 12 font px). */
        double quarter = lay.map_w / 4.0 > 12.0 * lay.text_scale ? lay.map_w / 4.0
                                                                  : 12.0 * lay.text_scale;
        assert_true(run <= quarter + 1.0 && run >= quarter / 2.5 - 1.0);
        char label[32];
        snprintf(label, sizeof label, "%g mm", lay.scale_mm);
        assert_string_equal(lay.scale_label, label);
        assert_text_at(img, lay.scale_label_x, lay.scale_label_y, label, lay.text_scale);
        pl_image_free(img);
        map_release(m);
    }
}

/* A channel's label joins its quantity in the caption, so maps of one
 * quantity at several times can be told apart; the image widens for it. */
static void test_render__caption_names_quantity_and_label(void **state)
{
    (void)state;
    pl_map *m = map_alloc(8, 6, 1);
    m->pitch_u = m->pitch_v = 1.0;
    for (int i = 0; i < 8 * 6; i++)
        m->data[i] = (float)i;
    snprintf(m->channels[0].label, sizeof m->channels[0].label, "t=0.5 s");
    pl_render_options o = PL_RENDER_OPTIONS_INIT;
    pl_image *img;
    pl_render_layout lay;
    assert_int_equal(pl_render__map(&img, &lay, m, 0, &o, NULL), PL_OK);
    assert_layout_inside(img, &lay);
    assert_string_equal(lay.caption, "temperature-contrast t=0.5 s");
    assert_text_at(img, lay.caption_x, lay.caption_y, lay.caption, lay.text_scale);
    pl_image_free(img);
    map_release(m);
}

/* Checkerboard tiles alternate between the two maps on one colour scale;
 * a blend of a map with itself is grey everywhere (equal magenta and green),
 * and with a different map shows colour. */
static void test_render__pair_checkerboard_and_blend(void **state)
{
    (void)state;
    pl_map *a = map_alloc(32, 16, 1), *b = map_alloc(32, 16, 1);
    for (int i = 0; i < 32 * 16; i++) {
        a->data[i] = 0.0f;
        b->data[i] = 1.0f;
    }
    a->data[5] = 1.0f;  /* give each map a spread for the blend's own range */
    b->data[5] = 0.0f;
    pl_render_options o = PL_RENDER_OPTIONS_INIT;
    o.vmin = 0.0;
    o.vmax = 1.0;
    o.scalebar = 0;
    pl_image *img;
    pl_err err = {0};
    assert_int_equal(pl_render_pair(&img, a, 0, b, 0, PL_PAIR_CHECKERBOARD, 4, &o, &err), PL_OK);
    unsigned char lo[3], hi[3];
    pl_colormap_rgb(PL_COLORMAP_LEDGER, 0.0, lo);
    pl_colormap_rgb(PL_COLORMAP_LEDGER, 1.0, hi);
    /* Find the map area: the first pixel with the low colour. */
    int found = 0, mx = 0, my = 0;
    for (int y = 0; y < (int)img->height && !found; y++)
        for (int x = 0; x < (int)img->width && !found; x++)
            if (memcmp(px(img, x, y), lo, 3) == 0) {
                found = 1;
                mx = x;
                my = y;
            }
    assert_true(found);
    /* zoom: the map is at least 256 px wide, so 8 image px per map px */
    int z = (256 + 31) / 32;
    assert_memory_equal(px(img, mx + 4 * z + 1, my + 1), hi, 3);       /* tile (0,1): b */
    assert_memory_equal(px(img, mx + 8 * z + 1, my + 1), lo, 3);       /* tile (0,2): a */
    assert_memory_equal(px(img, mx + 1, my + 4 * z + 1), hi, 3);       /* tile (1,0): b */
    pl_image_free(img);

    for (int i = 0; i < 32 * 16; i++)
        b->data[i] = a->data[i] = (float)(i % 7);
    assert_int_equal(pl_render_pair(&img, a, 0, b, 0, PL_PAIR_BLEND, 0, &o, &err), PL_OK);
    int coloured = 0;
    for (uint32_t y = 0; y < img->height; y++)
        for (uint32_t x = 0; x < img->width; x++) {
            const unsigned char *p = px(img, (int)x, (int)y);
            if (p[0] != p[1] || p[1] != p[2])
                coloured++;
        }
    assert_int_equal(coloured, 0);
    pl_image_free(img);
    for (int i = 0; i < 32 * 16; i++)
        b->data[i] = (float)((i + 3) % 7);
    assert_int_equal(pl_render_pair(&img, a, 0, b, 0, PL_PAIR_BLEND, 0, &o, &err), PL_OK);
    coloured = 0;
    for (uint32_t y = 0; y < img->height; y++)
        for (uint32_t x = 0; x < img->width; x++) {
            const unsigned char *p = px(img, (int)x, (int)y);
            if (p[0] != p[1])
                coloured++;
        }
    assert_true(coloured > 1000);
    pl_image_free(img);

    pl_map *c = map_alloc(31, 16, 1);
    assert_int_equal(pl_render_pair(&img, a, 0, c, 0, PL_PAIR_BLEND, 0, &o, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "cannot be shown together");
    map_release(a);
    map_release(b);
    map_release(c);
}

/* Odd shapes and contents render inside the image without faults. */
static void test_render__tiny_and_extreme_maps(void **state)
{
    (void)state;
    static const uint32_t shapes[][2] = {{1, 1}, {4000, 10}, {10, 4000}, {1, 5000},
                                         {5000, 1}, {2, 3}, {257, 1}};
    for (size_t k = 0; k < sizeof shapes / sizeof shapes[0]; k++) {
        uint32_t w = shapes[k][0], h = shapes[k][1];
        for (int content = 0; content < 3; content++) {
            pl_map *m = map_alloc(w, h, 1);
            for (size_t i = 0; i < (size_t)w * h; i++)
                m->data[i] = content == 0 ? (float)i : content == 1 ? NAN : 42.0f;
            if (content == 2)
                m->channels[0].unit[0] = '\0';
            pl_image *img;
            pl_render_layout lay;
            pl_err err = {0};
            int rc = pl_render__map(&img, &lay, m, 0, NULL, &err);
            if (rc != PL_OK)
                fail_msg("%ux%u content %d: %s", w, h, content, err.msg);
            assert_layout_inside(img, &lay);
            assert_true(lay.zoom >= 1);
            assert_true((uint64_t)w * lay.zoom >= 256 ||
                        (uint64_t)(w > h ? w : h) * (lay.zoom + 1) > 4096);
            assert_true(img->width < 8192 && img->height < 8192);
            if (content == 1) {
                /* All no data: the bar says so, the map is all grey. */
                assert_string_equal(lay.labels[1], "no data");
                unsigned char nd[3];
                pl_render__nodata_rgb(PL_COLORMAP_LEDGER, nd);
                assert_memory_equal(px(img, lay.map_x, lay.map_y), nd, 3);
            }
            if (content == 2) {
                /* A constant map: +-1 % around the value. */
                assert_float_equal(lay.vmin, 41.58, 1e-9);
                assert_float_equal(lay.vmax, 42.42, 1e-9);
            }
            pl_image_free(img);
            map_release(m);
        }
    }
}

static void test_render__refuses_bad_requests(void **state)
{
    (void)state;
    pl_map *m = map_alloc(4, 4, 1);
    for (int i = 0; i < 16; i++)
        m->data[i] = (float)i;
    pl_image *img = (pl_image *)1;
    pl_err err = {0};
    pl_render_options o = PL_RENDER_OPTIONS_INIT;

    o.vmin = 5.0;
    o.vmax = 5.0;
    assert_int_equal(pl_render_map(&img, m, 0, &o, &err), PL_EINVAL);
    assert_null(img);
    assert_int_equal(err.code, PL_EINVAL);
    tu_assert_msg_has(err.msg, "vmin");
    o.vmin = 6.0;
    assert_int_equal(pl_render_map(&img, m, 0, &o, NULL), PL_EINVAL);
    /* Only vmin given, above the automatic vmax (99th percentile 14.85). */
    o.vmin = 20.0;
    o.vmax = NAN;
    assert_int_equal(pl_render_map(&img, m, 0, &o, NULL), PL_EINVAL);
    o.vmin = -INFINITY;
    assert_int_equal(pl_render_map(&img, m, 0, &o, NULL), PL_EINVAL);

    o = (pl_render_options)PL_RENDER_OPTIONS_INIT;
    assert_int_equal(pl_render_map(&img, m, 1, &o, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "channel 1");
    o.version = 99;
    assert_int_equal(pl_render_map(&img, m, 0, &o, NULL), PL_EINVAL);
    o = (pl_render_options)PL_RENDER_OPTIONS_INIT;
    o.colormap = (pl_colormap)7;
    assert_int_equal(pl_render_map(&img, m, 0, &o, NULL), PL_EINVAL);
    o = (pl_render_options)PL_RENDER_OPTIONS_INIT;
    o.zoom = 100000; /* 400000 px wide */
    assert_int_equal(pl_render_map(&img, m, 0, &o, &err), PL_EINVAL);
    assert_null(img);

    /* A pitch of 0 is refused for the scale bar only. */
    m->pitch_u = 0.0;
    o = (pl_render_options)PL_RENDER_OPTIONS_INIT;
    assert_int_equal(pl_render_map(&img, m, 0, &o, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "pitch");
    o.scalebar = 0;
    assert_int_equal(pl_render_map(&img, m, 0, &o, NULL), PL_OK);
    pl_image_free(img);

    /* Images: zero or oversized sides. */
    assert_int_equal(pl_image_new(&img, 0, 5, NULL), PL_EINVAL);
    assert_int_equal(pl_image_new(&img, PL_IMAGE_MAX_SIDE + 1, 1, NULL), PL_EINVAL);
    assert_int_equal(pl_image_new(&img, 65536, 65536, NULL), PL_EINVAL);
    assert_int_equal(pl_image_new(&img, 3, 2, NULL), PL_OK);
    for (int i = 0; i < 18; i++)
        assert_int_equal(img->rgb[i], 0); /* black */
    pl_image_free(img);
    pl_image_free(NULL);
    map_release(m);
}

/* The same map renders to the same bytes, and the map is not changed. */
static void test_render__deterministic_and_read_only(void **state)
{
    (void)state;
    pl_map *m = map_alloc(33, 17, 1);
    uint32_t seed = 7;
    for (int i = 0; i < 33 * 17; i++)
        m->data[i] = (lcg(&seed) % 13 == 0) ? NAN : (float)(lcg(&seed) % 1000) / 7.0f;
    float *copy = malloc(sizeof(float) * 33 * 17);
    assert_non_null(copy);
    memcpy(copy, m->data, sizeof(float) * 33 * 17);
    pl_image *a, *b;
    assert_int_equal(pl_render_map(&a, m, 0, NULL, NULL), PL_OK);
    assert_int_equal(pl_render_map(&b, m, 0, NULL, NULL), PL_OK);
    assert_int_equal(a->width, b->width);
    assert_int_equal(a->height, b->height);
    assert_memory_equal(a->rgb, b->rgb, (size_t)a->width * a->height * 3);
    assert_memory_equal(copy, m->data, sizeof(float) * 33 * 17);
    pl_image_free(a);
    pl_image_free(b);
    free(copy);
    map_release(m);
}

/* ---- PNG --------------------------------------------------------------- */

/* Reference decoder: pypng (tests/ref/render_png_ref.py) must read the file
 * as 8-bit RGB of the image's size with exactly its pixels. */
static void test_render__png_decodes_in_pypng(void **state)
{
    (void)state;
    pl_map *m = map_alloc(40, 30, 1);
    for (int i = 0; i < 40 * 30; i++)
        m->data[i] = (i % 17 == 0) ? NAN : (float)sin(i * 0.1) * 3.0f;
    pl_image *img;
    assert_int_equal(pl_render_map(&img, m, 0, NULL, NULL), PL_OK);
    char *dir = tu_tmpdir();
    char *path = tu_path(dir, "map render.png");
    char *raw = tu_path(dir, "raw.bin");
    assert_int_equal(pl_image_save_png(img, path, NULL), PL_OK);
    assert_int_equal(tu_write_file(raw, img->rgb, (size_t)img->width * img->height * 3), 0);
    char w[16], h[16];
    snprintf(w, sizeof w, "%u", img->width);
    snprintf(h, sizeof h, "%u", img->height);
    assert_int_equal(tu_python("render_png_ref.py", path, raw, w, h, (char *)NULL), 0);
    /* The writer is deterministic: saving again gives the same bytes. */
    size_t n1, n2;
    unsigned char *f1 = tu_read_file(path, &n1);
    assert_int_equal(pl_image_save_png(img, path, NULL), PL_OK);
    unsigned char *f2 = tu_read_file(path, &n2);
    assert_non_null(f1);
    assert_non_null(f2);
    assert_int_equal(n1, n2);
    assert_memory_equal(f1, f2, n1);
    free(f1);
    free(f2);
    free(path);
    free(raw);
    tu_rmtree(dir);
    pl_image_free(img);
    map_release(m);
}

static void test_render__png_write_failure_names_file(void **state)
{
    (void)state;
    pl_image *img;
    assert_int_equal(pl_image_new(&img, 2, 2, NULL), PL_OK);
    char *dir = tu_tmpdir();
    char *path = tu_path(dir, "missing/out.png");
    pl_err err = {0};
    assert_int_equal(pl_image_save_png(img, path, &err), PL_EIO);
    assert_int_equal(err.code, PL_EIO);
    tu_assert_msg_has(err.msg, path);
    free(path);
    /* /dev/full (Linux) accepts the open but not the data. A small file
     * fits stdio's buffer and fails at the final flush; a large one fails
     * inside libpng, through its error callback and longjmp. */
    assert_int_equal(pl_image_save_png(img, "/dev/full", &err), PL_EIO);
    tu_assert_msg_has(err.msg, "/dev/full");
    pl_image *big;
    assert_int_equal(pl_image_new(&big, 256, 256, NULL), PL_OK);
    uint32_t seed = 99;
    for (size_t i = 0; i < (size_t)256 * 256 * 3; i++)
        big->rgb[i] = (unsigned char)lcg(&seed); /* noise: no compression */
    assert_int_equal(pl_image_save_png(big, "/dev/full", &err), PL_EIO);
    tu_assert_msg_has(err.msg, "/dev/full: cannot write PNG");
    pl_image_free(big);
    tu_rmtree(dir);
    pl_image_free(img);
}

/* ---- font -------------------------------------------------------------- */

static void test_render__font_glyphs_nonempty_and_distinct(void **state)
{
    (void)state;
    unsigned char g[95][PL_FONT_HEIGHT];
    for (int c = 32; c <= 126; c++) {
        assert_int_equal(pl_render__glyph(c, g[c - 32]), 0);
        int on = 0;
        for (int r = 0; r < PL_FONT_HEIGHT; r++) {
            assert_int_equal(g[c - 32][r] & ~0x1f, 0); /* 5 columns only */
            on += g[c - 32][r] != 0;
        }
        if (c == ' ')
            assert_int_equal(on, 0);
        else if (on == 0)
            fail_msg("glyph '%c' is empty", c);
    }
    for (int a = 0; a < 95; a++)
        for (int b = a + 1; b < 95; b++)
            if (memcmp(g[a], g[b], PL_FONT_HEIGHT) == 0)
                fail_msg("glyphs '%c' and '%c' are the same", a + 32, b + 32);
    unsigned char r[PL_FONT_HEIGHT];
    assert_int_equal(pl_render__glyph(31, r), -1);
    assert_int_equal(pl_render__glyph(127, r), -1);
    assert_int_equal(pl_render__glyph(200, r), -1);
}

/* Text lands pixel for pixel as the glyph bitmaps say, scaled; clipped at
 * the edges; other bytes are drawn as '?'. */
static void test_render__text_draws_glyphs(void **state)
{
    (void)state;
    pl_image *img;
    assert_int_equal(pl_image_new(&img, 40, 20, NULL), PL_OK);
    const unsigned char white[3] = {255, 255, 255};
    assert_int_equal(pl_image_text(img, 2, 3, "Ag", 2, white), (2 * 6 - 1) * 2);
    for (int k = 0; k < 2; k++) {
        unsigned char rows[PL_FONT_HEIGHT];
        pl_render__glyph("Ag"[k], rows);
        for (int r = 0; r < PL_FONT_HEIGHT * 2; r++)
            for (int c = 0; c < PL_FONT_WIDTH * 2; c++) {
                int on = (rows[r / 2] >> (4 - c / 2)) & 1;
                const unsigned char *p = px(img, 2 + k * 12 + c, 3 + r);
                assert_int_equal(p[0], on ? 255 : 0);
            }
    }
    /* The spacing column between characters stays empty. */
    for (int r = 0; r < 14; r++)
        assert_int_equal(px(img, 2 + 10, 3 + r)[0], 0);
    /* Clipping: partly and wholly outside. */
    assert_int_equal(pl_image_text(img, -7, -5, "WW", 3, white), 33);
    assert_int_equal(pl_image_text(img, 35, 15, "long text", 1, white), 53);
    assert_int_equal(pl_image_text(img, 1000, -1000, "x", 1, white), 5);
    assert_int_equal(pl_image_text(img, 0, 0, "", 1, white), 0);
    assert_int_equal(pl_image_text(img, 0, 0, "a", 0, white), 0);
    pl_image_free(img);

    /* A byte outside printable ASCII draws as '?'. */
    pl_image *a, *b;
    assert_int_equal(pl_image_new(&a, 12, 8, NULL), PL_OK);
    assert_int_equal(pl_image_new(&b, 12, 8, NULL), PL_OK);
    pl_image_text(a, 0, 0, "\x01\xc3", 1, white);
    pl_image_text(b, 0, 0, "??", 1, white);
    assert_memory_equal(a->rgb, b->rgb, 12 * 8 * 3);
    pl_image_free(a);
    pl_image_free(b);
}

/* ---- identification ---------------------------------------------------- */

/* Ink pixels (not paper) in rows y0..y1-1 of the image. */
static size_t ink_in_rows(const pl_image *img, int y0, int y1)
{
    size_t n = 0;
    for (int y = y0; y < y1; y++)
        for (uint32_t x = 0; x < img->width; x++)
            n += !is_colour(px(img, (int)x, y), PL_RENDER_BACKGROUND);
    return n;
}

/*
 * Every rendering can name what it shows: the caller's identification
 * line (airframe serial, site, inspection date, map id, quantity) is drawn
 * with the built-in font in a band above the caption, and written as the
 * PNG "Title" text chunk (ISO/IEC 15948, 11.3.4.2, predefined keywords),
 * which pypng reads back. A simulated inspection's map says SIMULATED in
 * both, also without a line of its own; view images of two maps carry it
 * too. Options of version 1 still render, without the band; text outside
 * printable ASCII or longer than the limit is refused.
 */
static void test_render__identification_line_in_image_and_png(void **state)
{
    (void)state;
    pl_map *m = map_alloc(40, 30, 1);
    m->pitch_u = m->pitch_v = 0.5;
    for (int i = 0; i < 40 * 30; i++)
        m->data[i] = (float)sin(i * 0.07);
    char ident[PL_RENDER_IDENTIFICATION_SIZE];
    pl_render_identification(ident, sizeof ident, "CR7-0107", "F03", "2031-05-02", 75, "depth");
    assert_string_equal(ident, "CR7-0107 site F03 2031-05-02 map 75 depth");
    pl_render_options o = PL_RENDER_OPTIONS_INIT;
    o.identification = ident;
    pl_image *img;
    pl_render_layout lay;
    pl_err err = {0};
    TU_OK(pl_render__map(&img, &lay, m, 0, &o, &err));
    assert_layout_inside(img, &lay);
    assert_string_equal(lay.title, ident);
    assert_true(lay.title_h > 0 && lay.title_y + lay.title_h <= lay.caption_y);
    assert_text_at(img, lay.title_x, lay.title_y, lay.title, lay.title_scale);
    assert_true(ink_in_rows(img, 0, lay.title_y + lay.title_h) > 50);
    assert_string_equal(img->title, ident);
    char *dir = tu_tmpdir();
    char *path = tu_path(dir, "named.png"), *raw = tu_path(dir, "named.raw");
    TU_OK(pl_image_save_png(img, path, &err));
    assert_int_equal(tu_write_file(raw, img->rgb, (size_t)img->width * img->height * 3), 0);
    char w[16], h[16];
    snprintf(w, sizeof w, "%u", img->width);
    snprintf(h, sizeof h, "%u", img->height);
    assert_int_equal(tu_python("render_png_ref.py", path, raw, w, h, ident, (char *)NULL), 0);
    /* the check can fail: another title */
    assert_int_not_equal(tu_python("render_png_ref.py", path, raw, w, h, "CR7-0112 F03",
                                   (char *)NULL), 0);
    pl_image_free(img);

    /* without a line (version 1 options too) there is no band */
    pl_render_options o1 = PL_RENDER_OPTIONS_INIT;
    o1.version = 1;
    TU_OK(pl_render__map(&img, &lay, m, 0, &o1, &err));
    assert_int_equal(lay.title_h, 0);
    assert_null(img->title);
    assert_int_equal(ink_in_rows(img, 0, lay.caption_y), 0);
    pl_image_free(img);

    /* simulated: said first, with or without the caller's line */
    o.simulated = 1;
    TU_OK(pl_render__map(&img, &lay, m, 0, &o, &err));
    assert_string_equal(lay.title, "SIMULATED CR7-0107 site F03 2031-05-02 map 75 depth");
    assert_text_at(img, lay.title_x, lay.title_y, lay.title, lay.title_scale);
    assert_string_equal(img->title, lay.title);
    TU_OK(pl_image_save_png(img, path, &err));
    assert_int_equal(tu_write_file(raw, img->rgb, (size_t)img->width * img->height * 3), 0);
    snprintf(w, sizeof w, "%u", img->width);
    snprintf(h, sizeof h, "%u", img->height);
    assert_int_equal(tu_python("render_png_ref.py", path, raw, w, h, lay.title, (char *)NULL), 0);
    pl_image_free(img);
    o.identification = NULL;
    TU_OK(pl_render__map(&img, &lay, m, 0, &o, &err));
    assert_string_equal(lay.title, "SIMULATED");
    assert_true(ink_in_rows(img, 0, lay.title_y + lay.title_h) > 0);
    pl_image_free(img);

    /* the view of two maps (register's) carries it */
    o.identification = ident;
    o.simulated = 0;
    for (int mode = 0; mode < 2; mode++) {
        TU_OK(pl_render_pair(&img, m, 0, m, 0, (pl_pair_mode)mode, 0, &o, &err));
        assert_string_equal(img->title, ident);
        assert_true(ink_in_rows(img, 0, 6 * 2 + 7 * 2) > 50);
        pl_image_free(img);
    }

    /* refusals */
    o.identification = "CR7-0107 F03 \xc3\xa9t\xc3\xa9";
    assert_int_equal(pl_render_map(&img, m, 0, &o, &err), PL_EINVAL);
    assert_null(img);
    tu_assert_msg_has(err.msg, "printable ASCII");
    char longer[PL_RENDER_IDENTIFICATION_SIZE + 8];
    memset(longer, 'x', sizeof longer - 1);
    longer[sizeof longer - 1] = '\0';
    o.identification = longer;
    assert_int_equal(pl_render_map(&img, m, 0, &o, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "longer than");
    o.version = 3;
    assert_int_equal(pl_render_map(&img, m, 0, &o, &err), PL_EINVAL);
    free(path);
    free(raw);
    tu_rmtree(dir);
    map_release(m);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_render__tables_built_once_across_threads),
        cmocka_unit_test(test_render__srgb_transfer_matches_iec_61966),
        cmocka_unit_test(test_render__srgb_to_lab_matches_skimage),
        cmocka_unit_test(test_render__lab_to_srgb_matches_skimage),
        cmocka_unit_test(test_render__colormaps_match_skimage),
        cmocka_unit_test(test_render__grey_has_ledger_lightness),
        cmocka_unit_test(test_render__colormap_rgb_clamps_and_marks_nan),
        cmocka_unit_test(test_render__nice_length_is_1_2_5),
        cmocka_unit_test(test_render__format_value_is_compact),
        cmocka_unit_test(test_render__auto_range_matches_numpy_percentile),
        cmocka_unit_test(test_render__ramp_renders_monotonic_colours),
        cmocka_unit_test(test_render__nan_pixels_are_nodata_grey),
        cmocka_unit_test(test_render__colour_bar_and_scale_bar),
        cmocka_unit_test(test_render__scale_bar_length_matches_pitch),
        cmocka_unit_test(test_render__caption_names_quantity_and_label),
        cmocka_unit_test(test_render__pair_checkerboard_and_blend),
        cmocka_unit_test(test_render__tiny_and_extreme_maps),
        cmocka_unit_test(test_render__refuses_bad_requests),
        cmocka_unit_test(test_render__deterministic_and_read_only),
        cmocka_unit_test(test_render__png_decodes_in_pypng),
        cmocka_unit_test(test_render__png_write_failure_names_file),
        cmocka_unit_test(test_render__font_glyphs_nonempty_and_distinct),
        cmocka_unit_test(test_render__text_draws_glyphs),
        cmocka_unit_test(test_render__identification_line_in_image_and_png),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
