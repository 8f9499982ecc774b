/*
 * genscenes.c - writes the sample fleet's simulation scenes and the
 * inspection details that go with them. Everything here is an invented
 * scenario for the demo: the operator, the aircraft type, the serials, the
 * people and the indications.
 *
 * For each of 3 airframes, 3 inspections (delivery baseline and two heavy
 * checks) and 12 sites it writes a scene (plyledger simulate's format): the
 * site's laminate from the site plan, the stringer flange and frame shear
 * tie bonded behind the skin, the flash, a camera with noise, the
 * indications of the scenario as they stand at that inspection, and the
 * robot's placement error (none at delivery, a few mm and up to a degree
 * later). It also writes one line per inspection to checks.tsv, which the
 * run script reads to record the reduced maps with their traceability.
 *
 * The output is deterministic: the same files on every machine.
 *
 * Usage: genscenes PLAN.csv OUTDIR
 */
#include <plyledger.h>

#include <errno.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#define NSITES 12
#define W 96
#define H 72

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
    const char *name;
    const char *kind;
    const char *date[3];
    const char *hours[3];
    const char *cycles[3];
    const char *procedure_rev;
    const char *inspector;
    const char *equipment;
    const char *calibration;
} check;

static const check checks[] = {
    { "DEL", "baseline", { "2009-04-22", "2009-08-09", "2009-12-18" }, { "14.2", "11.8", "12.5" },
      { "9", "7", "8" }, "B", "J. Varga-Moreau",
      "flash thermography rig FTR-1 (2 x 2.4 kJ lamps, cooled MWIR camera IRC-0442)",
      "CFRP step-wedge reference standard RS-53-04, verified 2009-03-01" },
    { "HC-1", "scheduled", { "2015-05-11", "2015-09-02", "2016-01-27" },
      { "16210.4", "15873.9", "15990.1" }, { "13912", "13540", "13701" }, "C", "P. Ansel-Kiri",
      "flash thermography rig FTR-3 (2 x 2.4 kJ lamps, cooled MWIR camera IRC-1187)",
      "CFRP step-wedge reference standard RS-53-11, verified 2015-02-14" },
    { "HC-2", "scheduled", { "2021-06-03", "2021-10-14", "2022-02-08" },
      { "32655.0", "31980.7", "32102.3" }, { "27815", "27190", "27344" }, "C", "L. Dunmore-Sato",
      "flash thermography rig FTR-3 (2 x 2.4 kJ lamps, cooled MWIR camera IRC-1187)",
      "CFRP step-wedge reference standard RS-53-11, verified 2021-01-20" },
};

/* The scenario's indications, in the site frame (mm from the nominal map
 * origin along u and v), as they stand at each inspection. */
typedef enum { DELAMINATION, DISBOND, IMPACT, POROSITY } defect_kind;

typedef struct indication {
    int airframe;
    const char *site;
    defect_kind kind;
    double cu, cv;
    double size[3][2]; /* per inspection: ellipse axes (mm); 0 = absent */
    double depth_mm;   /* delamination, disbond; porosity top */
    double bottom_mm;  /* impact, porosity */
    const char *label;
} indication;

static const indication indications[] = {
    /* a disbond at the door-corner doubler that grows from check to check */
    { 0, "F03", DISBOND, 52, 34, { { 12, 9 }, { 17, 12 }, { 25, 17 } }, 1.4, 0, "door corner disbond" },
    /* as-built porosity, stable */
    { 0, "F07", POROSITY, 30, 44, { { 18, 14 }, { 18, 14 }, { 18, 14 } }, 0.6, 2.0, "porosity" },
    /* a ground-handling impact that appears at the first heavy check */
    { 1, "F10", IMPACT, 60, 36, { { 0, 0 }, { 16, 16 }, { 16, 16 } }, 0.4, 2.0, "impact" },
    /* a small as-built delamination, stable */
    { 2, "F05", DELAMINATION, 40, 25, { { 9, 8 }, { 9, 8 }, { 9, 8 } }, 1.0, 0, "as-built delamination" },
};

typedef struct site {
    char code[PL_NAME_SIZE];
    double thickness_mm;
    double diffusivity;
} site;

/* The codes, thicknesses and diffusivities of the site plan, read (and
 * checked) by the library's plan reader. */
