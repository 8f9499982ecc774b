/*
 * plyledger/detect.h - indications: finding them on one channel of a map,
 * and measuring each one.
 *
 * An indication is a connected region of a map where the channel departs
 * from the sound laminate, in the direction a defect moves it, by clearly
 * more than the noise. pl_detect() finds them and measures them;
 * pl_detect_measure() measures regions a caller already has (the
 * indications of another map carried onto this grid, say). Both hand out a
 * pl_detection, which owns everything in it and goes back with
 * pl_detection_free().
 *
 * The steps, in order:
 *
 *  - Despeckle (default on): dead and hot pixels, which stand alone above
 *    or below all their neighbours, are replaced by the neighbours' median
 *    (the common layer's despeckle). Pixels without data (NaN) stay
 *    without data and never belong to an indication.
 *  - Polarity: pl_quantity_polarity() of the channel's quantity (rises or
 *    falls over a defect; see plyledger/map.h for each quantity and why),
 *    or the one the caller states in the options. A quantity without a
 *    polarity of its own (a free quantity, raw temperature, pulse-phase
 *    amplitude, eddy-current signals) is refused unless one is stated.
 *  - Background b: the level of the sound laminate under each pixel. The
 *    signal compared with the thresholds is s = polarity x (value - b), so
 *    that a defect always makes s positive.
 *      PL_BACKGROUND_LINE_MEDIAN (default): the max/median filter (Arce and
 *      McLoughlin 1987, "Theoretical analysis of the max/median filter",
 *      IEEE Trans. ASSP 35(1)) of polarity x value: at each pixel, the
 *      largest of the medians over four line windows (along the row, the
 *      column and both diagonals) of `background_mm` each, windows shifted
 *      inward at the ends of their line so that they keep their length,
 *      pixels without data left out, and a window counted only where three
 *      quarters of its length hold data (elsewhere the map's median
 *      stands in). An indication narrower than 3/8 of the window along each
 *      line through it covers less than half of every window and stays out
 *      of the background; substructure (a stringer flange, a frame tie:
 *      strips longer than half a window) is followed by the window lying
 *      along it, edges and all, and slow shading (the flash's pattern) by
 *      all of them, so neither is called. The price: an indication wider
 *      than 3/8 of the window is partly taken into the background (sized
 *      smaller, its contrast lower), and one longer than half the window
 *      along a row, a column or a diagonal is taken for substructure there.
 *      A reinspection of a phase quantity laid on its reference's grid
 *      takes the reference's level too (pl_detect_on_reference()), so
 *      that an indication that grew past that width keeps its size.
 *      PL_BACKGROUND_MEDIAN: the median of the channel over the pixels with
 *      data (for maps without shading or substructure).
 *      PL_BACKGROUND_ZERO: b = 0, for values that already are a contrast
 *      against something (a difference of two aligned maps).
 *      Nominal: when `nominal` is given, b = nominal everywhere. Quantities
 *      compared with the site's nominal value (pl_quantity_uses_nominal():
 *      depth, ultrasonic thickness, times of flight and of the peak second
 *      log-derivative) need it: on sound laminate their maps hold the back
 *      wall or no data at all (a thick skin's back wall beyond the
 *      sequence's end leaves scattered depths from noise), so their own
 *      median says nothing. There a pixel also needs s >= nominal_margin x
 *      |nominal| (the depth clearly shallower than nominal), whatever the
 *      noise.
 *  - Noise sigma, in the channel's units, estimated robustly:
 *      by default from a high-pass residual (Immerkaer 1996, "Fast noise
 *      variance estimation", CVIU 64(2)): r = N * v with the 3 x 3 mask
 *      N = [1 -2 1]' [1 -2 1], over the pixels whose whole 3 x 3 window
 *      holds data; sigma = 1.4826 MAD(r) / 6, 6 being the mask's gain for
 *      white noise, so that sigma is the standard deviation of white
 *      Gaussian noise. The mask does not respond to a plane, to shading
 *      along one axis or to straight edges along rows or columns (a
 *      flange's), and indications touch too few residuals to move the
 *      median. At least PL_DETECT_MIN_NOISE_PIXELS residuals are needed;
 *      or, with a sound reference region (noise_w, noise_h > 0), 1.4826
 *      times the median absolute deviation of the signal s over it;
 *      or given by the caller (`noise`).
 *    Where the map has too few residuals (a depth map that is mostly no
 *    data) a quantity compared with nominal goes on with the margin alone
 *    (noise NaN, PL_NOISE_NONE); any other is refused.
 *  - Hysteresis thresholds (Canny 1986, "A computational approach to edge
 *    detection", IEEE PAMI 8(6)): the regions are the 8-connected
 *    components of the pixels with s >= low x sigma that hold at least one
 *    pixel with s >= high x sigma. Labelling is the two-pass union-find
 *    method (Wu, Otoo and Suzuki 2009, "Optimizing two-pass
 *    connected-component labeling algorithms", Pattern Anal. Applic. 12),
 *    linear in the pixels. Regions smaller than min_area_mm2 (pixels x
 *    pitch_u x pitch_v) are dropped; the others are numbered 1, 2, ... in
 *    the order of their first pixel in rows from the top, left to right.
 *
 * Measures of an indication (pl_indication): pixel positions are (col,
 * row), pixel centres at integers; "mm" needs the map's pitch.
 *  - Sizes under two named sizing rules (pl_sizing), each with pixels,
 *    area (pixels x pitch_u x pitch_v, mm^2) and equivalent diameter
 *    (sqrt(4 area / pi)): "threshold", the hysteresis region itself; and
 *    "half-maximum", the pixels of the region 8-connected to the peak
 *    pixel through pixels of the region whose signal is at least half the
 *    peak's (the peak's own lobe: a second lobe of a merged region does not
 *    count).
 *  - Centroid: the mean pixel position (as skimage.measure.regionprops'
 *    centroid), and the part point it maps to through the map's placement
 *    (pl_map_pixel_to_part()).
 *  - Bounding box: first and last column and row, inclusive.
 *  - Principal axes from the second central moments of the pixel
 *    positions (the covariance, population-normalised): the axis lengths
 *    are 4 sqrt(eigenvalue), as skimage.measure.regionprops'
 *    major_axis_length and minor_axis_length; in pixels, and in mm from the
 *    moments of the positions in mm (so unequal pitches are honoured). The
 *    orientation is the major axis' angle from u (columns) toward v (rows)
 *    in the mm frame, in degrees within (-90, 90]; with equal pitches it
 *    is 90 degrees minus regionprops' orientation, wrapped into that range.
 *  - Peak and mean contrast: value - b at the pixel of largest signal, and
 *    the mean of value - b over the region, signed, in the channel's units
 *    (negative for a quantity that falls), and both as multiples of sigma.
 *  - Depth: the median of a given depth channel (unit mm) over the region's
 *    pixels that hold one; NaN when none does or none is given.
 *  - Perimeter: skimage.measure.regionprops' `perimeter` (Benkrid and
 *    Crookes' estimator over the region's 4-connected inner border:
 *    straight runs count 1, diagonal steps sqrt(2), corners (1 + sqrt(2)) /
 *    2), in pixels, and times sqrt(pitch_u pitch_v) in mm.
 *  - Outline: the outer boundary as a Freeman chain code (Freeman 1961, "On
 *    the encoding of arbitrary geometric configurations", IRE Trans. EC-10),
 *    traced by Suzuki and Abe's border following (1985, "Topological
 *    structural analysis of digitized binary images by border following",
 *    CVGIP 30). The text is "COL,ROW:" (the region's first pixel in rows
 *    from the top) followed by one digit per step, 0 to 7: 0 is +col, and
 *    each next digit turns 45 degrees toward -row (2 is -row, "up"; 4 is
 *    -col; 6 is +row). The trace goes round counter-clockwise as the map is
 *    drawn (row 0 at the top) and ends back at the first pixel; a
 *    one-pixel region has no digits. pl_detect_outline_decode() turns it
 *    back into the boundary pixels.
 *
 * Records. pl_detect_options_json() gives the options as used, for the
 * record; pl_indication_json() one indication; pl_detection_json() the
 * whole result (what was compared with what, and every indication).
 *
 * Sizes are in the map's pixels; a map of up to 2^32 - 1 pixels is taken.
 * Work is single-threaded except the background, which shares rows among
 * one thread per online processor (the result does not depend on it).
 */
