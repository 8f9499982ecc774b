/*
 * detect_measure.c - the measures of labelled regions: sums and moments,
 * perimeter, the half-maximum lobe, and the outline's chain code (see
 * detect_int.h and plyledger/detect.h).
 */
#include "image/detect_int.h"
#include "common/common_int.h"

#include <assert.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void pl_detect__accumulate(pl_detect__sums *sums, uint32_t nlabels, const uint32_t *labels,
                           const float *signal, uint32_t w, uint32_t h)
{
    memset(sums, 0, (size_t)nlabels * sizeof *sums);
    for (uint32_t k = 0; k < nlabels; k++)
        sums[k].peak = -INFINITY;
    for (uint32_t y = 0; y < h; y++) {
        const uint32_t *l = labels + (size_t)y * w;
        const float *sg = signal ? signal + (size_t)y * w : NULL;
        for (uint32_t x = 0; x < w; x++) {
            uint32_t lab = l[x];
            if (lab == 0 || lab > nlabels)
                continue;
            pl_detect__sums *s = &sums[lab - 1];
            if (s->n == 0) {
                s->ref_col = s->col0 = s->col1 = x;
                s->ref_row = s->row0 = s->row1 = y;
            }
            if (x < s->col0)
                s->col0 = x;
            if (x > s->col1)
                s->col1 = x;
            s->row1 = y;
            double dc = (double)x - (double)s->ref_col, dr = (double)(y - s->ref_row);
            s->n++;
            s->sc += dc;
            s->sr += dr;
            s->scc += dc * dc;
            s->srr += dr * dr;
            s->scr += dc * dr;
            if (sg) {
                float v = sg[x];
                if (v == v) {
                    s->sum += v;
                    if (v > s->peak) {
                        s->peak = v;
                        s->peak_col = x;
                        s->peak_row = y;
                    }
                }
            }
        }
    }
}

void pl_detect__centroid(const pl_detect__sums *s, double *col, double *row)
{
    if (s->n == 0) {
        *col = *row = NAN;
        return;
    }
    double n = (double)s->n;
    *col = (double)s->ref_col + s->sc / n;
    *row = (double)s->ref_row + s->sr / n;
}

/*
 * The covariance of the positions, population-normalised (mu_pq / mu_00,
 * skimage.measure.regionprops' inertia tensor has the same eigenvalues),
 * in a frame scaled by the pitches; its eigenvalues in closed form.
 */
void pl_detect__axes(const pl_detect__sums *s, double pu, double pv, double *major,
                     double *minor, double *orientation_deg)
{
    if (s->n == 0) {
        *major = *minor = *orientation_deg = NAN;
        return;
    }
    double n = (double)s->n, mc = s->sc / n, mr = s->sr / n;
    double vc = (s->scc / n - mc * mc) * pu * pu;
    double vr = (s->srr / n - mr * mr) * pv * pv;
    double cv = (s->scr / n - mc * mr) * pu * pv;
    if (vc < 0)
        vc = 0;
    if (vr < 0)
        vr = 0;
    double mean = 0.5 * (vc + vr), half = 0.5 * (vc - vr);
    double root = sqrt(half * half + cv * cv);
    double l1 = mean + root, l2 = mean - root;
    *major = 4.0 * sqrt(l1 > 0 ? l1 : 0);
    *minor = 4.0 * sqrt(l2 > 0 ? l2 : 0);
    double a = 0.5 * atan2(2.0 * cv, vc - vr) * (180.0 / 3.14159265358979323846);
    if (a <= -90.0)
        a += 180.0;
    *orientation_deg = a;
}

/*
 * skimage.measure.perimeter(image, neighbourhood=4), after Benkrid and
 * Crookes, "Design and FPGA implementation of a perimeter estimator"
 * (Queen's University of Belfast): the border is the region less its
 * erosion by the 4-neighbourhood cross (a pixel with a 4-neighbour outside
 * the region or the map); each border pixel weighs by its code 1 + 2 x
 * (border pixels among its 4-neighbours) + 10 x (among its diagonal
 * neighbours): codes 5, 7, 15, 17, 25, 27 weigh 1, 21 and 33 sqrt(2), 13
 * and 23 (1 + sqrt(2)) / 2, every other code 0.
 */
