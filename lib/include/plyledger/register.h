/*
 * plyledger/register.h - laying a reinspection map exactly onto its
 * baseline's grid, and saying how well that worked.
 *
 * A robot returns to a site years later with a few millimetres and up to a
 * few degrees of placement error. Registration finds the rigid transform
 * (shift, rotation, and scale where the pitches differ) that carries the
 * current map onto the baseline map, resamples the current map onto the
 * baseline grid, and scores the result.
 *
 * Transform. Positions are in baseline pixels (col x, row y; pixel centres
 * at integers). With c the centre of the baseline grid, ((W-1)/2, (H-1)/2),
 * the transform says that what the current map shows at its pixel p_c lies
 * on the baseline at
 *
 *     p_b = c + s R(theta) (p_c - c) + d
 *
 * R(theta) turns from +x (columns, u) toward +y (rows, v); d = (dx, dy) in
 * baseline pixels, s the scale. pl_register_maps() starts from the nominal
 * transform the two maps' recorded placements imply (and first resamples a
 * current map of another pitch to the baseline's), so only the residual
 * placement error is searched; the result is the total transform.
 *
 * Method.
 *  - Translation: phase correlation (Kuglin and Hines 1975, "The phase
 *    correlation image alignment method") of the windowed maps: the
 *    normalised cross-power spectrum by FFT (kissfft), its inverse, the
 *    integer peak, then sub-pixel refinement by the upsampled
 *    matrix-multiply DFT around the peak (Guizar-Sicairos, Thurman and
 *    Fienup 2008, "Efficient subpixel image registration algorithms",
 *    Optics Letters 33(2)), to 1/upsample pixel over a 1.5 x 1.5 pixel
 *    neighbourhood. Under a window, a side whose length has a prime factor
 *    above 5 is zero-padded to the next 2-3-5-smooth length; without one
 *    the image's own length is kept (circular shifts stay exact) unless a
 *    prime factor above 100 would make the FFT slow. With rotation off,
 *    this peak is the answer: on small, smooth, noisy maps it can lie a
 *    pixel or more off (the whitened spectrum weighs the noise-only
 *    frequencies like the others), which the default (rotation on)
 *    corrects.
 *  - Rotation and scale: the Fourier-magnitude spectra (invariant to
 *    shift), high-pass filtered, resampled onto log-polar grids, whose
 *    phase correlation gives rotation and log-scale (Reddy and Chatterji
 *    1996, "An FFT-based technique for translation, rotation, and
 *    scale-invariant image registration", IEEE Trans. Image Processing
 *    5(8)). The magnitudes cannot tell theta from theta + 180 degrees, and
 *    on small maps they resolve angles of a degree or so poorly, so three
 *    candidates are tried: theta, theta + 180 and no rotation. For each,
 *    the current map is de-rotated and the translation found as above;
 *    every candidate whose translation peak reaches 0.7 of the best (and
 *    whose turn is within max_rotation_deg) is then refined, and the one
 *    with the highest correlation after refinement kept. A last start, no
 *    residual at all, is refined coarse to fine (the maps smoothed by a
 *    Gaussian of 3 pixels, then as they are) and replaces it when it
 *    correlates better by more than 0.01: after the nominal transform the
 *    truth lies near no residual, while on smooth, nearly symmetric
 *    texture the correlation peak can lie pixels away.
 *  - Refinement (rotation on): Gauss-Newton minimisation over the overlap
 *    of the squared difference between the baseline and the resampled
 *    current map, with a gain and an offset, in rotation, shift (and
 *    scale when asked for), on both maps smoothed by a Gaussian of one
 *    pixel (Lucas and Kanade 1981, "An iterative image registration
 *    technique with an application to stereo vision"; Baker and Matthews
 *    2004, "Lucas-Kanade 20 years on", IJCV 56(3)). It starts from the
 *    candidate's phase-correlation estimate and is kept only when it
 *    converges, moves the corners by at most a tenth of the smaller side
 *    and does not lower the correlation, the correlations before and after
 *    being taken over the same pixels (the overlap both share), with a
 *    slack of a hundredth of what the start lacks of a perfect match so
 *    that a step onto the truth is not refused for float rounding. It
 *    takes the log-polar stage's residual of a few hundredths of a degree
 *    (photographs) down to the noise: on 640 x 512 photographs rotated by
 *    0.25 to 2 degrees the shift is found within 0.002 px and the angle
 *    within 0.001 degree (tests/test_register.c).
 *  - Large maps (rotation on, 256 pixels a side or more): the search
 *    above runs first on both maps halved (2 x 2 means), down to 128
 *    pixels a side; at full size the half-size answer, doubled, is
 *    checked against the de-rotated phase-correlation peak (refined as
 *    above, and taken instead when it lies within half a pixel of
 *    corner movement) and refined once. Smaller maps are searched at
 *    their own size only.
 *  - Resampling: bicubic convolution (Keys 1981, "Cubic convolution
 *    interpolation for digital image processing", a = -0.5, with Keys'
 *    boundary extension f(-1) = 3 f(0) - 3 f(1) + f(2)) or bilinear;
 *    pixels whose source falls outside the current map, or whose kernel
 *    gives weight to a NaN, are NaN. A current map finer than the baseline
 *    is smoothed first (a Gaussian of sqrt(1/s^2 - 1) / 2 current pixels)
 *    so that it does not alias.
 *  - Quality: the normalised cross-correlation (Pearson r) of the two maps
 *    over the overlap after alignment, taken after isolated dead or hot
 *    pixels are replaced and both are smoothed by a Gaussian of 1 pixel (so
 *    that it measures the agreement of structure, not the loudness of camera
 *    noise), and the peak-to-sidelobe ratio of
 *    the phase-correlation surface (peak minus the sidelobe mean, over the
 *    sidelobe standard deviation, the sidelobe being the surface outside an
 *    11 x 11 window around the peak) of the translation search kept (a
 *    sidelobe flatter than the float32 rounding of the peak, as an exact
 *    match or an exact circular shift gives, is taken at that rounding
 *    level: a perfect match scores about 1 / FLT_EPSILON, 8.4e6). Below
 *    either limit the registration is refused: the result says so and why,
 *    and no aligned map is made. The default limits come from a
 *    measurement (see PL_REGISTER_DEFAULT_MIN_NCC).
 *
 * Inspection maps. Dead and hot pixels (fixed in the camera, so they do
 * not move with the part) are replaced by their neighbours' median before
 * the search; edges and lines are never touched. When the first answer
 * correlates below 0.95, the search runs again on both maps smoothed by a
 * Gaussian of 1.5 pixels (smooth texture under noise, as thick skins give,
 * is otherwise whitened into noise), refined on the unsmoothed maps, and
 * replaces the first answer only when it correlates clearly better.
 *
 * Work on images of 32768 pixels or more is shared by one thread per
 * online processor (at most 256); results do not depend on their number.
 *
 * No-data (NaN) pixels are filled with the map's mean before the FFTs (so
 * they carry no structure); they never enter the refinement or the
 * quality figures.
 *
 * Ownership: results are plain structs; aligned maps come from
 * pl_map_new() and go back with pl_map_free().
 */
