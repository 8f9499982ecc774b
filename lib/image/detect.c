/*
 * detect.c - indications on one map channel: options, polarity,
 * background, noise, thresholds, and the measures of each region (see
 * plyledger/detect.h); labelling is in detect_label.c, the measures'
 * pieces in detect_measure.c.
 */
#include "image/detect_int.h"
#include "common/common_int.h"
#include "common/filter_int.h"
#include "common/threads_int.h"

#include <assert.h>
#include <cjson/cJSON.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

/* ---- names ------------------------------------------------------------------ */

PL_EXPORT const char *pl_sizing_name(pl_sizing rule)
{
    switch (rule) {
    case PL_SIZING_THRESHOLD:
        return "threshold";
    case PL_SIZING_HALF_MAX:
        return "half-maximum";
    }
    return NULL;
}

PL_EXPORT const char *pl_background_name(pl_background b)
{
    switch (b) {
    case PL_BACKGROUND_LINE_MEDIAN:
        return "line-median";
    case PL_BACKGROUND_MEDIAN:
        return "median";
    case PL_BACKGROUND_ZERO:
        return "zero";
    case PL_BACKGROUND_NOMINAL:
        return "nominal";
    }
    return NULL;
}

PL_EXPORT const char *pl_noise_method_name(pl_noise_method m)
{
    switch (m) {
    case PL_NOISE_HIGH_PASS:
        return "high-pass";
    case PL_NOISE_REGION:
        return "region";
    case PL_NOISE_GIVEN:
        return "given";
    case PL_NOISE_NONE:
        return "none";
    }
    return NULL;
}

/* ---- options ------------------------------------------------------------------ */

/* The options with every default filled in; refused as the check says. */
static int resolve_options(pl_detect_options *o, const pl_detect_options *opts, pl_err *err)
{
    static const pl_detect_options init = PL_DETECT_OPTIONS_INIT;
    *o = opts ? *opts : init;
    if (o->version != PL_DETECT_OPTIONS_VERSION)
        return pl__err(err, PL_EINVAL, "detection options version %u is not known (expected %d)",
                       o->version, PL_DETECT_OPTIONS_VERSION);
    if (isnan(o->high))
        o->high = PL_DETECT_DEFAULT_HIGH;
    if (isnan(o->low))
        o->low = fmin(PL_DETECT_DEFAULT_LOW, o->high);
    if (isnan(o->min_area_mm2))
        o->min_area_mm2 = PL_DETECT_DEFAULT_MIN_AREA_MM2;
    if (isnan(o->nominal_margin))
        o->nominal_margin = PL_DETECT_DEFAULT_NOMINAL_MARGIN;
    if (isnan(o->background_mm))
        o->background_mm = PL_DETECT_DEFAULT_BACKGROUND_MM;
    if (!(o->high > 0) || !isfinite(o->high))
        return pl__err(err, PL_EINVAL, "detection option high is %g (a number above 0 expected)",
                       o->high);
    if (!(o->low > 0) || !(o->low <= o->high))
        return pl__err(err, PL_EINVAL,
                       "detection option low is %g (above 0 and at most high, %g, expected)",
                       o->low, o->high);
    if (!(o->min_area_mm2 >= 0) || !isfinite(o->min_area_mm2))
        return pl__err(err, PL_EINVAL,
                       "detection option min_area_mm2 is %g (0 or more mm^2 expected)",
                       o->min_area_mm2);
    if (o->polarity < -1 || o->polarity > 1)
        return pl__err(err, PL_EINVAL,
                       "detection option polarity is %d (0: the quantity's, 1 rises, -1 falls)",
                       o->polarity);
    if (isinf(o->nominal))
        return pl__err(err, PL_EINVAL, "detection option nominal is infinite");
    if (!(o->nominal_margin >= 0 && o->nominal_margin < 1))
        return pl__err(err, PL_EINVAL,
                       "detection option nominal_margin is %g (a fraction in [0, 1) expected)",
                       o->nominal_margin);
    if ((unsigned)o->background > PL_BACKGROUND_NOMINAL)
        return pl__err(err, PL_EINVAL, "detection option background is %d (not a background)",
                       (int)o->background);
    if (o->background == PL_BACKGROUND_NOMINAL && isnan(o->nominal))
        return pl__err(err, PL_EINVAL,
                       "detection option background is nominal but no nominal is given");
    if (!(o->background_mm > 0) || !isfinite(o->background_mm))
        return pl__err(err, PL_EINVAL,
                       "detection option background_mm is %g (a length above 0 mm expected)",
                       o->background_mm);
    if (!isnan(o->noise) && !(o->noise > 0 && isfinite(o->noise)))
        return pl__err(err, PL_EINVAL,
                       "detection option noise is %g (above 0, or NaN to estimate it)", o->noise);
    if (o->despeckle != 0 && o->despeckle != 1)
        return pl__err(err, PL_EINVAL, "detection option despeckle is %d (0 or 1 expected)",
                       o->despeckle);
    if (o->depth_channel < -1)
        return pl__err(err, PL_EINVAL,
                       "detection option depth_channel is %d (a channel, or -1 for none)",
                       o->depth_channel);
    return PL_OK;
}

PL_EXPORT int pl_detect_options_check(const pl_detect_options *opts, pl_err *err)
{
    pl_detect_options o;
    return resolve_options(&o, opts, err);
}

/* ---- background ----------------------------------------------------------------- */

/* One direction's lines: line k starts at (x0, y0) and steps (dx, dy). */
typedef struct line_set {
    uint32_t w, h;
    int dir;
    uint32_t len;   /* the window, pixels */
    uint32_t need;  /* values with data a window needs */
    const float *v;
    float *out;     /* max so far; NaN: none */
    float *scratch; /* len floats per worker */
} line_set;

