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
 * also offered.
 *
 * Images (pl_image) are allocated by the render calls and freed with
 * pl_image_free().
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

/** An 8-bit RGB image, row-major, 3 bytes a pixel. */
typedef struct pl_image {
    uint32_t width;
    uint32_t height;
    unsigned char *rgb;  /**< width * height * 3 bytes, owned */
} pl_image;

/** Options for pl_render_map(). Initialise with PL_RENDER_OPTIONS_INIT. */
typedef struct pl_render_options {
    unsigned version;      /**< PL_RENDER_OPTIONS_VERSION */
    pl_colormap colormap;  /**< default PL_COLORMAP_LEDGER */
    double vmin;           /**< value at the dark end; NaN: 1st percentile */
    double vmax;           /**< value at the light end; NaN: 99th percentile */
    unsigned zoom;         /**< integer magnification of map pixels; 0: automatic
                                (smallest making the map at least 256 px wide) */
    int colorbar;          /**< draw the colour bar with its labels */
    int scalebar;          /**< draw the scale bar in mm */
} pl_render_options;

#define PL_RENDER_OPTIONS_VERSION 1
#define PL_RENDER_OPTIONS_INIT \
    { PL_RENDER_OPTIONS_VERSION, PL_COLORMAP_LEDGER, NAN, NAN, 0, 1, 1 }

/**
 * Colour of `t` in [0, 1] (clamped; NaN gives the no-data grey) into
 * [out] rgb.
 */
PL_EXPORT void pl_colormap_rgb(pl_colormap cmap, double t, unsigned char rgb[3]);

/**
 * Render channel `c` of `map`.
 * @param[out] out  free with pl_image_free()
 * @return PL_OK, PL_EINVAL (c out of range, vmin >= vmax, bad options
 *         version), PL_ENOMEM.
 */
PL_EXPORT int pl_render_map(pl_image **out, const pl_map *map, uint32_t c,
                            const pl_render_options *opts, pl_err *err);

/** Write an image as an 8-bit RGB PNG. @return PL_OK, PL_EIO. */
PL_EXPORT int pl_image_save_png(const pl_image *img, const char *path, pl_err *err);

/** Allocate a black image. @param[out] out  free with pl_image_free(). */
PL_EXPORT int pl_image_new(pl_image **out, uint32_t width, uint32_t height, pl_err *err);

/** Release an image; NULL is accepted. */
PL_EXPORT void pl_image_free(pl_image *img);

/**
 * Draw `text` (printable ASCII) with plyledger's built-in 5x7 pixel font at
 * (x, y) top-left, each font pixel `scale` image pixels, in colour rgb.
 * Clipped to the image. Returns the width drawn in pixels.
 */
PL_EXPORT uint32_t pl_image_text(pl_image *img, int x, int y, const char *text,
                                 unsigned scale, const unsigned char rgb[3]);

#ifdef __cplusplus
}
#endif
#endif
