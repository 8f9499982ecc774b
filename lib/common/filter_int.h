/*
 * filter_int.h - filters of float images that may lack data (NaN), and
 * the order statistics under them; never installed.
 *
 * Images are w x h floats, row-major. A NaN (or infinite) pixel has no
 * data: it has none in every filter's output either (the blur makes it
 * NaN, the others keep its value), and no filter lets it into a
 * neighbour's value. Each filter returns a new image, malloc'd into *out
 * (NULL on failure), and PL_OK or PL_ENOMEM.
 */
#ifndef PLYLEDGER_FILTER_INT_H
#define PLYLEDGER_FILTER_INT_H

#include <stddef.h>
#include <stdint.h>

/*
 * Separable Gaussian blur of `sigma` pixels (> 0), truncated at
 * ceil(3 sigma) pixels either side. The weights are the sampled Gaussian
 * normalised to sum 1 and, where taps fall outside the image or on pixels
 * without data, renormalised over the taps that remain (normalised
 * convolution, one axis at a time: rows, then columns).
 */
int pl_filter__gauss(float **out, const float *src, uint32_t w, uint32_t h, double sigma);

/* The largest window side pl_filter__median() takes. */
#define PL_FILTER_MEDIAN_MAX_K 15u

/*
 * Median over a k x k window (k odd, 1 to PL_FILTER_MEDIAN_MAX_K)
 * centred on each pixel with data: of the pixels with data in the window
 * clipped to the image, the mean of the two middle values for an even
 * count.
 */
int pl_filter__median(float **out, const float *src, uint32_t w, uint32_t h, unsigned k);

/*
 * Dead and hot pixels replaced by the median of their 8 neighbours:
 * impulses that stand more than a noise-scaled limit above the largest or
 * below the smallest neighbour; edges and lines, which have neighbours on
 * both sides of their value, are never touched (the rule and its sources
 * are in filter.c).
 */
int pl_filter__despeckle(float **out, const float *src, uint32_t w, uint32_t h);

/* ---- order statistics ------------------------------------------------------ */

/* The k-th smallest (from 0) of v[0..n) (n > k, no NaN), reordering v so
 * that smaller values stand before index k and larger ones after it. */
float pl_filter__select_float(float *v, size_t n, size_t k);
double pl_filter__select_double(double *v, size_t n, size_t k);

/* The median of v[0..n) (n > 0, no NaN), reordering v: for an even count
 * the mean of the two middle values. */
float pl_filter__median_float(float *v, size_t n);
double pl_filter__median_double(double *v, size_t n);

/* The same for a few values (n > 0, tens at most), by insertion sort: v
 * ends sorted. */
float pl_filter__median_small(float *v, int n);

#endif
