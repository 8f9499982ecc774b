/*
 * map.c - the map object, its quantity vocabulary, geometry and the store
 * encoding (zlib-compressed little-endian float32 with a SHA-256 digest).
 */
#define ZLIB_CONST
#include "image/map_int.h"
#include "common/common_int.h"
#include "common/num_int.h"
#include "plyledger/hash.h"

#include <assert.h>
#include <limits.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <zlib.h>

/* ---- vocabulary ------------------------------------------------------ */

/*
 * The quantities a reduced map may hold. Units are listed with the usual
 * one first. Flash thermography terms follow Shepard et al. (2003),
 * "Reconstruction and enhancement of active thermographic image sequences",
 * Optical Engineering 42(5), and Maldague & Marinetti (1996), "Pulse phase
 * infrared thermography", J. Appl. Phys. 79(5); ultrasonic and eddy-current
 * terms are the trade's own (common practice). Each entry repeats its
 * default unit (the first of `units`) so that pl_quantity_default_unit()
 * can hand out static storage, then its polarity over a defect and whether
 * it is compared with the site's nominal value (pl_quantity_polarity()).
 * `methods` names the inspection methods (the site vocabulary,
 * PL_VOCAB_METHOD) that produce the quantity: thermography's maps come from
 * flash thermography only, depth from thermography or pulse-echo ultrasound,
 * amplitude and time of flight from either ultrasonic technique, thickness
 * from pulse-echo (common practice).
 */
#define UP PL_POLARITY_RISES, 0
#define DOWN PL_POLARITY_FALLS, 0
#define DOWN_NOMINAL PL_POLARITY_FALLS, 1
#define NONE PL_POLARITY_NONE, 0
static const struct vocab_entry {
    pl_quantity_info info;
    const char *default_unit;
    pl_polarity polarity;  /* see pl_quantity_polarity() in map.h */
    int nominal;           /* 1: compared with the site's nominal value */
} quantities[] = {
    {{"temperature-rise", "K mK",
      "surface temperature rise over the pre-flash level after the flash",
      "flash-thermography"}, "K", UP},
    {{"temperature-contrast", "K mK",
      "surface temperature rise over the sound-area reference after the flash",
      "flash-thermography"}, "K", UP},
    {{"normalised-contrast", "1 %",
      "temperature contrast divided by the reference rise (dimensionless)",
      "flash-thermography"}, "1", UP},
    {{"log-derivative-1", "1",
      "first derivative of ln(temperature) against ln(time) from the fitted cooling curve",
      "flash-thermography"},
     "1", UP},
    {{"log-derivative-2", "1",
      "second derivative of ln(temperature) against ln(time) from the fitted cooling curve",
      "flash-thermography"},
     "1", UP},
    {{"time-of-peak-d2", "s ms",
      "time after the flash at which the second log-derivative peaks",
      "flash-thermography"}, "s", DOWN_NOMINAL},
    /* no sound-area value to compare with: contrast is nil away from a defect */
    {{"time-of-peak-contrast", "s ms",
      "time after the flash at which the temperature contrast peaks",
      "flash-thermography"}, "s", NONE},
    {{"depth", "mm",
      "estimated depth of the feature below the inspected surface",
      "flash-thermography ultrasound-pulse-echo"}, "mm", DOWN_NOMINAL},
    {{"phase", "rad deg",
      "pulse-phase thermography phase at one frequency",
      "flash-thermography"}, "rad", DOWN},
    {{"phase-contrast", "rad deg",
      "pulse-phase phase difference from the sound-area reference",
      "flash-thermography"}, "rad", DOWN},
    {{"amplitude", "K 1",
      "pulse-phase thermography amplitude at one frequency",
      "flash-thermography"}, "K", NONE},
    {{"temperature", "K degC",
      "surface temperature in one frame",
      "flash-thermography"}, "K", NONE},
    {{"ultrasonic-amplitude", "%FSH dB",
      "ultrasonic C-scan gated echo amplitude",
      "ultrasound-pulse-echo ultrasound-through-transmission"}, "%FSH", DOWN},
    {{"time-of-flight", "us ns",
      "ultrasonic C-scan time of flight to the gated echo",
      "ultrasound-pulse-echo ultrasound-through-transmission"}, "us", DOWN_NOMINAL},
    {{"ultrasonic-thickness", "mm",
      "thickness or echo depth from ultrasonic time of flight",
      "ultrasound-pulse-echo"}, "mm", DOWN_NOMINAL},
    {{"eddy-current-real", "V ohm 1",
      "real (resistive) part of the eddy-current impedance signal",
      "eddy-current"}, "V", NONE},
    {{"eddy-current-imag", "V ohm 1",
      "imaginary (reactive) part of the eddy-current impedance signal",
      "eddy-current"}, "V", NONE},
    {{"eddy-current-magnitude", "V ohm 1",
      "magnitude of the eddy-current impedance signal",
      "eddy-current"}, "V", NONE},
    {{"eddy-current-phase", "deg rad",
      "phase angle of the eddy-current impedance signal",
      "eddy-current"}, "deg", NONE},
};

