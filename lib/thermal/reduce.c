/*
 * reduce.c - flash-thermography sequences into maps: log-spaced sampling,
 * log-log polynomial reconstruction, derivative, peak-time, depth,
 * contrast and pulse-phase maps (see plyledger/reduce.h for the methods and
 * their sources).
 *
 * Layout in memory. Per pixel the reducer keeps the cold (pre-flash) mean,
 * a running sum for the current segment (the run of frames that share one
 * log-spaced and one uniform bin), one for the log-spaced bin and one for
 * the uniform (pulse-phase) bin being filled, and the finished bins: ln of
 * the mean rise of each log-spaced bin and the mean rise of each uniform
 * bin. Bins are stored bin-major (all pixels of bin 0, then bin 1...) so
 * that closing a bin writes one contiguous row of floats. Frames arrive in
 * batches of BATCH_FRAMES (read straight into the batch buffer by
 * pl_reduce_sequence()); the workers accumulate one batch, in blocks of
 * pixels, while the caller fills the other buffer and then joins them.
 * Two frames of one segment are added in one pass over a block, so the
 * running sum is loaded and stored once for both; the frame buffers stay
 * small so that the reader's copy lands in cache.
 *
 * The per-pixel stage works on blocks of PB neighbouring pixels, whose
 * samples are then PB contiguous floats per bin: the fit, the third
 * derivative on the peak-search grid, the fit at the sample times and the
 * pulse-phase sums are small matrix products over the block
 * (combine_rows()), each pixel's values summed in a fixed order so that
 * blocks and threads do not change any result; logarithms and
 * exponentials of whole rows are vectorised series (fast_logf(),
 * fast_expf()). Only the peak search and a few outputs run pixel by
 * pixel.
 *
 * Where the time goes (640 x 512 x 1000 float32 frames, 2 cores, perf
 * samples of the whole process; see tests/bench/README.md): the kernel
 * copying the frames out of the page cache a fifth, the accumulation
 * (bound by memory traffic) a seventh, the per-pixel stage a third (its
 * matrix products, the peak search and the outputs about evenly), page
 * faults and unmapping a tenth, waking threads between batches a tenth.
 */
#include "thermal/reduce_int.h"

#include "common/common_int.h"
#include "common/fft_int.h"
#include "common/filter_int.h"
#include "common/num_int.h"
#include "common/threads_int.h"

#include <assert.h>
#include <cjson/cJSON.h>
#include <float.h>
#include <inttypes.h>
#include <math.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>

#define BATCH_FRAMES 2u
#define BLOCK_PIXELS 1024u
#define REF_MAX_PIXELS 16384u
#define PEAK_GRID 63 /* intervals: 64 grid points, one bit each in a uint64_t */
#define SLAB_GRID 64
#define SLAB_GOLDEN_STEPS 30
#define FINISH_CHUNKS 32u
#define FINISH_UNIT 16u /* blocks of PB pixels a unit of the per-pixel stage */
#define STREAM_SHARE 0.8 /* share of the progress fraction taken by the frames */

/*
 * The loops over rows of pixels are written to vectorise; on x86-64 with
 * GCC the functions that hold them are also compiled for AVX2 and chosen
 * at run time (function multiversioning, and have_avx2() for the
 * hand-written kernels). Without fused multiply-add (which the ISO C
 * mode's default -ffp-contract=off does not form), every operation is the
 * same IEEE operation in both versions, so the results do not depend on
 * the version that runs.
 */
#if defined(__GNUC__) && !defined(__clang__) && defined(__x86_64__) && defined(__linux__)
#define HAVE_AVX2_VERSIONS 1
#define ROW_KERNEL __attribute__((target_clones("avx2", "default")))
static int have_avx2(void)
{
    return __builtin_cpu_supports("avx2") != 0;
}
#else
#define HAVE_AVX2_VERSIONS 0
#define ROW_KERNEL
#endif

/* ---- the finite slab ---------------------------------------------------- */

void pl_reduce__slab(double v, double out[3])
{
    double u = exp(v);
    double s0 = 1.0, s1 = 0.0, s2 = 0.0, tail = 0.0;
    if (u < 1.0 / M_PI) {
        /* Image form: F = (pi u)^-1/2 S, S = 1 + 2 sum exp(-m^2 w), w = 1/u;
         * dS/dv = 2 sum a e, d2S/dv2 = 2 sum (a^2 - a) e with a = m^2 w. */
        double w = 1.0 / u;
        for (int m = 1; m < 64; m++) {
            double a = (double)m * m * w, e = exp(-a);
            if (e == 0.0)
                break;
            tail += 2.0 * e;
            s1 += 2.0 * a * e;
            s2 += 2.0 * (a * a - a) * e;
        }
        s0 = 1.0 + tail;
        double r1 = s1 / s0;
        out[0] = -0.5 * (log(M_PI) + v) + log1p(tail);
        out[1] = -0.5 + r1;
        out[2] = s2 / s0 - r1 * r1;
    } else {
        /* Fourier form: F = 1 + 2 sum exp(-a), a = n^2 pi^2 u; dF/dv =
         * -2 sum a e, d2F/dv2 = 2 sum (a^2 - a) e. */
        for (int n = 1; n < 64; n++) {
            double a = (double)n * n * M_PI * M_PI * u, e = exp(-a);
            if (e == 0.0)
                break;
            tail += 2.0 * e;
            s1 -= 2.0 * a * e;
            s2 += 2.0 * (a * a - a) * e;
        }
        s0 = 1.0 + tail;
        double r1 = s1 / s0;
        out[0] = log1p(tail);
        out[1] = r1;
        out[2] = s2 / s0 - r1 * r1;
    }
}

/* ln F tabulated on v in [SLAB_V0, SLAB_V1] with its exact slope, read by
 * cubic Hermite interpolation (error about 1e-8). Beyond the table the
 * leading terms are exact in double precision: at v = -10 the first image
 * term is exp(-e^10), at v = 3 the first Fourier term exp(-20 pi^2). */
#define SLAB_V0 (-10.0)
#define SLAB_V1 3.0
#define SLAB_PER_UNIT 32
#define SLAB_N (13 * SLAB_PER_UNIT + 1) /* (SLAB_V1 - SLAB_V0) * SLAB_PER_UNIT + 1 */

static double slab_g[SLAB_N], slab_dg[SLAB_N];
static pthread_once_t slab_once = PTHREAD_ONCE_INIT;

static void slab_build(void)
{
    for (int i = 0; i < SLAB_N; i++) {
        double o[3];
        pl_reduce__slab(SLAB_V0 + (double)i / SLAB_PER_UNIT, o);
        slab_g[i] = o[0];
        slab_dg[i] = o[1];
    }
}

static double slab_lnf(double v)
{
    if (v <= SLAB_V0)
        return -0.5 * (log(M_PI) + v);
    if (v >= SLAB_V1)
        return log1p(2.0 * exp(-M_PI * M_PI * exp(v)));
    double s = (v - SLAB_V0) * SLAB_PER_UNIT;
    int i = (int)s;
    if (i > SLAB_N - 2)
        i = SLAB_N - 2;
    double t = s - i, t2 = t * t, t3 = t2 * t, h = 1.0 / SLAB_PER_UNIT;
    return (2 * t3 - 3 * t2 + 1) * slab_g[i] + (t3 - 2 * t2 + t) * h * slab_dg[i] +
           (-2 * t3 + 3 * t2) * slab_g[i + 1] + (t3 - t2) * h * slab_dg[i + 1];
}

/* ---- logarithm and exponential for whole rows ----------------------------- */

/*
 * ln x, e^x and atan2 in float, written without branches or calls so that loops
 * over rows of values vectorise (the C library's logf and expf are scalar
 * calls). Both reduce the argument by a power of two and sum a short
 * series; their error, a few units in the last place of a float (checked
 * against the C library in the tests), is far below the noise of any
 * thermal sample. Every choice is a select on bit masks: a conditional
 * floating-point operation would keep the compiler from vectorising (it
 * may not speculate it).
 */
static inline uint32_t f2u(float x)
{
    uint32_t u;
    memcpy(&u, &x, sizeof u);
    return u;
}

static inline float u2f(uint32_t u)
{
    float x;
    memcpy(&x, &u, sizeof x);
    return x;
}

/* a where c is 1, b where c is 0 */
static inline uint32_t sel(uint32_t c, uint32_t a, uint32_t b)
{
    return (a & (0u - c)) | (b & (c - 1u));
}

/* x = m 2^e with m in [1/sqrt 2, sqrt 2), ln m = 2 atanh s = 2 s (1 + s^2/3
 * + s^4/5 + s^6/7 + s^8/9), s = (m - 1) / (m + 1), |s| <= 0.172, the
 * series' remainder below 1e-9. Zero, negative and NaN give NaN, +inf
 * +inf; a subnormal x is scaled by 2^23 first. */
static inline float fast_logf(float x)
{
    uint32_t u = f2u(x), tiny = u < 0x00800000u;
    uint32_t v = sel(tiny, f2u(x * 8388608.0f), u);
    int32_t e = (int32_t)((v >> 23) & 0xffu) - 127 - (int32_t)(23u & (0u - tiny));
    uint32_t mu = (v & 0x007fffffu) | 0x3f800000u, big = mu > 0x3fb504f3u;
    float m = u2f(mu - (0x00800000u & (0u - big)));
    e += (int32_t)big;
    float s = (m - 1.0f) / (m + 1.0f), s2 = s * s, fe = (float)e;
    float series = 1.0f + s2 * (1.0f / 3 + s2 * (1.0f / 5 + s2 * (1.0f / 7 + s2 * (1.0f / 9))));
    /* ln 2 in two parts, the first exact times e */
    float y = fe * 0.693145752f + (fe * 1.42860677e-06f + 2.0f * s * series);
    uint32_t ok = u - 1u < 0x7f7fffffu, inf = u == 0x7f800000u;
    return u2f(sel(ok, f2u(y), sel(inf, u, 0x7fc00000u)));
}

/* e^x = 2^n e^r, n the integer nearest x / ln 2 (adding 1.5 2^23 rounds
 * to it), |r| <= ln 2 / 2, e^r by its Taylor series to r^7 (remainder
 * below 6e-9 relative). Below about -87 gives 0, above 88 +inf, NaN NaN. */
static inline float fast_expf(float x)
{
    const float shift = 12582912.0f;
    float t = x * 1.44269504f + shift;
    int32_t n = (int32_t)(f2u(t) - f2u(shift));
    float fn = t - shift;
    float r = (x - fn * 0.693145752f) - fn * 1.42860677e-06f;
    float p = 1.0f + r * (1.0f + r * (0.5f + r * (1.0f / 6 + r * (1.0f / 24 + r * (1.0f / 120 +
              r * (1.0f / 720 + r * (1.0f / 5040)))))));
    uint32_t low = n < -126, high = n > 127;
    float y = p * u2f(sel(low | high, 0x3f800000u, (uint32_t)(n + 127) << 23));
    uint32_t u = f2u(x), nan = (u & 0x7fffffffu) > 0x7f800000u;
    return u2f(sel(nan, u, sel(low, 0u, sel(high, 0x7f800000u, f2u(y)))));
}

/* atan2 y x: a = min(|x|, |y|) / max(|x|, |y|) in [0, 1]; above tan(pi/8),
 * atan a = pi/4 + atan((a - 1) / (a + 1)), so the series atan t = t - t^3/3
 * + ... + t^17/17 runs over |t| <= tan(pi/8) (remainder below 3e-9); then
 * the octant and the quadrant. Signed zeros as atan2(). */
static inline float fast_atan2f(float y, float x)
{
    uint32_t ux = f2u(x), uy = f2u(y);
    float ax = u2f(ux & 0x7fffffffu), ay = u2f(uy & 0x7fffffffu);
    uint32_t swap = ay > ax;
    float mx = u2f(sel(swap, f2u(ay), f2u(ax))), mn = u2f(sel(swap, f2u(ax), f2u(ay)));
    float a = u2f(sel(mx == 0.0f, 0u, f2u(mn / mx)));
    uint32_t big = a > 0.414213562f;
    float t = u2f(sel(big, f2u((a - 1.0f) / (a + 1.0f)), f2u(a))), t2 = t * t;
    float p = t * (1.0f + t2 * (-1.0f / 3 + t2 * (1.0f / 5 + t2 * (-1.0f / 7 + t2 * (1.0f / 9 +
              t2 * (-1.0f / 11 + t2 * (1.0f / 13 + t2 * (-1.0f / 15 + t2 * (1.0f / 17)))))))));
    float q = p + u2f(sel(big, f2u(0.785398163f), 0u));
    q = u2f(sel(swap, f2u(1.57079633f - q), f2u(q)));
    q = u2f(sel(ux >> 31, f2u(3.14159265f - q), f2u(q)));
    return u2f(f2u(q) | (uy & 0x80000000u));
}

void pl_reduce__atan2_row(float *restrict out, const float *restrict y, const float *restrict x,
                          size_t n)
{
    for (size_t i = 0; i < n; i++)
        out[i] = fast_atan2f(y[i], x[i]);
}

void pl_reduce__log_row(float *restrict out, const float *restrict in, size_t n)
{
    for (size_t i = 0; i < n; i++)
        out[i] = fast_logf(in[i]);
}

void pl_reduce__exp_row(float *restrict out, const float *restrict in, size_t n)
{
    for (size_t i = 0; i < n; i++)
        out[i] = fast_expf(in[i]);
}

/* ---- polynomials and least squares -------------------------------------- */

static double poly(const double *c, uint32_t deg, double x)
{
    double y = c[deg];
    for (uint32_t i = deg; i-- > 0;)
        y = y * x + c[i];
    return y;
}

/* Coefficients of the derivative of order `order` (<= deg) of a
 * degree-`deg` polynomial: out[i] = (i + 1) ... (i + order) c[i + order],
 * the integer factor exact. */
static void deriv_coefs(double *out, const double *c, uint32_t deg, uint32_t order)
{
    for (uint32_t i = 0; i + order <= deg; i++) {
        double f = 1.0;
        for (uint32_t m = 1; m <= order; m++)
            f *= (double)(i + m);
        out[i] = f * c[i + order];
    }
}

/*
 * The maximum of the second derivative whose third derivative (c3, degree
 * d3; c4 its derivative) changes sign in grid interval g (from gx[g - 1]
 * to gx[g]; glo, ghi the grid values, computed in float). The bracket is
 * checked in double first and moved by an interval if rounding put the
 * sign change on the wrong side of a grid point. Then Newton steps from
 * the secant guess, with a bisection whenever a step would leave the
 * bracket, until a step falls below 1e-12 (x spans [-1, 1]).
 */
