/*
 * bench_detect.c - labelling and measuring against scipy.ndimage, timed
 * in the same run (tests/bench/README.md).
 *
 *   bench_detect [--dir DIR] [--repeats N] [--density P] [--keep]
 *
 * 1. Labelling: a 4096 x 4096 random binary image of density P (default
 *    0.5; also 0.41, near the percolation threshold of 8-connected sites),
 *    8-connected: pl_detect__label() against scipy.ndimage.label with
 *    np.ones((3, 3)). Target: the ratio scipy / plyledger >= 1.
 * 2. Measuring: the components of a 4096 x 4096 random image of density
 *    0.52 (about 45,000 of them) and a random signal: area, centroid and
 *    peak from pl_detect__accumulate() (one pass, which also sums the
 *    second moments and the signal) against scipy.ndimage.sum,
 *    center_of_mass and maximum with index = 1..N. Target: >= 20. The
 *    whole of pl_detect_measure() (every measure, outlines included) is
 *    timed too, for information.
 * Times are the median of N runs (default 7) after one untimed run, each
 * side in its own process on the same files; the totals of both sides are
 * compared as a check that they measure the same thing.
 */
#include "image/detect_int.h"
#include "plyledger/detect.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#ifndef BENCH_SCIPY_SCRIPT
#error "BENCH_SCIPY_SCRIPT must name tests/bench/detect_scipy.py"
#endif

#define SIDE 4096u

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return ts.tv_sec + ts.tv_nsec * 1e-9;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y;
}

static double median_of(double *s, int n)
{
    qsort(s, (size_t)n, sizeof *s, cmp_double);
    return s[n / 2];
}

/* Run the script with its arguments and capture its output. */
static int run_script(char *line, size_t cap, char *const argv[])
{
    int fd[2];
    if (pipe(fd))
        return -1;
    pid_t pid = fork();
    if (pid < 0)
        return -1;
    if (pid == 0) {
        dup2(fd[1], 1);
        close(fd[0]);
        close(fd[1]);
        execv(argv[0], argv);
        _exit(127);
    }
    close(fd[1]);
    size_t n = 0;
    ssize_t r;
    while (n + 1 < cap && (r = read(fd[0], line + n, cap - 1 - n)) > 0)
        n += (size_t)r;
    line[n] = '\0';
    close(fd[0]);
    int st;
    if (waitpid(pid, &st, 0) < 0 || !WIFEXITED(st) || WEXITSTATUS(st))
        return -1;
    return 0;
}

static void write_file(const char *path, const void *data, size_t len)
{
    FILE *f = fopen(path, "wb");
    if (!f || fwrite(data, 1, len, f) != len || fclose(f)) {
        fprintf(stderr, "bench_detect: cannot write %s: %s\n", path, strerror(errno));
        exit(1);
    }
}

static uint64_t rng = 0x2545f4914f6cdd1dull;
static double uniform(void)
{
    rng ^= rng << 13;
    rng ^= rng >> 7;
    rng ^= rng << 17;
    return (double)(rng >> 11) / 9007199254740992.0;
}

static uint8_t *random_mask(double density)
{
    size_t np = (size_t)SIDE * SIDE;
    uint8_t *m = malloc(np);
    if (!m)
        exit(1);
    for (size_t i = 0; i < np; i++)
        m[i] = uniform() < density;
    return m;
}

/* Labels written little-endian whatever the host. */
static void write_labels(const char *path, const uint32_t *l, size_t n)
{
    unsigned char *b = malloc(4 * n);
    if (!b)
        exit(1);
    for (size_t i = 0; i < n; i++) {
        b[4 * i] = (unsigned char)l[i];
        b[4 * i + 1] = (unsigned char)(l[i] >> 8);
        b[4 * i + 2] = (unsigned char)(l[i] >> 16);
        b[4 * i + 3] = (unsigned char)(l[i] >> 24);
    }
    write_file(path, b, 4 * n);
    free(b);
}