static void line_start(const line_set *s, uint32_t k, long *x0, long *y0, int *dx, int *dy)
{
    switch (s->dir) {
    case 0: /* rows */
        *x0 = 0, *y0 = k, *dx = 1, *dy = 0;
        break;
    case 1: /* columns */
        *x0 = k, *y0 = 0, *dx = 0, *dy = 1;
        break;
    case 2: /* +col +row: from the left edge bottom up, then the top edge */
        if (k < s->h)
            *x0 = 0, *y0 = (long)s->h - 1 - k;
        else
            *x0 = (long)(k - s->h + 1), *y0 = 0;
        *dx = 1, *dy = 1;
        break;
    default: /* +col -row: from the left edge top down, then the bottom edge */
        if (k < s->h)
            *x0 = 0, *y0 = k;
        else
            *x0 = (long)(k - s->h + 1), *y0 = (long)s->h - 1;
        *dx = 1, *dy = -1;
        break;
    }
}

static uint32_t line_count(const line_set *s)
{
    return s->dir == 0 ? s->h : s->dir == 1 ? s->w : s->w + s->h - 1;
}

static void sorted_insert(float *buf, uint32_t *m, float x)
{
    uint32_t lo = 0, hi = *m;
    while (lo < hi) {
        uint32_t mid = (lo + hi) / 2;
        if (buf[mid] < x)
            lo = mid + 1;
        else
            hi = mid;
    }
    memmove(buf + lo + 1, buf + lo, (size_t)(*m - lo) * sizeof *buf);
    buf[lo] = x;
    (*m)++;
}

static void sorted_remove(float *buf, uint32_t *m, float x)
{
    uint32_t lo = 0, hi = *m;
    while (lo < hi) {
        uint32_t mid = (lo + hi) / 2;
        if (buf[mid] < x)
            lo = mid + 1;
        else
            hi = mid;
    }
    assert(lo < *m && buf[lo] == x);
    memmove(buf + lo, buf + lo + 1, (size_t)(*m - lo - 1) * sizeof *buf);
    (*m)--;
}

/*
 * The running median along each line of a slice: the window [s, s + L)
 * around position t, s = t - L/2 held inside the line, so that it keeps
 * its length L (or the line's, when shorter); a sorted buffer of the
 * window's values with data is updated by one removal and one insertion
 * per step.
 */
static void line_slice(void *ctx, uint32_t begin, uint32_t end, unsigned worker)
{
    const line_set *s = ctx;
    float *buf = s->scratch + (size_t)worker * s->len;
    for (uint32_t k = begin; k < end; k++) {
        long x0, y0;
        int dx, dy;
        line_start(s, k, &x0, &y0, &dx, &dy);
        /* the line's length */
        uint32_t n = 0;
        for (long x = x0, y = y0; x >= 0 && y >= 0 && x < (long)s->w && y < (long)s->h;
             x += dx, y += dy)
            n++;
        if (n < s->need)
            continue;
        uint32_t L = n < s->len ? n : s->len, m = 0, st = 0;
#define AT(t) (s->v[(size_t)(y0 + (long)(t) * dy) * s->w + (size_t)(x0 + (long)(t) * dx)])
        for (uint32_t t = 0; t < L; t++)
            if (AT(t) == AT(t))
                sorted_insert(buf, &m, AT(t));
        for (uint32_t t = 0; t < n; t++) {
            long want = (long)t - (long)(s->len / 2);
            if (want > (long)(n - L))
                want = (long)(n - L);
            while ((long)st < want) {
                float out_v = AT(st), in_v = AT(st + L);
                if (out_v == out_v)
                    sorted_remove(buf, &m, out_v);
                if (in_v == in_v)
                    sorted_insert(buf, &m, in_v);
                st++;
            }
            size_t i = (size_t)(y0 + (long)t * dy) * s->w + (size_t)(x0 + (long)t * dx);
            if (m < s->need || s->v[i] != s->v[i])
                continue;
            float med = (m & 1) ? buf[m / 2] : 0.5f * (buf[m / 2 - 1] + buf[m / 2]);
            if (!(s->out[i] >= med)) /* NaN so far, or smaller */
                s->out[i] = med;
        }
#undef AT
    }
}

/*
 * A window counts where at least three quarters of its nominal length hold
 * data: then an indication narrower than 3/8 of the window along the line
 * covers less than half of it and cannot move its median.
 */
int pl_detect__line_median(float *out, const float *v, uint32_t w, uint32_t h,
                           const uint32_t len[4])
{
    size_t np = (size_t)w * h;
    unsigned nt = np >= 32768 ? pl_threads__count(0) : 1;
    uint32_t maxlen = 0;
    for (int d = 0; d < 4; d++)
        if (len[d] > maxlen)
            maxlen = len[d];
    float *scratch = malloc((size_t)nt * maxlen * sizeof *scratch);
    if (!scratch)
        return PL_ENOMEM;
    for (size_t i = 0; i < np; i++)
        out[i] = NAN;
    for (int d = 0; d < 4; d++) {
        line_set s = {w, h, d, len[d], (len[d] * 3 + 3) / 4, v, out, scratch};
        if (s.need < 1)
            s.need = 1;
        pl_threads__for(nt, line_count(&s), line_slice, &s);
    }
    free(scratch);
    return PL_OK;
}

/* ---- noise -------------------------------------------------------------------------- */

/*
 * Immerkaer (1996), "Fast noise variance estimation", Computer Vision and
 * Image Understanding 64(2): the mask N = [1 -2 1]' [1 -2 1], the product
 * of the second differences along rows and columns, has zero response to
 * anything of the form f(col) + g(row) (a plane, shading along one axis, a
 * flange's straight edge along a row or a column) and, for white noise of
 * deviation sigma, a response of deviation 6 sigma (the root of the sum of
 * its squared weights, 36). Robustly: sigma = 1.4826 MAD(r) / 6, over the
 * pixels whose 3 x 3 window is all data.
 */
