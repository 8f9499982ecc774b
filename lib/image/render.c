/*
 * render.c - colour maps, map renderings and PNG output.
 *
 * Colour science follows IEC 61966-2-1:1999 (sRGB: primaries, D65 white,
 * transfer function) and CIE 15:2004 (CIELAB, the CIE 1976 colour
 * difference Delta E*ab).
 */
#include "image/render_int.h"

#include "common/common_int.h"
#include "common/filter_int.h"
#include "common/num_int.h"
#include "common/png_int.h"
#include "plyledger/version.h"

#include <assert.h>
#include <errno.h>
#include <float.h>
#include <inttypes.h>
#include <limits.h>
#include <math.h>
#include <pthread.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---- colour science ---------------------------------------------------- */

/* IEC 61966-2-1:1999, clause 5: linear RGB <-> CIE XYZ (4-digit matrices as
 * published; they are inverse to each other to about 1e-4). */
static const double XYZ_FROM_RGB[3][3] = {
    {0.4124, 0.3576, 0.1805},
    {0.2126, 0.7152, 0.0722},
    {0.0193, 0.1192, 0.9505},
};
static const double RGB_FROM_XYZ[3][3] = {
    {3.2406, -1.5372, -0.4986},
    {-0.9689, 1.8758, 0.0415},
    {0.0557, -0.2040, 1.0570},
};
/* Reference white D65, CIE 1931 2 degree observer, Y normalised to 1
 * (CIE 15:2004, table T.3). */
static const double WHITE[3] = {0.95047, 1.0, 1.08883};

/* v clamped to [0, 1], NaN to 0. */
static double unit_clamp(double v)
{
    return !(v > 0.0) ? 0.0 : v < 1.0 ? v : 1.0;
}

double pl_render__srgb_encode(double linear)
{
    double v = unit_clamp(linear);
    if (v == 1.0)
        return 1.0; /* 1.055 - 0.055 misses 1 by one ulp */
    return v <= 0.0031308 ? 12.92 * v : 1.055 * pow(v, 1.0 / 2.4) - 0.055;
}

double pl_render__srgb_decode(double encoded)
{
    double v = unit_clamp(encoded);
    return v <= 0.04045 ? v / 12.92 : pow((v + 0.055) / 1.055, 2.4);
}

/* CIE 15:2004 eq. 8.6: the cube root with its linear toe below (6/29)^3. */
static double lab_f(double t)
{
    const double d = 6.0 / 29.0;
    return t > d * d * d ? cbrt(t) : t / (3.0 * d * d) + 4.0 / 29.0;
}

static double lab_finv(double f)
{
    const double d = 6.0 / 29.0;
    return f > d ? f * f * f : 3.0 * d * d * (f - 4.0 / 29.0);
}

void pl_render__lab_to_linear(const double lab[3], double linear[3])
{
    double fy = (lab[0] + 16.0) / 116.0;
    double fx = fy + lab[1] / 500.0;
    double fz = fy - lab[2] / 200.0;
    double xyz[3] = {WHITE[0] * lab_finv(fx), WHITE[1] * lab_finv(fy),
                     WHITE[2] * lab_finv(fz)};
    for (int i = 0; i < 3; i++)
        linear[i] = RGB_FROM_XYZ[i][0] * xyz[0] + RGB_FROM_XYZ[i][1] * xyz[1] +
                    RGB_FROM_XYZ[i][2] * xyz[2];
}

static void linear_to_lab(const double linear[3], double lab[3])
{
    double f[3];
    for (int i = 0; i < 3; i++) {
        double v = XYZ_FROM_RGB[i][0] * linear[0] + XYZ_FROM_RGB[i][1] * linear[1] +
                   XYZ_FROM_RGB[i][2] * linear[2];
        f[i] = lab_f(v / WHITE[i]);
    }
    lab[0] = 116.0 * f[1] - 16.0;
    lab[1] = 500.0 * (f[0] - f[1]);
    lab[2] = 200.0 * (f[1] - f[2]);
}

void pl_render__srgb8_to_lab(const unsigned char rgb[3], double lab[3])
{
    double lin[3];
    for (int i = 0; i < 3; i++)
        lin[i] = pl_render__srgb_decode(rgb[i] / 255.0);
    linear_to_lab(lin, lab);
}

static unsigned char to_code(double encoded)
{
    double v = floor(encoded * 255.0 + 0.5);
    return (unsigned char)(v < 0.0 ? 0.0 : v > 255.0 ? 255.0 : v);
}

void pl_render__lab_to_srgb8(const double lab[3], unsigned char rgb[3])
{
    double lin[3];
    pl_render__lab_to_linear(lab, lin);
    for (int i = 0; i < 3; i++)
        rgb[i] = to_code(pl_render__srgb_encode(lin[i]));
}

double pl_render__delta_e76(const double a[3], const double b[3])
{
    double d0 = a[0] - b[0], d1 = a[1] - b[1], d2 = a[2] - b[2];
    return sqrt(d0 * d0 + d1 * d1 + d2 * d2);
}

/* ---- the colour maps --------------------------------------------------- */

/*
 * The ledger map is a path through CIELAB. Lightness rises linearly with
 * the value; hue turns from blue-violet (310 degrees) through teal and green
 * to yellow (105 degrees) while the wanted chroma grows from 60 to 75. Where
 * the sRGB gamut cannot hold the wanted chroma at that lightness and hue,
 * chroma is cut to the gamut boundary (found by bisection). The boundary
 * is drawn inside the real one: every channel stays at least 25 codes above
 * 0, where one 8-bit code is still a small colour step (near 0 the sRGB
 * curve is linear and codes bunch up), and 3 codes below 255, so that each
 * entry has usable 8-bit neighbours on all sides for the quantisation
 * below.
 *
 * Equal steps in value must give equal CIE 1976 steps. Lightness already
 * moves evenly, so the hue parameter is re-spaced (a fixed-point iteration)
 * until the step in the a*b* plane is the same along the whole path.
 */
#define L_DARK 20.0
#define L_LIGHT 95.0
#define HUE_START (310.0 * M_PI / 180.0)
#define HUE_END (105.0 * M_PI / 180.0)
#define CHROMA_START 60.0
#define CHROMA_END 75.0
#define GAMUT_MARGIN_LOW 25.0
#define GAMUT_MARGIN_HIGH 3.0
#define PATH_SAMPLES 1024
#define PATH_ITERATIONS 40

/* No-data greys: CIELAB lightness, a* = b* = 0. The ledger map is chromatic
 * everywhere, so a neutral mid grey stands apart from all of it; the grey
 * map covers L* 20..95, so its no-data grey sits below the dark end. */
#define NODATA_L_LEDGER 60.0
#define NODATA_L_GREY 5.0

static unsigned char ledger_rgb[256][3];
static double ledger_lab[256][3];
static unsigned char grey_rgb[256][3];
static double grey_lab[256][3];
static unsigned char nodata_ledger[3];
static unsigned char nodata_grey[3];
static pthread_once_t tables_once = PTHREAD_ONCE_INIT;

