/*
 * register.c - laying a reinspection map onto its baseline's grid: phase
 * correlation with sub-pixel refinement, rotation and scale from log-polar
 * Fourier magnitudes, resampling and the quality figures (see
 * plyledger/register.h for the conventions and the sources).
 */
#include "image/register_int.h"

#include "common/common_int.h"
#include "common/fft_int.h"
#include "common/filter_int.h"
#include "common/num_int.h"
#include "common/threads_int.h"

#include <assert.h>
#include <float.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define MIN_SIDE 16u
#define MAX_UPSAMPLE PL_REGISTER_MAX_UPSAMPLE
#define PARALLEL_MIN_PIXELS 32768u /* below this one thread is quicker */
#define PSR_HALF 5                 /* the 11 x 11 window around the peak */

/* Log-polar grid: radii from LP_RMAX / LP_RANGE to LP_RMAX cycles per
 * pixel, LP_RADII of them, and at least LP_MIN_ANGLES angles over 180
 * degrees (more for large images: pi/2 times the larger FFT side, so that
 * the outer ring is sampled at one bin). LP_SCALE_LIMIT bounds the scale
 * searched when it is not estimated (in radial bins). */
#define LP_RMAX 0.5
#define LP_RANGE 12.0
#define LP_RADII 256u
#define LP_MIN_ANGLES 512u
#define LP_MAX_ANGLES 4096u
#define LP_SCALE_LIMIT 2
/* Rotation candidates refined: those whose translation peak reaches this
 * share of the best one's. */
#define CANDIDATE_RATIO 0.7
/* The start from no residual (search()): smoothed this much for its coarse
 * pass, and kept when it correlates this much better than the peaks. */
#define START_SIGMA 3.0
#define START_GAIN 0.01

/* The matrix-product kernel is also compiled for AVX2 and chosen at run
 * time (function multiversioning, as in reduce.c). */
#if defined(__GNUC__) && !defined(__clang__) && defined(__x86_64__) && defined(__linux__)
#define GEMM_KERNEL __attribute__((target_clones("avx2", "default")))
#else
#define GEMM_KERNEL
#endif

/* Wrap an angle in degrees to (-180, 180]. */
static double wrap180(double a)
{
    a = fmod(a, 360.0);
    if (a > 180.0)
        a -= 360.0;
    else if (a <= -180.0)
        a += 360.0;
    return a;
}

/* Threads for work over `pixels` values: one per online processor for
 * large images. */
static unsigned thread_count(size_t pixels)
{
    return pixels < PARALLEL_MIN_PIXELS ? 1 : pl_threads__count(0);
}

/* ---- small matrix products ----------------------------------------------- */

/*
 * C = A B for rows [r0, r1) of C (m x n, ldc), A (m x k, lda) and B (k x n,
 * ldb), n a multiple of 16. The upsampled DFT is two such products; the
 * GNU C version keeps a 4 x 16 block of C in vector registers while it
 * runs down a 16-column panel of B (which stays in cache).
 */
#if defined(__GNUC__)
typedef float v8f __attribute__((vector_size(32)));
typedef double v4d __attribute__((vector_size(32)));
typedef float v4f __attribute__((vector_size(16)));
typedef int v4i __attribute__((vector_size(16)));

GEMM_KERNEL static void gemm_rows(float *restrict C, size_t ldc, const float *restrict A,
                                  size_t lda, const float *restrict B, size_t ldb, uint32_t r0,
                                  uint32_t r1, uint32_t k, uint32_t n)
{
    const v8f zero = { 0 };
    for (uint32_t j = 0; j < n; j += 16) {
        uint32_t i = r0;
        for (; i + 4 <= r1; i += 4) {
            v8f c00 = zero, c01 = zero, c10 = zero, c11 = zero;
            v8f c20 = zero, c21 = zero, c30 = zero, c31 = zero;
            const float *a0 = A + (size_t)i * lda, *a1 = a0 + lda, *a2 = a1 + lda,
                        *a3 = a2 + lda;
            for (uint32_t q = 0; q < k; q++) {
                v8f b0, b1;
                memcpy(&b0, B + (size_t)q * ldb + j, sizeof b0);
                memcpy(&b1, B + (size_t)q * ldb + j + 8, sizeof b1);
                v8f x0 = zero + a0[q], x1 = zero + a1[q], x2 = zero + a2[q], x3 = zero + a3[q];
                c00 += x0 * b0;
                c01 += x0 * b1;
                c10 += x1 * b0;
                c11 += x1 * b1;
                c20 += x2 * b0;
                c21 += x2 * b1;
                c30 += x3 * b0;
                c31 += x3 * b1;
            }
            float *c = C + (size_t)i * ldc + j;
            memcpy(c, &c00, sizeof c00);
            memcpy(c + 8, &c01, sizeof c01);
            memcpy(c + ldc, &c10, sizeof c10);
            memcpy(c + ldc + 8, &c11, sizeof c11);
            memcpy(c + 2 * ldc, &c20, sizeof c20);
            memcpy(c + 2 * ldc + 8, &c21, sizeof c21);
            memcpy(c + 3 * ldc, &c30, sizeof c30);
            memcpy(c + 3 * ldc + 8, &c31, sizeof c31);
        }
        for (; i < r1; i++) {
            v8f c0 = zero, c1 = zero;
            const float *a0 = A + (size_t)i * lda;
            for (uint32_t q = 0; q < k; q++) {
                v8f b0, b1;
                memcpy(&b0, B + (size_t)q * ldb + j, sizeof b0);
                memcpy(&b1, B + (size_t)q * ldb + j + 8, sizeof b1);
                v8f x0 = zero + a0[q];
                c0 += x0 * b0;
                c1 += x0 * b1;
            }
            float *c = C + (size_t)i * ldc + j;
            memcpy(c, &c0, sizeof c0);
            memcpy(c + 8, &c1, sizeof c1);
        }
    }
}
#else
static void gemm_rows(float *restrict C, size_t ldc, const float *restrict A, size_t lda,
                      const float *restrict B, size_t ldb, uint32_t r0, uint32_t r1, uint32_t k,
                      uint32_t n)
{
    for (uint32_t i = r0; i < r1; i++) {
        float *c = C + (size_t)i * ldc;
        for (uint32_t j = 0; j < n; j++)
            c[j] = 0.0f;
        for (uint32_t q = 0; q < k; q++) {
            float a = A[(size_t)i * lda + q];
            const float *b = B + (size_t)q * ldb;
            for (uint32_t j = 0; j < n; j++)
                c[j] += a * b[j];
        }
    }
}
#endif

typedef struct gemm_job {
    float *C;
    size_t ldc;
    const float *A;
    size_t lda;
    const float *B;
    size_t ldb;
    uint32_t m, k, n;
} gemm_job;

static void gemm_slice(void *ctx, uint32_t b, uint32_t e, unsigned t)
{
    (void)t;
    gemm_job *g = ctx;
    uint32_t r0 = b * 4, r1 = e * 4 < g->m ? e * 4 : g->m;
    gemm_rows(g->C, g->ldc, g->A, g->lda, g->B, g->ldb, r0, r1, g->k, g->n);
}

static void gemm(gemm_job *g, unsigned nt)
{
    pl_threads__for(nt, (g->m + 3) / 4, gemm_slice, g);
}

static size_t round16(size_t n)
{
    return (n + 15) & ~(size_t)15;
}

/* ---- windows and FFT lengths ---------------------------------------------- */

void pl_register__window(double *out, uint32_t n, pl_window kind, double alpha)
{
    for (uint32_t i = 0; i < n; i++) {
        double x = n > 1 ? (double)i / (double)(n - 1) : 0.5;
        double v = 1.0;
        if (kind == PL_WINDOW_HANN) {
            v = 0.5 - 0.5 * cos(2.0 * M_PI * x);
        } else if (kind == PL_WINDOW_TUKEY && alpha > 0.0) {
            if (x < alpha / 2.0)
                v = 0.5 - 0.5 * cos(2.0 * M_PI * x / alpha);
            else if (x > 1.0 - alpha / 2.0)
                v = 0.5 - 0.5 * cos(2.0 * M_PI * (1.0 - x) / alpha);
        }
        out[i] = n > 1 ? v : 1.0;
    }
}

static uint32_t largest_prime_factor(uint32_t n)
{
    uint32_t best = 1;
    for (uint32_t p = 2; (uint64_t)p * p <= n; p++)
        while (n % p == 0) {
            best = p;
            n /= p;
        }
    return n > 1 ? n : best;
}

/*
 * kissfft handles any length but a large prime factor costs it that
 * factor per point. Under a window the images taper to zero, so padding
 * with zeros to the next 2-3-5-smooth length changes nothing but speed;
 * without one the caller wants circular shifts honoured exactly, so the
 * image's own length is kept unless a factor above 100 makes it slow.
 */
uint32_t pl_register__fft_length(uint32_t n, pl_window kind)
{
    uint32_t limit = kind == PL_WINDOW_NONE ? 100u : 5u;
    if (largest_prime_factor(n) <= limit)
        return n;
    for (uint32_t m = n + 1;; m++)
        if (largest_prime_factor(m) <= 5u)
            return m;
}

/* ---- phase correlation ----------------------------------------------------- */

/* One fixed image against one or more moving ones, sharing the plan and
 * the fixed image's spectrum. */
typedef struct pc_ctx {
    uint32_t w, h;    /* images */
    uint32_t pw, ph;  /* FFT lengths */
    uint32_t wh;      /* pw / 2 + 1 */
    unsigned nt;
    int centre;       /* subtract the mean before the window */
    pl_fft__rfft2 *plan;
    double *wx, *wy;  /* window weights */
    float *in;        /* ph x pw: the FFT input, then the correlation surface */
    pl_fft__cpx *F, *M, *R; /* ph x wh each; M is overwritten by the inverse */
} pc_ctx;

static void pc_free(pc_ctx *c)
{
    pl_fft__rfft2_free(c->plan);
    free(c->wx);
    free(c->wy);
    free(c->in);
    free(c->F);
    free(c->M);
    free(c->R);
    memset(c, 0, sizeof *c);
}

/* Windows given per axis (NULL: rectangular). */
static int pc_init(pc_ctx *c, uint32_t w, uint32_t h, uint32_t pw, uint32_t ph, const double *wx,
                   const double *wy, int centre, unsigned nt)
{
    memset(c, 0, sizeof *c);
    c->w = w;
    c->h = h;
    c->pw = pw;
    c->ph = ph;
    c->wh = pw / 2 + 1;
    c->nt = nt;
    c->centre = centre;
    size_t n = (size_t)pw * ph, ns = (size_t)ph * c->wh;
    c->wx = malloc(w * sizeof *c->wx);
    c->wy = malloc(h * sizeof *c->wy);
    c->in = malloc(n * sizeof *c->in);
    c->F = malloc(ns * sizeof *c->F);
    c->M = malloc(ns * sizeof *c->M);
    c->R = malloc(ns * sizeof *c->R);
    if (!c->wx || !c->wy || !c->in || !c->F || !c->M || !c->R
        || pl_fft__rfft2_new(&c->plan, ph, pw, nt)) {
        pc_free(c);
        return PL_ENOMEM;
    }
    for (uint32_t i = 0; i < w; i++)
        c->wx[i] = wx ? wx[i] : 1.0;
    for (uint32_t i = 0; i < h; i++)
        c->wy[i] = wy ? wy[i] : 1.0;
    return PL_OK;
}

/*
 * The FFT input: no-data pixels take the image's mean (so that they carry
 * no structure), the mean is removed when windowing (so that the window
 * tapers the image to zero rather than to its mean), then the window, then
 * zero padding. Returns the number of pixels with data.
 */
static size_t pc_prepare(pc_ctx *c, const float *img)
{
    double sum = 0.0;
    size_t n = 0, np = (size_t)c->w * c->h;
    for (size_t i = 0; i < np; i++)
        if (isfinite(img[i])) {
            sum += img[i];
            n++;
        }
    if (!n)
        return 0;
    double mean = sum / (double)n, sub = c->centre ? mean : 0.0;
    if (c->pw != c->w || c->ph != c->h)
        memset(c->in, 0, (size_t)c->pw * c->ph * sizeof *c->in);
    for (uint32_t y = 0; y < c->h; y++) {
        const float *s = img + (size_t)y * c->w;
        float *o = c->in + (size_t)y * c->pw;
        for (uint32_t x = 0; x < c->w; x++) {
            double v = isfinite(s[x]) ? s[x] : mean;
            o[x] = (float)((v - sub) * c->wx[x] * c->wy[y]);
        }
    }
    return n;
}

static size_t pc_set_fixed(pc_ctx *c, const float *img)
{
    size_t n = pc_prepare(c, img);
    if (n)
        pl_fft__rfft2_forward(c->plan, c->in, c->F);
    return n;
}

static size_t pc_set_moving(pc_ctx *c, const float *img)
{
    size_t n = pc_prepare(c, img);
    if (n)
        pl_fft__rfft2_forward(c->plan, c->in, c->M);
    return n;
}

/*
 * The normalised cross-power spectrum R = F conj(M) / |F conj(M)| (Kuglin
 * and Hines 1975), whose inverse transform peaks at the shift d with
 * moving(q) = fixed(q + d). Bins whose product is within 1e-12 of the
 * largest (nothing but rounding there) are set to zero rather than given
 * a random phase of unit weight.
 */