int pl_detect__noise_highpass(double *sigma, uint64_t *count, const float *v, uint32_t w,
                              uint32_t h)
{
    *sigma = NAN;
    *count = 0;
    if (w < 3 || h < 3)
        return PL_OK;
    float *res = malloc((size_t)(w - 2) * (h - 2) * sizeof *res);
    if (!res)
        return PL_ENOMEM;
    size_t n = 0;
    for (uint32_t y = 1; y + 1 < h; y++) {
        const float *a = v + (size_t)(y - 1) * w, *b = a + w, *c = b + w;
        for (uint32_t x = 1; x + 1 < w; x++) {
            float r = (a[x - 1] - 2 * a[x] + a[x + 1]) - 2 * (b[x - 1] - 2 * b[x] + b[x + 1]) +
                      (c[x - 1] - 2 * c[x] + c[x + 1]);
            if (isfinite(r))
                res[n++] = r;
        }
    }
    if (n >= PL_DETECT_MIN_NOISE_PIXELS) {
        float med = pl_filter__median_float(res, n);
        for (size_t i = 0; i < n; i++)
            res[i] = fabsf(res[i] - med);
        *sigma = 1.482602218505602 * pl_filter__median_float(res, n) / 6.0;
    }
    *count = n;
    free(res);
    return PL_OK;
}

/* ---- the shared preparation ---------------------------------------------------------- */

typedef struct prep {
    pl_detect_options o;
    uint32_t w, h;
    int polarity, stated, nominal;
    pl_background background;
    float *values;  /* the channel after despeckle */
    float *signal;
    float *bmap;
    double background_level;
    double noise;
    pl_noise_method noise_method;
    uint64_t noise_pixels;
    double high_thr, low_thr;
    uint64_t with_data;
} prep;

static void prep_free(prep *p)
{
    free(p->values);
    free(p->signal);
    free(p->bmap);
}

static int pitch_known(const pl_map *map)
{
    return map->pitch_u > 0 && isfinite(map->pitch_u) && map->pitch_v > 0 &&
           isfinite(map->pitch_v);
}

/* The median of the finite values of v[0..n), NaN when none. */
static int finite_median(double *out, const float *v, size_t n)
{
    float *buf = malloc((n ? n : 1) * sizeof *buf);
    if (!buf)
        return PL_ENOMEM;
    size_t k = 0;
    for (size_t i = 0; i < n; i++)
        if (v[i] == v[i])
            buf[k++] = v[i];
    *out = k ? (double)pl_filter__median_float(buf, k) : NAN;
    free(buf);
    return PL_OK;
}

static uint32_t window_px(double mm, double pitch)
{
    double n = floor(mm / pitch + 0.5);
    if (n < 3)
        n = 3;
    if (n > 65535)
        n = 65535;
    return (uint32_t)n;
}

/* 1.4826 times the median absolute deviation of the signal over the
 * noise region's pixels with data, and their count ([out] k). */
static int region_mad(double *out, size_t *k, const prep *p)
{
    const pl_detect_options *o = &p->o;
    float *buf = malloc((size_t)o->noise_w * o->noise_h * sizeof *buf);
    *out = NAN;
    *k = 0;
    if (!buf)
        return PL_ENOMEM;
    for (uint32_t y = o->noise_y; y < o->noise_y + o->noise_h; y++)
        for (uint32_t x = o->noise_x; x < o->noise_x + o->noise_w; x++) {
            float s = p->signal[(size_t)y * p->w + x];
            if (s == s)
                buf[(*k)++] = s;
        }
    if (*k >= PL_DETECT_MIN_NOISE_PIXELS) {
        float med = pl_filter__median_float(buf, *k);
        for (size_t i = 0; i < *k; i++)
            buf[i] = fabsf(buf[i] - med);
        *out = 1.482602218505602 * pl_filter__median_float(buf, *k);
    }
    free(buf);
    return PL_OK;
}

/*
 * The line-median background, on polarity x value so that the largest
 * median is the one nearest the defects' side. On a slope (the flash's
 * shading) a median moves by half a step of the slope for every raised
 * value in its window, so a defect there would lift its own background.
 * The medians are therefore taken of the residual from a smooth trend, the
 * common layer's Gaussian of background_mm / 4, and the trend added back:
 * the trend carries the slopes (what a defect adds to it is broad, so the
 * medians of the residual take it back out), the residual's medians the
 * substructure. p->signal serves as scratch.
 */
static int line_median_background(prep *p, const pl_map *map)
{
    const pl_detect_options *o = &p->o;
    size_t np = (size_t)p->w * p->h;
    const float *v = p->values;
    float pol = (float)p->polarity, *trend;
    for (size_t i = 0; i < np; i++)
        p->signal[i] = pol * v[i];
    if (pl_filter__gauss(&trend, p->signal, p->w, p->h,
                         o->background_mm / 4.0 / sqrt(map->pitch_u * map->pitch_v)))
        return PL_ENOMEM;
    for (size_t i = 0; i < np; i++)
        p->signal[i] -= trend[i];
    double pd = sqrt(map->pitch_u * map->pitch_u + map->pitch_v * map->pitch_v);
    uint32_t len[4] = {window_px(o->background_mm, map->pitch_u),
                       window_px(o->background_mm, map->pitch_v),
                       window_px(o->background_mm, pd), window_px(o->background_mm, pd)};
    double med;
    if (finite_median(&med, p->signal, np) ||
        pl_detect__line_median(p->bmap, p->signal, p->w, p->h, len)) {
        free(trend);
        return PL_ENOMEM;
    }
    for (size_t i = 0; i < np; i++) {
        if (v[i] != v[i])
            p->bmap[i] = NAN;
        else
            p->bmap[i] = pol * (trend[i] + (p->bmap[i] == p->bmap[i] ? p->bmap[i] : (float)med));
    }
    free(trend);
    return PL_OK;
}

/* Everything up to the thresholds, shared by pl_detect(), pl_detect_measure()
 * and pl_detect_noise(); the message names the channel. */
