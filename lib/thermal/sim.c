/*
 * sim.c - the flash-thermography simulator: scene files, the finite-volume
 * model of the part, the Douglas ADI time stepping, the camera and the
 * ground truth.
 */
#include "thermal/sim_int.h"

#include "common/common_int.h"
#include "common/num_int.h"
#include "common/outfile_int.h"
#include "common/strbuf_int.h"
#include "common/threads_int.h"

#include <cjson/cJSON.h>

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define SCENE_FORMAT "plyledger-scene-1"
#define TRUTH_FORMAT "plyledger-truth-1"

/* An air gap of 25 um: 25e-6 m / 0.026 W/m/K (air at 20 C, from memory). */
#define AIR_GAP_RESISTANCE (25e-6 / 0.026)
/* Stefan-Boltzmann constant, W/m^2/K^4 (CODATA 2018). */
#define STEFAN_BOLTZMANN 5.670374419e-8
/* Depths closer than this (mm) are one interface. */
#define PLANE_TOLERANCE_MM 1e-4
/* The largest grid a run will allocate. */
#define MAX_CELLS ((size_t)16 * 1000 * 1000)
/* Sub-samples per cell side when measuring how much of a cell an outline
 * covers. */
#define COVER_SAMPLES 8
/* Points of a curved outline in the ground truth. */
#define CURVE_POINTS 72

/* ---- random numbers ------------------------------------------------------ */

/* xoshiro256** (Blackman & Vigna 2018, "Scrambled linear pseudorandom number
 * generators") seeded through splitmix64; one independent stream per use so
 * that, say, the frame count does not change the fixed-pattern noise. */
typedef struct rng {
    uint64_t s[4];
    int have_spare;
    double spare;
} rng;

static uint64_t splitmix64(uint64_t *x)
{
    uint64_t z = (*x += 0x9E3779B97F4A7C15ull);
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
    return z ^ (z >> 31);
}

static void rng_seed(rng *r, uint64_t seed, uint64_t stream)
{
    uint64_t x = seed ^ (stream * 0xD1B54A32D192ED03ull);
    for (int i = 0; i < 4; i++)
        r->s[i] = splitmix64(&x);
    r->have_spare = 0;
    r->spare = 0;
}

static uint64_t rotl(uint64_t x, int k)
{
    return (x << k) | (x >> (64 - k));
}

static uint64_t rng_next(rng *r)
{
    uint64_t *s = r->s;
    uint64_t result = rotl(s[1] * 5, 7) * 9;
    uint64_t t = s[1] << 17;
    s[2] ^= s[0];
    s[3] ^= s[1];
    s[1] ^= s[2];
    s[0] ^= s[3];
    s[2] ^= t;
    s[3] = rotl(s[3], 45);
    return result;
}

static double rng_uniform(rng *r)
{
    return (double)(rng_next(r) >> 11) * 0x1.0p-53;
}

/* Standard normal deviates by Marsaglia's polar method (Marsaglia & Bray
 * 1964, "A convenient method for generating normal variables"). */
static double rng_gauss(rng *r)
{
    if (r->have_spare) {
        r->have_spare = 0;
        return r->spare;
    }
    double u, v, s;
    do {
        u = 2.0 * rng_uniform(r) - 1.0;
        v = 2.0 * rng_uniform(r) - 1.0;
        s = u * u + v * v;
    } while (s >= 1.0 || s == 0.0);
    double f = sqrt(-2.0 * log(s) / s);
    r->spare = v * f;
    r->have_spare = 1;
    return u * f;
}

enum { STREAM_FLASH = 1, STREAM_PATTERN = 2, STREAM_DEAD = 3, STREAM_NOISE = 4 };

/* ---- outlines ------------------------------------------------------------ */

static void outline_clear(pl_sim__outline *o)
{
    free(o->pts);
    o->pts = NULL;
    o->npts = 0;
}

double pl_sim__outline_area(const pl_sim__outline *o)
{
    switch (o->shape) {
    case PL_SIM__CIRCLE:
        return M_PI * o->a * o->a / 4.0;
    case PL_SIM__ELLIPSE:
        return M_PI * o->a * o->b / 4.0;
    case PL_SIM__RECTANGLE:
        return o->a * o->b;
    default: {
        /* the shoelace formula */
        double s = 0;
        for (size_t i = 0; i < o->npts; i++) {
            size_t j = (i + 1) % o->npts;
            s += o->pts[2 * i] * o->pts[2 * j + 1] - o->pts[2 * j] * o->pts[2 * i + 1];
        }
        return fabs(s) / 2.0;
    }
    }
}

/* The area centroid of an outline, mm. */
static void outline_centre(const pl_sim__outline *o, double *x, double *y)
{
    if (o->shape != PL_SIM__POLYGON) {
        *x = o->cx;
        *y = o->cy;
        return;
    }
    double a = 0, sx = 0, sy = 0;
    for (size_t i = 0; i < o->npts; i++) {
        size_t j = (i + 1) % o->npts;
        double xi = o->pts[2 * i], yi = o->pts[2 * i + 1];
        double xj = o->pts[2 * j], yj = o->pts[2 * j + 1];
        double c = xi * yj - xj * yi;
        a += c;
        sx += (xi + xj) * c;
        sy += (yi + yj) * c;
    }
    *x = sx / (3.0 * a);
    *y = sy / (3.0 * a);
}

int pl_sim__outline_contains(const pl_sim__outline *o, double x, double y)
{
    if (x < o->bbox[0] || x > o->bbox[2] || y < o->bbox[1] || y > o->bbox[3])
        return 0;
    double dx = x - o->cx, dy = y - o->cy;
    switch (o->shape) {
    case PL_SIM__CIRCLE:
        return dx * dx + dy * dy <= o->a * o->a / 4.0;
    case PL_SIM__ELLIPSE: {
        double an = o->angle_deg * M_PI / 180.0;
        double u = cos(an) * dx + sin(an) * dy;
        double v = -sin(an) * dx + cos(an) * dy;
        double ra = o->a / 2.0, rb = o->b / 2.0;
        return (u * u) / (ra * ra) + (v * v) / (rb * rb) <= 1.0;
    }
    default: {
        /* even-odd rule on the corners */
        int in = 0;
        for (size_t i = 0, j = o->npts - 1; i < o->npts; j = i++) {
            double xi = o->pts[2 * i], yi = o->pts[2 * i + 1];
            double xj = o->pts[2 * j], yj = o->pts[2 * j + 1];
            if ((yi > y) != (yj > y) && x < (xj - xi) * (y - yi) / (yj - yi) + xi)
                in = !in;
        }
        return in;
    }
    }
}

/* Corners for rectangles, bounding boxes for all. */
static int outline_finish(pl_sim__outline *o)
{
    if (o->shape == PL_SIM__RECTANGLE) {
        free(o->pts);
        o->pts = malloc(8 * sizeof *o->pts);
        if (!o->pts)
            return PL_ENOMEM;
        o->npts = 4;
        double an = o->angle_deg * M_PI / 180.0, c = cos(an), s = sin(an);
        static const double sx[4] = { -1, 1, 1, -1 }, sy[4] = { -1, -1, 1, 1 };
        for (int i = 0; i < 4; i++) {
            double u = sx[i] * o->a / 2.0, v = sy[i] * o->b / 2.0;
            o->pts[2 * i] = o->cx + c * u - s * v;
            o->pts[2 * i + 1] = o->cy + s * u + c * v;
        }
    }
    if (o->shape == PL_SIM__CIRCLE || o->shape == PL_SIM__ELLIPSE) {
        double an = o->angle_deg * M_PI / 180.0;
        double ra = o->a / 2.0, rb = (o->shape == PL_SIM__CIRCLE ? o->a : o->b) / 2.0;
        double ex = sqrt(ra * ra * cos(an) * cos(an) + rb * rb * sin(an) * sin(an));
        double ey = sqrt(ra * ra * sin(an) * sin(an) + rb * rb * cos(an) * cos(an));
        o->bbox[0] = o->cx - ex;
        o->bbox[1] = o->cy - ey;
        o->bbox[2] = o->cx + ex;
        o->bbox[3] = o->cy + ey;
    } else {
        o->bbox[0] = o->bbox[1] = INFINITY;
        o->bbox[2] = o->bbox[3] = -INFINITY;
        for (size_t i = 0; i < o->npts; i++) {
            o->bbox[0] = fmin(o->bbox[0], o->pts[2 * i]);
            o->bbox[1] = fmin(o->bbox[1], o->pts[2 * i + 1]);
            o->bbox[2] = fmax(o->bbox[2], o->pts[2 * i]);
            o->bbox[3] = fmax(o->bbox[3], o->pts[2 * i + 1]);
        }
        if (o->shape == PL_SIM__POLYGON) {
            double cx, cy;
            outline_centre(o, &cx, &cy);
            o->cx = cx;
            o->cy = cy;
        }
    }
    return PL_OK;
}

/* Points along the outline (mm): the corners, or CURVE_POINTS on a curve.
 * `xy` holds room for max(npts, CURVE_POINTS) pairs. */
static size_t outline_points(const pl_sim__outline *o, double *xy)
{
    if (o->shape == PL_SIM__RECTANGLE || o->shape == PL_SIM__POLYGON) {
        memcpy(xy, o->pts, 2 * o->npts * sizeof *xy);
        return o->npts;
    }
    double an = o->angle_deg * M_PI / 180.0, c = cos(an), s = sin(an);
    double ra = o->a / 2.0, rb = (o->shape == PL_SIM__CIRCLE ? o->a : o->b) / 2.0;
    for (size_t i = 0; i < CURVE_POINTS; i++) {
        double w = 2.0 * M_PI * (double)i / CURVE_POINTS;
        double u = ra * cos(w), v = rb * sin(w);
        xy[2 * i] = o->cx + c * u - s * v;
        xy[2 * i + 1] = o->cy + s * u + c * v;
    }
    return CURVE_POINTS;
}

/* Whether segments p1-p2 and p3-p4 properly cross or touch. */
static int segments_meet(const double *p1, const double *p2, const double *p3, const double *p4)
{
    double d1 = (p4[0] - p3[0]) * (p1[1] - p3[1]) - (p4[1] - p3[1]) * (p1[0] - p3[0]);
    double d2 = (p4[0] - p3[0]) * (p2[1] - p3[1]) - (p4[1] - p3[1]) * (p2[0] - p3[0]);
    double d3 = (p2[0] - p1[0]) * (p3[1] - p1[1]) - (p2[1] - p1[1]) * (p3[0] - p1[0]);
    double d4 = (p2[0] - p1[0]) * (p4[1] - p1[1]) - (p2[1] - p1[1]) * (p4[0] - p1[0]);
    if (((d1 > 0 && d2 < 0) || (d1 < 0 && d2 > 0)) && ((d3 > 0 && d4 < 0) || (d3 < 0 && d4 > 0)))
        return 1;
    /* collinear overlaps */
    if (d1 == 0 && d2 == 0 && d3 == 0 && d4 == 0) {
        for (int ax = 0; ax < 2; ax++) {
            double a0 = fmin(p1[ax], p2[ax]), a1 = fmax(p1[ax], p2[ax]);
            double b0 = fmin(p3[ax], p4[ax]), b1 = fmax(p3[ax], p4[ax]);
            if (a1 < b0 || b1 < a0)
                return 0;
        }
        return 1;
    }
    return 0;
}

static int polygon_is_simple(const double *pts, size_t n)
{
    for (size_t i = 0; i < n; i++) {
        const double *a = pts + 2 * i, *b = pts + 2 * ((i + 1) % n);
        for (size_t j = i + 1; j < n; j++) {
            if (j == i + 1 || (i == 0 && j == n - 1))
                continue; /* neighbours share a corner */
            const double *c = pts + 2 * j, *d = pts + 2 * ((j + 1) % n);
            if (segments_meet(a, b, c, d))
                return 0;
        }
    }
    return 1;
}

/* ---- scene files --------------------------------------------------------- */

typedef struct jctx {
    const char *file;
    pl_err *err;
} jctx;

typedef struct range {
    double lo, hi;
    int lo_open, hi_open;
} range;

static const range R_ANY = { -INFINITY, INFINITY, 0, 0 };
static const range R_POS = { 0, INFINITY, 1, 0 };
static const range R_NONNEG = { 0, INFINITY, 0, 0 };
/* depths of planes: at least a micrometre below the surface */
static const range R_DEPTH = { 0.001, INFINITY, 0, 0 };

static range r_closed(double lo, double hi)
{
    range r = { lo, hi, 0, 0 };
    return r;
}

static void range_text(char *buf, size_t cap, range r)
{
    if (isinf(r.lo) && isinf(r.hi))
        snprintf(buf, cap, "a finite number");
    else if (isinf(r.hi))
        snprintf(buf, cap, "a number %s %g", r.lo_open ? ">" : ">=", r.lo);
    else if (isinf(r.lo))
        snprintf(buf, cap, "a number %s %g", r.hi_open ? "<" : "<=", r.hi);
    else
        snprintf(buf, cap, "a number in %c%g, %g%c", r.lo_open ? '(' : '[', r.lo, r.hi,
                 r.hi_open ? ')' : ']');
}

static int in_range(double v, range r)
{
    if (!isfinite(v))
        return 0;
    if (r.lo_open ? !(v > r.lo) : !(v >= r.lo))
        return 0;
    if (r.hi_open ? !(v < r.hi) : !(v <= r.hi))
        return 0;
    return 1;
}