static int in_margin_gamut(double lightness, double chroma, double hue)
{
    double lab[3] = {lightness, chroma * cos(hue), chroma * sin(hue)};
    double lin[3];
    pl_render__lab_to_linear(lab, lin);
    const double lo = pl_render__srgb_decode(GAMUT_MARGIN_LOW / 255.0);
    const double hi = pl_render__srgb_decode(1.0 - GAMUT_MARGIN_HIGH / 255.0);
    for (int i = 0; i < 3; i++)
        if (lin[i] < lo || lin[i] > hi)
            return 0;
    return 1;
}

static double max_chroma(double lightness, double hue, double wanted)
{
    if (in_margin_gamut(lightness, wanted, hue))
        return wanted;
    double lo = 0.0, hi = wanted;
    for (int i = 0; i < 40; i++) {
        double mid = 0.5 * (lo + hi);
        if (in_margin_gamut(lightness, mid, hue))
            lo = mid;
        else
            hi = mid;
    }
    return lo;
}

/* The path point at value position t with hue progress q, both in [0, 1]. */
static void path_point(double t, double q, double lab[3])
{
    double lightness = L_DARK + (L_LIGHT - L_DARK) * t;
    double hue = HUE_START + (HUE_END - HUE_START) * q;
    double chroma = max_chroma(lightness, hue, CHROMA_START + (CHROMA_END - CHROMA_START) * q);
    lab[0] = lightness;
    lab[1] = chroma * cos(hue);
    lab[2] = chroma * sin(hue);
}

/* Hue progress q(t) on PATH_SAMPLES even steps of t, re-spaced so that the
 * a*b* step between samples is constant. */
static void respace_hue(double q[PATH_SAMPLES])
{
    static double ab[PATH_SAMPLES][3];
    static double step[PATH_SAMPLES - 1];
    for (int k = 0; k < PATH_SAMPLES; k++)
        q[k] = (double)k / (PATH_SAMPLES - 1);
    for (int it = 0; it < PATH_ITERATIONS; it++) {
        double mean = 0.0;
        for (int k = 0; k < PATH_SAMPLES; k++)
            path_point((double)k / (PATH_SAMPLES - 1), q[k], ab[k]);
        for (int k = 0; k + 1 < PATH_SAMPLES; k++) {
            double da = ab[k + 1][1] - ab[k][1], db = ab[k + 1][2] - ab[k][2];
            step[k] = sqrt(da * da + db * db);
            mean += step[k];
        }
        mean /= PATH_SAMPLES - 1;
        /* Damped update: a segment that moves too far in a*b* gets a
         * smaller share of the hue turn, and the other way round. */
        double total = 0.0;
        double dq[PATH_SAMPLES - 1];
        for (int k = 0; k + 1 < PATH_SAMPLES; k++) {
            double s = step[k] > 1e-12 ? step[k] : 1e-12;
            dq[k] = (q[k + 1] - q[k]) * pow(mean / s, 0.7);
            total += dq[k];
        }
        q[0] = 0.0;
        for (int k = 0; k + 1 < PATH_SAMPLES; k++)
            q[k + 1] = q[k] + dq[k] / total;
        q[PATH_SAMPLES - 1] = 1.0;
    }
}

/*
 * 8-bit quantisation that keeps the design's properties. Rounding each
 * entry to its nearest code moves it by up to about half a Delta E, as much
 * as the step between entries, which would make neighbouring steps uneven
 * and could even reverse lightness. So each entry picks among the codes
 * within QUANT_MAX_ERROR (Delta E) of its designed colour, and a dynamic
 * programme over the 256 entries (the Viterbi recursion: A. J. Viterbi,
 * 1967, "Error bounds for convolutional codes and an asymptotically optimum
 * decoding algorithm") chooses the sequence whose neighbour steps
 * are closest to the designed step, subject to lightness rising by at least
 * QUANT_MIN_RISE from each entry to the next.
 */
#define QUANT_MAX_ERROR 0.42
#define QUANT_MAX_ERROR_WIDE 0.47
#define QUANT_RADIUS 3
#define QUANT_MAX_CAND 64
#define QUANT_MIN_RISE 0.005

typedef struct quant_cand {
    unsigned char rgb[3];
    double lab[3];
    double error;
} quant_cand;

static quant_cand quant_cands[256][QUANT_MAX_CAND];
static int quant_count[256];
static double quant_cost[256][QUANT_MAX_CAND];
static short quant_back[256][QUANT_MAX_CAND];

static int cand_by_error(const void *a, const void *b)
{
    const quant_cand *x = a, *y = b;
    return (x->error > y->error) - (x->error < y->error);
}

static void gather_candidates(int i, const double target[3], double max_error)
{
    double lin[3];
    int centre[3];
    pl_render__lab_to_linear(target, lin);
    for (int ch = 0; ch < 3; ch++)
        centre[ch] = to_code(pl_render__srgb_encode(lin[ch]));
    quant_cand pool[(2 * QUANT_RADIUS + 1) * (2 * QUANT_RADIUS + 1) * (2 * QUANT_RADIUS + 1)];
    int n = 0;
    for (int dr = -QUANT_RADIUS; dr <= QUANT_RADIUS; dr++)
        for (int dg = -QUANT_RADIUS; dg <= QUANT_RADIUS; dg++)
            for (int db = -QUANT_RADIUS; db <= QUANT_RADIUS; db++) {
                int code[3] = {centre[0] + dr, centre[1] + dg, centre[2] + db};
                if (code[0] < 0 || code[0] > 255 || code[1] < 0 || code[1] > 255 ||
                    code[2] < 0 || code[2] > 255)
                    continue;
                quant_cand *cd = &pool[n];
                for (int ch = 0; ch < 3; ch++)
                    cd->rgb[ch] = (unsigned char)code[ch];
                pl_render__srgb8_to_lab(cd->rgb, cd->lab);
                cd->error = pl_render__delta_e76(cd->lab, target);
                if (cd->error <= max_error)
                    n++;
            }
    qsort(pool, (size_t)n, sizeof pool[0], cand_by_error);
    if (n > QUANT_MAX_CAND)
        n = QUANT_MAX_CAND;
    memcpy(quant_cands[i], pool, (size_t)n * sizeof pool[0]);
    quant_count[i] = n;
}