static int prepare(prep *p, const pl_map *map, uint32_t channel, const pl_detect_options *opts,
                   pl_err *err)
{
    memset(p, 0, sizeof *p);
    int rc = resolve_options(&p->o, opts, err);
    if (rc)
        return rc;
    const pl_detect_options *o = &p->o;
    if (channel >= map->nchannels)
        return pl__err(err, PL_EINVAL, "channel %lu does not exist (the map has %lu)",
                       (unsigned long)channel, (unsigned long)map->nchannels);
    const char *q = map->channels[channel].quantity;
    p->w = map->width;
    p->h = map->height;
    p->stated = o->polarity != 0;
    p->polarity = p->stated ? o->polarity : (int)pl_quantity_polarity(q);
    if (!p->polarity)
        return pl__err(err, PL_EINVAL,
                       "channel %lu ('%s'): the quantity does not rise or fall over a defect "
                       "of its own accord; state the polarity",
                       (unsigned long)channel, q);
    p->nominal = !isnan(o->nominal);
    if (pl_quantity_uses_nominal(q) && !p->nominal)
        return pl__err(err, PL_EINVAL,
                       "channel %lu ('%s') is compared with the site's nominal value "
                       "(for depth, the nominal thickness): give it, in %s",
                       (unsigned long)channel, q, map->channels[channel].unit);
    p->background = p->nominal ? PL_BACKGROUND_NOMINAL : o->background;
    int need_pitch = o->min_area_mm2 > 0 || p->background == PL_BACKGROUND_LINE_MEDIAN;
    if (need_pitch && !pitch_known(map))
        return pl__err(err, PL_EINVAL,
                       "channel %lu ('%s'): the map's pitch is not known, and the %s needs it",
                       (unsigned long)channel, q,
                       o->min_area_mm2 > 0 ? "minimum area" : "line-median background");
    if (o->noise_w && o->noise_h &&
        ((uint64_t)o->noise_x + o->noise_w > map->width ||
         (uint64_t)o->noise_y + o->noise_h > map->height))
        return pl__err(err, PL_EINVAL,
                       "noise region %lu,%lu,%lu,%lu lies outside the map of %lu x %lu pixels",
                       (unsigned long)o->noise_x, (unsigned long)o->noise_y,
                       (unsigned long)o->noise_w, (unsigned long)o->noise_h,
                       (unsigned long)map->width, (unsigned long)map->height);
    if (o->depth_channel >= 0) {
        if ((uint32_t)o->depth_channel >= map->nchannels)
            return pl__err(err, PL_EINVAL, "depth channel %d does not exist (the map has %lu)",
                           o->depth_channel, (unsigned long)map->nchannels);
        if (strcmp(map->channels[o->depth_channel].unit, "mm") != 0)
            return pl__err(err, PL_EINVAL, "depth channel %d ('%s') is in '%s', not mm",
                           o->depth_channel, map->channels[o->depth_channel].quantity,
                           map->channels[o->depth_channel].unit);
    }
    size_t np = (size_t)p->w * p->h;
    const float *src = pl_map_channel(map, channel);
    if (o->despeckle) {
        if (pl_filter__despeckle(&p->values, src, p->w, p->h))
            return pl__err(err, PL_ENOMEM, "out of memory for a map of %lu x %lu",
                           (unsigned long)p->w, (unsigned long)p->h);
    } else {
        p->values = malloc(np * sizeof *p->values);
        if (!p->values)
            return pl__err(err, PL_ENOMEM, "out of memory for a map of %lu x %lu",
                           (unsigned long)p->w, (unsigned long)p->h);
        memcpy(p->values, src, np * sizeof *p->values);
    }
    float *v = p->values;
    for (size_t i = 0; i < np; i++) {
        if (!isfinite(v[i]))
            v[i] = NAN;
        else
            p->with_data++;
    }
    if (!p->with_data) {
        prep_free(p);
        return pl__err(err, PL_EINVAL, "channel %lu ('%s') holds no data",
                       (unsigned long)channel, q);
    }
    p->signal = malloc(np * sizeof *p->signal);
    p->bmap = malloc(np * sizeof *p->bmap);
    if (!p->signal || !p->bmap)
        goto nomem;
    /* the high-pass noise first: the line-median background uses it */
    double hp;
    uint64_t hp_n;
    if (pl_detect__noise_highpass(&hp, &hp_n, v, p->w, p->h))
        goto nomem;
    /* the background, b */
    float pol = (float)p->polarity;
    switch (p->background) {
    case PL_BACKGROUND_NOMINAL:
    case PL_BACKGROUND_ZERO: {
        float b = p->background == PL_BACKGROUND_ZERO ? 0.0f : (float)o->nominal;
        for (size_t i = 0; i < np; i++)
            p->bmap[i] = v[i] == v[i] ? b : NAN;
        break;
    }
    case PL_BACKGROUND_MEDIAN: {
        double med;
        if (finite_median(&med, v, np))
            goto nomem;
        for (size_t i = 0; i < np; i++)
            p->bmap[i] = v[i] == v[i] ? (float)med : NAN;
        break;
    }
    case PL_BACKGROUND_LINE_MEDIAN:
        if (line_median_background(p, map))
            goto nomem;
        break;
    }
    for (size_t i = 0; i < np; i++)
        p->signal[i] = pol * (v[i] - p->bmap[i]);
    if (finite_median(&p->background_level, p->bmap, np))
        goto nomem;
    /* the noise */
    if (!isnan(o->noise)) {
        p->noise = o->noise;
        p->noise_method = PL_NOISE_GIVEN;
    } else if (o->noise_w && o->noise_h) {
        size_t k;
        if (region_mad(&p->noise, &k, p))
            goto nomem;
        if (k < PL_DETECT_MIN_NOISE_PIXELS) {
            prep_free(p);
            return pl__err(err, PL_EINVAL,
                           "channel %lu ('%s'): the noise region holds %lu pixels with data "
                           "(at least %u needed)",
                           (unsigned long)channel, q, (unsigned long)k,
                           PL_DETECT_MIN_NOISE_PIXELS);
        }
        p->noise_pixels = k;
        p->noise_method = PL_NOISE_REGION;
    } else {
        p->noise = hp;
        p->noise_pixels = hp_n;
        p->noise_method = PL_NOISE_HIGH_PASS;
    }
    if (!(p->noise > 0)) {
        if (!p->nominal || !(o->nominal_margin > 0) || o->nominal == 0) {
            double found = p->noise;
            prep_free(p);
            if (isnan(found))
                return pl__err(err, PL_EINVAL,
                               "channel %lu ('%s'): %lu pixels have a whole 3 x 3 window of "
                               "data, too few for a noise estimate (at least %u); give the "
                               "noise or a sound region",
                               (unsigned long)channel, q, (unsigned long)p->noise_pixels,
                               PL_DETECT_MIN_NOISE_PIXELS);
            return pl__err(err, PL_EINVAL,
                           "channel %lu ('%s'): the noise estimate is 0 (values without "
                           "noise); give the noise",
                           (unsigned long)channel, q);
        }
        p->noise = NAN;
        p->noise_method = PL_NOISE_NONE;
    }
    p->high_thr = o->high * p->noise;
    p->low_thr = o->low * p->noise;
    if (p->nominal) {
        double m = o->nominal_margin * fabs(o->nominal);
        p->high_thr = isnan(p->high_thr) ? m : fmax(p->high_thr, m);
        p->low_thr = isnan(p->low_thr) ? m : fmax(p->low_thr, m);
    }
    return PL_OK;
nomem:
    prep_free(p);
    return pl__err(err, PL_ENOMEM, "out of memory detecting on a map of %lu x %lu",
                   (unsigned long)p->w, (unsigned long)p->h);
}

