/*
 * test_people.c - the register of people, their keys and qualifications,
 * and the check on recording an inspection (plyledger/people.h).
 *
 * The levels are those of EN 4179 / NAS 410 (1-limited, 1, 2, 3; from
 * memory). People, serials and procedures here are invented.
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

#include "plyledger.h"
#include "testutil.h"

typedef struct fixture {
    char *dir, *path;
    pl_store *st;
} fixture;

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
    snprintf(af.serial, sizeof af.serial, "PPL-0001");
    snprintf(af.aircraft_type, sizeof af.aircraft_type, "PX-9");
    snprintf(af.manufactured, sizeof af.manufactured, "2016-01-10");
    TU_OK(pl_store_add_airframe(f->st, &af, NULL, &err));
    pl_site s;
    memset(&s, 0, sizeof s);
    snprintf(s.airframe_serial, sizeof s.airframe_serial, "PPL-0001");
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

static void person(pl_store *st, const char *handle, const char *name, const char *role)
{
    pl_person p;
    memset(&p, 0, sizeof p);
    snprintf(p.handle, sizeof p.handle, "%s", handle);
    snprintf(p.name, sizeof p.name, "%s", name);
    snprintf(p.role, sizeof p.role, "%s", role);
    snprintf(p.organisation, sizeof p.organisation, "Test Repair Station");
    pl_err err = { 0 };
    TU_OK(pl_store_add_person(st, &p, NULL, &err));
}

static void qualify(pl_store *st, const char *handle, const char *level, const char *from,
                    const char *until)
{
    pl_qualification q;
    memset(&q, 0, sizeof q);
    snprintf(q.handle, sizeof q.handle, "%s", handle);
    snprintf(q.method, sizeof q.method, "flash-thermography");
    snprintf(q.level, sizeof q.level, "%s", level);
    snprintf(q.valid_from, sizeof q.valid_from, "%s", from);
    snprintf(q.valid_until, sizeof q.valid_until, "%s", until);
    snprintf(q.certificate, sizeof q.certificate, "CERT-%s-%s", handle, level);
    pl_err err = { 0 };
    TU_OK(pl_store_add_qualification(st, &q, NULL, &err));
}

static pl_inspection inspection(const char *date, const char *inspector, const char *level)
{
    pl_inspection in;
    memset(&in, 0, sizeof in);
    snprintf(in.airframe_serial, sizeof in.airframe_serial, "PPL-0001");
    snprintf(in.site_code, sizeof in.site_code, "S01");
    snprintf(in.kind, sizeof in.kind, "baseline");
    snprintf(in.performed_on, sizeof in.performed_on, "%s", date);
    in.aircraft_hours = NAN;
    in.aircraft_cycles = -1;
    snprintf(in.procedure, sizeof in.procedure, "NDT-PX-51-01");
    snprintf(in.procedure_rev, sizeof in.procedure_rev, "B");
    snprintf(in.equipment, sizeof in.equipment, "test rig");
    snprintf(in.calibration_ref, sizeof in.calibration_ref, "REF-01");
    snprintf(in.inspector, sizeof in.inspector, "%s", inspector);
    snprintf(in.inspector_level, sizeof in.inspector_level, "%s", level);
    return in;
}

static int64_t links(pl_store *st)
{
    pl_store_summary sum;
    pl_err err = { 0 };
    TU_OK(pl_store_summarize(st, &sum, &err));
    return sum.ledger_links;
}

/* A handle is unique whatever its case; a field is checked and named. */
static void test_people__register_refuses_a_second_handle_and_bad_fields(void **state)
{
    fixture *f = *state;
    person(f->st, "k.ostrova", "K. Ostrova", "inspector");
    pl_person p;
    memset(&p, 0, sizeof p);
    snprintf(p.handle, sizeof p.handle, "K.OSTROVA");
    snprintf(p.name, sizeof p.name, "Another");
    snprintf(p.role, sizeof p.role, "inspector");
    pl_err err = { 0 };
    assert_int_equal(pl_store_add_person(f->st, &p, NULL, &err), PL_EEXISTS);
    snprintf(p.handle, sizeof p.handle, "m.dane");
    snprintf(p.role, sizeof p.role, "boss");
    assert_int_equal(pl_store_add_person(f->st, &p, NULL, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "role");
    pl_person got;
    TU_OK(pl_store_get_person(f->st, "K.Ostrova", &got, &err));
    assert_string_equal(got.name, "K. Ostrova");
    /* a qualification whose dates run backwards, or a free-text level */
    pl_qualification q;
    memset(&q, 0, sizeof q);
    snprintf(q.handle, sizeof q.handle, "k.ostrova");
    snprintf(q.method, sizeof q.method, "flash-thermography");
    snprintf(q.level, sizeof q.level, "2");
    snprintf(q.valid_from, sizeof q.valid_from, "2024-01-01");
    snprintf(q.valid_until, sizeof q.valid_until, "2023-01-01");
    assert_int_equal(pl_store_add_qualification(f->st, &q, NULL, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "valid_until 2023-01-01 is before valid_from");
    snprintf(q.valid_until, sizeof q.valid_until, "2027-01-01");
    snprintf(q.level, sizeof q.level, "senior");
    assert_int_equal(pl_store_add_qualification(f->st, &q, NULL, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "level");
}

/* Keys: a replaced key needs a later date and a reason; the key held on a
 * date is the latest from on or before it. */
static void test_people__the_key_held_on_a_date(void **state)
{
    fixture *f = *state;
    person(f->st, "r.vance", "R. Vance", "engineer");
    pl_sign_key a, b;
    unsigned char seed[32];
    memset(seed, 1, sizeof seed);
    pl_sign_key_from_seed(&a, seed);
    memset(seed, 2, sizeof seed);
    pl_sign_key_from_seed(&b, seed);
    pl_person_key k;
    memset(&k, 0, sizeof k);
    snprintf(k.handle, sizeof k.handle, "r.vance");
    pl_sha256_hex(k.public_key, a.public_key);
    snprintf(k.valid_from, sizeof k.valid_from, "2020-01-01");
    pl_err err = { 0 };
    TU_OK(pl_store_add_person_key(f->st, &k, NULL, &err));
    pl_sha256_hex(k.public_key, b.public_key);
    snprintf(k.valid_from, sizeof k.valid_from, "2019-06-01");
    assert_int_equal(pl_store_add_person_key(f->st, &k, NULL, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "must start after");
    snprintf(k.valid_from, sizeof k.valid_from, "2024-03-01");
    assert_int_equal(pl_store_add_person_key(f->st, &k, NULL, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "reason");
    snprintf(k.reason, sizeof k.reason, "laptop replaced");
    TU_OK(pl_store_add_person_key(f->st, &k, NULL, &err));
    snprintf(k.valid_from, sizeof k.valid_from, "2025-01-01");
    assert_int_equal(pl_store_add_person_key(f->st, &k, NULL, &err), PL_EEXISTS);
    snprintf(k.public_key, sizeof k.public_key, "%s", "not hex");
    assert_int_equal(pl_store_add_person_key(f->st, &k, NULL, &err), PL_EINVAL);
    pl_person p;
    TU_OK(pl_store_get_person(f->st, "r.vance", &p, &err));
    unsigned char pub[32];
    TU_OK(pl_store_person_key_on(f->st, p.id, "2024-02-29", pub, &err));
    assert_memory_equal(pub, a.public_key, 32);
    TU_OK(pl_store_person_key_on(f->st, p.id, "2024-03-01", pub, &err));
    assert_memory_equal(pub, b.public_key, 32);
    assert_int_equal(pl_store_person_key_on(f->st, p.id, "2019-12-31", pub, &err),
                     PL_ENOTFOUND);
}

/* Recording an inspection: an unregistered inspector, a lapsed or not yet
 * valid qualification, a level the person does not hold, and a level the
 * procedure does not allow are each refused with the reason, and leave the
 * store as it was; a valid one is recorded. */
static void test_people__an_inspection_needs_a_valid_qualification(void **state)
{
    fixture *f = *state;
    pl_err err = { 0 };
    /* no inspector in the register: a name is recorded as given */
    pl_inspection in = inspection("2016-02-01", "someone", "2");
    TU_OK(pl_store_add_inspection(f->st, &in, NULL, &err));
    person(f->st, "k.ostrova", "K. Ostrova", "inspector");
    person(f->st, "l.bright", "L. Bright", "inspector");
    qualify(f->st, "k.ostrova", "2", "2018-01-01", "2022-12-31");
    qualify(f->st, "l.bright", "1", "2018-01-01", "2030-12-31");
    int64_t before = links(f->st);
    static const struct {
        const char *date, *who, *level, *words;
    } refused[] = {
        { "2019-03-01", "nobody", "2", "'nobody' is not in the register" },
        { "2023-01-01", "k.ostrova", "2", "lapsed: its level 2 qualification for "
                                          "flash-thermography is valid from 2018-01-01 to "
                                          "2022-12-31" },
        { "2017-06-01", "k.ostrova", "2", "not yet valid" },
        { "2019-03-01", "k.ostrova", "3", "not level 3 as recorded" },
    };
    char kind_sched[] = "scheduled";
    for (size_t i = 0; i < sizeof refused / sizeof refused[0]; i++) {
        in = inspection(refused[i].date, refused[i].who, refused[i].level);
        snprintf(in.kind, sizeof in.kind, "%s", kind_sched);
        assert_int_equal(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EREFUSED);
        tu_assert_msg_has(err.msg, refused[i].words);
        tu_assert_msg_has(err.msg, "inspection of site S01 on PPL-0001");
        assert_int_equal(links(f->st), before);
    }
    in = inspection("2019-03-01", "K.Ostrova", "2");
    snprintf(in.kind, sizeof in.kind, "%s", kind_sched);
    TU_OK(pl_store_add_inspection(f->st, &in, NULL, &err));
    /* the procedure lets levels 2 and 3 perform it: a level 1 is refused */
    pl_procedure_levels pr;
    memset(&pr, 0, sizeof pr);
    snprintf(pr.procedure, sizeof pr.procedure, "NDT-PX-51-01");
    snprintf(pr.levels, sizeof pr.levels, "2, 3");
    TU_OK(pl_store_set_procedure_levels(f->st, &pr, NULL, &err));
    in = inspection("2020-03-01", "l.bright", "1");
    snprintf(in.kind, sizeof in.kind, "%s", kind_sched);
    assert_int_equal(pl_store_add_inspection(f->st, &in, NULL, &err), PL_EREFUSED);
    tu_assert_msg_has(err.msg, "procedure NDT-PX-51-01 revision B lets levels 2 3 perform it");
    /* a revision's own row governs that revision */
    snprintf(pr.procedure_rev, sizeof pr.procedure_rev, "B");
    snprintf(pr.levels, sizeof pr.levels, "1 2 3");
    TU_OK(pl_store_set_procedure_levels(f->st, &pr, NULL, &err));
    TU_OK(pl_store_add_inspection(f->st, &in, NULL, &err));
    snprintf(pr.levels, sizeof pr.levels, "2 expert");
    assert_int_equal(pl_store_set_procedure_levels(f->st, &pr, NULL, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, "'expert' is not a level");
    /* a correction naming a lapsed inspector is refused; one of another
     * field leaves the free-text name of an earlier inspection alone */
    pl_id first = 1; /* the first inspection recorded, by "someone" (key 1) */
    pl_inspection cur;
    TU_OK(pl_store_get_inspection(f->st, first, &cur, &err));
    pl_inspection fix = cur;
    fix.parameters_json = NULL;
    snprintf(fix.notes, sizeof fix.notes, "rig serial noted");
    TU_OK(pl_store_correct_inspection(f->st, first, &fix, "notes added", NULL, &err));
    snprintf(fix.inspector, sizeof fix.inspector, "k.ostrova");
    assert_int_equal(pl_store_correct_inspection(f->st, first, &fix, "inspector named", NULL,
                                                 &err),
                     PL_EREFUSED);
    tu_assert_msg_has(err.msg, "not yet valid");
    pl_inspection_clear(&cur);
    /* the register's rows are chained and verify */
    pl_verify_result res;
    TU_OK(pl_store_verify(f->st, &res, NULL, &err));
    if (res.faults)
        fail_msg("%s", res.message);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(
            test_people__register_refuses_a_second_handle_and_bad_fields, setup, teardown),
        cmocka_unit_test_setup_teardown(test_people__the_key_held_on_a_date, setup, teardown),
        cmocka_unit_test_setup_teardown(test_people__an_inspection_needs_a_valid_qualification,
                                        setup, teardown),
    };
    return cmocka_run_group_tests_name("people", tests, NULL, NULL);
}
