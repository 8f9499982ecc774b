/*
 * plot.c - two-dimensional data plots: nice ticks, layout, drawing.
 *
 * Ticks follow P. S. Heckbert (1990), "Nice numbers for graph labels",
 * Graphics Gems, pp. 61-63: the loose labelling, whose step is a nice
 * number near the nice span divided by the wanted number of intervals.
 *
 * Drawing works in two passes over the same plan: plan() checks the plot,
 * resolves the automatic ranges, writes the tick labels and places every
 * part; pl_plot_render() then paints and pl_plot_locate() maps a point, so
 * the two can never disagree about where a point falls.
 */
#include "image/render_int.h"

#include "common/common_int.h"
#include "plyledger/plot.h"

#include <assert.h>
#include <float.h>
#include <inttypes.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define MARGIN 10             /* around the whole picture, pixels */
#define MAX_TICKS 64          /* an axis never has more (at most ~25 with targets <= 15) */
#define MAX_TICK_TARGET 1000  /* largest target pl_plot_ticks() accepts */
#define MAX_TICK_COUNT 10000  /* more multiples than this in a span: refused */
#define NEAR 1e-9             /* a ratio this close to an integer counts as it */
#define MIN_SPAN 1e-300       /* narrowest span ticks are looked for in */
#define MIN_PLOT_W 50         /* smallest plot area a layout may leave */
#define MIN_PLOT_H 40
#define LABEL_SIZE 40

static const unsigned char PAPER[3] = {PL_RENDER_BACKGROUND};
static const unsigned char INK[3] = {PL_RENDER_INK};
static const unsigned char GRID[3] = {222, 222, 222};
static const unsigned char LEGEND_EDGE[3] = {170, 170, 170};
static const unsigned char LIMIT[3] = {200, 30, 30};

/* ---- nice numbers ------------------------------------------------------ */

/*
 * Heckbert's nicenum(): a number of the form {1, 2, 5, 10} x 10^k near x
 * (> 0, finite). Rounding picks the nearest in his sense (below 1.5: 1,
 * below 3: 2, below 7: 5, else 10); otherwise the smallest that is >= x.
 * The mantissa is compared with a relative slack of NEAR, so that 0.3 / 0.1
 * (2.9999999999999996 in doubles) counts as 3.
 */
static double nice_number(double x, int round_it)
{
    double e = floor(log10(x));
    double base = pow(10.0, e);
    double f = x / base;
    /* log10 of a power of ten can land a hair either side */
    if (f < 1.0 - NEAR) {
        base /= 10.0;
        f = x / base;
    } else if (f >= 10.0 * (1.0 - NEAR)) {
        base *= 10.0;
        f = x / base;
    }
    double nf;
    if (round_it)
        nf = f < 1.5 * (1.0 - NEAR) ? 1.0 : f < 3.0 * (1.0 - NEAR) ? 2.0
           : f < 7.0 * (1.0 - NEAR) ? 5.0 : 10.0;
    else
        nf = f <= 1.0 * (1.0 + NEAR) ? 1.0 : f <= 2.0 * (1.0 + NEAR) ? 2.0
           : f <= 5.0 * (1.0 + NEAR) ? 5.0 : 10.0;
    return nf * base;
}

/* The loose labelling's step for [lo, hi] and about `target` ticks. */
static int tick_step(double *step, double lo, double hi, int target)
{
    double span = hi - lo;
    if (!isfinite(span) || !(span >= MIN_SPAN))
        return PL_EINVAL;
    double d = nice_number(nice_number(span, 0) / (target - 1), 1);
    if (!isfinite(d) || !(d > 0.0))
        return PL_EINVAL;
    *step = d;
    return PL_OK;
}

/* The multiples of `step` inside [lo, hi]: the first and how many. */
static int ticks_inside(double *first, int *count, double lo, double hi, double step)
{
    double kmin = ceil(lo / step - NEAR), kmax = floor(hi / step + NEAR);
    if (!isfinite(kmin) || !isfinite(kmax) || kmax - kmin > MAX_TICK_COUNT)
        return PL_EINVAL;
    *first = kmin * step;
    *count = kmax < kmin ? 0 : (int)(kmax - kmin) + 1;
    return PL_OK;
}

PL_EXPORT int pl_plot_ticks(double lo, double hi, int target, double *first, double *step,
                            int *count)
{
    assert(first && step && count);
    *first = 0.0;
    *step = 0.0;
    *count = 0;
    if (!isfinite(lo) || !isfinite(hi) || !(lo < hi) || target < 2 || target > MAX_TICK_TARGET)
        return PL_EINVAL;
    double d, f;
    int n;
    if (tick_step(&d, lo, hi, target) != PL_OK || ticks_inside(&f, &n, lo, hi, d) != PL_OK)
        return PL_EINVAL;
    *first = f;
    *step = d;
    *count = n;
    return PL_OK;
}