#undef UP
#undef DOWN
#undef DOWN_NOMINAL
#undef NONE

#define NQUANTITIES (sizeof quantities / sizeof quantities[0])

PL_EXPORT size_t pl_quantity_count(void)
{
    return NQUANTITIES;
}

PL_EXPORT const pl_quantity_info *pl_quantity_at(size_t i)
{
    return i < NQUANTITIES ? &quantities[i].info : NULL;
}

static const struct vocab_entry *find_entry(const char *name)
{
    if (!name)
        return NULL;
    for (size_t i = 0; i < NQUANTITIES; i++)
        if (strcmp(quantities[i].info.name, name) == 0)
            return &quantities[i];
    return NULL;
}

PL_EXPORT const pl_quantity_info *pl_quantity_lookup(const char *name)
{
    const struct vocab_entry *e = find_entry(name);
    return e ? &e->info : NULL;
}

PL_EXPORT int pl_quantity_fits_method(const char *quantity, const char *method)
{
    const struct vocab_entry *e = find_entry(quantity);
    if (!e || !method || !*method)
        return 0;
    size_t n = strlen(method);
    for (const char *w = e->info.methods; *w;) {
        size_t k = strcspn(w, " ");
        if (k == n && strncmp(w, method, n) == 0)
            return 1;
        w += k;
        w += strspn(w, " ");
    }
    return 0;
}

PL_EXPORT const char *pl_quantity_default_unit(const char *quantity)
{
    const struct vocab_entry *e = find_entry(quantity);
    return e ? e->default_unit : NULL;
}

PL_EXPORT pl_polarity pl_quantity_polarity(const char *quantity)
{
    const struct vocab_entry *e = find_entry(quantity);
    return e ? e->polarity : PL_POLARITY_NONE;
}

PL_EXPORT int pl_quantity_uses_nominal(const char *quantity)
{
    const struct vocab_entry *e = find_entry(quantity);
    return e ? e->nominal : 0;
}

/* Whether `unit` is one of the space separated words in `list`. */
static int unit_listed(const char *list, const char *unit)
{
    size_t n = strlen(unit);
    for (const char *p = list; *p;) {
        size_t w = strcspn(p, " ");
        if (w == n && strncmp(p, unit, n) == 0)
            return 1;
        p += w;
        while (*p == ' ')
            p++;
    }
    return 0;
}

PL_EXPORT int pl_quantity_check(const char *quantity, const char *unit, pl_err *err)
{
    if (!quantity || !*quantity)
        return pl__err(err, PL_EINVAL, "quantity is empty");
    size_t qn = strlen(quantity);
    if (qn >= PL_QUANTITY_SIZE)
        return pl__err(err, PL_EINVAL, "quantity '%.*s...' is longer than %d characters", 20,
                       quantity, PL_QUANTITY_SIZE - 1);
    for (size_t i = 0; i < qn; i++) {
        char c = quantity[i];
        if (!((c >= 'a' && c <= 'z') || (c >= '0' && c <= '9') || c == '-' || c == '_' ||
              c == '.'))
            return pl__err(err, PL_EINVAL,
                           "quantity '%s' has a character outside [a-z0-9-_.]", quantity);
    }
    if (!unit || !*unit)
        return pl__err(err, PL_EINVAL, "quantity '%s' has no unit", quantity);
    size_t un = strlen(unit);
    if (un >= PL_UNIT_SIZE)
        return pl__err(err, PL_EINVAL, "unit of '%s' is longer than %d characters", quantity,
                       PL_UNIT_SIZE - 1);
    for (size_t i = 0; i < un; i++) {
        unsigned char c = (unsigned char)unit[i];
        if (c < 0x21 || c > 0x7e)
            return pl__err(err, PL_EINVAL,
                           "unit '%s' of '%s' has a space or a non-printable character",
                           unit, quantity);
    }
    const pl_quantity_info *q = pl_quantity_lookup(quantity);
    if (q && !unit_listed(q->units, unit))
        return pl__err(err, PL_EINVAL, "unit '%s' does not fit quantity '%s' (one of: %s)",
                       unit, quantity, q->units);
    return PL_OK;
}

