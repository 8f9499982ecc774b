/*
 * genmaps.c - makes the sample fleet's inspection maps and the sidecars
 * that record them. Everything here is an invented scenario for the demo:
 * the operator, the aircraft type, the serials, the people and the
 * indications.
 *
 * Each map is an early-time temperature contrast map (K) of one site, 96 x
 * 72 px at 1 mm: the texture of the substructure (stringers along the
 * fuselage, a frame across it), a smooth flash non-uniformity, camera noise,
 * and the indications of the scenario. Later checks see the site through a
 * robot placed a few mm and up to a degree off nominal; the recorded
 * placement stays the nominal one, as a robot's log would say.
 *
 * The output is deterministic: the same files on every machine.
 *
 * Usage: genmaps OUTDIR
 */
#include <plyledger.h>

#include <errno.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#define W 96
#define H 72
#define PITCH 1.0

typedef struct airframe {
    const char *serial;
    unsigned seed;
} airframe;

static const airframe airframes[] = {
    { "CR7-0107", 107 },
    { "CR7-0112", 112 },
    { "CR7-0118", 118 },
};

typedef struct check {
    const char *name;       /* check reference */
    const char *kind;
    const char *date[3];    /* per airframe */
    double hours[3];
    long cycles[3];
    const char *procedure_rev;
    const char *inspector;
    const char *level;
    const char *equipment;
    const char *calibration;
} check;

static const check checks[] = {
    { "DEL", "baseline", { "2029-04-22", "2029-08-09", "2029-12-18" }, { 14.2, 11.8, 12.5 },
      { 9, 7, 8 }, "B", "J. Varga-Moreau", "2",
      "flash thermography rig FTR-1 (2 x 2.4 kJ lamps, cooled MWIR camera IRC-0442)",
      "CFRP step-wedge reference standard RS-53-04, verified 2029-03-01" },
    { "HC-1", "scheduled", { "2035-05-11", "2035-09-02", "2036-01-27" },
      { 16210.4, 15873.9, 15990.1 }, { 13912, 13540, 13701 }, "C", "P. Ansel-Kiri", "2",
      "flash thermography rig FTR-3 (2 x 2.4 kJ lamps, cooled MWIR camera IRC-1187)",
      "CFRP step-wedge reference standard RS-53-11, verified 2035-02-14" },
    { "HC-2", "scheduled", { "2041-06-03", "2041-10-14", "2042-02-08" },
      { 32655.0, 31980.7, 32102.3 }, { 27815, 27190, 27344 }, "C", "L. Dunmore-Sato", "2",
      "flash thermography rig FTR-3 (2 x 2.4 kJ lamps, cooled MWIR camera IRC-1187)",
      "CFRP step-wedge reference standard RS-53-11, verified 2041-01-20" },
};

/* An indication of the scenario: an ellipse in the site's part frame (mm
 * from the nominal map origin along u and v), per check. */
typedef struct indication {
    int airframe;
    const char *site;
    double cu, cv;      /* centre, mm */
    double ru[3], rv[3];/* semi-axes per check, mm; 0 = absent */
    double contrast;    /* K at the centre */
} indication;

static const indication indications[] = {
    /* a disbond at a door corner that grows from check to check */
    { 0, "F03", 52, 30, { 5, 8, 12 }, { 4, 6, 8.5 }, 0.55 },
    /* as-built porosity, stable */
    { 0, "F07", 30, 44, { 9, 9, 9 }, { 7, 7, 7 }, 0.14 },
    /* a ground-handling impact that appears at the first heavy check */
    { 1, "F10", 60, 36, { 0, 7, 7.3 }, { 0, 7, 7.3 }, 0.48 },
    /* a small as-built inclusion, stable */
    { 2, "F05", 40, 25, { 4, 4, 4 }, { 3.5, 3.5, 3.5 }, 0.30 },
};

static const char *const sites[] = { "F01", "F02", "F03", "F04", "F05", "F06",
                                     "F07", "F08", "F09", "F10", "F11", "F12" };