/*
 * A tick's text. Ticks are multiples of a step of one significant digit, so
 * in full form the step's decimals are all a tick needs ("%.*f", then the
 * trailing zeros go); in exponent form a tick needs the digits from its own
 * leading one down to the step's. A value within a millionth of a step of
 * zero is zero (first + i * step may leave 1e-17 there).
 */
static void format_tick(char *buf, size_t cap, double v, double step, int exponent_form)
{
    if (fabs(v) < step * 1e-6)
        v = 0.0;
    double step_exp = floor(log10(step) + NEAR);
    if (exponent_form && v != 0.0) {
        double lead = floor(log10(fabs(v)) + NEAR);
        double digits = lead - step_exp + 1.0;
        int d = digits < 1.0 ? 1 : digits > 17.0 ? 17 : (int)digits;
        char tmp[64];
        snprintf(tmp, sizeof tmp, "%.*e", d - 1, v);
        char *e = strchr(tmp, 'e');
        int exp10 = e ? atoi(e + 1) : 0;
        if (e)
            *e = '\0';
        if (strchr(tmp, '.')) {
            size_t n = strlen(tmp);
            while (n > 0 && tmp[n - 1] == '0')
                tmp[--n] = '\0';
            if (n > 0 && tmp[n - 1] == '.')
                tmp[--n] = '\0';
        }
        snprintf(buf, cap, "%se%d", tmp, exp10);
        return;
    }
    int decimals = step_exp >= 0.0 ? 0 : step_exp < -17.0 ? 17 : (int)-step_exp;
    snprintf(buf, cap, "%.*f", decimals, v);
    if (strchr(buf, '.')) {
        size_t n = strlen(buf);
        while (n > 0 && buf[n - 1] == '0')
            buf[--n] = '\0';
        if (n > 0 && buf[n - 1] == '.')
            buf[--n] = '\0';
    }
    if (strcmp(buf, "-0") == 0)
        snprintf(buf, cap, "0");
}

/* ---- the plan ---------------------------------------------------------- */

typedef struct axis {
    double lo, hi;          /* the ends drawn */
    double step, first;     /* ticks: first + i * step, i < count */
    int count;
    int label_every;        /* label the ticks whose multiple index is divisible by it */
    double first_index;     /* first / step, an integer */
    char labels[MAX_TICKS][LABEL_SIZE];
    uint32_t widest;        /* pixels of the widest label */
} axis;

typedef struct plan {
    uint32_t width, height;
    unsigned s;             /* text scale */
    int px, py, pw, ph;     /* the plot area: columns px..px+pw-1, rows py..py+ph-1 */
    int tick;               /* tick length */
    int title_y, ylabel_y, xlabel_y, xvalues_y;
    axis x, y;
} plan;

/* A text the plot writes: printable ASCII or NULL. */
static int check_text(const char *text, const char *field, pl_err *err)
{
    if (!text)
        return PL_OK;
    for (size_t i = 0; text[i]; i++) {
        unsigned char c = (unsigned char)text[i];
        if (c < 32 || c > 126)
            return pl__err(err, PL_EINVAL,
                           "plot.%s: byte 0x%02x at offset %zu is not printable ASCII", field,
                           (unsigned)c, i);
    }
    return PL_OK;
}

static int check_end(double v, const char *field, pl_err *err)
{
    if (!isnan(v) && !isfinite(v))
        return pl__err(err, PL_EINVAL, "plot.%s is infinite: give a finite value or NaN "
                       "(automatic)", field);
    return PL_OK;
}