static void pc_cross_power(pc_ctx *c)
{
    size_t n = (size_t)c->ph * c->wh;
    double mx = 0.0;
    for (size_t k = 0; k < n; k++) {
        double fr = c->F[k].r, fi = c->F[k].i, mr = c->M[k].r, mi = c->M[k].i;
        double pr = fr * mr + fi * mi, pi = fi * mr - fr * mi;
        double m2 = pr * pr + pi * pi;
        if (m2 > mx)
            mx = m2;
        c->R[k].r = (float)pr;
        c->R[k].i = (float)pi;
    }
    double floor2 = mx * 1e-24 + (double)FLT_MIN;
    for (size_t k = 0; k < n; k++) {
        double pr = c->R[k].r, pi = c->R[k].i, m2 = pr * pr + pi * pi;
        if (m2 > floor2) {
            double m = sqrt(m2);
            c->R[k].r = (float)(pr / m);
            c->R[k].i = (float)(pi / m);
        } else {
            c->R[k].r = c->R[k].i = 0.0f;
        }
    }
}

/* Signed index of FFT bin k of n (numpy.fft.fftfreq's order). */
static long signed_bin(uint32_t k, uint32_t n)
{
    return k <= (n - 1) / 2 ? (long)k : (long)k - (long)n;
}

/*
 * The integer peak of the correlation surface, its normalised value
 * (the surface divided by the number of bins, so that R = a pure phase
 * ramp gives 1) and the peak-to-sidelobe ratio. When limit_x >= 0 the peak
 * is searched only in columns within limit_x of shift 0.
 */
static void pc_correlate(pc_ctx *c, pl_register__peak *pk, int limit_x)
{
    size_t n = (size_t)c->ph * c->wh, np = (size_t)c->ph * c->pw;
    pc_cross_power(c);
    memcpy(c->M, c->R, n * sizeof *c->M);
    pl_fft__rfft2_inverse(c->plan, c->M, c->in);
    double scale = 1.0 / (double)np, best = -INFINITY;
    uint32_t by = 0, bx = 0;
    for (uint32_t y = 0; y < c->ph; y++) {
        const float *s = c->in + (size_t)y * c->pw;
        for (uint32_t x = 0; x < c->pw; x++) {
            if (limit_x >= 0 && labs(signed_bin(x, c->pw)) > limit_x)
                continue;
            if (s[x] > best) {
                best = s[x];
                by = y;
                bx = x;
            }
        }
    }
    /* sidelobe: everything outside the 11 x 11 window around the peak */
    double sum = 0.0, sum2 = 0.0;
    size_t cnt = 0;
    for (uint32_t y = 0; y < c->ph; y++) {
        uint32_t dy = y > by ? y - by : by - y;
        if (c->ph - dy < dy)
            dy = c->ph - dy;
        const float *s = c->in + (size_t)y * c->pw;
        for (uint32_t x = 0; x < c->pw; x++) {
            if (dy <= PSR_HALF) {
                uint32_t dx = x > bx ? x - bx : bx - x;
                if (c->pw - dx < dx)
                    dx = c->pw - dx;
                if (dx <= PSR_HALF)
                    continue;
            }
            double v = s[x] * scale;
            sum += v;
            sum2 += v * v;
            cnt++;
        }
    }
    pk->peak = best * scale;
    pk->iy = (int)signed_bin(by, c->ph);
    pk->ix = (int)signed_bin(bx, c->pw);
    /* numpy.fft.fftfreq puts n/2 of an even length at -n/2; a shift of
     * exactly half the image is ambiguous either way */
    pk->dx = pk->ix;
    pk->dy = pk->iy;
    pk->psr = NAN;
    if (cnt > 1) {
        /* The surface is float32: a sidelobe flatter than the rounding of
         * the peak (an exact match, whose surface is a unit impulse, has a
         * sidelobe of exact zeros) is taken at that rounding level, so
         * that a perfect match gets the largest ratio float32 can show
         * (about 1 / FLT_EPSILON) instead of 0 / 0. A surface without a
         * peak above its mean keeps NaN. */
        double mean = sum / (double)cnt, var = sum2 / (double)cnt - mean * mean;
        double floor_sd = FLT_EPSILON * fabs(pk->peak);
        if (var > floor_sd * floor_sd)
            pk->psr = (pk->peak - mean) / sqrt(var);
        else if (pk->peak > mean)
            pk->psr = (pk->peak - mean) / floor_sd;
    }
}

/* Fill n complex values z_j = exp(i (a + j b)) as separate cos and sin,
 * by a recurrence in double (error ~ n eps). */
static void phasor_run(float *re, float *im, size_t stride, uint32_t n, double a, double b,
                       double weight)
{
    double cr = cos(a), ci = sin(a), sr = cos(b), si = sin(b);
    for (uint32_t j = 0; j < n; j++) {
        re[(size_t)j * stride] = (float)(weight * cr);
        im[(size_t)j * stride] = (float)(weight * ci);
        double t = cr * sr - ci * si;
        ci = cr * si + ci * sr;
        cr = t;
        if ((j & 31u) == 31u) { /* re-anchor against drift */
            double an = a + (double)(j + 1) * b;
            cr = cos(an);
            ci = sin(an);
        }
    }
}

/*
 * Sub-pixel refinement by the matrix-multiply DFT of Guizar-Sicairos,
 * Thurman and Fienup (2008): the inverse DFT of R evaluated on a grid of
 * step 1/U over a 1.5 x 1.5 pixel neighbourhood of the integer peak
 * (ceil(1.5 U) points a side, as in their algorithm), as two products of
 * small matrices, and its largest value. With k the row and l the column
 * frequency (l over the Hermitian half, weight 2 for the bins that stand
 * for a conjugate pair),
 *
 *   CC(y_j, x_i) = Re sum_k e^{2 pi i k y_j / H} sum_l w_l R(k, l) e^{2 pi i l x_i / W}
 *
 * is T = E_y R (complex, as one real product [Re E | Im E] [[Re R, Im R],
 * [-Im R, Re R]]) and then CC = Re T Re E_x - Im T Im E_x (a second one).
 *
 * The cost is that of the first product, proportional to the points a
 * side. Above REFINE_COARSE_MIN the grid is searched coarse to fine: first
 * every q-th point of it (q = U / REFINE_COARSE, about a tenth of a pixel
 * apart, the same neighbourhood), then every point within q of the best
 * of those. The correlation peak of an image pair is smooth at that scale
 * (a tenth of a pixel is far inside its main lobe), so the best point of
 * the fine stage is the best point of the whole grid; the answer stays a
 * point of the same 1/U grid. For U = 100 this evaluates 17 + 21 rows of
 * the 150 of the full grid.
 */
#define REFINE_COARSE 10u
#define REFINE_COARSE_MIN 20u

typedef struct dft_ctx {
    const pc_ctx *c;
    float *B;      /* 2H x ldb: [[Re R, Im R], [-Im R, Re R]] */
    size_t ldb;
} dft_ctx;

/* CC on the grid x = ix + (jx0 + i) step (i < nx), y likewise; the offsets
 * (jx0 + i, jy0 + j) of its largest value into *bx, *by. */
static int dft_grid(const dft_ctx *d, const pl_register__peak *pk, double step, long jx0,
                    uint32_t nx, long jy0, uint32_t ny, long *bx, long *by)
{
    const pc_ctx *c = d->c;
    uint32_t H = c->ph, wh = c->wh, W = c->pw;
    size_t lda = 2 * (size_t)H, ldb = d->ldb, ldc2 = round16(nx);
    float *A = malloc((size_t)ny * lda * sizeof *A);
    float *T = malloc((size_t)ny * ldb * sizeof *T);
    float *E = calloc(ldb * ldc2, sizeof *E);
    float *CC = malloc((size_t)ny * ldc2 * sizeof *CC);
    if (!A || !T || !E || !CC) {
        free(A);
        free(T);
        free(E);
        free(CC);
        return PL_ENOMEM;
    }
    /* A: row j = [cos | sin] of 2 pi k y_j / H over k */
    double y0 = pk->iy + (double)jy0 * step;
    for (uint32_t k = 0; k < H; k++) {
        double f = 2.0 * M_PI * (double)signed_bin(k, H) / H;
        phasor_run(A + k, A + H + k, lda, ny, f * y0, f * step, 1.0);
    }
    /* E: rows l = w_l cos(2 pi l x_i / W), rows wh + l = -w_l sin(...) */
    double x0 = pk->ix + (double)jx0 * step;
    for (uint32_t l = 0; l < wh; l++) {
        double wl = (l == 0 || (W % 2 == 0 && l == W / 2)) ? 1.0 : 2.0;
        double f = 2.0 * M_PI * (double)l / W;
        phasor_run(E + (size_t)l * ldc2, E + (size_t)(wh + l) * ldc2, 1, nx, f * x0, f * step,
                   wl);
        float *s = E + (size_t)(wh + l) * ldc2;
        for (uint32_t i = 0; i < nx; i++)
            s[i] = -s[i];
    }
    unsigned nt = c->nt;
    gemm_job g1 = { T, ldb, A, lda, d->B, ldb, ny, 2 * H, (uint32_t)ldb };
    gemm(&g1, nt);
    gemm_job g2 = { CC, ldc2, T, ldb, E, ldc2, ny, (uint32_t)(2 * wh), (uint32_t)ldc2 };
    gemm(&g2, nt);
    double best = -INFINITY;
    uint32_t bj = 0, bi = 0;
    for (uint32_t j = 0; j < ny; j++)
        for (uint32_t i = 0; i < nx; i++) {
            double v = CC[(size_t)j * ldc2 + i];
            if (v > best) {
                best = v;
                bj = j;
                bi = i;
            }
        }
    *bx = jx0 + (long)bi;
    *by = jy0 + (long)bj;
    free(A);
    free(T);
    free(E);
    free(CC);
    return PL_OK;
}

/* The points of [lo, hi] (offsets in 1/up) within q of mid: first and count. */
static uint32_t span(long *first, long mid, long q, long lo, long hi)
{
    long a = mid - q < lo ? lo : mid - q, b = mid + q > hi ? hi : mid + q;
    *first = a;
    return (uint32_t)(b - a + 1);
}

static int pc_refine(pc_ctx *c, pl_register__peak *pk, unsigned up)
{
    if (up <= 1)
        return PL_OK;
    uint32_t ns = (uint32_t)ceil(1.5 * up), H = c->ph, wh = c->wh;
    long lo = -(long)floor(ns / 2.0), hi = lo + (long)ns - 1; /* the grid's offsets */
    dft_ctx d = { c, NULL, round16(2 * (size_t)wh) };
    size_t ldb = d.ldb;
    float *B = d.B = malloc(2 * (size_t)H * ldb * sizeof *B);
    if (!B)
        return PL_ENOMEM;
    /* B = [[Re R, Im R], [-Im R, Re R]], padded with zeros */
    for (uint32_t k = 0; k < H; k++) {
        float *b0 = B + (size_t)k * ldb, *b1 = B + (size_t)(k + H) * ldb;
        const pl_fft__cpx *r = c->R + (size_t)k * wh;
        for (uint32_t l = 0; l < wh; l++) {
            b0[l] = r[l].r;
            b0[wh + l] = r[l].i;
            b1[l] = -r[l].i;
            b1[wh + l] = r[l].r;
        }
        for (size_t l = 2 * (size_t)wh; l < ldb; l++)
            b0[l] = b1[l] = 0.0f;
    }
    long bx, by;
    int rc;
    if (up < REFINE_COARSE_MIN) {
        rc = dft_grid(&d, pk, 1.0 / up, lo, ns, lo, ns, &bx, &by);
    } else {
        /* coarse: every q-th offset from lo to hi (multiples of q), then
         * the offsets within q of the best */
        long q = (long)(up / REFINE_COARSE), m0 = -((-lo) / q), m1 = hi / q;
        uint32_t nc = (uint32_t)(m1 - m0 + 1);
        long cx, cy, fx0, fy0;
        rc = dft_grid(&d, pk, (double)q / up, m0, nc, m0, nc, &cx, &cy);
        if (!rc) {
            uint32_t nx = span(&fx0, cx * q, q, lo, hi), ny = span(&fy0, cy * q, q, lo, hi);
            rc = dft_grid(&d, pk, 1.0 / up, fx0, nx, fy0, ny, &bx, &by);
        }
    }
    free(B);
    if (rc)
        return rc;
    pk->dx = pk->ix + (double)bx / up;
    pk->dy = pk->iy + (double)by / up;
    return PL_OK;
}

static int window_ctx(pc_ctx *c, uint32_t w, uint32_t h, pl_window window, double alpha,
                      unsigned nt)
{
    uint32_t pw = pl_register__fft_length(w, window), ph = pl_register__fft_length(h, window);
    double *wx = malloc(w * sizeof *wx), *wy = malloc(h * sizeof *wy);
    int rc = PL_ENOMEM;
    if (wx && wy) {
        pl_register__window(wx, w, window, alpha);
        pl_register__window(wy, h, window, alpha);
        rc = pc_init(c, w, h, pw, ph, wx, wy, window != PL_WINDOW_NONE, nt);
    }
    free(wx);
    free(wy);
    return rc;
}

