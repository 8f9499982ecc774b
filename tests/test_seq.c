/*
 * test_seq.c - raw sequences: the writer and the reader round trip for all
 * three storages; sequences written by numpy (tests/ref/seq_ref.py, Debian's
 * python3-numpy) and pypng read as numpy computes them; sequences written
 * here load in numpy and pypng; every validation failure; reading in
 * bounded memory.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <dirent.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include "plyledger/npy.h"
#include "thermal/seq_int.h"
#include "testutil.h"

/* ---- helpers ---------------------------------------------------------- */

static void write_text(const char *path, const char *text)
{
    assert_int_equal(tu_write_file(path, text, strlen(text)), 0);
}

/* The message is one line and names `name` and every other string given. */
static void assert_msg(const pl_err *err, const char *name, ...)
{
    if (strchr(err->msg, '\n'))
        fail_msg("message \"%s\" is more than one line", err->msg);
    if (!strstr(err->msg, name))
        fail_msg("message \"%s\" does not name %s", err->msg, name);
    va_list ap;
    va_start(ap, name);
    const char *s;
    while ((s = va_arg(ap, const char *)) != NULL)
        if (!strstr(err->msg, s))
            fail_msg("message \"%s\" does not say \"%s\"", err->msg, s);
    va_end(ap);
}

/* Entries of a folder, "." and ".." aside. */
static int count_entries(const char *dir)
{
    DIR *d = opendir(dir);
    assert_non_null(d);
    int n = 0;
    struct dirent *e;
    while ((e = readdir(d)) != NULL)
        if (strcmp(e->d_name, ".") && strcmp(e->d_name, ".."))
            n++;
    closedir(d);
    return n;
}

static int exists(const char *path)
{
    struct stat st;
    return stat(path, &st) == 0;
}

/* A .npy cube with plyledger's header writer, arbitrary bytes for the data
 * and `trailing` zero bytes after it. */
static void write_cube(const char *path, const char *descr, uint64_t f, uint64_t h, uint64_t w,
                       size_t itemsize, long trailing)
{
    FILE *fp = fopen(path, "wb");
    assert_non_null(fp);
    uint64_t shape[3] = {f, h, w};
    assert_int_equal(pl_npy_write_header(fp, descr, 3, shape, path, NULL), PL_OK);
    size_t n = (size_t)(f * h * w) * itemsize;
    for (size_t i = 0; i < n; i++)
        fputc((int)(i * 7 % 251), fp);
    for (long i = 0; i < trailing; i++)
        fputc(0, fp);
    assert_int_equal(fclose(fp), 0);
}

/* A .npy file with a hand-written header dict and data_bytes bytes of 1. */
static void write_npy_dict(const char *path, const char *dict, size_t data_bytes)
{
    unsigned char *data = malloc(data_bytes + 1);
    assert_non_null(data);
    memset(data, 1, data_bytes);
    tu_write_npy_text(path, 1, dict, data, data_bytes);
    free(data);
}

static void shorten(const char *path, long by)
{
    struct stat st;
    assert_int_equal(stat(path, &st), 0);
    assert_int_equal(truncate(path, st.st_size - by), 0);
}

/* Kelvin test values for frame k: a smooth field with a few NaN, some far
 * above the saturation level and some far below the calibration's zero. */
static void test_frame(float *v, uint32_t w, uint32_t h, uint32_t k, int with_extremes,
                       uint32_t *nextreme_high)
{
    uint32_t high = 0;
    for (uint32_t y = 0; y < h; y++)
        for (uint32_t x = 0; x < w; x++) {
            size_t i = (size_t)y * w + x;
            v[i] = (float)(291.0 + 0.731 * k + 0.0137 * x * x - 0.0291 * y + 0.001 * (x * y % 7));
            if (with_extremes && (i + k) % 17 == 3) {
                v[i] = 350.0f; /* above offset + gain * saturation */
                high++;
            } else if (with_extremes && (i + 2 * k) % 23 == 5) {
                v[i] = NAN;
                high++;
            } else if (with_extremes && (i + k) % 19 == 7) {
                v[i] = 200.0f; /* below offset: clamps to count 0 */
            }
        }
    if (nextreme_high)
        *nextreme_high = high;
}

/* A 5 x 3 PNG sequence of 4 frames of `frame` at 10 Hz, the flash at
 * 0.15 s (frames at 0 and 0.1 s before it), written by plyledger. */
static void write_small_png_sequence(const char *manifest, const float *frame)
{
    pl_seq_info info = PL_SEQ_INFO_INIT;
    info.width = 5;
    info.height = 3;
    info.frame_count = 4;
    info.frame_rate_hz = 10;
    info.flash_time_s = 0.15;
    info.storage = PL_SEQ_PNG16;
    pl_seq_writer *w = NULL;
    assert_int_equal(pl_seq_writer_open(&w, manifest, &info, NULL), PL_OK);
    for (int k = 0; k < 4; k++)
        assert_int_equal(pl_seq_writer_frame(w, frame, NULL), PL_OK);
    assert_int_equal(pl_seq_writer_close(w, NULL), PL_OK);
}

/* ---- round trips ------------------------------------------------------ */

static pl_seq_info round_trip_info(pl_seq_storage storage)
{
    pl_seq_info info = PL_SEQ_INFO_INIT;
    info.width = 13;
    info.height = 7;
    info.frame_count = 9;
    info.frame_rate_hz = 50;
    info.flash_time_s = 0.05; /* frames at 0, 0.02, 0.04 come before */
    info.storage = storage;
    info.gain_k = 0.01;
    info.offset_k = 273.15;
    info.saturation_count = 4000; /* up to 313.15 K */
    info.pitch_u = 0.3;
    info.pitch_v = 0.35;
    info.acquisition_json = "{ \"camera\": \"IR-1\", \"flash_energy_j\": 4800 }";
    return info;
}

