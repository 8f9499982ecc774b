/*
 * detect_int.h - the pieces of detection (plyledger/detect.h) that the
 * tests and benchmarks reach one by one; never installed.
 *
 * Images are w x h, row-major. Labels are uint32: 0 for none, 1 .. n.
 */
#ifndef PLYLEDGER_DETECT_INT_H
#define PLYLEDGER_DETECT_INT_H

#include "plyledger/detect.h"

#include <stddef.h>
#include <stdint.h>

/* ---- labelling (detect_label.c) ----------------------------------------- */

/*
 * 8-connected components of the non-zero pixels of `mask` into `labels`
 * (w * h values; 0 where the mask is 0), numbered 1 .. *count in the
 * order of each component's first pixel in rows from the top, left to
 * right. Two passes with union-find over provisional labels: linear in
 * the pixels. PL_OK or PL_ENOMEM (labels then undefined).
 */
int pl_detect__label(uint32_t *labels, uint32_t *count, const uint8_t *mask, uint32_t w,
                     uint32_t h);

/*
 * Hysteresis on a signal: the 8-connected components of the pixels with
 * signal >= low (NaN never) that hold a pixel with signal >= high and at
 * least min_pixels pixels, numbered as pl_detect__label() numbers them,
 * into `labels`; [out] count, and [out] dropped the components with a
 * seed that were too small. PL_OK or PL_ENOMEM.
 */
int pl_detect__hysteresis(uint32_t *labels, uint32_t *count, uint64_t *dropped,
                          const float *signal, uint32_t w, uint32_t h, double low,
                          double high, uint64_t min_pixels);

/* ---- measures (detect_measure.c) ----------------------------------------- */

/* The sums of one region from one pass over the pixels. Positions are
 * taken relative to the region's first pixel (ref_col, ref_row) so that
 * the second moments keep their precision far from the origin. */
typedef struct pl_detect__sums {
    uint64_t n;                   /* pixels */
    uint32_t ref_col, ref_row;    /* its first pixel */
    uint32_t col0, row0, col1, row1; /* bounding box, inclusive */
    double sc, sr;                /* sums of col - ref_col, row - ref_row */
    double scc, srr, scr;         /* and of their products */
    double sum;                   /* sum of the signal */
    float peak;                   /* largest signal (-inf when none) */
    uint32_t peak_col, peak_row;  /* where (the first such pixel) */
} pl_detect__sums;

/*
 * One pass over labels (w * h, values 0 .. nlabels) accumulating each
 * region's sums into sums[0 .. nlabels) (sums[k - 1] for label k), the
 * signal (may be NULL: sum 0, peak -inf) entering sum and peak. Labels
 * above nlabels are ignored.
 */
void pl_detect__accumulate(pl_detect__sums *sums, uint32_t nlabels, const uint32_t *labels,
                           const float *signal, uint32_t w, uint32_t h);

/* The unweighted centroid of a region: [out] col, row (NaN when empty). */
void pl_detect__centroid(const pl_detect__sums *s, double *col, double *row);

/*
 * Second central moments of a region's positions scaled by pitches
 * (1, 1 for pixels): [out] major, minor axis lengths (4 sqrt of the
 * covariance's eigenvalues, as skimage.measure.regionprops) and the
 * major axis' orientation in degrees from +col toward +row, (-90, 90].
 * NaN for an empty region.
 */
void pl_detect__axes(const pl_detect__sums *s, double pu, double pv, double *major,
                     double *minor, double *orientation_deg);

/*
 * skimage.measure.regionprops' perimeter of every region at once into
 * perim[0 .. nlabels): Benkrid and Crookes' weights over each region's
 * 4-connected inner border. Linear in the pixels. PL_OK or PL_ENOMEM.
 */
int pl_detect__perimeter(double *perim, uint32_t nlabels, const uint32_t *labels, uint32_t w,
                         uint32_t h);

/*
 * The outer boundary of the 8-connected part of region `label` that holds
 * its first pixel (col, row), which must be the region's first pixel in
 * rows from the top, as chain code text (plyledger/detect.h). [out]
 * *outline malloc'd. PL_OK or PL_ENOMEM.
 */
int pl_detect__outline(char **outline, const uint32_t *labels, uint32_t w, uint32_t h,
                       uint32_t label, uint32_t col, uint32_t row);

/*
 * The half-maximum lobe of region `label`: the pixels of the region
 * 8-connected to (peak_col, peak_row) through region pixels whose signal
 * is >= half; their count. `stack` and `seen` are caller scratch of w * h
 * entries (seen all zero on the first call; the call leaves its pixels
 * marked with `label`, so one array serves every region).
 */
uint64_t pl_detect__half_max(const uint32_t *labels, const float *signal, uint32_t w,
                             uint32_t h, uint32_t label, uint32_t peak_col, uint32_t peak_row,
                             float half, uint32_t *seen, uint32_t *stack);

/* ---- background and noise (detect.c) -------------------------------------- */

/*
 * The max/median background of `v` (NaN: no data): at each pixel the
 * largest median over line windows of len[0] pixels along the row, len[1]
 * down the column, len[2] along the diagonal (+col, +row) and len[3] the
 * anti-diagonal (+col, -row), windows shifted inward at the ends of their
 * line to keep their length, only values with data counted and three
 * quarters of a window's length needed. NaN where no window has enough; a pixel
 * without data gets NaN. [out] out, w * h values (caller's). PL_OK or
 * PL_ENOMEM.
 */
int pl_detect__line_median(float *out, const float *v, uint32_t w, uint32_t h,
                           const uint32_t len[4]);

/*
 * The high-pass noise estimate of `v` (see plyledger/detect.h): [out]
 * sigma and [out] count, the residuals used (sigma NaN when fewer than
 * PL_DETECT_MIN_NOISE_PIXELS). PL_OK or PL_ENOMEM.
 */
int pl_detect__noise_highpass(double *sigma, uint64_t *count, const float *v, uint32_t w,
                              uint32_t h);

#endif