int pl_register__translation(pl_register__peak *out, const float *fixed, const float *moving,
                             uint32_t width, uint32_t height, pl_window window,
                             double tukey_alpha, unsigned upsample, pl_err *err)
{
    pc_ctx c;
    if (window_ctx(&c, width, height, window, tukey_alpha, thread_count((size_t)width * height)))
        return pl__err(err, PL_ENOMEM, "registration: out of memory");
    int rc = PL_OK;
    if (!pc_set_fixed(&c, fixed) || !pc_set_moving(&c, moving)) {
        rc = pl__err(err, PL_EINVAL, "registration: an image has no data");
    } else {
        pc_correlate(&c, out, -1);
        if (pc_refine(&c, out, upsample))
            rc = pl__err(err, PL_ENOMEM, "registration: out of memory");
    }
    pc_free(&c);
    return rc;
}

/* ---- rotation and scale: log-polar Fourier magnitudes ----------------------- */

/* The magnitude of a half spectrum (ph x wh of a ph x pw transform). */
static void magnitude(float *mag, const pl_fft__cpx *F, size_t n)
{
    for (size_t k = 0; k < n; k++)
        mag[k] = sqrtf(F[k].r * F[k].r + F[k].i * F[k].i);
}

/* |F| at integer bin (row k, column l), any signs, through the Hermitian
 * symmetry |F(k, l)| = |F(-k, -l)| of a real image's transform. */
static float mag_at(const float *mag, uint32_t ph, uint32_t pw, uint32_t wh, long k, long l)
{
    l %= (long)pw;
    if (l < 0)
        l += pw;
    k %= (long)ph;
    if (k < 0)
        k += ph;
    if (l >= (long)wh) {
        l = (long)pw - l;
        k = k ? (long)ph - k : 0;
    }
    return mag[(size_t)k * wh + (size_t)l];
}

/* Bilinear |F| at frequency (fx, fy) cycles per pixel. */
static double mag_interp(const float *mag, uint32_t ph, uint32_t pw, uint32_t wh, double fx,
                         double fy)
{
    double X = fx * pw, Y = fy * ph;
    double xf = floor(X), yf = floor(Y);
    double ax = X - xf, ay = Y - yf;
    long x0 = (long)xf, y0 = (long)yf;
    double v00 = mag_at(mag, ph, pw, wh, y0, x0), v01 = mag_at(mag, ph, pw, wh, y0, x0 + 1);
    double v10 = mag_at(mag, ph, pw, wh, y0 + 1, x0), v11 = mag_at(mag, ph, pw, wh, y0 + 1, x0 + 1);
    return (1 - ay) * ((1 - ax) * v00 + ax * v01) + ay * ((1 - ax) * v10 + ax * v11);
}

typedef struct lp_job {
    const float *mag;
    uint32_t ph, pw, wh;
    uint32_t na, nr;
    double rmin, lstep;
    float *out;
} lp_job;

/*
 * Rows [b, e) of a log-polar image: row a is the angle pi a / na (from +x
 * toward +y), column r the radius rmin e^{r lstep}; each sample is the
 * magnitude times Reddy and Chatterji's high-pass emphasis
 * (1 - X)(2 - X), X = cos(pi fx) cos(pi fy), which damps the low
 * frequencies where the window's and the borders' energy lies.
 */
static void lp_rows(void *ctx, uint32_t b, uint32_t e, unsigned t)
{
    (void)t;
    lp_job *j = ctx;
    for (uint32_t a = b; a < e; a++) {
        double phi = M_PI * a / j->na, ca = cos(phi), sa = sin(phi);
        float *o = j->out + (size_t)a * j->nr;
        for (uint32_t r = 0; r < j->nr; r++) {
            double rho = j->rmin * exp(j->lstep * r);
            double fx = rho * ca, fy = rho * sa;
            double X = cos(M_PI * fx) * cos(M_PI * fy);
            o[r] = (float)((1.0 - X) * (2.0 - X)
                           * mag_interp(j->mag, j->ph, j->pw, j->wh, fx, fy));
        }
    }
}

static uint32_t lp_angles(uint32_t pw, uint32_t ph)
{
    double want = M_PI / 2.0 * (pw > ph ? pw : ph);
    uint32_t n = LP_MIN_ANGLES;
    while (n < want && n < LP_MAX_ANGLES)
        n *= 2;
    return n;
}

/*
 * Rotation and scale from the spectra F (fixed) and M (moving) of a
 * phase-correlation context: the magnitudes (blind to translation) on
 * log-polar grids, phase-correlated (Reddy and Chatterji 1996). With
 * moving(p) = fixed(c + s R (p - c)), |M|(rho, phi) is proportional to
 * |F|(rho / s, phi + theta): a shift of theta along the angle and of
 * -ln s along the log-radius. The angle axis covers 180 degrees and is
 * periodic (the magnitude is symmetric), so only the radius is windowed.
 */
static int logpolar(double *theta, double *scale, const pc_ctx *c, int want_scale, unsigned up)
{
    uint32_t na = lp_angles(c->pw, c->ph), nr = LP_RADII;
    size_t nm = (size_t)c->ph * c->wh, nl = (size_t)na * nr;
    float *mag = malloc(nm * sizeof *mag);
    float *l1 = malloc(nl * sizeof *l1), *l2 = malloc(nl * sizeof *l2);
    double *wr = malloc(nr * sizeof *wr);
    int rc = PL_ENOMEM;
    pc_ctx lc;
    memset(&lc, 0, sizeof lc);
    if (!mag || !l1 || !l2 || !wr)
        goto done;
    double rmin = LP_RMAX / LP_RANGE, lstep = log(LP_RANGE) / (nr - 1);
    lp_job j = { mag, c->ph, c->pw, c->wh, na, nr, rmin, lstep, l1 };
    magnitude(mag, c->F, nm);
    pl_threads__for(c->nt, na, lp_rows, &j);
    magnitude(mag, c->M, nm);
    j.out = l2;
    pl_threads__for(c->nt, na, lp_rows, &j);
    pl_register__window(wr, nr, PL_WINDOW_HANN, 0.0);
    if (pc_init(&lc, nr, na, nr, na, wr, NULL, 1, c->nt))
        goto done;
    pl_register__peak pk;
    pc_set_fixed(&lc, l1);
    pc_set_moving(&lc, l2);
    pc_correlate(&lc, &pk, want_scale ? -1 : LP_SCALE_LIMIT);
    if (pc_refine(&lc, &pk, up))
        goto done;
    *theta = wrap180(pk.dy * 180.0 / na);
    if (*theta > 90.0)
        *theta -= 180.0;
    else if (*theta <= -90.0)
        *theta += 180.0;
    *scale = want_scale ? exp(-pk.dx * lstep) : 1.0;
    rc = PL_OK;
done:
    pc_free(&lc);
    free(mag);
    free(l1);
    free(l2);
    free(wr);
    return rc;
}

/* The log-polar estimate between two images, their spectra taken under a
 * Hann window (for spectra taken without one: the borders' cross would
 * pull the angle toward zero). */
static int rotation_estimate(double *theta, double *scale, const float *fixed,
                             const float *moving, uint32_t w, uint32_t h, int want_scale,
                             unsigned up, unsigned nt)
{
    pc_ctx c;
    if (window_ctx(&c, w, h, PL_WINDOW_HANN, 0.0, nt))
        return PL_ENOMEM;
    int rc = PL_EINVAL;
    if (pc_set_fixed(&c, fixed) && pc_set_moving(&c, moving))
        rc = logpolar(theta, scale, &c, want_scale, up);
    pc_free(&c);
    return rc;
}

int pl_register__logpolar(double *rotation_deg, double *scale, const float *fixed,
                          const float *moving, uint32_t width, uint32_t height,
                          int want_scale, pl_err *err)
{
    int rc = rotation_estimate(rotation_deg, scale, fixed, moving, width, height, want_scale, 100,
                               thread_count((size_t)width * height));
    if (rc == PL_EINVAL)
        return pl__err(err, rc, "registration: an image has no data");
    if (rc)
        return pl__err(err, rc, "registration: out of memory");
    return PL_OK;
}

/* ---- resampling ------------------------------------------------------------ */

double pl_register__keys(double x)
{
    const double a = -0.5;
    x = fabs(x);
    if (x <= 1.0)
        return ((a + 2.0) * x - (a + 3.0)) * x * x + 1.0;
    if (x < 2.0)
        return ((a * x - 5.0 * a) * x + 8.0 * a) * x - 4.0 * a;
    return 0.0;
}

/* The four weights of a tap run at fraction t in [0, 1] of the way from
 * tap 1 to tap 2: Keys' kernel at t + 1, t, 1 - t, 2 - t in closed form
 * (exactly 0, 1, 0, 0 at t = 0 and 0, 0, 1, 0 at t = 1). */
static inline void cubic_weights(double w[4], double t)
{
    double t2 = t * t, t3 = t2 * t;
    w[0] = 0.5 * (-t3 + 2.0 * t2 - t);
    w[1] = 0.5 * (3.0 * t3 - 5.0 * t2 + 2.0);
    w[2] = 0.5 * (-3.0 * t3 + 4.0 * t2 + t);
    w[3] = 0.5 * (t3 - t2);
}

/* Position to base index and fraction on a side of n pixels; -1 outside
 * [0, n - 1] (with a rounding tolerance). The last pixel is reached as
 * base n - 2, fraction 1, so every tap with a non-zero weight lies within
 * one pixel of the map. */
static long locate(double x, uint32_t n, double *frac)
{
    const double tol = 1e-9;
    if (!(x >= -tol && x <= (double)(n - 1) + tol))
        return -1;
    if (x < 0.0)
        x = 0.0;
    if (x > (double)(n - 1))
        x = (double)(n - 1);
    if (n == 1) {
        *frac = 0.0;
        return 0;
    }
    double f = floor(x);
    long i = (long)f;
    if (i >= (long)n - 1) {
        i = (long)n - 2;
        f = (double)i;
    }
    *frac = x - f;
    return i;
}

/*
 * A tap of a run of n values (stride apart) at index k, which may lie one
 * place outside: Keys' (1981) boundary condition extends the run as
 * f(-1) = 3 f(0) - 3 f(1) + f(2) (and likewise past the end), which keeps
 * the kernel's third-order accuracy, and its exactness on quadratics, up
 * to the edge. Runs shorter than 3 repeat their end value.
 */
static double run_tap(const float *s, size_t stride, uint32_t n, long k)
{
    if (k >= 0 && k < (long)n)
        return s[(size_t)k * stride];
    if (n < 3)
        return s[k < 0 ? 0 : (size_t)(n - 1) * stride];
    if (k < 0)
        return 3.0 * s[0] - 3.0 * s[stride] + s[2 * stride];
    return 3.0 * s[(size_t)(n - 1) * stride] - 3.0 * s[(size_t)(n - 2) * stride]
           + s[(size_t)(n - 3) * stride];
}

typedef struct rs_job {
    float *out;
    uint32_t fw, fh;
    const float *src;
    uint32_t mw, mh;
    double cx, cy;              /* centre of the fixed grid */
    double m00, m01, m10, m11;  /* R(-theta) / s */
    double dx, dy;
    pl_interp interp;
    /* the separable path for a pure shift */
    long *ix;                   /* fw column bases */
    double *wx;                 /* fw x 4 column weights */
    double *tmp;                /* mh x fw rows filtered along x */
} rs_job;

/* One output value from tap bases (ix, iy) and weights; taps with a zero
 * weight are skipped (so a NaN there does not count), taps one pixel
 * outside the map follow run_tap(). */
static double cubic_at(const rs_job *j, long ix, long iy, const double wx[4], const double wy[4])
{
    const float *s = j->src;
    uint32_t w = j->mw, h = j->mh;
    if (ix >= 1 && ix + 2 < (long)w && iy >= 1 && iy + 2 < (long)h) {
        const float *p = s + (size_t)(iy - 1) * w + (size_t)(ix - 1);
        double acc = 0.0;
        for (int b = 0; b < 4; b++, p += w) {
            if (wy[b] == 0.0)
                continue;
            double row = 0.0;
            for (int a = 0; a < 4; a++)
                if (wx[a] != 0.0)
                    row += wx[a] * p[a];
            acc += wy[b] * row;
        }
        return acc;
    }
    double acc = 0.0;
    for (int b = 0; b < 4; b++) {
        if (wy[b] == 0.0)
            continue;
        double row = 0.0;
        for (int a = 0; a < 4; a++) {
            if (wx[a] == 0.0)
                continue;
            long xx = ix + a - 1, yy = iy + b - 1;
            double v;
            if (yy >= 0 && yy < (long)h)
                v = run_tap(s + (size_t)yy * w, 1, w, xx);
            else if (h < 3)
                v = run_tap(s + (size_t)(yy < 0 ? 0 : h - 1) * w, 1, w, xx);
            else {
                const float *r0 = s + (size_t)(yy < 0 ? 0 : h - 1) * w;
                const float *r1 = s + (size_t)(yy < 0 ? 1 : h - 2) * w;
                const float *r2 = s + (size_t)(yy < 0 ? 2 : h - 3) * w;
                v = 3.0 * run_tap(r0, 1, w, xx) - 3.0 * run_tap(r1, 1, w, xx)
                    + run_tap(r2, 1, w, xx);
            }
            row += wx[a] * v;
        }
        acc += wy[b] * row;
    }
    return acc;
}