/* ---- the object ------------------------------------------------------ */

int pl_map__count(size_t *count, uint32_t width, uint32_t height, uint32_t nchannels)
{
    if (width == 0 || height == 0 || nchannels == 0 || width > PL_MAP_MAX_SIDE ||
        height > PL_MAP_MAX_SIDE || nchannels > PL_MAP_MAX_CHANNELS)
        return PL_EINVAL;
    size_t n = width;
    if (n > SIZE_MAX / height)
        return PL_EINVAL;
    n *= height;
    if (n > SIZE_MAX / nchannels)
        return PL_EINVAL;
    n *= nchannels;
    if (n > SIZE_MAX / sizeof(float))
        return PL_EINVAL;
    *count = n;
    return PL_OK;
}

PL_EXPORT int pl_map_new(pl_map **out, uint32_t width, uint32_t height, uint32_t nchannels,
                         pl_err *err)
{
    *out = NULL;
    size_t count;
    if (pl_map__count(&count, width, height, nchannels))
        return pl__err(err, PL_EINVAL,
                       "map of %lu x %lu pixels and %lu channels cannot be made "
                       "(sides 1 to %u, channels 1 to %u)",
                       (unsigned long)width, (unsigned long)height, (unsigned long)nchannels,
                       PL_MAP_MAX_SIDE, PL_MAP_MAX_CHANNELS);
    pl_map *m = calloc(1, sizeof *m);
    if (!m)
        return pl__err(err, PL_ENOMEM, "out of memory for a map");
    m->channels = calloc(nchannels, sizeof *m->channels);
    m->data = calloc(count, sizeof *m->data);
    if (!m->channels || !m->data) {
        pl_map_free(m);
        return pl__err(err, PL_ENOMEM, "out of memory for a map of %lu x %lu x %lu values",
                       (unsigned long)nchannels, (unsigned long)height, (unsigned long)width);
    }
    m->width = width;
    m->height = height;
    m->nchannels = nchannels;
    m->pitch_u = 1.0;
    m->pitch_v = 1.0;
    m->placement.u[0] = 1.0;
    m->placement.v[1] = 1.0;
    snprintf(m->placement.system, sizeof m->placement.system, "local");
    snprintf(m->placement.unit, sizeof m->placement.unit, "mm");
    *out = m;
    return PL_OK;
}

PL_EXPORT void pl_map_free(pl_map *map)
{
    if (!map)
        return;
    free(map->channels);
    free(map->data);
    free(map);
}

PL_EXPORT int pl_map_clone(pl_map **out, const pl_map *map, pl_err *err)
{
    assert(map);
    pl_map *m;
    int rc = pl_map_new(&m, map->width, map->height, map->nchannels, err);
    if (rc) {
        *out = NULL;
        return rc;
    }
    size_t count = (size_t)map->nchannels * map->height * map->width;
    m->pitch_u = map->pitch_u;
    m->pitch_v = map->pitch_v;
    m->placement = map->placement;
    memcpy(m->channels, map->channels, map->nchannels * sizeof *m->channels);
    memcpy(m->data, map->data, count * sizeof *m->data);
    *out = m;
    return PL_OK;
}

PL_EXPORT float *pl_map_channel(const pl_map *map, uint32_t c)
{
    assert(map && c < map->nchannels);
    return map->data + (size_t)c * map->height * map->width;
}

