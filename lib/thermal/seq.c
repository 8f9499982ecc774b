/*
 * seq.c - raw flash-thermography sequences: the manifest, the .npy cube or
 * the folder of 16-bit PNG frames, read one frame at a time; and the writer.
 *
 * Reading is built for one pass in time order over long sequences: the
 * cube is never mapped or loaded whole. Each frame is fetched with one
 * pread() at its offset into a buffer the pl_seq keeps, and counts become
 * kelvin through a 65536-entry table built once at open (calibration and
 * saturation folded in), so a frame costs one read and one table look-up
 * per pixel.
 *
 * libpng reports errors by longjmp (common/png_int.h sets it up): each
 * libpng session keeps what it owns in a struct in the caller's frame,
 * and the function that calls setjmp() only fills that struct.
 */
#include "thermal/seq_int.h"

#include "common/common_int.h"
#include "common/num_int.h"
#include "common/outfile_int.h"
#include "common/png_int.h"
#include "image/npy_int.h"

#include <cjson/cJSON.h>
#include <dirent.h>
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>
#include <unistd.h>
#include <zlib.h>

#define SEQ_FORMAT "plyledger-sequence-1"
#define NCOUNTS 65536u

/* What the writer names its PNG frames. */
#define WRITER_PATTERN "frame-%05d.png"
#define WRITER_PATTERN_PREFIX "frame-"
#define WRITER_PATTERN_SUFFIX ".png"

typedef enum cal_kind { CAL_LINEAR, CAL_TABLE, CAL_KELVIN } cal_kind;

struct pl_seq {
    char *path;             /* the manifest, as given */
    char *data_path;        /* the cube, or the frames' folder */
    int is_png;
    uint32_t width, height, nframes;
    double *times;          /* relative to the flash */
    uint32_t preflash;
    pl_seq_cold cold;
    double pitch_u, pitch_v;
    char *acquisition;
    uint32_t saturation;    /* counts at or above are saturated */
    float *lut;             /* count -> kelvin, NaN when saturated */
    size_t npixels;
    size_t frame_bytes;     /* stored bytes of one frame */
    unsigned char *raw;     /* one stored frame, when it cannot go to dst */
    /* cube */
    FILE *cube;
    pl_npy_header npy;
    int cube_native_f32;    /* float32 in host order: read straight to dst */
    /* PNG folder */
    pl_seq__pattern pattern;
    long first;
    char *frame_path;       /* scratch: the current frame's path */
    size_t frame_path_cap;
    unsigned char **rows;   /* row pointers into raw */
};

/* The shortest of %.15g, %.16g, %.17g that reads back as `v`, for
 * messages: 0.1 rather than 0.10000000000000001. */
typedef struct numtext {
    char s[32];
} numtext;

static numtext num(double v)
{
    numtext t;
    for (int digits = 15; digits <= 17; digits++) {
        snprintf(t.s, sizeof t.s, "%.*g", digits, v);
        if (strtod(t.s, NULL) == v)
            break;
    }
    return t;
}

/* ---- frame name patterns ------------------------------------------------ */

int pl_seq__parse_pattern(pl_seq__pattern *pat, const char *pattern, const char *name,
                          const char *key, pl_err *err)
{
    memset(pat, 0, sizeof *pat);
    char *part = pat->prefix;
    size_t n = 0;
    int conversions = 0;
    for (const char *p = pattern; *p; p++) {
        unsigned char c = (unsigned char)*p;
        if (c < 0x20 || c == 0x7f || c == '/' || c == '\\')
            return pl__err(err, PL_EFORMAT,
                           "%s: '%s' holds a path separator or control character; a "
                           "file name pattern expected", name, key);
        if (c == '%' && p[1] == '%') {
            p++;
        } else if (c == '%') {
            const char *q = p + 1;
            int width = 0;
            if (*q == '0') {
                q++;
                if (*q < '1' || *q > '9')
                    goto bad_conversion;
                while (*q >= '0' && *q <= '9') {
                    width = width * 10 + (*q - '0');
                    if (width > 20)
                        goto bad_conversion;
                    q++;
                }
            }
            if (*q != 'd')
                goto bad_conversion;
            if (++conversions > 1)
                return pl__err(err, PL_EFORMAT,
                               "%s: '%s' has more than one %%d conversion", name, key);
            pat->width = width;
            part[n] = '\0';
            part = pat->suffix;
            n = 0;
            p = q;
            continue;
        }
        if (n + 1 >= sizeof pat->prefix)
            return pl__err(err, PL_EFORMAT, "%s: '%s' is too long", name, key);
        part[n++] = (char)c;
    }
    part[n] = '\0';
    if (conversions == 0)
        return pl__err(err, PL_EFORMAT,
                       "%s: '%s' has no %%d or %%0Nd conversion for the frame number", name,
                       key);
    return PL_OK;

bad_conversion:
    return pl__err(err, PL_EFORMAT,
                   "%s: '%s' may only use %%d or %%0Nd (N from 1 to 20) for the frame number",
                   name, key);
}

int pl_seq__frame_name(char *out, size_t cap, const pl_seq__pattern *pat, long number)
{
    int n = snprintf(out, cap, "%s%0*ld%s", pat->prefix, pat->width, number, pat->suffix);
    return n < 0 || (size_t)n >= cap ? -1 : 0;
}

/* ---- calibration --------------------------------------------------------- */

/* numpy.interp's rule (numpy/core/src/multiarray/compiled_base.c,
 * arr_interp): below the first point the first value, above the last the
 * last, on a point its value, else slope * (x - x[j]) + y[j] with the
 * slope of the segment; written the same way so that the results agree to
 * the bit. */
double pl_seq__table_value(double count, const double *counts, const double *kelvin, size_t n)
{
    if (count <= counts[0])
        return kelvin[0];
    if (count >= counts[n - 1])
        return kelvin[n - 1];
    size_t lo = 0, hi = n - 1; /* counts[lo] < count < counts[hi] */
    while (hi - lo > 1) {
        size_t mid = lo + (hi - lo) / 2;
        if (counts[mid] <= count)
            lo = mid;
        else
            hi = mid;
    }
    if (counts[lo] == count)
        return kelvin[lo];
    double slope = (kelvin[lo + 1] - kelvin[lo]) / (counts[lo + 1] - counts[lo]);
    return slope * (count - counts[lo]) + kelvin[lo];
}

typedef struct calibration {
    cal_kind kind;
    double gain, offset;
    double *counts, *kelvin;  /* table */
    size_t n;
} calibration;

static int build_lut(pl_seq *s, const calibration *c, pl_err *err)
{
    s->lut = malloc(NCOUNTS * sizeof *s->lut);
    if (!s->lut)
        return pl__err(err, PL_ENOMEM, "%s: out of memory", s->path);
    for (uint32_t k = 0; k < NCOUNTS; k++) {
        double v;
        if (k >= s->saturation)
            v = NAN;
        else if (c->kind == CAL_LINEAR)
            v = c->offset + c->gain * (double)k;
        else
            v = pl_seq__table_value((double)k, c->counts, c->kelvin, c->n);
        s->lut[k] = (float)v;
    }
    return PL_OK;
}

/* ---- manifest ------------------------------------------------------------ */

/* Everything the manifest says, before the data is looked at. */
typedef struct manifest {
    const char *data_file;    /* "data" as a string */
    const char *folder;       /* "data" as an object */
    const char *pattern;
    long first;
    long width, height, nframes;      /* -1: not given */
    double rate;                       /* 0: not given */
    const cJSON *times;                /* frame_times_s, or NULL */
    double flash;
    long preflash;                     /* -1: not given */
    pl_seq_cold cold;
    calibration cal;
    long saturation;                   /* -1: not given */
    double pitch_u, pitch_v;
    const cJSON *acquisition;
} manifest;

/* Every key of `obj` must be one of `known` (NULL-terminated), and appear
 * once: JSON allows a repeated key, a manifest does not. Counting per
 * known key keeps this linear in the object's size. */
static int check_known(const cJSON *obj, const char *const *known, const char *path,
                       const char *where, pl_err *err)
{
    for (const cJSON *a = obj->child; a; a = a->next) {
        int ok = 0;
        for (size_t i = 0; known[i] && !ok; i++)
            ok = a->string && strcmp(a->string, known[i]) == 0;
        if (!ok)
            return pl__err(err, PL_EFORMAT, "%s: unknown key '%.60s' in %s", path,
                           a->string ? a->string : "", where);
    }
    for (size_t i = 0; known[i]; i++) {
        int seen = 0;
        for (const cJSON *a = obj->child; a; a = a->next)
            if (strcmp(a->string, known[i]) == 0 && ++seen > 1)
                return pl__err(err, PL_EFORMAT, "%s: %s repeats the key '%s'", path, where,
                               known[i]);
    }
    return PL_OK;
}