static double sample(const rs_job *j, double x, double y)
{
    double fx = 0.0, fy = 0.0;
    long ix = locate(x, j->mw, &fx), iy = locate(y, j->mh, &fy);
    if (ix < 0 || iy < 0)
        return NAN;
    if (j->interp == PL_INTERP_BILINEAR) {
        double wxs[2] = { 1.0 - fx, fx }, wys[2] = { 1.0 - fy, fy }, acc = 0.0;
        long x1 = j->mw > 1 ? ix + 1 : ix, y1 = j->mh > 1 ? iy + 1 : iy;
        for (int b = 0; b < 2; b++) {
            if (wys[b] == 0.0)
                continue;
            const float *row = j->src + (size_t)(b ? y1 : iy) * j->mw;
            double r = 0.0;
            if (wxs[0] != 0.0)
                r += wxs[0] * row[ix];
            if (wxs[1] != 0.0)
                r += wxs[1] * row[x1];
            acc += wys[b] * r;
        }
        return acc;
    }
    double wx[4], wy[4];
    cubic_weights(wx, fx);
    cubic_weights(wy, fy);
    return cubic_at(j, ix, iy, wx, wy);
}

/* The 4 x 4 taps of an interior pixel from p (its top left tap) under
 * weights wx, wy: per tap column a, sum_r wy_r (wx_a p_ra), then the four
 * columns added pairwise (one vector of four doubles per row where the
 * compiler has them). */
#if defined(__GNUC__)
static inline double cubic_interior(const float *p, size_t stride, const double wx[4],
                                    const double wy[4])
{
    v4d w, acc;
    v4f t;
    memcpy(&w, wx, sizeof w);
    memcpy(&t, p, sizeof t);
    acc = wy[0] * (w * __builtin_convertvector(t, v4d));
    for (int r = 1; r < 4; r++) {
        memcpy(&t, p + (size_t)r * stride, sizeof t);
        acc += wy[r] * (w * __builtin_convertvector(t, v4d));
    }
    return (acc[0] + acc[1]) + (acc[2] + acc[3]);
}
#else
static inline double cubic_interior(const float *p, size_t stride, const double wx[4],
                                    const double wy[4])
{
    double acc[4];
    for (int a = 0; a < 4; a++) {
        acc[a] = wy[0] * (wx[a] * p[a]);
        for (int r = 1; r < 4; r++)
            acc[a] += wy[r] * (wx[a] * p[(size_t)r * stride + (size_t)a]);
    }
    return (acc[0] + acc[1]) + (acc[2] + acc[3]);
}
#endif

/*
 * The general path, bicubic: a source position whose 4 x 4 taps all lie
 * inside the map (the interior, most of an image) is computed directly,
 * by cubic_interior() with the weights of cubic_at(), without its tests
 * (the same value up to the order of the additions); the taps of a zero
 * weight then enter as 0 x value, which changes nothing while
 * the values are finite, so a result that is not finite is redone by
 * sample() (which skips those taps). Everything else goes to sample().
 */
GEMM_KERNEL static void rs_rows(void *ctx, uint32_t b, uint32_t e, unsigned t)
{
    (void)t;
    rs_job *j = ctx;
    const double xmax = (double)j->mw - 2.0, ymax = (double)j->mh - 2.0;
    const int fast = j->interp == PL_INTERP_BICUBIC && j->mw >= 4 && j->mh >= 4;
#define PL_INSIDE(sx, sy) ((sx) >= 1.0 && (sx) < xmax && (sy) >= 1.0 && (sy) < ymax)
    for (uint32_t y = b; y < e; y++) {
        float *o = j->out + (size_t)y * j->fw;
        double py = (double)y - j->cy - j->dy;
        uint32_t x = 0;
        for (; x < j->fw; x++) {
            double px = (double)x - j->cx - j->dx;
            double sx = j->cx + j->m00 * px + j->m01 * py;
            double sy = j->cy + j->m10 * px + j->m11 * py;
            if (fast && PL_INSIDE(sx, sy)) {
                /* positive here: truncation is the floor */
                long ix = (long)sx, iy = (long)sy;
                double wx[4], wy[4];
                cubic_weights(wx, sx - (double)ix);
                cubic_weights(wy, sy - (double)iy);
                double acc = cubic_interior(
                    j->src + (size_t)(iy - 1) * j->mw + (size_t)(ix - 1), j->mw, wx, wy);
                if (isfinite(acc)) {
                    o[x] = (float)acc;
                    continue;
                }
            }
            o[x] = (float)sample(j, sx, sy);
        }
    }
#undef PL_INSIDE
}

/* Separable pass 1: source rows [b, e) filtered along x for every output
 * column (NaN for a column whose source lies outside). */
static void rs_shift_rows(void *ctx, uint32_t b, uint32_t e, unsigned t)
{
    (void)t;
    rs_job *j = ctx;
    for (uint32_t yy = b; yy < e; yy++) {
        const float *row = j->src + (size_t)yy * j->mw;
        double *o = j->tmp + (size_t)yy * j->fw;
        for (uint32_t x = 0; x < j->fw; x++) {
            long ix = j->ix[x];
            const double *w = j->wx + 4 * (size_t)x;
            if (ix < 0) {
                o[x] = NAN;
                continue;
            }
            double acc = 0.0;
            if (ix >= 1 && ix + 2 < (long)j->mw) {
                for (int a = 0; a < 4; a++)
                    if (w[a] != 0.0)
                        acc += w[a] * row[ix + a - 1];
            } else {
                for (int a = 0; a < 4; a++)
                    if (w[a] != 0.0)
                        acc += w[a] * run_tap(row, 1, j->mw, ix + a - 1);
            }
            o[x] = acc;
        }
    }
}

/* Separable pass 2: output rows [b, e) filtered down the columns. */
static void rs_shift_cols(void *ctx, uint32_t b, uint32_t e, unsigned t)
{
    (void)t;
    rs_job *j = ctx;
    for (uint32_t y = b; y < e; y++) {
        float *o = j->out + (size_t)y * j->fw;
        double py = (double)y - j->cy - j->dy, fy, wy[4];
        long iy = locate(j->cy + j->m11 * py, j->mh, &fy);
        if (iy < 0) {
            for (uint32_t x = 0; x < j->fw; x++)
                o[x] = NAN;
            continue;
        }
        cubic_weights(wy, fy);
        const double *rows[4];
        int extra[4] = { 0, 0, 0, 0 }; /* -1: before the first row, 1: after the last */
        for (int k = 0; k < 4; k++) {
            long yy = iy + k - 1;
            extra[k] = yy < 0 ? -1 : yy >= (long)j->mh ? 1 : 0;
            rows[k] = extra[k] ? NULL : j->tmp + (size_t)yy * j->fw;
        }
        for (uint32_t x = 0; x < j->fw; x++) {
            double acc = 0.0;
            for (int k = 0; k < 4; k++) {
                if (wy[k] == 0.0)
                    continue;
                double v;
                if (!extra[k])
                    v = rows[k][x];
                else {
                    uint32_t n = j->mh;
                    const double *c = j->tmp + x;
                    size_t st = j->fw;
                    if (n < 3)
                        v = c[extra[k] < 0 ? 0 : (size_t)(n - 1) * st];
                    else if (extra[k] < 0)
                        v = 3.0 * c[0] - 3.0 * c[st] + c[2 * st];
                    else
                        v = 3.0 * c[(size_t)(n - 1) * st] - 3.0 * c[(size_t)(n - 2) * st]
                            + c[(size_t)(n - 3) * st];
                }
                acc += wy[k] * v;
            }
            o[x] = (float)acc;
        }
    }
}

static int transform_ok(const pl_transform *t)
{
    return isfinite(t->dx) && isfinite(t->dy) && isfinite(t->rotation_deg)
           && isfinite(t->scale) && t->scale > 0.0;
}

/*
 * The inverse of the transform: pixel p_b of the fixed grid shows moving's
 * p_c = c + R(-theta) (p_b - c - d) / s. A pure shift under the cubic
 * kernel (the common case: translation-only registration and its score)
 * has the same weights along every row and every column, so it runs as
 * two one-dimensional passes, four taps each instead of sixteen; the
 * values are those of the direct path up to rounding.
 */
static void resample_run(float *out, uint32_t fw, uint32_t fh, const float *moving, uint32_t mw,
                         uint32_t mh, const pl_transform *t, pl_interp interp)
{
    double th = pl__deg2rad(t->rotation_deg), cs = cos(th) / t->scale, sn = sin(th) / t->scale;
    if (t->rotation_deg == 0.0) {
        cs = 1.0 / t->scale;
        sn = 0.0;
    }
    rs_job j = { out, fw, fh, moving, mw, mh, ((double)fw - 1.0) / 2.0, ((double)fh - 1.0) / 2.0,
                 cs, sn, -sn, cs, t->dx, t->dy, interp, NULL, NULL, NULL };
    unsigned nt = thread_count((size_t)fw * fh);
    if (interp == PL_INTERP_BICUBIC && sn == 0.0 && cs == 1.0) {
        j.ix = malloc(fw * sizeof *j.ix);
        j.wx = malloc(4 * (size_t)fw * sizeof *j.wx);
        j.tmp = malloc((size_t)mh * fw * sizeof *j.tmp);
        if (j.ix && j.wx && j.tmp) {
            for (uint32_t x = 0; x < fw; x++) {
                double fx, px = (double)x - j.cx - j.dx;
                j.ix[x] = locate(j.cx + j.m00 * px, mw, &fx);
                cubic_weights(j.wx + 4 * (size_t)x, j.ix[x] < 0 ? 0.0 : fx);
            }
            pl_threads__for(nt, mh, rs_shift_rows, &j);
            pl_threads__for(nt, fh, rs_shift_cols, &j);
            free(j.ix);
            free(j.wx);
            free(j.tmp);
            return;
        }
        free(j.ix);
        free(j.wx);
        free(j.tmp);
    }
    pl_threads__for(nt, fh, rs_rows, &j);
}

int pl_register_resample(float *out, uint32_t fw, uint32_t fh, const float *moving, uint32_t mw,
                         uint32_t mh, const pl_transform *t, pl_interp interp, pl_err *err)
{
    assert(out && moving && t);
    if (!fw || !fh || !mw || !mh || fw > PL_MAP_MAX_SIDE || fh > PL_MAP_MAX_SIDE
        || mw > PL_MAP_MAX_SIDE || mh > PL_MAP_MAX_SIDE)
        return pl__err(err, PL_EINVAL, "resampling: grid size %ux%u or %ux%u out of range", fw,
                       fh, mw, mh);
    if (!transform_ok(t))
        return pl__err(err, PL_EINVAL, "resampling: transform not finite or scale not positive");
    if (interp != PL_INTERP_BICUBIC && interp != PL_INTERP_BILINEAR)
        return pl__err(err, PL_EINVAL, "resampling: unknown interpolation %d", (int)interp);
    resample_run(out, fw, fh, moving, mw, mh, t, interp);
    return PL_OK;
}

/* ---- quality ---------------------------------------------------------------- */

/* Pearson's r of a and b over the pixels where a, b and mask (NULL: no
 * mask) all hold data; count: their number. */
static double pearson_where(const float *a, const float *b, const float *mask, size_t n,
                            size_t *count)
{
    double sa = 0.0, sb = 0.0;
    size_t m = 0;
#define PL_BOTH(i) (isfinite(a[i]) && isfinite(b[i]) && (!mask || isfinite(mask[i])))
    for (size_t i = 0; i < n; i++)
        if (PL_BOTH(i)) {
            sa += a[i];
            sb += b[i];
            m++;
        }
    *count = m;
    if (m < 2)
        return NAN;
    double ma = sa / (double)m, mb = sb / (double)m, sab = 0.0, saa = 0.0, sbb = 0.0;
    for (size_t i = 0; i < n; i++)
        if (PL_BOTH(i)) {
            double da = a[i] - ma, db = b[i] - mb;
            sab += da * db;
            saa += da * da;
            sbb += db * db;
        }
#undef PL_BOTH
    if (!(saa > 0.0 && sbb > 0.0))
        return NAN;
    return sab / sqrt(saa * sbb);
}

/* Pearson's r over the pixels where both have data, and their count. */
static double pearson(const float *a, const float *b, size_t n, size_t *count)
{
    double sa = 0.0, sb = 0.0;
    size_t m = 0;
    for (size_t i = 0; i < n; i++)
        if (isfinite(a[i]) && isfinite(b[i])) {
            sa += a[i];
            sb += b[i];
            m++;
        }
    *count = m;
    if (m < 2)
        return NAN;
    double ma = sa / (double)m, mb = sb / (double)m, sab = 0.0, saa = 0.0, sbb = 0.0;
    for (size_t i = 0; i < n; i++)
        if (isfinite(a[i]) && isfinite(b[i])) {
            double da = a[i] - ma, db = b[i] - mb;
            sab += da * db;
            saa += da * da;
            sbb += db * db;
        }
    if (!(saa > 0.0 && sbb > 0.0))
        return NAN;
    return sab / sqrt(saa * sbb);
}

/* Apply the quality limits; a NaN figure fails its limit. */
static void judge(pl_register_result *res, double min_ncc, double min_psr)
{
    char a[120] = "", b[120] = "";
    if (!(res->ncc >= min_ncc))
        snprintf(a, sizeof a, "normalised cross-correlation %.4g below the limit %.4g", res->ncc,
                 min_ncc);
    if (!(res->psr >= min_psr))
        snprintf(b, sizeof b, "peak-to-sidelobe ratio %.4g below the limit %.4g", res->psr,
                 min_psr);
    res->refused = a[0] || b[0];
    if (res->refused)
        snprintf(res->reason, sizeof res->reason, "%s%s%s", a, a[0] && b[0] ? "; " : "", b);
    else
        res->reason[0] = '\0';
}

/* ---- registration of two images --------------------------------------------- */

