/*
 * test_store_row.c - the recorded tables described once: the descriptions
 * agree with the schema, every record goes in through the one insert path,
 * reads give back what was written, and the JSON form follows the
 * descriptions.
 *
 * External references: SQLite's own PRAGMA table_info for the schema's
 * columns (https://www.sqlite.org/pragma.html#pragma_table_info); the
 * canonical encoding written again in Python from its definition in
 * store_row.h (tests/ref/store_row_ref.py, Python's sqlite3 and struct),
 * which also gave the golden vectors below; UTF-8 well-formedness as
 * RFC 3629 section 4 defines it; SHA-256 of the encoding by libsodium
 * (checked against FIPS 180-4 vectors in test_hash.c).
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <cjson/cJSON.h>

#include <math.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "record/store_int.h"
#include "plyledger/hash.h"
#include "plyledger/map.h"
#include "plyledger/store.h"
#include "plyledger/store_row.h"
#include "testutil.h"

typedef struct fixture {
    char *dir;
    char *path;
    pl_store *st;
} fixture;

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    assert_non_null(f);
    f->dir = tu_tmpdir();
    f->path = tu_path(f->dir, "fleet.db");
    pl_err err = { 0 };
    if (pl_store_create(&f->st, f->path, &err))
        fail_msg("create: %s", err.msg);
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    pl_store_close(f->st);
    free(f->path);
    tu_rmtree(f->dir);
    free(f);
    return 0;
}

/*
 * Each description names every column of its table in the schema exactly
 * once (as SQLite's PRAGMA table_info lists them), with the declared type
 * the description encodes it by, and nothing the table lacks.
 */
static void test_store_row__descriptions_cover_the_schema(void **state)
{
    fixture *f = *state;
    sqlite3 *db = NULL;
    assert_int_equal(sqlite3_open_v2(f->path, &db, SQLITE_OPEN_READONLY, NULL), SQLITE_OK);
    for (int k = 0; k < PL_TABLE_COUNT; k++) {
        const pl_table_desc *t = pl_row__table((pl_table)k);
        assert_string_equal(pl_table_name((pl_table)k), t->name);
        int described = 0;
        for (size_t i = 0; i < t->ncols; i++)
            described += t->cols[i].column != NULL && t->cols[i].stype != PL_S_ROWS
                         && t->cols[i].stype != PL_S_NONE;
        char *sql = sqlite3_mprintf("SELECT name, type FROM pragma_table_info('%q')", t->name);
        sqlite3_stmt *st;
        assert_int_equal(sqlite3_prepare_v2(db, sql, -1, &st, NULL), SQLITE_OK);
        sqlite3_free(sql);
        int in_schema = 0;
        while (sqlite3_step(st) == SQLITE_ROW) {
            const char *name = (const char *)sqlite3_column_text(st, 0);
            const char *type = (const char *)sqlite3_column_text(st, 1);
            in_schema++;
            int found = 0;
            for (size_t i = 0; i < t->ncols; i++) {
                const pl_column *c = &t->cols[i];
                if (!c->column || c->stype == PL_S_NONE || c->stype == PL_S_ROWS ||
                    strcmp(c->column, name) != 0)
                    continue;
                found++;
                const char *want = c->stype == PL_S_INTEGER ? "INTEGER"
                                   : c->stype == PL_S_REAL  ? "REAL"
                                   : c->stype == PL_S_TEXT  ? "TEXT"
                                                            : "BLOB";
                if (strcmp(type, want) != 0)
                    fail_msg("%s.%s is %s in the schema, %s in the description", t->name, name,
                             type, want);
            }
            if (found != 1)
                fail_msg("%s.%s is described %d times", t->name, name, found);
        }
        sqlite3_finalize(st);
        if (in_schema != described)
            fail_msg("%s: %d columns in the schema, %d described", t->name, in_schema, described);
    }
    sqlite3_close(db);
}

/* ---- the canonical encoding ----------------------------------------------------- */

static char *hex_of(const unsigned char *p, size_t n)
{
    char *h = malloc(2 * n + 1);
    assert_non_null(h);
    for (size_t i = 0; i < n; i++)
        snprintf(h + 2 * i, 3, "%02x", p[i]);
    return h;
}

static char *sha_of(const unsigned char *p, size_t n)
{
    unsigned char d[PL_SHA256_SIZE];
    char *h = malloc(PL_SHA256_HEX_SIZE);
    assert_non_null(h);
    pl_sha256(d, p, n);
    pl_sha256_hex(h, d);
    return h;
}

