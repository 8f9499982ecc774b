/*
 * threads_int.h - the library's threads: how many, a parallel for over
 * slices of a range, and a persistent pool of workers that hand out units
 * of work; never installed.
 *
 * Two shapes of work share the cores. pl_threads__for() cuts [0, n) into
 * one contiguous slice per thread and starts the threads for that one
 * call: enough for a few large passes (registration's FFTs and
 * resampling). A pool keeps its workers between jobs, for work that runs
 * many short jobs (the reducer's batches of frames, the simulator's time
 * steps): a job is a count of units handed out one at a time, and the
 * caller may do other work while the workers start on it, then join in.
 *
 * Neither makes a result depend on the number of threads: a slice or a
 * unit computes the same whoever takes it. A caller that sums over
 * slices or units must fix their split itself (independent of the thread
 * count) and add the partial sums in a fixed order.
 */
#ifndef PLYLEDGER_THREADS_INT_H
#define PLYLEDGER_THREADS_INT_H

#include <stddef.h>
#include <stdint.h>

/* The most threads the library runs for one piece of work. */
#define PL_THREADS_MAX 256u

/* The threads to use when `want` are asked for: want itself, or one per
 * online processor when want is 0; at least 1, at most PL_THREADS_MAX. */
unsigned pl_threads__count(unsigned want);

/* ---- parallel for ------------------------------------------------------ */

/* Slice [begin, end) of the range, run by thread `worker`. */
typedef void (*pl_threads__range_fn)(void *ctx, uint32_t begin, uint32_t end, unsigned worker);

/*
 * Run fn over [0, n) on `threads` threads (at most n and PL_THREADS_MAX):
 * worker t gets [n t / nt, n (t + 1) / nt). The caller runs slice 0 and
 * returns when all are done; a slice whose thread cannot start runs in
 * the caller afterwards, with its own worker index, so per-worker scratch
 * is never shared.
 */
void pl_threads__for(unsigned threads, uint32_t n, pl_threads__range_fn fn, void *ctx);

/* ---- the pool ------------------------------------------------------------ */

typedef struct pl_threads__pool pl_threads__pool;

/* One unit of a job, run by participant `part` (0 .. size - 1; the
 * caller's thread is part size - 1). */
typedef void (*pl_threads__unit_fn)(void *ctx, size_t unit, unsigned part);

/*
 * A pool of `threads` participants (pl_threads__count(threads) of them):
 * the caller's thread and threads - 1 workers, started now. A worker that
 * cannot be started leaves the pool smaller (pl_threads__pool_size() says
 * how large it is). [out] *out. PL_OK or PL_ENOMEM.
 */
int pl_threads__pool_new(pl_threads__pool **out, unsigned threads);

/* Finish the running job, stop the workers and free the pool; NULL is
 * accepted. */
void pl_threads__pool_free(pl_threads__pool *pool);

/* The participants, the caller's thread included. */
unsigned pl_threads__pool_size(const pl_threads__pool *pool);

/* Start a job of `units` units on the workers and return at once (after
 * the previous job has ended); pl_threads__pool_help() and
 * pl_threads__pool_wait() finish it. ctx must live until then. */
void pl_threads__pool_start(pl_threads__pool *pool, pl_threads__unit_fn fn, void *ctx,
                            size_t units);

/* The caller's share of the running job, if any: units until none is
 * left. */
void pl_threads__pool_help(pl_threads__pool *pool);

/* Wait until the workers have left the running job (call
 * pl_threads__pool_help() first, or no one may take the units left). */
void pl_threads__pool_wait(pl_threads__pool *pool);

/* start, help and wait: the whole job, the caller taking part. */
void pl_threads__pool_run(pl_threads__pool *pool, pl_threads__unit_fn fn, void *ctx,
                          size_t units);

#endif