static int check_options(pl_register_options *o, const pl_register_options *in, pl_err *err)
{
    pl_register_options def = PL_REGISTER_OPTIONS_INIT;
    *o = in ? *in : def;
    if (o->version != PL_REGISTER_OPTIONS_VERSION)
        return pl__err(err, PL_EINVAL, "registration options: unknown version %u", o->version);
    if (o->upsample < 1 || o->upsample > MAX_UPSAMPLE)
        return pl__err(err, PL_EINVAL, "registration options: upsample %u not in 1..%u",
                       o->upsample, MAX_UPSAMPLE);
    if (o->window != PL_WINDOW_HANN && o->window != PL_WINDOW_TUKEY
        && o->window != PL_WINDOW_NONE)
        return pl__err(err, PL_EINVAL, "registration options: unknown window %d", (int)o->window);
    if (o->window == PL_WINDOW_TUKEY && !(o->tukey_alpha >= 0.0 && o->tukey_alpha <= 1.0))
        return pl__err(err, PL_EINVAL, "registration options: tukey_alpha %g not in [0, 1]",
                       o->tukey_alpha);
    if (o->interp != PL_INTERP_BICUBIC && o->interp != PL_INTERP_BILINEAR)
        return pl__err(err, PL_EINVAL, "registration options: unknown interpolation %d",
                       (int)o->interp);
    if (!(o->min_ncc >= -1.0 && o->min_ncc <= 1.0))
        return pl__err(err, PL_EINVAL, "registration options: min_ncc %g not in [-1, 1]",
                       o->min_ncc);
    if (!(o->min_psr >= 0.0 && isfinite(o->min_psr)))
        return pl__err(err, PL_EINVAL, "registration options: min_psr %g not a number >= 0",
                       o->min_psr);
    if (!(o->max_rotation_deg >= 0.0 && o->max_rotation_deg <= 180.0))
        return pl__err(err, PL_EINVAL,
                       "registration options: max_rotation_deg %g not in [0, 180]",
                       o->max_rotation_deg);
    return PL_OK;
}

static void result_init(pl_register_result *res)
{
    static const pl_transform id = PL_TRANSFORM_IDENTITY;
    memset(res, 0, sizeof *res);
    res->transform = id;
    res->nominal = id;
    res->shift_u_mm = res->shift_v_mm = NAN;
    res->ncc = res->psr = NAN;
    res->overlap_fraction = 0.0;
    res->overlap_mm2 = NAN;
}

/* ---- smoothing and despeckling ------------------------------------------------ */

/* Two images at once on two threads (large images): despeckle or blur. */
typedef struct pair_job {
    const float *src[2];
    float *out[2];
    uint32_t w, h;
    double sigma;  /* > 0: blur, else despeckle */
    int failed[2];
} pair_job;

static void pair_run(void *ctx, uint32_t b, uint32_t e, unsigned t)
{
    (void)t;
    pair_job *j = ctx;
    for (uint32_t k = b; k < e; k++)
        j->failed[k] = j->sigma > 0.0
                           ? pl_filter__gauss(&j->out[k], j->src[k], j->w, j->h, j->sigma)
                           : pl_filter__despeckle(&j->out[k], j->src[k], j->w, j->h);
}

static int pair_apply(float **a_out, float **b_out, const float *a, const float *b, uint32_t w,
                      uint32_t h, double sigma)
{
    pair_job j = { { a, b }, { NULL, NULL }, w, h, sigma, { 0, 0 } };
    pl_threads__for(thread_count((size_t)w * h) > 1 ? 2 : 1, 2, pair_run, &j);
    if (j.failed[0] || j.failed[1]) {
        free(j.out[0]);
        free(j.out[1]);
        *a_out = *b_out = NULL;
        return PL_ENOMEM;
    }
    *a_out = j.out[0];
    *b_out = j.out[1];
    return PL_OK;
}

/* ---- refinement ------------------------------------------------------------ */

/*
 * The log-polar stage leaves a few hundredths to a tenth of a degree on
 * photographs, and on small smooth maps much more: the magnitudes are
 * sampled between the bins, and that interpolation (and the aliasing near
 * Nyquist, which the high-pass stresses) is the same pattern in both
 * log-polar images, which pulls their correlation toward zero rotation
 * (measured on the tests' photographs: up to 0.09 degrees at 5 degrees;
 * neither a second pass on the aligned pair nor another radial band
 * removed it); and on small noisy maps the integer peak of the translation
 * search can lie a pixel or two off. So, with rotation on, the transform
 * is refined locally, from the phase-correlation estimate, by Gauss-Newton
 * minimisation over the overlap of
 *
 *     sum (a g(p) + b - f(p))^2,   g = moving resampled through T
 *
 * in the rotation, the shift (and the scale when asked for), with a gain a
 * and an offset b for maps whose levels differ (Lucas and Kanade 1981, "An
 * iterative image registration technique with an application to stereo
 * vision"; the forward-compositional form of Baker and Matthews 2004,
 * "Lucas-Kanade 20 years on: a unifying framework", IJCV 56(3)). A small
 * motion dT after T moves g by -grad g . u(p), u(p) = dtheta J (p - c) +
 * ds (p - c) + dd. Both images come smoothed by a Gaussian of GN_SIGMA
 * pixels (pair_apply(), once per pair, however many starts are refined):
 * it lowers the noise in the gradients and makes a difference in how the
 * two were sampled (a camera's pixel footprint, the simulator's bilinear
 * sampling) negligible. The result is kept only when
 * the iteration converges, stays within GN_MAX_MOVE of its start at the
 * image's corners and does not lower the correlation over the overlap.
 */
#define GN_SIGMA 1.0
#define GN_MAX_ITER 30
#define GN_STEP_PX 1e-3     /* converged: no parameter moves a corner more */
#define GN_MAX_MOVE 0.1     /* of the smaller side, in pixels at the corners */
#define GN_NPAR 6           /* theta, dx, dy, a, b, s */
#define REFINE_SLACK 0.01   /* see the end of refine_rigid() */

/*
 * The normal equations are summed over GN_SLICES fixed slices of the rows
 * (one slice for images too small to share out), row by row within a
 * slice and then slice by slice, whatever thread takes a slice: the
 * result never depends on the thread count. Two halves: the split that
 * two threads made when it followed the thread count, so that results
 * computed then on two processors stay as they were.
 */
#define GN_SLICES 2u

typedef struct gn_job {
    const float *f, *g;
    uint32_t w, h;
    double cx, cy, a, b;
    int npar;
    uint32_t slices;
    double sums[GN_SLICES][GN_NPAR * GN_NPAR + GN_NPAR + 1];
} gn_job;

/* One pixel's terms into H (lower triangle, GN_NPAR x GN_NPAR), v and
 * the count v[GN_NPAR]; pixels without data in f, g or the gradient add
 * nothing. */
static inline void gn_pixel(double *H, double *v, const gn_job *j, uint32_t x, uint32_t y)
{
    size_t p = (size_t)y * j->w + x;
    double f = j->f[p], g = j->g[p];
    double gx = 0.5 * ((double)j->g[p + 1] - j->g[p - 1]);
    double gy = 0.5 * ((double)j->g[p + j->w] - j->g[p - j->w]);
    if (!isfinite(f) || !isfinite(g) || !isfinite(gx) || !isfinite(gy))
        return;
    double rx = x - j->cx, ry = y - j->cy, a = j->a;
    double J[GN_NPAR] = { -a * (gy * rx - gx * ry), -a * gx, -a * gy, g, 1.0,
                          -a * (gx * rx + gy * ry) };
    double r = a * g + j->b - f;
    for (int k = 0; k < GN_NPAR; k++) {
        for (int l = 0; l <= k; l++)
            H[k * GN_NPAR + l] += J[k] * J[l];
        v[k] += J[k] * r;
    }
    v[GN_NPAR] += 1.0;
}

/*
 * Rows [y0, y1) into the sums of slice `slice`. The interior of a row runs
 * four pixels at a time in vectors of doubles (each lane its own partial
 * sums, added at the end of the slice); a pixel without data is masked to
 * zero weight. The parameters a scale-free fit does not use are summed
 * too and left unused (the normal equations of the first npar are the
 * same).
 */
#if defined(__GNUC__)
static inline v4f load4(const float *p)
{
    v4f v;
    memcpy(&v, p, sizeof v);
    return v;
}

/* 1 in the lanes where the value is finite (x - x is 0 only there), 0 else */
static inline v4i finite4(v4f x)
{
    return (v4i)(x - x == (v4f){ 0 });
}

#define GN_NSUM (GN_NPAR * (GN_NPAR + 1) / 2 + GN_NPAR + 1)

GEMM_KERNEL static void gn_rows(gn_job *j, uint32_t slice, uint32_t y0, uint32_t y1)
{
    double *H = j->sums[slice], *v = H + GN_NPAR * GN_NPAR;
    memset(j->sums[slice], 0, sizeof j->sums[slice]);
    v4d acc[GN_NSUM];
    memset(acc, 0, sizeof acc);
    const v4d half = { 0.5, 0.5, 0.5, 0.5 };
    const double a = j->a;
    for (uint32_t y = y0 < 1 ? 1 : y0; y < y1 && y + 1 < j->h; y++) {
        uint32_t x = 1;
        const double ry0 = y - j->cy;
        const v4d ry = { ry0, ry0, ry0, ry0 };
        for (; x + 4 < j->w; x += 4) {
            size_t p = (size_t)y * j->w + x;
            v4f f4 = load4(j->f + p), g4 = load4(j->g + p);
            v4f gx4 = load4(j->g + p + 1) - load4(j->g + p - 1);
            v4f gy4 = load4(j->g + p + j->w) - load4(j->g + p - j->w);
            v4i ok = finite4(f4) & finite4(g4) & finite4(gx4) & finite4(gy4);
            f4 = (v4f)((v4i)f4 & ok);
            g4 = (v4f)((v4i)g4 & ok);
            gx4 = (v4f)((v4i)gx4 & ok);
            gy4 = (v4f)((v4i)gy4 & ok);
            v4d m = __builtin_convertvector(ok & 1, v4d);
            v4d f = __builtin_convertvector(f4, v4d), g = __builtin_convertvector(g4, v4d);
            v4d gx = half * __builtin_convertvector(gx4, v4d);
            v4d gy = half * __builtin_convertvector(gy4, v4d);
            v4d rx = { x - j->cx, x + 1 - j->cx, x + 2 - j->cx, x + 3 - j->cx };
            v4d J[GN_NPAR] = { -a * (gy * rx - gx * ry), -a * gx, -a * gy, g, m,
                               -a * (gx * rx + gy * ry) };
            v4d r = (a * g + j->b - f) * m;
            int q = 0;
            for (int k = 0; k < GN_NPAR; k++) {
                for (int l = 0; l <= k; l++)
                    acc[q++] += J[k] * J[l];
                acc[q++] += J[k] * r;
            }
            acc[q] += m;
        }
        for (; x + 1 < j->w; x++)
            gn_pixel(H, v, j, x, y);
    }
    int q = 0;
    for (int k = 0; k < GN_NPAR; k++) {
        for (int l = 0; l <= k; l++, q++)
            H[k * GN_NPAR + l] += (acc[q][0] + acc[q][1]) + (acc[q][2] + acc[q][3]);
        v[k] += (acc[q][0] + acc[q][1]) + (acc[q][2] + acc[q][3]);
        q++;
    }
    v[GN_NPAR] += (acc[q][0] + acc[q][1]) + (acc[q][2] + acc[q][3]);
}
#else
static void gn_rows(gn_job *j, uint32_t slice, uint32_t y0, uint32_t y1)
{
    double *H = j->sums[slice], *v = H + GN_NPAR * GN_NPAR;
    memset(j->sums[slice], 0, sizeof j->sums[slice]);
    for (uint32_t y = y0 < 1 ? 1 : y0; y < y1 && y + 1 < j->h; y++)
        for (uint32_t x = 1; x + 1 < j->w; x++)
            gn_pixel(H, v, j, x, y);
}
#endif

static void gn_slices(void *ctx, uint32_t b, uint32_t e, unsigned t)
{
    (void)t;
    gn_job *j = ctx;
    for (uint32_t s = b; s < e; s++)
        gn_rows(j, s, (uint32_t)((uint64_t)j->h * s / j->slices),
                (uint32_t)((uint64_t)j->h * (s + 1) / j->slices));
}

/* Solve the n x n system H x = v (lower triangle of H filled) by
 * Cholesky; 0 when H is not positive definite. */
static int solve_spd(double *x, const double *H, const double *v, int n)
{
    double L[GN_NPAR][GN_NPAR] = { { 0 } }, z[GN_NPAR];
    for (int i = 0; i < n; i++)
        for (int j = 0; j <= i; j++) {
            double s = H[i * GN_NPAR + j];
            for (int k = 0; k < j; k++)
                s -= L[i][k] * L[j][k];
            if (i == j) {
                if (!(s > 0.0))
                    return 0;
                L[i][i] = sqrt(s);
            } else {
                L[i][j] = s / L[j][j];
            }
        }
    for (int i = 0; i < n; i++) {
        double s = v[i];
        for (int k = 0; k < i; k++)
            s -= L[i][k] * z[k];
        z[i] = s / L[i][i];
    }
    for (int i = n - 1; i >= 0; i--) {
        double s = z[i];
        for (int k = i + 1; k < n; k++)
            s -= L[k][i] * x[k];
        x[i] = s / L[i][i];
    }
    return 1;
}