/*
 * Golden vectors, computed by hand from the definition in store_row.h
 * (struct.pack in Python, as tests/ref/store_row_ref.py does): an operator
 * change with a multi-byte UTF-8 name, byte for byte; and a comparison
 * holding NULLs, -0.0 (written as +0.0) and 0.125, by its SHA-256 and the
 * bytes of its two REAL entries.
 */
static void test_store_row__golden_vectors(void **state)
{
    (void)state;
    pl_err err = { 0 };
    pl_operator op;
    memset(&op, 0, sizeof op);
    op.airframe_key = 3;
    snprintf(op.operator_name, sizeof op.operator_name, "Fenmoor Skylink \xe2\x80\x93 Nord");
    snprintf(op.since, sizeof op.since, "2018-03-01");
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_OPERATOR), &op);
    pl_row__set_id(&row, "id", 7);
    pl_row__set_text(&row, "recorded_at", "2018-03-01T09:30:00.000Z");
    unsigned char *enc = NULL;
    size_t len = 0;
    TU_OK(pl_row__encode(&enc, &len, &row, 7, &err));
    char *hex = hex_of(enc, len);
    assert_int_equal(len, 187);
    assert_string_equal(hex,
        "504c525701000000110000006169726672616d655f6f70657261746f72050000"
        "000c0000006169726672616d655f6b6579010300000000000000020000006964"
        "0107000000000000000d0000006f70657261746f725f6e616d65031800000046"
        "656e6d6f6f7220536b796c696e6b20e28093204e6f72640b0000007265636f72"
        "6465645f61740318000000323031382d30332d30315430393a33303a30302e30"
        "30305a0500000073696e6365030a000000323031382d30332d3031");
    free(hex);
    free(enc);

    pl_comparison_record c;
    memset(&c, 0, sizeof c);
    c.baseline_inspection = 1;
    c.current_inspection = 4;
    c.registration_id = 5;
    snprintf(c.status, sizeof c.status, "done");
    c.uncompared_mm2 = -0.0;
    c.uncompared_fraction = 0.125;
    char params[] = "{\"limit\":\"no growth\"}";
    c.parameters_json = params;
    snprintf(c.software_version, sizeof c.software_version, "0.1.0");
    pl_row__from_record(&row, pl_row__table(PL_TABLE_COMPARISON), &c);
    pl_row__set_id(&row, "id", 2);
    pl_row__set_id(&row, "site_key", 1);
    pl_row__set_text(&row, "recorded_at", "2041-06-03T12:00:00.000Z");
    TU_OK(pl_row__encode(&enc, &len, &row, 2, &err));
    assert_int_equal(len, 386);
    char *sha = sha_of(enc, len);
    assert_string_equal(sha, "591aa2c8e59102bc1626d418bc007a4b703399c6d9fceeff9e67fd87853c8739");
    hex = hex_of(enc, len);
    assert_non_null(strstr(hex, "13000000756e636f6d70617265645f6672616374696f6e02000000000000c03f"));
    assert_non_null(strstr(hex, "0e000000756e636f6d70617265645f6d6d32020000000000000000"));
    free(hex);
    free(sha);
    free(enc);
}

/* A value the store could never hold has no canonical form: NaN, and text
 * that is not well-formed UTF-8 (RFC 3629 section 4: no overlong forms, no
 * surrogates, nothing above U+10FFFF, no truncated sequence). */
