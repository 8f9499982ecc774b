/*
 * fft.c - real FFTs of rows and images over kissfft (see fft_int.h).
 */
#include "common/fft_int.h"

#include "common/threads_int.h"
#include "plyledger/common.h"

#include <kiss_fft.h>
#include <kiss_fftr.h>
#include <stddef.h>
#include <stdlib.h>
#include <string.h>

/* pl_fft__cpx arrays go to kissfft as its own complex type. */
_Static_assert(sizeof(kiss_fft_scalar) == sizeof(float), "kissfft must be built for float");
_Static_assert(sizeof(kiss_fft_cpx) == sizeof(pl_fft__cpx)
                   && offsetof(kiss_fft_cpx, r) == offsetof(pl_fft__cpx, r)
                   && offsetof(kiss_fft_cpx, i) == offsetof(pl_fft__cpx, i),
               "pl_fft__cpx must be laid out as kiss_fft_cpx");

static kiss_fft_cpx *kcpx(pl_fft__cpx *z)
{
    return (kiss_fft_cpx *)(void *)z;
}

static const kiss_fft_cpx *kcpx_const(const pl_fft__cpx *z)
{
    return (const kiss_fft_cpx *)(const void *)z;
}

/* ---- one row ------------------------------------------------------------- */

struct pl_fft__rfft {
    kiss_fftr_cfg cfg; /* keeps its own scratch */
};

int pl_fft__rfft_new(pl_fft__rfft **out, uint32_t n)
{
    *out = NULL;
    if (n == 0 || n % 2 || n > INT32_MAX)
        return PL_EINVAL;
    pl_fft__rfft *p = malloc(sizeof *p);
    if (!p)
        return PL_ENOMEM;
    p->cfg = kiss_fftr_alloc((int)n, 0, NULL, NULL);
    if (!p->cfg) {
        free(p);
        return PL_ENOMEM;
    }
    *out = p;
    return PL_OK;
}

void pl_fft__rfft_free(pl_fft__rfft *p)
{
    if (!p)
        return;
    kiss_fftr_free(p->cfg);
    free(p);
}

void pl_fft__rfft_forward(pl_fft__rfft *p, const float *in, pl_fft__cpx *out)
{
    kiss_fftr(p->cfg, in, kcpx(out));
}

/* ---- an image -------------------------------------------------------------
 *
 * COL_BLOCK columns are gathered at a time for the column transforms, so
 * that every cache line read is used. Each thread has its own kissfft
 * states (kiss_fftr keeps scratch in its state) and scratch.
 */

#define COL_BLOCK 8u

typedef struct worker_plan {
    kiss_fftr_cfg rf, ri;   /* rows, w even */
    kiss_fft_cfg rcf, rci;  /* rows, w odd */
    kiss_fft_cfg cf, ci;    /* columns */
    pl_fft__cpx *scratch;   /* 2 COL_BLOCK h + 2 w */
} worker_plan;

struct pl_fft__rfft2 {
    uint32_t h, w, wh;
    unsigned nt;
    worker_plan *wk; /* nt */
};

void pl_fft__rfft2_free(pl_fft__rfft2 *p)
{
    if (!p)
        return;
    for (unsigned t = 0; p->wk && t < p->nt; t++) {
        worker_plan *k = &p->wk[t];
        kiss_fftr_free(k->rf);
        kiss_fftr_free(k->ri);
        kiss_fft_free(k->rcf);
        kiss_fft_free(k->rci);
        kiss_fft_free(k->cf);
        kiss_fft_free(k->ci);
        free(k->scratch);
    }
    free(p->wk);
    free(p);
}

int pl_fft__rfft2_new(pl_fft__rfft2 **out, uint32_t h, uint32_t w, unsigned threads)
{
    *out = NULL;
    if (h == 0 || w == 0 || h > INT32_MAX || w > INT32_MAX)
        return PL_EINVAL;
    pl_fft__rfft2 *p = calloc(1, sizeof *p);
    if (!p)
        return PL_ENOMEM;
    p->h = h;
    p->w = w;
    p->wh = w / 2 + 1;
    p->nt = threads < 1 ? 1 : threads > PL_THREADS_MAX ? PL_THREADS_MAX : threads;
    p->wk = calloc(p->nt, sizeof *p->wk);
    if (!p->wk)
        goto fail;
    for (unsigned t = 0; t < p->nt; t++) {
        worker_plan *k = &p->wk[t];
        if (w % 2 == 0) {
            k->rf = kiss_fftr_alloc((int)w, 0, NULL, NULL);
            k->ri = kiss_fftr_alloc((int)w, 1, NULL, NULL);
            if (!k->rf || !k->ri)
                goto fail;
        } else {
            k->rcf = kiss_fft_alloc((int)w, 0, NULL, NULL);
            k->rci = kiss_fft_alloc((int)w, 1, NULL, NULL);
            if (!k->rcf || !k->rci)
                goto fail;
        }
        k->cf = kiss_fft_alloc((int)h, 0, NULL, NULL);
        k->ci = kiss_fft_alloc((int)h, 1, NULL, NULL);
        size_t n = 2 * (size_t)COL_BLOCK * h + 2 * (size_t)w;
        k->scratch = malloc(n * sizeof *k->scratch);
        if (!k->cf || !k->ci || !k->scratch)
            goto fail;
    }
    *out = p;
    return PL_OK;
fail:
    pl_fft__rfft2_free(p);
    return PL_ENOMEM;
}