static int check_plot(const pl_plot *p, pl_err *err)
{
    if (p->version != PL_PLOT_VERSION)
        return pl__err(err, PL_EINVAL, "plot.version %u: expected PL_PLOT_VERSION (%u)",
                       p->version, (unsigned)PL_PLOT_VERSION);
    if (p->nseries > 0 && !p->series)
        return pl__err(err, PL_EINVAL, "plot.series is NULL with nseries %zu", p->nseries);
    uint32_t w = p->width ? p->width : PL_PLOT_DEFAULT_WIDTH;
    uint32_t h = p->height ? p->height : PL_PLOT_DEFAULT_HEIGHT;
    if (w < PL_PLOT_MIN_WIDTH || w > PL_PLOT_MAX_SIDE)
        return pl__err(err, PL_EINVAL, "plot.width %" PRIu32 ": expected %u..%u pixels (or 0)",
                       w, PL_PLOT_MIN_WIDTH, PL_PLOT_MAX_SIDE);
    if (h < PL_PLOT_MIN_HEIGHT || h > PL_PLOT_MAX_SIDE)
        return pl__err(err, PL_EINVAL, "plot.height %" PRIu32 ": expected %u..%u pixels (or 0)",
                       h, PL_PLOT_MIN_HEIGHT, PL_PLOT_MAX_SIDE);
    if (p->text_scale > PL_PLOT_MAX_TEXT_SCALE)
        return pl__err(err, PL_EINVAL, "plot.text_scale %u: expected 0..%u", p->text_scale,
                       PL_PLOT_MAX_TEXT_SCALE);
    int rc;
    if ((rc = check_end(p->xmin, "xmin", err)) || (rc = check_end(p->xmax, "xmax", err)) ||
        (rc = check_end(p->ymin, "ymin", err)) || (rc = check_end(p->ymax, "ymax", err)) ||
        (rc = check_end(p->hline, "hline", err)))
        return rc;
    if (!isnan(p->xmin) && !isnan(p->xmax) && !(p->xmin < p->xmax))
        return pl__err(err, PL_EINVAL, "plot.xmin (%g) is not below plot.xmax (%g)", p->xmin,
                       p->xmax);
    if (!isnan(p->ymin) && !isnan(p->ymax) && !(p->ymin < p->ymax))
        return pl__err(err, PL_EINVAL, "plot.ymin (%g) is not below plot.ymax (%g)", p->ymin,
                       p->ymax);
    if ((rc = check_text(p->title, "title", err)) || (rc = check_text(p->x_label, "x_label", err))
        || (rc = check_text(p->y_label, "y_label", err)) ||
        (rc = check_text(p->hline_label, "hline_label", err)))
        return rc;
    for (size_t i = 0; i < p->nseries; i++) {
        const pl_plot_series *sr = &p->series[i];
        if (sr->n > 0 && (!sr->x || !sr->y))
            return pl__err(err, PL_EINVAL, "plot.series[%zu].%s is NULL with n %zu", i,
                           !sr->x ? "x" : "y", sr->n);
        if (sr->style != PL_PLOT_POINTS && sr->style != PL_PLOT_LINE &&
            sr->style != PL_PLOT_DASHED)
            return pl__err(err, PL_EINVAL, "plot.series[%zu].style %d: expected "
                           "PL_PLOT_POINTS, PL_PLOT_LINE or PL_PLOT_DASHED", i, (int)sr->style);
        char field[48];
        snprintf(field, sizeof field, "series[%zu].name", i);
        if ((rc = check_text(sr->name, field, err)))
            return rc;
    }
    return PL_OK;
}

/* Extend [*lo, *hi] by v. */
static void take(double *lo, double *hi, int *has, double v)
{
    if (!isfinite(v))
        return;
    if (!*has || v < *lo)
        *lo = v;
    if (!*has || v > *hi)
        *hi = v;
    *has = 1;
}

/* The finite x (which 0) or y (which 1) values a plot shows: its points,
 * their error bars and the limit line. */
static int data_range(double *lo, double *hi, const pl_plot *p, int which)
{
    int has = 0;
    *lo = *hi = 0.0;
    for (size_t i = 0; i < p->nseries; i++) {
        const pl_plot_series *sr = &p->series[i];
        for (size_t k = 0; k < sr->n; k++) {
            if (!isfinite(sr->x[k]) || !isfinite(sr->y[k]))
                continue;
            if (which == 0) {
                take(lo, hi, &has, sr->x[k]);
                continue;
            }
            take(lo, hi, &has, sr->y[k]);
            double e = sr->yerr && sr->style == PL_PLOT_POINTS ? sr->yerr[k] : NAN;
            if (isfinite(e) && e > 0.0) {
                take(lo, hi, &has, sr->y[k] - e);
                take(lo, hi, &has, sr->y[k] + e);
            }
        }
    }
    if (which == 1 && !isnan(p->hline))
        take(lo, hi, &has, p->hline);
    return has;
}

/* 10 % of v's size, 1 for 0: how far an automatic end goes past a given one. */
static double beyond(double v)
{
    return v != 0.0 ? fabs(v) * 0.1 : 1.0;
}

/*
 * Resolve one axis (see pl_plot_render() for the rules) and its ticks. An
 * automatic end widens to the loose labelling's graph range; a given end
 * stays, and only the ticks inside it are drawn.
 */
