/*
 * store_int.h - internals shared by the store's files (store.c,
 * store_row.c, store_airframe.c, store_inspection.c, store_registration.c,
 * store_criteria.c),
 * plan.c, history.c and the generated schema_sql.c; never installed.
 *
 * All SQL of the library lives in the store's files; no other module sees a
 * sqlite3 handle.
 */
#ifndef PLYLEDGER_STORE_INT_H
#define PLYLEDGER_STORE_INT_H

#include "plyledger/store.h"
#include "plyledger/sign.h"
#include "plyledger/store_row.h"

#include <sqlite3.h>
#include <stddef.h>
#include <time.h>

/* One numbered schema migration, compiled in from schema/NNNN_*.sql. */
typedef struct pl_migration {
    int version;       /* becomes PRAGMA user_version once applied */
    const char *name;  /* file name, for messages */
    const char *sql;   /* the statements */
} pl_migration;

extern const pl_migration pl__migrations[];
extern const int pl__migration_count;

struct pl_store {
    sqlite3 *db;
    char *path;          /* as given, for messages */
    int schema_version;
    unsigned flags;
    sqlite3_stmt *insert[PL_TABLE_COUNT];  /* each table's INSERT, prepared once */
    unsigned char last_row[32];            /* SHA-256 of the last row's canonical encoding */
    double wait_s;                         /* how long a write waits for another's lock */
    struct timespec busy_since;            /* when the current wait began */
    char today[PL_DATE_SIZE];              /* pl_store_set_today(), or "" */
    char migration_note[256];              /* what opening migrated, or "" */
    int sealed;                            /* the store has its own seal key */
    pl_id seal_key_id;                     /* its row in seal_key */
    unsigned char seal_public[PL_SIGN_PUBLIC_SIZE];
    int has_seal_secret;                   /* pl_store_set_seal_key() given */
    pl_sign_key seal_secret;
};

/* A fixed text field as printf arguments: "%.*s" never reads past it. */
#define FLD(x) (int)sizeof(x), (x)

/* Room for "site <code> on <serial>" and the like. */
#define STORE_LABEL_SIZE 256

/* ---- SQLite, shared by the store's files (store.c) ------------------------- */

/*
 * The plyledger status for an SQLite extended result code and its message:
 * a trigger's "append-only" refusal is PL_EREADONLY, its "already" refusal
 * and UNIQUE / PRIMARY KEY violations PL_EEXISTS, a foreign key PL_ENOTFOUND,
 * other constraints PL_EINVAL, SQLITE_NOTADB PL_ENOTSTORE, I/O PL_EIO, out
 * of memory PL_ENOMEM, a lock another connection held past the wait
 * (SQLITE_BUSY, SQLITE_LOCKED) PL_EBUSY, everything else PL_EDB.
 */
int pl_store__status(int sqlite_extended_code, const char *msg);

/* Report the connection's last error as "<label>: <sqlite message>" (label
 * NULL: the store's path), or, for PL_EBUSY, as a plain sentence that
 * another process is writing and nothing was recorded. Call it before
 * anything else touches the connection. */
int pl_store__fail(pl_store *s, pl_err *err, const char *label);

int pl_store__exec(pl_store *s, const char *sql, pl_err *err);
int pl_store__prepare(pl_store *s, sqlite3_stmt **st, const char *sql, pl_err *err);

/* Run a statement that returns at most one row holding one integer, and
 * finalize it: PL_OK with *found set (and *value when found and value is
 * not NULL), or the failure. */
int pl_store__finish_int(pl_store *s, sqlite3_stmt *st, int *found, int64_t *value,
                         pl_err *err, const char *label);

/* The integer a one-value statement without parameters gives; 0 for no row. */
int pl_store__query_int(pl_store *s, const char *sql, int64_t *value, pl_err *err);

/* End a listing whose last sqlite3_step() gave `r`: unless `rc` already
 * holds a failure, a step that neither gave a row nor finished is one.
 * Finalizes the statement. */
int pl_store__finish_listing(pl_store *s, sqlite3_stmt *st, int r, int rc, pl_err *err,
                             const char *label);

/* Prepare `sql`, bind `id` as ?1 and step to its first row: PL_OK with *st
 * on that row (the caller finalizes it), or PL_ENOTFOUND "<label>:
 * <missing>" when there is none, or the failure. */
