/*
 * test_npy.c - the .npy header reader and writer, and maps to and from .npy,
 * checked against numpy itself (tests/ref/npy_ref.py run with Debian's
 * python3-numpy) and against hand-made hostile headers.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <float.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "image/npy_int.h"
#include "plyledger/map.h"
#include "testutil.h"

/* ---- helpers ---------------------------------------------------------- */

static int read_header_of(pl_npy_header *hdr, const char *path, pl_err *err)
{
    FILE *f = fopen(path, "rb");
    assert_non_null(f);
    int rc = pl_npy_read_header(hdr, f, path, err);
    fclose(f);
    return rc;
}

/* ---- against numpy ---------------------------------------------------- */

/* numpy (numpy.save and numpy.lib.format.write_array with versions 2.0 and
 * 3.0) writes float32, float64, uint16 in both byte orders and a 3-D cube;
 * every value must load exactly as numpy's own float64 dump of it, after the
 * same conversion to float. */
static void test_npy__numpy_files_load_exactly(void **state)
{
    (void)state;
    static const struct {
        const char *name;
        uint32_t c, h, w;
    } files[] = {
        {"f4", 1, 5, 7},    {"f8", 1, 6, 4},    {"u2", 1, 3, 9},
        {"be_f4", 1, 4, 6}, {"be_f8", 1, 2, 5}, {"be_u2", 1, 5, 3},
        {"c3", 3, 4, 5},    {"v2", 1, 4, 3},    {"v3", 2, 3, 2},
    };
    char *dir = tu_tmpdir();
    assert_int_equal(tu_python("npy_ref.py", "write", dir, NULL), 0);
    for (size_t k = 0; k < sizeof files / sizeof files[0]; k++) {
        char name[64];
        snprintf(name, sizeof name, "%s.npy", files[k].name);
        char *npy = tu_path(dir, name);
        snprintf(name, sizeof name, "%s.raw", files[k].name);
        char *raw = tu_path(dir, name);
        pl_map *m = NULL;
        pl_err err = {0};
        int rc = pl_map_load_npy(&m, npy, &err);
        if (rc)
            fail_msg("%s: %s", files[k].name, err.msg);
        assert_int_equal(m->nchannels, files[k].c);
        assert_int_equal(m->height, files[k].h);
        assert_int_equal(m->width, files[k].w);
        /* .npy carries no pitch: it is left unknown (NaN) for the caller */
        assert_true(isnan(m->pitch_u) && isnan(m->pitch_v));
        assert_string_equal(m->channels[0].quantity, "");
        size_t n;
        double *want = tu_read_f8(raw, &n);
        assert_int_equal(n, (size_t)files[k].c * files[k].h * files[k].w);
        for (size_t i = 0; i < n; i++)
            tu_assert_same_float(m->data[i], (float)want[i], files[k].name, i);
        free(want);
        pl_map_free(m);
        free(npy);
        free(raw);
    }
    tu_rmtree(dir);
}

/* int16 in both byte orders and uint8 go through the header reader and
 * pl_npy_to_float (sequences use them); numpy wrote them. */