static double refine_root(const double *c3, const double *c4, uint32_t d3, const double *gx,
                          int g, double glo, double ghi)
{
    double lo = gx[g - 1], hi = gx[g], flo = poly(c3, d3, lo), fhi = poly(c3, d3, hi);
    if (!(flo > 0.0) && g >= 2 && poly(c3, d3, gx[g - 2]) > 0.0) {
        hi = lo;
        lo = gx[g - 2];
    } else if (fhi > 0.0 && g < PEAK_GRID && !(poly(c3, d3, gx[g + 1]) > 0.0)) {
        lo = hi;
        hi = gx[g + 1];
    }
    double x = glo > ghi ? gx[g - 1] + glo * (gx[g] - gx[g - 1]) / (glo - ghi) : 0.5 * (lo + hi);
    if (!(x > lo && x <= hi))
        x = 0.5 * (lo + hi);
    for (int it = 0; it < 60; it++) {
        double f = poly(c3, d3, x);
        if (f == 0.0)
            break;
        if (f > 0.0)
            lo = x;
        else
            hi = x;
        double fp = d3 ? poly(c4, d3 - 1, x) : 0.0;
        if (fp < 0.0 && fabs(f / fp) <= 1e-12)
            break; /* converged: a last step would not leave the rounding noise */
        double xn = fp < 0.0 ? x - f / fp : 0.5 * (lo + hi);
        if (!(xn > lo && xn < hi))
            xn = 0.5 * (lo + hi);
        int done = fabs(xn - x) <= 1e-12;
        x = xn;
        if (done)
            break;
    }
    return x;
}

/*
 * Least squares min |A c - z| for `nrhs` right-hand sides by Householder
 * QR (Golub and Van Loan 2013, "Matrix computations", 4th ed., 5.3). A is
 * m x k row-major and Z m x nrhs row-major, both overwritten; the solutions
 * end in Z's first k rows. `v` is m doubles of scratch. Returns -1 when a
 * column's remaining norm falls below 1e-12 of the largest column norm
 * (rank deficient), else 0.
 */
static int lsq(double *A, uint32_t m, uint32_t k, double *Z, uint32_t nrhs, double *v)
{
    double scale = 0.0;
    for (uint32_t j = 0; j < k; j++) {
        double s = 0.0;
        for (uint32_t i = 0; i < m; i++)
            s += A[i * k + j] * A[i * k + j];
        if (s > scale)
            scale = s;
    }
    scale = sqrt(scale);
    if (m < k || !(scale > 0.0))
        return -1;
    for (uint32_t j = 0; j < k; j++) {
        double norm = 0.0;
        for (uint32_t i = j; i < m; i++)
            norm += A[i * k + j] * A[i * k + j];
        norm = sqrt(norm);
        if (!(norm > 1e-12 * scale))
            return -1;
        double alpha = A[j * k + j] > 0.0 ? -norm : norm;
        double vv = 0.0;
        for (uint32_t i = j; i < m; i++) {
            v[i] = A[i * k + j];
            if (i == j)
                v[i] -= alpha;
            vv += v[i] * v[i];
        }
        for (uint32_t c = j + 1; c < k; c++) {
            double dot = 0.0;
            for (uint32_t i = j; i < m; i++)
                dot += v[i] * A[i * k + c];
            double f = 2.0 * dot / vv;
            for (uint32_t i = j; i < m; i++)
                A[i * k + c] -= f * v[i];
        }
        for (uint32_t c = 0; c < nrhs; c++) {
            double dot = 0.0;
            for (uint32_t i = j; i < m; i++)
                dot += v[i] * Z[i * nrhs + c];
            double f = 2.0 * dot / vv;
            for (uint32_t i = j; i < m; i++)
                Z[i * nrhs + c] -= f * v[i];
        }
        A[j * k + j] = alpha;
    }
    for (uint32_t c = 0; c < nrhs; c++)
        for (uint32_t j = k; j-- > 0;) {
            double s = Z[j * nrhs + c];
            for (uint32_t l = j + 1; l < k; l++)
                s -= A[j * k + l] * Z[l * nrhs + c];
            Z[j * nrhs + c] = s / A[j * k + j];
        }
    return 0;
}

/* ---- the reducer ------------------------------------------------------- */

typedef struct frame_role {
    int32_t lbin;      /* used log-spaced bin, or -1 */
    int32_t pbin;      /* uniform bin, or -1 */
    uint8_t pre;       /* a cold-reference frame */
    uint8_t last_pre;  /* the last one: the cold mean is final after it */
    uint8_t close_l;   /* the last frame of its log-spaced bin */
    uint8_t close_p;   /* the last frame of its uniform bin */
    uint8_t close_s;   /* the last frame of its segment: the run of frames
                          sharing one log-spaced and one uniform bin */
} frame_role;

typedef struct frame_batch {
    float *frames;                  /* BATCH_FRAMES frames */
    uint32_t index[BATCH_FRAMES];
    uint32_t count;
} frame_batch;

/* Per-worker scratch for the per-pixel stage, which works on blocks of PB
 * pixels: PB-column matrices, sample- or coefficient-major. */
#define PB 32u
#ifndef PREFETCH_BLOCKS
#define PREFETCH_BLOCKS 8
#endif
typedef struct scratch {
    double *Zb;     /* nused x PB: ln of the mean rise */
    float *Zf;      /* the same in float */
    double *C;      /* k x PB: coefficients */
    float *C3;      /* k x PB: third-derivative coefficients, float */
    float *G3;      /* (PEAK_GRID + 1) x PB: third derivative on the grid, float */
    uint64_t pos[PB]; /* bit g: G3 positive at grid point g */
    float *Cf;      /* k x PB: coefficients in float */
    float *Y;       /* nused x PB: the fit at the samples, float */
    double *Ud;     /* M x PB: uniform samples */
    double *F;      /* 2 phase_frequencies x PB: real and imaginary parts */
    float best[PB]; /* peak contrast over the samples */
    uint32_t best_b[PB]; /* and its sample */
    float *E;       /* nused x PB: the fitted rise at the samples */
    float *Q;       /* nused x PB: 1 / (frames x fitted rise^2) */
    double *Pp;     /* PB x k x nused: a partial pixel's own pseudo-inverse */
    uint32_t *vidx; /* PB x nused: the samples it holds */
    double *Id;     /* nused x nused scratch for that pseudo-inverse */
    int status[PB];
    uint32_t nvalid[PB];
    double noise2[PB]; /* per-frame temperature noise variance from the residuals, K^2 */
    double *A, *z, *v; /* one pixel's own solve and slab fit */
    unsigned char *valid;
    double *vals;   /* reference medians */
    float *fft_in;
    pl_fft__cpx *fft_out;
    pl_fft__rfft *fft;
    uint32_t masked, partial, no_phase;
} scratch;

/* Channel indices of the output map (-1: not produced). */
typedef struct layout {
    int at[PL_REDUCE_MAX_TIMES][5];
    int peak_t, peak_d2, depth_d2, depth_slab, peak_contrast, peak_contrast_t;
    int phase0; /* first phase channel; three per frequency */
    uint32_t nchannels;
} layout;

enum { STREAMING = 0, FINISHED = 1 };

struct pl_reducer {
    uint32_t width, height, nframes, preflash;
    size_t npix;
    double *times;
    pl_reduce_options opt;
    double map_times[PL_REDUCE_MAX_TIMES];
    unsigned products;
    uint32_t degree, k; /* k = degree + 1 coefficients */
    double alpha;
    double min_d2;  /* significance of a maximum of d2: least value, per (ln t)^2 */
    double min_snr; /* and least ratio to its noise */

    /* log-spaced sampling */
    double start, end;
    uint32_t nbins, nused;
    double *edges;      /* nbins + 1 */
    uint32_t *bin_used; /* nbins: used index or UINT32_MAX */
    double *lnt;        /* nused: mean ln t of each used bin's frames */
    uint32_t *lcount;   /* nused: frames per used bin */
    float *inv_l;       /* nused */
    double centre, scale;
    double *xs;         /* nused scaled abscissae */
    double *ts;         /* and times, exp(lnt) */
    double *design;     /* nused x k */
    float *designf;     /* the same in float */
    double *pinv;       /* k x nused: the pseudo-inverse */
    double *w2;         /* (PEAK_GRID + 1) x nused: squared weights of each sample in
                           the fitted d2 (in x) at the grid points */
    double xt[PL_REDUCE_MAX_TIMES];
    double gx[PEAK_GRID + 1]; /* the peak search grid over the samples */
    float gpow[(PEAK_GRID + 1) * (PL_REDUCE_MAX_DEGREE - 2)]; /* gx^i, i <= degree - 3 */

    /* uniform sampling for pulse phase */
    uint32_t nfreq, M;
    double trunc, dtp;
    uint32_t *pcount; /* M */
    float *inv_p;     /* M */
    uint32_t *fill_lo, *fill_hi; /* M: neighbours of an empty bin */
    int direct;       /* transform by the direct sum, not kissfft */
    double *tw;       /* 2 nfreq x M: its weights, empty bins folded in */
    float *fill_w;
    uint32_t nempty_p;

    frame_role *role;
    uint32_t nneeded, fed;
    int64_t last_index;
    uint32_t next_needed;
    int state;   /* STREAMING, FINISHED, or a negative status after a failure */

    float *cold, *acc_s, *acc_l, *acc_p, *bins_l, *bins_p;
    size_t bins_l_bytes, bins_p_bytes; /* mapped sizes; 0 when from calloc */
    double *cold_sum;
    uint32_t *cold_n;
    frame_batch batch[2];
    uint32_t cur, job_batch;

    /* worker threads: the pool's participants, scratch ws[part] each */
    pl_threads__pool *pool;
    uint32_t nthreads;

    /* per-pixel stage */
    layout lay;
    pl_map *map;
    scratch *ws;
    size_t chunk0, chunk1; /* the pixels of the running per-pixel chunk */
    double cref[PL_REDUCE_MAX_DEGREE + 1];
    float *ref_risef;        /* nused: reconstructed reference rise */
    int ref_region;
    size_t *ref_pix, ref_np; /* pixels making the reference */
    double *zref;            /* nused: reference samples */
    float *pref;             /* M: reference uniform samples */
    double ref_at[PL_REDUCE_MAX_TIMES];
    double ref_phase[PL_REDUCE_MAX_PHASE_SAMPLES / 2];
    const char *ref_kind;
    double *slab_G, *slab_lam; /* SLAB_GRID x nused and SLAB_GRID */
    pl_reduce_stats stats;
};

/* ---- worker threads -----------------------------------------------------
 *
 * The work goes to a pool (common/threads_int.h) in units: blocks of
 * pixels, samples. The caller's thread starts a job on the workers and
 * works on it too, as the pool's last participant: while streaming it
 * first reads the next frames, then joins in on what is left of the
 * running batch, so reading and accumulating share the cores without a
 * third thread in the way. Which thread takes a unit never changes what
 * the unit computes.
 */

/* ---- streaming ---------------------------------------------------------- */

/* One block of BLOCK_PIXELS pixels of the batch being accumulated. */
ROW_KERNEL static void batch_unit(void *ctx, size_t unit, unsigned part)
{
    (void)part;
    pl_reducer *r = ctx;
    const frame_batch *b = &r->batch[r->job_batch];
    size_t npix = r->npix;
    size_t q0 = unit * BLOCK_PIXELS, q1 = q0 + BLOCK_PIXELS < npix ? q0 + BLOCK_PIXELS : npix;
    for (uint32_t f = 0; f < b->count; f++) {
        const frame_role *ro = &r->role[b->index[f]];
        const float *restrict v = b->frames + (size_t)f * npix;
        if (ro->pre) {
            for (size_t p = q0; p < q1; p++)
                if (isfinite(v[p])) {
                    r->cold_sum[p] += v[p];
                    r->cold_n[p]++;
                }
            if (ro->last_pre)
                for (size_t p = q0; p < q1; p++)
                    r->cold[p] = r->cold_n[p] ? (float)(r->cold_sum[p] / r->cold_n[p]) : NAN;
            continue;
        }
        float *restrict al = r->acc_l, *restrict ap = r->acc_p, *restrict as = r->acc_s;
        const float *restrict cold = r->cold;
        /* two frames of one segment in one pass, the sums in the same
         * order as one frame at a time */
        const frame_role *next = f + 1 < b->count ? &r->role[b->index[f + 1]] : NULL;
        if (next && !ro->close_s && !next->pre) {
            const float *restrict v1 = v + npix;
            for (size_t p = q0; p < q1; p++)
                as[p] = (as[p] + (v[p] - cold[p])) + (v1[p] - cold[p]);
            ro = next;
            f++;
        } else {
            for (size_t p = q0; p < q1; p++)
                as[p] += v[p] - cold[p];
        }
        if (ro->close_s) {
            if (ro->lbin >= 0 && ro->pbin >= 0) {
                for (size_t p = q0; p < q1; p++) {
                    al[p] += as[p];
                    ap[p] += as[p];
                    as[p] = 0.0f;
                }
            } else {
                float *restrict acc = ro->lbin >= 0 ? al : ap;
                for (size_t p = q0; p < q1; p++) {
                    acc[p] += as[p];
                    as[p] = 0.0f;
                }
            }
        }
        if (ro->close_l) {
            float inv = r->inv_l[ro->lbin];
            float *restrict dst = r->bins_l + (size_t)ro->lbin * npix;
            for (size_t p = q0; p < q1; p++) {
                dst[p] = fast_logf(al[p] * inv);
                al[p] = 0.0f;
            }
        }
        if (ro->close_p) {
            float inv = r->inv_p[ro->pbin];
            float *restrict dst = r->bins_p + (size_t)ro->pbin * npix;
            for (size_t p = q0; p < q1; p++) {
                dst[p] = ap[p] * inv;
                ap[p] = 0.0f;
            }
        }
    }
}

/* Hand the full batch to the workers: finish the previous one first (the
 * caller joins in on its rest), then start this one; the caller goes on
 * reading into the other buffer. */
static void submit_batch(pl_reducer *r)
{
    pl_threads__pool_help(r->pool);
    pl_threads__pool_wait(r->pool);
    r->job_batch = r->cur;
    pl_threads__pool_start(r->pool, batch_unit, r, (r->npix + BLOCK_PIXELS - 1) / BLOCK_PIXELS);
    r->cur ^= 1u;
    r->batch[r->cur].count = 0;
}

/* A frame enters the reduction: cold reference, log-spaced or uniform bin. */
static int role_needed(const frame_role *ro)
{
    return ro->pre || ro->lbin >= 0 || ro->pbin >= 0;
}

static uint32_t next_needed_after(const pl_reducer *r, int64_t index)
{
    uint32_t i = (uint32_t)(index + 1);
    while (i < r->nframes && !role_needed(&r->role[i]))
        i++;
    return i;
}

static int fail(pl_reducer *r, int code)
{
    r->state = code;
    return code;
}

/* Check that frame `index` may come now. Returns 1 when it is needed, 0
 * when it is to be ignored, or a negative status. */
static int accept_frame(pl_reducer *r, uint32_t index, pl_err *err)
{
    if (r->state < 0)
        return pl__err(err, r->state, "reduction: stopped after an earlier failure");
    if (r->state == FINISHED)
        return pl__err(err, PL_EINVAL, "reduction: frame %u after the reduction finished",
                       index);
    if (index >= r->nframes)
        return pl__err(err, PL_EINVAL, "reduction: frame %u out of range (%u frames)", index,
                       r->nframes);
    if ((int64_t)index <= r->last_index)
        return pl__err(err, PL_EINVAL,
                       "reduction: frame %u after frame %" PRId64 "; frames must increase",
                       index, r->last_index);
    if (index > r->next_needed) {
        pl__err(err, PL_EINVAL, "reduction: frame %u (t = %.6g s) skipped but needed",
                r->next_needed, r->times[r->next_needed]);
        return fail(r, PL_EINVAL);
    }
    r->last_index = index;
    return index == r->next_needed;
}

static float *batch_slot(pl_reducer *r)
{
    frame_batch *b = &r->batch[r->cur];
    return b->frames + (size_t)b->count * r->npix;
}

