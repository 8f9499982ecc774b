/*
 * test_detect.c - indications (lib/image/detect*.c): labelling against
 * scipy.ndimage.label, measures against scipy.ndimage and
 * skimage.measure.regionprops, the outline's chain code, the noise
 * estimate, the background, polarity and nominal comparison, the options,
 * the JSON forms, and detection on simulated sites.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <cjson/cJSON.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "image/detect_int.h"
#include "plyledger/detect.h"
#include "plyledger/map.h"
#include "plyledger/reduce.h"
#include "plyledger/sim.h"
#include "testutil.h"

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

/* ---- helpers ----------------------------------------------------------------- */

static uint64_t rng;

static uint32_t next_u32(void)
{
    rng = rng * 6364136223846793005ull + 1442695040888963407ull;
    return (uint32_t)(rng >> 32);
}

static double uniform(void)
{
    return (next_u32() + 0.5) / 4294967296.0;
}

static double gauss(void)
{
    return sqrt(-2.0 * log(uniform())) * cos(2.0 * M_PI * uniform());
}

/* A one-channel map of w x h at pitch 1 mm with `quantity` in `unit`,
 * values zero. */
static pl_map *new_map(uint32_t w, uint32_t h, const char *quantity, const char *unit)
{
    pl_map *m;
    pl_err err = {0};
    TU_OK(pl_map_new(&m, w, h, 1, &err));
    TU_OK(pl_map_set_channel(m, 0, quantity, unit, &err));
    return m;
}

/* Add `c` over a disk of radius r centred at (x0, y0). */
static void add_disk(pl_map *m, double x0, double y0, double r, double c)
{
    float *v = pl_map_channel(m, 0);
    for (uint32_t y = 0; y < m->height; y++)
        for (uint32_t x = 0; x < m->width; x++)
            if ((x - x0) * (x - x0) + (y - y0) * (y - y0) <= r * r)
                v[(size_t)y * m->width + x] += (float)c;
}

static void add_noise(pl_map *m, double sigma)
{
    float *v = pl_map_channel(m, 0);
    for (size_t i = 0; i < (size_t)m->width * m->height; i++)
        v[i] += (float)(sigma * gauss());
}

static void write_le_u32(const char *path, const uint32_t *v, size_t n)
{
    unsigned char *b = malloc(4 * n);
    assert_non_null(b);
    for (size_t i = 0; i < n; i++) {
        b[4 * i] = (unsigned char)v[i];
        b[4 * i + 1] = (unsigned char)(v[i] >> 8);
        b[4 * i + 2] = (unsigned char)(v[i] >> 16);
        b[4 * i + 3] = (unsigned char)(v[i] >> 24);
    }
    assert_int_equal(tu_write_file(path, b, 4 * n), 0);
    free(b);
}

/* Count of disk pixels as add_disk() sets them. */
static size_t disk_pixels(uint32_t w, uint32_t h, double x0, double y0, double r)
{
    size_t n = 0;
    for (uint32_t y = 0; y < h; y++)
        for (uint32_t x = 0; x < w; x++)
            n += (x - x0) * (x - x0) + (y - y0) * (y - y0) <= r * r;
    return n;
}

/* ---- polarity ----------------------------------------------------------------- */

/* Every quantity of the vocabulary has the direction documented in map.h
 * (from the physics; sources there), and the ones compared with nominal
 * are exactly the four that hold a back-wall value on sound laminate. */
static void test_detect__polarity_of_every_quantity(void **state)
{
    (void)state;
    static const struct {
        const char *q;
        pl_polarity p;
        int nominal;
    } want[] = {
        /* heat held above a defect raises the rise as it raises the contrast */
        {"temperature-rise", PL_POLARITY_RISES, 0},
        {"temperature-contrast", PL_POLARITY_RISES, 0},
        {"normalised-contrast", PL_POLARITY_RISES, 0},
        {"log-derivative-1", PL_POLARITY_RISES, 0},
        {"log-derivative-2", PL_POLARITY_RISES, 0},
        {"time-of-peak-d2", PL_POLARITY_FALLS, 1},
        /* contrast is nil on sound laminate, so its peak time has no sound value */
        {"time-of-peak-contrast", PL_POLARITY_NONE, 0},
        {"depth", PL_POLARITY_FALLS, 1},
        {"phase", PL_POLARITY_FALLS, 0},
        {"phase-contrast", PL_POLARITY_FALLS, 0},
        {"amplitude", PL_POLARITY_NONE, 0},
        {"temperature", PL_POLARITY_NONE, 0},
        {"ultrasonic-amplitude", PL_POLARITY_FALLS, 0},
        {"time-of-flight", PL_POLARITY_FALLS, 1},
        {"ultrasonic-thickness", PL_POLARITY_FALLS, 1},
        {"eddy-current-real", PL_POLARITY_NONE, 0},
        {"eddy-current-imag", PL_POLARITY_NONE, 0},
        {"eddy-current-magnitude", PL_POLARITY_NONE, 0},
        {"eddy-current-phase", PL_POLARITY_NONE, 0},
    };
    size_t n = sizeof want / sizeof want[0], listed = 0;
    for (size_t i = 0; i < pl_quantity_count(); i++) {
        const char *q = pl_quantity_at(i)->name;
        size_t k = 0;
        while (k < n && strcmp(want[k].q, q) != 0)
            k++;
        if (k == n)
            fail_msg("quantity %s has no polarity decided in this test", q);
        listed++;
        if (pl_quantity_polarity(q) != want[k].p || pl_quantity_uses_nominal(q) != want[k].nominal)
            fail_msg("%s: polarity %d nominal %d", q, pl_quantity_polarity(q),
                     pl_quantity_uses_nominal(q));
    }
    assert_int_equal(listed, n);
    assert_int_equal(pl_quantity_polarity("temperature-rise-free"), PL_POLARITY_NONE);
    assert_int_equal(pl_quantity_polarity(NULL), PL_POLARITY_NONE);
    assert_int_equal(pl_quantity_uses_nominal("no-such-quantity"), 0);
}

/* ---- labelling ------------------------------------------------------------------ */

/* A U that the first pass meets as two labels, and a staircase joined
 * only diagonally: one component each, numbered by their first pixel. */
static void test_detect__labels_merge_and_number_in_raster_order(void **state)
{
    (void)state;
    static const char *img[] = {
        "#..#.....#",
        "#..#....#.",
        "####...#..",
        "......#...",
        "..#.......",
    };
    uint32_t w = 10, h = 5, labels[50], n;
    uint8_t mask[50];
    for (uint32_t y = 0; y < h; y++)
        for (uint32_t x = 0; x < w; x++)
            mask[y * w + x] = img[y][x] == '#';
    assert_int_equal(pl_detect__label(labels, &n, mask, w, h), PL_OK);
    assert_int_equal(n, 3);
    assert_int_equal(labels[0], 1);   /* the U's first pixel */
    assert_int_equal(labels[3], 1);   /* its right arm */
    assert_int_equal(labels[9], 2);   /* the staircase, first met at the top right */
    assert_int_equal(labels[36], 2);  /* its foot, diagonal steps only */
    assert_int_equal(labels[42], 3);
    assert_int_equal(labels[1], 0);
}

/* Random masks against scipy.ndimage.label with the 8-connected
 * structure np.ones((3, 3)) (Debian python3-scipy, run by the test): the
 * same number of components and the same partition, for densities from
 * sparse through the percolation threshold of site percolation on the
 * square lattice with 8 neighbours (about 0.407) and of 4 neighbours
 * (about 0.593; both from memory) to dense, and sizes up to 2048 x 2048. */
