/*
 * plyledger/render.h - colour renderings of maps for people to look at.
 *
 * A rendering is an 8-bit RGB image: the map's channel drawn through a
 * perceptually uniform colour map, with a colour bar labelled with the
 * value range and the channel's unit, and a scale bar in mm. No-data pixels
 * are drawn in a neutral grey outside the colour map's range.
 *
 * The colour map ("ledger" by name) is computed, not tabulated: a path
 * through CIELAB whose lightness rises linearly from dark to light while the
 * hue turns from blue through teal and green to yellow, with chroma reduced
 * where needed to stay inside the sRGB gamut, so equal steps in value give
 * nearly equal perceived steps (CIE 1976 colour difference). A grey map is
 * also offered, with the same lightness ramp (CIELAB L* 20 to 95).
 *
 * Layout of a rendering, on a white background with dark text: the
 * identification line on top when there is one (the caller's text naming
 * airframe, site, inspection date, map and quantity, see
 * pl_render_identification(), led by SIMULATED for a simulated
 * inspection; also written as the PNG "Title" text chunk); then the
 * quantity's name; below it the map in a thin frame, each map pixel
 * drawn as a square of `zoom` x `zoom` image pixels (column 0 on the left,
 * row 0 at the top); under the map a scale bar whose length in mm along the
 * map's columns is written beneath it; right of the map the channel's unit,
 * then the colour bar with the values at its top (vmax), middle and bottom
 * (vmin). Values outside vmin..vmax are drawn in the end colours.
 *
 * Images (pl_image) are allocated by the render calls and freed with
 * pl_image_free(). The colour tables are built once, on first use, and
 * every function here may be called from several threads at once (on
 * different images).
 */
#ifndef PLYLEDGER_RENDER_H
#define PLYLEDGER_RENDER_H

#include "plyledger/common.h"
#include "plyledger/map.h"

#include <math.h>