static void round_trip(pl_seq_storage storage)
{
    char *dir = tu_tmpdir();
    char *man = tu_path(dir, "site.json");
    pl_seq_info info = round_trip_info(storage);
    int counts = storage != PL_SEQ_NPY_FLOAT32;
    size_t n = (size_t)info.width * info.height;
    float *in = malloc(n * info.frame_count * sizeof *in);
    float *got = malloc(n * sizeof *got);
    uint32_t *high = calloc(info.frame_count, sizeof *high);
    assert_non_null(in);
    assert_non_null(got);
    assert_non_null(high);

    pl_err err = {0};
    pl_seq_writer *w = NULL;
    assert_int_equal(pl_seq_writer_open(&w, man, &info, &err), PL_OK);
    for (uint32_t k = 0; k < info.frame_count; k++) {
        test_frame(in + k * n, info.width, info.height, k, 1, &high[k]);
        assert_int_equal(pl_seq_writer_frame(w, in + k * n, &err), PL_OK);
    }
    assert_int_equal(pl_seq_writer_close(w, &err), PL_OK);
    /* the manifest and its data, nothing else */
    assert_int_equal(count_entries(dir), 2);

    pl_seq *s = NULL;
    assert_int_equal(pl_seq_open(&s, man, &err), PL_OK);
    assert_int_equal(pl_seq_width(s), info.width);
    assert_int_equal(pl_seq_height(s), info.height);
    assert_int_equal(pl_seq_frame_count(s), info.frame_count);
    assert_int_equal(pl_seq_preflash_frames(s), 3); /* the default: frames before 0.05 s */
    const double *t = pl_seq_times(s);
    for (uint32_t k = 0; k < info.frame_count; k++)
        assert_true(fabs(t[k] - (k / 50.0 - 0.05)) < 1e-12);
    double pu, pv;
    pl_seq_pitch(s, &pu, &pv);
    assert_true(pu == 0.3 && pv == 0.35);
    assert_string_equal(pl_seq_acquisition_json(s), "{\"camera\":\"IR-1\",\"flash_energy_j\":4800}");

    for (uint32_t k = 0; k < info.frame_count; k++) {
        uint32_t nsat = 12345;
        assert_int_equal(pl_seq_read_frame(s, k, got, &nsat, &err), PL_OK);
        const float *want = in + k * n;
        if (!counts) {
            assert_int_equal(nsat, 0);
            for (size_t i = 0; i < n; i++)
                tu_assert_same_float(got[i], want[i], "float32", i);
            continue;
        }
        /* every NaN and 350 K pixel saturated, nothing else */
        assert_int_equal(nsat, high[k]);
        for (size_t i = 0; i < n; i++) {
            if (isnan(want[i]) || want[i] == 350.0f) {
                if (!isnan(got[i]))
                    fail_msg("frame %u pixel %zu: %g, NaN (saturated) expected", k, i,
                             (double)got[i]);
            } else if (want[i] == 200.0f) {
                assert_true(got[i] == (float)273.15); /* count 0 */
            } else {
                /* nearest count: within gain / 2, plus float32 rounding at 300 K */
                double d = fabs((double)got[i] - (double)want[i]);
                if (d > 0.005 + 4e-5)
                    fail_msg("frame %u pixel %zu: %.7g for %.7g", k, i, (double)got[i],
                             (double)want[i]);
            }
        }
    }
    /* reading out of order gives the same frames */
    float *again = malloc(n * sizeof *again);
    assert_non_null(again);
    assert_int_equal(pl_seq_read_frame(s, 8, got, NULL, &err), PL_OK);
    assert_int_equal(pl_seq_read_frame(s, 0, again, NULL, &err), PL_OK);
    assert_int_equal(pl_seq_read_frame(s, 8, again, NULL, &err), PL_OK);
    for (size_t i = 0; i < n; i++)
        tu_assert_same_float(again[i], got[i], "re-read", i);
    assert_int_equal(pl_seq_read_frame(s, 9, got, NULL, &err), PL_EINVAL);
    assert_msg(&err, man, "frame 9", NULL);
    free(again);
    pl_seq_close(s);

    free(in);
    free(got);
    free(high);
    free(man);
    tu_rmtree(dir);
}

static void test_seq__round_trip_npy_float32(void **state)
{
    (void)state;
    round_trip(PL_SEQ_NPY_FLOAT32);
}

static void test_seq__round_trip_npy_uint16(void **state)
{
    (void)state;
    round_trip(PL_SEQ_NPY_UINT16);
}

static void test_seq__round_trip_png16(void **state)
{
    (void)state;
    round_trip(PL_SEQ_PNG16);
}

/* ---- outside references ------------------------------------------------ */

static void check_reference(const char *dir, const char *manifest, const char *values,
                            const char *nsat_file, const char *times_file)
{
    char *man = tu_path(dir, manifest);
    char *vpath = tu_path(dir, values);
    size_t nv;
    float *want = tu_read_f4(vpath, &nv);
    int32_t *nsat_want = NULL;
    double *times_want = NULL;
    size_t nn = 0, nt = 0;
    if (nsat_file) {
        char *p = tu_path(dir, nsat_file);
        nsat_want = tu_read_i4(p, &nn);
        free(p);
    }
    if (times_file) {
        char *p = tu_path(dir, times_file);
        times_want = tu_read_f8(p, &nt);
        free(p);
    }
    pl_err err = {0};
    pl_seq *s = NULL;
    int rc = pl_seq_open(&s, man, &err);
    if (rc)
        fail_msg("%s: %s", manifest, err.msg);
    uint32_t f = pl_seq_frame_count(s);
    size_t n = (size_t)pl_seq_width(s) * pl_seq_height(s);
    assert_int_equal((size_t)f * n, nv);
    float *got = malloc(n * sizeof *got);
    assert_non_null(got);
    for (uint32_t k = 0; k < f; k++) {
        uint32_t nsat = 0;
        rc = pl_seq_read_frame(s, k, got, &nsat, &err);
        if (rc)
            fail_msg("%s: %s", manifest, err.msg);
        for (size_t i = 0; i < n; i++)
            tu_assert_same_float(got[i], want[k * n + i], manifest, k * n + i);
        if (nsat_want)
            assert_int_equal(nsat, nsat_want[k]);
    }
    if (nsat_want)
        assert_int_equal(nn, f);
    if (times_want) {
        assert_int_equal(nt, f);
        const double *t = pl_seq_times(s);
        /* t - flash in double, as numpy subtracts: equal to the last bit */
        for (uint32_t k = 0; k < f; k++)
            assert_true(t[k] == times_want[k]);
    }
    pl_seq_close(s);
    free(got);
    free(want);
    free(nsat_want);
    free(times_want);
    free(vpath);
    free(man);
}

/* numpy writes uint16 cubes of both byte orders with a calibration table;
 * plyledger's kelvin must be numpy.interp's (the outside reference,
 * Debian python3-numpy), rounded to float32, to the bit. */
static void test_seq__numpy_table_cube_matches_numpy_interp(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    assert_int_equal(tu_python("seq_ref.py", "table", dir, NULL), 0);
    check_reference(dir, "table_le.json", "table.f4", "table_nsat.i4", "table_times.f8");
    check_reference(dir, "table_be.json", "table.f4", "table_nsat.i4", "table_times.f8");
    check_reference(dir, "kelvin_be.json", "kelvin.f4", NULL, NULL);

    pl_err err = {0};
    pl_seq *s = NULL;
    char *man = tu_path(dir, "table_le.json");
    assert_int_equal(pl_seq_open(&s, man, &err), PL_OK);
    /* frames before the flash at 10.005 s: 10.0, 10.001, 10.0025, 10.004 */
    assert_int_equal(pl_seq_preflash_frames(s), 4);
    double pu, pv;
    pl_seq_pitch(s, &pu, &pv);
    assert_true(pu == 0.4 && pv == 0.5);
    assert_string_equal(pl_seq_acquisition_json(s),
                        "{\"camera\":\"MWIR 640\",\"flash_energy_j\":4800,\"ambient_k\":294.2}");
    pl_seq_close(s);
    free(man);
    man = tu_path(dir, "table_be.json");
    assert_int_equal(pl_seq_open(&s, man, &err), PL_OK);
    assert_int_equal(pl_seq_preflash_frames(s), 2); /* as the manifest says */
    pl_seq_pitch(s, &pu, &pv);
    assert_string_equal(pl_seq_acquisition_json(s),
                        "{\"camera\":\"MWIR 640\",\"flash_energy_j\":4800,\"ambient_k\":294.2}");
    pl_seq_close(s);
    free(man);
    man = tu_path(dir, "kelvin_be.json");
    assert_int_equal(pl_seq_open(&s, man, &err), PL_OK);
    pl_seq_pitch(s, &pu, &pv);
    assert_true(isnan(pu) && isnan(pv));
    assert_string_equal(pl_seq_acquisition_json(s), "{}");
    assert_int_equal(pl_seq_preflash_frames(s), 2); /* 0 and 1/60 s before 0.02 s */
    pl_seq_close(s);
    free(man);
    tu_rmtree(dir);
}