static int get_number(double *out, const cJSON *item, const char *path, const char *key,
                      pl_err *err)
{
    if (!cJSON_IsNumber(item) || !isfinite(item->valuedouble))
        return pl__err(err, PL_EFORMAT, "%s: '%s' must be a number", path, key);
    *out = item->valuedouble;
    return PL_OK;
}

static int get_integer(long *out, const cJSON *item, long lo, long hi, const char *path,
                       const char *key, pl_err *err)
{
    double v = cJSON_IsNumber(item) ? item->valuedouble : NAN;
    if (!(v == floor(v) && v >= (double)lo && v <= (double)hi))
        return pl__err(err, PL_EFORMAT, "%s: '%s' must be an integer from %ld to %ld", path,
                       key, lo, hi);
    *out = (long)v;
    return PL_OK;
}

static int get_string(const char **out, const cJSON *item, const char *path, const char *key,
                      pl_err *err)
{
    if (!cJSON_IsString(item) || !item->valuestring || !item->valuestring[0])
        return pl__err(err, PL_EFORMAT, "%s: '%s' must be a non-empty string", path, key);
    *out = item->valuestring;
    return PL_OK;
}

/* A JSON array of finite numbers, copied into a malloc'd array. */
static int get_numbers(double **out, size_t *n, const cJSON *item, const char *path,
                       const char *key, pl_err *err)
{
    *out = NULL;
    *n = 0;
    if (!cJSON_IsArray(item))
        return pl__err(err, PL_EFORMAT, "%s: '%s' must be an array of numbers", path, key);
    size_t count = (size_t)cJSON_GetArraySize(item);
    double *v = malloc((count ? count : 1) * sizeof *v);
    if (!v)
        return pl__err(err, PL_ENOMEM, "%s: out of memory", path);
    size_t i = 0;
    for (const cJSON *e = item->child; e; e = e->next, i++) {
        if (!cJSON_IsNumber(e) || !isfinite(e->valuedouble)) {
            free(v);
            return pl__err(err, PL_EFORMAT, "%s: '%s' entry %zu is not a number", path, key,
                           i);
        }
        v[i] = e->valuedouble;
    }
    *out = v;
    *n = count;
    return PL_OK;
}

static int parse_calibration(calibration *c, const cJSON *obj, const char *path, pl_err *err)
{
    if (!cJSON_IsObject(obj))
        return pl__err(err, PL_EFORMAT, "%s: 'calibration' must be an object", path);
    const char *kind = "";
    int rc = get_string(&kind, cJSON_GetObjectItemCaseSensitive(obj, "kind"), path,
                        "calibration.kind", err);
    if (rc)
        return rc;
    if (strcmp(kind, "linear") == 0) {
        static const char *const known[] = {"kind", "gain_k", "offset_k", NULL};
        c->kind = CAL_LINEAR;
        if ((rc = check_known(obj, known, path, "'calibration'", err)) ||
            (rc = get_number(&c->gain, cJSON_GetObjectItemCaseSensitive(obj, "gain_k"), path,
                             "calibration.gain_k", err)) ||
            (rc = get_number(&c->offset, cJSON_GetObjectItemCaseSensitive(obj, "offset_k"),
                             path, "calibration.offset_k", err)))
            return rc;
        if (!(c->gain > 0))
            return pl__err(err, PL_EFORMAT, "%s: 'calibration.gain_k' must be > 0", path);
        return PL_OK;
    }
    if (strcmp(kind, "table") == 0) {
        static const char *const known[] = {"kind", "counts", "kelvin", NULL};
        c->kind = CAL_TABLE;
        size_t nk;
        if ((rc = check_known(obj, known, path, "'calibration'", err)) ||
            (rc = get_numbers(&c->counts, &c->n, cJSON_GetObjectItemCaseSensitive(obj, "counts"),
                              path, "calibration.counts", err)) ||
            (rc = get_numbers(&c->kelvin, &nk, cJSON_GetObjectItemCaseSensitive(obj, "kelvin"),
                              path, "calibration.kelvin", err)))
            return rc;
        if (c->n < 2)
            return pl__err(err, PL_EFORMAT, "%s: 'calibration.counts' needs at least 2 points",
                           path);
        if (nk != c->n)
            return pl__err(err, PL_EFORMAT,
                           "%s: 'calibration.kelvin' has %zu points, 'calibration.counts' %zu",
                           path, nk, c->n);
        for (size_t i = 1; i < c->n; i++)
            if (!(c->counts[i] > c->counts[i - 1]))
                return pl__err(err, PL_EFORMAT,
                               "%s: 'calibration.counts' must increase strictly (entry %zu: "
                               "%s after %s)", path, i, num(c->counts[i]).s,
                               num(c->counts[i - 1]).s);
        return PL_OK;
    }
    if (strcmp(kind, "kelvin") == 0) {
        static const char *const known[] = {"kind", NULL};
        c->kind = CAL_KELVIN;
        return check_known(obj, known, path, "'calibration'", err);
    }
    return pl__err(err, PL_EFORMAT,
                   "%s: 'calibration.kind' is '%.40s'; 'linear', 'table' or 'kelvin' expected",
                   path, kind);
}

static int parse_data(manifest *m, const cJSON *item, const char *path, pl_err *err)
{
    if (cJSON_IsString(item))
        return get_string(&m->data_file, item, path, "data", err);
    if (!cJSON_IsObject(item))
        return pl__err(err, PL_EFORMAT,
                       "%s: 'data' must be a file name or an object with 'folder' and "
                       "'pattern'", path);
    static const char *const known[] = {"folder", "pattern", "first", NULL};
    int rc;
    if ((rc = check_known(item, known, path, "'data'", err)) ||
        (rc = get_string(&m->folder, cJSON_GetObjectItemCaseSensitive(item, "folder"), path,
                         "data.folder", err)) ||
        (rc = get_string(&m->pattern, cJSON_GetObjectItemCaseSensitive(item, "pattern"), path,
                         "data.pattern", err)))
        return rc;
    const cJSON *first = cJSON_GetObjectItemCaseSensitive(item, "first");
    m->first = 0;
    if (first)
        return get_integer(&m->first, first, 0, 1000000000L, path, "data.first", err);
    return PL_OK;
}

static int parse_pitch(manifest *m, const cJSON *item, const char *path, pl_err *err)
{
    double u, v;
    if (cJSON_IsNumber(item)) {
        u = v = item->valuedouble;
    } else if (cJSON_IsArray(item) && cJSON_GetArraySize(item) == 2 &&
               cJSON_IsNumber(item->child) && cJSON_IsNumber(item->child->next)) {
        u = item->child->valuedouble;
        v = item->child->next->valuedouble;
    } else {
        return pl__err(err, PL_EFORMAT, "%s: 'pitch_mm' must be a number or [u, v]", path);
    }
    if (!(isfinite(u) && u > 0 && isfinite(v) && v > 0))
        return pl__err(err, PL_EFORMAT, "%s: 'pitch_mm' must be > 0", path);
    m->pitch_u = u;
    m->pitch_v = v;
    return PL_OK;
}

/*
 * "cold_reference" and "preflash_frames". Frames that already hold the rise
 * (the camera's software subtracted the pre-flash level) have no
 * pre-flash frame to average; that is said in so many words, so that a
 * manifest cannot lose its cold reference by a typing slip: 0 pre-flash
 * frames only with "subtracted", and "subtracted" with none.
 */
static int parse_cold_reference(manifest *m, const cJSON *cold, const cJSON *pre,
                                const char *path, pl_err *err)
{
    m->cold = PL_SEQ_COLD_PREFLASH;
    if (cold) {
        const char *v = "";
        int rc = get_string(&v, cold, path, "cold_reference", err);
        if (rc)
            return rc;
        if (strcmp(v, "subtracted") == 0)
            m->cold = PL_SEQ_COLD_SUBTRACTED;
        else if (strcmp(v, "preflash") != 0)
            return pl__err(err, PL_EFORMAT,
                           "%s: 'cold_reference' is '%.40s'; 'preflash' or 'subtracted' expected",
                           path, v);
    }
    m->preflash = -1;
    if (!pre)
        return PL_OK;
    int rc = get_integer(&m->preflash, pre, 0, (long)INT32_MAX, path, "preflash_frames", err);
    if (rc)
        return rc;
    if (m->preflash == 0 && m->cold != PL_SEQ_COLD_SUBTRACTED)
        return pl__err(err, PL_EFORMAT,
                       "%s: 'preflash_frames' is 0, but the cold reference is the mean of the "
                       "pre-flash frames; frames that already hold the rise need "
                       "\"cold_reference\": \"subtracted\"", path);
    if (m->preflash > 0 && m->cold == PL_SEQ_COLD_SUBTRACTED)
        return pl__err(err, PL_EFORMAT,
                       "%s: 'preflash_frames' is %ld but 'cold_reference' is 'subtracted' (the "
                       "frames hold the rise; no pre-flash frame is used)", path, m->preflash);
    return PL_OK;
}