static void test_npy__small_integer_dtypes_convert(void **state)
{
    (void)state;
    static const struct {
        const char *name;
        pl_npy_dtype dtype;
        int big;
        size_t itemsize;
    } files[] = {
        {"le_i2", PL_NPY_I16, 0, 2},
        {"be_i2", PL_NPY_I16, 1, 2},
        {"u1", PL_NPY_U8, 0, 1},
    };
    char *dir = tu_tmpdir();
    assert_int_equal(tu_python("npy_ref.py", "write", dir, NULL), 0);
    for (size_t k = 0; k < sizeof files / sizeof files[0]; k++) {
        char name[64];
        snprintf(name, sizeof name, "%s.npy", files[k].name);
        char *npy = tu_path(dir, name);
        snprintf(name, sizeof name, "%s.raw", files[k].name);
        char *raw = tu_path(dir, name);
        FILE *f = fopen(npy, "rb");
        assert_non_null(f);
        pl_npy_header hdr;
        pl_err err = {0};
        assert_int_equal(pl_npy_read_header(&hdr, f, npy, &err), PL_OK);
        assert_int_equal(hdr.dtype, files[k].dtype);
        assert_int_equal(hdr.big_endian, files[k].big);
        assert_int_equal(hdr.itemsize, files[k].itemsize);
        assert_int_equal(hdr.ndim, 2);
        assert_int_equal(hdr.data_offset % 64, 0);
        assert_int_equal((uint64_t)ftell(f), hdr.data_offset);
        size_t n;
        double *want = tu_read_f8(raw, &n);
        assert_int_equal(hdr.count, n);
        unsigned char *bytes = malloc(n * hdr.itemsize);
        float *got = malloc(n * sizeof *got);
        assert_int_equal(fread(bytes, hdr.itemsize, n, f), n);
        pl_npy_to_float(got, bytes, n, &hdr);
        for (size_t i = 0; i < n; i++)
            tu_assert_same_float(got[i], (float)want[i], files[k].name, i);
        free(bytes);
        free(got);
        free(want);
        fclose(f);
        free(npy);
        free(raw);
    }
    tu_rmtree(dir);
}

/* Maps written by plyledger load in numpy.load with the same bits, dtype
 * '<f4', the right shape and numpy's header layout (checked by the script
 * with numpy.lib.format.read_magic / read_array_header_1_0). */
static void test_npy__saved_maps_load_in_numpy(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    pl_map *m2, *m3;
    assert_int_equal(pl_map_new(&m2, 6, 4, 1, NULL), PL_OK);
    assert_int_equal(pl_map_new(&m3, 6, 4, 3, NULL), PL_OK);
    for (size_t i = 0; i < 24; i++)
        m2->data[i] = (float)i * 0.3f - 2.0f;
    m2->data[1] = NAN;
    m2->data[2] = -0.0f;
    m2->data[3] = FLT_MAX;
    m2->data[4] = 1e-42f; /* subnormal */
    for (size_t i = 0; i < 72; i++)
        m3->data[i] = (float)(i * i) / 7.0f;
    m3->data[50] = -FLT_MAX; /* an infinity is refused (export_refuses_infinities in test_map.c) */
    char *p2 = tu_path(dir, "m2.npy"), *r2 = tu_path(dir, "m2.raw");
    char *p3 = tu_path(dir, "m3.npy"), *r3 = tu_path(dir, "m3.raw");
    pl_err err = {0};
    assert_int_equal(pl_map_save_npy(m2, p2, &err), PL_OK);
    assert_int_equal(pl_map_save_npy(m3, p3, &err), PL_OK);
    tu_write_f4(r2, m2->data, 24);
    tu_write_f4(r3, m3->data, 72);
    assert_int_equal(tu_python("npy_ref.py", "check", dir, "m2:4x6", "m3:3x4x6", NULL), 0);
    /* the check is able to fail: a wrong shape and changed values */
    assert_int_not_equal(tu_python("npy_ref.py", "check", dir, "m2:6x4", NULL), 0);
    m3->data[7] += 1.0f;
    tu_write_f4(r3, m3->data, 72);
    assert_int_not_equal(tu_python("npy_ref.py", "check", dir, "m3:3x4x6", NULL), 0);

    /* and back into plyledger unchanged */
    pl_map *back;
    assert_int_equal(pl_map_load_npy(&back, p2, &err), PL_OK);
    assert_int_equal(back->width, 6);
    assert_int_equal(back->height, 4);
    for (size_t i = 0; i < 24; i++)
        tu_assert_same_float(back->data[i], m2->data[i], "m2.npy", i);
    pl_map_free(back);
    pl_map_free(m2);
    pl_map_free(m3);
    free(p2);
    free(r2);
    free(p3);
    free(r3);
    tu_rmtree(dir);
}

