/*
 * reduce_peak_study.c - how large the maxima of the fitted second
 * log-derivative d2 are on sound laminate (where they are artefacts of
 * noise and of the polynomial) and on delaminations (where they are the
 * reflection): the measurement behind PL_REDUCE_DEFAULT_PEAK_MIN_D2,
 * PL_REDUCE_DEFAULT_PEAK_MIN_SNR and PL_REDUCE_PEAK_LOBE_RATIO.
 *
 * Every sequence comes from the simulator (plyledger/sim.h): a
 * carbon-fibre laminate (rho 1560 kg/m3, c 1200 J/kgK, k 3.5 / 0.7 W/mK in
 * the plane and 0.75 W/mK through the thickness, alpha = 0.40 mm^2/s; from
 * memory of handbook values), 8 kJ/m^2 absorbed (from memory, a typical
 * flash), adiabatic faces, camera noise of the given NETD. Each is reduced
 * with the default options; every interior maximum of every pixel's fitted
 * d2 is listed with its value and noise (pl_reduce__pixel_peaks()).
 *
 *   reduce_peak_study sound [reps] [--csv FILE]
 *       sound laminate 2.8 / 4.0 / 5.2 / 6.4 mm, 30 / 60 / 100 Hz, NETD
 *       10 / 20 / 40 mK, sequences of 8 s (cut before the back wall of all
 *       but the thinnest) and 20 s, 24 x 24 pixels, reps times with other
 *       seeds. A maximum within 25 % of the back wall's depth is the back
 *       wall; the maxima before it (or all, when there is none) are
 *       spurious. A pixel given a depth other than the back wall's is a
 *       false depth.
 *   reduce_peak_study defects [--csv FILE]
 *       a 4 mm laminate with seven delaminations of 20 mm at 0.5-2.0 mm,
 *       resistance 3.85e-4, 9.6e-4, 3.85e-3 m^2K/W (air gaps of 10, 25,
 *       100 um: gap / 0.026 W/mK, from memory) and 0.1 (flat bottom), at
 *       30 Hz for 8 s and 50 Hz for 20 s, NETD 20 and 40 mK; the 3 x 3
 *       pixels at each centre. The true maximum is the one nearest the
 *       defect's depth (within 35 %); those before it are spurious.
 *
 * Prints quantiles of the value and of the signal-to-noise ratio of the
 * spurious and true maxima, and what the rule makes of them: with the
 * defaults as the library applies them (the depth map), and for other
 * thresholds as this program applies the same rule to the listed maxima.
 * --csv writes every maximum.
 */
#include "plyledger/reduce.h"
#include "plyledger/sim.h"
#include "thermal/reduce_int.h"

#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

#define ALPHA 0.40
#define MAXPK 64

static FILE *csv;

static void csv_row(const char *cls, double thick, double rate, double netd, double dur,
                    double res, double depth, uint32_t pixel, const pl_reduce__peak *pk)
{
    if (csv)
        fprintf(csv, "%s,%g,%g,%g,%g,%g,%g,%u,%.6g,%.6g,%.6g,%.6g\n", cls, thick, rate, netd,
                dur, res, depth, pixel, pk->t_s, pk->d2, pk->prominence, pk->noise);
}

static const char *laminate(double thick)
{
    static char s[512];
    snprintf(s, sizeof s,
             "\"laminate\": {\"thickness_mm\": %g, \"density_kg_m3\": 1560, "
             "\"specific_heat_j_kgk\": 1200, \"conductivity_along_w_mk\": 3.5, "
             "\"conductivity_across_w_mk\": 0.7, \"conductivity_through_w_mk\": 0.75}, "
             "\"flash\": {\"energy_j_m2\": 8000}",
             thick);
    return s;
}

typedef struct feed {
    pl_reducer *r;
} feed;

static int on_frame(void *ud, uint32_t index, double time_s, const float *kelvin)
{
    (void)time_s;
    feed *f = ud;
    return pl_reducer_frame(f->r, index, kelvin, NULL);
}

/* Simulate `scene`, reduce it with the defaults; the finished reducer, its
 * depth map into [out] depth (npix floats, malloc'd). */
