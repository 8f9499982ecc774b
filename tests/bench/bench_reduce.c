/*
 * bench_reduce.c - whole-process time and peak memory of plyledger's
 * reduction of a 640 x 512 float32 .npy sequence, against a vectorised
 * NumPy implementation of the same steps (reduce_numpy.py) and against the
 * time to read the file once (the floor), all in the same run. See
 * README.md in this folder.
 *
 *   bench_reduce [--dir DIR] [--keep] [--frames N] [--also N,N] [--threads T]
 *                [--no-numpy]
 *
 * Sequences are written under DIR (default /tmp) as bench-<frames>.json
 * plus its .npy (1.3 GB for 1000 frames) and removed at the end unless
 * --keep is given; a kept sequence of the right size is reused. Every
 * sequence spans 20 s after the flash (the frame rate scales with the
 * frame count), so every frame enters the default fit window and the
 * runs at other frame counts show how memory scales with the frame count.
 * Each measured program runs in its own child process; the parent takes
 * the wall time from fork to exit and the peak resident set from wait4().
 * Each file is read once before the timed runs so all of them see a warm
 * page cache (dropping the cache needs root).
 */
#define _GNU_SOURCE
#include "plyledger/reduce.h"
#include "plyledger/seq.h"
#include "thermal/reduce_int.h"

#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <sys/time.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#define WIDTH 640u
#define HEIGHT 512u
#define PRE 10u
#define DURATION_S 20.0
#define ALPHA 0.4 /* mm^2/s, through-thickness diffusivity of CFRP (from memory) */
#define E_KMM 4.0 /* K mm: the flash's Q / (rho c) */

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return ts.tv_sec + ts.tv_nsec * 1e-9;
}

/* ---- the sequence ----------------------------------------------------- */

/* The exact adiabatic-slab series (pl_reduce__slab(), checked against
 * numpy in the tests). */
static double slab_rise(double t, double L)
{
    double o[3];
    pl_reduce__slab(log(ALPHA * t / (L * L)), o);
    return E_KMM / L * exp(o[0]);
}

static uint64_t rng = 88172645463325252ull;

static inline double noise(void)
{
    /* sum of four uniforms, scaled to unit variance: cheap and close enough
     * to Gaussian for a benchmark */
    double s = 0;
    for (int k = 0; k < 4; k++) {
        rng ^= rng << 13;
        rng ^= rng >> 7;
        rng ^= rng << 17;
        s += (double)(rng >> 11) / 9007199254740992.0;
    }
    return (s - 2.0) * sqrt(3.0);
}

/* A 4 mm plate with eight circular delaminations at 0.5 - 2.0 mm, each
 * pixel following the 1-D slab of its depth, NETD 20 mK. */
static int make_sequence(const char *manifest, uint32_t frames)
{
    static const double depths[8] = {0.5, 0.7, 0.9, 1.1, 1.3, 1.5, 1.75, 2.0};
    pl_seq_info info = PL_SEQ_INFO_INIT;
    info.width = WIDTH;
    info.height = HEIGHT;
    info.frame_count = frames;
    info.frame_rate_hz = (frames - PRE) / DURATION_S;
    info.preflash_frames = PRE;
    info.flash_time_s = (PRE - 0.5) / info.frame_rate_hz;
    info.storage = PL_SEQ_NPY_FLOAT32;
    info.pitch_u = info.pitch_v = 0.5;
    info.acquisition_json = "{\"source\":\"bench_reduce synthetic plate\"}";
    uint8_t *cls = malloc(WIDTH * HEIGHT);
    float *frame = malloc(WIDTH * HEIGHT * sizeof *frame);
    float *curve = malloc(9 * sizeof *curve);
    if (!cls || !frame || !curve)
        return -1;
    for (uint32_t y = 0; y < HEIGHT; y++)
        for (uint32_t x = 0; x < WIDTH; x++) {
            cls[y * WIDTH + x] = 8;
            for (int d = 0; d < 8; d++) {
                double cx = 80 + (d % 4) * 160, cy = 128 + (d / 4) * 256;
                if ((x - cx) * (x - cx) + (y - cy) * (y - cy) < 40 * 40)
                    cls[y * WIDTH + x] = (uint8_t)d;
            }
        }
    pl_seq_writer *w;
    pl_err err = {0};
    if (pl_seq_writer_open(&w, manifest, &info, &err)) {
        fprintf(stderr, "bench_reduce: %s\n", err.msg);
        return -1;
    }
    for (uint32_t i = 0; i < frames; i++) {
        double t = i / info.frame_rate_hz - info.flash_time_s;
        for (int d = 0; d < 9; d++)
            curve[d] = t > 0 ? (float)slab_rise(t, d < 8 ? depths[d] : 4.0) : 0.0f;
        for (uint32_t p = 0; p < WIDTH * HEIGHT; p++)
            frame[p] = (float)(293.15 + curve[cls[p]] + 0.02 * noise());
        if (pl_seq_writer_frame(w, frame, &err)) {
            fprintf(stderr, "bench_reduce: %s\n", err.msg);
            pl_seq_writer_discard(w);
            return -1;
        }
    }
    if (pl_seq_writer_close(w, &err)) {
        fprintf(stderr, "bench_reduce: %s\n", err.msg);
        return -1;
    }
    free(cls);
    free(frame);
    free(curve);
    return 0;
}

