/*
 * bench_register.c - plyledger's translation-only registration of a
 * 640 x 512 pair (upsample factor 100) against scikit-image's
 * phase_cross_correlation on the same files in the same run, and its
 * registration with rotation on a rotated pair. Build with optimisation
 * (the default debugoptimized or release) for timings.
 *
 *   bench_register [--dir DIR] [--repeats N] [--keep]
 *
 * register_skimage.py (run with /usr/bin/python3) writes the pairs under
 * DIR (default /tmp/bench-register): a photograph shifted by a known
 * sub-pixel amount, and the same rotated by a known angle and shifted.
 * Both implementations are timed over N runs (default 20) after one
 * untimed run, in this process and in Python's, and the medians compared;
 * each reports its error against the known shift.
 */
#define _GNU_SOURCE
#include "plyledger/register.h"

#include <errno.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#ifndef BENCH_SKIMAGE_SCRIPT
#error "BENCH_SKIMAGE_SCRIPT must name tests/bench/register_skimage.py"
#endif

#define W 640u
#define H 512u

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

static float *load(const char *dir, const char *name)
{
    char path[4096];
    snprintf(path, sizeof path, "%s/%s", dir, name);
    FILE *f = fopen(path, "rb");
    if (!f) {
        fprintf(stderr, "bench_register: %s: %s\n", path, strerror(errno));
        exit(1);
    }
    float *v = malloc((size_t)W * H * sizeof *v);
    if (!v || fread(v, sizeof *v, (size_t)W * H, f) != (size_t)W * H) {
        fprintf(stderr, "bench_register: %s: short file\n", path);
        exit(1);
    }
    fclose(f);
    return v;
}

/* Run the script with its arguments and capture its first output line. */
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

typedef struct timing {
    double median, min;
    pl_register_result res;
} timing;

static timing time_ours(const float *a, const float *b, const pl_register_options *o, int reps)
{
    timing t;
    double *s = malloc((size_t)reps * sizeof *s);
    pl_err err = { 0 };
    if (!s || pl_register_images(&t.res, a, b, W, H, o, &err)) {
        fprintf(stderr, "bench_register: %s\n", err.msg);
        exit(1);
    }
    for (int i = 0; i < reps; i++) {
        double t0 = now();
        pl_register_images(&t.res, a, b, W, H, o, NULL);
        s[i] = now() - t0;
    }
    qsort(s, (size_t)reps, sizeof *s, cmp_double);
    t.median = s[reps / 2];
    t.min = s[0];
    free(s);
    return t;
}

