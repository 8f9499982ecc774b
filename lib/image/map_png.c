/*
 * map_png.c - maps to and from grayscale PNG with plyledger.* text chunks.
 *
 * libpng reports errors by longjmp. Each libpng session keeps everything
 * it allocates in a `png_job` owned by the caller's frame; the function
 * that calls setjmp() only fills that struct, so after a longjmp nothing
 * lives in clobbered locals and job_end() frees it all on one path.
 */
#include "image/map_int.h"
#include "common/common_int.h"
#include "common/png_int.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/types.h>

#define NODATA_CODE 65535
#define MAX_CODE 65534

/* ---- one file --------------------------------------------------------- */

typedef struct png_job {
    FILE *f;
    const char *path;
    int writing;
    long long file_size;    /* when reading; -1 when unknown */
    png_structp png;
    png_infop info;
    unsigned char *image;   /* the decoded rows, or one row when writing */
    png_bytep *rows;
    char msg[PL_PNG_MSG_SIZE]; /* libpng's own complaint */
} png_job;

/* Open `path` for reading, or take the stream `wf` of an output file for
 * writing, and make libpng's structs. Whatever the outcome, the job is
 * then ready for job_end(). */
static int job_begin(png_job *j, const char *path, FILE *wf, pl_err *err)
{
    memset(j, 0, sizeof *j);
    j->path = path;
    j->writing = wf != NULL;
    j->f = wf ? wf : fopen(path, "rb");
    if (!j->f)
        return pl__err(err, PL_EIO, "%s: cannot open: %s", path, strerror(errno));
    if (pl_png__create(&j->png, &j->info, j->writing, j->msg))
        return pl__err(err, PL_ENOMEM, "%s: out of memory for the PNG %s", path,
                       j->writing ? "writer" : "reader");
    return PL_OK;
}

/* Free the job and close a file it opened for reading; the output file a
 * writing job borrowed stays with its owner. Returns `rc`. */
static int job_end(png_job *j, int rc)
{
    pl_png__destroy(&j->png, &j->info, j->writing);
    free(j->rows);
    free(j->image);
    if (j->f && !j->writing)
        fclose(j->f);
    return rc;
}

/* ---- reading ---------------------------------------------------------- */

/* What the text chunks say; strings point into libpng's info struct. */
typedef struct png_meta {
    double scale, offset;
    long nodata;            /* -1: none */
    const char *quantity;   /* NULL or "" when absent */
    const char *unit;
    double pitch_u, pitch_v;
} png_meta;

static int bad_chunk(const png_job *j, const char *key, const char *value, const char *want,
                     pl_err *err)
{
    return pl__err(err, PL_EFORMAT, "%s: text chunk %s '%.40s' is not %s", j->path, key,
                   value, want);
}

static int read_meta(png_meta *m, const png_job *j, int depth, pl_err *err)
{
    m->scale = 1;
    m->offset = 0;
    m->nodata = -1;
    m->quantity = m->unit = NULL;
    m->pitch_u = m->pitch_v = NAN; /* the file does not say */
    png_textp text = NULL;
    int ntext = 0;
    png_get_text(j->png, j->info, &text, &ntext);
    for (int i = 0; i < ntext; i++) {
        const char *key = text[i].key, *value = text[i].text ? text[i].text : "";
        double d;
        if (strcmp(key, PL_PNG_KEY_SCALE) == 0) {
            if (pl_map__parse_number(&d, value) || d == 0)
                return bad_chunk(j, key, value, "a non-zero number", err);
            m->scale = d;
        } else if (strcmp(key, PL_PNG_KEY_OFFSET) == 0) {
            if (pl_map__parse_number(&d, value))
                return bad_chunk(j, key, value, "a number", err);
            m->offset = d;
        } else if (strcmp(key, PL_PNG_KEY_NODATA) == 0) {
            double top = depth == 16 ? 65535 : 255;
            if (pl_map__parse_number(&d, value) || d != floor(d) || d < 0 || d > top)
                return bad_chunk(j, key, value,
                                 depth == 16 ? "a code from 0 to 65535" : "a code from 0 to 255",
                                 err);
            m->nodata = (long)d;
        } else if (strcmp(key, PL_PNG_KEY_QUANTITY) == 0) {
            m->quantity = value;
        } else if (strcmp(key, PL_PNG_KEY_UNIT) == 0) {
            m->unit = value;
        } else if (strcmp(key, PL_PNG_KEY_PITCH) == 0) {
            if (pl_map__parse_pitch(&m->pitch_u, &m->pitch_v, value))
                return bad_chunk(j, key, value, "one or two numbers > 0", err);
        }
    }
    return PL_OK;
}