PL_EXPORT int pl_map_find_channel(const pl_map *map, const char *quantity)
{
    assert(map);
    if (!quantity)
        return PL_ENOTFOUND;
    for (uint32_t c = 0; c < map->nchannels; c++)
        if (strcmp(map->channels[c].quantity, quantity) == 0)
            return (int)c;
    return PL_ENOTFOUND;
}

PL_EXPORT int pl_map_set_channel(pl_map *map, uint32_t c, const char *quantity,
                                 const char *unit, pl_err *err)
{
    assert(map);
    if (c >= map->nchannels)
        return pl__err(err, PL_EINVAL, "channel %lu does not exist (the map has %lu)",
                       (unsigned long)c, (unsigned long)map->nchannels);
    int rc = pl_quantity_check(quantity, unit, err);
    if (rc)
        return rc;
    /* lengths were checked above */
    snprintf(map->channels[c].quantity, sizeof map->channels[c].quantity, "%s", quantity);
    snprintf(map->channels[c].unit, sizeof map->channels[c].unit, "%s", unit);
    return PL_OK;
}

PL_EXPORT int pl_map_set_pitch(pl_map *map, double pitch_u, double pitch_v, pl_err *err)
{
    assert(map);
    if (!isfinite(pitch_u) || !isfinite(pitch_v) || pitch_u <= 0 || pitch_v <= 0)
        return pl__err(err, PL_EINVAL,
                       "pitch %g x %g mm is invalid (finite numbers > 0 expected)", pitch_u,
                       pitch_v);
    map->pitch_u = pitch_u;
    map->pitch_v = pitch_v;
    return PL_OK;
}

PL_EXPORT int pl_placement_check(const pl_placement *p, pl_err *err)
{
    assert(p);
    for (int k = 0; k < 3; k++)
        if (!isfinite(p->origin[k]) || !isfinite(p->u[k]) || !isfinite(p->v[k]))
            return pl__err(err, PL_EINVAL, "placement has a non-finite coordinate");
    double nu = sqrt(pl__dot3(p->u, p->u)), nv = sqrt(pl__dot3(p->v, p->v));
    if (fabs(nu - 1) >= 1e-3)
        return pl__err(err, PL_EINVAL, "placement axis u has length %.6g, not 1", nu);
    if (fabs(nv - 1) >= 1e-3)
        return pl__err(err, PL_EINVAL, "placement axis v has length %.6g, not 1", nv);
    double c = pl__dot3(p->u, p->v);
    if (fabs(c) >= 1e-3)
        return pl__err(err, PL_EINVAL,
                       "placement axes u and v are not perpendicular (u.v = %.6g)", c);
    if (!memchr(p->system, '\0', sizeof p->system) || !p->system[0])
        return pl__err(err, PL_EINVAL, "placement has no reference system name");
    if (!memchr(p->unit, '\0', sizeof p->unit) || !p->unit[0])
        return pl__err(err, PL_EINVAL, "placement has no coordinate unit");
    return PL_OK;
}

PL_EXPORT void pl_map_pixel_to_part(const pl_map *map, double col, double row, double xyz[3])
{
    assert(map);
    const pl_placement *p = &map->placement;
    double a = col * map->pitch_u, b = row * map->pitch_v;
    for (int k = 0; k < 3; k++)
        xyz[k] = p->origin[k] + a * p->u[k] + b * p->v[k];
}

PL_EXPORT size_t pl_map_range(const pl_map *map, uint32_t c, double *min, double *max)
{
    const float *d = pl_map_channel(map, c);
    size_t n = (size_t)map->width * map->height, finite = 0;
    float lo = INFINITY, hi = -INFINITY;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(d[i]))
            continue;
        if (d[i] < lo)
            lo = d[i];
        if (d[i] > hi)
            hi = d[i];
        finite++;
    }
    if (min)
        *min = finite ? lo : NAN;
    if (max)
        *max = finite ? hi : NAN;
    return finite;
}

/* ---- values ------------------------------------------------------------ */