/* Returns 1 and fills `out` when a sequence meeting the constraints exists. */
static int quantise_even(const double target[256][3], double max_error,
                         unsigned char out[256][3])
{
    double step = 0.0;
    for (int i = 0; i + 1 < 256; i++)
        step += pl_render__delta_e76(target[i], target[i + 1]);
    step /= 255.0;
    for (int i = 0; i < 256; i++) {
        gather_candidates(i, target[i], max_error);
        if (quant_count[i] == 0)
            return 0;
    }
    for (int j = 0; j < quant_count[0]; j++)
        quant_cost[0][j] = quant_cands[0][j].error * quant_cands[0][j].error * 0.1;
    for (int i = 1; i < 256; i++) {
        for (int j = 0; j < quant_count[i]; j++) {
            const quant_cand *cj = &quant_cands[i][j];
            double best = HUGE_VAL;
            int arg = -1;
            for (int p = 0; p < quant_count[i - 1]; p++) {
                const quant_cand *cp = &quant_cands[i - 1][p];
                if (!(quant_cost[i - 1][p] < HUGE_VAL) ||
                    cj->lab[0] - cp->lab[0] < QUANT_MIN_RISE)
                    continue;
                double dev = pl_render__delta_e76(cp->lab, cj->lab) - step;
                double cost = quant_cost[i - 1][p] + dev * dev;
                if (cost < best) {
                    best = cost;
                    arg = p;
                }
            }
            /* A small pull towards the designed colour breaks ties. */
            quant_cost[i][j] = arg < 0 ? HUGE_VAL : best + 0.1 * cj->error * cj->error;
            quant_back[i][j] = (short)arg;
        }
    }
    int j = -1;
    double best = HUGE_VAL;
    for (int k = 0; k < quant_count[255]; k++)
        if (quant_cost[255][k] < best) {
            best = quant_cost[255][k];
            j = k;
        }
    if (j < 0)
        return 0;
    for (int i = 255; i >= 0; i--) {
        memcpy(out[i], quant_cands[i][j].rgb, 3);
        if (i > 0)
            j = quant_back[i][j];
    }
    return 1;
}

/* A neutral grey of lightness L*: equal channels, linear value Y (the sRGB
 * white is D65, so a neutral has R = G = B = Y). */
static void neutral_rgb(double lightness, unsigned char rgb[3])
{
    unsigned char v = to_code(pl_render__srgb_encode(lab_finv((lightness + 16.0) / 116.0)));
    rgb[0] = rgb[1] = rgb[2] = v;
}

static void build_tables(void)
{
    static double q[PATH_SAMPLES];
    respace_hue(q);
    for (int i = 0; i < 256; i++) {
        double t = i / 255.0;
        double pos = t * (PATH_SAMPLES - 1);
        int k = (int)pos;
        if (k >= PATH_SAMPLES - 1)
            k = PATH_SAMPLES - 2;
        double frac = pos - k;
        path_point(t, q[k] + frac * (q[k + 1] - q[k]), ledger_lab[i]);
    }
    /* With the constants above a sequence exists at the first bound (the
     * tests check the table); should it not, widen the bound, and as a last
     * resort round each entry to its nearest code. */
    if (!quantise_even((const double(*)[3])ledger_lab, QUANT_MAX_ERROR, ledger_rgb) &&
        !quantise_even((const double(*)[3])ledger_lab, QUANT_MAX_ERROR_WIDE, ledger_rgb)) {
        for (int i = 0; i < 256; i++)
            pl_render__lab_to_srgb8(ledger_lab[i], ledger_rgb[i]);
    }

    for (int i = 0; i < 256; i++) {
        grey_lab[i][0] = L_DARK + (L_LIGHT - L_DARK) * (i / 255.0);
        grey_lab[i][1] = 0.0;
        grey_lab[i][2] = 0.0;
        neutral_rgb(grey_lab[i][0], grey_rgb[i]);
    }
    neutral_rgb(NODATA_L_LEDGER, nodata_ledger);
    neutral_rgb(NODATA_L_GREY, nodata_grey);
}

static void tables_ready(void)
{
    pthread_once(&tables_once, build_tables);
}

void pl_render__colormap_table(pl_colormap cmap, unsigned char *rgb, double *lab)
{
    assert(cmap == PL_COLORMAP_LEDGER || cmap == PL_COLORMAP_GREY);
    tables_ready();
    int ledger = cmap == PL_COLORMAP_LEDGER;
    if (rgb)
        memcpy(rgb, ledger ? ledger_rgb : grey_rgb, sizeof ledger_rgb);
    if (lab)
        memcpy(lab, ledger ? ledger_lab : grey_lab, sizeof ledger_lab);
}

void pl_render__nodata_rgb(pl_colormap cmap, unsigned char rgb[3])
{
    assert(cmap == PL_COLORMAP_LEDGER || cmap == PL_COLORMAP_GREY);
    tables_ready();
    memcpy(rgb, cmap == PL_COLORMAP_LEDGER ? nodata_ledger : nodata_grey, 3);
}

/* The 256 x 3 bytes of a map's table (built). */
static const unsigned char *colour_table(pl_colormap cmap)
{
    return cmap == PL_COLORMAP_LEDGER ? &ledger_rgb[0][0] : &grey_rgb[0][0];
}

/* Index of the table entry for t in [0, 1]; the colour bar uses the same. */
static int colormap_index(double t)
{
    if (t <= 0.0)
        return 0;
    if (t >= 1.0)
        return 255;
    return (int)floor(t * 255.0 + 0.5);
}

PL_EXPORT void pl_colormap_rgb(pl_colormap cmap, double t, unsigned char rgb[3])
{
    assert(cmap == PL_COLORMAP_LEDGER || cmap == PL_COLORMAP_GREY);
    tables_ready();
    if (isnan(t)) {
        pl_render__nodata_rgb(cmap, rgb);
        return;
    }
    memcpy(rgb, colour_table(cmap) + 3 * colormap_index(t), 3);
}

/* ---- numbers for the labels ------------------------------------------- */

double pl_render__percentile(float *values, size_t n, double p)
{
    assert(values && n > 0);
    double pos = p / 100.0 * (double)(n - 1);
    if (pos < 0.0)
        pos = 0.0;
    if (pos > (double)(n - 1))
        pos = (double)(n - 1);
    size_t k = (size_t)pos;
    double frac = pos - (double)k;
    double lo = pl_filter__select_float(values, n, k);
    if (frac == 0.0 || k + 1 >= n)
        return lo;
    /* After selection everything past k is >= v[k]: the next order
     * statistic is their minimum. */
    float next = values[k + 1];
    for (size_t i = k + 2; i < n; i++)
        if (values[i] < next)
            next = values[i];
    return lo + frac * ((double)next - lo);
}

double pl_render__nice_length(double target)
{
    assert(target > 0.0 && isfinite(target));
    double base = pow(10.0, floor(log10(target)));
    /* log10 of an exact power of ten can land a hair low or high. */
    if (base > target * (1.0 + 1e-12))
        base /= 10.0;
    else if (base * 10.0 <= target * (1.0 + 1e-12))
        base *= 10.0;
    double m = target / base * (1.0 + 1e-12);
    return (m >= 5.0 ? 5.0 : m >= 2.0 ? 2.0 : 1.0) * base;
}

void pl_render__format_value(char *buf, size_t cap, double v, int digits)
{
    snprintf(buf, cap, "%.*g", digits, v);
    if (strcmp(buf, "-0") == 0)
        snprintf(buf, cap, "0");
}

/* ---- images ------------------------------------------------------------ */