#ifdef __cplusplus
extern "C" {
#endif

/** Colour maps. */
typedef enum pl_colormap {
    PL_COLORMAP_LEDGER = 0, /**< perceptually uniform, dark blue to light yellow */
    PL_COLORMAP_GREY = 1,   /**< linear grey in CIELAB lightness */
} pl_colormap;

/** Largest width or height of an image (pixels). */
#define PL_IMAGE_MAX_SIDE 65536u
/** Largest number of pixels in an image. */
#define PL_IMAGE_MAX_PIXELS (1u << 26)

/** An 8-bit RGB image, row-major, 3 bytes a pixel. Only the library
 * allocates one (render calls, pl_image_new()). */
typedef struct pl_image {
    uint32_t width;
    uint32_t height;
    unsigned char *rgb;  /**< width * height * 3 bytes, owned */
    char *title;         /**< the identification line drawn in it, owned (malloc'd;
                              pl_image_free() frees it), or NULL; written as the
                              PNG "Title" text chunk */
} pl_image;

/** Buffer for an identification line, NUL included. */
#define PL_RENDER_IDENTIFICATION_SIZE 160

/** Options for pl_render_map(). Initialise with PL_RENDER_OPTIONS_INIT. */
typedef struct pl_render_options {
    unsigned version;      /**< PL_RENDER_OPTIONS_VERSION */
    pl_colormap colormap;  /**< default PL_COLORMAP_LEDGER */
    double vmin;           /**< value at the dark end; NaN: 1st percentile */
    double vmax;           /**< value at the light end; NaN: 99th percentile */
    unsigned zoom;         /**< integer magnification of map pixels, at most
                                PL_RENDER_MAX_ZOOM; 0: automatic (smallest making
                                the map at least 256 px wide) */
    int colorbar;          /**< draw the colour bar with its labels */
    int scalebar;          /**< draw the scale bar in mm */
    /* version 2 */
    const char *identification; /**< what the picture shows, one line of
                                     printable ASCII shorter than
                                     PL_RENDER_IDENTIFICATION_SIZE (see
                                     pl_render_identification()); NULL or "":
                                     none (copied before the call returns) */
    int simulated;         /**< 1: the map comes from a simulated inspection; the
                                line then starts with "SIMULATED" (drawn even
                                without an identification) */
} pl_render_options;

/** Version 2 added `identification` and `simulated`; version 1 options
 * (the struct without them) are still accepted. */
#define PL_RENDER_OPTIONS_VERSION 2
/** Largest zoom accepted. */
#define PL_RENDER_MAX_ZOOM 64u
#define PL_RENDER_OPTIONS_INIT \
    { PL_RENDER_OPTIONS_VERSION, PL_COLORMAP_LEDGER, NAN, NAN, 0, 1, 1, NULL, 0 }

/**
 * The identification line of a rendering, written like snprintf() into
 * buf: "SERIAL site SITE DATE map ID QUANTITY" (for example "CR7-0107 site
 * F03 2031-05-02 map 75 depth"); an empty or NULL part is left out.
 * @return the length of the whole line (>= size: it was cut).
 */
PL_EXPORT int pl_render_identification(char *buf, size_t size, const char *serial,
                                       const char *site, const char *date, long long map_id,
                                       const char *quantity);

/**
 * Colour of `t` in [0, 1] (clamped; NaN gives the map's no-data grey) into
 * [out] rgb: table entry round(255 t) of the map's 256 colours.
 * @param cmap  PL_COLORMAP_LEDGER or PL_COLORMAP_GREY
 */
PL_EXPORT void pl_colormap_rgb(pl_colormap cmap, double t, unsigned char rgb[3]);

/**
 * Render channel `c` of `map` (see the introduction for the layout).
 * The map is read, never changed. Automatic limits (NaN in opts) are the
 * 1st and 99th percentiles of the channel's finite values, interpolated
 * linearly between order statistics; a constant channel gets a range of
 * +-1 % around its value (+-0.5 around 0); a channel without finite values
 * is drawn all no-data. Automatic zoom is the smallest making the map at
 * least 256 px wide, but no more than makes its longer side 4096 px, and at
 * least 1. Output is deterministic: the same input gives the same pixels.
 * @param[out] out  the image; free with pl_image_free()
 * @param map   the map (not NULL)
 * @param c     channel index
 * @param opts  options, or NULL for PL_RENDER_OPTIONS_INIT
 * @return PL_OK; PL_EINVAL (c out of range, vmin >= vmax, an infinite
 *         limit, bad options version or colour map, an identification that
 *         is too long or not printable ASCII, a map without data, a
 *         pitch that is not positive while the scale bar is on, a rendering
 *         larger than PL_IMAGE_MAX_SIDE / PL_IMAGE_MAX_PIXELS); PL_ENOMEM.
 */
PL_EXPORT int pl_render_map(pl_image **out, const pl_map *map, uint32_t c,
                            const pl_render_options *opts, pl_err *err);

/**
 * pl_render_map() with numbered outlines drawn over the map: `marks`
 * (width x height of the map, row-major) holds 0 for no mark or k >= 1 for
 * the k-th outlined region; each region's edge pixels (a marked pixel with
 * a 4-neighbour of another mark, or at the map's border) are drawn in a
 * magenta ink with a white core, and k is written next to the region's top
 * left corner. Marks above `count` are ignored.
 * @return as pl_render_map(); PL_EINVAL (marks NULL).
 */
PL_EXPORT int pl_render_outlined(pl_image **out, const pl_map *map, uint32_t c,
                                 const uint32_t *marks, uint32_t count,
                                 const pl_render_options *opts, pl_err *err);

/** How pl_render_pair() shows two maps of one grid together. */
typedef enum pl_pair_mode {
    PL_PAIR_CHECKERBOARD = 0, /**< alternate square tiles of each, one colour scale */
    PL_PAIR_BLEND = 1,        /**< first in magenta, second in green: where they agree
                                   the picture is grey, misfits show as colour fringes */
} pl_pair_mode;

/**
 * Render two maps of the same size together, to judge an alignment: a
 * checkerboard of `tile` map pixels (0: an eighth of the shorter side), both
 * through the colour map over a common range (the options' vmin / vmax, or
 * the 1st and 99th percentiles of both), or a blend, each normalised to its
 * own 1st..99th percentile. The caption says which is which; the scale bar
 * is drawn as pl_render_map() draws it; a blend has no colour bar.
 * @param[out] out  free with pl_image_free()
 * @return PL_OK, PL_EINVAL (sizes differ, a channel out of range, bad
 *         options, no data), PL_ENOMEM.
 */
PL_EXPORT int pl_render_pair(pl_image **out, const pl_map *a, uint32_t ca, const pl_map *b,
                             uint32_t cb, pl_pair_mode mode, unsigned tile,
                             const pl_render_options *opts, pl_err *err);

/**
 * Write an image as an 8-bit RGB PNG (non-interlaced, with a "Software"
 * text chunk naming plyledger and its version, and a "Title" text chunk
 * holding img->title when it is set), through a pl_outfile
 * (plyledger/outfile.h): whole or not at all, a failure leaves the old
 * file as it was.
 * @param img   the image (not NULL)
 * @param path  the file to create or replace
 * @return PL_OK, PL_EIO (cannot create or write; the message names `path`),
 *         PL_EINVAL (a path that is not a regular file), PL_ENOMEM.
 */
PL_EXPORT int pl_image_save_png(const pl_image *img, const char *path, pl_err *err);

/**
 * pl_image_save_png() into an output file the caller opened and
 * then commits or aborts.
 * @return PL_OK, PL_EIO (the message names pl_outfile_path(of)).
 */
PL_EXPORT int pl_image_write_png(const pl_image *img, pl_outfile *of, pl_err *err);

/**
 * The PNG that pl_image_write_png() writes, in memory (for embedding).
 * @param[out] out  malloc'd bytes; free with free()
 * @param[out] len  their number
 * @return PL_OK, PL_ENOMEM.
 */
PL_EXPORT int pl_image_encode_png(unsigned char **out, size_t *len, const pl_image *img,
                                  pl_err *err);

/**
 * Allocate a black image without a title.
 * @param[out] out  the image; free with pl_image_free()
 * @return PL_OK, PL_EINVAL (a side of 0 or above PL_IMAGE_MAX_SIDE, more
 *         than PL_IMAGE_MAX_PIXELS pixels), PL_ENOMEM.
 */
PL_EXPORT int pl_image_new(pl_image **out, uint32_t width, uint32_t height, pl_err *err);

/** Release an image; NULL is accepted. */
PL_EXPORT void pl_image_free(pl_image *img);

/**
 * Draw `text` (printable ASCII; any other byte is drawn as '?') with
 * plyledger's built-in 5x7 pixel font at (x, y) top-left, each font pixel a
 * square of `scale` image pixels, in colour rgb. Characters advance by 6
 * font pixels. Clipped to the image; x and y may be negative.
 * @return the width of the text in image pixels, (6 n - 1) * scale for n
 *         characters (0 for an empty text or scale 0), whether or not it
 *         was clipped.
 */
PL_EXPORT uint32_t pl_image_text(pl_image *img, int x, int y, const char *text,
                                 unsigned scale, const unsigned char rgb[3]);

#ifdef __cplusplus
}
#endif
#endif