/* ---- header syntax ---------------------------------------------------- */

/* Keys in any order, either quote, free spacing, trailing commas, Python 2
 * long literals, 0-D and 1-D shapes: all as Python's literal syntax (and so
 * numpy's reader) accepts them. */
static void test_npy__header_syntax_variants(void **state)
{
    (void)state;
    static const struct {
        const char *dict;
        int major;
        pl_npy_dtype dtype;
        int big, fortran, ndim;
        uint64_t shape0, shape1, count;
    } cases[] = {
        {"{'descr': '<f4', 'fortran_order': False, 'shape': (3, 4), }", 1, PL_NPY_F32, 0, 0,
         2, 3, 4, 12},
        {"{'shape': (3,), 'fortran_order': False, 'descr': '>f8'}", 1, PL_NPY_F64, 1, 0, 1, 3,
         0, 3},
        {"{\"fortran_order\": True,\n \"descr\": \"<u2\",\n \"shape\": (2L, 5L)}", 2,
         PL_NPY_U16, 0, 1, 2, 2, 5, 10},
        {"{ 'descr' : '|u1' , 'shape' : ( ) , 'fortran_order' : False , }", 3, PL_NPY_U8, 0,
         0, 0, 0, 0, 1},
        {"{'descr': '<i8', 'fortran_order': False, 'shape': (7, 0)}", 1, PL_NPY_UNSUPPORTED,
         0, 0, 2, 7, 0, 0},
        {"{'descr': [('a', '<f4'), ('b', '<i2')], 'fortran_order': False, 'shape': (2,)}", 1,
         PL_NPY_UNSUPPORTED, 0, 0, 1, 2, 0, 2},
        {"{'descr': '>i2', 'fortran_order': False, 'shape': (1, 1, 1, 1, 1, 1, 1, 9)}", 1,
         PL_NPY_I16, 1, 0, 8, 1, 1, 9},
    };
    char *dir = tu_tmpdir();
    char *path = tu_path(dir, "h.npy");
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        tu_write_npy_text(path, cases[k].major, cases[k].dict, NULL, 0);
        pl_npy_header hdr;
        pl_err err = {0};
        int rc = read_header_of(&hdr, path, &err);
        if (rc)
            fail_msg("case %zu: %s", k, err.msg);
        assert_int_equal(hdr.dtype, cases[k].dtype);
        assert_int_equal(hdr.big_endian, cases[k].big);
        assert_int_equal(hdr.fortran_order, cases[k].fortran);
        assert_int_equal(hdr.ndim, cases[k].ndim);
        if (cases[k].ndim >= 1)
            assert_int_equal(hdr.shape[0], cases[k].shape0);
        if (cases[k].ndim >= 2)
            assert_int_equal(hdr.shape[1], cases[k].shape1);
        assert_int_equal(hdr.count, cases[k].count);
        assert_int_equal(hdr.data_offset % 64, 0);
    }
    free(path);
    tu_rmtree(dir);
}

/* The writer's header: numpy's layout (format 1.0, the data on a 64-byte
 * boundary, a newline before it) and it reads back the same. */
