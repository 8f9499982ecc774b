/*
 * test_plot.c - data plots: nice ticks against Heckbert's loose labelling
 * worked by hand, points and lines where pl_plot_locate() says, the limit
 * line, clipping, non-finite data, tick labels, the legend, refusals and
 * determinism.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plyledger/plot.h"
#include "image/render_int.h"
#include "testutil.h"

/* ---- helpers ----------------------------------------------------------- */

static const unsigned char INK[3] = {PL_RENDER_INK};
static const unsigned char PAPER[3] = {PL_RENDER_BACKGROUND};
static const unsigned char LIMIT_RED[3] = {200, 30, 30};
static const unsigned char BLUE[3] = {20, 90, 200};
static const unsigned char GREEN[3] = {0, 150, 60};
static const unsigned char ORANGE[3] = {230, 120, 0};

static const unsigned char *px(const pl_image *img, long x, long y)
{
    assert_true(x >= 0 && y >= 0 && (uint32_t)x < img->width && (uint32_t)y < img->height);
    return img->rgb + ((size_t)y * img->width + (size_t)x) * 3;
}

static int has_colour(const pl_image *img, long x, long y, const unsigned char rgb[3])
{
    return memcmp(px(img, x, y), rgb, 3) == 0;
}

/* The pixel pl_plot_locate() names for (x, y). */
static void locate_px(long *col, long *row, const pl_plot *p, double x, double y)
{
    pl_err err = {0};
    double c, r;
    TU_OK(pl_plot_locate(&c, &r, p, x, y, &err));
    *col = (long)floor(c + 0.5);
    *row = (long)floor(r + 0.5);
}

static size_t count_colour(const pl_image *img, long x0, long y0, long x1, long y1,
                           const unsigned char rgb[3])
{
    size_t n = 0;
    for (long y = y0; y < y1; y++)
        for (long x = x0; x < x1; x++)
            if (has_colour(img, x, y, rgb))
                n++;
    return n;
}

/* How many places of the image show `text` as pl_image_text() draws it at
 * `scale` in INK on PAPER, with BORDER paper columns on either side: more
 * than the blank columns any glyph leaves between its ink and the next
 * character's (at most 3, after a '.'), so that "1" is not found inside
 * "0.1", nor "0.5" inside "0.55". */
#define BORDER 4u
static int find_text(const pl_image *img, const char *text, unsigned scale)
{
    uint32_t w = pl_render__text_width(text, scale), h = PL_FONT_HEIGHT * scale;
    pl_image *ref;
    assert_int_equal(pl_image_new(&ref, w + 2 * BORDER, h, NULL), PL_OK);
    pl_render__fill(ref, 0, 0, w + 2 * BORDER, h, PAPER);
    pl_image_text(ref, BORDER, 0, text, scale, INK);
    int found = 0;
    for (uint32_t y = 0; y + h <= img->height; y++)
        for (uint32_t x = 0; x + w + 2 * BORDER <= img->width; x++) {
            int same = 1;
            for (uint32_t yy = 0; yy < h && same; yy++)
                same = memcmp(img->rgb + ((size_t)(y + yy) * img->width + x) * 3,
                              ref->rgb + ((size_t)yy * ref->width) * 3,
                              (size_t)(w + 2 * BORDER) * 3) == 0;
            found += same;
        }
    pl_image_free(ref);
    return found;
}

/* The plot area's corners, from where the axis ends fall. */
static void plot_area(long *x0, long *y0, long *x1, long *y1, const pl_plot *p, double xmin,
                      double xmax, double ymin, double ymax)
{
    locate_px(x0, y0, p, xmin, ymax);
    locate_px(x1, y1, p, xmax, ymin);
}

/* ---- ticks ------------------------------------------------------------- */

/*
 * Heckbert, P. S. (1990), Nice numbers for graph labels, Graphics Gems,
 * pp. 61-63: loose labelling takes range = nicenum(max - min, no rounding)
 * and d = nicenum(range / (ntick - 1), rounding), where nicenum() writes
 * x = f 10^e (1 <= f < 10) and gives nf 10^e with, rounding, nf = 1 (f <
 * 1.5), 2 (f < 3), 5 (f < 7) or 10, and otherwise nf = 1 (f <= 1), 2 (f <=
 * 2), 5 (f <= 5) or 10; the graph runs from floor(min / d) d to ceil(max /
 * d) d. pl_plot_ticks() reports the multiples of d inside [lo, hi]. Each
 * case below is worked by hand.
 */