static int parse_manifest(manifest *m, const cJSON *root, const char *path, pl_err *err)
{
    static const char *const known[] = {
        "format", "data", "width", "height", "frame_count", "frame_rate_hz", "frame_times_s",
        "flash_time_s", "preflash_frames", "cold_reference", "calibration", "pitch_mm",
        "saturation_count", "acquisition", NULL};
    if (!cJSON_IsObject(root))
        return pl__err(err, PL_EFORMAT, "%s: the manifest is not a JSON object", path);
    int rc = check_known(root, known, path, "the manifest", err);
    if (rc)
        return rc;
#define ITEM(k) cJSON_GetObjectItemCaseSensitive(root, k)
    const char *format = "";
    if (!ITEM("format"))
        return pl__err(err, PL_EFORMAT, "%s: no 'format' key ('" SEQ_FORMAT "' expected)",
                       path);
    if ((rc = get_string(&format, ITEM("format"), path, "format", err)))
        return rc;
    if (strcmp(format, SEQ_FORMAT) != 0)
        return pl__err(err, PL_EFORMAT, "%s: 'format' is '%.40s'; '" SEQ_FORMAT "' expected",
                       path, format);
    if (!ITEM("data"))
        return pl__err(err, PL_EFORMAT, "%s: no 'data' key", path);
    if ((rc = parse_data(m, ITEM("data"), path, err)))
        return rc;
    m->width = m->height = m->nframes = -1;
    if (ITEM("width") && (rc = get_integer(&m->width, ITEM("width"), 1, PL_SEQ__MAX_SIDE, path,
                                           "width", err)))
        return rc;
    if (ITEM("height") && (rc = get_integer(&m->height, ITEM("height"), 1, PL_SEQ__MAX_SIDE,
                                            path, "height", err)))
        return rc;
    if (ITEM("frame_count") && (rc = get_integer(&m->nframes, ITEM("frame_count"), 1,
                                                 (long)INT32_MAX, path, "frame_count", err)))
        return rc;
    const cJSON *rate = ITEM("frame_rate_hz");
    m->times = ITEM("frame_times_s");
    if (rate && m->times)
        return pl__err(err, PL_EFORMAT,
                       "%s: both 'frame_rate_hz' and 'frame_times_s' are given; one expected",
                       path);
    if (!rate && !m->times)
        return pl__err(err, PL_EFORMAT, "%s: neither 'frame_rate_hz' nor 'frame_times_s' is given",
                       path);
    if (rate) {
        if ((rc = get_number(&m->rate, rate, path, "frame_rate_hz", err)))
            return rc;
        if (!(m->rate > 0))
            return pl__err(err, PL_EFORMAT, "%s: 'frame_rate_hz' must be > 0", path);
    } else {
        if (!cJSON_IsArray(m->times) || cJSON_GetArraySize(m->times) < 1)
            return pl__err(err, PL_EFORMAT, "%s: 'frame_times_s' must be an array of numbers",
                           path);
        long n = cJSON_GetArraySize(m->times);
        if (m->nframes >= 0 && n != m->nframes)
            return pl__err(err, PL_EFORMAT,
                           "%s: 'frame_times_s' has %ld times; 'frame_count' says %ld", path, n,
                           m->nframes);
    }
    if (!ITEM("flash_time_s"))
        return pl__err(err, PL_EFORMAT, "%s: no 'flash_time_s' key", path);
    if ((rc = get_number(&m->flash, ITEM("flash_time_s"), path, "flash_time_s", err)))
        return rc;
    if ((rc = parse_cold_reference(m, ITEM("cold_reference"), ITEM("preflash_frames"), path,
                                   err)))
        return rc;
    if (!ITEM("calibration"))
        return pl__err(err, PL_EFORMAT, "%s: no 'calibration' key", path);
    if ((rc = parse_calibration(&m->cal, ITEM("calibration"), path, err)))
        return rc;
    m->saturation = -1;
    if (ITEM("saturation_count")) {
        if (m->cal.kind == CAL_KELVIN)
            return pl__err(err, PL_EFORMAT,
                           "%s: 'saturation_count' applies to counts; calibration 'kelvin' "
                           "has none", path);
        if ((rc = get_integer(&m->saturation, ITEM("saturation_count"), 1, 65535, path,
                              "saturation_count", err)))
            return rc;
    }
    m->pitch_u = m->pitch_v = NAN;
    if (ITEM("pitch_mm") && (rc = parse_pitch(m, ITEM("pitch_mm"), path, err)))
        return rc;
    m->acquisition = ITEM("acquisition");
    if (m->acquisition && !cJSON_IsObject(m->acquisition))
        return pl__err(err, PL_EFORMAT, "%s: 'acquisition' must be an object", path);
#undef ITEM
    return PL_OK;
}

/* Read the whole manifest (bounded) and parse it as JSON. */
static int load_json(cJSON **out, const char *path, pl_err *err)
{
    *out = NULL;
    char *text;
    size_t n;
    int rc = pl__read_text(&text, &n, path, PL_SEQ__MAX_MANIFEST_BYTES, err);
    if (rc)
        return rc;
    const char *end = NULL;
    *out = cJSON_ParseWithLengthOpts(text, n, &end, 0);
    if (!*out) {
        size_t at = end && end >= text && end <= text + n ? (size_t)(end - text) : 0;
        rc = pl__err(err, PL_EFORMAT, "%s: not valid JSON (at byte %zu)", path, at);
    } else {
        /* only blanks may follow the object */
        for (const char *p = end; p && p < text + n; p++)
            if (*p != ' ' && *p != '\t' && *p != '\n' && *p != '\r') {
                cJSON_Delete(*out);
                *out = NULL;
                rc = pl__err(err, PL_EFORMAT, "%s: not valid JSON (text after the object "
                             "at byte %zu)", path, (size_t)(p - text));
                break;
            }
    }
    free(text);
    return rc;
}

/* ---- opening the data ---------------------------------------------------- */

static int check_dim(const char *path, const char *what, long manifest_value,
                     uint64_t data_value, const char *data_name, pl_err *err)
{
    if (manifest_value >= 0 && (uint64_t)manifest_value != data_value)
        return pl__err(err, PL_EFORMAT, "%s: '%s' is %ld but %s has %llu", path, what,
                       manifest_value, data_name, (unsigned long long)data_value);
    return PL_OK;
}

