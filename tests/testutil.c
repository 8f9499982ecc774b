/*
 * testutil.c - see testutil.h.
 */
#define _GNU_SOURCE
#include "testutil.h"

#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/wait.h>
#include <unistd.h>

tu_group tu_group_of(int argc, char **argv)
{
    if (argc == 1)
        return TU_UNIT;
    if (argc == 2 && strcmp(argv[1], "study") == 0)
        return TU_STUDY;
    fprintf(stderr, "usage: %s [study]\n", argv[0]);
    exit(2);
}

char *tu_tmpdir(void)
{
    const char *base = getenv("TMPDIR");
    char tmpl[4096];
    snprintf(tmpl, sizeof tmpl, "%s/plyledger-test-XXXXXX", base && *base ? base : "/tmp");
    if (!mkdtemp(tmpl)) {
        perror("mkdtemp");
        abort();
    }
    return strdup(tmpl);
}

void tu_rmtree(char *path)
{
    if (!path)
        return;
    pid_t pid = fork();
    if (pid == 0) {
        execlp("rm", "rm", "-rf", "--", path, (char *)NULL);
        _exit(127);
    }
    int st;
    if (pid > 0)
        waitpid(pid, &st, 0);
    free(path);
}

char *tu_path(const char *dir, const char *name)
{
    size_t n = strlen(dir) + strlen(name) + 2;
    char *p = malloc(n);
    if (!p)
        abort();
    snprintf(p, n, "%s/%s", dir, name);
    return p;
}

int tu_python(const char *script, ...)
{
    const char *py = getenv("PL_PYTHON");
    const char *dir = getenv("PL_REF_DIR");
    if (!py || !dir) {
        fprintf(stderr, "tu_python: PL_PYTHON and PL_REF_DIR must be set (run through meson test)\n");
        return -1;
    }
    const char *argv[64];
    int argc = 0;
    char *script_path = tu_path(dir, script);
    argv[argc++] = py;
    argv[argc++] = script_path;
    va_list ap;
    va_start(ap, script);
    const char *a;
    while ((a = va_arg(ap, const char *)) != NULL && argc < 63)
        argv[argc++] = a;
    va_end(ap);
    argv[argc] = NULL;
    fflush(stdout);
    fflush(stderr);
    pid_t pid = fork();
    if (pid == 0) {
        execv(py, (char *const *)(void *)argv);
        perror(py);
        _exit(127);
    }
    free(script_path);
    if (pid < 0)
        return -1;
    int st;
    if (waitpid(pid, &st, 0) < 0)
        return -1;
    return WIFEXITED(st) ? WEXITSTATUS(st) : -1;
}

unsigned char *tu_read_file(const char *path, size_t *len)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return NULL;
    size_t cap = 1 << 16, n = 0;
    unsigned char *buf = malloc(cap);
    size_t got;
    while (buf && (got = fread(buf + n, 1, cap - n, f)) > 0) {
        n += got;
        if (n == cap) {
            unsigned char *nb = realloc(buf, cap *= 2);
            if (!nb) {
                free(buf);
                buf = NULL;
            } else {
                buf = nb;
            }
        }
    }
    fclose(f);
    if (buf)
        *len = n;
    return buf;
}

int tu_write_file(const char *path, const void *data, size_t len)
{
    FILE *f = fopen(path, "wb");
    if (!f)
        return -1;
    int ok = fwrite(data, 1, len, f) == len;
    return (fclose(f) == 0 && ok) ? 0 : -1;
}

void tu_write_npy_text(const char *path, int major, const char *dict, const void *data,
                       size_t data_len)
{
    size_t lenbytes = major == 1 ? 2 : 4;
    size_t n = strlen(dict);
    size_t hlen = n + 1;
    size_t pad = 64 - ((6 + 2 + lenbytes + hlen) % 64);
    size_t total_h = n + pad + 1;
    size_t size = 8 + lenbytes + total_h + data_len;
    unsigned char *b = malloc(size);
    assert_non_null(b);
    memcpy(b, "\x93NUMPY", 6);
    b[6] = (unsigned char)major;
    b[7] = 0;
    for (size_t k = 0; k < lenbytes; k++)
        b[8 + k] = (unsigned char)(total_h >> (8 * k));
    memcpy(b + 8 + lenbytes, dict, n);
    memset(b + 8 + lenbytes + n, ' ', pad);
    b[8 + lenbytes + n + pad] = '\n';
    if (data_len)
        memcpy(b + 8 + lenbytes + total_h, data, data_len);
    assert_int_equal(tu_write_file(path, b, size), 0);
    free(b);
}