/* Refuse keys outside `allowed` (NULL terminated) and repeated keys. */
static int keys_only(jctx *c, const cJSON *obj, const char *where, const char *const *allowed)
{
    if (!cJSON_IsObject(obj))
        return pl__err(c->err, PL_EFORMAT, "%s: %s must be an object", c->file, where);
    for (const cJSON *it = obj->child; it; it = it->next) {
        int ok = 0;
        for (const char *const *a = allowed; *a; a++)
            if (strcmp(*a, it->string) == 0)
                ok = 1;
        if (!ok)
            return pl__err(c->err, PL_EFORMAT, "%s: %s: unknown key \"%s\"", c->file, where,
                           it->string);
        for (const cJSON *o = obj->child; o != it; o = o->next)
            if (strcmp(o->string, it->string) == 0)
                return pl__err(c->err, PL_EFORMAT, "%s: %s: key \"%s\" given twice", c->file,
                               where, it->string);
    }
    return PL_OK;
}

static const cJSON *item(const cJSON *obj, const char *key)
{
    return cJSON_GetObjectItemCaseSensitive(obj, key);
}

static int missing(jctx *c, const char *where, const char *key)
{
    return pl__err(c->err, PL_EFORMAT, "%s: %s: \"%s\" is missing", c->file, where, key);
}

/* A number in `r`; absent keeps *dst unless `required`. */
static int num(jctx *c, const cJSON *obj, const char *where, const char *key, double *dst,
               range r, int required)
{
    const cJSON *v = item(obj, key);
    if (!v)
        return required ? missing(c, where, key) : PL_OK;
    char want[96];
    range_text(want, sizeof want, r);
    if (!cJSON_IsNumber(v))
        return pl__err(c->err, PL_EFORMAT, "%s: %s: \"%s\" must be %s", c->file, where, key, want);
    if (!in_range(v->valuedouble, r))
        return pl__err(c->err, PL_EINVAL, "%s: %s: \"%s\" must be %s (not %g)", c->file, where,
                       key, want, v->valuedouble);
    *dst = v->valuedouble;
    return PL_OK;
}

static int whole(jctx *c, const cJSON *obj, const char *where, const char *key, double *dst,
                 double lo, double hi, int required)
{
    const cJSON *v = item(obj, key);
    if (!v)
        return required ? missing(c, where, key) : PL_OK;
    if (!cJSON_IsNumber(v) || v->valuedouble != floor(v->valuedouble))
        return pl__err(c->err, PL_EFORMAT, "%s: %s: \"%s\" must be a whole number", c->file,
                       where, key);
    if (!(v->valuedouble >= lo && v->valuedouble <= hi))
        return pl__err(c->err, PL_EINVAL, "%s: %s: \"%s\" must be a whole number in [%.0f, %.0f]"
                       " (not %.0f)", c->file, where, key, lo, hi, v->valuedouble);
    *dst = v->valuedouble;
    return PL_OK;
}

static int pair(jctx *c, const cJSON *obj, const char *where, const char *key, double out[2],
                range r, int required)
{
    const cJSON *v = item(obj, key);
    if (!v)
        return required ? missing(c, where, key) : PL_OK;
    if (!cJSON_IsArray(v) || cJSON_GetArraySize(v) != 2 || !cJSON_IsNumber(v->child)
        || !cJSON_IsNumber(v->child->next))
        return pl__err(c->err, PL_EFORMAT, "%s: %s: \"%s\" must be an array of 2 numbers",
                       c->file, where, key);
    double a = v->child->valuedouble, b = v->child->next->valuedouble;
    if (!in_range(a, r) || !in_range(b, r)) {
        char want[96];
        range_text(want, sizeof want, r);
        return pl__err(c->err, PL_EINVAL, "%s: %s: each of \"%s\" must be %s", c->file, where,
                       key, want);
    }
    out[0] = a;
    out[1] = b;
    return PL_OK;
}

/* A string key that must be one of `choices`; its index goes to *dst. */
static int choice(jctx *c, const cJSON *obj, const char *where, const char *key, int *dst,
                  const char *const *choices, int required)
{
    const cJSON *v = item(obj, key);
    if (!v)
        return required ? missing(c, where, key) : PL_OK;
    if (cJSON_IsString(v))
        for (int i = 0; choices[i]; i++)
            if (strcmp(v->valuestring, choices[i]) == 0) {
                *dst = i;
                return PL_OK;
            }
    pl_strbuf list = PL_STRBUF_INIT;
    for (int i = 0; choices[i]; i++)
        pl_strbuf__printf(&list, "%s\"%s\"", i ? ", " : "", choices[i]);
    int rc = pl__err(c->err, cJSON_IsString(v) ? PL_EINVAL : PL_EFORMAT,
                     "%s: %s: \"%s\" must be one of %s", c->file, where, key,
                     pl_strbuf__str(&list));
    pl_strbuf__release(&list);
    return rc;
}

/* An optional string key copied into a fixed buffer; absent keeps *dst. */
static int text(jctx *c, const cJSON *obj, const char *where, const char *key, char *dst,
                size_t cap)
{
    const cJSON *v = item(obj, key);
    if (!v)
        return PL_OK;
    if (!cJSON_IsString(v))
        return pl__err(c->err, PL_EFORMAT, "%s: %s: \"%s\" must be a string", c->file, where,
                       key);
    if (strlen(v->valuestring) >= cap)
        return pl__err(c->err, PL_EINVAL, "%s: %s: \"%s\" is longer than %zu characters",
                       c->file, where, key, cap - 1);
    memcpy(dst, v->valuestring, strlen(v->valuestring) + 1);
    return PL_OK;
}

static int parse_outline(jctx *c, const cJSON *obj, const char *where, pl_sim__outline *o)
{
    if (!obj)
        return missing(c, where, "outline");
    char w[96];
    snprintf(w, sizeof w, "%s.outline", where);
    if (!cJSON_IsObject(obj))
        return pl__err(c->err, PL_EFORMAT, "%s: %s must be an object", c->file, w);
    static const char *const shapes[] = { "circle", "ellipse", "rectangle", "polygon", NULL };
    int rc = choice(c, obj, w, "shape", &o->shape, shapes, 1);
    if (rc)
        return rc;
    double xy[2] = { 0, 0 }, ab[2] = { 0, 0 };
    o->angle_deg = 0;
    switch (o->shape) {
    case PL_SIM__CIRCLE: {
        static const char *const k[] = { "shape", "centre_mm", "diameter_mm", NULL };
        if ((rc = keys_only(c, obj, w, k)) || (rc = pair(c, obj, w, "centre_mm", xy, R_ANY, 1))
            || (rc = num(c, obj, w, "diameter_mm", &o->a, R_POS, 1)))
            return rc;
        o->b = o->a;
        break;
    }
    case PL_SIM__ELLIPSE:
    case PL_SIM__RECTANGLE: {
        const char *size_key = o->shape == PL_SIM__ELLIPSE ? "axes_mm" : "size_mm";
        const char *const k[] = { "shape", "centre_mm", size_key, "angle_deg", NULL };
        if ((rc = keys_only(c, obj, w, k)) || (rc = pair(c, obj, w, "centre_mm", xy, R_ANY, 1))
            || (rc = pair(c, obj, w, size_key, ab, R_POS, 1))
            || (rc = num(c, obj, w, "angle_deg", &o->angle_deg, r_closed(-360, 360), 0)))
            return rc;
        o->a = ab[0];
        o->b = ab[1];
        break;
    }
    default: {
        static const char *const k[] = { "shape", "points_mm", NULL };
        if ((rc = keys_only(c, obj, w, k)))
            return rc;
        const cJSON *pts = item(obj, "points_mm");
        if (!pts)
            return missing(c, w, "points_mm");
        int n = cJSON_IsArray(pts) ? cJSON_GetArraySize(pts) : -1;
        if (n < 3 || n > 10000)
            return pl__err(c->err, PL_EFORMAT,
                           "%s: %s: \"points_mm\" must be an array of 3 to 10000 [x, y] pairs",
                           c->file, w);
        o->pts = malloc(2 * (size_t)n * sizeof *o->pts);
        if (!o->pts)
            return pl__err(c->err, PL_ENOMEM, "out of memory");
        o->npts = (size_t)n;
        size_t i = 0;
        for (const cJSON *p = pts->child; p; p = p->next, i++) {
            if (!cJSON_IsArray(p) || cJSON_GetArraySize(p) != 2 || !cJSON_IsNumber(p->child)
                || !cJSON_IsNumber(p->child->next) || !isfinite(p->child->valuedouble)
                || !isfinite(p->child->next->valuedouble))
                return pl__err(c->err, PL_EFORMAT, "%s: %s: \"points_mm\"[%zu] must be [x, y]",
                               c->file, w, i);
            o->pts[2 * i] = p->child->valuedouble;
            o->pts[2 * i + 1] = p->child->next->valuedouble;
        }
        if (!polygon_is_simple(o->pts, o->npts))
            return pl__err(c->err, PL_EINVAL, "%s: %s: the polygon crosses itself", c->file, w);
        if (!(pl_sim__outline_area(o) > 0))
            return pl__err(c->err, PL_EINVAL, "%s: %s: the polygon has no area", c->file, w);
        break;
    }
    }
    o->cx = xy[0];
    o->cy = xy[1];
    if (outline_finish(o))
        return pl__err(c->err, PL_ENOMEM, "out of memory");
    return PL_OK;
}

/* Density, specific heat and conductivity keys of a material object. */
static int parse_material(jctx *c, const cJSON *obj, const char *where, pl_sim__material *m)
{
    int rc;
    if ((rc = num(c, obj, where, "density_kg_m3", &m->density, R_POS, 1))
        || (rc = num(c, obj, where, "specific_heat_j_kgk", &m->specific_heat, R_POS, 1)))
        return rc;
    static const char *const ks[3] = { "conductivity_along_w_mk", "conductivity_across_w_mk",
                                       "conductivity_through_w_mk" };
    const cJSON *iso = item(obj, "conductivity_w_mk");
    int nk = 0;
    for (int i = 0; i < 3; i++)
        nk += item(obj, ks[i]) != NULL;
    if (iso && nk)
        return pl__err(c->err, PL_EFORMAT,
                       "%s: %s: give \"conductivity_w_mk\" or the three directional "
                       "conductivities, not both", c->file, where);
    if (iso) {
        if ((rc = num(c, obj, where, "conductivity_w_mk", &m->k[0], R_POS, 1)))
            return rc;
        m->k[1] = m->k[2] = m->k[0];
        return PL_OK;
    }
    for (int i = 0; i < 3; i++)
        if ((rc = num(c, obj, where, ks[i], &m->k[i], R_POS, 1)))
            return rc;
    return PL_OK;
}

static int parse_laminate(jctx *c, const cJSON *obj, pl_sim_scene *s)
{
    static const char *const k[] = { "thickness_mm", "density_kg_m3", "specific_heat_j_kgk",
                                     "conductivity_w_mk", "conductivity_along_w_mk",
                                     "conductivity_across_w_mk", "conductivity_through_w_mk",
                                     "fibre_angle_deg", NULL };
    if (!obj)
        return missing(c, "scene", "laminate");
    int rc;
    if ((rc = keys_only(c, obj, "laminate", k))
        || (rc = num(c, obj, "laminate", "thickness_mm", &s->thickness_mm, r_closed(0.01, 1000), 1))
        || (rc = parse_material(c, obj, "laminate", &s->laminate))
        || (rc = num(c, obj, "laminate", "fibre_angle_deg", &s->fibre_angle_deg,
                     r_closed(-360, 360), 0)))
        return rc;
    return PL_OK;
}

static int parse_flash(jctx *c, const cJSON *obj, pl_sim_scene *s)
{
    static const char *const k[] = { "energy_j_m2", "nonuniformity", "spot", NULL };
    if (!obj)
        return missing(c, "scene", "flash");
    int rc;
    if ((rc = keys_only(c, obj, "flash", k))
        || (rc = num(c, obj, "flash", "energy_j_m2", &s->energy_j_m2, R_POS, 1))
        || (rc = num(c, obj, "flash", "nonuniformity", &s->nonuniformity, r_closed(0, 0.9), 0)))
        return rc;
    const cJSON *spot = item(obj, "spot");
    if (spot) {
        static const char *const ks[] = { "centre_mm", "sigma_mm", NULL };
        double xy[2];
        if ((rc = keys_only(c, spot, "flash.spot", ks))
            || (rc = pair(c, spot, "flash.spot", "centre_mm", xy, R_ANY, 1))
            || (rc = num(c, spot, "flash.spot", "sigma_mm", &s->spot_sigma_mm, R_POS, 1)))
            return rc;
        s->has_spot = 1;
        s->spot_x = xy[0];
        s->spot_y = xy[1];
    }
    return PL_OK;
}

static int parse_surface(jctx *c, const cJSON *obj, pl_sim_scene *s)
{
    static const char *const k[] = { "ambient_k", "front_h_w_m2k", "emissivity", "back_h_w_m2k",
                                     NULL };
    if (!obj)
        return PL_OK;
    int rc;
    if ((rc = keys_only(c, obj, "surface", k))
        || (rc = num(c, obj, "surface", "ambient_k", &s->ambient_k, r_closed(1, 2000), 0))
        || (rc = num(c, obj, "surface", "front_h_w_m2k", &s->front_h, r_closed(0, 1e6), 0))
        || (rc = num(c, obj, "surface", "emissivity", &s->emissivity, r_closed(0, 1), 0))
        || (rc = num(c, obj, "surface", "back_h_w_m2k", &s->back_h, r_closed(0, 1e6), 0)))
        return rc;
    return PL_OK;
}