size_t pl_map__count_infinite(const pl_map *map, uint32_t c0, uint32_t c1, uint32_t *channel,
                              uint32_t *row, uint32_t *col, int *sign)
{
    size_t plane = (size_t)map->width * map->height, count = 0;
    for (uint32_t c = c0; c < c1; c++) {
        const float *d = pl_map_channel(map, c);
        for (size_t i = 0; i < plane; i++) {
            if (!isinf(d[i]))
                continue;
            if (count++ == 0) {
                *channel = c;
                *row = (uint32_t)(i / map->width);
                *col = (uint32_t)(i % map->width);
                *sign = d[i] > 0 ? 1 : -1;
            }
        }
    }
    return count;
}

/* "NAME: " or nothing, for messages that may or may not name a file. */
#define NAME_FMT "%s%s"
#define NAME_ARGS(name) (name) ? (name) : "", (name) ? ": " : ""

/* The check without changing anything: infinities refused unless `mode`
 * makes them no data ([out] ninf counts them), and a number required
 * among the values that are left. */
static int inspect_values(size_t *ninf, const pl_map *map, pl_map_infinite mode,
                          const char *name, const char *note, int code, pl_err *err)
{
    uint32_t c = 0, row = 0, col = 0;
    int sign = 0;
    *ninf = pl_map__count_infinite(map, 0, map->nchannels, &c, &row, &col, &sign);
    if (*ninf && mode == PL_MAP_INFINITE_REFUSE)
        return pl__err(err, code,
                       NAME_FMT "%zu infinite value%s%s, the first (%cinf) at channel %lu, row "
                       "%lu, column %lu (only NaN may stand for no data)",
                       NAME_ARGS(name), *ninf, *ninf == 1 ? "" : "s", note ? note : "",
                       sign > 0 ? '+' : '-', (unsigned long)c, (unsigned long)row,
                       (unsigned long)col);
    size_t n = (size_t)map->nchannels * map->height * map->width;
    for (size_t i = 0; i < n; i++)
        if (isfinite(map->data[i]))
            return PL_OK;
    return pl__err(err, code, NAME_FMT "no data (every value is NaN%s)", NAME_ARGS(name),
                   *ninf ? " once the infinities are made no data" : "");
}

int pl_map__check_values(pl_map_load_info *info, pl_map *map, const pl_map_load_options *opts,
                         const char *name, const char *note, int code, pl_err *err)
{
    assert(map && map->data);
    pl_map_load_options dflt = PL_MAP_LOAD_OPTIONS_INIT;
    if (!opts)
        opts = &dflt;
    if (opts->version != PL_MAP_LOAD_OPTIONS_VERSION)
        return pl__err(err, PL_EINVAL, NAME_FMT "map load options version %u unknown (%u expected)",
                       NAME_ARGS(name), opts->version, PL_MAP_LOAD_OPTIONS_VERSION);
    if (opts->infinite != PL_MAP_INFINITE_REFUSE && opts->infinite != PL_MAP_INFINITE_TO_NAN)
        return pl__err(err, PL_EINVAL, NAME_FMT "map load option for infinities %d unknown",
                       NAME_ARGS(name), (int)opts->infinite);
    if (info) {
        info->infinite = opts->infinite;
        info->infinite_to_nan = 0;
    }
    size_t ninf;
    int rc = inspect_values(&ninf, map, opts->infinite, name, note, code, err);
    if (rc)
        return rc;
    if (ninf) {
        size_t n = (size_t)map->nchannels * map->height * map->width;
        for (size_t i = 0; i < n; i++)
            if (isinf(map->data[i]))
                map->data[i] = NAN;
        if (info)
            info->infinite_to_nan = ninf;
    }
    return PL_OK;
}

PL_EXPORT int pl_map_check_values(pl_map_load_info *info, pl_map *map,
                                  const pl_map_load_options *opts, const char *name,
                                  pl_err *err)
{
    return pl_map__check_values(info, map, opts, name, NULL, PL_EINVAL, err);
}

PL_EXPORT int pl_map_load_info_json(char *buf, size_t size, const pl_map_load_info *info)
{
    assert(info);
    if (info->infinite == PL_MAP_INFINITE_TO_NAN)
        return snprintf(buf, size,
                        "{\"infinite_values\": \"to-nan\", \"infinite_values_made_nodata\": %zu}",
                        info->infinite_to_nan);
    return snprintf(buf, size, "{\"infinite_values\": \"refuse\"}");
}