static void test_plot__ticks_follow_heckbert_loose_labelling(void **state)
{
    (void)state;
    struct {
        double lo, hi;
        int target;
        double first, step;
        int count;
    } cases[] = {
        /* 438 -> f 4.38 -> 500; 500 / 4 = 125 -> f 1.25 -> 100; graph 100..600;
         * inside 105..543: 200, 300, 400, 500 */
        {105, 543, 5, 200, 100, 4},
        /* graph range itself: 500 -> 500; 125 -> 100; 100..600, 6 ticks */
        {100, 600, 5, 100, 100, 6},
        /* 28000 -> f 2.8 -> 50000; 5000 -> f 5 -> 5000; 0, 5000, ..., 25000 */
        {0, 28000, 11, 0, 5000, 6},
        /* 1.19 -> 2; 0.4 -> f 4 -> 0.5; graph -0.5..1; inside: 0, 0.5 */
        {-0.37, 0.82, 6, 0, 0.5, 2},
        /* 0.14 -> f 1.4 -> 0.2; 0.05 -> f 5 -> 0.05; 2.05, 2.10, 2.15 */
        {2.03, 2.17, 5, 2.05, 0.05, 3},
        /* 1 -> 1; 0.25 -> f 2.5 -> 0.2; 0, 0.2, ..., 1 */
        {0, 1, 5, 0, 0.2, 6},
        /* 0.2 -> 0.2; 0.1 -> 0.1; 0.1, 0.2, 0.3 (0.3 / 0.1 is 2.9999999999999996
         * in doubles, the last tick must still count) */
        {0.1, 0.3, 3, 0.1, 0.1, 3},
        /* 3.5e6 -> f 3.5 -> 5e6; 5e6 / 9 = 5.6e5 -> f 5.6 -> 5e5; 5e5 .. 3.5e6 */
        {4e5, 3.6e6, 10, 5e5, 5e5, 7},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        double first, step;
        int count;
        assert_int_equal(pl_plot_ticks(cases[i].lo, cases[i].hi, cases[i].target, &first,
                                       &step, &count), PL_OK);
        char what[64];
        snprintf(what, sizeof what, "case %zu step", i);
        tu_assert_close(step, cases[i].step, 1e-12 * cases[i].step, what);
        snprintf(what, sizeof what, "case %zu first", i);
        tu_assert_close(first, cases[i].first, 1e-12 * cases[i].step, what);
        if (count != cases[i].count)
            fail_msg("case %zu: %d ticks, expected %d", i, count, cases[i].count);
    }
    double first, step;
    int count;
    assert_int_equal(pl_plot_ticks(1, 1, 5, &first, &step, &count), PL_EINVAL);
    assert_int_equal(pl_plot_ticks(2, 1, 5, &first, &step, &count), PL_EINVAL);
    assert_int_equal(pl_plot_ticks(NAN, 1, 5, &first, &step, &count), PL_EINVAL);
    assert_int_equal(pl_plot_ticks(0, INFINITY, 5, &first, &step, &count), PL_EINVAL);
    assert_int_equal(pl_plot_ticks(0, 1, 1, &first, &step, &count), PL_EINVAL);
    assert_int_equal(pl_plot_ticks(-1e308, 1e308, 5, &first, &step, &count), PL_EINVAL);
    assert_int_equal(count, 0);
}

/* An automatic axis spans Heckbert's graph range of the data with their 5 %
 * margin: it is placed as the same plot with that range given. */