PL_EXPORT int pl_image_new(pl_image **out, uint32_t width, uint32_t height, pl_err *err)
{
    assert(out);
    *out = NULL;
    if (width == 0 || height == 0 || width > PL_IMAGE_MAX_SIDE || height > PL_IMAGE_MAX_SIDE ||
        (uint64_t)width * height > PL_IMAGE_MAX_PIXELS)
        return pl__err(err, PL_EINVAL,
                       "image of %" PRIu32 "x%" PRIu32 " pixels: each side must be 1..%u "
                       "and the area at most %u pixels",
                       width, height, PL_IMAGE_MAX_SIDE, PL_IMAGE_MAX_PIXELS);
    pl_image *img = calloc(1, sizeof *img);
    if (!img)
        return pl__err(err, PL_ENOMEM, "out of memory for an image");
    img->rgb = calloc((size_t)width * height, 3);
    if (!img->rgb) {
        free(img);
        return pl__err(err, PL_ENOMEM, "out of memory for an image of %" PRIu32 "x%" PRIu32
                       " pixels", width, height);
    }
    img->width = width;
    img->height = height;
    *out = img;
    return PL_OK;
}

PL_EXPORT void pl_image_free(pl_image *img)
{
    if (!img)
        return;
    free(img->title);
    free(img->rgb);
    free(img);
}

void pl_render__fill(pl_image *img, int64_t x, int64_t y, int64_t w, int64_t h,
                     const unsigned char rgb[3])
{
    int64_t x0 = x < 0 ? 0 : x, y0 = y < 0 ? 0 : y;
    int64_t x1 = x + w, y1 = y + h;
    if (x1 > (int64_t)img->width)
        x1 = img->width;
    if (y1 > (int64_t)img->height)
        y1 = img->height;
    for (int64_t yy = y0; yy < y1; yy++) {
        unsigned char *p = img->rgb + ((size_t)yy * img->width + (size_t)x0) * 3;
        for (int64_t xx = x0; xx < x1; xx++, p += 3)
            memcpy(p, rgb, 3);
    }
}

/* A one-pixel outline just outside the rectangle (x, y, w, h). */
static void outline(pl_image *img, int x, int y, int w, int h, const unsigned char rgb[3])
{
    pl_render__fill(img, x - 1, y - 1, w + 2, 1, rgb);
    pl_render__fill(img, x - 1, y + h, w + 2, 1, rgb);
    pl_render__fill(img, x - 1, y, 1, h, rgb);
    pl_render__fill(img, x + w, y, 1, h, rgb);
}

/* ---- map rendering ----------------------------------------------------- */

#define AUTO_ZOOM_WIDTH 256u  /* auto zoom: smallest making the map this wide */
#define AUTO_ZOOM_SIDE 4096u  /* ... unless its longer side would pass this */

/* Value -> position in [0, 1] on the colour map (unclamped, NaN kept). */
static double value_to_t(double v, double vmin, double vmax)
{
    double range = vmax - vmin;
    if (isfinite(range))
        return (v - vmin) / range;
    return (v / 2.0 - vmin / 2.0) / (vmax / 2.0 - vmin / 2.0);
}

/* The colour-bar labels for vmax, mid, vmin with the fewest significant
 * digits (at least 3) that tell them apart. */
static void tick_labels(pl_render_layout *lay)
{
    double mid = lay->vmin / 2.0 + lay->vmax / 2.0;
    if (fabs(mid) < 1e-12 * (fabs(lay->vmin) + fabs(lay->vmax)))
        mid = 0.0;
    double v[3] = {lay->vmax, mid, lay->vmin};
    for (int digits = 3; digits <= 17; digits++) {
        for (int i = 0; i < 3; i++)
            pl_render__format_value(lay->labels[i], sizeof lay->labels[i], v[i], digits);
        if (strcmp(lay->labels[0], lay->labels[1]) != 0 &&
            strcmp(lay->labels[1], lay->labels[2]) != 0 &&
            strcmp(lay->labels[0], lay->labels[2]) != 0)
            break;
    }
}

/* The value range: the caller's, or the 1st and 99th percentiles of the
 * finite values. Sets *has_data to whether any value is finite. */
static int value_range(double *vmin, double *vmax, int *has_data, const float *data,
                       size_t n, const pl_render_options *o, pl_err *err)
{
    if ((!isnan(o->vmin) && !isfinite(o->vmin)) || (!isnan(o->vmax) && !isfinite(o->vmax)))
        return pl__err(err, PL_EINVAL, "render range %g..%g: limits must be finite numbers "
                       "(or NaN for automatic)", o->vmin, o->vmax);
    size_t finite = 0;
    for (size_t i = 0; i < n; i++)
        finite += isfinite(data[i]) ? 1 : 0;
    *has_data = finite > 0;
    double lo = 0.0, hi = 1.0;
    if ((isnan(o->vmin) || isnan(o->vmax)) && finite > 0) {
        float *copy = malloc(finite * sizeof *copy);
        if (!copy)
            return pl__err(err, PL_ENOMEM, "out of memory for the render range");
        size_t k = 0;
        for (size_t i = 0; i < n; i++)
            if (isfinite(data[i]))
                copy[k++] = data[i];
        lo = pl_render__percentile(copy, finite, 1.0);
        hi = pl_render__percentile(copy, finite, 99.0);
        free(copy);
        if (!(lo < hi) && isnan(o->vmin) && isnan(o->vmax)) {
            /* A constant map: a small range around its value. */
            double half = lo != 0.0 ? fabs(lo) * 0.01 : 0.5;
            lo -= half;
            hi += half;
        }
    }
    *vmin = isnan(o->vmin) ? lo : o->vmin;
    *vmax = isnan(o->vmax) ? hi : o->vmax;
    if (!(*vmin < *vmax))
        return pl__err(err, PL_EINVAL, "render range: vmin %g is not below vmax %g",
                       *vmin, *vmax);
    return PL_OK;
}

/*
 * Place the parts. Row 1: the caption (quantity and channel label). Row 2: the map in a frame
 * with the scale bar and its label below it, and to its right the unit, the
 * colour bar in a frame, its ticks and labels. Everything is measured
 * before the image is allocated, so all of it lies inside the image.
 */
