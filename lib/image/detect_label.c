/*
 * detect_label.c - 8-connected labelling and hysteresis thresholding
 * (see detect_int.h).
 */
#include "image/detect_int.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/*
 * Union-find over provisional labels in which every tree's root is its
 * smallest label, as in Wu, Otoo and Suzuki (2009), "Optimizing two-pass
 * connected-component labeling algorithms", Pattern Anal. Applic. 12:
 * parent[i] < i for every label that is not a root, so one pass in
 * increasing order flattens the trees and numbers the roots in the order
 * they were made, which is the order of each component's first pixel.
 */
static uint32_t find_root(const uint32_t *parent, uint32_t i)
{
    while (parent[i] < i)
        i = parent[i];
    return i;
}

static void set_root(uint32_t *parent, uint32_t i, uint32_t root)
{
    while (parent[i] < i) {
        uint32_t j = parent[i];
        parent[i] = root;
        i = j;
    }
    parent[i] = root;
}

static uint32_t merge(uint32_t *parent, uint32_t i, uint32_t j)
{
    uint32_t root = find_root(parent, i);
    if (i != j) {
        uint32_t rj = find_root(parent, j);
        if (rj < root)
            root = rj;
        set_root(parent, j, root);
    }
    set_root(parent, i, root);
    return root;
}

/*
 * The first pass visits each foreground pixel e with its neighbours
 *     a b c
 *     d e
 * by Wu et al.'s decision tree: b touches a, c and d, so its label is
 * enough; without b, c touches neither a nor d, so the two are merged; a
 * and d touch each other. The largest number of provisional labels is
 * that of a pixel grid with every other pixel of every other row set.
 */
int pl_detect__label(uint32_t *labels, uint32_t *count, const uint8_t *mask, uint32_t w,
                     uint32_t h)
{
    size_t maxlab = ((size_t)w + 1) / 2 * (((size_t)h + 1) / 2) + 1;
    uint32_t *parent = malloc(maxlab * sizeof *parent);
    *count = 0;
    if (!parent)
        return PL_ENOMEM;
    uint32_t next = 1;
    parent[0] = 0;
#define NEW_LABEL() (parent[next] = next, next++)
    /* the first row: only d */
    for (uint32_t x = 0; x < w; x++) {
        if (!mask[x])
            labels[x] = 0;
        else if (x && mask[x - 1])
            labels[x] = labels[x - 1];
        else
            labels[x] = NEW_LABEL();
    }
    for (uint32_t y = 1; y < h; y++) {
        const uint8_t *m = mask + (size_t)y * w, *mu = m - w;
        uint32_t *l = labels + (size_t)y * w, *lu = l - w;
        for (uint32_t x = 0; x < w; x++) {
            if (!m[x]) {
                l[x] = 0;
                continue;
            }
            int has_a = x > 0 && mu[x - 1], has_c = x + 1 < w && mu[x + 1];
            int has_d = x > 0 && m[x - 1];
            if (mu[x])
                l[x] = lu[x];
            else if (has_c) {
                if (has_a)
                    l[x] = merge(parent, lu[x + 1], lu[x - 1]);
                else if (has_d)
                    l[x] = merge(parent, lu[x + 1], l[x - 1]);
                else
                    l[x] = lu[x + 1];
            } else if (has_a)
                l[x] = lu[x - 1];
            else if (has_d)
                l[x] = l[x - 1];
            else
                l[x] = NEW_LABEL();
        }
    }
#undef NEW_LABEL
    /* flatten: a root gets the next final number, any other label its
     * parent's, already final */
    uint32_t k = 0;
    for (uint32_t i = 1; i < next; i++)
        parent[i] = parent[i] < i ? parent[parent[i]] : ++k;
    size_t np = (size_t)w * h;
    for (size_t i = 0; i < np; i++)
        labels[i] = parent[labels[i]];
    free(parent);
    *count = k;
    return PL_OK;
}

int pl_detect__hysteresis(uint32_t *labels, uint32_t *count, uint64_t *dropped,
                          const float *signal, uint32_t w, uint32_t h, double low,
                          double high, uint64_t min_pixels)
{
    size_t np = (size_t)w * h;
    *count = 0;
    *dropped = 0;
    uint8_t *mask = malloc(np);
    if (!mask)
        return PL_ENOMEM;
    for (size_t i = 0; i < np; i++)
        mask[i] = signal[i] >= low; /* NaN compares false */
    uint32_t n;
    int rc = pl_detect__label(labels, &n, mask, w, h);
    free(mask);
    if (rc)
        return rc;
    uint64_t *pixels = calloc((size_t)n + 1, sizeof *pixels);
    uint8_t *seeded = calloc((size_t)n + 1, 1);
    uint32_t *remap = malloc(((size_t)n + 1) * sizeof *remap);
    if (!pixels || !seeded || !remap) {
        free(pixels);
        free(seeded);
        free(remap);
        return PL_ENOMEM;
    }
    for (size_t i = 0; i < np; i++) {
        uint32_t l = labels[i];
        if (l) {
            pixels[l]++;
            if (signal[i] >= high)
                seeded[l] = 1;
        }
    }
    uint32_t kept = 0;
    remap[0] = 0;
    for (uint32_t l = 1; l <= n; l++) {
        if (seeded[l] && pixels[l] >= min_pixels)
            remap[l] = ++kept;
        else {
            remap[l] = 0;
            if (seeded[l])
                (*dropped)++;
        }
    }
    for (size_t i = 0; i < np; i++)
        labels[i] = remap[labels[i]];
    free(pixels);
    free(seeded);
    free(remap);
    *count = kept;
    return PL_OK;
}