static void test_npy__write_header_layout(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *path = tu_path(dir, "w.npy");
    const uint64_t shape[8] = {2, 3, 4, 5, 6, 7, 8, 4294967295u};
    for (int ndim = 0; ndim <= 8; ndim++) {
        FILE *f = fopen(path, "wb");
        assert_non_null(f);
        pl_err err = {0};
        assert_int_equal(pl_npy_write_header(f, "<f4", ndim, shape, path, &err), PL_OK);
        fclose(f);
        size_t len;
        unsigned char *b = tu_read_file(path, &len);
        assert_non_null(b);
        assert_int_equal(len % 64, 0);
        assert_memory_equal(b, "\x93NUMPY\x01\x00", 8);
        assert_int_equal((size_t)b[8] | (size_t)b[9] << 8, len - 10);
        assert_int_equal(b[len - 1], '\n');
        free(b);
        pl_npy_header hdr;
        assert_int_equal(read_header_of(&hdr, path, &err), PL_OK);
        assert_int_equal(hdr.ndim, ndim);
        assert_int_equal(hdr.data_offset, len);
        assert_string_equal(hdr.descr, "<f4");
        for (int i = 0; i < ndim; i++)
            assert_true(hdr.shape[i] == shape[i]);
    }
    FILE *f = fopen(path, "wb");
    assert_non_null(f);
    pl_err err = {0};
    assert_int_equal(pl_npy_write_header(f, "<f4", 9, shape, path, &err), PL_EINVAL);
    assert_int_equal(pl_npy_write_header(f, "<f4", -1, shape, path, &err), PL_EINVAL);
    assert_int_equal(pl_npy_write_header(f, "<f'4", 1, shape, path, &err), PL_EINVAL);
    assert_int_equal(pl_npy_write_header(f, "", 1, shape, path, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "w.npy");
    fclose(f);
    free(path);
    tu_rmtree(dir);
}

/* ---- refusals --------------------------------------------------------- */

/* A raw byte string and its length, NULs included. */
#define RAW(s) NULL, s, sizeof(s) - 1

typedef struct bad_case {
    const char *file;
    const char *dict;     /* NULL: raw bytes below */
    const char *raw;
    size_t raw_len;
    int major;
    int code;
    const char *says;     /* part of the message */
} bad_case;

/* Hostile or broken headers: each refused with the right code and one line
 * naming the file and the fault. */
static void test_npy__malformed_headers_refused(void **state)
{
    (void)state;
    static const bad_case cases[] = {
        {"magic.npy", RAW("\x93NUMPZ\x01\x00\x10\x00{}"), 1, PL_EFORMAT, "magic"},
        {"short.npy", RAW("\x93NU"), 1, PL_EFORMAT, "magic"},
        {"noversion.npy", RAW("\x93NUMPY\x01"), 1, PL_EFORMAT, "truncated"},
        {"nolen.npy", RAW("\x93NUMPY\x02\x00\x10\x00"), 2, PL_EFORMAT, "truncated"},
        {"version.npy", RAW("\x93NUMPY\x04\x00\x10\x00"), 1, PL_EFORMAT, "version 4.0"},
        {"minor.npy", RAW("\x93NUMPY\x01\x01\x10\x00"), 1, PL_EFORMAT, "version 1.1"},
        {"cut.npy", RAW("\x93NUMPY\x01\x00\x76\x00{'descr': '<f4', 'fortr"), 1, PL_EFORMAT,
         "truncated"},
        {"huge.npy", RAW("\x93NUMPY\x02\x00\xff\xff\xff\xff{"), 2, PL_EFORMAT, "exceeds"},
        {"nokey.npy", "{'descr': '<f4', 'fortran_order': False}", NULL, 0, 1, PL_EFORMAT,
         "no 'shape'"},
        {"nodescr.npy", "{'fortran_order': False, 'shape': (2,)}", NULL, 0, 1, PL_EFORMAT,
         "no 'descr'"},
        {"extra.npy", "{'descr': '<f4', 'fortran_order': False, 'shape': (2,), 'x': 1}", NULL,
         0, 1, PL_EFORMAT, "unknown key 'x'"},
        {"twice.npy", "{'descr': '<f4', 'descr': '<f8', 'fortran_order': False, 'shape': ()}",
         NULL, 0, 1, PL_EFORMAT, "repeats"},
        {"bool.npy", "{'descr': '<f4', 'fortran_order': 0, 'shape': (2,)}", NULL, 0, 1,
         PL_EFORMAT, "True or False"},
        {"tuple.npy", "{'descr': '<f4', 'fortran_order': False, 'shape': (2)}", NULL, 0, 1,
         PL_EFORMAT, "not a tuple"},
        {"list.npy", "{'descr': '<f4', 'fortran_order': False, 'shape': [2, 3]}", NULL, 0, 1,
         PL_EFORMAT, "tuple"},
        {"neg.npy", "{'descr': '<f4', 'fortran_order': False, 'shape': (-2, 3)}", NULL, 0, 1,
         PL_EFORMAT, "non-negative"},
        {"big.npy",
         "{'descr': '<f4', 'fortran_order': False, 'shape': (99999999999999999999999, 3)}",
         NULL, 0, 1, PL_EFORMAT, "too large"},
        {"product.npy",
         "{'descr': '<f4', 'fortran_order': False, 'shape': (4294967296, 4294967296)}", NULL,
         0, 1, PL_EFORMAT, "more elements"},
        {"dims.npy",
         "{'descr': '<f4', 'fortran_order': False, 'shape': (1,1,1,1,1,1,1,1,1)}", NULL, 0,
         1, PL_EFORMAT, "more than 8"},
        {"quote.npy", "{'descr': '<f4, 'fortran_order': False, 'shape': (2,)}", NULL, 0, 1,
         PL_EFORMAT, "malformed"},
        {"open.npy", "{'descr': '<f4', 'fortran_order': False, 'shape': (2,)", NULL, 0, 1,
         PL_EFORMAT, "malformed"},
        {"after.npy", "{'descr': '<f4', 'fortran_order': False, 'shape': (2,)} x", NULL, 0, 1,
         PL_EFORMAT, "after the closing"},
        {"notdict.npy", "['descr', '<f4']", NULL, 0, 1, PL_EFORMAT, "not a dict"},
        {"empty.npy", "{'descr': '', 'fortran_order': False, 'shape': (2,)}", NULL, 0, 1,
         PL_EFORMAT, "empty"},
    };
    char *dir = tu_tmpdir();
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        char *path = tu_path(dir, cases[k].file);
        if (cases[k].dict)
            tu_write_npy_text(path, cases[k].major, cases[k].dict, NULL, 0);
        else
            assert_int_equal(tu_write_file(path, cases[k].raw, cases[k].raw_len), 0);
        pl_npy_header hdr;
        pl_err err = {0};
        int rc = read_header_of(&hdr, path, &err);
        if (rc != cases[k].code)
            fail_msg("%s: code %d, %d expected (%s)", cases[k].file, rc, cases[k].code,
                     err.msg);
        tu_assert_msg_has(err.msg, cases[k].file);
        tu_assert_msg_has(err.msg, cases[k].says);
        /* the map loader passes the same refusal on */
        pl_map *m = (pl_map *)1;
        pl_err err2 = {0};
        assert_int_equal(pl_map_load_npy(&m, path, &err2), cases[k].code);
        assert_null(m);
        assert_string_equal(err.msg, err2.msg);
        free(path);
    }
    tu_rmtree(dir);
}