/* The frame in the current slot is frame `index`: queue it, hand a full
 * batch to the workers, report progress. */
static int commit_frame(pl_reducer *r, uint32_t index, pl_err *err)
{
    frame_batch *b = &r->batch[r->cur];
    b->index[b->count++] = index;
    r->fed++;
    r->next_needed = next_needed_after(r, index);
    if (b->count == BATCH_FRAMES || r->next_needed >= r->nframes) {
        submit_batch(r);
        if (r->opt.progress &&
            r->opt.progress(r->opt.progress_data, STREAM_SHARE * r->fed / r->nneeded)) {
            pl_threads__pool_wait(r->pool);
            pl__err(err, PL_ECANCELED, "reduction: cancelled at frame %u", index);
            return fail(r, PL_ECANCELED);
        }
    }
    return PL_OK;
}

PL_EXPORT int pl_reducer_frame_needed(const pl_reducer *r, uint32_t index)
{
    assert(r);
    return index < r->nframes && role_needed(&r->role[index]);
}

PL_EXPORT int pl_reducer_frame(pl_reducer *r, uint32_t index, const float *kelvin, pl_err *err)
{
    assert(r && kelvin);
    int rc = accept_frame(r, index, err);
    if (rc <= 0)
        return rc;
    memcpy(batch_slot(r), kelvin, r->npix * sizeof(float));
    return commit_frame(r, index, err);
}

/* ---- construction -------------------------------------------------------- */

static int check_options(const pl_reduce_options *o, uint32_t width, uint32_t height,
                         pl_err *err)
{
    if (o->version != PL_REDUCE_OPTIONS_VERSION)
        return pl__err(err, PL_EINVAL, "reduction options: version %u, %u expected", o->version,
                       PL_REDUCE_OPTIONS_VERSION);
    if (o->degree < PL_REDUCE_MIN_DEGREE || o->degree > PL_REDUCE_MAX_DEGREE)
        return pl__err(err, PL_EINVAL, "reduction options: degree %u outside %u..%u", o->degree,
                       PL_REDUCE_MIN_DEGREE, PL_REDUCE_MAX_DEGREE);
    if (o->samples < o->degree + 2 || o->samples > PL_REDUCE_MAX_SAMPLES)
        return pl__err(err, PL_EINVAL,
                       "reduction options: %u samples, degree + 2 .. %u expected", o->samples,
                       PL_REDUCE_MAX_SAMPLES);
    if (!isnan(o->start_s) && !(isfinite(o->start_s) && o->start_s > 0.0))
        return pl__err(err, PL_EINVAL, "reduction options: start %g s is not a positive time",
                       o->start_s);
    if (!isnan(o->end_s) && !(isfinite(o->end_s) && o->end_s > 0.0))
        return pl__err(err, PL_EINVAL, "reduction options: end %g s is not a positive time",
                       o->end_s);
    if (o->ntimes > PL_REDUCE_MAX_TIMES || (o->ntimes && !o->times_s))
        return pl__err(err, PL_EINVAL, "reduction options: %u map times, at most %u",
                       o->ntimes, PL_REDUCE_MAX_TIMES);
    if (o->time_products & ~PL_REDUCE_AT_ALL)
        return pl__err(err, PL_EINVAL, "reduction options: unknown time products 0x%x",
                       o->time_products);
    if (!isnan(o->diffusivity_mm2_s) &&
        !(isfinite(o->diffusivity_mm2_s) && o->diffusivity_mm2_s > 0.0))
        return pl__err(err, PL_EINVAL, "reduction options: diffusivity %g mm2/s not positive",
                       o->diffusivity_mm2_s);
    if (o->depth_method != PL_DEPTH_PEAK_D2 && o->depth_method != PL_DEPTH_SLAB_FIT &&
        o->depth_method != PL_DEPTH_BOTH)
        return pl__err(err, PL_EINVAL, "reduction options: unknown depth method %d",
                       (int)o->depth_method);
    if (o->peak_rule != PL_PEAK_FIRST_SIGNIFICANT && o->peak_rule != PL_PEAK_LARGEST)
        return pl__err(err, PL_EINVAL, "reduction options: unknown peak rule %d",
                       (int)o->peak_rule);
    if (!isnan(o->peak_min_d2) && !(o->peak_min_d2 >= 0.0 && isfinite(o->peak_min_d2)))
        return pl__err(err, PL_EINVAL, "reduction options: peak threshold %g is not >= 0",
                       o->peak_min_d2);
    if (!isnan(o->peak_min_snr) && !(o->peak_min_snr >= 0.0 && isfinite(o->peak_min_snr)))
        return pl__err(err, PL_EINVAL,
                       "reduction options: peak signal-to-noise threshold %g is not >= 0",
                       o->peak_min_snr);
    if (o->ref_w && o->ref_h &&
        ((uint64_t)o->ref_x + o->ref_w > width || (uint64_t)o->ref_y + o->ref_h > height))
        return pl__err(err, PL_EINVAL,
                       "reduction options: reference region %ux%u at (%u, %u) outside the "
                       "%ux%u image",
                       o->ref_w, o->ref_h, o->ref_x, o->ref_y, width, height);
    if (o->phase_frequencies) {
        if (o->phase_samples % 2 || o->phase_samples <= 2 * o->phase_frequencies ||
            o->phase_samples > PL_REDUCE_MAX_PHASE_SAMPLES)
            return pl__err(err, PL_EINVAL,
                           "reduction options: %u phase samples for %u frequencies (even, "
                           "more than twice the frequencies, at most %u)",
                           o->phase_samples, o->phase_frequencies,
                           PL_REDUCE_MAX_PHASE_SAMPLES);
        if (!isnan(o->phase_end_s) && !(isfinite(o->phase_end_s) && o->phase_end_s > 0.0))
            return pl__err(err, PL_EINVAL,
                           "reduction options: truncation %g s is not a positive time",
                           o->phase_end_s);
    }
    return PL_OK;
}

/* Which log-spaced bin [edges[b], edges[b+1]) holds t (the last bin also
 * holds its upper edge), or -1. */
static int log_bin_of(const double *edges, uint32_t nbins, double t)
{
    if (!(t >= edges[0] && t <= edges[nbins]))
        return -1;
    double f = log(t / edges[0]) / log(edges[nbins] / edges[0]) * nbins;
    int64_t b = (int64_t)f;
    if (b < 0)
        b = 0;
    if (b > (int64_t)nbins - 1)
        b = nbins - 1;
    while (b > 0 && t < edges[b])
        b--;
    while (b < (int64_t)nbins - 1 && t >= edges[b + 1])
        b++;
    return (int)b;
}

static int plan_sampling(pl_reducer *r, pl_err *err)
{
    const pl_reduce_options *o = &r->opt;
    uint32_t first = r->nframes;
    for (uint32_t i = r->preflash; i < r->nframes; i++)
        if (r->times[i] > 0.0) {
            first = i;
            break;
        }
    if (first == r->nframes)
        return pl__err(err, PL_EINVAL, "reduction: no frame after the flash");
    double tfirst = r->times[first], tlast = r->times[r->nframes - 1];
    r->start = isnan(o->start_s) ? PL_REDUCE_DEFAULT_START_S : o->start_s;
    r->end = isnan(o->end_s) ? PL_REDUCE_DEFAULT_END_S : o->end_s;
    if (r->start < tfirst)
        r->start = tfirst;
    if (r->end > tlast)
        r->end = tlast;
    if (!(r->start < r->end))
        return pl__err(err, PL_EINVAL,
                       "reduction: fit window %.6g-%.6g s holds no frames (frames after the "
                       "flash span %.6g-%.6g s)",
                       isnan(o->start_s) ? PL_REDUCE_DEFAULT_START_S : o->start_s,
                       isnan(o->end_s) ? PL_REDUCE_DEFAULT_END_S : o->end_s, tfirst, tlast);
    r->nbins = o->samples;
    for (uint32_t b = 0; b <= r->nbins; b++)
        r->edges[b] = r->start * pow(r->end / r->start, (double)b / r->nbins);
    r->edges[0] = r->start;
    r->edges[r->nbins] = r->end;

    uint32_t *count = calloc(r->nbins, sizeof *count);
    double *sum = calloc(r->nbins, sizeof *sum);
    if (!count || !sum) {
        free(count);
        free(sum);
        return pl__err(err, PL_ENOMEM, "reduction: out of memory");
    }
    for (uint32_t i = first; i < r->nframes; i++) {
        int b = log_bin_of(r->edges, r->nbins, r->times[i]);
        if (b >= 0) {
            count[b]++;
            sum[b] += log(r->times[i]);
        }
    }
    r->nused = 0;
    for (uint32_t b = 0; b < r->nbins; b++) {
        r->bin_used[b] = UINT32_MAX;
        if (count[b]) {
            r->bin_used[b] = r->nused;
            r->lnt[r->nused] = sum[b] / count[b];
            r->lcount[r->nused] = count[b];
            r->inv_l[r->nused] = (float)(1.0 / count[b]);
            r->nused++;
        }
    }
    free(count);
    free(sum);
    if (r->nused < r->degree + 2)
        return pl__err(err, PL_EINVAL,
                       "reduction: only %u of %u log-spaced samples between %.6g and %.6g s "
                       "hold frames; degree %u needs %u",
                       r->nused, r->nbins, r->start, r->end, r->degree, r->degree + 2);
    for (uint32_t j = 0; j < o->ntimes; j++)
        if (!(r->map_times[j] >= r->start && r->map_times[j] <= r->end))
            return pl__err(err, PL_ERANGE,
                           "reduction: map time %.6g s lies outside the fit window "
                           "%.6g-%.6g s",
                           r->map_times[j], r->start, r->end);

    /* frame roles */
    for (uint32_t i = 0; i < r->nframes; i++) {
        frame_role *ro = &r->role[i];
        ro->lbin = ro->pbin = -1;
        ro->pre = i < r->preflash;
        ro->last_pre = i + 1 == r->preflash;
        ro->close_l = ro->close_p = 0;
        if (ro->pre || i < first)
            continue;
        int b = log_bin_of(r->edges, r->nbins, r->times[i]);
        if (b >= 0)
            ro->lbin = (int32_t)r->bin_used[b];
    }
    if (r->nfreq) {
        r->trunc = isnan(o->phase_end_s) ? r->end : o->phase_end_s;
        if (r->trunc > tlast)
            return pl__err(err, PL_ERANGE,
                           "reduction: pulse-phase truncation %.6g s after the last frame "
                           "(%.6g s)",
                           r->trunc, tlast);
        r->dtp = r->trunc / r->M;
        for (uint32_t i = first; i < r->nframes; i++) {
            double t = r->times[i];
            if (t > 0.0 && t < r->trunc) {
                uint32_t m = (uint32_t)(t / r->dtp);
                if (m >= r->M)
                    m = r->M - 1;
                r->role[i].pbin = (int32_t)m;
                r->pcount[m]++;
            }
        }
        uint32_t filled = 0;
        for (uint32_t m = 0; m < r->M; m++) {
            r->inv_p[m] = r->pcount[m] ? (float)(1.0 / r->pcount[m]) : 0.0f;
            filled += r->pcount[m] != 0;
        }
        if (!filled)
            return pl__err(err, PL_EINVAL,
                           "reduction: no frame between the flash and the pulse-phase "
                           "truncation at %.6g s",
                           r->trunc);
        /* An empty uniform bin is read as the linear interpolation between
         * the centres of its nearest filled neighbours (the nearest one
         * alone at either end). */
        r->nempty_p = 0;
        for (uint32_t m = 0; m < r->M; m++) {
            if (r->pcount[m])
                continue;
            r->nempty_p++;
            int64_t lo = (int64_t)m - 1, hi = m + 1;
            while (lo >= 0 && !r->pcount[lo])
                lo--;
            while (hi < r->M && !r->pcount[hi])
                hi++;
            if (lo < 0)
                lo = hi;
            if (hi >= r->M)
                hi = lo;
            r->fill_lo[m] = (uint32_t)lo;
            r->fill_hi[m] = (uint32_t)hi;
            r->fill_w[m] = hi == lo ? 0.0f : (float)((double)(m - lo) / (double)(hi - lo));
        }
        /* The direct sum costs 2 nfreq M multiply-adds a pixel, a real FFT
         * about 2.5 M log2 M and more overhead: the direct sum up to
         * 2 log2 M frequencies. Its weights take in the empty bins'
         * interpolation, a linear map. */
        uint32_t lg = 0;
        while ((1u << (lg + 1)) <= r->M)
            lg++;
        r->direct = r->nfreq <= 2 * lg;
        if (r->direct) {
            r->tw = calloc((size_t)2 * r->nfreq * r->M, sizeof *r->tw);
            if (!r->tw)
                return pl__err(err, PL_ENOMEM, "reduction: out of memory");
            for (uint32_t f = 0; f < r->nfreq; f++) {
                double *re = r->tw + (size_t)(2 * f) * r->M, *im = re + r->M;
                for (uint32_t m = 0; m < r->M; m++) {
                    /* the angle reduced exactly in integers first */
                    double a = 2.0 * M_PI * (double)(((uint64_t)(f + 1) * m) % r->M) / r->M;
                    re[m] = cos(a);
                    im[m] = -sin(a);
                }
                for (uint32_t m = 0; m < r->M; m++)
                    if (!r->pcount[m]) {
                        double w = r->fill_w[m];
                        re[r->fill_lo[m]] += (1.0 - w) * re[m];
                        im[r->fill_lo[m]] += (1.0 - w) * im[m];
                        re[r->fill_hi[m]] += w * re[m];
                        im[r->fill_hi[m]] += w * im[m];
                        re[m] = im[m] = 0.0;
                    }
            }
        }
    }
    int64_t last_l = -1, last_p = -1;
    const frame_role *later = NULL;
    for (uint32_t i = r->nframes; i-- > 0;) {
        frame_role *ro = &r->role[i];
        if (ro->lbin >= 0 || ro->pbin >= 0) {
            ro->close_s = !later || later->lbin != ro->lbin || later->pbin != ro->pbin;
            later = ro;
        }
        if (ro->lbin >= 0 && ro->lbin != last_l) {
            ro->close_l = 1;
            last_l = ro->lbin;
        }
        if (ro->pbin >= 0 && ro->pbin != last_p) {
            ro->close_p = 1;
            last_p = ro->pbin;
        }
    }
    r->nneeded = 0;
    for (uint32_t i = 0; i < r->nframes; i++)
        r->nneeded += pl_reducer_frame_needed(r, i);
    r->next_needed = next_needed_after(r, -1);
    return PL_OK;
}

/* The second derivative of x^i at x, i < k, into bx. */
static void d2_basis(double *bx, uint32_t k, double x)
{
    double p = 1.0;
    bx[0] = bx[1] = 0.0;
    for (uint32_t i = 2; i < k; i++) {
        bx[i] = (double)i * (i - 1) * p;
        p *= x;
    }
}