/* ---- number parsing shared by the file readers ------------------------ */

int pl_map__parse_number(double *v, const char *s)
{
    const char *p = s;
    while (*p == ' ' || *p == '\t')
        p++;
    const char *start = p;
    if (*p == '+' || *p == '-')
        p++;
    int digits = 0;
    while (*p >= '0' && *p <= '9')
        p++, digits++;
    if (*p == '.') {
        p++;
        while (*p >= '0' && *p <= '9')
            p++, digits++;
    }
    if (!digits)
        return -1;
    if (*p == 'e' || *p == 'E') {
        p++;
        if (*p == '+' || *p == '-')
            p++;
        if (!(*p >= '0' && *p <= '9'))
            return -1;
        while (*p >= '0' && *p <= '9')
            p++;
    }
    const char *end = p;
    while (*p == ' ' || *p == '\t')
        p++;
    if (*p)
        return -1;
    char buf[128];
    size_t n = (size_t)(end - start);
    if (n >= sizeof buf)
        return -1;
    memcpy(buf, start, n);
    buf[n] = '\0';
    double d = strtod(buf, NULL);
    if (!isfinite(d))
        return -1;
    *v = d;
    return 0;
}

int pl_map__parse_pitch(double *pu, double *pv, const char *s)
{
    char buf[128];
    if (strlen(s) >= sizeof buf)
        return -1;
    snprintf(buf, sizeof buf, "%s", s);
    char *p = buf;
    while (*p == ' ' || *p == '\t')
        p++;
    char *sep = p + strcspn(p, " \t");
    double a, b;
    if (*sep) {
        *sep = '\0';
        if (pl_map__parse_number(&a, p) || pl_map__parse_number(&b, sep + 1))
            return -1;
    } else {
        if (pl_map__parse_number(&a, p))
            return -1;
        b = a;
    }
    if (!(a > 0) || !(b > 0))
        return -1;
    *pu = a;
    *pv = b;
    return 0;
}

/* ---- store encoding -------------------------------------------------- */

#define CHUNK_VALUES 4096

/* The store encodes with canonical_nan set, so that equal maps give equal
 * bytes and digests whatever NaN payloads or host byte order produced
 * them. */
void pl_map__f32_to_le(unsigned char *out, const float *in, size_t n, int canonical_nan)
{
    for (size_t i = 0; i < n; i++) {
        uint32_t b;
        memcpy(&b, &in[i], sizeof b);
        if (canonical_nan && (b & 0x7f800000u) == 0x7f800000u && (b & 0x007fffffu))
            b = 0x7fc00000u;
        out[4 * i] = (unsigned char)(b & 0xff);
        out[4 * i + 1] = (unsigned char)(b >> 8 & 0xff);
        out[4 * i + 2] = (unsigned char)(b >> 16 & 0xff);
        out[4 * i + 3] = (unsigned char)(b >> 24);
    }
}

static void from_le(float *out, const unsigned char *in, size_t n)
{
    for (size_t i = 0; i < n; i++) {
        uint32_t b = (uint32_t)in[4 * i] | (uint32_t)in[4 * i + 1] << 8 |
                     (uint32_t)in[4 * i + 2] << 16 | (uint32_t)in[4 * i + 3] << 24;
        memcpy(&out[i], &b, sizeof b);
    }
}

PL_EXPORT void pl_map_digest(unsigned char sha256[32], const pl_map *map)
{
    assert(map);
    size_t count;
    if (pl_map__count(&count, map->width, map->height, map->nchannels))
        count = 0;
    unsigned char buf[4 * CHUNK_VALUES];
    pl_sha256_ctx ctx;
    pl_sha256_init(&ctx);
    for (size_t done = 0; done < count;) {
        size_t n = count - done < CHUNK_VALUES ? count - done : CHUNK_VALUES;
        pl_map__f32_to_le(buf, map->data + done, n, 1);
        pl_sha256_update(&ctx, buf, 4 * n);
        done += n;
    }
    pl_sha256_final(&ctx, sha256);
}