static int open_cube(pl_seq *s, const manifest *m, pl_err *err)
{
    const char *dp = s->data_path;
    s->cube = fopen(dp, "rb");
    if (!s->cube)
        return pl__err(err, PL_EIO, "%s: cannot open: %s", dp, strerror(errno));
    pl_npy_header *h = &s->npy;
    int rc = pl_npy_read_header(h, s->cube, dp, err);
    if (rc)
        return rc;
    if (h->ndim != 3)
        return pl__err(err, PL_EFORMAT,
                       "%s: a %d-D array; a 3-D cube (frames x rows x columns) expected", dp,
                       h->ndim);
    if (h->fortran_order)
        return pl__err(err, PL_EFORMAT, "%s: Fortran-order array; C order expected", dp);
    if (h->dtype != PL_NPY_U16 && h->dtype != PL_NPY_F32) {
        char name[40];
        return pl__err(err, PL_EFORMAT, "%s: dtype %s; uint16 or float32 expected", dp,
                       pl_npy__descr_name(name, sizeof name, h->descr));
    }
    if (h->shape[0] < 1 || h->shape[1] < 1 || h->shape[2] < 1)
        return pl__err(err, PL_EFORMAT, "%s: empty cube (%llu x %llu x %llu)", dp,
                       (unsigned long long)h->shape[0], (unsigned long long)h->shape[1],
                       (unsigned long long)h->shape[2]);
    if (h->shape[0] > INT32_MAX || h->shape[1] > PL_SEQ__MAX_SIDE ||
        h->shape[2] > PL_SEQ__MAX_SIDE || h->shape[1] * h->shape[2] > PL_SEQ__MAX_PIXELS)
        return pl__err(err, PL_EFORMAT, "%s: cube of %llu x %llu x %llu is too large", dp,
                       (unsigned long long)h->shape[0], (unsigned long long)h->shape[1],
                       (unsigned long long)h->shape[2]);
    if ((rc = check_dim(s->path, "frame_count", m->nframes, h->shape[0],
                        pl__basename(dp), err)) ||
        (rc = check_dim(s->path, "height", m->height, h->shape[1], pl__basename(dp), err)) ||
        (rc = check_dim(s->path, "width", m->width, h->shape[2], pl__basename(dp), err)))
        return rc;
    if (m->times && (uint64_t)cJSON_GetArraySize(m->times) != h->shape[0])
        return pl__err(err, PL_EFORMAT, "%s: 'frame_times_s' has %d times but %s has %llu frames",
                       s->path, cJSON_GetArraySize(m->times), pl__basename(dp),
                       (unsigned long long)h->shape[0]);
    if (m->cal.kind == CAL_KELVIN && h->dtype != PL_NPY_F32)
        return pl__err(err, PL_EFORMAT,
                       "%s: calibration 'kelvin' needs float32 data; %s is uint16", s->path,
                       pl__basename(dp));
    if (m->cal.kind != CAL_KELVIN && h->dtype != PL_NPY_U16)
        return pl__err(err, PL_EFORMAT,
                       "%s: calibration '%s' needs uint16 counts; %s is float32", s->path,
                       m->cal.kind == CAL_LINEAR ? "linear" : "table", pl__basename(dp));
    s->nframes = (uint32_t)h->shape[0];
    s->height = (uint32_t)h->shape[1];
    s->width = (uint32_t)h->shape[2];
    s->npixels = (size_t)s->width * s->height;
    s->frame_bytes = s->npixels * h->itemsize;
    /* the whole cube's size, against the file's */
    struct stat st;
    if (fstat(fileno(s->cube), &st) != 0)
        return pl__err(err, PL_EIO, "%s: cannot stat: %s", dp, strerror(errno));
    uint64_t need = h->data_offset + (uint64_t)s->frame_bytes * s->nframes;
    uint64_t have = (uint64_t)st.st_size;
    if (have < need)
        return pl__err(err, PL_EFORMAT,
                       "%s: truncated: %llu bytes missing (%u frames of %u x %u %s need %llu "
                       "bytes, the file has %llu)", dp, (unsigned long long)(need - have),
                       s->nframes, s->height, s->width, pl_npy_dtype_name(h->dtype),
                       (unsigned long long)need, (unsigned long long)have);
    if (have > need)
        return pl__err(err, PL_EFORMAT,
                       "%s: %llu bytes after the end of the %u x %u x %u cube", dp,
                       (unsigned long long)(have - need), s->nframes, s->height, s->width);
    s->cube_native_f32 = h->dtype == PL_NPY_F32 && h->big_endian == pl__host_big_endian();
    if (!s->cube_native_f32) {
        s->raw = malloc(s->frame_bytes);
        if (!s->raw)
            return pl__err(err, PL_ENOMEM, "%s: out of memory for a frame", dp);
    }
#if defined(POSIX_FADV_SEQUENTIAL)
    (void)posix_fadvise(fileno(s->cube), 0, 0, POSIX_FADV_SEQUENTIAL);
#endif
    return PL_OK;
}

static uint32_t be32(const unsigned char *p)
{
    return (uint32_t)p[0] << 24 | (uint32_t)p[1] << 16 | (uint32_t)p[2] << 8 | p[3];
}

static int set_frame_path(pl_seq *s, uint32_t index, pl_err *err)
{
    char name[600];
    if (pl_seq__frame_name(name, sizeof name, &s->pattern, s->first + (long)index))
        return pl__err(err, PL_EFORMAT, "%s: frame %u: file name too long", s->path, index);
    size_t need = strlen(s->data_path) + strlen(name) + 2;
    if (need > s->frame_path_cap) {
        char *grown = realloc(s->frame_path, need);
        if (!grown)
            return pl__err(err, PL_ENOMEM, "%s: out of memory", s->path);
        s->frame_path = grown;
        s->frame_path_cap = need;
    }
    snprintf(s->frame_path, s->frame_path_cap, "%s/%s", s->data_path, name);
    return PL_OK;
}

/* Check one frame file by its signature and IHDR chunk alone (33 bytes),
 * so that opening a long sequence touches each frame only briefly. The
 * first frame sets the size the others must have. */
static int check_png_frame(pl_seq *s, uint32_t index, pl_err *err)
{
    int rc = set_frame_path(s, index, err);
    if (rc)
        return rc;
    const char *fp = s->frame_path;
    FILE *f = fopen(fp, "rb");
    if (!f) {
        if (errno == ENOENT)
            return pl__err(err, PL_EFORMAT, "%s: frame %u missing: %s", s->path, index, fp);
        return pl__err(err, PL_EIO, "%s: frame %u: cannot open: %s", fp, index,
                       strerror(errno));
    }
    unsigned char b[33];
    size_t got = fread(b, 1, sizeof b, f);
    int read_error = ferror(f);
    fclose(f);
    if (got < sizeof b && read_error)
        return pl__err(err, PL_EIO, "%s: frame %u: cannot read", fp, index);
    if (got < 8 || png_sig_cmp(b, 0, 8) != 0)
        return pl__err(err, PL_EFORMAT, "%s: frame %u: not a PNG file", fp, index);
    if (got < sizeof b || be32(b + 8) != 13 || memcmp(b + 12, "IHDR", 4) != 0)
        return pl__err(err, PL_EFORMAT, "%s: frame %u: truncated or corrupt PNG header", fp,
                       index);
    if ((uint32_t)crc32(crc32(0L, Z_NULL, 0), b + 12, 17) != be32(b + 29))
        return pl__err(err, PL_EFORMAT, "%s: frame %u: PNG header checksum mismatch", fp,
                       index);
    uint32_t w = be32(b + 16), h = be32(b + 20);
    int depth = b[24], ctype = b[25], interlace = b[28];
    if (ctype != 0)
        return pl__err(err, PL_EFORMAT, "%s: frame %u: not a grayscale PNG (colour type %d, %s)",
                       fp, index, ctype, pl_png__colour_type_name(ctype));
    if (depth != 16)
        return pl__err(err, PL_EFORMAT, "%s: frame %u: PNG bit depth %d; 16 expected", fp,
                       index, depth);
    if (b[26] != 0 || b[27] != 0 || interlace > 1)
        return pl__err(err, PL_EFORMAT, "%s: frame %u: invalid PNG header", fp, index);
    if (index == 0) {
        if (w < 1 || h < 1 || w > PL_SEQ__MAX_SIDE || h > PL_SEQ__MAX_SIDE ||
            (uint64_t)w * h > PL_SEQ__MAX_PIXELS)
            return pl__err(err, PL_EFORMAT, "%s: frame 0: %lu x %lu pixels not supported", fp,
                           (unsigned long)w, (unsigned long)h);
        s->width = w;
        s->height = h;
    } else if (w != s->width || h != s->height) {
        return pl__err(err, PL_EFORMAT, "%s: frame %u is %lu x %lu pixels; frame 0 is %u x %u",
                       fp, index, (unsigned long)w, (unsigned long)h, s->width, s->height);
    }
    return PL_OK;
}

static int open_png_folder(pl_seq *s, const manifest *m, pl_err *err)
{
    int rc = pl_seq__parse_pattern(&s->pattern, m->pattern, s->path, "data.pattern", err);
    if (rc)
        return rc;
    s->first = m->first;
    long n = m->times ? (long)cJSON_GetArraySize(m->times) : m->nframes;
    if (n < 1)
        return pl__err(err, PL_EFORMAT,
                       "%s: a PNG folder needs 'frame_count' (or 'frame_times_s')", s->path);
    if (m->cal.kind == CAL_KELVIN)
        return pl__err(err, PL_EFORMAT,
                       "%s: calibration 'kelvin' needs float32 data; PNG frames hold counts",
                       s->path);
    struct stat st;
    if (stat(s->data_path, &st) != 0)
        return pl__err(err, errno == ENOENT ? PL_EFORMAT : PL_EIO, "%s: frame folder %s: %s",
                       s->path, s->data_path, strerror(errno));
    if (!S_ISDIR(st.st_mode))
        return pl__err(err, PL_EFORMAT, "%s: %s is not a folder", s->path, s->data_path);
    s->nframes = (uint32_t)n;
    for (uint32_t i = 0; i < s->nframes; i++)
        if ((rc = check_png_frame(s, i, err)))
            return rc;
    if ((rc = check_dim(s->path, "height", m->height, s->height, "frame 0", err)) ||
        (rc = check_dim(s->path, "width", m->width, s->width, "frame 0", err)))
        return rc;
    s->npixels = (size_t)s->width * s->height;
    s->frame_bytes = s->npixels * 2;
    s->raw = malloc(s->frame_bytes);
    s->rows = malloc(s->height * sizeof *s->rows);
    if (!s->raw || !s->rows)
        return pl__err(err, PL_ENOMEM, "%s: out of memory for a frame", s->path);
    for (uint32_t y = 0; y < s->height; y++)
        s->rows[y] = s->raw + (size_t)y * s->width * 2;
    return PL_OK;
}