static int parse_camera(jctx *c, const cJSON *obj, pl_sim_scene *s)
{
    static const char *const k[] = { "width", "height", "pitch_mm", "frame_rate_hz",
                                     "frame_count", "preflash_frames", "flash_time_s", "face",
                                     "netd_k", "fixed_pattern_k", "dead_pixel_fraction",
                                     "dead_pixel_k", "storage", "gain_k", "offset_k",
                                     "saturation_count", NULL };
    const char *w = "camera";
    if (!obj)
        return missing(c, "scene", "camera");
    int rc;
    double width = 0, height = 0, count = 0, pre = 5, sat = 65535;
    if ((rc = keys_only(c, obj, w, k)) || (rc = whole(c, obj, w, "width", &width, 1, 4096, 1))
        || (rc = whole(c, obj, w, "height", &height, 1, 4096, 1))
        || (rc = num(c, obj, w, "frame_rate_hz", &s->frame_rate_hz, r_closed(0.01, 1e5), 1))
        || (rc = whole(c, obj, w, "frame_count", &count, 2, 1e7, 1))
        || (rc = whole(c, obj, w, "preflash_frames", &pre, 1, count - 1, 0)))
        return rc;
    s->width = (uint32_t)width;
    s->height = (uint32_t)height;
    s->frame_count = (uint32_t)count;
    s->preflash_frames = (uint32_t)pre;
    const cJSON *p = item(obj, "pitch_mm");
    if (p && cJSON_IsNumber(p)) {
        if ((rc = num(c, obj, w, "pitch_mm", &s->pitch_u, r_closed(1e-3, 1000), 1)))
            return rc;
        s->pitch_v = s->pitch_u;
    } else if (p) {
        double pp[2];
        if ((rc = pair(c, obj, w, "pitch_mm", pp, r_closed(1e-3, 1000), 1)))
            return rc;
        s->pitch_u = pp[0];
        s->pitch_v = pp[1];
    }
    double dt = 1.0 / s->frame_rate_hz;
    s->flash_time_s = ((double)s->preflash_frames - 0.5) * dt;
    range fr = { ((double)s->preflash_frames - 1) * dt, (double)s->preflash_frames * dt, 1, 1 };
    if ((rc = num(c, obj, w, "flash_time_s", &s->flash_time_s, fr, 0)))
        return rc;
    static const char *const faces[] = { "front", "rear", NULL };
    static const char *const stores[] = { "float32", "uint16", "png16", NULL };
    int store = 0;
    s->dead_k = NAN;
    if ((rc = choice(c, obj, w, "face", &s->face, faces, 0))
        || (rc = num(c, obj, w, "netd_k", &s->netd_k, r_closed(0, 100), 0))
        || (rc = num(c, obj, w, "fixed_pattern_k", &s->fixed_pattern_k, r_closed(0, 100), 0))
        || (rc = num(c, obj, w, "dead_pixel_fraction", &s->dead_fraction, r_closed(0, 0.5), 0))
        || (rc = num(c, obj, w, "dead_pixel_k", &s->dead_k, R_NONNEG, 0))
        || (rc = choice(c, obj, w, "storage", &store, stores, 0))
        || (rc = num(c, obj, w, "gain_k", &s->gain_k, R_POS, 0))
        || (rc = num(c, obj, w, "offset_k", &s->offset_k, R_ANY, 0))
        || (rc = whole(c, obj, w, "saturation_count", &sat, 1, 65535, 0)))
        return rc;
    s->storage = store == 0 ? PL_SEQ_NPY_FLOAT32 : store == 1 ? PL_SEQ_NPY_UINT16 : PL_SEQ_PNG16;
    s->saturation_count = (uint16_t)sat;
    if (isnan(s->dead_k))
        s->dead_k = s->offset_k;
    return PL_OK;
}

static int parse_placement(jctx *c, const cJSON *obj, pl_sim_scene *s)
{
    static const char *const k[] = { "shift_mm", "rotation_deg", NULL };
    if (!obj)
        return PL_OK;
    double sh[2] = { 0, 0 };
    int rc;
    if ((rc = keys_only(c, obj, "placement_error", k))
        || (rc = pair(c, obj, "placement_error", "shift_mm", sh, R_ANY, 0))
        || (rc = num(c, obj, "placement_error", "rotation_deg", &s->rotation_deg,
                     r_closed(-180, 180), 0)))
        return rc;
    s->shift_u = sh[0];
    s->shift_v = sh[1];
    return PL_OK;
}

static int parse_grid(jctx *c, const cJSON *obj, pl_sim_scene *s)
{
    static const char *const k[] = { "pitch_mm", "layers", "margin_mm", "steps_per_decade",
                                     NULL };
    if (!obj)
        return PL_OK;
    double layers = 0;
    int rc;
    if ((rc = keys_only(c, obj, "grid", k))
        || (rc = num(c, obj, "grid", "pitch_mm", &s->grid_pitch_mm, r_closed(1e-3, 1000), 0))
        || (rc = whole(c, obj, "grid", "layers", &layers, 2, 2000, 0))
        || (rc = num(c, obj, "grid", "margin_mm", &s->margin_mm, r_closed(0, 1000), 0))
        || (rc = num(c, obj, "grid", "steps_per_decade", &s->steps_per_decade,
                     r_closed(4, 1000), 0)))
        return rc;
    s->layers = (unsigned)layers;
    return PL_OK;
}

static int parse_defect(jctx *c, const cJSON *obj, const char *where, pl_sim__defect *d)
{
    static const char *const kinds[] = { "delamination", "disbond", "impact", "porosity", NULL };
    if (!cJSON_IsObject(obj))
        return pl__err(c->err, PL_EFORMAT, "%s: %s must be an object", c->file, where);
    int rc = choice(c, obj, where, "kind", &d->kind, kinds, 1);
    if (rc || (rc = text(c, obj, where, "label", d->label, sizeof d->label)))
        return rc;
    d->resistance_m2k_w = AIR_GAP_RESISTANCE;
    switch (d->kind) {
    case PL_SIM__DELAMINATION:
    case PL_SIM__DISBOND: {
        static const char *const k[] = { "kind", "label", "depth_mm", "resistance_m2k_w",
                                         "outline", NULL };
        if ((rc = keys_only(c, obj, where, k))
            || (rc = num(c, obj, where, "depth_mm", &d->depth_mm, R_DEPTH, 1))
            || (rc = num(c, obj, where, "resistance_m2k_w", &d->resistance_m2k_w,
                         r_closed(0, 1e6), 0))
            || (rc = parse_outline(c, item(obj, "outline"), where, &d->outline)))
            return rc;
        break;
    }
    case PL_SIM__IMPACT: {
        static const char *const k[] = { "kind", "label", "centre_mm", "top_depth_mm",
                                         "bottom_depth_mm", "top_diameter_mm",
                                         "bottom_diameter_mm", "layers", "resistance_m2k_w",
                                         NULL };
        double xy[2], layers = 5;
        if ((rc = keys_only(c, obj, where, k)) || (rc = pair(c, obj, where, "centre_mm", xy, R_ANY, 1))
            || (rc = num(c, obj, where, "top_depth_mm", &d->depth_mm, R_DEPTH, 1))
            || (rc = num(c, obj, where, "bottom_depth_mm", &d->bottom_depth_mm, R_POS, 1))
            || (rc = num(c, obj, where, "top_diameter_mm", &d->top_diameter_mm, R_POS, 1))
            || (rc = num(c, obj, where, "bottom_diameter_mm", &d->bottom_diameter_mm, R_POS, 1))
            || (rc = whole(c, obj, where, "layers", &layers, 2, 100, 0))
            || (rc = num(c, obj, where, "resistance_m2k_w", &d->resistance_m2k_w,
                         r_closed(0, 1e6), 0)))
            return rc;
        d->layers = (unsigned)layers;
        d->outline.shape = PL_SIM__CIRCLE;
        d->outline.cx = xy[0];
        d->outline.cy = xy[1];
        d->outline.a = d->outline.b = fmax(d->top_diameter_mm, d->bottom_diameter_mm);
        if (outline_finish(&d->outline))
            return pl__err(c->err, PL_ENOMEM, "out of memory");
        break;
    }
    default: {
        static const char *const k[] = { "kind", "label", "outline", "top_depth_mm",
                                         "bottom_depth_mm", "conductivity_factor", NULL };
        if ((rc = keys_only(c, obj, where, k))
            || (rc = num(c, obj, where, "top_depth_mm", &d->depth_mm, R_NONNEG, 1))
            || (rc = num(c, obj, where, "bottom_depth_mm", &d->bottom_depth_mm, R_POS, 1))
            || (rc = num(c, obj, where, "conductivity_factor", &d->conductivity_factor,
                         (range){ 0, 1, 1, 0 }, 1))
            || (rc = parse_outline(c, item(obj, "outline"), where, &d->outline)))
            return rc;
        break;
    }
    }
    /* impact and porosity span a depth range */
    if ((d->kind == PL_SIM__IMPACT || d->kind == PL_SIM__POROSITY)
        && !(d->bottom_depth_mm >= d->depth_mm + 0.001))
        return pl__err(c->err, PL_EINVAL,
                       "%s: %s: \"bottom_depth_mm\" must exceed \"top_depth_mm\" by 0.001 "
                       "or more", c->file, where);
    return PL_OK;
}

static int parse_sub(jctx *c, const cJSON *obj, const char *where, pl_sim__sub *u,
                     const pl_sim_scene *s)
{
    static const char *const kinds[] = { "flange", "ply_drop", NULL };
    if (!cJSON_IsObject(obj))
        return pl__err(c->err, PL_EFORMAT, "%s: %s must be an object", c->file, where);
    int rc = choice(c, obj, where, "kind", &u->kind, kinds, 1);
    if (rc || (rc = text(c, obj, where, "label", u->label, sizeof u->label)))
        return rc;
    u->material = s->laminate;
    if (u->kind == PL_SIM__FLANGE) {
        static const char *const k[] = { "kind", "label", "outline", "thickness_mm",
                                         "bond_resistance_m2k_w", "material", NULL };
        if ((rc = keys_only(c, obj, where, k))
            || (rc = num(c, obj, where, "thickness_mm", &u->thickness_mm, r_closed(0.01, 1000), 1))
            || (rc = num(c, obj, where, "bond_resistance_m2k_w", &u->bond_resistance_m2k_w,
                         r_closed(0, 1e6), 0))
            || (rc = parse_outline(c, item(obj, "outline"), where, &u->outline)))
            return rc;
        const cJSON *mat = item(obj, "material");
        if (mat) {
            static const char *const km[] = { "density_kg_m3", "specific_heat_j_kgk",
                                              "conductivity_w_mk", "conductivity_along_w_mk",
                                              "conductivity_across_w_mk",
                                              "conductivity_through_w_mk", NULL };
            char wm[96];
            snprintf(wm, sizeof wm, "%s.material", where);
            if ((rc = keys_only(c, mat, wm, km)) || (rc = parse_material(c, mat, wm, &u->material)))
                return rc;
        }
    } else {
        static const char *const k[] = { "kind", "label", "outline", "thickness_change_mm", NULL };
        range r = { -s->thickness_mm, 1000, 1, 0 };
        if ((rc = keys_only(c, obj, where, k))
            || (rc = num(c, obj, where, "thickness_change_mm", &u->thickness_mm, r, 1))
            || (rc = parse_outline(c, item(obj, "outline"), where, &u->outline)))
            return rc;
        if (fabs(u->thickness_mm) < 0.01)
            return pl__err(c->err, PL_EINVAL,
                           "%s: %s: \"thickness_change_mm\" must be at least 0.01 mm either way",
                           c->file, where);
    }
    return PL_OK;
}

/* The deepest face of the part, mm. */
static double total_depth(const pl_sim_scene *s)
{
    double h = s->thickness_mm;
    for (size_t i = 0; i < s->nsubs; i++)
        h = fmax(h, s->thickness_mm + s->subs[i].thickness_mm);
    return h;
}

/* Depths that must lie inside the part. */
static int check_depths(jctx *c, const pl_sim_scene *s)
{
    double th = s->thickness_mm, total = total_depth(s);
    for (size_t i = 0; i < s->ndefects; i++) {
        const pl_sim__defect *d = &s->defects[i];
        double lim = d->kind == PL_SIM__DISBOND ? total : th;
        double deepest = d->kind == PL_SIM__DELAMINATION || d->kind == PL_SIM__DISBOND
                             ? d->depth_mm : d->bottom_depth_mm;
        int bad = d->kind == PL_SIM__DISBOND ? !(deepest < total) : d->kind == PL_SIM__POROSITY
                                                                       ? !(deepest <= th)
                                                                       : !(deepest < th);
        if (bad)
            return pl__err(c->err, PL_EINVAL, "%s: defects[%zu]: depth %g mm is not inside the "
                           "%s (%g mm thick)", c->file, i, deepest,
                           d->kind == PL_SIM__DISBOND ? "part" : "laminate", lim);
    }
    return PL_OK;
}

static void scene_defaults(pl_sim_scene *s)
{
    s->seed = 1;
    s->ambient_k = 293.15;
    s->pitch_u = s->pitch_v = 1.0;
    s->gain_k = 0.001;
    s->offset_k = 273.15;
    s->saturation_count = 65535;
    s->storage = PL_SEQ_NPY_FLOAT32;
    s->margin_mm = -1;
    s->steps_per_decade = 20;
}

