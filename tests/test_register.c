/*
 * test_register.c - registration: shifts and rotations of scikit-image's
 * photographs made with scipy (the Fourier shift theorem, order-5 spline
 * rotation), scikit-image's own phase_cross_correlation on the same pairs,
 * numpy.roll, simulated reinspections with the sample fleet's placement
 * errors (the simulator's geometry), the quality limits and their
 * measurement, Keys' kernel on polynomials, NaN handling, the nominal
 * transform from placements (against pl_map_pixel_to_part), channel
 * choice, multi-channel alignment, maps of another pitch, manual
 * transforms and refusals. The references run through
 * tests/ref/register_ref.py with Debian's python3.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plyledger/reduce.h"
#include "plyledger/sim.h"
#include "image/register_int.h"
#include "testutil.h"

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

/* ---- helpers ------------------------------------------------------------- */

static uint64_t rng = 0x9e3779b97f4a7c15ull;

static double uniform01(void)
{
    rng ^= rng << 13;
    rng ^= rng >> 7;
    rng ^= rng << 17;
    return ((double)(rng >> 11) + 0.5) / 9007199254740992.0;
}

/* Box-Muller. */
static double gauss(void)
{
    return sqrt(-2.0 * log(uniform01())) * cos(2.0 * M_PI * uniform01());
}

/* ---- the reference pairs ------------------------------------------------- */

typedef struct pair {
    char id[8], kind[8], photo[16];
    uint32_t w, h;
    double dx, dy, theta, snr, scale;
    tu_group group; /* which run of the loops below takes it */
} pair;

static char *pairs_dir;
static pair pairs[64];
static int npairs;

/* The simulated baseline (seed 101) and the first reinspection (seed 201,
 * placement_err[0]) of the tests below, simulated once per run for the
 * tests that share them (simulated()) and freed by remove_pairs(). */
static pl_map *sim_cache[2];

/* The group this run is: the unit tests or the study (testutil.h). */
static tu_group run_group;

/* The loops over pairs share them out: of a kind with six pairs or more,
 * every fifth (in the order register_ref.py makes them: photograph,
 * shift or angle, noise) is a unit pair, the others are the study's; of
 * the two scaled pairs the first (x1.06) is a unit pair, the other (x0.95)
 * the study's; kinds with fewer pairs are all unit pairs. Each loop checks that its
 * unit pairs still hold both photographs, and noise-free and noisy pairs
 * where the kind has both. */
static void share_out_pairs(void)
{
    for (int i = 0; i < npairs; i++) {
        int of_kind = 0, index = 0;
        for (int k = 0; k < npairs; k++)
            if (strcmp(pairs[k].kind, pairs[i].kind) == 0) {
                index += k < i;
                of_kind++;
            }
        if (strcmp(pairs[i].kind, "scale") == 0)
            pairs[i].group = index == 0 ? TU_UNIT : TU_STUDY;
        else
            pairs[i].group = of_kind < 6 || index % 5 == 0 ? TU_UNIT : TU_STUDY;
    }
}

/* Whether this run takes pair p. */
static int takes(const pair *p)
{
    return p->group == run_group;
}

/* The unit pairs of `kind` (and of `kind2`, may be NULL) cover both
 * photographs and, where the kind has them, both noise-free and noisy
 * pairs; the kinds together have at least `least` pairs. */
static void assert_unit_pairs_representative(const char *kind, const char *kind2, int least)
{
    int all = 0, photos[2] = { 0, 0 }, clean[2] = { 0, 0 }, noisy[2] = { 0, 0 };
    for (int i = 0; i < npairs; i++) {
        const pair *p = &pairs[i];
        if (strcmp(p->kind, kind) && (!kind2 || strcmp(p->kind, kind2)))
            continue;
        all++;
        int unit = p->group == TU_UNIT;
        if (unit)
            photos[strcmp(p->photo, "camera") != 0] = 1;
        if (isinf(p->snr))
            clean[unit] = 1;
        else
            noisy[unit] = 1;
    }
    assert_true(all >= least);
    assert_true(photos[0] && photos[1]);
    assert_true(clean[1] || !clean[0]);
    assert_true(noisy[1] || !noisy[0]);
}

/* register_ref.py make, once for the whole group. */
static int make_pairs(void **state)
{
    (void)state;
    pairs_dir = tu_tmpdir();
    if (tu_python("register_ref.py", "make", pairs_dir, NULL) != 0)
        return -1;
    char *list = tu_path(pairs_dir, "pairs.txt");
    FILE *f = fopen(list, "r");
    free(list);
    if (!f)
        return -1;
    char snr[16];
    while (npairs < 64
           && fscanf(f, "%7s %7s %u %u %lf %lf %lf %15s %15s", pairs[npairs].id,
                     pairs[npairs].kind, &pairs[npairs].w, &pairs[npairs].h, &pairs[npairs].dx,
                     &pairs[npairs].dy, &pairs[npairs].theta, snr, pairs[npairs].photo) == 9) {
        pairs[npairs].snr = strcmp(snr, "inf") == 0 ? INFINITY : atof(snr);
        pairs[npairs].scale = 1.0;
        pairs[npairs].group = TU_UNIT;
        if (strcmp(pairs[npairs].kind, "scale") == 0
            && fscanf(f, "%lf", &pairs[npairs].scale) != 1)
            return -1;
        npairs++;
    }
    fclose(f);
    share_out_pairs();
    return npairs > 40 ? 0 : -1;
}

static int remove_pairs(void **state)
{
    (void)state;
    tu_rmtree(pairs_dir);
    pl_map_free(sim_cache[0]);
    pl_map_free(sim_cache[1]);
    return 0;
}

static float *pair_image(const pair *p, const char *which)
{
    char name[32];
    snprintf(name, sizeof name, "%s.%s", p->id, which);
    char *path = tu_path(pairs_dir, name);
    size_t n;
    float *v = tu_read_f4(path, &n);
    assert_int_equal(n, (size_t)p->w * p->h);
    free(path);
    return v;
}

static const pair *find_pair(const char *kind, const char *photo, double theta)
{
    for (int i = 0; i < npairs; i++)
        if (strcmp(pairs[i].kind, kind) == 0 && (!photo || strcmp(pairs[i].photo, photo) == 0)
            && (isnan(theta) || fabs(pairs[i].theta - theta) < 1e-9))
            return &pairs[i];
    fail_msg("no %s pair of %s", kind, photo ? photo : "any photograph");
    return NULL;
}

static pl_register_result register_pair(const pair *p, const pl_register_options *o)
{
    /* the result with the default options, kept: several checks ask it */
    static pl_register_result by_default[64];
    static int have[64];
    size_t k = (size_t)(p - pairs);
    if (!o && have[k])
        return by_default[k];
    float *a = pair_image(p, "fixed"), *b = pair_image(p, "moving");
    pl_register_result r;
    pl_err err = { 0 };
    if (pl_register_images(&r, a, b, p->w, p->h, o, &err))
        fail_msg("%s: %s", p->id, err.msg);
    free(a);
    free(b);
    if (!o) {
        by_default[k] = r;
        have[k] = 1;
    }
    return r;
}

/* ---- translation ----------------------------------------------------------- */

/*
 * Photographs shifted by known sub-pixel amounts with the Fourier shift
 * theorem (scipy.ndimage.fourier_shift on numpy.fft.fft2, exact for the
 * band-limited image), as cropped pairs (other content at the borders)
 * and as whole circular pairs: the shift within 0.05 px without noise and
 * 0.15 px at an SNR of 10 (signal std over noise std, independent noise on
 * both), translation only and with rotation on (which must then find no
 * rotation, within 0.05 degrees).
 */
static void test_register__recovers_subpixel_shift_photographs(void **state)
{
    (void)state;
    int n = 0;
    printf("# pair  kind  photo      SNR | true shift      | translation     | with rotation\n");
    for (int i = 0; i < npairs; i++) {
        const pair *p = &pairs[i];
        if ((strcmp(p->kind, "shift") && strcmp(p->kind, "circ")) || !takes(p))
            continue;
        double tol = isinf(p->snr) ? 0.05 : 0.15;
        pl_register_options o = PL_REGISTER_OPTIONS_INIT;
        o.rotation = 0;
        pl_register_result t = register_pair(p, &o);
        o.rotation = 1;
        pl_register_result r = register_pair(p, &o);
        printf("  %s %-5s %-9s %4.0f | %7.3f %7.3f | %7.3f %7.3f | %7.3f %7.3f %+.4f\n", p->id,
               p->kind, p->photo, isinf(p->snr) ? 0 : p->snr, p->dx, p->dy, t.transform.dx,
               t.transform.dy, r.transform.dx, r.transform.dy, r.transform.rotation_deg);
        tu_assert_close(t.transform.dx, p->dx, tol, "dx, translation only");
        tu_assert_close(t.transform.dy, p->dy, tol, "dy, translation only");
        tu_assert_close(r.transform.dx, p->dx, tol, "dx, rotation on");
        tu_assert_close(r.transform.dy, p->dy, tol, "dy, rotation on");
        tu_assert_close(r.transform.rotation_deg, 0.0, 0.05, "rotation of a shifted pair");
        assert_true(t.transform.rotation_deg == 0.0 && t.transform.scale == 1.0);
        assert_false(t.refused);
        assert_false(r.refused);
        assert_true(t.ncc > 0.9 && t.overlap_fraction > 0.85);
        assert_true(isnan(t.shift_u_mm) && isnan(t.overlap_mm2)); /* no pitch */
        n++;
    }
    assert_true(n > 0);
    assert_unit_pairs_representative("shift", "circ", 20);
}

/*
 * The same translation-only pairs through
 * skimage.registration.phase_cross_correlation(upsample_factor=100)
 * (Debian python3-skimage 0.19, a port of Guizar-Sicairos' algorithm):
 * the shifts agree within 0.02 px.
 */
static void test_register__agrees_with_skimage(void **state)
{
    (void)state;
    assert_int_equal(tu_python("register_ref.py", "skimage", pairs_dir, NULL), 0);
    char *path = tu_path(pairs_dir, "skimage.txt");
    FILE *f = fopen(path, "r");
    free(path);
    assert_non_null(f);
    char id[8];
    double sx, sy, worst = 0.0;
    int n = 0;
    while (fscanf(f, "%7s %lf %lf", id, &sx, &sy) == 3) {
        const pair *p = NULL;
        for (int i = 0; i < npairs; i++)
            if (strcmp(pairs[i].id, id) == 0)
                p = &pairs[i];
        assert_non_null(p);
        if (!takes(p))
            continue;
        pl_register_options o = PL_REGISTER_OPTIONS_INIT;
        o.rotation = 0;
        pl_register_result r = register_pair(p, &o);
        tu_assert_close(r.transform.dx, sx, 0.02, id);
        tu_assert_close(r.transform.dy, sy, 0.02, id);
        worst = fmax(worst, fmax(fabs(r.transform.dx - sx), fabs(r.transform.dy - sy)));
        n++;
    }
    fclose(f);
    printf("# %d pairs; largest difference from skimage %.3f px\n", n, worst);
    assert_true(n > 0);
    assert_unit_pairs_representative("shift", "circ", 20);
}