static int read_plan(const char *path, site *sites)
{
    pl_plan *plan;
    pl_err err = { 0 };
    if (pl_plan_load(&plan, path, &err)) {
        fprintf(stderr, "genscenes: %s\n", err.msg);
        return -1;
    }
    int rc = 0;
    if (plan->nsites != NSITES) {
        fprintf(stderr, "genscenes: %s: expected %d sites, found %zu\n", path, NSITES,
                plan->nsites);
        rc = -1;
    }
    for (size_t i = 0; !rc && i < NSITES; i++) {
        const pl_site *p = &plan->sites[i];
        if (!(p->thickness_mm > 0) || !(p->diffusivity_mm2_s > 0)) {
            fprintf(stderr, "genscenes: %s: site %s needs thickness_mm and diffusivity_mm2_s\n",
                    path, p->code);
            rc = -1;
            break;
        }
        snprintf(sites[i].code, sizeof sites[i].code, "%s", p->code);
        sites[i].thickness_mm = p->thickness_mm;
        sites[i].diffusivity = p->diffusivity_mm2_s;
    }
    pl_plan_free(plan);
    return rc;
}

/* Placement error of inspection c at a site: shift (mm) and rotation
 * (degrees); none at delivery, when the site frame was taught. */
static void placement_error(unsigned seed, int c, int s, double *du, double *dv, double *rot)
{
    if (c == 0) {
        *du = *dv = *rot = 0.0;
        return;
    }
    uint32_t h = seed * 2654435761u ^ (uint32_t)(c * 97 + s * 13);
    h ^= h >> 15;
    h *= 2246822519u;
    h ^= h >> 13;
    h *= 3266489917u;
    h ^= h >> 16;
    *du = ((double)(h & 1023) / 1023.0 - 0.5) * 7.0;
    *dv = ((double)((h >> 10) & 1023) / 1023.0 - 0.5) * 7.0;
    *rot = ((double)((h >> 20) & 1023) / 1023.0 - 0.5) * 2.0;
}

static void write_outline_ellipse(FILE *f, double cu, double cv, double a, double b)
{
    fprintf(f, "{ \"shape\": \"ellipse\", \"centre_mm\": [%.2f, %.2f], \"axes_mm\": [%.2f, %.2f], "
               "\"angle_deg\": 0 }", cu, cv, a, b);
}