static void test_plot__automatic_range_is_loose_graph_range(void **state)
{
    (void)state;
    /* x 105..543: margin 21.9 -> 83.1..564.9; the x axis of a 720 px plot asks
     * for 720 / 64 = 11 ticks: 481.8 -> 500, 50 -> f 5 -> 50; graph 50..600.
     * y 0..28000 (cycles-like, never negative): margin 1400 would take the
     * bottom below zero, so it stays at 0: 0..29400; 440 / 40 = 11 ticks:
     * 29400 -> 50000, 5000 -> 5000; graph 0..30000. */
    double x[] = {105, 300, 543}, y[] = {0, 12000, 28000};
    pl_plot_series sr = {"data", 3, x, y, NULL, PL_PLOT_POINTS, {0, 0, 0}};
    pl_plot a = PL_PLOT_INIT, b = PL_PLOT_INIT;
    a.nseries = b.nseries = 1;
    a.series = b.series = &sr;
    b.xmin = 50;
    b.xmax = 600;
    b.ymin = 0;
    b.ymax = 30000;
    double probe[][2] = {{50, 0}, {600, 30000}, {300, 12000}, {105, 28000}};
    for (size_t i = 0; i < 4; i++) {
        long ca, ra, cb, rb;
        locate_px(&ca, &ra, &a, probe[i][0], probe[i][1]);
        locate_px(&cb, &rb, &b, probe[i][0], probe[i][1]);
        assert_int_equal(ca, cb);
        assert_int_equal(ra, rb);
    }
    /* and the graph range's ends are the plot area's ends: the dark axes lie
     * just outside them */
    pl_image *img;
    pl_err err = {0};
    TU_OK(pl_plot_render(&img, &a, &err));
    long x0, y0, x1, y1;
    plot_area(&x0, &y0, &x1, &y1, &a, 50, 600, 0, 30000);
    assert_true(x0 > 0 && x1 > x0 + 300 && y1 > y0 + 200);
    for (long r = y0; r <= y1; r += 7)
        assert_true(has_colour(img, x0 - 1, r, INK));
    for (long c = x0; c <= x1; c += 7)
        assert_true(has_colour(img, c, y1 + 1, INK));
    pl_image_free(img);
}

/* ---- drawing ----------------------------------------------------------- */

static void test_plot__points_drawn_where_located(void **state)
{
    (void)state;
    double x[] = {0, 1500, 3000, 6000, 9000, 12000};
    double y[] = {42, 44, 47.5, 51, 58, 66};
    pl_plot_series sr = {"measured", 6, x, y, NULL, PL_PLOT_POINTS, {20, 90, 200}};
    pl_plot p = PL_PLOT_INIT;
    p.title = "indication 3 growth";
    p.x_label = "flight cycles";
    p.y_label = "area (mm2)";
    p.nseries = 1;
    p.series = &sr;
    pl_image *img;
    pl_err err = {0};
    TU_OK(pl_plot_render(&img, &p, &err));
    assert_int_equal(img->width, 720);
    assert_int_equal(img->height, 440);
    assert_string_equal(img->title, "indication 3 growth");
    for (size_t i = 0; i < 6; i++) {
        long c, r;
        locate_px(&c, &r, &p, x[i], y[i]);
        /* the whole 5x5 marker, clipped to the plot area at x = 0 */
        for (long dy = -2; dy <= 2; dy++)
            for (long dx = i == 0 ? 0 : -2; dx <= 2; dx++)
                if (!has_colour(img, c + dx, r + dy, BLUE))
                    fail_msg("point %zu: (%ld, %ld) is not the series colour", i, c + dx,
                             r + dy);
        assert_false(has_colour(img, c, r - 4, BLUE));
    }
    /* the series' marker count: 6 markers of 25 pixels (one cut to 15), plus
     * the legend's sample */
    size_t n = count_colour(img, 0, 0, 720, 440, BLUE);
    assert_int_equal(n, 5 * 25 + 15 + 25);
    pl_image_free(img);
}