static int parse_root(jctx *c, const cJSON *root, pl_sim_scene *s)
{
    static const char *const k[] = { "format", "name", "seed", "laminate", "flash", "surface",
                                     "camera", "placement_error", "grid", "defects",
                                     "substructure", "acquisition", NULL };
    int rc = keys_only(c, root, "scene", k);
    if (rc)
        return rc;
    const cJSON *f = item(root, "format");
    if (f && (!cJSON_IsString(f) || strcmp(f->valuestring, SCENE_FORMAT) != 0))
        return pl__err(c->err, PL_EFORMAT, "%s: scene: \"format\" must be \"%s\"", c->file,
                       SCENE_FORMAT);
    if ((rc = text(c, root, "scene", "name", s->name, sizeof s->name)))
        return rc;
    double seed = 1;
    if ((rc = whole(c, root, "scene", "seed", &seed, 0, 9007199254740992.0, 0)))
        return rc;
    s->seed = (uint64_t)seed;
    if ((rc = parse_laminate(c, item(root, "laminate"), s))
        || (rc = parse_flash(c, item(root, "flash"), s))
        || (rc = parse_surface(c, item(root, "surface"), s))
        || (rc = parse_camera(c, item(root, "camera"), s))
        || (rc = parse_placement(c, item(root, "placement_error"), s))
        || (rc = parse_grid(c, item(root, "grid"), s)))
        return rc;
    const cJSON *subs = item(root, "substructure");
    if (subs) {
        if (!cJSON_IsArray(subs))
            return pl__err(c->err, PL_EFORMAT, "%s: scene: \"substructure\" must be an array",
                           c->file);
        size_t n = (size_t)cJSON_GetArraySize(subs);
        s->subs = calloc(n ? n : 1, sizeof *s->subs);
        if (!s->subs)
            return pl__err(c->err, PL_ENOMEM, "out of memory");
        for (const cJSON *it = subs->child; it; it = it->next) {
            char w[48];
            snprintf(w, sizeof w, "substructure[%zu]", s->nsubs);
            pl_sim__sub *u = &s->subs[s->nsubs++];
            snprintf(u->label, sizeof u->label, "substructure-%zu", s->nsubs);
            if ((rc = parse_sub(c, it, w, u, s)))
                return rc;
        }
    }
    const cJSON *defs = item(root, "defects");
    if (defs) {
        if (!cJSON_IsArray(defs))
            return pl__err(c->err, PL_EFORMAT, "%s: scene: \"defects\" must be an array", c->file);
        size_t n = (size_t)cJSON_GetArraySize(defs);
        s->defects = calloc(n ? n : 1, sizeof *s->defects);
        if (!s->defects)
            return pl__err(c->err, PL_ENOMEM, "out of memory");
        for (const cJSON *it = defs->child; it; it = it->next) {
            char w[48];
            snprintf(w, sizeof w, "defects[%zu]", s->ndefects);
            pl_sim__defect *d = &s->defects[s->ndefects++];
            snprintf(d->label, sizeof d->label, "defect-%zu", s->ndefects);
            if ((rc = parse_defect(c, it, w, d)))
                return rc;
        }
    }
    if ((rc = check_depths(c, s)))
        return rc;
    const cJSON *acq = item(root, "acquisition");
    if (acq) {
        if (!cJSON_IsObject(acq))
            return pl__err(c->err, PL_EFORMAT, "%s: scene: \"acquisition\" must be an object",
                           c->file);
        char *txt = cJSON_PrintUnformatted(acq);
        s->acquisition_json = pl__strdup(txt);
        cJSON_free(txt);
        if (!s->acquisition_json)
            return pl__err(c->err, PL_ENOMEM, "out of memory");
    }
    return PL_OK;
}

PL_EXPORT void pl_sim_scene_free(pl_sim_scene *scene)
{
    if (!scene)
        return;
    for (size_t i = 0; i < scene->ndefects; i++)
        outline_clear(&scene->defects[i].outline);
    for (size_t i = 0; i < scene->nsubs; i++)
        outline_clear(&scene->subs[i].outline);
    free(scene->defects);
    free(scene->subs);
    free(scene->acquisition_json);
    free(scene);
}

PL_EXPORT int pl_sim_scene_parse(pl_sim_scene **out, const char *json, const char *name,
                                 pl_err *err)
{
    *out = NULL;
    jctx c = { name ? name : "scene", err };
    const char *end = NULL;
    cJSON *root = cJSON_ParseWithOpts(json, &end, 1);
    if (!root) {
        size_t line = 1;
        for (const char *p = json; end && p < end && *p; p++)
            line += *p == '\n';
        return pl__err(err, PL_EFORMAT, "%s: not valid JSON (near line %zu)", c.file, line);
    }
    pl_sim_scene *s = calloc(1, sizeof *s);
    if (!s) {
        cJSON_Delete(root);
        return pl__err(err, PL_ENOMEM, "out of memory");
    }
    scene_defaults(s);
    int rc = parse_root(&c, root, s);
    cJSON_Delete(root);
    if (rc) {
        pl_sim_scene_free(s);
        return rc;
    }
    if (!s->name[0])
        snprintf(s->name, sizeof s->name, "%s", pl__basename(c.file));
    *out = s;
    return PL_OK;
}

PL_EXPORT int pl_sim_scene_load(pl_sim_scene **out, const char *path, pl_err *err)
{
    *out = NULL;
    char *buf;
    int rrc = pl__read_text(&buf, NULL, path, (size_t)64 << 20, err);
    if (rrc)
        return rrc;
    int rc = pl_sim_scene_parse(out, buf, path, err);
    free(buf);
    return rc;
}

static double diffusivity_mm2_s(const pl_sim__material *m, int axis)
{
    return m->k[axis] / (m->density * m->specific_heat) * 1e6;
}

PL_EXPORT void pl_sim_scene_info(const pl_sim_scene *scene, pl_sim_info *info)
{
    memset(info, 0, sizeof *info);
    info->width = scene->width;
    info->height = scene->height;
    info->frame_count = scene->frame_count;
    info->preflash_frames = scene->preflash_frames;
    info->frame_rate_hz = scene->frame_rate_hz;
    info->flash_time_s = scene->flash_time_s;
    info->pitch_u = scene->pitch_u;
    info->pitch_v = scene->pitch_v;
    info->thickness_mm = scene->thickness_mm;
    for (int i = 0; i < 3; i++)
        info->diffusivity_mm2_s[i] = diffusivity_mm2_s(&scene->laminate, i);
    info->ambient_k = scene->ambient_k;
    info->defect_count = scene->ndefects;
}

PL_EXPORT void pl_sim_scene_set_threads(pl_sim_scene *scene, unsigned threads)
{
    scene->threads = threads;
}

/* ---- geometry ------------------------------------------------------------ */

static void fov_centre(const pl_sim_scene *s, double *cx, double *cy)
{
    *cx = ((double)s->width - 1) * s->pitch_u / 2.0;
    *cy = ((double)s->height - 1) * s->pitch_v / 2.0;
}

void pl_sim__pixel_to_site(const pl_sim_scene *s, double col, double row, double *x, double *y)
{
    double cx, cy;
    fov_centre(s, &cx, &cy);
    double an = s->rotation_deg * M_PI / 180.0, c = cos(an), sn = sin(an);
    double px = col * s->pitch_u - cx, py = row * s->pitch_v - cy;
    *x = cx + c * px - sn * py + s->shift_u;
    *y = cy + sn * px + c * py + s->shift_v;
}

void pl_sim__site_to_pixel(const pl_sim_scene *s, double x, double y, double *col, double *row)
{
    double cx, cy;
    fov_centre(s, &cx, &cy);
    double an = s->rotation_deg * M_PI / 180.0, c = cos(an), sn = sin(an);
    double dx = x - cx - s->shift_u, dy = y - cy - s->shift_v;
    *col = (cx + c * dx + sn * dy) / s->pitch_u;
    *row = (cy - sn * dx + c * dy) / s->pitch_v;
}

/* ---- the model ----------------------------------------------------------- */

/* Time of frame `f` after the flash, s. */
static double frame_time(const pl_sim_scene *s, uint32_t f)
{
    return (double)f / s->frame_rate_hz - s->flash_time_s;
}

/* Times of the first and last frames after the flash, s. */
static void frame_window(const pl_sim_scene *s, double *first, double *last)
{
    *first = frame_time(s, s->preflash_frames);
    *last = frame_time(s, s->frame_count - 1);
}

/* Layer `l` of an impact's stack of delaminations: its depth and diameter,
 * mm, from the top layer to the bottom one in equal steps. */
