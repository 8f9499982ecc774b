/*
 * filter.c - Gaussian blur, median and despeckle of images that may lack
 * data, and the order statistics under them (see filter_int.h).
 */
#include "common/filter_int.h"

#include "plyledger/common.h"

#include <assert.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

/* ---- order statistics ------------------------------------------------------ */

/*
 * The k-th smallest of v[0..n), leaving smaller values before index k and
 * larger ones after it (C. A. R. Hoare, 1961, "Algorithm 65: Find", with a
 * three-way partition so that an array full of equal values costs one
 * pass and a median-of-three pivot); and the median, whose lower middle
 * value for an even count is the largest that selection left before the
 * upper one. For floats and for doubles.
 */
#define DEFINE_ORDER(select, median, type)                                         \
    static void select##_swap(type *a, type *b)                                    \
    {                                                                              \
        type t = *a;                                                               \
        *a = *b;                                                                   \
        *b = t;                                                                    \
    }                                                                              \
                                                                                   \
    static type select##_median3(type a, type b, type c)                           \
    {                                                                              \
        if (a > b)                                                                 \
            select##_swap(&a, &b);                                                 \
        if (b > c)                                                                 \
            select##_swap(&b, &c);                                                 \
        if (a > b)                                                                 \
            select##_swap(&a, &b);                                                 \
        return b;                                                                  \
    }                                                                              \
                                                                                   \
    type select(type *v, size_t n, size_t k)                                       \
    {                                                                              \
        assert(k < n);                                                             \
        size_t lo = 0, hi = n;                                                     \
        while (hi - lo > 1) {                                                      \
            type pivot = select##_median3(v[lo], v[lo + (hi - lo) / 2], v[hi - 1]); \
            size_t lt = lo, i = lo, gt = hi;                                       \
            while (i < gt) {                                                       \
                if (v[i] < pivot)                                                  \
                    select##_swap(&v[lt++], &v[i++]);                              \
                else if (v[i] > pivot)                                             \
                    select##_swap(&v[i], &v[--gt]);                                \
                else                                                               \
                    i++;                                                           \
            }                                                                      \
            if (k < lt)                                                            \
                hi = lt;                                                           \
            else if (k >= gt)                                                      \
                lo = gt;                                                           \
            else                                                                   \
                return pivot;                                                      \
        }                                                                          \
        return v[k];                                                               \
    }                                                                              \
                                                                                   \
    type median(type *v, size_t n)                                                 \
    {                                                                              \
        type hi = select(v, n, n / 2);                                             \
        if (n % 2)                                                                 \
            return hi;                                                             \
        type lo = v[0];                                                            \
        for (size_t i = 1; i < n / 2; i++)                                         \
            if (v[i] > lo)                                                         \
                lo = v[i];                                                         \
        return (type)0.5 * (lo + hi);                                              \
    }

DEFINE_ORDER(pl_filter__select_float, pl_filter__median_float, float)
DEFINE_ORDER(pl_filter__select_double, pl_filter__median_double, double)

float pl_filter__median_small(float *v, int n)
{
    for (int i = 1; i < n; i++)
        for (int j = i; j > 0 && v[j] < v[j - 1]; j--) {
            float t = v[j];
            v[j] = v[j - 1];
            v[j - 1] = t;
        }
    return (n & 1) ? v[n / 2] : 0.5f * (v[n / 2 - 1] + v[n / 2]);
}

/* ---- Gaussian blur ---------------------------------------------------------- */

/* One value of a Gaussian pass (along a row when horizontal, else down a
 * column) over the finite taps only, the weights renormalised over them:
 * the general case, near NaN and the edges. NaN stays NaN. */
static float blur_tap(const float *in, uint32_t w, uint32_t h, const float *k, int rad,
                      uint32_t x, uint32_t y, int horizontal)
{
    if (!isfinite(in[(size_t)y * w + x]))
        return NAN;
    double acc = 0.0, ws = 0.0;
    for (int i = -rad; i <= rad; i++) {
        long xx = horizontal ? (long)x + i : (long)x;
        long yy = horizontal ? (long)y : (long)y + i;
        if (xx < 0 || yy < 0 || xx >= (long)w || yy >= (long)h)
            continue;
        float v = in[(size_t)yy * w + (size_t)xx];
        if (isfinite(v)) {
            acc += k[i + rad] * v;
            ws += k[i + rad];
        }
    }
    return (float)(acc / ws);
}