static void test_plot__line_passes_through_segment(void **state)
{
    (void)state;
    double x[] = {1, 9, 9.5}, y[] = {1, 5, 2};
    pl_plot_series sr = {"fit", 3, x, y, NULL, PL_PLOT_LINE, {0, 150, 60}};
    pl_plot p = PL_PLOT_INIT;
    p.xmin = 0;
    p.xmax = 10;
    p.ymin = 0;
    p.ymax = 6;
    p.nseries = 1;
    p.series = &sr;
    pl_image *img;
    pl_err err = {0};
    TU_OK(pl_plot_render(&img, &p, &err));
    for (int k = 0; k <= 8; k++) {
        double t = k / 8.0;
        long c, r;
        locate_px(&c, &r, &p, 1 + 8 * t, 1 + 4 * t);
        if (!has_colour(img, c, r, GREEN))
            fail_msg("line misses (%g, %g) at pixel (%ld, %ld)", 1 + 8 * t, 1 + 4 * t, c, r);
    }
    long c, r;
    locate_px(&c, &r, &p, 9.25, 3.5);
    assert_true(has_colour(img, c, r, GREEN));
    /* nothing far from the line: the point (5, 1) lies 1.8 units below it */
    locate_px(&c, &r, &p, 5, 1);
    assert_false(has_colour(img, c, r, GREEN));
    pl_image_free(img);

    /* dashed: along a long horizontal run both colour and gaps */
    double hx[] = {0.5, 9.5}, hy[] = {3, 3};
    pl_plot_series dash = {NULL, 2, hx, hy, NULL, PL_PLOT_DASHED, {230, 120, 0}};
    p.series = &dash;
    TU_OK(pl_plot_render(&img, &p, &err));
    long c0, c1;
    locate_px(&c0, &r, &p, 0.5, 3);
    locate_px(&c1, &r, &p, 9.5, 3);
    size_t on = count_colour(img, c0, r, c1 + 1, r + 1, ORANGE);
    double share = (double)on / (double)(c1 - c0 + 1);
    /* 8 on, 5 off */
    assert_true(share > 0.5 && share < 0.75);
    pl_image_free(img);
}

static void test_plot__limit_line_at_located_row(void **state)
{
    (void)state;
    double x[] = {0, 10000}, y[] = {40, 70};
    pl_plot_series sr = {"measured", 2, x, y, NULL, PL_PLOT_POINTS, {20, 90, 200}};
    pl_plot p = PL_PLOT_INIT;
    p.nseries = 1;
    p.series = &sr;
    p.hline = 120;
    p.hline_label = "limit 120 mm2";
    pl_image *img;
    pl_err err = {0};
    TU_OK(pl_plot_render(&img, &p, &err));
    long x0, y0, x1, y1;
    /* x 0..10000: the margin stops at 0, 0..10500 -> 20000 -> step 2000 ->
     * graph 0..12000; y takes in the limit line: 40..120, margin 4 -> 36..124
     * -> 100 -> step 10 -> graph 30..130 (as in the ticks test) */
    plot_area(&x0, &y0, &x1, &y1, &p, 0, 12000, 30, 130);
    long c, r;
    locate_px(&c, &r, &p, 0, 120);
    assert_int_equal(c, x0);
    assert_true(r > y0 && r < y1);
    locate_px(&c, &r, &p, 0, 120);
    assert_true(has_colour(img, x0, r, LIMIT_RED));
    size_t on = count_colour(img, x0, r, x1 + 1, r + 1, LIMIT_RED);
    double share = (double)on / (double)(x1 - x0 + 1);
    assert_true(share > 0.5 && share < 0.75);  /* 10 on, 6 off */
    /* and only there: rows a few pixels away carry no dash */
    assert_int_equal(count_colour(img, x0, r + 3, x1 + 1, r + 4, LIMIT_RED), 0);
    /* its label, above its right end */
    assert_true(count_colour(img, (x0 + x1) / 2, r - 14, x1 + 1, r - 2, LIMIT_RED) > 30);
    pl_image_free(img);

    /* a limit outside a given range is not drawn */
    p.ymin = 0;
    p.ymax = 100;
    TU_OK(pl_plot_render(&img, &p, &err));
    assert_int_equal(count_colour(img, 0, 0, 720, 440, LIMIT_RED), 0);
    pl_image_free(img);
}

