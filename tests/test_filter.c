/*
 * test_filter.c - the Gaussian blur, median and despeckle filters and the
 * order statistics (lib/common/filter.c), against scipy.ndimage and numpy.
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

#include "common/filter_int.h"
#include "plyledger/common.h"
#include "testutil.h"

static uint32_t lcg(uint32_t *s)
{
    *s = *s * 1664525u + 1013904223u;
    return *s >> 8;
}

/* Uniform in [-1, 1). */
static double noise(uint32_t *s)
{
    return (double)lcg(s) / 8388608.0 - 1.0;
}

/* Smooth texture (two tilted waves) plus noise of amplitude `amp`. */
static float *texture(uint32_t w, uint32_t h, double amp, uint32_t seed)
{
    float *v = malloc((size_t)w * h * sizeof *v);
    assert_non_null(v);
    uint32_t s = seed;
    for (uint32_t y = 0; y < h; y++)
        for (uint32_t x = 0; x < w; x++)
            v[(size_t)y * w + x] = (float)(10.0 + 3.0 * sin(0.21 * x + 0.13 * y)
                                           + 2.0 * cos(0.07 * x - 0.29 * y) + amp * noise(&s));
    return v;
}

/* Run filter_ref.py MODE on img (w x h) with the extra arguments; returns
 * the w x h float64 values it wrote. */
static double *reference(const char *mode, const float *img, uint32_t w, uint32_t h,
                         const char *a1, const char *a2)
{
    char *dir = tu_tmpdir(), *in = tu_path(dir, "in.f4"), *out = tu_path(dir, "out.f8");
    char hs[16], ws[16];
    snprintf(hs, sizeof hs, "%u", h);
    snprintf(ws, sizeof ws, "%u", w);
    tu_write_f4(in, img, (size_t)w * h);
    int rc = a2 ? tu_python("filter_ref.py", mode, in, hs, ws, a1, a2, out, NULL)
                : tu_python("filter_ref.py", mode, in, hs, ws, a1, out, NULL);
    assert_int_equal(rc, 0);
    size_t n;
    double *want = tu_read_f8(out, &n);
    assert_int_equal(n, (size_t)w * h);
    free(in);
    free(out);
    tu_rmtree(dir);
    return want;
}

/* ---- Gaussian blur -------------------------------------------------------- */

/*
 * Against scipy.ndimage.gaussian_filter (Debian's python3-scipy) as
 * normalised convolution, truncated where plyledger truncates: ceil(3
 * sigma) pixels, passed as truncate = ceil(3 sigma) / sigma (scipy's
 * radius is int(truncate sigma + 0.5)). Within 1e-5 of the image's
 * largest value: plyledger keeps float32 weights and sums the interior
 * in float32.
 */
static void check_gauss(const float *img, uint32_t w, uint32_t h, double sigma)
{
    float *got;
    assert_int_equal(pl_filter__gauss(&got, img, w, h, sigma), PL_OK);
    char ss[32], ts[32];
    snprintf(ss, sizeof ss, "%.17g", sigma);
    snprintf(ts, sizeof ts, "%.17g", ceil(3.0 * sigma) / sigma);
    double *want = reference("gauss", img, w, h, ss, ts);
    double top = 0.0;
    for (size_t i = 0; i < (size_t)w * h; i++)
        if (isfinite(img[i]))
            top = fmax(top, fabs(img[i]));
    for (size_t i = 0; i < (size_t)w * h; i++) {
        if (isnan(want[i])) {
            if (!isnan(got[i]))
                fail_msg("blur %ux%u sigma %g: pixel %zu should have no data", w, h, sigma, i);
            continue;
        }
        if (!(fabs(got[i] - want[i]) <= 1e-5 * top))
            fail_msg("blur %ux%u sigma %g: pixel %zu is %.9g, scipy %.9g", w, h, sigma, i,
                     got[i], want[i]);
    }
    free(want);
    free(got);
}

