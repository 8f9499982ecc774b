/*
 * test_history.c - the models behind every output: a site's history built
 * from the store, a registration's summary and a reduction's outcome, and
 * their JSON forms.
 *
 * External reference: the JSON texts are parsed back by Python's json
 * module (Debian's python3, tests/ref/json_ref.py) as a reader other than
 * the one that wrote them.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <cjson/cJSON.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plyledger.h"
#include "testutil.h"

typedef struct fixture {
    char *dir;
    char *path;
    pl_store *store;
} fixture;

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    assert_non_null(f);
    f->dir = tu_tmpdir();
    f->path = tu_path(f->dir, "h.plyledger");
    pl_err err = { 0 };
    TU_OK(pl_store_create(&f->store, f->path, &err));
    pl_airframe af;
    memset(&af, 0, sizeof af);
    strcpy(af.serial, "HIS-0001");
    strcpy(af.aircraft_type, "TX-1");
    strcpy(af.manufactured, "2030-01-02");
    strcpy(af.operator_name, "Operator One");
    TU_OK(pl_store_add_airframe(f->store, &af, NULL, &err));
    TU_OK(pl_store_add_operator(f->store, "HIS-0001", "Operator Two", "2034-06-01", &err));
    pl_site s;
    memset(&s, 0, sizeof s);
    strcpy(s.airframe_serial, "HIS-0001");
    strcpy(s.code, "H01");
    strcpy(s.method, "flash-thermography");
    s.thickness_mm = 4.0;
    s.diffusivity_mm2_s = NAN;
    s.map_frame.origin[0] = 100;
    s.map_frame.u[0] = 1;
    s.map_frame.v[1] = 1;
    strcpy(s.map_frame.system, "STA/BL/WL");
    strcpy(s.map_frame.unit, "mm");
    s.pitch_u = s.pitch_v = 0.5;
    TU_OK(pl_store_add_site(f->store, &s, NULL, &err));
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    pl_store_close(f->store);
    free(f->path);
    tu_rmtree(f->dir);
    free(f);
    return 0;
}

/* An inspection of H01 with one 6x4 two-channel map made in memory,
 * simulated or not. */
static pl_id inspect_sim(pl_store *st, const char *kind, const char *date, float base,
                         int simulated, pl_id *map)
{
    pl_inspection in;
    memset(&in, 0, sizeof in);
    in.simulated = simulated;
    in.aircraft_hours = NAN;
    in.aircraft_cycles = -1;
    strcpy(in.airframe_serial, "HIS-0001");
    strcpy(in.site_code, "H01");
    strcpy(in.kind, kind);
    strcpy(in.performed_on, date);
    strcpy(in.procedure, "P");
    strcpy(in.procedure_rev, "A");
    strcpy(in.equipment, "E");
    strcpy(in.calibration_ref, "C");
    strcpy(in.inspector, "I. Nspector");
    strcpy(in.inspector_level, "2");
    pl_map *m;
    pl_err err = { 0 };
    TU_OK(pl_map_new(&m, 6, 4, 2, &err));
    for (uint32_t i = 0; i < 48; i++)
        m->data[i] = base + (float)i;
    TU_OK(pl_map_set_channel(m, 0, "phase", "rad", &err));
    TU_OK(pl_map_set_channel(m, 1, "temperature-contrast", "K", &err));
    strcpy(m->channels[1].label, "t=0.5 s");
    m->pitch_u = m->pitch_v = NAN;
    pl_id key = 0;
    TU_OK(pl_record_map_inspection(st, &in, m, "reduce", "seq.json", "{\"k\":1}", &key, map,
                                   &err));
    pl_map_free(m);
    return key;
}

static pl_id inspect(pl_store *st, const char *kind, const char *date, float base, pl_id *map)
{
    return inspect_sim(st, kind, date, base, 0, map);
}

/* Parse JSON text, failing the test when it is not JSON. */
static cJSON *parse(const char *text)
{
    cJSON *j = cJSON_Parse(text);
    if (!j)
        fail_msg("not JSON: %s", text);
    return j;
}

static cJSON *at(const cJSON *o, const char *key)
{
    cJSON *v = cJSON_GetObjectItemCaseSensitive(o, key);
    if (!v)
        fail_msg("no key %s", key);
    return v;
}

/* Python's json module reads the text and finds `path` (keys and indexes
 * joined by '/') equal to `want` (JSON). */
