/*
 * plyledger/plot.h - two-dimensional data plots drawn as images.
 *
 * A plot is the picture an engineer reads an indication's history from:
 * its area against flight cycles, say, with the measured points and their
 * uncertainty, a fitted line, the band around it, and the criteria limit
 * the area must stay under. The caller describes it in a pl_plot (what to
 * draw, never how it is stored) and pl_plot_render() draws it into a
 * pl_image (plyledger/render.h) that pl_image_save_png() can write.
 *
 * A plot holds series: each is n (x, y) pairs drawn in one colour as
 * markers (optionally with vertical error bars), as a solid line or as a
 * dashed line. A pair with a non-finite x or y is left out; a line breaks
 * there. Everything is clipped to the plot area, the rectangle inside the
 * axes.
 *
 * Layout, on a white background with dark text in the built-in 5x7 font
 * (pl_image_text()): the title centred on top; the y axis label written
 * horizontally above the y axis (the font does not turn); the plot area
 * with light grey grid lines at the ticks; the dark y axis on its left and
 * x axis along its bottom, with outward ticks and their values; the x axis
 * label centred below the x values. A legend box in the top-left corner of
 * the plot area lists the named series, each with a sample of its style.
 * The limit line, when there is one, runs dashed in red across the plot
 * area, its label above its right end (below, when there is no room above).
 *
 * Axis ranges left NaN come from the data and widen to whole ticks (see
 * pl_plot_render()); the ticks are the "nice" numbers of Heckbert's loose
 * labelling, steps of 1, 2 or 5 times a power of ten (P. S. Heckbert, 1990,
 * "Nice numbers for graph labels", Graphics Gems, pp. 61-63). Tick values
 * are written compactly: no trailing zeros, and in exponent form (2e6,
 * 5e-4) on an axis whose largest tick is 1e6 or more in size, or below
 * 1e-3; otherwise in full (28000, 0.25). A value whose label would crowd
 * its neighbour's is left unlabelled, every other (or every k-th) tick
 * keeping its value.
 *
 * The pl_plot and its series are read, never changed, and not kept after
 * the call returns. The image belongs to the caller (pl_image_free()). The
 * same plot always gives the same pixels. Every function here may be called
 * from several threads at once.
 */
#ifndef PLYLEDGER_PLOT_H
#define PLYLEDGER_PLOT_H

#include "plyledger/common.h"
#include "plyledger/render.h"

#include <math.h>
#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

/** How a series is drawn. */
typedef enum pl_plot_style {
    PL_PLOT_POINTS = 0, /**< filled square markers, 5 x 5 pixels at text scale 1 (5 s x 5 s
                             at scale s), with optional vertical error bars */
    PL_PLOT_LINE = 1,   /**< a solid polyline through the finite points, in order, 2 s
                             pixels wide */
    PL_PLOT_DASHED = 2, /**< the same polyline, dashed (8 s on, 5 s off along its length) */
} pl_plot_style;

/** One series of a plot. Its arrays are read during the call only. */
typedef struct pl_plot_series {
    const char *name;     /**< legend text (printable ASCII); NULL or "": not in the legend */
    size_t n;             /**< number of points */
    const double *x;      /**< n x values; a point with a non-finite x or y is skipped (a
                               line breaks there) */
    const double *y;      /**< n y values */
    const double *yerr;   /**< NULL, or n half-lengths of vertical error bars, drawn for
                               PL_PLOT_POINTS only; a non-finite or non-positive one: no
                               bar */
    pl_plot_style style;  /**< how the series is drawn */
    unsigned char rgb[3]; /**< its colour */
} pl_plot_series;

/** A plot. Initialise with PL_PLOT_INIT, then fill in what is needed. */
typedef struct pl_plot {
    unsigned version;       /**< PL_PLOT_VERSION */
    const char *title;      /**< one line above the plot (printable ASCII), or NULL; also
                                 the image's title (PNG "Title" text) */
    const char *x_label;    /**< the x axis's quantity and unit, e.g. "flight cycles", or
                                 NULL */
    const char *y_label;    /**< the y axis's, e.g. "area (mm2)", drawn horizontally above
                                 the y axis, or NULL */
    double xmin;            /**< left end of the x axis; NaN: from the data */
    double xmax;            /**< right end; NaN: from the data */
    double ymin;            /**< bottom of the y axis; NaN: from the data */
    double ymax;            /**< top; NaN: from the data */
    size_t nseries;         /**< number of series */
    const pl_plot_series *series; /**< nseries series, drawn in order (the last on top) */
    double hline;           /**< y of the horizontal reference line (the criteria limit),
                                 dashed in red across the plot area; NaN: none */
    const char *hline_label; /**< text at the line's right end (printable ASCII), or NULL */
    uint32_t width;         /**< image width in pixels, 200..4096; 0: 720 */
    uint32_t height;        /**< image height in pixels, 150..4096; 0: 440 */
    unsigned text_scale;    /**< image pixels per font pixel, 0..PL_PLOT_MAX_TEXT_SCALE: the
                                 title is drawn at twice this, all other text, markers and
                                 line widths at it; 0: 1 */
} pl_plot;