int pl_store__row_by_id(pl_store *s, sqlite3_stmt **st, const char *sql, pl_id id, pl_err *err,
                        const char *label, const char *missing);

/* Bind text, or NULL when v is NULL or empty. */
int pl_store__bind_opt_text(sqlite3_stmt *st, int i, const char *v);

/* A text column into a fixed buffer ("" for NULL). */
void pl_store__col_text(sqlite3_stmt *st, int i, char *dst, size_t cap);

/* UTC now as 2024-05-01T12:34:56.789Z. */
void pl_store__now(char out[PL_DATE_SIZE]);

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

/* Check a correction's reason (required, free text) and open its write
 * scope as pl_store__write_begin() does. */
int pl_store__correction_begin(pl_store *s, const char *reason, int *owned, pl_err *err,
                               const char *label);

/* pl_store__write_end(), then *id (may be NULL) = newid when all went well. */
int pl_store__write_end_id(pl_store *store, int owned, int rc, pl_id newid, pl_id *id,
                           pl_err *err);

/*
 * 1 when `s` is a real calendar date written YYYY-MM-DD (proleptic
 * Gregorian, years 0001-9999), else 0.
 */
int pl_store__valid_date(const char *s);

/* Refuse `date` (field `what` of `label`) when it lies after the store's
 * today (pl_store_set_today()); PL_OK when it does not or no today is set. */
int pl_store__not_after_today(pl_store *s, const char *date, const char *what, pl_err *err,
                              const char *label);


/* Lookups by name (store_airframe.c): the key and current row of the airframe
 * with `serial`, of the site `code` of airframe `af_key`; PL_ENOTFOUND
 * naming `label`. */
int pl_store__airframe_key(pl_store *s, const char *serial, pl_id *key, pl_id *current,
                           pl_err *err, const char *label);
int pl_store__site_key(pl_store *s, pl_id af_key, const char *code, pl_id *key, pl_id *current,
                       pl_err *err, const char *label);

/* The key of the inspection map `map_id` belongs to (store_inspection.c);
 * PL_ENOTFOUND when there is no such map. */
int pl_store__map_inspection(pl_store *s, pl_id map_id, pl_id *inspection_key, pl_err *err);

/* The latest operator's `col` of the airframe `t` (a current row) in SQL. */
#define PL_STORE_LATEST_OPERATOR(col) \
    "(SELECT o." col " FROM airframe_operator o WHERE o.airframe_key = t.stable_key " \
    "ORDER BY o.since DESC, o.id DESC LIMIT 1)"

/* A pl_row_fn that hands a record to a public callback of type fn_type
 * (stopping on any non-zero): call_<name>, with its context <name>_cb. */
#define PL_STORE_CALLBACK(name, fn_type)                      \
    typedef struct name##_cb {                                \
        fn_type fn;                                           \
        void *ud;                                             \
    } name##_cb;                                              \
    static int call_##name(void *ud, void *rec)               \
    {                                                         \
        name##_cb *c = ud;                                    \
        return c->fn(c->ud, rec) ? 1 : 0;                     \
    }

/* ---- the row descriptions (store_row.c) -------------------------------------- */

/* How a column is stored: its SQL type, which is also its canonical type. */
typedef enum pl_stype {
    PL_S_NONE = 0,  /* not stored in the table: a field read through a join */
    PL_S_INTEGER,
    PL_S_REAL,
    PL_S_TEXT,
    PL_S_BLOB,
    PL_S_ROWS,      /* the record's child rows (another table) */
} pl_stype;

/* How a field is held in its public struct, and what "absent" is there. */
typedef enum pl_ctype {
    PL_C_NONE = 0,  /* not in the struct: the store supplies it */
    PL_C_ID,        /* pl_id; 0 absent */
    PL_C_I64,       /* int64_t; -1 absent */
    PL_C_U32,       /* uint32_t; 0 absent (an expected size "any") */
    PL_C_F64,       /* double; NaN absent */
    PL_C_TEXT,      /* char[size]; "" absent */
    PL_C_STR,       /* char *, malloc'd on read; NULL (or "") absent */
    PL_C_SIZE,      /* size_t */
    PL_C_FLAG,      /* int: 0 or 1; -1 absent (JSON true, false or null) */
    PL_C_ROWS,      /* pointer to `count` child structs */
} pl_ctype;

