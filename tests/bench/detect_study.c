/*
 * detect_study.c - how often detection (plyledger/detect.h) finds seeded
 * defects and how often it calls sound laminate, per quantity, on
 * simulated sites: the measurement behind PL_DETECT_DEFAULT_HIGH, _LOW,
 * _MIN_AREA_MM2, _BACKGROUND_MM and _NOMINAL_MARGIN.
 *
 * Every site is a 96 x 72 pixel, 1 mm flash-thermography site as the
 * sample fleet's: a carbon-fibre skin (rho 1560 kg/m^3, c 1200 J/kgK,
 * through-thickness diffusivity 0.42 mm^2/s, the sample site plan's) of
 * 2.0 to 6.4 mm, a stringer flange (2.5 mm) and a frame tie (2.0 mm)
 * bonded behind it at places that change from site to site, a flash of
 * 7.5 kJ/m^2 with 4 % non-uniformity, surface losses, a camera of 20 mK
 * NETD, 10 mK fixed pattern, dead pixels and 4 mK counts, 25 Hz for 30 s,
 * placed up to 3.5 mm and 1 degree off. Half the sites are sound; the
 * others hold one or two delaminations (25 um air gaps) of 8 to 24 mm at
 * 0.5 to 2.0 mm. Each sequence is reduced (window to 30 s, maps at 0.5 s
 * and 2 s, depth from the peak second log-derivative, four pulse-phase
 * frequencies) and the map and the ground truth kept in DIR, so that later
 * runs only detect.
 *
 *   detect_study DIR [--sites N] [--high H] [--low L] [--min-area A]
 *                    [--background-mm B] [--margin M] [--sweep] [--dump DIR2]
 *
 * N sites per thickness (default 12; thicknesses 2.0, 2.8, 3.6, 4.4, 5.2,
 * 5.6, 6.4 mm), simulated when missing. For each channel studied it
 * prints the sound sites with a false call, the false calls, and the
 * seeded defects found by depth, with the sizing ratio (area / true area)
 * of each sizing rule. A defect is found when an indication touches its
 * outline (pixel centres inside it, grown by 2 pixels); any other
 * indication is a false call. --sweep prints the table for a grid of
 * thresholds. --dump writes, for every site and channel, the values, the
 * signal, the background, the labels and the defects' masks as float32
 * planes into DIR2 (for a look with NumPy).
 */
#include "plyledger/detect.h"
#include "plyledger/map.h"
#include "plyledger/reduce.h"
#include "plyledger/sim.h"

#include <cjson/cJSON.h>
#include <errno.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#define W 96
#define H 72
#define NTHICK 7
static const double thickness[NTHICK] = {2.0, 2.8, 3.6, 4.4, 5.2, 5.6, 6.4};

static uint64_t rng_state;
static double uniform(void)
{
    rng_state = rng_state * 6364136223846793005ull + 1442695040888963407ull;
    return (double)(rng_state >> 11) / 9007199254740992.0;
}