/** The version of pl_plot this header describes. */
#define PL_PLOT_VERSION 1
/** Largest text_scale accepted. */
#define PL_PLOT_MAX_TEXT_SCALE 8u
/** Default image size. */
#define PL_PLOT_DEFAULT_WIDTH 720u
#define PL_PLOT_DEFAULT_HEIGHT 440u
/** Smallest and largest image sides accepted. */
#define PL_PLOT_MIN_WIDTH 200u
#define PL_PLOT_MIN_HEIGHT 150u
#define PL_PLOT_MAX_SIDE 4096u
#define PL_PLOT_INIT \
    { PL_PLOT_VERSION, NULL, NULL, NULL, NAN, NAN, NAN, NAN, 0, NULL, NAN, NULL, 0, 0, 0 }

/**
 * Draw a plot (see the introduction for the layout).
 *
 * An axis end left NaN comes from the data: the finite x (or y) values of
 * every series' finite points, the ends of their error bars (y) and the
 * limit line (y). The data's span gets a margin of 5 % at each automatic
 * end, except that the margin never takes an end across zero that the data
 * do not cross (areas and cycles stay >= 0); an automatic end then widens to
 * the nearest tick outward (Heckbert's loose labelling). A given end stays
 * where it is. When all the values are equal (a single point, say) the
 * span is +-5 % around the value (+-1 around 0) before that; without any
 * data an axis runs 0..1. An automatic end that would fall on the wrong
 * side of a given one is put 10 % of the given end's size (1 for 0) beyond
 * it.
 *
 * The x axis asks for about width / 64 ticks (3..15) and the y axis for
 * about height / 40 (3..15), through the same computation as
 * pl_plot_ticks().
 *
 * @param[out] out  the image (RGB, width x height); free with pl_image_free()
 * @param plot  the plot (not NULL)
 * @return PL_OK; PL_EINVAL, the message naming the field: a version other
 *         than PL_PLOT_VERSION, series NULL with nseries > 0, a series with
 *         n > 0 and x or y NULL, an unknown style, width or height outside
 *         the accepted sides, text_scale above PL_PLOT_MAX_TEXT_SCALE or
 *         leaving no room for the plot area, an infinite axis end or hline,
 *         xmin >= xmax or ymin >= ymax when both are given, a text that is
 *         not printable ASCII, data too wide or too narrow for ticks to be
 *         found (a span beyond the range of doubles, or under about 1e-300);
 *         PL_ENOMEM. Without any data the axes are drawn all the same.
 */
PL_EXPORT int pl_plot_render(pl_image **out, const pl_plot *plot, pl_err *err);

/**
 * The nice ticks inside [lo, hi] for about `target` ticks, by Heckbert's
 * loose labelling: the step is nice(nice(hi - lo) / (target - 1)), where
 * the inner nice() rounds a span up to 1, 2, 5 or 10 times a power of ten
 * and the outer one rounds to the nearest of them (below 1.5: 1, below 3:
 * 2, below 7: 5, else 10). The ticks are the multiples of the step from
 * [out] first (the smallest >= lo) on, [out] count of them (the last <=
 * hi; 0 when no multiple falls inside); tick i is first + i * step.
 * Heckbert's graph range, floor(lo / step) step .. ceil(hi / step) step,
 * is what an automatic axis of pl_plot_render() spans. A ratio within 1e-9
 * of an integer counts as that integer (0.3 / 0.1 is 3).
 * @param[out] first, step, count  as above (not NULL)
 * @return PL_OK; PL_EINVAL (lo or hi not finite, lo >= hi, target outside
 *         2..1000, or a span so wide or narrow that the ticks cannot be
 *         counted in doubles: then the outputs are 0).
 */
PL_EXPORT int pl_plot_ticks(double lo, double hi, int target, double *first, double *step,
                            int *count);

/**
 * Where the data point (x, y) falls in the image pl_plot_render() draws for
 * this plot, its automatic ranges resolved as there: [out] col (from the
 * left) and [out] row (from the top), in pixels, not rounded. The point's
 * marker is centred on the pixel (floor(col + 0.5), floor(row + 0.5)), and
 * lines pass through it. The axis ends xmin and xmax fall on the first and
 * last columns of the plot area, ymax and ymin on its first and last rows;
 * a point outside the ranges gets a place outside the plot area.
 * @param[out] col, row  the pixel position (not NULL)
 * @return PL_OK; PL_EINVAL (the plot is one pl_plot_render() refuses, with
 *         its message, or x or y is not finite).
 */
PL_EXPORT int pl_plot_locate(double *col, double *row, const pl_plot *plot, double x, double y,
                             pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