static void test_detect__labels_equal_scipy(void **state)
{
    (void)state;
    static const struct {
        uint32_t w, h;
        double density;
    } cases[] = {
        {1, 1, 1.0},     {1, 37, 0.5},    {41, 1, 0.5},    {7, 5, 0.9},
        {64, 48, 0.1},   {257, 131, 0.3}, {300, 200, 0.41}, {300, 200, 0.5},
        {511, 513, 0.59}, {1024, 1024, 0.45}, {2048, 2048, 0.41}, {2048, 2048, 0.59},
        {640, 512, 0.75},
    };
    char *dir = tu_tmpdir(), *list = tu_path(dir, "cases.txt");
    FILE *f = fopen(list, "w");
    assert_non_null(f);
    rng = 11;
    for (size_t c = 0; c < sizeof cases / sizeof cases[0]; c++) {
        uint32_t w = cases[c].w, h = cases[c].h, n;
        size_t np = (size_t)w * h;
        uint8_t *mask = malloc(np);
        uint32_t *labels = malloc(np * sizeof *labels);
        assert_true(mask && labels);
        for (size_t i = 0; i < np; i++)
            mask[i] = uniform() < cases[c].density;
        assert_int_equal(pl_detect__label(labels, &n, mask, w, h), PL_OK);
        uint32_t mx = 0;
        for (size_t i = 0; i < np; i++)
            mx = labels[i] > mx ? labels[i] : mx;
        assert_int_equal(mx, n);
        char name[32], file[64];
        snprintf(name, sizeof name, "case%02zu", c);
        snprintf(file, sizeof file, "%s.mask", name);
        char *p = tu_path(dir, file);
        assert_int_equal(tu_write_file(p, mask, np), 0);
        free(p);
        snprintf(file, sizeof file, "%s.labels", name);
        p = tu_path(dir, file);
        write_le_u32(p, labels, np);
        free(p);
        fprintf(f, "%s %u %u\n", name, w, h);
        free(mask);
        free(labels);
    }
    fclose(f);
    assert_int_equal(tu_python("detect_ref.py", "label", dir, NULL), 0);
    free(list);
    tu_rmtree(dir);
}

/* ---- measures ---------------------------------------------------------------------- */

/* Whether region l's second central moments along the rows and the
 * columns are equal (summed exactly in integers). */
static int equal_moments(const uint32_t *labels, uint32_t w, uint32_t h, uint32_t l)
{
    long long n = 0, sc = 0, sr = 0, scc = 0, srr = 0;
    for (uint32_t y = 0; y < h; y++)
        for (uint32_t x = 0; x < w; x++)
            if (labels[y * w + x] == l) {
                n++;
                sc += x;
                sr += y;
                scc += (long long)x * x;
                srr += (long long)y * y;
            }
    return n * scc - sc * sc == n * srr - sr * sr;
}

/*
 * Regions of every shape (the components of a random mask at density 0.35,
 * holes and all) and a random signal, measured by pl_detect_measure()
 * against scipy.ndimage.sum, center_of_mass and maximum and
 * skimage.measure.regionprops (area, centroid, orientation, major and
 * minor axis length, perimeter, bbox) on the same labels (Debian
 * python3-scipy and python3-skimage, run by the test). Tolerances: counts,
 * bounding boxes and maxima exact; sums 1e-9 relative (both add float32
 * values in double, in another order); centroids and axis lengths 1e-9 px;
 * perimeter 1e-9; orientation 1e-7 degrees where it is defined (skimage's
 * angle is from the rows toward the columns, ours from the columns toward
 * the rows: 90 degrees minus it, wrapped into (-90, 90]).
 */
static void test_detect__measures_equal_scipy_and_skimage(void **state)
{
    (void)state;
    uint32_t w = 300, h = 200, n;
    size_t np = (size_t)w * h;
    uint8_t *mask = malloc(np);
    uint32_t *labels = malloc(np * sizeof *labels);
    assert_true(mask && labels);
    rng = 5;
    for (size_t i = 0; i < np; i++)
        mask[i] = uniform() < 0.35;
    assert_int_equal(pl_detect__label(labels, &n, mask, w, h), PL_OK);
    assert_true(n > 500);
    pl_map *m = new_map(w, h, "test-signal", "1");
    pl_map_set_pitch(m, 0.5, 0.5, NULL);
    float *v = pl_map_channel(m, 0);
    for (size_t i = 0; i < np; i++)
        v[i] = (float)(gauss() * 3.0 + 1.0);
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    o.polarity = PL_POLARITY_RISES;
    o.background = PL_BACKGROUND_ZERO;
    o.noise = 1.0;
    o.despeckle = 0;
    pl_err err = {0};
    pl_detection *det;
    TU_OK(pl_detect_measure(&det, m, 0, labels, &o, &err));
    assert_int_equal(det->count, n);
    char *dir = tu_tmpdir(), *lp = tu_path(dir, "labels.u4"), *sp = tu_path(dir, "signal.f4"),
         *op = tu_path(dir, "ref.f8");
    write_le_u32(lp, labels, np);
    tu_write_f4(sp, v, np);
    char ws[16], hs[16], ns[16];
    snprintf(ws, sizeof ws, "%u", w);
    snprintf(hs, sizeof hs, "%u", h);
    snprintf(ns, sizeof ns, "%u", n);
    assert_int_equal(tu_python("detect_ref.py", "measure", lp, sp, ws, hs, ns, op, NULL), 0);
    size_t nref;
    double *ref = tu_read_f8(op, &nref);
    assert_int_equal(nref, 16 * (size_t)n);
    size_t oriented = 0;
    for (uint32_t k = 0; k < n; k++) {
        const double *r = ref + 16 * (size_t)k;
        const pl_indication *ind = &det->indications[k];
        uint64_t px = ind->size[PL_SIZING_THRESHOLD].pixels;
        /* scipy.ndimage.sum of the signal: the mean contrast times the area */
        tu_assert_close(ind->mean_contrast * (double)px, r[0], 1e-9 * (fabs(r[0]) + 1), "sum");
        assert_true((double)px == r[1] && (double)px == r[5]);
        tu_assert_close(ind->size[PL_SIZING_THRESHOLD].area_mm2, 0.25 * r[1], 1e-12, "area");
        /* scipy.ndimage.center_of_mass of ones and regionprops' centroid */
        tu_assert_close(ind->centroid_row, r[2], 1e-9, "centre of mass row");
        tu_assert_close(ind->centroid_col, r[3], 1e-9, "centre of mass col");
        tu_assert_close(ind->centroid_row, r[6], 1e-9, "centroid row");
        tu_assert_close(ind->centroid_col, r[7], 1e-9, "centroid col");
        /* scipy.ndimage.maximum of the signal: the peak, exactly */
        assert_true(ind->peak_contrast == r[4]);
        tu_assert_close(ind->major_axis_px, r[9], 1e-9, "major axis");
        tu_assert_close(ind->minor_axis_px, r[10], 1e-9, "minor axis");
        tu_assert_close(ind->major_axis_mm, 0.5 * r[9], 1e-9, "major axis mm");
        tu_assert_close(ind->perimeter_px, r[11], 1e-9, "perimeter");
        tu_assert_close(ind->perimeter_mm, 0.5 * r[11], 1e-9, "perimeter mm");
        assert_true(ind->bbox_row0 == r[12] && ind->bbox_col0 == r[13] &&
                    ind->bbox_row1 + 1.0 == r[14] && ind->bbox_col1 + 1.0 == r[15]);
        if (ind->major_axis_px - ind->minor_axis_px > 1e-6) {
            double want = 90.0 - r[8] * 180.0 / M_PI;
            while (want > 90.0)
                want -= 180.0;
            while (want <= -90.0)
                want += 180.0;
            double d = fabs(ind->orientation_deg - want);
            if (d > 90)
                d = 180 - d;
            /* skimage 0.19 returns -pi/4 for equal second moments along
             * the axes and a positive row-column moment, where its own
             * formula 0.5 atan2(2 mu11, mu20 - mu02) gives +pi/4 (the major
             * axis along +col +row): ours follows the formula there */
            if (d > 1e-7 && fabs(fabs(r[8]) - M_PI / 4) < 1e-12 && fabs(d - 90) < 1e-7)
                d = equal_moments(labels, w, h, k + 1) ? 0 : d;
            if (d > 1e-7)
                fail_msg("label %u: orientation %.9f, skimage gives %.9f", k + 1,
                         ind->orientation_deg, want);
            oriented++;
        }
    }
    assert_true(oriented > n / 2);
    free(ref);
    free(lp);
    free(sp);
    free(op);
    tu_rmtree(dir);
    pl_detection_free(det);
    pl_map_free(m);
    free(mask);
    free(labels);
}