/* The scene of site `s` of thickness `t` (index), in JSON. */
static void write_scene(char *buf, size_t cap, int ti, int s, int with_defects)
{
    rng_state = 0x9e3779b97f4a7c15ull ^ (uint64_t)(ti * 1000 + s) * 2654435761ull;
    for (int i = 0; i < 4; i++)
        uniform();
    double T = thickness[ti];
    double k_through = 0.42e-6 * 1560 * 1200;
    double su = (uniform() - 0.5) * 7, sv = (uniform() - 0.5) * 7, rot = (uniform() - 0.5) * 2;
    double stringer_v = 14 + 44 * uniform(), frame_u = 15 + 66 * uniform();
    double stringer_w = 20 + 10 * uniform(), frame_w = 12 + 4 * uniform();
    int n = snprintf(buf, cap,
        "{ \"name\": \"study T%.1f site %d\", \"seed\": %d,\n"
        "  \"laminate\": { \"thickness_mm\": %.2f, \"density_kg_m3\": 1560, "
        "\"specific_heat_j_kgk\": 1200, \"conductivity_along_w_mk\": 2.6, "
        "\"conductivity_across_w_mk\": 1.9, \"conductivity_through_w_mk\": %.4f },\n"
        "  \"flash\": { \"energy_j_m2\": 7500, \"nonuniformity\": 0.04 },\n"
        "  \"surface\": { \"ambient_k\": 294.15, \"front_h_w_m2k\": 8, \"emissivity\": 0.92 },\n"
        "  \"camera\": { \"width\": %d, \"height\": %d, \"pitch_mm\": 1.0, \"frame_rate_hz\": 25,"
        " \"frame_count\": 750, \"preflash_frames\": 5, \"netd_k\": 0.02, \"fixed_pattern_k\": 0.01,"
        " \"dead_pixel_fraction\": 0.0005, \"storage\": \"uint16\", \"gain_k\": 0.004,"
        " \"offset_k\": 273.15, \"saturation_count\": 16383 },\n"
        "  \"placement_error\": { \"shift_mm\": [%.3f, %.3f], \"rotation_deg\": %.3f },\n"
        "  \"grid\": { \"layers\": 24 },\n"
        "  \"substructure\": [\n"
        "    { \"kind\": \"flange\", \"outline\": { \"shape\": \"rectangle\", \"centre_mm\": [48, %.1f],"
        " \"size_mm\": [160, %.1f], \"angle_deg\": 0 }, \"thickness_mm\": 2.5,"
        " \"bond_resistance_m2k_w\": 0.0002 },\n"
        "    { \"kind\": \"flange\", \"outline\": { \"shape\": \"rectangle\", \"centre_mm\": [%.1f, 36],"
        " \"size_mm\": [%.1f, 130], \"angle_deg\": 0 }, \"thickness_mm\": 2.0,"
        " \"bond_resistance_m2k_w\": 0.0002 } ],\n"
        "  \"defects\": [",
        T, s, 5000 + ti * 100 + s, T, k_through, W, H, su, sv, rot, stringer_v, stringer_w,
        frame_u, frame_w);
    if (with_defects) {
        int nd = uniform() < 0.5 ? 1 : 2;
        double cu0 = -100, cv0 = -100, a0 = 0;
        for (int d = 0; d < nd; d++) {
            double depth = 0.5 + 0.5 * floor(4 * uniform());
            if (depth > T - 0.4)
                depth = 0.5;
            double a = 8 + 16 * uniform(), b = a * (0.6 + 0.4 * uniform());
            double cu, cv;
            do {
                cu = 14 + (W - 28) * uniform();
                cv = 14 + (H - 28) * uniform();
            } while (hypot(cu - cu0, cv - cv0) < (a + a0) / 2 + 6);
            n += snprintf(buf + n, cap - (size_t)n,
                          "%s\n    { \"kind\": \"delamination\", \"label\": \"D%d\", \"depth_mm\": %.2f,"
                          " \"outline\": { \"shape\": \"ellipse\", \"centre_mm\": [%.1f, %.1f],"
                          " \"axes_mm\": [%.1f, %.1f], \"angle_deg\": %.0f } }",
                          d ? "," : "", d + 1, depth, cu, cv, a, b, 180 * uniform());
            cu0 = cu, cv0 = cv, a0 = a;
        }
    }
    snprintf(buf + n, cap - (size_t)n, " ] }\n");
}

typedef struct feed {
    pl_reducer *r;
    int rc;
    pl_err err;
} feed;

static int feed_frame(void *ud, uint32_t index, double time_s, const float *kelvin)
{
    (void)time_s;
    feed *f = ud;
    if (pl_reducer_frame_needed(f->r, index))
        f->rc = pl_reducer_frame(f->r, index, kelvin, &f->err);
    return f->rc;
}