static int plan_layout(pl_render_layout *lay, uint64_t *img_w, uint64_t *img_h,
                       const pl_map *map, const pl_render_options *o)
{
    const int s = (int)lay->text_scale;
    const int gh = PL_FONT_HEIGHT * s;
    const int margin = 6 * s, gap = 4 * s;
    int64_t right = 0, bottom = 0;

    int y = margin;
    if (lay->title[0]) {
        lay->title_x = margin;
        lay->title_y = y;
        lay->title_h = PL_FONT_HEIGHT * (int)lay->title_scale;
        right = margin + (int64_t)pl_render__text_width(lay->title, lay->title_scale);
        y += lay->title_h + gap;
    }
    lay->caption_x = margin;
    lay->caption_y = y;
    int64_t caption_right = margin + (int64_t)pl_render__text_width(lay->caption, lay->text_scale);
    if (caption_right > right)
        right = caption_right;
    y += gh + gap;

    int row_top = y;
    lay->map_x = margin + 1;
    lay->map_y = row_top + 1;
    int64_t col1_w = (int64_t)lay->map_w + 2;
    bottom = (int64_t)lay->map_y + lay->map_h + 1;

    lay->scale_w = 0;
    if (o->scalebar) {
        double target_px = lay->map_w / 4.0;
        if (target_px < 12.0 * s)
            target_px = 12.0 * s;
        double target_mm = target_px * map->pitch_u / lay->zoom;
        if (!(target_mm > 0.0 && target_mm < 1e12))
            return PL_ERANGE;
        lay->scale_mm = pl_render__nice_length(target_mm);
        double len = floor(lay->scale_mm / map->pitch_u * lay->zoom + 0.5);
        lay->scale_w = len < 1.0 ? 1 : (int)len;
        lay->scale_h = 2 * s;
        lay->scale_x = lay->map_x;
        lay->scale_y = (int)bottom + gap;
        snprintf(lay->scale_label, sizeof lay->scale_label, "%g mm", lay->scale_mm);
        lay->scale_label_x = lay->scale_x;
        lay->scale_label_y = lay->scale_y + lay->scale_h + 2 * s;
        bottom = (int64_t)lay->scale_label_y + gh;
        int64_t label_w = pl_render__text_width(lay->scale_label, lay->text_scale);
        int64_t w = 1 + (lay->scale_w > label_w ? lay->scale_w : label_w);
        if (w > col1_w)
            col1_w = w;
    }
    if (margin + col1_w > right)
        right = margin + col1_w;

    lay->bar_w = 0;
    if (o->colorbar) {
        int x2 = margin + (int)col1_w + 2 * gap;
        int next = row_top;
        lay->unit_x = x2;
        lay->unit_y = row_top;
        if (lay->unit[0]) {
            next += gh + gap;
            int64_t unit_right = x2 + (int64_t)pl_render__text_width(lay->unit, lay->text_scale);
            if (unit_right > right)
                right = unit_right;
        }
        lay->bar_x = x2 + 1;
        lay->bar_y = next + gh / 2 + 1;
        lay->bar_w = 10 * s;
        int64_t h = (int64_t)lay->map_y + lay->map_h - lay->bar_y;
        lay->bar_h = h > 48 * s ? (int)h : 48 * s;
        lay->tick_y[0] = lay->bar_y;
        lay->tick_y[1] = lay->bar_y + (lay->bar_h - 1) / 2;
        lay->tick_y[2] = lay->bar_y + lay->bar_h - 1;
        lay->label_x = lay->bar_x + lay->bar_w + 1 + 3 * s + 2 * s;
        uint32_t widest = 0;
        for (int i = 0; i < 3; i++) {
            lay->label_y[i] = lay->tick_y[i] - gh / 2;
            uint32_t label_w = pl_render__text_width(lay->labels[i], lay->text_scale);
            if (label_w > widest)
                widest = label_w;
        }
        if (lay->label_x + (int64_t)widest > right)
            right = lay->label_x + (int64_t)widest;
        int64_t b = (int64_t)lay->label_y[2] + gh;
        if ((int64_t)lay->bar_y + lay->bar_h + 1 > b)
            b = (int64_t)lay->bar_y + lay->bar_h + 1;
        if (b > bottom)
            bottom = b;
    }
    *img_w = (uint64_t)(right + margin);
    *img_h = (uint64_t)(bottom + margin);
    return PL_OK;
}

/* The caller's options (checked for their version), or the defaults. A
 * version 1 struct ends before `identification`: only that much is read. */
static int options_of(pl_render_options *o, const pl_render_options *opts, pl_err *err)
{
    *o = (pl_render_options)PL_RENDER_OPTIONS_INIT;
    if (!opts)
        return PL_OK;
    if (opts->version == 1) {
        memcpy(o, opts, offsetof(pl_render_options, identification));
        o->version = PL_RENDER_OPTIONS_VERSION;
    } else if (opts->version != PL_RENDER_OPTIONS_VERSION) {
        return pl__err(err, PL_EINVAL, "render options version %u is not 1 or %u",
                       opts->version, PL_RENDER_OPTIONS_VERSION);
    } else {
        *o = *opts;
    }
    if (o->zoom > PL_RENDER_MAX_ZOOM)
        return pl__err(err, PL_EINVAL, "zoom %u is above %u", o->zoom, PL_RENDER_MAX_ZOOM);
    return PL_OK;
}

/* The line drawn on top: SIMULATED first for a simulated inspection, then
 * the caller's identification, which must be printable ASCII (the font
 * and the PNG tEXt chunk, Latin-1, both hold it) and short enough. */
static int title_of(char *title, size_t size, const pl_render_options *o, pl_err *err)
{
    const char *id = o->identification ? o->identification : "";
    size_t n = strlen(id);
    if (n >= PL_RENDER_IDENTIFICATION_SIZE)
        return pl__err(err, PL_EINVAL, "render identification is longer than %d characters",
                       PL_RENDER_IDENTIFICATION_SIZE - 1);
    for (size_t i = 0; i < n; i++)
        if ((unsigned char)id[i] < 0x20 || (unsigned char)id[i] > 0x7e)
            return pl__err(err, PL_EINVAL, "render identification: byte 0x%02x at position "
                           "%zu is not printable ASCII", (unsigned)(unsigned char)id[i], i);
    snprintf(title, size, "%s%s%s", o->simulated ? "SIMULATED" : "",
             o->simulated && n ? " " : "", id);
    return PL_OK;
}

PL_EXPORT int pl_render_identification(char *buf, size_t size, const char *serial,
                                       const char *site, const char *date, long long map_id,
                                       const char *quantity)
{
    char id[32] = "";
    if (map_id > 0)
        snprintf(id, sizeof id, "%lld", map_id);
    const char *part[5][2] = {{"", serial}, {"site ", site}, {"", date}, {"map ", id},
                              {"", quantity}};
    size_t n = 0;
    int total = 0;
    if (size)
        buf[0] = '\0';
    for (int k = 0; k < 5; k++) {
        if (!part[k][1] || !part[k][1][0])
            continue;
        int w = snprintf(n < size ? buf + n : NULL, n < size ? size - n : 0, "%s%s%s",
                         total ? " " : "", part[k][0], part[k][1]);
        if (w < 0)
            return w;
        total += w;
        n += (size_t)w;
    }
    return total;
}

static void draw_map(pl_image *img, const pl_render_layout *lay, const float *data,
                     const pl_map *map, const unsigned char *table,
                     const unsigned char nodata[3])
{
    for (uint32_t j = 0; j < map->height; j++) {
        const float *row = data + (size_t)j * map->width;
        unsigned char *dst = img->rgb + ((size_t)(lay->map_y + (int64_t)j * lay->zoom) *
                                         img->width + (size_t)lay->map_x) * 3;
        for (uint32_t i = 0; i < map->width; i++) {
            double t = value_to_t(row[i], lay->vmin, lay->vmax);
            const unsigned char *rgb = isnan(t) ? nodata : table + 3 * colormap_index(t);
            for (unsigned z = 0; z < lay->zoom; z++, dst += 3)
                memcpy(dst, rgb, 3);
        }
        const unsigned char *first = img->rgb + ((size_t)(lay->map_y + (int64_t)j * lay->zoom) *
                                                 img->width + (size_t)lay->map_x) * 3;
        for (unsigned z = 1; z < lay->zoom; z++)
            memcpy(img->rgb + ((size_t)(lay->map_y + (int64_t)j * lay->zoom + z) * img->width +
                               (size_t)lay->map_x) * 3,
                   first, (size_t)lay->map_w * 3);
    }
}