/* Robot placement error of check c at a site: shift (mm) and rotation
 * (degrees), none at delivery. */
static void placement_error(unsigned seed, int c, int site, double *du, double *dv, double *rot)
{
    if (c == 0) {
        *du = *dv = *rot = 0.0;
        return;
    }
    unsigned h = seed * 2654435761u ^ (unsigned)(c * 97 + site * 13);
    h ^= h >> 15;
    h *= 2246822519u;
    h ^= h >> 13;
    *du = ((double)(h & 1023) / 1023.0 - 0.5) * 7.0;
    *dv = ((double)((h >> 10) & 1023) / 1023.0 - 0.5) * 7.0;
    *rot = ((double)((h >> 20) & 1023) / 1023.0 - 0.5) * 2.0;
}

/* A repeatable standard normal deviate from four integers (splitmix64 and
 * Box-Muller), so the noise does not depend on the platform's rand(). */
static double noise(uint64_t a, uint64_t b, uint64_t c, uint64_t d)
{
    uint64_t z = a * 0x9e3779b97f4a7c15ull ^ b * 0xbf58476d1ce4e5b9ull ^ c * 0x94d049bb133111ebull ^ d;
    double u[2];
    for (int i = 0; i < 2; i++) {
        z += 0x9e3779b97f4a7c15ull;
        uint64_t x = z;
        x = (x ^ (x >> 30)) * 0xbf58476d1ce4e5b9ull;
        x = (x ^ (x >> 27)) * 0x94d049bb133111ebull;
        x ^= x >> 31;
        u[i] = ((double)(x >> 11) + 0.5) / 9007199254740992.0;
    }
    return sqrt(-2.0 * log(u[0])) * cos(2.0 * M_PI * u[1]);
}

/* Contrast at part-frame point (x, y) mm of a site, without noise. */
static double texture(int a, int site, int c, double x, double y)
{
    double v = 0.0;
    /* stringers every 190 mm run along u: cooler bands where they are bonded */
    double sy = fmod(y + 37.0 * site + 400.0, 190.0) - 95.0;
    v -= 0.09 * exp(-(sy * sy) / (2 * 11.0 * 11.0));
    /* a frame shear tie across the map */
    double fx = x - (28.0 + 5.0 * (site % 5));
    v -= 0.05 * exp(-(fx * fx) / (2 * 4.0 * 4.0));
    /* smooth flash non-uniformity */
    v += 0.03 * (x / W) - 0.02 * (y / H) + 0.015 * cos(x / 31.0 + site);
    for (size_t k = 0; k < sizeof indications / sizeof indications[0]; k++) {
        const indication *d = &indications[k];
        if (d->airframe != a || strcmp(d->site, sites[site]) != 0 || d->ru[c] <= 0)
            continue;
        double ex = (x - d->cu) / d->ru[c], ey = (y - d->cv) / d->rv[c];
        double r = sqrt(ex * ex + ey * ey);
        /* soft edge about 1.5 mm wide */
        double edge = 1.5 / (d->ru[c] < d->rv[c] ? d->ru[c] : d->rv[c]);
        v += d->contrast * 0.5 * (1.0 - tanh((r - 1.0) / edge));
    }
    return v;
}

static int make_dir(const char *path)
{
    if (mkdir(path, 0755) != 0 && errno != EEXIST) {
        fprintf(stderr, "genmaps: cannot create %s: %s\n", path, strerror(errno));
        return -1;
    }
    return 0;
}