/* Unequal pitches: the axes in mm come from the positions in mm, not from
 * the pixel axes times a pitch (an analytic case: a filled rectangle of a
 * x b pixels has covariance diag((a^2 - 1) / 12, (b^2 - 1) / 12) pixels^2,
 * common practice). */
static void test_detect__axes_in_mm_honour_both_pitches(void **state)
{
    (void)state;
    uint32_t w = 40, h = 30, labels[1200] = {0};
    for (uint32_t y = 5; y < 9; y++)       /* 4 rows */
        for (uint32_t x = 10; x < 30; x++) /* 20 columns */
            labels[y * w + x] = 1;
    pl_map *m = new_map(w, h, "test-signal", "1");
    pl_map_set_pitch(m, 0.5, 2.0, NULL);
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    o.polarity = PL_POLARITY_RISES;
    o.background = PL_BACKGROUND_ZERO;
    o.noise = 1;
    pl_err err = {0};
    pl_detection *det;
    TU_OK(pl_detect_measure(&det, m, 0, labels, &o, &err));
    const pl_indication *ind = &det->indications[0];
    double vc = (20.0 * 20.0 - 1) / 12 * 0.25, vr = (4.0 * 4.0 - 1) / 12 * 4.0;
    tu_assert_close(ind->major_axis_px, 4 * sqrt((400.0 - 1) / 12), 1e-9, "major px");
    tu_assert_close(ind->major_axis_mm, 4 * sqrt(fmax(vc, vr)), 1e-9, "major mm");
    tu_assert_close(ind->minor_axis_mm, 4 * sqrt(fmin(vc, vr)), 1e-9, "minor mm");
    tu_assert_close(ind->orientation_deg, vr > vc ? 90.0 : 0.0, 1e-9, "orientation");
    tu_assert_close(ind->size[0].area_mm2, 80.0, 1e-12, "area");
    tu_assert_close(ind->size[0].equivalent_diameter_mm, sqrt(4 * 80.0 / M_PI), 1e-12, "diameter");
    tu_assert_close(ind->centroid_col, 19.5, 1e-12, "col");
    tu_assert_close(ind->centroid_row, 6.5, 1e-12, "row");
    pl_detection_free(det);
    pl_map_free(m);
}

/* ---- outlines ------------------------------------------------------------------------ */

/* The outer boundary as a set: region pixels with a 4-neighbour in the
 * background that is 4-connected to the outside of the map (holes are
 * not outside). */
static uint8_t *outer_boundary(const uint32_t *labels, uint32_t w, uint32_t h, uint32_t l)
{
    uint32_t W = w + 2, H = h + 2;
    uint8_t *out = calloc((size_t)W * H, 1), *b = calloc((size_t)w * h, 1);
    uint32_t *stack = malloc((size_t)W * H * sizeof *stack);
    assert_true(out && b && stack);
#define IN(x, y) ((x) >= 1 && (y) >= 1 && (x) <= w && (y) <= h && labels[((y) - 1) * w + (x) - 1] == l)
    size_t top = 0;
    out[0] = 1;
    stack[top++] = 0;
    while (top) {
        uint32_t i = stack[--top], x = i % W, y = i / W;
        const int dx[4] = {1, -1, 0, 0}, dy[4] = {0, 0, 1, -1};
        for (int d = 0; d < 4; d++) {
            long xx = (long)x + dx[d], yy = (long)y + dy[d];
            if (xx < 0 || yy < 0 || xx >= (long)W || yy >= (long)H)
                continue;
            uint32_t j = (uint32_t)(yy * W + xx);
            if (!out[j] && !IN((uint32_t)xx, (uint32_t)yy)) {
                out[j] = 1;
                stack[top++] = j;
            }
        }
    }
    for (uint32_t y = 1; y <= h; y++)
        for (uint32_t x = 1; x <= w; x++)
            if (IN(x, y) && (out[y * W + x - 1] || out[y * W + x + 1] || out[(y - 1) * W + x] ||
                             out[(y + 1) * W + x]))
                b[(y - 1) * w + x - 1] = 1;
#undef IN
    free(out);
    free(stack);
    return b;
}

static void test_detect__outline_examples(void **state)
{
    (void)state;
    uint32_t labels[16] = {0};
    char *s;
    /* a 2 x 2 square at (1, 1): down, right, up, left, counter-clockwise */
    labels[5] = labels[6] = labels[9] = labels[10] = 1;
    assert_int_equal(pl_detect__outline(&s, labels, 4, 4, 1, 1, 1), PL_OK);
    assert_string_equal(s, "1,1:6024");
    free(s);
    /* one pixel: no steps; a horizontal pair: there and back */
    memset(labels, 0, sizeof labels);
    labels[0] = 1;
    labels[14] = labels[15] = 2;
    assert_int_equal(pl_detect__outline(&s, labels, 4, 4, 1, 0, 0), PL_OK);
    assert_string_equal(s, "0,0:");
    free(s);
    assert_int_equal(pl_detect__outline(&s, labels, 4, 4, 2, 2, 3), PL_OK);
    assert_string_equal(s, "2,3:04");
    free(s);
    uint32_t *pts;
    size_t n;
    pl_err err = {0};
    TU_OK(pl_detect_outline_decode(&pts, &n, "1,1:6024", &err));
    assert_int_equal(n, 4);
    uint32_t want[8] = {1, 1, 1, 2, 2, 2, 2, 1};
    assert_memory_equal(pts, want, sizeof want);
    free(pts);
    TU_OK(pl_detect_outline_decode(&pts, &n, "7,9:", &err));
    assert_int_equal(n, 1);
    assert_true(pts[0] == 7 && pts[1] == 9);
    free(pts);
}

static void test_detect__outline_decode_refuses_bad_text(void **state)
{
    (void)state;
    static const char *bad[] = {"", "1,2", ",2:00", "1,:", "1;2:04", "1,2:08", "1,2:0",
                                "0,0:4", "4294967296,0:", "1,2:04x"};
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        uint32_t *pts = (uint32_t *)&pts;
        size_t n = 99;
        pl_err err = {0};
        if (pl_detect_outline_decode(&pts, &n, bad[i], &err) != PL_EFORMAT)
            fail_msg("'%s' accepted", bad[i]);
        assert_null(pts);
        assert_int_equal(n, 0);
        tu_assert_msg_has(err.msg, "outline");
    }
}

/* The components of random masks of several densities (shapes with
 * holes, spurs, one-pixel bridges and diagonal joints): each outline
 * decodes to a closed walk of 8-neighbour steps that starts on the first
 * pixel, stays on the region, and visits exactly its outer boundary. */