PL_EXPORT int pl_detect_noise(double *noise, pl_noise_method *method, const pl_map *map,
                              uint32_t channel, const pl_detect_options *opts, pl_err *err)
{
    assert(map && noise);
    prep p;
    *noise = NAN;
    int rc = prepare(&p, map, channel, opts, err);
    if (rc)
        return rc;
    *noise = p.noise;
    if (method)
        *method = p.noise_method;
    prep_free(&p);
    return PL_OK;
}

/* ---- measuring ----------------------------------------------------------------------- */

PL_EXPORT void pl_detection_free(pl_detection *det)
{
    if (!det)
        return;
    for (size_t k = 0; k < det->count; k++)
        free(det->indications[k].outline);
    free(det->indications);
    free(det->labels);
    free(det->signal);
    free(det->background_map);
    free(det);
}

static double area_of(uint64_t pixels, const pl_map *map)
{
    return pitch_known(map) ? (double)pixels * map->pitch_u * map->pitch_v : NAN;
}

static void set_size(pl_indication_size *s, uint64_t pixels, const pl_map *map)
{
    s->pixels = pixels;
    s->area_mm2 = area_of(pixels, map);
    s->equivalent_diameter_mm = sqrt(4.0 * s->area_mm2 / 3.14159265358979323846);
}

/* The depth channel's median over each region: a counting sort of the
 * pixels with a depth by label, then one selection per region. */
static int region_depths(pl_detection *det, const pl_map *map, int channel)
{
    size_t n = det->count, np = (size_t)det->width * det->height;
    const float *d = pl_map_channel(map, (uint32_t)channel);
    size_t *start = calloc(n + 1, sizeof *start);
    if (!start)
        return PL_ENOMEM;
    for (size_t i = 0; i < np; i++)
        if (det->labels[i] && isfinite(d[i]))
            start[det->labels[i]]++;
    size_t total = 0;
    for (size_t k = 0; k <= n; k++) {
        size_t c = start[k];
        start[k] = total;
        total += c;
    }
    float *buf = malloc((total ? total : 1) * sizeof *buf);
    size_t *fill = malloc((n + 1) * sizeof *fill);
    if (!buf || !fill) {
        free(start);
        free(buf);
        free(fill);
        return PL_ENOMEM;
    }
    memcpy(fill, start, (n + 1) * sizeof *fill);
    for (size_t i = 0; i < np; i++)
        if (det->labels[i] && isfinite(d[i]))
            buf[fill[det->labels[i]]++] = d[i];
    for (size_t k = 1; k <= n; k++) {
        pl_indication *ind = &det->indications[k - 1];
        size_t c = (k < n ? start[k + 1] : total) - start[k];
        ind->depth_pixels = c;
        ind->depth_mm = c ? (double)pl_filter__median_float(buf + start[k], c) : NAN;
    }
    free(start);
    free(buf);
    free(fill);
    return PL_OK;
}

/* Every measure of det->count regions of det->labels. */
static int measure(pl_detection *det, const pl_map *map, const prep *p)
{
    size_t n = det->count, np = (size_t)det->width * det->height;
    uint32_t w = det->width, h = det->height;
    if (n == 0)
        return PL_OK;
    det->indications = calloc(n, sizeof *det->indications);
    pl_detect__sums *sums = malloc(n * sizeof *sums);
    double *perim = malloc(n * sizeof *perim);
    uint32_t *seen = calloc(np, sizeof *seen), *stack = malloc(np * sizeof *stack);
    int rc = PL_ENOMEM;
    if (!det->indications || !sums || !perim || !seen || !stack)
        goto done;
    pl_detect__accumulate(sums, (uint32_t)n, det->labels, det->signal, w, h);
    if (pl_detect__perimeter(perim, (uint32_t)n, det->labels, w, h))
        goto done;
    int pitch = pitch_known(map);
    double pu = map->pitch_u, pv = map->pitch_v, sigma = p->noise;
    for (size_t k = 0; k < n; k++) {
        pl_indication *ind = &det->indications[k];
        const pl_detect__sums *s = &sums[k];
        ind->label = (uint32_t)(k + 1);
        set_size(&ind->size[PL_SIZING_THRESHOLD], s->n, map);
        ind->depth_mm = NAN;
        if (s->n == 0) {
            set_size(&ind->size[PL_SIZING_HALF_MAX], 0, map);
            ind->centroid_col = ind->centroid_row = NAN;
            for (int j = 0; j < 3; j++)
                ind->centroid_part[j] = NAN;
            ind->major_axis_px = ind->minor_axis_px = ind->major_axis_mm =
                ind->minor_axis_mm = ind->orientation_deg = NAN;
            ind->peak_contrast = ind->peak_snr = ind->mean_contrast = ind->mean_snr = NAN;
            ind->perimeter_px = ind->perimeter_mm = NAN;
            continue;
        }
        pl_detect__centroid(s, &ind->centroid_col, &ind->centroid_row);
        pl_map_pixel_to_part(map, ind->centroid_col, ind->centroid_row, ind->centroid_part);
        ind->bbox_col0 = s->col0;
        ind->bbox_row0 = s->row0;
        ind->bbox_col1 = s->col1;
        ind->bbox_row1 = s->row1;
        double orient_px;
        pl_detect__axes(s, 1.0, 1.0, &ind->major_axis_px, &ind->minor_axis_px, &orient_px);
        if (pitch)
            pl_detect__axes(s, pu, pv, &ind->major_axis_mm, &ind->minor_axis_mm,
                            &ind->orientation_deg);
        else {
            ind->major_axis_mm = ind->minor_axis_mm = NAN;
            ind->orientation_deg = orient_px;
        }
        uint64_t half = 0;
        if (isfinite(s->peak)) {
            ind->peak_col = s->peak_col;
            ind->peak_row = s->peak_row;
            ind->peak_contrast = p->polarity * (double)s->peak;
            ind->peak_snr = (double)s->peak / sigma;
            if (s->peak > 0)
                half = pl_detect__half_max(det->labels, det->signal, w, h, ind->label,
                                           s->peak_col, s->peak_row, 0.5f * s->peak, seen,
                                           stack);
        } else {
            ind->peak_contrast = ind->peak_snr = NAN;
        }
        set_size(&ind->size[PL_SIZING_HALF_MAX], half, map);
        ind->mean_contrast = p->polarity * s->sum / (double)s->n;
        ind->mean_snr = s->sum / (double)s->n / sigma;
        ind->perimeter_px = perim[k];
        ind->perimeter_mm = pitch ? perim[k] * sqrt(pu * pv) : NAN;
        if (pl_detect__outline(&ind->outline, det->labels, w, h, ind->label, s->ref_col,
                               s->ref_row))
            goto done;
    }
    if (p->o.depth_channel >= 0 && region_depths(det, map, p->o.depth_channel))
        goto done;
    rc = PL_OK;
done:
    free(sums);
    free(perim);
    free(seen);
    free(stack);
    return rc;
}