/*
 * Rows and columns far from the edges take a branch-free path (most of an
 * image), tap by tap over whole rows (vectorisable); a window that holds a
 * pixel without data gives a non-finite sum there (NaN and infinities
 * propagate), and only those pixels, and the edges, are redone by
 * blur_tap(). (A sum of finite values that overflows is redone too, in
 * double.)
 */
int pl_filter__gauss(float **out, const float *src, uint32_t w, uint32_t h, double sigma)
{
    int rad = (int)ceil(3.0 * sigma);
    size_t np = (size_t)w * h;
    float *tmp = malloc(np * sizeof *tmp), *o = malloc(np * sizeof *o);
    float *k = malloc((size_t)(2 * rad + 1) * sizeof *k);
    *out = NULL;
    if (!tmp || !o || !k) {
        free(tmp);
        free(o);
        free(k);
        return PL_ENOMEM;
    }
    double ksum = 0.0;
    for (int i = -rad; i <= rad; i++)
        ksum += exp(-0.5 * i * i / (sigma * sigma));
    for (int i = -rad; i <= rad; i++)
        k[i + rad] = (float)(exp(-0.5 * i * i / (sigma * sigma)) / ksum);
    /* rows */
    for (uint32_t y = 0; y < h; y++) {
        const float *r = src + (size_t)y * w;
        float *d = tmp + (size_t)y * w;
        if ((long)w > 2L * rad) {
            uint32_t x0 = (uint32_t)rad, x1 = w - (uint32_t)rad;
            for (uint32_t x = x0; x < x1; x++)
                d[x] = 0.0f;
            for (int i = -rad; i <= rad; i++) {
                float kk = k[i + rad];
                const float *ri = r + i;
                for (uint32_t x = x0; x < x1; x++)
                    d[x] += kk * ri[x];
            }
            for (uint32_t x = x0; x < x1; x++)
                if (!isfinite(d[x]))
                    d[x] = blur_tap(src, w, h, k, rad, x, y, 1);
            for (uint32_t x = 0; x < x0; x++)
                d[x] = blur_tap(src, w, h, k, rad, x, y, 1);
            for (uint32_t x = x1; x < w; x++)
                d[x] = blur_tap(src, w, h, k, rad, x, y, 1);
        } else {
            for (uint32_t x = 0; x < w; x++)
                d[x] = blur_tap(src, w, h, k, rad, x, y, 1);
        }
    }
    /* columns: interior rows by whole rows at a time */
    for (uint32_t y = 0; y < h; y++) {
        float *d = o + (size_t)y * w;
        int inside = (long)y >= rad && (long)y + rad < (long)h;
        if (inside) {
            for (uint32_t x = 0; x < w; x++)
                d[x] = 0.0f;
            for (int i = -rad; i <= rad; i++) {
                const float *r = tmp + (size_t)((long)y + i) * w;
                float kk = k[i + rad];
                for (uint32_t x = 0; x < w; x++)
                    d[x] += kk * r[x];
            }
            for (uint32_t x = 0; x < w; x++)
                if (!isfinite(d[x]))
                    d[x] = blur_tap(tmp, w, h, k, rad, x, y, 0);
        } else {
            for (uint32_t x = 0; x < w; x++)
                d[x] = blur_tap(tmp, w, h, k, rad, x, y, 0);
        }
    }
    free(tmp);
    free(k);
    *out = o;
    return PL_OK;
}

/* ---- median ------------------------------------------------------------------ */

/* Above this many values a window's median is found by selection rather
 * than by insertion sort. */
#define MEDIAN_SORT_MAX 32