static void python_agrees(const fixture *f, const char *text, const char *path, const char *want)
{
    char *file = tu_path(f->dir, "doc.json");
    assert_int_equal(tu_write_file(file, text, strlen(text)), 0);
    assert_int_equal(tu_python("json_ref.py", file, path, want, NULL), 0);
    free(file);
}

/*
 * The history holds the site, its inspections oldest first (the scheduled
 * one was recorded first but performed later), each map with its channels
 * and registrations, and each inspection's comparisons; its JSON nests them
 * in that shape with the records' own field names.
 */
static void test_history__gathers_a_site_oldest_first(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    pl_id m2 = 0, m1 = 0;
    /* recorded out of order: an unscheduled inspection needs no baseline yet */
    pl_id k2 = inspect(f->store, "unscheduled", "2036-03-01", 5.0f, &m2);
    pl_id k1 = inspect(f->store, "baseline", "2030-02-01", 1.0f, &m1);
    pl_record_pair pair = { 0 };
    TU_OK(pl_record_find_pair(f->store, "HIS-0001", "H01", &pair, &err));
    pl_register_result res;
    memset(&res, 0, sizeof res);
    res.refused = 1;
    snprintf(res.reason, sizeof res.reason, "correlation 0.2 below the limit 0.6");
    res.ncc = 0.2;
    res.psr = NAN;
    pl_id rid = 0, cid = 0;
    TU_OK(pl_record_registration(f->store, &pair, &res, 0, "phase-correlation", NULL, NULL,
                                 NULL, &rid, &cid, &err));

    pl_history *h = NULL;
    TU_OK(pl_history_load(&h, f->store, "HIS-0001", "H01", &err));
    assert_string_equal(h->site.code, "H01");
    assert_int_equal(h->ninspections, 2);
    assert_int_equal(h->inspections[0].inspection.key, k1);
    assert_int_equal(h->inspections[1].inspection.key, k2);
    assert_null(h->inspections[0].inspection.parameters_json);
    assert_string_equal(h->inspections[0].maps[0].map.parameters_json, "{\"k\":1}");
    const pl_history_inspection *later = &h->inspections[1];
    assert_int_equal(later->nmaps, 1);
    assert_int_equal(later->maps[0].map.id, m2);
    assert_int_equal(later->maps[0].map.nchannels, 2);
    assert_string_equal(later->maps[0].map.channels[1].label, "t=0.5 s");
    assert_int_equal(later->maps[0].nregistrations, 1);
    assert_int_equal(later->maps[0].registrations[0].id, rid);
    assert_int_equal(later->maps[0].registrations[0].baseline_map_id, m1);
    assert_string_equal(later->maps[0].registrations[0].status, "refused");
    assert_int_equal(later->ncomparisons, 1);
    assert_int_equal(later->comparisons[0].id, cid);
    assert_int_equal(h->inspections[0].maps[0].nregistrations, 0);
    assert_int_equal(h->inspections[0].ncomparisons, 0);

    char *text = NULL;
    TU_OK(pl_history_json(&text, h, &err));
    pl_history_free(h);
    cJSON *j = parse(text);
    assert_string_equal(at(at(j, "site"), "site")->valuestring, "H01");
    assert_true(cJSON_IsNull(at(at(j, "site"), "diffusivity_mm2_s")));
    assert_true(at(at(at(j, "site"), "map_frame"), "origin")->child->valuedouble == 100.0);
    cJSON *ins = at(j, "inspections");
    assert_int_equal(cJSON_GetArraySize(ins), 2);
    cJSON *second = cJSON_GetArrayItem(ins, 1);
    assert_string_equal(at(second, "date")->valuestring, "2036-03-01");
    assert_true(cJSON_IsNull(at(second, "cycles")));
    assert_true(cJSON_IsNull(at(second, "parameters")));
    cJSON *map = cJSON_GetArrayItem(at(second, "maps"), 0);
    assert_int_equal(at(at(map, "parameters"), "k")->valueint, 1);
    assert_int_equal(at(map, "map")->valueint, (int)m2);
    cJSON *ch = at(map, "channels");
    assert_true(cJSON_IsNull(at(cJSON_GetArrayItem(ch, 0), "label")));
    assert_string_equal(at(cJSON_GetArrayItem(ch, 1), "unit")->valuestring, "K");
    cJSON *reg = cJSON_GetArrayItem(at(map, "registrations"), 0);
    assert_int_equal(at(reg, "registration")->valueint, (int)rid);
    assert_true(at(at(reg, "quality"), "ncc")->valuedouble == 0.2);
    assert_true(cJSON_IsNull(at(at(reg, "quality"), "peak_sidelobe")));
    assert_true(cJSON_IsNull(at(at(reg, "transform"), "shift_col_px")));
    cJSON *cmp = cJSON_GetArrayItem(at(second, "comparisons"), 0);
    assert_string_equal(at(cmp, "status")->valuestring, "not-done");
    assert_int_equal(at(cmp, "registration")->valueint, (int)rid);
    cJSON_Delete(j);
    python_agrees(f, text, "inspections/1/maps/0/registrations/0/status", "\"refused\"");
    python_agrees(f, text, "inspections/0/maps/0/channels/1/label", "\"t=0.5 s\"");
    free(text);
}

