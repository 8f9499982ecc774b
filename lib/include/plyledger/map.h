/*
 * plyledger/map.h - one reduced inspection map: a raster placed on the part.
 *
 * A pl_map is a grid of `width` x `height` pixels holding one or more
 * channels of float32 values, NaN where there is no data. Each channel has a
 * quantity and a unit. Quantities come from a documented vocabulary (see
 * pl_quantity_at()); a name outside it is accepted as a free quantity as long
 * as a unit is given.
 *
 * Geometry. Pixel (col i, row j) has its centre at the part point
 *
 *     P(i, j) = origin + (i * pitch_u) * u + (j * pitch_v) * v
 *
 * where origin, u and v are the placement: the origin in the airframe's
 * reference system (for example "STA/BL/WL", station / butt line / water
 * line) and two in-plane unit vectors in that system. Pitches are in mm per
 * pixel along u (columns) and v (rows). The placement's `unit` names the
 * unit of the origin's coordinates ("mm").
 *
 * Storage. Data is channel-major, then row-major: value (channel c, row j,
 * col i) lives at data[(c * height + j) * width + i]. pl_map_new() allocates
 * it zeroed; pl_map_free() releases the map, its channels and its data.
 *
 * Values. A value is a finite number or NaN (no data); a map holds at
 * least one number. pl_map_check_values() is the one check of that: every
 * loader applies it, and so does pl_map_encode() (what enters the store),
 * for maps a caller filled in itself. An infinity (float64 or PNG values
 * beyond the float32 range arrive as one) is refused; it becomes no data
 * only on the explicit load option PL_MAP_INFINITE_TO_NAN, whose use and
 * count pl_map_load_info reports for the record. Exports refuse infinities
 * too rather than write a value that would read back as an ordinary one.
 *
 * Files. Import reads 8- or 16-bit grayscale PNG (value = offset + scale *
 * code, from text chunks below), NumPy .npy (float32, float64, uint16; C
 * order; 2-D or 3-D as channels x rows x cols) and CSV grids. Export writes
 * 16-bit PNG with those text chunks, float32 .npy, and (plyledger/render.h)
 * a colour rendering.
 *
 * PNG text chunk keys written and read by plyledger:
 *   plyledger.scale     value per code step (default 1)
 *   plyledger.offset    value of code 0 (default 0)
 *   plyledger.nodata    the code that means "no data" (absent: none)
 *   plyledger.quantity  the channel's quantity
 *   plyledger.unit      the channel's unit
 *   plyledger.pitch     "PU PV" in mm per pixel (or one number for both)
 */
#ifndef PLYLEDGER_MAP_H
#define PLYLEDGER_MAP_H

#include "plyledger/common.h"
#include "plyledger/outfile.h"