/* Largest displacement of the image's corners between two transforms. */
static double corner_move(const pl_transform *a, const pl_transform *b, uint32_t w, uint32_t h)
{
    double cx = (w - 1.0) / 2.0, cy = (h - 1.0) / 2.0, worst = 0.0;
    for (int k = 0; k < 4; k++) {
        double px = (k & 1) ? cx : -cx, py = (k & 2) ? cy : -cy, q[2][2];
        const pl_transform *t[2] = { a, b };
        for (int i = 0; i < 2; i++) {
            double th = pl__deg2rad(t[i]->rotation_deg), s = t[i]->scale;
            q[i][0] = s * (cos(th) * px - sin(th) * py) + t[i]->dx;
            q[i][1] = s * (sin(th) * px + cos(th) * py) + t[i]->dy;
        }
        worst = fmax(worst, hypot(q[0][0] - q[1][0], q[0][1] - q[1][1]));
    }
    return worst;
}

/* fs, ms: the fixed and moving images smoothed by GN_SIGMA. */
static int refine_rigid(pl_transform *t, const float *fs, const float *ms, uint32_t w,
                        uint32_t h, int want_scale, pl_interp interp, unsigned nt)
{
    size_t np = (size_t)w * h;
    float *g = malloc(np * sizeof *g), *g0 = malloc(np * sizeof *g0);
    gn_job *j = malloc(sizeof *j);
    if (!g || !g0 || !j) {
        free(g);
        free(g0);
        free(j);
        return PL_ENOMEM;
    }
    pl_transform cur = *t;
    double rad = hypot(w, h) / 2.0, limit = GN_MAX_MOVE * (w < h ? w : h);
    int converged = 0;
    j->f = fs;
    j->g = g;
    j->w = w;
    j->h = h;
    j->cx = (w - 1.0) / 2.0;
    j->cy = (h - 1.0) / 2.0;
    j->npar = want_scale ? 6 : 5;
    j->slices = np < PARALLEL_MIN_PIXELS ? 1 : GN_SLICES;
    resample_run(g, w, h, ms, w, h, &cur, interp);
    memcpy(g0, g, np * sizeof *g0);
    /* gain and offset to start from: least squares of f on g */
    double sg = 0, sf = 0, sgg = 0, sgf = 0, n = 0;
    for (size_t p = 0; p < np; p++)
        if (isfinite(g[p]) && isfinite(fs[p])) {
            sg += g[p];
            sf += fs[p];
            sgg += (double)g[p] * g[p];
            sgf += (double)g[p] * fs[p];
            n++;
        }
    double var = n > 1 ? sgg - sg * sg / n : 0.0;
    j->a = var > 0.0 ? (sgf - sg * sf / n) / var : 1.0;
    j->b = n > 0 ? (sf - j->a * sg) / n : 0.0;
    for (int it = 0; it < GN_MAX_ITER && var > 0.0 && !converged; it++) {
        if (it)
            resample_run(g, w, h, ms, w, h, &cur, interp);
        pl_threads__for(nt, j->slices, gn_slices, j);
        double H[GN_NPAR * GN_NPAR] = { 0 }, v[GN_NPAR] = { 0 }, x[GN_NPAR], cnt = 0;
        for (uint32_t k = 0; k < j->slices; k++) {
            for (int q = 0; q < GN_NPAR * GN_NPAR; q++)
                H[q] += j->sums[k][q];
            for (int q = 0; q < GN_NPAR; q++)
                v[q] -= j->sums[k][GN_NPAR * GN_NPAR + q];
            cnt += j->sums[k][GN_NPAR * GN_NPAR + GN_NPAR];
        }
        if (cnt < 16 || !solve_spd(x, H, v, j->npar))
            break;
        double dth = x[0], ds = want_scale ? x[5] : 0.0;
        if (!isfinite(dth) || !isfinite(x[1]) || !isfinite(x[2]) || !isfinite(ds))
            break;
        /* cur <- dT o cur: p_b' = c + (1 + ds) R(dth) (p_b - c) + dd */
        double cs = (1.0 + ds) * cos(dth), sn = (1.0 + ds) * sin(dth);
        double ndx = cs * cur.dx - sn * cur.dy + x[1], ndy = sn * cur.dx + cs * cur.dy + x[2];
        cur.dx = ndx;
        cur.dy = ndy;
        cur.rotation_deg = wrap180(cur.rotation_deg + pl__rad2deg(dth));
        cur.scale *= 1.0 + ds;
        j->a += x[3];
        j->b += x[4];
        converged = fabs(dth) * rad < GN_STEP_PX && fabs(ds) * rad < GN_STEP_PX
                    && hypot(x[1], x[2]) < GN_STEP_PX;
        if (corner_move(&cur, t, w, h) > limit || !(cur.scale > 0.0))
            break;
    }
    if (converged && corner_move(&cur, t, w, h) <= limit) {
        /* The correlations before and after, over the same pixels (those
         * with data in both): over each one's own overlap the pixels
         * gained or lost at the edges can outweigh the gain of a step
         * onto the optimum. And near the optimum the correlation and the
         * least-squares fit part at the level of the resampling's own
         * error, so the step may lower the correlation by REFINE_SLACK
         * of its distance from 1 (a wrong basin lowers it far more).
         * Without both, steps onto the truth were refused on 640 x 512
         * photograph pairs while this was written (0.0115 px and 0.002
         * degrees left at 2 degrees, 0.006 px and 0.001 degrees at 0.5);
         * tests/test_register.c holds the limits. */
        size_t cnt0, cnt1;
        resample_run(g, w, h, ms, w, h, &cur, interp);
        double r0 = pearson_where(fs, g0, g, np, &cnt0), r1 = pearson_where(fs, g, g0, np, &cnt1);
        if (r1 >= r0 - REFINE_SLACK * (1.0 - r0))
            *t = cur;
    }
    free(g);
    free(g0);
    free(j);
    return PL_OK;
}

/* Pearson's r of fixed and moving resampled through t (into buf); both:
 * the pixels with data in both. */
static double aligned_ncc(float *buf, const float *fixed, const float *moving, uint32_t w,
                          uint32_t h, const pl_transform *t, pl_interp interp, size_t *both)
{
    resample_run(buf, w, h, moving, w, h, t, interp);
    return pearson(fixed, buf, (size_t)w * h, both);
}

/* Phase-correlate `moving` de-rotated by (theta, s) against the fixed
 * image of c; the integer peak into pk (the cross-power stays in c). */
static void derotated_peak(pc_ctx *c, pl_register__peak *pk, float *buf, const float *moving,
                           double theta, double s, pl_interp interp)
{
    pl_transform r = { 0.0, 0.0, theta, s };
    resample_run(buf, c->w, c->h, moving, c->w, c->h, &r, interp);
    if (!pc_set_moving(c, buf)) {
        pk->peak = -INFINITY;
        pk->psr = NAN;
        return;
    }
    pc_correlate(c, pk, -1);
}

/*
 * The search: the transform carrying `moving` onto `fixed` (same size),
 * the PSR of the translation search kept and, rotation on, the
 * correlation of the pair aligned by it (NaN with rotation off). Rotation
 * off: the phase correlation and its sub-pixel refinement. Rotation on:
 * the log-polar estimate theta (and s); three candidates, theta + 180
 * degrees (the magnitudes cannot tell it from theta), no rotation (which
 * the log-polar stage resolves poorly on small maps) and theta, each
 * de-rotated about the centre and phase-correlated; those whose normalised
 * peak reaches CANDIDATE_RATIO of the best (and whose turn is within
 * max_rotation_deg) are refined (sub-pixel shift, then refine_rigid() on
 * fs and ms, the pair smoothed by GN_SIGMA) and the one with the highest
 * correlation over the overlap kept; then a start from no residual (see
 * there). On a photograph one candidate stands out; on a small noisy map
 * of nearly symmetric structure (a stringer crossing a frame) the peaks
 * are close and the correlation after refinement decides.
 */
static int search(pl_transform *t, double *psr, double *ncc_out, const float *fixed,
                  const float *moving, const float *fs, const float *ms, uint32_t w, uint32_t h,
                  const pl_register_options *o, pl_err *err)
{
    pc_ctx c;
    size_t np = (size_t)w * h;
    unsigned nt = thread_count(np);
    *ncc_out = NAN;
    if (window_ctx(&c, w, h, o->window, o->tukey_alpha, nt))
        return pl__err(err, PL_ENOMEM, "registration: out of memory");
    int rc = PL_OK;
    float *buf = NULL;
    pl_register__peak pk;
    if (!pc_set_fixed(&c, fixed)) {
        rc = pl__err(err, PL_EINVAL, "registration: the fixed image has no data");
        goto done;
    }
    if (!pc_set_moving(&c, moving)) {
        rc = pl__err(err, PL_EINVAL, "registration: the moving image has no data");
        goto done;
    }
    t->rotation_deg = 0.0;
    t->scale = 1.0;
    if (!o->rotation) {
        pc_correlate(&c, &pk, -1);
        if (pc_refine(&c, &pk, o->upsample))
            rc = pl__err(err, PL_ENOMEM, "registration: out of memory");
        t->dx = pk.dx;
        t->dy = pk.dy;
        *psr = pk.psr;
        goto done;
    }
    /* the log-polar estimate from the spectra just taken, unless they were
     * taken without a window (rotation_estimate() then takes its own) */
    double theta = 0.0, s = 1.0;
    buf = malloc(np * sizeof *buf);
    if (!buf
        || (o->window == PL_WINDOW_NONE
                ? rotation_estimate(&theta, &s, fixed, moving, w, h, o->scale, o->upsample, nt)
                : logpolar(&theta, &s, &c, o->scale, o->upsample))) {
        rc = pl__err(err, PL_ENOMEM, "registration: out of memory");
        goto done;
    }
    /* the candidates: theta + 180, none, theta */
    double cand[3][2] = { { wrap180(theta + 180.0), s }, { 0.0, 1.0 }, { theta, s } };
    pl_register__peak cp[3];
    int order[3] = { 2, 1, 0 }, last = 2;
    for (int k = 0; k < 3; k++) {
        derotated_peak(&c, &cp[k], buf, moving, cand[k][0], cand[k][1], o->interp);
        /* a turn beyond the bound is not a placement error: never chosen */
        if (fabs(cand[k][0]) > o->max_rotation_deg)
            cp[k].peak = -INFINITY;
    }
    for (int i = 1; i < 3; i++) /* by peak, the log-polar estimate first on ties */
        for (int k = i; k > 0 && cp[order[k]].peak > cp[order[k - 1]].peak; k--) {
            int tmp = order[k];
            order[k] = order[k - 1];
            order[k - 1] = tmp;
        }
    if (!isfinite(cp[order[0]].peak)) {
        rc = pl__err(err, PL_EINVAL, "registration: the moving image has no data");
        goto done;
    }
    double best_ncc = -INFINITY;
    size_t cnt;
    for (int r = 0; r < 3; r++) {
        int k = order[r];
        if (r > 0 && !(cp[k].peak >= CANDIDATE_RATIO * cp[order[0]].peak))
            break;
        if (k != last) /* the cross-power spectrum must be this candidate's */
            derotated_peak(&c, &cp[k], buf, moving, cand[k][0], cand[k][1], o->interp);
        last = k;
        if (pc_refine(&c, &cp[k], o->upsample)) {
            rc = pl__err(err, PL_ENOMEM, "registration: out of memory");
            goto done;
        }
        pl_transform tk = { cp[k].dx, cp[k].dy, cand[k][0], cand[k][1] };
        if (refine_rigid(&tk, fs, ms, w, h, o->scale, o->interp, nt)) {
            rc = pl__err(err, PL_ENOMEM, "registration: out of memory");
            goto done;
        }
        double ncc = aligned_ncc(buf, fixed, moving, w, h, &tk, o->interp, &cnt);
        if (r == 0 || ncc > best_ncc) {
            best_ncc = ncc;
            *t = tk;
            *psr = cp[k].psr;
        }
    }
    /* One more start: no residual at all, refined coarse (on the pair
     * smoothed by START_SIGMA, then GN_SIGMA) to fine. The nominal
     * transform has already taken out what the placements record, so the
     * truth lies near it; on smooth, nearly symmetric texture the
     * correlation peak can lie elsewhere (measured on simulated 5-6 mm
     * skins: a peak 11 px off, while the truth was 1 px away). */
    pl_transform t0 = { 0.0, 0.0, 0.0, 1.0 };
    float *fb = NULL, *mb = NULL, *fbs = NULL, *mbs = NULL;
    if (best_ncc + START_GAIN >= 1.0) { /* it could not win: no correlation exceeds 1 */
        *ncc_out = best_ncc;
        goto done;
    }
    int oom = pair_apply(&fb, &mb, fixed, moving, w, h, START_SIGMA)
              || pair_apply(&fbs, &mbs, fb, mb, w, h, GN_SIGMA)
              || refine_rigid(&t0, fbs, mbs, w, h, o->scale, o->interp, nt)
              || refine_rigid(&t0, fs, ms, w, h, o->scale, o->interp, nt);
    free(fb);
    free(mb);
    free(fbs);
    free(mbs);
    if (oom) {
        rc = pl__err(err, PL_ENOMEM, "registration: out of memory");
        goto done;
    }
    double ncc0 = aligned_ncc(buf, fixed, moving, w, h, &t0, o->interp, &cnt);
    if (ncc0 > best_ncc + START_GAIN && fabs(t0.rotation_deg) <= o->max_rotation_deg) {
        *t = t0;
        best_ncc = ncc0;
        /* its PSR: the translation peak of the image turned by t0 */
        pl_register__peak p0;
        derotated_peak(&c, &p0, buf, moving, t0.rotation_deg, t0.scale, o->interp);
        *psr = p0.psr;
    }
    *ncc_out = best_ncc;
done:
    free(buf);
    pc_free(&c);
    return rc;
}