/*
 * Where a record is shown to support a decision, it carries the caution
 * (one text, from the library), and simulated data say so: in the history,
 * the summary, a registration's summary and a rendering's identification.
 */
static void test_history__caution_and_simulated_data_are_shown(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    const char *caution = pl_caution();
    tu_assert_msg_has(caution, "does not replace");
    tu_assert_msg_has(caution, "design holder");
    assert_string_equal(pl_history_data_word(1), "simulated");
    assert_string_equal(pl_history_data_word(0), "real");
    assert_string_equal(pl_history_data_word(-1), "not recorded");

    pl_id m1 = 0, m2 = 0;
    pl_id k1 = inspect_sim(f->store, "baseline", "2030-02-01", 1.0f, 1, &m1);
    pl_id k2 = inspect_sim(f->store, "scheduled", "2036-03-01", 5.0f, 1, &m2);
    pl_history *h = NULL;
    TU_OK(pl_history_load(&h, f->store, "HIS-0001", "H01", &err));
    char *text = NULL;
    TU_OK(pl_history_json(&text, h, &err));
    pl_history_free(h);
    python_agrees(f, text, "inspections/0/simulated", "true");
    python_agrees(f, text, "inspections/1/simulated", "true");
    cJSON *j = parse(text);
    assert_string_equal(at(j, "caution")->valuestring, caution);
    cJSON_Delete(j);
    free(text);

    pl_store_summary sum;
    TU_OK(pl_store_summarize(f->store, &sum, &err));
    TU_OK(pl_summary_json(&text, &sum, "h.plyledger", &err));
    python_agrees(f, text, "simulated_inspections", "2");
    python_agrees(f, text, "simulated_unknown", "0");
    j = parse(text);
    assert_string_equal(at(j, "caution")->valuestring, caution);
    cJSON_Delete(j);
    free(text);

    pl_record_pair pair = { 0 };
    TU_OK(pl_record_find_pair(f->store, "HIS-0001", "H01", &pair, &err));
    pl_register_result res;
    memset(&res, 0, sizeof res);
    res.refused = 1;
    snprintf(res.reason, sizeof res.reason, "correlation 0.2 below the limit 0.6");
    res.ncc = 0.2;
    res.psr = NAN;
    pl_id rid = 0, cid = 0;
    TU_OK(pl_record_registration(f->store, &pair, &res, 0, "phase-correlation", NULL, NULL,
                                 NULL, &rid, &cid, &err));
    pl_registration_summary rs;
    TU_OK(pl_registration_summary_load(&rs, f->store, "HIS-0001", "H01", &pair, rid, cid, &err));
    TU_OK(pl_registration_summary_json(&text, &rs, &err));
    pl_registration_summary_clear(&rs);
    j = parse(text);
    assert_string_equal(at(j, "caution")->valuestring, caution);
    assert_true(cJSON_IsTrue(at(j, "simulated")));
    cJSON_Delete(j);
    free(text);

    /* a rendering names airframe, site, date, map and quantity, and the
     * map it was aligned onto */
    char line[PL_RENDER_IDENTIFICATION_SIZE];
    int simulated = 0;
    TU_OK(pl_history_identification(line, sizeof line, &simulated, f->store, m2, 0, "phase",
                                    &err));
    char want[PL_RENDER_IDENTIFICATION_SIZE];
    snprintf(want, sizeof want, "HIS-0001 site H01 2036-03-01 map %lld phase", (long long)m2);
    assert_string_equal(line, want);
    assert_int_equal(simulated, 1);
    TU_OK(pl_history_identification(line, sizeof line, &simulated, f->store, m2, m1, "phase",
                                    &err));
    snprintf(want, sizeof want, "HIS-0001 site H01 2036-03-01 map %lld phase onto 2030-02-01 "
             "map %lld", (long long)m2, (long long)m1);
    assert_string_equal(line, want);
    assert_int_equal(pl_history_identification(line, sizeof line, &simulated, f->store, 999, 0,
                                               NULL, &err), PL_ENOTFOUND);
    (void)k1;
    (void)k2;
}