/* Frame times, relative to the flash, and the pre-flash count. */
static int set_times(pl_seq *s, const manifest *m, pl_err *err)
{
    s->times = malloc(s->nframes * sizeof *s->times);
    if (!s->times)
        return pl__err(err, PL_ENOMEM, "%s: out of memory", s->path);
    if (m->times) {
        uint32_t i = 0;
        for (const cJSON *e = m->times->child; e; e = e->next, i++) {
            if (!cJSON_IsNumber(e) || !isfinite(e->valuedouble))
                return pl__err(err, PL_EFORMAT, "%s: 'frame_times_s' entry %u is not a number",
                               s->path, i);
            s->times[i] = e->valuedouble;
            if (i > 0 && !(s->times[i] > s->times[i - 1]))
                return pl__err(err, PL_EFORMAT,
                               "%s: 'frame_times_s' must increase (frame %u at %s s, "
                               "frame %u at %s s)", s->path, i - 1, num(s->times[i - 1]).s, i,
                               num(s->times[i]).s);
        }
    } else {
        for (uint32_t i = 0; i < s->nframes; i++)
            s->times[i] = (double)i / m->rate;
    }
    uint32_t before = 0;
    while (before < s->nframes && s->times[before] < m->flash)
        before++;
    s->cold = m->cold;
    if (m->cold == PL_SEQ_COLD_SUBTRACTED && before > 0)
        return pl__err(err, PL_EFORMAT,
                       "%s: 'cold_reference' is 'subtracted' but %u frames come before the flash "
                       "(the first at %s s, flash at %s s); frames of rise data start at the "
                       "flash, or the pre-flash frames make the cold reference", s->path, before,
                       num(s->times[0]).s, num(m->flash).s);
    if (before == 0 && m->cold == PL_SEQ_COLD_PREFLASH)
        return pl__err(err, PL_EFORMAT,
                       "%s: no frame before the flash (first frame at %s s, flash at %s s)",
                       s->path, num(s->times[0]).s, num(m->flash).s);
    if (!(s->times[s->nframes - 1] > m->flash))
        return pl__err(err, PL_EFORMAT,
                       "%s: no frame after the flash (last frame at %s s, flash at %s s)",
                       s->path, num(s->times[s->nframes - 1]).s, num(m->flash).s);
    if (m->preflash > (long)before)
        return pl__err(err, PL_EFORMAT,
                       "%s: 'preflash_frames' is %ld but only %u frames come before the flash",
                       s->path, m->preflash, before);
    s->preflash = m->preflash >= 0 ? (uint32_t)m->preflash : before;
    for (uint32_t i = 0; i < s->nframes; i++)
        s->times[i] -= m->flash;
    return PL_OK;
}

static int open_seq(pl_seq *s, const cJSON *root, pl_err *err)
{
    manifest m;
    memset(&m, 0, sizeof m);
    int rc = parse_manifest(&m, root, s->path, err);
    if (rc == PL_OK) {
        char *dir = pl__path_dir(s->path);
        if (dir)
            s->data_path = pl__path_join(dir, m.data_file ? m.data_file : m.folder);
        free(dir);
        if (!s->data_path)
            rc = pl__err(err, PL_ENOMEM, "%s: out of memory", s->path);
    }
    if (rc == PL_OK) {
        s->is_png = m.folder != NULL;
        s->saturation = m.saturation >= 0 ? (uint32_t)m.saturation : 65535u;
        s->pitch_u = m.pitch_u;
        s->pitch_v = m.pitch_v;
        rc = s->is_png ? open_png_folder(s, &m, err) : open_cube(s, &m, err);
    }
    if (rc == PL_OK)
        rc = set_times(s, &m, err);
    if (rc == PL_OK && m.cal.kind != CAL_KELVIN)
        rc = build_lut(s, &m.cal, err);
    if (rc == PL_OK) {
        /* copied, so that everything the pl_seq holds goes back through free() */
        char *printed = m.acquisition ? cJSON_PrintUnformatted(m.acquisition) : NULL;
        s->acquisition = pl__strdup(m.acquisition ? printed : "{}");
        cJSON_free(printed);
        if (!s->acquisition)
            rc = pl__err(err, PL_ENOMEM, "%s: out of memory", s->path);
    }
    free(m.cal.counts);
    free(m.cal.kelvin);
    return rc;
}

PL_EXPORT int pl_seq_open(pl_seq **out, const char *manifest_path, pl_err *err)
{
    *out = NULL;
    cJSON *root;
    int rc = load_json(&root, manifest_path, err);
    if (rc)
        return rc;
    pl_seq *s = calloc(1, sizeof *s);
    if (!s || !(s->path = pl__strdup(manifest_path))) {
        free(s);
        cJSON_Delete(root);
        return pl__err(err, PL_ENOMEM, "%s: out of memory", manifest_path);
    }
    rc = open_seq(s, root, err);
    cJSON_Delete(root);
    if (rc) {
        pl_seq_close(s);
        return rc;
    }
    *out = s;
    return PL_OK;
}

PL_EXPORT void pl_seq_close(pl_seq *seq)
{
    if (!seq)
        return;
    if (seq->cube)
        fclose(seq->cube);
    free(seq->path);
    free(seq->data_path);
    free(seq->times);
    free(seq->acquisition);
    free(seq->lut);
    free(seq->raw);
    free(seq->frame_path);
    free(seq->rows);
    free(seq);
}

PL_EXPORT uint32_t pl_seq_width(const pl_seq *seq) { return seq->width; }
PL_EXPORT uint32_t pl_seq_height(const pl_seq *seq) { return seq->height; }
PL_EXPORT uint32_t pl_seq_frame_count(const pl_seq *seq) { return seq->nframes; }
PL_EXPORT const double *pl_seq_times(const pl_seq *seq) { return seq->times; }
PL_EXPORT uint32_t pl_seq_preflash_frames(const pl_seq *seq) { return seq->preflash; }
PL_EXPORT pl_seq_cold pl_seq_cold_reference(const pl_seq *seq) { return seq->cold; }
PL_EXPORT const char *pl_seq_acquisition_json(const pl_seq *seq) { return seq->acquisition; }

PL_EXPORT void pl_seq_pitch(const pl_seq *seq, double *pitch_u, double *pitch_v)
{
    if (pitch_u)
        *pitch_u = seq->pitch_u;
    if (pitch_v)
        *pitch_v = seq->pitch_v;
}

/* ---- reading frames ------------------------------------------------------ */

/* Counts to kelvin through the table; `big` says the counts' byte order.
 * The saturated count is kept apart from the look-up so the loop stays a
 * plain gather the compiler can unroll. */
static uint32_t convert_counts(float *dst, const unsigned char *src, size_t n, int big,
                               const float *lut, uint32_t saturation)
{
    uint32_t nsat = 0;
    if (big) {
        for (size_t i = 0; i < n; i++) {
            unsigned c = (unsigned)src[2 * i] << 8 | src[2 * i + 1];
            nsat += c >= saturation;
            dst[i] = lut[c];
        }
    } else {
        for (size_t i = 0; i < n; i++) {
            unsigned c = (unsigned)src[2 * i + 1] << 8 | src[2 * i];
            nsat += c >= saturation;
            dst[i] = lut[c];
        }
    }
    return nsat;
}

/* pread() until `len` bytes or the end of the file; returns the bytes read,
 * or -1 with errno. */
static long long read_at(int fd, void *buf, size_t len, uint64_t offset)
{
    size_t done = 0;
    while (done < len) {
        ssize_t got = pread(fd, (unsigned char *)buf + done, len - done,
                            (off_t)(offset + done));
        if (got < 0) {
            if (errno == EINTR)
                continue;
            return -1;
        }
        if (got == 0)
            break;
        done += (size_t)got;
    }
    return (long long)done;
}