/* Headers that parse but whose arrays are not maps: numpy's own int64,
 * Fortran-order, 4-D and 1-D files, short data, empty and oversized shapes.
 * Oversized or short files are refused before anything is allocated (the
 * sanitizer build would abort on a terabyte calloc). */
static void test_npy__non_map_arrays_refused(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    assert_int_equal(tu_python("npy_ref.py", "write", dir, NULL), 0);
    float four[4] = {1, 2, 3, 4};
    struct {
        const char *file;
        const char *dict;
        size_t data_len;
        const char *says;
    } cases[] = {
        {"i8.npy", NULL, 0, "dtype int64 not supported (float32, float64 or uint16 expected)"},
        {"fortran.npy", NULL, 0, "Fortran"},
        {"d4.npy", NULL, 0, "4-D array not supported"},
        {"d1.npy", NULL, 0, "1-D array not supported"},
        {"u1map.npy", "{'descr': '|u1', 'fortran_order': False, 'shape': (2, 2)}", 4,
         "dtype uint8 not supported"},
        {"c16.npy", "{'descr': '<c16', 'fortran_order': False, 'shape': (1, 1)}", 16,
         "dtype complex128"},
        {"shortdata.npy", "{'descr': '<f4', 'fortran_order': False, 'shape': (3, 2)}", 16,
         "truncated data (16 of 24 bytes"},
        {"nodata.npy", "{'descr': '<f4', 'fortran_order': False, 'shape': (60000, 60000)}", 0,
         "truncated data"},
        {"wide.npy", "{'descr': '<f4', 'fortran_order': False, 'shape': (2, 65537)}", 0,
         "too large"},
        {"chans.npy", "{'descr': '<f4', 'fortran_order': False, 'shape': (257, 1, 1)}", 0,
         "too large"},
        {"zero.npy", "{'descr': '<f4', 'fortran_order': False, 'shape': (0, 4)}", 0, "empty"},
    };
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        char *path = tu_path(dir, cases[k].file);
        if (cases[k].dict)
            tu_write_npy_text(path, 1, cases[k].dict, four, cases[k].data_len);
        pl_map *m = (pl_map *)1;
        pl_err err = {0};
        int rc = pl_map_load_npy(&m, path, &err);
        if (rc != PL_EFORMAT)
            fail_msg("%s: code %d (%s)", cases[k].file, rc, err.msg);
        assert_null(m);
        tu_assert_msg_has(err.msg, cases[k].file);
        tu_assert_msg_has(err.msg, cases[k].says);
        free(path);
    }
    pl_map *m = (pl_map *)1;
    pl_err err = {0};
    char *missing = tu_path(dir, "missing.npy");
    assert_int_equal(pl_map_load_npy(&m, missing, &err), PL_EIO);
    assert_null(m);
    tu_assert_msg_has(err.msg, "missing.npy");
    free(missing);
    tu_rmtree(dir);
}