int pl_render__map(pl_image **out, pl_render_layout *layout, const pl_map *map, uint32_t c,
                   const pl_render_options *opts, pl_err *err)
{
    assert(out && map);
    *out = NULL;
    pl_render_options o;
    int rc = options_of(&o, opts, err);
    if (rc)
        return rc;
    if (o.colormap != PL_COLORMAP_LEDGER && o.colormap != PL_COLORMAP_GREY)
        return pl__err(err, PL_EINVAL, "unknown colour map %d", (int)o.colormap);
    if (!map->data || !map->channels || map->width == 0 || map->height == 0)
        return pl__err(err, PL_EINVAL, "map has no data to render");
    if (c >= map->nchannels)
        return pl__err(err, PL_EINVAL, "channel %" PRIu32 " is out of range (the map has %"
                       PRIu32 ")", c, map->nchannels);
    if (o.scalebar && !(isfinite(map->pitch_u) && map->pitch_u > 0.0))
        return pl__err(err, PL_EINVAL, "map pitch %g mm is not a positive number; "
                       "the scale bar needs it", map->pitch_u);

    const size_t npix = (size_t)map->width * map->height;
    const float *data = map->data + (size_t)c * npix;
    pl_render_layout lay;
    memset(&lay, 0, sizeof lay);
    int has_data = 0;
    rc = value_range(&lay.vmin, &lay.vmax, &has_data, data, npix, &o, err);
    if (rc)
        return rc;

    uint64_t zoom = o.zoom;
    if (zoom == 0) {
        uint32_t side = map->width > map->height ? map->width : map->height;
        zoom = (AUTO_ZOOM_WIDTH + map->width - 1) / map->width;
        uint64_t cap = AUTO_ZOOM_SIDE / side;
        if (zoom > cap)
            zoom = cap;
        if (zoom < 1)
            zoom = 1;
    }
    if ((uint64_t)map->width * zoom > PL_IMAGE_MAX_SIDE ||
        (uint64_t)map->height * zoom > PL_IMAGE_MAX_SIDE)
        return pl__err(err, PL_EINVAL, "rendering of %" PRIu32 "x%" PRIu32 " map pixels "
                       "at zoom %" PRIu64 " is too large", map->width, map->height, zoom);
    lay.zoom = (unsigned)zoom;
    lay.map_w = (int)(map->width * zoom);
    lay.map_h = (int)(map->height * zoom);
    lay.text_scale = lay.map_w >= 128 ? 2 : 1;

    const pl_channel *ch = &map->channels[c];
    if (ch->quantity[0])
        snprintf(lay.caption, sizeof lay.caption, "%.*s%s%.*s", PL_QUANTITY_SIZE - 1,
                 ch->quantity, ch->label[0] ? " " : "", PL_LABEL_SIZE - 1, ch->label);
    else
        snprintf(lay.caption, sizeof lay.caption, "channel %" PRIu32, c);
    snprintf(lay.unit, sizeof lay.unit, "%.*s", PL_UNIT_SIZE - 1, ch->unit);
    if (has_data || !isnan(o.vmin) || !isnan(o.vmax)) {
        tick_labels(&lay);
    } else {
        snprintf(lay.labels[1], sizeof lay.labels[1], "no data");
    }
    if ((rc = title_of(lay.title, sizeof lay.title, &o, err)))
        return rc;
    /* a line wider than the map at the text scale takes the smallest font */
    lay.title_scale = lay.text_scale;
    if (lay.title_scale > 1 &&
        pl_render__text_width(lay.title, lay.title_scale) > (uint32_t)lay.map_w + 2)
        lay.title_scale = 1;

    uint64_t w, h;
    if (plan_layout(&lay, &w, &h, map, &o) != PL_OK)
        return pl__err(err, PL_EINVAL, "map pitch %g mm is outside the range a scale bar "
                       "can show", map->pitch_u);
    if (w > PL_IMAGE_MAX_SIDE || h > PL_IMAGE_MAX_SIDE || w * h > PL_IMAGE_MAX_PIXELS)
        return pl__err(err, PL_EINVAL, "rendering would be %" PRIu64 "x%" PRIu64
                       " pixels, more than the image limit; use a smaller zoom", w, h);
    pl_image *img;
    rc = pl_image_new(&img, (uint32_t)w, (uint32_t)h, err);
    if (rc)
        return rc;

    const unsigned char paper[3] = {PL_RENDER_BACKGROUND};
    const unsigned char ink[3] = {PL_RENDER_INK};
    const unsigned s = lay.text_scale;
    tables_ready();
    const unsigned char *table = colour_table(o.colormap);
    unsigned char nodata[3];
    pl_render__nodata_rgb(o.colormap, nodata);

    if (lay.title[0] && !(img->title = pl__strdup(lay.title))) {
        pl_image_free(img);
        return pl__err(err, PL_ENOMEM, "out of memory for an image title");
    }
    pl_render__fill(img, 0, 0, img->width, img->height, paper);
    if (lay.title[0])
        pl_image_text(img, lay.title_x, lay.title_y, lay.title, lay.title_scale, ink);
    pl_image_text(img, lay.caption_x, lay.caption_y, lay.caption, s, ink);
    outline(img, lay.map_x, lay.map_y, lay.map_w, lay.map_h, ink);
    draw_map(img, &lay, data, map, table, nodata);

    if (o.scalebar) {
        pl_render__fill(img, lay.scale_x, lay.scale_y, lay.scale_w, lay.scale_h, ink);
        pl_image_text(img, lay.scale_label_x, lay.scale_label_y, lay.scale_label, s, ink);
    }
    if (o.colorbar) {
        if (lay.unit[0])
            pl_image_text(img, lay.unit_x, lay.unit_y, lay.unit, s, ink);
        outline(img, lay.bar_x, lay.bar_y, lay.bar_w, lay.bar_h, ink);
        for (int r = 0; r < lay.bar_h; r++) {
            double t = lay.bar_h > 1 ? 1.0 - (double)r / (lay.bar_h - 1) : 1.0;
            pl_render__fill(img, lay.bar_x, lay.bar_y + r, lay.bar_w, 1,
                            table + 3 * colormap_index(t));
        }
        for (int i = 0; i < 3; i++) {
            if (!lay.labels[i][0])
                continue;
            pl_render__fill(img, lay.bar_x + lay.bar_w + 1, lay.tick_y[i], 3 * (int)s, 1, ink);
            pl_image_text(img, lay.label_x, lay.label_y[i], lay.labels[i], s, ink);
        }
    }
    if (layout)
        *layout = lay;
    *out = img;
    return PL_OK;
}