static int apply_meta(pl_map *map, const png_meta *m, const png_job *j, pl_err *err)
{
    map->pitch_u = m->pitch_u;
    map->pitch_v = m->pitch_v;
    pl_channel *ch = &map->channels[0];
    if (m->quantity && *m->quantity) {
        const char *unit = m->unit && *m->unit ? m->unit : pl_quantity_default_unit(m->quantity);
        pl_err why = {0};
        if (pl_quantity_check(m->quantity, unit, &why))
            return pl__err(err, PL_EFORMAT, "%s: text chunks %s/%s: %s", j->path,
                           PL_PNG_KEY_QUANTITY, PL_PNG_KEY_UNIT, why.msg);
        snprintf(ch->quantity, sizeof ch->quantity, "%s", m->quantity);
        snprintf(ch->unit, sizeof ch->unit, "%s", unit);
    } else if (m->unit && *m->unit) {
        if (strlen(m->unit) >= sizeof ch->unit)
            return bad_chunk(j, PL_PNG_KEY_UNIT, m->unit, "a unit of at most 23 characters",
                             err);
        snprintf(ch->unit, sizeof ch->unit, "%s", m->unit);
    }
    return PL_OK;
}

/* The libpng part of reading; see the introduction for the setjmp rules. */
static int read_png(png_job *j, pl_map **out, pl_map_load_info *info,
                    const pl_map_load_options *opts, pl_err *err)
{
    if (setjmp(png_jmpbuf(j->png)))
        return pl__err(err, PL_EFORMAT, "%s: corrupt or truncated PNG (%s)", j->path, j->msg);
    png_init_io(j->png, j->f);
    png_set_sig_bytes(j->png, 8);
    png_read_info(j->png, j->info);
    png_uint_32 w, h;
    int depth, ctype, interlace;
    png_get_IHDR(j->png, j->info, &w, &h, &depth, &ctype, &interlace, NULL, NULL);
    if (ctype != PNG_COLOR_TYPE_GRAY)
        return pl__err(err, PL_EFORMAT, "%s: not a grayscale PNG (colour type %d, %s)",
                       j->path, ctype, pl_png__colour_type_name(ctype));
    if (depth != 8 && depth != 16)
        return pl__err(err, PL_EFORMAT, "%s: PNG bit depth %d not supported (8 or 16 expected)",
                       j->path, depth);
    if (w > PL_MAP_MAX_SIDE || h > PL_MAP_MAX_SIDE)
        return pl__err(err, PL_EFORMAT, "%s: PNG of %lu x %lu pixels exceeds %u per side",
                       j->path, (unsigned long)w, (unsigned long)h, PL_MAP_MAX_SIDE);
    (void)png_set_interlace_handling(j->png);
    png_read_update_info(j->png, j->info);
    size_t rowbytes = png_get_rowbytes(j->png, j->info);
    if (rowbytes < (size_t)w * (size_t)(depth / 8) || rowbytes > SIZE_MAX / h)
        return pl__err(err, PL_EFORMAT, "%s: PNG row size %zu is inconsistent", j->path,
                       rowbytes);
    /* Deflate cannot expand data more than 1032:1 (zlib FAQ, Adler & Gailly:
     * "the maximum compression ratio ... is 1032:1"), so a header claiming
     * more pixels than the file could hold is refused before allocating. */
    if (j->file_size >= 0 && rowbytes * h / 1032 > (unsigned long long)j->file_size)
        return pl__err(err, PL_EFORMAT,
                       "%s: truncated PNG (%lu x %lu pixels cannot fit in %lld bytes)",
                       j->path, (unsigned long)w, (unsigned long)h, j->file_size);
    j->image = malloc(rowbytes * h);
    j->rows = malloc(h * sizeof *j->rows);
    if (!j->image || !j->rows)
        return pl__err(err, PL_ENOMEM, "%s: out of memory for %lu x %lu pixels", j->path,
                       (unsigned long)w, (unsigned long)h);
    for (png_uint_32 y = 0; y < h; y++)
        j->rows[y] = j->image + (size_t)y * rowbytes;
    png_read_image(j->png, j->rows);
    png_read_end(j->png, j->info);

    png_meta meta;
    int rc = read_meta(&meta, j, depth, err);
    if (rc)
        return rc;
    pl_map *m;
    rc = pl_map_new(&m, w, h, 1, err);
    if (rc)
        return rc;
    rc = apply_meta(m, &meta, j, err);
    if (rc) {
        pl_map_free(m);
        return rc;
    }
    float *d = m->data;
    for (png_uint_32 y = 0; y < h; y++) {
        const unsigned char *row = j->rows[y];
        for (png_uint_32 x = 0; x < w; x++) {
            long code = depth == 16 ? (long)row[2 * x] << 8 | row[2 * x + 1] : row[x];
            d[(size_t)y * w + x] =
                code == meta.nodata ? NAN : (float)(meta.offset + meta.scale * (double)code);
        }
    }
    rc = pl_map__check_values(info, m, opts, j->path,
                              " (offset + scale * code beyond the float32 range)", PL_EFORMAT,
                              err);
    if (rc) {
        pl_map_free(m);
        return rc;
    }
    *out = m;
    return PL_OK;
}