/* ---- robustness for inspection maps ------------------------------------------ */

/*
 * Maps of thick laminates hold smooth texture under camera noise, where
 * whitening lifts the noise to the texture's weight and the peak can land
 * pixels away (seen on simulated 5-6 mm skins). When the first answer
 * correlates below SMOOTH_RETRY_NCC, the search runs again on both images
 * smoothed by a Gaussian of SMOOTH_SIGMA pixels, its answer is refined
 * locally on the unsmoothed images, and it replaces the first answer only
 * when it correlates clearly better (SMOOTH_GAIN) over the overlap: a
 * different basin, not a nudge of the same one.
 */
#define SMOOTH_RETRY_NCC 0.95
#define SMOOTH_SIGMA 1.5
#define SMOOTH_GAIN 0.02 /* the retry must correlate this much better to win */

/* The search and its retry (see above) on the despeckled pair fd, md. */
static int search_despeckled(pl_transform *t, double *psr, const float *fd, const float *md,
                             uint32_t w, uint32_t h, const pl_register_options *o, pl_err *err);

/*
 * Large maps, rotation on: the search (candidates, starts, retry) runs on
 * the pair halved, as often as both sides stay at least PYR_MIN_SIDE, and
 * only its answer is refined at full size, with the PSR of the full-size
 * translation peak it implies. The candidates' choice needs the structure,
 * not the fine detail, and at half size it costs a quarter; the answer's
 * accuracy is the full-size refinement's (Gauss-Newton from within a few
 * hundredths of a pixel of its optimum). Maps smaller than twice
 * PYR_MIN_SIDE a side (the sample fleet's, 96 x 72) are searched as they
 * are. Halving: each pixel the mean of a 2 x 2 block (NaN when one of the
 * four is), so that full-size position p is 2 q + 1/2 at half size.
 */
#define PYR_MIN_SIDE 128u
#define PYR_AGREE 0.5

static float *halve(const float *src, uint32_t w, uint32_t h)
{
    uint32_t hw = w / 2, hh = h / 2;
    float *o = malloc((size_t)hw * hh * sizeof *o);
    if (!o)
        return NULL;
    for (uint32_t y = 0; y < hh; y++) {
        const float *a = src + (size_t)(2 * y) * w, *b = a + w;
        float *d = o + (size_t)y * hw;
        for (uint32_t x = 0; x < hw; x++)
            d[x] = 0.25f * ((a[2 * x] + a[2 * x + 1]) + (b[2 * x] + b[2 * x + 1]));
    }
    return o;
}

/*
 * A transform between the full grid (w x h, centre c) and the halved one
 * (centre c'): full p = 2 q + 1/2 turns p_b = c + s R (p_c - c) + d into
 * q_b = c' + s R (q_c - c') + d_h with d_h = d / 2 + (I - s R)(e - c'),
 * e = (c - 1/2) / 2 (c' = e when the side is even). to_half 0: back.
 */
static pl_transform halved_transform(const pl_transform *t, uint32_t w, uint32_t h, int to_half)
{
    double ex = ((w - 1.0) / 2.0 - 0.5) / 2.0 - ((double)(w / 2) - 1.0) / 2.0;
    double ey = ((h - 1.0) / 2.0 - 0.5) / 2.0 - ((double)(h / 2) - 1.0) / 2.0;
    double th = pl__deg2rad(t->rotation_deg), cs = t->scale * cos(th), sn = t->scale * sin(th);
    double kx = ex - (cs * ex - sn * ey), ky = ey - (sn * ex + cs * ey);
    pl_transform r = *t;
    if (to_half) {
        r.dx = t->dx / 2.0 + kx;
        r.dy = t->dy / 2.0 + ky;
    } else {
        r.dx = 2.0 * (t->dx - kx);
        r.dy = 2.0 * (t->dy - ky);
    }
    return r;
}

static int pyramid_search(pl_transform *t, double *psr, const float *fd, const float *md,
                          uint32_t w, uint32_t h, const pl_register_options *o, pl_err *err)
{
    uint32_t hw = w / 2, hh = h / 2;
    float *fh = halve(fd, w, h), *mh = halve(md, w, h), *fs = NULL, *ms = NULL, *buf = NULL;
    pc_ctx c;
    int rc, have_c = 0;
    if (!fh || !mh) {
        rc = pl__err(err, PL_ENOMEM, "registration: out of memory");
        goto done;
    }
    pl_transform th;
    double psr_h;
    if ((rc = search_despeckled(&th, &psr_h, fh, mh, hw, hh, o, err)))
        goto done;
    /* Full size: the half-size answer, or the full-size translation peak
     * of the moving map turned by its rotation when that lies within
     * PYR_AGREE pixels of it (at the corners): on a circular pair the seam
     * holds the half-size answer a few hundredths of a pixel off, which
     * the refinement then keeps (measured on tests/test_register.c's),
     * while on smooth noisy texture the peak can lie pixels away and the
     * half-size search, with its starts and retry, is the one to trust.
     * Refined once; the PSR is that peak's. */
    pl_transform t0 = halved_transform(&th, w, h, 0);
    unsigned nt = thread_count((size_t)w * h);
    if (pair_apply(&fs, &ms, fd, md, w, h, GN_SIGMA)
        || window_ctx(&c, w, h, o->window, o->tukey_alpha, nt)
        || !(buf = malloc((size_t)w * h * sizeof *buf))) {
        rc = pl__err(err, PL_ENOMEM, "registration: out of memory");
        goto done;
    }
    have_c = 1;
    if (!pc_set_fixed(&c, fd)) {
        rc = pl__err(err, PL_EINVAL, "registration: the fixed image has no data");
        goto done;
    }
    pl_register__peak pk;
    derotated_peak(&c, &pk, buf, md, t0.rotation_deg, t0.scale, o->interp);
    *psr = pk.psr;
    if (pc_refine(&c, &pk, o->upsample)) {
        rc = pl__err(err, PL_ENOMEM, "registration: out of memory");
        goto done;
    }
    pl_transform t1 = t0;
    t1.dx = pk.dx;
    t1.dy = pk.dy;
    *t = corner_move(&t0, &t1, w, h) <= PYR_AGREE ? t1 : t0;
    if (refine_rigid(t, fs, ms, w, h, o->scale, o->interp, nt))
        rc = pl__err(err, PL_ENOMEM, "registration: out of memory");
done:
    if (have_c)
        pc_free(&c);
    free(fh);
    free(mh);
    free(fs);
    free(ms);
    free(buf);
    return rc;
}

static int search_despeckled(pl_transform *t, double *psr, const float *fd, const float *md,
                             uint32_t w, uint32_t h, const pl_register_options *o, pl_err *err)
{
    if (o->rotation && w >= 2 * PYR_MIN_SIDE && h >= 2 * PYR_MIN_SIDE)
        return pyramid_search(t, psr, fd, md, w, h, o, err);
    size_t np = (size_t)w * h, both = 0;
    float *fds = NULL, *mds = NULL, *al = NULL, *fb = NULL, *mb = NULL, *fbs = NULL, *mbs = NULL;
    double ncc = NAN;
    int rc = PL_OK;
    /* the refinement (rotation on) works on the pair smoothed by GN_SIGMA */
    if ((o->rotation && pair_apply(&fds, &mds, fd, md, w, h, GN_SIGMA))
        || !(al = malloc(np * sizeof *al))) {
        rc = pl__err(err, PL_ENOMEM, "registration: out of memory");
        goto done;
    }
    if ((rc = search(t, psr, &ncc, fd, md, fds, mds, w, h, o, err)))
        goto done;
    if (o->rotation && !(ncc >= SMOOTH_RETRY_NCC)) {
        pl_transform t2;
        double psr2 = NAN, ncc2;
        if (pair_apply(&fb, &mb, fd, md, w, h, SMOOTH_SIGMA)
            || pair_apply(&fbs, &mbs, fb, mb, w, h, GN_SIGMA)) {
            rc = pl__err(err, PL_ENOMEM, "registration: out of memory");
            goto done;
        }
        if ((rc = search(&t2, &psr2, &ncc2, fb, mb, fbs, mbs, w, h, o, err)))
            goto done;
        if (refine_rigid(&t2, fds, mds, w, h, o->scale, o->interp, thread_count(np))) {
            rc = pl__err(err, PL_ENOMEM, "registration: out of memory");
            goto done;
        }
        ncc2 = aligned_ncc(al, fd, md, w, h, &t2, o->interp, &both);
        if (ncc2 > ncc + SMOOTH_GAIN || (isnan(ncc) && !isnan(ncc2))) {
            *t = t2;
            *psr = psr2;
        }
    }
done:
    free(fds);
    free(mds);
    free(al);
    free(fb);
    free(mb);
    free(fbs);
    free(mbs);
    return rc;
}

/* The search made robust for inspection maps (see above): despeckle, search,
 * and (rotation on) when the answer correlates poorly, search again on
 * smoothed images and keep the clearly better. [out] fd: the despeckled
 * fixed image; al (may be NULL): the despeckled moving image resampled
 * through the answer (both malloc'd, for the quality figure). */
static int robust_search(pl_transform *t, double *psr, float **fd_out, float **al_out,
                         const float *fixed, const float *moving, uint32_t w, uint32_t h,
                         const pl_register_options *o, pl_err *err)
{
    size_t np = (size_t)w * h;
    float *fd = NULL, *md = NULL, *al = NULL;
    int rc = PL_OK;
    *fd_out = NULL;
    if (al_out)
        *al_out = NULL;
    if (pair_apply(&fd, &md, fixed, moving, w, h, 0.0) || !(al = malloc(np * sizeof *al))) {
        rc = pl__err(err, PL_ENOMEM, "registration: out of memory");
        goto done;
    }
    if ((rc = search_despeckled(t, psr, fd, md, w, h, o, err)))
        goto done;
    if (al_out) {
        resample_run(al, w, h, md, w, h, t, o->interp);
        *al_out = al;
        al = NULL;
    }
    *fd_out = fd;
    fd = NULL;
done:
    free(fd);
    free(md);
    free(al);
    return rc;
}

/*
 * The correlation reported and judged: Pearson's r over the overlap of the
 * aligned pair, both despeckled (the moving one before it was resampled: a
 * resampled dead pixel is a blob) and smoothed by a Gaussian of
 * QUALITY_SIGMA pixels, so that it measures how well the structure agrees
 * rather than how loud the camera noise is (on simulated 5-6 mm skins raw
 * pixels correlated 0.3-0.5 when aligned to 0.05 mm). [out] both counts the
 * pixels with data in both.
 */
#define QUALITY_SIGMA 1.0

static double structure_ncc(const float *fd, const float *al, uint32_t w, uint32_t h,
                            size_t *both, int *oom)
{
    size_t np = (size_t)w * h;
    float *fs = NULL, *as = NULL;
    double r = NAN;
    *oom = 0;
    /* the blur keeps NaN where its input has it: the overlap is theirs */
    if (pair_apply(&fs, &as, fd, al, w, h, QUALITY_SIGMA))
        *oom = 1;
    else
        r = pearson(fs, as, np, both);
    free(fs);
    free(as);
    return r;
}

int pl_register_images(pl_register_result *res, const float *fixed, const float *moving,
                       uint32_t width, uint32_t height, const pl_register_options *opts,
                       pl_err *err)
{
    assert(res && fixed && moving);
    result_init(res);
    pl_register_options o;
    int rc = check_options(&o, opts, err);
    if (rc)
        return rc;
    if (width < MIN_SIDE || height < MIN_SIDE || width > PL_MAP_MAX_SIDE
        || height > PL_MAP_MAX_SIDE)
        return pl__err(err, PL_EINVAL, "registration: image size %ux%u not in %u..%u", width,
                       height, MIN_SIDE, PL_MAP_MAX_SIDE);
    pl_transform t;
    double psr = NAN;
    float *fd = NULL, *al = NULL;
    if ((rc = robust_search(&t, &psr, &fd, &al, fixed, moving, width, height, &o, err)))
        return rc;
    size_t both = 0;
    int oom;
    res->ncc = structure_ncc(fd, al, width, height, &both, &oom);
    free(fd);
    free(al);
    if (oom)
        return pl__err(err, PL_ENOMEM, "registration: out of memory");
    res->transform = t;
    res->psr = psr;
    res->overlap_fraction = (double)both / ((double)width * height);
    judge(res, o.min_ncc, o.min_psr);
    return PL_OK;
}

/* ---- maps ------------------------------------------------------------------- */

static double unit_mm(const char *unit)
{
    static const struct {
        const char *name;
        double mm;
    } units[] = { { "mm", 1.0 }, { "cm", 10.0 }, { "m", 1000.0 }, { "in", 25.4 } };
    for (size_t i = 0; i < sizeof units / sizeof units[0]; i++)
        if (strcmp(unit, units[i].name) == 0)
            return units[i].mm;
    return NAN;
}

static int pitch_ok(const pl_map *m)
{
    return isfinite(m->pitch_u) && isfinite(m->pitch_v) && m->pitch_u > 0.0 && m->pitch_v > 0.0;
}

