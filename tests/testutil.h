/*
 * testutil.h - small helpers shared by the cmocka tests: scratch folders and
 * running the reference scripts in tests/ref with Debian's python3.
 *
 * The test runner (meson) sets PL_PYTHON (the interpreter that has numpy,
 * scipy, scikit-image and pypng: /usr/bin/python3) and PL_REF_DIR (the
 * tests/ref folder). A reference check that cannot run fails; it never
 * skips.
 */
#ifndef PLYLEDGER_TESTUTIL_H
#define PLYLEDGER_TESTUTIL_H

#include <stddef.h>
#include <stdint.h>

/* Each test program runs one of two groups: its unit tests (no argument),
 * which every build runs, or its study (the argument "study"): the rest of
 * the long loops over many cases (pairs, noise levels, depths), which
 * tests/run runs once, in the optimised build. A check whose loop is
 * shared out keeps a representative part of its cases in the unit group,
 * so every behaviour is tested in every build and every case in the
 * study's. */
typedef enum tu_group { TU_UNIT, TU_STUDY } tu_group;

/* The group main()'s arguments ask for; any other argument prints the
 * usage and exits 2. */
tu_group tu_group_of(int argc, char **argv);

/* A fresh scratch folder under $TMPDIR (or /tmp), removed by tu_rmtree().
 * Returns a malloc'd path; aborts the test program when it cannot. */
char *tu_tmpdir(void);

/* Remove a folder and everything below it, then free(path). */
void tu_rmtree(char *path);

/* path = dir + "/" + name, malloc'd. */
char *tu_path(const char *dir, const char *name);

/* Run `$PL_PYTHON $PL_REF_DIR/<script> args...` (args NULL terminated).
 * Returns the exit status (0 on success); stdout and stderr pass through. */
int tu_python(const char *script, ...);

/* Read a whole file; returns malloc'd bytes and sets *len, or NULL. */
unsigned char *tu_read_file(const char *path, size_t *len);

/* Write bytes to a file; returns 0 on success. */
int tu_write_file(const char *path, const void *data, size_t len);

/* The helpers below check as they go: a failure fails the running cmocka
 * test (fail_msg) instead of returning. */

/* Little-endian float64 values of a file (as numpy's
 * ndarray.astype('<f8').tofile() writes them), whatever the host's byte
 * order. Returns malloc'd values and their count in *n; fails the test when
 * the file cannot be read or its size is not a multiple of 8. */
double *tu_read_f8(const char *path, size_t *n);

/* The same for little-endian float32 ('<f4') and int32 ('<i4') files. */
float *tu_read_f4(const char *path, size_t *n);
int32_t *tu_read_i4(const char *path, size_t *n);

/* Write n float32 (float64) values little-endian, bit for bit (what
 * numpy.fromfile(path, dtype='<f4') ('<f8') reads); fails the test on
 * error. */
void tu_write_f4(const char *path, const float *v, size_t n);
void tu_write_f8(const char *path, const double *v, size_t n);

/* A .npy file around a hand-written header dict: the prefix of format
 * version `major`.0, the dict, padding and a newline as numpy lays them out
 * (header length a multiple of 64), then data_len bytes of data (may be
 * NULL when data_len is 0); fails the test on error. */
void tu_write_npy_text(const char *path, int major, const char *dict, const void *data,
                       size_t data_len);

/* A float32 .npy file ('<f4', C order) of the given shape (ndim <= 8)
 * holding n = prod(shape) values v, little-endian whatever the host, its
 * header written as numpy writes it (tu_write_npy_text); fails the test
 * on error. */
void tu_write_npy_f4(const char *path, int ndim, const uint64_t *shape, const float *v);

/* Fails the test unless |got - want| <= tol (NaN never passes). `what`
 * (may be NULL) names the value in the failure message. */
void tu_assert_close(double got, double want, double tol, const char *what);

/* Fails the test unless got equals want bit for bit, any NaN matching any
 * NaN. `what` (may be NULL) and the index i name the value in the failure
 * message. */
void tu_assert_same_float(float got, float want, const char *what, size_t i);

/* Fails the test unless the error message `msg` contains `part` and is a
 * single line. */
void tu_assert_msg_has(const char *msg, const char *part);

/* Fails the test unless `call` returns PL_OK, quoting the call, its status
 * and the message of the caller's `pl_err err` (a macro: plyledger/common.h
 * must be included where it is used). */
#define TU_OK(call)                                                              \
    do {                                                                         \
        int tu_ok_rc_ = (call);                                                  \
        if (tu_ok_rc_ != PL_OK)                                                  \
            fail_msg("%s -> %d: %s", #call, tu_ok_rc_, err.msg);                 \
    } while (0)

#endif
