/*
 * store_int.h - store internals shared by store.c and the generated
 * schema_sql.c; never installed.
 */
#ifndef PLYLEDGER_STORE_INT_H
#define PLYLEDGER_STORE_INT_H

/* One numbered schema migration, compiled in from schema/NNNN_*.sql. */
typedef struct pl_migration {
    int version;       /* becomes PRAGMA user_version once applied */
    const char *name;  /* file name, for messages */
    const char *sql;   /* the statements */
} pl_migration;

extern const pl_migration pl__migrations[];
extern const int pl__migration_count;

#endif