/* The design matrix in the scaled abscissa and its pseudo-inverse. */
static int plan_fit(pl_reducer *r, pl_err *err)
{
    uint32_t n = r->nused, k = r->k;
    r->centre = 0.5 * (r->lnt[0] + r->lnt[n - 1]);
    r->scale = 0.5 * (r->lnt[n - 1] - r->lnt[0]);
    for (uint32_t b = 0; b < n; b++) {
        r->xs[b] = (r->lnt[b] - r->centre) / r->scale;
        r->ts[b] = exp(r->centre + r->scale * r->xs[b]);
        double p = 1.0;
        for (uint32_t i = 0; i < k; i++) {
            r->design[b * k + i] = p;
            r->designf[b * k + i] = (float)p;
            p *= r->xs[b];
        }
    }
    for (uint32_t j = 0; j < r->opt.ntimes; j++)
        r->xt[j] = (log(r->map_times[j]) - r->centre) / r->scale;
    for (int g = 0; g <= PEAK_GRID; g++) {
        double x = g == PEAK_GRID ? r->xs[n - 1]
                                  : r->xs[0] + (r->xs[n - 1] - r->xs[0]) * g / PEAK_GRID, p = 1.0;
        r->gx[g] = x;
        for (uint32_t i = 0; i < PL_REDUCE_MAX_DEGREE - 2; i++) {
            r->gpow[(size_t)g * (PL_REDUCE_MAX_DEGREE - 2) + i] = (float)p;
            p *= x;
        }
    }
    double *A = malloc((size_t)n * k * sizeof *A);
    double *Z = calloc((size_t)n * n, sizeof *Z);
    double *v = malloc(n * sizeof *v);
    int rc = PL_OK;
    if (!A || !Z || !v) {
        rc = pl__err(err, PL_ENOMEM, "reduction: out of memory");
    } else {
        memcpy(A, r->design, (size_t)n * k * sizeof *A);
        for (uint32_t b = 0; b < n; b++)
            Z[b * n + b] = 1.0;
        if (lsq(A, n, k, Z, n, v))
            rc = pl__err(err, PL_EINVAL, "reduction: the %u samples cannot fit degree %u", n,
                         r->degree);
        else
            memcpy(r->pinv, Z, (size_t)k * n * sizeof *Z);
    }
    if (!rc)
        for (int g = 0; g <= PEAK_GRID; g++) {
            double bx[PL_REDUCE_MAX_DEGREE + 1];
            d2_basis(bx, r->k, r->gx[g]);
            for (uint32_t b = 0; b < n; b++) {
                double w = 0.0;
                for (uint32_t i = 2; i < k; i++)
                    w += r->pinv[(size_t)i * n + b] * bx[i];
                r->w2[(size_t)g * n + b] = w * w;
            }
        }
    free(A);
    free(Z);
    free(v);
    return rc;
}

static void make_layout(pl_reducer *r)
{
    layout *l = &r->lay;
    int c = 0;
    for (uint32_t j = 0; j < r->opt.ntimes; j++)
        for (unsigned q = 0; q < 5; q++)
            l->at[j][q] = (r->products >> q) & 1u ? c++ : -1;
    l->peak_t = c++;
    l->peak_d2 = c++;
    l->depth_d2 = l->depth_slab = -1;
    if (!isnan(r->alpha)) {
        if (r->opt.depth_method != PL_DEPTH_SLAB_FIT)
            l->depth_d2 = c++;
        if (r->opt.depth_method != PL_DEPTH_PEAK_D2)
            l->depth_slab = c++;
    }
    l->peak_contrast = c++;
    l->peak_contrast_t = c++;
    l->phase0 = r->nfreq ? c : -1;
    c += 3 * (int)r->nfreq;
    l->nchannels = (uint32_t)c;
}

/* The pool: opt.threads participants (0: one per online processor), no
 * more than rows. */
static int start_threads(pl_reducer *r, pl_err *err)
{
    unsigned n = pl_threads__count(r->opt.threads);
    if (n > r->height)
        n = r->height;
    if (pl_threads__pool_new(&r->pool, n))
        return pl__err(err, PL_ENOMEM, "reduction: out of memory");
    r->nthreads = pl_threads__pool_size(r->pool);
    return PL_OK;
}

/*
 * The per-pixel samples (tens to hundreds of MB), mapped with every page
 * in place (MAP_POPULATE where Linux has it): touching them page by page
 * as the bins close costs tens of thousands of page faults, a noticeable
 * share of the reduction (more in a virtual machine). Anonymous pages
 * come zeroed. Released with free_samples().
 */
static float *alloc_samples(size_t n, size_t *bytes, int *bad)
{
    *bytes = (n ? n : 1) * sizeof(float);
#if defined(MAP_POPULATE) && defined(MAP_ANONYMOUS)
    void *p = mmap(NULL, *bytes, PROT_READ | PROT_WRITE,
                   MAP_PRIVATE | MAP_ANONYMOUS | MAP_POPULATE, -1, 0);
    if (p != MAP_FAILED)
        return p;
    *bytes = 0;
#endif
    float *q = calloc(n ? n : 1, sizeof(float));
    if (!q)
        *bad = 1;
    return q;
}

static void free_samples(float *p, size_t bytes)
{
#if defined(MAP_POPULATE) && defined(MAP_ANONYMOUS)
    if (p && bytes) {
        munmap(p, bytes);
        return;
    }
#endif
    free(p);
}

static void *alloc_array(size_t n, size_t size, int *bad)
{
    void *p = calloc(n ? n : 1, size);
    if (!p)
        *bad = 1;
    return p;
}

PL_EXPORT int pl_reducer_new(pl_reducer **out, uint32_t width, uint32_t height,
                             const double *times, uint32_t nframes, uint32_t preflash,
                             const pl_reduce_options *opts, pl_err *err)
{
    assert(out && times);
    *out = NULL;
    pl__err_clear(err);
    static const pl_reduce_options defaults = PL_REDUCE_OPTIONS_INIT;
    const pl_reduce_options *o = opts ? opts : &defaults;
    if (width == 0 || height == 0 || width > PL_MAP_MAX_SIDE || height > PL_MAP_MAX_SIDE)
        return pl__err(err, PL_EINVAL, "reduction: image size %ux%u out of range", width,
                       height);
    if (nframes < 2 || preflash >= nframes)
        return pl__err(err, PL_EINVAL,
                       "reduction: %u frames with %u pre-flash frames (at least one after "
                       "them needed)",
                       nframes, preflash);
    for (uint32_t i = 0; i < nframes; i++)
        if (!isfinite(times[i]) || (i && !(times[i] > times[i - 1])))
            return pl__err(err, PL_EINVAL, "reduction: frame %u time %.9g s is %s", i, times[i],
                           isfinite(times[i]) ? "not after the previous one" : "not finite");
    /* No pre-flash frame: the frames hold the rise, from the flash on. The
     * cold reference then stays zero and nothing is subtracted. Frames
     * before the flash mean a cold reference was forgotten, not absent. */
    uint32_t before = 0;
    while (before < nframes && times[before] < 0.0)
        before++;
    if (preflash == 0 && before > 0)
        return pl__err(err, PL_EINVAL,
                       "reduction: no pre-flash frames given but %u frames come before the "
                       "flash (none is for frames that already hold the rise, from the flash "
                       "on)",
                       before);
    int rc = check_options(o, width, height, err);
    if (rc)
        return rc;
    for (uint32_t j = 0; j < o->ntimes; j++)
        if (!(isfinite(o->times_s[j]) && o->times_s[j] > 0.0))
            return pl__err(err, PL_EINVAL, "reduction options: map time %g s is not positive",
                           o->times_s[j]);

    pl_reducer *r = calloc(1, sizeof *r);
    if (!r)
        return pl__err(err, PL_ENOMEM, "reduction: out of memory");
    r->width = width;
    r->height = height;
    r->npix = (size_t)width * height;
    r->nframes = nframes;
    r->preflash = preflash;
    r->opt = *o;
    r->opt.times_s = r->map_times;
    for (uint32_t j = 0; j < o->ntimes; j++)
        r->map_times[j] = o->times_s[j];
    r->products = o->time_products ? o->time_products : PL_REDUCE_AT_ALL;
    r->degree = o->degree;
    r->k = o->degree + 1;
    r->alpha = o->diffusivity_mm2_s;
    r->min_d2 = isnan(o->peak_min_d2) ? PL_REDUCE_DEFAULT_PEAK_MIN_D2 : o->peak_min_d2;
    r->min_snr = isnan(o->peak_min_snr) ? PL_REDUCE_DEFAULT_PEAK_MIN_SNR : o->peak_min_snr;
    r->nfreq = o->phase_frequencies;
    r->M = r->nfreq ? o->phase_samples : 0;
    r->last_index = -1;
    make_layout(r);
    if (r->lay.nchannels > PL_MAP_MAX_CHANNELS) {
        pl__err(err, PL_EINVAL, "reduction options: %u channels asked for, at most %u",
                r->lay.nchannels, PL_MAP_MAX_CHANNELS);
        pl_reducer_free(r);
        return PL_EINVAL;
    }

    int bad = 0;
    size_t npix = r->npix, nb = o->samples;
    r->times = alloc_array(nframes, sizeof *r->times, &bad);
    r->role = alloc_array(nframes, sizeof *r->role, &bad);
    r->edges = alloc_array(nb + 1, sizeof *r->edges, &bad);
    r->bin_used = alloc_array(nb, sizeof *r->bin_used, &bad);
    r->lnt = alloc_array(nb, sizeof *r->lnt, &bad);
    r->lcount = alloc_array(nb, sizeof *r->lcount, &bad);
    r->inv_l = alloc_array(nb, sizeof *r->inv_l, &bad);
    r->xs = alloc_array(nb, sizeof *r->xs, &bad);
    r->ts = alloc_array(nb, sizeof *r->ts, &bad);
    r->design = alloc_array(nb * r->k, sizeof *r->design, &bad);
    r->designf = alloc_array(nb * r->k, sizeof *r->designf, &bad);
    r->pinv = alloc_array(nb * r->k, sizeof *r->pinv, &bad);
    r->w2 = alloc_array(nb * (PEAK_GRID + 1), sizeof *r->w2, &bad);
    r->ref_risef = alloc_array(nb, sizeof *r->ref_risef, &bad);
    if (r->M) {
        r->pcount = alloc_array(r->M, sizeof *r->pcount, &bad);
        r->inv_p = alloc_array(r->M, sizeof *r->inv_p, &bad);
        r->fill_lo = alloc_array(r->M, sizeof *r->fill_lo, &bad);
        r->fill_hi = alloc_array(r->M, sizeof *r->fill_hi, &bad);
        r->fill_w = alloc_array(r->M, sizeof *r->fill_w, &bad);
    }
    if (bad) {
        pl_reducer_free(r);
        return pl__err(err, PL_ENOMEM, "reduction: out of memory");
    }
    memcpy(r->times, times, nframes * sizeof *times);
    rc = plan_sampling(r, err);
    if (!rc)
        rc = plan_fit(r, err);
    if (rc) {
        pl_reducer_free(r);
        return rc;
    }
    r->cold = alloc_array(npix, sizeof *r->cold, &bad);
    r->cold_sum = alloc_array(npix, sizeof *r->cold_sum, &bad);
    r->cold_n = alloc_array(npix, sizeof *r->cold_n, &bad);
    r->acc_s = alloc_array(npix, sizeof *r->acc_s, &bad);
    r->acc_l = alloc_array(npix, sizeof *r->acc_l, &bad);
    r->bins_l = alloc_samples(npix * r->nused, &r->bins_l_bytes, &bad);
    if (r->M) {
        r->acc_p = alloc_array(npix, sizeof *r->acc_p, &bad);
        r->bins_p = alloc_samples(npix * r->M, &r->bins_p_bytes, &bad);
    }
    uint32_t nbatch = r->nneeded < BATCH_FRAMES ? r->nneeded : BATCH_FRAMES;
    for (int b = 0; b < 2; b++)
        r->batch[b].frames = alloc_array(npix * nbatch, sizeof(float), &bad);
    if (bad) {
        pl_reducer_free(r);
        return pl__err(err, PL_ENOMEM, "reduction: out of memory for %ux%u pixels", width,
                       height);
    }
    rc = start_threads(r, err);
    if (rc) {
        pl_reducer_free(r);
        return rc;
    }
    *out = r;
    return PL_OK;
}

PL_EXPORT void pl_reducer_free(pl_reducer *r)
{
    if (!r)
        return;
    pl_threads__pool_free(r->pool);
    free(r->times);
    free(r->role);
    free(r->edges);
    free(r->bin_used);
    free(r->lnt);
    free(r->lcount);
    free(r->inv_l);
    free(r->xs);
    free(r->ts);
    free(r->design);
    free(r->designf);
    free(r->pinv);
    free(r->w2);
    free(r->ref_risef);
    free(r->ref_pix);
    free(r->zref);
    free(r->pref);
    free(r->pcount);
    free(r->inv_p);
    free(r->fill_lo);
    free(r->fill_hi);
    free(r->fill_w);
    free(r->tw);
    free(r->cold);
    free(r->cold_sum);
    free(r->cold_n);
    free(r->acc_s);
    free(r->acc_l);
    free(r->acc_p);
    free_samples(r->bins_l, r->bins_l_bytes);
    free_samples(r->bins_p, r->bins_p_bytes);
    free(r->batch[0].frames);
    free(r->batch[1].frames);
    free(r->slab_G);
    free(r->slab_lam);
    free(r);
}

/* ---- per-pixel stage ------------------------------------------------------ */

/* Interpolate the empty uniform bins of one pixel's samples. */
static void fill_phase(const pl_reducer *r, float *u)
{
    if (!r->nempty_p)
        return;
    for (uint32_t m = 0; m < r->M; m++)
        if (!r->pcount[m])
            u[m] = (1.0f - r->fill_w[m]) * u[r->fill_lo[m]] + r->fill_w[m] * u[r->fill_hi[m]];
}

/*
 * out row r = sum over i < nterms of w[r * wstride + i] * X row i, for
 * r < nrows, where every row holds PB values (PB pixels of a block). Each
 * value is summed over i in order, from zero, in every version below, so
 * the result does not depend on which one runs. The GNU C versions keep
 * four vector accumulators (of 2 doubles or 4 floats; 4 doubles or 8
 * floats with AVX2) over 4 vector widths of columns, which stay in
 * registers: wider generic vectors spill on SSE2 and run several times
 * slower, so the width is chosen per target, at run time.
 */
#define COMBINE_KERNEL(name, T, LANES, attr)                                               \
    attr static void name(T *restrict out, const T *restrict w, size_t wstride,            \
                          uint32_t nrows, const T *restrict X, uint32_t nterms)            \
    {                                                                                      \
        typedef T vec __attribute__((vector_size(LANES * sizeof(T))));                     \
        for (uint32_t h = 0; h < PB; h += 4 * LANES)                                       \
            for (uint32_t r = 0; r < nrows; r++) {                                         \
                const vec zero = {0};                                                      \
                vec a0 = zero, a1 = zero, a2 = zero, a3 = zero;                            \
                const T *wr = w + r * wstride;                                             \
                for (uint32_t i = 0; i < nterms; i++) {                                    \
                    vec wi = zero + wr[i], x0, x1, x2, x3;                                 \
                    const T *x = X + (size_t)i * PB + h;                                   \
                    memcpy(&x0, x, sizeof x0);                                             \
                    memcpy(&x1, x + LANES, sizeof x1);                                     \
                    memcpy(&x2, x + 2 * LANES, sizeof x2);                                 \
                    memcpy(&x3, x + 3 * LANES, sizeof x3);                                 \
                    a0 += wi * x0;                                                         \
                    a1 += wi * x1;                                                         \
                    a2 += wi * x2;                                                         \
                    a3 += wi * x3;                                                         \
                }                                                                          \
                T *o = out + (size_t)r * PB + h;                                           \
                memcpy(o, &a0, sizeof a0);                                                 \
                memcpy(o + LANES, &a1, sizeof a1);                                         \
                memcpy(o + 2 * LANES, &a2, sizeof a2);                                     \
                memcpy(o + 3 * LANES, &a3, sizeof a3);                                     \
            }                                                                              \
    }