int pl_filter__median(float **out, const float *src, uint32_t w, uint32_t h, unsigned k)
{
    assert(k % 2 == 1 && k <= PL_FILTER_MEDIAN_MAX_K);
    size_t np = (size_t)w * h;
    long r = (long)k / 2;
    float *o = malloc(np * sizeof *o);
    float v[PL_FILTER_MEDIAN_MAX_K * PL_FILTER_MEDIAN_MAX_K];
    *out = NULL;
    if (!o)
        return PL_ENOMEM;
    for (uint32_t y = 0; y < h; y++) {
        long y0 = (long)y - r < 0 ? 0 : (long)y - r;
        long y1 = (long)y + r >= (long)h ? (long)h - 1 : (long)y + r;
        for (uint32_t x = 0; x < w; x++) {
            size_t i = (size_t)y * w + x;
            if (!isfinite(src[i])) {
                o[i] = src[i];
                continue;
            }
            long x0 = (long)x - r < 0 ? 0 : (long)x - r;
            long x1 = (long)x + r >= (long)w ? (long)w - 1 : (long)x + r;
            int n = 0;
            for (long yy = y0; yy <= y1; yy++) {
                const float *row = src + (size_t)yy * w;
                for (long xx = x0; xx <= x1; xx++)
                    if (isfinite(row[xx]))
                        v[n++] = row[xx];
            }
            o[i] = n <= MEDIAN_SORT_MAX ? pl_filter__median_small(v, n)
                                        : pl_filter__median_float(v, (size_t)n);
        }
    }
    *out = o;
    return PL_OK;
}

/* ---- dead and hot pixels --------------------------------------------------- */

/*
 * Dead and hot pixels sit still in the camera while the part moves, and
 * phase correlation, which whitens the spectrum, weighs such single-pixel
 * outliers as heavily as the texture. A pixel is taken for one when it lies
 * more than DESPECKLE_K robust standard deviations, and more than
 * DESPECKLE_RANGE of the image's 1st-99th percentile range, above the
 * largest, or below the smallest, of its 8 neighbours; it is replaced by
 * their median. (The range keeps a noiseless photograph's sharp texture,
 * whose robust noise is near zero, out of reach.)
 * An edge or a line has neighbours on both sides of its value, so real
 * structure is never touched; the robust standard deviation is 1.4826 x the
 * median absolute difference between a pixel and the median of its
 * neighbours, from at most DESPECKLE_SAMPLES pixels (common practice for
 * impulse noise).
 */
#define DESPECKLE_K 8.0
#define DESPECKLE_RANGE 0.25
#define DESPECKLE_SAMPLES 16384u

/* The median of 8 finite values (the mean of the 4th and 5th), by
 * Batcher's odd-even merge network of 19 comparators (Knuth, TAOCP vol. 3,
 * 5.3.4), branch-free. */
static float median8(float v[8])
{
    static const unsigned char net[19][2] = {
        { 0, 1 }, { 2, 3 }, { 4, 5 }, { 6, 7 }, { 0, 2 }, { 1, 3 }, { 4, 6 },
        { 5, 7 }, { 1, 2 }, { 5, 6 }, { 0, 4 }, { 3, 7 }, { 1, 5 }, { 2, 6 },
        { 1, 4 }, { 3, 6 }, { 2, 4 }, { 3, 5 }, { 3, 4 },
    };
    for (int i = 0; i < 19; i++) {
        float a = v[net[i][0]], b = v[net[i][1]];
        v[net[i][0]] = a < b ? a : b;
        v[net[i][1]] = a < b ? b : a;
    }
    return 0.5f * (v[3] + v[4]);
}

/* The finite 8-neighbours of (x, y) into v (unsorted); their count. */
static int neighbours(float v[8], const float *src, uint32_t w, uint32_t h, uint32_t x,
                      uint32_t y)
{
    int n = 0;
    for (int dy = -1; dy <= 1; dy++)
        for (int dx = -1; dx <= 1; dx++) {
            long xx = (long)x + dx, yy = (long)y + dy;
            if ((dx || dy) && xx >= 0 && yy >= 0 && xx < (long)w && yy < (long)h) {
                float q = src[(size_t)yy * w + (size_t)xx];
                if (isfinite(q))
                    v[n++] = q;
            }
        }
    return n;
}

/* Pixel (x, y) replaced by its finite neighbours' median when it stands
 * more than lim above the largest or below the smallest of them. */
static void despeckle_at(float *o, const float *src, uint32_t w, uint32_t h, uint32_t x,
                         uint32_t y, double lim)
{
    size_t i = (size_t)y * w + x;
    float c = src[i], q[8];
    if (!isfinite(c))
        return;
    int n = neighbours(q, src, w, h, x, y);
    if (n < 3)
        return;
    float lo = q[0], hi = q[0];
    for (int j = 1; j < n; j++) {
        lo = q[j] < lo ? q[j] : lo;
        hi = q[j] > hi ? q[j] : hi;
    }
    if (c > hi + lim || c < lo - lim)
        o[i] = n == 8 ? median8(q) : pl_filter__median_small(q, n);
}