static int read_cube_frame(pl_seq *s, uint32_t index, float *dst, uint32_t *nsat, pl_err *err)
{
    void *buf = s->cube_native_f32 ? (void *)dst : (void *)s->raw;
    uint64_t offset = s->npy.data_offset + (uint64_t)index * s->frame_bytes;
    long long got = read_at(fileno(s->cube), buf, s->frame_bytes, offset);
    if (got < 0)
        return pl__err(err, PL_EIO, "%s: frame %u: cannot read: %s", s->data_path, index,
                       strerror(errno));
    if ((size_t)got < s->frame_bytes)
        return pl__err(err, PL_EFORMAT,
                       "%s: frame %u: truncated since the sequence was opened (%lld of %zu "
                       "bytes)", s->data_path, index, got, s->frame_bytes);
    if (s->npy.dtype == PL_NPY_F32) {
        if (!s->cube_native_f32)
            pl_npy_to_float(dst, s->raw, s->npixels, &s->npy);
        *nsat = 0;
    } else {
        *nsat = convert_counts(dst, s->raw, s->npixels, s->npy.big_endian, s->lut,
                               s->saturation);
    }
    return PL_OK;
}

/* One libpng session, reading or writing a frame. */
typedef struct png_job {
    FILE *f;
    png_structp png;
    png_infop info;
    char msg[PL_PNG_MSG_SIZE]; /* libpng's own complaint */
} png_job;

/* The libpng part of reading a frame; see the introduction. */
static int decode_png(png_job *j, pl_seq *s, uint32_t index, pl_err *err)
{
    if (setjmp(png_jmpbuf(j->png)))
        return pl__err(err, PL_EFORMAT, "%s: frame %u: corrupt or truncated PNG (%s)",
                       s->frame_path, index, j->msg);
    png_init_io(j->png, j->f);
    png_read_info(j->png, j->info);
    png_uint_32 w, h;
    int depth, ctype, interlace;
    png_get_IHDR(j->png, j->info, &w, &h, &depth, &ctype, &interlace, NULL, NULL);
    if (w != s->width || h != s->height || depth != 16 || ctype != PNG_COLOR_TYPE_GRAY)
        return pl__err(err, PL_EFORMAT,
                       "%s: frame %u changed since the sequence was opened (now %lu x %lu, "
                       "%d-bit, colour type %d)", s->frame_path, index, (unsigned long)w,
                       (unsigned long)h, depth, ctype);
    (void)png_set_interlace_handling(j->png);
    png_read_update_info(j->png, j->info);
    if (png_get_rowbytes(j->png, j->info) != (size_t)w * 2)
        return pl__err(err, PL_EFORMAT, "%s: frame %u: unexpected PNG row size",
                       s->frame_path, index);
    png_read_image(j->png, s->rows);
    png_read_end(j->png, NULL);
    return PL_OK;
}

static int read_png_frame(pl_seq *s, uint32_t index, float *dst, uint32_t *nsat, pl_err *err)
{
    int rc = set_frame_path(s, index, err);
    if (rc)
        return rc;
    png_job j;
    memset(&j, 0, sizeof j);
    j.f = fopen(s->frame_path, "rb");
    if (!j.f)
        return pl__err(err, PL_EIO, "%s: frame %u: cannot open: %s", s->frame_path, index,
                       strerror(errno));
    if (pl_png__create(&j.png, &j.info, 0, j.msg))
        rc = pl__err(err, PL_ENOMEM, "%s: out of memory for the PNG reader", s->frame_path);
    else
        rc = decode_png(&j, s, index, err);
    pl_png__destroy(&j.png, &j.info, 0);
    fclose(j.f);
    if (rc == PL_OK)
        *nsat = convert_counts(dst, s->raw, s->npixels, 1, s->lut, s->saturation);
    return rc;
}

PL_EXPORT int pl_seq_read_frame(pl_seq *seq, uint32_t index, float *dst, uint32_t *nsaturated,
                                pl_err *err)
{
    uint32_t nsat = 0;
    if (index >= seq->nframes)
        return pl__err(err, PL_EINVAL, "%s: frame %u does not exist (%u frames)", seq->path,
                       index, seq->nframes);
    int rc = seq->is_png ? read_png_frame(seq, index, dst, &nsat, err)
                         : read_cube_frame(seq, index, dst, &nsat, err);
    if (rc == PL_OK && nsaturated)
        *nsaturated = nsat;
    return rc;
}

/* ---- writing ------------------------------------------------------------- */

struct pl_seq_writer {
    pl_seq_info info;
    char *acquisition;      /* compact JSON, or NULL */
    char *manifest_path;
    char *dir;              /* the manifest's folder ("" for the current one) */
    char *data_name;        /* name.npy or name-frames, as the manifest gives it */
    char *data_final;       /* dir + data_name */
    char *data_tmp;         /* the frames folder being written */
    pl_outfile *cube;       /* the cube being written */
    unsigned char *buf;     /* one frame, encoded */
    char *frame_path;       /* scratch */
    uint32_t written;
    int failed;
};

/* Is `n` a frame file name the writer makes: prefix, digits, suffix? */
static int is_frame_name(const char *n)
{
    size_t np = strlen(WRITER_PATTERN_PREFIX), ns = strlen(WRITER_PATTERN_SUFFIX);
    size_t len = strlen(n);
    if (len <= np + ns || strncmp(n, WRITER_PATTERN_PREFIX, np) != 0 ||
        strcmp(n + len - ns, WRITER_PATTERN_SUFFIX) != 0)
        return 0;
    for (size_t i = np; i < len - ns; i++)
        if (n[i] < '0' || n[i] > '9')
            return 0;
    return 1;
}

/* Remove a frames folder the writer made: its frame files, then itself.
 * Anything else inside makes rmdir() fail, and the folder stays. */
static int remove_frames_folder(const char *path)
{
    DIR *d = opendir(path);
    if (!d)
        return -1;
    struct dirent *e;
    while ((e = readdir(d)) != NULL) {
        if (!is_frame_name(e->d_name))
            continue;
        char *fp = pl__path_join(path, e->d_name);
        if (fp)
            unlink(fp);
        free(fp);
    }
    closedir(d);
    return rmdir(path);
}

/* Does `path` hold nothing but frame files of our pattern? Such a folder
 * is a sequence written earlier and may be replaced. */
static int only_frames(const char *path)
{
    DIR *d = opendir(path);
    if (!d)
        return 0;
    int ok = 1;
    struct dirent *e;
    while (ok && (e = readdir(d)) != NULL) {
        const char *n = e->d_name;
        if (strcmp(n, ".") != 0 && strcmp(n, "..") != 0)
            ok = is_frame_name(n);
    }
    closedir(d);
    return ok;
}

static void remove_temp(pl_seq_writer *w)
{
    pl_outfile_abort(w->cube);
    w->cube = NULL;
    if (w->data_tmp)
        remove_frames_folder(w->data_tmp);
}

static void free_writer(pl_seq_writer *w)
{
    free(w->acquisition);
    free(w->manifest_path);
    free(w->dir);
    free(w->data_name);
    free(w->data_final);
    free(w->data_tmp);
    free(w->buf);
    free(w->frame_path);
    free(w);
}

/* Frames before the flash, as the reader counts them from a uniform rate. */
static uint32_t frames_before_flash(const pl_seq_info *in)
{
    uint32_t before = 0;
    while (before < in->frame_count && (double)before / in->frame_rate_hz < in->flash_time_s)
        before++;
    return before;
}

