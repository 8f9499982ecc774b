/*
 * bench_change.c - the whole comparison of one 640 x 512 site (register,
 * detect both maps, match, classify, changed regions) against the same
 * steps in scipy and scikit-image (change_pipeline.py, run with
 * /usr/bin/python3 in the same run), and the recorded comparison through
 * the store (pl_compare_site: both maps read from the store, compared and
 * recorded). Build with optimisation (the default debugoptimized or
 * release) for timings.
 *
 *   bench_change [--dir DIR] [--repeats N] [--keep]
 *
 * The maps are drawn from formulas (invented, analytic): a phase channel
 * holding a smooth texture of the part (a sum of sinusoids, what the
 * registration locks on) and a temperature-contrast channel holding
 * flat-topped discs of known radius over a slow shading and 20 mK of
 * Gaussian noise. The reinspection is the same formula seen through a
 * placement error (pixel p shows part position c + R(rot)(p - c) + shift,
 * as plyledger/sim.h places a camera): shift (3.40, -2.10) px, rotation
 * 0.60 degrees; of its discs one is stable, one grows from 6 to 9 mm in
 * radius (pi (81 - 36) = 141 mm2) and one is new. Both implementations
 * must find the transform (within 0.2 px and 0.1 degree), the new disc
 * and the grown one, or the bench fails: a timing of a wrong answer is
 * not reported.
 *
 * Timed: N runs (default 5) after one untimed run, medians and minima;
 * Python's times are taken inside the script (the interpreter's start,
 * its imports and the reading of the files left out). Prints both
 * medians, the ratio (target: plyledger at least 5 times faster) and the
 * time per site, with and without the store.
 */
#define _GNU_SOURCE
#include "plyledger.h"

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

#ifndef BENCH_PIPELINE_SCRIPT
#error "BENCH_PIPELINE_SCRIPT must name tests/bench/change_pipeline.py"
#endif

#define W 640u
#define H 512u

static const double SHIFT_X = 3.40, SHIFT_Y = -2.10, ROT_DEG = 0.60;

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

static void die(const char *what, const char *msg)
{
    fprintf(stderr, "bench_change: %s: %s\n", what, msg);
    exit(1);
}

static double gauss(uint64_t *s)
{
    *s = *s * 6364136223846793005ull + 1442695040888963407ull;
    double u1 = ((double)(*s >> 11) + 0.5) / 9007199254740992.0;
    *s = *s * 6364136223846793005ull + 1442695040888963407ull;
    double u2 = ((double)(*s >> 11) + 0.5) / 9007199254740992.0;
    return sqrt(-2.0 * log(u1)) * cos(2.0 * M_PI * u2);
}

/* The part's texture (radians) at part position (x, y), pixels. */
static double texture(double x, double y)
{
    return 0.30 * sin(0.061 * x + 0.4) + 0.25 * cos(0.047 * y - 0.3) +
           0.20 * sin(0.029 * x + 0.043 * y) + 0.15 * cos(0.11 * x - 0.083 * y + 1.0) +
           0.10 * sin(0.19 * x + 0.07 * y);
}

typedef struct disc {
    double cx, cy, r, k; /* centre and radius (px = mm), contrast K */
} disc;

/* Baseline: A and B stable, C of 6 mm; the current map: C grown to 9 mm
 * and D new. */
static const disc base_discs[] = { { 160, 150, 10, 1.0 }, { 420, 300, 8, 0.8 },
                                   { 500, 120, 6, 0.9 } };
static const disc cur_discs[] = { { 160, 150, 10, 1.0 }, { 420, 300, 8, 0.8 },
                                  { 500, 120, 9, 0.9 }, { 250, 380, 7, 0.7 } };

/* A two-channel map: pixel (i, j) shows part position c + R(rot)((i, j) -
 * c) + shift. */