static void test_plot__clipped_to_plot_area(void **state)
{
    (void)state;
    double x[] = {5, 20, 5, -5, 8, 1e300, -3e307};
    double y[] = {5, 5, 20, -5, 8, 2, -1e306};
    double e[] = {100, NAN, 0, 1, 50, 1, 1};
    pl_plot_series pts = {"pts", 7, x, y, e, PL_PLOT_POINTS, {20, 90, 200}};
    pl_plot_series line = {"line", 7, x, y, NULL, PL_PLOT_LINE, {0, 150, 60}};
    pl_plot_series series[2] = {line, pts};
    pl_plot p = PL_PLOT_INIT;
    p.xmin = 0;
    p.xmax = 10;
    p.ymin = 0;
    p.ymax = 10;
    p.nseries = 2;
    p.series = series;
    pl_image *img;
    pl_err err = {0};
    TU_OK(pl_plot_render(&img, &p, &err));
    long x0, y0, x1, y1;
    plot_area(&x0, &y0, &x1, &y1, &p, 0, 10, 0, 10);
    for (long r = 0; r < (long)img->height; r++)
        for (long c = 0; c < (long)img->width; c++) {
            if (c >= x0 && c <= x1 && r >= y0 && r <= y1)
                continue;
            if (has_colour(img, c, r, BLUE) || has_colour(img, c, r, GREEN))
                fail_msg("series colour outside the plot area at (%ld, %ld)", c, r);
        }
    /* inside: the points, the line towards (20, 5) up to the right edge, the
     * error bar of (5, 5) up to the top edge */
    long c, r;
    locate_px(&c, &r, &p, 5, 5);
    assert_true(has_colour(img, c, r, BLUE));
    locate_px(&c, &r, &p, 8, 8);
    assert_true(has_colour(img, c, r, BLUE));
    locate_px(&c, &r, &p, 10, 5);
    assert_true(has_colour(img, c, r, GREEN));
    locate_px(&c, &r, &p, 5, 9.5);
    assert_true(has_colour(img, c, r, BLUE));
    assert_true(has_colour(img, c, y0, BLUE));
    pl_image_free(img);
}

static void test_plot__non_finite_points_skipped(void **state)
{
    (void)state;
    double x[] = {0, 1, NAN, 3, 4, INFINITY, 6, 7};
    double y[] = {1, 2, 3, NAN, 5, 6, -INFINITY, 8};
    double e[] = {NAN, INFINITY, -1, 0.5, 0.5, 1, 1, -INFINITY};
    pl_plot_series line = {"line", 8, x, y, NULL, PL_PLOT_LINE, {0, 150, 60}};
    pl_plot_series pts = {"points", 8, x, y, e, PL_PLOT_POINTS, {20, 90, 200}};
    pl_plot_series empty = {"nothing", 0, NULL, NULL, NULL, PL_PLOT_DASHED, {230, 120, 0}};
    pl_plot_series series[3] = {line, pts, empty};
    pl_plot p = PL_PLOT_INIT;
    p.nseries = 3;
    p.series = series;
    pl_image *img;
    pl_err err = {0};
    TU_OK(pl_plot_render(&img, &p, &err));
    /* finite points drawn */
    double fx[] = {0, 1, 4, 7}, fy[] = {1, 2, 5, 8};
    for (int i = 0; i < 4; i++) {
        long c, r;
        locate_px(&c, &r, &p, fx[i], fy[i]);
        assert_true(has_colour(img, c, r, BLUE));
    }
    /* the line joins 0-1, then breaks: nothing midway between 1 and 4 */
    long c, r;
    locate_px(&c, &r, &p, 0.5, 1.5);
    assert_true(has_colour(img, c, r, GREEN));
    locate_px(&c, &r, &p, 2.5, 3.5);
    assert_false(has_colour(img, c, r, GREEN));
    pl_image_free(img);
    /* a lone point between breaks, (4, 5), and the last one, (7, 8), still
     * show on a line, as a dot */
    p.nseries = 1;
    TU_OK(pl_plot_render(&img, &p, &err));
    locate_px(&c, &r, &p, 4, 5);
    assert_true(has_colour(img, c, r, GREEN));
    locate_px(&c, &r, &p, 7, 8);
    assert_true(has_colour(img, c, r, GREEN));
    locate_px(&c, &r, &p, 5.5, 6.5);
    assert_false(has_colour(img, c, r, GREEN));
    pl_image_free(img);

    /* only non-finite data: the default range, no failure */
    double nx[] = {NAN, INFINITY}, ny[] = {1, 2};
    pl_plot_series none = {"none", 2, nx, ny, NULL, PL_PLOT_POINTS, {20, 90, 200}};
    p.nseries = 1;
    p.series = &none;
    TU_OK(pl_plot_render(&img, &p, &err));
    assert_int_equal(count_colour(img, 0, 0, 720, 440, BLUE), 25);  /* legend sample */
    pl_image_free(img);
}