PL_EXPORT int pl_map_encode(unsigned char **blob, size_t *blob_len, unsigned char sha256[32],
                            const pl_map *map, pl_err *err)
{
    assert(map && blob && blob_len);
    *blob = NULL;
    *blob_len = 0;
    size_t count;
    if (pl_map__count(&count, map->width, map->height, map->nchannels))
        return pl__err(err, PL_EINVAL, "map size %lu x %lu x %lu is invalid",
                       (unsigned long)map->nchannels, (unsigned long)map->height,
                       (unsigned long)map->width);
    size_t ninf;
    int rc = inspect_values(&ninf, map, PL_MAP_INFINITE_REFUSE, NULL, NULL, PL_EINVAL, err);
    if (rc)
        return rc;
    z_stream zs;
    memset(&zs, 0, sizeof zs);
    int zrc = deflateInit(&zs, Z_DEFAULT_COMPRESSION);
    if (zrc != Z_OK)
        return pl__err(err, zrc == Z_MEM_ERROR ? PL_ENOMEM : PL_EFORMAT,
                       "cannot start zlib compression (%d)", zrc);
    size_t bound = (size_t)deflateBound(&zs, (uLong)(count * 4));
    unsigned char *out = malloc(bound);
    if (!out) {
        deflateEnd(&zs);
        return pl__err(err, PL_ENOMEM, "out of memory for a %zu byte map blob", bound);
    }
    unsigned char buf[4 * CHUNK_VALUES];
    pl_sha256_ctx ctx;
    pl_sha256_init(&ctx);
    size_t done = 0, produced = 0;
    zrc = Z_OK;
    while (zrc != Z_STREAM_END) {
        size_t n = count - done < CHUNK_VALUES ? count - done : CHUNK_VALUES;
        pl_map__f32_to_le(buf, map->data + done, n, 1);
        pl_sha256_update(&ctx, buf, 4 * n);
        done += n;
        zs.next_in = buf;
        zs.avail_in = (uInt)(4 * n);
        int flush = done == count ? Z_FINISH : Z_NO_FLUSH;
        do {
            size_t room = bound - produced;
            uInt avail = room > UINT_MAX ? UINT_MAX : (uInt)room;
            zs.next_out = out + produced;
            zs.avail_out = avail;
            zrc = deflate(&zs, flush);
            produced += avail - zs.avail_out;
            if (zrc == Z_STREAM_ERROR || zrc == Z_BUF_ERROR) {
                deflateEnd(&zs);
                free(out);
                return pl__err(err, PL_EFORMAT, "zlib compression failed (%d)", zrc);
            }
        } while (zs.avail_in > 0 || (flush == Z_FINISH && zrc != Z_STREAM_END));
    }
    deflateEnd(&zs);
    unsigned char *shrunk = realloc(out, produced);
    *blob = shrunk ? shrunk : out;
    *blob_len = produced;
    pl_sha256_final(&ctx, sha256);
    return PL_OK;
}

/* Fill the map's data with NaN so that a failed decode leaves nothing
 * that could pass for content. */
static int decode_fail(pl_map *map, size_t count, int code)
{
    for (size_t i = 0; i < count; i++)
        map->data[i] = NAN;
    return code;
}