/* Without GNU C vectors, the same sums as a plain loop. */
#define COMBINE_PLAIN(name, T)                                                             \
    static void name(T *restrict out, const T *restrict w, size_t wstride, uint32_t nrows, \
                     const T *restrict X, uint32_t nterms)                                 \
    {                                                                                      \
        for (uint32_t r = 0; r < nrows; r++)                                               \
            for (uint32_t j = 0; j < PB; j++) {                                            \
                T acc = 0;                                                                 \
                for (uint32_t i = 0; i < nterms; i++)                                      \
                    acc += w[r * wstride + i] * X[(size_t)i * PB + j];                     \
                out[(size_t)r * PB + j] = acc;                                             \
            }                                                                              \
    }

#if defined(__GNUC__)
COMBINE_KERNEL(combine_d_base, double, 2, )
COMBINE_KERNEL(combine_f_base, float, 4, )
#else
COMBINE_PLAIN(combine_d_base, double)
COMBINE_PLAIN(combine_f_base, float)
#endif
#if HAVE_AVX2_VERSIONS
COMBINE_KERNEL(combine_d_avx2, double, 4, __attribute__((target("avx2"))))
COMBINE_KERNEL(combine_f_avx2, float, 8, __attribute__((target("avx2"))))
/* a direct call of either (a call through a chosen pointer costs a few %) */
#define PICK_KERNEL(base, avx2, args) \
    do {                              \
        if (have_avx2())              \
            avx2 args;                \
        else                          \
            base args;                \
    } while (0)
#else
#define PICK_KERNEL(base, avx2, args) base args
#endif

static void combine_rows(double *restrict out, const double *restrict w, size_t wstride,
                         uint32_t nrows, const double *restrict X, uint32_t nterms)
{
    PICK_KERNEL(combine_d_base, combine_d_avx2, (out, w, wstride, nrows, X, nterms));
}

/* combine_rows() in float. */
static void combine_rows_f(float *restrict out, const float *restrict w, size_t wstride,
                           uint32_t nrows, const float *restrict X, uint32_t nterms)
{
    PICK_KERNEL(combine_f_base, combine_f_avx2, (out, w, wstride, nrows, X, nterms));
}

/*
 * Fit the pixels p0 .. p0 + np - 1 (np <= PB) together: ws->Zb receives
 * their samples (zero-padded to PB columns), ws->C their coefficients and
 * ws->status whether each was fitted on all its samples (0), on the
 * subset of valid samples by its own solve (1), or is masked (-1). The
 * shared pseudo-inverse is applied column by column, summing over the
 * samples in order, so a pixel's coefficients do not depend on the block
 * (or thread) it falls in; working on PB pixels at once lets the compiler
 * use vector instructions across pixels.
 */
static void fit_block(const pl_reducer *r, scratch *ws, size_t p0, uint32_t np)
{
    uint32_t n = r->nused, k = r->k;
    double *restrict Zb = ws->Zb, *restrict C = ws->C;
    for (uint32_t j = 0; j < PB; j++)
        ws->nvalid[j] = 0;
    for (uint32_t b = 0; b < n; b++) {
        const float *row = r->bins_l + (size_t)b * r->npix + p0;
        double *zb = Zb + (size_t)b * PB;
        float *zf = ws->Zf + (size_t)b * PB;
        for (uint32_t j = 0; j < np; j++) {
            zb[j] = zf[j] = row[j];
            ws->nvalid[j] += isfinite(row[j]) != 0;
        }
        for (uint32_t j = np; j < PB; j++)
            zb[j] = zf[j] = 0.0f;
    }
    combine_rows(C, r->pinv, n, k, Zb, n);
    uint32_t need = r->degree + 2 > (n + 1) / 2 ? r->degree + 2 : (n + 1) / 2;
    for (uint32_t j = 0; j < np; j++) {
        if (ws->nvalid[j] == n) {
            ws->status[j] = 0;
            continue;
        }
        ws->status[j] = -1;
        if (ws->nvalid[j] < need)
            continue;
        /* its own pseudo-inverse, kept for the noise of its d2 */
        uint32_t m = 0, *vidx = ws->vidx + (size_t)j * n;
        for (uint32_t b = 0; b < n; b++)
            if (isfinite(Zb[(size_t)b * PB + j])) {
                memcpy(ws->A + (size_t)m * k, r->design + (size_t)b * k, k * sizeof(double));
                vidx[m++] = b;
            }
        memset(ws->Id, 0, (size_t)m * m * sizeof *ws->Id);
        for (uint32_t b = 0; b < m; b++)
            ws->Id[(size_t)b * m + b] = 1.0;
        if (lsq(ws->A, m, k, ws->Id, m, ws->v))
            continue;
        double *P = ws->Pp + (size_t)j * k * n;
        memcpy(P, ws->Id, (size_t)k * m * sizeof *P);
        for (uint32_t i = 0; i < k; i++) {
            double acc = 0.0;
            for (uint32_t b = 0; b < m; b++)
                acc += P[(size_t)i * m + b] * Zb[(size_t)vidx[b] * PB + j];
            C[(size_t)i * PB + j] = acc;
        }
        ws->status[j] = 1;
    }
}

/*
 * The fit at the samples (ws->Y, ln; ws->E, the rise), the noise of each
 * fitted pixel of the block and its peak contrast over the samples. A
 * log-spaced sample is the mean of n_b frames of a rise R_b, so with a
 * per-frame temperature noise sigma its ln has the variance sigma^2 /
 * (n_b R_b^2) (first order). sigma^2 is estimated from the pixel's own
 * residuals, weighted accordingly: sum_b (z_b - y_b)^2 n_b R_b^2 / (m - k)
 * over its m samples, R_b the fitted rise; misfit of the polynomial counts
 * as noise, which only makes the significance test stricter. ws->Q keeps
 * 1 / (n_b R_b^2). The loops run over the block's columns so that they
 * vectorise; a partial pixel's sum is then redone over its own samples.
 */
ROW_KERNEL static void fit_samples(const pl_reducer *r, scratch *ws, uint32_t np)
{
    uint32_t n = r->nused, k = r->k;
    for (uint32_t i = 0; i < k * PB; i++)
        ws->Cf[i] = (float)ws->C[i];
    combine_rows_f(ws->Y, r->designf, k, n, ws->Cf, k);
    float *restrict E = ws->E, *restrict Q = ws->Q;
    const float *restrict Y = ws->Y, *restrict Z = ws->Zf;
    for (uint32_t i = 0; i < n * PB; i++)
        E[i] = fast_expf(Y[i]);
    float sum[PB], best[PB];
    uint32_t best_b[PB];
    for (uint32_t j = 0; j < PB; j++) {
        sum[j] = 0.0f;
        best[j] = -INFINITY;
        best_b[j] = 0;
    }
    for (uint32_t b = 0; b < n; b++) {
        float cnt = (float)r->lcount[b], ref = r->ref_risef[b];
        const float *restrict Eb = E + (size_t)b * PB, *restrict Yb = Y + (size_t)b * PB,
                             *restrict Zr = Z + (size_t)b * PB;
        float *restrict Qb = Q + (size_t)b * PB;
        for (uint32_t j = 0; j < PB; j++) {
            float R = Eb[j], e = Zr[j] - Yb[j], w = cnt * R * R;
            sum[j] += e * e * w;
            Qb[j] = 1.0f / w;
            float y = R - ref, bj = best[j];
            uint32_t c = y > bj;
            best[j] = y > bj ? y : bj;
            best_b[j] = sel(c, b, best_b[j]);
        }
    }
    for (uint32_t j = 0; j < np; j++) {
        ws->best[j] = best[j];
        ws->best_b[j] = best_b[j];
        if (ws->status[j] == 0) {
            ws->noise2[j] = sum[j] / (n - k);
        } else if (ws->status[j] == 1) {
            float s1 = 0.0f;
            uint32_t m = ws->nvalid[j];
            for (uint32_t b = 0; b < n; b++) {
                float z = Z[(size_t)b * PB + j];
                if (isfinite(z)) {
                    float e = z - Y[(size_t)b * PB + j];
                    s1 += e * e / Q[(size_t)b * PB + j];
                }
            }
            ws->noise2[j] = m > k ? s1 / (m - k) : NAN;
        }
    }
}

/* pl_map_channel() without its call and check: the per-pixel stage writes
 * a dozen channels a pixel. */
static float *chan(const pl_reducer *r, int c)
{
    return r->map->data + (size_t)c * r->npix;
}

/*
 * The pulse-phase transform of the block's uniform samples at the first
 * nfreq harmonics, into ws->F. Directly, F_k = sum_m u_m e^(-2 pi i k m /
 * M) as one matrix product over the block, each value summed in a fixed
 * order (a NaN sample poisons its pixel's sums, as it should); with many
 * frequencies, kissfft per pixel.
 */
ROW_KERNEL static void phase_block(const pl_reducer *r, scratch *ws, size_t p0, uint32_t np)
{
    uint32_t M = r->M, nf = r->nfreq;
    for (uint32_t m = 0; m < M; m++) {
        const float *row = r->bins_p + (size_t)m * r->npix + p0;
        double *u = ws->Ud + (size_t)m * PB;
        for (uint32_t j = 0; j < np; j++)
            u[j] = row[j];
        for (uint32_t j = np; j < PB; j++)
            u[j] = 0.0;
    }
    if (r->direct) {
        combine_rows(ws->F, r->tw, M, 2 * nf, ws->Ud, M);
    } else {
        for (uint32_t j = 0; j < np; j++) {
            for (uint32_t m = 0; m < M; m++)
                ws->fft_in[m] = (float)ws->Ud[(size_t)m * PB + j];
            fill_phase(r, ws->fft_in);
            pl_fft__rfft_forward(ws->fft, ws->fft_in, ws->fft_out);
            for (uint32_t f = 0; f < nf; f++) {
                ws->F[(size_t)(2 * f) * PB + j] = ws->fft_out[f + 1].r;
                ws->F[(size_t)(2 * f + 1) * PB + j] = ws->fft_out[f + 1].i;
            }
        }
    }
    /* phase, amplitude and phase contrast (wrapped to (-pi, pi]); a pixel
     * with a NaN in any harmonic is NaN in all */
    uint32_t bad[PB] = {0};
    for (uint32_t f = 0; f < 2 * nf; f++)
        for (uint32_t j = 0; j < PB; j++)
            bad[j] |= !isfinite(ws->F[(size_t)f * PB + j]);
    for (uint32_t j = 0; j < np; j++)
        ws->no_phase += bad[j];
    float ph[PB], amp[PB], dph[PB], fre[PB], fim[PB];
    for (uint32_t f = 0; f < nf; f++) {
        const double *re = ws->F + (size_t)(2 * f) * PB, *im = re + PB;
        float ref = (float)r->ref_phase[f], twopi = (float)(2.0 * M_PI), pi = (float)M_PI;
        for (uint32_t j = 0; j < PB; j++) {
            fre[j] = (float)re[j];
            fim[j] = (float)im[j];
        }
        for (uint32_t j = 0; j < PB; j++)
            ph[j] = fast_atan2f(fim[j], fre[j]);
        for (uint32_t j = 0; j < PB; j++) {
            float a = ph[j], dd = a - ref;
            float up = dd + twopi, down = dd - twopi;
            uint32_t hi = dd > pi, lo = dd <= -pi, nan = bad[j];
            dd = u2f(sel(hi, f2u(down), sel(lo, f2u(up), f2u(dd))));
            ph[j] = u2f(sel(nan, 0x7fc00000u, f2u(a)));
            dph[j] = u2f(sel(nan, 0x7fc00000u, f2u(dd)));
        }
        for (uint32_t j = 0; j < PB; j++) /* sqrt keeps errno: not vectorised */
            amp[j] = bad[j] ? NAN : (float)(2.0 * sqrt(re[j] * re[j] + im[j] * im[j]) / M);
        int c = r->lay.phase0 + 3 * (int)f;
        memcpy(chan(r, c) + p0, ph, np * sizeof(float));
        memcpy(chan(r, c + 1) + p0, amp, np * sizeof(float));
        memcpy(chan(r, c + 2) + p0, dph, np * sizeof(float));
    }
}

/* The variance of block column j's fitted d2 (in x) at x = (1 - f) gx[g]
 * + f gx[g + 1], its squared weights interpolated linearly. */
static double d2_variance(const pl_reducer *r, const scratch *ws, uint32_t j, int g, double f)
{
    uint32_t n = r->nused;
    const float *Q = ws->Q;
    double v = 0.0;
    if (ws->status[j] == 0) {
        const double *wa = r->w2 + (size_t)g * n, *wb = wa + n;
        for (uint32_t b = 0; b < n; b++)
            v += ((1.0 - f) * wa[b] + f * wb[b]) * Q[(size_t)b * PB + j];
    } else {
        uint32_t k = r->k, m = ws->nvalid[j];
        const double *P = ws->Pp + (size_t)j * k * n;
        const uint32_t *vidx = ws->vidx + (size_t)j * n;
        double ba[PL_REDUCE_MAX_DEGREE + 1], bb[PL_REDUCE_MAX_DEGREE + 1];
        d2_basis(ba, k, r->gx[g]);
        d2_basis(bb, k, r->gx[g + 1]);
        for (uint32_t b = 0; b < m; b++) {
            double wa = 0.0, wb = 0.0;
            for (uint32_t i = 2; i < k; i++) {
                wa += P[(size_t)i * m + b] * ba[i];
                wb += P[(size_t)i * m + b] * bb[i];
            }
            v += ((1.0 - f) * wa * wa + f * wb * wb) * Q[(size_t)vidx[b] * PB + j];
        }
    }
    return v * ws->noise2[j];
}

/* Golden-section constant (3 - sqrt 5) / 2. */
#define GOLDEN 0.38196601125010515

/* The search grid of ln L for samples first..last: from a quarter of the
 * depth whose t* is the first sample's time to four times the last's. */
static void slab_grid(const pl_reducer *r, uint32_t first, uint32_t last, double lam[SLAB_GRID])
{
    double la = log(r->alpha);
    double lo = 0.5 * (la + r->lnt[first] - log(16.0));
    double hi = 0.5 * (la + r->lnt[last] + log(16.0));
    for (int j = 0; j < SLAB_GRID; j++)
        lam[j] = lo + (hi - lo) * j / (SLAB_GRID - 1);
}

static double slab_cost(const pl_reducer *r, const scratch *ws, double lam)
{
    double s = 0.0, s2 = 0.0;
    uint32_t nv = 0;
    double la = log(r->alpha);
    for (uint32_t b = 0; b < r->nused; b++)
        if (ws->valid[b]) {
            double d = ws->z[b] - slab_lnf(la + r->lnt[b] - 2.0 * lam);
            s += d;
            s2 += d * d;
            nv++;
        }
    return s2 - s * s / nv;
}

/* The adiabatic-slab thickness that best fits the pixel's samples (mm),
 * NaN when the best grid point is an end of the search range. */