typedef struct fft_job {
    pl_fft__rfft2 *p;
    const float *in;
    pl_fft__cpx *spec;
    float *out;
    int inverse;
} fft_job;

static void rows_forward(void *ctx, uint32_t b, uint32_t e, unsigned t)
{
    fft_job *j = ctx;
    pl_fft__rfft2 *p = j->p;
    worker_plan *k = &p->wk[t];
    for (uint32_t i = b; i < e; i++) {
        const float *row = j->in + (size_t)i * p->w;
        pl_fft__cpx *o = j->spec + (size_t)i * p->wh;
        if (p->w % 2 == 0) {
            kiss_fftr(k->rf, row, kcpx(o));
        } else {
            pl_fft__cpx *a = k->scratch, *z = a + p->w;
            for (uint32_t x = 0; x < p->w; x++) {
                a[x].r = row[x];
                a[x].i = 0.0f;
            }
            kiss_fft(k->rcf, kcpx_const(a), kcpx(z));
            memcpy(o, z, p->wh * sizeof *o);
        }
    }
}

static void rows_inverse(void *ctx, uint32_t b, uint32_t e, unsigned t)
{
    fft_job *j = ctx;
    pl_fft__rfft2 *p = j->p;
    worker_plan *k = &p->wk[t];
    for (uint32_t i = b; i < e; i++) {
        const pl_fft__cpx *s = j->spec + (size_t)i * p->wh;
        float *o = j->out + (size_t)i * p->w;
        if (p->w % 2 == 0) {
            kiss_fftri(k->ri, kcpx_const(s), o);
        } else {
            /* the whole row's spectrum from its Hermitian half */
            pl_fft__cpx *a = k->scratch, *z = a + p->w;
            memcpy(a, s, p->wh * sizeof *a);
            for (uint32_t l = p->wh; l < p->w; l++) {
                a[l].r = s[p->w - l].r;
                a[l].i = -s[p->w - l].i;
            }
            kiss_fft(k->rci, kcpx_const(a), kcpx(z));
            for (uint32_t x = 0; x < p->w; x++)
                o[x] = z[x].r;
        }
    }
}

/* Column blocks [b, e) of COL_BLOCK columns each. */
static void columns(void *ctx, uint32_t b, uint32_t e, unsigned t)
{
    fft_job *j = ctx;
    pl_fft__rfft2 *p = j->p;
    worker_plan *k = &p->wk[t];
    kiss_fft_cfg cfg = j->inverse ? k->ci : k->cf;
    pl_fft__cpx *buf = k->scratch, *res = buf + (size_t)COL_BLOCK * p->h;
    for (uint32_t blk = b; blk < e; blk++) {
        uint32_t j0 = blk * COL_BLOCK;
        uint32_t nb = p->wh - j0 < COL_BLOCK ? p->wh - j0 : COL_BLOCK;
        for (uint32_t i = 0; i < p->h; i++) {
            const pl_fft__cpx *s = j->spec + (size_t)i * p->wh + j0;
            for (uint32_t c = 0; c < nb; c++)
                buf[(size_t)c * p->h + i] = s[c];
        }
        for (uint32_t c = 0; c < nb; c++)
            kiss_fft(cfg, kcpx_const(buf + (size_t)c * p->h), kcpx(res + (size_t)c * p->h));
        for (uint32_t i = 0; i < p->h; i++) {
            pl_fft__cpx *s = j->spec + (size_t)i * p->wh + j0;
            for (uint32_t c = 0; c < nb; c++)
                s[c] = res[(size_t)c * p->h + i];
        }
    }
}

void pl_fft__rfft2_forward(pl_fft__rfft2 *p, const float *in, pl_fft__cpx *spec)
{
    fft_job j = { p, in, spec, NULL, 0 };
    pl_threads__for(p->nt, p->h, rows_forward, &j);
    pl_threads__for(p->nt, (p->wh + COL_BLOCK - 1) / COL_BLOCK, columns, &j);
}

void pl_fft__rfft2_inverse(pl_fft__rfft2 *p, pl_fft__cpx *spec, float *out)
{
    fft_job j = { p, NULL, spec, out, 1 };
    pl_threads__for(p->nt, (p->wh + COL_BLOCK - 1) / COL_BLOCK, columns, &j);
    pl_threads__for(p->nt, p->h, rows_inverse, &j);
}
