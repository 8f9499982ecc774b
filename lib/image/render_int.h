/*
 * render_int.h - render internals visible to the tests; never installed.
 *
 * Colour science (sRGB and CIELAB conversions), the colour map tables, the
 * built-in font's bitmaps and the layout of a map rendering, so that tests
 * can check each piece against outside references and find the parts of a
 * rendered image.
 */
#ifndef PLYLEDGER_RENDER_INT_H
#define PLYLEDGER_RENDER_INT_H

#include "plyledger/render.h"

#include <stddef.h>

/* Glyph cell of the built-in font, in font pixels. */
#define PL_FONT_WIDTH 5
#define PL_FONT_HEIGHT 7
/* Horizontal advance from one character to the next, in font pixels. */
#define PL_FONT_ADVANCE 6

/* The colours of the furniture around a rendered map. */
#define PL_RENDER_BACKGROUND 255, 255, 255
#define PL_RENDER_INK 32, 32, 32

/*
 * The bitmap of printable ASCII character `ch` (32..126): [out] rows[r] holds
 * row r (0 = top), bit 4 the leftmost pixel, bit 0 the rightmost. Returns 0,
 * or -1 (rows cleared) for a character outside 32..126.
 */
int pl_render__glyph(int ch, unsigned char rows[PL_FONT_HEIGHT]);

/* Width in image pixels of `text` drawn by pl_image_text() at `scale`:
 * (PL_FONT_ADVANCE n - 1) * scale for n characters, 0 for none. */
uint32_t pl_render__text_width(const char *text, unsigned scale);

/* Fill the rectangle (x, y, w, h), clipped to the image. */
void pl_render__fill(pl_image *img, int64_t x, int64_t y, int64_t w, int64_t h,
                     const unsigned char rgb[3]);

/* IEC 61966-2-1 sRGB transfer function: linear [0,1] -> encoded [0,1], and
 * back. Inputs outside [0,1] are clamped. */
double pl_render__srgb_encode(double linear);
double pl_render__srgb_decode(double encoded);

/* CIELAB (D65 white, 2 degree observer) -> linear sRGB, unclamped. */
void pl_render__lab_to_linear(const double lab[3], double linear[3]);

/* 8-bit sRGB -> CIELAB (D65). */
void pl_render__srgb8_to_lab(const unsigned char rgb[3], double lab[3]);

/* CIELAB -> nearest 8-bit sRGB, clamped to the gamut per channel. */
void pl_render__lab_to_srgb8(const double lab[3], unsigned char rgb[3]);

/* CIE 1976 colour difference Delta E*ab. */
double pl_render__delta_e76(const double a[3], const double b[3]);

/* The 256 entries of a colour map: [out] rgb (256 * 3 bytes, may be NULL)
 * as drawn, and [out] lab (256 * 3 doubles, may be NULL) the CIELAB colour
 * each entry was designed to have, before 8-bit quantisation. */
void pl_render__colormap_table(pl_colormap cmap, unsigned char *rgb, double *lab);

/* The no-data colour of a colour map. */
void pl_render__nodata_rgb(pl_colormap cmap, unsigned char rgb[3]);

/* The largest length of the form {1, 2, 5} x 10^n that is <= target
 * (target > 0 and finite). */
double pl_render__nice_length(double target);

/*
 * Percentile p (0..100) of n values with linear interpolation between order
 * statistics (position p/100 * (n-1)), the definition numpy.percentile uses
 * by default. `values` (n > 0, all finite) is reordered.
 */
double pl_render__percentile(float *values, size_t n, double p);

/* Compact text for a number: printf "%.*g" with `digits` significant digits,
 * "-0" written as "0". */
void pl_render__format_value(char *buf, size_t cap, double v, int digits);

/* Where the parts of a map rendering are, in image pixels. A rectangle is
 * (x, y) top-left and (w, h); w == 0 means the part is not drawn. */
typedef struct pl_render_layout {
    unsigned zoom;          /* image pixels per map pixel */
    unsigned text_scale;    /* image pixels per font pixel */
    double vmin, vmax;      /* value range of the colour map */
    int map_x, map_y, map_w, map_h;          /* the map, inside its frame */
    int title_x, title_y, title_h;           /* identification line (top-left); */
    unsigned title_scale;                    /* title_h 0: none */
    char title[PL_RENDER_IDENTIFICATION_SIZE + 16];
    int caption_x, caption_y;                /* quantity name (top-left) */
    char caption[96];
    int bar_x, bar_y, bar_w, bar_h;          /* colour bar, inside its frame */
    int tick_y[3];                           /* rows of vmax, mid, vmin ticks */
    int label_x, label_y[3];                 /* tick labels (top-left) */
    char labels[3][32];                      /* vmax, mid, vmin as drawn */
    int unit_x, unit_y;                      /* unit text (top-left) */
    char unit[32];
    int scale_x, scale_y, scale_w, scale_h;  /* scale bar */
    double scale_mm;                         /* its length in mm */
    int scale_label_x, scale_label_y;
    char scale_label[32];
} pl_render_layout;

/* pl_render_map() that also reports the layout ([out] layout, may be NULL). */
int pl_render__map(pl_image **out, pl_render_layout *layout, const pl_map *map,
                   uint32_t c, const pl_render_options *opts, pl_err *err);

#endif