/* A detection holding the preparation's images and figures (taken over). */
static int detection_new(pl_detection **out, prep *p, const pl_map *map, uint32_t channel)
{
    pl_detection *det = calloc(1, sizeof *det);
    size_t np = (size_t)p->w * p->h;
    if (det)
        det->labels = malloc(np * sizeof *det->labels);
    if (!det || !det->labels) {
        free(det);
        prep_free(p);
        return PL_ENOMEM;
    }
    det->width = p->w;
    det->height = p->h;
    det->channel = channel;
    memcpy(det->quantity, map->channels[channel].quantity, sizeof det->quantity);
    memcpy(det->unit, map->channels[channel].unit, sizeof det->unit);
    det->pitch_u = pitch_known(map) ? map->pitch_u : NAN;
    det->pitch_v = pitch_known(map) ? map->pitch_v : NAN;
    det->polarity = p->polarity;
    det->polarity_stated = p->stated;
    det->background = p->background;
    det->background_level = p->background_level;
    det->noise = p->noise;
    det->noise_method = p->noise_method;
    det->noise_pixels = p->noise_pixels;
    det->high_threshold = p->high_thr;
    det->low_threshold = p->low_thr;
    det->pixels_with_data = p->with_data;
    det->signal = p->signal;
    det->background_map = p->bmap;
    det->options = p->o;
    p->signal = p->bmap = NULL;
    *out = det;
    return PL_OK;
}

/* Threshold, label and measure a preparation (taken over). */
static int detect_prepared(pl_detection **out, prep *p, const pl_map *map, uint32_t channel,
                           int reference_level, pl_err *err)
{
    pl_detection *det;
    if (detection_new(&det, p, map, channel))
        return pl__err(err, PL_ENOMEM, "out of memory for a detection");
    prep_free(p);
    det->reference_level = reference_level;
    uint64_t min_px = 0;
    if (det->options.min_area_mm2 > 0)
        min_px = (uint64_t)ceil(det->options.min_area_mm2 / (map->pitch_u * map->pitch_v) -
                                1e-9);
    uint32_t count;
    int rc = pl_detect__hysteresis(det->labels, &count, &det->regions_below_min_area,
                                   det->signal, det->width, det->height, det->low_threshold,
                                   det->high_threshold, min_px);
    if (!rc) {
        det->count = count;
        rc = measure(det, map, p);
    }
    if (rc) {
        pl_detection_free(det);
        return pl__err(err, rc, "out of memory measuring indications");
    }
    *out = det;
    return PL_OK;
}

PL_EXPORT int pl_detect(pl_detection **out, const pl_map *map, uint32_t channel,
                        const pl_detect_options *opts, pl_err *err)
{
    assert(out && map);
    *out = NULL;
    prep p;
    int rc = prepare(&p, map, channel, opts, err);
    if (rc)
        return rc;
    return detect_prepared(out, &p, map, channel, 0, err);
}

PL_EXPORT int pl_detect_reference_level(const char *quantity)
{
    /* pulse-phase thermography's phase hardly follows the heating's
     * pattern or the surface's emissivity (X. Maldague and S. Marinetti,
     * "Pulse phase infrared thermography", J. Appl. Phys. 79(5), 1996) */
    return quantity && (strcmp(quantity, "phase") == 0 || strcmp(quantity, "phase-contrast") == 0);
}