/*
 * A circular shift by whole pixels (numpy.roll) without a window: the
 * normalised cross-power spectrum is then a pure phase ramp, whose inverse
 * is a unit impulse at the shift (Kuglin and Hines 1975): the peak is
 * exactly there with the value 1, also after the sub-pixel refinement,
 * also for odd sides (61 x 97, the complex row transform). The value is 1
 * to 1e-4: the transforms are float32, and the few bins whose magnitude
 * is at the rounding level carry no phase (the guard sets them to zero).
 */
static void test_register__integer_circular_shift_exact(void **state)
{
    (void)state;
    int n = 0;
    for (int i = 0; i < npairs; i++) {
        const pair *p = &pairs[i];
        if (strcmp(p->kind, "roll"))
            continue;
        float *a = pair_image(p, "fixed"), *b = pair_image(p, "moving");
        pl_register__peak pk;
        assert_int_equal(pl_register__translation(&pk, a, b, p->w, p->h, PL_WINDOW_NONE, 0.0,
                                                  100, NULL), PL_OK);
        assert_int_equal(pk.ix, (int)p->dx);
        assert_int_equal(pk.iy, (int)p->dy);
        assert_true(pk.dx == p->dx && pk.dy == p->dy);
        tu_assert_close(pk.peak, 1.0, 1e-4, "normalised peak");
        assert_true(pk.psr > 1000.0);
        pl_register_options o = PL_REGISTER_OPTIONS_INIT;
        o.window = PL_WINDOW_NONE;
        o.rotation = 0;
        pl_register_result r;
        assert_int_equal(pl_register_images(&r, a, b, p->w, p->h, &o, NULL), PL_OK);
        assert_true(r.transform.dx == p->dx && r.transform.dy == p->dy);
        printf("# %ux%u roll (%g, %g): peak %.7f at (%d, %d), PSR %.0f\n", p->w, p->h, p->dx,
               p->dy, pk.peak, pk.ix, pk.iy, pk.psr);
        free(a);
        free(b);
        n++;
    }
    assert_int_equal(n, 2);
}

/* ---- rotation -------------------------------------------------------------- */

/*
 * Photographs rotated about their centre and shifted with
 * scipy.ndimage.affine_transform (spline of order 5) and cropped inside:
 * rotation within 0.05 degrees (angles from 0.7 to 5 degrees, and 12 and
 * -30), shift within 0.05 px without noise and 0.15 px at an SNR of 10.
 * The signs follow the introduction of plyledger/register.h.
 */
static void test_register__recovers_rotation_photographs(void **state)
{
    (void)state;
    int n = 0;
    printf("# pair  photo      SNR | true                     | found\n");
    for (int i = 0; i < npairs; i++) {
        const pair *p = &pairs[i];
        if (strcmp(p->kind, "rot") || !takes(p))
            continue;
        pl_register_result r = register_pair(p, NULL);
        double tol = isinf(p->snr) ? 0.05 : 0.15;
        printf("  %s %-9s %4.0f | %6.2f %6.2f %+7.3f deg | %7.3f %7.3f %+8.4f deg\n", p->id,
               p->photo, isinf(p->snr) ? 0 : p->snr, p->dx, p->dy, p->theta, r.transform.dx,
               r.transform.dy, r.transform.rotation_deg);
        tu_assert_close(r.transform.rotation_deg, p->theta, 0.05, "rotation");
        tu_assert_close(r.transform.dx, p->dx, tol, "dx");
        tu_assert_close(r.transform.dy, p->dy, tol, "dy");
        assert_true(r.transform.scale == 1.0);
        assert_false(r.refused);
        n++;
    }
    assert_true(n > 0);
    assert_unit_pairs_representative("rot", NULL, 20);
    if (run_group == TU_STUDY)
        return;
    /* the log-polar stage alone sees the angle to a tenth of a degree */
    const pair *p = find_pair("rot", "camera", 5.0);
    float *a = pair_image(p, "fixed"), *b = pair_image(p, "moving");
    double th, s;
    assert_int_equal(pl_register__logpolar(&th, &s, a, b, p->w, p->h, 0, NULL), PL_OK);
    tu_assert_close(th, 5.0, 0.15, "log-polar estimate");
    assert_true(s == 1.0);
    free(a);
    free(b);
}

/*
 * Map-sized pairs (640 x 512, a photograph enlarged and rotated by 0.25 to
 * 2 degrees with scipy's order-5 spline, register_ref.py "large"): these
 * take the half-size search of plyledger/register.h. The shift under
 * rotation within 0.05 px (the required limit) and the rotation within
 * 0.002 degrees; over the unit pairs the worst shift error must also stay
 * within 0.01 px, a margin that the refinement's judgement of its own
 * steps (refine_rigid() in lib/image/register.c) has to keep.
 */
static void test_register__map_sized_rotated_pairs(void **state)
{
    (void)state;
    int n = 0;
    double worst = 0.0, worst_rot = 0.0;
    printf("# pair  true                     | found                     | error\n");
    for (int i = 0; i < npairs; i++) {
        const pair *p = &pairs[i];
        if (strcmp(p->kind, "large") || !takes(p))
            continue;
        assert_true(p->w == 640 && p->h == 512);
        pl_register_result r = register_pair(p, NULL);
        double e = hypot(r.transform.dx - p->dx, r.transform.dy - p->dy);
        double er = fabs(r.transform.rotation_deg - p->theta);
        printf("  %s %6.2f %6.2f %+6.2f deg | %7.3f %7.3f %+8.4f deg | %.4f px %.5f deg\n", p->id,
               p->dx, p->dy, p->theta, r.transform.dx, r.transform.dy, r.transform.rotation_deg,
               e, er);
        assert_false(r.refused);
        assert_true(e <= 0.05);
        assert_true(er <= 0.002);
        worst = fmax(worst, e);
        worst_rot = fmax(worst_rot, er);
        n++;
    }
    printf("# worst shift error %.4f px, rotation error %.5f deg\n", worst, worst_rot);
    assert_true(n >= 5 || run_group == TU_STUDY);
    if (run_group == TU_UNIT)
        assert_true(worst <= 0.01);
}

/*
 * Scale (opts.scale on): photographs scaled by 1.06 and 0.95 as well as
 * rotated and shifted (the same scipy transform): the log-polar radius
 * gives the scale, the refinement sharpens it; scale within 0.002,
 * rotation within 0.05 degrees, shift within 0.1 px. With scale off the
 * scale stays 1.
 */
static void test_register__recovers_scale_photographs(void **state)
{
    (void)state;
    int n = 0;
    for (int i = 0; i < npairs; i++) {
        const pair *p = &pairs[i];
        if (strcmp(p->kind, "scale") || !takes(p))
            continue;
        pl_register_options o = PL_REGISTER_OPTIONS_INIT;
        o.scale = 1;
        pl_register_result r = register_pair(p, &o);
        printf("# %s x%.2f %+.2f deg (%.2f, %.2f): x%.5f %+.4f deg (%.3f, %.3f), ncc %.3f\n",
               p->photo, p->scale, p->theta, p->dx, p->dy, r.transform.scale,
               r.transform.rotation_deg, r.transform.dx, r.transform.dy, r.ncc);
        tu_assert_close(r.transform.scale, p->scale, 0.002, "scale");
        tu_assert_close(r.transform.rotation_deg, p->theta, 0.05, "rotation");
        tu_assert_close(r.transform.dx, p->dx, 0.1, "dx");
        tu_assert_close(r.transform.dy, p->dy, 0.1, "dy");
        assert_false(r.refused);
        o.scale = 0;
        r = register_pair(p, &o);
        assert_true(r.transform.scale == 1.0);
        n++;
    }
    assert_int_equal(n, 1); /* of the two: one in each group */
}

/* ---- simulated reinspections -------------------------------------------------- */

/*
 * A site as the sample fleet simulates it (sample-fleet/genscenes.c: a
 * 3 mm CFRP skin, a stringer flange along u and a frame shear tie across
 * it bonded behind, a delamination and an impact, the camera's noise),
 * 96 x 72 pixels of 1 mm; the simulation grid is refined to 0.5 mm so that
 * its bilinear sampling of the part (which differs between a placed and a
 * misplaced camera) stays well below the tolerances (at 1 mm it alone
 * moves the answer by up to 0.03 px and 0.035 degrees).
 */
#define SIM_SCENE                                                                              \
    "{\"seed\": %u, \"laminate\": {\"thickness_mm\": 3.0, \"density_kg_m3\": 1560, "          \
    "\"specific_heat_j_kgk\": 1200, \"conductivity_along_w_mk\": 2.6, "                        \
    "\"conductivity_across_w_mk\": 1.9, \"conductivity_through_w_mk\": 0.75}, "                \
    "\"flash\": {\"energy_j_m2\": 7500}, "                                                     \
    "\"surface\": {\"ambient_k\": 294.15, \"front_h_w_m2k\": 8, \"emissivity\": 0.92}, "      \
    "\"camera\": {\"width\": 96, \"height\": 72, \"pitch_mm\": 1.0, \"frame_rate_hz\": 50, "   \
    "\"frame_count\": 500, \"netd_k\": 0.02, \"fixed_pattern_k\": 0.01}, "                      \
    "\"grid\": {\"pitch_mm\": 0.5}, "                                                          \
    "\"placement_error\": {\"shift_mm\": [%.3f, %.3f], \"rotation_deg\": %.3f}, "              \
    "\"substructure\": [{\"kind\": \"flange\", \"outline\": {\"shape\": \"rectangle\", "       \
    "\"centre_mm\": [48, 25], \"size_mm\": [160, 26], \"angle_deg\": 0}, \"thickness_mm\": 2.5, " \
    "\"bond_resistance_m2k_w\": 0.0002}, {\"kind\": \"flange\", \"outline\": {\"shape\": "     \
    "\"rectangle\", \"centre_mm\": [31, 36], \"size_mm\": [14, 130], \"angle_deg\": 0}, "      \
    "\"thickness_mm\": 2.0, \"bond_resistance_m2k_w\": 0.0002}], "                             \
    "\"defects\": [{\"kind\": \"delamination\", \"depth_mm\": 1.0, \"outline\": {\"shape\": "  \
    "\"ellipse\", \"centre_mm\": [70, 50], \"axes_mm\": [12, 8], \"angle_deg\": 0}}, "         \
    "{\"kind\": \"impact\", \"centre_mm\": [60, 15], \"top_depth_mm\": 0.5, "                  \
    "\"bottom_depth_mm\": 2.0, \"top_diameter_mm\": 5, \"bottom_diameter_mm\": 14, "           \
    "\"layers\": 5}]}"