PL_EXPORT int pl_render_map(pl_image **out, const pl_map *map, uint32_t c,
                            const pl_render_options *opts, pl_err *err)
{
    return pl_render__map(out, NULL, map, c, opts, err);
}

/* ---- numbered outlines ------------------------------------------------- */

static void fill_square(pl_image *img, int x0, int y0, int side, const unsigned char rgb[3])
{
    for (int y = y0; y < y0 + side; y++)
        for (int x = x0; x < x0 + side; x++)
            if (x >= 0 && y >= 0 && (uint32_t)x < img->width && (uint32_t)y < img->height)
                memcpy(img->rgb + ((size_t)y * img->width + (size_t)x) * 3, rgb, 3);
}

PL_EXPORT int pl_render_outlined(pl_image **out, const pl_map *map, uint32_t c,
                                 const uint32_t *marks, uint32_t count,
                                 const pl_render_options *opts, pl_err *err)
{
    *out = NULL;
    if (!marks)
        return pl__err(err, PL_EINVAL, "outlines need their marks");
    pl_render_layout lay;
    pl_image *img = NULL;
    int rc = pl_render__map(&img, &lay, map, c, opts, err);
    if (rc)
        return rc;
    static const unsigned char ink[3] = { 214, 0, 140 }, core[3] = { 255, 255, 255 };
    const uint32_t w = map->width, h = map->height;
    const int z = (int)lay.zoom;
    uint32_t *top = calloc((size_t)count + 1, sizeof *top);
    uint32_t *left = calloc((size_t)count + 1, sizeof *left);
    if (!top || !left) {
        free(top);
        free(left);
        pl_image_free(img);
        return pl__err(err, PL_ENOMEM, "out of memory for the outlines");
    }
    for (uint32_t k = 0; k <= count; k++)
        top[k] = left[k] = UINT32_MAX;
    for (uint32_t j = 0; j < h; j++)
        for (uint32_t i = 0; i < w; i++) {
            uint32_t k = marks[(size_t)j * w + i];
            if (!k || k > count)
                continue;
            if (j < top[k] || (j == top[k] && i < left[k]))
                top[k] = j, left[k] = i;
            int edge = i == 0 || j == 0 || i + 1 == w || j + 1 == h
                       || marks[(size_t)j * w + i - 1] != k || marks[(size_t)j * w + i + 1] != k
                       || marks[(size_t)(j - 1) * w + i] != k
                       || marks[(size_t)(j + 1) * w + i] != k;
            if (!edge)
                continue;
            int x = lay.map_x + (int)i * z, y = lay.map_y + (int)j * z;
            fill_square(img, x, y, z, ink);
            if (z >= 3)
                fill_square(img, x + z / 3, y + z / 3, z - 2 * (z / 3), core);
        }
    unsigned s = lay.text_scale ? lay.text_scale : 1;
    for (uint32_t k = 1; k <= count; k++) {
        if (top[k] == UINT32_MAX)
            continue;
        char num[16];
        snprintf(num, sizeof num, "%u", (unsigned)k);
        int x = lay.map_x + (int)left[k] * z;
        int y = lay.map_y + (int)top[k] * z - PL_FONT_HEIGHT * (int)s - 2;
        if (y < lay.map_y)
            y = lay.map_y + (int)top[k] * z + 2;
        int tw = (int)strlen(num) * (PL_FONT_WIDTH + 1) * (int)s;
        /* a white box under the number keeps it legible over any colour */
        for (int yy = y - 1; yy < y + PL_FONT_HEIGHT * (int)s + 1; yy++)
            for (int xx = x - 1; xx < x + tw + 1; xx++)
                if (xx >= 0 && yy >= 0 && (uint32_t)xx < img->width && (uint32_t)yy < img->height)
                    memcpy(img->rgb + ((size_t)yy * img->width + (size_t)xx) * 3, core, 3);
        pl_image_text(img, x, y, num, s, ink);
    }
    free(top);
    free(left);
    *out = img;
    return PL_OK;
}

/* ---- two maps together ------------------------------------------------- */

/* 1st and 99th percentiles of the finite values of one or two arrays. */
static int joint_range(double *lo, double *hi, const float *x, const float *y, size_t n,
                       pl_err *err)
{
    float *copy = malloc(2 * n * sizeof *copy);
    if (!copy)
        return pl__err(err, PL_ENOMEM, "out of memory for the render range");
    size_t k = 0;
    for (size_t i = 0; i < n; i++) {
        if (isfinite(x[i]))
            copy[k++] = x[i];
        if (y && isfinite(y[i]))
            copy[k++] = y[i];
    }
    if (k == 0) {
        free(copy);
        return pl__err(err, PL_EINVAL, "maps have no data to render");
    }
    *lo = pl_render__percentile(copy, k, 1.0);
    *hi = pl_render__percentile(copy, k, 99.0);
    free(copy);
    if (!(*lo < *hi)) {
        double half = *lo != 0.0 ? fabs(*lo) * 0.01 : 0.5;
        *lo -= half;
        *hi += half;
    }
    return PL_OK;
}