static void impact_layer(const pl_sim__defect *d, unsigned l, double *depth_mm,
                         double *diameter_mm)
{
    double w = (double)l / (d->layers - 1);
    *depth_mm = d->depth_mm + (d->bottom_depth_mm - d->depth_mm) * w;
    *diameter_mm = d->top_diameter_mm + (d->bottom_diameter_mm - d->top_diameter_mm) * w;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* Every depth (mm) that must be a face of the grid: the surfaces, each
 * defect's plane(s), the ends of porosity, the back of each substructure
 * item. Sorted, merged within PLANE_TOLERANCE_MM. Returns the count. */
static size_t interface_depths(const pl_sim_scene *s, double *z)
{
    size_t n = 0;
    z[n++] = 0.0;
    z[n++] = s->thickness_mm;
    for (size_t i = 0; i < s->ndefects; i++) {
        const pl_sim__defect *d = &s->defects[i];
        if (d->kind == PL_SIM__IMPACT) {
            for (unsigned l = 0; l < d->layers; l++) {
                double dia;
                impact_layer(d, l, &z[n++], &dia);
            }
        } else {
            z[n++] = d->depth_mm;
            if (d->kind == PL_SIM__POROSITY)
                z[n++] = d->bottom_depth_mm;
        }
    }
    for (size_t i = 0; i < s->nsubs; i++)
        z[n++] = s->thickness_mm + s->subs[i].thickness_mm;
    qsort(z, n, sizeof *z, cmp_double);
    size_t m = 1;
    for (size_t i = 1; i < n; i++)
        if (z[i] - z[m - 1] > PLANE_TOLERANCE_MM)
            z[m++] = z[i];
    return m;
}

static size_t max_interfaces(const pl_sim_scene *s)
{
    size_t n = 2 + s->nsubs;
    for (size_t i = 0; i < s->ndefects; i++)
        n += s->defects[i].kind == PL_SIM__IMPACT ? s->defects[i].layers : 2;
    return n;
}

/* The wanted cell size at depth z (mm): smallest at the heated face and
 * growing by a fixed fraction per cell away from it, with milder
 * refinements at the back face (a cell of 3% of its depth, for the rear
 * face's temperature) and at every interface in between (10%, for the
 * heat they turn back). The counts are rescaled afterwards, so only the
 * shape matters. */
static double cell_size(double z, const double *planes, size_t np, double hf)
{
    const double growth = 0.2;
    double h = hf + growth * z;
    for (size_t i = 1; i < np; i++) {
        double frac = i + 1 == np ? 0.03 : 0.1;
        double hp = fmax(hf, frac * planes[i]) + growth * fabs(z - planes[i]);
        if (hp < h)
            h = hp;
    }
    return h;
}

/* Faces of the layers through the thickness (mm, nz + 1 values into
 * *faces, malloc'd) and the depth of the first interface below the heated
 * face (mm). Each interval between interfaces gets a share of the layers
 * in proportion to the integral of 1 / cell_size over it (at least one),
 * and its faces sit at equal steps of that integral. */
static int build_layers(const pl_sim_scene *s, double hf, double **faces, size_t *nz,
                        double *first_interface)
{
    double *planes = malloc(max_interfaces(s) * sizeof *planes);
    if (!planes)
        return PL_ENOMEM;
    size_t np = interface_depths(s, planes);
    size_t nseg = np - 1;
    enum { Q = 512 };
    double *integral = malloc(nseg * (Q + 1) * sizeof *integral);
    size_t *count = malloc(nseg * sizeof *count);
    if (!integral || !count) {
        free(planes);
        free(integral);
        free(count);
        return PL_ENOMEM;
    }
    double total = 0;
    for (size_t g = 0; g < nseg; g++) {
        double a = planes[g], b = planes[g + 1], *I = integral + g * (Q + 1);
        I[0] = 0;
        for (int q = 0; q < Q; q++) {
            double zm = a + (b - a) * (q + 0.5) / Q;
            I[q + 1] = I[q] + (b - a) / Q / cell_size(zm, planes, np, hf);
        }
        total += I[Q];
    }
    size_t n = 0;
    if (s->layers == 0) {
        for (size_t g = 0; g < nseg; g++) {
            count[g] = (size_t)ceil(integral[g * (Q + 1) + Q] - 1e-9);
            if (count[g] < 1)
                count[g] = 1;
            n += count[g];
        }
    } else {
        /* largest remainders, at least one layer per interval */
        double scale = (double)s->layers / total;
        for (size_t g = 0; g < nseg; g++) {
            count[g] = (size_t)floor(scale * integral[g * (Q + 1) + Q]);
            if (count[g] < 1)
                count[g] = 1;
            n += count[g];
        }
        while (n < s->layers) {
            size_t best = 0;
            double bestr = -INFINITY;
            for (size_t g = 0; g < nseg; g++) {
                double r = scale * integral[g * (Q + 1) + Q] - (double)count[g];
                if (r > bestr) {
                    bestr = r;
                    best = g;
                }
            }
            count[best]++;
            n++;
        }
    }
    double *zf = malloc((n + 1) * sizeof *zf);
    if (!zf) {
        free(planes);
        free(integral);
        free(count);
        return PL_ENOMEM;
    }
    size_t k = 0;
    for (size_t g = 0; g < nseg; g++) {
        double a = planes[g], b = planes[g + 1];
        const double *I = integral + g * (Q + 1);
        zf[k++] = a;
        int q = 0;
        for (size_t c = 1; c < count[g]; c++) {
            double target = I[Q] * (double)c / (double)count[g];
            while (q < Q - 1 && I[q + 1] < target)
                q++;
            double w = (target - I[q]) / (I[q + 1] - I[q]);
            zf[k++] = a + (b - a) * (q + w) / Q;
        }
    }
    zf[k] = planes[np - 1];
    *first_interface = planes[1];
    free(planes);
    free(integral);
    free(count);
    *faces = zf;
    *nz = n;
    return PL_OK;
}

/* The smooth flash non-uniformity: a sum of low-order products of cosines
 * over the nominal field of view with coefficients and phases drawn from
 * the seed, scaled so that its largest magnitude over the field is one. */
typedef struct flash_field {
    double c[3][3], pu[3][3], pv[3][3];
    double cx, cy, wu, wv, norm;
} flash_field;

static double field_raw(const flash_field *f, double u, double v)
{
    double sum = 0;
    for (int p = 0; p < 3; p++)
        for (int q = 0; q < 3; q++)
            if (p + q > 0)
                sum += f->c[p][q] * cos(M_PI * p * u + f->pu[p][q]) * cos(M_PI * q * v + f->pv[p][q]);
    return sum;
}

static void field_init(flash_field *f, const pl_sim_scene *s)
{
    rng r;
    rng_seed(&r, s->seed, STREAM_FLASH);
    for (int p = 0; p < 3; p++)
        for (int q = 0; q < 3; q++) {
            f->c[p][q] = p + q > 0 ? rng_gauss(&r) / (p + q) : 0;
            f->pu[p][q] = 2 * M_PI * rng_uniform(&r);
            f->pv[p][q] = 2 * M_PI * rng_uniform(&r);
        }
    fov_centre(s, &f->cx, &f->cy);
    f->wu = s->width * s->pitch_u;
    f->wv = s->height * s->pitch_v;
    double mx = 0;
    for (int i = 0; i <= 40; i++)
        for (int j = 0; j <= 40; j++)
            mx = fmax(mx, fabs(field_raw(f, i / 40.0 - 0.5, j / 40.0 - 0.5)));
    f->norm = mx > 0 ? 1.0 / mx : 0;
}

/* Absorbed energy per area (J/m^2) at site point (x, y) mm. */
static double flash_energy(const pl_sim_scene *s, const flash_field *f, double x, double y)
{
    double q = s->energy_j_m2;
    if (s->has_spot) {
        double dx = x - s->spot_x, dy = y - s->spot_y;
        q *= exp(-(dx * dx + dy * dy) / (2 * s->spot_sigma_mm * s->spot_sigma_mm));
    }
    if (s->nonuniformity > 0)
        q *= 1.0 + s->nonuniformity * f->norm
                       * field_raw(f, (x - f->cx) / f->wu, (y - f->cy) / f->wv);
    return q;
}

/* Site point (mm) of a fibre-frame point. */
static void fibre_to_site(const pl_sim__model *m, double fx, double fy, double *x, double *y)
{
    *x = m->cphi * fx - m->sphi * fy;
    *y = m->sphi * fx + m->cphi * fy;
}

static void site_to_fibre(const pl_sim__model *m, double x, double y, double *fx, double *fy)
{
    *fx = m->cphi * x + m->sphi * y;
    *fy = -m->sphi * x + m->cphi * y;
}

/* The fraction of each column's area inside an outline, by sampling
 * COVER_SAMPLES^2 points per cell: the part of a cell a defect covers then
 * weighs its effect, so edges fall between cells, not on them. */
static void coverage(const pl_sim__model *m, const pl_sim__outline *o, float *f)
{
    memset(f, 0, m->ncol * sizeof *f);
    double hmm = m->h * 1e3;
    double fx0 = INFINITY, fy0 = INFINITY, fx1 = -INFINITY, fy1 = -INFINITY;
    for (int i = 0; i < 4; i++) {
        double fx, fy;
        site_to_fibre(m, o->bbox[i & 1 ? 2 : 0], o->bbox[i & 2 ? 3 : 1], &fx, &fy);
        fx0 = fmin(fx0, fx);
        fx1 = fmax(fx1, fx);
        fy0 = fmin(fy0, fy);
        fy1 = fmax(fy1, fy);
    }
    double lo_x = floor((fx0 - m->x0) / hmm) - 1, hi_x = ceil((fx1 - m->x0) / hmm) + 1;
    double lo_y = floor((fy0 - m->y0) / hmm) - 1, hi_y = ceil((fy1 - m->y0) / hmm) + 1;
    if (hi_x < 0 || hi_y < 0 || lo_x > (double)m->nx - 1 || lo_y > (double)m->ny - 1)
        return;
    size_t ix0 = lo_x < 0 ? 0 : (size_t)lo_x, iy0 = lo_y < 0 ? 0 : (size_t)lo_y;
    size_t ix1 = hi_x > (double)m->nx - 1 ? m->nx - 1 : (size_t)hi_x;
    size_t iy1 = hi_y > (double)m->ny - 1 ? m->ny - 1 : (size_t)hi_y;
    for (size_t iy = iy0; iy <= iy1; iy++)
        for (size_t ix = ix0; ix <= ix1; ix++) {
            int in = 0;
            for (int a = 0; a < COVER_SAMPLES; a++)
                for (int b = 0; b < COVER_SAMPLES; b++) {
                    double fx = m->x0 + hmm * ((double)ix + (a + 0.5) / COVER_SAMPLES - 0.5);
                    double fy = m->y0 + hmm * ((double)iy + (b + 0.5) / COVER_SAMPLES - 0.5);
                    double x, y;
                    fibre_to_site(m, fx, fy, &x, &y);
                    in += pl_sim__outline_contains(o, x, y);
                }
            f[iy * m->nx + ix] = (float)in / (COVER_SAMPLES * COVER_SAMPLES);
        }
}

void pl_sim__model_free(pl_sim__model *m)
{
    if (!m)
        return;
    free(m->zf);
    free(m->cap);
    free(m->gx);
    free(m->gy);
    free(m->gz);
    free(m->gl);
    free(m->T);
    free(m->D);
    free(m->rear);
    free(m);
}

double pl_sim__model_energy(const pl_sim__model *m)
{
    double e = 0;
    for (size_t i = 0; i < m->ncell; i++)
        e += m->cap[i] * m->T[i];
    return e;
}

/* Per-cell material while the model is built. */
typedef struct cells {
    unsigned char *mat; /* 0 laminate, 1 + i substructure item i */
    float *frac;        /* solid fraction */
    float *kzf;         /* through-thickness conductivity factor (porosity) */
    float *cover;       /* scratch: coverage per column */
} cells;

static const pl_sim__material *cell_material(const pl_sim_scene *s, unsigned char mat)
{
    return mat == 0 ? &s->laminate : &s->subs[mat - 1].material;
}

/* Index of the face at depth z_mm (it exists by construction). */
static size_t face_at(const pl_sim__model *m, double z_mm)
{
    size_t best = 0;
    double bd = INFINITY;
    for (size_t k = 0; k <= m->nz; k++) {
        double d = fabs(m->zf[k] * 1e3 - z_mm);
        if (d < bd) {
            bd = d;
            best = k;
        }
    }
    return best;
}

/* Put an interface resistance R (m^2 K/W) over the covered part of the
 * face at depth z_mm: each column's conductance across that face becomes
 * the area-weighted mix of the sound and the resisting paths. */
static void add_resistance(pl_sim__model *m, const cells *c, double z_mm, double R, const float *cov)
{
    size_t kf = face_at(m, z_mm);
    if (kf == 0 || kf >= m->nz || !(R > 0))
        return;
    double *gz = m->gz + (kf - 1) * m->ncol;
    const float *fa = c->frac + (kf - 1) * m->ncol, *fb = c->frac + kf * m->ncol;
    for (size_t i = 0; i < m->ncol; i++) {
        double f = cov[i];
        if (f <= 0 || gz[i] <= 0)
            continue;
        double area = fmin(fa[i], fb[i]) * m->h * m->h;
        double gr = 1.0 / (1.0 / gz[i] + R / area);
        gz[i] = (1 - f) * gz[i] + f * gr;
    }
}

static double harmonic(double a, double b)
{
    return a > 0 && b > 0 ? 2 * a * b / (a + b) : 0;
}

/* The materials of each cell: laminate down to the thickness, then the
 * substructure items in order; porosity scales the through-thickness
 * conductivity. */
static void assign_cells(pl_sim__model *m, const pl_sim_scene *s, cells *c)
{
    size_t nc = m->ncol;
    double th = s->thickness_mm;
    for (size_t k = 0; k < m->nz; k++) {
        double zc = (m->zf[k] + m->zf[k + 1]) / 2 * 1e3;
        for (size_t i = 0; i < nc; i++) {
            c->mat[k * nc + i] = 0;
            c->frac[k * nc + i] = zc < th ? 1.0f : 0.0f;
            c->kzf[k * nc + i] = 1.0f;
        }
    }
    for (size_t u = 0; u < s->nsubs; u++) {
        const pl_sim__sub *sub = &s->subs[u];
        coverage(m, &sub->outline, c->cover);
        double z0 = sub->thickness_mm < 0 ? th + sub->thickness_mm : th;
        double z1 = sub->thickness_mm < 0 ? th : th + sub->thickness_mm;
        for (size_t k = 0; k < m->nz; k++) {
            double zc = (m->zf[k] + m->zf[k + 1]) / 2 * 1e3;
            if (zc <= z0 || zc >= z1)
                continue;
            for (size_t i = 0; i < nc; i++) {
                float f = c->cover[i];
                size_t j = k * nc + i;
                if (f <= 0)
                    continue;
                if (sub->kind == PL_SIM__PLY_DROP && sub->thickness_mm < 0) {
                    c->frac[j] *= 1.0f - f;
                } else {
                    c->mat[j] = sub->kind == PL_SIM__FLANGE ? (unsigned char)(u + 1) : 0;
                    c->frac[j] = fmaxf(c->frac[j], f);
                }
            }
        }
    }
    for (size_t d = 0; d < s->ndefects; d++) {
        const pl_sim__defect *def = &s->defects[d];
        if (def->kind != PL_SIM__POROSITY)
            continue;
        coverage(m, &def->outline, c->cover);
        for (size_t k = 0; k < m->nz; k++) {
            double zc = (m->zf[k] + m->zf[k + 1]) / 2 * 1e3;
            if (zc <= def->depth_mm || zc >= def->bottom_depth_mm)
                continue;
            for (size_t i = 0; i < nc; i++) {
                size_t j = k * nc + i;
                float f = c->cover[i];
                if (f > 0 && c->mat[j] == 0)
                    c->kzf[j] *= (float)(1.0 - f + f * def->conductivity_factor);
            }
        }
    }
}

/* Heat capacities and conductances of the finite-volume model: cell
 * centres exchange heat through each face with the series resistance of
 * the two half cells; a partly filled cell keeps the filled fraction of its
 * capacity and of its face areas. */
static void conductances(pl_sim__model *m, const pl_sim_scene *s, const cells *c)
{
    size_t nx = m->nx, ny = m->ny, nz = m->nz, nc = m->ncol;
    double h = m->h, area = h * h;
    double hfront = s->front_h + 4 * s->emissivity * STEFAN_BOLTZMANN * pow(s->ambient_k, 3);
    for (size_t k = 0; k < nz; k++) {
        double dz = m->zf[k + 1] - m->zf[k];
        for (size_t iy = 0; iy < ny; iy++)
            for (size_t ix = 0; ix < nx; ix++) {
                size_t i = iy * nx + ix, j = k * nc + i;
                double f = c->frac[j];
                const pl_sim__material *mt = cell_material(s, c->mat[j]);
                m->cap[j] = f > 0 ? f * mt->density * mt->specific_heat * area * dz : 1.0;
                m->gx[j] = m->gy[j] = m->gz[j] = m->gl[j] = 0;
                if (f <= 0)
                    continue;
                if (ix + 1 < nx && c->frac[j + 1] > 0) {
                    const pl_sim__material *mn = cell_material(s, c->mat[j + 1]);
                    m->gx[j] = fmin(f, c->frac[j + 1]) * dz * harmonic(mt->k[0], mn->k[0]);
                }
                if (iy + 1 < ny && c->frac[j + nx] > 0) {
                    const pl_sim__material *mn = cell_material(s, c->mat[j + nx]);
                    m->gy[j] = fmin(f, c->frac[j + nx]) * dz * harmonic(mt->k[1], mn->k[1]);
                }
                double below = 0;
                if (k + 1 < nz) {
                    below = c->frac[j + nc];
                    if (below > 0) {
                        const pl_sim__material *mn = cell_material(s, c->mat[j + nc]);
                        double dz2 = m->zf[k + 2] - m->zf[k + 1];
                        double r = dz / (2 * mt->k[2] * c->kzf[j])
                                   + dz2 / (2 * mn->k[2] * c->kzf[j + nc]);
                        m->gz[j] = fmin(f, below) * area / r;
                    }
                }
                if (k == 0)
                    m->gl[j] += hfront * area * f;
                if (s->back_h > 0 && f > below)
                    m->gl[j] += s->back_h * area * (f - below);
            }
    }
    /* the face each column shows from behind: its deepest mostly solid cell */
    for (size_t i = 0; i < nc; i++) {
        size_t r = 0;
        for (size_t k = 0; k < nz; k++)
            if (c->frac[k * nc + i] >= 0.5f)
                r = k;
        m->rear[i] = r * nc + i;
    }
}

static void planar_defects(pl_sim__model *m, const pl_sim_scene *s, cells *c)
{
    for (size_t d = 0; d < s->ndefects; d++) {
        const pl_sim__defect *def = &s->defects[d];
        if (def->kind == PL_SIM__POROSITY)
            continue;
        if (def->kind != PL_SIM__IMPACT) {
            coverage(m, &def->outline, c->cover);
            add_resistance(m, c, def->depth_mm, def->resistance_m2k_w, c->cover);
            continue;
        }
        for (unsigned l = 0; l < def->layers; l++) {
            double depth;
            pl_sim__outline o = def->outline;
            impact_layer(def, l, &depth, &o.a);
            o.b = o.a;
            o.pts = NULL;
            outline_finish(&o);
            coverage(m, &o, c->cover);
            add_resistance(m, c, depth, def->resistance_m2k_w, c->cover);
        }
    }
    for (size_t u = 0; u < s->nsubs; u++) {
        const pl_sim__sub *sub = &s->subs[u];
        if (sub->kind != PL_SIM__FLANGE || !(sub->bond_resistance_m2k_w > 0))
            continue;
        coverage(m, &sub->outline, c->cover);
        add_resistance(m, c, s->thickness_mm, sub->bond_resistance_m2k_w, c->cover);
    }
}

/* The state just after the flash: each column's absorbed energy spread as
 * the instantaneous plane source at an insulated face (Carslaw & Jaeger
 * 1959, "Conduction of Heat in Solids", section 2.2),
 *     T(z, t0) = Q / (rho c sqrt(pi alpha t0)) exp(-z^2 / (4 alpha t0)),
 * integrated exactly over each layer (erf differences), the tail given to
 * the deepest solid layer so no energy is lost. Starting from this smooth
 * profile rather than a spike in the first layer spares the time scheme
 * its worst transient. */
static void initial_state(pl_sim__model *m, const pl_sim_scene *s, const cells *c)
{
    flash_field field;
    field_init(&field, s);
    double hmm = m->h * 1e3;
    double rc = s->laminate.density * s->laminate.specific_heat;
    m->absorbed_j = 0;
    memset(m->T, 0, m->ncell * sizeof *m->T);
    for (size_t iy = 0; iy < m->ny; iy++)
        for (size_t ix = 0; ix < m->nx; ix++) {
            size_t i = iy * m->nx + ix;
            double x, y;
            fibre_to_site(m, m->x0 + hmm * (double)ix, m->y0 + hmm * (double)iy, &x, &y);
            double e = flash_energy(s, &field, x, y) * m->h * m->h;
            m->absorbed_j += e;
            double alpha = s->laminate.k[2] * c->kzf[i] / rc;
            double width = 2 * sqrt(alpha * m->t0);
            double below = 0;
            size_t k = 0;
            for (; k + 1 < m->nz && c->frac[(k + 1) * m->ncol + i] > 0; k++) {
                double above = erf(m->zf[k + 1] / width);
                m->T[k * m->ncol + i] = e * (above - below) / m->cap[k * m->ncol + i];
                below = above;
            }
            m->T[k * m->ncol + i] = e * (1.0 - below) / m->cap[k * m->ncol + i];
        }
}

int pl_sim__model_new(pl_sim__model **out, const pl_sim_scene *s, pl_err *err)
{
    *out = NULL;
    double t_first, t_last;
    frame_window(s, &t_first, &t_last);
    double rc = s->laminate.density * s->laminate.specific_heat;
    double az = s->laminate.k[2] / rc * 1e6; /* mm^2/s */
    /* first layer: a fraction of the diffusion length at the first frame */
    double hf = fmin(0.15 * sqrt(az * t_first), s->thickness_mm / 20);

    pl_sim__model *m = calloc(1, sizeof *m);
    if (!m)
        return pl__err(err, PL_ENOMEM, "out of memory");
    double zmin;
    if (build_layers(s, hf, &m->zf, &m->nz, &zmin)) {
        pl_sim__model_free(m);
        return pl__err(err, PL_ENOMEM, "out of memory");
    }
    for (size_t k = 0; k <= m->nz; k++)
        m->zf[k] *= 1e-3;

    /* the lateral grid: along and across the fibres, covering the real
     * field of view and a margin */
    double phi = s->fibre_angle_deg * M_PI / 180.0;
    m->cphi = cos(phi);
    m->sphi = sin(phi);
    double hmm = s->grid_pitch_mm > 0 ? s->grid_pitch_mm : fmin(s->pitch_u, s->pitch_v);
    m->h = hmm * 1e-3;
    double fx0 = INFINITY, fy0 = INFINITY, fx1 = -INFINITY, fy1 = -INFINITY;
    for (int i = 0; i < 4; i++) {
        double col = i & 1 ? s->width - 0.5 : -0.5, row = i & 2 ? s->height - 0.5 : -0.5;
        double x, y, fx, fy;
        pl_sim__pixel_to_site(s, col, row, &x, &y);
        site_to_fibre(m, x, y, &fx, &fy);
        fx0 = fmin(fx0, fx);
        fx1 = fmax(fx1, fx);
        fy0 = fmin(fy0, fy);
        fy1 = fmax(fy1, fy);
    }
    double mx = s->margin_mm, my = s->margin_mm;
    if (mx < 0) {
        mx = fmin(50.0, fmax(2 * hmm, 1.5 * sqrt(diffusivity_mm2_s(&s->laminate, 0) * t_last)));
        my = fmin(50.0, fmax(2 * hmm, 1.5 * sqrt(diffusivity_mm2_s(&s->laminate, 1) * t_last)));
    }
    double nxd = floor((fx1 - fx0 + 2 * mx) / hmm) + 2, nyd = floor((fy1 - fy0 + 2 * my) / hmm) + 2;
    double ncells = nxd * nyd * (double)m->nz;
    if (ncells > (double)MAX_CELLS) {
        pl_sim__model_free(m); /* (m->nz read above: the message must not read m) */
        return pl__err(err, PL_EINVAL,
                       "%s: the grid would have %.0f cells (at most %zu): coarsen grid pitch_mm "
                       "or layers", s->name, ncells, MAX_CELLS);
    }
    m->nx = (size_t)nxd;
    m->ny = (size_t)nyd;
    m->x0 = (fx0 + fx1) / 2 - hmm * ((double)m->nx - 1) / 2;
    m->y0 = (fy0 + fy1) / 2 - hmm * ((double)m->ny - 1) / 2;
    m->ncol = m->nx * m->ny;
    m->ncell = m->ncol * m->nz;

    /* start when the plane source has spread over a few first layers, well
     * before the first frame and the first interface */
    double dz0 = (m->zf[1] - m->zf[0]) * 1e3;
    m->t0 = fmin(fmin(6.25 * dz0 * dz0 / az, t_first / 2), zmin * zmin / (16 * az));

    cells c = { 0 };
    c.mat = malloc(m->ncell);
    c.frac = malloc(m->ncell * sizeof *c.frac);
    c.kzf = malloc(m->ncell * sizeof *c.kzf);
    c.cover = malloc(m->ncol * sizeof *c.cover);
    m->cap = malloc(m->ncell * sizeof *m->cap);
    m->gx = malloc(m->ncell * sizeof *m->gx);
    m->gy = malloc(m->ncell * sizeof *m->gy);
    m->gz = malloc(m->ncell * sizeof *m->gz);
    m->gl = malloc(m->ncell * sizeof *m->gl);
    m->T = malloc(m->ncell * sizeof *m->T);
    m->D = malloc(m->ncell * sizeof *m->D);
    m->rear = malloc(m->ncol * sizeof *m->rear);
    int ok = c.mat && c.frac && c.kzf && c.cover && m->cap && m->gx && m->gy && m->gz && m->gl
             && m->T && m->D && m->rear;
    if (ok) {
        assign_cells(m, s, &c);
        conductances(m, s, &c);
        planar_defects(m, s, &c);
        initial_state(m, s, &c);
    }
    free(c.mat);
    free(c.frac);
    free(c.kzf);
    free(c.cover);
    if (!ok) {
        pl_sim__model_free(m);
        return pl__err(err, PL_ENOMEM, "out of memory");
    }
    *out = m;
    return PL_OK;
}

/* ---- time stepping --------------------------------------------------------- */

/*
 * One step of the Douglas scheme in increment form (Douglas 1962,
 * "Alternating direction methods for three space variables"; Hundsdorfer &
 * Verwer 2003, "Numerical Solution of Time-Dependent Advection-Diffusion-
 * Reaction Equations", section IV.3). With C the capacities and L = Lx + Ly
 * + Lz the conductance operator,
 *
 *     C D0 = dt L T,   (C - theta dt Lx) D1 = C D0,
 *     (C - theta dt Ly) D2 = C D1,   (C - theta dt Lz) D3 = C D2,
 *     T += D3,
 *
 * every solve a tridiagonal system per grid line (Thomas algorithm; the
 * matrices are diagonally dominant). Each solve keeps sum(C D), so an
 * insulated part keeps its energy to rounding. theta = 1/2 is second order;
 * the first steps use theta = 1, which damps the stiff components of the
 * initial profile that theta = 1/2 would leave ringing.
 *
 * plane_sweeps() does D0, D1 and D2 on one layer (they involve only that
 * layer's cells); column_sweeps() does D3 and the update on rows of columns.
 */
static void plane_sweeps(pl_sim__model *m, size_t k, double dt, double theta, double *cp)
{
    size_t nx = m->nx, ny = m->ny, nc = m->ncol;
    double *d = m->D + k * nc;
    const double *t = m->T + k * nc, *cap = m->cap + k * nc;
    const double *gx = m->gx + k * nc, *gy = m->gy + k * nc, *gl = m->gl + k * nc;
    for (size_t i = 0; i < nc; i++)
        d[i] = -gl[i] * t[i];
    if (k > 0) {
        const double *tm = t - nc, *g = m->gz + (k - 1) * nc;
        for (size_t i = 0; i < nc; i++)
            d[i] += g[i] * (tm[i] - t[i]);
    }
    if (k + 1 < m->nz) {
        const double *tp = t + nc, *g = m->gz + k * nc;
        for (size_t i = 0; i < nc; i++)
            d[i] += g[i] * (tp[i] - t[i]);
    }
    for (size_t iy = 0; iy < ny; iy++) {
        size_t r = iy * nx;
        for (size_t ix = 0; ix + 1 < nx; ix++) {
            double f = gx[r + ix] * (t[r + ix + 1] - t[r + ix]);
            d[r + ix] += f;
            d[r + ix + 1] -= f;
        }
    }
    for (size_t i = 0; i + nx < nc; i++) {
        double f = gy[i] * (t[i + nx] - t[i]);
        d[i] += f;
        d[i + nx] -= f;
    }
    for (size_t i = 0; i < nc; i++)
        d[i] *= dt;

    double a = theta * dt;
    /* along x, one line per row */
    for (size_t iy = 0; iy < ny; iy++) {
        double *dr = d + iy * nx;
        const double *g = gx + iy * nx, *c = cap + iy * nx;
        double b = c[0] + a * g[0];
        cp[0] = -a * g[0] / b;
        dr[0] /= b;
        for (size_t ix = 1; ix < nx; ix++) {
            double lo = -a * g[ix - 1];
            b = c[ix] + a * (g[ix - 1] + g[ix]) - lo * cp[ix - 1];
            cp[ix] = -a * g[ix] / b;
            dr[ix] = (dr[ix] - lo * dr[ix - 1]) / b;
        }
        for (size_t ix = nx - 1; ix-- > 0;)
            dr[ix] -= cp[ix] * dr[ix + 1];
    }
    /* along y, all rows of the layer at once */
    for (size_t ix = 0; ix < nx; ix++) {
        double b = cap[ix] + a * gy[ix];
        cp[ix] = -a * gy[ix] / b;
        d[ix] = d[ix] * cap[ix] / b;
    }
    for (size_t i = nx; i < nc; i++) {
        double lo = -a * gy[i - nx];
        double b = cap[i] + a * (gy[i - nx] + gy[i]) - lo * cp[i - nx];
        cp[i] = -a * gy[i] / b;
        d[i] = (d[i] * cap[i] - lo * d[i - nx]) / b;
    }
    for (size_t i = nc - nx; i-- > 0;)
        d[i] -= cp[i] * d[i + nx];
}

static void column_sweeps(pl_sim__model *m, size_t y0, size_t y1, double dt, double theta,
                          double *cp)
{
    size_t nx = m->nx, nz = m->nz, nc = m->ncol;
    double a = theta * dt;
    for (size_t iy = y0; iy < y1; iy++) {
        size_t c0 = iy * nx;
        for (size_t k = 0; k < nz; k++) {
            double *d = m->D + k * nc + c0, *q = cp + k * nx;
            const double *cap = m->cap + k * nc + c0, *gz = m->gz + k * nc + c0;
            const double *gl = m->gl + k * nc + c0;
            if (k == 0) {
                for (size_t ix = 0; ix < nx; ix++) {
                    double b = cap[ix] + a * (gz[ix] + gl[ix]);
                    q[ix] = -a * gz[ix] / b;
                    d[ix] = d[ix] * cap[ix] / b;
                }
            } else {
                const double *gu = gz - nc, *du = d - nc, *qu = q - nx;
                for (size_t ix = 0; ix < nx; ix++) {
                    double lo = -a * gu[ix];
                    double b = cap[ix] + a * (gu[ix] + gz[ix] + gl[ix]) - lo * qu[ix];
                    q[ix] = -a * gz[ix] / b;
                    d[ix] = (d[ix] * cap[ix] - lo * du[ix]) / b;
                }
            }
        }
        for (size_t k = nz - 1; k-- > 0;) {
            double *d = m->D + k * nc + c0;
            const double *dn = d + nc, *q = cp + k * nx;
            for (size_t ix = 0; ix < nx; ix++)
                d[ix] -= q[ix] * dn[ix];
        }
        for (size_t k = 0; k < nz; k++) {
            double *t = m->T + k * nc + c0;
            const double *d = m->D + k * nc + c0;
            for (size_t ix = 0; ix < nx; ix++)
                t[ix] += d[ix];
        }
    }
}

/* ---- a run ----------------------------------------------------------------- */

typedef struct run {
    const pl_sim_scene *s;
    pl_sim__model *m;
    double *times;           /* times[0] = t0 ... times[nsteps] = last frame */
    size_t nsteps;
    pl_threads__pool *pool;
    unsigned nthreads;       /* scratch[nthreads], one per participant */
    double **scratch;
    double dt, theta;        /* the step being taken */
    int stop, status;

    pl_sim_frame_fn frame;
    void *frame_ud;
    pl_sim__step_fn step;
    void *step_ud;
    pl_progress_fn progress;
    void *progress_ud;

    size_t npix;
    size_t *sidx;            /* 4 cells per pixel */
    double *swt;             /* their weights */
    double *prev, *cur, *lprev, *lcur, *interp;
    float *kelvin;
    float *pattern;          /* fixed-pattern offsets */
    unsigned char *dead;
    rng noise;
    uint32_t next_frame;
} run;

/* Stop the run with `code` (the caller's thread only). */
static void halt(run *r, int code)
{
    if (!r->stop) {
        r->stop = 1;
        r->status = code;
    }
}

/* Noise, fixed pattern and dead pixels onto a frame of rises `dt`. */
static void deliver(run *r, uint32_t f, const double *dt)
{
    const pl_sim_scene *s = r->s;
    for (size_t p = 0; p < r->npix; p++) {
        double v = s->ambient_k + (dt ? dt[p] : 0.0) + r->pattern[p];
        if (s->netd_k > 0)
            v += s->netd_k * rng_gauss(&r->noise);
        r->kelvin[p] = r->dead[p] ? (float)s->dead_k : (float)v;
    }
    int rc = r->frame ? r->frame(r->frame_ud, f, frame_time(s, f), r->kelvin) : PL_OK;
    if (rc)
        halt(r, rc < 0 ? rc : PL_ECANCELED);
}

/* The caller's thread, with the model at times[st]: sample the viewed
 * face, hand over every frame up to this time (interpolated from the
 * previous state, in log rise against log time where both are positive),
 * report progress. */
static void emit(run *r, size_t st)
{
    const pl_sim__model *m = r->m;
    const pl_sim_scene *s = r->s;
    double t = r->times[st];
    for (size_t p = 0; p < r->npix; p++) {
        const size_t *ix = r->sidx + 4 * p;
        const double *w = r->swt + 4 * p;
        double v = w[0] * m->T[ix[0]] + w[1] * m->T[ix[1]] + w[2] * m->T[ix[2]]
                   + w[3] * m->T[ix[3]];
        r->cur[p] = v;
        r->lcur[p] = v > 1e-300 ? log(v) : NAN;
    }
    if (st == 0) {
        for (uint32_t f = 0; f < s->preflash_frames && !r->stop; f++)
            deliver(r, f, NULL);
        r->next_frame = s->preflash_frames;
    } else {
        double ta = r->times[st - 1], span = log(t / ta);
        while (!r->stop && r->next_frame < s->frame_count && frame_time(s, r->next_frame) <= t) {
            double tf = frame_time(s, r->next_frame);
            double wl = log(tf / ta) / span, wt = (tf - ta) / (t - ta);
            for (size_t p = 0; p < r->npix; p++) {
                if (isfinite(r->lprev[p]) && isfinite(r->lcur[p]))
                    r->interp[p] = exp(r->lprev[p] + wl * (r->lcur[p] - r->lprev[p]));
                else
                    r->interp[p] = r->prev[p] + wt * (r->cur[p] - r->prev[p]);
            }
            deliver(r, r->next_frame, r->interp);
            r->next_frame++;
        }
    }
    double *sw = r->prev;
    r->prev = r->cur;
    r->cur = sw;
    sw = r->lprev;
    r->lprev = r->lcur;
    r->lcur = sw;
    if (!r->stop && r->step && r->step(r->step_ud, m, t))
        halt(r, PL_ECANCELED);
    if (!r->stop && r->progress && r->progress(r->progress_ud, (double)st / (double)r->nsteps))
        halt(r, PL_ECANCELED);
}

/* One plane's sweeps along x and y in the step being taken. */
static void plane_unit(void *ctx, size_t k, unsigned part)
{
    run *r = ctx;
    plane_sweeps(r->m, k, r->dt, r->theta, r->scratch[part]);
}

/* One row of grid columns swept through the thickness. */
static void column_unit(void *ctx, size_t y, unsigned part)
{
    run *r = ctx;
    column_sweeps(r->m, y, y + 1, r->dt, r->theta, r->scratch[part]);
}

/*
 * The time steps on the pool. Each step's plane sweeps start on the
 * workers while the caller's thread hands over the frames up to the
 * step's start (emit() only reads the temperatures, which the plane
 * sweeps leave as they are), then joins them; the column sweeps follow.
 * Planes and rows are independent, so the result does not depend on the
 * thread count.
 */
static void advance(run *r)
{
    for (size_t st = 1; st <= r->nsteps; st++) {
        r->dt = r->times[st] - r->times[st - 1];
        r->theta = st <= 2 ? 1.0 : 0.5;
        pl_threads__pool_start(r->pool, plane_unit, r, r->m->nz);
        emit(r, st - 1);
        pl_threads__pool_help(r->pool);
        pl_threads__pool_wait(r->pool);
        if (r->stop)
            return;
        pl_threads__pool_run(r->pool, column_unit, r, r->m->ny);
    }
    emit(r, r->nsteps);
}

/* Mark exactly round(fraction * pixels) dead pixels, drawn from the seed
 * by a partial Fisher-Yates shuffle. */
static int pick_dead(const pl_sim_scene *s, unsigned char *dead)
{
    size_t np = (size_t)s->width * s->height;
    size_t ndead = (size_t)llround(s->dead_fraction * (double)np);
    memset(dead, 0, np);
    if (!ndead)
        return PL_OK;
    size_t *order = malloc(np * sizeof *order);
    if (!order)
        return PL_ENOMEM;
    for (size_t p = 0; p < np; p++)
        order[p] = p;
    rng g;
    rng_seed(&g, s->seed, STREAM_DEAD);
    for (size_t i = 0; i < ndead; i++) {
        size_t j = i + (size_t)(rng_uniform(&g) * (double)(np - i));
        if (j >= np)
            j = np - 1;
        size_t t = order[i];
        order[i] = order[j];
        order[j] = t;
        dead[order[i]] = 1;
    }
    free(order);
    return PL_OK;
}

/* The camera's sampling of the grid and its fixed defects. */
static int camera_setup(run *r)
{
    const pl_sim_scene *s = r->s;
    const pl_sim__model *m = r->m;
    size_t np = (size_t)s->width * s->height;
    r->npix = np;
    r->sidx = malloc(4 * np * sizeof *r->sidx);
    r->swt = malloc(4 * np * sizeof *r->swt);
    r->prev = malloc(np * sizeof *r->prev);
    r->cur = malloc(np * sizeof *r->cur);
    r->lprev = malloc(np * sizeof *r->lprev);
    r->lcur = malloc(np * sizeof *r->lcur);
    r->interp = malloc(np * sizeof *r->interp);
    r->kelvin = malloc(np * sizeof *r->kelvin);
    r->pattern = calloc(np, sizeof *r->pattern);
    r->dead = calloc(np, 1);
    if (!r->sidx || !r->swt || !r->prev || !r->cur || !r->lprev || !r->lcur || !r->interp || !r->kelvin
        || !r->pattern || !r->dead)
        return PL_ENOMEM;
    double hmm = m->h * 1e3;
    for (uint32_t row = 0; row < s->height; row++)
        for (uint32_t col = 0; col < s->width; col++) {
            size_t p = (size_t)row * s->width + col;
            double x, y, fx, fy;
            pl_sim__pixel_to_site(s, col, row, &x, &y);
            site_to_fibre(m, x, y, &fx, &fy);
            double gx = (fx - m->x0) / hmm, gy = (fy - m->y0) / hmm;
            double ix = fmin(fmax(floor(gx), 0), (double)m->nx - 2);
            double iy = fmin(fmax(floor(gy), 0), (double)m->ny - 2);
            double wx = fmin(fmax(gx - ix, 0), 1), wy = fmin(fmax(gy - iy, 0), 1);
            size_t c = (size_t)iy * m->nx + (size_t)ix;
            size_t cols[4] = { c, c + 1, c + m->nx, c + m->nx + 1 };
            double w[4] = { (1 - wx) * (1 - wy), wx * (1 - wy), (1 - wx) * wy, wx * wy };
            for (int q = 0; q < 4; q++) {
                r->sidx[4 * p + q] = s->face == PL_SIM__REAR ? m->rear[cols[q]] : cols[q];
                r->swt[4 * p + q] = w[q];
            }
        }
    rng g;
    if (s->fixed_pattern_k > 0) {
        rng_seed(&g, s->seed, STREAM_PATTERN);
        for (size_t p = 0; p < np; p++)
            r->pattern[p] = (float)(s->fixed_pattern_k * rng_gauss(&g));
    }
    if (pick_dead(s, r->dead))
        return PL_ENOMEM;
    rng_seed(&r->noise, s->seed, STREAM_NOISE);
    return PL_OK;
}

/* Internal step times: geometric from t0 to the last frame. */
static int schedule(run *r)
{
    double t_first, t_last;
    frame_window(r->s, &t_first, &t_last);
    double t0 = r->m->t0;
    double ratio = pow(10.0, 1.0 / r->s->steps_per_decade);
    size_t n = (size_t)ceil(log(t_last / t0) / log(ratio) - 1e-9);
    if (n < 1)
        n = 1;
    r->times = malloc((n + 1) * sizeof *r->times);
    if (!r->times)
        return PL_ENOMEM;
    for (size_t i = 0; i < n; i++)
        r->times[i] = t0 * pow(ratio, (double)i);
    r->times[n] = t_last;
    /* fold a sliver of a last step into the one before */
    if (n > 1 && t_last / r->times[n - 1] < pow(ratio, 0.3)) {
        r->times[n - 1] = t_last;
        n--;
    }
    r->nsteps = n;
    return PL_OK;
}

static void run_release(run *r)
{
    if (r->scratch)
        for (unsigned i = 0; i < r->nthreads; i++)
            free(r->scratch[i]);
    free(r->scratch);
    free(r->times);
    free(r->sidx);
    free(r->swt);
    free(r->prev);
    free(r->cur);
    free(r->lprev);
    free(r->lcur);
    free(r->interp);
    free(r->kelvin);
    free(r->pattern);
    free(r->dead);
    pl_sim__model_free(r->m);
}

int pl_sim__run(const pl_sim_scene *scene, pl_sim_frame_fn frame, void *frame_ud,
                pl_sim__step_fn step, void *step_ud, pl_progress_fn progress, void *progress_ud,
                pl_err *err)
{
    run r;
    memset(&r, 0, sizeof r);
    r.s = scene;
    r.frame = frame;
    r.frame_ud = frame_ud;
    r.step = step;
    r.step_ud = step_ud;
    r.progress = progress;
    r.progress_ud = progress_ud;
    int rc = pl_sim__model_new(&r.m, scene, err);
    if (rc)
        return rc;
    unsigned want = pl_threads__count(scene->threads);
    if (want > r.m->nz)
        want = (unsigned)r.m->nz;
    if (want > r.m->ny)
        want = (unsigned)r.m->ny;
    if (want < 1)
        want = 1;
    r.nthreads = want;
    size_t scratch = r.m->ncol > r.m->nx * r.m->nz ? r.m->ncol : r.m->nx * r.m->nz;
    if (schedule(&r) || camera_setup(&r) || !(r.scratch = calloc(want, sizeof *r.scratch))) {
        run_release(&r);
        return pl__err(err, PL_ENOMEM, "out of memory");
    }
    for (unsigned i = 0; i < want; i++)
        if (!(r.scratch[i] = malloc(scratch * sizeof **r.scratch))) {
            run_release(&r);
            return pl__err(err, PL_ENOMEM, "out of memory");
        }
    /* a worker that cannot be started leaves the pool smaller */
    if (pl_threads__pool_new(&r.pool, want)) {
        run_release(&r);
        return pl__err(err, PL_ENOMEM, "out of memory");
    }
    advance(&r);
    pl_threads__pool_free(r.pool);
    rc = r.status;
    run_release(&r);
    if (rc == PL_ECANCELED)
        return pl__err(err, rc, "%s: simulation canceled", scene->name);
    if (rc)
        return pl__err(err, rc, "%s: the frame callback failed (%s)", scene->name,
                       pl_strerror(rc));
    return PL_OK;
}

PL_EXPORT int pl_sim_run_frames(const pl_sim_scene *scene, pl_sim_frame_fn frame,
                                void *frame_userdata, pl_progress_fn progress,
                                void *progress_userdata, pl_err *err)
{
    return pl_sim__run(scene, frame, frame_userdata, NULL, NULL, progress, progress_userdata,
                       err);
}

/* ---- ground truth ---------------------------------------------------------- */

/* cJSON builders that remember a failed allocation. */
typedef struct jb {
    int ok;
} jb;

static cJSON *jadd(jb *b, cJSON *parent, const char *key, cJSON *v)
{
    if (!v) {
        b->ok = 0;
        return NULL;
    }
    if (!parent)
        return v;
    if (key ? !cJSON_AddItemToObject(parent, key, v) : !cJSON_AddItemToArray(parent, v)) {
        cJSON_Delete(v);
        b->ok = 0;
        return NULL;
    }
    return v;
}

static void jnum(jb *b, cJSON *o, const char *key, double v)
{
    jadd(b, o, key, cJSON_CreateNumber(v));
}

static void jstr(jb *b, cJSON *o, const char *key, const char *v)
{
    jadd(b, o, key, cJSON_CreateString(v));
}

static void jpair(jb *b, cJSON *o, const char *key, double x, double y)
{
    cJSON *a = jadd(b, o, key, cJSON_CreateArray());
    if (a) {
        jadd(b, a, NULL, cJSON_CreateNumber(x));
        jadd(b, a, NULL, cJSON_CreateNumber(y));
    }
}

static const char *shape_name(int shape)
{
    static const char *const n[] = { "circle", "ellipse", "rectangle", "polygon" };
    return n[shape];
}

/* The outline as the scene gives it, its points in mm and in pixels, its
 * centre and area. */
static void truth_outline(jb *b, cJSON *obj, const pl_sim__outline *o, const pl_sim_scene *s)
{
    cJSON *ol = jadd(b, obj, "outline", cJSON_CreateObject());
    if (ol) {
        jstr(b, ol, "shape", shape_name(o->shape));
        if (o->shape == PL_SIM__POLYGON) {
            cJSON *pts = jadd(b, ol, "points_mm", cJSON_CreateArray());
            for (size_t i = 0; pts && i < o->npts; i++)
                jpair(b, pts, NULL, o->pts[2 * i], o->pts[2 * i + 1]);
        } else {
            jpair(b, ol, "centre_mm", o->cx, o->cy);
            if (o->shape == PL_SIM__CIRCLE)
                jnum(b, ol, "diameter_mm", o->a);
            else
                jpair(b, ol, o->shape == PL_SIM__ELLIPSE ? "axes_mm" : "size_mm", o->a, o->b);
            if (o->shape != PL_SIM__CIRCLE)
                jnum(b, ol, "angle_deg", o->angle_deg);
        }
    }
    size_t cap = o->npts > CURVE_POINTS ? o->npts : CURVE_POINTS;
    double *xy = malloc(2 * cap * sizeof *xy);
    if (!xy) {
        b->ok = 0;
        return;
    }
    size_t n = outline_points(o, xy);
    cJSON *mm = jadd(b, obj, "outline_mm", cJSON_CreateArray());
    cJSON *px = jadd(b, obj, "outline_px", cJSON_CreateArray());
    for (size_t i = 0; mm && px && i < n; i++) {
        double c, r;
        pl_sim__site_to_pixel(s, xy[2 * i], xy[2 * i + 1], &c, &r);
        jpair(b, mm, NULL, xy[2 * i], xy[2 * i + 1]);
        jpair(b, px, NULL, c, r);
    }
    free(xy);
    double cx, cy, cc, cr;
    outline_centre(o, &cx, &cy);
    pl_sim__site_to_pixel(s, cx, cy, &cc, &cr);
    jpair(b, obj, "centre_mm", cx, cy);
    jpair(b, obj, "centre_px", cc, cr);
    double area = pl_sim__outline_area(o);
    jnum(b, obj, "area_mm2", area);
    jnum(b, obj, "area_px", area / (s->pitch_u * s->pitch_v));
}

static const char *defect_kind_name(int kind)
{
    static const char *const n[] = { "delamination", "disbond", "impact", "porosity" };
    return n[kind];
}

static cJSON *truth_tree(const pl_sim_scene *s, jb *b)
{
    cJSON *root = jadd(b, NULL, NULL, cJSON_CreateObject());
    if (!root)
        return NULL;
    jstr(b, root, "format", TRUTH_FORMAT);
    jstr(b, root, "name", s->name);
    jstr(b, root, "software_version", pl_version());
    jnum(b, root, "seed", (double)s->seed);

    cJSON *cam = jadd(b, root, "camera", cJSON_CreateObject());
    if (cam) {
        jnum(b, cam, "width", s->width);
        jnum(b, cam, "height", s->height);
        jpair(b, cam, "pitch_mm", s->pitch_u, s->pitch_v);
        jnum(b, cam, "frame_rate_hz", s->frame_rate_hz);
        jnum(b, cam, "frame_count", s->frame_count);
        jnum(b, cam, "preflash_frames", s->preflash_frames);
        jnum(b, cam, "flash_time_s", s->flash_time_s);
        jstr(b, cam, "face", s->face == PL_SIM__REAR ? "rear" : "front");
        jnum(b, cam, "netd_k", s->netd_k);
    }
    cJSON *pe = jadd(b, root, "placement_error", cJSON_CreateObject());
    if (pe) {
        double cx, cy;
        fov_centre(s, &cx, &cy);
        jpair(b, pe, "shift_mm", s->shift_u, s->shift_v);
        jnum(b, pe, "rotation_deg", s->rotation_deg);
        jpair(b, pe, "about_mm", cx, cy);
        /* pixel = M (x, y, 1): the affine map from site mm to camera pixels */
        double c0, r0, c1, r1, c2, r2;
        pl_sim__site_to_pixel(s, 0, 0, &c0, &r0);
        pl_sim__site_to_pixel(s, 1, 0, &c1, &r1);
        pl_sim__site_to_pixel(s, 0, 1, &c2, &r2);
        cJSON *mtx = jadd(b, pe, "site_to_pixel", cJSON_CreateArray());
        if (mtx) {
            double rows[2][3] = { { c1 - c0, c2 - c0, c0 }, { r1 - r0, r2 - r0, r0 } };
            for (int i = 0; i < 2; i++)
                jadd(b, mtx, NULL, cJSON_CreateDoubleArray(rows[i], 3));
        }
    }
    cJSON *lam = jadd(b, root, "laminate", cJSON_CreateObject());
    if (lam) {
        jnum(b, lam, "thickness_mm", s->thickness_mm);
        jnum(b, lam, "fibre_angle_deg", s->fibre_angle_deg);
        cJSON *dif = jadd(b, lam, "diffusivity_mm2_s", cJSON_CreateObject());
        if (dif) {
            jnum(b, dif, "along", diffusivity_mm2_s(&s->laminate, 0));
            jnum(b, dif, "across", diffusivity_mm2_s(&s->laminate, 1));
            jnum(b, dif, "through", diffusivity_mm2_s(&s->laminate, 2));
        }
    }
    cJSON *flash = jadd(b, root, "flash", cJSON_CreateObject());
    if (flash) {
        jnum(b, flash, "energy_j_m2", s->energy_j_m2);
        jnum(b, flash, "nonuniformity", s->nonuniformity);
    }

    cJSON *defs = jadd(b, root, "defects", cJSON_CreateArray());
    for (size_t i = 0; defs && i < s->ndefects; i++) {
        const pl_sim__defect *d = &s->defects[i];
        cJSON *o = jadd(b, defs, NULL, cJSON_CreateObject());
        if (!o)
            break;
        jstr(b, o, "label", d->label);
        jstr(b, o, "kind", defect_kind_name(d->kind));
        jnum(b, o, "depth_mm", d->depth_mm);
        if (d->kind == PL_SIM__IMPACT || d->kind == PL_SIM__POROSITY)
            jnum(b, o, "bottom_depth_mm", d->bottom_depth_mm);
        if (d->kind == PL_SIM__POROSITY)
            jnum(b, o, "conductivity_factor", d->conductivity_factor);
        else
            jnum(b, o, "resistance_m2k_w", d->resistance_m2k_w);
        truth_outline(b, o, &d->outline, s);
        if (d->kind == PL_SIM__IMPACT) {
            cJSON *ls = jadd(b, o, "layers", cJSON_CreateArray());
            for (unsigned l = 0; ls && l < d->layers; l++) {
                double depth, dia;
                impact_layer(d, l, &depth, &dia);
                cJSON *e = jadd(b, ls, NULL, cJSON_CreateObject());
                if (!e)
                    break;
                jnum(b, e, "depth_mm", depth);
                jnum(b, e, "diameter_mm", dia);
                jnum(b, e, "area_mm2", M_PI * dia * dia / 4);
            }
        }
    }
    cJSON *subs = jadd(b, root, "substructure", cJSON_CreateArray());
    for (size_t i = 0; subs && i < s->nsubs; i++) {
        const pl_sim__sub *u = &s->subs[i];
        cJSON *o = jadd(b, subs, NULL, cJSON_CreateObject());
        if (!o)
            break;
        jstr(b, o, "label", u->label);
        jstr(b, o, "kind", u->kind == PL_SIM__FLANGE ? "flange" : "ply_drop");
        jnum(b, o, u->kind == PL_SIM__FLANGE ? "thickness_mm" : "thickness_change_mm",
             u->thickness_mm);
        jnum(b, o, "depth_mm", u->kind == PL_SIM__FLANGE || u->thickness_mm > 0
                                   ? s->thickness_mm : s->thickness_mm + u->thickness_mm);
        truth_outline(b, o, &u->outline, s);
    }
    cJSON *dead = jadd(b, root, "dead_pixels", cJSON_CreateArray());
    size_t np = (size_t)s->width * s->height;
    unsigned char *mask = malloc(np ? np : 1);
    if (!mask || pick_dead(s, mask))
        b->ok = 0;
    for (size_t p = 0; dead && mask && b->ok && p < np; p++)
        if (mask[p])
            jpair(b, dead, NULL, (double)(p % s->width), (double)(p / s->width));
    free(mask);
    return root;
}

PL_EXPORT int pl_sim_truth_json(char **out, const pl_sim_scene *scene, pl_err *err)
{
    *out = NULL;
    jb b = { 1 };
    cJSON *root = truth_tree(scene, &b);
    char *txt = b.ok && root ? cJSON_Print(root) : NULL;
    cJSON_Delete(root);
    if (!txt)
        return pl__err(err, PL_ENOMEM, "out of memory");
    *out = pl__strdup(txt);
    cJSON_free(txt);
    if (!*out)
        return pl__err(err, PL_ENOMEM, "out of memory");
    return PL_OK;
}

/* ---- writing a sequence ---------------------------------------------------- */

typedef struct seq_sink {
    pl_seq_writer *w;
    pl_err err;
} seq_sink;

static int sink_frame(void *ud, uint32_t index, double time_s, const float *kelvin)
{
    seq_sink *k = ud;
    (void)index;
    (void)time_s;
    return pl_seq_writer_frame(k->w, kelvin, &k->err);
}

/* The manifest's "acquisition": the scene's own object with what the
 * simulation did under "simulation". */
static char *acquisition_text(const pl_sim_scene *s)
{
    jb b = { 1 };
    cJSON *root = s->acquisition_json ? cJSON_Parse(s->acquisition_json) : cJSON_CreateObject();
    if (!root)
        return NULL;
    cJSON_DeleteItemFromObjectCaseSensitive(root, "simulation");
    cJSON *sim = jadd(&b, root, "simulation", cJSON_CreateObject());
    if (sim) {
        jstr(&b, sim, "software", "plyledger simulator");
        jstr(&b, sim, "software_version", pl_version());
        jstr(&b, sim, "scene", s->name);
        jnum(&b, sim, "seed", (double)s->seed);
        jnum(&b, sim, "flash_energy_j_m2", s->energy_j_m2);
        jnum(&b, sim, "flash_nonuniformity", s->nonuniformity);
        jnum(&b, sim, "ambient_k", s->ambient_k);
        jnum(&b, sim, "netd_k", s->netd_k);
        jnum(&b, sim, "fixed_pattern_k", s->fixed_pattern_k);
        jnum(&b, sim, "dead_pixel_fraction", s->dead_fraction);
        jstr(&b, sim, "face", s->face == PL_SIM__REAR ? "rear" : "front");
        jpair(&b, sim, "placement_shift_mm", s->shift_u, s->shift_v);
        jnum(&b, sim, "placement_rotation_deg", s->rotation_deg);
    }
    char *txt = b.ok ? cJSON_PrintUnformatted(root) : NULL;
    cJSON_Delete(root);
    char *out = pl__strdup(txt);
    cJSON_free(txt);
    return out;
}

/* The ground truth into its output file, not yet committed: it is put in
 * place once the sequence stands. */
static int write_truth(pl_outfile **of, const pl_sim_scene *scene, const char *path,
                       pl_err *err)
{
    *of = NULL;
    char *text = NULL;
    int rc = pl_sim_truth_json(&text, scene, err);
    if (rc == PL_OK)
        rc = pl_outfile_open(of, path, err);
    if (rc == PL_OK && (rc = pl__outfile_put_line(*of, text, err))) {
        pl_outfile_abort(*of);
        *of = NULL;
    }
    free(text);
    return rc;
}

PL_EXPORT int pl_sim_run(const pl_sim_scene *scene, const char *manifest_path,
                         const char *truth_path, pl_progress_fn progress, void *userdata,
                         pl_err *err)
{
    int rc;
    pl_outfile *truth = NULL;
    if (truth_path && (rc = write_truth(&truth, scene, truth_path, err)))
        return rc;
    char *acq = acquisition_text(scene);
    if (!acq) {
        pl_outfile_abort(truth);
        return pl__err(err, PL_ENOMEM, "out of memory");
    }
    pl_seq_info info = PL_SEQ_INFO_INIT;
    info.width = scene->width;
    info.height = scene->height;
    info.frame_count = scene->frame_count;
    info.frame_rate_hz = scene->frame_rate_hz;
    info.flash_time_s = scene->flash_time_s;
    info.preflash_frames = scene->preflash_frames;
    info.storage = scene->storage;
    info.gain_k = scene->gain_k;
    info.offset_k = scene->offset_k;
    info.saturation_count = scene->saturation_count;
    info.pitch_u = scene->pitch_u;
    info.pitch_v = scene->pitch_v;
    info.acquisition_json = acq;
    seq_sink sink;
    memset(&sink, 0, sizeof sink);
    rc = pl_seq_writer_open(&sink.w, manifest_path, &info, err);
    free(acq);
    if (!rc) {
        rc = pl_sim_run_frames(scene, sink_frame, &sink, progress, userdata, err);
        if (rc && sink.err.code == rc && sink.err.msg[0] && err)
            *err = sink.err;
        if (rc)
            pl_seq_writer_discard(sink.w);
        else
            rc = pl_seq_writer_close(sink.w, err);
    }
    return pl_outfile_finish(truth, rc, err);
}
