/*
 * test_threads.c - thread counts, the parallel for and the pool
 * (lib/common/threads.c).
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <pthread.h>
#include <stdatomic.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#include "common/threads_int.h"
#include "plyledger/common.h"

static void test_threads__count_is_asked_or_processors_within_limit(void **state)
{
    (void)state;
    long cpus = sysconf(_SC_NPROCESSORS_ONLN);
    unsigned want = cpus < 1 ? 1u : cpus > (long)PL_THREADS_MAX ? PL_THREADS_MAX : (unsigned)cpus;
    assert_int_equal(pl_threads__count(0), want);
    assert_int_equal(pl_threads__count(1), 1);
    assert_int_equal(pl_threads__count(3), 3);
    assert_int_equal(pl_threads__count(PL_THREADS_MAX), PL_THREADS_MAX);
    assert_int_equal(pl_threads__count(PL_THREADS_MAX + 1), PL_THREADS_MAX);
    assert_int_equal(pl_threads__count(100000), PL_THREADS_MAX);
}

/* ---- parallel for ------------------------------------------------------ */

#define FOR_MAX 1000u

typedef struct for_log {
    atomic_int hits[FOR_MAX];
    atomic_int calls;
    uint32_t begin[PL_THREADS_MAX], end[PL_THREADS_MAX];
    atomic_int seen[PL_THREADS_MAX];
} for_log;

static void log_slice(void *ctx, uint32_t b, uint32_t e, unsigned worker)
{
    for_log *l = ctx;
    atomic_fetch_add(&l->calls, 1);
    if (worker >= PL_THREADS_MAX)
        return; /* seen[] stays short of a call: the test fails */
    atomic_fetch_add(&l->seen[worker], 1);
    l->begin[worker] = b;
    l->end[worker] = e;
    for (uint32_t i = b; i < e; i++)
        atomic_fetch_add(&l->hits[i], 1);
}

/* Every index once, worker t on [n t / nt, n (t + 1) / nt), nt the
 * threads asked for but no more than n. */
static void test_threads__for_covers_each_index_once_in_fixed_slices(void **state)
{
    (void)state;
    const unsigned threads[] = { 1, 2, 3, 4, 7, 16, PL_THREADS_MAX + 5 };
    const uint32_t sizes[] = { 1, 2, 5, 97, 640, FOR_MAX };
    for_log *l = malloc(sizeof *l);
    assert_non_null(l);
    for (size_t a = 0; a < sizeof threads / sizeof threads[0]; a++)
        for (size_t b = 0; b < sizeof sizes / sizeof sizes[0]; b++) {
            uint32_t n = sizes[b];
            memset(l, 0, sizeof *l);
            pl_threads__for(threads[a], n, log_slice, l);
            unsigned nt = threads[a] > PL_THREADS_MAX ? PL_THREADS_MAX : threads[a];
            if (nt > n)
                nt = n;
            assert_int_equal(atomic_load(&l->calls), (int)nt);
            for (uint32_t i = 0; i < n; i++)
                assert_int_equal(atomic_load(&l->hits[i]), 1);
            for (unsigned t = 0; t < nt; t++) {
                assert_int_equal(atomic_load(&l->seen[t]), 1);
                assert_int_equal(l->begin[t], (uint32_t)((uint64_t)n * t / nt));
                assert_int_equal(l->end[t], (uint32_t)((uint64_t)n * (t + 1) / nt));
            }
        }
    /* an empty range: one call, nothing in it; no threads asked: one */
    memset(l, 0, sizeof *l);
    pl_threads__for(4, 0, log_slice, l);
    assert_int_equal(atomic_load(&l->calls), 1);
    assert_int_equal(l->begin[0], 0);
    assert_int_equal(l->end[0], 0);
    memset(l, 0, sizeof *l);
    pl_threads__for(0, 10, log_slice, l);
    assert_int_equal(atomic_load(&l->calls), 1);
    assert_int_equal(l->end[0], 10);
    free(l);
}

/* ---- the pool ------------------------------------------------------------ */

#define UNITS_MAX 5000u

typedef struct pool_log {
    atomic_int hits[UNITS_MAX];
    unsigned part[UNITS_MAX];
    pthread_t thread[UNITS_MAX];
    unsigned size;
    atomic_int bad_part;
} pool_log;

static void log_unit(void *ctx, size_t unit, unsigned part)
{
    pool_log *l = ctx;
    if (part >= l->size)
        atomic_store(&l->bad_part, 1);
    atomic_fetch_add(&l->hits[unit], 1);
    l->part[unit] = part;
    l->thread[unit] = pthread_self();
}

/* Jobs of many sizes on pools of 1 to 8: every unit exactly once, by
 * participants 0 .. size - 1, one thread each, the caller's thread as
 * the last. */