static void test_filter__gauss_matches_scipy_gaussian_filter(void **state)
{
    (void)state;
    float *img = texture(61, 47, 0.5, 1);
    check_gauss(img, 61, 47, 1.0);
    check_gauss(img, 61, 47, 1.5);
    check_gauss(img, 61, 47, 2.3);
    check_gauss(img, 5, 4, 1.5); /* every tap near an edge */
    free(img);
    /* holes in one row and in one column: each pass alone renormalises
     * over the taps on data, as normalised convolution does */
    float *row = texture(80, 1, 0.5, 2), *col = texture(1, 70, 0.5, 3);
    row[0] = row[7] = row[8] = row[40] = NAN;
    row[79] = INFINITY;
    col[3] = col[4] = col[5] = col[69] = NAN;
    check_gauss(row, 80, 1, 1.5);
    check_gauss(col, 1, 70, 2.0);
    free(row);
    free(col);
}

/* In two dimensions a hole stays a hole, a pixel more than the blur's
 * reach from any hole is what it is without holes (to float rounding: the
 * columns a hole touches are summed in double), and a constant image
 * with holes stays constant. */
static void test_filter__gauss_keeps_holes_out_of_the_rest(void **state)
{
    (void)state;
    uint32_t w = 50, h = 40;
    double sigma = 1.2;
    int rad = (int)ceil(3.0 * sigma);
    float *img = texture(w, h, 0.3, 4), *holed = malloc((size_t)w * h * sizeof *holed);
    assert_non_null(holed);
    memcpy(holed, img, (size_t)w * h * sizeof *img);
    for (uint32_t y = 10; y < 14; y++)
        for (uint32_t x = 20; x < 23; x++)
            holed[(size_t)y * w + x] = NAN;
    float *a, *b;
    assert_int_equal(pl_filter__gauss(&a, img, w, h, sigma), PL_OK);
    assert_int_equal(pl_filter__gauss(&b, holed, w, h, sigma), PL_OK);
    for (uint32_t y = 0; y < h; y++)
        for (uint32_t x = 0; x < w; x++) {
            size_t i = (size_t)y * w + x;
            if (isnan(holed[i]))
                assert_true(isnan(b[i]));
            else if ((int)x < 20 - rad || (int)x >= 23 + rad || (int)y < 10 - rad
                     || (int)y >= 14 + rad)
                tu_assert_close(b[i], a[i], 1e-5, "far from the hole");
            else
                assert_true(isfinite(b[i]));
        }
    for (size_t i = 0; i < (size_t)w * h; i++)
        holed[i] = isnan(holed[i]) ? NAN : 2.5f;
    free(a);
    assert_int_equal(pl_filter__gauss(&a, holed, w, h, sigma), PL_OK);
    for (size_t i = 0; i < (size_t)w * h; i++)
        if (!isnan(holed[i]))
            tu_assert_close(a[i], 2.5, 1e-6, "constant");
    free(a);
    free(b);
    free(img);
    free(holed);
}

/* ---- median ---------------------------------------------------------------- */

/* Against scipy.ndimage.median_filter (Debian's python3-scipy) where the
 * window lies inside the image, and against numpy.nanmedian of the window
 * cut to the image everywhere, holes included; within 1e-6 of the largest
 * value (numpy averages an even count's middle pair in float64). */
static void check_median(const float *img, uint32_t w, uint32_t h, unsigned k, int full)
{
    float *got;
    assert_int_equal(pl_filter__median(&got, img, w, h, k), PL_OK);
    char ks[8];
    snprintf(ks, sizeof ks, "%u", k);
    double top = 0.0;
    for (size_t i = 0; i < (size_t)w * h; i++)
        if (isfinite(img[i]))
            top = fmax(top, fabs(img[i]));
    uint32_t r = k / 2;
    if (full) {
        double *want = reference("median", img, w, h, ks, NULL);
        for (uint32_t y = r; y + r < h; y++)
            for (uint32_t x = r; x + r < w; x++) {
                size_t i = (size_t)y * w + x;
                if (!(fabs(got[i] - want[i]) <= 1e-6 * top))
                    fail_msg("median %u: pixel (%u, %u) is %.9g, scipy %.9g", k, x, y, got[i],
                             want[i]);
            }
        free(want);
    }
    double *want = reference("nanmedian", img, w, h, ks, NULL);
    for (size_t i = 0; i < (size_t)w * h; i++) {
        if (isnan(want[i])) {
            assert_false(isfinite(got[i]));
            continue;
        }
        if (!(fabs(got[i] - want[i]) <= 1e-6 * top))
            fail_msg("median %u: pixel %zu is %.9g, numpy.nanmedian %.9g", k, i, got[i], want[i]);
    }
    free(want);
    free(got);
}