static int make_site(const char *dir, int ti, int s)
{
    char path[1024], scene[8192];
    snprintf(path, sizeof path, "%s/T%.1f-%02d.npy", dir, thickness[ti], s);
    struct stat st;
    if (stat(path, &st) == 0)
        return 0;
    write_scene(scene, sizeof scene, ti, s, s % 2);
    pl_err err = {0};
    pl_sim_scene *sc;
    if (pl_sim_scene_parse(&sc, scene, "study scene", &err)) {
        fprintf(stderr, "scene: %s\n", err.msg);
        return -1;
    }
    pl_sim_info info;
    pl_sim_scene_info(sc, &info);
    double *times = malloc(info.frame_count * sizeof *times);
    for (uint32_t i = 0; i < info.frame_count; i++)
        times[i] = i / info.frame_rate_hz - info.flash_time_s;
    double at[2] = {0.5, 2.0};
    pl_reduce_options o = PL_REDUCE_OPTIONS_INIT;
    o.end_s = 30;
    o.times_s = at;
    o.ntimes = 2;
    o.time_products = PL_REDUCE_AT_CONTRAST | PL_REDUCE_AT_D2;
    o.diffusivity_mm2_s = info.diffusivity_mm2_s[2];
    feed f = {NULL, 0, {0}};
    if (pl_reducer_new(&f.r, info.width, info.height, times, info.frame_count,
                       info.preflash_frames, &o, &err) ||
        pl_sim_run_frames(sc, feed_frame, &f, NULL, NULL, &err)) {
        fprintf(stderr, "site %s: %s %s\n", path, err.msg, f.err.msg);
        return -1;
    }
    pl_map *m;
    char *truth;
    if (pl_reducer_finish(f.r, &m, NULL, &err) || pl_sim_truth_json(&truth, sc, &err)) {
        fprintf(stderr, "site %s: %s\n", path, err.msg);
        return -1;
    }
    pl_reducer_free(f.r);
    free(times);
    pl_map_set_pitch(m, 1.0, 1.0, NULL);
    if (pl_map_save_npy(m, path, &err)) {
        fprintf(stderr, "%s\n", err.msg);
        return -1;
    }
    /* the channel descriptions and the truth beside the map */
    snprintf(path, sizeof path, "%s/T%.1f-%02d.json", dir, thickness[ti], s);
    FILE *fp = fopen(path, "w");
    fprintf(fp, "{\"channels\": [");
    for (uint32_t c = 0; c < m->nchannels; c++)
        fprintf(fp, "%s[\"%s\", \"%s\", \"%s\"]", c ? ", " : "", m->channels[c].quantity,
                m->channels[c].unit, m->channels[c].label);
    fprintf(fp, "],\n\"truth\": %s}\n", truth);
    fclose(fp);
    free(truth);
    pl_map_free(m);
    pl_sim_scene_free(sc);
    return 0;
}

/* ---- evaluation ----------------------------------------------------------------- */

#define MAXDEF 4
typedef struct site {
    pl_map *map;
    double thickness;
    int ndef;
    double depth[MAXDEF], area[MAXDEF];
    uint8_t *mask[MAXDEF]; /* the defect's pixels, grown by 2 */
} site;

static int inside(const double *pts, int n, double x, double y)
{
    int in = 0;
    for (int i = 0, j = n - 1; i < n; j = i++) {
        double xi = pts[2 * i], yi = pts[2 * i + 1], xj = pts[2 * j], yj = pts[2 * j + 1];
        if ((yi > y) != (yj > y) && x < (xj - xi) * (y - yi) / (yj - yi) + xi)
            in = !in;
    }
    return in;
}