static pl_map *draw(const disc *d, size_t nd, double sx, double sy, double rot_deg,
                    uint64_t seed, int with_pitch)
{
    pl_map *m = NULL;
    pl_err err = { 0 };
    if (pl_map_new(&m, W, H, 2, &err) || pl_map_set_channel(m, 0, "phase", "rad", &err) ||
        pl_map_set_channel(m, 1, "temperature-contrast", "K", &err))
        die("map", err.msg);
    double cx = (W - 1) / 2.0, cy = (H - 1) / 2.0, t = rot_deg * M_PI / 180.0;
    double ct = cos(t), st = sin(t);
    uint64_t s = seed;
    for (uint32_t j = 0; j < H; j++)
        for (uint32_t i = 0; i < W; i++) {
            double x = cx + ct * (i - cx) - st * (j - cy) + sx;
            double y = cy + st * (i - cx) + ct * (j - cy) + sy;
            double c = 0.05 * sin(x / 180.0) * cos(y / 150.0);
            for (size_t k = 0; k < nd; k++) {
                double r = hypot(x - d[k].cx, y - d[k].cy);
                c += d[k].k * 0.5 * (1.0 - tanh((r - d[k].r) / 0.5));
            }
            m->data[(size_t)j * W + i] = (float)(texture(x, y) + 0.01 * gauss(&s));
            m->data[(size_t)W * H + (size_t)j * W + i] = (float)(c + 0.02 * gauss(&s));
        }
    if (with_pitch) {
        m->pitch_u = m->pitch_v = 1.0;
        const double origin[3] = { 5000.0, 0.0, 0.0 };
        memcpy(m->placement.origin, origin, sizeof origin);
        snprintf(m->placement.system, sizeof m->placement.system, "STA/BL/WL");
    } else {
        m->pitch_u = m->pitch_v = NAN; /* the site's, in the store */
    }
    return m;
}