static double slab_fit(const pl_reducer *r, const scratch *ws, int all_valid)
{
    double lam[SLAB_GRID], cost[SLAB_GRID];
    uint32_t first = 0, last = r->nused - 1;
    while (!ws->valid[first])
        first++;
    while (!ws->valid[last])
        last--;
    if (all_valid) {
        for (int j = 0; j < SLAB_GRID; j++) {
            const double *G = r->slab_G + (size_t)j * r->nused;
            double s = 0.0, s2 = 0.0;
            for (uint32_t b = 0; b < r->nused; b++) {
                double d = ws->z[b] - G[b];
                s += d;
                s2 += d * d;
            }
            lam[j] = r->slab_lam[j];
            cost[j] = s2 - s * s / r->nused;
        }
    } else {
        slab_grid(r, first, last, lam);
        for (int j = 0; j < SLAB_GRID; j++)
            cost[j] = slab_cost(r, ws, lam[j]);
    }
    int jb = 0;
    for (int j = 1; j < SLAB_GRID; j++)
        if (cost[j] < cost[jb])
            jb = j;
    if (jb == 0 || jb == SLAB_GRID - 1 || !isfinite(cost[jb]))
        return NAN;
    double a = lam[jb - 1], b = lam[jb + 1];
    double x1 = a + GOLDEN * (b - a), x2 = b - GOLDEN * (b - a);
    double f1 = slab_cost(r, ws, x1), f2 = slab_cost(r, ws, x2);
    for (int it = 0; it < SLAB_GOLDEN_STEPS; it++) {
        if (f1 < f2) {
            b = x2;
            x2 = x1;
            f2 = f1;
            x1 = a + GOLDEN * (b - a);
            f1 = slab_cost(r, ws, x1);
        } else {
            a = x1;
            x1 = x2;
            f1 = f2;
            x2 = b - GOLDEN * (b - a);
            f2 = slab_cost(r, ws, x2);
        }
    }
    return exp(0.5 * (a + b));
}



/*
 * The fitted second derivative d2 seen by the peak search: the two ends of
 * the search range and every interior extremum between them, in order of
 * x. An extremum is a sign change of the third derivative on the grid
 * (g3: its values at the grid points, `stride` apart; pos: bit g set where
 * g3 is positive at grid point g), placed at the
 * secant root inside its interval and valued there. The secant root lies
 * within a small fraction of the interval from the true one, and the value
 * of d2 there differs from the extremum's by the square of that distance
 * times the curvature: far below any threshold, so the rule judges the
 * extrema on these values and only the chosen one is refined. The rules
 * need the values of the maxima only; `minima` asks for those of the
 * minima and the ends too (for prominence()).
 */
typedef struct d2_profile {
    int n;
    double x[PEAK_GRID + 2], v[PEAK_GRID + 2];
    signed char kind[PEAK_GRID + 2]; /* +1 a maximum, -1 a minimum, 0 an end */
    unsigned char cell[PEAK_GRID + 2]; /* the grid interval g (from g - 1 to g) */
} d2_profile;

static void d2_profile_of(const pl_reducer *r, const float *g3, size_t stride, uint64_t pos,
                          const double *c2, int minima, d2_profile *pr)
{
    uint32_t d2deg = r->degree - 2;
    int n = 0;
    pr->x[n] = r->gx[0];
    pr->v[n] = minima ? poly(c2, d2deg, r->gx[0]) : NAN;
    pr->kind[n] = 0;
    pr->cell[n++] = 0;
    /* bit g - 1 of `change`: a sign change in interval g, a maximum where
     * the third derivative goes from positive to not */
    uint64_t inner = ((uint64_t)1 << PEAK_GRID) - 1, change = (pos ^ (pos >> 1)) & inner;
    while (change) {
        int g = 1;
        uint64_t c = change;
#if defined(__GNUC__)
        g += __builtin_ctzll(c);
#else
        while (!(c & 1)) {
            c >>= 1;
            g++;
        }
#endif
        change &= change - 1;
        int kind = (pos >> (g - 1)) & 1 ? 1 : -1;
        double ga = g3[(size_t)(g - 1) * stride], gb = g3[(size_t)g * stride];
        double x0 = r->gx[g - 1] + ga * (r->gx[g] - r->gx[g - 1]) / (ga - gb);
        pr->x[n] = x0;
        pr->v[n] = kind == 1 || minima ? poly(c2, d2deg, x0) : NAN;
        pr->kind[n] = (signed char)kind;
        pr->cell[n++] = (unsigned char)g;
    }
    pr->x[n] = r->gx[PEAK_GRID];
    pr->v[n] = minima ? poly(c2, d2deg, r->gx[PEAK_GRID]) : NAN;
    pr->kind[n] = 0;
    pr->cell[n++] = 0;
    pr->n = n;
}

/* The prominence of maximum i of a profile, as scipy.signal.peak_prominences
 * defines it on a sampled signal: on each side, the lowest value between
 * the peak and the first higher point (or the end of the range); the
 * prominence is the peak's height over the higher of the two. Between
 * neighbouring points of the profile d2 is monotone, so its extrema and
 * ends are all the samples the definition needs. */
static double prominence(const d2_profile *pr, int i)
{
    double v = pr->v[i], left = v, right = v;
    for (int j = i - 1; j >= 0 && pr->v[j] <= v; j--)
        left = fmin(left, pr->v[j]);
    for (int j = i + 1; j < pr->n && pr->v[j] <= v; j++)
        right = fmin(right, pr->v[j]);
    return v - fmax(left, right);
}

/* The variance of the fitted d2 at extremum i of block column j's
 * profile, interpolated linearly between the ends of its grid interval. */
static double peak_variance(const pl_reducer *r, const scratch *ws, uint32_t j,
                            const d2_profile *pr, int i)
{
    int g = pr->cell[i];
    double f = (pr->x[i] - r->gx[g - 1]) / (r->gx[g] - r->gx[g - 1]);
    return d2_variance(r, ws, j, g - 1, f);
}

/*
 * The interior maximum of the fitted second derivative (coefficients coef,
 * third derivative g3 on the grid, `stride` apart) chosen by the reducer's
 * rule: its abscissa and [out] value (d2 in x), NaN for both if none.
 *  - first significant: the earliest maximum whose value (in ln t: divided
 *    by scale^2) is positive and reaches min_d2, and whose ratio to its
 *    noise reaches min_snr and PL_REDUCE_PEAK_LOBE_RATIO times the largest
 *    such ratio of the pixel's maxima that reach min_d2;
 *  - largest: every maximum is a candidate, valued at its secant root, and
 *    candidates are refined in decreasing order of that value until the
 *    rest fall more than 1 % below the best refined one.
 * The chosen root is refined by refine_root(); one that lands within 1e-9
 * of the range's ends is not interior and does not count.
 */
static double peak_d2(const pl_reducer *r, const scratch *ws, uint32_t j, const double *coef,
                      double *value)
{
    const float *g3 = ws->G3 + j;
    const size_t stride = PB;
    uint32_t d = r->degree;
    *value = NAN;
    if (d < 3)
        return NAN;
    /* d2's coefficients now, d3's and d4's only to refine a maximum */
    double c2[PL_REDUCE_MAX_DEGREE], c3[PL_REDUCE_MAX_DEGREE], c4[PL_REDUCE_MAX_DEGREE];
    deriv_coefs(c2, coef, d, 2);
    int have_c3 = 0;
    double xlo = r->gx[0], xhi = r->gx[PEAK_GRID], eps = 1e-9 * (xhi - xlo);
    d2_profile pr;
    d2_profile_of(r, g3, stride, ws->pos[j], c2, 0, &pr);
    if (r->opt.peak_rule == PL_PEAK_FIRST_SIGNIFICANT) {
        double s2 = r->scale * r->scale;
        double vmin = r->min_d2 * s2, snr[PEAK_GRID + 2], best = 0.0;
        for (int i = 1; i + 1 < pr.n; i++) {
            snr[i] = NAN;
            if (pr.kind[i] == 1 && pr.v[i] > 0.0 && pr.v[i] >= vmin) {
                snr[i] = pr.v[i] / sqrt(peak_variance(r, ws, j, &pr, i));
                if (snr[i] > best)
                    best = snr[i];
            }
        }
        for (int i = 1; i + 1 < pr.n; i++) {
            if (!(snr[i] >= r->min_snr && snr[i] >= PL_REDUCE_PEAK_LOBE_RATIO * best))
                continue;
            if (!have_c3) {
                deriv_coefs(c3, coef, d, 3);
                deriv_coefs(c4, coef, d, 4);
                have_c3 = 1;
            }
            int g = pr.cell[i];
            double xr = refine_root(c3, c4, d - 3, r->gx, g, g3[(size_t)(g - 1) * stride],
                                    g3[(size_t)g * stride]);
            if (xr > xlo + eps && xr < xhi - eps) {
                *value = poly(c2, d - 2, xr);
                return xr;
            }
        }
        return NAN;
    }
    deriv_coefs(c3, coef, d, 3);
    deriv_coefs(c4, coef, d, 4);
    double cv[PEAK_GRID];
    int cg[PEAK_GRID], nc = 0;
    for (int i = 1; i + 1 < pr.n; i++) {
        if (pr.kind[i] != 1)
            continue;
        int at = nc++;
        while (at > 0 && cv[at - 1] < pr.v[i]) {
            cv[at] = cv[at - 1];
            cg[at] = cg[at - 1];
            at--;
        }
        cv[at] = pr.v[i];
        cg[at] = pr.cell[i];
    }
    double best = NAN, bestv = 0.0;
    for (int c = 0; c < nc; c++) {
        if (!isnan(best) && cv[c] < bestv - 0.01 * fabs(bestv))
            break;
        int g = cg[c];
        double xr = refine_root(c3, c4, d - 3, r->gx, g, g3[(size_t)(g - 1) * stride],
                                g3[(size_t)g * stride]);
        if (xr > xlo + eps && xr < xhi - eps) {
            double v = poly(c2, d - 2, xr);
            if (v > bestv) {
                bestv = v;
                best = xr;
            }
        }
    }
    if (!isnan(best))
        *value = bestv;
    return best;
}

/* Every channel of block column j (pixel p). */
static void pixel_outputs(pl_reducer *r, scratch *ws, size_t p, uint32_t j)
{
    const layout *l = &r->lay;
    uint32_t n = r->nused, d = r->degree;
    if (ws->status[j] < 0) {
        ws->masked++;
        for (int c = 0; c < (l->phase0 >= 0 ? l->phase0 : (int)l->nchannels); c++)
            chan(r, c)[p] = NAN;
    } else {
        ws->partial += ws->status[j] == 1;
        double coef[PL_REDUCE_MAX_DEGREE + 1], c1[PL_REDUCE_MAX_DEGREE], c2[PL_REDUCE_MAX_DEGREE];
        for (uint32_t i = 0; i <= d; i++)
            coef[i] = ws->C[(size_t)i * PB + j];
        if (r->opt.ntimes) {
            deriv_coefs(c1, coef, d, 1);
            deriv_coefs(c2, coef, d, 2);
        }
        double s = r->scale;
        for (uint32_t t = 0; t < r->opt.ntimes; t++) {
            double x = r->xt[t], lnr = poly(coef, d, x);
            const int *at = l->at[t];
            if (at[0] >= 0)
                chan(r, at[0])[p] = (float)exp(lnr);
            if (at[1] >= 0)
                chan(r, at[1])[p] = (float)(exp(lnr) - exp(r->ref_at[t]));
            if (at[2] >= 0)
                chan(r, at[2])[p] = (float)expm1(lnr - r->ref_at[t]);
            if (at[3] >= 0)
                chan(r, at[3])[p] = (float)(poly(c1, d - 1, x) / s);
            if (at[4] >= 0)
                chan(r, at[4])[p] = (float)(poly(c2, d - 2, x) / (s * s));
        }
        double v2, xp = peak_d2(r, ws, j, coef, &v2);
        double tpk = exp(r->centre + s * xp);
        chan(r, l->peak_t)[p] = (float)tpk;
        chan(r, l->peak_d2)[p] = (float)(v2 / (s * s));
        if (l->depth_d2 >= 0)
            chan(r, l->depth_d2)[p] = (float)sqrt(M_PI * r->alpha * tpk);
        if (l->depth_slab >= 0) {
            for (uint32_t b = 0; b < n; b++) {
                ws->z[b] = ws->Zb[(size_t)b * PB + j];
                ws->valid[b] = isfinite(ws->z[b]) != 0;
            }
            chan(r, l->depth_slab)[p] = (float)slab_fit(r, ws, ws->nvalid[j] == n);
        }

        /* peak contrast over the samples, refined by a parabola */
        uint32_t bb = ws->best_b[j];
        double xbest = r->xs[bb], vbest = ws->best[j], tbest = r->ts[bb];
        if (bb > 0 && bb + 1 < n) {
            double x0 = r->xs[bb - 1], x1 = r->xs[bb], x2 = r->xs[bb + 1];
            double y0 = ws->E[(size_t)(bb - 1) * PB + j] - r->ref_risef[bb - 1];
            double y1 = vbest;
            double y2 = ws->E[(size_t)(bb + 1) * PB + j] - r->ref_risef[bb + 1];
            double d01 = (y1 - y0) / (x1 - x0), d12 = (y2 - y1) / (x2 - x1);
            double curv = (d12 - d01) / (x2 - x0);
            if (curv < 0.0) {
                double xv = 0.5 * (x0 + x1) - d01 / (2.0 * curv);
                if (xv > x0 && xv < x2) {
                    /* in float, as the contrast at the samples */
                    double yv = (double)fast_expf((float)poly(coef, d, xv)) -
                                (double)fast_expf((float)poly(r->cref, d, xv));
                    if (yv > vbest) {
                        vbest = yv;
                        xbest = xv;
                        tbest = exp(r->centre + s * xbest);
                    }
                }
            }
        }
        chan(r, l->peak_contrast)[p] = (float)vbest;
        chan(r, l->peak_contrast_t)[p] = (float)tbest;
    }
}

/* The third derivative of the block's fits on the peak-search grid, into
 * ws->G3 (degree >= 3). In float: it only locates the sign changes, each
 * of which is checked in double before it is refined (refine_root()). */
ROW_KERNEL static void third_derivative_grid(const pl_reducer *r, scratch *ws)
{
    uint32_t d = r->degree;
    const double *restrict C = ws->C;
    float *restrict C3 = ws->C3;
    for (uint32_t i = 0; i + 3 <= d; i++) {
        double f = (double)(i + 3) * (i + 2) * (i + 1);
        for (uint32_t j = 0; j < PB; j++)
            C3[(size_t)i * PB + j] = (float)(f * C[(size_t)(i + 3) * PB + j]);
    }
    combine_rows_f(ws->G3, r->gpow, PL_REDUCE_MAX_DEGREE - 2, PEAK_GRID + 1, C3, d - 2);
    /* bit g of pos: the third derivative positive at grid point g (as an
     * integer, a float is positive when its bits are) */
    uint32_t lo[PB] = {0}, hi[PB] = {0};
#if defined(__GNUC__)
    typedef int32_t v4i __attribute__((vector_size(4 * sizeof(int32_t))));
    typedef uint32_t v4u __attribute__((vector_size(4 * sizeof(uint32_t))));
    for (uint32_t j = 0; j < PB; j += 4) {
        v4u l = {0, 0, 0, 0}, h = l;
        for (uint32_t g = 0; g <= PEAK_GRID; g++) {
            v4i u;
            memcpy(&u, ws->G3 + (size_t)g * PB + j, sizeof u);
            v4u bit = (v4u)(u > 0) & 1u;
            if (g < 32)
                l |= bit << g;
            else
                h |= bit << (g - 32);
        }
        memcpy(lo + j, &l, sizeof l);
        memcpy(hi + j, &h, sizeof h);
    }
#else
    for (uint32_t g = 0; g <= PEAK_GRID; g++)
        for (uint32_t j = 0; j < PB; j++) {
            uint32_t bit = (int32_t)f2u(ws->G3[(size_t)g * PB + j]) > 0;
            if (g < 32)
                lo[j] |= bit << g;
            else
                hi[j] |= bit << (g - 32);
        }
#endif
    for (uint32_t j = 0; j < PB; j++)
        ws->pos[j] = (uint64_t)hi[j] << 32 | lo[j];
}