typedef struct feed {
    pl_reducer *r;
} feed;

static int feed_frame(void *ud, uint32_t index, double time_s, const float *kelvin)
{
    (void)time_s;
    return pl_reducer_frame(((feed *)ud)->r, index, kelvin, NULL);
}

/* The site seen with a placement error, reduced with the default options;
 * the map recorded on the site's frame (the robot does not know its
 * error): pitch 1 mm, the same placement for every inspection. */
static pl_map *simulate_site(unsigned seed, double du, double dv, double rot)
{
    char json[4096];
    snprintf(json, sizeof json, SIM_SCENE, seed, du, dv, rot);
    pl_sim_scene *sc;
    pl_err err = { 0 };
    if (pl_sim_scene_parse(&sc, json, "site.json", &err))
        fail_msg("%s", err.msg);
    pl_sim_info info;
    pl_sim_scene_info(sc, &info);
    double *times = malloc(info.frame_count * sizeof *times);
    assert_non_null(times);
    for (uint32_t i = 0; i < info.frame_count; i++)
        times[i] = i / info.frame_rate_hz - info.flash_time_s;
    feed f;
    if (pl_reducer_new(&f.r, info.width, info.height, times, info.frame_count,
                       info.preflash_frames, NULL, &err))
        fail_msg("%s", err.msg);
    if (pl_sim_run_frames(sc, feed_frame, &f, NULL, NULL, &err))
        fail_msg("%s", err.msg);
    pl_map *m = NULL;
    if (pl_reducer_finish(f.r, &m, NULL, &err))
        fail_msg("%s", err.msg);
    pl_reducer_free(f.r);
    pl_sim_scene_free(sc);
    free(times);
    m->pitch_u = m->pitch_v = 1.0;
    const double origin[3] = { 5410.0, -320.0, 1280.0 };
    memcpy(m->placement.origin, origin, sizeof origin);
    snprintf(m->placement.system, sizeof m->placement.system, "STA/BL/WL");
    return m;
}

/* The placement errors (mm, mm, degrees) of the reinspections below. */
static const double placement_err[4][3] = {
    { 2.761, 1.529, -0.196 },
    { -2.850, 1.625, 0.527 },
    { 2.405, -0.243, 0.969 },
    { -1.865, -2.590, -0.873 },
};

/* sim_cache[which], simulated on first use. */
static const pl_map *simulated(int which)
{
    if (!sim_cache[which])
        sim_cache[which] = which ? simulate_site(201, placement_err[0][0], placement_err[0][1],
                                                 placement_err[0][2])
                                 : simulate_site(101, 0.0, 0.0, 0.0);
    return sim_cache[which];
}

/* The same map with white noise of std(map) / snr on every channel. */
static pl_map *with_noise(const pl_map *m, double snr)
{
    pl_map *o = NULL;
    assert_int_equal(pl_map_clone(&o, m, NULL), PL_OK);
    size_t np = (size_t)m->width * m->height;
    for (uint32_t c = 0; c < m->nchannels; c++) {
        float *v = pl_map_channel(o, c);
        double s = 0, s2 = 0, n = 0;
        for (size_t i = 0; i < np; i++)
            if (isfinite(v[i])) {
                s += v[i];
                s2 += (double)v[i] * v[i];
                n++;
            }
        double sd = n > 1 ? sqrt(fmax(s2 / n - (s / n) * (s / n), 0.0)) : 0.0;
        for (size_t i = 0; i < np; i++)
            v[i] = (float)(v[i] + sd / snr * gauss());
    }
    return o;
}

/*
 * Reinspections of one simulated site with placement errors of the sample
 * fleet's kind (genscenes.c draws them uniformly within +-3.5 mm and +-1
 * degree). The simulator's geometry (plyledger/sim.h): the misplaced
 * camera's pixel p looks at the site point c + R(rot) (p pitch - c) +
 * shift, where the placed camera's pixel q looks at q pitch; c is the same
 * centre of the field of view. So the current map's p shows what the
 * baseline shows at q = c/pitch + R(rot) (p - c/pitch) + shift/pitch: in
 * register.h's convention theta = rot and d = shift / pitch, with the
 * simulator's sign (R from u toward v, as ours). Registered on the default
 * channel (the first phase map) through pl_register_maps() with equal
 * recorded placements: within 0.1 px and 0.05 degrees of that, each of its
 * signs as simulated. Then the same maps with white noise at an SNR of 3
 * still register and pass the default limits, and noise against the map
 * is refused. The unit tests take the first reinspection (with the noise
 * checks), the study the other three.
 */
static void test_register__simulated_placement_errors(void **state)
{
    (void)state;
    const double (*err)[3] = placement_err;
    const pl_map *base = simulated(0);
    int ph = pl_map_find_channel(base, "phase");
    assert_true(ph >= 0);
    printf("# placement error (mm, mm, deg)  | found (px, px, deg)         | ncc   psr\n");
    for (int k = 0; k < 4; k++) {
        if ((k == 0) != (run_group == TU_UNIT))
            continue; /* the first in the unit tests, the others in the study */
        pl_map *cur = NULL;
        if (k == 0)
            assert_int_equal(pl_map_clone(&cur, simulated(1), NULL), PL_OK);
        else
            cur = simulate_site(201 + (unsigned)k, err[k][0], err[k][1], err[k][2]);
        pl_register_result r;
        pl_err e = { 0 };
        if (pl_register_maps(&r, NULL, base, cur, NULL, NULL, NULL, &e))
            fail_msg("%s", e.msg);
        printf("  %+6.3f %+6.3f %+6.3f          | %+7.3f %+7.3f %+8.4f    | %.3f %5.1f\n",
               err[k][0], err[k][1], err[k][2], r.transform.dx, r.transform.dy,
               r.transform.rotation_deg, r.ncc, r.psr);
        assert_false(r.refused);
        tu_assert_close(r.transform.dx, err[k][0], 0.1, "dx against the simulated shift");
        tu_assert_close(r.transform.dy, err[k][1], 0.1, "dy against the simulated shift");
        tu_assert_close(r.transform.rotation_deg, err[k][2], 0.05, "rotation");
        assert_true((r.transform.dx > 0) == (err[k][0] > 0));
        assert_true((r.transform.dy > 0) == (err[k][1] > 0));
        assert_true((r.transform.rotation_deg > 0) == (err[k][2] > 0));
        assert_true(r.transform.scale == 1.0 && r.nominal.dx == 0.0 && r.nominal.dy == 0.0
                    && r.nominal.rotation_deg == 0.0);
        tu_assert_close(r.shift_u_mm, r.transform.dx, 1e-12, "shift along u in mm");
        tu_assert_close(r.overlap_mm2, r.overlap_fraction * 96 * 72, 1e-6, "overlap in mm^2");
        if (k == 0) {
            pl_map *nb = with_noise(base, 3.0), *nc = with_noise(cur, 3.0);
            pl_register_result rn;
            assert_int_equal(pl_register_maps(&rn, NULL, nb, nc, NULL, NULL, NULL, NULL), PL_OK);
            printf("  at SNR 3:                       | %+7.3f %+7.3f %+8.4f    | %.3f %5.1f\n",
                   rn.transform.dx, rn.transform.dy, rn.transform.rotation_deg, rn.ncc, rn.psr);
            assert_false(rn.refused);
            tu_assert_close(rn.transform.dx, err[k][0], 0.25, "dx at SNR 3");
            tu_assert_close(rn.transform.dy, err[k][1], 0.25, "dy at SNR 3");
            /* noise against the map */
            float *v = pl_map_channel(nc, (uint32_t)ph);
            for (size_t i = 0; i < 96 * 72; i++)
                v[i] = (float)gauss();
            assert_int_equal(pl_register_maps(&rn, NULL, base, nc, NULL, NULL, NULL, NULL),
                             PL_OK);
            assert_true(rn.refused);
            tu_assert_msg_has(rn.reason, "normalised cross-correlation");
            pl_map_free(nb);
            pl_map_free(nc);
        }
        pl_map_free(cur);
    }
}

/*
 * Dead pixels stay put in the camera while the part moves. Fifteen of them
 * in each map (different ones, as two cameras or two years give), far off
 * scale, must not pull the answer: they are replaced before the search
 * (register.c, despeckle), and the transform stays within the tolerances
 * of the simulated truth. Without that step both pairs used here register
 * 17 px off with a smoothed correlation of 0.985 (measured with the step
 * disabled): the unit tests' pair (the shared baseline and first
 * reinspection above) and the study's own (seeds 301 and 302).
 */
static void register_with_dead_pixels(const pl_map *base_map, const pl_map *cur_map,
                                      const double err[3])
{
    pl_map *base = NULL, *cur = NULL;
    assert_int_equal(pl_map_clone(&base, base_map, NULL), PL_OK);
    assert_int_equal(pl_map_clone(&cur, cur_map, NULL), PL_OK);
    pl_map *maps[2] = { base, cur };
    for (int m = 0; m < 2; m++)
        for (uint32_t c = 0; c < maps[m]->nchannels; c++) {
            float *v = pl_map_channel(maps[m], c);
            for (int k = 0; k < 15; k++) {
                size_t at = (size_t)((k * 997 + m * 463 + 17) % (96 * 72));
                v[at] = (k & 1) ? 50.0f : -50.0f;
            }
        }
    pl_register_result r;
    pl_err e = { 0 };
    if (pl_register_maps(&r, NULL, base, cur, NULL, NULL, NULL, &e))
        fail_msg("%s", e.msg);
    printf("# with dead pixels: %+7.3f %+7.3f %+8.4f, ncc %.3f\n", r.transform.dx,
           r.transform.dy, r.transform.rotation_deg, r.ncc);
    assert_false(r.refused);
    tu_assert_close(r.transform.dx, err[0], 0.1, "dx with dead pixels");
    tu_assert_close(r.transform.dy, err[1], 0.1, "dy with dead pixels");
    tu_assert_close(r.transform.rotation_deg, err[2], 0.05, "rotation with dead pixels");
    pl_map_free(base);
    pl_map_free(cur);
}

