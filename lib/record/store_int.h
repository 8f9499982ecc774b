/*
 * store_int.h - store internals shared by store.c, plan.c and the generated
 * schema_sql.c; never installed.
 */
#ifndef PLYLEDGER_STORE_INT_H
#define PLYLEDGER_STORE_INT_H

#include "plyledger/store.h"

/* One numbered schema migration, compiled in from schema/NNNN_*.sql. */
typedef struct pl_migration {
    int version;       /* becomes PRAGMA user_version once applied */
    const char *name;  /* file name, for messages */
    const char *sql;   /* the statements */
} pl_migration;

extern const pl_migration pl__migrations[];
extern const int pl__migration_count;

/*
 * Open the savepoint that makes one writing call atomic. Outside a caller's
 * transaction it first begins one (BEGIN IMMEDIATE) and sets *owned, so the
 * matching pl_store__write_end() commits it.
 * Returns PL_OK or PL_EDB (read-only store, SQLite refused).
 */
int pl_store__write_begin(pl_store *store, int *owned, pl_err *err);

/*
 * Close the savepoint of pl_store__write_begin(): release (and commit when
 * owned) when rc is PL_OK, else roll back to it. Returns rc, or PL_EDB when
 * the release or commit itself fails (everything is then rolled back).
 */
int pl_store__write_end(pl_store *store, int owned, int rc, pl_err *err);

/*
 * The plyledger status for an SQLite extended result code and its message:
 * a trigger's "append-only" refusal is PL_EREADONLY, its "already" refusal
 * and UNIQUE / PRIMARY KEY violations PL_EEXISTS, a foreign key PL_ENOTFOUND,
 * other constraints PL_EINVAL, SQLITE_NOTADB PL_ENOTSTORE, I/O PL_EIO, out
 * of memory PL_ENOMEM, everything else PL_EDB.
 */
int pl_store__status(int sqlite_extended_code, const char *msg);

/*
 * 1 when `s` is a real calendar date written YYYY-MM-DD (proleptic
 * Gregorian, years 0001-9999), else 0.
 */
int pl_store__valid_date(const char *s);

#endif