PL_EXPORT int pl_render_pair(pl_image **out, const pl_map *a, uint32_t ca, const pl_map *b,
                             uint32_t cb, pl_pair_mode mode, unsigned tile,
                             const pl_render_options *opts, pl_err *err)
{
    assert(out && a && b);
    *out = NULL;
    if (a->width != b->width || a->height != b->height)
        return pl__err(err, PL_EINVAL, "maps of %" PRIu32 "x%" PRIu32 " and %" PRIu32 "x%" PRIu32
                       " px cannot be shown together", a->width, a->height, b->width, b->height);
    if (ca >= a->nchannels)
        return pl__err(err, PL_EINVAL, "channel %" PRIu32 " of the first map is out of range "
                       "(it has %" PRIu32 ")", ca, a->nchannels);
    if (cb >= b->nchannels)
        return pl__err(err, PL_EINVAL, "channel %" PRIu32 " of the second map is out of range "
                       "(it has %" PRIu32 ")", cb, b->nchannels);
    if (mode != PL_PAIR_CHECKERBOARD && mode != PL_PAIR_BLEND)
        return pl__err(err, PL_EINVAL, "unknown pair mode %d", (int)mode);
    pl_render_options o;
    int rc = options_of(&o, opts, err);
    if (rc)
        return rc;
    const size_t n = (size_t)a->width * a->height;
    const float *x = a->data + (size_t)ca * n, *y = b->data + (size_t)cb * n;
    if (tile == 0) {
        uint32_t side = a->width < a->height ? a->width : a->height;
        tile = side >= 16 ? side / 8 : 2;
    }
    float *mix = malloc(n * sizeof *mix);
    if (!mix)
        return pl__err(err, PL_ENOMEM, "out of memory for a paired rendering");
    double lo_a = 0, hi_a = 1, lo_b = 0, hi_b = 1;
    if (mode == PL_PAIR_CHECKERBOARD) {
        rc = joint_range(&lo_a, &hi_a, x, y, n, err);
        if (!rc && isnan(o.vmin))
            o.vmin = lo_a;
        if (!rc && isnan(o.vmax))
            o.vmax = hi_a;
        for (uint32_t r = 0; r < a->height; r++)
            for (uint32_t c = 0; c < a->width; c++) {
                size_t i = (size_t)r * a->width + c;
                mix[i] = ((r / tile + c / tile) & 1) ? y[i] : x[i];
            }
    } else {
        rc = joint_range(&lo_a, &hi_a, x, NULL, n, err);
        if (!rc)
            rc = joint_range(&lo_b, &hi_b, y, NULL, n, err);
        for (size_t i = 0; i < n; i++)
            mix[i] = isfinite(x[i]) && isfinite(y[i]) ? 0.0f : NAN;
        o.colorbar = 0;
        o.vmin = -1.0;
        o.vmax = 1.0;
    }
    if (rc) {
        free(mix);
        return rc;
    }
    /* Render the composite through the ordinary layout, then (blend) paint
     * the map area with the two-colour picture. */
    pl_channel ch = a->channels[ca];
    snprintf(ch.label, sizeof ch.label, "%s",
             mode == PL_PAIR_CHECKERBOARD ? "checkerboard" : "magenta 1st, green 2nd");
    pl_map tmp = *a;
    tmp.nchannels = 1;
    tmp.channels = &ch;
    tmp.data = mix;
    pl_render_layout lay;
    pl_image *img = NULL;
    rc = pl_render__map(&img, &lay, &tmp, 0, &o, err);
    if (!rc && mode == PL_PAIR_BLEND) {
        unsigned char nodata[3];
        pl_render__nodata_rgb(o.colormap, nodata);
        for (uint32_t r = 0; r < a->height; r++)
            for (uint32_t c = 0; c < a->width; c++) {
                size_t i = (size_t)r * a->width + c;
                unsigned char rgb[3];
                if (isfinite(x[i]) && isfinite(y[i])) {
                    double p = unit_clamp((x[i] - lo_a) / (hi_a - lo_a));
                    double q = unit_clamp((y[i] - lo_b) / (hi_b - lo_b));
                    rgb[0] = rgb[2] = (unsigned char)lround(255.0 * p);
                    rgb[1] = (unsigned char)lround(255.0 * q);
                } else {
                    memcpy(rgb, nodata, 3);
                }
                pl_render__fill(img, lay.map_x + (int)(c * lay.zoom),
                                lay.map_y + (int)(r * lay.zoom), (int)lay.zoom, (int)lay.zoom, rgb);
            }
    }
    free(mix);
    if (rc)
        return rc;
    *out = img;
    return PL_OK;
}

/* ---- PNG output -------------------------------------------------------- */

/* The libpng part of writing; errors longjmp back here (png_int.h), so
 * this function only fills `job`, which its caller frees. */
typedef struct png_job {
    png_structp png;
    png_infop info;
    char msg[PL_PNG_MSG_SIZE];
} png_job;

static int write_rgb_png(png_job *job, FILE *fp, const pl_image *img)
{
    if (setjmp(png_jmpbuf(job->png)))
        return -1;
    png_init_io(job->png, fp);
    png_set_IHDR(job->png, job->info, img->width, img->height, 8, PNG_COLOR_TYPE_RGB,
                 PNG_INTERLACE_NONE, PNG_COMPRESSION_TYPE_DEFAULT, PNG_FILTER_TYPE_DEFAULT);
    png_text text[2];
    memset(text, 0, sizeof text);
    text[0].compression = PNG_TEXT_COMPRESSION_NONE;
    text[0].key = (png_charp)(uintptr_t)"Software";
    text[0].text = (png_charp)(uintptr_t)("plyledger " PL_VERSION_STRING);
    text[0].text_length = strlen(text[0].text);
    /* "Title": a predefined keyword of the PNG specification (ISO/IEC
     * 15948, 11.3.4.2), the picture's short title */
    int ntext = 1;
    if (img->title && img->title[0]) {
        text[1].compression = PNG_TEXT_COMPRESSION_NONE;
        text[1].key = (png_charp)(uintptr_t)"Title";
        text[1].text = img->title;
        text[1].text_length = strlen(img->title);
        ntext = 2;
    }
    png_set_text(job->png, job->info, text, ntext);
    png_write_info(job->png, job->info);
    for (uint32_t y = 0; y < img->height; y++)
        png_write_row(job->png, img->rgb + (size_t)y * img->width * 3);
    png_write_end(job->png, NULL);
    return 0;
}

PL_EXPORT int pl_image_write_png(const pl_image *img, pl_outfile *of, pl_err *err)
{
    assert(img && img->rgb && img->width > 0 && img->height > 0 && of);
    png_job job;
    memset(&job, 0, sizeof job);
    int rc;
    if (pl_png__create(&job.png, &job.info, 1, job.msg)) {
        snprintf(job.msg, sizeof job.msg, "out of memory for the PNG writer");
        rc = -1;
    } else {
        rc = write_rgb_png(&job, pl_outfile_stream(of), img);
    }
    pl_png__destroy(&job.png, &job.info, 1);
    if (rc)
        return pl__err(err, PL_EIO, "%s: cannot write PNG: %s", pl_outfile_path(of), job.msg);
    return PL_OK;
}

PL_EXPORT int pl_image_encode_png(unsigned char **out, size_t *len, const pl_image *img,
                                  pl_err *err)
{
    assert(out && len && img && img->rgb && img->width > 0 && img->height > 0);
    *out = NULL;
    *len = 0;
    char *buf = NULL;
    size_t n = 0;
    FILE *fp = open_memstream(&buf, &n);
    if (!fp)
        return pl__err(err, PL_ENOMEM, "out of memory for a PNG in memory");
    png_job job;
    memset(&job, 0, sizeof job);
    int rc;
    if (pl_png__create(&job.png, &job.info, 1, job.msg)) {
        snprintf(job.msg, sizeof job.msg, "out of memory for the PNG writer");
        rc = -1;
    } else {
        rc = write_rgb_png(&job, fp, img);
    }
    pl_png__destroy(&job.png, &job.info, 1);
    if (fclose(fp) != 0 && !rc) {
        snprintf(job.msg, sizeof job.msg, "out of memory");
        rc = -1;
    }
    if (rc) {
        free(buf);
        return pl__err(err, PL_ENOMEM, "cannot make a PNG in memory: %s", job.msg);
    }
    *out = (unsigned char *)buf;
    *len = n;
    return PL_OK;
}

PL_EXPORT int pl_image_save_png(const pl_image *img, const char *path, pl_err *err)
{
    assert(img && img->rgb && img->width > 0 && img->height > 0 && path);
    pl_outfile *of;
    int rc = pl_outfile_open(&of, path, err);
    return rc ? rc : pl_outfile_finish(of, pl_image_write_png(img, of, err), err);
}