static inline float min2(float p, float q)
{
    return p < q ? p : q;
}

static inline float max2(float p, float q)
{
    return p > q ? p : q;
}

/* flag[x] for x in [1, w - 1): c[x] stands more than lim above the
 * largest, or below the smallest, of its 8 neighbours in rows a, c, b. */
static void row_outliers(unsigned char *restrict flag, const float *restrict a,
                         const float *restrict c, const float *restrict b, uint32_t w,
                         float lim)
{
    for (uint32_t x = 1; x + 1 < w; x++) {
        float lo = min2(min2(min2(a[x - 1], a[x]), min2(a[x + 1], c[x - 1])),
                        min2(min2(c[x + 1], b[x - 1]), min2(b[x], b[x + 1])));
        float hi = max2(max2(max2(a[x - 1], a[x]), max2(a[x + 1], c[x - 1])),
                        max2(max2(c[x + 1], b[x - 1]), max2(b[x], b[x + 1])));
        flag[x] = (unsigned char)((c[x] > hi + lim) | (c[x] < lo - lim));
    }
}

int pl_filter__despeckle(float **out, const float *src, uint32_t w, uint32_t h)
{
    size_t np = (size_t)w * h;
    float *o = malloc(np * sizeof *o);
    float *sample = malloc(2 * DESPECKLE_SAMPLES * sizeof *sample);
    *out = NULL;
    if (!o || !sample) {
        free(o);
        free(sample);
        return PL_ENOMEM;
    }
    memcpy(o, src, np * sizeof *o);
    /* the noise (residual from the neighbours' median) and the range of
     * the values, from a sample of the pixels */
    size_t step = np / DESPECKLE_SAMPLES + 1, k = 0, kv = 0;
    float *vals = sample + DESPECKLE_SAMPLES;
    for (size_t i = 0; i < np && k < DESPECKLE_SAMPLES; i += step) {
        if (!isfinite(src[i]))
            continue;
        vals[kv++] = src[i];
        float v[8];
        int n = neighbours(v, src, w, h, (uint32_t)(i % w), (uint32_t)(i / w));
        if (n)
            sample[k++] = fabsf(src[i] - (n == 8 ? median8(v) : pl_filter__median_small(v, n)));
    }
    double sigma = 0.0, range = 0.0;
    if (k && kv) {
        /* the order statistics a sort gave (the upper middle of an even
         * count), by selection */
        sigma = 1.4826 * pl_filter__select_float(sample, k, k / 2);
        float hi = pl_filter__select_float(vals, kv, (kv * 99) / 100);
        /* selection left everything at or below hi before it */
        float lo = pl_filter__select_float(vals, (kv * 99) / 100 + 1, kv / 100);
        range = (double)hi - (double)lo;
    }
    free(sample);
    /* an impulse stands out from the noise and from the texture's range */
    double lim = fmax(DESPECKLE_K * sigma, DESPECKLE_RANGE * range);
    if (!(lim > 0.0)) {
        *out = o;
        return PL_OK;
    }
    int any_nan = 0;
    for (size_t i = 0; i < np && !any_nan; i++)
        any_nan = !isfinite(src[i]);
    unsigned char *flag = any_nan ? NULL : malloc(w);
    for (uint32_t y = 0; y < h; y++) {
        if (flag && y > 0 && y + 1 < h && w > 2) {
            /* the common case, a row whose 8 neighbours are all there and
             * finite: the test over the whole row (vectorisable), then
             * the few pixels it flags */
            const float *c = src + (size_t)y * w;
            row_outliers(flag, c - w, c, c + w, w, (float)lim);
            for (uint32_t x = 1; x + 1 < w; x++)
                if (flag[x]) {
                    const float *a = c - w + x, *b = c + w + x;
                    float q[8] = { a[-1], a[0], a[1], c[x - 1], c[x + 1], b[-1], b[0], b[1] };
                    o[(size_t)y * w + x] = median8(q);
                }
            uint32_t ends[2] = { 0, w - 1 };
            for (int e = 0; e < 2; e++)
                despeckle_at(o, src, w, h, ends[e], y, lim);
            continue;
        }
        for (uint32_t x = 0; x < w; x++)
            despeckle_at(o, src, w, h, x, y, lim);
    }
    free(flag);
    *out = o;
    return PL_OK;
}

