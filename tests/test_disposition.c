/*
 * test_disposition.c - interpretations and signed dispositions
 * (plyledger/disposition.h).
 *
 * The workflow's terms are those of ASTM E1316 (false, nonrelevant and
 * relevant indications; from memory). Signatures are Ed25519 (RFC 8032,
 * checked against its test vectors in test_sign.c). People, serials and
 * references here are invented.
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plyledger.h"
#include "testutil.h"

typedef struct fixture {
    char *dir, *path;
    pl_store *st;
    pl_id base, cur, cmp;
    pl_id chg[3];
    pl_sign_key insp, eng, eng2;
} fixture;

static void key_of(pl_sign_key *k, unsigned char b)
{
    unsigned char seed[32];
    memset(seed, b, sizeof seed);
    pl_sign_key_from_seed(k, seed);
}

static void person(pl_store *st, const char *handle, const char *role, const pl_sign_key *k,
                   const char *from)
{
    pl_person p;
    memset(&p, 0, sizeof p);
    snprintf(p.handle, sizeof p.handle, "%s", handle);
    snprintf(p.name, sizeof p.name, "Person %s", handle);
    snprintf(p.role, sizeof p.role, "%s", role);
    pl_err err = { 0 };
    TU_OK(pl_store_add_person(st, &p, NULL, &err));
    pl_person_key pk;
    memset(&pk, 0, sizeof pk);
    snprintf(pk.handle, sizeof pk.handle, "%s", handle);
    pl_sha256_hex(pk.public_key, k->public_key);
    snprintf(pk.valid_from, sizeof pk.valid_from, "%s", from);
    TU_OK(pl_store_add_person_key(st, &pk, NULL, &err));
}

static pl_id inspect(pl_store *st, const char *kind, const char *date)
{
    pl_inspection in;
    memset(&in, 0, sizeof in);
    snprintf(in.airframe_serial, sizeof in.airframe_serial, "DSP-0001");
    snprintf(in.site_code, sizeof in.site_code, "S01");
    snprintf(in.kind, sizeof in.kind, "%s", kind);
    snprintf(in.performed_on, sizeof in.performed_on, "%s", date);
    in.aircraft_hours = NAN;
    in.aircraft_cycles = -1;
    snprintf(in.procedure, sizeof in.procedure, "NDT-DX-01");
    snprintf(in.procedure_rev, sizeof in.procedure_rev, "A");
    snprintf(in.equipment, sizeof in.equipment, "test rig");
    snprintf(in.calibration_ref, sizeof in.calibration_ref, "REF-01");
    snprintf(in.inspector, sizeof in.inspector, "someone");
    snprintf(in.inspector_level, sizeof in.inspector_level, "2");
    pl_id id;
    pl_err err = { 0 };
    TU_OK(pl_store_add_inspection(st, &in, &id, &err));
    pl_inspection back;
    TU_OK(pl_store_get_inspection(st, id, &back, &err));
    pl_id key = back.key;
    pl_inspection_clear(&back);
    return key;
}

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    assert_non_null(f);
    f->dir = tu_tmpdir();
    f->path = tu_path(f->dir, "fleet.db");
    pl_err err = { 0 };
    TU_OK(pl_store_create(&f->st, f->path, &err));
    TU_OK(pl_store_set_today(f->st, "2026-06-30", &err));
    pl_airframe af;
    memset(&af, 0, sizeof af);
    snprintf(af.serial, sizeof af.serial, "DSP-0001");
    snprintf(af.aircraft_type, sizeof af.aircraft_type, "DX-2");
    snprintf(af.manufactured, sizeof af.manufactured, "2015-05-01");
    TU_OK(pl_store_add_airframe(f->st, &af, NULL, &err));
    pl_site s;
    memset(&s, 0, sizeof s);
    snprintf(s.airframe_serial, sizeof s.airframe_serial, "DSP-0001");
    snprintf(s.code, sizeof s.code, "S01");
    snprintf(s.method, sizeof s.method, "flash-thermography");
    s.thickness_mm = 3.0;
    s.diffusivity_mm2_s = NAN;
    s.map_frame.u[0] = 1;
    s.map_frame.v[1] = 1;
    snprintf(s.map_frame.system, sizeof s.map_frame.system, "STA/BL/WL");
    snprintf(s.map_frame.unit, sizeof s.map_frame.unit, "mm");
    s.pitch_u = s.pitch_v = 0.5;
    TU_OK(pl_store_add_site(f->st, &s, NULL, &err));
    f->base = inspect(f->st, "baseline", "2015-06-01");
    f->cur = inspect(f->st, "scheduled", "2021-06-01");
    pl_comparison_record c;
    memset(&c, 0, sizeof c);
    c.baseline_inspection = f->base;
    c.current_inspection = f->cur;
    snprintf(c.status, sizeof c.status, "done");
    c.uncompared_mm2 = c.uncompared_fraction = 0;
    TU_OK(pl_store_add_comparison(f->st, &c, &f->cmp, &err));
    for (int i = 0; i < 3; i++) {
        pl_change_record r;
        memset(&r, 0, sizeof r);
        r.comparison_id = f->cmp;
        r.number = i + 1;
        snprintf(r.class_, sizeof r.class_, "%s", i == 0 ? "grown" : "new");
        snprintf(r.matched_by, sizeof r.matched_by, i == 0 ? "overlap" : "none");
        snprintf(r.sizing, sizeof r.sizing, "threshold");
        char one[] = "[1]", none[] = "[]", cur[] = "[1]";
        r.baseline_labels = i == 0 ? one : none;
        r.current_labels = cur;
        r.area_baseline_mm2 = i == 0 ? 100 : NAN;
        r.area_current_mm2 = 180;
        r.area_delta_mm2 = i == 0 ? 80 : NAN;
        r.area_delta_percent = i == 0 ? 80 : NAN;
        r.area_baseline_halfmax_mm2 = r.area_current_halfmax_mm2 = NAN;
        r.area_delta_halfmax_mm2 = NAN;
        r.contrast_baseline = r.contrast_current = r.contrast_delta = NAN;
        r.centroid_col = 10 + 20 * i;
        r.centroid_row = 10;
        r.distance_px = NAN;
        r.area_limit_mm2 = 40;
        r.area_measured_mm2 = 80;
        r.area_margin_mm2 = -40;
        r.area_exceeds = 1;
        r.contrast_limit = r.contrast_margin = NAN;
        r.reportable = 1;
        r.exceeds = 1;
        r.region_pixels = r.touches = -1;
        TU_OK(pl_store_add_change(f->st, &r, &f->chg[i], &err));
    }
    key_of(&f->insp, 11);
    key_of(&f->eng, 12);
    key_of(&f->eng2, 13);
    person(f->st, "t.inspect", "inspector", &f->insp, "2020-01-01");
    person(f->st, "e.decide", "engineer", &f->eng, "2020-01-01");
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

static int interpret(fixture *f, pl_id change, const char *cls, pl_id supersedes,
                     const char *reason, pl_err *err)
{
    pl_interpretation in;
    memset(&in, 0, sizeof in);
    in.change_id = change;
    snprintf(in.class_, sizeof in.class_, "%s", cls);
    snprintf(in.handle, sizeof in.handle, "t.inspect");
    snprintf(in.signed_on, sizeof in.signed_on, "2021-06-10");
    in.supersedes = supersedes;
    snprintf(in.reason, sizeof in.reason, "%s", reason ? reason : "");
    return pl_store_add_interpretation(f->st, &in, &f->insp, NULL, err);
}

static pl_disposition decision(fixture *f, const char *dec, const char *date)
{
    pl_disposition d;
    memset(&d, 0, sizeof d);
    d.comparison_id = f->cmp;
    snprintf(d.decision, sizeof d.decision, "%s", dec);
    d.due_hours = NAN;
    d.due_cycles = -1;
    snprintf(d.handle, sizeof d.handle, "e.decide");
    snprintf(d.signed_on, sizeof d.signed_on, "%s", date);
    return d;
}

static int64_t links(pl_store *st)
{
    pl_store_summary sum;
    pl_err err = { 0 };
    TU_OK(pl_store_summarize(st, &sum, &err));
    return sum.ledger_links;
}

static int count_disp(void *ud, const pl_disposition *d)
{
    int *n = ud;
    n[0]++;
    n[1] += d->superseded;
    return 0;
}

static pl_verify_result verify(pl_store *st)
{
    pl_verify_result res;
    pl_err err = { 0 };
    TU_OK(pl_store_verify(st, &res, NULL, &err));
    return res;
}

/* Only a relevant indication is disposed of; a disposition in force is
 * superseded, never edited; each decision carries what it needs. */