/* A real inspection's rendering is not marked. */
static void test_history__real_data_are_not_marked(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    pl_id m1 = 0;
    inspect_sim(f->store, "baseline", "2030-02-01", 1.0f, 0, &m1);
    char line[PL_RENDER_IDENTIFICATION_SIZE];
    int simulated = 1;
    TU_OK(pl_history_identification(line, sizeof line, &simulated, f->store, m1, 0, NULL, &err));
    assert_int_equal(simulated, 0);
    tu_assert_msg_has(line, "HIS-0001 site H01 2030-02-01 map");
}

/* A site without inspections has an empty history; an unknown one none. */
static void test_history__empty_and_unknown_sites(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    pl_history *h = NULL;
    TU_OK(pl_history_load(&h, f->store, "HIS-0001", "H01", &err));
    assert_int_equal(h->ninspections, 0);
    char *text = NULL;
    TU_OK(pl_history_json(&text, h, &err));
    python_agrees(f, text, "inspections", "[]");
    free(text);
    pl_history_free(h);
    h = NULL;
    assert_int_equal(pl_history_load(&h, f->store, "HIS-0001", "H99", &err), PL_ENOTFOUND);
    assert_null(h);
    tu_assert_msg_has(err.msg, "H99");
}

/* The operator history, oldest first, in the records' field names. */
static void test_history__operators(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    char *text = NULL;
    TU_OK(pl_operators_json(&text, f->store, "HIS-0001", &err));
    python_agrees(f, text, "airframe", "\"HIS-0001\"");
    python_agrees(f, text, "operators/0/operator", "\"Operator One\"");
    python_agrees(f, text, "operators/0/since", "\"2030-01-02\"");
    python_agrees(f, text, "operators/1/operator", "\"Operator Two\"");
    free(text);
    assert_int_equal(pl_operators_json(&text, f->store, "NOPE-1", &err), PL_ENOTFOUND);
    assert_null(text);
}

/*
 * A registration's summary is the registration as recorded, read back, with
 * the pair it aligned; the registration in it has the one JSON shape the
 * site's history shows too.
 */
static void test_history__registration_summary_has_the_history_shape(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    pl_id m1 = 0, m2 = 0;
    pl_id k1 = inspect(f->store, "baseline", "2030-02-01", 1.0f, &m1);
    pl_id k2 = inspect(f->store, "scheduled", "2036-03-01", 5.0f, &m2);
    pl_record_pair pair = { 0 };
    TU_OK(pl_record_find_pair(f->store, "HIS-0001", "H01", &pair, &err));
    assert_int_equal(pair.baseline_inspection, k1);
    assert_int_equal(pair.current_inspection, k2);
    pl_register_options o = PL_REGISTER_OPTIONS_INIT;
    o.window = PL_WINDOW_TUKEY;
    char *params = NULL;
    TU_OK(pl_record_registration_parameters(&params, NULL, "t=0.5 s", &o, &err));
    pl_register_result res;
    memset(&res, 0, sizeof res);
    res.transform.dx = 1.25;
    res.transform.dy = -0.5;
    res.transform.rotation_deg = 0.3;
    res.transform.scale = 1.0;
    res.shift_u_mm = 0.625;
    res.shift_v_mm = -0.25;
    res.ncc = 0.97;
    res.psr = 12.5;
    res.overlap_fraction = 0.9;
    res.overlap_mm2 = 5.4;
    pl_id rid = 0, cid = 0;
    TU_OK(pl_record_registration(f->store, &pair, &res, 0, "phase-correlation", NULL, NULL,
                                 params, &rid, &cid, &err));
    free(params);
    assert_int_equal(cid, 0);
    pl_registration_summary sum;
    TU_OK(pl_registration_summary_load(&sum, f->store, "HIS-0001", "H01", &pair, rid, cid, &err));
    assert_string_equal(sum.registration.status, "aligned");
    assert_true(sum.registration.shift_col_px == 1.25 && sum.registration.ncc == 0.97);
    sum.view = "view.png";
    char *text = NULL;
    TU_OK(pl_registration_summary_json(&text, &sum, &err));
    pl_registration_summary_clear(&sum);
    python_agrees(f, text, "transform/shift_col_px", "1.25");
    python_agrees(f, text, "quality/peak_sidelobe", "12.5");
    python_agrees(f, text, "parameters/window", "\"tukey\"");
    python_agrees(f, text, "parameters/label", "\"t=0.5 s\"");
    python_agrees(f, text, "parameters/quantity", "\"(default)\"");
    python_agrees(f, text, "current_inspection", "2");
    python_agrees(f, text, "comparison_not_done", "null");
    python_agrees(f, text, "aligned", "null");
    python_agrees(f, text, "view", "\"view.png\"");

    /* the same registration in the history, field for field */
    cJSON *summary = parse(text);
    free(text);
    static const char *const context[] = { "airframe", "site", "baseline_inspection",
                                           "current_inspection", "comparison_not_done",
                                           "aligned", "view", "simulated", "caution" };
    for (size_t i = 0; i < sizeof context / sizeof context[0]; i++)
        cJSON_DeleteItemFromObjectCaseSensitive(summary, context[i]);
    pl_history *h = NULL;
    TU_OK(pl_history_load(&h, f->store, "HIS-0001", "H01", &err));
    TU_OK(pl_history_json(&text, h, &err));
    pl_history_free(h);
    cJSON *hist = parse(text);
    free(text);
    cJSON *in_history = cJSON_GetArrayItem(
        at(cJSON_GetArrayItem(at(cJSON_GetArrayItem(at(hist, "inspections"), 1), "maps"), 0),
           "registrations"), 0);
    assert_non_null(in_history);
    assert_true(cJSON_Compare(summary, in_history, 1));
    cJSON_Delete(summary);
    cJSON_Delete(hist);

    /* a registration the store does not hold for that map has no summary */
    assert_int_equal(pl_registration_summary_load(&sum, f->store, "HIS-0001", "H01", &pair,
                                                  rid + 5, 0, &err), PL_ENOTFOUND);
}