static int resolve_axis(axis *a, double given_lo, double given_hi, const pl_plot *p, int which,
                        int target, pl_err *err)
{
    const char *name = which ? "y" : "x";
    int auto_lo = isnan(given_lo), auto_hi = isnan(given_hi);
    double lo = given_lo, hi = given_hi;
    if (auto_lo || auto_hi) {
        double dlo, dhi;
        if (!data_range(&dlo, &dhi, p, which)) {
            lo = 0.0;
            hi = 1.0;
        } else {
            double l = dlo, h = dhi;
            if (l == h) {
                double half = l != 0.0 ? fabs(l) * 0.05 : 1.0;
                l -= half;
                h += half;
            }
            /* halves first: the span itself may not be representable */
            double margin = (h / 2.0 - l / 2.0) * 0.1;
            l -= margin;
            h += margin;
            if (dlo >= 0.0 && dhi > 0.0 && l < 0.0)
                l = 0.0;
            if (dhi <= 0.0 && dlo < 0.0 && h > 0.0)
                h = 0.0;
            lo = l;
            hi = h;
        }
        if (!auto_lo)
            lo = given_lo;
        if (!auto_hi)
            hi = given_hi;
        if (!(lo < hi)) {
            if (auto_hi)
                hi = lo + beyond(lo);
            else
                lo = hi - beyond(hi);
        }
    }
    double step;
    if (!isfinite(lo) || !isfinite(hi) || tick_step(&step, lo, hi, target) != PL_OK)
        return pl__err(err, PL_EINVAL, "plot: the %s range %g..%g is too %s for ticks", name, lo,
                       hi, isfinite(hi - lo) ? "narrow" : "wide");
    if (auto_lo)
        lo = floor(lo / step + NEAR) * step;
    if (auto_hi)
        hi = ceil(hi / step - NEAR) * step;
    if (!isfinite(lo) || !isfinite(hi) || !isfinite(hi - lo) || !(lo < hi) ||
        ticks_inside(&a->first, &a->count, lo, hi, step) != PL_OK || a->count > MAX_TICKS)
        return pl__err(err, PL_EINVAL, "plot: the %s range %g..%g is too %s for ticks", name, lo,
                       hi, isfinite(hi - lo) ? "narrow" : "wide");
    a->lo = lo;
    a->hi = hi;
    a->step = step;
    a->first_index = round(a->first / step);
    a->label_every = 1;
    double biggest = 0.0;
    for (int i = 0; i < a->count; i++) {
        double v = fabs(a->first + i * step);
        if (v >= step * 1e-6 && v > biggest)
            biggest = v;
    }
    int exponent_form = biggest >= 1e6 || (biggest > 0.0 && biggest < 1e-3);
    a->widest = 0;
    for (int i = 0; i < a->count; i++) {
        format_tick(a->labels[i], LABEL_SIZE, a->first + i * step, step, exponent_form);
        uint32_t tw = pl_render__text_width(a->labels[i], p->text_scale ? p->text_scale : 1);
        if (tw > a->widest)
            a->widest = tw;
    }
    return PL_OK;
}

static int clamp_int(int v, int lo, int hi)
{
    return v < lo ? lo : v > hi ? hi : v;
}

/* The smallest k for which every k-th label has room: labels `need` pixels
 * apart at least, ticks `spacing` pixels apart. */
static int every_kth(double spacing, double need)
{
    int k = 1;
    while (k < MAX_TICKS && k * spacing < need)
        k++;
    return k;
}

static double x_col(const plan *pl, double x)
{
    const axis *a = &pl->x;
    double t = (x - a->lo) / (a->hi - a->lo);
    if (!isfinite(t))
        t = (x / 2.0 - a->lo / 2.0) / (a->hi / 2.0 - a->lo / 2.0);
    return pl->px + t * (pl->pw - 1);
}

static double y_row(const plan *pl, double y)
{
    const axis *a = &pl->y;
    double t = (a->hi - y) / (a->hi - a->lo);
    if (!isfinite(t))
        t = (a->hi / 2.0 - y / 2.0) / (a->hi / 2.0 - a->lo / 2.0);
    return pl->py + t * (pl->ph - 1);
}

static int nonempty(const char *s)
{
    return s && s[0];
}