static void test_register__dead_pixels_do_not_mislead(void **state)
{
    (void)state;
    if (run_group == TU_UNIT) {
        register_with_dead_pixels(simulated(0), simulated(1), placement_err[0]);
        return;
    }
    const double err[3] = { 1.481, -1.933, 0.828 };
    pl_map *base = simulate_site(301, 0.0, 0.0, 0.0);
    pl_map *cur = simulate_site(302, err[0], err[1], err[2]);
    register_with_dead_pixels(base, cur, err);
    pl_map_free(base);
    pl_map_free(cur);
}

/* ---- quality limits ------------------------------------------------------------- */

/*
 * The default limits, by measurement. Registered with rotation on, the
 * correlation after alignment (NCC) and the PSR over pairs with common
 * content (genuine) and without (the rest). Photographs: 15 of
 * scikit-image's bundled ones in grey, 256 x 320, shifted by up to 8 px
 * (and rotated by up to 5 degrees) by scipy, with independent white noise
 * at SNR 10, 5 and 3 on both; maps: the simulated site above at four
 * stringer/frame layouts, reinspected with placement errors, plus white
 * noise at SNR 10 to 2 (three draws each).
 *
 *                                      n  |  NCC  min    5 %    50 %   max  |  PSR min  5 %   50 %   max
 *   genuine  photographs, shifted      45 |     0.902  0.903  0.966  0.992 |    16.3  35.6   94.0  332.0
 *            photographs, rotated      45 |     0.903  0.912  0.966  0.992 |     6.9  29.7   94.7  305.4
 *            maps                       4 |     0.999  0.999  0.999  0.999 |     9.1   9.1   15.0   20.3
 *            maps, SNR 10              12 |     0.990  0.990  0.991  0.992 |     6.6   7.3   10.4   13.2
 *            maps, SNR 5               12 |     0.964  0.965  0.967  0.969 |     5.8   6.3    7.1   10.2
 *            maps, SNR 3               12 |     0.911  0.913  0.916  0.922 |     4.9   5.5    6.9    8.6
 *            maps, SNR 2               12 |     0.541  0.653  0.833  0.843 |     4.6   5.3    6.6    9.9
 *   none     unrelated photographs    105 |    -0.194 -0.024  0.047  0.380 |     5.5   5.7    6.6   12.6
 *            noise against photograph  30 |     0.001  0.002  0.007  0.017 |     5.6   5.6    6.2    8.2
 *            noise against noise       30 |     0.005  0.005  0.010  0.017 |     5.3   5.4    6.1    7.3
 *            noise against a map       12 |    -0.004 -0.004  0.012  0.042 |     4.4   4.5    5.3    6.6
 *            noise, 96 x 72            30 |     0.011  0.014  0.030  0.055 |     4.4   4.7    5.3    7.2
 *
 * That table was measured with the NCC of the raw pixels. Simulated
 * reinspections of the sample fleet's thick skins (5-6 mm: smooth
 * substructure under camera noise) then correlated only 0.3-0.5 when
 * aligned to 0.05 mm, so the NCC reported and judged is now taken after
 * despeckling and a Gaussian of 1 px (register.c, structure_ncc()): in this
 * test's run genuine pairs at SNR 3 give 0.991 and pairs without common
 * content at most 0.33 (camera against coffee; noise 0.004-0.014), so the
 * limit 0.6 still lies between the classes.
 *
 * The NCC separates the classes (0.38 against 0.90 down to SNR 3; the
 * larger 384 x 448 crops below reach 0.44, camera against coffee); the
 * limit 0.6 leaves room below for real pairs whose levels differ more than
 * these (another camera, a repainted surface). The PSR does not separate
 * them: small noisy maps have weak peaks (their whitened spectrum is mostly
 * noise), and a periodic photograph (text, brick) correlates with another;
 * its limit, 4.5, lies below every genuine pair down to SNR 3 and refuses
 * only a surface without a peak. At SNR 2 some map registrations fail
 * (off by pixels or turned by 180 degrees) with NCC 0.44-0.65. Two
 * different sites of the same design (a stringer crossing a frame) are
 * not "without common content" to the method: they align their
 * substructure with NCC 0.88-0.97. In translation-only mode the classes
 * are as above (rotated genuine pairs apart). Here, a smaller set as a
 * check: genuine pairs at SNR 3 pass, pairs without common content are
 * refused, by the NCC.
 */
static void test_register__quality_limits_separate_pairs(void **state)
{
    (void)state;
    int n = 0;
    for (int i = 0; i < npairs; i++) {
        const pair *p = &pairs[i];
        if ((strcmp(p->kind, "weak") && strcmp(p->kind, "rot")) || !takes(p))
            continue;
        pl_register_result r = register_pair(p, NULL);
        if (!strcmp(p->kind, "weak"))
            printf("# genuine, SNR 3, %s: ncc %.3f psr %.1f, rotation %+.3f (true %+.3f)\n",
                   p->photo, r.ncc, r.psr, r.transform.rotation_deg, p->theta);
        assert_false(r.refused);
        assert_true(r.ncc >= PL_REGISTER_DEFAULT_MIN_NCC && r.psr >= PL_REGISTER_DEFAULT_MIN_PSR);
        n++;
    }
    assert_true(n > 0);
    assert_unit_pairs_representative("rot", "weak", 20);
    /* without common content: the photographs against each other and
     * against noise, and two noise fields */
    const pair *ph[3] = { find_pair("photo", "camera", NAN), find_pair("photo", "astronaut", NAN),
                          find_pair("photo", "coffee", NAN) };
    uint32_t w = ph[0]->w, h = ph[0]->h;
    size_t np = (size_t)w * h;
    float *img[3], *noise = malloc(np * sizeof *noise), *noise2 = malloc(np * sizeof *noise2);
    assert_non_null(noise);
    assert_non_null(noise2);
    for (int k = 0; k < 3; k++)
        img[k] = pair_image(ph[k], "fixed");
    for (size_t i = 0; i < np; i++) {
        noise[i] = (float)(100.0 + 30.0 * gauss());
        noise2[i] = (float)gauss();
    }
    const float *a[] = { img[0], img[0], img[1], img[0], img[2], noise2 };
    const float *b[] = { img[1], img[2], img[2], noise, noise, noise };
    const char *what[] = { "camera/astronaut", "camera/coffee", "astronaut/coffee",
                           "camera/noise", "coffee/noise", "noise/noise" };
    for (int k = 0; k < 6; k++) {
        /* the unit tests take the closest (camera/coffee) and noise/noise */
        if ((k == 1 || k == 5) != (run_group == TU_UNIT))
            continue;
        pl_register_result r;
        assert_int_equal(pl_register_images(&r, a[k], b[k], w, h, NULL, NULL), PL_OK);
        printf("# no common content, %s: ncc %.3f psr %.1f: %s\n", what[k], r.ncc, r.psr,
               r.reason);
        assert_true(r.refused);
        tu_assert_msg_has(r.reason, "normalised cross-correlation");
        tu_assert_msg_has(r.reason, "below the limit 0.6");
    }
    /* the limits are the caller's: lowered, the same pair passes; a PSR
     * limit above the pair's refuses it and says so */
    if (run_group == TU_UNIT) {
        pl_register_options o = PL_REGISTER_OPTIONS_INIT;
        o.min_ncc = -1.0;
        pl_register_result r;
        assert_int_equal(pl_register_images(&r, img[0], img[1], w, h, &o, NULL), PL_OK);
        assert_false(r.refused);
        assert_string_equal(r.reason, "");
        o.min_psr = r.psr + 1.0;
        assert_int_equal(pl_register_images(&r, img[0], img[1], w, h, &o, NULL), PL_OK);
        assert_true(r.refused);
        tu_assert_msg_has(r.reason, "peak-to-sidelobe ratio");
        assert_null(strstr(r.reason, "cross-correlation"));
    }
    for (int k = 0; k < 3; k++)
        free(img[k]);
    free(noise);
    free(noise2);
}

/* ---- resampling ------------------------------------------------------------------ */

static double quad(double x, double y)
{
    return 3.0 + 0.7 * x - 1.3 * y + 0.011 * x * x - 0.023 * x * y + 0.017 * y * y;
}

static double plane(double x, double y)
{
    return -4.0 + 0.37 * x + 0.81 * y;
}

static double cubic(double x, double y)
{
    return 1e-2 * x * x * x + 2e-2 * y * y * y;
}

/* Where transform t sends fixed-grid pixel (x, y) in the moving image. */
static void source_of(const pl_transform *t, uint32_t fw, uint32_t fh, double x, double y,
                      double *sx, double *sy)
{
    double cx = (fw - 1.0) / 2.0, cy = (fh - 1.0) / 2.0, th = t->rotation_deg * M_PI / 180.0;
    double px = x - cx - t->dx, py = y - cy - t->dy;
    *sx = cx + (cos(th) * px + sin(th) * py) / t->scale;
    *sy = cy + (-sin(th) * px + cos(th) * py) / t->scale;
}

/* Largest error of resampling f through t, over the pixels whose source
 * lies inside the moving image (the others must be NaN). */
static double resample_error(double (*f)(double, double), const pl_transform *t, pl_interp interp)
{
    const uint32_t mw = 41, mh = 33, fw = 37, fh = 29;
    float *m = malloc(mw * mh * sizeof *m), *o = malloc(fw * fh * sizeof *o);
    assert_non_null(m);
    assert_non_null(o);
    for (uint32_t y = 0; y < mh; y++)
        for (uint32_t x = 0; x < mw; x++)
            m[y * mw + x] = (float)f(x, y);
    assert_int_equal(pl_register_resample(o, fw, fh, m, mw, mh, t, interp, NULL), PL_OK);
    double worst = 0.0;
    int inside = 0;
    for (uint32_t y = 0; y < fh; y++)
        for (uint32_t x = 0; x < fw; x++) {
            double sx, sy;
            source_of(t, fw, fh, x, y, &sx, &sy);
            int in = sx >= 0 && sy >= 0 && sx <= mw - 1 && sy <= mh - 1;
            if (!in) {
                if (!isnan(o[y * fw + x]) && !(sx > -1e-6 && sy > -1e-6 && sx < mw - 1 + 1e-6
                                               && sy < mh - 1 + 1e-6))
                    fail_msg("(%u, %u): source (%g, %g) outside, value %g", x, y, sx, sy,
                             o[y * fw + x]);
                continue;
            }
            inside++;
            worst = fmax(worst, fabs(o[y * fw + x] - f(sx, sy)));
        }
    assert_true(inside > 100);
    free(m);
    free(o);
    return worst;
}