/* A reduction's outcome: the maps made, the statistics, the parameters and
 * where the maps went. */
static void test_history__reduction_json(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    pl_map *m = NULL;
    TU_OK(pl_map_new(&m, 5, 3, 2, &err));
    TU_OK(pl_map_set_channel(m, 0, "temperature-rise", "K", &err));
    TU_OK(pl_map_set_channel(m, 1, "depth", "mm", &err));
    strcpy(m->channels[1].label, "peak d2");
    pl_reduction_summary r;
    memset(&r, 0, sizeof r);
    r.sequence = "seq.json";
    r.map = m;
    r.stats.frames_used = 200;
    r.stats.samples_used = 52;
    r.stats.saturated_values = 3;
    r.parameters_json = "{\"degree\":10}";
    r.output = "maps.npy";
    char *text = NULL;
    TU_OK(pl_reduction_json(&text, &r, &err));
    pl_map_free(m);
    python_agrees(f, text, "width", "5");
    python_agrees(f, text, "frames_used", "200");
    python_agrees(f, text, "saturated_values", "3");
    python_agrees(f, text, "channels/0/quantity", "\"temperature-rise\"");
    python_agrees(f, text, "channels/1/label", "\"peak d2\"");
    python_agrees(f, text, "parameters/degree", "10");
    python_agrees(f, text, "output", "\"maps.npy\"");
    python_agrees(f, text, "map", "null");
    free(text);
}

/* A store's summary: counts by the kind vocabulary's words, no dates when
 * nothing was inspected. */
static void test_history__summary_json(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    pl_store_summary sum;
    TU_OK(pl_store_summarize(f->store, &sum, &err));
    char *text = NULL;
    TU_OK(pl_summary_json(&text, &sum, "h.plyledger", &err));
    python_agrees(f, text, "first_inspection", "null");
    python_agrees(f, text, "inspections_by_kind/post-repair", "0");
    free(text);
    pl_id m = 0;
    inspect(f->store, "baseline", "2030-02-01", 1.0f, &m);
    inspect(f->store, "scheduled", "2036-03-01", 5.0f, &m);
    TU_OK(pl_store_summarize(f->store, &sum, &err));
    TU_OK(pl_summary_json(&text, &sum, "h.plyledger", &err));
    python_agrees(f, text, "store", "\"h.plyledger\"");
    python_agrees(f, text, "inspections_by_kind/baseline", "1");
    python_agrees(f, text, "inspections_by_kind/scheduled", "1");
    python_agrees(f, text, "first_inspection", "\"2030-02-01\"");
    python_agrees(f, text, "sites", "1");
    free(text);
}

