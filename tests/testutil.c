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

double *tu_read_f8(const char *path, size_t *n)
{
    size_t len = 0;
    unsigned char *b = tu_read_file(path, &len);
    if (!b)
        fail_msg("cannot read %s", path);
    if (len % 8 != 0)
        fail_msg("%s: %zu bytes, not a whole number of float64 values", path, len);
    *n = len / 8;
    double *v = malloc((*n ? *n : 1) * sizeof *v);
    assert_non_null(v);
    for (size_t i = 0; i < *n; i++) {
        uint64_t u = 0;
        for (int k = 7; k >= 0; k--)
            u = u << 8 | b[8 * i + (size_t)k];
        memcpy(&v[i], &u, sizeof u);
    }
    free(b);
    return v;
}

void tu_write_f4(const char *path, const float *v, size_t n)
{
    unsigned char *b = malloc(4 * n + 1);
    assert_non_null(b);
    for (size_t i = 0; i < n; i++) {
        uint32_t u;
        memcpy(&u, &v[i], 4);
        for (int k = 0; k < 4; k++)
            b[4 * i + (size_t)k] = (unsigned char)(u >> (8 * k));
    }
    if (tu_write_file(path, b, 4 * n) != 0)
        fail_msg("cannot write %s", path);
    free(b);
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