static void write_map(const char *dir, const char *name, const pl_map *m)
{
    char path[4096];
    snprintf(path, sizeof path, "%s/%s", dir, name);
    FILE *f = fopen(path, "wb");
    if (!f || fwrite(m->data, sizeof(float), (size_t)W * H * 2, f) != (size_t)W * H * 2 ||
        fclose(f))
        die(path, strerror(errno));
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

/* The limits of the bench (as the criteria below): growth beyond 20 mm2. */
static pl_change_limits limits(void)
{
    pl_change_limits l = PL_CHANGE_LIMITS_INIT;
    l.area_repeatability_mm2 = 8;
    l.contrast_repeatability = 0.1;
    l.min_reportable_mm2 = 10;
    l.new_reportable_mm2 = 20;
    l.area_growth_mm2 = 20;
    return l;
}

static const char criteria_text[] =
    "{ \"format\": \"plyledger-criteria\", \"format_version\": 1, \"name\": \"BENCH-LIMITS\",\n"
    "  \"revision\": \"1\", \"source_document\": \"BENCH-DOC-1 (invented)\",\n"
    "  \"example_values\": true, \"repeatability\": { \"area_mm2\": 8 },\n"
    "  \"rules\": [\n"
    "   { \"name\": \"skin\", \"kind\": \"growth-limit\", \"method\": \"flash-thermography\",\n"
    "     \"quantity\": \"temperature-contrast\", \"contrast_unit\": \"K\",\n"
    "     \"repeatability_contrast\": 0.1, \"min_reportable_area_mm2\": 10,\n"
    "     \"new_reportable_area_mm2\": 20, \"area_growth_mm2\": 20,\n"
    "     \"vanished\": \"report\" } ] }\n";

/* What a comparison found at the seeded discs: 0 when the new disc is
 * new, the grown one grown and the stable ones stable. */
static int check(const pl_comparison *cmp, const char *who)
{
    int bad = 0;
    for (size_t k = 0; k < sizeof cur_discs / sizeof *cur_discs; k++) {
        const disc *d = &cur_discs[k];
        pl_change_kind want = k == 3 ? PL_CHANGE_NEW : k == 2 ? PL_CHANGE_GROWN : PL_CHANGE_STABLE;
        const pl_change *best = NULL;
        for (size_t i = 0; i < cmp->count; i++) {
            const pl_change *c = &cmp->changes[i];
            if (c->kind != PL_CHANGE_REGION &&
                hypot(c->centroid_col - d->cx, c->centroid_row - d->cy) < 3)
                best = c;
        }
        if (!best || best->kind != want) {
            fprintf(stderr, "bench_change: %s: disc %lu is %s, not %s\n", who, (unsigned long)k,
                    best ? pl_change_kind_name(best->kind) : "not found",
                    pl_change_kind_name(want));
            bad++;
        } else if (want == PL_CHANGE_GROWN) {
            /* analytic: pi (9^2 - 6^2) */
            double truth = M_PI * (81 - 36), got = best->area_delta_mm2[PL_SIZING_THRESHOLD];
            printf("    %-10s grown disc: area change %.0f mm2 (analytic %.0f, %+.1f %%)\n", who,
                   got, truth, 100 * (got / truth - 1));
            if (fabs(got / truth - 1) > 0.2)
                bad++;
        }
    }
    return bad;
}

typedef struct timing {
    double median, min;
} timing;

static timing summarise(double *s, int reps)
{
    qsort(s, (size_t)reps, sizeof *s, cmp_double);
    timing t = { s[reps / 2], s[0] };
    return t;
}

/* The same steps one at a time (the median of each over the runs), to
 * show where the time goes: pl_register_maps() with the aligned map,
 * pl_detect() of each map, pl_change_compare(). */
static void time_steps(const pl_map *b, const pl_map *c, int reps)
{
    double *t[4];
    for (int k = 0; k < 4; k++)
        if (!(t[k] = malloc((size_t)reps * sizeof **t)))
            die("timing", "out of memory");
    pl_change_limits l = limits();
    pl_err err = { 0 };
    for (int i = 0; i < reps; i++) {
        pl_register_result reg;
        pl_map *al = NULL;
        pl_detection *db = NULL, *dc = NULL;
        pl_comparison *cmp = NULL;
        double t0 = now();
        if (pl_register_maps(&reg, &al, b, c, NULL, NULL, NULL, &err) || !al)
            die("pl_register_maps", err.msg);
        double t1 = now();
        if (pl_detect(&db, b, 1, NULL, &err))
            die("pl_detect", err.msg);
        double t2 = now();
        if (pl_detect(&dc, al, 1, NULL, &err))
            die("pl_detect", err.msg);
        double t3 = now();
        pl_change_input in = PL_CHANGE_INPUT_INIT;
        in.baseline = b;
        in.baseline_channel = 1;
        in.baseline_detection = db;
        in.current = al;
        in.current_channel = 1;
        in.current_detection = dc;
        in.registration_uncertainty_px = PL_CHANGE_DEFAULT_REGISTRATION_UNCERTAINTY_PX;
        if (pl_change_compare(&cmp, &in, &l, &err))
            die("pl_change_compare", err.msg);
        double t4 = now();
        t[0][i] = t1 - t0;
        t[1][i] = t2 - t1;
        t[2][i] = t3 - t2;
        t[3][i] = t4 - t3;
        pl_comparison_free(cmp);
        pl_detection_free(db);
        pl_detection_free(dc);
        pl_map_free(al);
    }
    const char *names[4] = { "register (and resample)", "detect baseline", "detect current",
                             "compare" };
    for (int k = 0; k < 4; k++) {
        timing m = summarise(t[k], reps);
        printf("      step %-24s median %8.1f ms\n", names[k], 1e3 * m.median);
        free(t[k]);
    }
}

/* pl_change_site on the two maps in memory. */
static timing time_site(const pl_map *b, const pl_map *c, int reps, int *bad)
{
    pl_change_limits l = limits();
    pl_err err = { 0 };
    pl_register_result reg;
    pl_comparison *cmp = NULL;
    double *s = malloc((size_t)reps * sizeof *s);
    if (!s)
        die("timing", "out of memory");
    for (int i = -1; i < reps; i++) {
        double t0 = now();
        if (pl_change_site(&cmp, &reg, b, 1, c, &l, NULL, &err))
            die("pl_change_site", err.msg);
        double t1 = now();
        if (!cmp)
            die("registration refused", reg.reason);
        if (i < 0) {
            printf("    plyledger  registration: %+.3f %+.3f px, %+.4f deg (simulated %+.2f "
                   "%+.2f, %+.2f); %lu changes, %lu exceeding\n",
                   reg.transform.dx, reg.transform.dy, reg.transform.rotation_deg, SHIFT_X,
                   SHIFT_Y, ROT_DEG, (unsigned long)cmp->count, (unsigned long)cmp->exceeding);
            *bad += fabs(reg.transform.dx - SHIFT_X) > 0.2 || fabs(reg.transform.dy - SHIFT_Y) > 0.2
                    || fabs(reg.transform.rotation_deg - ROT_DEG) > 0.1;
            *bad += check(cmp, "plyledger");
        } else {
            s[i] = t1 - t0;
        }
        pl_comparison_free(cmp);
    }
    timing t = summarise(s, reps);
    free(s);
    return t;
}

static void add_inspection(pl_store *st, const char *kind, const char *date, pl_map *m)
{
    pl_inspection in;
    memset(&in, 0, sizeof in);
    in.aircraft_hours = NAN;
    in.aircraft_cycles = -1;
    strcpy(in.airframe_serial, "BEN-0001");
    strcpy(in.site_code, "B01");
    strcpy(in.kind, kind);
    strcpy(in.performed_on, date);
    if (strcmp(kind, "baseline") != 0)
        strcpy(in.task_ref, "HC-1");
    strcpy(in.procedure, "P");
    strcpy(in.procedure_rev, "A");
    strcpy(in.equipment, "E");
    strcpy(in.calibration_ref, "C");
    strcpy(in.inspector, "A. Tester");
    strcpy(in.inspector_level, "2");
    pl_id key = 0, map = 0;
    pl_err err = { 0 };
    if (pl_record_map_inspection(st, &in, m, "bench", "seq.json", "{}", &key, &map, &err))
        die("record", err.msg);
}

/* pl_compare_site through a store holding both inspections: each run
 * reads both maps, compares and records the comparison. */
static timing time_store(const char *dir, int reps, int *bad)
{
    char path[4096];
    snprintf(path, sizeof path, "%s/bench.plyledger", dir);
    unlink(path);
    pl_store *st = NULL;
    pl_err err = { 0 };
    if (pl_store_create(&st, path, &err))
        die("store", err.msg);
    pl_airframe af;
    memset(&af, 0, sizeof af);
    strcpy(af.serial, "BEN-0001");
    strcpy(af.aircraft_type, "TX-1");
    strcpy(af.manufactured, "2010-01-02");
    if (pl_store_add_airframe(st, &af, NULL, &err))
        die("airframe", err.msg);
    pl_site s;
    memset(&s, 0, sizeof s);
    strcpy(s.airframe_serial, "BEN-0001");
    strcpy(s.code, "B01");
    strcpy(s.zone, "300");
    strcpy(s.method, "flash-thermography");
    s.thickness_mm = 4.0;
    s.diffusivity_mm2_s = NAN;
    s.map_frame.origin[0] = 5000;
    s.map_frame.u[0] = 1;
    s.map_frame.v[2] = -1;
    strcpy(s.map_frame.system, "STA/BL/WL");
    strcpy(s.map_frame.unit, "mm");
    s.pitch_u = s.pitch_v = 1.0;
    if (pl_store_add_site(st, &s, NULL, &err))
        die("site", err.msg);
    pl_criteria *c = NULL;
    pl_id crit = 0;
    if (pl_criteria_parse(&c, criteria_text, strlen(criteria_text), "bench", &err) ||
        pl_store_add_criteria(st, c, &crit, NULL, &err))
        die("criteria", err.msg);
    pl_criteria_free(c);
    pl_map *b = draw(base_discs, 3, 0, 0, 0, 1, 0), *m = draw(cur_discs, 4, SHIFT_X, SHIFT_Y,
                                                            ROT_DEG, 2, 0);
    add_inspection(st, "baseline", "2011-03-01", b);
    add_inspection(st, "scheduled", "2016-03-01", m);
    pl_map_free(b);
    pl_map_free(m);
    pl_compare_options o = PL_COMPARE_OPTIONS_INIT;
    o.criteria_name = "BENCH-LIMITS";
    double *t = malloc((size_t)reps * sizeof *t);
    if (!t)
        die("timing", "out of memory");
    for (int i = -1; i < reps; i++) {
        pl_site_comparison *sc = NULL;
        double t0 = now();
        if (pl_compare_site(&sc, st, "BEN-0001", "B01", 0, &o, &err))
            die("pl_compare_site", err.msg);
        double t1 = now();
        if (!sc->done)
            die("pl_compare_site", sc->not_done_reason);
        if (i < 0)
            *bad += check(sc->cmp, "store");
        else
            t[i] = t1 - t0;
        pl_site_comparison_free(sc);
    }
    pl_store_close(st);
    timing r = summarise(t, reps);
    free(t);
    return r;
}

int main(int argc, char **argv)
{
    const char *dir = "/tmp/bench-change";
    int reps = 5, keep = 0;
    for (int i = 1; i < argc; i++) {
        if (!strcmp(argv[i], "--dir") && i + 1 < argc)
            dir = argv[++i];
        else if (!strcmp(argv[i], "--repeats") && i + 1 < argc)
            reps = atoi(argv[++i]);
        else if (!strcmp(argv[i], "--keep"))
            keep = 1;
        else {
            fprintf(stderr, "usage: bench_change [--dir DIR] [--repeats N] [--keep]\n");
            return 2;
        }
    }
    if (reps < 1)
        reps = 1;
    if (mkdir(dir, 0777) && errno != EEXIST)
        die(dir, strerror(errno));
    pl_map *b = draw(base_discs, 3, 0, 0, 0, 1, 1);
    pl_map *c = draw(cur_discs, 4, SHIFT_X, SHIFT_Y, ROT_DEG, 2, 1);
    write_map(dir, "baseline.f4", b);
    write_map(dir, "current.f4", c);

    printf("site comparison of %u x %u maps (register, detect both, match, classify, changed "
           "regions), %d runs after one untimed\n", W, H, reps);
    int bad = 0;
    timing ours = time_site(b, c, reps, &bad);
    timing store = time_store(dir, reps, &bad);

    char reps_s[16], line[4096], py[] = "/usr/bin/python3", script[] = BENCH_PIPELINE_SCRIPT;
    char dir_s[4096];
    snprintf(reps_s, sizeof reps_s, "%d", reps);
    snprintf(dir_s, sizeof dir_s, "%s", dir);
    char *args[] = { py, script, dir_s, reps_s, NULL };
    if (run_script(line, sizeof line, args))
        die(BENCH_PIPELINE_SCRIPT, "failed");
    double py_med, py_min, pdx, pdy, prot;
    int pnew, pgrown, pstable;
    double pgrowth;
    if (sscanf(line, "%lf %lf %lf %lf %lf %d %d %d %lf", &py_med, &py_min, &pdx, &pdy, &prot,
               &pnew, &pgrown, &pstable, &pgrowth) != 9)
        die("pipeline output", line);
    printf("    scipy      registration: %+.3f %+.3f px, %+.4f deg; new %d, grown %d (area "
           "change %.0f mm2), stable %d\n",
           pdx, pdy, prot, pnew, pgrown, pgrowth, pstable);
    bad += fabs(pdx - SHIFT_X) > 0.2 || fabs(pdy - SHIFT_Y) > 0.2 || fabs(prot - ROT_DEG) > 0.1;
    bad += pnew != 1 || pgrown != 1 || pstable != 2;
    bad += fabs(pgrowth / (M_PI * 45) - 1) > 0.2;

    printf("    plyledger pl_change_site     median %8.1f ms  (min %8.1f)\n", 1e3 * ours.median,
           1e3 * ours.min);
    time_steps(b, c, reps);
    printf("    plyledger pl_compare_site    median %8.1f ms  (min %8.1f)  store read, "
           "compare and record\n",
           1e3 * store.median, 1e3 * store.min);
    printf("    scipy/skimage pipeline       median %8.1f ms  (min %8.1f)\n", 1e3 * py_med,
           1e3 * py_min);
    printf("    speed ratio scipy / plyledger  %.2f   (target >= 5)\n", py_med / ours.median);
    printf("    time per site: plyledger %.3f s (%.3f s with the store), scipy %.3f s; "
           "sites an hour on one core: %.0f\n",
           ours.median, store.median, py_med, 3600 / store.median);
    pl_map_free(b);
    pl_map_free(c);
    if (!keep) {
        char path[4096];
        const char *names[] = { "baseline.f4", "current.f4", "bench.plyledger" };
        for (size_t k = 0; k < 3; k++) {
            snprintf(path, sizeof path, "%s/%s", dir, names[k]);
            unlink(path);
        }
        rmdir(dir);
    }
    if (bad) {
        fprintf(stderr, "bench_change: %d check(s) failed\n", bad);
        return 1;
    }
    return 0;
}