static int make_plan(plan *pl, const pl_plot *p, pl_err *err)
{
    int rc = check_plot(p, err);
    if (rc)
        return rc;
    memset(pl, 0, sizeof *pl);
    pl->width = p->width ? p->width : PL_PLOT_DEFAULT_WIDTH;
    pl->height = p->height ? p->height : PL_PLOT_DEFAULT_HEIGHT;
    const int s = (int)(p->text_scale ? p->text_scale : 1);
    pl->s = (unsigned)s;
    const int W = (int)pl->width, H = (int)pl->height;
    const int gh = PL_FONT_HEIGHT * s;

    int tx = clamp_int(W / 64, 3, 15), ty = clamp_int(H / 40, 3, 15);
    if ((rc = resolve_axis(&pl->x, p->xmin, p->xmax, p, 0, tx, err)) ||
        (rc = resolve_axis(&pl->y, p->ymin, p->ymax, p, 1, ty, err)))
        return rc;

    pl->tick = 4 * s;
    int y = MARGIN;
    pl->title_y = y;
    if (nonempty(p->title))
        y += 2 * gh + 8 * s;
    pl->ylabel_y = y;
    if (nonempty(p->y_label))
        y += gh + 5 * s;
    pl->py = y + gh / 2 + 2;

    int bottom = H - MARGIN;
    if (nonempty(p->x_label)) {
        pl->xlabel_y = bottom - gh;
        bottom = pl->xlabel_y - 5 * s;
    }
    pl->xvalues_y = bottom - gh;
    int axis_row = pl->xvalues_y - 3 * s - pl->tick - 1;
    pl->ph = axis_row - pl->py;
    if (!nonempty(p->x_label))
        pl->xlabel_y = H;

    pl->px = MARGIN + (int)pl->y.widest + 4 * s + pl->tick + 1;
    int right = W - MARGIN - (int)(pl->x.widest + 1) / 2;
    pl->pw = right - pl->px;
    if (pl->pw < MIN_PLOT_W || pl->ph < MIN_PLOT_H)
        return pl__err(err, PL_EINVAL, "plot.text_scale %u leaves no room for the plot area in "
                       "%" PRIu32 "x%" PRIu32 " pixels", pl->s, pl->width, pl->height);

    double xspace = pl->x.step / (pl->x.hi - pl->x.lo) * (pl->pw - 1);
    double yspace = pl->y.step / (pl->y.hi - pl->y.lo) * (pl->ph - 1);
    pl->x.label_every = every_kth(xspace, pl->x.widest + 6.0 * s);
    pl->y.label_every = every_kth(yspace, gh + 3.0 * s);
    return PL_OK;
}

/* ---- drawing ----------------------------------------------------------- */

/* An image and the rectangle drawing is clipped to (x1, y1 exclusive). */
typedef struct canvas {
    pl_image *img;
    int64_t x0, y0, x1, y1;
} canvas;

static void put_rect(const canvas *c, int64_t x, int64_t y, int64_t w, int64_t h,
                     const unsigned char rgb[3])
{
    int64_t xa = x < c->x0 ? c->x0 : x, ya = y < c->y0 ? c->y0 : y;
    int64_t xb = x + w > c->x1 ? c->x1 : x + w, yb = y + h > c->y1 ? c->y1 : y + h;
    if (xa < xb && ya < yb)
        pl_render__fill(c->img, xa, ya, xb - xa, yb - ya, rgb);
}

/* The pixel a position falls in (round half up), clamped far outside any
 * image so that the integer arithmetic below cannot overflow; NaN, which
 * no caller should pass, lands outside too. */
static int64_t pixel_of(double v)
{
    double r = floor(v + 0.5);
    if (!(r > -1e9))
        return -1000000000;
    return r > 1e9 ? 1000000000 : (int64_t)r;
}

/* A square of side `side` around the pixel of (col, row). */
static void put_square(const canvas *c, double col, double row, int side,
                       const unsigned char rgb[3])
{
    put_rect(c, pixel_of(col) - side / 2, pixel_of(row) - side / 2, side, side, rgb);
}

/*
 * Liang-Barsky: the part t0..t1 (of 0..1) of the segment from (ax, ay) by
 * (dx, dy) inside [x0, x1] x [y0, y1]; 0 when none of it is.
 */
static int clip_segment(double *t0, double *t1, double ax, double ay, double dx, double dy,
                        double x0, double y0, double x1, double y1)
{
    double p[4] = {-dx, dx, -dy, dy};
    double q[4] = {ax - x0, x1 - ax, ay - y0, y1 - ay};
    double a = 0.0, b = 1.0;
    for (int i = 0; i < 4; i++) {
        if (p[i] == 0.0) {
            if (q[i] < 0.0)
                return 0;
            continue;
        }
        double r = q[i] / p[i];
        if (p[i] < 0.0) {
            if (r > b)
                return 0;
            if (r > a)
                a = r;
        } else {
            if (r < a)
                return 0;
            if (r < b)
                b = r;
        }
    }
    *t0 = a;
    *t1 = b;
    return 1;
}

/*
 * A segment `width` pixels wide between two pixel positions, dashed when
 * dash_on > 0 (dash_on pixels drawn, dash_off not, measured along the
 * line). *phase carries the length drawn so far, so that a dashed polyline
 * keeps its rhythm across its corners. Only the part near the clip
 * rectangle is walked, however far away the ends lie; a segment whose
 * ends or length are not finite is left out.
 */