static void test_store_row__refuses_values_without_canonical_form(void **state)
{
    (void)state;
    pl_err err = { 0 };
    pl_operator op;
    memset(&op, 0, sizeof op);
    snprintf(op.since, sizeof op.since, "2018-03-01");
    static const struct {
        const char *text;
        int ok;
    } cases[] = {
        { "plain ASCII", 1 },
        { "\xc3\xa9", 1 },            /* U+00E9 */
        { "\xe2\x80\x90", 1 },        /* U+2010 */
        { "\xf0\x9f\x98\x80", 1 },    /* U+1F600 */
        { "\xf4\x8f\xbf\xbf", 1 },    /* U+10FFFF */
        { "\xc3\x28", 0 },            /* bad continuation */
        { "\xc0\xaf", 0 },            /* overlong '/' */
        { "\xe0\x80\xaf", 0 },        /* overlong, three bytes */
        { "\xed\xa0\x80", 0 },        /* surrogate U+D800 */
        { "\xf4\x90\x80\x80", 0 },    /* above U+10FFFF */
        { "\xe2\x80", 0 },            /* truncated */
        { "\xff", 0 },
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        snprintf(op.operator_name, sizeof op.operator_name, "%s", cases[i].text);
        pl_row row;
        pl_row__from_record(&row, pl_row__table(PL_TABLE_OPERATOR), &op);
        unsigned char *enc = NULL;
        size_t len = 0;
        int rc = pl_row__encode(&enc, &len, &row, 1, &err);
        if (cases[i].ok != (rc == PL_OK))
            fail_msg("case %zu: status %d (%s)", i, rc, err.msg);
        if (!cases[i].ok)
            tu_assert_msg_has(err.msg, "operator_name is not valid UTF-8");
        free(enc);
    }
    pl_registration_record g;
    memset(&g, 0, sizeof g);
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_REGISTRATION), &g);
    pl_value nan_value = { PL_S_REAL, 0, NAN, NULL, 0 };
    row.v[pl_row__column(row.t, "ncc")] = nan_value;
    unsigned char *enc = NULL;
    size_t len = 0;
    assert_int_equal(pl_row__encode(&enc, &len, &row, 1, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "ncc is NaN");
    assert_null(enc);
}

/* The digest the insert path computed for the row it just wrote. */
static char *last_row(const pl_store *st)
{
    char *h = malloc(PL_SHA256_HEX_SIZE);
    assert_non_null(h);
    pl_sha256_hex(h, st->last_row);
    return h;
}

/*
 * Row `id` of `table` as stored: its encoding equals the one the insert
 * path made (digest `inserted`) and the one Python's sqlite3 and struct
 * make from the definition (tests/ref/store_row_ref.py).
 */
static void check_stored(fixture *f, pl_table table, pl_id id, const char *inserted)
{
    pl_err err = { 0 };
    unsigned char *enc = NULL;
    size_t len = 0;
    TU_OK(pl_store_row_encode(&enc, &len, f->st, table, id, &err));
    char *sha = sha_of(enc, len);
    if (strcmp(sha, inserted) != 0)
        fail_msg("%s %lld: stored %s, inserted %s", pl_table_name(table), (long long)id, sha,
                 inserted);
    char *ref = tu_path(f->dir, "ref.bin"), ids[32];
    snprintf(ids, sizeof ids, "%lld", (long long)id);
    assert_int_equal(tu_python("store_row_ref.py", f->path, pl_table_name(table), ids, ref,
                               NULL), 0);
    size_t rlen = 0;
    unsigned char *want = tu_read_file(ref, &rlen);
    assert_non_null(want);
    if (rlen != len || memcmp(want, enc, len) != 0) {
        char *a = hex_of(enc, len), *b = hex_of(want, rlen);
        fail_msg("%s %lld: library %s, reference %s", pl_table_name(table), (long long)id, a, b);
    }
    free(want);
    free(ref);
    free(sha);
    free(enc);
}

static pl_site test_site(const char *code)
{
    pl_site s;
    memset(&s, 0, sizeof s);
    snprintf(s.airframe_serial, sizeof s.airframe_serial, "ENC-0001");
    snprintf(s.code, sizeof s.code, "%s", code);
    snprintf(s.description, sizeof s.description, "fr\xc3\xa4me splice");
    snprintf(s.method, sizeof s.method, "flash-thermography");
    s.thickness_mm = 3.2;
    s.diffusivity_mm2_s = NAN;
    s.map_frame.origin[0] = -0.0;
    s.map_frame.origin[1] = 1520.25;
    s.map_frame.u[0] = 1;
    s.map_frame.v[2] = -1;
    snprintf(s.map_frame.system, sizeof s.map_frame.system, "STA/BL/WL");
    snprintf(s.map_frame.unit, sizeof s.map_frame.unit, "mm");
    s.width_px = 6;
    s.height_px = 4;
    s.pitch_u = s.pitch_v = 0.5;
    return s;
}

