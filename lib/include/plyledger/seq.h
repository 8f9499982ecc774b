/*
 * plyledger/seq.h - raw flash-thermography sequences: reading them frame by
 * frame, and writing them (the simulator and tests do).
 *
 * A sequence is a stack of infrared frames of one site after a flash,
 * described by a JSON manifest (keys of plyledger's own):
 *
 *   {
 *     "format": "plyledger-sequence-1",
 *     "data": "cube.npy"                      a NumPy cube, frames x rows x cols,
 *                                             uint16 or float32, C order
 *        or { "folder": "frames",             16-bit grayscale PNG frames,
 *             "pattern": "frame-%05d.png",    numbered from "first" (default 0)
 *             "first": 0 },
 *     "width": 640, "height": 512,            optional; checked against the data
 *     "frame_count": 2000,                    optional; checked against the data
 *     "frame_rate_hz": 100.0,                 uniform frames, the first at t = 0 ...
 *     "frame_times_s": [0.0, 0.01, ...],      ... or every frame's time (increasing)
 *     "flash_time_s": 0.05,                   when the flash fired (same clock)
 *     "preflash_frames": 5,                   frames before the flash, for the
 *                                             cold reference (default: every frame
 *                                             with time < flash_time_s)
 *     "cold_reference": "preflash",           "preflash" (default): the mean of the
 *                                             pre-flash frames, subtracted by the
 *                                             reduction; "subtracted": the frames
 *                                             already hold the rise above the
 *                                             pre-flash level (see below)
 *     "calibration": { "kind": "linear",      temperature = offset_k + gain_k * count
 *                      "gain_k": 0.002, "offset_k": 293.15 }
 *                 or { "kind": "table",       piecewise linear counts -> kelvin,
 *                      "counts": [...], "kelvin": [...] }   counts increasing
 *                 or { "kind": "kelvin" },    float32 data already in kelvin
 *     "pitch_mm": 0.5  or  [0.5, 0.5],        optional: the pixel footprint on the
 *                                             part along columns and rows, mm
 *     "saturation_count": 16383,              counts at or above are saturated
 *                                             (uint16 data; default 65535)
 *     "acquisition": { ... }                  free object: camera, lens, flash
 *                                             energy, ambient ...; recorded with
 *                                             the inspection
 *   }
 *
 * The data path is relative to the manifest's folder. Unknown keys (at the
 * top level and inside "data" and "calibration") and repeated keys are
 * refused. pl_seq_open() validates everything it can without reading every
 * frame: manifest, shapes, times, file sizes, that every PNG frame exists.
 * Frames are then read one at a time (pl_seq_read_frame()), so a sequence
 * of any length is reduced in bounded memory. Times are returned relative
 * to the flash.
 *
 * Details of the rules:
 * - A cube must hold exactly frames x rows x cols elements after its
 *   header: a shorter file is "truncated", a longer one refused too. Either
 *   byte order is read.
 * - A PNG folder needs "frame_count" (or "frame_times_s"); frame i is
 *   folder/pattern % (first + i). The pattern holds exactly one "%d" or
 *   "%0Nd" (N from 1 to 20), "%%" for a literal '%', and no '/'. Every
 *   frame is 16-bit grayscale (interlaced or not) of frame 0's size.
 * - Linear and table calibrations need uint16 data (cube or PNG); "kelvin"
 *   needs a float32 cube. gain_k must be > 0. A table has at least 2
 *   points, counts strictly increasing; between points it interpolates
 *   linearly and outside it takes the end values, the rule of
 *   numpy.interp (results agree to the bit after rounding to float).
 * - Saturation applies to counts only: a count >= saturation_count reads
 *   as NaN and is counted. A float32 cube's values are passed as they are
 *   (a NaN in it is not counted as saturated).
 * - A frame at exactly flash_time_s is neither before nor after the flash.
 *   At least one frame must come before and one after; "preflash_frames"
 *   may not exceed the frames before the flash.
 * - Rise data. Some cameras' software records the temperature rise itself,
 *   the pre-flash level already subtracted, and no pre-flash frame. Such a
 *   sequence says "cold_reference": "subtracted"; its frames (calibrated
 *   as usual, so in kelvin of rise: "kelvin" data, or a linear calibration
 *   with offset_k 0) start at the flash: no frame may come before it, and
 *   "preflash_frames" is 0 or absent. pl_seq_preflash_frames() is then 0
 *   and the reduction subtracts nothing. "preflash_frames": 0 without
 *   "subtracted" is refused, and so is "subtracted" with pre-flash frames:
 *   a cold reference is never invented nor silently dropped.
 */