/* ---- values a map cannot hold ------------------------------------------ */

/*
 * numpy writes +inf and -inf in float32 (2-D and a 3-D big-endian cube)
 * and float64 values beyond float32's range (1e300, -1e39), which float32
 * can only hold as infinities: each file is refused with the count and
 * the first position (channel, row, column), naming the file; so are a
 * file of nothing but NaN and one whose only non-NaN value is infinite.
 */
static void test_npy__infinite_values_refused(void **state)
{
    (void)state;
    static const struct {
        const char *file;
        const char *says[2];
    } cases[] = {
        {"inf_f4.npy", {"2 infinite values", "the first (+inf) at channel 0, row 1, column 2"}},
        {"huge_f8.npy", {"2 infinite values", "float64 values beyond the float32 range"}},
        {"inf_c3.npy", {"1 infinite value", "(-inf) at channel 2, row 1, column 4"}},
        {"all_nan.npy", {"no data", "every value is NaN"}},
        {"nan_and_inf.npy", {"1 infinite value", "channel 0, row 1, column 1"}},
    };
    char *dir = tu_tmpdir();
    assert_int_equal(tu_python("npy_ref.py", "write", dir, NULL), 0);
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        char *path = tu_path(dir, cases[k].file);
        pl_map *m = (pl_map *)1;
        pl_err err = {0};
        int rc = pl_map_load_npy(&m, path, &err);
        if (rc != PL_EFORMAT)
            fail_msg("%s: code %d (%s)", cases[k].file, rc, err.msg);
        assert_null(m);
        tu_assert_msg_has(err.msg, path);
        tu_assert_msg_has(err.msg, cases[k].says[0]);
        tu_assert_msg_has(err.msg, cases[k].says[1]);
        m = (pl_map *)1;
        assert_int_equal(pl_map_load(&m, path, NULL), PL_EFORMAT);
        assert_null(m);
        free(path);
    }
    char *huge = tu_path(dir, "huge_f8.npy");
    pl_map *m;
    pl_err err = {0};
    assert_int_equal(pl_map_load_npy(&m, huge, &err), PL_EFORMAT);
    tu_assert_msg_has(err.msg, "row 0, column 1");
    free(huge);
    tu_rmtree(dir);
}