static void test_plot__degenerate_and_empty_ranges(void **state)
{
    (void)state;
    pl_image *img;
    pl_err err = {0};
    /* no data at all: axes 0..1 */
    pl_plot p = PL_PLOT_INIT;
    TU_OK(pl_plot_render(&img, &p, &err));
    assert_true(find_text(img, "0.5", 1) >= 2);
    assert_true(find_text(img, "1", 1) >= 2);
    pl_image_free(img);
    /* one point: a range around it, the point inside the plot area */
    double x[] = {2500}, y[] = {80};
    pl_plot_series sr = {NULL, 1, x, y, NULL, PL_PLOT_POINTS, {20, 90, 200}};
    p.nseries = 1;
    p.series = &sr;
    TU_OK(pl_plot_render(&img, &p, &err));
    long c, r;
    locate_px(&c, &r, &p, 2500, 80);
    assert_true(has_colour(img, c, r, BLUE));
    assert_int_equal(count_colour(img, 0, 0, 720, 440, BLUE), 25);
    assert_true(c > 200 && c < 600 && r > 100 && r < 350);
    pl_image_free(img);
    /* one point at 0, and one end given on the wrong side of the data */
    x[0] = 0;
    y[0] = 0;
    p.xmin = 10;
    TU_OK(pl_plot_render(&img, &p, &err));
    pl_image_free(img);
    p.xmin = NAN;
    p.ymax = -5;
    TU_OK(pl_plot_render(&img, &p, &err));
    pl_image_free(img);
}

/* Tick values are written compactly: in full below 1e6, no trailing zeros,
 * in exponent form on an axis of millions or of thousandths. */
static void test_plot__tick_labels_compact(void **state)
{
    (void)state;
    pl_image *img;
    pl_err err = {0};
    pl_plot p = PL_PLOT_INIT;
    p.xmin = 0;
    p.xmax = 28000;
    p.ymin = 0;
    p.ymax = 2e6;
    TU_OK(pl_plot_render(&img, &p, &err));
    assert_int_equal(find_text(img, "25000", 1), 1);
    assert_int_equal(find_text(img, "0", 1), 2);
    /* y: 2e6 -> 2e6, 2e5 -> 2e5: the whole axis in exponent form */
    assert_int_equal(find_text(img, "2e6", 1), 1);
    assert_int_equal(find_text(img, "1.6e6", 1), 1);
    assert_int_equal(find_text(img, "2e5", 1), 1);
    assert_int_equal(find_text(img, "200000", 1), 0);
    assert_int_equal(find_text(img, "2000000", 1), 0);
    pl_image_free(img);

    p.xmax = 1;
    p.ymin = 0;
    p.ymax = 0.0008;
    TU_OK(pl_plot_render(&img, &p, &err));
    assert_int_equal(find_text(img, "0.5", 1), 1);
    assert_int_equal(find_text(img, "0.50", 1), 0);
    assert_int_equal(find_text(img, "5e-4", 1), 1);
    assert_int_equal(find_text(img, "0.0005", 1), 0);
    pl_image_free(img);

    /* decimals of the step only: 2.05, 2.1, 2.15 */
    p.xmin = 2.03;
    p.xmax = 2.17;
    p.width = 320;  /* 5 ticks wanted, as the ticks test's case */
    p.ymax = 1;
    TU_OK(pl_plot_render(&img, &p, &err));
    assert_int_equal(find_text(img, "2.05", 1), 1);
    assert_int_equal(find_text(img, "2.1", 1), 1);
    assert_int_equal(find_text(img, "2.15", 1), 1);
    assert_int_equal(find_text(img, "2.10", 1), 0);
    pl_image_free(img);
}