/* The check a caller's value passes (pl_row__check()). */
typedef enum pl_form {
    PL_F_ANY = 0,
    PL_F_NAME,         /* one line, no leading or trailing spaces */
    PL_F_KEY,          /* a key: serial or site code (pl_key_check()) */
    PL_F_TEXT,         /* free text */
    PL_F_DATE,         /* YYYY-MM-DD, a real calendar date */
    PL_F_JSON,         /* a JSON object */
    PL_F_POSITIVE,     /* a finite number > 0 */
    PL_F_NONNEGATIVE,  /* a finite number >= 0 */
} pl_form;

enum {
    PL_COL_NULLABLE = 1 << 0,  /* stored as NULL when absent */
    PL_COL_REQUIRED = 1 << 1,  /* the caller must give it */
    PL_COL_INPUT = 1 << 2,     /* given by the caller and checked by pl_row__check() */
    PL_COL_ROWID = 1 << 3,     /* the row's id, assigned on insert */
    PL_COL_STORE = 1 << 4,     /* supplied by the store on insert */
    PL_COL_VERSION = 1 << 5,   /* absent: this library's version */
    PL_COL_NOCONTENT = 1 << 6, /* stored but not canonical content (a map's data) */
};

struct pl_table_desc;

/* One column of a table, or one field a read takes from a join. */
typedef struct pl_column {
    const char *column;   /* SQL column; NULL for a field read through a join */
    const char *field;    /* its name in messages (the struct field's) */
    const char *json;     /* JSON path ("a.b.0": object a, key b, element 0); NULL: none */
    const char *read;     /* SQL expression a read takes it from (NULL: t.<column>) */
    pl_stype stype;
    pl_ctype ctype;
    size_t offset;        /* in the struct */
    size_t size;          /* PL_C_TEXT: the buffer's size */
    unsigned flags;
    pl_form form;
    int vocab;            /* pl_vocab of its words, or -1 */
    int bound;            /* 1 + the pl_bound its number keeps to; 0: none */
    const struct pl_table_desc *child;  /* PL_S_ROWS: the child table */
    size_t count_offset;  /* PL_S_ROWS: the uint32_t count in the struct */
} pl_column;

typedef struct pl_table_desc {
    pl_table id;
    const char *name;          /* SQL table */
    const char *from;          /* FROM clause of a read, the table aliased t */
    const pl_column *cols;
    size_t ncols;
    size_t record_size;        /* sizeof its struct */
    const char *parent_column; /* a child table: the column holding its record's id */
    const char *index_column;  /* a child table: the column holding its position */
} pl_table_desc;

#define PL_ROW_MAX_COLUMNS 48

/* A value as stored (type PL_S_NONE: NULL). Text and blobs are borrowed. */
typedef struct pl_value {
    pl_stype type;
    int64_t i;
    double r;
    const void *p;
    size_t n;
} pl_value;

/* A row on its way into the table: the values of each column of the
 * description (by index) and, for a record with child rows, the child
 * structs (borrowed). */
typedef struct pl_row {
    const pl_table_desc *t;
    pl_value v[PL_ROW_MAX_COLUMNS];
    const void *children;
    size_t nchildren;
} pl_row;

const pl_table_desc *pl_row__table(pl_table table);

/* Index of `column` in the description (asserts it exists). */
size_t pl_row__column(const pl_table_desc *t, const char *column);

/*
 * Check every PL_COL_INPUT field of `rec` by its form: text fits its buffer
 * and is terminated, names are one line without outer spaces, dates are
 * calendar dates, words come from their vocabulary, JSON is an object,
 * numbers are in range and inside their bound (pl_bound_check()).
 * Messages start with `label`.
 * Returns PL_OK or PL_EINVAL.
 */
int pl_row__check(const pl_table_desc *t, const void *rec, const char *label, pl_err *err);

/* The single checks pl_row__check() uses, for fields outside a description. */
int pl_row__check_key(pl_err *err, const char *label, const char *field, const char *v,
                      size_t cap, int required);
int pl_row__check_name(pl_err *err, const char *label, const char *field, const char *v,
                       size_t cap, int required);
int pl_row__check_text(pl_err *err, const char *label, const char *field, const char *v,
                       size_t cap, int required);
int pl_row__check_date(pl_err *err, const char *label, const char *field, const char *v,
                       size_t cap, int required);