static int bench_label(const char *dir, double density, int reps, char *py, char *script)
{
    size_t np = (size_t)SIDE * SIDE;
    uint8_t *mask = random_mask(density);
    uint32_t *labels = malloc(np * sizeof *labels), n = 0;
    double *t = malloc((size_t)reps * sizeof *t);
    if (!labels || !t || pl_detect__label(labels, &n, mask, SIDE, SIDE))
        return 1;
    for (int i = 0; i < reps; i++) {
        double t0 = now();
        pl_detect__label(labels, &n, mask, SIDE, SIDE);
        t[i] = now() - t0;
    }
    double mn = t[0];
    for (int i = 1; i < reps; i++)
        mn = fmin(mn, t[i]);
    double ours = median_of(t, reps);
    char path[4096], w[16], reps_s[16], line[256], cmd[] = "label";
    snprintf(path, sizeof path, "%s/mask.u1", dir);
    write_file(path, mask, np);
    snprintf(w, sizeof w, "%u", SIDE);
    snprintf(reps_s, sizeof reps_s, "%d", reps);
    char *argv[] = {py, script, cmd, path, w, w, reps_s, NULL};
    double sp_med, sp_min;
    unsigned long sp_n;
    if (run_script(line, sizeof line, argv) ||
        sscanf(line, "%lf %lf %lu", &sp_med, &sp_min, &sp_n) != 3) {
        fprintf(stderr, "bench_detect: %s label failed\n", script);
        return 1;
    }
    printf("labelling %u x %u, density %.2f, 8-connected: %lu components (scipy %lu)\n", SIDE,
           SIDE, density, (unsigned long)n, sp_n);
    printf("  plyledger pl_detect__label    %8.1f ms (min %7.1f)\n", 1e3 * ours, 1e3 * mn);
    printf("  scipy.ndimage.label           %8.1f ms (min %7.1f)\n", 1e3 * sp_med, 1e3 * sp_min);
    printf("  ratio scipy / plyledger       %8.2f   (target >= 1)%s\n", sp_med / ours,
           sp_n == n ? "" : "  COUNTS DIFFER");
    free(mask);
    free(labels);
    free(t);
    return sp_n != n;
}