/* The file's size, for the bound in read_png(), and its PNG signature. */
static int read_signature(png_job *j, pl_err *err)
{
    j->file_size = -1;
    if (fseeko(j->f, 0, SEEK_END) == 0) {
        off_t end = ftello(j->f);
        j->file_size = end >= 0 ? (long long)end : -1;
    }
    rewind(j->f);
    unsigned char sig[8];
    size_t got = fread(sig, 1, sizeof sig, j->f);
    if (got < sizeof sig && ferror(j->f))
        return pl__err(err, PL_EIO, "%s: cannot read: %s", j->path, strerror(errno));
    if (got < sizeof sig || png_sig_cmp(sig, 0, sizeof sig) != 0)
        return pl__err(err, PL_EFORMAT, "%s: not a PNG file", j->path);
    return PL_OK;
}

int pl_map__load_png(pl_map **out, pl_map_load_info *info, const char *path,
                     const pl_map_load_options *opts, pl_err *err)
{
    *out = NULL;
    png_job j;
    int rc = job_begin(&j, path, NULL, err);
    if (rc == PL_OK)
        rc = read_signature(&j, err);
    if (rc == PL_OK)
        rc = read_png(&j, out, info, opts, err);
    return job_end(&j, rc);
}

PL_EXPORT int pl_map_load_png(pl_map **out, const char *path, pl_err *err)
{
    return pl_map__load_png(out, NULL, path, NULL, err);
}

/* ---- writing ---------------------------------------------------------- */

enum { NTEXT = 6 };

typedef struct png_texts {
    char key[NTEXT][24];
    char value[NTEXT][80];
    png_text text[NTEXT];
    int n;  /* chunks in use */
} png_texts;

static void add_text(png_texts *t, const char *key, const char *value)
{
    int i = t->n++;
    snprintf(t->key[i], sizeof t->key[i], "%s", key);
    snprintf(t->value[i], sizeof t->value[i], "%s", value);
    memset(&t->text[i], 0, sizeof t->text[i]);
    t->text[i].compression = PNG_TEXT_COMPRESSION_NONE;
    t->text[i].key = t->key[i];
    t->text[i].text = t->value[i];
    t->text[i].text_length = strlen(t->value[i]);
}

/* The code of one value: offset + scale * code is within scale / 2 of a
 * finite value (pl_map_save_png() refuses an infinity before). */
static unsigned code_of(float v, double offset, double scale)
{
    if (isnan(v))
        return NODATA_CODE;
    double q = floor(((double)v - offset) / scale + 0.5);
    if (q < 0)
        return 0;
    if (q > MAX_CODE)
        return MAX_CODE;
    return (unsigned)q;
}