static int load_site(site *st, const char *dir, int ti, int s)
{
    char path[1024];
    memset(st, 0, sizeof *st);
    st->thickness = thickness[ti];
    snprintf(path, sizeof path, "%s/T%.1f-%02d.npy", dir, thickness[ti], s);
    pl_err err = {0};
    if (pl_map_load_npy(&st->map, path, &err)) {
        fprintf(stderr, "%s\n", err.msg);
        return -1;
    }
    pl_map_set_pitch(st->map, 1.0, 1.0, NULL);
    snprintf(path, sizeof path, "%s/T%.1f-%02d.json", dir, thickness[ti], s);
    FILE *fp = fopen(path, "r");
    fseek(fp, 0, SEEK_END);
    long len = ftell(fp);
    fseek(fp, 0, SEEK_SET);
    char *text = malloc((size_t)len + 1);
    if (fread(text, 1, (size_t)len, fp) != (size_t)len)
        return -1;
    text[len] = 0;
    fclose(fp);
    cJSON *j = cJSON_Parse(text);
    free(text);
    cJSON *ch = cJSON_GetObjectItem(j, "channels");
    for (int c = 0; c < cJSON_GetArraySize(ch); c++) {
        cJSON *e = cJSON_GetArrayItem(ch, c);
        pl_channel *pc = &st->map->channels[c];
        snprintf(pc->quantity, sizeof pc->quantity, "%s", cJSON_GetArrayItem(e, 0)->valuestring);
        snprintf(pc->unit, sizeof pc->unit, "%s", cJSON_GetArrayItem(e, 1)->valuestring);
        snprintf(pc->label, sizeof pc->label, "%s", cJSON_GetArrayItem(e, 2)->valuestring);
    }
    cJSON *defs = cJSON_GetObjectItem(cJSON_GetObjectItem(j, "truth"), "defects");
    for (int d = 0; d < cJSON_GetArraySize(defs) && d < MAXDEF; d++) {
        cJSON *e = cJSON_GetArrayItem(defs, d), *op = cJSON_GetObjectItem(e, "outline_px");
        int n = cJSON_GetArraySize(op);
        double *pts = malloc(2 * (size_t)n * sizeof *pts);
        for (int i = 0; i < n; i++) {
            pts[2 * i] = cJSON_GetArrayItem(cJSON_GetArrayItem(op, i), 0)->valuedouble;
            pts[2 * i + 1] = cJSON_GetArrayItem(cJSON_GetArrayItem(op, i), 1)->valuedouble;
        }
        uint8_t *in = calloc(W * H, 1), *grown = calloc(W * H, 1);
        for (int y = 0; y < H; y++)
            for (int x = 0; x < W; x++)
                in[y * W + x] = (uint8_t)inside(pts, n, x, y);
        for (int y = 0; y < H; y++)
            for (int x = 0; x < W; x++)
                for (int dy = -2; dy <= 2 && !grown[y * W + x]; dy++)
                    for (int dx = -2; dx <= 2; dx++) {
                        int xx = x + dx, yy = y + dy;
                        if (xx >= 0 && yy >= 0 && xx < W && yy < H && in[yy * W + xx]) {
                            grown[y * W + x] = 1;
                            break;
                        }
                    }
        free(in);
        free(pts);
        st->mask[d] = grown;
        st->depth[d] = cJSON_GetObjectItem(e, "depth_mm")->valuedouble;
        st->area[d] = cJSON_GetObjectItem(e, "area_mm2")->valuedouble;
        st->ndef++;
    }
    cJSON_Delete(j);
    return 0;
}

/* The channel of quantity q with that label, or (label "#N") the N-th of
 * that quantity from 1. */
static int find_channel(const pl_map *m, const char *q, const char *label)
{
    int nth = label[0] == '#' ? atoi(label + 1) : 0;
    for (uint32_t c = 0; c < m->nchannels; c++)
        if (!strcmp(m->channels[c].quantity, q) &&
            (nth ? --nth == 0 : !strcmp(m->channels[c].label, label)))
            return (int)c;
    return -1;
}

typedef struct channel_study {
    const char *quantity, *label;
} channel_study;

/* the phase channels are the first two frequencies, 1 / 29.8 s and 2 / 29.8 s */
static const channel_study studied[] = {
    {"temperature-contrast", "t=0.5 s"}, {"temperature-contrast", "t=2 s"},
    {"log-derivative-2", "t=0.5 s"},     {"log-derivative-2", "t=2 s"},
    {"depth", "peak d2"},                {"phase-contrast", "#1"},
    {"phase-contrast", "#2"},
};
#define NSTUDIED (sizeof studied / sizeof studied[0])

#define NDEPTH 4
typedef struct tally {
    int sound_sites, sound_called, false_calls, false_calls_defect_sites;
    int seeded[NDEPTH], found[NDEPTH];
    double ratio_sum[PL_SIZING_COUNT][NDEPTH];
    int ratio_n[NDEPTH];
    double ratio_min[PL_SIZING_COUNT], ratio_max[PL_SIZING_COUNT];
    int errors;
} tally;

static const char *dump_dir; /* --dump: where to write labels and signals */

static void dump(const site *st, int i, const channel_study *cs, const pl_detection *det)
{
    char path[1024];
    snprintf(path, sizeof path, "%s/%03d-%s-%s.f4", dump_dir, i, cs->quantity,
             cs->label[0] == '#' ? cs->label + 1 : cs->label);
    for (char *p = path + strlen(dump_dir) + 1; *p; p++)
        if (*p == ' ' || *p == '=')
            *p = '_';
    FILE *fp = fopen(path, "wb");
    size_t np = (size_t)W * H;
    const float *v = pl_map_channel(st->map, det->channel);
    fwrite(v, sizeof *v, np, fp);
    fwrite(det->signal, sizeof *det->signal, np, fp);
    fwrite(det->background_map, sizeof *det->background_map, np, fp);
    for (size_t p = 0; p < np; p++) {
        float l = (float)det->labels[p];
        fwrite(&l, sizeof l, 1, fp);
    }
    for (size_t p = 0; p < np; p++) {
        float m = 0;
        for (int d = 0; d < st->ndef; d++)
            m += st->mask[d][p];
        fwrite(&m, sizeof m, 1, fp);
    }
    fclose(fp);
}