static pl_inspection test_inspection(const char *kind, const char *date)
{
    pl_inspection in;
    memset(&in, 0, sizeof in);
    snprintf(in.airframe_serial, sizeof in.airframe_serial, "ENC-0001");
    snprintf(in.site_code, sizeof in.site_code, "E01");
    snprintf(in.kind, sizeof in.kind, "%s", kind);
    snprintf(in.performed_on, sizeof in.performed_on, "%s", date);
    in.aircraft_hours = 1234.5;
    in.aircraft_cycles = 0;
    snprintf(in.procedure, sizeof in.procedure, "P-1");
    snprintf(in.procedure_rev, sizeof in.procedure_rev, "B");
    snprintf(in.equipment, sizeof in.equipment, "rig");
    snprintf(in.calibration_ref, sizeof in.calibration_ref, "RS-1");
    snprintf(in.inspector, sizeof in.inspector, "A. Inspector");
    snprintf(in.inspector_level, sizeof in.inspector_level, "2");
    return in;
}

static pl_id add_map(fixture *f, pl_id inspection, float base, char **digest)
{
    pl_err err = { 0 };
    pl_map *m = NULL;
    TU_OK(pl_map_new(&m, 6, 4, 2, &err));
    for (size_t i = 0; i < 48; i++)
        m->data[i] = base + 0.5f * (float)i;
    TU_OK(pl_map_set_channel(m, 0, "temperature-contrast", "K", &err));
    TU_OK(pl_map_set_channel(m, 1, "phase", "rad", &err));
    snprintf(m->channels[1].label, sizeof m->channels[1].label, "f=0.1 Hz");
    m->pitch_u = m->pitch_v = 0.5;
    m->placement = test_site("E01").map_frame;
    pl_map_record r;
    memset(&r, 0, sizeof r);
    r.inspection_key = inspection;
    snprintf(r.source, sizeof r.source, "scans/e01.npy");
    snprintf(r.origin, sizeof r.origin, "import-npy");
    char params[] = "{\"order\": 7}";
    r.parameters_json = params;
    pl_id id = 0;
    TU_OK(pl_store_add_map(f->st, &r, m, &id, &err));
    *digest = last_row(f->st);
    pl_map_free(m);
    return id;
}

/*
 * Every kind of record, written through the API, encodes as stored the way
 * the insert path encoded it, and as the independent reference does; a
 * map's encoding holds its channels and not its data blob. A correction is
 * a row of its own with its key, supersedes and reason.
 */