static void block_work(pl_reducer *r, scratch *ws, size_t p0, uint32_t np)
{
    fit_block(r, ws, p0, np);
    if (r->degree >= 3)
        third_derivative_grid(r, ws);
    fit_samples(r, ws, np);
    if (r->nfreq)
        phase_block(r, ws, p0, np);
    for (uint32_t j = 0; j < np; j++)
        pixel_outputs(r, ws, p0 + j, j);
}

/* Pixels [p0, p1) of the per-pixel stage, in blocks of PB. */
static void finish_pixels(pl_reducer *r, uint32_t part, size_t p0, size_t p1)
{
    for (size_t p = p0; p < p1; p += PB) {
#if defined(__GNUC__)
        /* a block's samples lie on nused + M separate cache lines, too
         * many streams for the hardware to follow: ask for them a few
         * blocks ahead, every 64-byte line of them */
        size_t ahead = p + PREFETCH_BLOCKS * PB;
        if (ahead + PB <= r->chunk1) {
            for (uint32_t b = 0; b < r->nused; b++)
                for (uint32_t j = 0; j < PB; j += 16)
                    __builtin_prefetch(r->bins_l + (size_t)b * r->npix + ahead + j);
            for (uint32_t m = 0; m < r->M; m++)
                for (uint32_t j = 0; j < PB; j += 16)
                    __builtin_prefetch(r->bins_p + (size_t)m * r->npix + ahead + j);
        }
#endif
        block_work(r, &r->ws[part], p, (uint32_t)(p1 - p < PB ? p1 - p : PB));
    }
}

/* One unit of the per-pixel stage: FINISH_UNIT blocks of PB pixels of the
 * chunk [r->chunk0, r->chunk1). */
static void finish_unit(void *ctx, size_t unit, unsigned part)
{
    pl_reducer *r = ctx;
    size_t p0 = r->chunk0 + unit * FINISH_UNIT * PB;
    size_t p1 = p0 + FINISH_UNIT * PB < r->chunk1 ? p0 + FINISH_UNIT * PB : r->chunk1;
    finish_pixels(r, part, p0, p1);
}

static void free_one_scratch(scratch *w)
{
    free(w->Zb);
    free(w->C);
    free(w->C3);
    free(w->G3);
    free(w->Y);
    free(w->Cf);
    free(w->Ud);
    free(w->F);
    free(w->E);
    free(w->Q);
    free(w->Zf);
    free(w->Pp);
    free(w->vidx);
    free(w->Id);
    free(w->A);
    free(w->z);
    free(w->v);
    free(w->valid);
    free(w->vals);
    free(w->fft_in);
    free(w->fft_out);
    pl_fft__rfft_free(w->fft);
}

static void free_scratch(pl_reducer *r)
{
    if (!r->ws)
        return;
    for (uint32_t i = 0; i < r->nthreads; i++)
        free_one_scratch(&r->ws[i]);
    free(r->ws);
    r->ws = NULL;
}

static int alloc_one_scratch(const pl_reducer *r, scratch *w)
{
    int bad = 0;
    size_t n = r->nused;
    w->Zb = alloc_array(n * PB, sizeof *w->Zb, &bad);
    w->C = alloc_array((size_t)r->k * PB, sizeof *w->C, &bad);
    w->C3 = alloc_array((size_t)r->k * PB, sizeof *w->C3, &bad);
    w->G3 = alloc_array((size_t)(PEAK_GRID + 1) * PB, sizeof *w->G3, &bad);
    w->Y = alloc_array(n * PB, sizeof *w->Y, &bad);
    w->Cf = alloc_array((size_t)r->k * PB, sizeof *w->Cf, &bad);
    w->Ud = alloc_array((size_t)(r->M ? r->M : 1) * PB, sizeof *w->Ud, &bad);
    w->F = alloc_array((size_t)(r->nfreq ? 2 * r->nfreq : 1) * PB, sizeof *w->F, &bad);
    w->E = alloc_array(n * PB, sizeof *w->E, &bad);
    w->Q = alloc_array(n * PB, sizeof *w->Q, &bad);
    w->Zf = alloc_array(n * PB, sizeof *w->Zf, &bad);
    w->Pp = alloc_array(n * r->k * PB, sizeof *w->Pp, &bad);
    w->vidx = alloc_array(n * PB, sizeof *w->vidx, &bad);
    w->Id = alloc_array(n * n, sizeof *w->Id, &bad);
    w->A = alloc_array(n * r->k, sizeof *w->A, &bad);
    w->z = alloc_array(n, sizeof *w->z, &bad);
    w->v = alloc_array(n, sizeof *w->v, &bad);
    w->valid = alloc_array(n, 1, &bad);
    if (r->M && !r->direct) {
        w->fft_in = alloc_array(r->M, sizeof *w->fft_in, &bad);
        w->fft_out = alloc_array(r->M / 2 + 1, sizeof *w->fft_out, &bad);
        bad |= pl_fft__rfft_new(&w->fft, r->M) != PL_OK;
    }
    return bad ? -1 : 0;
}

static int alloc_scratch(pl_reducer *r, pl_err *err)
{
    r->ws = calloc(r->nthreads, sizeof *r->ws);
    int bad = !r->ws;
    for (uint32_t i = 0; !bad && i < r->nthreads; i++)
        bad = alloc_one_scratch(r, &r->ws[i]);
    if (bad) {
        free_scratch(r);
        return pl__err(err, PL_ENOMEM, "reduction: out of memory");
    }
    return PL_OK;
}

/* Sample q of every pixel, the log-spaced samples (q < nused: ln of the
 * mean rise) first, then the uniform bins (bin q - nused); NULL for an
 * empty uniform bin. */
static const float *sample_row(const pl_reducer *r, uint32_t q)
{
    if (q < r->nused)
        return r->bins_l + (size_t)q * r->npix;
    uint32_t m = q - r->nused;
    return r->pcount[m] ? r->bins_p + (size_t)m * r->npix : NULL;
}

/* Keep the pixels of pix[0..np) whose every log-spaced sample and every
 * filled uniform bin holds a number; returns how many remain. Reads bin
 * by bin, in pixel order. */
static size_t keep_valid_pixels(const pl_reducer *r, size_t *pix, size_t np,
                                unsigned char *ok)
{
    memset(ok, 1, np);
    for (uint32_t q = 0; q < r->nused + r->M; q++) {
        const float *row = sample_row(r, q);
        if (!row)
            continue;
        for (size_t i = 0; i < np; i++)
            ok[i] &= isfinite(row[pix[i]]) != 0;
    }
    size_t kept = 0;
    for (size_t i = 0; i < np; i++)
        if (ok[i])
            pix[kept++] = pix[i];
    return kept;
}

/* One sample of the reference curve a unit: log-spaced samples first,
 * then the filled uniform bins. */
static void reference_unit(void *ctx, size_t unit, unsigned part)
{
    pl_reducer *r = ctx;
    size_t np = r->ref_np;
    const size_t *pix = r->ref_pix;
    double *vals = r->ws[part].vals;
    uint32_t q = (uint32_t)unit;
    int log_sample = q < r->nused;
    const float *row = sample_row(r, q);
    if (!row)
        return;
    double v;
    if (r->ref_region) {
        double s = 0.0;
        for (size_t i = 0; i < np; i++)
            s += log_sample ? exp((double)row[pix[i]]) : row[pix[i]];
        v = log_sample ? log(s / np) : s / np;
    } else {
        for (size_t i = 0; i < np; i++)
            vals[i] = row[pix[i]];
        v = pl_filter__median_double(vals, np);
    }
    if (log_sample)
        r->zref[q] = v;
    else
        r->pref[q - r->nused] = (float)v;
}

/* The sound reference: per sample, the mean rise over the region, or the
 * median over a regular subsample of the valid pixels; then its fit and,
 * for pulse phase, the phase of its transform. */
static int make_reference(pl_reducer *r, pl_err *err)
{
    const pl_reduce_options *o = &r->opt;
    r->ref_region = o->ref_w && o->ref_h;
    size_t cap = r->ref_region ? (size_t)o->ref_w * o->ref_h : REF_MAX_PIXELS;
    r->ref_pix = malloc((cap ? cap : 1) * sizeof *r->ref_pix);
    r->zref = malloc(r->nused * sizeof *r->zref);
    r->pref = malloc((r->M ? r->M : 1) * sizeof *r->pref);
    int bad = !r->ref_pix || !r->zref || !r->pref;
    for (uint32_t i = 0; !bad && !r->ref_region && i < r->nthreads; i++) {
        r->ws[i].vals = malloc(cap * sizeof *r->ws[i].vals);
        bad = !r->ws[i].vals;
    }
    if (bad)
        return pl__err(err, PL_ENOMEM, "reduction: out of memory");
    size_t np = 0;
    if (r->ref_region) {
        for (uint32_t y = o->ref_y; y < o->ref_y + o->ref_h; y++)
            for (uint32_t x = o->ref_x; x < o->ref_x + o->ref_w; x++)
                r->ref_pix[np++] = (size_t)y * r->width + x;
        r->ref_kind = "region mean";
    } else {
        /* whole rows at a regular stride (columns too for very wide
         * images), so that the samples are read in long runs */
        uint32_t rows = REF_MAX_PIXELS / r->width ? REF_MAX_PIXELS / r->width : 1;
        uint32_t ys = (r->height + rows - 1) / rows;
        uint32_t xs = r->width > REF_MAX_PIXELS ? (r->width + REF_MAX_PIXELS - 1) / REF_MAX_PIXELS
                                                : 1;
        for (uint32_t y = 0; y < r->height; y += ys)
            for (uint32_t x = 0; x < r->width && np < cap; x += xs)
                r->ref_pix[np++] = (size_t)y * r->width + x;
        r->ref_kind = "median";
    }
    unsigned char *ok = malloc(np ? np : 1);
    if (!ok)
        return pl__err(err, PL_ENOMEM, "reduction: out of memory");
    np = keep_valid_pixels(r, r->ref_pix, np, ok);
    free(ok);
    r->ref_np = np;
    r->stats.reference_pixels = (uint32_t)np;
    if (!np)
        return pl__err(err, PL_EINVAL,
                       r->ref_region ? "reduction: the reference region holds no valid pixel"
                                     : "reduction: no pixel has a valid cooling curve");
    pl_threads__pool_run(r->pool, reference_unit, r, r->nused + r->M);
    for (uint32_t i = 0; i < r->k; i++) {
        double acc = 0.0;
        for (uint32_t b = 0; b < r->nused; b++)
            acc += r->pinv[(size_t)i * r->nused + b] * r->zref[b];
        r->cref[i] = acc;
    }
    for (uint32_t b = 0; b < r->nused; b++)
        r->ref_risef[b] = (float)exp(poly(r->cref, r->degree, r->xs[b]));
    for (uint32_t j = 0; j < o->ntimes; j++)
        r->ref_at[j] = poly(r->cref, r->degree, r->xt[j]);
    if (r->M) {
        fill_phase(r, r->pref);
        if (r->direct) {
            for (uint32_t f = 0; f < r->nfreq; f++) {
                double re = 0.0, im = 0.0;
                for (uint32_t m = 0; m < r->M; m++) {
                    re += r->tw[(size_t)(2 * f) * r->M + m] * (double)r->pref[m];
                    im += r->tw[(size_t)(2 * f + 1) * r->M + m] * (double)r->pref[m];
                }
                r->ref_phase[f] = atan2(im, re);
            }
        } else {
            pl_fft__cpx *F = r->ws[0].fft_out;
            pl_fft__rfft_forward(r->ws[0].fft, r->pref, F);
            for (uint32_t f = 0; f < r->nfreq; f++)
                r->ref_phase[f] = atan2(F[f + 1].i, F[f + 1].r);
        }
    }
    return PL_OK;
}

static int plan_slab(pl_reducer *r, pl_err *err)
{
    pthread_once(&slab_once, slab_build);
    r->slab_G = malloc((size_t)SLAB_GRID * r->nused * sizeof *r->slab_G);
    r->slab_lam = malloc(SLAB_GRID * sizeof *r->slab_lam);
    if (!r->slab_G || !r->slab_lam)
        return pl__err(err, PL_ENOMEM, "reduction: out of memory");
    double la = log(r->alpha);
    slab_grid(r, 0, r->nused - 1, r->slab_lam);
    for (int j = 0; j < SLAB_GRID; j++)
        for (uint32_t b = 0; b < r->nused; b++)
            r->slab_G[(size_t)j * r->nused + b] =
                slab_lnf(la + r->lnt[b] - 2.0 * r->slab_lam[j]);
    return PL_OK;
}

static int name_channels(pl_reducer *r, pl_err *err)
{
    static const char *const at_q[5] = {"temperature-rise", "temperature-contrast",
                                        "normalised-contrast", "log-derivative-1",
                                        "log-derivative-2"};
    static const char *const at_u[5] = {"K", "K", "1", "1", "1"};
    const layout *l = &r->lay;
    pl_map *m = r->map;
    int rc = PL_OK;
#define SET(c, q, u, ...)                                                         \
    do {                                                                          \
        if (!rc)                                                                  \
            rc = pl_map_set_channel(m, (uint32_t)(c), q, u, err);                 \
        snprintf(m->channels[c].label, sizeof m->channels[c].label, __VA_ARGS__); \
    } while (0)
    for (uint32_t j = 0; j < r->opt.ntimes; j++)
        for (int q = 0; q < 5; q++)
            if (l->at[j][q] >= 0)
                SET(l->at[j][q], at_q[q], at_u[q], "t=%.4g s", r->map_times[j]);
    SET(l->peak_t, "time-of-peak-d2", "s", "peak");
    SET(l->peak_d2, "log-derivative-2", "1", "peak");
    if (l->depth_d2 >= 0)
        SET(l->depth_d2, "depth", "mm", "peak d2");
    if (l->depth_slab >= 0)
        SET(l->depth_slab, "depth", "mm", "slab fit");
    SET(l->peak_contrast, "temperature-contrast", "K", "peak");
    SET(l->peak_contrast_t, "time-of-peak-contrast", "s", "peak");
    for (uint32_t f = 0; f < r->nfreq; f++) {
        double hz = (f + 1) / r->trunc;
        SET(l->phase0 + 3 * (int)f, "phase", "rad", "f=%.4g Hz", hz);
        SET(l->phase0 + 3 * (int)f + 1, "amplitude", "K", "f=%.4g Hz", hz);
        SET(l->phase0 + 3 * (int)f + 2, "phase-contrast", "rad", "f=%.4g Hz", hz);
    }
#undef SET
    return rc;
}