static int bench_measure(const char *dir, int reps, char *py, char *script)
{
    size_t np = (size_t)SIDE * SIDE;
    uint8_t *mask = random_mask(0.52);
    uint32_t *labels = malloc(np * sizeof *labels), n = 0;
    float *signal = malloc(np * sizeof *signal);
    double *t = malloc((size_t)reps * sizeof *t);
    if (!labels || !signal || !t || pl_detect__label(labels, &n, mask, SIDE, SIDE))
        return 1;
    for (size_t i = 0; i < np; i++)
        signal[i] = (float)(10.0 * uniform());
    pl_detect__sums *sums = malloc((size_t)n * sizeof *sums);
    if (!sums)
        return 1;
    pl_detect__accumulate(sums, n, labels, signal, SIDE, SIDE);
    for (int i = 0; i < reps; i++) {
        double t0 = now();
        pl_detect__accumulate(sums, n, labels, signal, SIDE, SIDE);
        t[i] = now() - t0;
    }
    double ours = median_of(t, reps);
    double area = 0, peaks = 0, cx = 0;
    for (uint32_t k = 0; k < n; k++) {
        double c, r;
        pl_detect__centroid(&sums[k], &c, &r);
        area += (double)sums[k].n;
        peaks += sums[k].peak;
        cx += c;
    }
    /* the whole measurement through the public call */
    pl_map *m;
    pl_err err = {0};
    if (pl_map_new(&m, SIDE, SIDE, 1, &err) ||
        pl_map_set_channel(m, 0, "test-signal", "1", &err))
        return 1;
    memcpy(pl_map_channel(m, 0), signal, np * sizeof *signal);
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    o.polarity = PL_POLARITY_RISES;
    o.background = PL_BACKGROUND_ZERO;
    o.noise = 1;
    o.despeckle = 0;
    pl_detection *det;
    double t0 = now();
    if (pl_detect_measure(&det, m, 0, labels, &o, &err)) {
        fprintf(stderr, "bench_detect: %s\n", err.msg);
        return 1;
    }
    double whole = now() - t0;
    pl_detection_free(det);
    pl_map_free(m);
    char lp[4096], sp[4096], w[16], ns[16], reps_s[16], line[256], cmd[] = "measure";
    snprintf(lp, sizeof lp, "%s/labels.u4", dir);
    snprintf(sp, sizeof sp, "%s/signal.f4", dir);
    write_labels(lp, labels, np);
    write_file(sp, signal, np * sizeof *signal);
    snprintf(w, sizeof w, "%u", SIDE);
    snprintf(ns, sizeof ns, "%u", n);
    snprintf(reps_s, sizeof reps_s, "%d", reps);
    char *argv[] = {py, script, cmd, lp, sp, w, w, ns, reps_s, NULL};
    double sp_med, sp_min, sp_area, sp_peaks;
    if (run_script(line, sizeof line, argv) ||
        sscanf(line, "%lf %lf %lf %lf", &sp_med, &sp_min, &sp_area, &sp_peaks) != 4) {
        fprintf(stderr, "bench_detect: %s measure failed\n", script);
        return 1;
    }
    int same = sp_area == area && fabs(sp_peaks - peaks) <= 1e-6 * peaks;
    printf("measuring %lu components of a %u x %u image (area, centroid, peak)\n",
           (unsigned long)n, SIDE, SIDE);
    printf("  plyledger pl_detect__accumulate %6.1f ms\n", 1e3 * ours);
    printf("  scipy sum + center_of_mass + maximum %8.1f ms (min %7.1f)\n", 1e3 * sp_med,
           1e3 * sp_min);
    printf("  ratio scipy / plyledger       %8.1f   (target >= 20)%s\n", sp_med / ours,
           same ? "" : "  TOTALS DIFFER");
    printf("  pl_detect_measure, every measure and outline, once: %.1f ms\n", 1e3 * whole);
    (void)cx;
    free(sums);
    free(mask);
    free(labels);
    free(signal);
    free(t);
    return !same;
}

int main(int argc, char **argv)
{
    const char *dir = "/tmp/bench-detect";
    int reps = 7, keep = 0;
    double density = 0.5;
    for (int i = 1; i < argc; i++) {
        if (!strcmp(argv[i], "--dir") && i + 1 < argc)
            dir = argv[++i];
        else if (!strcmp(argv[i], "--repeats") && i + 1 < argc)
            reps = atoi(argv[++i]);
        else if (!strcmp(argv[i], "--density") && i + 1 < argc)
            density = atof(argv[++i]);
        else if (!strcmp(argv[i], "--keep"))
            keep = 1;
        else {
            fprintf(stderr, "usage: bench_detect [--dir DIR] [--repeats N] [--density P] "
                            "[--keep]\n");
            return 2;
        }
    }
    if (reps < 1)
        reps = 1;
    if (mkdir(dir, 0755) && errno != EEXIST) {
        fprintf(stderr, "bench_detect: %s: %s\n", dir, strerror(errno));
        return 1;
    }
    char py[] = "/usr/bin/python3", script[] = BENCH_SCIPY_SCRIPT;
    int bad = bench_label(dir, density, reps, py, script);
    bad |= bench_label(dir, 0.41, reps, py, script);
    bad |= bench_measure(dir, reps, py, script);
    if (!keep) {
        static const char *files[] = {"mask.u1", "labels.u4", "signal.f4"};
        for (size_t i = 0; i < 3; i++) {
            char p[4096];
            snprintf(p, sizeof p, "%s/%s", dir, files[i]);
            remove(p);
        }
        rmdir(dir);
    }
    return bad;
}
