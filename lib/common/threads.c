/*
 * threads.c - thread counts, the parallel for and the pool of
 * threads_int.h.
 */
#include "common/threads_int.h"

#include "plyledger/common.h"

#include <pthread.h>
#include <stdatomic.h>
#include <stdlib.h>
#include <unistd.h>

unsigned pl_threads__count(unsigned want)
{
    if (want == 0) {
        long cpus = sysconf(_SC_NPROCESSORS_ONLN);
        want = cpus < 1 ? 1u : cpus > (long)PL_THREADS_MAX ? PL_THREADS_MAX : (unsigned)cpus;
    }
    return want > PL_THREADS_MAX ? PL_THREADS_MAX : want;
}

/* ---- parallel for ------------------------------------------------------ */

typedef struct range_job {
    pl_threads__range_fn fn;
    void *ctx;
    uint32_t begin, end;
    unsigned worker;
} range_job;

static void *range_main(void *p)
{
    range_job *j = p;
    j->fn(j->ctx, j->begin, j->end, j->worker);
    return NULL;
}

void pl_threads__for(unsigned threads, uint32_t n, pl_threads__range_fn fn, void *ctx)
{
    unsigned nt = threads > PL_THREADS_MAX ? PL_THREADS_MAX : threads;
    if (nt > n)
        nt = n;
    if (nt <= 1) {
        fn(ctx, 0, n, 0);
        return;
    }
    range_job jobs[PL_THREADS_MAX];
    pthread_t th[PL_THREADS_MAX];
    int started[PL_THREADS_MAX] = { 0 };
    for (unsigned t = 0; t < nt; t++) {
        jobs[t].fn = fn;
        jobs[t].ctx = ctx;
        jobs[t].begin = (uint32_t)((uint64_t)n * t / nt);
        jobs[t].end = (uint32_t)((uint64_t)n * (t + 1) / nt);
        jobs[t].worker = t;
    }
    for (unsigned t = 1; t < nt; t++)
        started[t] = pthread_create(&th[t], NULL, range_main, &jobs[t]) == 0;
    fn(ctx, jobs[0].begin, jobs[0].end, 0);
    for (unsigned t = 1; t < nt; t++) {
        if (started[t])
            pthread_join(th[t], NULL);
        else
            fn(ctx, jobs[t].begin, jobs[t].end, t);
    }
}

/* ---- the pool -------------------------------------------------------------
 *
 * The workers sleep on `go` until the generation changes, take the job
 * (fn, ctx) under the lock, then take units through an atomic counter
 * without it; the last one out signals `done`. The caller's thread takes
 * units of the same job as part size - 1.
 */

typedef struct worker_arg {
    pl_threads__pool *pool;
    unsigned part;
} worker_arg;

struct pl_threads__pool {
    unsigned size;    /* participants, the caller's thread included */
    unsigned started; /* workers running */
    pthread_t *threads;
    worker_arg *args;
    pthread_mutex_t mu;
    pthread_cond_t go, done;
    uint64_t gen;
    unsigned busy; /* workers still in the running job */
    int quit;
    pl_threads__unit_fn fn; /* the running job, NULL when none */
    void *ctx;
    atomic_size_t next; /* its next unit */
    size_t units;       /* and its count */
};

static void take_units(pl_threads__pool *p, pl_threads__unit_fn fn, void *ctx, unsigned part)
{
    for (;;) {
        size_t u = atomic_fetch_add(&p->next, 1);
        if (u >= p->units)
            return;
        fn(ctx, u, part);
    }
}

static void *worker_main(void *arg)
{
    worker_arg *a = arg;
    pl_threads__pool *p = a->pool;
    uint64_t seen = 0;
    pthread_mutex_lock(&p->mu);
    for (;;) {
        while (!p->quit && p->gen == seen)
            pthread_cond_wait(&p->go, &p->mu);
        if (p->quit)
            break;
        seen = p->gen;
        pl_threads__unit_fn fn = p->fn;
        void *ctx = p->ctx;
        pthread_mutex_unlock(&p->mu);
        take_units(p, fn, ctx, a->part);
        pthread_mutex_lock(&p->mu);
        if (--p->busy == 0)
            pthread_cond_broadcast(&p->done);
    }
    pthread_mutex_unlock(&p->mu);
    return NULL;
}

int pl_threads__pool_new(pl_threads__pool **out, unsigned threads)
{
    unsigned n = pl_threads__count(threads);
    pl_threads__pool *p = calloc(1, sizeof *p);
    *out = NULL;
    if (!p)
        return PL_ENOMEM;
    p->threads = calloc(n, sizeof *p->threads);
    p->args = calloc(n, sizeof *p->args);
    if (!p->threads || !p->args) {
        free(p->threads);
        free(p->args);
        free(p);
        return PL_ENOMEM;
    }
    pthread_mutex_init(&p->mu, NULL);
    pthread_cond_init(&p->go, NULL);
    pthread_cond_init(&p->done, NULL);
    atomic_init(&p->next, 0);
    for (unsigned i = 0; i + 1 < n; i++) {
        p->args[i].pool = p;
        p->args[i].part = i;
        if (pthread_create(&p->threads[i], NULL, worker_main, &p->args[i]) != 0)
            break;
        p->started++;
    }
    p->size = p->started + 1;
    *out = p;
    return PL_OK;
}

void pl_threads__pool_free(pl_threads__pool *p)
{
    if (!p)
        return;
    pl_threads__pool_help(p);
    pl_threads__pool_wait(p);
    pthread_mutex_lock(&p->mu);
    p->quit = 1;
    pthread_cond_broadcast(&p->go);
    pthread_mutex_unlock(&p->mu);
    for (unsigned i = 0; i < p->started; i++)
        pthread_join(p->threads[i], NULL);
    pthread_mutex_destroy(&p->mu);
    pthread_cond_destroy(&p->go);
    pthread_cond_destroy(&p->done);
    free(p->threads);
    free(p->args);
    free(p);
}

unsigned pl_threads__pool_size(const pl_threads__pool *p)
{
    return p->size;
}

void pl_threads__pool_start(pl_threads__pool *p, pl_threads__unit_fn fn, void *ctx,
                            size_t units)
{
    pthread_mutex_lock(&p->mu);
    while (p->busy)
        pthread_cond_wait(&p->done, &p->mu);
    atomic_store(&p->next, 0);
    p->units = units;
    p->fn = fn;
    p->ctx = ctx;
    p->busy = p->started;
    p->gen++;
    pthread_cond_broadcast(&p->go);
    pthread_mutex_unlock(&p->mu);
}

void pl_threads__pool_help(pl_threads__pool *p)
{
    pthread_mutex_lock(&p->mu);
    pl_threads__unit_fn fn = p->fn;
    void *ctx = p->ctx;
    pthread_mutex_unlock(&p->mu);
    if (fn)
        take_units(p, fn, ctx, p->size - 1);
}

void pl_threads__pool_wait(pl_threads__pool *p)
{
    pthread_mutex_lock(&p->mu);
    while (p->busy)
        pthread_cond_wait(&p->done, &p->mu);
    p->fn = NULL;
    p->ctx = NULL;
    pthread_mutex_unlock(&p->mu);
}

void pl_threads__pool_run(pl_threads__pool *p, pl_threads__unit_fn fn, void *ctx, size_t units)
{
    pl_threads__pool_start(p, fn, ctx, units);
    pl_threads__pool_help(p);
    pl_threads__pool_wait(p);
}
