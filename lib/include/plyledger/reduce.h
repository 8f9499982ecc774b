/*
 * plyledger/reduce.h - turning a flash-thermography sequence into maps.
 *
 * After a flash, every pixel of the site sees a cooling curve: the surface
 * temperature rise dT(t) over the cold surface. Defects (delaminations,
 * disbonds) block the heat flowing inward, so the curve above them departs
 * from the sound area's at a time that grows with their depth. The
 * reduction turns each pixel's curve into a handful of numbers, and each
 * number into one channel of a pl_map:
 *
 *  - Cold reference: the mean of the pre-flash frames, per pixel; every
 *    later frame is taken as the rise above it. Frames that already hold
 *    the rise (a sequence whose "cold_reference" is "subtracted", see
 *    plyledger/seq.h) have no pre-flash frame, and nothing is subtracted.
 *  - Log-spaced samples: `samples` bins with log-spaced edges between a
 *    start and an end time after the flash; each bin holds the mean rise
 *    of the frames inside it, its time is the mean of their ln t. Bins
 *    without a frame are dropped for every pixel.
 *  - Thermographic signal reconstruction (Shepard, Lhota, Rubadeux, Wang
 *    and Ahmed 2003, "Reconstruction and enhancement of active thermographic
 *    image sequences", Optical Engineering 42(5)): per pixel, a polynomial of
 *    degree `degree` in x = (ln t - centre) / scale, fitted by least squares
 *    to ln dT. The centre and scale put the samples on [-1, 1] so that the
 *    fit is well conditioned; every pixel shares one design matrix, whose
 *    pseudo-inverse (Householder QR) is computed once. From the
 *    coefficients, analytically: the reconstructed rise, the first and
 *    second log-derivatives d ln dT / d ln t and d2 ln dT / d ln t^2.
 *  - Time of the peak second log-derivative t*. The interior maxima of the
 *    fitted second log-derivative d2 (a maximum on the first or last sample
 *    does not count) are found from the sign changes of the third
 *    derivative on a grid of 63 intervals. By default
 *    (PL_PEAK_FIRST_SIGNIFICANT) t* is the earliest of them that is
 *    significant: its value at least `peak_min_d2`, its signal-to-noise
 *    ratio (value over noise) at least `peak_min_snr` and at least
 *    PL_REDUCE_PEAK_LOBE_RATIO times the largest ratio among the pixel's
 *    maxima of value at least `peak_min_d2`. The noise is the standard
 *    deviation of the fitted d2 at that time propagated from the samples'
 *    own: a sample, the mean of n frames of rise R, has ln noise sigma / (R
 *    sqrt(n)), sigma the per-frame temperature noise, which is estimated
 *    from the pixel's residuals (so misfit counts as noise). The last
 *    condition rejects the ringing of the polynomial around a strong
 *    reflector: a sharp peak (a flat-bottom defect) leaves early side
 *    lobes of a third of its value but a tenth of its ratio. Heat meets the
 *    shallowest reflector first, and a partial reflector (a thin air gap)
 *    gives a smaller peak than the back wall's, so the earliest
 *    significant peak is the defect; where no reflector lies inside the
 *    window, noise and the fit leave only maxima that are small or not
 *    above their noise, and t* is NaN. The thresholds were chosen by
 *    measurement on simulated sound laminate and delaminations (see
 *    PL_REDUCE_DEFAULT_PEAK_MIN_D2). PL_PEAK_LARGEST keeps the largest
 *    positive interior maximum instead, without thresholds. The chosen
 *    maximum is refined by safeguarded Newton steps; its time and value
 *    are the "time-of-peak-d2" and peak "log-derivative-2" channels and
 *    give the depth (all three NaN where no maximum qualifies). For an
 *    adiabatic slab of thickness L and through-thickness diffusivity
 *    alpha, the exact series peaks at t* = L^2/(pi alpha) (checked in the
 *    tests), so depth L = sqrt(pi alpha t*). A partial reflector peaks
 *    earlier than a perfect one at its depth: with a 25 um air gap the
 *    depth reads about 12 % shallow (measured).
 *  - A second depth estimator fits the adiabatic finite-slab solution
 *    (Carslaw and Jaeger 1959, "Conduction of heat in solids", 2nd ed.,
 *    section 3.3) to each pixel's samples: ln dT = a + ln F(alpha t / L^2),
 *    with a solved in closed form and ln L by a grid search and golden
 *    section; a thickness found at the end of its search range is NaN.
 *  - Contrast against a sound reference curve: the mean rise of a named
 *    region, or automatically, per sample, the median over the valid pixels
 *    of every s-th row, s the smallest stride that keeps them at most 16384
 *    (valid: every log-spaced and uniform sample holds a number), robust
 *    while defects cover less than half the site. The reference curve is
 *    fitted like a pixel; contrast is computed between reconstructed
 *    curves: absolute dT - dT_ref, normalised dT / dT_ref - 1, and the peak
 *    absolute contrast over the sample times (refined by a parabola
 *    through its neighbours) with its time.
 *  - Pulse phase (Maldague and Marinetti 1996, "Pulse phase infrared
 *    thermography", J. Appl. Phys. 79(5)): the curve from the flash to a
 *    truncation time is resampled uniformly by averaging the frames inside
 *    `phase_samples` equal bins (so memory does not grow with the frame
 *    count; a bin without a frame is interpolated linearly between its
 *    neighbours), and transformed: at few frequencies (at most 2 log2 M)
 *    by the direct sum over the M samples, which then costs less than a
 *    whole FFT, else by a real FFT (kissfft); the parameters name the one
 *    used, and both equal numpy.fft.rfft (see the tests). Phase is
 *    arg F_k (numpy.fft.rfft's convention), amplitude 2 |F_k| / M, at the
 *    frequencies f_k = k / t_trunc, k = 1..phase_frequencies; phase
 *    contrast is the phase minus the reference curve's, wrapped to
 *    (-pi, pi]. At its own harmonics the DFT of a truncated record does not
 *    see the constant the curve settles to, so its phase contrast is that
 *    of the slab's transform without its plateau term (see the tests).
 *
 * Masking. NaN frame values (saturated or dead pixels) never enter a
 * number: a bin holding a NaN value, or whose mean rise is not positive,
 * is dropped for that pixel alone, and the pixel is fitted on its
 * remaining samples by its own least-squares solve. A pixel left with fewer
 * than max(degree + 2, half the samples) samples, or without a valid
 * pre-flash value, is masked: NaN in every channel derived from the fit.
 * Phase channels are NaN where any uniform bin holds a NaN. The counts are
 * reported in the parameters and in pl_reduce_stats.
 *
 * Streaming. A pl_reducer is created for one sequence's frame times and
 * fed its frames in increasing order (pl_reducer_frame()); it keeps only
 * the per-pixel bins (samples + phase_samples floats a pixel) and a few
 * frame-sized buffers, so memory does not depend on the number of frames.
 * Frames the reduction does not need may be skipped
 * (pl_reducer_frame_needed()). pl_reducer_finish() fits every pixel and
 * hands out the map and a JSON record of every parameter used;
 * pl_reducer_free() releases the reducer. pl_reduce_sequence() does all of
 * this for a sequence opened with pl_seq_open().
 *
 * Threads. The work is shared by `threads` threads (0: one per online
 * processor): the caller's and threads - 1 workers, which take blocks of
 * pixels as they come free; while frames stream in, the caller reads the
 * next frames while the workers accumulate the previous ones, then joins
 * them. Each pixel is computed the same way whoever takes it, so results
 * are bit-for-bit independent of the thread count (and of the processor's
 * vector instructions: the AVX2 versions of the inner loops perform the
 * same operations). The progress callback is called only from the thread
 * that calls pl_reducer_frame() / pl_reducer_finish().
 *
 * Output map. Channels, in this order (quantity, unit, label):
 *   for each chosen time t, as selected by `time_products`:
 *     "temperature-rise" K (reconstructed dT; a free quantity),
 *     "temperature-contrast" K, "normalised-contrast" 1,
 *     "log-derivative-1" 1, "log-derivative-2" 1          label "t=0.5 s"
 *   "time-of-peak-d2" s and "log-derivative-2" 1 (its value)  label "peak"
 *   "depth" mm when a diffusivity is given        label "peak d2" / "slab fit"
 *   "temperature-contrast" K and "time-of-peak-contrast" s (a free
 *     quantity)                                                label "peak"
 *   for each frequency: "phase" rad, "amplitude" K, "phase-contrast" rad
 *                                                         label "f=0.1 Hz"
 * The pitch is NaN (the caller knows it) and the placement is the default
 * of pl_map_new().
 */