PL_EXPORT int pl_detect_on_reference(pl_detection **out, const pl_map *map, uint32_t channel,
                                     const pl_detection *reference,
                                     const pl_detect_options *opts, pl_err *err)
{
    assert(out && map && reference);
    *out = NULL;
    if (reference->width != map->width || reference->height != map->height)
        return pl__err(err, PL_EINVAL,
                       "the reference detection is of a %lu x %lu map, this map is %lu x %lu: "
                       "lay the map on the reference's grid first",
                       (unsigned long)reference->width, (unsigned long)reference->height,
                       (unsigned long)map->width, (unsigned long)map->height);
    prep p;
    int rc = prepare(&p, map, channel, opts, err);
    if (rc)
        return rc;
    if (strcmp(reference->quantity, map->channels[channel].quantity) != 0 ||
        strcmp(reference->unit, map->channels[channel].unit) != 0 ||
        reference->polarity != p.polarity) {
        prep_free(&p);
        return pl__err(err, PL_EINVAL,
                       "channel %lu ('%s' in %s) is not of the reference detection's quantity "
                       "('%s' in %s) or polarity",
                       (unsigned long)channel, map->channels[channel].quantity,
                       map->channels[channel].unit, reference->quantity, reference->unit);
    }
    if (p.background != PL_BACKGROUND_LINE_MEDIAN || reference->background != p.background)
        return detect_prepared(out, &p, map, channel, 0, err);
    size_t np = (size_t)p.w * p.h;
    float *d = malloc(np * sizeof *d);
    if (!d) {
        prep_free(&p);
        return pl__err(err, PL_ENOMEM, "out of memory detecting on a map of %lu x %lu",
                       (unsigned long)p.w, (unsigned long)p.h);
    }
    const float *rb = reference->background_map;
    for (size_t i = 0; i < np; i++)
        d[i] = p.bmap[i] - rb[i]; /* NaN where either has no data */
    double offset;
    rc = finite_median(&offset, d, np);
    free(d);
    if (rc) {
        prep_free(&p);
        return pl__err(err, PL_ENOMEM, "out of memory detecting on a map of %lu x %lu",
                       (unsigned long)p.w, (unsigned long)p.h);
    }
    if (isnan(offset)) /* no pixel with data in both */
        return detect_prepared(out, &p, map, channel, 0, err);
    float pol = (float)p.polarity;
    for (size_t i = 0; i < np; i++) {
        float own = p.bmap[i], ref = rb[i] + (float)offset;
        if (own != own || ref != ref)
            continue;
        /* the level nearer the signal's sound side: an indication that grew
         * raised (or lowered) this map's own background under it */
        float b = pol > 0 ? fminf(own, ref) : fmaxf(own, ref);
        p.bmap[i] = b;
        p.signal[i] = pol * (p.values[i] - b);
    }
    if (finite_median(&p.background_level, p.bmap, np)) {
        prep_free(&p);
        return pl__err(err, PL_ENOMEM, "out of memory detecting on a map of %lu x %lu",
                       (unsigned long)p.w, (unsigned long)p.h);
    }
    return detect_prepared(out, &p, map, channel, 1, err);
}

PL_EXPORT int pl_detect_measure(pl_detection **out, const pl_map *map, uint32_t channel,
                                const uint32_t *labels, const pl_detect_options *opts,
                                pl_err *err)
{
    assert(out && map && labels);
    *out = NULL;
    size_t np = (size_t)map->width * map->height;
    uint32_t maxl = 0;
    for (size_t i = 0; i < np; i++)
        if (labels[i] > maxl)
            maxl = labels[i];
    if (maxl > np)
        return pl__err(err, PL_EINVAL, "label %lu exceeds the map's %lu pixels",
                       (unsigned long)maxl, (unsigned long)np);
    prep p;
    int rc = prepare(&p, map, channel, opts, err);
    if (rc)
        return rc;
    pl_detection *det;
    if (detection_new(&det, &p, map, channel))
        return pl__err(err, PL_ENOMEM, "out of memory for a detection");
    prep_free(&p);
    for (size_t i = 0; i < np; i++)
        det->labels[i] = det->signal[i] == det->signal[i] ? labels[i] : 0;
    det->count = maxl;
    rc = measure(det, map, &p);
    if (rc) {
        pl_detection_free(det);
        return pl__err(err, rc, "out of memory measuring regions");
    }
    *out = det;
    return PL_OK;
}

/* ---- JSON ------------------------------------------------------------------------------ */

static cJSON *add_number(cJSON *obj, const char *name, double v)
{
    return isfinite(v) ? cJSON_AddNumberToObject(obj, name, v) : cJSON_AddNullToObject(obj, name);
}

static cJSON *number(double v)
{
    return isfinite(v) ? cJSON_CreateNumber(v) : cJSON_CreateNull();
}

static cJSON *options_object(const pl_detect_options *o)
{
    cJSON *j = cJSON_CreateObject();
    if (!j)
        return NULL;
    cJSON_AddNumberToObject(j, "version", o->version);
    add_number(j, "high", o->high);
    add_number(j, "low", o->low);
    add_number(j, "min_area_mm2", o->min_area_mm2);
    cJSON_AddStringToObject(j, "polarity",
                            o->polarity == 0 ? "quantity" : o->polarity > 0 ? "rises" : "falls");
    add_number(j, "nominal", o->nominal);
    add_number(j, "nominal_margin", o->nominal_margin);
    cJSON_AddStringToObject(j, "background", pl_background_name(o->background));
    add_number(j, "background_mm", o->background_mm);
    add_number(j, "noise", o->noise);
    if (o->noise_w && o->noise_h) {
        cJSON *r = cJSON_AddArrayToObject(j, "noise_region");
        if (r) {
            cJSON_AddItemToArray(r, cJSON_CreateNumber(o->noise_x));
            cJSON_AddItemToArray(r, cJSON_CreateNumber(o->noise_y));
            cJSON_AddItemToArray(r, cJSON_CreateNumber(o->noise_w));
            cJSON_AddItemToArray(r, cJSON_CreateNumber(o->noise_h));
        }
    } else
        cJSON_AddNullToObject(j, "noise_region");
    cJSON_AddBoolToObject(j, "despeckle", o->despeckle);
    if (o->depth_channel >= 0)
        cJSON_AddNumberToObject(j, "depth_channel", o->depth_channel);
    else
        cJSON_AddNullToObject(j, "depth_channel");
    return j;
}