static double perimeter_weight(unsigned code)
{
    switch (code) {
    case 5: case 7: case 15: case 17: case 25: case 27:
        return 1.0;
    case 21: case 33:
        return 1.4142135623730951;
    case 13: case 23:
        return 1.2071067811865475;
    default:
        return 0.0;
    }
}

int pl_detect__perimeter(double *perim, uint32_t nlabels, const uint32_t *labels, uint32_t w,
                         uint32_t h)
{
    size_t np = (size_t)w * h;
    uint8_t *border = malloc(np);
    if (!border)
        return PL_ENOMEM;
    for (uint32_t k = 0; k < nlabels; k++)
        perim[k] = 0.0;
    for (uint32_t y = 0; y < h; y++)
        for (uint32_t x = 0; x < w; x++) {
            size_t i = (size_t)y * w + x;
            uint32_t l = labels[i];
            border[i] = l != 0 &&
                        (x == 0 || y == 0 || x + 1 == w || y + 1 == h || labels[i - 1] != l ||
                         labels[i + 1] != l || labels[i - w] != l || labels[i + w] != l);
        }
    for (uint32_t y = 0; y < h; y++)
        for (uint32_t x = 0; x < w; x++) {
            size_t i = (size_t)y * w + x;
            uint32_t l = labels[i];
            if (!border[i] || l > nlabels)
                continue;
            unsigned code = 1;
            for (int dy = -1; dy <= 1; dy++)
                for (int dx = -1; dx <= 1; dx++) {
                    if (!dx && !dy)
                        continue;
                    long xx = (long)x + dx, yy = (long)y + dy;
                    if (xx < 0 || yy < 0 || xx >= (long)w || yy >= (long)h)
                        continue;
                    size_t j = (size_t)yy * w + (size_t)xx;
                    if (labels[j] == l && border[j])
                        code += (dx && dy) ? 10u : 2u;
                }
            perim[l - 1] += perimeter_weight(code);
        }
    free(border);
    return PL_OK;
}

/* Freeman's directions: 0 is +col, each next one 45 degrees toward -row. */
static const int step_col[8] = {1, 1, 0, -1, -1, -1, 0, 1};
static const int step_row[8] = {0, -1, -1, -1, 0, 1, 1, 1};

static int in_region(const uint32_t *labels, uint32_t w, uint32_t h, long c, long r,
                     uint32_t label)
{
    return c >= 0 && r >= 0 && c < (long)w && r < (long)h &&
           labels[(size_t)r * w + (size_t)c] == label;
}

/*
 * Suzuki and Abe's (1985) outer border following, step 3: from the first
 * pixel, whose west neighbour is outside, the first region pixel
 * clockwise from the west is where the trace will come back from; then
 * around each pixel reached, counter-clockwise from the one after the
 * pixel we came from, the first region pixel is the next step. The trace
 * ends on reaching the first pixel again from that last pixel.
 */
int pl_detect__outline(char **outline, const uint32_t *labels, uint32_t w, uint32_t h,
                       uint32_t label, uint32_t col, uint32_t row)
{
    size_t cap = 64, len = 0;
    char *s = malloc(cap);
    *outline = NULL;
    if (!s)
        return PL_ENOMEM;
    len = (size_t)snprintf(s, cap, "%lu,%lu:", (unsigned long)col, (unsigned long)row);
    long c0 = col, r0 = row;
    int d1 = -1;
    for (int k = 0; k < 8; k++) {
        int d = (4 - k + 8) % 8; /* clockwise from the west */
        if (in_region(labels, w, h, c0 + step_col[d], r0 + step_row[d], label)) {
            d1 = d;
            break;
        }
    }
    if (d1 >= 0) {
        long c1 = c0 + step_col[d1], r1 = r0 + step_row[d1];
        long c3 = c0, r3 = r0;
        int back = d1; /* direction from the current pixel to the previous one */
        for (;;) {
            int d4 = -1;
            for (int k = 1; k <= 8; k++) {
                int d = (back + k) % 8;
                if (in_region(labels, w, h, c3 + step_col[d], r3 + step_row[d], label)) {
                    d4 = d;
                    break;
                }
            }
            assert(d4 >= 0); /* the previous pixel is in the region */
            if (len + 2 > cap) {
                char *t = realloc(s, cap * 2);
                if (!t) {
                    free(s);
                    return PL_ENOMEM;
                }
                s = t;
                cap *= 2;
            }
            s[len++] = (char)('0' + d4);
            long c4 = c3 + step_col[d4], r4 = r3 + step_row[d4];
            if (c4 == c0 && r4 == r0 && c3 == c1 && r3 == r1)
                break;
            back = (d4 + 4) % 8;
            c3 = c4;
            r3 = r4;
        }
    }
    s[len] = '\0';
    *outline = s;
    return PL_OK;
}

