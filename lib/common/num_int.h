/*
 * num_int.h - numbers every layer uses: pi, degrees and radians, small
 * vectors, the host's byte order; never installed.
 */
#ifndef PLYLEDGER_NUM_INT_H
#define PLYLEDGER_NUM_INT_H

#include <math.h>
#include <stdint.h>
#include <string.h>

/* POSIX defines M_PI in <math.h>; ISO C does not. */
#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

/* Degrees to radians, d (pi / 180). */
static inline double pl__deg2rad(double d)
{
    return d * (M_PI / 180.0);
}

/* Radians to degrees, r 180 / pi. */
static inline double pl__rad2deg(double r)
{
    return r * 180.0 / M_PI;
}

static inline double pl__dot3(const double a[3], const double b[3])
{
    return a[0] * b[0] + a[1] * b[1] + a[2] * b[2];
}

/* o = a x b. */
static inline void pl__cross3(double o[3], const double a[3], const double b[3])
{
    o[0] = a[1] * b[2] - a[2] * b[1];
    o[1] = a[2] * b[0] - a[0] * b[2];
    o[2] = a[0] * b[1] - a[1] * b[0];
}

/* 1 when the host stores the most significant byte first. */
static inline int pl__host_big_endian(void)
{
    const uint16_t one = 1;
    unsigned char first;
    memcpy(&first, &one, 1);
    return first == 0;
}

#endif
