/*
 * map_npy.c - maps to and from NumPy .npy files.
 */
#include "image/map_int.h"
#include "image/npy_int.h"
#include "common/common_int.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <sys/types.h>

#define CHUNK_VALUES 4096

/* Bytes left in the file from the current position, or -1 when the file
 * cannot seek (a pipe): the reader then finds truncation as it goes. */
static long long bytes_left(FILE *f)
{
    off_t here = ftello(f);
    if (here < 0 || fseeko(f, 0, SEEK_END) != 0)
        return -1;
    off_t end = ftello(f);
    if (end < 0 || fseeko(f, here, SEEK_SET) != 0)
        return -1;
    return end > here ? (long long)(end - here) : 0;
}

static int check_shape(const pl_npy_header *hdr, const char *path, uint32_t dims[3],
                       pl_err *err)
{
    if (hdr->fortran_order)
        return pl__err(err, PL_EFORMAT,
                       "%s: Fortran-order array not supported (C order expected)", path);
    if (hdr->dtype != PL_NPY_F32 && hdr->dtype != PL_NPY_F64 && hdr->dtype != PL_NPY_U16) {
        char name[40];
        return pl__err(err, PL_EFORMAT,
                       "%s: dtype %s not supported (float32, float64 or uint16 expected)",
                       path, pl_npy__descr_name(name, sizeof name, hdr->descr));
    }
    if (hdr->ndim != 2 && hdr->ndim != 3)
        return pl__err(err, PL_EFORMAT,
                       "%s: %d-D array not supported (2-D rows x cols or 3-D channels x "
                       "rows x cols expected)", path, hdr->ndim);
    const uint64_t *s = hdr->shape;
    uint64_t c = hdr->ndim == 3 ? s[0] : 1, h = s[hdr->ndim - 2], w = s[hdr->ndim - 1];
    if (c == 0 || h == 0 || w == 0)
        return pl__err(err, PL_EFORMAT, "%s: the array is empty", path);
    if (w > PL_MAP_MAX_SIDE || h > PL_MAP_MAX_SIDE || c > PL_MAP_MAX_CHANNELS)
        return pl__err(err, PL_EFORMAT,
                       "%s: array of %llu x %llu x %llu is too large for a map (sides up to "
                       "%u, channels up to %u)", path, (unsigned long long)c,
                       (unsigned long long)h, (unsigned long long)w, PL_MAP_MAX_SIDE,
                       PL_MAP_MAX_CHANNELS);
    dims[0] = (uint32_t)c;
    dims[1] = (uint32_t)h;
    dims[2] = (uint32_t)w;
    return PL_OK;
}

static int read_npy(pl_map **out, pl_map_load_info *info, FILE *f, const char *path,
                    const pl_map_load_options *opts, pl_err *err)
{
    pl_npy_header hdr;
    int rc = pl_npy_read_header(&hdr, f, path, err);
    if (rc)
        return rc;
    uint32_t dims[3] = {0, 0, 0};
    rc = check_shape(&hdr, path, dims, err);
    if (rc)
        return rc;
    size_t count;
    if (pl_map__count(&count, dims[2], dims[1], dims[0]))
        return pl__err(err, PL_EFORMAT, "%s: the array is too large for a map", path);
    /* count * itemsize fits: itemsize <= sizeof(double) == 2 * sizeof(float)
     * and pl_map__count bounds count * 4 by SIZE_MAX; check anyway. */
    if (count > SIZE_MAX / hdr.itemsize)
        return pl__err(err, PL_EFORMAT, "%s: the array is too large for a map", path);
    size_t need = count * hdr.itemsize;
    /* Refuse a short file before allocating what its header promises. */
    long long left = bytes_left(f);
    if (left >= 0 && (unsigned long long)left < need)
        return pl__err(err, PL_EFORMAT,
                       "%s: truncated data (%llu of %zu bytes after the header)", path,
                       (unsigned long long)left, need);
    if (left >= 0 && (unsigned long long)left > need)
        return pl__err(err, PL_EFORMAT,
                       "%s: %llu bytes after the %zu bytes of data of the %llu x %llu x %llu "
                       "array", path, (unsigned long long)left - need, need,
                       (unsigned long long)dims[0], (unsigned long long)dims[1],
                       (unsigned long long)dims[2]);
    pl_map *m;
    rc = pl_map_new(&m, dims[2], dims[1], dims[0], err);
    if (rc)
        return rc;
    m->pitch_u = m->pitch_v = NAN; /* .npy carries no pitch */
    unsigned char buf[8 * CHUNK_VALUES];
    size_t per = sizeof buf / hdr.itemsize;
    for (size_t done = 0; done < count;) {
        size_t n = count - done < per ? count - done : per;
        size_t got = fread(buf, hdr.itemsize, n, f);
        if (got < n) {
            int io = ferror(f);
            pl_map_free(m);
            if (io)
                return pl__err(err, PL_EIO, "%s: cannot read: %s", path, strerror(errno));
            return pl__err(err, PL_EFORMAT, "%s: truncated data (%zu of %zu bytes)", path,
                           (done + got) * hdr.itemsize, need);
        }
        pl_npy_to_float(m->data + done, buf, n, &hdr);
        done += n;
    }
    /* a pipe's extra bytes show only now */
    if (left < 0 && fgetc(f) != EOF) {
        pl_map_free(m);
        return pl__err(err, PL_EFORMAT, "%s: bytes after the %zu bytes of data", path, need);
    }
    rc = pl_map__check_values(info, m, opts, path,
                              hdr.dtype == PL_NPY_F64
                                  ? " (float64 values beyond the float32 range become infinite)"
                                  : NULL,
                              PL_EFORMAT, err);
    if (rc) {
        pl_map_free(m);
        return rc;
    }
    *out = m;
    return PL_OK;
}