static void test_plot__not_blank_with_text(void **state)
{
    (void)state;
    double x[] = {0, 5000, 10000}, y[] = {50, 60, 75};
    pl_plot_series sr = {"measured", 3, x, y, NULL, PL_PLOT_POINTS, {20, 90, 200}};
    pl_plot p = PL_PLOT_INIT;
    p.nseries = 1;
    p.series = &sr;
    p.x_label = "flight cycles";
    p.y_label = "area (mm2)";
    pl_image *plain, *titled;
    pl_err err = {0};
    TU_OK(pl_plot_render(&plain, &p, &err));
    p.title = "site F03 indication 2";
    TU_OK(pl_plot_render(&titled, &p, &err));
    size_t inked = 0;
    for (size_t i = 0; i < (size_t)720 * 440; i++)
        inked += memcmp(titled->rgb + 3 * i, PAPER, 3) != 0;
    assert_true(inked > 3000);
    /* the title band (the top rows, down to the y label) holds the title at
     * twice the text scale */
    assert_true(count_colour(titled, 0, 0, 720, 28, INK) > 200);
    assert_int_equal(find_text(titled, "site F03 indication 2", 2), 1);
    assert_int_equal(find_text(plain, "site F03 indication 2", 2), 0);
    assert_int_equal(find_text(titled, "flight cycles", 1), 1);
    assert_int_equal(find_text(titled, "area (mm2)", 1), 1);
    /* the legend names the series, inside the plot area's top left */
    long x0, y0, x1, y1;
    plot_area(&x0, &y0, &x1, &y1, &p, 0, 12000, 45, 80);
    assert_int_equal(find_text(titled, "measured", 1), 1);
    assert_true(count_colour(titled, x0, y0, x0 + 60, y0 + 30, BLUE) == 25);
    pl_image_free(plain);
    pl_image_free(titled);
}