static void evaluate(tally *t, site *sites, int nsites, const channel_study *cs,
                     const pl_detect_options *base)
{
    memset(t, 0, sizeof *t);
    for (int r = 0; r < PL_SIZING_COUNT; r++) {
        t->ratio_min[r] = INFINITY;
        t->ratio_max[r] = -INFINITY;
    }
    for (int i = 0; i < nsites; i++) {
        site *st = &sites[i];
        int c = find_channel(st->map, cs->quantity, cs->label);
        if (c < 0) {
            t->errors++;
            continue;
        }
        pl_detect_options o = *base;
        if (pl_quantity_uses_nominal(cs->quantity))
            o.nominal = st->thickness;
        pl_detection *det;
        pl_err err = {0};
        if (pl_detect(&det, st->map, (uint32_t)c, &o, &err)) {
            fprintf(stderr, "T%.1f %s %s: %s\n", st->thickness, cs->quantity, cs->label, err.msg);
            t->errors++;
            continue;
        }
        if (dump_dir)
            dump(st, i, cs, det);
        int hit[MAXDEF] = {0};
        size_t best[MAXDEF];
        int fc = 0;
        for (size_t k = 0; k < det->count; k++) {
            int touches = 0;
            for (int d = 0; d < st->ndef; d++) {
                int on = 0;
                for (size_t p = 0; p < (size_t)W * H && !on; p++)
                    on = det->labels[p] == k + 1 && st->mask[d][p];
                if (on) {
                    touches = 1;
                    if (!hit[d] || det->indications[k].size[0].pixels >
                                       det->indications[best[d]].size[0].pixels)
                        best[d] = k;
                    hit[d] = 1;
                }
            }
            if (!touches)
                fc++;
        }
        if (st->ndef == 0) {
            t->sound_sites++;
            t->sound_called += fc > 0;
            t->false_calls += fc;
        } else
            t->false_calls_defect_sites += fc;
        for (int d = 0; d < st->ndef; d++) {
            int b = (int)floor(st->depth[d] / 0.5 + 0.5) - 1;
            if (b < 0)
                b = 0;
            if (b >= NDEPTH)
                b = NDEPTH - 1;
            t->seeded[b]++;
            if (!hit[d])
                continue;
            t->found[b]++;
            t->ratio_n[b]++;
            for (int r = 0; r < PL_SIZING_COUNT; r++) {
                double q = det->indications[best[d]].size[r].area_mm2 / st->area[d];
                t->ratio_sum[r][b] += q;
                if (q < t->ratio_min[r])
                    t->ratio_min[r] = q;
                if (q > t->ratio_max[r])
                    t->ratio_max[r] = q;
            }
        }
        pl_detection_free(det);
    }
}

static void print_tally(const tally *t, const channel_study *cs)
{
    printf("%-21s %-13s %3d/%-3d %4d %4d |", cs->quantity, cs->label, t->sound_called,
           t->sound_sites, t->false_calls, t->false_calls_defect_sites);
    int seeded = 0, found = 0;
    for (int b = 0; b < NDEPTH; b++) {
        printf(" %2d/%-2d", t->found[b], t->seeded[b]);
        seeded += t->seeded[b];
        found += t->found[b];
    }
    printf(" %3d/%-3d |", found, seeded);
    for (int r = 0; r < PL_SIZING_COUNT; r++) {
        double s = 0;
        int n = 0;
        for (int b = 0; b < NDEPTH; b++) {
            s += t->ratio_sum[r][b];
            n += t->ratio_n[b];
        }
        printf(" %5.2f [%4.2f %4.2f]", n ? s / n : NAN, t->ratio_min[r], t->ratio_max[r]);
    }
    printf("%s\n", t->errors ? " (errors)" : "");
}