static void test_detect__outline_decodes_to_the_outer_boundary(void **state)
{
    (void)state;
    uint32_t w = 120, h = 90;
    size_t np = (size_t)w * h;
    uint8_t *mask = malloc(np);
    uint32_t *labels = malloc(np * sizeof *labels);
    assert_true(mask && labels);
    size_t checked = 0;
    for (int round = 0; round < 4; round++) {
        rng = 100 + (uint64_t)round;
        double density = 0.25 + 0.065 * round;
        for (size_t i = 0; i < np; i++)
            mask[i] = uniform() < density;
        uint32_t n;
        assert_int_equal(pl_detect__label(labels, &n, mask, w, h), PL_OK);
        pl_detect__sums *sums = malloc(n * sizeof *sums);
        assert_non_null(sums);
        pl_detect__accumulate(sums, n, labels, NULL, w, h);
        for (uint32_t l = 1; l <= n; l++) {
            char *s;
            assert_int_equal(pl_detect__outline(&s, labels, w, h, l, sums[l - 1].ref_col,
                                                sums[l - 1].ref_row),
                             PL_OK);
            uint32_t *pts;
            size_t npts;
            pl_err err = {0};
            TU_OK(pl_detect_outline_decode(&pts, &npts, s, &err));
            uint8_t *want = outer_boundary(labels, w, h, l), *seen = calloc(np, 1);
            assert_non_null(seen);
            assert_true(pts[0] == sums[l - 1].ref_col && pts[1] == sums[l - 1].ref_row);
            for (size_t i = 0; i < npts; i++) {
                uint32_t x = pts[2 * i], y = pts[2 * i + 1];
                assert_true(x < w && y < h);
                if (labels[(size_t)y * w + x] != l)
                    fail_msg("region %u: outline %s leaves the region at (%u, %u)", l, s, x, y);
                seen[(size_t)y * w + x] = 1;
            }
            for (size_t i = 0; i < np; i++)
                if (seen[i] != want[i])
                    fail_msg("region %u (%lu px): outline %s %s (%lu, %lu), a boundary pixel",
                             l, (unsigned long)sums[l - 1].n, s,
                             seen[i] ? "visits" : "misses", (unsigned long)(i % w),
                             (unsigned long)(i / w));
            free(seen);
            free(want);
            free(pts);
            free(s);
            checked++;
        }
        free(sums);
    }
    assert_true(checked > 500);
    free(mask);
    free(labels);
}

/* ---- the half-maximum lobe --------------------------------------------------------------- */

/* Two touching plateaus of 40 and 10 over noise-free zero: one region at a
 * low threshold; the half-maximum rule keeps the peak's lobe only. */
static void test_detect__half_maximum_is_the_peak_lobe(void **state)
{
    (void)state;
    pl_map *m = new_map(60, 40, "temperature-contrast", "K");
    float *v = pl_map_channel(m, 0);
    for (uint32_t y = 10; y < 20; y++)
        for (uint32_t x = 10; x < 40; x++)
            v[y * 60 + x] = x < 20 ? 40.0f : 10.0f;
    v[15 * 60 + 12] = 41.0f; /* the peak */
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    o.noise = 1.0;
    o.background = PL_BACKGROUND_ZERO;
    o.despeckle = 0;
    o.high = 8;
    o.low = 3;
    pl_err err = {0};
    pl_detection *det;
    TU_OK(pl_detect(&det, m, 0, &o, &err));
    assert_int_equal(det->count, 1);
    const pl_indication *ind = &det->indications[0];
    assert_int_equal(ind->size[PL_SIZING_THRESHOLD].pixels, 300);
    assert_int_equal(ind->size[PL_SIZING_HALF_MAX].pixels, 100);
    assert_true(ind->peak_col == 12 && ind->peak_row == 15);
    tu_assert_close(ind->peak_contrast, 41.0, 0, "peak");
    tu_assert_close(ind->peak_snr, 41.0, 0, "peak in noise multiples");
    tu_assert_close(ind->mean_contrast, (100 * 40.0 + 1 + 200 * 10.0) / 300, 1e-9, "mean");
    assert_string_equal(pl_sizing_name(PL_SIZING_THRESHOLD), "threshold");
    assert_string_equal(pl_sizing_name(PL_SIZING_HALF_MAX), "half-maximum");
    pl_detection_free(det);
    pl_map_free(m);
}

/* ---- noise ---------------------------------------------------------------------------------- */

/* White Gaussian noise of 0.37 over a smooth tilt and shading: the
 * high-pass estimate is the standard deviation (the mask's gain, 6, is
 * exact for white noise; the MAD's sampling error over 60000 residuals is about 0.7 %,
 * Rousseeuw and Croux 1993, "Alternatives to the median absolute
 * deviation", JASA 88), indications and pixels without data
 * notwithstanding; the region estimate agrees. */