#ifndef PLYLEDGER_REGISTER_H
#define PLYLEDGER_REGISTER_H

#include "plyledger/common.h"
#include "plyledger/map.h"

#include <math.h>

#ifdef __cplusplus
extern "C" {
#endif

/** Windows applied before the FFTs. */
typedef enum pl_window {
    PL_WINDOW_HANN = 0,   /**< separable Hann (default) */
    PL_WINDOW_TUKEY = 1,  /**< separable Tukey with `tukey_alpha` */
    PL_WINDOW_NONE = 2,   /**< rectangular (for circular test pairs) */
} pl_window;

/** Resampling kernels. */
typedef enum pl_interp {
    PL_INTERP_BICUBIC = 0,  /**< Keys cubic convolution, a = -0.5 (default) */
    PL_INTERP_BILINEAR = 1,
} pl_interp;

/** A rigid transform (see the introduction). */
typedef struct pl_transform {
    double dx, dy;        /**< shift, baseline pixels */
    double rotation_deg;  /**< theta, degrees, from +x toward +y */
    double scale;         /**< s; 1 for equal pitches */
} pl_transform;

/** The identity transform. */
#define PL_TRANSFORM_IDENTITY { 0.0, 0.0, 0.0, 1.0 }

/** Options. Initialise with PL_REGISTER_OPTIONS_INIT. */
typedef struct pl_register_options {
    unsigned version;         /**< PL_REGISTER_OPTIONS_VERSION */
    unsigned upsample;        /**< sub-pixel refinement factor, 1 to
                                   PL_REGISTER_MAX_UPSAMPLE (default 100) */
    int rotation;             /**< 1: estimate rotation (and scale) first (default) */
    int scale;                /**< 1: estimate scale too (default 0: pitches are known) */
    pl_window window;         /**< default PL_WINDOW_HANN */
    double tukey_alpha;       /**< for PL_WINDOW_TUKEY (default 0.25) */
    pl_interp interp;         /**< default PL_INTERP_BICUBIC */
    double min_ncc;           /**< refuse below this correlation (default by measurement) */
    double min_psr;           /**< refuse below this peak-to-sidelobe ratio (idem) */
    double max_rotation_deg;  /**< largest residual rotation believed (default
                                   PL_REGISTER_DEFAULT_MAX_ROTATION; 180: any). A
                                   site's substructure is often nearly symmetric
                                   under a half turn (a stringer crossing a
                                   frame), which the maps alone cannot tell
                                   from the true placement */
} pl_register_options;

#define PL_REGISTER_OPTIONS_VERSION 1
/** Largest sub-pixel refinement factor (upsample) accepted. */
#define PL_REGISTER_MAX_UPSAMPLE 1000u
/**
 * Default quality limits, chosen by measurement (tests/test_register.c,
 * above test_register__quality_limits_separate_pairs, has the table).
 * With rotation on, over genuine pairs (photographs shifted by up to 8 px
 * and rotated by up to 5 degrees; simulated 96 x 72 phase maps with the
 * sample fleet's placement errors; both with white noise down to a
 * signal-to-noise ratio of 3) the raw-pixel correlation after alignment
 * was at least 0.90 and the PSR at least 4.9; over pairs without common
 * content (noise against a photograph or a map, two unrelated photographs,
 * two noise fields) the correlation was at most 0.44 while the PSR reached
 * 12.6 (periodic photographs) and 8.2 (noise). The correlation reported
 * (smoothed, see Quality above) gives 0.99 on genuine pairs at SNR 3 and
 * at most 0.33 without common content. The correlation separates them:
 * its limit sits between, low enough for real pairs whose levels differ
 * more than these. The PSR does not: its limit sits below every
 * genuine pair, to refuse only a surface without a peak.
 */
#define PL_REGISTER_DEFAULT_MIN_NCC 0.6
#define PL_REGISTER_DEFAULT_MIN_PSR 4.5
/** Default bound on the residual rotation, degrees: robots misplace by a
 * few degrees at most (common practice), never by a half turn. */
#define PL_REGISTER_DEFAULT_MAX_ROTATION 45.0
#define PL_REGISTER_OPTIONS_INIT                                                    \
    { PL_REGISTER_OPTIONS_VERSION, 100, 1, 0, PL_WINDOW_HANN, 0.25, PL_INTERP_BICUBIC, \
      PL_REGISTER_DEFAULT_MIN_NCC, PL_REGISTER_DEFAULT_MIN_PSR, PL_REGISTER_DEFAULT_MAX_ROTATION }

/** What a registration found. */
typedef struct pl_register_result {
    pl_transform transform;     /**< total: nominal plus residual */
    pl_transform nominal;       /**< from the recorded placements */
    double shift_u_mm;          /**< transform.dx in mm along the baseline's u */
    double shift_v_mm;          /**< transform.dy in mm along v */
    double ncc;                 /**< correlation over the overlap after alignment */
    double psr;                 /**< peak-to-sidelobe ratio of the translation search */
    double overlap_fraction;    /**< baseline pixels with data in both maps / all */
    double overlap_mm2;         /**< that overlap in mm^2 */
    int refused;                /**< 1 when a quality limit refused it */
    char reason[256];           /**< why, when refused (one line) */
} pl_register_result;

/**
 * Register two same-size float images (row-major, NaN for no data): find
 * the transform carrying `moving` onto `fixed` as in the introduction (with
 * a zero nominal transform). Quality limits are applied (see `refused`).
 * Without a pitch the figures in mm (shift_u_mm, shift_v_mm, overlap_mm2)
 * are NaN.
 * @param[out] res   the result
 * @param opts       options, or NULL for PL_REGISTER_OPTIONS_INIT
 * @return PL_OK (also when refused: check res->refused), PL_EINVAL (sizes
 *         under 16 x 16 or over PL_MAP_MAX_SIDE, bad options, an image
 *         without data), PL_ENOMEM.
 */
PL_EXPORT int pl_register_images(pl_register_result *res, const float *fixed, const float *moving,
                                 uint32_t width, uint32_t height,
                                 const pl_register_options *opts, pl_err *err);

/**
 * Resample `moving` (mw x mh) onto a fixed grid (fw x fh) through transform
 * `t` ([out] out, fw * fh values, NaN where there is no source), c being
 * the centre of the fixed grid. No smoothing is applied (see
 * pl_register_maps() for maps of finer pitch).
 * @return PL_OK, PL_EINVAL (a zero or too large size, t not finite or its
 *         scale not positive, an unknown interp).
 */
PL_EXPORT int pl_register_resample(float *out, uint32_t fw, uint32_t fh, const float *moving,
                                   uint32_t mw, uint32_t mh, const pl_transform *t,
                                   pl_interp interp, pl_err *err);

/**
 * The channel of each map that pl_register_maps() registers on for
 * `quantity` and `label` (the rule is there), so that a picture or a report
 * shows the same one.
 * @param[out] baseline_channel  its index in `baseline`
 * @param[out] current_channel   its index in `current`
 * @return PL_OK, PL_ENOTFOUND (no such channel in one of the maps).
 */
PL_EXPORT int pl_register_channels(int *baseline_channel, int *current_channel,
                                   const pl_map *baseline, const pl_map *current,
                                   const char *quantity, const char *label, pl_err *err);

/**
 * Register map `current` onto map `baseline` using the channel holding
 * `quantity` with `label` in each (label NULL: the first channel of that
 * quantity; quantity NULL: the default, the first of "phase" then
 * "temperature-contrast" found in both maps (with `label` when given),
 * else, with a label, the first channel of that label, else channel 0).
 * The nominal transform comes from the placements: both in one system,
 * the current map's pixel p_c lies on the part at a point whose
 * projection on the baseline's axes, over the baseline's pitches, is
 * p_b = A p_c + t; A must be a rotation times a scale (its angle, from the
 * baseline's u toward v, is the nominal rotation; the ratio of the
 * pitches its scale). The current map is resampled onto the baseline grid
 * through it and the residual searched as pl_register_images() does; the
 * result is their composition. When not refused and `aligned` is not
 * NULL, every channel of `current` is resampled onto the baseline grid
 * into [out] *aligned (the baseline's size, pitch and placement; current's
 * channels, labels included); free it with pl_map_free().
 * @param opts  options, or NULL for PL_REGISTER_OPTIONS_INIT
 * @return PL_OK (check res->refused), PL_ENOTFOUND (no such channel in one
 *         of the maps), PL_EINVAL (maps not on one part frame: placements
 *         in different systems, not coplanar (normals more than 1 degree
 *         apart, origins more than max(1 mm, 2 pitches) apart along the
 *         normal) or mirrored; a placement unit other than mm, cm, m, in; a
 *         pitch not known; grids that are not similar (the pitches' ratio
 *         along u and v differs); a baseline under 16 x 16; bad options),
 *         PL_ENOMEM.
 */
PL_EXPORT int pl_register_maps(pl_register_result *res, pl_map **aligned,
                               const pl_map *baseline, const pl_map *current,
                               const char *quantity, const char *label,
                               const pl_register_options *opts, pl_err *err);

/**
 * Apply a given transform (a manual registration, say) to every channel of
 * `current`, onto the baseline grid, and score it as pl_register_maps()
 * does (ncc over the overlap; psr is NaN; nothing is refused). The
 * placements need not agree: res->nominal is theirs when they do, NaN
 * otherwise; figures in mm are NaN when the baseline's pitch is not known.
 * @param[out] res      the scores and overlap; transform = *t
 * @param[out] aligned  may be NULL; free with pl_map_free()
 * @return PL_OK, PL_ENOTFOUND, PL_EINVAL (t not finite or its scale not
 *         positive, a bad interp, a map without channels), PL_ENOMEM.
 */
PL_EXPORT int pl_register_apply(pl_register_result *res, pl_map **aligned,
                                const pl_map *baseline, const pl_map *current,
                                const char *quantity, const char *label,
                                const pl_transform *t, pl_interp interp, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