static cJSON *number_array(const double *v, size_t n)
{
    cJSON *a = cJSON_CreateArray();
    for (size_t i = 0; a && i < n; i++)
        cJSON_AddItemToArray(a, cJSON_CreateNumber(v[i]));
    return a;
}

/* The parameters record; for pl_reduce_sequence() (seq not NULL) also the
 * sequence's acquisition object and the reader's saturation count. */
static char *parameters_json(const pl_reducer *r, const pl_seq *seq, uint64_t saturated)
{
    const pl_reduce_options *o = &r->opt;
    cJSON *j = cJSON_CreateObject();
    if (!j)
        return NULL;
    char sw[64];
    snprintf(sw, sizeof sw, "plyledger %s", pl_version());
    cJSON_AddStringToObject(j, "software", sw);
    cJSON_AddStringToObject(j, "method",
                            "log-log polynomial reconstruction (Shepard et al. 2003)");
    double window[2] = {r->start, r->end};
    cJSON_AddItemToObject(j, "window_s", number_array(window, 2));
    cJSON_AddNumberToObject(j, "samples_requested", r->nbins);
    cJSON_AddNumberToObject(j, "samples_used", r->nused);
    cJSON_AddItemToObject(j, "bin_edges_s", number_array(r->edges, r->nbins + 1));
    double *st = malloc(r->nused * sizeof *st);
    if (st) {
        for (uint32_t b = 0; b < r->nused; b++)
            st[b] = exp(r->lnt[b]);
        cJSON_AddItemToObject(j, "sample_times_s", number_array(st, r->nused));
        for (uint32_t b = 0; b < r->nused; b++)
            st[b] = r->lcount[b];
        cJSON_AddItemToObject(j, "sample_frames", number_array(st, r->nused));
        free(st);
    }
    cJSON_AddNumberToObject(j, "degree", r->degree);
    cJSON *ab = cJSON_AddObjectToObject(j, "abscissa");
    cJSON_AddStringToObject(ab, "definition", "x = (ln(t / 1 s) - centre) / scale");
    cJSON_AddNumberToObject(ab, "centre", r->centre);
    cJSON_AddNumberToObject(ab, "scale", r->scale);
    cJSON *fr = cJSON_AddObjectToObject(j, "frames");
    cJSON_AddNumberToObject(fr, "total", r->nframes);
    cJSON_AddNumberToObject(fr, "preflash", r->preflash);
    if (r->preflash == 0) /* the frames held the rise: nothing was subtracted */
        cJSON_AddStringToObject(fr, "cold_reference", "subtracted");
    cJSON_AddNumberToObject(fr, "used", r->fed);
    cJSON_AddItemToObject(j, "map_times_s", number_array(r->map_times, o->ntimes));
    cJSON_AddNumberToObject(j, "time_products", r->products);
    if (isnan(r->alpha)) {
        cJSON_AddNullToObject(j, "diffusivity_mm2_s");
    } else {
        cJSON_AddNumberToObject(j, "diffusivity_mm2_s", r->alpha);
        cJSON_AddStringToObject(j, "depth_method",
                                o->depth_method == PL_DEPTH_PEAK_D2    ? "peak d2"
                                : o->depth_method == PL_DEPTH_SLAB_FIT ? "slab fit"
                                                                       : "peak d2 and slab fit");
        cJSON_AddStringToObject(j, "depth_formula_peak_d2", "L = sqrt(pi * alpha * t*)");
    }
    cJSON *pk = cJSON_AddObjectToObject(j, "peak_d2");
    if (r->opt.peak_rule == PL_PEAK_FIRST_SIGNIFICANT) {
        cJSON_AddStringToObject(pk, "rule", "first significant interior maximum");
        cJSON_AddNumberToObject(pk, "min_d2", r->min_d2);
        cJSON_AddNumberToObject(pk, "min_snr", r->min_snr);
        cJSON_AddNumberToObject(pk, "min_snr_share_of_largest", PL_REDUCE_PEAK_LOBE_RATIO);
        cJSON_AddStringToObject(pk, "noise",
                                "propagated from the samples, per-frame noise from the "
                                "residuals");
    } else {
        cJSON_AddStringToObject(pk, "rule", "largest positive interior maximum");
    }
    cJSON *ref = cJSON_AddObjectToObject(j, "reference");
    cJSON_AddStringToObject(ref, "kind", r->ref_kind);
    if (o->ref_w && o->ref_h) {
        double reg[4] = {o->ref_x, o->ref_y, o->ref_w, o->ref_h};
        cJSON_AddItemToObject(ref, "region_xywh", number_array(reg, 4));
    } else {
        cJSON_AddNumberToObject(ref, "max_pixels", REF_MAX_PIXELS);
    }
    cJSON_AddNumberToObject(ref, "pixels", r->stats.reference_pixels);
    cJSON *ph = cJSON_AddObjectToObject(j, "pulse_phase");
    cJSON_AddNumberToObject(ph, "frequencies", r->nfreq);
    if (r->nfreq) {
        cJSON_AddNumberToObject(ph, "samples", r->M);
        cJSON_AddNumberToObject(ph, "truncation_s", r->trunc);
        cJSON_AddNumberToObject(ph, "empty_samples_interpolated", r->nempty_p);
        cJSON_AddStringToObject(ph, "transform", r->direct ? "direct sum" : "kissfft");
        double hz[PL_REDUCE_MAX_PHASE_SAMPLES / 2];
        for (uint32_t f = 0; f < r->nfreq; f++)
            hz[f] = (f + 1) / r->trunc;
        cJSON_AddItemToObject(ph, "frequencies_hz", number_array(hz, r->nfreq));
        cJSON_AddStringToObject(ph, "amplitude", "2 |F_k| / samples");
    }
    cJSON_AddNumberToObject(j, "threads", r->nthreads);
    cJSON *px = cJSON_AddObjectToObject(j, "pixels");
    cJSON_AddNumberToObject(px, "total", (double)r->npix);
    cJSON_AddNumberToObject(px, "masked", r->stats.pixels_masked);
    cJSON_AddNumberToObject(px, "partial", r->stats.pixels_partial);
    cJSON_AddNumberToObject(px, "no_phase", r->stats.pixels_no_phase);
    cJSON *ch = cJSON_AddArrayToObject(j, "channels");
    for (uint32_t c = 0; c < r->map->nchannels; c++) {
        cJSON *e = cJSON_CreateObject();
        cJSON_AddStringToObject(e, "quantity", r->map->channels[c].quantity);
        cJSON_AddStringToObject(e, "unit", r->map->channels[c].unit);
        cJSON_AddStringToObject(e, "label", r->map->channels[c].label);
        cJSON_AddItemToArray(ch, e);
    }
    if (seq) {
        cJSON *acq = cJSON_Parse(pl_seq_acquisition_json(seq));
        cJSON_AddItemToObject(j, "acquisition", acq ? acq : cJSON_CreateObject());
        cJSON_AddNumberToObject(j, "saturated_values", (double)saturated);
    }
    char *s = cJSON_PrintUnformatted(j);
    cJSON_Delete(j);
    return s;
}

/* pl_reducer_finish(), and pl_reduce_sequence()'s when seq is not NULL
 * (see parameters_json()). */
static int finish(pl_reducer *r, pl_map **map, char **parameters, const pl_seq *seq,
                  uint64_t saturated, pl_err *err)
{
    assert(r && map);
    *map = NULL;
    if (parameters)
        *parameters = NULL;
    if (r->state < 0)
        return pl__err(err, r->state, "reduction: stopped after an earlier failure");
    if (r->state == FINISHED)
        return pl__err(err, PL_EINVAL, "reduction: already finished");
    if (r->batch[r->cur].count)
        submit_batch(r);
    pl_threads__pool_help(r->pool);
    pl_threads__pool_wait(r->pool);
    if (r->next_needed < r->nframes) {
        pl__err(err, PL_EINVAL, "reduction: frame %u (t = %.6g s) and later needed frames missing",
                r->next_needed, r->times[r->next_needed]);
        return fail(r, PL_EINVAL);
    }
    int rc = alloc_scratch(r, err);
    if (!rc)
        rc = pl_map_new(&r->map, r->width, r->height, r->lay.nchannels, err);
    if (!rc)
        rc = name_channels(r, err);
    if (!rc && r->lay.depth_slab >= 0)
        rc = plan_slab(r, err);
    if (!rc)
        rc = make_reference(r, err);
    for (uint32_t c = 0; !rc && c < FINISH_CHUNKS; c++) {
        r->chunk0 = r->npix * c / FINISH_CHUNKS;
        r->chunk1 = r->npix * (c + 1) / FINISH_CHUNKS;
        if (r->chunk1 == r->chunk0)
            continue;
        size_t unit = (size_t)FINISH_UNIT * PB;
        pl_threads__pool_run(r->pool, finish_unit, r, (r->chunk1 - r->chunk0 + unit - 1) / unit);
        if (r->opt.progress &&
            r->opt.progress(r->opt.progress_data,
                            STREAM_SHARE + (1.0 - STREAM_SHARE) * (c + 1) / FINISH_CHUNKS))
            rc = pl__err(err, PL_ECANCELED, "reduction: cancelled while fitting");
    }
    if (!rc) {
        for (uint32_t i = 0; i < r->nthreads; i++) {
            r->stats.pixels_masked += r->ws[i].masked;
            r->stats.pixels_partial += r->ws[i].partial;
            r->stats.pixels_no_phase += r->ws[i].no_phase;
        }
        r->stats.frames_used = r->fed;
        r->stats.samples_used = r->nused;
        r->map->pitch_u = r->map->pitch_v = NAN;
        if (parameters) {
            *parameters = parameters_json(r, seq, saturated);
            if (!*parameters)
                rc = pl__err(err, PL_ENOMEM, "reduction: out of memory");
        }
    }
    free_scratch(r);
    if (rc) {
        pl_map_free(r->map);
        r->map = NULL;
        memset(&r->stats, 0, sizeof r->stats);
        return fail(r, rc);
    }
    *map = r->map;
    r->map = NULL;
    r->state = FINISHED;
    return PL_OK;
}

PL_EXPORT int pl_reducer_finish(pl_reducer *r, pl_map **map, char **parameters, pl_err *err)
{
    return finish(r, map, parameters, NULL, 0, err);
}

PL_EXPORT void pl_reducer_stats(const pl_reducer *r, pl_reduce_stats *stats)
{
    assert(r && stats);
    if (r->state == FINISHED)
        *stats = r->stats;
    else
        memset(stats, 0, sizeof *stats);
}

/* ---- test access ---------------------------------------------------------- */

/* Fit pixel `pixel` alone into a fresh scratch `w` (block column 0), as the
 * per-pixel stage did; PL_ENOMATCH when it is masked. Free `w` with
 * free_one_scratch() whatever the outcome. */
static int refit_pixel(const pl_reducer *r, uint32_t pixel, scratch *w)
{
    memset(w, 0, sizeof *w);
    if (alloc_one_scratch(r, w))
        return PL_ENOMEM;
    fit_block(r, w, pixel, 1);
    return w->status[0] < 0 ? PL_ENOMATCH : PL_OK;
}

int pl_reduce__pixel_fit(const pl_reducer *r, uint32_t pixel, double *x, double *z,
                         uint32_t *n, double *coef, double *centre, double *scale)
{
    if (r->state != FINISHED || pixel >= r->npix)
        return PL_EINVAL;
    scratch w;
    int rc = refit_pixel(r, pixel, &w);
    if (!rc) {
        uint32_t m = 0;
        for (uint32_t b = 0; b < r->nused; b++)
            if (isfinite(w.Zb[(size_t)b * PB])) {
                x[m] = r->xs[b];
                z[m++] = w.Zb[(size_t)b * PB];
            }
        *n = m;
        for (uint32_t i = 0; i < r->k; i++)
            coef[i] = w.C[(size_t)i * PB];
        *centre = r->centre;
        *scale = r->scale;
    }
    free_one_scratch(&w);
    return rc;
}

int pl_reduce__pixel_peaks(const pl_reducer *r, uint32_t pixel, pl_reduce__peak *peaks,
                           uint32_t cap, uint32_t *n)
{
    if (r->state != FINISHED || pixel >= r->npix || r->degree < 3)
        return PL_EINVAL;
    scratch w;
    int rc = refit_pixel(r, pixel, &w);
    if (!rc) {
        uint32_t d = r->degree;
        double coef[PL_REDUCE_MAX_DEGREE + 1], c2[PL_REDUCE_MAX_DEGREE];
        for (uint32_t i = 0; i <= d; i++)
            coef[i] = w.C[(size_t)i * PB];
        third_derivative_grid(r, &w);
        fit_samples(r, &w, 1);
        deriv_coefs(c2, coef, d, 2); /* as peak_d2() */
        d2_profile pr;
        d2_profile_of(r, w.G3, PB, w.pos[0], c2, 1, &pr);
        double s2 = r->scale * r->scale;
        uint32_t m = 0;
        for (int i = 1; i + 1 < pr.n; i++) {
            if (pr.kind[i] != 1)
                continue;
            if (m < cap) {
                peaks[m].t_s = exp(r->centre + r->scale * pr.x[i]);
                peaks[m].d2 = pr.v[i] / s2;
                peaks[m].prominence = prominence(&pr, i) / s2;
                peaks[m].noise = sqrt(peak_variance(r, &w, 0, &pr, i)) / s2;
            }
            m++;
        }
        *n = m;
    }
    free_one_scratch(&w);
    return rc;
}

int pl_reduce__phase_samples(const pl_reducer *r, uint32_t pixel, float *out, double *dt)
{
    if (r->state != FINISHED || !r->M || pixel >= r->npix)
        return PL_EINVAL;
    for (uint32_t m = 0; m < r->M; m++)
        out[m] = r->bins_p[(size_t)m * r->npix + pixel];
    fill_phase(r, out);
    *dt = r->dtp;
    return PL_OK;
}

/* ---- whole sequences ------------------------------------------------------ */

PL_EXPORT int pl_reduce_sequence(pl_map **map, char **parameters, pl_seq *seq,
                                 const pl_reduce_options *opts, pl_reduce_stats *stats,
                                 pl_err *err)
{
    assert(map && seq);
    *map = NULL;
    if (parameters)
        *parameters = NULL;
    if (stats)
        memset(stats, 0, sizeof *stats);
    pl_reducer *r = NULL;
    uint32_t n = pl_seq_frame_count(seq);
    int rc = pl_reducer_new(&r, pl_seq_width(seq), pl_seq_height(seq), pl_seq_times(seq), n,
                            pl_seq_preflash_frames(seq), opts, err);
    if (rc)
        return rc;
    uint64_t saturated = 0;
    for (uint32_t i = 0; i < n && !rc; i++) {
        if (!pl_reducer_frame_needed(r, i))
            continue;
        rc = accept_frame(r, i, err);
        if (rc < 0)
            break;
        uint32_t nsat = 0;
        rc = pl_seq_read_frame(seq, i, batch_slot(r), &nsat, err);
        if (rc) {
            fail(r, rc);
            break;
        }
        saturated += nsat;
        rc = commit_frame(r, i, err);
    }
    if (!rc)
        rc = finish(r, map, parameters, seq, saturated, err);
    if (!rc && stats) {
        pl_reducer_stats(r, stats);
        stats->saturated_values = saturated;
    }
    pl_reducer_free(r);
    return rc;
}