static int sequence_ok(const char *manifest, uint32_t frames)
{
    pl_seq *s;
    if (pl_seq_open(&s, manifest, NULL))
        return 0;
    int ok = pl_seq_frame_count(s) == frames && pl_seq_width(s) == WIDTH &&
             pl_seq_height(s) == HEIGHT;
    pl_seq_close(s);
    return ok;
}

/* ---- child processes ----------------------------------------------------- */

typedef struct run {
    double seconds;
    double peak_mb;
    int status;
} run;

static run run_child(char *const argv[])
{
    run r = {0, 0, -1};
    fflush(stdout);
    double t0 = now();
    pid_t pid = fork();
    if (pid == 0) {
        execv(argv[0], argv);
        perror(argv[0]);
        _exit(127);
    }
    if (pid < 0)
        return r;
    int st;
    struct rusage ru;
    if (wait4(pid, &st, 0, &ru) < 0)
        return r;
    r.seconds = now() - t0;
    r.peak_mb = ru.ru_maxrss / 1024.0;
    r.status = WIFEXITED(st) ? WEXITSTATUS(st) : -1;
    return r;
}

static int child_read(const char *path)
{
    int fd = open(path, O_RDONLY);
    if (fd < 0)
        return 1;
    size_t cap = 1u << 20;
    char *buf = malloc(cap);
    uint64_t total = 0, sum = 0;
    ssize_t n;
    while ((n = read(fd, buf, cap)) > 0) {
        total += (uint64_t)n;
        sum += (unsigned char)buf[n - 1];
    }
    close(fd);
    free(buf);
    printf("  read %llu bytes (%llu)\n", (unsigned long long)total, (unsigned long long)sum);
    return n < 0;
}

static int child_reduce(const char *manifest, unsigned threads)
{
    pl_seq *seq;
    pl_err err = {0};
    if (pl_seq_open(&seq, manifest, &err)) {
        fprintf(stderr, "%s\n", err.msg);
        return 1;
    }
    pl_reduce_options o = PL_REDUCE_OPTIONS_INIT;
    o.diffusivity_mm2_s = ALPHA;
    o.threads = threads;
    pl_map *m;
    pl_reduce_stats st;
    if (pl_reduce_sequence(&m, NULL, seq, &o, &st, &err)) {
        fprintf(stderr, "%s\n", err.msg);
        return 1;
    }
    const float *depth = pl_map_channel(m, (uint32_t)pl_map_find_channel(m, "depth"));
    /* depth at the first delamination's centre and on the sound plate */
    printf("  plyledger: %u frames, %u samples, depth %.3f mm (0.5) and %.3f mm (4.0)\n",
           st.frames_used, st.samples_used, depth[128 * WIDTH + 80], depth[10 * WIDTH + 10]);
    pl_map_free(m);
    pl_seq_close(seq);
    return 0;
}

/* ---- main ------------------------------------------------------------------ */

static void warm(const char *path)
{
    int fd = open(path, O_RDONLY);
    if (fd < 0)
        return;
    char *buf = malloc(1u << 20);
    while (read(fd, buf, 1u << 20) > 0)
        ;
    free(buf);
    close(fd);
}

static void remove_sequence(const char *manifest, const char *npy)
{
    unlink(npy);
    unlink(manifest);
}

