/*
 * png_int.h - the libpng set-up shared by the library's PNG readers and
 * writers (map_png.c, render.c, seq.c); never installed.
 *
 * libpng reports an error by calling a handler that must not return. The
 * handlers that pl_png__create() installs copy libpng's message into the
 * caller's buffer and longjmp to the caller's setjmp(png_jmpbuf(png));
 * warnings are dropped. The function that calls setjmp() should only fill
 * a struct owned by its caller, so that after a longjmp nothing lives in
 * clobbered locals and the caller frees it all with pl_png__destroy().
 */
#ifndef PLYLEDGER_PNG_INT_H
#define PLYLEDGER_PNG_INT_H

#include <png.h>

/* Size of the buffer that receives libpng's error message. */
#define PL_PNG_MSG_SIZE 160

/*
 * Make libpng's read struct (writing == 0) or write struct, and its info
 * struct, with the handlers above writing into msg (PL_PNG_MSG_SIZE bytes,
 * which must outlive the structs). Returns 0, or -1 when out of memory with
 * *png and *info NULL.
 */
int pl_png__create(png_structp *png, png_infop *info, int writing, char *msg);

/* Free what pl_png__create() made (NULLs are accepted) and clear both. */
void pl_png__destroy(png_structp *png, png_infop *info, int writing);

/* The name of a PNG colour type, for messages ("palette"). */
const char *pl_png__colour_type_name(int colour_type);

#endif