static void test_threads__pool_runs_every_unit_once_per_job(void **state)
{
    (void)state;
    pool_log *l = malloc(sizeof *l);
    assert_non_null(l);
    const unsigned sizes[] = { 1, 2, 3, 8 };
    for (size_t s = 0; s < sizeof sizes / sizeof sizes[0]; s++) {
        pl_threads__pool *pool;
        assert_int_equal(pl_threads__pool_new(&pool, sizes[s]), PL_OK);
        assert_int_equal(pl_threads__pool_size(pool), sizes[s]);
        for (unsigned job = 0; job < 200; job++) {
            size_t units = (job * 7919u) % UNITS_MAX;
            memset(l, 0, sizeof *l);
            l->size = sizes[s];
            pl_threads__pool_run(pool, log_unit, l, units);
            assert_int_equal(atomic_load(&l->bad_part), 0);
            for (size_t u = 0; u < units; u++)
                assert_int_equal(atomic_load(&l->hits[u]), 1);
            for (size_t u = units; u < UNITS_MAX; u++)
                assert_int_equal(atomic_load(&l->hits[u]), 0);
            /* a part is one thread, and the caller's is the last part */
            pthread_t of_part[8];
            int known[8] = { 0 };
            for (size_t u = 0; u < units; u++) {
                unsigned p = l->part[u];
                if (!known[p]) {
                    of_part[p] = l->thread[u];
                    known[p] = 1;
                }
                assert_true(pthread_equal(of_part[p], l->thread[u]));
                if (pthread_equal(l->thread[u], pthread_self()))
                    assert_int_equal(l->part[u], sizes[s] - 1);
                else
                    assert_true(l->part[u] < sizes[s] - 1);
            }
        }
        pl_threads__pool_free(pool);
    }
    pl_threads__pool_free(NULL);
    free(l);
}

typedef struct gate {
    atomic_int open;
    atomic_int waited_ok;
    atomic_int ran;
} gate;

/* The unit waits (at most 20 s) for the caller to open the gate. */
static void wait_for_gate(void *ctx, size_t unit, unsigned part)
{
    (void)unit;
    (void)part;
    gate *g = ctx;
    struct timespec t0, t;
    clock_gettime(CLOCK_MONOTONIC, &t0);
    do {
        if (atomic_load(&g->open)) {
            atomic_store(&g->waited_ok, 1);
            break;
        }
        clock_gettime(CLOCK_MONOTONIC, &t);
    } while (t.tv_sec - t0.tv_sec < 20);
    atomic_fetch_add(&g->ran, 1);
}

/* pl_threads__pool_start() returns while the job runs on the workers, so
 * the caller can work meanwhile: here it opens the gate the unit waits
 * for, which it could not do if start ran the unit itself. */
static void test_threads__pool_start_returns_while_workers_run(void **state)
{
    (void)state;
    pl_threads__pool *pool;
    assert_int_equal(pl_threads__pool_new(&pool, 2), PL_OK);
    assert_int_equal(pl_threads__pool_size(pool), 2);
    gate g;
    atomic_init(&g.open, 0);
    atomic_init(&g.waited_ok, 0);
    atomic_init(&g.ran, 0);
    pl_threads__pool_start(pool, wait_for_gate, &g, 1);
    /* give the worker time to take the unit, so that help finds none */
    struct timespec pause = { 0, 50 * 1000 * 1000 };
    nanosleep(&pause, NULL);
    atomic_store(&g.open, 1);
    pl_threads__pool_help(pool);
    pl_threads__pool_wait(pool);
    assert_int_equal(atomic_load(&g.ran), 1);
    assert_int_equal(atomic_load(&g.waited_ok), 1);
    /* free finishes a job still running */
    pool_log *l = calloc(1, sizeof *l);
    assert_non_null(l);
    l->size = 2;
    pl_threads__pool_start(pool, log_unit, l, 1000);
    pl_threads__pool_free(pool);
    for (size_t u = 0; u < 1000; u++)
        assert_int_equal(atomic_load(&l->hits[u]), 1);
    free(l);
}

/* A pool of one is the caller alone: help runs the whole job. */
static void test_threads__pool_of_one_runs_in_the_caller(void **state)
{
    (void)state;
    pl_threads__pool *pool;
    assert_int_equal(pl_threads__pool_new(&pool, 1), PL_OK);
    assert_int_equal(pl_threads__pool_size(pool), 1);
    pool_log *l = calloc(1, sizeof *l);
    assert_non_null(l);
    l->size = 1;
    pl_threads__pool_start(pool, log_unit, l, 300);
    for (size_t u = 0; u < 300; u++)
        assert_int_equal(atomic_load(&l->hits[u]), 0);
    pl_threads__pool_help(pool);
    pl_threads__pool_wait(pool);
    for (size_t u = 0; u < 300; u++) {
        assert_int_equal(atomic_load(&l->hits[u]), 1);
        assert_int_equal(l->part[u], 0);
        assert_true(pthread_equal(l->thread[u], pthread_self()));
    }
    /* with no job running, help and wait do nothing */
    pl_threads__pool_help(pool);
    pl_threads__pool_wait(pool);
    pl_threads__pool_free(pool);
    free(l);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_threads__count_is_asked_or_processors_within_limit),
        cmocka_unit_test(test_threads__for_covers_each_index_once_in_fixed_slices),
        cmocka_unit_test(test_threads__pool_runs_every_unit_once_per_job),
        cmocka_unit_test(test_threads__pool_start_returns_while_workers_run),
        cmocka_unit_test(test_threads__pool_of_one_runs_in_the_caller),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
