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

#endif