/*
 * The history as a table: one row per inspection, oldest first, each with
 * its latest comparison's counts as recorded and a refusal's reason whole
 * (a comma and a quote in it), read back by Python's csv module (RFC 4180,
 * tests/ref/csv_ref.py).
 */
static void test_history__csv_has_a_row_per_inspection(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    pl_id m0 = 0, m1 = 0, m2 = 0;
    pl_id k0 = inspect(f->store, "baseline", "2030-02-01", 1.0f, &m0);
    pl_id k1 = inspect(f->store, "scheduled", "2033-02-01", 2.0f, &m1);
    pl_record_pair pair = { 0 };
    TU_OK(pl_record_find_pair(f->store, "HIS-0001", "H01", &pair, &err));
    pl_register_result res;
    memset(&res, 0, sizeof res);
    res.refused = 1;
    snprintf(res.reason, sizeof res.reason, "correlation 0.2, below \"0.6\"");
    res.ncc = 0.2;
    res.psr = NAN;
    pl_id rid = 0, cid1 = 0;
    TU_OK(pl_record_registration(f->store, &pair, &res, 0, "phase-correlation", NULL, NULL,
                                 NULL, &rid, &cid1, &err));
    pl_id k2 = inspect(f->store, "scheduled", "2036-02-01", 3.0f, &m2);
    pl_comparison_record c;
    memset(&c, 0, sizeof c);
    c.baseline_inspection = k0;
    c.current_inspection = k2;
    strcpy(c.status, "done");
    c.uncompared_mm2 = 12.5;
    c.uncompared_fraction = 0.01;
    char params[] = "{\"criteria\":{\"name\":\"C-SET\",\"revision\":\"3\"},"
                    "\"counts\":{\"new\":1,\"grown\":2,\"stable\":3,\"vanished\":0,"
                    "\"not-compared\":0,\"changed-region\":4,\"exceeding\":2}}";
    c.parameters_json = params;
    pl_id cid2 = 0;
    TU_OK(pl_store_add_comparison(f->store, &c, &cid2, &err));

    pl_history *h = NULL;
    TU_OK(pl_history_load(&h, f->store, "HIS-0001", "H01", &err));
    char *csv = NULL;
    TU_OK(pl_history_csv(&csv, h, &err));
    pl_history_free(h);
    char *file = tu_path(f->dir, "history.csv");
    assert_int_equal(tu_write_file(file, csv, strlen(csv)), 0);
    char c0[64], c1[64], c2[64], ins1[64], mp[64], id2[64];
    snprintf(c0, sizeof c0, "0:inspection=%lld", (long long)k0);
    snprintf(ins1, sizeof ins1, "1:inspection=%lld", (long long)k1);
    snprintf(c1, sizeof c1, "1:comparison=%lld", (long long)cid1);
    snprintf(c2, sizeof c2, "2:comparison=%lld", (long long)cid2);
    snprintf(id2, sizeof id2, "2:against_inspection=%lld", (long long)k0);
    snprintf(mp, sizeof mp, "2:maps=%lld", (long long)m2);
    assert_int_equal(tu_python("csv_ref.py", file, "3", c0, "0:kind=baseline", "0:comparison=",
                               "0:comparisons=0", "0:flight_cycles=", "0:simulated=real",
                               "0:inspector=I. Nspector", ins1, c1,
                               "1:comparison_status=not-done",
                               "1:not_done_reason=registration refused: correlation 0.2, below \"0.6\"", "1:new=",
                               c2, id2, mp, "2:performed_on=2036-02-01",
                               "2:criteria=C-SET rev 3", "2:new=1", "2:grown=2", "2:stable=3",
                               "2:vanished=0", "2:changed_regions=4", "2:exceeding=2",
                               "2:not_compared_mm2=12.5", "2:comparisons=1", NULL),
                     0);
    /* the same table with the python check made to fail: a wrong cell */
    assert_int_not_equal(tu_python("csv_ref.py", file, "3", "2:grown=3", NULL), 0);
    free(file);
    free(csv);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
#define T(name) cmocka_unit_test_setup_teardown(name, setup, teardown)
        T(test_history__gathers_a_site_oldest_first),
        T(test_history__caution_and_simulated_data_are_shown),
        T(test_history__real_data_are_not_marked),
        T(test_history__empty_and_unknown_sites),
        T(test_history__operators),
        T(test_history__registration_summary_has_the_history_shape),
        T(test_history__reduction_json),
        T(test_history__summary_json),
        T(test_history__csv_has_a_row_per_inspection),
#undef T
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