/*
 * Keys (1981, "Cubic convolution interpolation for digital image
 * processing", IEEE Trans. ASSP 29(6)) chose a = -1/2 so that the
 * interpolant agrees with the Taylor series through the second order:
 * cubic convolution then reproduces every polynomial of degree two, and
 * with his boundary condition up to the image's edge; the tensor product
 * reproduces a quadratic surface. It does not reproduce a cubic (the check
 * can fail), and the bilinear kernel reproduces planes only. The values
 * are float32, hence the tolerances.
 */
static void test_register__resampling_reproduces_polynomials(void **state)
{
    (void)state;
    /* the kernel itself: 1 at 0, 0 at the other integers, weights that
     * sum to one and equal the closed forms used inside */
    assert_true(pl_register__keys(0.0) == 1.0 && pl_register__keys(1.0) == 0.0
                && pl_register__keys(-1.0) == 0.0 && pl_register__keys(2.0) == 0.0
                && pl_register__keys(2.5) == 0.0);
    for (double t = 0.0; t <= 1.0; t += 0.125) {
        double s = 0.0;
        for (int k = -1; k <= 2; k++)
            s += pl_register__keys(t - k);
        tu_assert_close(s, 1.0, 1e-15, "partition of unity");
    }
    const pl_transform moves[] = { { 1.37, -2.21, 0.0, 1.0 },
                                   { 0.4, 0.9, 7.3, 1.0 },
                                   { -1.1, 0.3, -23.0, 1.12 } };
    for (size_t i = 0; i < sizeof moves / sizeof moves[0]; i++) {
        double eq = resample_error(quad, &moves[i], PL_INTERP_BICUBIC);
        double ec = resample_error(cubic, &moves[i], PL_INTERP_BICUBIC);
        double ep = resample_error(plane, &moves[i], PL_INTERP_BILINEAR);
        double eb = resample_error(quad, &moves[i], PL_INTERP_BILINEAR);
        printf("# transform %zu: bicubic on a quadratic %.1e, on a cubic %.1e; bilinear on a "
               "plane %.1e, on a quadratic %.1e\n", i, eq, ec, ep, eb);
        assert_true(eq < 2e-5);
        assert_true(ec > 1e-3);
        assert_true(ep < 2e-5);
        assert_true(eb > 1e-3);
    }
}

/* NaN stays where the kernel touches it; the identity is exact. */
static void test_register__resampling_nan_and_identity(void **state)
{
    (void)state;
    const uint32_t w = 24, h = 20;
    float *m = malloc(w * h * sizeof *m), *o = malloc(w * h * sizeof *o);
    assert_non_null(m);
    assert_non_null(o);
    for (uint32_t i = 0; i < w * h; i++)
        m[i] = (float)(100.0 * gauss());
    const pl_transform id = PL_TRANSFORM_IDENTITY;
    for (int k = 0; k < 2; k++) {
        pl_interp in = k ? PL_INTERP_BILINEAR : PL_INTERP_BICUBIC;
        assert_int_equal(pl_register_resample(o, w, h, m, w, h, &id, in, NULL), PL_OK);
        assert_memory_equal(o, m, w * h * sizeof *m);
    }
    m[9 * w + 11] = NAN;
    /* identity: only the NaN pixel is NaN (the other taps weigh zero) */
    assert_int_equal(pl_register_resample(o, w, h, m, w, h, &id, PL_INTERP_BICUBIC, NULL), PL_OK);
    for (uint32_t i = 0; i < w * h; i++)
        assert_true(isnan(o[i]) == (i == 9 * w + 11));
    /* a shift of (0.5, 0.25): source (x - 0.5, y - 0.25); bicubic touches
     * columns floor - 1 .. floor + 2, bilinear floor .. floor + 1 */
    pl_transform t = { 0.5, 0.25, 0.0, 1.0 };
    for (int k = 0; k < 2; k++) {
        pl_interp in = k ? PL_INTERP_BILINEAR : PL_INTERP_BICUBIC;
        assert_int_equal(pl_register_resample(o, w, h, m, w, h, &t, in, NULL), PL_OK);
        int nan_count = 0;
        for (uint32_t y = 0; y < h; y++)
            for (uint32_t x = 0; x < w; x++) {
                double sx = x - 0.5, sy = y - 0.25;
                int outside = sx < 0 || sy < 0;
                long fx = (long)floor(sx), fy = (long)floor(sy);
                int touches = k ? (11 >= fx && 11 <= fx + 1 && 9 >= fy && 9 <= fy + 1)
                                : (11 >= fx - 1 && 11 <= fx + 2 && 9 >= fy - 1 && 9 <= fy + 2);
                int want = outside || touches;
                if (isnan(o[y * w + x]) != want)
                    fail_msg("%s (%u, %u): NaN %d, expected %d", k ? "bilinear" : "bicubic", x,
                             y, isnan(o[y * w + x]), want);
                nan_count += touches && !outside;
            }
        assert_int_equal(nan_count, k ? 4 : 16);
    }
    /* a pure shift takes the separable path: the same values as the
     * general path (a rotation of 1e-12 degrees) to rounding */
    m[9 * w + 11] = 1.0f;
    pl_transform tr = { 0.37, -1.61, 1e-12, 1.0 };
    float *o2 = malloc(w * h * sizeof *o2);
    assert_non_null(o2);
    t.dx = 0.37;
    t.dy = -1.61;
    assert_int_equal(pl_register_resample(o, w, h, m, w, h, &t, PL_INTERP_BICUBIC, NULL), PL_OK);
    assert_int_equal(pl_register_resample(o2, w, h, m, w, h, &tr, PL_INTERP_BICUBIC, NULL), PL_OK);
    for (uint32_t i = 0; i < w * h; i++) {
        assert_true(isnan(o[i]) == isnan(o2[i]));
        if (!isnan(o[i]))
            tu_assert_close(o[i], o2[i], 1e-3, "separable against direct");
    }
    free(o2);
    free(m);
    free(o);
}

/* ---- windows and FFT lengths ------------------------------------------------------- */

/* The windows against scipy.signal.windows.hann and tukey (sym=True). */
static void test_register__windows_match_scipy(void **state)
{
    (void)state;
    const uint32_t ns[] = { 9, 64, 101 };
    const double alphas[] = { 0.5, 0.25, 0.8 };
    char *dir = tu_tmpdir(), *out = tu_path(dir, "w.f8");
    for (size_t k = 0; k < 3; k++) {
        char n_s[16], a_s[16];
        snprintf(n_s, sizeof n_s, "%u", ns[k]);
        snprintf(a_s, sizeof a_s, "%g", alphas[k]);
        assert_int_equal(tu_python("register_ref.py", "windows", n_s, a_s, out, NULL), 0);
        size_t nref;
        double *ref = tu_read_f8(out, &nref);
        assert_int_equal(nref, 2 * (size_t)ns[k]);
        double *hann = malloc(ns[k] * sizeof *hann), *tuk = malloc(ns[k] * sizeof *tuk),
               *none = malloc(ns[k] * sizeof *none);
        assert_non_null(hann);
        assert_non_null(tuk);
        assert_non_null(none);
        pl_register__window(hann, ns[k], PL_WINDOW_HANN, 0.0);
        pl_register__window(tuk, ns[k], PL_WINDOW_TUKEY, alphas[k]);
        pl_register__window(none, ns[k], PL_WINDOW_NONE, 0.0);
        for (uint32_t i = 0; i < ns[k]; i++) {
            tu_assert_close(hann[i], ref[i], 1e-12, "Hann");
            tu_assert_close(tuk[i], ref[ns[k] + i], 1e-12, "Tukey");
            assert_true(none[i] == 1.0);
        }
        free(ref);
        free(hann);
        free(tuk);
        free(none);
    }
    free(out);
    tu_rmtree(dir);
}

static void test_register__fft_lengths(void **state)
{
    (void)state;
    assert_int_equal(pl_register__fft_length(512, PL_WINDOW_HANN), 512);
    assert_int_equal(pl_register__fft_length(640, PL_WINDOW_HANN), 640);
    assert_int_equal(pl_register__fft_length(352, PL_WINDOW_HANN), 360); /* 32 x 11 */
    assert_int_equal(pl_register__fft_length(97, PL_WINDOW_TUKEY), 100);
    assert_int_equal(pl_register__fft_length(97, PL_WINDOW_NONE), 97);
    assert_int_equal(pl_register__fft_length(202, PL_WINDOW_NONE), 216); /* 2 x 101 */
}

/* ---- maps ---------------------------------------------------------------------------- */

static pl_map *new_map(uint32_t w, uint32_t h, uint32_t nch, double pitch)
{
    pl_map *m = NULL;
    assert_int_equal(pl_map_new(&m, w, h, nch, NULL), PL_OK);
    m->pitch_u = m->pitch_v = pitch;
    snprintf(m->placement.system, sizeof m->placement.system, "STA/BL/WL");
    return m;
}

static void set_channel(pl_map *m, uint32_t c, const char *q, const char *unit,
                        const char *label, const float *v)
{
    assert_int_equal(pl_map_set_channel(m, c, q, unit, NULL), PL_OK);
    snprintf(m->channels[c].label, sizeof m->channels[c].label, "%s", label ? label : "");
    if (v)
        memcpy(pl_map_channel(m, c), v, (size_t)m->width * m->height * sizeof *v);
}

/* Baseline pixel of a part point. */
static void part_to_baseline(const pl_map *b, const double P[3], double *x, double *y)
{
    double d[3] = { P[0] - b->placement.origin[0], P[1] - b->placement.origin[1],
                    P[2] - b->placement.origin[2] };
    *x = (d[0] * b->placement.u[0] + d[1] * b->placement.u[1] + d[2] * b->placement.u[2])
         / b->pitch_u;
    *y = (d[0] * b->placement.v[0] + d[1] * b->placement.v[1] + d[2] * b->placement.v[2])
         / b->pitch_v;
}

/* Where transform t (baseline centre c) sends current pixel (x, y). */
static void apply_transform(const pl_transform *t, const pl_map *b, double x, double y, double *bx,
                            double *by)
{
    double cx = (b->width - 1.0) / 2.0, cy = (b->height - 1.0) / 2.0;
    double th = t->rotation_deg * M_PI / 180.0, px = x - cx, py = y - cy;
    *bx = cx + t->scale * (cos(th) * px - sin(th) * py) + t->dx;
    *by = cy + t->scale * (sin(th) * px + cos(th) * py) + t->dy;
}

/* t agrees with the placements' geometry at the current map's corners and
 * centre (pl_map_pixel_to_part, then projection on the baseline). */