/*
 * With both placements in one system, the part point of current pixel p_c
 * projected on the baseline's axes gives p_b = A p_c + t, with
 * A = diag(1/pb) [u_b.u_c u_b.v_c; v_b.u_c v_b.v_c] diag(pc) and t the
 * origins' offset on u_b, v_b over the baseline's pitches. A must be a
 * rotation times a scale (the two grids are similar); then
 * p_b = c + s R(theta) (p_c - c) + (A c + t - c).
 */
int pl_register__nominal(pl_transform *t, const pl_map *b, const pl_map *c, pl_err *err)
{
    const pl_placement *pb = &b->placement, *pc = &c->placement;
    int rc;
    if ((rc = pl_placement_check(pb, err)) || (rc = pl_placement_check(pc, err)))
        return rc;
    if (strcmp(pb->system, pc->system) != 0)
        return pl__err(err, PL_EINVAL,
                       "placements in different systems (baseline \"%s\", current \"%s\")",
                       pb->system, pc->system);
    double ub = unit_mm(pb->unit), uc = unit_mm(pc->unit);
    if (!isfinite(ub) || !isfinite(uc))
        return pl__err(err, PL_EINVAL, "placement unit \"%s\" not one of mm, cm, m, in",
                       isfinite(ub) ? pc->unit : pb->unit);
    if (!pitch_ok(b) || !pitch_ok(c))
        return pl__err(err, PL_EINVAL, "%s map's pitch not known", pitch_ok(b) ? "current"
                                                                                 : "baseline");
    double nb[3], nc[3];
    pl__cross3(nb, pb->u, pb->v);
    pl__cross3(nc, pc->u, pc->v);
    double cosn = pl__dot3(nb, nc) / sqrt(pl__dot3(nb, nb) * pl__dot3(nc, nc));
    if (!(cosn >= cos(pl__deg2rad(1.0))))
        return pl__err(err, PL_EINVAL,
                       "placements not coplanar: the map planes' normals differ by %.1f deg",
                       pl__rad2deg(acos(cosn < -1 ? -1 : cosn > 1 ? 1 : cosn)));
    double off[3];
    for (int k = 0; k < 3; k++)
        off[k] = pc->origin[k] * uc - pb->origin[k] * ub;
    double lenb = sqrt(pl__dot3(nb, nb)), normal = pl__dot3(off, nb) / lenb;
    double tol = fmax(1.0, 2.0 * fmax(b->pitch_u, b->pitch_v));
    if (fabs(normal) > tol)
        return pl__err(err, PL_EINVAL,
                       "placements not coplanar: origins %.2f mm apart along the normal "
                       "(at most %.2f mm)", fabs(normal), tol);
    double A[2][2] = {
        { pl__dot3(pb->u, pc->u) * c->pitch_u / b->pitch_u,
          pl__dot3(pb->u, pc->v) * c->pitch_v / b->pitch_u },
        { pl__dot3(pb->v, pc->u) * c->pitch_u / b->pitch_v,
          pl__dot3(pb->v, pc->v) * c->pitch_v / b->pitch_v },
    };
    double tx = pl__dot3(off, pb->u) / b->pitch_u, ty = pl__dot3(off, pb->v) / b->pitch_v;
    double th = atan2(A[1][0] - A[0][1], A[0][0] + A[1][1]);
    double det = A[0][0] * A[1][1] - A[0][1] * A[1][0];
    if (!(det > 0.0))
        return pl__err(err, PL_EINVAL, "placements mirror each other");
    double s = sqrt(det), cs = s * cos(th), sn = s * sin(th);
    double dev = fmax(fmax(fabs(A[0][0] - cs), fabs(A[0][1] + sn)),
                      fmax(fabs(A[1][0] - sn), fabs(A[1][1] - cs)));
    if (dev > 1e-3 * s)
        return pl__err(err, PL_EINVAL,
                       "the current grid is not a rotated, scaled copy of the baseline's "
                       "(pitches %g x %g and %g x %g mm)",
                       c->pitch_u, c->pitch_v, b->pitch_u, b->pitch_v);
    double cx = ((double)b->width - 1.0) / 2.0, cy = ((double)b->height - 1.0) / 2.0;
    t->rotation_deg = pl__rad2deg(th);
    t->scale = s;
    t->dx = A[0][0] * cx + A[0][1] * cy + tx - cx;
    t->dy = A[1][0] * cx + A[1][1] * cy + ty - cy;
    return PL_OK;
}

static int find_channel(const pl_map *m, const char *quantity, const char *label)
{
    for (uint32_t c = 0; c < m->nchannels; c++)
        if ((!quantity || strcmp(m->channels[c].quantity, quantity) == 0)
            && (!label || strcmp(m->channels[c].label, label) == 0))
            return (int)c;
    return -1;
}

/* The channel of each map to register on (see pl_register_maps()). */
PL_EXPORT int pl_register_channels(int *ib, int *ic, const pl_map *b, const pl_map *c,
                                   const char *quantity, const char *label, pl_err *err)
{
    static const char *const pref[] = { "phase", "temperature-contrast" };
    if (!quantity)
        for (size_t k = 0; k < sizeof pref / sizeof pref[0]; k++) {
            *ib = find_channel(b, pref[k], label);
            *ic = find_channel(c, pref[k], label);
            if (*ib >= 0 && *ic >= 0)
                return PL_OK;
        }
    if (!quantity && !label) {
        *ib = *ic = 0;
        return PL_OK;
    }
    *ib = find_channel(b, quantity, label);
    *ic = find_channel(c, quantity, label);
    if (*ib < 0 || *ic < 0)
        return pl__err(err, PL_ENOTFOUND, "%s map has no channel%s%s%s%s%s",
                       *ib < 0 ? "baseline" : "current", quantity ? " of quantity \"" : "",
                       quantity ? quantity : "", quantity ? "\"" : "",
                       label ? " labelled " : "", label ? label : "");
    return PL_OK;
}

/*
 * A current map finer than the baseline (scale below 1) is smoothed before
 * it is resampled, so that detail the baseline grid cannot hold does not
 * alias into it: a Gaussian of sigma = sqrt(1/s^2 - 1) / 2 current pixels
 * (common practice: it widens a pixel's footprint to the baseline's).
 */
static int prefilter(float **out, const float *src, uint32_t w, uint32_t h, double scale)
{
    *out = NULL;
    if (!(scale < 0.95))
        return PL_OK;
    return pl_filter__gauss(out, src, w, h, sqrt(1.0 / (scale * scale) - 1.0) / 2.0);
}

/* Resample src (sw x sh, a plane of the current map) onto the baseline
 * grid through t. */
static int resample_plane(float *out, const pl_map *b, const float *src, uint32_t sw,
                          uint32_t sh, const pl_transform *t, pl_interp interp)
{
    float *pre;
    if (prefilter(&pre, src, sw, sh, t->scale))
        return PL_ENOMEM;
    resample_run(out, b->width, b->height, pre ? pre : src, sw, sh, t, interp);
    free(pre);
    return PL_OK;
}

/* The scores of a transform: ncc and overlap over the registered
 * channels, the shift in mm. bd: the baseline's channel ib despeckled, or
 * NULL to despeckle it here. */
static int finish(pl_register_result *res, const pl_map *b, const pl_map *cur, int ib, int ic,
                  const float *bd, pl_interp interp, pl_err *err)
{
    size_t np = (size_t)b->width * b->height, both = 0;
    float *al = malloc(np * sizeof *al), *cd = NULL, *own = NULL;
    /* despeckle before resampling: a resampled dead pixel is a blob */
    int oom = !al
              || pl_filter__despeckle(&cd, pl_map_channel(cur, (uint32_t)ic), cur->width,
                                      cur->height)
              || resample_plane(al, b, cd, cur->width, cur->height, &res->transform, interp)
              || (!bd && pl_filter__despeckle(&own, pl_map_channel(b, (uint32_t)ib), b->width,
                                              b->height));
    if (!oom)
        res->ncc = structure_ncc(bd ? bd : own, al, b->width, b->height, &both, &oom);
    free(al);
    free(cd);
    free(own);
    if (oom)
        return pl__err(err, PL_ENOMEM, "registration: out of memory");
    res->overlap_fraction = (double)both / (double)np;
    res->overlap_mm2 = (double)both * b->pitch_u * b->pitch_v;
    res->shift_u_mm = res->transform.dx * b->pitch_u;
    res->shift_v_mm = res->transform.dy * b->pitch_v;
    return PL_OK;
}

static int make_aligned(pl_map **aligned, const pl_map *b, const pl_map *cur,
                        const pl_transform *t, pl_interp interp, pl_err *err)
{
    pl_map *m = NULL;
    int rc = pl_map_new(&m, b->width, b->height, cur->nchannels, err);
    if (rc)
        return rc;
    m->pitch_u = b->pitch_u;
    m->pitch_v = b->pitch_v;
    m->placement = b->placement;
    memcpy(m->channels, cur->channels, cur->nchannels * sizeof *m->channels);
    for (uint32_t ch = 0; ch < cur->nchannels; ch++)
        if (resample_plane(pl_map_channel(m, ch), b, pl_map_channel(cur, ch), cur->width,
                           cur->height, t, interp)) {
            pl_map_free(m);
            return pl__err(err, PL_ENOMEM, "registration: out of memory");
        }
    *aligned = m;
    return PL_OK;
}

static int maps_ok(const pl_map *b, const pl_map *c, pl_err *err)
{
    if (!b->nchannels || !c->nchannels || !b->data || !c->data)
        return pl__err(err, PL_EINVAL, "%s map has no channels", b->nchannels ? "current"
                                                                            : "baseline");
    return PL_OK;
}

/* The total transform: the residual r found after the nominal n. */
static pl_transform compose(const pl_transform *r, const pl_transform *n)
{
    double th = pl__deg2rad(r->rotation_deg), cs = cos(th), sn = sin(th);
    pl_transform t;
    t.rotation_deg = wrap180(r->rotation_deg + n->rotation_deg);
    t.scale = r->scale * n->scale;
    t.dx = r->scale * (cs * n->dx - sn * n->dy) + r->dx;
    t.dy = r->scale * (sn * n->dx + cs * n->dy) + r->dy;
    return t;
}

int pl_register_maps(pl_register_result *res, pl_map **aligned, const pl_map *baseline,
                     const pl_map *current, const char *quantity, const char *label,
                     const pl_register_options *opts, pl_err *err)
{
    assert(res && baseline && current);
    result_init(res);
    if (aligned)
        *aligned = NULL;
    pl_register_options o;
    int rc, ib, ic;
    if ((rc = check_options(&o, opts, err)) || (rc = maps_ok(baseline, current, err))
        || (rc = pl_register_channels(&ib, &ic, baseline, current, quantity, label, err))
        || (rc = pl_register__nominal(&res->nominal, baseline, current, err)))
        return rc;
    uint32_t w = baseline->width, h = baseline->height;
    if (w < MIN_SIDE || h < MIN_SIDE)
        return pl__err(err, PL_EINVAL, "registration: baseline map %ux%u smaller than %ux%u", w,
                       h, MIN_SIDE, MIN_SIDE);
    float *mov = malloc((size_t)w * h * sizeof *mov);
    if (!mov || resample_plane(mov, baseline, pl_map_channel(current, (uint32_t)ic),
                               current->width, current->height, &res->nominal, o.interp)) {
        free(mov);
        return pl__err(err, PL_ENOMEM, "registration: out of memory");
    }
    pl_transform r;
    double psr = NAN;
    float *fd = NULL; /* the baseline's channel despeckled, for the score too */
    rc = robust_search(&r, &psr, &fd, NULL, pl_map_channel(baseline, (uint32_t)ib), mov, w, h,
                       &o, err);
    free(mov);
    if (!rc) {
        res->transform = compose(&r, &res->nominal);
        res->psr = psr;
        rc = finish(res, baseline, current, ib, ic, fd, o.interp, err);
    }
    free(fd);
    if (rc)
        return rc;
    judge(res, o.min_ncc, o.min_psr);
    if (!res->refused && aligned)
        return make_aligned(aligned, baseline, current, &res->transform, o.interp, err);
    return PL_OK;
}

int pl_register_apply(pl_register_result *res, pl_map **aligned, const pl_map *baseline,
                      const pl_map *current, const char *quantity, const char *label,
                      const pl_transform *t, pl_interp interp, pl_err *err)
{
    assert(res && baseline && current && t);
    result_init(res);
    if (aligned)
        *aligned = NULL;
    int rc, ib, ic;
    if (!transform_ok(t))
        return pl__err(err, PL_EINVAL, "manual transform not finite or scale not positive");
    if (interp != PL_INTERP_BICUBIC && interp != PL_INTERP_BILINEAR)
        return pl__err(err, PL_EINVAL, "registration: unknown interpolation %d", (int)interp);
    if ((rc = maps_ok(baseline, current, err))
        || (rc = pl_register_channels(&ib, &ic, baseline, current, quantity, label, err)))
        return rc;
    if (pl_register__nominal(&res->nominal, baseline, current, NULL)) {
        res->nominal.dx = res->nominal.dy = NAN;
        res->nominal.rotation_deg = res->nominal.scale = NAN;
    }
    res->transform = *t;
    if ((rc = finish(res, baseline, current, ib, ic, NULL, interp, err)))
        return rc;
    if (aligned)
        return make_aligned(aligned, baseline, current, t, interp, err);
    return PL_OK;
}
