/*
 * fft_int.h - the library's Fourier transforms, over kissfft (the only
 * file that calls kissfft is fft.c); never installed.
 *
 * Real input, complex output over the Hermitian half, as numpy.fft.rfft
 * and numpy.fft.rfft2 lay it out: a row of n reals gives n / 2 + 1 bins;
 * an h x w image gives h rows of w / 2 + 1 bins, row k the frequency k / h
 * (numpy.fft.fftfreq's order), column l the frequency l / w. Transforms
 * are unnormalised both ways (the inverse of the forward gives the input
 * times the number of values).
 *
 * A plan is made once for a size and reused; it holds kissfft's states
 * and scratch, so one plan serves one call at a time.
 */
#ifndef PLYLEDGER_FFT_INT_H
#define PLYLEDGER_FFT_INT_H

#include <stdint.h>

/* A complex value, laid out as kissfft's kiss_fft_cpx (fft.c checks). */
typedef struct pl_fft__cpx {
    float r, i;
} pl_fft__cpx;

/* ---- one row of reals -------------------------------------------------- */

typedef struct pl_fft__rfft pl_fft__rfft;

/* A plan for rows of n reals, n even (kiss_fftr's requirement). [out]
 * *out. PL_OK, PL_EINVAL (n odd or 0), PL_ENOMEM. */
int pl_fft__rfft_new(pl_fft__rfft **out, uint32_t n);

/* NULL is accepted. */
void pl_fft__rfft_free(pl_fft__rfft *plan);

/* in: n reals; out: n / 2 + 1 bins. */
void pl_fft__rfft_forward(pl_fft__rfft *plan, const float *in, pl_fft__cpx *out);

/* ---- an image of reals ------------------------------------------------- */

typedef struct pl_fft__rfft2 pl_fft__rfft2;

/*
 * A plan for h x w images, any sizes: real FFTs along the rows (kiss_fftr
 * when w is even, a complex kiss_fft when it is odd), then complex FFTs
 * down the columns, on up to `threads` threads (pl_threads__for(): rows
 * and blocks of columns are independent, so the result does not depend
 * on the count). kissfft's own n-dimensional real transform is not used:
 * it failed on 512 x 640 images. [out] *out. PL_OK, PL_EINVAL (a side
 * of 0), PL_ENOMEM.
 */
int pl_fft__rfft2_new(pl_fft__rfft2 **out, uint32_t h, uint32_t w, unsigned threads);

/* NULL is accepted. */
void pl_fft__rfft2_free(pl_fft__rfft2 *plan);

/* h x w reals -> h x (w / 2 + 1) bins. */
void pl_fft__rfft2_forward(pl_fft__rfft2 *plan, const float *in, pl_fft__cpx *spec);

/* h x (w / 2 + 1) bins of a real image's transform (overwritten) -> h x w
 * reals, times h w. */
void pl_fft__rfft2_inverse(pl_fft__rfft2 *plan, pl_fft__cpx *spec, float *out);

#endif