/* 1 when records a and b of `t` give every PL_COL_INPUT field the same
 * stored value (a correction of a into b would change nothing), else 0. */
int pl_row__same_input(const pl_table_desc *t, const void *a, const void *b);

/* Refuse a correction that gives `t`'s record the values it has: PL_EINVAL
 * "nothing to correct". */
int pl_store__check_changes(const pl_table_desc *t, const void *current, const void *corrected,
                            pl_err *err, const char *label);

/* The values of `rec`'s fields into a new row of `t` (others NULL). */
void pl_row__from_record(pl_row *row, const pl_table_desc *t, const void *rec);

/* Set a column the store supplies: an id (0: NULL), a text (NULL: NULL), a blob. */
void pl_row__set_id(pl_row *row, const char *column, pl_id v);
void pl_row__set_text(pl_row *row, const char *column, const char *v);
void pl_row__set_blob(pl_row *row, const char *column, const void *p, size_t n);

/* The columns a correction adds: the record's key, the row it supersedes and
 * why (all NULL for a first version: key and supersedes 0). */
void pl_row__set_correction(pl_row *row, pl_id key, pl_id supersedes, const char *reason);

/*
 * The one way a row enters the record: insert `row` (recorded_at set now
 * when the table has it and it is not given), then its child rows, each
 * with the new id and its position, all inside the caller's write scope
 * (pl_store__write_begin()). The row's canonical encoding is computed here
 * too, so a row that could not be encoded never enters; its SHA-256 is kept
 * in store->last_row, and the row is appended to its chain in the ledger
 * (pl_ledger__append()). *id (may be NULL) gets the new id.
 * Returns PL_OK, PL_EINVAL (a value without canonical form, a constraint),
 * PL_EEXISTS, PL_ENOTFOUND, PL_EDB, PL_ENOMEM.
 */
int pl_store__insert(pl_store *s, pl_row *row, pl_id *id, pl_err *err, const char *label);

/* ---- the ledger (ledger.c) ---------------------------------------------------- */

/* Append row `id` of `table`, whose canonical encoding hashes to
 * `row_sha256`, to its chain (plyledger/ledger.h), inside the caller's
 * write scope. */
int pl_ledger__append(pl_store *s, pl_table table, pl_id id,
                      const unsigned char row_sha256[32], pl_err *err, const char *label);

/* Chain every recorded row that has no link yet, in the order they were
 * recorded (migration 6); *count gets how many. */
int pl_ledger__chain_all(pl_store *s, int64_t *count, pl_err *err);

/* The message a store's own seal key signs to endorse a received seal key
 * (table seal_key, origin 'received'): "PLRK" version:u32 public_key:32
 * chain:i64 (0: the store's own chain) through_seq:i64, little-endian. The
 * endorsement is pl_sign() of it with store->seal_secret. */
void pl_ledger__endorsement_message(unsigned char out[56], const unsigned char pub[32],
                                    pl_id chain, int64_t through);

/* The signed-content message of a row (plyledger/disposition.h), "PLSG"
 * version:u32 digest:32 bytes: of a row on its way in, and of a stored row
 * with its signature (*sig, *siglen: NULL, 0 when none), whose bytes live
 * in *keep until the caller finalizes it (also on failure). */
#define PL_SIGNED_MESSAGE_SIZE 40
int pl_row__signed_message(const pl_row *row, unsigned char out[PL_SIGNED_MESSAGE_SIZE],
                           const char *label, pl_err *err);
int pl_store__signed_message(pl_store *s, pl_table table, pl_id id,
                             unsigned char out[PL_SIGNED_MESSAGE_SIZE], const void **sig,
                             size_t *siglen, sqlite3_stmt **keep, pl_err *err);

/* Check the signature of row `id` of a signed table (interpretation,
 * disposition) against the key its maker held on its signing date:
 * *ok 1 when it holds, else 0 with the reason in why (store_people.c). */
int pl_people__check_signature(pl_store *s, pl_table table, pl_id id, int *ok, char *why,
                               size_t cap, pl_err *err);

/* Check that `handle` may sign on `date` with `key`: in the register, of
 * one of `roles` (words separated by spaces), holding `key` that day;
 * *person_id its id. PL_EREFUSED with the reason. */
