/*
 * reduce_depth_study.c - how the fit window and the polynomial degree move
 * the depth the reduction finds, on the exact adiabatic-slab curve (Carslaw
 * and Jaeger 1959, section 3.3) with camera noise. This is the measurement
 * behind PL_REDUCE_DEFAULT_DEGREE / _START_S / _END_S.
 *
 * Each depth L is a pixel whose rise is dT = (E / L) F(alpha t / L^2), E =
 * 4 K mm (the front face rises by a few kelvin, as after a flash on a
 * carbon-fibre laminate; from memory), alpha = 0.4 mm^2/s (through-thickness
 * diffusivity of a carbon-fibre laminate, from memory of handbook values),
 * sampled at the frame rate for 20 s after the flash, with white Gaussian
 * noise of standard deviation NETD per frame. Every configuration reduces
 * the same frames.
 *
 *   reduce_depth_study [frame_rate_hz [netd_k [reps]]]   (defaults 200 0.02 24)
 */
#include "plyledger/reduce.h"
#include "thermal/reduce_int.h"

#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

/* The exact series (pl_reduce__slab(), checked against numpy in the tests). */
static double slab_rise(double t, double L, double alpha, double E)
{
    double o[3];
    pl_reduce__slab(log(alpha * t / (L * L)), o);
    return E / L * exp(o[0]);
}

static uint64_t rng_state = 0x9e3779b97f4a7c15ull;

static double uniform01(void)
{
    rng_state ^= rng_state << 13;
    rng_state ^= rng_state >> 7;
    rng_state ^= rng_state << 17;
    return ((rng_state >> 11) + 0.5) / 9007199254740992.0;
}

static double gauss(void)
{
    return sqrt(-2.0 * log(uniform01())) * cos(2.0 * M_PI * uniform01());
}

static const double depths[] = {0.5, 0.75, 1.0, 1.25, 1.5, 1.75, 2.0, 2.5, 3.0};
#define NDEPTH (sizeof depths / sizeof depths[0])

int main(int argc, char **argv)
{
    double rate = argc > 1 ? atof(argv[1]) : 200.0;
    double netd = argc > 2 ? atof(argv[2]) : 0.02;
    uint32_t reps = argc > 3 ? (uint32_t)atoi(argv[3]) : 24;
    const double alpha = 0.4, E = 4.0, duration = 20.0, cold = 293.15;
    const uint32_t pre = 10;
    uint32_t nframes = pre + (uint32_t)(duration * rate);
    uint32_t width = (uint32_t)NDEPTH * reps;
    double *times = malloc(nframes * sizeof *times);
    float *frames = malloc((size_t)nframes * width * sizeof *frames);
    if (!times || !frames)
        return 1;
    for (uint32_t i = 0; i < nframes; i++) {
        times[i] = ((double)i - pre + 1.0) / rate;
        for (uint32_t d = 0; d < NDEPTH; d++)
            for (uint32_t k = 0; k < reps; k++) {
                double v = cold + netd * gauss();
                if (times[i] > 0)
                    v += slab_rise(times[i], depths[d], alpha, E);
                frames[(size_t)i * width + d * reps + k] = (float)v;
            }
    }
    printf("# frame rate %g Hz, NETD %g K, %u noise draws per depth, alpha %g mm2/s\n", rate,
           netd, reps, alpha);
    printf("# method degree start_s end_s | mean |error| %% on 0.5-2.0 mm (missed) | "
           "per depth mean |error| %%:");
    for (uint32_t d = 0; d < NDEPTH; d++)
        printf(" %g", depths[d]);
    printf("\n");
    static const double starts[] = {0.0, 0.01, 0.02, 0.05};
    static const double ends[] = {5.0, 10.0, 20.0};
    for (uint32_t deg = 5; deg <= PL_REDUCE_MAX_DEGREE; deg++)
        for (size_t si = 0; si < sizeof starts / sizeof starts[0]; si++)
            for (size_t ei = 0; ei < sizeof ends / sizeof ends[0]; ei++)
                for (int method = 0; method < 2; method++) {
                    if (method == 1 && deg != 8)
                        continue; /* the slab fit does not use the degree */
                    pl_reduce_options o = PL_REDUCE_OPTIONS_INIT;
                    o.degree = deg;
                    o.start_s = starts[si] > 0 ? starts[si] : 1e-6;
                    o.end_s = ends[ei];
                    o.diffusivity_mm2_s = alpha;
                    o.depth_method = method ? PL_DEPTH_SLAB_FIT : PL_DEPTH_PEAK_D2;
                    o.phase_frequencies = 0;
                    o.threads = 1;
                    pl_reducer *r;
                    pl_err err = {0};
                    if (pl_reducer_new(&r, width, 1, times, nframes, pre, &o, &err)) {
                        fprintf(stderr, "%s\n", err.msg);
                        return 1;
                    }
                    for (uint32_t i = 0; i < nframes; i++)
                        if (pl_reducer_frame(r, i, frames + (size_t)i * width, &err)) {
                            fprintf(stderr, "%s\n", err.msg);
                            return 1;
                        }
                    pl_map *m;
                    if (pl_reducer_finish(r, &m, NULL, &err)) {
                        fprintf(stderr, "%s\n", err.msg);
                        return 1;
                    }
                    const float *depth = pl_map_channel(m, (uint32_t)pl_map_find_channel(m, "depth"));
                    double per[NDEPTH], tot = 0;
                    uint32_t nt = 0, missed = 0;
                    for (uint32_t d = 0; d < NDEPTH; d++) {
                        double s = 0;
                        uint32_t n = 0;
                        for (uint32_t k = 0; k < reps; k++) {
                            double v = depth[d * reps + k];
                            double e = isnan(v) ? 1.0 : fabs(v - depths[d]) / depths[d];
                            s += e;
                            n++;
                            if (depths[d] <= 2.0) {
                                tot += e;
                                nt++;
                                missed += isnan(v);
                            }
                        }
                        per[d] = 100 * s / n;
                    }
                    printf("%s %2u %5.3f %4.1f | %6.2f (%u) |", method ? "slab" : "d2  ", deg,
                           o.start_s < 1e-3 ? 1.0 / rate : o.start_s, o.end_s, 100 * tot / nt,
                           missed);
                    for (uint32_t d = 0; d < NDEPTH; d++)
                        printf(" %6.2f", per[d]);
                    printf("\n");
                    fflush(stdout);
                    pl_map_free(m);
                    pl_reducer_free(r);
                }
    free(times);
    free(frames);
    return 0;
}