static void assert_geometry(const pl_transform *t, const pl_map *b, const pl_map *c, double tol)
{
    const double pts[5][2] = { { 0, 0 }, { c->width - 1.0, 0 }, { 0, c->height - 1.0 },
                               { c->width - 1.0, c->height - 1.0 },
                               { (c->width - 1.0) / 2, (c->height - 1.0) / 2 } };
    for (int k = 0; k < 5; k++) {
        double P[3], ex, ey, gx, gy;
        pl_map_pixel_to_part(c, pts[k][0], pts[k][1], P);
        part_to_baseline(b, P, &ex, &ey);
        apply_transform(t, b, pts[k][0], pts[k][1], &gx, &gy);
        tu_assert_close(gx, ex, tol, "x of a current pixel on the baseline");
        tu_assert_close(gy, ey, tol, "y of a current pixel on the baseline");
    }
}

static void turn_in_plane(double out_u[3], double out_v[3], const double u[3], const double v[3],
                          double deg)
{
    double a = deg * M_PI / 180.0;
    for (int i = 0; i < 3; i++) {
        out_u[i] = cos(a) * u[i] + sin(a) * v[i];
        out_v[i] = -sin(a) * u[i] + cos(a) * v[i];
    }
}

/*
 * The nominal transform from two placements on a plane of the part that
 * is not the reference system's: a current map whose recorded origin lies
 * 3 mm along the baseline's u and whose axes are turned by 2 degrees from
 * u toward v. Checked against the geometry (each current pixel's part
 * point by pl_map_pixel_to_part, projected on the baseline's axes), and
 * refused where the maps are not on one frame.
 */