/* The table rule itself against hand-worked points (from the rule as
 * numpy.interp documents it: end values outside, linear inside). */
static void test_seq__table_rule(void **state)
{
    (void)state;
    const double c[] = {10, 20, 40};
    const double k[] = {300, 310, 330};
    assert_true(pl_seq__table_value(0, c, k, 3) == 300);
    assert_true(pl_seq__table_value(10, c, k, 3) == 300);
    assert_true(pl_seq__table_value(15, c, k, 3) == 305);
    assert_true(pl_seq__table_value(20, c, k, 3) == 310);
    assert_true(pl_seq__table_value(30, c, k, 3) == 320);
    assert_true(pl_seq__table_value(40, c, k, 3) == 330);
    assert_true(pl_seq__table_value(65535, c, k, 3) == 330);
}

/* pypng (the outside reference for PNG) writes 16-bit greyscale frames,
 * plain and Adam7-interlaced; plyledger reads offset + gain * count. */
static void test_seq__pypng_frames_read(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    assert_int_equal(tu_python("seq_ref.py", "png", dir, NULL), 0);
    check_reference(dir, "png.json", "png.f4", "png_nsat.i4", NULL);
    check_reference(dir, "png_i.json", "png.f4", "png_nsat.i4", NULL);
    pl_err err = {0};
    pl_seq *s = NULL;
    char *man = tu_path(dir, "png.json");
    assert_int_equal(pl_seq_open(&s, man, &err), PL_OK);
    assert_int_equal(pl_seq_width(s), 11);
    assert_int_equal(pl_seq_height(s), 5);
    assert_int_equal(pl_seq_preflash_frames(s), 2); /* 0 and 5 ms before 7 ms */
    double pu, pv;
    pl_seq_pitch(s, &pu, &pv);
    assert_true(pu == 0.25 && pv == 0.25);
    pl_seq_close(s);
    free(man);

    /* frames pypng wrote that a sequence cannot hold */
    static const struct { const char *manifest, *frame, *says; } bad[] = {
        {"bad8.json", "bad8/b02.png", "bit depth 8"},
        {"badrgb.json", "badrgb/b02.png", "colour type 2"},
        {"badsize.json", "badsize/b02.png", "10 x 5"},
    };
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        man = tu_path(dir, bad[i].manifest);
        memset(&err, 0, sizeof err);
        assert_int_equal(pl_seq_open(&s, man, &err), PL_EFORMAT);
        assert_null(s);
        assert_msg(&err, bad[i].frame, bad[i].says, "frame 2", NULL);
        free(man);
    }
    tu_rmtree(dir);
}

/* numpy.load reads the cubes, and pypng the frames, that plyledger writes. */
static void test_seq__written_sequences_load_in_numpy_and_pypng(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    static const struct { const char *name; pl_seq_storage storage; } out[] = {
        {"cf", PL_SEQ_NPY_FLOAT32}, {"cu", PL_SEQ_NPY_UINT16}, {"cp", PL_SEQ_PNG16}};
    for (size_t j = 0; j < 3; j++) {
        pl_seq_info info = round_trip_info(out[j].storage);
        info.width = 17;
        info.height = 6;
        info.frame_count = 5;
        info.frame_rate_hz = 60;
        info.flash_time_s = 0.02;
        info.gain_k = 0.0037;
        info.offset_k = 280.5;
        info.saturation_count = 16383;
        size_t n = (size_t)info.width * info.height;
        float *in = malloc(n * info.frame_count * sizeof *in);
        assert_non_null(in);
        char name[32];
        snprintf(name, sizeof name, "%s.json", out[j].name);
        char *man = tu_path(dir, name);
        pl_err err = {0};
        pl_seq_writer *w = NULL;
        assert_int_equal(pl_seq_writer_open(&w, man, &info, &err), PL_OK);
        for (uint32_t k = 0; k < info.frame_count; k++) {
            test_frame(in + k * n, info.width, info.height, k, 1, NULL);
            in[k * n + 1] = INFINITY;
            in[k * n + 2] = -INFINITY;
            assert_int_equal(pl_seq_writer_frame(w, in + k * n, &err), PL_OK);
        }
        assert_int_equal(pl_seq_writer_close(w, &err), PL_OK);
        snprintf(name, sizeof name, "%s_in.f4", out[j].name);
        char *raw = tu_path(dir, name);
        tu_write_f4(raw, in, n * info.frame_count);
        free(raw);
        free(man);
        free(in);
    }
    assert_int_equal(tu_python("seq_ref.py", "check", dir, "cf.json", "cu.json", "cp.json", NULL),
                     0);
    tu_rmtree(dir);
}

/* ---- validation ------------------------------------------------------- */

/* A 4 x 3 x 5 cube `name` in `dir`, `trailing` bytes too long or `short_by`
 * bytes too short. */
static void make_cube(const char *dir, const char *name, const char *descr, size_t itemsize,
                      long trailing, long short_by)
{
    char *p = tu_path(dir, name);
    write_cube(p, descr, 4, 3, 5, itemsize, trailing);
    if (short_by)
        shorten(p, short_by);
    free(p);
}

#define HEAD "{\"format\": \"plyledger-sequence-1\", "
#define LINEAR "\"calibration\": {\"kind\": \"linear\", \"gain_k\": 0.01, \"offset_k\": 273.15}"
#define KELVIN "\"calibration\": {\"kind\": \"kelvin\"}"
#define TIMING "\"frame_rate_hz\": 10, \"flash_time_s\": 0.15, "

typedef struct bad_case {
    const char *manifest;   /* text */
    int code;
    const char *names;      /* the file the message must name ("" = the manifest) */
    const char *says[3];    /* more text the message must hold */
} bad_case;