static cJSON *indication_object(const pl_detection *det, const pl_indication *ind)
{
    cJSON *j = cJSON_CreateObject();
    if (!j)
        return NULL;
    cJSON_AddNumberToObject(j, "label", ind->label);
    cJSON *sizes = cJSON_AddArrayToObject(j, "sizes");
    for (int r = 0; sizes && r < PL_SIZING_COUNT; r++) {
        cJSON *s = cJSON_CreateObject();
        if (!s)
            break;
        cJSON_AddStringToObject(s, "rule", pl_sizing_name((pl_sizing)r));
        cJSON_AddNumberToObject(s, "pixels", (double)ind->size[r].pixels);
        add_number(s, "area_mm2", ind->size[r].area_mm2);
        add_number(s, "equivalent_diameter_mm", ind->size[r].equivalent_diameter_mm);
        cJSON_AddItemToArray(sizes, s);
    }
    cJSON *c = cJSON_AddArrayToObject(j, "centroid_px");
    if (c) {
        cJSON_AddItemToArray(c, number(ind->centroid_col));
        cJSON_AddItemToArray(c, number(ind->centroid_row));
    }
    c = cJSON_AddArrayToObject(j, "centroid_part");
    for (int k = 0; c && k < 3; k++)
        cJSON_AddItemToArray(c, number(ind->centroid_part[k]));
    c = cJSON_AddArrayToObject(j, "bbox_px");
    if (c) {
        cJSON_AddItemToArray(c, cJSON_CreateNumber(ind->bbox_col0));
        cJSON_AddItemToArray(c, cJSON_CreateNumber(ind->bbox_row0));
        cJSON_AddItemToArray(c, cJSON_CreateNumber(ind->bbox_col1));
        cJSON_AddItemToArray(c, cJSON_CreateNumber(ind->bbox_row1));
    }
    cJSON *a = cJSON_AddObjectToObject(j, "axes");
    if (a) {
        add_number(a, "major_px", ind->major_axis_px);
        add_number(a, "minor_px", ind->minor_axis_px);
        add_number(a, "major_mm", ind->major_axis_mm);
        add_number(a, "minor_mm", ind->minor_axis_mm);
        add_number(a, "orientation_deg", ind->orientation_deg);
    }
    cJSON *pk = cJSON_AddObjectToObject(j, "peak");
    if (pk) {
        cJSON_AddNumberToObject(pk, "col", ind->peak_col);
        cJSON_AddNumberToObject(pk, "row", ind->peak_row);
        add_number(pk, "contrast", ind->peak_contrast);
        add_number(pk, "snr", ind->peak_snr);
    }
    cJSON *mn = cJSON_AddObjectToObject(j, "mean");
    if (mn) {
        add_number(mn, "contrast", ind->mean_contrast);
        add_number(mn, "snr", ind->mean_snr);
    }
    cJSON_AddStringToObject(j, "unit", det->unit);
    add_number(j, "depth_mm", ind->depth_mm);
    add_number(j, "perimeter_px", ind->perimeter_px);
    add_number(j, "perimeter_mm", ind->perimeter_mm);
    if (ind->outline)
        cJSON_AddStringToObject(j, "outline", ind->outline);
    else
        cJSON_AddNullToObject(j, "outline");
    return j;
}

/* Print and free `j`; PL_ENOMEM when anything on the way failed. A cJSON
 * call that fails leaves its member out, so the count of members tells. */
static int finish_json(char **out, cJSON *j, int members, pl_err *err)
{
    *out = NULL;
    if (j && cJSON_GetArraySize(j) == members)
        *out = cJSON_PrintUnformatted(j);
    cJSON_Delete(j);
    return *out ? PL_OK : pl__err(err, PL_ENOMEM, "out of memory writing detection JSON");
}

PL_EXPORT int pl_detect_options_json(char **out, const pl_detect_options *opts, pl_err *err)
{
    *out = NULL;
    pl_detect_options o;
    int rc = resolve_options(&o, opts, err);
    if (rc)
        return rc;
    return finish_json(out, options_object(&o), 13, err);
}

PL_EXPORT int pl_indication_json(char **out, const pl_detection *det, size_t i, pl_err *err)
{
    assert(det);
    *out = NULL;
    if (i >= det->count)
        return pl__err(err, PL_EINVAL, "indication %lu does not exist (%lu found)",
                       (unsigned long)i, (unsigned long)det->count);
    return finish_json(out, indication_object(det, &det->indications[i]), 13, err);
}

PL_EXPORT int pl_detection_json(char **out, const pl_detection *det, pl_err *err)
{
    assert(det);
    cJSON *j = cJSON_CreateObject();
    if (j) {
        cJSON_AddNumberToObject(j, "channel", det->channel);
        cJSON_AddStringToObject(j, "quantity", det->quantity);
        cJSON_AddStringToObject(j, "unit", det->unit);
        cJSON_AddStringToObject(j, "polarity", det->polarity > 0 ? "rises" : "falls");
        cJSON_AddBoolToObject(j, "polarity_stated", det->polarity_stated);
        cJSON *b = cJSON_AddObjectToObject(j, "background");
        if (b) {
            cJSON_AddStringToObject(b, "method", pl_background_name(det->background));
            add_number(b, "level", det->background_level);
            cJSON_AddBoolToObject(b, "with_reference", det->reference_level);
        }
        cJSON *nz = cJSON_AddObjectToObject(j, "noise");
        if (nz) {
            add_number(nz, "sigma", det->noise);
            cJSON_AddStringToObject(nz, "method", pl_noise_method_name(det->noise_method));
            cJSON_AddNumberToObject(nz, "pixels", (double)det->noise_pixels);
        }
        cJSON *t = cJSON_AddObjectToObject(j, "thresholds");
        if (t) {
            add_number(t, "high", det->high_threshold);
            add_number(t, "low", det->low_threshold);
        }
        cJSON_AddNumberToObject(j, "pixels_with_data", (double)det->pixels_with_data);
        cJSON_AddNumberToObject(j, "regions_below_min_area", (double)det->regions_below_min_area);
        cJSON *o = options_object(&det->options);
        if (o)
            cJSON_AddItemToObject(j, "options", o);
        cJSON *list = cJSON_AddArrayToObject(j, "indications");
        for (size_t k = 0; list && k < det->count; k++) {
            cJSON *ind = indication_object(det, &det->indications[k]);
            if (!ind || cJSON_GetArraySize(ind) != 13) {
                cJSON_Delete(ind);
                cJSON_Delete(j);
                return finish_json(out, NULL, 0, err);
            }
            cJSON_AddItemToArray(list, ind);
        }
    }
    return finish_json(out, j, 12, err);
}