static void test_disposition__the_workflow_follows_e1316(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    TU_OK(interpret(f, f->chg[0], "relevant", 0, NULL, &err));
    TU_OK(interpret(f, f->chg[1], "nonrelevant", 0, NULL, &err));
    assert_int_equal(interpret(f, f->chg[1], "relevant", 0, NULL, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, "interpreted already");
    pl_id c1 = f->chg[1], c2 = f->chg[2], c0 = f->chg[0];
    pl_disposition d = decision(f, "monitor", "2021-06-20");
    snprintf(d.due_date, sizeof d.due_date, "2023-06-01");
    int64_t before = links(f->st);
    assert_int_equal(pl_store_add_disposition(f->st, &d, &c1, 1, &f->eng, NULL, &err),
                     PL_EREFUSED);
    tu_assert_msg_has(err.msg, "is interpreted as nonrelevant");
    assert_int_equal(pl_store_add_disposition(f->st, &d, &c2, 1, &f->eng, NULL, &err),
                     PL_EREFUSED);
    tu_assert_msg_has(err.msg, "is not interpreted yet");
    assert_int_equal(links(f->st), before);
    pl_disposition bad = decision(f, "monitor", "2021-06-20");
    assert_int_equal(pl_store_add_disposition(f->st, &bad, &c0, 1, &f->eng, NULL, &err),
                     PL_EINVAL);
    tu_assert_msg_has(err.msg, "say when the next inspection is due");
    bad = decision(f, "repair", "2021-06-20");
    assert_int_equal(pl_store_add_disposition(f->st, &bad, &c0, 1, &f->eng, NULL, &err),
                     PL_EINVAL);
    tu_assert_msg_has(err.msg, "repair reference");
    bad = decision(f, "monitor", "2021-05-20");
    bad.due_cycles = 500;
    assert_int_equal(pl_store_add_disposition(f->st, &bad, &c0, 1, &f->eng, NULL, &err),
                     PL_EINVAL);
    tu_assert_msg_has(err.msg, "before the inspection it is about");
    /* the inspector's role does not dispose */
    bad = decision(f, "accept", "2021-06-20");
    snprintf(bad.handle, sizeof bad.handle, "t.inspect");
    assert_int_equal(pl_store_add_disposition(f->st, &bad, &c0, 1, &f->insp, NULL, &err),
                     PL_EREFUSED);
    tu_assert_msg_has(err.msg, "registered as inspector");
    pl_id first;
    TU_OK(pl_store_add_disposition(f->st, &d, &c0, 1, &f->eng, &first, &err));
    /* covered already: supersede it */
    pl_disposition rep = decision(f, "repair", "2021-07-01");
    snprintf(rep.repair_ref, sizeof rep.repair_ref, "SRM-DX-51-10-R3");
    assert_int_equal(pl_store_add_disposition(f->st, &rep, &c0, 1, &f->eng, NULL, &err),
                     PL_EREFUSED);
    tu_assert_msg_has(err.msg, "is covered by disposition");
    rep.supersedes = first;
    assert_int_equal(pl_store_add_disposition(f->st, &rep, &c0, 1, &f->eng, NULL, &err),
                     PL_EINVAL);
    tu_assert_msg_has(err.msg, "reason");
    snprintf(rep.reason, sizeof rep.reason, "growth rate reviewed: repair now");
    TU_OK(pl_store_add_disposition(f->st, &rep, &c0, 1, &f->eng, NULL, &err));
    assert_int_equal(pl_store_add_disposition(f->st, &rep, &c0, 1, &f->eng, NULL, &err),
                     PL_EREFUSED);
    tu_assert_msg_has(err.msg, "superseded already");
    int n[2] = { 0, 0 };
    TU_OK(pl_store_list_dispositions(f->st, "dsp-0001", "S01", 0, count_disp, n, &err));
    assert_int_equal(n[0], 2); /* both stay in the record */
    assert_int_equal(n[1], 1);
    pl_verify_result res = verify(f->st);
    if (res.faults)
        fail_msg("%s", res.message);
    assert_int_equal(res.signatures, 4); /* two interpretations, two dispositions */
    /* the repair makes the next inspection the post-repair baseline */
    before = links(f->st);
    pl_inspection in;
    memset(&in, 0, sizeof in);
    snprintf(in.airframe_serial, sizeof in.airframe_serial, "DSP-0001");
    snprintf(in.site_code, sizeof in.site_code, "S01");
    snprintf(in.kind, sizeof in.kind, "scheduled");
    snprintf(in.performed_on, sizeof in.performed_on, "2022-01-15");
    in.aircraft_hours = NAN;
    in.aircraft_cycles = -1;
    snprintf(in.procedure, sizeof in.procedure, "NDT-DX-01");
    snprintf(in.procedure_rev, sizeof in.procedure_rev, "A");
    snprintf(in.equipment, sizeof in.equipment, "test rig");
    snprintf(in.calibration_ref, sizeof in.calibration_ref, "REF-01");
    snprintf(in.inspector, sizeof in.inspector, "t.inspect");
    snprintf(in.inspector_level, sizeof in.inspector_level, "2");
    pl_qualification q;
    memset(&q, 0, sizeof q);
    snprintf(q.handle, sizeof q.handle, "t.inspect");
    snprintf(q.method, sizeof q.method, "flash-thermography");
    snprintf(q.level, sizeof q.level, "2");
    snprintf(q.valid_from, sizeof q.valid_from, "2020-01-01");
    snprintf(q.valid_until, sizeof q.valid_until, "2025-12-31");
    TU_OK(pl_store_add_qualification(f->st, &q, NULL, &err));
    before = links(f->st);
    assert_int_equal(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, "decided a repair of this site (SRM-DX-51-10-R3)");
    tu_assert_msg_has(err.msg, "record it with kind post-repair");
    assert_int_equal(links(f->st), before);
    snprintf(in.kind, sizeof in.kind, "post-repair");
    TU_OK(pl_store_add_inspection(f->st, &in, NULL, &err));
    snprintf(in.kind, sizeof in.kind, "scheduled");
    snprintf(in.performed_on, sizeof in.performed_on, "2023-01-15");
    TU_OK(pl_store_add_inspection(f->st, &in, NULL, &err));
}

/* A signature with the wrong key is refused; a key replaced later leaves
 * the older signatures good. */
static void test_disposition__keys_and_their_dates(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    TU_OK(interpret(f, f->chg[0], "relevant", 0, NULL, &err));
    TU_OK(interpret(f, f->chg[2], "relevant", 0, NULL, &err));
    pl_id c0 = f->chg[0], c2 = f->chg[2];
    pl_disposition d = decision(f, "accept", "2021-06-20");
    int64_t before = links(f->st);
    assert_int_equal(pl_store_add_disposition(f->st, &d, &c0, 1, &f->eng2, NULL, &err),
                     PL_EREFUSED);
    tu_assert_msg_has(err.msg, "is not the key e.decide holds on 2021-06-20");
    assert_int_equal(links(f->st), before);
    TU_OK(pl_store_add_disposition(f->st, &d, &c0, 1, &f->eng, NULL, &err));
    pl_person_key pk;
    memset(&pk, 0, sizeof pk);
    snprintf(pk.handle, sizeof pk.handle, "e.decide");
    pl_sha256_hex(pk.public_key, f->eng2.public_key);
    snprintf(pk.valid_from, sizeof pk.valid_from, "2022-01-01");
    snprintf(pk.reason, sizeof pk.reason, "key rotated");
    TU_OK(pl_store_add_person_key(f->st, &pk, NULL, &err));
    d = decision(f, "refer-to-design-holder", "2022-02-01");
    snprintf(d.query_ref, sizeof d.query_ref, "TQ-2022-014");
    assert_int_equal(pl_store_add_disposition(f->st, &d, &c2, 1, &f->eng, NULL, &err),
                     PL_EREFUSED);
    TU_OK(pl_store_add_disposition(f->st, &d, &c2, 1, &f->eng2, NULL, &err));
    pl_verify_result res = verify(f->st);
    if (res.faults)
        fail_msg("%s", res.message);
    assert_int_equal(res.signatures, 4);
}

/* Edits of the file: a signature changed, a person's public key replaced. */
static void test_disposition__verify_names_a_broken_signature(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    TU_OK(interpret(f, f->chg[0], "relevant", 0, NULL, &err));
    pl_id c0 = f->chg[0];
    pl_disposition d = decision(f, "accept", "2021-06-20");
    TU_OK(pl_store_add_disposition(f->st, &d, &c0, 1, &f->eng, NULL, &err));
    pl_store_close(f->st);
    f->st = NULL;
    char *copy = tu_path(f->dir, "copy.db");
    size_t n;
    unsigned char *bytes = tu_read_file(f->path, &n);
    assert_non_null(bytes);
    assert_int_equal(tu_write_file(copy, bytes, n), 0);
    free(bytes);
    static const char *const attacks[2] = {
        "DROP TRIGGER disposition_no_update;"
        " UPDATE disposition SET signature = zeroblob(64)",
        "DROP TRIGGER person_key_no_update; UPDATE person_key SET public_key ="
        " (SELECT public_key FROM person_key WHERE id = 1) WHERE id = 2",
    };
    for (int a = 0; a < 2; a++) {
        const char *target = a == 0 ? f->path : copy;
        sqlite3 *db;
        assert_int_equal(sqlite3_open(target, &db), SQLITE_OK);
        char *msg = NULL;
        if (sqlite3_exec(db, attacks[a], NULL, NULL, &msg) != SQLITE_OK) {
            /* the key column is UNIQUE: put another key there instead */
            sqlite3_free(msg);
            assert_int_equal(sqlite3_exec(db,
                                          "UPDATE person_key SET public_key = '00112233445566778899"
                                          "aabbccddeeff00112233445566778899aabbccddeeff' WHERE id = 2",
                                          NULL, NULL, NULL),
                             SQLITE_OK);
        }
        sqlite3_close(db);
        pl_store *st;
        TU_OK(pl_store_open(&st, target, 0, &err));
        pl_verify_result res = verify(st);
        pl_store_close(st);
        assert_true(res.faults >= 1);
        if (a == 0) {
            assert_int_equal(res.first, PL_FAULT_ROW_CHANGED);
            tu_assert_msg_has(res.message, "disposition");
        } else {
            tu_assert_msg_has(res.message, "person's public key");
        }
        assert_true(res.faults >= 2); /* the signature fault follows */
    }
    free(copy);
    TU_OK(pl_store_open(&f->st, f->path, 0, &err));
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_disposition__the_workflow_follows_e1316, setup,
                                        teardown),
        cmocka_unit_test_setup_teardown(test_disposition__keys_and_their_dates, setup, teardown),
        cmocka_unit_test_setup_teardown(test_disposition__verify_names_a_broken_signature, setup,
                                        teardown),
    };
    return cmocka_run_group_tests_name("disposition", tests, NULL, NULL);
}
