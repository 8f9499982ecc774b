/*
 * reduce_int.h - reduction internals visible to the tests; never installed.
 */
#ifndef PLYLEDGER_REDUCE_INT_H
#define PLYLEDGER_REDUCE_INT_H

#include "plyledger/reduce.h"

/*
 * The adiabatic slab's front-face response after an instantaneous surface
 * pulse (Carslaw and Jaeger 1959, section 3.3), normalised to its final
 * value: F(u) = 1 + 2 sum_n exp(-n^2 pi^2 u), u = alpha t / L^2, evaluated
 * at v = ln u. Into [out] out: ln F, d ln F / dv and d2 ln F / dv^2 (v is
 * ln t up to a constant, so these are the log-derivatives of the curve).
 * The image form (pi u)^-1/2 (1 + 2 sum_m exp(-m^2 / u)) is used below
 * u = 1/pi, where both series converge alike; each is summed until its
 * terms vanish in double precision.
 */
void pl_reduce__slab(double v, double out[3]);

/*
 * ln and exp of n floats, as the reduction takes them (vectorised series;
 * a few units in the last place). ln: NaN for zero, negative or NaN
 * input, +inf for +inf. exp: 0 below about -87, +inf above 88.
 */
void pl_reduce__log_row(float *out, const float *in, size_t n);
void pl_reduce__exp_row(float *out, const float *in, size_t n);
/* atan2(y[i], x[i]) likewise (signed zeros as atan2()). */
void pl_reduce__atan2_row(float *out, const float *y, const float *x, size_t n);

/*
 * After pl_reducer_finish(): the samples pixel `pixel` was fitted on and
 * its coefficients. Into [out] x (the scaled abscissae (ln t - centre) /
 * scale), [out] z (ln of the mean rise), [out] n (their count; the arrays
 * need room for the requested sample count), [out] coef (degree + 1
 * coefficients, constant first), [out] centre and [out] scale.
 * @return PL_OK, PL_EINVAL (not finished, pixel out of range), PL_ENOMATCH
 *         (the pixel is masked).
 */
int pl_reduce__pixel_fit(const pl_reducer *r, uint32_t pixel, double *x, double *z,
                         uint32_t *n, double *coef, double *centre, double *scale);

/* One interior maximum of a pixel's fitted second log-derivative. */
typedef struct pl_reduce__peak {
    double t_s;        /* its time, s after the flash */
    double d2;         /* d2 ln dT / d ln t^2 there */
    double prominence; /* its prominence, in the same unit */
    double noise;      /* the standard deviation of the fitted d2 there */
} pl_reduce__peak;

/*
 * After pl_reducer_finish(): every interior maximum of pixel `pixel`'s
 * fitted second log-derivative, as the peak search sees them before its
 * rule chooses one (times and values at the secant roots), in order of
 * time, into [out] peaks (room for `cap`), their count into [out] n (all
 * of them, even beyond cap).
 * @return PL_OK, PL_EINVAL (not finished, pixel out of range, degree < 3),
 *         PL_ENOMATCH (the pixel is masked), PL_ENOMEM.
 */
int pl_reduce__pixel_peaks(const pl_reducer *r, uint32_t pixel, pl_reduce__peak *peaks,
                           uint32_t cap, uint32_t *n);

/*
 * After pl_reducer_finish(): the uniform pulse-phase samples of pixel
 * `pixel` (phase_samples floats, mean rise per bin, empty bins
 * interpolated) into [out] out, and [out] dt their spacing in s.
 * @return PL_OK, PL_EINVAL (not finished, no phase, pixel out of range).
 */
int pl_reduce__phase_samples(const pl_reducer *r, uint32_t pixel, float *out, double *dt);

#endif