static pl_reducer *run(const char *scene, float **depth)
{
    pl_sim_scene *sc;
    pl_err err = {0};
    if (pl_sim_scene_parse(&sc, scene, "scene", &err)) {
        fprintf(stderr, "%s\n", err.msg);
        exit(1);
    }
    pl_sim_info info;
    pl_sim_scene_info(sc, &info);
    double *times = malloc(info.frame_count * sizeof *times);
    for (uint32_t i = 0; i < info.frame_count; i++)
        times[i] = i / info.frame_rate_hz - info.flash_time_s;
    pl_reduce_options o = PL_REDUCE_OPTIONS_INIT;
    o.diffusivity_mm2_s = ALPHA;
    o.phase_frequencies = 0;
    feed f = {NULL};
    if (pl_reducer_new(&f.r, info.width, info.height, times, info.frame_count,
                       info.preflash_frames, &o, &err) ||
        pl_sim_run_frames(sc, on_frame, &f, NULL, NULL, &err)) {
        fprintf(stderr, "%s\n", err.msg);
        exit(1);
    }
    pl_map *m;
    if (pl_reducer_finish(f.r, &m, NULL, &err)) {
        fprintf(stderr, "%s\n", err.msg);
        exit(1);
    }
    size_t npix = (size_t)info.width * info.height;
    *depth = malloc(npix * sizeof **depth);
    memcpy(*depth, pl_map_channel(m, (uint32_t)pl_map_find_channel(m, "depth")),
           npix * sizeof **depth);
    pl_map_free(m);
    free(times);
    pl_sim_scene_free(sc);
    return f.r;
}

/* ---- the rule on listed maxima ------------------------------------------ */

#define NRULES 5
static const double rule_snr[NRULES] = {5, 6, 7, 6, 6};
static const double rule_ratio[NRULES] = {0.3, 0.3, 0.3, 0.0, 0.5};

/* The maximum the first-significant rule chooses (value >= min_d2, ratio
 * >= snr and >= share times the largest ratio), or -1. */
static int choose(const pl_reduce__peak *pk, uint32_t n, double min_d2, double snr,
                  double share)
{
    double best = 0;
    for (uint32_t i = 0; i < n; i++)
        if (pk[i].d2 > 0 && pk[i].d2 >= min_d2 && pk[i].d2 / pk[i].noise > best)
            best = pk[i].d2 / pk[i].noise;
    for (uint32_t i = 0; i < n; i++)
        if (pk[i].d2 > 0 && pk[i].d2 >= min_d2 && pk[i].d2 / pk[i].noise >= snr &&
            pk[i].d2 / pk[i].noise >= share * best)
            return (int)i;
    return -1;
}

/* ---- sample sets ---------------------------------------------------------- */

typedef struct sample_set {
    double *v;
    size_t n, cap;
} sample_set;

static void add(sample_set *s, double v)
{
    if (s->n == s->cap) {
        s->cap = s->cap ? 2 * s->cap : 1024;
        s->v = realloc(s->v, s->cap * sizeof *s->v);
    }
    s->v[s->n++] = v;
}