static void put_segment(const canvas *c, double ax, double ay, double bx, double by, int width,
                        double dash_on, double dash_off, double *phase,
                        const unsigned char rgb[3])
{
    double dx = bx - ax, dy = by - ay;
    double len = hypot(dx, dy);
    if (!isfinite(dx) || !isfinite(dy) || !isfinite(len))
        return;
    double t0, t1, pad = width + 1.0;
    double start = *phase;
    *phase += len;
    if (!clip_segment(&t0, &t1, ax, ay, dx, dy, (double)c->x0 - pad, (double)c->y0 - pad,
                      (double)c->x1 + pad, (double)c->y1 + pad))
        return;
    double walk = fmax(fabs(dx), fabs(dy)) * (t1 - t0);
    double steps = ceil(walk);
    long n = steps < 1.0 ? 0 : (long)steps;
    double period = dash_on + dash_off;
    for (long i = 0; i <= n; i++) {
        double t = n ? t0 + (t1 - t0) * (double)i / (double)n : t0;
        if (dash_on > 0.0 && fmod(start + t * len, period) >= dash_on)
            continue;
        put_square(c, ax + t * dx, ay + t * dy, width, rgb);
    }
}

/* Write at most as many characters of `text` as fit in max_w pixels. */
static void put_text(pl_image *img, int64_t x, int64_t y, const char *text, unsigned scale,
                     int64_t max_w, const unsigned char rgb[3])
{
    char buf[1024];
    int64_t fit = max_w <= 0 ? 0 : (max_w + scale) / (PL_FONT_ADVANCE * (int64_t)scale);
    size_t n = strlen(text);
    if ((int64_t)n > fit)
        n = (size_t)fit;
    if (n >= sizeof buf)
        n = sizeof buf - 1;
    if (n == 0 || x > INT32_MAX || y > INT32_MAX || x < INT32_MIN || y < INT32_MIN)
        return;
    memcpy(buf, text, n);
    buf[n] = '\0';
    pl_image_text(img, (int)x, (int)y, buf, scale, rgb);
}

/* Width of text as put_text() writes it within max_w. */
static int64_t text_width_fit(const char *text, unsigned scale, int64_t max_w)
{
    int64_t w = pl_render__text_width(text, scale);
    if (w <= max_w)
        return w;
    int64_t fit = max_w <= 0 ? 0 : (max_w + scale) / (PL_FONT_ADVANCE * (int64_t)scale);
    return fit ? fit * PL_FONT_ADVANCE * scale - scale : 0;
}

/* Whether tick i of an axis carries its value. */
static int labelled(const axis *a, int i)
{
    double r = fmod(a->first_index + i, (double)a->label_every);
    return r == 0.0;
}

static void draw_grid(const canvas *area, const plan *pl)
{
    for (int i = 0; i < pl->x.count; i++) {
        int64_t col = pixel_of(x_col(pl, pl->x.first + i * pl->x.step));
        if (col > pl->px)
            put_rect(area, col, pl->py, 1, pl->ph, GRID);
    }
    for (int i = 0; i < pl->y.count; i++) {
        int64_t row = pixel_of(y_row(pl, pl->y.first + i * pl->y.step));
        if (row < pl->py + pl->ph - 1)
            put_rect(area, pl->px, row, pl->pw, 1, GRID);
    }
    put_rect(area, pl->px, pl->py, pl->pw, 1, GRID);
    put_rect(area, pl->px + pl->pw - 1, pl->py, 1, pl->ph, GRID);
}

static void draw_series(const canvas *area, const plan *pl, const pl_plot_series *sr)
{
    const int s = (int)pl->s;
    const int mark = 5 * s, line = 2 * s;
    if (sr->style == PL_PLOT_POINTS) {
        for (size_t k = 0; sr->yerr && k < sr->n; k++) {
            double e = sr->yerr[k];
            if (!isfinite(sr->x[k]) || !isfinite(sr->y[k]) || !isfinite(e) || !(e > 0.0))
                continue;
            double col = x_col(pl, sr->x[k]);
            double top = y_row(pl, sr->y[k] + e), bottom = y_row(pl, sr->y[k] - e);
            double ph = 0.0;
            put_segment(area, col, top, col, bottom, s, 0.0, 0.0, &ph, sr->rgb);
            put_segment(area, col - mark / 2, top, col + mark / 2, top, s, 0.0, 0.0, &ph,
                        sr->rgb);
            put_segment(area, col - mark / 2, bottom, col + mark / 2, bottom, s, 0.0, 0.0,
                        &ph, sr->rgb);
        }
        for (size_t k = 0; k < sr->n; k++)
            if (isfinite(sr->x[k]) && isfinite(sr->y[k]))
                put_square(area, x_col(pl, sr->x[k]), y_row(pl, sr->y[k]), mark, sr->rgb);
        return;
    }
    double on = sr->style == PL_PLOT_DASHED ? 8.0 * s : 0.0, off = 5.0 * s;
    double phase = 0.0;
    int have_prev = 0, drew_prev = 0;
    double pc = 0.0, pr = 0.0;
    for (size_t k = 0; k < sr->n; k++) {
        if (!isfinite(sr->x[k]) || !isfinite(sr->y[k])) {
            /* a lone point between breaks still shows, as a dot */
            if (have_prev && !drew_prev)
                put_square(area, pc, pr, line, sr->rgb);
            have_prev = 0;
            continue;
        }
        double c = x_col(pl, sr->x[k]), r = y_row(pl, sr->y[k]);
        if (have_prev) {
            put_segment(area, pc, pr, c, r, line, on, off, &phase, sr->rgb);
            drew_prev = 1;
        } else {
            drew_prev = 0;
        }
        pc = c;
        pr = r;
        have_prev = 1;
    }
    if (have_prev && !drew_prev)
        put_square(area, pc, pr, line, sr->rgb);
}