static void run_bad_cases(const char *dir, const bad_case *cases, size_t ncases)
{
    char *man = tu_path(dir, "m.json");
    for (size_t i = 0; i < ncases; i++) {
        const bad_case *c = &cases[i];
        write_text(man, c->manifest);
        pl_err err = {0};
        pl_seq *s = (pl_seq *)&err; /* must be reset to NULL */
        int rc = pl_seq_open(&s, man, &err);
        if (rc != c->code)
            fail_msg("case %zu: code %d (%s), %d expected; manifest %s", i, rc, err.msg,
                     c->code, c->manifest);
        assert_null(s);
        assert_int_equal(err.code, rc);
        char *named = c->names[0] ? tu_path(dir, c->names) : tu_path(dir, "m.json");
        assert_msg(&err, named, c->says[0] ? c->says[0] : "", c->says[1] ? c->says[1] : "",
                   c->says[2] ? c->says[2] : "", NULL);
        free(named);
    }
    free(man);
}

/* Every manifest and cube fault gives PL_EFORMAT (PL_EIO for a file that
 * cannot be opened) and one line naming the file and the key or frame. */
static void test_seq__bad_manifests_and_cubes_refused(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    /* a valid cube: 4 frames of 3 x 5, at 0, 0.1, 0.2, 0.3 s; flash at 0.15 s */
    make_cube(dir, "c.npy", "<u2", 2, 0, 0);
    make_cube(dir, "f.npy", "<f4", 4, 0, 0);
    make_cube(dir, "i2.npy", "<i2", 2, 0, 0);
    make_cube(dir, "f8.npy", "<f8", 8, 0, 0);
    make_cube(dir, "t.npy", "<u2", 2, 0, 7);   /* 7 bytes short */
    make_cube(dir, "x.npy", "<u2", 2, 3, 0);   /* 3 bytes too many */
    char *p = tu_path(dir, "fo.npy");
    write_npy_dict(p, "{'descr': '<u2', 'fortran_order': True, 'shape': (4, 3, 5), }", 120);
    free(p);
    p = tu_path(dir, "d2.npy");
    write_npy_dict(p, "{'descr': '<u2', 'fortran_order': False, 'shape': (4, 15), }", 120);
    free(p);

    /* the control: all of these reuse its parts */
    char *man = tu_path(dir, "m.json");
    write_text(man, HEAD "\"data\": \"c.npy\", " TIMING LINEAR "}");
    pl_seq *s = NULL;
    pl_err err = {0};
    assert_int_equal(pl_seq_open(&s, man, &err), PL_OK);
    assert_int_equal(pl_seq_preflash_frames(s), 2);
    pl_seq_close(s);
    free(man);

    const bad_case cases[] = {
        {"{\"format\": ", PL_EFORMAT, "", {"not valid JSON"}},
        {"[1, 2]", PL_EFORMAT, "", {"not a JSON object"}},
        {HEAD "\"data\": \"c.npy\", " TIMING LINEAR "} x", PL_EFORMAT, "", {"not valid JSON"}},
        {"{\"data\": \"c.npy\", " TIMING LINEAR "}", PL_EFORMAT, "", {"'format'"}},
        {"{\"format\": \"plyledger-sequence-9\", \"data\": \"c.npy\", " TIMING LINEAR "}",
         PL_EFORMAT, "", {"'format'", "plyledger-sequence-9"}},
        {HEAD "\"data\": \"c.npy\", " TIMING LINEAR ", \"colour\": 1}", PL_EFORMAT, "",
         {"unknown key", "'colour'"}},
        {HEAD "\"data\": \"c.npy\", \"data\": \"c.npy\", " TIMING LINEAR "}", PL_EFORMAT, "",
         {"repeats", "'data'"}},
        {HEAD "\"data\": \"c.npy\", \"frame_times_s\": [0, 0.1, 0.2, 0.3], " TIMING LINEAR "}",
         PL_EFORMAT, "", {"'frame_rate_hz'", "'frame_times_s'", "both"}},
        {HEAD "\"data\": \"c.npy\", \"flash_time_s\": 0.15, " LINEAR "}", PL_EFORMAT, "",
         {"'frame_rate_hz'", "'frame_times_s'"}},
        {HEAD "\"data\": \"c.npy\", \"frame_times_s\": [0, 0.1, 0.1, 0.3], "
              "\"flash_time_s\": 0.05, " LINEAR "}",
         PL_EFORMAT, "", {"'frame_times_s'", "must increase", "frame 2"}},
        {HEAD "\"data\": \"c.npy\", \"frame_times_s\": [0, 0.2, 0.1, 0.3], "
              "\"flash_time_s\": 0.05, " LINEAR "}",
         PL_EFORMAT, "", {"'frame_times_s'", "must increase", "frame 2"}},
        {HEAD "\"data\": \"c.npy\", \"frame_times_s\": [0, 0.1, \"0.2\", 0.3], "
              "\"flash_time_s\": 0.05, " LINEAR "}",
         PL_EFORMAT, "", {"'frame_times_s'", "entry 2"}},
        {HEAD "\"data\": \"c.npy\", \"frame_times_s\": [0, 0.1, 0.2], "
              "\"flash_time_s\": 0.05, " LINEAR "}",
         PL_EFORMAT, "", {"'frame_times_s'", "c.npy", "4 frames"}},
        {HEAD "\"data\": \"c.npy\", \"width\": 6, " TIMING LINEAR "}", PL_EFORMAT, "",
         {"'width'", "c.npy", "5"}},
        {HEAD "\"data\": \"c.npy\", \"height\": 4, " TIMING LINEAR "}", PL_EFORMAT, "",
         {"'height'", "c.npy"}},
        {HEAD "\"data\": \"c.npy\", \"frame_count\": 5, " TIMING LINEAR "}", PL_EFORMAT, "",
         {"'frame_count'", "c.npy"}},
        {HEAD "\"data\": \"c.npy\", \"width\": \"5\", " TIMING LINEAR "}", PL_EFORMAT, "",
         {"'width'", "integer"}},
        {HEAD "\"data\": \"c.npy\", \"width\": 5.5, " TIMING LINEAR "}", PL_EFORMAT, "",
         {"'width'", "integer"}},
        {HEAD "\"data\": \"t.npy\", " TIMING LINEAR "}", PL_EFORMAT, "t.npy",
         {"truncated", "7 bytes missing"}},
        {HEAD "\"data\": \"x.npy\", " TIMING LINEAR "}", PL_EFORMAT, "x.npy",
         {"3 bytes after"}},
        {HEAD "\"data\": \"i2.npy\", " TIMING LINEAR "}", PL_EFORMAT, "i2.npy",
         {"int16", "uint16 or float32"}},
        {HEAD "\"data\": \"f8.npy\", " TIMING KELVIN "}", PL_EFORMAT, "f8.npy",
         {"float64", "uint16 or float32"}},
        {HEAD "\"data\": \"fo.npy\", " TIMING LINEAR "}", PL_EFORMAT, "fo.npy",
         {"Fortran"}},
        {HEAD "\"data\": \"d2.npy\", " TIMING LINEAR "}", PL_EFORMAT, "d2.npy", {"2-D", "3-D"}},
        {HEAD "\"data\": \"none.npy\", " TIMING LINEAR "}", PL_EIO, "none.npy",
         {"cannot open"}},
        {HEAD "\"data\": \"c.npy\", " TIMING KELVIN "}", PL_EFORMAT, "",
         {"'kelvin'", "float32", "c.npy"}},
        {HEAD "\"data\": \"f.npy\", " TIMING LINEAR "}", PL_EFORMAT, "",
         {"'linear'", "uint16", "f.npy"}},
        {HEAD "\"data\": \"f.npy\", " TIMING KELVIN ", \"saturation_count\": 100}", PL_EFORMAT,
         "", {"'saturation_count'"}},
        {HEAD "\"data\": \"c.npy\", " TIMING LINEAR ", \"saturation_count\": 70000}",
         PL_EFORMAT, "", {"'saturation_count'", "65535"}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"calibration\": {\"kind\": \"table\", "
              "\"counts\": [0, 100, 100], \"kelvin\": [290, 300, 310]}}",
         PL_EFORMAT, "", {"'calibration.counts'", "increase", "entry 2"}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"calibration\": {\"kind\": \"table\", "
              "\"counts\": [0, 200, 100], \"kelvin\": [290, 300, 310]}}",
         PL_EFORMAT, "", {"'calibration.counts'", "increase"}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"calibration\": {\"kind\": \"table\", "
              "\"counts\": [0], \"kelvin\": [290]}}",
         PL_EFORMAT, "", {"'calibration.counts'", "at least 2"}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"calibration\": {\"kind\": \"table\", "
              "\"counts\": [0, 1], \"kelvin\": [290, 291, 292]}}",
         PL_EFORMAT, "", {"'calibration.kelvin'", "3 points"}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"calibration\": {\"kind\": \"table\", "
              "\"counts\": [0, 1], \"kelvin\": [290, \"hot\"]}}",
         PL_EFORMAT, "", {"'calibration.kelvin'", "entry 1"}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"calibration\": {\"kind\": \"cubic\"}}",
         PL_EFORMAT, "", {"'calibration.kind'", "cubic"}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"calibration\": {\"kind\": \"linear\", "
              "\"gain_k\": 0, \"offset_k\": 273.15}}",
         PL_EFORMAT, "", {"'calibration.gain_k'", "> 0"}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"calibration\": {\"kind\": \"linear\", "
              "\"gain_k\": 0.01}}",
         PL_EFORMAT, "", {"'calibration.offset_k'"}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"calibration\": {\"kind\": \"kelvin\", "
              "\"gain_k\": 1}}",
         PL_EFORMAT, "", {"unknown key", "'gain_k'", "'calibration'"}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"calibration\": \"linear\"}", PL_EFORMAT, "",
         {"'calibration'", "object"}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"pitch_mm\": 0.5}", PL_EFORMAT, "",
         {"'calibration'"}},
        {HEAD "\"data\": \"c.npy\", \"frame_rate_hz\": 10, \"flash_time_s\": 0.35, " LINEAR "}",
         PL_EFORMAT, "", {"no frame after the flash"}},
        {HEAD "\"data\": \"c.npy\", \"frame_rate_hz\": 10, \"flash_time_s\": 0.3, " LINEAR "}",
         PL_EFORMAT, "", {"no frame after the flash"}},
        {HEAD "\"data\": \"c.npy\", \"frame_rate_hz\": 10, \"flash_time_s\": 0, " LINEAR "}",
         PL_EFORMAT, "", {"no frame before the flash"}},
        {HEAD "\"data\": \"c.npy\", \"frame_rate_hz\": 10, " LINEAR "}", PL_EFORMAT, "",
         {"'flash_time_s'"}},
        {HEAD "\"data\": \"c.npy\", \"frame_rate_hz\": 0, \"flash_time_s\": 0.15, " LINEAR "}",
         PL_EFORMAT, "", {"'frame_rate_hz'", "> 0"}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"preflash_frames\": 3, " LINEAR "}", PL_EFORMAT,
         "", {"'preflash_frames'", "3", "only 2"}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"preflash_frames\": 0, " LINEAR "}", PL_EFORMAT,
         "", {"'preflash_frames' is 0", "\"cold_reference\": \"subtracted\""}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"cold_reference\": \"subtracted\", " LINEAR "}",
         PL_EFORMAT, "", {"'cold_reference' is 'subtracted'", "2 frames come before the flash"}},
        {HEAD "\"data\": \"c.npy\", \"frame_rate_hz\": 10, \"flash_time_s\": -0.05, "
              "\"cold_reference\": \"subtracted\", \"preflash_frames\": 1, " LINEAR "}",
         PL_EFORMAT, "", {"'preflash_frames' is 1", "'cold_reference' is 'subtracted'"}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"cold_reference\": \"none\", " LINEAR "}",
         PL_EFORMAT, "", {"'cold_reference'", "'none'", "'preflash' or 'subtracted'"}},
        {HEAD "\"data\": \"c.npy\", " TIMING "\"cold_reference\": 0, " LINEAR "}",
         PL_EFORMAT, "", {"'cold_reference'"}},
        {HEAD "\"data\": \"c.npy\", \"frame_rate_hz\": 10, \"flash_time_s\": 0, "
              "\"cold_reference\": \"preflash\", " LINEAR "}",
         PL_EFORMAT, "", {"no frame before the flash"}},
        {HEAD "\"data\": \"c.npy\", " TIMING LINEAR ", \"pitch_mm\": -0.5}", PL_EFORMAT, "",
         {"'pitch_mm'"}},
        {HEAD "\"data\": \"c.npy\", " TIMING LINEAR ", \"pitch_mm\": [0.5]}", PL_EFORMAT, "",
         {"'pitch_mm'"}},
        {HEAD "\"data\": \"c.npy\", " TIMING LINEAR ", \"acquisition\": \"IR-1\"}", PL_EFORMAT,
         "", {"'acquisition'", "object"}},
        {HEAD "\"data\": 5, " TIMING LINEAR "}", PL_EFORMAT, "", {"'data'"}},
        {HEAD "\"data\": {\"folder\": \"c\", \"pattern\": \"%d.png\", \"size\": 1}, " TIMING
              LINEAR "}",
         PL_EFORMAT, "", {"unknown key", "'size'", "'data'"}},
    };
    run_bad_cases(dir, cases, sizeof cases / sizeof cases[0]);
    tu_rmtree(dir);
}