#ifndef PLYLEDGER_REDUCE_H
#define PLYLEDGER_REDUCE_H

#include "plyledger/common.h"
#include "plyledger/map.h"
#include "plyledger/seq.h"

#include <math.h>

#ifdef __cplusplus
extern "C" {
#endif

/** Default number of log-spaced samples. */
#define PL_REDUCE_DEFAULT_SAMPLES 64u
/** Default polynomial degree, chosen by measurement (see the tests). */
#define PL_REDUCE_DEFAULT_DEGREE 10u
/** Default start of the fit window, s after the flash (measured). */
#define PL_REDUCE_DEFAULT_START_S 0.05
/** Default end of the fit window, s after the flash (measured). */
#define PL_REDUCE_DEFAULT_END_S 20.0
/** Default number of pulse-phase frequencies. */
#define PL_REDUCE_DEFAULT_FREQUENCIES 4u
/** Default number of uniform samples for pulse phase. */
#define PL_REDUCE_DEFAULT_PHASE_SAMPLES 64u

/** Least value of a significant maximum of the second log-derivative, and
 * least ratio of it to its noise (measured on simulated sound laminate and
 * delaminations; the table is in tests/test_reduce.c above
 * test_reduce__no_depth_on_sound_laminate). */
#define PL_REDUCE_DEFAULT_PEAK_MIN_D2 0.04
#define PL_REDUCE_DEFAULT_PEAK_MIN_SNR 6.0
/** A significant maximum's signal-to-noise ratio is at least this share of
 * the pixel's largest (measured with the thresholds above). */
#define PL_REDUCE_PEAK_LOBE_RATIO 0.3

/** Limits of the options. */
#define PL_REDUCE_MIN_DEGREE 2u
#define PL_REDUCE_MAX_DEGREE 15u
#define PL_REDUCE_MAX_SAMPLES 1024u
#define PL_REDUCE_MAX_TIMES 32u
#define PL_REDUCE_MAX_PHASE_SAMPLES 65536u

/** Products at each chosen time (bits of pl_reduce_options.time_products). */
#define PL_REDUCE_AT_RISE 0x01u       /**< reconstructed rise dT, K */
#define PL_REDUCE_AT_CONTRAST 0x02u   /**< dT - dT_ref, K */
#define PL_REDUCE_AT_NORMALISED 0x04u /**< dT / dT_ref - 1 */
#define PL_REDUCE_AT_D1 0x08u         /**< d ln dT / d ln t */
#define PL_REDUCE_AT_D2 0x10u         /**< d2 ln dT / d ln t^2 */
#define PL_REDUCE_AT_ALL 0x1fu

/** Which interior maximum of the second log-derivative gives t*. */
typedef enum pl_peak_rule {
    PL_PEAK_FIRST_SIGNIFICANT = 0, /**< the earliest maximum whose value reaches
                                        peak_min_d2 and whose ratio to its noise
                                        reaches peak_min_snr and
                                        PL_REDUCE_PEAK_LOBE_RATIO of the pixel's
                                        largest */
    PL_PEAK_LARGEST = 1,           /**< the largest positive maximum (no thresholds) */
} pl_peak_rule;

/** How depth is estimated (needs a diffusivity). */
typedef enum pl_depth_method {
    PL_DEPTH_PEAK_D2 = 0,  /**< L = sqrt(pi alpha t*), t* the peak second log-derivative */
    PL_DEPTH_SLAB_FIT = 1, /**< least-squares fit of the adiabatic finite slab */
    PL_DEPTH_BOTH = 2,     /**< both, as two "depth" channels */
} pl_depth_method;

/** Options of a reduction. Initialise with PL_REDUCE_OPTIONS_INIT. */
typedef struct pl_reduce_options {
    unsigned version;          /**< PL_REDUCE_OPTIONS_VERSION */
    double start_s;            /**< fit window start, s after the flash; NaN:
                                    PL_REDUCE_DEFAULT_START_S. Raised to the
                                    first frame after the flash. */
    double end_s;              /**< fit window end; NaN: PL_REDUCE_DEFAULT_END_S.
                                    Lowered to the last frame. */
    uint32_t samples;          /**< log-spaced bins, degree + 2 ..
                                    PL_REDUCE_MAX_SAMPLES */
    uint32_t degree;           /**< polynomial degree, 2 .. PL_REDUCE_MAX_DEGREE */
    const double *times_s;     /**< times (s after the flash, inside the
                                    window) of the time maps; copied */
    uint32_t ntimes;           /**< entries of times_s, <= PL_REDUCE_MAX_TIMES */
    unsigned time_products;    /**< PL_REDUCE_AT_* bits; 0 means all */
    double diffusivity_mm2_s;  /**< through-thickness diffusivity; NaN: no depth */
    pl_depth_method depth_method; /**< default PL_DEPTH_PEAK_D2 */
    uint32_t ref_x, ref_y;     /**< sound reference region: first column, row */
    uint32_t ref_w, ref_h;     /**< its size; 0 (either): the automatic median */
    uint32_t phase_frequencies; /**< pulse-phase frequencies; 0: no phase maps */
    uint32_t phase_samples;    /**< uniform bins, even, > 2 * phase_frequencies */
    double phase_end_s;        /**< truncation time; NaN: the fit window's end */
    uint32_t threads;          /**< threads, the caller's included; 0: one per
                                    online processor */
    pl_progress_fn progress;   /**< may be NULL */
    void *progress_data;       /**< passed to progress */
    pl_peak_rule peak_rule;    /**< default PL_PEAK_FIRST_SIGNIFICANT */
    double peak_min_d2;        /**< least value of a significant maximum of d2 (per
                                    (ln t)^2, >= 0); NaN:
                                    PL_REDUCE_DEFAULT_PEAK_MIN_D2 */
    double peak_min_snr;       /**< least ratio of that value to its noise (>= 0);
                                    NaN: PL_REDUCE_DEFAULT_PEAK_MIN_SNR */
} pl_reduce_options;

#define PL_REDUCE_OPTIONS_VERSION 1
#define PL_REDUCE_OPTIONS_INIT                                                        \
    { PL_REDUCE_OPTIONS_VERSION, NAN, NAN, PL_REDUCE_DEFAULT_SAMPLES,                 \
      PL_REDUCE_DEFAULT_DEGREE, NULL, 0, 0, NAN, PL_DEPTH_PEAK_D2, 0, 0, 0, 0,        \
      PL_REDUCE_DEFAULT_FREQUENCIES, PL_REDUCE_DEFAULT_PHASE_SAMPLES, NAN, 0, NULL, NULL, \
      PL_PEAK_FIRST_SIGNIFICANT, NAN, NAN }

/** Counts of a finished reduction. */
typedef struct pl_reduce_stats {
    uint32_t frames_used;       /**< frames that entered the reduction */
    uint32_t samples_used;      /**< log-spaced samples holding frames */
    uint64_t saturated_values;  /**< saturated frame values the reader reported
                                     (pl_reduce_sequence() only, else 0) */
    uint32_t pixels_masked;     /**< pixels without a fit: NaN in fit channels */
    uint32_t pixels_partial;    /**< pixels fitted on a subset of the samples */
    uint32_t pixels_no_phase;   /**< pixels with NaN phase channels */
    uint32_t reference_pixels;  /**< pixels that made the reference curve */
} pl_reduce_stats;

typedef struct pl_reducer pl_reducer;

/**
 * Create a reducer for a sequence of `nframes` frames of `width` x `height`
 * pixels.
 * @param[out] out   free with pl_reducer_free()
 * @param times      every frame's time in s relative to the flash
 *                   (increasing; copied), as pl_seq_times() gives them
 * @param preflash   the first `preflash` frames make the cold reference; 0
 *                   when the frames already hold the rise (nothing is
 *                   subtracted; no frame may then come before the flash)
 * @param opts       options, or NULL for PL_REDUCE_OPTIONS_INIT
 * @return PL_OK; PL_EINVAL (a zero or too large size, times not finite or
 *         not increasing, no frame after the flash, preflash 0 with frames
 *         before the flash, a bad option, fewer
 *         than degree + 2 log-spaced samples holding frames, a reference
 *         region outside the image, unknown options version); PL_ERANGE (a
 *         map time outside the fit window, a truncation time after the last
 *         frame); PL_ENOMEM (also when a thread cannot be started).
 */
PL_EXPORT int pl_reducer_new(pl_reducer **out, uint32_t width, uint32_t height,
                             const double *times, uint32_t nframes, uint32_t preflash,
                             const pl_reduce_options *opts, pl_err *err);

/** Release a reducer and its threads; NULL is accepted. */
PL_EXPORT void pl_reducer_free(pl_reducer *r);

/**
 * Whether frame `index` enters the reduction (1) or may be skipped (0):
 * the pre-flash frames, those inside the fit window and those between the
 * flash and the pulse-phase truncation are needed. 0 for an index out of
 * range.
 */
PL_EXPORT int pl_reducer_frame_needed(const pl_reducer *r, uint32_t index);

/**
 * Feed one frame. Frames come in increasing order of index; every needed
 * frame must come, a frame that is not needed is ignored. May call the
 * progress callback.
 * @param r       the reducer
 * @param index   the frame's index in the sequence (< nframes)
 * @param kelvin  width * height temperatures in kelvin, row-major, NaN for
 *                saturated or dead pixels; copied before the call returns
 * @return PL_OK; PL_EINVAL (index out of range or not after the previous
 *         one, a needed frame skipped, the reducer already finished);
 *         PL_ECANCELED (the progress callback asked to stop). A refused
 *         index (out of range, not after the previous one, after the
 *         finish) leaves the reducer as it was; after any other failure
 *         it stops: further calls, and pl_reducer_finish(), return the
 *         same code.
 */
PL_EXPORT int pl_reducer_frame(pl_reducer *r, uint32_t index, const float *kelvin,
                               pl_err *err);

/**
 * Fit every pixel and make the maps. Call once, after the last needed frame.
 * @param r                     the reducer (its counts are then available
 *                              from pl_reducer_stats())
 * @param[out] map              the reduced map; free with pl_map_free()
 * @param[out] parameters_json  (may be NULL) a JSON object recording the
 *                              software version, every option used, the
 *                              window, bin edges and sample times, the
 *                              degree, frames used, the reference, the
 *                              channels and the pixel counts; free with
 *                              free()
 * @return PL_OK; PL_EINVAL (needed frames missing, called twice, no pixel
 *         with a valid curve for the reference, a reference region without
 *         valid pixels); PL_ECANCELED; PL_ENOMEM; or the code of an earlier
 *         failure. On failure nothing is handed out and the reducer stops.
 */
PL_EXPORT int pl_reducer_finish(pl_reducer *r, pl_map **map, char **parameters_json,
                                pl_err *err);

/** The counts of a finished reduction into [out] stats (zeros before). */
PL_EXPORT void pl_reducer_stats(const pl_reducer *r, pl_reduce_stats *stats);

/**
 * Reduce a whole sequence: create a reducer for its times and pre-flash
 * frames, read the frames it needs one by one with pl_seq_read_frame(),
 * finish. Memory stays bounded whatever the sequence's length.
 * @param[out] map              free with pl_map_free()
 * @param[out] parameters_json  may be NULL; free with free(); as
 *                              pl_reducer_finish()'s, plus the sequence's
 *                              "acquisition" object and "saturated_values"
 *                              (the count the reader reported)
 * @param seq    an open sequence; frames outside the window are not read
 * @param opts   options, or NULL for PL_REDUCE_OPTIONS_INIT
 * @param[out] stats  may be NULL
 * @return as pl_reducer_new(), pl_reducer_finish() and pl_seq_read_frame().
 */
PL_EXPORT int pl_reduce_sequence(pl_map **map, char **parameters_json, pl_seq *seq,
                                 const pl_reduce_options *opts, pl_reduce_stats *stats,
                                 pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