#ifdef __cplusplus
extern "C" {
#endif

#define PL_QUANTITY_SIZE 48  /**< buffer for a quantity name, NUL included */
#define PL_UNIT_SIZE 24      /**< buffer for a unit, NUL included */
#define PL_SYSTEM_SIZE 32    /**< buffer for a coordinate system name */
#define PL_LABEL_SIZE 40     /**< buffer for a channel label, NUL included */

/** The PNG text keys (see the introduction). */
#define PL_PNG_KEY_SCALE "plyledger.scale"
#define PL_PNG_KEY_OFFSET "plyledger.offset"
#define PL_PNG_KEY_NODATA "plyledger.nodata"
#define PL_PNG_KEY_QUANTITY "plyledger.quantity"
#define PL_PNG_KEY_UNIT "plyledger.unit"
#define PL_PNG_KEY_PITCH "plyledger.pitch"

/** Where a map lies on the part. */
typedef struct pl_placement {
    double origin[3];             /**< centre of pixel (0,0), airframe coordinates */
    double u[3];                  /**< unit vector along increasing column */
    double v[3];                  /**< unit vector along increasing row */
    char system[PL_SYSTEM_SIZE];  /**< reference system, e.g. "STA/BL/WL" */
    char unit[PL_UNIT_SIZE];      /**< unit of `origin`, e.g. "mm" */
} pl_placement;

/** What one channel holds. */
typedef struct pl_channel {
    char quantity[PL_QUANTITY_SIZE];  /**< e.g. "temperature-contrast" */
    char unit[PL_UNIT_SIZE];          /**< e.g. "K" */
    char label[PL_LABEL_SIZE];        /**< optional: what tells apart channels of
                                           one quantity, e.g. "t=0.50 s", "f=0.10 Hz" */
} pl_channel;

/** A map. Fields may be read and written directly; keep them consistent. */
typedef struct pl_map {
    uint32_t width;          /**< columns */
    uint32_t height;         /**< rows */
    uint32_t nchannels;      /**< at least 1 */
    double pitch_u;          /**< mm per pixel along u (columns); > 0 */
    double pitch_v;          /**< mm per pixel along v (rows); > 0 */
    pl_placement placement;  /**< where pixel (0,0) is and how the axes run */
    pl_channel *channels;    /**< nchannels entries, owned by the map */
    float *data;             /**< nchannels * height * width values, owned */
} pl_map;

/** A quantity of the vocabulary. */
typedef struct pl_quantity_info {
    const char *name;         /**< e.g. "depth" */
    const char *units;        /**< accepted units, space separated; first is default */
    const char *description;  /**< one line for help text */
    const char *methods;      /**< inspection methods that produce it, space separated */
} pl_quantity_info;

/** 1 if `quantity` (of the vocabulary) comes from inspection `method` (a
 * site's method, PL_VOCAB_METHOD, e.g. "flash-thermography"), else 0. */
PL_EXPORT int pl_quantity_fits_method(const char *quantity, const char *method);

/** Largest width or height accepted for a map (pixels). */
#define PL_MAP_MAX_SIDE 65536u
/** Largest number of channels in one map. */
#define PL_MAP_MAX_CHANNELS 256u

/**
 * Allocate a map with zeroed data, pitch 1 mm, identity placement (origin 0,
 * u = (1,0,0), v = (0,1,0), system "local", unit "mm") and channels with
 * empty quantity and unit.
 * @param[out] out  the new map; free with pl_map_free()
 * @return PL_OK, PL_EINVAL (a zero or too large dimension), PL_ENOMEM.
 */
PL_EXPORT int pl_map_new(pl_map **out, uint32_t width, uint32_t height,
                         uint32_t nchannels, pl_err *err);

/** Release a map; NULL is accepted. */
PL_EXPORT void pl_map_free(pl_map *map);

/** Deep copy. @param[out] out  free with pl_map_free(). */
PL_EXPORT int pl_map_clone(pl_map **out, const pl_map *map, pl_err *err);

/** Pointer to channel `c`'s height*width values (c < nchannels). */
PL_EXPORT float *pl_map_channel(const pl_map *map, uint32_t c);

/**
 * Index of the first channel whose quantity is `quantity`.
 * @return the index (>= 0), or PL_ENOTFOUND (also for NULL).
 */
PL_EXPORT int pl_map_find_channel(const pl_map *map, const char *quantity);

/**
 * Set channel `c`'s quantity and unit after checking them with
 * pl_quantity_check(); on failure the channel is unchanged.
 * @return PL_OK, PL_EINVAL (also for c >= nchannels).
 */
PL_EXPORT int pl_map_set_channel(pl_map *map, uint32_t c, const char *quantity,
                                 const char *unit, pl_err *err);

/**
 * Set both pitches (mm per pixel); each must be finite and > 0.
 * @return PL_OK, PL_EINVAL.
 */
PL_EXPORT int pl_map_set_pitch(pl_map *map, double pitch_u, double pitch_v, pl_err *err);

/**
 * Check a placement: finite numbers, u and v of unit length (within 1e-3)
 * and perpendicular (|u.v| < 1e-3), a non-empty system and unit.
 * @return PL_OK, PL_EINVAL.
 */
PL_EXPORT int pl_placement_check(const pl_placement *p, pl_err *err);

/**
 * Part coordinates ([out] xyz) of the point at fractional pixel position
 * (col, row); pixel centres are at integers.
 */
PL_EXPORT void pl_map_pixel_to_part(const pl_map *map, double col, double row,
                                    double xyz[3]);

/** Number of quantities in the vocabulary. */
PL_EXPORT size_t pl_quantity_count(void);
/** The i-th quantity (i < pl_quantity_count()); static storage. */
PL_EXPORT const pl_quantity_info *pl_quantity_at(size_t i);
/** The vocabulary entry named `name`, or NULL for a free quantity. */
PL_EXPORT const pl_quantity_info *pl_quantity_lookup(const char *name);

/**
 * Check a channel description. A vocabulary quantity must use one of its
 * listed units (pl_quantity_default_unit() gives the usual one); a free
 * quantity needs a non-empty unit. Names are 1-47 characters of
 * [a-z0-9-_.]; units are 1-23 printable characters without spaces.
 * @return PL_OK, PL_EINVAL.
 */
PL_EXPORT int pl_quantity_check(const char *quantity, const char *unit, pl_err *err);

/** Default unit of a vocabulary quantity, or NULL for a free one. */
PL_EXPORT const char *pl_quantity_default_unit(const char *quantity);

/**
 * Which way a quantity moves over a defect (an indication), from the
 * physics of the method; the vocabulary gives one per quantity
 * (pl_quantity_polarity()). Detection (plyledger/detect.h) compares
 * polarity x (value - background) with its thresholds.
 */
typedef enum pl_polarity {
    PL_POLARITY_FALLS = -1, /**< the value falls over a defect */
    PL_POLARITY_NONE = 0,   /**< no fixed direction: a caller must state one */
    PL_POLARITY_RISES = 1,  /**< the value rises over a defect */
} pl_polarity;

/**
 * The polarity of a vocabulary quantity; PL_POLARITY_NONE for a free
 * quantity (or NULL) and for those without a direction of their own:
 *  - rises: temperature-rise, temperature-contrast, normalised-contrast
 *    (a defect holds the
 *    heat near the surface: Maldague 2001, "Theory and practice of infrared
 *    technology for nondestructive testing", ch. 9), log-derivative-1 and
 *    log-derivative-2 (the cooling curve's slope departs upward from the
 *    sound laminate's -1/2 when heat meets the defect: Shepard et al. 2003;
 *    for a partial reflector the second log-derivative turns negative again
 *    long after its peak, so choose the time for the depth of interest);
 *  - falls: phase-contrast and phase (at the frequencies that reach the
 *    defect, in the sign convention of numpy.fft.rfft that the reduction
 *    uses; measured on the simulator, see tests/test_detect.c),
 *    ultrasonic-amplitude (the back-wall echo loses
 *    amplitude over a delamination, in %FSH or dB; common practice);
 *    depth, time-of-peak-d2, time-of-flight and ultrasonic-thickness (the
 *    reflector lies shallower than the back wall), which are compared with
 *    the site's nominal value (pl_quantity_uses_nominal());
 *  - none: amplitude (pulse-phase amplitude follows the flash's pattern and
 *    changes direction with frequency), temperature (a raw frame carries
 *    the flash pattern and emissivity), time-of-peak-contrast (the
 *    contrast is nil on sound laminate, so there is no sound value to
 *    depart from), and the eddy-current signals (their
 *    direction depends on probe, frequency and balance).
 */
PL_EXPORT pl_polarity pl_quantity_polarity(const char *quantity);

/**
 * 1 when a vocabulary quantity is compared with the site's nominal value
 * rather than with the map's own background: depth and
 * ultrasonic-thickness (the nominal thickness, mm), time-of-peak-d2 (the
 * back wall's peak time, L^2 / (pi alpha), s) and time-of-flight (the
 * back-wall echo's, us). On sound laminate these maps hold the back wall or
 * nothing at all, so their own median says nothing of a defect. 0
 * otherwise, and for a free quantity.
 */
PL_EXPORT int pl_quantity_uses_nominal(const char *quantity);

/* ---- values ------------------------------------------------------------ */

/** What a map load does with an infinite value (NaN always means no data). */
typedef enum pl_map_infinite {
    PL_MAP_INFINITE_REFUSE = 0,  /**< refuse the map (the default) */
    PL_MAP_INFINITE_TO_NAN = 1,  /**< make each infinity no data (NaN), counted */
} pl_map_infinite;

/** Options of pl_map_load_v2(). Initialise with PL_MAP_LOAD_OPTIONS_INIT. */
typedef struct pl_map_load_options {
    unsigned version;          /**< PL_MAP_LOAD_OPTIONS_VERSION */
    pl_map_infinite infinite;  /**< default PL_MAP_INFINITE_REFUSE */
} pl_map_load_options;

#define PL_MAP_LOAD_OPTIONS_VERSION 1
#define PL_MAP_LOAD_OPTIONS_INIT { PL_MAP_LOAD_OPTIONS_VERSION, PL_MAP_INFINITE_REFUSE }

/** What a load or a check did to the values: the record keeps it with the
 * map (pl_map_load_info_json()). */
typedef struct pl_map_load_info {
    pl_map_infinite infinite;  /**< the option in force */
    size_t infinite_to_nan;    /**< infinities made no data (0 unless TO_NAN) */
} pl_map_load_info;

/**
 * Check a map's values, the single check every loader and pl_map_encode()
 * apply: no value may be +inf or -inf, and at least one value must be a
 * number (a map entirely NaN holds no data). Under PL_MAP_INFINITE_TO_NAN
 * each infinity is set to NaN and counted instead (the map must still hold
 * a number afterwards).
 * @param[out] info  may be NULL; the option in force and the count
 * @param map        the values checked (and changed under TO_NAN)
 * @param opts       NULL for PL_MAP_LOAD_OPTIONS_INIT
 * @param name       the file or map named at the start of the message, or
 *                   NULL for none
 * @return PL_OK, PL_EINVAL (infinities: their count and the first one's
 *         sign, channel, row and column; no data; bad options).
 */
PL_EXPORT int pl_map_check_values(pl_map_load_info *info, pl_map *map,
                                  const pl_map_load_options *opts, const char *name,
                                  pl_err *err);

/**
 * The load's record as a JSON object for a map's recorded parameters:
 * {"infinite_values": "refuse"} or {"infinite_values": "to-nan",
 * "infinite_values_made_nodata": N}. Written like snprintf() (always
 * NUL-terminated when size > 0).
 * @return the length of the whole text (excluding the NUL); a value >= size
 *         means it was cut.
 */
PL_EXPORT int pl_map_load_info_json(char *buf, size_t size, const pl_map_load_info *info);

/* ---- store encoding ---------------------------------------------------- */

/**
 * Encode all channels' data as zlib-compressed little-endian float32, in the
 * layout of pl_map.data, every NaN written as the quiet NaN 0x7fc00000.
 * The values must pass pl_map_check_values() (refusing, not mapping).
 * @param[out] blob     malloc'd bytes; the caller frees with free()
 * @param[out] blob_len their count
 * @param[out] sha256   SHA-256 of the decoded (uncompressed) bytes
 * @return PL_OK, PL_ENOMEM, PL_EFORMAT (zlib failure), PL_EINVAL (the
 *         map's size fields are zero or out of range, an infinite value,
 *         no data).
 */
PL_EXPORT int pl_map_encode(unsigned char **blob, size_t *blob_len,
                            unsigned char sha256[32], const pl_map *map, pl_err *err);

/**
 * Decode a blob from pl_map_encode() into `map`'s data, whose width, height
 * and nchannels must already be set and data allocated (pl_map_new()).
 * When `sha256` is not NULL the decoded bytes must hash to it. On failure
 * every value of the map is set to NaN.
 * @return PL_OK, PL_EFORMAT (corrupt, truncated, wrong length, bytes after
 *         the stream), PL_ENOMATCH (digest), PL_ENOMEM, PL_EINVAL (the
 *         map's size fields are zero or out of range).
 */
PL_EXPORT int pl_map_decode(pl_map *map, const void *blob, size_t blob_len,
                            const unsigned char sha256[32], pl_err *err);

/** SHA-256 of a map's content as pl_map_encode() would hash it. */
PL_EXPORT void pl_map_digest(unsigned char sha256[32], const pl_map *map);

/* ---- files ------------------------------------------------------------- */

/**
 * Read an 8- or 16-bit grayscale PNG (no alpha, no palette; interlaced
 * or not). Values are offset + scale * code from the plyledger.* text
 * chunks (1 and 0 when absent), computed in double and rounded to float;
 * the nodata code becomes NaN; a value beyond the float32 range is
 * infinite and refused (pl_map_check_values()), as is a file of nothing
 * but the nodata code. Quantity, unit and pitch come from their
 * chunks when present (else empty quantity, pitch NaN: not known); a vocabulary
 * quantity without a unit chunk gets its default unit. Text chunks before
 * and after the image data count; other keys are ignored.
 * @param[out] out  free with pl_map_free()
 * @return PL_OK, PL_EIO (cannot open), PL_EFORMAT (not PNG, truncated or
 *         corrupt, not grayscale, bit depth other than 8 or 16, larger than
 *         PL_MAP_MAX_SIDE, a chunk value that is not a number (scale must
 *         also be non-zero, nodata a code of the bit depth, pitch > 0), a
 *         quantity/unit pair pl_quantity_check() refuses, values that
 *         pl_map_check_values() refuses), PL_ENOMEM.
 */
PL_EXPORT int pl_map_load_png(pl_map **out, const char *path, pl_err *err);

/**
 * Write channel `c` as a 16-bit grayscale PNG. Finite values are quantised
 * to codes 0..65534 with offset = min and scale = (max - min) / 65534 (scale
 * 1 for a constant map); NaN is written as code 65535, the nodata code. A
 * channel holding an infinity is refused (no code stands for it). The
 * round trip through
 * pl_map_load_png() is exact to scale / 2 (plus the float rounding of the
 * decoded value). The plyledger.* chunks are written as tEXt before the
 * image data: scale, offset, nodata, quantity and unit (these two may be
 * empty), and pitch when both pitches are finite (a pitch not known is
 * left out). The file is written through a pl_outfile (plyledger/outfile.h):
 * whole or not at all, a failure leaves the old file as it was.
 * @return PL_OK, PL_EINVAL (c out of range, an infinite value: count and
 *         first position, nothing written; a path that is not a regular
 *         file), PL_EIO, PL_ENOMEM.
 */
PL_EXPORT int pl_map_save_png(const pl_map *map, uint32_t c, const char *path, pl_err *err);

/**
 * pl_map_save_png() into an output file the caller opened and then
 * commits or aborts (for a caller that must know a file is written before
 * it records anything).
 * @return as pl_map_save_png(); the message names pl_outfile_path(of).
 */
PL_EXPORT int pl_map_write_png(const pl_map *map, uint32_t c, pl_outfile *of, pl_err *err);

/**
 * Read a NumPy .npy file (format 1.0, 2.0 or 3.0): dtype float32, float64 or
 * uint16 of either byte order, C order, 2-D (rows x cols) or 3-D
 * (channels x rows x cols). Quantity, unit and pitch are left for the
 * caller (empty quantity and unit, pitch NaN: not known). A file shorter
 * or longer than its header promises is refused before the map is
 * allocated (a pipe's extra bytes when they are met). float64 values
 * beyond the float32 range become infinities, refused with every other
 * infinity by pl_map_check_values().
 * @return PL_OK, PL_EIO, PL_EFORMAT (bad magic, header, dtype, order, rank,
 *         an empty or too large shape, truncated data, bytes after the
 *         data, values pl_map_check_values() refuses), PL_ENOMEM.
 */
PL_EXPORT int pl_map_load_npy(pl_map **out, const char *path, pl_err *err);

/**
 * Write the map as little-endian float32 .npy (format 1.0): 2-D when it has
 * one channel, else 3-D channels x rows x cols. Values are written bit for
 * bit. A map holding an infinity is refused before anything is written.
 * The file is written through a pl_outfile (plyledger/outfile.h): whole or
 * not at all, a failure leaves the old file as it was.
 * @return PL_OK, PL_EIO, PL_EINVAL (the map's size fields are invalid, an
 *         infinite value: count and first position; a path that is not a
 *         regular file), PL_ENOMEM.
 */
PL_EXPORT int pl_map_save_npy(const pl_map *map, const char *path, pl_err *err);

/**
 * pl_map_save_npy() into an output file the caller opened and then
 * commits or aborts.
 * @return as pl_map_save_npy(); the message names pl_outfile_path(of).
 */
PL_EXPORT int pl_map_write_npy(const pl_map *map, pl_outfile *of, pl_err *err);

/**
 * Read a CSV grid: one row of the map per line, comma separated decimal
 * numbers (sign, digits, fraction, exponent; blanks around a field are
 * allowed); an empty field or "nan" in any case is no data. Every line must
 * have the same number of fields. Lines starting with '#' and blank lines
 * are skipped (so a one-column grid writes "nan" for no data); LF or CRLF
 * line ends and a leading UTF-8 byte order mark are accepted. Quantity and
 * unit are left empty and the pitch NaN (not known) for the caller.
 * @return PL_OK, PL_EIO, PL_EFORMAT (ragged rows, a field that is not a
 *         number or lies outside the float32 range, "inf", no data rows,
 *         every field no data, more than PL_MAP_MAX_SIDE rows or columns),
 *         PL_ENOMEM.
 */
PL_EXPORT int pl_map_load_csv(pl_map **out, const char *path, pl_err *err);

/**
 * Read a map, choosing the format by the file name's ending (.png, .npy,
 * .csv, case-insensitive).
 * @return as the format's loader, or PL_EFORMAT for an unknown ending.
 */
PL_EXPORT int pl_map_load(pl_map **out, const char *path, pl_err *err);

/**
 * pl_map_load() with options: under PL_MAP_INFINITE_TO_NAN an infinity
 * (or a value beyond the float32 range) becomes no data instead of
 * refusing the file; [out] info (may be NULL) says what was done, for the
 * record (pl_map_load_info_json()).
 * @param opts  NULL for PL_MAP_LOAD_OPTIONS_INIT
 * @return as pl_map_load(), or PL_EINVAL (bad options).
 */
PL_EXPORT int pl_map_load_v2(pl_map **out, pl_map_load_info *info, const char *path,
                             const pl_map_load_options *opts, pl_err *err);

/**
 * Finite statistics of channel c: [out] min, max (NaN when there is no
 * finite value) and the count of finite values.
 */
PL_EXPORT size_t pl_map_range(const pl_map *map, uint32_t c, double *min, double *max);

#ifdef __cplusplus
}
#endif
#endif
