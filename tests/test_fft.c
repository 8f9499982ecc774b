/*
 * test_fft.c - the real FFTs of rows and images (lib/common/fft.c), against
 * numpy.fft and against transforms known in closed form.
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

#include "common/fft_int.h"
#include "common/num_int.h"
#include "plyledger/common.h"
#include "testutil.h"

/* Values in [-1, 1) from a fixed linear congruential sequence. */
static void fill_noise(float *v, size_t n, uint32_t seed)
{
    uint32_t s = seed;
    for (size_t i = 0; i < n; i++) {
        s = s * 1664525u + 1013904223u;
        v[i] = (float)((double)(s >> 8) / 8388608.0 - 1.0);
    }
}

/* Largest |got - want| over n complex values, want as numpy wrote it
 * (real, imaginary pairs). */
static double max_error(const pl_fft__cpx *got, const double *want, size_t n)
{
    double worst = 0.0;
    for (size_t k = 0; k < n; k++)
        worst = fmax(worst, hypot(got[k].r - want[2 * k], got[k].i - want[2 * k + 1]));
    return worst;
}

/* The rfft2 of an h x w image against numpy.fft.rfft2 (Debian's numpy,
 * in float64) on 1 and 3 threads: within 2e-6 of the largest bin, which is
 * float32 rounding over log2(h w) stages; both thread counts alike to the
 * bit. */
static void check_rfft2_against_numpy(uint32_t h, uint32_t w)
{
    size_t n = (size_t)h * w, ns = (size_t)h * (w / 2 + 1);
    float *x = malloc(n * sizeof *x);
    pl_fft__cpx *s1 = malloc(ns * sizeof *s1), *s3 = malloc(ns * sizeof *s3);
    assert_true(x && s1 && s3);
    fill_noise(x, n, h * 31u + w);
    pl_fft__rfft2 *p1, *p3;
    assert_int_equal(pl_fft__rfft2_new(&p1, h, w, 1), PL_OK);
    assert_int_equal(pl_fft__rfft2_new(&p3, h, w, 3), PL_OK);
    pl_fft__rfft2_forward(p1, x, s1);
    pl_fft__rfft2_forward(p3, x, s3);
    assert_memory_equal(s1, s3, ns * sizeof *s1);

    char *dir = tu_tmpdir(), *in = tu_path(dir, "x.f4"), *out = tu_path(dir, "X.f8");
    char hs[16], ws[16];
    snprintf(hs, sizeof hs, "%u", h);
    snprintf(ws, sizeof ws, "%u", w);
    tu_write_f4(in, x, n);
    /* numpy.fft.rfft2 (Debian's python3-numpy) */
    assert_int_equal(tu_python("fft_ref.py", "rfft2", in, hs, ws, out, NULL), 0);
    size_t nw;
    double *want = tu_read_f8(out, &nw);
    assert_int_equal(nw, 2 * ns);
    double peak = 0.0;
    for (size_t k = 0; k < ns; k++)
        peak = fmax(peak, hypot(want[2 * k], want[2 * k + 1]));
    double err = max_error(s1, want, ns);
    if (!(err <= 2e-6 * peak))
        fail_msg("rfft2 %u x %u: error %.3g of a largest bin %.3g", h, w, err, peak);
    free(want);
    free(in);
    free(out);
    tu_rmtree(dir);
    pl_fft__rfft2_free(p1);
    pl_fft__rfft2_free(p3);
    free(x);
    free(s1);
    free(s3);
}

static void test_fft__rfft2_matches_numpy(void **state)
{
    (void)state;
    check_rfft2_against_numpy(64, 96);   /* even width: kiss_fftr rows */
    check_rfft2_against_numpy(37, 51);   /* odd both ways: complex rows */
    check_rfft2_against_numpy(1, 40);    /* one row */
    check_rfft2_against_numpy(45, 1);    /* one column */
    check_rfft2_against_numpy(512, 640); /* a camera frame, where kiss_fftndr failed */
}

/*
 * Closed form: a sampled plane wave cos(2 pi (k0 y / h + l0 x / w)) plus a
 * constant c has, by the geometric series (the sum over a period of
 * exp(2 pi i m j / N) is N for m = 0 mod N, else 0), the transform h w c
 * at bin (0, 0), h w / 2 at (k0, l0) and at (-k0, -l0), and zero
 * elsewhere; with 0 < l0 < w / 2 only (k0, l0) lies in the half spectrum.
 * The inverse gives the image back times h w.
 */
