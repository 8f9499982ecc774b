/*
 * register_int.h - registration internals visible to the tests; never
 * installed.
 */
#ifndef PLYLEDGER_REGISTER_INT_H
#define PLYLEDGER_REGISTER_INT_H

#include "plyledger/register.h"

/* What one phase correlation found. */
typedef struct pl_register__peak {
    double dx, dy;  /* shift carrying moving onto fixed, refined (pixels) */
    int ix, iy;     /* the integer peak of the correlation surface */
    double peak;    /* its value, normalised: 1 for a perfect circular shift */
    double psr;     /* peak-to-sidelobe ratio (see plyledger/register.h) */
} pl_register__peak;

/*
 * Phase correlation of two same-size images (NaN filled with the mean,
 * then windowed): the integer peak, its normalised value, the PSR and the
 * shift refined by the upsampled DFT to 1/upsample pixel (upsample 1: no
 * refinement). moving(q) = fixed(q + d) gives d = (dx, dy).
 * @return PL_OK, PL_EINVAL (an image without data), PL_ENOMEM.
 */
int pl_register__translation(pl_register__peak *out, const float *fixed, const float *moving,
                             uint32_t width, uint32_t height, pl_window window,
                             double tukey_alpha, unsigned upsample, pl_err *err);

/*
 * The log-polar estimate alone (Reddy and Chatterji 1996): rotation in
 * (-90, 90] degrees (the Fourier magnitude does not tell theta from
 * theta + 180) and, when want_scale, the scale (else 1).
 * @return PL_OK, PL_EINVAL, PL_ENOMEM.
 */
int pl_register__logpolar(double *rotation_deg, double *scale, const float *fixed,
                          const float *moving, uint32_t width, uint32_t height,
                          int want_scale, pl_err *err);

/* Keys' cubic convolution kernel, a = -1/2, at offset x. */
double pl_register__keys(double x);

/* The window's n weights (symmetric; Hann and Tukey end on zeros). */
void pl_register__window(double *out, uint32_t n, pl_window kind, double tukey_alpha);

/* The FFT length used for a side of n pixels under a window: n itself
 * when its prime factors are small, else the next 2-3-5-smooth length. */
uint32_t pl_register__fft_length(uint32_t n, pl_window kind);

/*
 * The transform the placements imply (see pl_register_maps()).
 * @return PL_OK, PL_EINVAL (with the reason).
 */
int pl_register__nominal(pl_transform *t, const pl_map *baseline, const pl_map *current,
                         pl_err *err);

#endif