static int write_map(const char *path, int a, int site, int c)
{
    pl_map *m;
    pl_err err = { 0 };
    if (pl_map_new(&m, W, H, 1, &err)) {
        fprintf(stderr, "genmaps: %s\n", err.msg);
        return -1;
    }
    double du, dv, rot;
    placement_error(airframes[a].seed, c, site, &du, &dv, &rot);
    double cr = cos(rot * M_PI / 180.0), sr = sin(rot * M_PI / 180.0);
    for (int j = 0; j < H; j++)
        for (int i = 0; i < W; i++) {
            double px = i * PITCH, py = j * PITCH;
            /* where this camera pixel really looks on the part */
            double x = cr * px - sr * py + du, y = sr * px + cr * py + dv;
            double val = texture(a, site, c, x, y)
                         + 0.012 * noise(airframes[a].seed, (uint64_t)(c * 100 + site), (uint64_t)j,
                                         (uint64_t)i);
            m->data[(size_t)j * W + (size_t)i] = (float)val;
        }
    int rc = pl_map_save_npy(m, path, &err);
    if (rc)
        fprintf(stderr, "genmaps: %s\n", err.msg);
    pl_map_free(m);
    return rc ? -1 : 0;
}

static int write_sidecar(const char *outdir, int a, int c)
{
    char path[1024];
    snprintf(path, sizeof path, "%s/%s-%s.json", outdir, airframes[a].serial, checks[c].name);
    FILE *f = fopen(path, "w");
    if (!f) {
        fprintf(stderr, "genmaps: cannot write %s\n", path);
        return -1;
    }
    const check *k = &checks[c];
    fprintf(f,
            "{\n"
            "  \"airframe\": \"%s\",\n"
            "  \"kind\": \"%s\",\n"
            "  \"task\": \"%s zonal NDT 53-10-01\",\n"
            "  \"date\": \"%s\",\n"
            "  \"hours\": %.1f,\n"
            "  \"cycles\": %ld,\n"
            "  \"procedure\": \"CR7-NDT-53-10-01\",\n"
            "  \"procedure_revision\": \"%s\",\n"
            "  \"equipment\": \"%s\",\n"
            "  \"calibration\": \"%s\",\n"
            "  \"inspector\": \"%s\",\n"
            "  \"inspector_level\": \"%s\",\n"
            "  \"parameters\": { \"made_by\": \"sample-fleet genmaps\", \"map\": \"early-time contrast\" },\n"
            "  \"sites\": [\n",
            airframes[a].serial, k->kind, k->name, k->date[a], k->hours[a], k->cycles[a],
            k->procedure_rev, k->equipment, k->calibration, k->inspector, k->level);
    size_t n = sizeof sites / sizeof sites[0];
    for (size_t s = 0; s < n; s++)
        fprintf(f,
                "    { \"site\": \"%s\", \"maps\": [ { \"file\": \"maps/%s/%s/%s.npy\",\n"
                "        \"channels\": [ { \"quantity\": \"temperature-contrast\", \"unit\": \"K\" } ] } ] }%s\n",
                sites[s], airframes[a].serial, k->name, sites[s], s + 1 < n ? "," : "");
    fprintf(f, "  ]\n}\n");
    return fclose(f) == 0 ? 0 : -1;
}

int main(int argc, char **argv)
{
    if (argc != 2) {
        fprintf(stderr, "usage: genmaps OUTDIR\n");
        return 2;
    }
    const char *out = argv[1];
    char path[1024];
    int made = 0;
    if (make_dir(out))
        return 1;
    snprintf(path, sizeof path, "%s/maps", out);
    if (make_dir(path))
        return 1;
    for (int a = 0; a < 3; a++) {
        snprintf(path, sizeof path, "%s/maps/%s", out, airframes[a].serial);
        if (make_dir(path))
            return 1;
        for (int c = 0; c < 3; c++) {
            snprintf(path, sizeof path, "%s/maps/%s/%s", out, airframes[a].serial, checks[c].name);
            if (make_dir(path))
                return 1;
            for (int s = 0; s < 12; s++) {
                snprintf(path, sizeof path, "%s/maps/%s/%s/%s.npy", out, airframes[a].serial,
                         checks[c].name, sites[s]);
                if (write_map(path, a, s, c))
                    return 1;
                made++;
            }
            if (write_sidecar(out, a, c))
                return 1;
        }
    }
    printf("made %d maps and 9 sidecars in %s\n", made, out);
    return 0;
}