static void draw_limit(pl_image *img, const canvas *area, const plan *pl, const pl_plot *p,
                       int with_label)
{
    const int s = (int)pl->s;
    double row = y_row(pl, p->hline);
    int64_t r = pixel_of(row);
    if (r < pl->py || r >= pl->py + pl->ph)
        return;
    if (!with_label) {
        double phase = 0.0;
        put_segment(area, pl->px, row, pl->px + pl->pw - 1, row, 2 * s, 10.0 * s, 6.0 * s,
                    &phase, LIMIT);
        return;
    }
    if (!nonempty(p->hline_label))
        return;
    const int gh = PL_FONT_HEIGHT * s;
    int64_t max_w = pl->pw - 8 * s;
    int64_t tw = text_width_fit(p->hline_label, pl->s, max_w);
    int64_t x = pl->px + pl->pw - 4 * s - tw;
    int64_t y = r - s - 3 * s - gh;
    if (y < pl->py + 2)
        y = r + s + 3 * s;
    if (y + gh > pl->py + pl->ph)
        return;
    put_text(img, x, y, p->hline_label, pl->s, max_w, LIMIT);
}

/* The legend box: the named series, each with a sample of its style. */
static void draw_legend(pl_image *img, const canvas *area, const plan *pl, const pl_plot *p)
{
    const int s = (int)pl->s, gh = PL_FONT_HEIGHT * s;
    const int pad = 5 * s, sample = 24 * s, gap = 6 * s, row_h = gh + 5 * s;
    const int64_t x = pl->px + 8 * s, y = pl->py + 8 * s;
    int64_t max_name = pl->pw - 16 * s - 2 * pad - sample - gap;
    if (max_name < PL_FONT_WIDTH * s)
        return;
    size_t rows = 0;
    int64_t widest = 0;
    for (size_t i = 0; i < p->nseries; i++) {
        if (!nonempty(p->series[i].name))
            continue;
        int64_t w = text_width_fit(p->series[i].name, pl->s, max_name);
        if (w > widest)
            widest = w;
        rows++;
    }
    int64_t fit_rows = (pl->ph - 16 * s - 2 * pad + 5 * s) / row_h;
    if (rows > (size_t)(fit_rows < 0 ? 0 : fit_rows))
        rows = (size_t)(fit_rows < 0 ? 0 : fit_rows);
    if (rows == 0)
        return;
    int64_t bw = 2 * pad + sample + gap + widest;
    int64_t bh = 2 * pad + (int64_t)rows * row_h - 5 * s;
    put_rect(area, x, y, bw, bh, PAPER);
    put_rect(area, x - 1, y - 1, bw + 2, 1, LEGEND_EDGE);
    put_rect(area, x - 1, y + bh, bw + 2, 1, LEGEND_EDGE);
    put_rect(area, x - 1, y, 1, bh, LEGEND_EDGE);
    put_rect(area, x + bw, y, 1, bh, LEGEND_EDGE);
    size_t row = 0;
    for (size_t i = 0; i < p->nseries && row < rows; i++) {
        const pl_plot_series *sr = &p->series[i];
        if (!nonempty(sr->name))
            continue;
        int64_t top = y + pad + (int64_t)row * row_h;
        double mid = (double)top + (gh - 1) / 2.0;
        double left = (double)(x + pad), right_end = (double)(x + pad + sample - 1);
        double phase = 0.0;
        if (sr->style == PL_PLOT_POINTS)
            put_square(area, (left + right_end) / 2.0, mid, 5 * s, sr->rgb);
        else
            put_segment(area, left, mid, right_end, mid, 2 * s,
                        sr->style == PL_PLOT_DASHED ? 8.0 * s : 0.0, 5.0 * s, &phase, sr->rgb);
        put_text(img, x + pad + sample + gap, top, sr->name, pl->s, max_name, INK);
        row++;
    }
}