static void test_fft__rfft2_of_a_plane_wave_is_one_bin(void **state)
{
    (void)state;
    const uint32_t sizes[][2] = { { 48, 64 }, { 27, 35 } };
    for (int t = 0; t < 2; t++) {
        uint32_t h = sizes[t][0], w = sizes[t][1], wh = w / 2 + 1, k0 = 5, l0 = 3;
        double c = 0.25;
        size_t n = (size_t)h * w;
        float *x = malloc(n * sizeof *x), *back = malloc(n * sizeof *back);
        pl_fft__cpx *s = malloc((size_t)h * wh * sizeof *s);
        assert_true(x && back && s);
        for (uint32_t y = 0; y < h; y++)
            for (uint32_t i = 0; i < w; i++)
                x[(size_t)y * w + i] =
                    (float)(c + cos(2.0 * M_PI * ((double)k0 * y / h + (double)l0 * i / w)));
        pl_fft__rfft2 *p;
        assert_int_equal(pl_fft__rfft2_new(&p, h, w, 2), PL_OK);
        pl_fft__rfft2_forward(p, x, s);
        double tol = 1e-5 * (double)n;
        for (uint32_t k = 0; k < h; k++)
            for (uint32_t l = 0; l < wh; l++) {
                double wr = 0.0;
                if (k == 0 && l == 0)
                    wr = (double)n * c;
                else if (k == k0 && l == l0)
                    wr = (double)n / 2.0;
                const pl_fft__cpx *z = &s[(size_t)k * wh + l];
                tu_assert_close(z->r, wr, tol, "real part");
                tu_assert_close(z->i, 0.0, tol, "imaginary part");
            }
        pl_fft__rfft2_inverse(p, s, back);
        for (size_t i = 0; i < n; i++)
            tu_assert_close(back[i] / (double)n, x[i], 1e-5, "inverse / (h w)");
        pl_fft__rfft2_free(p);
        free(x);
        free(back);
        free(s);
    }
}

/* The inverse of the forward transform gives noise back times h w, for
 * even and odd widths. */
static void test_fft__rfft2_inverse_undoes_forward(void **state)
{
    (void)state;
    const uint32_t sizes[][2] = { { 40, 30 }, { 33, 17 }, { 16, 2 } };
    for (int t = 0; t < 3; t++) {
        uint32_t h = sizes[t][0], w = sizes[t][1];
        size_t n = (size_t)h * w;
        float *x = malloc(n * sizeof *x), *back = malloc(n * sizeof *back);
        pl_fft__cpx *s = malloc((size_t)h * (w / 2 + 1) * sizeof *s);
        assert_true(x && back && s);
        fill_noise(x, n, 7u + t);
        pl_fft__rfft2 *p;
        assert_int_equal(pl_fft__rfft2_new(&p, h, w, 2), PL_OK);
        pl_fft__rfft2_forward(p, x, s);
        pl_fft__rfft2_inverse(p, s, back);
        for (size_t i = 0; i < n; i++)
            tu_assert_close(back[i] / (double)n, x[i], 1e-5, "inverse / (h w)");
        pl_fft__rfft2_free(p);
        free(x);
        free(back);
        free(s);
    }
}

/* The row transform against numpy.fft.rfft (Debian's python3-numpy, in
 * float64), within 2e-6 of the largest bin; odd and empty lengths are
 * refused. */
static void test_fft__rfft_matches_numpy(void **state)
{
    (void)state;
    const uint32_t lengths[] = { 2, 64, 250, 1000 };
    char *dir = tu_tmpdir(), *in = tu_path(dir, "x.f4"), *out = tu_path(dir, "X.f8");
    for (size_t t = 0; t < sizeof lengths / sizeof lengths[0]; t++) {
        uint32_t n = lengths[t];
        float *x = malloc(n * sizeof *x);
        pl_fft__cpx *z = malloc((n / 2 + 1) * sizeof *z);
        assert_true(x && z);
        fill_noise(x, n, n);
        pl_fft__rfft *p;
        assert_int_equal(pl_fft__rfft_new(&p, n), PL_OK);
        pl_fft__rfft_forward(p, x, z);
        tu_write_f4(in, x, n);
        char ns[16];
        snprintf(ns, sizeof ns, "%u", n);
        /* numpy.fft.rfft (Debian's python3-numpy) */
        assert_int_equal(tu_python("fft_ref.py", "rfft", in, ns, out, NULL), 0);
        size_t nw;
        double *want = tu_read_f8(out, &nw);
        assert_int_equal(nw, 2 * (n / 2 + 1));
        double peak = 0.0;
        for (size_t k = 0; k <= n / 2; k++)
            peak = fmax(peak, hypot(want[2 * k], want[2 * k + 1]));
        double err = max_error(z, want, n / 2 + 1);
        if (!(err <= 2e-6 * peak))
            fail_msg("rfft %u: error %.3g of a largest bin %.3g", n, err, peak);
        free(want);
        pl_fft__rfft_free(p);
        free(x);
        free(z);
    }
    free(in);
    free(out);
    tu_rmtree(dir);
    pl_fft__rfft *p;
    assert_int_equal(pl_fft__rfft_new(&p, 15), PL_EINVAL);
    assert_null(p);
    assert_int_equal(pl_fft__rfft_new(&p, 0), PL_EINVAL);
    pl_fft__rfft2 *q;
    assert_int_equal(pl_fft__rfft2_new(&q, 0, 8, 1), PL_EINVAL);
    assert_null(q);
    pl_fft__rfft_free(NULL);
    pl_fft__rfft2_free(NULL);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_fft__rfft2_matches_numpy),
        cmocka_unit_test(test_fft__rfft2_of_a_plane_wave_is_one_bin),
        cmocka_unit_test(test_fft__rfft2_inverse_undoes_forward),
        cmocka_unit_test(test_fft__rfft_matches_numpy),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