static void expect_refusal(const pl_plot *p, const char *field)
{
    pl_image *img = (pl_image *)1;
    pl_err err = {0};
    assert_int_equal(pl_plot_render(&img, p, &err), PL_EINVAL);
    assert_null(img);
    assert_int_equal(err.code, PL_EINVAL);
    tu_assert_msg_has(err.msg, field);
    double c = 0, r = 0;
    memset(&err, 0, sizeof err);
    assert_int_equal(pl_plot_locate(&c, &r, p, 1, 1, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, field);
}

static void test_plot__refuses_bad_plots(void **state)
{
    (void)state;
    double x[] = {1, 2}, y[] = {3, 4};
    pl_plot_series ok = {"ok", 2, x, y, NULL, PL_PLOT_POINTS, {0, 0, 0}};
    pl_plot_series bad[2] = {ok, ok};
    pl_plot base = PL_PLOT_INIT, p;
    base.nseries = 2;
    base.series = bad;

    p = base, p.version = 2;
    expect_refusal(&p, "plot.version");
    p = base, p.series = NULL;
    expect_refusal(&p, "plot.series");
    bad[1].x = NULL;
    expect_refusal(&base, "plot.series[1].x");
    bad[1] = ok, bad[1].y = NULL;
    expect_refusal(&base, "plot.series[1].y");
    bad[1] = ok, bad[1].style = (pl_plot_style)7;
    expect_refusal(&base, "plot.series[1].style");
    bad[1] = ok, bad[1].name = "growth\n";
    expect_refusal(&base, "plot.series[1].name");
    bad[1] = ok;
    p = base, p.width = 199;
    expect_refusal(&p, "plot.width");
    p = base, p.width = 4097;
    expect_refusal(&p, "plot.width");
    p = base, p.height = 149;
    expect_refusal(&p, "plot.height");
    p = base, p.height = 5000;
    expect_refusal(&p, "plot.height");
    p = base, p.xmin = 3, p.xmax = 3;
    expect_refusal(&p, "plot.xmin");
    p = base, p.ymin = 4, p.ymax = 1;
    expect_refusal(&p, "plot.ymin");
    p = base, p.xmax = INFINITY;
    expect_refusal(&p, "plot.xmax");
    p = base, p.hline = -INFINITY;
    expect_refusal(&p, "plot.hline");
    p = base, p.title = "caf\xc3\xa9";
    expect_refusal(&p, "plot.title");
    p = base, p.x_label = "cycles\t";
    expect_refusal(&p, "plot.x_label");
    p = base, p.y_label = "\x7f";
    expect_refusal(&p, "plot.y_label");
    p = base, p.hline_label = "limit\r";
    expect_refusal(&p, "plot.hline_label");
    p = base, p.text_scale = PL_PLOT_MAX_TEXT_SCALE + 1;
    expect_refusal(&p, "plot.text_scale");
    p = base, p.text_scale = 8, p.width = 200, p.height = 150;
    expect_refusal(&p, "plot.text_scale");
    /* a span doubles cannot hold */
    double wide[] = {-1e308, 1e308};
    pl_plot_series huge = {NULL, 2, wide, y, NULL, PL_PLOT_POINTS, {0, 0, 0}};
    p = base, p.nseries = 1, p.series = &huge;
    expect_refusal(&p, "x range");

    /* the limits themselves are accepted */
    pl_image *img;
    pl_err err = {0};
    p = base, p.width = 200, p.height = 150;
    TU_OK(pl_plot_render(&img, &p, &err));
    pl_image_free(img);
    p = base, p.width = 4096, p.height = 4096, p.text_scale = 8;
    TU_OK(pl_plot_render(&img, &p, &err));
    pl_image_free(img);
    /* and a locate of a point that is not finite is not */
    double c, r;
    assert_int_equal(pl_plot_locate(&c, &r, &base, NAN, 1, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "not finite");
}

static void test_plot__deterministic_and_read_only(void **state)
{
    (void)state;
    double x[] = {0, 2000, 4000, 6000, 8000}, y[] = {40, 43, 49, 55, 63};
    double e[] = {2, 2, 3, 3, 4};
    double fx[] = {0, 9000}, fy[] = {39, 66}, lo[] = {36, 60}, hi[] = {42, 72};
    pl_plot_series series[] = {
        {"measured", 5, x, y, e, PL_PLOT_POINTS, {20, 90, 200}},
        {"fitted", 2, fx, fy, NULL, PL_PLOT_LINE, {0, 150, 60}},
        {"95 % band", 2, fx, lo, NULL, PL_PLOT_DASHED, {120, 120, 120}},
        {NULL, 2, fx, hi, NULL, PL_PLOT_DASHED, {120, 120, 120}},
    };
    pl_plot p = PL_PLOT_INIT;
    p.title = "determinism";
    p.nseries = 4;
    p.series = series;
    p.hline = 100;
    p.hline_label = "limit";
    p.text_scale = 2;
    p.width = 900;
    p.height = 600;
    pl_image *a, *b;
    pl_err err = {0};
    TU_OK(pl_plot_render(&a, &p, &err));
    TU_OK(pl_plot_render(&b, &p, &err));
    assert_int_equal(a->width, b->width);
    assert_int_equal(a->height, b->height);
    assert_memory_equal(a->rgb, b->rgb, (size_t)a->width * a->height * 3);
    assert_true(y[2] == 49 && e[4] == 4 && fy[1] == 66);
    /* at text scale 2 markers are 10 x 10 */
    long c, r;
    locate_px(&c, &r, &p, 4000, 49);
    assert_true(has_colour(a, c - 5, r - 5, BLUE) && has_colour(a, c + 4, r + 4, BLUE));
    assert_false(has_colour(a, c + 6, r, BLUE));
    pl_image_free(a);
    pl_image_free(b);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_plot__ticks_follow_heckbert_loose_labelling),
        cmocka_unit_test(test_plot__automatic_range_is_loose_graph_range),
        cmocka_unit_test(test_plot__points_drawn_where_located),
        cmocka_unit_test(test_plot__line_passes_through_segment),
        cmocka_unit_test(test_plot__limit_line_at_located_row),
        cmocka_unit_test(test_plot__clipped_to_plot_area),
        cmocka_unit_test(test_plot__non_finite_points_skipped),
        cmocka_unit_test(test_plot__degenerate_and_empty_ranges),
        cmocka_unit_test(test_plot__tick_labels_compact),
        cmocka_unit_test(test_plot__not_blank_with_text),
        cmocka_unit_test(test_plot__refuses_bad_plots),
        cmocka_unit_test(test_plot__deterministic_and_read_only),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