static int check_info(const pl_seq_info *in, const char *path, pl_err *err)
{
    if (in->version != PL_SEQ_INFO_VERSION)
        return pl__err(err, PL_EINVAL, "%s: pl_seq_info version %u; %u expected", path,
                       in->version, PL_SEQ_INFO_VERSION);
    if (in->width < 1 || in->height < 1 || in->width > PL_SEQ__MAX_SIDE ||
        in->height > PL_SEQ__MAX_SIDE || (uint64_t)in->width * in->height > PL_SEQ__MAX_PIXELS)
        return pl__err(err, PL_EINVAL, "%s: frames of %u x %u pixels cannot be written", path,
                       in->width, in->height);
    if (in->frame_count < 2)
        return pl__err(err, PL_EINVAL, "%s: at least 2 frames (before and after the flash) "
                       "expected, %u given", path, in->frame_count);
    if (!(isfinite(in->frame_rate_hz) && in->frame_rate_hz > 0))
        return pl__err(err, PL_EINVAL, "%s: frame rate must be > 0", path);
    if (!isfinite(in->flash_time_s))
        return pl__err(err, PL_EINVAL, "%s: flash time must be finite", path);
    if (in->storage != PL_SEQ_NPY_FLOAT32 && in->storage != PL_SEQ_NPY_UINT16 &&
        in->storage != PL_SEQ_PNG16)
        return pl__err(err, PL_EINVAL, "%s: unknown storage %d", path, (int)in->storage);
    if (in->storage != PL_SEQ_NPY_FLOAT32) {
        if (!(isfinite(in->gain_k) && in->gain_k > 0) || !isfinite(in->offset_k))
            return pl__err(err, PL_EINVAL, "%s: gain must be finite and > 0, offset finite",
                           path);
        if (in->saturation_count < 1)
            return pl__err(err, PL_EINVAL, "%s: saturation count must be >= 1", path);
    }
    int pu = isfinite(in->pitch_u) && in->pitch_u > 0, pv = isfinite(in->pitch_v) &&
                                                            in->pitch_v > 0;
    if ((pu != pv) || (!pu && !(isnan(in->pitch_u) && isnan(in->pitch_v))))
        return pl__err(err, PL_EINVAL, "%s: pitch must be two numbers > 0, or both NaN", path);
    /* the times the reader will compute, with its rules */
    uint32_t before = frames_before_flash(in);
    if (before == 0)
        return pl__err(err, PL_EINVAL, "%s: no frame before the flash at %s s", path,
                       num(in->flash_time_s).s);
    if (!((double)(in->frame_count - 1) / in->frame_rate_hz > in->flash_time_s))
        return pl__err(err, PL_EINVAL, "%s: no frame after the flash at %s s", path,
                       num(in->flash_time_s).s);
    if (in->preflash_frames > before)
        return pl__err(err, PL_EINVAL, "%s: %u pre-flash frames but only %u come before the "
                       "flash", path, in->preflash_frames, before);
    return PL_OK;
}

/* The data's name beside a manifest <name>.json (any extension):
 * <name>.npy or <name>-frames. malloc'd, NULL when out of memory. */
static char *data_name_of(const char *manifest_path, pl_seq_storage storage)
{
    const char *base = pl__basename(manifest_path);
    const char *dot = strrchr(base, '.');
    size_t stem = dot && dot != base ? (size_t)(dot - base) : strlen(base);
    const char *suffix = storage == PL_SEQ_PNG16 ? "-frames" : ".npy";
    char *name = malloc(stem + strlen(suffix) + 1);
    if (name) {
        memcpy(name, base, stem);
        strcpy(name + stem, suffix);
    }
    return name;
}

PL_EXPORT int pl_seq_data_path(char **out, const char *manifest_path, pl_seq_storage storage,
                               pl_err *err)
{
    char *dir = pl__path_dir(manifest_path);
    char *name = data_name_of(manifest_path, storage);
    *out = dir && name ? pl__path_join(dir, name) : NULL;
    free(dir);
    free(name);
    return *out ? PL_OK : pl__err(err, PL_ENOMEM, "%s: out of memory", manifest_path);
}

static int begin_cube(pl_seq_writer *w, pl_err *err)
{
    const pl_seq_info *in = &w->info;
    pl_err oerr = {0};
    int rc = pl_outfile_open(&w->cube, w->data_final, &oerr);
    if (rc)
        return pl__err(err, rc, "%s: %s", w->manifest_path, oerr.msg);
    uint64_t shape[3] = {in->frame_count, in->height, in->width};
    return pl_npy_write_header(pl_outfile_stream(w->cube),
                               in->storage == PL_SEQ_NPY_FLOAT32 ? "<f4" : "<u2", 3, shape,
                               w->data_final, err);
}

PL_EXPORT int pl_seq_writer_open(pl_seq_writer **out, const char *manifest_path,
                                 const pl_seq_info *info, pl_err *err)
{
    *out = NULL;
    int rc = check_info(info, manifest_path, err);
    if (rc)
        return rc;
    pl_seq_writer *w = calloc(1, sizeof *w);
    if (!w)
        return pl__err(err, PL_ENOMEM, "%s: out of memory", manifest_path);
    w->info = *info;
    w->info.acquisition_json = NULL;
    if (w->info.preflash_frames == 0)
        w->info.preflash_frames = frames_before_flash(info);
    if (info->acquisition_json) {
        cJSON *a = cJSON_Parse(info->acquisition_json);
        if (!cJSON_IsObject(a))
            rc = pl__err(err, PL_EINVAL, "%s: the acquisition metadata is not a JSON object",
                         manifest_path);
        else {
            char *printed = cJSON_PrintUnformatted(a);
            if (!(w->acquisition = pl__strdup(printed)))
                rc = pl__err(err, PL_ENOMEM, "%s: out of memory", manifest_path);
            cJSON_free(printed);
        }
        cJSON_Delete(a);
    }
    if (rc == PL_OK) {
        w->manifest_path = pl__strdup(manifest_path);
        w->dir = pl__path_dir(manifest_path);
        w->data_name = data_name_of(manifest_path, info->storage);
        size_t bytes = (size_t)info->width * info->height *
                       (info->storage == PL_SEQ_NPY_FLOAT32 ? 4 : 2);
        w->buf = malloc(bytes);
        if (!w->manifest_path || !w->dir || !w->data_name || !w->buf ||
            !(w->data_final = pl__path_join(w->dir, w->data_name)))
            rc = pl__err(err, PL_ENOMEM, "%s: out of memory", manifest_path);
    }
    if (rc == PL_OK && strcmp(pl__basename(manifest_path), w->data_name) == 0)
        rc = pl__err(err, PL_EINVAL, "%s: the manifest would overwrite its own data; name it "
                     "<name>.json", manifest_path);
    if (rc == PL_OK && info->storage == PL_SEQ_PNG16) {
        struct stat st;
        if (lstat(w->data_final, &st) == 0 && (!S_ISDIR(st.st_mode) || !only_frames(w->data_final)))
            rc = pl__err(err, PL_EEXISTS, "%s: %s exists and holds other files than frames",
                         manifest_path, w->data_final);
        else if (pl__temp_create(&w->data_tmp, w->dir, w->data_name, 1) < 0)
            rc = pl__err(err, PL_EIO, "%s: cannot create a folder beside it: %s",
                         manifest_path, strerror(errno));
    } else if (rc == PL_OK) {
        rc = begin_cube(w, err);
    }
    if (rc) {
        pl_seq_writer_discard(w);
        return rc;
    }
    *out = w;
    return PL_OK;
}

/* Kelvin to the nearest count, 0..saturation; NaN and +inf are saturated. */
static unsigned to_count(float k, double offset, double gain, unsigned saturation)
{
    if (isnan(k))
        return saturation;
    double q = floor(((double)k - offset) / gain + 0.5);
    if (q <= 0)
        return 0;
    if (q >= (double)saturation)
        return saturation;
    return (unsigned)q;
}

/* The libpng part of writing a frame; see the introduction. */
static int encode_png(png_job *j, const pl_seq_writer *w, pl_err *err)
{
    if (setjmp(png_jmpbuf(j->png)))
        return pl__err(err, PL_EIO, "%s: cannot write PNG (%s)", w->frame_path, j->msg);
    png_init_io(j->png, j->f);
    png_set_IHDR(j->png, j->info, w->info.width, w->info.height, 16, PNG_COLOR_TYPE_GRAY,
                 PNG_INTERLACE_NONE, PNG_COMPRESSION_TYPE_DEFAULT, PNG_FILTER_TYPE_DEFAULT);
    /* Sequences run to thousands of frames: the fastest deflate level keeps
     * writing them quick at a modest cost in size. */
    png_set_compression_level(j->png, Z_BEST_SPEED);
    png_write_info(j->png, j->info);
    size_t row = (size_t)w->info.width * 2;
    for (uint32_t y = 0; y < w->info.height; y++)
        png_write_row(j->png, w->buf + (size_t)y * row);
    png_write_end(j->png, NULL);
    return PL_OK;
}

static int write_png_frame(pl_seq_writer *w, pl_err *err)
{
    char name[64];
    snprintf(name, sizeof name, WRITER_PATTERN, (int)w->written);
    free(w->frame_path);
    if (!(w->frame_path = pl__path_join(w->data_tmp, name)))
        return pl__err(err, PL_ENOMEM, "%s: out of memory", w->manifest_path);
    pl_outfile *of;
    int rc = pl_outfile_open(&of, w->frame_path, err);
    if (rc)
        return rc;
    png_job j;
    memset(&j, 0, sizeof j);
    j.f = pl_outfile_stream(of);
    if (pl_png__create(&j.png, &j.info, 1, j.msg))
        rc = pl__err(err, PL_ENOMEM, "%s: out of memory for the PNG writer", w->frame_path);
    else
        rc = encode_png(&j, w, err);
    pl_png__destroy(&j.png, &j.info, 1);
    return pl_outfile_finish(of, rc, err);
}