static void test_filter__median_matches_scipy_and_numpy(void **state)
{
    (void)state;
    float *img = texture(37, 29, 4.0, 5);
    check_median(img, 37, 29, 1, 1);
    check_median(img, 37, 29, 3, 1);
    check_median(img, 37, 29, 5, 1);
    check_median(img, 37, 29, 7, 1); /* 49 values: by selection */
    /* holes: a block, scattered pixels, a whole row */
    uint32_t s = 9;
    for (uint32_t y = 3; y < 7; y++)
        for (uint32_t x = 10; x < 15; x++)
            img[(size_t)y * 37 + x] = NAN;
    for (int n = 0; n < 60; n++)
        img[lcg(&s) % (37 * 29)] = NAN;
    for (uint32_t x = 0; x < 37; x++)
        img[20 * 37 + x] = NAN;
    check_median(img, 37, 29, 3, 0);
    check_median(img, 37, 29, 5, 0);
    check_median(img, 37, 29, 9, 0);
    free(img);
}

/* ---- despeckle ------------------------------------------------------------- */

/*
 * Planted dead (low) and hot (high) pixels on noisy texture with a step
 * edge, a one-pixel line and a hole: the impulses, and only they, take
 * their neighbours' median; the edge, the line, the hole and every other
 * pixel keep their values bit for bit.
 */
static void test_filter__despeckle_removes_impulses_and_keeps_edges(void **state)
{
    (void)state;
    uint32_t w = 64, h = 48;
    size_t np = (size_t)w * h;
    float *img = texture(w, h, 0.05, 6);
    for (uint32_t y = 0; y < h; y++)
        for (uint32_t x = 0; x < w; x++) {
            size_t i = (size_t)y * w + x;
            if (x >= 40)
                img[i] += 20.0f; /* step edge */
            if (y == 30)
                img[i] += 15.0f; /* bright line */
            if (x == 12 && y < 20)
                img[i] -= 15.0f; /* dark line */
        }
    for (uint32_t y = 5; y < 8; y++)
        for (uint32_t x = 50; x < 53; x++)
            img[(size_t)y * w + x] = NAN;
    const uint32_t spots[][2] = { { 5, 5 }, { 25, 10 }, { 45, 20 }, { 60, 40 },
                                  { 0, 0 }, { 63, 47 }, { 53, 6 }, { 30, 44 } };
    size_t nspots = sizeof spots / sizeof spots[0];
    float *planted = malloc(np * sizeof *planted);
    assert_non_null(planted);
    memcpy(planted, img, np * sizeof *img);
    for (size_t k = 0; k < nspots; k++) {
        size_t i = (size_t)spots[k][1] * w + spots[k][0];
        planted[i] = k % 2 ? 500.0f : -300.0f;
    }
    float *got;
    assert_int_equal(pl_filter__despeckle(&got, planted, w, h), PL_OK);
    for (size_t i = 0; i < np; i++) {
        int spot = 0;
        for (size_t k = 0; k < nspots; k++)
            spot |= i == (size_t)spots[k][1] * w + spots[k][0];
        if (!spot) {
            tu_assert_same_float(got[i], planted[i], "untouched pixel", i);
            continue;
        }
        /* the median of the finite 8-neighbours, computed here */
        uint32_t x = (uint32_t)(i % w), y = (uint32_t)(i / w);
        float v[8];
        int n = 0;
        for (int dy = -1; dy <= 1; dy++)
            for (int dx = -1; dx <= 1; dx++) {
                long xx = (long)x + dx, yy = (long)y + dy;
                if ((dx || dy) && xx >= 0 && yy >= 0 && xx < (long)w && yy < (long)h
                    && isfinite(planted[(size_t)yy * w + (size_t)xx]))
                    v[n++] = planted[(size_t)yy * w + (size_t)xx];
            }
        tu_assert_same_float(got[i], pl_filter__median_small(v, n), "replaced impulse", i);
        /* the texture changes by less than 1.8 a pixel (its gradient) */
        tu_assert_close(got[i], img[i], 2.0, "replaced impulse near its true value");
    }
    /* an image of texture alone is left as it is */
    free(got);
    assert_int_equal(pl_filter__despeckle(&got, img, w, h), PL_OK);
    assert_memory_equal(got, img, np * sizeof *img);
    free(got);
    free(img);
    free(planted);
}