/* Frames that already hold the rise above the pre-flash level, recorded
 * from the flash on: said explicitly ("cold_reference": "subtracted",
 * "preflash_frames" 0 or absent), they open with no pre-flash frame and
 * the times as given; the default says "preflash" and counts them. */
static void test_seq__rise_frames_without_preflash(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    make_cube(dir, "c.npy", "<u2", 2, 0, 0);
    make_cube(dir, "f.npy", "<f4", 4, 0, 0);
    char *man = tu_path(dir, "m.json");
    static const char *const rise[] = {
        HEAD "\"data\": \"f.npy\", \"frame_rate_hz\": 10, \"flash_time_s\": -0.05, "
             "\"preflash_frames\": 0, \"cold_reference\": \"subtracted\", " KELVIN "}",
        HEAD "\"data\": \"c.npy\", \"frame_rate_hz\": 10, \"flash_time_s\": 0, "
             "\"cold_reference\": \"subtracted\", \"calibration\": {\"kind\": \"linear\", "
             "\"gain_k\": 0.001, \"offset_k\": 0}}",
    };
    static const double first[] = {0.05, 0.0};
    for (int k = 0; k < 2; k++) {
        write_text(man, rise[k]);
        pl_seq *s = NULL;
        pl_err err = {0};
        if (pl_seq_open(&s, man, &err))
            fail_msg("case %d: %s", k, err.msg);
        assert_int_equal(pl_seq_preflash_frames(s), 0);
        assert_int_equal(pl_seq_cold_reference(s), PL_SEQ_COLD_SUBTRACTED);
        assert_int_equal(pl_seq_frame_count(s), 4);
        tu_assert_close(pl_seq_times(s)[0], first[k], 1e-12, "first frame time");
        pl_seq_close(s);
    }
    write_text(man, HEAD "\"data\": \"c.npy\", " TIMING "\"cold_reference\": \"preflash\", "
                    LINEAR "}");
    pl_seq *s = NULL;
    pl_err err = {0};
    TU_OK(pl_seq_open(&s, man, &err));
    assert_int_equal(pl_seq_preflash_frames(s), 2);
    assert_int_equal(pl_seq_cold_reference(s), PL_SEQ_COLD_PREFLASH);
    pl_seq_close(s);
    free(man);
    tu_rmtree(dir);
}

