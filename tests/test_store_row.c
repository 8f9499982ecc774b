/*
 * test_store_row.c - the recorded tables described once: the descriptions
 * agree with the schema, every record goes in through the one insert path,
 * reads give back what was written, and the JSON form follows the
 * descriptions.
 *
 * External reference: SQLite's own PRAGMA table_info for the schema's
 * columns (https://www.sqlite.org/pragma.html#pragma_table_info).
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

int main(void)
{
    const struct CMUnitTest tests[] = {
#define T(name) cmocka_unit_test_setup_teardown(name, setup, teardown)
        T(test_store_row__descriptions_cover_the_schema),
#undef T
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