static int write_scene(const char *path, int a, int c, int s, const site *st)
{
    FILE *f = fopen(path, "w");
    if (!f) {
        fprintf(stderr, "genscenes: cannot write %s: %s\n", path, strerror(errno));
        return -1;
    }
    /* CFRP: rho c = 1560 kg/m^3 x 1200 J/kg/K; the through-thickness
     * conductivity gives the plan's diffusivity (mm^2/s = 1e-6 m^2/s). */
    double rho = 1560.0, cp = 1200.0;
    double k_through = st->diffusivity * 1e-6 * rho * cp;
    double du, dv, rot;
    placement_error(airframes[a].seed, c, s, &du, &dv, &rot);
    /* The stringer flange runs along u, the frame shear tie across it;
     * where they sit differs from site to site. */
    double stringer_v = 18.0 + 7.0 * (s % 5);
    double frame_u = 22.0 + 9.0 * (s % 4);
    fprintf(f,
            "{\n"
            "  \"format\": \"plyledger-scene-1\",\n"
            "  \"name\": \"%s %s %s\",\n"
            "  \"seed\": %u,\n"
            "  \"laminate\": { \"thickness_mm\": %.2f, \"density_kg_m3\": %.0f, "
            "\"specific_heat_j_kgk\": %.0f,\n"
            "    \"conductivity_along_w_mk\": 2.6, \"conductivity_across_w_mk\": 1.9, "
            "\"conductivity_through_w_mk\": %.4f },\n"
            "  \"flash\": { \"energy_j_m2\": 7500, \"nonuniformity\": 0.04 },\n"
            "  \"surface\": { \"ambient_k\": 294.15, \"front_h_w_m2k\": 8, \"emissivity\": 0.92 },\n"
            "  \"camera\": { \"width\": %d, \"height\": %d, \"pitch_mm\": 1.0, \"frame_rate_hz\": 25,\n"
            "    \"frame_count\": 750, \"preflash_frames\": 5, \"netd_k\": 0.02, "
            "\"fixed_pattern_k\": 0.01,\n"
            "    \"dead_pixel_fraction\": 0.0005, \"storage\": \"uint16\", \"gain_k\": 0.004, "
            "\"offset_k\": 273.15,\n"
            "    \"saturation_count\": 16383 },\n"
            "  \"placement_error\": { \"shift_mm\": [%.3f, %.3f], \"rotation_deg\": %.3f },\n"
            "  \"grid\": { \"layers\": 24 },\n"
            "  \"substructure\": [\n"
            "    { \"kind\": \"flange\", \"outline\": { \"shape\": \"rectangle\", \"centre_mm\": [48, %.1f], "
            "\"size_mm\": [160, 26], \"angle_deg\": 0 },\n"
            "      \"thickness_mm\": 2.5, \"bond_resistance_m2k_w\": 0.0002 },\n"
            "    { \"kind\": \"flange\", \"outline\": { \"shape\": \"rectangle\", \"centre_mm\": [%.1f, 36], "
            "\"size_mm\": [14, 130], \"angle_deg\": 0 },\n"
            "      \"thickness_mm\": 2.0, \"bond_resistance_m2k_w\": 0.0002 }\n"
            "  ],\n"
            "  \"defects\": [",
            airframes[a].serial, checks[c].name, st->code, airframes[a].seed * 1000u + (unsigned)(c * 100 + s),
            st->thickness_mm, rho, cp, k_through, W, H, du, dv, rot, stringer_v, frame_u);
    int first = 1;
    for (size_t k = 0; k < sizeof indications / sizeof indications[0]; k++) {
        const indication *d = &indications[k];
        if (d->airframe != a || strcmp(d->site, st->code) != 0 || d->size[c][0] <= 0)
            continue;
        fprintf(f, "%s\n    ", first ? "" : ",");
        first = 0;
        switch (d->kind) {
        case DELAMINATION:
        case DISBOND:
            fprintf(f, "{ \"kind\": \"%s\", \"label\": \"%s\", \"depth_mm\": %.2f, \"outline\": ",
                    d->kind == DISBOND ? "disbond" : "delamination", d->label, d->depth_mm);
            write_outline_ellipse(f, d->cu, d->cv, d->size[c][0], d->size[c][1]);
            fprintf(f, " }");
            break;
        case POROSITY:
            fprintf(f, "{ \"kind\": \"porosity\", \"outline\": ");
            write_outline_ellipse(f, d->cu, d->cv, d->size[c][0], d->size[c][1]);
            fprintf(f, ", \"top_depth_mm\": %.2f, \"bottom_depth_mm\": %.2f, "
                       "\"conductivity_factor\": 0.45 }", d->depth_mm, d->bottom_mm);
            break;
        case IMPACT:
            fprintf(f, "{ \"kind\": \"impact\", \"centre_mm\": [%.1f, %.1f], \"top_depth_mm\": %.2f, "
                       "\"bottom_depth_mm\": %.2f, \"top_diameter_mm\": 5, "
                       "\"bottom_diameter_mm\": %.1f, \"layers\": 5 }",
                    d->cu, d->cv, d->depth_mm, d->bottom_mm, d->size[c][0]);
            break;
        }
    }
    fprintf(f, "%s],\n  \"acquisition\": { \"airframe\": \"%s\", \"site\": \"%s\", \"check\": \"%s\",\n"
               "    \"flash_energy_setting\": \"2 x 2.4 kJ\", \"ambient_c\": 21.0 }\n}\n",
            first ? "" : "\n  ", airframes[a].serial, st->code, checks[c].name);
    return fclose(f) == 0 ? 0 : -1;
}

static int make_dir(const char *path)
{
    if (mkdir(path, 0755) != 0 && errno != EEXIST) {
        fprintf(stderr, "genscenes: cannot create %s: %s\n", path, strerror(errno));
        return -1;
    }
    return 0;
}

int main(int argc, char **argv)
{
    if (argc != 3) {
        fprintf(stderr, "usage: genscenes PLAN.csv OUTDIR\n");
        return 2;
    }
    site sites[NSITES];
    if (read_plan(argv[1], sites))
        return 1;
    const char *out = argv[2];
    char path[1024];
    snprintf(path, sizeof path, "%s/scenes", out);
    if (make_dir(out) || make_dir(path))
        return 1;
    snprintf(path, sizeof path, "%s/checks.tsv", out);
    FILE *tsv = fopen(path, "w");
    if (!tsv) {
        fprintf(stderr, "genscenes: cannot write %s\n", path);
        return 1;
    }
    int made = 0;
    /* inspections in the order they happened */
    for (int c = 0; c < 3; c++)
        for (int a = 0; a < 3; a++) {
            for (int s = 0; s < NSITES; s++) {
                snprintf(path, sizeof path, "%s/scenes/%s-%s-%s.json", out, airframes[a].serial,
                         checks[c].name, sites[s].code);
                if (write_scene(path, a, c, s, &sites[s]))
                    return 1;
                made++;
            }
            const check *k = &checks[c];
            fprintf(tsv, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\n", airframes[a].serial, k->name,
                    k->kind, k->date[a], k->hours[a], k->cycles[a], k->procedure_rev,
                    k->inspector, k->equipment, k->calibration);
        }
    if (fclose(tsv) != 0)
        return 1;
    printf("wrote %d scenes and the inspection list in %s\n", made, out);
    return 0;
}