/* Frame name patterns and PNG folders: bad patterns, a missing frame, a
 * folder that is not there, and a kelvin calibration on counts. */
static void test_seq__bad_png_folders_refused(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    /* frames 0..3 of 5 x 3 written by plyledger: seq-frames/frame-0000N.png */
    float frame[15];
    test_frame(frame, 5, 3, 0, 0, NULL);
    for (int pass = 0; pass < 2; pass++) {
        char *man = tu_path(dir, pass ? "miss.json" : "seq.json");
        write_small_png_sequence(man, frame);
        free(man);
    }
    char *gone = tu_path(dir, "miss-frames/frame-00002.png");
    assert_int_equal(unlink(gone), 0);
    free(gone);

#define FOLDER(pat) "\"data\": {\"folder\": \"seq-frames\", \"pattern\": \"" pat "\"}, "
    const bad_case cases[] = {
        {HEAD FOLDER("frame-%s.png") "\"frame_count\": 4, " TIMING LINEAR "}", PL_EFORMAT, "",
         {"'data.pattern'", "%d or %0Nd"}},
        {HEAD FOLDER("frame-%d-%d.png") "\"frame_count\": 4, " TIMING LINEAR "}", PL_EFORMAT,
         "", {"'data.pattern'", "more than one"}},
        {HEAD FOLDER("frame.png") "\"frame_count\": 4, " TIMING LINEAR "}", PL_EFORMAT, "",
         {"'data.pattern'", "no %d"}},
        {HEAD FOLDER("frame-%5d.png") "\"frame_count\": 4, " TIMING LINEAR "}", PL_EFORMAT, "",
         {"'data.pattern'", "%d or %0Nd"}},
        {HEAD FOLDER("frame-%n.png") "\"frame_count\": 4, " TIMING LINEAR "}", PL_EFORMAT, "",
         {"'data.pattern'"}},
        {HEAD FOLDER("frame-%0d.png") "\"frame_count\": 4, " TIMING LINEAR "}", PL_EFORMAT, "",
         {"'data.pattern'"}},
        {HEAD FOLDER("frame-%021d.png") "\"frame_count\": 4, " TIMING LINEAR "}", PL_EFORMAT,
         "", {"'data.pattern'"}},
        {HEAD FOLDER("frame-%05ld.png") "\"frame_count\": 4, " TIMING LINEAR "}", PL_EFORMAT,
         "", {"'data.pattern'"}},
        {HEAD FOLDER("../frame-%05d.png") "\"frame_count\": 4, " TIMING LINEAR "}", PL_EFORMAT,
         "", {"'data.pattern'", "path separator"}},
        {HEAD FOLDER("frame-%05d.png%") "\"frame_count\": 4, " TIMING LINEAR "}", PL_EFORMAT,
         "", {"'data.pattern'"}},
        {HEAD FOLDER("frame-%05d.png") TIMING LINEAR "}", PL_EFORMAT, "", {"'frame_count'"}},
        {HEAD FOLDER("frame-%05d.png") "\"frame_count\": 5, " TIMING LINEAR "}", PL_EFORMAT,
         "", {"frame 4 missing", "seq-frames/frame-00004.png"}},
        {HEAD FOLDER("frame-%05d.png") "\"frame_count\": 4, \"width\": 4, " TIMING LINEAR "}",
         PL_EFORMAT, "", {"'width'", "frame 0"}},
        {HEAD FOLDER("frame-%05d.png") "\"frame_count\": 4, " TIMING KELVIN "}", PL_EFORMAT, "",
         {"'kelvin'"}},
        {HEAD "\"data\": {\"folder\": \"miss-frames\", \"pattern\": \"frame-%05d.png\"}, "
              "\"frame_count\": 4, " TIMING LINEAR "}",
         PL_EFORMAT, "", {"frame 2 missing", "miss-frames/frame-00002.png"}},
        {HEAD "\"data\": {\"folder\": \"nowhere\", \"pattern\": \"frame-%05d.png\"}, "
              "\"frame_count\": 4, " TIMING LINEAR "}",
         PL_EFORMAT, "", {"nowhere"}},
        {HEAD "\"data\": {\"folder\": \"seq-frames\", \"pattern\": \"frame-%05d.png\", "
              "\"first\": -1}, \"frame_count\": 4, " TIMING LINEAR "}",
         PL_EFORMAT, "", {"'data.first'"}},
        {HEAD "\"data\": {\"folder\": \"seq-frames\", \"pattern\": \"frame-%05d.png\", "
              "\"first\": 1}, \"frame_count\": 4, " TIMING LINEAR "}",
         PL_EFORMAT, "", {"frame 3 missing", "frame-00004.png"}},
    };
#undef FOLDER
    run_bad_cases(dir, cases, sizeof cases / sizeof cases[0]);

    /* the patterns that are allowed, and the names they give */
    pl_seq__pattern pat;
    char name[64];
    assert_int_equal(pl_seq__parse_pattern(&pat, "a%%b-%03d.png", "m", "p", NULL), PL_OK);
    assert_int_equal(pl_seq__frame_name(name, sizeof name, &pat, 7), 0);
    assert_string_equal(name, "a%b-007.png");
    assert_int_equal(pl_seq__parse_pattern(&pat, "%d", "m", "p", NULL), PL_OK);
    assert_int_equal(pl_seq__frame_name(name, sizeof name, &pat, 1234), 0);
    assert_string_equal(name, "1234");
    assert_int_equal(pl_seq__frame_name(name, 3, &pat, 1234), -1);
    tu_rmtree(dir);
}