/* ---- order statistics --------------------------------------------------------- */

static int cmp_f(const void *a, const void *b)
{
    float x = *(const float *)a, y = *(const float *)b;
    return (x > y) - (x < y);
}

static int cmp_d(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* Selection and medians agree with a full sort (the C library's qsort),
 * on distinct values, many ties and a single value. */
static void test_filter__order_statistics_match_a_sort(void **state)
{
    (void)state;
    const size_t sizes[] = { 1, 2, 3, 8, 9, 100, 1001 };
    uint32_t s = 11;
    for (size_t t = 0; t < sizeof sizes / sizeof sizes[0]; t++)
        for (int ties = 0; ties < 2; ties++) {
            size_t n = sizes[t];
            float *f = malloc(n * sizeof *f), *fs = malloc(n * sizeof *fs),
                  *fw = malloc(n * sizeof *fw);
            double *d = malloc(n * sizeof *d), *ds = malloc(n * sizeof *ds);
            assert_true(f && fs && fw && d && ds);
            for (size_t i = 0; i < n; i++) {
                f[i] = ties ? (float)(lcg(&s) % 4) : (float)noise(&s);
                d[i] = f[i];
            }
            memcpy(fs, f, n * sizeof *f);
            memcpy(ds, d, n * sizeof *d);
            qsort(fs, n, sizeof *fs, cmp_f);
            qsort(ds, n, sizeof *ds, cmp_d);
            for (size_t k = 0; k < n; k += n / 7 + 1) {
                memcpy(fw, f, n * sizeof *f);
                assert_true(pl_filter__select_float(fw, n, k) == fs[k]);
                for (size_t i = 0; i < n; i++)
                    assert_true(i < k ? fw[i] <= fs[k] : i > k ? fw[i] >= fs[k] : fw[i] == fs[k]);
                double *dw = malloc(n * sizeof *dw);
                assert_non_null(dw);
                memcpy(dw, d, n * sizeof *d);
                assert_true(pl_filter__select_double(dw, n, k) == ds[k]);
                free(dw);
            }
            float fmed = n % 2 ? fs[n / 2] : 0.5f * (fs[n / 2 - 1] + fs[n / 2]);
            double dmed = n % 2 ? ds[n / 2] : 0.5 * (ds[n / 2 - 1] + ds[n / 2]);
            memcpy(fw, f, n * sizeof *f);
            assert_true(pl_filter__median_float(fw, n) == fmed);
            memcpy(ds, d, n * sizeof *d);
            assert_true(pl_filter__median_double(ds, n) == dmed);
            if (n <= 32) {
                memcpy(fw, f, n * sizeof *f);
                assert_true(pl_filter__median_small(fw, (int)n) == fmed);
            }
            free(f);
            free(fs);
            free(fw);
            free(d);
            free(ds);
        }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_filter__gauss_matches_scipy_gaussian_filter),
        cmocka_unit_test(test_filter__gauss_keeps_holes_out_of_the_rest),
        cmocka_unit_test(test_filter__median_matches_scipy_and_numpy),
        cmocka_unit_test(test_filter__despeckle_removes_impulses_and_keeps_edges),
        cmocka_unit_test(test_filter__order_statistics_match_a_sort),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