static int cmp(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static double quantile(sample_set *s, double q)
{
    if (!s->n)
        return NAN;
    qsort(s->v, s->n, sizeof *s->v, cmp);
    return s->v[(size_t)fmin((double)s->n - 1, floor(q * (double)s->n))];
}

static void print_set(const char *name, sample_set *s)
{
    static const double q[] = {0.01, 0.5, 0.99, 0.999, 1.0};
    printf("  %-34s %7zu", name, s->n);
    for (int i = 0; i < 5; i++)
        printf(" %7.3f", quantile(s, q[i]));
    printf("\n");
}

/* ---- sound laminate ------------------------------------------------------ */

static int sound(int reps)
{
    static const double thick[] = {2.8, 4.0, 5.2, 6.4}, rate[] = {30, 60, 100},
                        netd[] = {0.01, 0.02, 0.04}, dur[] = {8.0, 20.0};
    sample_set val = {0}, snr = {0}, wall_val = {0}, wall_snr = {0};
    size_t pixels = 0, false_lib = 0, false_largest = 0, false_rule[NRULES] = {0};
    printf("# sound laminate, %d x 576 pixels a configuration: pixels given a false depth "
           "by the default rule (the library's map) and by the largest-maximum rule\n"
           "# thick mm  rate Hz  NETD mK  dur s | default  largest\n",
           reps);
    for (size_t a = 0; a < 4; a++)
        for (size_t b = 0; b < 3; b++)
            for (size_t c = 0; c < 3; c++)
                for (size_t d = 0; d < 2; d++) {
                    size_t cfg_lib = 0, cfg_largest = 0, cfg_pixels = 0;
                    double twall = thick[a] * thick[a] / (M_PI * ALPHA);
                    for (int rep = 0; rep < reps; rep++) {
                        char scene[2048];
                        uint32_t frames = 5 + (uint32_t)(dur[d] * rate[b]);
                        snprintf(scene, sizeof scene,
                                 "{\"seed\": %d, %s, \"camera\": {\"width\": 24, \"height\": "
                                 "24, \"pitch_mm\": 1.0, \"frame_rate_hz\": %g, "
                                 "\"frame_count\": %u, \"preflash_frames\": 5, "
                                 "\"netd_k\": %g}}",
                                 1 + rep * 100 + (int)(a * 18 + b * 6 + c * 2 + d),
                                 laminate(thick[a]), rate[b], frames, netd[c]);
                        float *depth;
                        pl_reducer *r = run(scene, &depth);
                        for (uint32_t p = 0; p < 24 * 24; p++) {
                            pl_reduce__peak pk[MAXPK];
                            uint32_t n = 0;
                            if (pl_reduce__pixel_peaks(r, p, pk, MAXPK, &n))
                                continue;
                            n = n < MAXPK ? n : MAXPK;
                            pixels++;
                            cfg_pixels++;
                            int wall = -1, largest = -1;
                            for (uint32_t i = 0; i < n; i++) {
                                double dd = sqrt(M_PI * ALPHA * pk[i].t_s);
                                if (wall < 0 && fabs(dd - thick[a]) < 0.25 * thick[a]) {
                                    wall = (int)i;
                                    add(&wall_val, pk[i].d2);
                                    add(&wall_snr, pk[i].d2 / pk[i].noise);
                                }
                                csv_row(wall == (int)i ? "wall" : wall < 0 ? "sound" : "after",
                                        thick[a], rate[b], netd[c], dur[d], 0, 0, p, &pk[i]);
                                if (wall < 0) {
                                    add(&val, pk[i].d2);
                                    add(&snr, pk[i].d2 / pk[i].noise);
                                }
                                if (pk[i].d2 > 0 && (largest < 0 || pk[i].d2 > pk[largest].d2))
                                    largest = (int)i;
                            }
                            int bad_lib = !isnan(depth[p]) &&
                                          !(fabs(depth[p] - thick[a]) < 0.25 * thick[a]);
                            cfg_lib += bad_lib;
                            false_lib += bad_lib;
                            int bad_largest = largest >= 0 && largest != wall;
                            cfg_largest += bad_largest;
                            false_largest += bad_largest;
                            for (int k = 0; k < NRULES; k++) {
                                int ch = choose(pk, n, PL_REDUCE_DEFAULT_PEAK_MIN_D2,
                                                rule_snr[k], rule_ratio[k]);
                                false_rule[k] += ch >= 0 && ch != wall;
                            }
                        }
                        free(depth);
                        pl_reducer_free(r);
                    }
                    printf("  %4.1f %6.0f %8.0f %7.0f | %6.2f%% %7.1f%%%s\n", thick[a], rate[b],
                           1000 * netd[c], dur[d], 100.0 * (double)cfg_lib / (double)cfg_pixels,
                           100.0 * (double)cfg_largest / (double)cfg_pixels,
                           twall < dur[d] ? "  (back wall in the window)" : "");
                    fflush(stdout);
                }
    printf("\n# maxima before the back wall, quantiles     n      1 %%    50 %%    99 %%  "
           "99.9 %%     max\n");
    print_set("value, spurious", &val);
    print_set("value, back wall", &wall_val);
    print_set("signal-to-noise, spurious", &snr);
    print_set("signal-to-noise, back wall", &wall_snr);
    printf("\n# pixels given a false depth, of %zu: default rule %.3f%%, largest rule %.1f%%\n",
           pixels, 100.0 * (double)false_lib / (double)pixels,
           100.0 * (double)false_largest / (double)pixels);
    printf("# the rule with value >= %.2f and other ratios (min ratio, share of the largest):\n",
           PL_REDUCE_DEFAULT_PEAK_MIN_D2);
    for (int k = 0; k < NRULES; k++)
        printf("  %.0f, %.1f: %.3f%%\n", rule_snr[k], rule_ratio[k],
               100.0 * (double)false_rule[k] / (double)pixels);
    return 0;
}

/* ---- delaminations --------------------------------------------------------- */

static int defects(void)
{
    static const double depth[] = {0.5, 0.75, 1.0, 1.25, 1.5, 1.75, 2.0};
    static const double res[] = {3.85e-4, 9.6e-4, 3.85e-3, 0.1};
    static const char *const res_name[] = {"10 um air gap", "25 um air gap", "100 um air gap",
                                           "flat bottom (0.1)"};
    static const double rate[] = {30, 50}, dur[] = {8.0, 20.0}, netd[] = {0.02, 0.04};
    sample_set tval[4] = {{0}}, tsnr[4] = {{0}}, lobe = {0}, ahead = {0};
    double err_rule[NRULES][4][2][2] = {{{{0}}}};
    int miss_rule[NRULES][4][2][2] = {{{{0}}}};
    printf("# delaminations of 20 mm in 4 mm laminate; per depth: the mean depth error of "
           "the 3x3 centre pixels (the library's map), pixels without a depth in brackets\n");
    for (size_t k = 0; k < 4; k++)
        for (size_t a = 0; a < 2; a++)
            for (size_t c = 0; c < 2; c++) {
                char scene[8192];
                uint32_t frames = 5 + (uint32_t)(dur[a] * rate[a]);
                int n = snprintf(scene, sizeof scene,
                                 "{\"seed\": %d, %s, \"camera\": {\"width\": 120, \"height\": "
                                 "60, \"pitch_mm\": 1.0, \"frame_rate_hz\": %g, "
                                 "\"frame_count\": %u, \"preflash_frames\": 5, \"netd_k\": %g}, "
                                 "\"defects\": [",
                                 (int)(7 + k * 4 + a * 2 + c), laminate(4.0), rate[a], frames,
                                 netd[c]);
                for (int d = 0; d < 7; d++)
                    n += snprintf(scene + n, sizeof scene - (size_t)n,
                                  "%s{\"kind\": \"delamination\", \"depth_mm\": %g, "
                                  "\"resistance_m2k_w\": %g, \"outline\": {\"shape\": "
                                  "\"circle\", \"centre_mm\": [%d, %d], \"diameter_mm\": 20}}",
                                  d ? ", " : "", depth[d], res[k], 15 + 30 * (d % 4),
                                  15 + 30 * (d / 4));
                snprintf(scene + n, sizeof scene - (size_t)n, "]}");
                float *dmap;
                pl_reducer *r = run(scene, &dmap);
                printf("  %-18s %3.0f Hz %4.0f s %3.0f mK |", res_name[k], rate[a], dur[a],
                       1000 * netd[c]);
                double sum_err = 0;
                for (int d = 0; d < 7; d++) {
                    double sl = 0, rs[NRULES] = {0};
                    int nl = 0, nr[NRULES] = {0};
                    for (int dy = -1; dy <= 1; dy++)
                        for (int dx = -1; dx <= 1; dx++) {
                            uint32_t p = (uint32_t)((15 + 30 * (d / 4) + dy) * 120 + 15 +
                                                    30 * (d % 4) + dx);
                            if (!isnan(dmap[p])) {
                                sl += dmap[p];
                                nl++;
                            }
                            pl_reduce__peak pk[MAXPK];
                            uint32_t np = 0;
                            if (pl_reduce__pixel_peaks(r, p, pk, MAXPK, &np))
                                continue;
                            np = np < MAXPK ? np : MAXPK;
                            int best = -1;
                            double berr = 0.35;
                            for (uint32_t i = 0; i < np; i++) {
                                double e = fabs(sqrt(M_PI * ALPHA * pk[i].t_s) - depth[d]) /
                                           depth[d];
                                if (e < berr) {
                                    berr = e;
                                    best = (int)i;
                                }
                            }
                            for (uint32_t i = 0; i < np; i++)
                                csv_row((int)i == best                    ? "true"
                                        : best < 0 || (int)i < best ? "early"
                                                                    : "late",
                                        4.0, rate[a], netd[c], dur[a], res[k], depth[d], p,
                                        &pk[i]);
                            for (int q = 0; q < NRULES; q++) {
                                int ch = choose(pk, np, PL_REDUCE_DEFAULT_PEAK_MIN_D2,
                                                rule_snr[q], rule_ratio[q]);
                                if (ch >= 0) {
                                    rs[q] += sqrt(M_PI * ALPHA * pk[ch].t_s);
                                    nr[q]++;
                                }
                            }
                            if (best < 0)
                                continue;
                            double zt = pk[best].d2 / pk[best].noise;
                            add(&tval[k], pk[best].d2);
                            add(&tsnr[k], zt);
                            /* early maxima against the true one, the true one
                             * against larger later ones */
                            for (uint32_t i = 0; i < np; i++) {
                                double zi = pk[i].d2 / pk[i].noise;
                                if (pk[i].d2 < PL_REDUCE_DEFAULT_PEAK_MIN_D2)
                                    continue;
                                if ((int)i < best && zi >= 4)
                                    add(&lobe, zi / zt);
                                if ((int)i > best && zi > zt)
                                    add(&ahead, zt / zi);
                            }
                        }
                    double e = nl ? (sl / nl - depth[d]) / depth[d] : NAN;
                    sum_err += fabs(e);
                    printf(" %+4.0f%%", 100 * e);
                    if (nl < 9)
                        printf("(%d)", 9 - nl);
                    for (int q = 0; q < NRULES; q++) {
                        if (nr[q] < 9)
                            miss_rule[q][k][a][c]++;
                        err_rule[q][k][a][c] +=
                            nr[q] ? fabs(rs[q] / nr[q] - depth[d]) / depth[d] / 7 : NAN;
                    }
                }
                printf(" | mean %.1f%%\n", 100 * sum_err / 7);
                fflush(stdout);
                free(dmap);
                pl_reducer_free(r);
            }
    printf("\n# true maxima, quantiles                      n      1 %%    50 %%    99 %%  "
           "99.9 %%     max\n");
    for (size_t k = 0; k < 4; k++) {
        char name[64];
        snprintf(name, sizeof name, "value, %s", res_name[k]);
        print_set(name, &tval[k]);
    }
    for (size_t k = 0; k < 4; k++) {
        char name[64];
        snprintf(name, sizeof name, "signal-to-noise, %s", res_name[k]);
        print_set(name, &tsnr[k]);
    }
    print_set("ratio share, earlier (>= 4) / true", &lobe);
    print_set("ratio share, true / larger later", &ahead);
    printf("\n# the rule with value >= %.2f and other ratios (min ratio, share of the "
           "largest): mean |depth error| %% over 0.5-2 mm [defects with a centre pixel "
           "missed]\n# %-14s", PL_REDUCE_DEFAULT_PEAK_MIN_D2, "");
    for (size_t a = 0; a < 2; a++)
        for (size_t c = 0; c < 2; c++)
            printf("   %2.0f Hz %2.0f s %2.0f mK", rate[a], dur[a], 1000 * netd[c]);
    printf("\n");
    for (int q = 0; q < NRULES; q++)
        for (size_t k = 0; k < 4; k++) {
            printf("  %.0f, %.1f %-14s", rule_snr[q], rule_ratio[q], res_name[k]);
            for (size_t a = 0; a < 2; a++)
                for (size_t c = 0; c < 2; c++)
                    printf("   %11.1f [%d]   ", 100 * err_rule[q][k][a][c],
                           miss_rule[q][k][a][c]);
            printf("\n");
        }
    return 0;
}

int main(int argc, char **argv)
{
    if (argc >= 4 && !strcmp(argv[argc - 2], "--csv")) {
        csv = fopen(argv[argc - 1], "w");
        if (!csv)
            return 1;
        fprintf(csv, "class,thick,rate,netd,dur,res,depth,pixel,t,d2,prominence,noise\n");
        argc -= 2;
    }
    int rc = 2;
    if (argc >= 2 && !strcmp(argv[1], "sound"))
        rc = sound(argc > 2 ? atoi(argv[2]) : 1);
    else if (argc >= 2 && !strcmp(argv[1], "defects"))
        rc = defects();
    else
        fprintf(stderr, "usage: reduce_peak_study sound [reps] | defects  [--csv FILE]\n");
    if (csv)
        fclose(csv);
    return rc;
}