/* A file that changes after open is reported by the frame read, naming the
 * frame. */
static void test_seq__files_changed_after_open(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *man = tu_path(dir, "c.json");
    char *cube = tu_path(dir, "c.npy");
    write_cube(cube, "<u2", 4, 3, 5, 2, 0);
    write_text(man, HEAD "\"data\": \"c.npy\", " TIMING LINEAR "}");
    pl_seq *s = NULL;
    pl_err err = {0};
    float v[15];
    assert_int_equal(pl_seq_open(&s, man, &err), PL_OK);
    shorten(cube, 10);
    assert_int_equal(pl_seq_read_frame(s, 2, v, NULL, &err), PL_OK);
    assert_int_equal(pl_seq_read_frame(s, 3, v, NULL, &err), PL_EFORMAT);
    assert_msg(&err, cube, "frame 3", "truncated", NULL);
    pl_seq_close(s);

    char *pman = tu_path(dir, "p.json");
    test_frame(v, 5, 3, 0, 0, NULL);
    write_small_png_sequence(pman, v);
    assert_int_equal(pl_seq_open(&s, pman, &err), PL_OK);
    char *f1 = tu_path(dir, "p-frames/frame-00001.png");
    char *f2 = tu_path(dir, "p-frames/frame-00002.png");
    assert_int_equal(unlink(f1), 0);
    assert_int_equal(pl_seq_read_frame(s, 1, v, NULL, &err), PL_EIO);
    assert_msg(&err, f1, "frame 1", NULL);
    shorten(f2, 20);
    assert_int_equal(pl_seq_read_frame(s, 2, v, NULL, &err), PL_EFORMAT);
    assert_msg(&err, f2, "frame 2", NULL);
    assert_int_equal(pl_seq_read_frame(s, 3, v, NULL, &err), PL_OK);
    pl_seq_close(s);
    free(f1);
    free(f2);
    free(pman);
    free(cube);
    free(man);
    tu_rmtree(dir);
}

/* ---- the writer's failures ---------------------------------------------- */

static void test_seq__writer_refuses_bad_info(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *man = tu_path(dir, "w.json");
    pl_seq_info good = round_trip_info(PL_SEQ_NPY_UINT16);
    pl_seq_info bad[16];
    int n = 0;
    bad[n] = good, bad[n++].version = 2;
    bad[n] = good, bad[n++].width = 0;
    bad[n] = good, bad[n++].frame_count = 1;
    bad[n] = good, bad[n++].frame_rate_hz = 0;
    bad[n] = good, bad[n++].flash_time_s = NAN;
    bad[n] = good, bad[n++].flash_time_s = 0;      /* no frame before */
    bad[n] = good, bad[n++].flash_time_s = 0.16;   /* no frame after (last at 0.16 s) */
    bad[n] = good, bad[n++].preflash_frames = 4;   /* only 3 before 0.05 s */
    bad[n] = good, bad[n++].gain_k = 0;
    bad[n] = good, bad[n++].saturation_count = 0;
    bad[n] = good, bad[n++].pitch_v = NAN;
    bad[n] = good, bad[n++].acquisition_json = "[1]";
    bad[n] = good, bad[n++].acquisition_json = "{";
    bad[n] = good, bad[n++].storage = (pl_seq_storage)7;
    for (int i = 0; i < n; i++) {
        pl_err err = {0};
        pl_seq_writer *w = (pl_seq_writer *)&err;
        int rc = pl_seq_writer_open(&w, man, &bad[i], &err);
        if (rc != PL_EINVAL)
            fail_msg("case %d: %d (%s), PL_EINVAL expected", i, rc, err.msg);
        assert_null(w);
        assert_msg(&err, man, NULL);
    }
    /* a manifest named like its own cube */
    char *clash = tu_path(dir, "w.npy");
    pl_err err = {0};
    pl_seq_writer *w = NULL;
    assert_int_equal(pl_seq_writer_open(&w, clash, &good, &err), PL_EINVAL);
    assert_msg(&err, clash, NULL);
    free(clash);
    /* a folder that does not exist */
    char *nowhere = tu_path(dir, "no/w.json");
    assert_int_equal(pl_seq_writer_open(&w, nowhere, &good, &err), PL_EIO);
    assert_msg(&err, nowhere, NULL);
    free(nowhere);
    assert_int_equal(count_entries(dir), 0);
    free(man);
    tu_rmtree(dir);
}

/* A sequence left unfinished, discarded, or failing leaves nothing behind;
 * writing again replaces a sequence; a foreign folder is not replaced. */
static void test_seq__writer_leaves_no_half_sequence(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *man = tu_path(dir, "w.json");
    static const pl_seq_storage storages[] = {PL_SEQ_NPY_FLOAT32, PL_SEQ_NPY_UINT16,
                                              PL_SEQ_PNG16};
    for (size_t j = 0; j < 3; j++) {
        pl_seq_info info = round_trip_info(storages[j]);
        size_t n = (size_t)info.width * info.height;
        float *v = malloc(n * sizeof *v);
        assert_non_null(v);
        test_frame(v, info.width, info.height, 0, 0, NULL);
        pl_err err = {0};
        pl_seq_writer *w = NULL;

        /* too few frames: refused at close, nothing left */
        assert_int_equal(pl_seq_writer_open(&w, man, &info, &err), PL_OK);
        assert_int_equal(count_entries(dir), 1); /* the data being written */
        for (int k = 0; k < 4; k++)
            assert_int_equal(pl_seq_writer_frame(w, v, &err), PL_OK);
        assert_int_equal(pl_seq_writer_close(w, &err), PL_EINVAL);
        assert_msg(&err, man, "4 of 9", NULL);
        assert_int_equal(count_entries(dir), 0);

        /* discarded */
        assert_int_equal(pl_seq_writer_open(&w, man, &info, &err), PL_OK);
        for (int k = 0; k < 3; k++)
            assert_int_equal(pl_seq_writer_frame(w, v, &err), PL_OK);
        pl_seq_writer_discard(w);
        assert_int_equal(count_entries(dir), 0);
        pl_seq_writer_discard(NULL);
        assert_int_equal(pl_seq_writer_close(NULL, &err), PL_OK);

        /* one frame too many is refused; the sequence still finishes */
        assert_int_equal(pl_seq_writer_open(&w, man, &info, &err), PL_OK);
        for (uint32_t k = 0; k < info.frame_count; k++)
            assert_int_equal(pl_seq_writer_frame(w, v, &err), PL_OK);
        assert_int_equal(pl_seq_writer_frame(w, v, &err), PL_EINVAL);
        assert_msg(&err, man, "frame 9", NULL);
        assert_int_equal(pl_seq_writer_close(w, &err), PL_OK);
        assert_int_equal(count_entries(dir), 2);

        /* written again with other values: replaced, nothing else left */
        for (size_t i = 0; i < n; i++)
            v[i] += 1.0f;
        assert_int_equal(pl_seq_writer_open(&w, man, &info, &err), PL_OK);
        for (uint32_t k = 0; k < info.frame_count; k++)
            assert_int_equal(pl_seq_writer_frame(w, v, &err), PL_OK);
        assert_int_equal(pl_seq_writer_close(w, &err), PL_OK);
        assert_int_equal(count_entries(dir), 2);
        pl_seq *s = NULL;
        float *got = malloc(n * sizeof *got);
        assert_non_null(got);
        assert_int_equal(pl_seq_open(&s, man, &err), PL_OK);
        assert_int_equal(pl_seq_read_frame(s, 8, got, NULL, &err), PL_OK);
        for (size_t i = 0; i < n; i++)
            assert_true(fabs((double)got[i] - (double)v[i]) <= 0.005 + 4e-5);
        pl_seq_close(s);
        free(got);
        free(v);
        tu_rmtree(dir);
        dir = tu_tmpdir();
        free(man);
        man = tu_path(dir, "w.json");
    }

    /* a folder in the frames' place that holds something else stays */
    char *folder = tu_path(dir, "w-frames");
    assert_int_equal(mkdir(folder, 0777), 0);
    char *notes = tu_path(folder, "notes.txt");
    write_text(notes, "keep");
    pl_seq_info info = round_trip_info(PL_SEQ_PNG16);
    pl_err err = {0};
    pl_seq_writer *w = NULL;
    assert_int_equal(pl_seq_writer_open(&w, man, &info, &err), PL_EEXISTS);
    assert_msg(&err, man, "w-frames", NULL);
    assert_true(exists(notes));
    assert_int_equal(count_entries(dir), 1);
    free(notes);
    free(folder);
    free(man);
    tu_rmtree(dir);
}