#ifndef PLYLEDGER_SEQ_H
#define PLYLEDGER_SEQ_H

#include "plyledger/common.h"

#include <math.h>

#ifdef __cplusplus
extern "C" {
#endif

typedef struct pl_seq pl_seq;

/**
 * Open a sequence by its manifest.
 * @param[out] out  close with pl_seq_close(); NULL on failure
 * @return PL_OK, PL_EIO (the manifest, the cube or a frame cannot be opened
 *         or read), PL_EFORMAT (manifest not JSON, a key missing, unknown,
 *         repeated or of the wrong type; data not a uint16/float32 3-D
 *         C-order cube; a missing or non-grayscale PNG frame; shape or
 *         frame count disagreeing with the manifest; times not increasing;
 *         truncated data; no frame before (unless the cold reference is
 *         "subtracted") or after the flash; frames before the flash with
 *         "subtracted"; "preflash_frames" 0 without it), PL_ENOMEM.
 *         Messages name the file (the manifest, the cube or the frame as
 *         the manifest path and "data" make it) and the key or frame.
 */
PL_EXPORT int pl_seq_open(pl_seq **out, const char *manifest_path, pl_err *err);

/** Close; NULL is accepted. */
PL_EXPORT void pl_seq_close(pl_seq *seq);

PL_EXPORT uint32_t pl_seq_width(const pl_seq *seq);
PL_EXPORT uint32_t pl_seq_height(const pl_seq *seq);
PL_EXPORT uint32_t pl_seq_frame_count(const pl_seq *seq);

/**
 * Frame times in seconds relative to the flash (negative before it);
 * frame_count entries, increasing. Lives until pl_seq_close().
 */
PL_EXPORT const double *pl_seq_times(const pl_seq *seq);

/**
 * The pixel footprint on the part from the manifest's "pitch_mm" into
 * [out] pitch_u, pitch_v (mm per pixel along columns, rows); both NaN when
 * the manifest does not say.
 */
PL_EXPORT void pl_seq_pitch(const pl_seq *seq, double *pitch_u, double *pitch_v);

/** Where the cold (pre-flash) reference comes from. */
typedef enum pl_seq_cold {
    PL_SEQ_COLD_PREFLASH = 0,   /**< the mean of the pre-flash frames (the default) */
    PL_SEQ_COLD_SUBTRACTED = 1, /**< already subtracted: the frames hold the rise */
} pl_seq_cold;

/** Number of frames before the flash used as the cold reference; 0 when
 * the frames hold the rise (PL_SEQ_COLD_SUBTRACTED). */
PL_EXPORT uint32_t pl_seq_preflash_frames(const pl_seq *seq);

/** The manifest's "cold_reference". */
PL_EXPORT pl_seq_cold pl_seq_cold_reference(const pl_seq *seq);

/**
 * The manifest's "acquisition" object as compact JSON ("{}" when absent).
 * Lives until pl_seq_close().
 */
PL_EXPORT const char *pl_seq_acquisition_json(const pl_seq *seq);

/**
 * Read frame `index` as temperatures in kelvin into `dst` (width * height
 * floats, row-major). Saturated pixels are NaN; their count goes to
 * [out] nsaturated (may be NULL; 0 for a float32 cube). Reading frames in
 * increasing order is the fast path; any order works. The pl_seq keeps one
 * frame's buffer: use one pl_seq from one thread at a time.
 * @return PL_OK, PL_EINVAL (index out of range), PL_EIO, PL_EFORMAT (a
 *         frame that changed or broke since open), PL_ENOMEM (PNG reader).
 *         On failure `dst` may be partly written.
 */
PL_EXPORT int pl_seq_read_frame(pl_seq *seq, uint32_t index, float *dst, uint32_t *nsaturated,
                                pl_err *err);

/* ---- writing ------------------------------------------------------------ */

/** How a written sequence stores its frames. */
typedef enum pl_seq_storage {
    PL_SEQ_NPY_FLOAT32 = 0, /**< cube.npy of kelvin; calibration "kelvin" */
    PL_SEQ_NPY_UINT16 = 1,  /**< cube.npy of counts; linear calibration */
    PL_SEQ_PNG16 = 2,       /**< a folder of 16-bit PNG counts; linear calibration */
} pl_seq_storage;

/** What to write. Initialise with PL_SEQ_INFO_INIT. */
typedef struct pl_seq_info {
    unsigned version;         /**< PL_SEQ_INFO_VERSION */
    uint32_t width, height;
    uint32_t frame_count;
    double frame_rate_hz;     /**< uniform frames from t = 0 */
    double flash_time_s;
    uint32_t preflash_frames;
    pl_seq_storage storage;
    double gain_k;            /**< kelvin per count (counts storage) */
    double offset_k;          /**< kelvin at count 0 (counts storage) */
    uint16_t saturation_count;/**< counts storage: clamp here and mark saturated */
    double pitch_u, pitch_v;  /**< pixel footprint in mm; NaN: not written */
    const char *acquisition_json; /**< a JSON object, or NULL */
} pl_seq_info;

#define PL_SEQ_INFO_VERSION 1
#define PL_SEQ_INFO_INIT \
    { PL_SEQ_INFO_VERSION, 0, 0, 0, 0.0, 0.0, 0, PL_SEQ_NPY_FLOAT32, 0.001, 273.15, 65535, \
      NAN, NAN, NULL }

typedef struct pl_seq_writer pl_seq_writer;

/**
 * Start writing a sequence whose manifest will be `manifest_path`
 * (<name>.json); the data goes beside it (<name>.npy, or the folder
 * <name>-frames/ of frame-00000.png, frame-00001.png ...). Everything is
 * written under temporary names in the same folder and renamed into place
 * by pl_seq_writer_close(), the manifest last, so a failed or discarded
 * sequence leaves nothing behind. An existing sequence of the same name is
 * replaced; an existing <name>-frames that holds anything but frame files
 * is not touched (PL_EEXISTS).
 * info: at least 2 frames, a frame before and one after the flash (as the
 * reader counts them); preflash_frames 0 means every frame before the
 * flash; counts storage needs gain_k > 0 and saturation_count >= 1; pitch
 * both > 0 or both NaN; acquisition_json a JSON object or NULL.
 * @param[out] out  finish with pl_seq_writer_close(); NULL on failure
 * @return PL_OK, PL_EINVAL (bad info; a manifest named <name>.npy),
 *         PL_EEXISTS, PL_EIO, PL_ENOMEM.
 */
PL_EXPORT int pl_seq_writer_open(pl_seq_writer **out, const char *manifest_path,
                                 const pl_seq_info *info, pl_err *err);

/**
 * Append the next frame, width * height temperatures in kelvin. Counts
 * storage writes floor((K - offset_k) / gain_k + 0.5) clamped to
 * 0..saturation_count; NaN and +inf become saturation_count, so they read
 * back as saturated (NaN). float32 storage keeps the values bit for bit.
 * @return PL_OK, PL_EINVAL (more frames than frame_count, which the
 *         sequence survives; or an earlier frame failed), PL_EIO,
 *         PL_ENOMEM. After PL_EIO or PL_ENOMEM the sequence can only be
 *         closed (which fails) or discarded.
 */
PL_EXPORT int pl_seq_writer_frame(pl_seq_writer *w, const float *kelvin, pl_err *err);

/**
 * Finish: check every frame was written, write the manifest, free `w`
 * (also on failure; a failed sequence's files are removed). NULL accepted.
 * @return PL_OK, PL_EINVAL (frames missing), PL_EIO (also after a frame
 *         failed), PL_EEXISTS (a foreign folder took the frames' name),
 *         PL_ENOMEM.
 */
PL_EXPORT int pl_seq_writer_close(pl_seq_writer *w, pl_err *err);

/** Abandon a sequence being written: remove its files and free `w`. NULL accepted. */
PL_EXPORT void pl_seq_writer_discard(pl_seq_writer *w);

/**
 * Where a sequence writer puts the data of the manifest `manifest_path` in
 * `storage`: <name>.npy beside it, or the folder <name>-frames (for a
 * program that checks every file it will write before it starts).
 * @param[out] out  malloc'd; free with free()
 * @return PL_OK, PL_ENOMEM.
 */
PL_EXPORT int pl_seq_data_path(char **out, const char *manifest_path, pl_seq_storage storage,
                               pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