PL_EXPORT int pl_detect_outline_decode(uint32_t **points, size_t *n, const char *outline,
                                       pl_err *err)
{
    *points = NULL;
    *n = 0;
    const char *p = outline;
    unsigned long long c = 0, r = 0;
    int digits = 0;
    for (; *p >= '0' && *p <= '9'; p++, digits++)
        if ((c = c * 10 + (unsigned long long)(*p - '0')) > UINT32_MAX)
            break;
    if (!digits || *p != ',' || c > UINT32_MAX)
        return pl__err(err, PL_EFORMAT, "outline does not start with COL,ROW:");
    p++;
    for (digits = 0; *p >= '0' && *p <= '9'; p++, digits++)
        if ((r = r * 10 + (unsigned long long)(*p - '0')) > UINT32_MAX)
            break;
    if (!digits || *p != ':' || r > UINT32_MAX)
        return pl__err(err, PL_EFORMAT, "outline does not start with COL,ROW:");
    p++;
    size_t steps = strlen(p);
    for (size_t i = 0; i < steps; i++)
        if (p[i] < '0' || p[i] > '7')
            return pl__err(err, PL_EFORMAT,
                           "outline step %lu is '%c', not a direction 0-7",
                           (unsigned long)i + 1, p[i]);
    size_t count = steps ? steps : 1;
    uint32_t *pts = malloc(2 * count * sizeof *pts);
    if (!pts)
        return pl__err(err, PL_ENOMEM, "out of memory for an outline of %lu steps",
                       (unsigned long)steps);
    long long cc = (long long)c, rr = (long long)r;
    pts[0] = (uint32_t)cc;
    pts[1] = (uint32_t)rr;
    for (size_t i = 0; i < steps; i++) {
        int d = p[i] - '0';
        cc += step_col[d];
        rr += step_row[d];
        if (cc < 0 || rr < 0 || cc > (long long)UINT32_MAX || rr > (long long)UINT32_MAX) {
            free(pts);
            return pl__err(err, PL_EFORMAT, "outline step %lu leaves the pixel grid",
                           (unsigned long)i + 1);
        }
        if (i + 1 < steps) {
            pts[2 * (i + 1)] = (uint32_t)cc;
            pts[2 * (i + 1) + 1] = (uint32_t)rr;
        }
    }
    if (steps && (cc != (long long)c || rr != (long long)r)) {
        free(pts);
        return pl__err(err, PL_EFORMAT, "outline does not return to its first pixel");
    }
    *points = pts;
    *n = count;
    return PL_OK;
}

uint64_t pl_detect__half_max(const uint32_t *labels, const float *signal, uint32_t w,
                             uint32_t h, uint32_t label, uint32_t peak_col, uint32_t peak_row,
                             float half, uint32_t *seen, uint32_t *stack)
{
    size_t top = 0, start = (size_t)peak_row * w + peak_col;
    uint64_t count = 0;
    if (labels[start] != label || !(signal[start] >= half))
        return 0;
    seen[start] = label;
    stack[top++] = (uint32_t)start;
    while (top) {
        size_t i = stack[--top];
        count++;
        uint32_t x = (uint32_t)(i % w), y = (uint32_t)(i / w);
        for (int d = 0; d < 8; d++) {
            long xx = (long)x + step_col[d], yy = (long)y + step_row[d];
            if (xx < 0 || yy < 0 || xx >= (long)w || yy >= (long)h)
                continue;
            size_t j = (size_t)yy * w + (size_t)xx;
            if (labels[j] == label && seen[j] != label && signal[j] >= half) {
                seen[j] = label;
                stack[top++] = (uint32_t)j;
            }
        }
    }
    return count;
}