/* ---- streaming ------------------------------------------------------- */

/* A 256 x 256 uint16 cube of `frames` frames as a sparse file (zeros cost
 * no disk), and its manifest's path in `man`. */
static void sparse_sequence(char *man, size_t cap, const char *dir, uint32_t frames)
{
    char cube[4096];
    snprintf(cube, sizeof cube, "%s/s%u.npy", dir, frames);
    FILE *fp = fopen(cube, "wb");
    assert_non_null(fp);
    uint64_t shape[3] = {frames, 256, 256};
    assert_int_equal(pl_npy_write_header(fp, "<u2", 3, shape, cube, NULL), PL_OK);
    long header = ftell(fp);
    assert_int_equal(fclose(fp), 0);
    assert_int_equal(truncate(cube, header + (off_t)frames * 256 * 256 * 2), 0);
    snprintf(man, cap, "%s/s%u.json", dir, frames);
    char text[512];
    snprintf(text, sizeof text,
             HEAD "\"data\": \"s%u.npy\", \"frame_rate_hz\": 100, \"flash_time_s\": 0.015, "
             "\"calibration\": {\"kind\": \"linear\", \"gain_k\": 0.01, \"offset_k\": 290}}",
             frames);
    write_text(man, text);
}

/* Peak resident memory (kB) of a child that reads every frame in order;
 * -1 when a read fails or gives other values than the zeros' 290 K. */
static long peak_kb_reading(const char *man)
{
    int fds[2];
    assert_int_equal(pipe(fds), 0);
    fflush(NULL);
    pid_t pid = fork();
    assert_true(pid >= 0);
    if (pid == 0) {
        close(fds[0]);
        long result = -1;
        pl_seq *s = NULL;
        if (pl_seq_open(&s, man, NULL) == PL_OK) {
            size_t n = (size_t)pl_seq_width(s) * pl_seq_height(s);
            float *v = malloc(n * sizeof *v);
            int ok = v != NULL;
            for (uint32_t k = 0; ok && k < pl_seq_frame_count(s); k++) {
                ok = pl_seq_read_frame(s, k, v, NULL, NULL) == PL_OK;
                for (size_t i = 0; ok && i < n; i += 4099)
                    ok = v[i] == 290.0f;
            }
            free(v);
            pl_seq_close(s);
            struct rusage ru;
            if (ok && getrusage(RUSAGE_SELF, &ru) == 0)
                result = ru.ru_maxrss;
        }
        ssize_t put = write(fds[1], &result, sizeof result);
        _exit(put == (ssize_t)sizeof result ? 0 : 1);
    }
    close(fds[1]);
    long kb = -2;
    assert_int_equal(read(fds[0], &kb, sizeof kb), (ssize_t)sizeof kb);
    close(fds[0]);
    int st;
    assert_int_equal(waitpid(pid, &st, 0), pid);
    assert_true(WIFEXITED(st) && WEXITSTATUS(st) == 0);
    return kb;
}

/* Reading 2000 frames takes no more memory than reading 200: the cube
 * (256 MiB) is streamed, never held. */
static void test_seq__reading_is_streamed(void **state)
{
    (void)state;
    /* paths on the stack: the children hold no heap of the test's */
    char dir[4096], small[4096], large[4096];
    char *made = tu_tmpdir();
    snprintf(dir, sizeof dir, "%s", made);
    free(made);
    sparse_sequence(small, sizeof small, dir, 200);
    sparse_sequence(large, sizeof large, dir, 2000);
    long a = peak_kb_reading(small);
    long b = peak_kb_reading(large);
    assert_true(a > 0 && b > 0);
    long cube_kb = 2000L * 256 * 256 * 2 / 1024;
    print_message("peak RSS reading 200 frames: %ld kB, 2000 frames: %ld kB (cube %ld kB)\n",
                  a, b, cube_kb);
    /* a frame is 128 KiB of counts; allow a few MiB of noise, far below
     * the 256 MiB a loaded cube would take */
    assert_true(b - a < cube_kb / 32);
    tu_rmtree(strdup(dir));
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_seq__round_trip_npy_float32),
        cmocka_unit_test(test_seq__round_trip_npy_uint16),
        cmocka_unit_test(test_seq__round_trip_png16),
        cmocka_unit_test(test_seq__numpy_table_cube_matches_numpy_interp),
        cmocka_unit_test(test_seq__table_rule),
        cmocka_unit_test(test_seq__pypng_frames_read),
        cmocka_unit_test(test_seq__written_sequences_load_in_numpy_and_pypng),
        cmocka_unit_test(test_seq__bad_manifests_and_cubes_refused),
        cmocka_unit_test(test_seq__rise_frames_without_preflash),
        cmocka_unit_test(test_seq__bad_png_folders_refused),
        cmocka_unit_test(test_seq__files_changed_after_open),
        cmocka_unit_test(test_seq__writer_refuses_bad_info),
        cmocka_unit_test(test_seq__writer_leaves_no_half_sequence),
        cmocka_unit_test(test_seq__reading_is_streamed),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