/* The explicit option makes each infinity no data and says how many, for
 * the record: the values are then numpy's own float32 conversion with
 * every infinity replaced by NaN (npy_ref.py wrote them). A file of
 * nothing but NaN and infinities is still refused: nothing is left. */
static void test_npy__infinite_values_to_nodata_on_request(void **state)
{
    (void)state;
    static const struct {
        const char *name;
        size_t n, made_nodata;
    } files[] = {{"inf_f4", 20, 2}, {"huge_f8", 12, 2}, {"inf_c3", 60, 1}};
    char *dir = tu_tmpdir();
    assert_int_equal(tu_python("npy_ref.py", "write", dir, NULL), 0);
    pl_map_load_options o = PL_MAP_LOAD_OPTIONS_INIT;
    o.infinite = PL_MAP_INFINITE_TO_NAN;
    for (size_t k = 0; k < sizeof files / sizeof files[0]; k++) {
        char name[64];
        snprintf(name, sizeof name, "%s.npy", files[k].name);
        char *npy = tu_path(dir, name);
        snprintf(name, sizeof name, "%s.raw", files[k].name);
        char *raw = tu_path(dir, name);
        pl_map *m = NULL;
        pl_map_load_info info = {PL_MAP_INFINITE_REFUSE, 99};
        pl_err err = {0};
        TU_OK(pl_map_load_v2(&m, &info, npy, &o, &err));
        assert_int_equal(info.infinite, PL_MAP_INFINITE_TO_NAN);
        assert_int_equal(info.infinite_to_nan, files[k].made_nodata);
        size_t n;
        double *want = tu_read_f8(raw, &n);
        assert_int_equal(n, files[k].n);
        for (size_t i = 0; i < n; i++)
            tu_assert_same_float(m->data[i], (float)want[i], files[k].name, i);
        char json[128];
        assert_true(pl_map_load_info_json(json, sizeof json, &info) < (int)sizeof json);
        char expect[128];
        snprintf(expect, sizeof expect,
                 "{\"infinite_values\": \"to-nan\", \"infinite_values_made_nodata\": %zu}",
                 files[k].made_nodata);
        assert_string_equal(json, expect);
        free(want);
        pl_map_free(m);
        /* the default still refuses the same file */
        assert_int_equal(pl_map_load_v2(&m, &info, npy, NULL, &err), PL_EFORMAT);
        assert_null(m);
        free(npy);
        free(raw);
    }
    char *mixed = tu_path(dir, "nan_and_inf.npy");
    pl_map *m = (pl_map *)1;
    pl_err err = {0};
    assert_int_equal(pl_map_load_v2(&m, NULL, mixed, &o, &err), PL_EFORMAT);
    assert_null(m);
    tu_assert_msg_has(err.msg, "no data (every value is NaN once the infinities are made no data)");
    free(mixed);
    /* a file without infinities loads the same either way, and says so */
    char *f4 = tu_path(dir, "f4.npy");
    pl_map_load_info info;
    TU_OK(pl_map_load_v2(&m, &info, f4, &o, &err));
    assert_int_equal(info.infinite_to_nan, 0);
    pl_map_free(m);
    TU_OK(pl_map_load_v2(&m, &info, f4, NULL, &err));
    assert_int_equal(info.infinite, PL_MAP_INFINITE_REFUSE);
    char json[64];
    pl_map_load_info_json(json, sizeof json, &info);
    assert_string_equal(json, "{\"infinite_values\": \"refuse\"}");
    pl_map_free(m);
    free(f4);
    tu_rmtree(dir);
}

/* What a .npy holds after the data promised by its header is not a map's:
 * refused like a sequence cube's, with both byte counts. */
