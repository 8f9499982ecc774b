/*
 * png.c - the libpng set-up shared by the library's PNG readers and
 * writers (see png_int.h).
 */
#include "common/png_int.h"

#include <stdio.h>

static void on_error(png_structp png, png_const_charp msg)
{
    char *buf = png_get_error_ptr(png);
    snprintf(buf, PL_PNG_MSG_SIZE, "%s", msg ? msg : "unknown error");
    png_longjmp(png, 1);
}

static void on_warning(png_structp png, png_const_charp msg)
{
    (void)png;
    (void)msg;
}

int pl_png__create(png_structp *png, png_infop *info, int writing, char *msg)
{
    msg[0] = '\0';
    *png = writing ? png_create_write_struct(PNG_LIBPNG_VER_STRING, msg, on_error, on_warning)
                   : png_create_read_struct(PNG_LIBPNG_VER_STRING, msg, on_error, on_warning);
    *info = *png ? png_create_info_struct(*png) : NULL;
    if (*info)
        return 0;
    pl_png__destroy(png, info, writing);
    return -1;
}

void pl_png__destroy(png_structp *png, png_infop *info, int writing)
{
    if (*png) {
        if (writing)
            png_destroy_write_struct(png, *info ? info : NULL);
        else
            png_destroy_read_struct(png, *info ? info : NULL, NULL);
    }
    *png = NULL;
    *info = NULL;
}

const char *pl_png__colour_type_name(int colour_type)
{
    switch (colour_type) {
    case PNG_COLOR_TYPE_GRAY: return "grayscale";
    case PNG_COLOR_TYPE_GRAY_ALPHA: return "grayscale with alpha";
    case PNG_COLOR_TYPE_RGB: return "RGB";
    case PNG_COLOR_TYPE_RGB_ALPHA: return "RGB with alpha";
    case PNG_COLOR_TYPE_PALETTE: return "palette";
    default: return "unknown";
    }
}