int pl_people__signer(pl_store *s, const char *handle, const char *date, const pl_sign_key *key,
                      const char *roles, pl_id *person_id, pl_err *err, const char *label);

/* The checks recording an inspection makes (store_people.c,
 * store_disposition.c): the inspector's register entry and qualification,
 * and the post-repair baseline a repair disposition asks for. */
int pl_people__check_inspection(pl_store *s, const pl_inspection *in, pl_id site_key,
                                pl_err *err, const char *label);
int pl_disposition__check_post_repair(pl_store *s, const pl_inspection *in, pl_id site_key,
                                      pl_err *err, const char *label);

/* Read whether the store is sealed, and with which key (on open). */
int pl_ledger__load_seal(pl_store *s, pl_err *err);

/* Insert `row` as one atomic call of its own: pl_store__insert() inside
 * pl_store__write_begin() / _end(). */
int pl_store__write_row(pl_store *s, pl_row *row, pl_id *id, pl_err *err, const char *label);

/*
 * "SELECT <every read field> FROM <from> " into buf, with `extra` (may be
 * NULL) appended to the column list; the fields come in description order,
 * so pl_row__read() takes them back by position.
 */
void pl_row__select(char *buf, size_t cap, const pl_table_desc *t, const char *extra);

/* Number of fields pl_row__select() selects (the index of `extra`). */
int pl_row__select_count(const pl_table_desc *t);

/* Bind a value (type PL_S_NONE: NULL) as parameter i. */
int pl_store__bind(sqlite3_stmt *st, int i, const pl_value *v);

/* Prepare `sql` with args bound as ?1.. */
int pl_store__prepare_args(pl_store *s, sqlite3_stmt **st, const char *sql, const pl_value *args,
                           int nargs, pl_err *err);

/* Arguments of a listing: text (NULL or "": NULL, which filters match all
 * with "?N IS NULL OR ..."), an id. */
pl_value pl_store__arg_text(const char *v);
pl_value pl_store__arg_id(pl_id v);

/* What a listing hands each record to: 0 go on, > 0 stop, < 0 fail with
 * that status (err filled). The record is released after the call. */
typedef int (*pl_row_fn)(void *ud, void *rec);

/*
 * Read the records of `table` that `tail` (what follows the FROM clause of
 * pl_row__select(): joins, WHERE, ORDER BY, with ?1.. for args) selects,
 * handing each to fn. Returns PL_OK (also when fn stopped), fn's failure,
 * PL_EDB, PL_ENOMEM.
 */
int pl_store__list(pl_store *s, pl_table table, const char *tail, const pl_value *args,
                   int nargs, pl_row_fn fn, void *ud, pl_err *err, const char *label);

/* The first record `tail` selects into rec (the caller releases it with
 * pl_row__release()); *found says whether there was one. */
int pl_store__get(pl_store *s, pl_table table, const char *tail, const pl_value *args,
                  int nargs, void *rec, int *found, pl_err *err, const char *label);

/* Fill `rec` (zeroed first) from a row of pl_row__select(). Texts of
 * PL_C_STR fields are malloc'd; child rows are left alone.
 * Returns PL_OK or PL_ENOMEM (rec is then released). */
int pl_row__read(const pl_table_desc *t, sqlite3_stmt *st, void *rec);

/* Free what a read or a copy allocated in `rec` (PL_C_STR fields, child
 * arrays); the struct itself is the caller's. */
void pl_row__release(const pl_table_desc *t, void *rec);

/* The JSON object of a record (NULL when out of memory). */
struct cJSON;
struct cJSON *pl_row__json(const pl_table_desc *t, const void *rec);

/* Print `value` (formatted) into *out (malloc'd) and delete it; PL_ENOMEM
 * when value is NULL or printing fails. */
int pl_row__print_json(char **out, struct cJSON *value, pl_err *err);

/* The canonical encoding of `row` (the values as inserted, with `id` for
 * its child rows' reference); for the tests. *out is malloc'd. */
int pl_row__encode(unsigned char **out, size_t *len, const pl_row *row, pl_id id, pl_err *err);

/* A deep copy of `src` into `dst`: PL_C_STR texts and child rows are
 * duplicated. Returns PL_OK or PL_ENOMEM (dst then holds nothing owned). */
int pl_row__copy(const pl_table_desc *t, void *dst, const void *src);

#endif