static void print_header(const pl_detect_options *o)
{
    printf("\nhigh %.1f low %.1f min area %.0f mm2, line-median window %.0f mm, nominal "
           "margin %.2f\n",
           o->high, o->low, o->min_area_mm2, o->background_mm, o->nominal_margin);
    printf("%-21s %-13s %7s %4s %4s | %5s %5s %5s %5s %7s | %-17s %-17s\n", "quantity", "channel",
           "called", "fc", "fcd", "0.5mm", "1.0mm", "1.5mm", "2.0mm", "all", "area/true thr",
           "area/true half");
}

int main(int argc, char **argv)
{
    if (argc < 2) {
        fprintf(stderr, "usage: detect_study DIR [--sites N] [--high H] [--low L] "
                        "[--min-area A] [--background-mm B] [--margin M] [--sweep]\n");
        return 2;
    }
    const char *dir = argv[1];
    int nsite = 12, sweep = 0;
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    for (int i = 2; i < argc; i++) {
        if (!strcmp(argv[i], "--sweep"))
            sweep = 1;
        else if (i + 1 < argc && !strcmp(argv[i], "--dump"))
            dump_dir = argv[++i];
        else if (i + 1 < argc && !strcmp(argv[i], "--sites"))
            nsite = atoi(argv[++i]);
        else if (i + 1 < argc && !strcmp(argv[i], "--high"))
            o.high = atof(argv[++i]);
        else if (i + 1 < argc && !strcmp(argv[i], "--low"))
            o.low = atof(argv[++i]);
        else if (i + 1 < argc && !strcmp(argv[i], "--min-area"))
            o.min_area_mm2 = atof(argv[++i]);
        else if (i + 1 < argc && !strcmp(argv[i], "--background-mm"))
            o.background_mm = atof(argv[++i]);
        else if (i + 1 < argc && !strcmp(argv[i], "--margin"))
            o.nominal_margin = atof(argv[++i]);
        else {
            fprintf(stderr, "detect_study: unknown argument %s\n", argv[i]);
            return 2;
        }
    }
    if (mkdir(dir, 0755) != 0 && errno != EEXIST) {
        perror(dir);
        return 1;
    }
    int nsites = NTHICK * nsite;
    site *sites = calloc((size_t)nsites, sizeof *sites);
    for (int ti = 0; ti < NTHICK; ti++)
        for (int s = 0; s < nsite; s++) {
            if (make_site(dir, ti, s) || load_site(&sites[ti * nsite + s], dir, ti, s))
                return 1;
            fprintf(stderr, ".");
        }
    fprintf(stderr, "\n%d sites, %d sound\n", nsites, NTHICK * (nsite / 2 + nsite % 2));
    if (!sweep) {
        pl_detect_options shown = o;
        if (isnan(shown.high))
            shown.high = PL_DETECT_DEFAULT_HIGH;
        if (isnan(shown.low))
            shown.low = fmin(PL_DETECT_DEFAULT_LOW, shown.high);
        if (isnan(shown.min_area_mm2))
            shown.min_area_mm2 = PL_DETECT_DEFAULT_MIN_AREA_MM2;
        if (isnan(shown.background_mm))
            shown.background_mm = PL_DETECT_DEFAULT_BACKGROUND_MM;
        if (isnan(shown.nominal_margin))
            shown.nominal_margin = PL_DETECT_DEFAULT_NOMINAL_MARGIN;
        print_header(&shown);
        for (size_t c = 0; c < NSTUDIED; c++) {
            tally t;
            evaluate(&t, sites, nsites, &studied[c], &o);
            print_tally(&t, &studied[c]);
        }
    } else {
        static const double highs[] = {4, 5, 6, 7, 8}, lows[] = {2, 3, 4};
        for (size_t a = 0; a < sizeof highs / sizeof highs[0]; a++)
            for (size_t b = 0; b < sizeof lows / sizeof lows[0]; b++) {
                pl_detect_options s = o;
                s.high = highs[a];
                s.low = lows[b];
                if (s.low > s.high)
                    continue;
                print_header(&s);
                for (size_t c = 0; c < NSTUDIED; c++) {
                    tally t;
                    evaluate(&t, sites, nsites, &studied[c], &s);
                    print_tally(&t, &studied[c]);
                }
            }
    }
    for (int i = 0; i < nsites; i++) {
        pl_map_free(sites[i].map);
        for (int d = 0; d < sites[i].ndef; d++)
            free(sites[i].mask[d]);
    }
    free(sites);
    return 0;
}