static void draw_axes(pl_image *img, const plan *pl, const pl_plot *p)
{
    const int s = (int)pl->s, gh = PL_FONT_HEIGHT * s;
    const int W = (int)pl->width;
    canvas all = {img, 0, 0, pl->width, pl->height};
    const int axis_col = pl->px - 1, axis_row = pl->py + pl->ph;
    put_rect(&all, axis_col, pl->py, 1, pl->ph + 1, INK);
    put_rect(&all, axis_col, axis_row, pl->pw + 1, 1, INK);
    for (int i = 0; i < pl->x.count; i++) {
        int64_t col = pixel_of(x_col(pl, pl->x.first + i * pl->x.step));
        put_rect(&all, col, axis_row + 1, 1, pl->tick, INK);
        if (!labelled(&pl->x, i))
            continue;
        int64_t tw = pl_render__text_width(pl->x.labels[i], pl->s);
        int64_t x = col - tw / 2;
        if (x + tw > W)
            x = W - tw;
        if (x < 0)
            x = 0;
        put_text(img, x, pl->xvalues_y, pl->x.labels[i], pl->s, W, INK);
    }
    for (int i = 0; i < pl->y.count; i++) {
        int64_t row = pixel_of(y_row(pl, pl->y.first + i * pl->y.step));
        put_rect(&all, axis_col - pl->tick, row, pl->tick, 1, INK);
        if (!labelled(&pl->y, i))
            continue;
        int64_t tw = pl_render__text_width(pl->y.labels[i], pl->s);
        put_text(img, axis_col - pl->tick - 4 * s - tw, row - (gh - 1) / 2, pl->y.labels[i],
                 pl->s, W, INK);
    }
    int64_t room = W - 2 * MARGIN;
    if (nonempty(p->x_label)) {
        int64_t tw = text_width_fit(p->x_label, pl->s, room);
        int64_t x = pl->px + pl->pw / 2 - tw / 2;
        if (x + tw > W - MARGIN)
            x = W - MARGIN - tw;
        if (x < MARGIN)
            x = MARGIN;
        put_text(img, x, pl->xlabel_y, p->x_label, pl->s, room, INK);
    }
    if (nonempty(p->y_label))
        put_text(img, MARGIN, pl->ylabel_y, p->y_label, pl->s, room, INK);
    if (nonempty(p->title)) {
        unsigned ts = 2 * pl->s;
        int64_t tw = text_width_fit(p->title, ts, room);
        int64_t x = pl->px + pl->pw / 2 - tw / 2;
        if (x + tw > W - MARGIN)
            x = W - MARGIN - tw;
        if (x < MARGIN)
            x = MARGIN;
        put_text(img, x, pl->title_y, p->title, ts, room, INK);
    }
}

PL_EXPORT int pl_plot_render(pl_image **out, const pl_plot *plot, pl_err *err)
{
    assert(out && plot);
    *out = NULL;
    plan pl;
    int rc = make_plan(&pl, plot, err);
    if (rc)
        return rc;
    pl_image *img = NULL;
    if ((rc = pl_image_new(&img, pl.width, pl.height, err)))
        return rc;
    if (nonempty(plot->title) && !(img->title = pl__strdup(plot->title))) {
        pl_image_free(img);
        return pl__err(err, PL_ENOMEM, "out of memory for the plot's title");
    }
    pl_render__fill(img, 0, 0, pl.width, pl.height, PAPER);
    canvas area = {img, pl.px, pl.py, (int64_t)pl.px + pl.pw, (int64_t)pl.py + pl.ph};
    draw_grid(&area, &pl);
    if (!isnan(plot->hline))
        draw_limit(img, &area, &pl, plot, 0);
    for (size_t i = 0; i < plot->nseries; i++)
        draw_series(&area, &pl, &plot->series[i]);
    if (!isnan(plot->hline))
        draw_limit(img, &area, &pl, plot, 1);
    draw_legend(img, &area, &pl, plot);
    draw_axes(img, &pl, plot);
    *out = img;
    return PL_OK;
}

PL_EXPORT int pl_plot_locate(double *col, double *row, const pl_plot *plot, double x, double y,
                             pl_err *err)
{
    assert(col && row && plot);
    *col = *row = NAN;
    plan pl;
    int rc = make_plan(&pl, plot, err);
    if (rc)
        return rc;
    if (!isfinite(x) || !isfinite(y))
        return pl__err(err, PL_EINVAL, "point (%g, %g) to locate is not finite", x, y);
    *col = x_col(&pl, x);
    *row = y_row(&pl, y);
    return PL_OK;
}