int pl_map__load_npy(pl_map **out, pl_map_load_info *info, const char *path,
                     const pl_map_load_options *opts, pl_err *err)
{
    *out = NULL;
    FILE *f = fopen(path, "rb");
    if (!f)
        return pl__err(err, PL_EIO, "%s: cannot open: %s", path, strerror(errno));
    int rc = read_npy(out, info, f, path, opts, err);
    fclose(f);
    return rc;
}

PL_EXPORT int pl_map_load_npy(pl_map **out, const char *path, pl_err *err)
{
    return pl_map__load_npy(out, NULL, path, NULL, err);
}

static int write_npy(const pl_map *map, FILE *f, const char *path, pl_err *err)
{
    size_t count;
    if (pl_map__count(&count, map->width, map->height, map->nchannels))
        return pl__err(err, PL_EINVAL, "%s: the map's size is invalid", path);
    uint32_t c = 0, row = 0, col = 0;
    int sign = 0;
    size_t ninf = pl_map__count_infinite(map, 0, map->nchannels, &c, &row, &col, &sign);
    if (ninf)
        return pl__err(err, PL_EINVAL,
                       "%s: not written: the map holds %zu infinite value%s, the first (%cinf) "
                       "at channel %lu, row %lu, column %lu", path, ninf, ninf == 1 ? "" : "s",
                       sign > 0 ? '+' : '-', (unsigned long)c, (unsigned long)row,
                       (unsigned long)col);
    uint64_t shape[3] = {map->nchannels, map->height, map->width};
    int rc = map->nchannels == 1
                 ? pl_npy_write_header(f, "<f4", 2, shape + 1, path, err)
                 : pl_npy_write_header(f, "<f4", 3, shape, path, err);
    if (rc)
        return rc;
    unsigned char buf[4 * CHUNK_VALUES];
    for (size_t done = 0; done < count;) {
        size_t n = count - done < CHUNK_VALUES ? count - done : CHUNK_VALUES;
        pl_map__f32_to_le(buf, map->data + done, n, 0);
        if (fwrite(buf, 4, n, f) != n)
            return pl__err(err, PL_EIO, "%s: cannot write: %s", path, strerror(errno));
        done += n;
    }
    return PL_OK;
}

PL_EXPORT int pl_map_write_npy(const pl_map *map, pl_outfile *of, pl_err *err)
{
    return write_npy(map, pl_outfile_stream(of), pl_outfile_path(of), err);
}

PL_EXPORT int pl_map_save_npy(const pl_map *map, const char *path, pl_err *err)
{
    pl_outfile *of;
    int rc = pl_outfile_open(&of, path, err);
    return rc ? rc : pl_outfile_finish(of, write_npy(map, pl_outfile_stream(of), path, err), err);
}