static void test_detect__noise_is_the_standard_deviation(void **state)
{
    (void)state;
    uint32_t w = 256, h = 256;
    pl_map *m = new_map(w, h, "temperature-contrast", "K");
    float *v = pl_map_channel(m, 0);
    rng = 3;
    for (uint32_t y = 0; y < h; y++)
        for (uint32_t x = 0; x < w; x++)
            v[y * w + x] = (float)(0.002 * x + 0.5 * sin(x / 40.0) * cos(y / 55.0) + 0.37 * gauss());
    add_disk(m, 60, 60, 10, 20.0);
    for (int i = 0; i < 300; i++)
        v[next_u32() % (w * h)] = NAN;
    double sigma;
    pl_noise_method method;
    pl_err err = {0};
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    TU_OK(pl_detect_noise(&sigma, &method, m, 0, &o, &err));
    assert_int_equal(method, PL_NOISE_HIGH_PASS);
    tu_assert_close(sigma, 0.37, 0.03 * 0.37, "high-pass noise");
    o.noise_x = 150;
    o.noise_y = 150;
    o.noise_w = 100;
    o.noise_h = 100;
    TU_OK(pl_detect_noise(&sigma, &method, m, 0, &o, &err));
    assert_int_equal(method, PL_NOISE_REGION);
    /* the region's signal is value - background, and the background's
     * medians hold the pixel itself: a few per cent less */
    tu_assert_close(sigma, 0.37, 0.07 * 0.37, "region noise");
    o.noise = 2.5;
    TU_OK(pl_detect_noise(&sigma, &method, m, 0, &o, &err));
    assert_int_equal(method, PL_NOISE_GIVEN);
    assert_true(sigma == 2.5);
    /* too few pixels with data */
    pl_map *s = new_map(9, 9, "temperature-contrast", "K");
    o = (pl_detect_options)PL_DETECT_OPTIONS_INIT;
    add_noise(s, 1.0);
    assert_int_equal(pl_detect_noise(&sigma, &method, s, 0, &o, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "too few");
    /* a map without noise */
    pl_map *big = new_map(40, 40, "temperature-contrast", "K");
    assert_int_equal(pl_detect_noise(&sigma, &method, big, 0, &o, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "noise estimate is 0");
    pl_map_free(big);
    pl_map_free(s);
    pl_map_free(m);
}

/* ---- detection on synthetic maps ---------------------------------------------------------- */

/* Flat disks of 12 sigma over noise, a horizontal strip of 30 sigma (a
 * flange seen with the defects' sign) and slow shading of 40 sigma: every
 * disk found once, sized to its pixels (threshold) and located to a
 * fraction of a pixel, the strip and the shading not called. */
static void test_detect__finds_disks_not_the_strip_or_shading(void **state)
{
    (void)state;
    uint32_t w = 160, h = 120;
    pl_map *m = new_map(w, h, "temperature-contrast", "K");
    m->placement.origin[0] = 1000;
    m->placement.origin[1] = -20;
    m->placement.origin[2] = 300;
    m->placement.u[0] = 1;
    m->placement.u[1] = 0;
    m->placement.v[0] = 0;
    m->placement.v[1] = 0;
    m->placement.v[2] = -1;
    float *v = pl_map_channel(m, 0);
    for (uint32_t y = 0; y < h; y++)
        for (uint32_t x = 0; x < w; x++)
            v[y * w + x] = (float)(40.0 * cos(M_PI * x / w) * sin(M_PI * y / h) +
                                   (y >= 90 && y < 104 ? 30.0 : 0.0));
    static const double disk[3][3] = {{30, 30, 6}, {100, 45, 4}, {120, 97, 5}};
    for (int d = 0; d < 3; d++)
        add_disk(m, disk[d][0], disk[d][1], disk[d][2], 12.0);
    rng = 17;
    add_noise(m, 1.0);
    pl_err err = {0};
    pl_detection *det;
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    o.high = 6;
    TU_OK(pl_detect(&det, m, 0, &o, &err));
    assert_int_equal(det->polarity, PL_POLARITY_RISES);
    assert_int_equal(det->background, PL_BACKGROUND_LINE_MEDIAN);
    tu_assert_close(det->noise, 1.0, 0.05, "noise");
    if (det->count != 3)
        fail_msg("%lu indications, 3 disks", (unsigned long)det->count);
    for (int d = 0; d < 3; d++) {
        const pl_indication *ind = &det->indications[d];
        tu_assert_close(ind->centroid_col, disk[d][0], 0.3, "centroid col");
        tu_assert_close(ind->centroid_row, disk[d][1], 0.3, "centroid row");
        double px = (double)disk_pixels(w, h, disk[d][0], disk[d][1], disk[d][2]);
        tu_assert_close((double)ind->size[PL_SIZING_THRESHOLD].pixels, px, 0.1 * px, "area");
        tu_assert_close(ind->size[PL_SIZING_HALF_MAX].area_mm2, px, 0.2 * px, "half max");
        /* the background sits about 1 sigma high on this steep shading */
        tu_assert_close(ind->mean_contrast, 12.0, 2.0, "mean contrast");
        /* P = origin + col u + row v (map.h) */
        tu_assert_close(ind->centroid_part[0], 1000 + ind->centroid_col, 1e-9, "part x");
        tu_assert_close(ind->centroid_part[2], 300 - ind->centroid_row, 1e-9, "part z");
        assert_non_null(ind->outline);
        assert_true(det->labels[(uint32_t)disk[d][1] * w + (uint32_t)disk[d][0]] == ind->label);
    }
    pl_detection_free(det);
    /* the same map without the disks: nothing */
    memset(v, 0, (size_t)w * h * sizeof *v);
    for (uint32_t y = 0; y < h; y++)
        for (uint32_t x = 0; x < w; x++)
            v[y * w + x] = (float)(40.0 * cos(M_PI * x / w) * sin(M_PI * y / h) +
                                   (y >= 90 && y < 104 ? 30.0 : 0.0));
    add_noise(m, 1.0);
    TU_OK(pl_detect(&det, m, 0, &o, &err));
    assert_int_equal(det->count, 0);
    pl_detection_free(det);
    /* a global median background calls the shading and the strip */
    o.background = PL_BACKGROUND_MEDIAN;
    TU_OK(pl_detect(&det, m, 0, &o, &err));
    assert_true(det->count > 0);
    pl_detection_free(det);
    pl_map_free(m);
}

/* A quantity that falls over a defect (phase contrast): the dip is the
 * indication, its contrast negative; a bump of the same size is not. */
static void test_detect__falling_quantity(void **state)
{
    (void)state;
    pl_map *m = new_map(100, 80, "phase-contrast", "rad");
    add_disk(m, 30, 40, 6, -0.2);
    add_disk(m, 70, 40, 6, +0.2);
    rng = 23;
    add_noise(m, 0.01);
    pl_err err = {0};
    pl_detection *det;
    TU_OK(pl_detect(&det, m, 0, NULL, &err));
    assert_int_equal(det->polarity, PL_POLARITY_FALLS);
    assert_int_equal(det->count, 1);
    tu_assert_close(det->indications[0].centroid_col, 30, 0.3, "col");
    assert_true(det->indications[0].peak_contrast < -0.2);
    assert_true(det->indications[0].mean_contrast < -0.17);
    assert_true(det->indications[0].peak_snr > 15);
    assert_true(det->signal[40 * 100 + 30] > 0); /* polarity x (value - background) */
    pl_detection_free(det);
    /* stated the other way, the bump is found instead */
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    o.polarity = PL_POLARITY_RISES;
    TU_OK(pl_detect(&det, m, 0, &o, &err));
    assert_int_equal(det->count, 1);
    assert_int_equal(det->polarity_stated, 1);
    tu_assert_close(det->indications[0].centroid_col, 70, 0.3, "col");
    pl_detection_free(det);
    pl_map_free(m);
}

/*
 * A reinspection whose disbond grew wider than 3/8 of the background
 * window (constructed: a disk of radius 6 px in the reference and 16 px in
 * the current, both -0.1 rad of phase contrast at 1 mm pitch, noise 0.005
 * rad, the current's whole level 0.02 rad higher). Alone, the current
 * map's 40 mm line-median background takes the disk in and it is
 * undersized; with the reference's level (plus the median offset) every
 * disk pixel is found, to 3 %. Phase quantities take the reference's
 * level, the others their own; a reference of another size or quantity is
 * refused.
 */
static void test_detect__reinspection_takes_the_reference_level(void **state)
{
    (void)state;
    pl_map *ref = new_map(128, 96, "phase-contrast", "rad");
    pl_map *cur = new_map(128, 96, "phase-contrast", "rad");
    add_disk(ref, 60, 48, 6, -0.1);
    add_disk(cur, 60, 48, 16, -0.1);
    float *v = pl_map_channel(cur, 0);
    for (size_t i = 0; i < (size_t)cur->width * cur->height; i++)
        v[i] += 0.02f;
    rng = 71;
    add_noise(ref, 0.005);
    add_noise(cur, 0.005);
    pl_err err = {0};
    pl_detection *dr, *own, *with;
    TU_OK(pl_detect(&dr, ref, 0, NULL, &err));
    TU_OK(pl_detect(&own, cur, 0, NULL, &err));
    TU_OK(pl_detect_on_reference(&with, cur, 0, dr, NULL, &err));
    double truth = (double)disk_pixels(128, 96, 60, 48, 16);
    assert_int_equal(own->count, 1);
    assert_int_equal(with->count, 1);
    printf("# disk of %.0f px: own level %lu px, with the reference's %lu px\n", truth,
           (unsigned long)own->indications[0].size[PL_SIZING_THRESHOLD].pixels,
           (unsigned long)with->indications[0].size[PL_SIZING_THRESHOLD].pixels);
    assert_true(own->indications[0].size[PL_SIZING_THRESHOLD].pixels < 0.8 * truth);
    tu_assert_close((double)with->indications[0].size[PL_SIZING_THRESHOLD].pixels, truth,
                    0.03 * truth, "pixels with the reference's level");
    tu_assert_close(with->indications[0].peak_contrast, -0.1, 0.03, "peak contrast");
    assert_int_equal(with->reference_level, 1);
    assert_int_equal(own->reference_level, 0);
    assert_int_equal(pl_detect_reference_level("phase-contrast"), 1);
    assert_int_equal(pl_detect_reference_level("phase"), 1);
    assert_int_equal(pl_detect_reference_level("temperature-contrast"), 0);
    assert_int_equal(pl_detect_reference_level("ultrasonic-amplitude"), 0);
    assert_int_equal(pl_detect_reference_level(NULL), 0);
    pl_detection_free(with);
    /* a reference of another size, or of another quantity */
    pl_map *small = new_map(64, 96, "phase-contrast", "rad");
    add_noise(small, 0.005);
    pl_detection *bad = NULL;
    assert_int_equal(pl_detect_on_reference(&bad, small, 0, dr, NULL, &err), PL_EINVAL);
    assert_non_null(strstr(err.msg, "reference's grid"));
    assert_null(bad);
    pl_map *other = new_map(128, 96, "temperature-contrast", "K");
    add_noise(other, 0.005);
    assert_int_equal(pl_detect_on_reference(&bad, other, 0, dr, NULL, &err), PL_EINVAL);
    assert_non_null(strstr(err.msg, "not of the reference detection's quantity"));
    assert_null(bad);
    pl_map_free(small);
    pl_map_free(other);
    pl_detection_free(dr);
    pl_detection_free(own);
    pl_map_free(ref);
    pl_map_free(cur);
}

/*
 * A thick site's depth map: no data on most sound pixels (the back wall
 * beyond the sequence), scattered noise depths of 77-85 % of nominal, a
 * patch of them, and a delamination at 1.4 mm; depth is compared with the
 * nominal 5.6 mm, so only the delamination is an indication, and its depth
 * is the median inside. Without the nominal the channel is refused.
 */
static void test_detect__depth_is_compared_with_nominal(void **state)
{
    (void)state;
    uint32_t w = 96, h = 72;
    pl_map *m = new_map(w, h, "depth", "mm");
    float *v = pl_map_channel(m, 0);
    rng = 29;
    for (size_t i = 0; i < (size_t)w * h; i++)
        v[i] = uniform() < 0.2 ? (float)(5.6 * (0.77 + 0.08 * uniform())) : NAN;
    for (uint32_t y = 50; y < 58; y++) /* a patch of noise depths */
        for (uint32_t x = 70; x < 80; x++)
            v[y * w + x] = (float)(5.6 * (0.77 + 0.07 * uniform()));
    for (uint32_t y = 20; y < 35; y++)
        for (uint32_t x = 30; x < 48; x++)
            v[y * w + x] = (float)(1.4 + 0.05 * gauss());
    pl_err err = {0};
    pl_detection *det;
    assert_int_equal(pl_detect(&det, m, 0, NULL, &err), PL_EINVAL);
    assert_null(det);
    tu_assert_msg_has(err.msg, "nominal");
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    o.nominal = 5.6;
    o.depth_channel = 0;
    TU_OK(pl_detect(&det, m, 0, &o, &err));
    assert_int_equal(det->background, PL_BACKGROUND_NOMINAL);
    assert_int_equal(det->count, 1);
    tu_assert_close(det->low_threshold, 0.25 * 5.6, 1e-6, "margin");
    const pl_indication *ind = &det->indications[0];
    /* the delamination, and a few of the noise depths beside it that the
     * despeckle (a pixel above all its neighbours with data) brought down
     * to their neighbours' median */
    assert_true(ind->size[0].pixels >= 15 * 18 && ind->size[0].pixels <= 15 * 18 + 12);
    tu_assert_close(ind->depth_mm, 1.4, 0.02, "median depth");
    assert_int_equal(ind->depth_pixels, ind->size[0].pixels);
    tu_assert_close(ind->peak_contrast, -4.2, 0.3, "peak: depth - nominal");
    pl_detection_free(det);
    /* a map with data nowhere but in the defect: still found, by the margin */
    for (size_t i = 0; i < (size_t)w * h; i++)
        if (!(v[i] < 2))
            v[i] = NAN;
    o.nominal_margin = 0.25;
    TU_OK(pl_detect(&det, m, 0, &o, &err));
    assert_int_equal(det->count, 1);
    pl_detection_free(det);
    pl_map_free(m);
}

/* ---- refusals ----------------------------------------------------------------------------------- */

static void expect_refused(const pl_map *m, const pl_detect_options *o, const char *part)
{
    pl_err err = {0};
    pl_detection *det = (pl_detection *)&det;
    if (pl_detect(&det, m, 0, o, &err) != PL_EINVAL)
        fail_msg("accepted; expected a refusal naming '%s'", part);
    assert_null(det);
    tu_assert_msg_has(err.msg, part);
}

static void test_detect__refusals_name_the_fault(void **state)
{
    (void)state;
    pl_map *m = new_map(64, 48, "amplitude", "K");
    rng = 31;
    add_noise(m, 1.0);
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    expect_refused(m, &o, "state the polarity");
    o.polarity = PL_POLARITY_RISES;
    pl_err err = {0};
    pl_detection *det;
    TU_OK(pl_detect(&det, m, 0, &o, &err));
    pl_detection_free(det);
    assert_int_equal(pl_detect(&det, m, 1, &o, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "channel 1 does not exist");
    pl_detect_options b;
    char *js;
#define REFUSE(stmt, part)                                                  \
    do {                                                                    \
        b = o;                                                              \
        stmt;                                                               \
        expect_refused(m, &b, part);                                        \
        assert_int_equal(pl_detect_options_check(&b, &err), PL_EINVAL);     \
        assert_int_equal(pl_detect_options_json(&js, &b, &err), PL_EINVAL); \
        assert_null(js);                                                    \
    } while (0)
    REFUSE(b.version = 2, "version");
    REFUSE(b.high = -1, "high");
    REFUSE(b.high = INFINITY, "high");
    REFUSE(b.low = 9, "low");
    REFUSE(b.low = 0, "low");
    REFUSE(b.min_area_mm2 = -1, "min_area_mm2");
    REFUSE(b.polarity = 2, "polarity");
    REFUSE(b.nominal = INFINITY, "nominal");
    REFUSE(b.nominal_margin = 1, "nominal_margin");
    REFUSE(b.background = (pl_background)7, "background");
    REFUSE(b.background = PL_BACKGROUND_NOMINAL, "no nominal");
    REFUSE(b.background_mm = 0, "background_mm");
    REFUSE(b.noise = -1, "noise");
    REFUSE(b.despeckle = 2, "despeckle");
    REFUSE(b.depth_channel = -2, "depth_channel");
#undef REFUSE
    b = o;
    b.noise_x = 60;
    b.noise_w = 10;
    b.noise_h = 10;
    expect_refused(m, &b, "outside the map");
    b.noise_x = 0;
    b.noise_w = 5;
    b.noise_h = 5;
    expect_refused(m, &b, "noise region holds 25");
    b = o;
    b.depth_channel = 3;
    expect_refused(m, &b, "depth channel 3");
    b.depth_channel = 0;
    expect_refused(m, &b, "not mm");
    /* the pitch: needed by the minimum area and the line-median background */
    m->pitch_u = NAN;
    expect_refused(m, &o, "pitch");
    b = o;
    b.min_area_mm2 = 0;
    b.background = PL_BACKGROUND_MEDIAN;
    TU_OK(pl_detect(&det, m, 0, &b, &err));
    assert_true(isnan(det->pitch_u));
    pl_detection_free(det);
    /* no data */
    m->pitch_u = 1;
    float *v = pl_map_channel(m, 0);
    for (size_t i = 0; i < 64 * 48; i++)
        v[i] = NAN;
    expect_refused(m, &o, "holds no data");
    /* labels beyond the pixels */
    uint32_t *labels = calloc(64 * 48, sizeof *labels);
    labels[5] = 64 * 48 + 1;
    assert_int_equal(pl_detect_measure(&det, m, 0, labels, &o, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "exceeds");
    free(labels);
    pl_map_free(m);
}

/* Given labels: a label without pixels gets sizes 0 and NaN measures,
 * pixels without data leave their region, the thresholds are reported but
 * not applied. */
static void test_detect__measure_given_labels(void **state)
{
    (void)state;
    pl_map *m = new_map(30, 20, "temperature-contrast", "K");
    float *v = pl_map_channel(m, 0);
    uint32_t labels[600] = {0};
    for (int i = 0; i < 10; i++) {
        labels[45 + i] = 3;
        v[45 + i] = 0.5f;
    }
    v[45] = NAN;
    labels[300] = 1;
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    o.noise = 1;
    o.background = PL_BACKGROUND_ZERO;
    pl_err err = {0};
    pl_detection *det;
    TU_OK(pl_detect_measure(&det, m, 0, labels, &o, &err));
    assert_int_equal(det->count, 3);
    assert_int_equal(det->indications[1].size[0].pixels, 0);
    assert_true(isnan(det->indications[1].centroid_col));
    assert_null(det->indications[1].outline);
    assert_int_equal(det->indications[2].size[0].pixels, 9);
    assert_int_equal(det->labels[45], 0);
    tu_assert_close(det->indications[2].mean_contrast, 0.5, 1e-7, "mean");
    tu_assert_close(det->indications[0].peak_contrast, 0, 0, "peak");
    assert_int_equal(det->indications[0].size[PL_SIZING_HALF_MAX].pixels, 0);
    tu_assert_close(det->high_threshold, 8.0, 0, "high threshold reported");
    char *js;
    TU_OK(pl_detection_json(&js, det, &err));
    free(js);
    pl_detection_free(det);
    pl_map_free(m);
}

/* ---- JSON --------------------------------------------------------------------------------------- */

static void test_detect__json_records_options_and_indications(void **state)
{
    (void)state;
    pl_map *m = new_map(80, 60, "temperature-contrast", "K");
    add_disk(m, 40, 30, 6, 10.0);
    rng = 37;
    add_noise(m, 0.5);
    pl_detect_options o = PL_DETECT_OPTIONS_INIT;
    pl_err err = {0};
    char *js;
    TU_OK(pl_detect_options_json(&js, &o, &err));
    cJSON *j = cJSON_Parse(js);
    assert_non_null(j);
    assert_true(cJSON_GetObjectItem(j, "high")->valuedouble == PL_DETECT_DEFAULT_HIGH);
    assert_true(cJSON_GetObjectItem(j, "low")->valuedouble == PL_DETECT_DEFAULT_LOW);
    assert_true(cJSON_GetObjectItem(j, "background_mm")->valuedouble ==
                PL_DETECT_DEFAULT_BACKGROUND_MM);
    assert_string_equal(cJSON_GetObjectItem(j, "polarity")->valuestring, "quantity");
    assert_string_equal(cJSON_GetObjectItem(j, "background")->valuestring, "line-median");
    assert_true(cJSON_IsNull(cJSON_GetObjectItem(j, "nominal")));
    assert_true(cJSON_IsNull(cJSON_GetObjectItem(j, "noise")));
    assert_true(cJSON_IsNull(cJSON_GetObjectItem(j, "depth_channel")));
    cJSON_Delete(j);
    free(js);
    pl_detection *det;
    TU_OK(pl_detect(&det, m, 0, &o, &err));
    assert_int_equal(det->count, 1);
    TU_OK(pl_detection_json(&js, det, &err));
    j = cJSON_Parse(js);
    assert_non_null(j);
    assert_string_equal(cJSON_GetObjectItem(j, "polarity")->valuestring, "rises");
    assert_string_equal(
        cJSON_GetObjectItem(cJSON_GetObjectItem(j, "noise"), "method")->valuestring, "high-pass");
    cJSON *ind = cJSON_GetArrayItem(cJSON_GetObjectItem(j, "indications"), 0);
    cJSON *sizes = cJSON_GetObjectItem(ind, "sizes");
    assert_int_equal(cJSON_GetArraySize(sizes), 2);
    assert_string_equal(cJSON_GetObjectItem(cJSON_GetArrayItem(sizes, 0), "rule")->valuestring,
                        "threshold");
    assert_string_equal(cJSON_GetObjectItem(cJSON_GetArrayItem(sizes, 1), "rule")->valuestring,
                        "half-maximum");
    assert_true(cJSON_GetObjectItem(cJSON_GetArrayItem(sizes, 0), "pixels")->valuedouble ==
                (double)det->indications[0].size[0].pixels);
    assert_string_equal(cJSON_GetObjectItem(ind, "outline")->valuestring,
                        det->indications[0].outline);
    assert_true(cJSON_IsNull(cJSON_GetObjectItem(ind, "depth_mm")));
    assert_string_equal(cJSON_GetObjectItem(ind, "unit")->valuestring, "K");
    cJSON_Delete(j);
    free(js);
    TU_OK(pl_indication_json(&js, det, 0, &err));
    j = cJSON_Parse(js);
    assert_non_null(j);
    assert_int_equal(cJSON_GetObjectItem(j, "label")->valueint, 1);
    cJSON_Delete(j);
    free(js);
    assert_int_equal(pl_indication_json(&js, det, 1, &err), PL_EINVAL);
    assert_null(js);
    pl_detection_free(det);
    pl_map_free(m);
    assert_string_equal(pl_background_name(PL_BACKGROUND_NOMINAL), "nominal");
    assert_string_equal(pl_noise_method_name(PL_NOISE_NONE), "none");
}

/* ---- simulated sites ------------------------------------------------------------------------------ */

typedef struct sim_feed {
    pl_reducer *r;
    int rc;
    pl_err err;
} sim_feed;

static int feed_frame(void *ud, uint32_t index, double time_s, const float *kelvin)
{
    (void)time_s;
    sim_feed *f = ud;
    if (pl_reducer_frame_needed(f->r, index))
        f->rc = pl_reducer_frame(f->r, index, kelvin, &f->err);
    return f->rc;
}

/* A 64 x 48 mm site as the sample fleet's (1 mm pixels, a stringer flange
 * and a frame tie behind the skin, flash non-uniformity, 20 mK NETD, dead
 * pixels, 25 Hz for 30 s), reduced to maps at 0.5 and 2 s, depth and
 * pulse phase. */
static pl_map *simulated_site(double thickness, const char *defects, unsigned seed)
{
    char scene[4096];
    snprintf(scene, sizeof scene,
             "{ \"seed\": %u, \"laminate\": { \"thickness_mm\": %.2f, \"density_kg_m3\": 1560,"
             " \"specific_heat_j_kgk\": 1200, \"conductivity_along_w_mk\": 2.6,"
             " \"conductivity_across_w_mk\": 1.9, \"conductivity_through_w_mk\": 0.7862 },"
             " \"flash\": { \"energy_j_m2\": 7500, \"nonuniformity\": 0.04 },"
             " \"surface\": { \"ambient_k\": 294.15, \"front_h_w_m2k\": 8, \"emissivity\": 0.92 },"
             " \"camera\": { \"width\": 64, \"height\": 48, \"pitch_mm\": 1.0,"
             " \"frame_rate_hz\": 25, \"frame_count\": 750, \"preflash_frames\": 5,"
             " \"netd_k\": 0.02, \"fixed_pattern_k\": 0.01, \"dead_pixel_fraction\": 0.001 },"
             " \"grid\": { \"layers\": 16 },"
             " \"substructure\": ["
             " { \"kind\": \"flange\", \"outline\": { \"shape\": \"rectangle\", \"centre_mm\": [32, 36],"
             " \"size_mm\": [120, 16], \"angle_deg\": 0 }, \"thickness_mm\": 2.5,"
             " \"bond_resistance_m2k_w\": 0.0002 },"
             " { \"kind\": \"flange\", \"outline\": { \"shape\": \"rectangle\", \"centre_mm\": [50, 24],"
             " \"size_mm\": [12, 90], \"angle_deg\": 0 }, \"thickness_mm\": 2.0,"
             " \"bond_resistance_m2k_w\": 0.0002 } ],"
             " \"defects\": [ %s ] }",
             seed, thickness, defects);
    pl_err err = {0};
    pl_sim_scene *sc;
    TU_OK(pl_sim_scene_parse(&sc, scene, "scene", &err));
    pl_sim_info info;
    pl_sim_scene_info(sc, &info);
    double *times = malloc(info.frame_count * sizeof *times);
    assert_non_null(times);
    for (uint32_t i = 0; i < info.frame_count; i++)
        times[i] = i / info.frame_rate_hz - info.flash_time_s;
    double at[2] = {0.5, 2.0};
    pl_reduce_options o = PL_REDUCE_OPTIONS_INIT;
    o.end_s = 30;
    o.times_s = at;
    o.ntimes = 2;
    o.time_products = PL_REDUCE_AT_CONTRAST | PL_REDUCE_AT_D2;
    o.diffusivity_mm2_s = info.diffusivity_mm2_s[2];
    sim_feed f = {NULL, 0, {0}};
    TU_OK(pl_reducer_new(&f.r, info.width, info.height, times, info.frame_count,
                         info.preflash_frames, &o, &err));
    if (pl_sim_run_frames(sc, feed_frame, &f, NULL, NULL, &err))
        fail_msg("simulation: %s %s", err.msg, f.err.msg);
    pl_map *m;
    TU_OK(pl_reducer_finish(f.r, &m, NULL, &err));
    pl_reducer_free(f.r);
    free(times);
    pl_sim_scene_free(sc);
    TU_OK(pl_map_set_pitch(m, 1.0, 1.0, &err));
    return m;
}

static int channel_of(const pl_map *m, const char *quantity, const char *label, int nth)
{
    for (uint32_t c = 0; c < m->nchannels; c++)
        if (!strcmp(m->channels[c].quantity, quantity) &&
            (label ? !strcmp(m->channels[c].label, label) : --nth == 0))
            return (int)c;
    fail_msg("no channel %s %s", quantity, label ? label : "");
    return -1;
}

/*
 * The simulator's ground truth: a sound 5.6 mm site, whose depth map holds
 * scattered depths from noise on sound pixels (the back wall's peak comes
 * at 23.7 s, near the end of the sequence), stays quiet in every studied
 * channel; a 2.8 mm site with a delamination of 14 mm at 1 mm, centred at
 * (20, 14) mm, shows it in each (and nothing else), at its place.
 */
static void test_detect__simulated_sites(void **state)
{
    (void)state;
    static const struct {
        const char *q, *label;
        int nth;
    } ch[] = {
        {"temperature-contrast", "t=2 s", 0}, {"log-derivative-2", "t=0.5 s", 0},
        {"depth", "peak d2", 0},              {"phase-contrast", NULL, 2},
    };
    pl_map *sound = simulated_site(5.6, "", 41);
    const float *d = pl_map_channel(sound, (uint32_t)channel_of(sound, "depth", "peak d2", 0));
    size_t with_depth = 0;
    for (size_t i = 0; i < 64 * 48; i++)
        with_depth += isfinite(d[i]);
    printf("# sound 5.6 mm site: %lu of %d pixels carry a depth\n", (unsigned long)with_depth,
           64 * 48);
    assert_true(with_depth > 10);
    pl_map *delam = simulated_site(
        2.8,
        "{ \"kind\": \"delamination\", \"depth_mm\": 1.0, \"outline\": { \"shape\": \"circle\","
        " \"centre_mm\": [20, 14], \"diameter_mm\": 14 } }",
        43);
    pl_err err = {0};
    for (size_t k = 0; k < sizeof ch / sizeof ch[0]; k++) {
        pl_detect_options o = PL_DETECT_OPTIONS_INIT;
        pl_detection *det;
        o.nominal = pl_quantity_uses_nominal(ch[k].q) ? 5.6 : NAN;
        TU_OK(pl_detect(&det, sound, (uint32_t)channel_of(sound, ch[k].q, ch[k].label, ch[k].nth),
                        &o, &err));
        if (det->count)
            fail_msg("sound site: %lu indications in %s", (unsigned long)det->count, ch[k].q);
        pl_detection_free(det);
        o.nominal = pl_quantity_uses_nominal(ch[k].q) ? 2.8 : NAN;
        o.depth_channel = channel_of(delam, "depth", "peak d2", 0);
        TU_OK(pl_detect(&det, delam, (uint32_t)channel_of(delam, ch[k].q, ch[k].label, ch[k].nth),
                        &o, &err));
        if (det->count != 1)
            fail_msg("delamination: %lu indications in %s", (unsigned long)det->count, ch[k].q);
        const pl_indication *ind = &det->indications[0];
        printf("# %-21s area %5.0f mm2 (threshold) %5.0f mm2 (half-maximum), true %3.0f; "
               "centroid (%.1f, %.1f); depth %.2f mm; peak %.3g %s (%.0f sigma)\n",
               ch[k].q, ind->size[0].area_mm2, ind->size[1].area_mm2, M_PI * 49,
               ind->centroid_col, ind->centroid_row, ind->depth_mm, ind->peak_contrast, det->unit,
               ind->peak_snr);
        tu_assert_close(ind->centroid_col, 20, 1.5, "centroid col");
        tu_assert_close(ind->centroid_row, 14, 1.5, "centroid row");
        tu_assert_close(ind->depth_mm, 0.9, 0.25, "depth");
        assert_true(ind->size[0].area_mm2 > 0.5 * M_PI * 49 && ind->size[0].area_mm2 < 2 * M_PI * 49);
        pl_detection_free(det);
    }
    pl_map_free(sound);
    pl_map_free(delam);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_detect__polarity_of_every_quantity),
        cmocka_unit_test(test_detect__labels_merge_and_number_in_raster_order),
        cmocka_unit_test(test_detect__labels_equal_scipy),
        cmocka_unit_test(test_detect__measures_equal_scipy_and_skimage),
        cmocka_unit_test(test_detect__axes_in_mm_honour_both_pitches),
        cmocka_unit_test(test_detect__outline_examples),
        cmocka_unit_test(test_detect__outline_decode_refuses_bad_text),
        cmocka_unit_test(test_detect__outline_decodes_to_the_outer_boundary),
        cmocka_unit_test(test_detect__half_maximum_is_the_peak_lobe),
        cmocka_unit_test(test_detect__noise_is_the_standard_deviation),
        cmocka_unit_test(test_detect__finds_disks_not_the_strip_or_shading),
        cmocka_unit_test(test_detect__falling_quantity),
        cmocka_unit_test(test_detect__reinspection_takes_the_reference_level),
        cmocka_unit_test(test_detect__depth_is_compared_with_nominal),
        cmocka_unit_test(test_detect__refusals_name_the_fault),
        cmocka_unit_test(test_detect__measure_given_labels),
        cmocka_unit_test(test_detect__json_records_options_and_indications),
        cmocka_unit_test(test_detect__simulated_sites),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