int main(int argc, char **argv)
{
    if (argc == 3 && !strcmp(argv[1], "--child-read"))
        return child_read(argv[2]);
    if (argc == 4 && !strcmp(argv[1], "--child-reduce"))
        return child_reduce(argv[2], (unsigned)atoi(argv[3]));

    const char *dir = "/tmp";
    int keep = 0, numpy = 1;
    uint32_t main_frames = 1000, also[8] = {500, 2000}, nalso = 2;
    static char zero[] = "0", a_read[] = "--child-read", a_reduce[] = "--child-reduce",
                a_py[] = "/usr/bin/python3", a_script[] = BENCH_NUMPY_SCRIPT,
                a_chunked[] = "--chunked";
    char *threads = zero;
    for (int i = 1; i < argc; i++) {
        if (!strcmp(argv[i], "--dir") && i + 1 < argc)
            dir = argv[++i];
        else if (!strcmp(argv[i], "--keep"))
            keep = 1;
        else if (!strcmp(argv[i], "--no-numpy"))
            numpy = 0;
        else if (!strcmp(argv[i], "--frames") && i + 1 < argc)
            main_frames = (uint32_t)atoi(argv[++i]);
        else if (!strcmp(argv[i], "--threads") && i + 1 < argc)
            threads = argv[++i];
        else if (!strcmp(argv[i], "--also") && i + 1 < argc) {
            nalso = 0;
            for (char *tok = strtok(argv[++i], ","); tok && nalso < 8; tok = strtok(NULL, ","))
                if (atoi(tok) > (int)PRE)
                    also[nalso++] = (uint32_t)atoi(tok);
        } else {
            fprintf(stderr,
                    "usage: bench_reduce [--dir DIR] [--keep] [--frames N] [--also N,N] "
                    "[--threads T] [--no-numpy]\n");
            return 2;
        }
    }
    char self[4096];
    ssize_t sl = readlink("/proc/self/exe", self, sizeof self - 1);
    if (sl <= 0)
        return 1;
    self[sl] = 0;

    uint32_t sizes[9];
    uint32_t nsizes = 0;
    sizes[nsizes++] = main_frames;
    for (uint32_t i = 0; i < nalso; i++)
        sizes[nsizes++] = also[i];
    run floor_run = {0}, pl_run[9], np_run = {0}, np_stream = {0};
    printf("plyledger %s reduction benchmark: %ux%u float32, 20 s after the flash, default "
           "options (64 samples, degree %u, 4 phase frequencies), diffusivity %.1f mm2/s, "
           "threads %s\n",
           pl_version(), WIDTH, HEIGHT, PL_REDUCE_DEFAULT_DEGREE, ALPHA, threads);
    for (uint32_t s = 0; s < nsizes; s++) {
        char manifest[4096], npy[4096];
        snprintf(manifest, sizeof manifest, "%s/bench-%u.json", dir, sizes[s]);
        snprintf(npy, sizeof npy, "%s/bench-%u.npy", dir, sizes[s]);
        if (!sequence_ok(manifest, sizes[s])) {
            printf("writing %s (%u frames, %.2f GB) ...\n", npy, sizes[s],
                   (double)sizes[s] * WIDTH * HEIGHT * 4 / 1e9);
            double t0 = now();
            if (make_sequence(manifest, sizes[s]))
                return 1;
            printf("  written in %.1f s\n", now() - t0);
        } else {
            printf("reusing %s\n", manifest);
        }
        warm(npy);
        if (s == 0) {
            char *ra[] = {self, a_read, npy, NULL};
            floor_run = run_child(ra);
        }
        char *pa[] = {self, a_reduce, manifest, threads, NULL};
        pl_run[s] = run_child(pa);
        if (s == 0 && numpy) {
            char *na[] = {a_py, a_script, manifest, NULL};
            np_run = run_child(na);
            char *ns[] = {a_py, a_script, manifest, a_chunked, NULL};
            np_stream = run_child(ns);
        }
        if (!keep)
            remove_sequence(manifest, npy);
        if (pl_run[s].status || (s == 0 && (floor_run.status || np_run.status || np_stream.status))) {
            fprintf(stderr, "bench_reduce: a child failed\n");
            return 1;
        }
    }
    printf("\n%-44s %10s %12s\n", "run", "time s", "peak RSS MB");
    printf("%-44s %10.3f %12.1f\n", "read floor (read loop, 1 MiB blocks)", floor_run.seconds,
           floor_run.peak_mb);
    for (uint32_t s = 0; s < nsizes; s++) {
        char name[64];
        snprintf(name, sizeof name, "plyledger, %u frames", sizes[s]);
        printf("%-44s %10.3f %12.1f\n", name, pl_run[s].seconds, pl_run[s].peak_mb);
    }
    if (numpy) {
        printf("%-44s %10.3f %12.1f\n", "NumPy (np.load mmap), same file", np_run.seconds,
               np_run.peak_mb);
        printf("%-44s %10.3f %12.1f\n", "NumPy (chunked reads), same file", np_stream.seconds,
               np_stream.peak_mb);
    }
    printf("\nratios (%u frames)                                     value   target\n",
           main_frames);
    if (numpy) {
        printf("NumPy time / plyledger time                          %7.2f   >= 5\n",
               np_run.seconds / pl_run[0].seconds);
        printf("plyledger peak RSS / NumPy peak RSS                  %7.3f   < 0.25\n",
               pl_run[0].peak_mb / np_run.peak_mb);
        printf("  (against the chunked NumPy: time %.2f, RSS %.3f)\n",
               np_stream.seconds / pl_run[0].seconds, pl_run[0].peak_mb / np_stream.peak_mb);
    }
    printf("plyledger time / read floor                          %7.2f   <= 3\n",
           pl_run[0].seconds / floor_run.seconds);
    for (uint32_t s = 1; s < nsizes; s++)
        printf("plyledger peak RSS %u / %u frames                  %7.3f   ~ 1\n", sizes[s],
               sizes[0], pl_run[s].peak_mb / pl_run[0].peak_mb);
    return 0;
}
