/*
 * testsite.c - a store of synthetic inspections (testsite.h).
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "testsite.h"
#include "testutil.h"

/* A criteria set: no growth at site C01, written growth limits elsewhere. */
const char ts_criteria_text[] =
    "{ \"format\": \"plyledger-criteria\", \"format_version\": 1, \"name\": \"TEST-LIMITS\",\n"
    "  \"revision\": \"1\", \"source_document\": \"TEST-DOC-1 (invented)\",\n"
    "  \"example_values\": true, \"repeatability\": { \"area_mm2\": 8 },\n"
    "  \"rules\": [\n"
    "   { \"name\": \"joint\", \"kind\": \"no-growth\", \"method\": \"flash-thermography\",\n"
    "     \"quantity\": \"temperature-contrast\", \"site\": \"C01\", \"contrast_unit\": \"K\",\n"
    "     \"repeatability_contrast\": 0.1, \"min_reportable_area_mm2\": 10,\n"
    "     \"new_reportable_area_mm2\": 10, \"vanished\": \"investigate\" },\n"
    "   { \"name\": \"skin\", \"kind\": \"growth-limit\", \"method\": \"flash-thermography\",\n"
    "     \"quantity\": \"temperature-contrast\", \"contrast_unit\": \"K\",\n"
    "     \"repeatability_contrast\": 0.1, \"min_reportable_area_mm2\": 10,\n"
    "     \"new_reportable_area_mm2\": 20, \"area_growth_mm2\": 500,\n"
    "     \"area_growth_percent\": 400, \"vanished\": \"report\" } ] }\n";

void ts_add_site(pl_store *st, const char *code)
{
    pl_err err = { 0 };
    pl_site s;
    memset(&s, 0, sizeof s);
    strcpy(s.airframe_serial, TS_SERIAL);
    strcpy(s.code, code);
    strcpy(s.zone, "300");
    strcpy(s.method, "flash-thermography");
    s.thickness_mm = 4.0;
    s.diffusivity_mm2_s = NAN;
    s.map_frame.origin[0] = 5000;
    s.map_frame.u[0] = 1;
    s.map_frame.v[2] = -1;
    strcpy(s.map_frame.system, "STA/BL/WL");
    strcpy(s.map_frame.unit, "mm");
    s.pitch_u = s.pitch_v = TS_PITCH;
    TU_OK(pl_store_add_site(st, &s, NULL, &err));
}

int ts_setup(void **state)
{
    ts_fixture *f = calloc(1, sizeof *f);
    assert_non_null(f);
    f->dir = tu_tmpdir();
    f->path = tu_path(f->dir, "c.plyledger");
    pl_err err = { 0 };
    TU_OK(pl_store_create(&f->store, f->path, &err));
    pl_airframe af;
    memset(&af, 0, sizeof af);
    strcpy(af.serial, TS_SERIAL);
    strcpy(af.aircraft_type, "TX-1");
    strcpy(af.manufactured, "2010-01-02");
    TU_OK(pl_store_add_airframe(f->store, &af, NULL, &err));
    ts_add_site(f->store, "C01");
    ts_add_site(f->store, "C02");
    pl_criteria *c = NULL;
    TU_OK(pl_criteria_parse(&c, ts_criteria_text, strlen(ts_criteria_text), "test", &err));
    TU_OK(pl_store_add_criteria(f->store, c, &f->criteria, NULL, &err));
    pl_criteria_free(c);
    *state = f;
    return 0;
}

int ts_teardown(void **state)
{
    ts_fixture *f = *state;
    pl_store_close(f->store);
    free(f->path);
    tu_rmtree(f->dir);
    free(f);
    return 0;
}

/* Deterministic Gaussian noise (Box-Muller on a 64-bit LCG). */
static double noise(uint64_t *s)
{
    *s = *s * 6364136223846793005ull + 1442695040888963407ull;
    double u1 = ((double)(*s >> 11) + 0.5) / 9007199254740992.0;
    *s = *s * 6364136223846793005ull + 1442695040888963407ull;
    double u2 = ((double)(*s >> 11) + 0.5) / 9007199254740992.0;
    return sqrt(-2.0 * log(u1)) * cos(2.0 * M_PI * u2);
}

/* The texture of the part (radians), at part position (x, y) in pixels. */
static double texture(double x, double y)
{
    return 0.30 * sin(0.21 * x + 0.4) + 0.25 * cos(0.17 * y - 0.3) +
           0.20 * sin(0.09 * x + 0.13 * y) + 0.15 * cos(0.31 * x - 0.23 * y + 1.0);
}

/* One inspection of `code` with a map of the part seen shifted by (sx, sy)
 * px: pixel (i, j) shows part position (i + sx, j + sy). */
pl_id ts_inspect_at(pl_store *st, const char *code, const char *kind, const char *date,
                    const char *task, double hours, long long cycles, int simulated, double sx,
                    double sy, const ts_disc *d, size_t nd, unsigned long long seed)
{
    pl_inspection in;
    memset(&in, 0, sizeof in);
    in.simulated = simulated;
    in.aircraft_hours = hours;
    in.aircraft_cycles = cycles;
    strcpy(in.airframe_serial, TS_SERIAL);
    strcpy(in.site_code, code);
    strcpy(in.kind, kind);
    strcpy(in.performed_on, date);
    if (task)
        strcpy(in.task_ref, task);
    strcpy(in.procedure, "P");
    strcpy(in.procedure_rev, "A");
    strcpy(in.equipment, "E");
    strcpy(in.calibration_ref, "C");
    strcpy(in.inspector, "I. Nspector");
    strcpy(in.inspector_level, "2");
    pl_map *m;
    pl_err err = { 0 };
    TU_OK(pl_map_new(&m, TS_W, TS_H, 2, &err));
    TU_OK(pl_map_set_channel(m, 0, "phase", "rad", &err));
    TU_OK(pl_map_set_channel(m, 1, "temperature-contrast", "K", &err));
    uint64_t s = (uint64_t)seed;
    for (uint32_t j = 0; j < TS_H; j++)
        for (uint32_t i = 0; i < TS_W; i++) {
            double x = i + sx, y = j + sy, c = 0.0;
            for (size_t k = 0; k < nd; k++) {
                if (d[k].r_mm <= 0)
                    continue;
                double r = hypot(x - d[k].cx, y - d[k].cy) * TS_PITCH;
                c += d[k].k * 0.5 * (1.0 - tanh((r - d[k].r_mm) / (0.5 * TS_PITCH)));
            }
            m->data[(size_t)j * TS_W + i] = (float)(texture(x, y) + 0.01 * noise(&s));
            m->data[(size_t)TS_W * TS_H + (size_t)j * TS_W + i] = (float)(c + 0.02 * noise(&s));
        }
    m->pitch_u = m->pitch_v = NAN;
    pl_id key = 0, map = 0;
    TU_OK(pl_record_map_inspection(st, &in, m, "reduce", "seq.json", "{\"k\":1}", &key, &map,
                                   &err));
    pl_map_free(m);
    return key;
}


pl_id ts_inspect(pl_store *st, const char *code, const char *kind, const char *date,
                 const char *task, int simulated, double sx, double sy, const ts_disc *d,
                 size_t nd, unsigned long long seed)
{
    return ts_inspect_at(st, code, kind, date, task, NAN, -1, simulated, sx, sy, d, nd, seed);
}

pl_compare_options ts_options(void)
{
    pl_compare_options o = PL_COMPARE_OPTIONS_INIT;
    o.criteria_name = "TEST-LIMITS";
    return o;
}