int main(int argc, char **argv)
{
    const char *dir = "/tmp/bench-register";
    int reps = 20, keep = 0;
    for (int i = 1; i < argc; i++) {
        if (!strcmp(argv[i], "--dir") && i + 1 < argc)
            dir = argv[++i];
        else if (!strcmp(argv[i], "--repeats") && i + 1 < argc)
            reps = atoi(argv[++i]);
        else if (!strcmp(argv[i], "--keep"))
            keep = 1;
        else {
            fprintf(stderr, "usage: bench_register [--dir DIR] [--repeats N] [--keep]\n");
            return 2;
        }
    }
    if (reps < 1)
        reps = 1;
    char line[512], reps_s[16], dir_s[4096];
    snprintf(reps_s, sizeof reps_s, "%d", reps);
    snprintf(dir_s, sizeof dir_s, "%s", dir);
    char py[] = "/usr/bin/python3", script[] = BENCH_SKIMAGE_SCRIPT, make[] = "make",
         timecmd[] = "time";
    char *mk[] = { py, script, make, dir_s, NULL };
    if (run_script(line, sizeof line, mk)) {
        fprintf(stderr, "bench_register: %s make %s failed\n", script, dir);
        return 1;
    }
    /* the truth */
    char path[4096];
    snprintf(path, sizeof path, "%s/pairs.txt", dir);
    FILE *f = fopen(path, "r");
    double truth[2][3] = { { 0 } };
    for (int k = 0; f && k < 2; k++) {
        char name[16];
        unsigned w, h;
        if (fscanf(f, "%15s %u %u %lf %lf %lf", name, &w, &h, &truth[k][0], &truth[k][1],
                   &truth[k][2]) != 6 || w != W || h != H) {
            fprintf(stderr, "bench_register: %s: unexpected content\n", path);
            return 1;
        }
    }
    if (!f) {
        fprintf(stderr, "bench_register: %s: %s\n", path, strerror(errno));
        return 1;
    }
    fclose(f);
    float *sa = load(dir, "shift.fixed"), *sb = load(dir, "shift.moving");
    float *ra = load(dir, "rot.fixed"), *rb = load(dir, "rot.moving");

    pl_register_options tr = PL_REGISTER_OPTIONS_INIT;
    tr.rotation = 0;
    timing ours = time_ours(sa, sb, &tr, reps);
    char *tm[] = { py, script, timecmd, dir_s, reps_s, NULL };
    double sk_med, sk_min, sk_dx, sk_dy;
    if (run_script(line, sizeof line, tm)
        || sscanf(line, "%lf %lf %lf %lf", &sk_med, &sk_min, &sk_dx, &sk_dy) != 4) {
        fprintf(stderr, "bench_register: %s time failed\n", script);
        return 1;
    }
    pl_register_options ro = PL_REGISTER_OPTIONS_INIT;
    timing rot = time_ours(ra, rb, &ro, reps);
    timing rot0 = time_ours(sa, sb, &ro, reps);

    double e_ours = hypot(ours.res.transform.dx - truth[0][0], ours.res.transform.dy - truth[0][1]);
    double e_sk = hypot(sk_dx - truth[0][0], sk_dy - truth[0][1]);
    printf("registration of a %u x %u pair, upsample factor 100, %d runs (median; min)\n", W, H,
           reps);
    printf("  translation only, true shift (%.3f, %.3f) px\n", truth[0][0], truth[0][1]);
    printf("    plyledger (Hann window)      %8.2f ms (%7.2f)  shift (%.3f, %.3f)  error %.4f px\n",
           1e3 * ours.median, 1e3 * ours.min, ours.res.transform.dx, ours.res.transform.dy,
           e_ours);
    printf("    skimage phase_cross_corr.    %8.2f ms (%7.2f)  shift (%.3f, %.3f)  error %.4f px\n",
           1e3 * sk_med, 1e3 * sk_min, sk_dx, sk_dy, e_sk);
    printf("    speed ratio skimage / plyledger  %.2f   (target >= 5)\n", sk_med / ours.median);
    printf("    error: plyledger %s skimage's\n", e_ours <= e_sk + 1e-9 ? "<=" : ">");
    printf("  with rotation (log-polar, three candidates, refinement)\n");
    printf("    same pair                    %8.2f ms (%7.2f)  shift (%.3f, %.3f)  rotation %+.4f deg\n",
           1e3 * rot0.median, 1e3 * rot0.min, rot0.res.transform.dx, rot0.res.transform.dy,
           rot0.res.transform.rotation_deg);
    printf("    rotated pair, true (%.3f, %.3f) px, %.3f deg\n", truth[1][0], truth[1][1],
           truth[1][2]);
    printf("                                 %8.2f ms (%7.2f)  shift (%.3f, %.3f)  rotation %+.4f deg"
           "  errors %.4f px, %.4f deg\n",
           1e3 * rot.median, 1e3 * rot.min, rot.res.transform.dx, rot.res.transform.dy,
           rot.res.transform.rotation_deg,
           hypot(rot.res.transform.dx - truth[1][0], rot.res.transform.dy - truth[1][1]),
           fabs(rot.res.transform.rotation_deg - truth[1][2]));
    printf("    with rotation, median of both pairs %.1f ms (target < 60 ms)\n",
           1e3 * 0.5 * (rot.median + rot0.median));
    free(sa);
    free(sb);
    free(ra);
    free(rb);
    if (!keep) {
        const char *names[] = { "shift.fixed", "shift.moving", "rot.fixed", "rot.moving",
                                "pairs.txt" };
        for (size_t i = 0; i < sizeof names / sizeof names[0]; i++) {
            snprintf(path, sizeof path, "%s/%s", dir, names[i]);
            unlink(path);
        }
        rmdir(dir);
    }
    return 0;
}