#ifndef PLYLEDGER_DETECT_H
#define PLYLEDGER_DETECT_H

#include "plyledger/common.h"
#include "plyledger/map.h"

#include <math.h>

#ifdef __cplusplus
extern "C" {
#endif

/** How the sound laminate's level under each pixel is found. */
typedef enum pl_background {
    PL_BACKGROUND_LINE_MEDIAN = 0, /**< max/median of four line windows (default) */
    PL_BACKGROUND_MEDIAN = 1,      /**< the channel's median over the map */
    PL_BACKGROUND_ZERO = 2,        /**< none: the values are already a contrast */
    PL_BACKGROUND_NOMINAL = 3,     /**< the given nominal value (in force whenever
                                        `nominal` is given; choosing it without
                                        one is refused) */
} pl_background;

/** How the noise was found. */
typedef enum pl_noise_method {
    PL_NOISE_HIGH_PASS = 0, /**< MAD of the high-pass residual (default) */
    PL_NOISE_REGION = 1,    /**< MAD of the signal over the sound reference region */
    PL_NOISE_GIVEN = 2,     /**< the caller's `noise` */
    PL_NOISE_NONE = 3,      /**< too few pixels with data; a quantity compared
                                 with nominal goes on with its margin alone */
} pl_noise_method;

/** The two sizing rules recorded with every size. */
typedef enum pl_sizing {
    PL_SIZING_THRESHOLD = 0, /**< "threshold": the hysteresis region */
    PL_SIZING_HALF_MAX = 1,  /**< "half-maximum": the peak's lobe at half its signal */
} pl_sizing;

/** Number of sizing rules (entries of pl_indication.size). */
#define PL_SIZING_COUNT 2

/** Fewest high-pass residuals a noise estimate takes. */
#define PL_DETECT_MIN_NOISE_PIXELS 64u

/**
 * Default thresholds, in multiples of the noise, the smallest area and the
 * background window, chosen by measurement on 112 simulated sites of 2.0
 * to 6.4 mm with substructure, flash non-uniformity and camera noise, half
 * of them with seeded delaminations (tests/bench/detect_study.c; the
 * tables are in tests/bench/README.md): a longer window or a lower seed
 * threshold calls the flash's pattern in temperature contrast and the
 * substructure in phase contrast, a shorter window takes large defects
 * into the background; the smallest area hardly matters between 3 and 12
 * mm^2.
 */
#define PL_DETECT_DEFAULT_HIGH 8.0
#define PL_DETECT_DEFAULT_LOW 3.0
#define PL_DETECT_DEFAULT_MIN_AREA_MM2 6.0
#define PL_DETECT_DEFAULT_BACKGROUND_MM 40.0
/** Default margin of a quantity compared with nominal, a fraction of it
 * (measured as above: at 0.15 the noise's scattered depths of thick sound
 * skins, about 80 % of nominal, are called on one sound site in seven). */
#define PL_DETECT_DEFAULT_NOMINAL_MARGIN 0.25

/** Options of pl_detect() and pl_detect_measure(). Initialise with
 * PL_DETECT_OPTIONS_INIT; NaN in a number means "the default". */
typedef struct pl_detect_options {
    unsigned version;          /**< PL_DETECT_OPTIONS_VERSION */
    double high;               /**< seed threshold, multiples of the noise (> 0) */
    double low;                /**< growth threshold, multiples of the noise
                                    (0 < low <= high) */
    double min_area_mm2;       /**< smallest indication kept, mm^2 (>= 0; needs
                                    the pitch when > 0) */
    int polarity;              /**< 0: the quantity's (pl_quantity_polarity());
                                    PL_POLARITY_RISES or PL_POLARITY_FALLS to
                                    state it */
    double nominal;            /**< the site's nominal value in the channel's
                                    units (the thickness for depth); NaN: none */
    double nominal_margin;     /**< with a nominal: the least signal, as a
                                    fraction of |nominal| ([0, 1)) */
    pl_background background;  /**< default PL_BACKGROUND_LINE_MEDIAN */
    double background_mm;      /**< line window of the line-median background,
                                    mm (> 0; needs the pitch) */
    double noise;              /**< > 0: the noise, channel units; NaN: estimated */
    uint32_t noise_x, noise_y; /**< sound reference region: first column, row */
    uint32_t noise_w, noise_h; /**< its size; 0 (either): the high-pass estimate */
    int despeckle;             /**< 1 (default): replace dead and hot pixels first */
    int depth_channel;         /**< channel (unit mm) whose median inside gives
                                    each indication's depth; -1 (default): none */
} pl_detect_options;

#define PL_DETECT_OPTIONS_VERSION 1
#define PL_DETECT_OPTIONS_INIT                                                        \
    { PL_DETECT_OPTIONS_VERSION, NAN, NAN, NAN, 0, NAN, NAN, PL_BACKGROUND_LINE_MEDIAN, \
      NAN, NAN, 0, 0, 0, 0, 1, -1 }

/** One size of an indication under one sizing rule. */
typedef struct pl_indication_size {
    uint64_t pixels;                /**< pixels counted */
    double area_mm2;                /**< pixels x pitch_u x pitch_v (NaN without pitch) */
    double equivalent_diameter_mm;  /**< sqrt(4 area / pi) */
} pl_indication_size;

/** One indication (see the introduction for every measure). */
typedef struct pl_indication {
    uint32_t label;                  /**< its value in the label image */
    pl_indication_size size[PL_SIZING_COUNT]; /**< by pl_sizing */
    double centroid_col, centroid_row;        /**< mean pixel position */
    double centroid_part[3];         /**< that point on the part (placement's system) */
    uint32_t bbox_col0, bbox_row0;   /**< first column and row */
    uint32_t bbox_col1, bbox_row1;   /**< last column and row (inclusive) */
    double major_axis_px, minor_axis_px; /**< 4 sqrt(eigenvalues), pixels */
    double major_axis_mm, minor_axis_mm; /**< the same from positions in mm */
    double orientation_deg;          /**< major axis from u toward v, (-90, 90] */
    double peak_contrast;            /**< value - background at the peak, channel units */
    double peak_snr;                 /**< the peak's signal over the noise (NaN
                                          without a noise) */
    uint32_t peak_col, peak_row;     /**< the pixel of largest signal */
    double mean_contrast;            /**< mean of value - background */
    double mean_snr;                 /**< mean signal over the noise */
    double depth_mm;                 /**< median of the depth channel inside; NaN */
    uint64_t depth_pixels;           /**< pixels that gave it */
    double perimeter_px;             /**< skimage's perimeter, pixels */
    double perimeter_mm;             /**< times sqrt(pitch_u pitch_v) */
    char *outline;                   /**< the chain code text; owned by the detection */
} pl_indication;

/** The result of pl_detect() or pl_detect_measure(); owns every pointer. */
typedef struct pl_detection {
    uint32_t width, height;          /**< the map's */
    uint32_t channel;                /**< the channel examined */
    char quantity[PL_QUANTITY_SIZE]; /**< its quantity */
    char unit[PL_UNIT_SIZE];         /**< and unit */
    double pitch_u, pitch_v;         /**< the map's pitch (NaN: not known) */
    int polarity;                    /**< in force: PL_POLARITY_RISES or _FALLS */
    int polarity_stated;             /**< 1 when the options stated it */
    pl_background background;        /**< in force */
    double background_level;         /**< median of b over the pixels with data */
    double noise;                    /**< sigma, channel units (NaN: PL_NOISE_NONE) */
    pl_noise_method noise_method;    /**< how it was found */
    uint64_t noise_pixels;           /**< residuals or region pixels it rests on */
    double high_threshold;           /**< on the signal, channel units */
    double low_threshold;            /**< on the signal, channel units */
    uint64_t pixels_with_data;       /**< pixels of the channel holding a number */
    uint64_t regions_below_min_area; /**< hysteresis regions dropped for their size */
    size_t count;                    /**< indications */
    pl_indication *indications;      /**< count entries; indications[k - 1] has label k */
    uint32_t *labels;                /**< width * height, row-major: 0 none, k an
                                          indication */
    float *signal;                   /**< width * height: polarity x (value - b),
                                          NaN without data */
    float *background_map;           /**< width * height: b (NaN without data) */
    int reference_level;             /**< 1: b was taken with a reference
                                          detection's (pl_detect_on_reference()) */
    pl_detect_options options;       /**< as used, defaults filled in */
} pl_detection;

/**
 * Check options (defaults may be left NaN) and say what is wrong.
 * @return PL_OK, PL_EINVAL (unknown version, a value out of its range:
 *         the message names the field).
 */
PL_EXPORT int pl_detect_options_check(const pl_detect_options *opts, pl_err *err);

/**
 * Find and measure the indications of channel `channel` of `map`.
 * @param[out] out  the result; free with pl_detection_free(); NULL on failure
 * @param map       the map (not changed)
 * @param channel   < map->nchannels
 * @param opts      NULL for PL_DETECT_OPTIONS_INIT
 * @return PL_OK (also with no indication: count 0); PL_EINVAL (bad options;
 *         a channel out of range; a quantity without a polarity and none
 *         stated; a quantity compared with nominal and no nominal; a
 *         pitch not known where min_area_mm2 or the line-median background
 *         needs it; a noise region outside the map or without data; too few
 *         pixels with data for a noise estimate; a depth channel out of
 *         range or not in mm); PL_ENOMEM. Messages name the channel and
 *         quantity, or the option.
 */
PL_EXPORT int pl_detect(pl_detection **out, const pl_map *map, uint32_t channel,
                        const pl_detect_options *opts, pl_err *err);

/**
 * Detect on a reinspection map laid on the reference's grid (registered
 * and resampled), taking the sound level with the reference detection's.
 * A line-median background follows an indication that is wider than 3/8
 * of the window (see the introduction): when a disbond grows from 12 to
 * 25 mm between two inspections, the current map's own background rises
 * under it and the growth is undersized (by half on the sample fleet's
 * door-corner disbond). The reference's background was taken while the
 * indication was smaller. So, pixel by pixel, b is the one of the two
 * nearer the sound side of the signal (the lesser where the quantity
 * rises over a defect, the greater where it falls): this map's own line
 * median, or the reference's plus the median over the pixels with data
 * in both of (own - reference), which takes out a change of the whole
 * level between the acquisitions. Everything else is as pl_detect()
 * (the noise is this map's own). A background other than the line median
 * in either detection is used as pl_detect() would (reference_level 0).
 * Take it only for quantities whose sound level is the part's and not the
 * acquisition's (pl_detect_reference_level()): a temperature contrast
 * carries each flash's own pattern, which the reference's level would
 * turn into indications.
 * @param reference  pl_detect() of the reference map's channel of the same
 *                   quantity and unit, on a map of the same size
 * @return as pl_detect(); PL_EINVAL also for a reference of another size,
 *         quantity, unit or polarity.
 */
PL_EXPORT int pl_detect_on_reference(pl_detection **out, const pl_map *map, uint32_t channel,
                                     const pl_detection *reference,
                                     const pl_detect_options *opts, pl_err *err);

/**
 * 1 when a reinspection of `quantity` should be detected with its
 * reference's sound level (pl_detect_on_reference()): phase and
 * phase-contrast, which hardly follow the heating's pattern or the
 * emissivity (Maldague and Marinetti 1996, J. Appl. Phys. 79(5)). 0 for
 * every other quantity (a temperature contrast or log-derivative carries
 * the flash's pattern of that acquisition; an ultrasonic amplitude the
 * couplant and gain of that scan; a quantity compared with nominal has
 * no background of its own).
 */
PL_EXPORT int pl_detect_reference_level(const char *quantity);

/**
 * Measure given regions of channel `channel`: background, signal and noise
 * as pl_detect() finds them, then every region of `labels` (width * height
 * values, row-major, 0 for none, 1 .. max for regions; a region need not be
 * connected, and pixels without data in the channel are left out of it).
 * The result has max entries, indications[k - 1] for label k; a label
 * without pixels gets sizes 0 and NaN measures. The thresholds and
 * min_area_mm2 are not applied (the thresholds are still reported).
 * @param[out] out  free with pl_detection_free()
 * @param labels    copied
 * @return as pl_detect().
 */
PL_EXPORT int pl_detect_measure(pl_detection **out, const pl_map *map, uint32_t channel,
                                const uint32_t *labels, const pl_detect_options *opts,
                                pl_err *err);

/** Release a detection; NULL is accepted. */
PL_EXPORT void pl_detection_free(pl_detection *det);

/**
 * The noise sigma of a channel as pl_detect() would find it (despeckle,
 * background and method as in `opts`).
 * @param[out] noise   sigma in the channel's units (NaN: PL_NOISE_NONE)
 * @param[out] method  may be NULL
 * @return as pl_detect().
 */
PL_EXPORT int pl_detect_noise(double *noise, pl_noise_method *method, const pl_map *map,
                              uint32_t channel, const pl_detect_options *opts, pl_err *err);

/** The name of a sizing rule: "threshold", "half-maximum"; NULL when unknown. */
PL_EXPORT const char *pl_sizing_name(pl_sizing rule);

/** The name of a background: "line-median", "median", "zero", "nominal". */
PL_EXPORT const char *pl_background_name(pl_background b);

/** The name of a noise method: "high-pass", "region", "given", "none". */
PL_EXPORT const char *pl_noise_method_name(pl_noise_method m);

/**
 * The options, defaults filled in, as a JSON object for the record:
 * {"version", "high", "low", "min_area_mm2", "polarity" ("quantity",
 * "rises" or "falls"), "nominal" (null when none), "nominal_margin",
 * "background", "background_mm", "noise" (null: estimated),
 * "noise_region" ([x, y, w, h] or null), "despeckle", "depth_channel"
 * (null: none)}.
 * @param[out] out  malloc'd text; free with free()
 * @return PL_OK, PL_EINVAL (the options pl_detect_options_check() refuses),
 *         PL_ENOMEM.
 */
PL_EXPORT int pl_detect_options_json(char **out, const pl_detect_options *opts, pl_err *err);

/**
 * Indication i (< det->count) as a JSON object: "label"; "sizes", one
 * object per sizing rule {"rule", "pixels", "area_mm2",
 * "equivalent_diameter_mm"}; "centroid_px" [col, row]; "centroid_part"
 * [x, y, z]; "bbox_px" [col0, row0, col1, row1] (inclusive); "axes"
 * {"major_px", "minor_px", "major_mm", "minor_mm", "orientation_deg"};
 * "peak" {"col", "row", "contrast", "snr"}; "mean" {"contrast", "snr"};
 * "unit" (of the contrasts); "depth_mm"; "perimeter_px"; "perimeter_mm";
 * "outline" (the chain code text). A number that is not known (NaN) is
 * null.
 * @param[out] out  malloc'd text; free with free()
 * @return PL_OK, PL_EINVAL (i out of range), PL_ENOMEM.
 */
PL_EXPORT int pl_indication_json(char **out, const pl_detection *det, size_t i, pl_err *err);

/**
 * The whole detection as a JSON object: "channel", "quantity", "unit",
 * "polarity" ("rises" or "falls"), "polarity_stated", "background"
 * {"method", "level"}, "noise" {"sigma", "method", "pixels"},
 * "thresholds" {"high", "low"} (on the signal, channel units),
 * "pixels_with_data", "regions_below_min_area", "options" (as
 * pl_detect_options_json()) and "indications" (as pl_indication_json()).
 * @param[out] out  malloc'd text; free with free()
 * @return PL_OK, PL_ENOMEM.
 */
PL_EXPORT int pl_detection_json(char **out, const pl_detection *det, pl_err *err);

/**
 * Decode an outline text (pl_indication.outline) into the boundary pixels
 * it passes through, in order, starting with the first pixel; the last
 * step's return to it is not repeated.
 * @param[out] points  malloc'd 2 x n values, (col, row) pairs; free with free()
 * @param[out] n       the number of pixels (1 for a one-pixel region)
 * @param outline      the text
 * @return PL_OK, PL_EFORMAT (not "COL,ROW:" and digits 0-7; a step off the
 *         unsigned 32-bit grid), PL_ENOMEM.
 */
PL_EXPORT int pl_detect_outline_decode(uint32_t **points, size_t *n, const char *outline,
                                       pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