static int host_is_little_endian(void)
{
    const uint16_t one = 1;
    unsigned char first;
    memcpy(&first, &one, 1);
    return first == 1;
}

/* Turns n values of `size` bytes between little-endian and the host's
 * order (either way: a byte reversal or nothing). */
static void le_bytes(unsigned char *b, size_t size, size_t n)
{
    if (host_is_little_endian())
        return;
    for (size_t i = 0; i < n; i++)
        for (size_t k = 0; k < size / 2; k++) {
            unsigned char t = b[size * i + k];
            b[size * i + k] = b[size * i + size - 1 - k];
            b[size * i + size - 1 - k] = t;
        }
}

/* Little-endian values of `size` bytes from a file, in the host's byte
 * order, as malloc'd bytes. */
static void *read_le(const char *path, size_t size, size_t *n)
{
    size_t len = 0;
    unsigned char *b = tu_read_file(path, &len);
    if (!b)
        fail_msg("cannot read %s", path);
    if (len % size != 0)
        fail_msg("%s: %zu bytes, not a whole number of %zu-byte values", path, len, size);
    *n = len / size;
    le_bytes(b, size, *n);
    return b;
}

double *tu_read_f8(const char *path, size_t *n)
{
    return read_le(path, 8, n);
}

float *tu_read_f4(const char *path, size_t *n)
{
    return read_le(path, 4, n);
}

int32_t *tu_read_i4(const char *path, size_t *n)
{
    return read_le(path, 4, n);
}

static void write_le(const char *path, const void *v, size_t size, size_t n)
{
    unsigned char *b = malloc(size * n + 1);
    assert_non_null(b);
    memcpy(b, v, size * n);
    le_bytes(b, size, n);
    if (tu_write_file(path, b, size * n) != 0)
        fail_msg("cannot write %s", path);
    free(b);
}

void tu_write_npy_f4(const char *path, int ndim, const uint64_t *shape, const float *v)
{
    char dict[512];
    int k = snprintf(dict, sizeof dict, "{'descr': '<f4', 'fortran_order': False, 'shape': (");
    size_t n = 1;
    assert_true(ndim >= 1 && ndim <= 8);
    for (int i = 0; i < ndim; i++) {
        k += snprintf(dict + k, sizeof dict - (size_t)k, "%llu%s", (unsigned long long)shape[i],
                      ndim == 1 || i < ndim - 1 ? ", " : "");
        n *= (size_t)shape[i];
    }
    snprintf(dict + k, sizeof dict - (size_t)k, "), }");
    unsigned char *b = malloc(4 * n + 1);
    assert_non_null(b);
    memcpy(b, v, 4 * n);
    le_bytes(b, 4, n);
    tu_write_npy_text(path, 1, dict, b, 4 * n);
    free(b);
}

void tu_write_f4(const char *path, const float *v, size_t n)
{
    write_le(path, v, 4, n);
}

void tu_write_f8(const char *path, const double *v, size_t n)
{
    write_le(path, v, 8, n);
}

void tu_assert_close(double got, double want, double tol, const char *what)
{
    if (!(fabs(got - want) <= tol))
        fail_msg("%s%s%.17g, %.17g expected (within %g)", what ? what : "", what ? ": " : "",
                 got, want, tol);
}

void tu_assert_same_float(float got, float want, const char *what, size_t i)
{
    uint32_t a, b;
    memcpy(&a, &got, 4);
    memcpy(&b, &want, 4);
    if (isnan(want) ? isnan(got) : a == b)
        return;
    fail_msg("%s%svalue %zu: %.9g (0x%08x), %.9g (0x%08x) expected", what ? what : "",
             what ? " " : "", i, (double)got, (unsigned)a, (double)want, (unsigned)b);
}

void tu_assert_msg_has(const char *msg, const char *part)
{
    if (!strstr(msg, part))
        fail_msg("message \"%s\" lacks \"%s\"", msg, part);
    if (strchr(msg, '\n'))
        fail_msg("message \"%s\" is more than one line", msg);
}