PL_EXPORT int pl_seq_writer_frame(pl_seq_writer *w, const float *kelvin, pl_err *err)
{
    const pl_seq_info *in = &w->info;
    if (w->failed)
        return pl__err(err, PL_EINVAL, "%s: an earlier frame failed; the sequence cannot be "
                       "finished", w->manifest_path);
    if (w->written >= in->frame_count)
        return pl__err(err, PL_EINVAL, "%s: frame %u is one more than the %u announced",
                       w->manifest_path, w->written, in->frame_count);
    size_t n = (size_t)in->width * in->height;
    unsigned char *b = w->buf;
    if (in->storage == PL_SEQ_NPY_FLOAT32) {
        for (size_t i = 0; i < n; i++) {
            uint32_t bits;
            memcpy(&bits, &kelvin[i], 4);
            b[4 * i] = (unsigned char)bits;
            b[4 * i + 1] = (unsigned char)(bits >> 8);
            b[4 * i + 2] = (unsigned char)(bits >> 16);
            b[4 * i + 3] = (unsigned char)(bits >> 24);
        }
    } else {
        int big = in->storage == PL_SEQ_PNG16; /* PNG samples are big-endian */
        for (size_t i = 0; i < n; i++) {
            unsigned c = to_count(kelvin[i], in->offset_k, in->gain_k, in->saturation_count);
            b[2 * i + (big ? 1 : 0)] = (unsigned char)(c & 0xff);
            b[2 * i + (big ? 0 : 1)] = (unsigned char)(c >> 8);
        }
    }
    int rc = PL_OK;
    if (in->storage == PL_SEQ_PNG16) {
        rc = write_png_frame(w, err);
    } else {
        size_t bytes = n * (in->storage == PL_SEQ_NPY_FLOAT32 ? 4 : 2);
        if (fwrite(b, 1, bytes, pl_outfile_stream(w->cube)) != bytes)
            rc = pl__err(err, PL_EIO, "%s: cannot write frame %u: %s", w->data_final,
                         w->written, strerror(errno));
    }
    if (rc) {
        w->failed = 1;
        return rc;
    }
    w->written++;
    return PL_OK;
}

static cJSON *manifest_json(const pl_seq_writer *w)
{
    const pl_seq_info *in = &w->info;
    cJSON *root = cJSON_CreateObject();
    cJSON *ok = root;
    ok = ok ? cJSON_AddStringToObject(root, "format", SEQ_FORMAT) : NULL;
    if (ok && in->storage == PL_SEQ_PNG16) {
        cJSON *data = cJSON_AddObjectToObject(root, "data");
        ok = data && cJSON_AddStringToObject(data, "folder", w->data_name) &&
                     cJSON_AddStringToObject(data, "pattern", WRITER_PATTERN) &&
                     cJSON_AddNumberToObject(data, "first", 0)
                 ? data
                 : NULL;
    } else if (ok) {
        ok = cJSON_AddStringToObject(root, "data", w->data_name);
    }
    ok = ok ? cJSON_AddNumberToObject(root, "width", in->width) : NULL;
    ok = ok ? cJSON_AddNumberToObject(root, "height", in->height) : NULL;
    ok = ok ? cJSON_AddNumberToObject(root, "frame_count", in->frame_count) : NULL;
    ok = ok ? cJSON_AddNumberToObject(root, "frame_rate_hz", in->frame_rate_hz) : NULL;
    ok = ok ? cJSON_AddNumberToObject(root, "flash_time_s", in->flash_time_s) : NULL;
    ok = ok ? cJSON_AddNumberToObject(root, "preflash_frames", in->preflash_frames) : NULL;
    cJSON *cal = ok ? cJSON_AddObjectToObject(root, "calibration") : NULL;
    ok = cal;
    if (ok && in->storage == PL_SEQ_NPY_FLOAT32) {
        ok = cJSON_AddStringToObject(cal, "kind", "kelvin");
    } else if (ok) {
        ok = cJSON_AddStringToObject(cal, "kind", "linear");
        ok = ok ? cJSON_AddNumberToObject(cal, "gain_k", in->gain_k) : NULL;
        ok = ok ? cJSON_AddNumberToObject(cal, "offset_k", in->offset_k) : NULL;
        ok = ok ? cJSON_AddNumberToObject(root, "saturation_count", in->saturation_count)
                : NULL;
    }
    if (ok && isfinite(in->pitch_u)) {
        const double pitch[2] = {in->pitch_u, in->pitch_v};
        cJSON *p = cJSON_CreateDoubleArray(pitch, 2);
        ok = p && cJSON_AddItemToObject(root, "pitch_mm", p) ? p : NULL;
        if (!ok)
            cJSON_Delete(p);
    }
    if (ok) {
        cJSON *a = w->acquisition ? cJSON_Parse(w->acquisition) : cJSON_CreateObject();
        ok = a && cJSON_AddItemToObject(root, "acquisition", a) ? a : NULL;
        if (!ok)
            cJSON_Delete(a);
    }
    if (!ok) {
        cJSON_Delete(root);
        return NULL;
    }
    return root;
}

/* Write the manifest into its output file, not yet committed: the caller
 * puts it in place last. */
static int write_manifest(pl_outfile **of, const pl_seq_writer *w, pl_err *err)
{
    *of = NULL;
    cJSON *root = manifest_json(w);
    char *text = root ? cJSON_Print(root) : NULL;
    cJSON_Delete(root);
    if (!text)
        return pl__err(err, PL_ENOMEM, "%s: out of memory", w->manifest_path);
    int rc = pl_outfile_open(of, w->manifest_path, err);
    if (rc == PL_OK && (rc = pl__outfile_put_line(*of, text, err))) {
        pl_outfile_abort(*of);
        *of = NULL;
    }
    cJSON_free(text);
    return rc;
}

/* Put the finished data in place. A frames folder written earlier is moved
 * aside first and removed once the new one stands. */
static int install_data(pl_seq_writer *w, pl_err *err)
{
    if (w->info.storage != PL_SEQ_PNG16) {
        int rc = pl_outfile_commit(w->cube, err);
        w->cube = NULL;
        return rc;
    }
    char *old = NULL;
    struct stat st;
    if (lstat(w->data_final, &st) == 0) {
        if (!S_ISDIR(st.st_mode) || !only_frames(w->data_final))
            return pl__err(err, PL_EEXISTS, "%s: exists and holds other files than frames",
                           w->data_final);
        /* reserve a name, then move the old folder onto it */
        if (pl__temp_create(&old, w->dir, w->data_name, 1) < 0 || rename(w->data_final, old) != 0) {
            int e = errno;
            if (old)
                rmdir(old);
            free(old);
            return pl__err(err, PL_EIO, "%s: cannot move the earlier frames aside: %s",
                           w->data_final, strerror(e));
        }
    }
    if (rename(w->data_tmp, w->data_final) != 0) {
        int e = errno;
        if (old)
            (void)rename(old, w->data_final);
        free(old);
        return pl__err(err, PL_EIO, "%s: cannot rename into place: %s", w->data_final,
                       strerror(e));
    }
    if (old)
        remove_frames_folder(old);
    free(old);
    return PL_OK;
}

PL_EXPORT int pl_seq_writer_close(pl_seq_writer *w, pl_err *err)
{
    if (!w)
        return PL_OK;
    int rc = PL_OK;
    if (w->failed)
        rc = pl__err(err, PL_EIO, "%s: an earlier frame failed; nothing was written",
                     w->manifest_path);
    else if (w->written != w->info.frame_count)
        rc = pl__err(err, PL_EINVAL, "%s: %u of %u frames written", w->manifest_path,
                     w->written, w->info.frame_count);
    pl_outfile *mf = NULL;
    if (rc == PL_OK)
        rc = write_manifest(&mf, w, err);
    if (rc == PL_OK) {
        rc = install_data(w, err);
        if (rc == PL_OK) {
            free(w->data_tmp);
            w->data_tmp = NULL; /* now the finished data */
            if ((rc = pl_outfile_commit(mf, err))) {
                if (w->info.storage == PL_SEQ_PNG16)
                    remove_frames_folder(w->data_final);
                else
                    unlink(w->data_final);
            }
        } else {
            pl_outfile_abort(mf);
        }
    }
    if (rc)
        remove_temp(w);
    free_writer(w);
    return rc;
}

PL_EXPORT void pl_seq_writer_discard(pl_seq_writer *w)
{
    if (!w)
        return;
    remove_temp(w);
    free_writer(w);
}