static void test_store_row__stored_rows_encode_as_inserted_and_as_defined(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    pl_airframe af;
    memset(&af, 0, sizeof af);
    snprintf(af.serial, sizeof af.serial, "ENC-0001");
    snprintf(af.aircraft_type, sizeof af.aircraft_type, "TX-1");
    pl_id aid = 0;
    TU_OK(pl_store_add_airframe(f->st, &af, &aid, &err));
    char *d = last_row(f->st);
    check_stored(f, PL_TABLE_AIRFRAME, aid, d);
    free(d);
    TU_OK(pl_store_add_operator(f->st, "ENC-0001", "Operator \xc3\x85", "2015-07-01", &err));
    d = last_row(f->st);
    check_stored(f, PL_TABLE_OPERATOR, 1, d);
    free(d);
    snprintf(af.notes, sizeof af.notes, "type designation corrected");
    pl_id aid2 = 0;
    TU_OK(pl_store_correct_airframe(f->st, &af, "typo in the delivery papers", &aid2, &err));
    d = last_row(f->st);
    check_stored(f, PL_TABLE_AIRFRAME, aid2, d);
    free(d);

    pl_site site = test_site("E01");
    pl_id sid = 0;
    TU_OK(pl_store_add_site(f->st, &site, &sid, &err));
    d = last_row(f->st);
    check_stored(f, PL_TABLE_SITE, sid, d);
    free(d);

    pl_inspection in = test_inspection("baseline", "2010-02-01");
    pl_id base = 0, next = 0;
    TU_OK(pl_store_add_inspection(f->st, &in, &base, &err));
    d = last_row(f->st);
    check_stored(f, PL_TABLE_INSPECTION, base, d);
    free(d);
    in = test_inspection("scheduled", "2016-02-01");
    char params[] = "{\"note\": \"sidecar\"}";
    in.parameters_json = params;
    in.aircraft_cycles = -1;
    TU_OK(pl_store_add_inspection(f->st, &in, &next, &err));
    d = last_row(f->st);
    check_stored(f, PL_TABLE_INSPECTION, next, d);
    free(d);

    pl_id mb = add_map(f, base, 1.0f, &d);
    check_stored(f, PL_TABLE_MAP, mb, d);
    free(d);
    pl_id mc = add_map(f, next, 2.0f, &d);
    check_stored(f, PL_TABLE_MAP, mc, d);
    free(d);

    pl_registration_record g;
    memset(&g, 0, sizeof g);
    g.baseline_map_id = mb;
    g.current_map_id = mc;
    snprintf(g.method, sizeof g.method, "phase-correlation");
    snprintf(g.status, sizeof g.status, "refused");
    snprintf(g.refusal, sizeof g.refusal, "correlation 0.12 below the limit 0.6");
    g.shift_col_px = g.shift_row_px = g.shift_u_mm = g.shift_v_mm = NAN;
    g.rotation_deg = g.scale = g.overlap_fraction = g.overlap_mm2 = g.peak_sidelobe = NAN;
    g.ncc = 0.12;
    pl_id rid = 0;
    TU_OK(pl_store_add_registration(f->st, &g, &rid, &err));
    d = last_row(f->st);
    check_stored(f, PL_TABLE_REGISTRATION, rid, d);
    free(d);
    pl_comparison_record c;
    memset(&c, 0, sizeof c);
    c.baseline_inspection = base;
    c.current_inspection = next;
    c.registration_id = rid;
    snprintf(c.status, sizeof c.status, "not-done");
    snprintf(c.not_done_reason, sizeof c.not_done_reason, "registration refused");
    c.uncompared_mm2 = c.uncompared_fraction = NAN;
    pl_id cid = 0;
    TU_OK(pl_store_add_comparison(f->st, &c, &cid, &err));
    d = last_row(f->st);
    check_stored(f, PL_TABLE_COMPARISON, cid, d);
    free(d);

    /* a done comparison's indications (one on each side) and change */
    snprintf(c.status, sizeof c.status, "done");
    c.not_done_reason[0] = '\0';
    c.uncompared_mm2 = 12.5;
    c.uncompared_fraction = 0.01;
    TU_OK(pl_store_add_comparison(f->st, &c, &cid, &err));
    pl_indication_record ind;
    memset(&ind, 0, sizeof ind);
    ind.comparison_id = cid;
    snprintf(ind.role, sizeof ind.role, "current");
    ind.map_id = mc;
    ind.label = 1;
    ind.area_px = 40;
    ind.area_mm2 = 10.0;
    ind.equivalent_diameter_mm = 3.568;
    ind.area_halfmax_px = 28;
    ind.area_halfmax_mm2 = 7.0;
    ind.equivalent_diameter_halfmax_mm = 2.985;
    ind.centroid_col = 3.5;
    ind.centroid_row = -0.0;
    ind.part_x = 1520.25;
    ind.part_y = ind.part_z = NAN;
    ind.bbox_col1 = 7;
    ind.bbox_row1 = 5;
    ind.major_axis_mm = 6.0;
    ind.minor_axis_mm = NAN;
    ind.orientation_deg = 90.0;
    ind.peak_contrast = 0.75;
    ind.peak_snr = NAN;
    ind.mean_contrast = 0.4;
    ind.depth_mm = NAN;
    ind.perimeter_mm = 22.1;
    char outline[] = "0,0:0011223344";
    ind.outline = outline;
    pl_id iid = 0;
    TU_OK(pl_store_add_indication(f->st, &ind, &iid, &err));
    d = last_row(f->st);
    check_stored(f, PL_TABLE_INDICATION, iid, d);
    free(d);
    pl_change_record ch;
    memset(&ch, 0, sizeof ch);
    ch.comparison_id = cid;
    ch.number = 1;
    snprintf(ch.class_, sizeof ch.class_, "new");
    snprintf(ch.matched_by, sizeof ch.matched_by, "none");
    snprintf(ch.sizing, sizeof ch.sizing, "threshold");
    char none[] = "[]", one[] = "[1]";
    ch.baseline_labels = none;
    ch.current_labels = one;
    ch.area_baseline_mm2 = ch.area_delta_percent = ch.area_baseline_halfmax_mm2 = NAN;
    ch.area_current_mm2 = ch.area_delta_mm2 = 10.0;
    ch.area_current_halfmax_mm2 = ch.area_delta_halfmax_mm2 = 7.0;
    ch.contrast_baseline = ch.contrast_delta = ch.distance_px = NAN;
    ch.contrast_current = 0.75;
    ch.centroid_col = 3.5;
    ch.centroid_row = 0.0;
    ch.area_limit_mm2 = 5.0;
    ch.area_measured_mm2 = 10.0;
    ch.area_margin_mm2 = -5.0;
    ch.contrast_limit = ch.contrast_margin = NAN;
    ch.area_exceeds = ch.reportable = ch.exceeds = 1;
    ch.region_pixels = ch.touches = -1;
    pl_id chid = 0;
    TU_OK(pl_store_add_change(f->st, &ch, &chid, &err));
    d = last_row(f->st);
    check_stored(f, PL_TABLE_CHANGE, chid, d);
    free(d);

    /* the map's data is not in its encoding: its digest stands for it */
    unsigned char *enc = NULL;
    size_t len = 0;
    TU_OK(pl_store_row_encode(&enc, &len, f->st, PL_TABLE_MAP, mb, &err));
    assert_true(len < 2000);
    free(enc);
    assert_int_equal(pl_store_row_encode(&enc, &len, f->st, PL_TABLE_MAP, 99, &err), PL_ENOTFOUND);
    assert_int_equal(pl_store_row_encode(&enc, &len, f->st, PL_TABLE_MAP_CHANNEL, 1, &err),
                     PL_EINVAL);

    /* an insert whose row has no canonical form leaves the store as it was */
    pl_store_summary before, after;
    TU_OK(pl_store_summarize(f->st, &before, &err));
    site = test_site("E02");
    snprintf(site.description, sizeof site.description, "bad \xc0\xaf byte");
    assert_int_equal(pl_store_add_site(f->st, &site, NULL, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "description: byte 0xc0 at position 5 is not valid UTF-8");
    TU_OK(pl_store_summarize(f->st, &after, &err));
    assert_int_equal(before.sites, after.sites);
}

/* The JSON form of every table shows each described field at its path,
 * an absent value as null. */
static void test_store_row__json_follows_the_descriptions(void **state)
{
    (void)state;
    pl_err err = { 0 };
    for (int k = 0; k < PL_TABLE_COUNT; k++) {
        const pl_table_desc *t = pl_row__table((pl_table)k);
        void *rec = calloc(1, t->record_size);
        assert_non_null(rec);
        char *text = NULL;
        TU_OK(pl_row_json(&text, (pl_table)k, rec, &err));
        cJSON *j = cJSON_Parse(text);
        assert_non_null(j);
        for (size_t i = 0; i < t->ncols; i++) {
            if (!t->cols[i].json)
                continue;
            char path[128];
            snprintf(path, sizeof path, "%s", t->cols[i].json);
            cJSON *v = j;
            for (char *save = NULL, *seg = strtok_r(path, ".", &save); v && seg;
                 seg = strtok_r(NULL, ".", &save))
                v = cJSON_IsArray(v) ? cJSON_GetArrayItem(v, atoi(seg))
                                     : cJSON_GetObjectItemCaseSensitive(v, seg);
            if (!v)
                fail_msg("%s: no %s in %s", t->name, t->cols[i].json, text);
            int rows = t->cols[i].ctype == PL_C_ROWS, size = t->cols[i].ctype == PL_C_SIZE;
            int flag = t->cols[i].ctype == PL_C_FLAG;
            /* zeroed: every field absent but sizes, counts, reals and flags, whose 0 is a
             * value (a flag's is false) */
            if (!rows && !size && !flag && t->cols[i].ctype != PL_C_F64 &&
                t->cols[i].ctype != PL_C_I64 && !cJSON_IsNull(v))
                fail_msg("%s: %s should be null in %s", t->name, t->cols[i].json, text);
            if (flag && !cJSON_IsFalse(v))
                fail_msg("%s: %s should be false in %s", t->name, t->cols[i].json, text);
            if (rows && cJSON_GetArraySize(v) != 0)
                fail_msg("%s: %s should be empty", t->name, t->cols[i].json);
        }
        cJSON_Delete(j);
        free(text);
        free(rec);
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
#define T(name) cmocka_unit_test_setup_teardown(name, setup, teardown)
        T(test_store_row__descriptions_cover_the_schema),
        T(test_store_row__golden_vectors),
        T(test_store_row__refuses_values_without_canonical_form),
        T(test_store_row__stored_rows_encode_as_inserted_and_as_defined),
        T(test_store_row__json_follows_the_descriptions),
#undef T
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