static void test_npy__trailing_bytes_refused(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *path = tu_path(dir, "trailing.npy");
    float v[4] = {1, 2, 3, 4};
    tu_write_npy_text(path, 1, "{'descr': '<f4', 'fortran_order': False, 'shape': (1, 3)}", v,
                   sizeof v);
    pl_map *m = (pl_map *)1;
    pl_err err = {0};
    assert_int_equal(pl_map_load_npy(&m, path, &err), PL_EFORMAT);
    assert_null(m);
    tu_assert_msg_has(err.msg, path);
    tu_assert_msg_has(err.msg, "4 bytes after the 12 bytes of data");
    /* the same file without them loads */
    tu_write_npy_text(path, 1, "{'descr': '<f4', 'fortran_order': False, 'shape': (1, 3)}", v,
                   3 * sizeof v[0]);
    TU_OK(pl_map_load_npy(&m, path, &err));
    assert_true(m->data[2] == 3.0f);
    pl_map_free(m);
    free(path);
    tu_rmtree(dir);
}

/* A save that cannot create its file says so and names it. */
static void test_npy__save_to_missing_folder_fails(void **state)
{
    (void)state;
    pl_map *m;
    assert_int_equal(pl_map_new(&m, 2, 2, 1, NULL), PL_OK);
    pl_err err = {0};
    assert_int_equal(pl_map_save_npy(m, "/nonexistent-dir/x.npy", &err), PL_EIO);
    tu_assert_msg_has(err.msg, "/nonexistent-dir/x.npy");
    pl_map_free(m);
}

static void test_npy__dtype_names(void **state)
{
    (void)state;
    assert_string_equal(pl_npy_dtype_name(PL_NPY_U8), "uint8");
    assert_string_equal(pl_npy_dtype_name(PL_NPY_U16), "uint16");
    assert_string_equal(pl_npy_dtype_name(PL_NPY_I16), "int16");
    assert_string_equal(pl_npy_dtype_name(PL_NPY_F32), "float32");
    assert_string_equal(pl_npy_dtype_name(PL_NPY_F64), "float64");
    assert_string_equal(pl_npy_dtype_name(PL_NPY_UNSUPPORTED), "unsupported");
    char b[40];
    /* numpy's names for these descr strings, numpy.dtype(descr).name (from
     * memory; numpy 1.24 gives the same) */
    assert_string_equal(pl_npy__descr_name(b, sizeof b, "<i8"), "int64");
    assert_string_equal(pl_npy__descr_name(b, sizeof b, ">u4"), "uint32");
    assert_string_equal(pl_npy__descr_name(b, sizeof b, "|b1"), "bool");
    assert_string_equal(pl_npy__descr_name(b, sizeof b, "<c16"), "complex128");
    assert_string_equal(pl_npy__descr_name(b, sizeof b, "<f2"), "float16");
    assert_string_equal(pl_npy__descr_name(b, sizeof b, "<U5"), "'<U5'");
    assert_string_equal(pl_npy__descr_name(b, sizeof b, "<M8[ns]"), "'<M8[ns]'");
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_npy__numpy_files_load_exactly),
        cmocka_unit_test(test_npy__small_integer_dtypes_convert),
        cmocka_unit_test(test_npy__saved_maps_load_in_numpy),
        cmocka_unit_test(test_npy__header_syntax_variants),
        cmocka_unit_test(test_npy__write_header_layout),
        cmocka_unit_test(test_npy__malformed_headers_refused),
        cmocka_unit_test(test_npy__non_map_arrays_refused),
        cmocka_unit_test(test_npy__infinite_values_refused),
        cmocka_unit_test(test_npy__infinite_values_to_nodata_on_request),
        cmocka_unit_test(test_npy__trailing_bytes_refused),
        cmocka_unit_test(test_npy__save_to_missing_folder_fails),
        cmocka_unit_test(test_npy__dtype_names),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