static void test_register__nominal_from_placements(void **state)
{
    (void)state;
    pl_map *b = new_map(120, 90, 1, 0.8), *c = new_map(100, 80, 1, 0.8);
    const double ob[3] = { 1200.0, -350.0, 80.0 }, ub[3] = { 0.8, 0.6, 0.0 },
                 vb[3] = { 0.0, 0.0, 1.0 };
    memcpy(b->placement.origin, ob, sizeof ob);
    memcpy(b->placement.u, ub, sizeof ub);
    memcpy(b->placement.v, vb, sizeof vb);
    c->placement = b->placement;
    for (int i = 0; i < 3; i++)
        c->placement.origin[i] = ob[i] + 3.0 * ub[i];
    pl_transform t;
    pl_err err = { 0 };
    assert_int_equal(pl_register__nominal(&t, b, c, &err), PL_OK);
    tu_assert_close(t.dx, 3.0 / 0.8, 1e-9, "3 mm along u");
    tu_assert_close(t.dy, 0.0, 1e-9, "nothing along v");
    assert_true(t.rotation_deg == 0.0);
    turn_in_plane(c->placement.u, c->placement.v, ub, vb, 2.0);
    assert_int_equal(pl_register__nominal(&t, b, c, &err), PL_OK);
    tu_assert_close(t.rotation_deg, 2.0, 1e-9, "rotation from u toward v");
    tu_assert_close(t.scale, 1.0, 1e-12, "scale");
    assert_geometry(&t, b, c, 1e-9);
    /* another pitch: a scale, and the origin in metres */
    c->pitch_u = c->pitch_v = 0.5;
    for (int i = 0; i < 3; i++)
        c->placement.origin[i] /= 1000.0;
    snprintf(c->placement.unit, sizeof c->placement.unit, "m");
    assert_int_equal(pl_register__nominal(&t, b, c, &err), PL_OK);
    tu_assert_close(t.scale, 0.5 / 0.8, 1e-12, "scale of the pitches");
    for (int i = 0; i < 3; i++)
        c->placement.origin[i] *= 1000.0;
    snprintf(c->placement.unit, sizeof c->placement.unit, "mm");
    assert_geometry(&t, b, c, 1e-9);
    /* refusals */
    pl_map *bad = NULL;
    assert_int_equal(pl_map_clone(&bad, c, NULL), PL_OK);
    snprintf(bad->placement.system, sizeof bad->placement.system, "local");
    assert_int_equal(pl_register__nominal(&t, b, bad, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "different systems");
    bad->placement = c->placement;
    for (int i = 0; i < 3; i++)
        bad->placement.v[i] = -c->placement.v[i];
    assert_int_equal(pl_register__nominal(&t, b, bad, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "not coplanar");
    bad->placement = c->placement;
    double tilt = 3.0 * M_PI / 180.0; /* v turned out of the plane */
    const double n[3] = { 0.6, -0.8, 0.0 };
    for (int i = 0; i < 3; i++)
        bad->placement.v[i] = cos(tilt) * c->placement.v[i] + sin(tilt) * n[i];
    assert_int_equal(pl_register__nominal(&t, b, bad, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "not coplanar");
    bad->placement = c->placement;
    for (int i = 0; i < 3; i++)
        bad->placement.origin[i] += 5.0 * n[i];
    assert_int_equal(pl_register__nominal(&t, b, bad, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "along the normal");
    bad->placement = c->placement;
    snprintf(bad->placement.unit, sizeof bad->placement.unit, "ft");
    assert_int_equal(pl_register__nominal(&t, b, bad, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "ft");
    bad->placement = c->placement;
    bad->pitch_v = 0.25; /* not a similar grid once turned */
    assert_int_equal(pl_register__nominal(&t, b, bad, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "not a rotated, scaled copy");
    bad->pitch_v = NAN;
    assert_int_equal(pl_register__nominal(&t, b, bad, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "pitch not known");
    pl_map_free(bad);
    pl_map_free(b);
    pl_map_free(c);
}

/*
 * The channel registered on: the default is the first "phase" channel of
 * both maps, a quantity and label choose another; a missing one is
 * PL_ENOTFOUND naming the map. Each channel holds a different pair (the
 * photographs rotated by 0.7, -2.3 and 3.9 degrees), so the transform
 * found tells which channel was used.
 */
static void test_register__maps_choose_channel(void **state)
{
    (void)state;
    const pair *pa = find_pair("rot", "camera", 0.7), *pb = find_pair("rot", "camera", -2.3),
               *pc = find_pair("rot", "camera", 3.9);
    uint32_t w = pa->w, h = pa->h;
    pl_map *b = new_map(w, h, 4, 1.0), *c = new_map(w, h, 4, 1.0);
    float *img[6] = { pair_image(pa, "fixed"), pair_image(pa, "moving"), pair_image(pb, "fixed"),
                      pair_image(pb, "moving"), pair_image(pc, "fixed"), pair_image(pc, "moving") };
    float *noise = malloc((size_t)w * h * sizeof *noise);
    assert_non_null(noise);
    for (size_t i = 0; i < (size_t)w * h; i++)
        noise[i] = (float)gauss();
    pl_map *m[2] = { b, c };
    for (int k = 0; k < 2; k++) {
        set_channel(m[k], 0, "amplitude", "K", "f=0.1 Hz", noise);
        set_channel(m[k], 1, "phase", "rad", "f=0.1 Hz", img[0 + k]);
        set_channel(m[k], 2, "phase", "rad", "f=0.2 Hz", img[2 + k]);
        set_channel(m[k], 3, "temperature-contrast", "K", "t=0.5 s", img[4 + k]);
    }
    struct {
        const char *q, *label;
        const pair *want;
    } cases[] = {
        { NULL, NULL, pa },
        { "phase", "f=0.2 Hz", pb },
        { NULL, "f=0.2 Hz", pb },
        { "temperature-contrast", NULL, pc },
    };
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        pl_register_result r;
        pl_err err = { 0 };
        if (pl_register_maps(&r, NULL, b, c, cases[k].q, cases[k].label, NULL, &err))
            fail_msg("%s", err.msg);
        assert_false(r.refused);
        tu_assert_close(r.transform.rotation_deg, cases[k].want->theta, 0.05, "the chosen channel");
    }
    pl_register_result r;
    pl_err err = { 0 };
    pl_map dummy, *out = &dummy; /* must be reset to NULL */
    assert_int_equal(pl_register_maps(&r, &out, b, c, "depth", NULL, NULL, &err), PL_ENOTFOUND);
    assert_null(out);
    tu_assert_msg_has(err.msg, "baseline map has no channel of quantity \"depth\"");
    assert_int_equal(pl_register_maps(&r, NULL, b, c, "phase", "f=0.3 Hz", NULL, &err),
                     PL_ENOTFOUND);
    tu_assert_msg_has(err.msg, "f=0.3 Hz");
    set_channel(c, 3, "phase-contrast", "rad", "f=0.1 Hz", NULL);
    assert_int_equal(pl_register_maps(&r, NULL, b, c, "temperature-contrast", NULL, NULL, &err),
                     PL_ENOTFOUND);
    tu_assert_msg_has(err.msg, "current map has no channel");
    /* neither phase nor contrast in both: channel 0 (noise against other
     * noise: refused; the same noise in both would be an exact match) */
    for (int k = 1; k <= 2; k++)
        set_channel(c, (uint32_t)k, "depth", "mm", "", NULL);
    for (size_t i = 0; i < (size_t)w * h; i++)
        pl_map_channel(c, 0)[i] = (float)gauss();
    assert_int_equal(pl_register_maps(&r, NULL, b, c, NULL, NULL, NULL, &err), PL_OK);
    assert_true(r.refused);
    for (int k = 0; k < 6; k++)
        free(img[k]);
    free(noise);
    pl_map_free(b);
    pl_map_free(c);
}

/*
 * Every channel of the current map goes onto the baseline grid through the
 * one transform: the aligned map has the baseline's size, pitch and
 * placement and the current map's channels; each aligned channel is
 * pl_register_resample() of the current one; a channel that is an affine
 * function of another stays so; no-data pixels stay no data.
 */
static void test_register__maps_align_every_channel(void **state)
{
    (void)state;
    const pair *p = find_pair("rot", "astronaut", -2.3);
    uint32_t w = p->w, h = p->h;
    size_t np = (size_t)w * h;
    float *fa = pair_image(p, "fixed"), *fb = pair_image(p, "moving");
    pl_map *b = new_map(w, h, 1, 0.5), *c = new_map(w, h, 3, 0.5);
    set_channel(b, 0, "phase", "rad", "f=0.1 Hz", fa);
    set_channel(c, 0, "phase", "rad", "f=0.1 Hz", fb);
    set_channel(c, 1, "amplitude", "K", "f=0.1 Hz", NULL);
    set_channel(c, 2, "temperature-contrast", "K", "t=1 s", fb);
    float *c1 = pl_map_channel(c, 1), *c2 = pl_map_channel(c, 2);
    for (size_t i = 0; i < np; i++)
        c1[i] = 2.0f * fb[i] + 5.0f;
    for (uint32_t y = 100; y < 110; y++)
        for (uint32_t x = 150; x < 170; x++)
            c2[(size_t)y * w + x] = NAN;
    pl_register_result r;
    pl_map *al = NULL;
    pl_err err = { 0 };
    if (pl_register_maps(&r, &al, b, c, NULL, NULL, NULL, &err))
        fail_msg("%s", err.msg);
    assert_false(r.refused);
    assert_non_null(al);
    tu_assert_close(r.transform.rotation_deg, p->theta, 0.05, "rotation");
    assert_int_equal(al->width, w);
    assert_int_equal(al->height, h);
    assert_int_equal(al->nchannels, 3);
    assert_true(al->pitch_u == 0.5 && al->pitch_v == 0.5);
    assert_memory_equal(&al->placement, &b->placement, sizeof b->placement);
    for (uint32_t k = 0; k < 3; k++) {
        assert_string_equal(al->channels[k].quantity, c->channels[k].quantity);
        assert_string_equal(al->channels[k].label, c->channels[k].label);
        float *want = malloc(np * sizeof *want);
        assert_non_null(want);
        assert_int_equal(pl_register_resample(want, w, h, pl_map_channel(c, k), w, h, &r.transform,
                                              PL_INTERP_BICUBIC, NULL), PL_OK);
        assert_memory_equal(pl_map_channel(al, k), want, np * sizeof *want);
        free(want);
    }
    const float *a0 = pl_map_channel(al, 0), *a1 = pl_map_channel(al, 1),
                *a2 = pl_map_channel(al, 2);
    size_t both = 0, holes = 0;
    for (size_t i = 0; i < np; i++) {
        assert_true(isnan(a0[i]) == isnan(a1[i]));
        if (!isnan(a0[i])) {
            tu_assert_close(a1[i], 2.0 * a0[i] + 5.0, 1e-3 * (1.0 + fabs(a1[i])), "affine channel");
            both += isfinite(fa[i]);
        }
        holes += isnan(a2[i]) && !isnan(a0[i]);
    }
    /* the hole of 20 x 10 pixels, grown by the kernel's reach */
    assert_true(holes >= 200 && holes <= 24 * 14);
    tu_assert_close(r.overlap_fraction, (double)both / (double)np, 1e-12, "overlap fraction");
    tu_assert_close(r.overlap_mm2, (double)both * 0.25, 1e-9, "overlap in mm^2");
    assert_true(r.overlap_fraction > 0.9 && r.ncc > 0.99);
    tu_assert_close(r.shift_u_mm, 0.5 * r.transform.dx, 1e-12, "shift in mm");
    pl_map_free(al);
    pl_map_free(b);
    pl_map_free(c);
    free(fa);
    free(fb);
}

/* A smooth pattern on the part (mm): blobs of 2-6 mm and a ripple. */
static double part_pattern(double X, double Y)
{
    static const double blobs[][4] = { { 512, 318, 4, 1.0 },   { 540, 335, 6, -0.8 },
                                       { 580, 310, 3, 1.4 },   { 600, 370, 5, 0.9 },
                                       { 530, 390, 2.5, -1.2 }, { 625, 330, 4, 0.7 },
                                       { 565, 355, 3.5, 1.1 },  { 505, 365, 5, -0.6 } };
    double v = 0.2 * sin(0.21 * X + 0.13 * Y);
    for (size_t k = 0; k < sizeof blobs / sizeof blobs[0]; k++) {
        double dx = X - blobs[k][0], dy = Y - blobs[k][1];
        v += blobs[k][3] * exp(-(dx * dx + dy * dy) / (2.0 * blobs[k][2] * blobs[k][2]));
    }
    return v;
}

static void render(pl_map *m, const pl_placement *actual)
{
    pl_map *tmp = NULL;
    assert_int_equal(pl_map_clone(&tmp, m, NULL), PL_OK);
    tmp->placement = *actual;
    float *v = pl_map_channel(m, 0);
    for (uint32_t y = 0; y < m->height; y++)
        for (uint32_t x = 0; x < m->width; x++) {
            double P[3];
            pl_map_pixel_to_part(tmp, x, y, P);
            v[(size_t)y * m->width + x] = (float)part_pattern(P[0], P[1]);
        }
    pl_map_free(tmp);
}

/*
 * A reinspection by another camera at half the pitch, recorded 23 mm along
 * u and 10 mm along v from the baseline and turned by 2 degrees, whose
 * real placement is off by another (0.6, -0.4) mm and 0.5 degree: the nominal transform from the records,
 * the residual from the maps, their composition against the real
 * geometry (every pixel's part point by pl_map_pixel_to_part), within
 * 0.1 px. The pattern is rendered analytically on the part for both grids.
 */
static void test_register__maps_of_another_pitch(void **state)
{
    (void)state;
    pl_map *b = new_map(160, 128, 1, 1.0), *c = new_map(300, 240, 1, 0.5);
    const double ob[3] = { 495.0, 300.0, 0.0 };
    memcpy(b->placement.origin, ob, sizeof ob);
    set_channel(b, 0, "phase", "rad", "", NULL);
    set_channel(c, 0, "phase", "rad", "", NULL);
    render(b, &b->placement);
    /* recorded: (23, 10) mm off, turned 2 degrees; real: further off */
    c->placement = b->placement;
    c->placement.origin[0] += 3.0 + 20.0;
    c->placement.origin[1] += 10.0;
    const double u0[3] = { 1, 0, 0 }, v0[3] = { 0, 1, 0 };
    turn_in_plane(c->placement.u, c->placement.v, u0, v0, 2.0);
    pl_placement real = c->placement;
    real.origin[0] += 0.6;
    real.origin[1] -= 0.4;
    turn_in_plane(real.u, real.v, u0, v0, 2.5);
    render(c, &real);
    pl_register_result r;
    pl_err err = { 0 };
    if (pl_register_maps(&r, NULL, b, c, NULL, NULL, NULL, &err))
        fail_msg("%s", err.msg);
    printf("# nominal (%.3f, %.3f) px %.3f deg x%.3f; total (%.3f, %.3f) px %.4f deg x%.4f, "
           "ncc %.4f\n", r.nominal.dx, r.nominal.dy, r.nominal.rotation_deg, r.nominal.scale,
           r.transform.dx, r.transform.dy, r.transform.rotation_deg, r.transform.scale, r.ncc);
    assert_false(r.refused);
    tu_assert_close(r.nominal.rotation_deg, 2.0, 1e-9, "nominal rotation");
    tu_assert_close(r.nominal.scale, 0.5, 1e-12, "nominal scale");
    tu_assert_close(r.transform.rotation_deg, 2.5, 0.05, "total rotation");
    assert_true(r.transform.scale == 0.5); /* the scale is not searched */
    pl_map *truth = NULL;
    assert_int_equal(pl_map_clone(&truth, c, NULL), PL_OK);
    truth->placement = real;
    assert_geometry(&r.transform, b, truth, 0.1);
    pl_map_free(truth);
    pl_map_free(b);
    pl_map_free(c);
}

/* A manual transform: applied as given, scored, never refused; the
 * placements need not agree. */
static void test_register__apply_manual_transform(void **state)
{
    (void)state;
    const pair *p = find_pair("rot", "camera", 0.7);
    float *fa = pair_image(p, "fixed"), *fb = pair_image(p, "moving");
    pl_map *b = new_map(p->w, p->h, 1, 1.0), *c = new_map(p->w, p->h, 2, 1.0);
    set_channel(b, 0, "phase", "rad", "", fa);
    set_channel(c, 0, "phase", "rad", "", fb);
    set_channel(c, 1, "amplitude", "K", "", fb);
    pl_transform t = { p->dx, p->dy, p->theta, 1.0 };
    pl_register_result r;
    pl_map *al = NULL;
    pl_err err = { 0 };
    assert_int_equal(pl_register_apply(&r, &al, b, c, NULL, NULL, &t, PL_INTERP_BILINEAR, &err),
                     PL_OK);
    assert_memory_equal(&r.transform, &t, sizeof t);
    assert_true(isnan(r.psr));
    assert_false(r.refused);
    assert_true(r.ncc > 0.99);
    float *want = malloc((size_t)p->w * p->h * sizeof *want);
    assert_non_null(want);
    assert_int_equal(pl_register_resample(want, p->w, p->h, fb, p->w, p->h, &t,
                                          PL_INTERP_BILINEAR, NULL), PL_OK);
    assert_memory_equal(pl_map_channel(al, 1), want, (size_t)p->w * p->h * sizeof *want);
    pl_map_free(al);
    /* a poor transform scores poorly but is applied */
    t.dx += 15.0;
    snprintf(c->placement.system, sizeof c->placement.system, "other");
    assert_int_equal(pl_register_apply(&r, NULL, b, c, "amplitude", NULL, &t, PL_INTERP_BICUBIC,
                                       &err), PL_ENOTFOUND);
    assert_int_equal(pl_register_apply(&r, NULL, b, c, NULL, NULL, &t, PL_INTERP_BICUBIC, &err),
                     PL_OK);
    assert_false(r.refused);
    assert_true(r.ncc < 0.9);
    assert_true(isnan(r.nominal.dx)); /* the placements do not relate */
    t.scale = 0.0;
    assert_int_equal(pl_register_apply(&r, NULL, b, c, NULL, NULL, &t, PL_INTERP_BICUBIC, &err),
                     PL_EINVAL);
    free(want);
    free(fa);
    free(fb);
    pl_map_free(b);
    pl_map_free(c);
}

/* ---- bad input ------------------------------------------------------------------------- */

static void test_register__refuses_bad_input(void **state)
{
    (void)state;
    const uint32_t w = 32, h = 24;
    float *a = malloc(w * h * sizeof *a), *b = malloc(w * h * sizeof *b), *o = malloc(w * h * sizeof *o);
    assert_non_null(a);
    assert_non_null(b);
    assert_non_null(o);
    for (uint32_t i = 0; i < w * h; i++) {
        a[i] = (float)gauss();
        b[i] = NAN;
    }
    pl_register_result r;
    pl_err err = { 0 };
    assert_int_equal(pl_register_images(&r, a, a, 15, 24, NULL, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "15x24");
    assert_int_equal(pl_register_images(&r, a, b, w, h, NULL, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "moving image has no data");
    assert_int_equal(pl_register_images(&r, b, a, w, h, NULL, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "fixed image has no data");
    pl_register_options o0 = PL_REGISTER_OPTIONS_INIT, op;
    op = o0;
    op.version = 2;
    assert_int_equal(pl_register_images(&r, a, a, w, h, &op, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "version");
    op = o0;
    op.upsample = 0;
    assert_int_equal(pl_register_images(&r, a, a, w, h, &op, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "upsample");
    op = o0;
    op.window = (pl_window)7;
    assert_int_equal(pl_register_images(&r, a, a, w, h, &op, &err), PL_EINVAL);
    op = o0;
    op.window = PL_WINDOW_TUKEY;
    op.tukey_alpha = 1.5;
    assert_int_equal(pl_register_images(&r, a, a, w, h, &op, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "tukey_alpha");
    op = o0;
    op.min_ncc = NAN;
    assert_int_equal(pl_register_images(&r, a, a, w, h, &op, &err), PL_EINVAL);
    op = o0;
    op.min_psr = -1.0;
    assert_int_equal(pl_register_images(&r, a, a, w, h, &op, &err), PL_EINVAL);
    op = o0;
    op.interp = (pl_interp)5;
    assert_int_equal(pl_register_images(&r, a, a, w, h, &op, &err), PL_EINVAL);
    /* a Tukey window and the bilinear kernel work */
    op = o0;
    op.window = PL_WINDOW_TUKEY;
    op.interp = PL_INTERP_BILINEAR;
    op.rotation = 0;
    assert_int_equal(pl_register_images(&r, a, a, w, h, &op, &err), PL_OK);
    assert_true(r.transform.dx == 0.0 && r.transform.dy == 0.0);
    pl_transform t = { 0, 0, 0, -1 };
    assert_int_equal(pl_register_resample(o, w, h, a, w, h, &t, PL_INTERP_BICUBIC, &err), PL_EINVAL);
    t.scale = 1.0;
    t.dx = INFINITY;
    assert_int_equal(pl_register_resample(o, w, h, a, w, h, &t, PL_INTERP_BICUBIC, &err), PL_EINVAL);
    t.dx = 0.0;
    assert_int_equal(pl_register_resample(o, 0, h, a, w, h, &t, PL_INTERP_BICUBIC, &err), PL_EINVAL);
    assert_int_equal(pl_register_resample(o, w, h, a, w, h, &t, (pl_interp)9, &err), PL_EINVAL);
    /* maps: a baseline too small, a pitch not known */
    pl_map *mb = new_map(12, 12, 1, 1.0), *mc = new_map(12, 12, 1, 1.0);
    assert_int_equal(pl_register_maps(&r, NULL, mb, mc, NULL, NULL, NULL, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "smaller than 16x16");
    mc->pitch_u = NAN;
    assert_int_equal(pl_register_maps(&r, NULL, mb, mc, NULL, NULL, NULL, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "current map's pitch not known");
    pl_map_free(mb);
    pl_map_free(mc);
    free(a);
    free(b);
    free(o);
}


/* ---- exact matches --------------------------------------------------------------------- */

/* A textured map with a flat margin: smooth blobs of both signs, a ramp
 * and hash noise inside, one constant value over the outer 8 pixels. */
static void exact_pattern(float *v, uint32_t w, uint32_t h)
{
    for (uint32_t y = 0; y < h; y++)
        for (uint32_t x = 0; x < w; x++) {
            double X = x, Y = y;
            double f = exp(-((X - 20) * (X - 20) + (Y - 14) * (Y - 14)) / 30.0)
                       - 0.7 * exp(-((X - 41) * (X - 41) + (Y - 30) * (Y - 30)) / 55.0)
                       + 0.01 * X + 0.2 * sin(X * 0.7) * cos(Y * 0.45);
            uint32_t k = (x * 2654435761u) ^ (y * 2246822519u);
            k ^= k >> 15;
            f += 0.05 * ((double)(k & 0xffff) / 65535.0 - 0.5);
            int margin = x < 8 || y < 8 || x >= w - 8 || y >= h - 8;
            v[(size_t)y * w + x] = margin ? 0.25f : (float)f;
        }
}

/*
 * A map registered against itself, or against an exact circular shift of
 * itself (numpy.roll), is a perfect match: the cross-power spectrum is a
 * pure phase ramp and the correlation surface a unit impulse (Kuglin and
 * Hines 1975), whose sidelobe is zero to float rounding. The registration
 * must say so: shift and rotation 0 (or the roll), ncc 1, a finite PSR
 * that passes the limit; never "peak-to-sidelobe ratio nan". Also with a
 * flat margin and with a block of no data, and through pl_register_maps()
 * as the record calls it.
 */
static void test_register__exact_match_is_perfect(void **state)
{
    (void)state;
    const uint32_t w = 64, h = 48;
    size_t np = (size_t)w * h;
    float *a = malloc(np * sizeof *a), *b = malloc(np * sizeof *b);
    assert_non_null(a);
    assert_non_null(b);
    exact_pattern(a, w, h);
    pl_err err = { 0 };
    pl_register_result r;
    for (int rotation = 0; rotation <= 1; rotation++) {
        pl_register_options o = PL_REGISTER_OPTIONS_INIT;
        o.rotation = rotation;
        TU_OK(pl_register_images(&r, a, a, w, h, &o, &err));
        printf("# itself, rotation %s: shift (%g, %g), %g deg, ncc %.9g, psr %g%s%s\n",
               rotation ? "on" : "off", r.transform.dx, r.transform.dy,
               r.transform.rotation_deg, r.ncc, r.psr, r.refused ? ": refused: " : "",
               r.refused ? r.reason : "");
        assert_false(r.refused);
        assert_true(r.transform.dx == 0.0 && r.transform.dy == 0.0);
        assert_true(r.transform.rotation_deg == 0.0 && r.transform.scale == 1.0);
        tu_assert_close(r.ncc, 1.0, 1e-6, "ncc of a map with itself");
        assert_true(isfinite(r.psr) && r.psr >= o.min_psr);
    }
    /* numpy.roll(a, (3, -5), axis=(0, 1)): moving(q) = fixed(q + d), d = (5, -3) */
    for (uint32_t y = 0; y < h; y++)
        for (uint32_t x = 0; x < w; x++)
            b[(size_t)y * w + x] = a[(size_t)((y + h - 3) % h) * w + (x + 5) % w];
    pl_register__peak pk;
    TU_OK(pl_register__translation(&pk, a, b, w, h, PL_WINDOW_NONE, 0.0, 100, &err));
    assert_true(pk.dx == 5.0 && pk.dy == -3.0);
    assert_true(isfinite(pk.psr) && pk.psr > 1000.0);
    pl_register_options o = PL_REGISTER_OPTIONS_INIT;
    o.window = PL_WINDOW_NONE;
    o.rotation = 0;
    TU_OK(pl_register_images(&r, a, b, w, h, &o, &err));
    assert_false(r.refused);
    assert_true(r.transform.dx == 5.0 && r.transform.dy == -3.0);
    assert_true(isfinite(r.psr));
    /* a block of no data: still itself */
    for (uint32_t y = 20; y < 30; y++)
        for (uint32_t x = 30; x < 44; x++)
            a[(size_t)y * w + x] = NAN;
    TU_OK(pl_register_images(&r, a, a, w, h, NULL, &err));
    assert_false(r.refused);
    assert_true(r.transform.dx == 0.0 && r.transform.dy == 0.0 && r.transform.rotation_deg == 0.0);
    tu_assert_close(r.ncc, 1.0, 1e-6, "ncc with a block of no data");
    assert_true(isfinite(r.psr));
    /* the map path, as the record registers a map onto itself */
    pl_map *m = new_map(w, h, 1, 0.5);
    exact_pattern(b, w, h);
    set_channel(m, 0, "phase", "rad", NULL, b);
    pl_map *al = NULL;
    TU_OK(pl_register_maps(&r, &al, m, m, NULL, NULL, NULL, &err));
    assert_false(r.refused);
    assert_true(r.transform.dx == 0.0 && r.transform.dy == 0.0 && r.transform.rotation_deg == 0.0);
    tu_assert_close(r.ncc, 1.0, 1e-6, "ncc of a map registered onto itself");
    assert_true(isfinite(r.psr) && r.psr >= PL_REGISTER_DEFAULT_MIN_PSR);
    assert_non_null(al);
    for (size_t i = 0; i < np; i++)
        assert_true(al->data[i] == b[i]);
    pl_map_free(al);
    pl_map_free(m);
    free(a);
    free(b);
}

int main(int argc, char **argv)
{
    const struct CMUnitTest unit[] = {
        cmocka_unit_test(test_register__recovers_subpixel_shift_photographs),
        cmocka_unit_test(test_register__agrees_with_skimage),
        cmocka_unit_test(test_register__integer_circular_shift_exact),
        cmocka_unit_test(test_register__recovers_rotation_photographs),
        cmocka_unit_test(test_register__recovers_scale_photographs),
        cmocka_unit_test(test_register__map_sized_rotated_pairs),
        cmocka_unit_test(test_register__simulated_placement_errors),
        cmocka_unit_test(test_register__dead_pixels_do_not_mislead),
        cmocka_unit_test(test_register__quality_limits_separate_pairs),
        cmocka_unit_test(test_register__resampling_reproduces_polynomials),
        cmocka_unit_test(test_register__resampling_nan_and_identity),
        cmocka_unit_test(test_register__windows_match_scipy),
        cmocka_unit_test(test_register__fft_lengths),
        cmocka_unit_test(test_register__nominal_from_placements),
        cmocka_unit_test(test_register__maps_choose_channel),
        cmocka_unit_test(test_register__maps_align_every_channel),
        cmocka_unit_test(test_register__maps_of_another_pitch),
        cmocka_unit_test(test_register__apply_manual_transform),
        cmocka_unit_test(test_register__refuses_bad_input),
        cmocka_unit_test(test_register__exact_match_is_perfect),
    };
    /* the same loops over the pairs and reinspections the unit run leaves */
    const struct CMUnitTest study[] = {
        cmocka_unit_test(test_register__recovers_subpixel_shift_photographs),
        cmocka_unit_test(test_register__agrees_with_skimage),
        cmocka_unit_test(test_register__recovers_rotation_photographs),
        cmocka_unit_test(test_register__recovers_scale_photographs),
        cmocka_unit_test(test_register__simulated_placement_errors),
        cmocka_unit_test(test_register__dead_pixels_do_not_mislead),
        cmocka_unit_test(test_register__quality_limits_separate_pairs),
    };
    run_group = tu_group_of(argc, argv);
    if (run_group == TU_STUDY)
        return cmocka_run_group_tests_name("register study", study, make_pairs, remove_pairs);
    return cmocka_run_group_tests_name("register", unit, make_pairs, remove_pairs);
}