PL_EXPORT int pl_map_decode(pl_map *map, const void *blob, size_t blob_len,
                            const unsigned char sha256[32], pl_err *err)
{
    assert(map && map->data);
    size_t count;
    if (pl_map__count(&count, map->width, map->height, map->nchannels))
        return pl__err(err, PL_EINVAL, "map size %lu x %lu x %lu is invalid",
                       (unsigned long)map->nchannels, (unsigned long)map->height,
                       (unsigned long)map->width);
    size_t expect = count * 4;
    if (!blob || blob_len == 0)
        return decode_fail(map, count, pl__err(err, PL_EFORMAT, "map blob is empty"));
    z_stream zs;
    memset(&zs, 0, sizeof zs);
    int zrc = inflateInit(&zs);
    if (zrc != Z_OK)
        return decode_fail(map, count,
                           pl__err(err, zrc == Z_MEM_ERROR ? PL_ENOMEM : PL_EFORMAT,
                                   "cannot start zlib decompression (%d)", zrc));
    const unsigned char *in = blob;
    size_t in_left = blob_len, got = 0;
    unsigned char buf[4 * CHUNK_VALUES];
    pl_sha256_ctx ctx;
    pl_sha256_init(&ctx);
    int rc = PL_OK;
    zrc = Z_OK;
    while (zrc != Z_STREAM_END && rc == PL_OK) {
        zs.next_out = buf;
        zs.avail_out = sizeof buf;
        while (zs.avail_out > 0 && zrc != Z_STREAM_END) {
            if (zs.avail_in == 0) {
                if (in_left == 0) {
                    rc = pl__err(err, PL_EFORMAT, "map blob is truncated (%zu bytes)",
                                 blob_len);
                    break;
                }
                size_t take = in_left > UINT_MAX ? UINT_MAX : in_left;
                zs.next_in = in;
                zs.avail_in = (uInt)take;
                in += take;
                in_left -= take;
            }
            zrc = inflate(&zs, Z_NO_FLUSH);
            if (zrc == Z_MEM_ERROR) {
                rc = pl__err(err, PL_ENOMEM, "out of memory decompressing a map blob");
                break;
            }
            if (zrc != Z_OK && zrc != Z_STREAM_END) {
                rc = pl__err(err, PL_EFORMAT, "map blob is corrupt (zlib: %s)",
                             zs.msg ? zs.msg : "bad data");
                break;
            }
        }
        size_t filled = sizeof buf - zs.avail_out;
        if (rc == PL_OK && filled > expect - got)
            rc = pl__err(err, PL_EFORMAT,
                         "map blob decodes to more than the %zu bytes of a %lu x %lu x %lu map",
                         expect, (unsigned long)map->nchannels, (unsigned long)map->height,
                         (unsigned long)map->width);
        if (rc == PL_OK) {
            from_le(map->data + got / 4, buf, filled / 4);
            pl_sha256_update(&ctx, buf, filled);
            got += filled;
        }
    }
    inflateEnd(&zs);
    if (rc)
        return decode_fail(map, count, rc);
    if (got != expect)
        return decode_fail(map, count,
                           pl__err(err, PL_EFORMAT,
                                   "map blob decodes to %zu bytes, %zu expected for a "
                                   "%lu x %lu x %lu map",
                                   got, expect, (unsigned long)map->nchannels,
                                   (unsigned long)map->height, (unsigned long)map->width));
    if (zs.avail_in > 0 || in_left > 0)
        return decode_fail(map, count,
                           pl__err(err, PL_EFORMAT,
                                   "map blob has bytes after the compressed data"));
    unsigned char digest[32];
    pl_sha256_final(&ctx, digest);
    if (sha256 && memcmp(digest, sha256, sizeof digest) != 0) {
        char want[PL_SHA256_HEX_SIZE], have[PL_SHA256_HEX_SIZE];
        pl_sha256_hex(want, sha256);
        pl_sha256_hex(have, digest);
        return decode_fail(map, count,
                           pl__err(err, PL_ENOMATCH,
                                   "map content digest %.12s... does not match the recorded "
                                   "%.12s...", have, want));
    }
    return PL_OK;
}

/* ---- loading by file name -------------------------------------------- */

PL_EXPORT int pl_map_load_v2(pl_map **out, pl_map_load_info *info, const char *path,
                             const pl_map_load_options *opts, pl_err *err)
{
    *out = NULL;
    const char *base = pl__basename(path);
    const char *dot = strrchr(base, '.');
    if (dot && strcasecmp(dot, ".png") == 0)
        return pl_map__load_png(out, info, path, opts, err);
    if (dot && strcasecmp(dot, ".npy") == 0)
        return pl_map__load_npy(out, info, path, opts, err);
    if (dot && strcasecmp(dot, ".csv") == 0)
        return pl_map__load_csv(out, info, path, opts, err);
    return pl__err(err, PL_EFORMAT, "%s: unknown map file type (.png, .npy or .csv expected)",
                   path);
}

PL_EXPORT int pl_map_load(pl_map **out, const char *path, pl_err *err)
{
    return pl_map_load_v2(out, NULL, path, NULL, err);
}