static int write_gray_png(png_job *j, const pl_map *map, uint32_t c, png_texts *t, double offset,
                     double scale, pl_err *err)
{
    if (setjmp(png_jmpbuf(j->png)))
        return pl__err(err, PL_EIO, "%s: cannot write PNG (%s)", j->path, j->msg);
    png_init_io(j->png, j->f);
    png_set_IHDR(j->png, j->info, map->width, map->height, 16, PNG_COLOR_TYPE_GRAY,
                 PNG_INTERLACE_NONE, PNG_COMPRESSION_TYPE_DEFAULT, PNG_FILTER_TYPE_DEFAULT);
    png_set_text(j->png, j->info, t->text, t->n);
    png_write_info(j->png, j->info);
    j->image = malloc((size_t)map->width * 2);
    if (!j->image)
        return pl__err(err, PL_ENOMEM, "%s: out of memory for a PNG row", j->path);
    const float *d = pl_map_channel(map, c);
    for (uint32_t y = 0; y < map->height; y++) {
        const float *src = d + (size_t)y * map->width;
        for (uint32_t x = 0; x < map->width; x++) {
            unsigned code = code_of(src[x], offset, scale);
            j->image[2 * x] = (unsigned char)(code >> 8);
            j->image[2 * x + 1] = (unsigned char)(code & 0xff);
        }
        png_write_row(j->png, j->image);
    }
    png_write_end(j->png, NULL);
    return PL_OK;
}

PL_EXPORT int pl_map_write_png(const pl_map *map, uint32_t c, pl_outfile *of, pl_err *err)
{
    const char *path = pl_outfile_path(of);
    if (c >= map->nchannels)
        return pl__err(err, PL_EINVAL, "%s: channel %lu does not exist (the map has %lu)",
                       path, (unsigned long)c, (unsigned long)map->nchannels);
    uint32_t ch = 0, row = 0, col = 0;
    int sign = 0;
    size_t ninf = pl_map__count_infinite(map, c, c + 1, &ch, &row, &col, &sign);
    if (ninf)
        return pl__err(err, PL_EINVAL,
                       "%s: not written: %zu infinite value%s, the first (%cinf) at channel "
                       "%lu, row %lu, column %lu (no PNG code stands for an infinity)", path,
                       ninf, ninf == 1 ? "" : "s", sign > 0 ? '+' : '-', (unsigned long)ch,
                       (unsigned long)row, (unsigned long)col);
    double lo, hi, offset = 0, scale = 1;
    if (pl_map_range(map, c, &lo, &hi) > 0) {
        offset = lo;
        if (hi > lo)
            scale = (hi - lo) / MAX_CODE;
    }
    png_texts t;
    memset(&t, 0, sizeof t);
    char num[80];
    snprintf(num, sizeof num, "%.17g", scale);
    add_text(&t, PL_PNG_KEY_SCALE, num);
    snprintf(num, sizeof num, "%.17g", offset);
    add_text(&t, PL_PNG_KEY_OFFSET, num);
    snprintf(num, sizeof num, "%d", NODATA_CODE);
    add_text(&t, PL_PNG_KEY_NODATA, num);
    add_text(&t, PL_PNG_KEY_QUANTITY, map->channels[c].quantity);
    add_text(&t, PL_PNG_KEY_UNIT, map->channels[c].unit);
    /* A map whose pitch is not known (NaN) gets no pitch chunk. */
    if (isfinite(map->pitch_u) && isfinite(map->pitch_v)) {
        snprintf(num, sizeof num, "%.17g %.17g", map->pitch_u, map->pitch_v);
        add_text(&t, PL_PNG_KEY_PITCH, num);
    }

    png_job j;
    int rc = job_begin(&j, path, pl_outfile_stream(of), err);
    if (rc == PL_OK)
        rc = write_gray_png(&j, map, c, &t, offset, scale, err);
    return job_end(&j, rc);
}

PL_EXPORT int pl_map_save_png(const pl_map *map, uint32_t c, const char *path, pl_err *err)
{
    pl_outfile *of;
    int rc = pl_outfile_open(&of, path, err);
    return rc ? rc : pl_outfile_finish(of, pl_map_write_png(map, c, of, err), err);
}
