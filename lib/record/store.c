/*
 * store.c - the inspection record over SQLite: life and migrations,
 * transactions, the SQL helpers the store's files share, and the summary.
 * The records themselves are in store_airframe.c (airframes, operators,
 * sites), store_inspection.c (inspections, maps) and store_registration.c
 * (registrations, comparisons); their columns are described once in
 * store_row.c, which also holds the one insert path.
 *
 * Every statement is prepared with bound parameters. Every writing call runs
 * inside a savepoint (pl_store__write_begin/_end) so it lands whole or not
 * at all, alone or inside a caller's transaction. Inputs are checked first,
 * for messages that name the record and the field; the schema's CHECK
 * constraints and triggers stay behind as the last word, and their refusals
 * are mapped to status codes by pl_store__status(). SQL is written so that
 * PostgreSQL would accept it too wherever SQLite allows that (no SQLite-only
 * functions or operators outside the PRAGMAs and transaction control).
 */
#include "record/store_int.h"

#include "common/common_int.h"
#include "plyledger/hash.h"

#include <assert.h>
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <sodium.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

/* ---- errors ---------------------------------------------------------------- */

/*
 * Map an SQLite (extended) result code to a plyledger status. A trigger's
 * refusal carries its reason only in the message: the append-only triggers
 * say "append-only", the uniqueness triggers "already"; the rest are broken
 * correction rules, i.e. invalid input.
 */
int pl_store__status(int xrc, const char *msg)
{
    switch (xrc) {
    case SQLITE_CONSTRAINT_UNIQUE:
    case SQLITE_CONSTRAINT_PRIMARYKEY:
        return PL_EEXISTS;
    case SQLITE_CONSTRAINT_FOREIGNKEY:
        return PL_ENOTFOUND;
    case SQLITE_CONSTRAINT_TRIGGER:
        if (msg && strstr(msg, "append-only"))
            return PL_EREADONLY;
        if (msg && strstr(msg, "already"))
            return PL_EEXISTS;
        return PL_EINVAL;
    default:
        break;
    }
    switch (xrc & 0xff) {
    case SQLITE_CONSTRAINT: return PL_EINVAL;
    case SQLITE_NOMEM: return PL_ENOMEM;
    case SQLITE_IOERR:
    case SQLITE_FULL:
    case SQLITE_CANTOPEN: return PL_EIO;
    case SQLITE_NOTADB: return PL_ENOTSTORE;
    default: return PL_EDB;
    }
}

int pl_store__fail(pl_store *s, pl_err *err, const char *label)
{
    const char *msg = sqlite3_errmsg(s->db);
    return pl__err(err, pl_store__status(sqlite3_extended_errcode(s->db), msg), "%s: %s",
                   label ? label : s->path, msg);
}

int pl_store__exec(pl_store *s, const char *sql, pl_err *err)
{
    if (sqlite3_exec(s->db, sql, NULL, NULL, NULL) != SQLITE_OK)
        return pl_store__fail(s, err, NULL);
    return PL_OK;
}

int pl_store__prepare(pl_store *s, sqlite3_stmt **st, const char *sql, pl_err *err)
{
    if (sqlite3_prepare_v2(s->db, sql, -1, st, NULL) != SQLITE_OK) {
        *st = NULL;
        return pl_store__fail(s, err, NULL);
    }
    return PL_OK;
}

/* ---- small helpers ----------------------------------------------------------- */

void pl_store__now(char out[PL_DATE_SIZE])
{
    struct timespec ts;
    struct tm tm;
    clock_gettime(CLOCK_REALTIME, &ts);
    gmtime_r(&ts.tv_sec, &tm);
    size_t n = strftime(out, PL_DATE_SIZE, "%Y-%m-%dT%H:%M:%S", &tm);
    snprintf(out + n, PL_DATE_SIZE - n, ".%03dZ", (int)(ts.tv_nsec / 1000000 % 1000));
}

int pl_store__valid_date(const char *s)
{
    static const int mdays[12] = { 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31 };
    if (!s || strlen(s) != 10 || s[4] != '-' || s[7] != '-')
        return 0;
    for (int i = 0; i < 10; i++)
        if (i != 4 && i != 7 && (s[i] < '0' || s[i] > '9'))
            return 0;
    int y = (s[0] - '0') * 1000 + (s[1] - '0') * 100 + (s[2] - '0') * 10 + (s[3] - '0');
    int m = (s[5] - '0') * 10 + (s[6] - '0');
    int d = (s[8] - '0') * 10 + (s[9] - '0');
    if (y < 1 || m < 1 || m > 12 || d < 1)
        return 0;
    int leap = (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
    return d <= mdays[m - 1] + (m == 2 && leap);
}

int pl_store__bind_opt_text(sqlite3_stmt *st, int i, const char *v)
{
    if (v && *v)
        return sqlite3_bind_text(st, i, v, -1, SQLITE_STATIC);
    return sqlite3_bind_null(st, i);
}

void pl_store__col_text(sqlite3_stmt *st, int i, char *dst, size_t cap)
{
    const unsigned char *t = sqlite3_column_text(st, i);
    snprintf(dst, cap, "%s", t ? (const char *)t : "");
}

int pl_store__finish_int(pl_store *s, sqlite3_stmt *st, int *found, int64_t *value,
                         pl_err *err, const char *label)
{
    int r = sqlite3_step(st), rc = PL_OK;
    *found = r == SQLITE_ROW;
    if (*found && value)
        *value = sqlite3_column_int64(st, 0);
    else if (r != SQLITE_ROW && r != SQLITE_DONE)
        rc = pl_store__fail(s, err, label);
    sqlite3_finalize(st);
    return rc;
}

int pl_store__query_int(pl_store *s, const char *sql, int64_t *value, pl_err *err)
{
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st, sql, err);
    if (rc)
        return rc;
    int found = 0;
    rc = pl_store__finish_int(s, st, &found, value, err, NULL);
    if (!rc && !found)
        *value = 0;
    return rc;
}

int pl_store__finish_listing(pl_store *s, sqlite3_stmt *st, int r, int rc, pl_err *err,
                             const char *label)
{
    if (!rc && r != SQLITE_ROW && r != SQLITE_DONE)
        rc = pl_store__fail(s, err, label);
    sqlite3_finalize(st);
    return rc;
}

int pl_store__row_by_id(pl_store *s, sqlite3_stmt **out, const char *sql, pl_id id, pl_err *err,
                        const char *label, const char *missing)
{
    sqlite3_stmt *st;
    *out = NULL;
    int rc = pl_store__prepare(s, &st, sql, err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, id);
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW) {
        *out = st;
        return PL_OK;
    }
    rc = r == SQLITE_DONE ? pl__err(err, PL_ENOTFOUND, "%s: %s", label, missing)
                          : pl_store__fail(s, err, label);
    sqlite3_finalize(st);
    return rc;
}

int pl_store__write_row(pl_store *s, pl_row *row, pl_id *id, pl_err *err, const char *label)
{
    int owned;
    int rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    pl_id newid = 0;
    rc = pl_store__insert(s, row, &newid, err, label);
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

int pl_store__write_end_id(pl_store *s, int owned, int rc, pl_id newid, pl_id *id, pl_err *err)
{
    rc = pl_store__write_end(s, owned, rc, err);
    if (!rc && id)
        *id = newid;
    return rc;
}

/* ---- transactions ------------------------------------------------------------ */

int pl_store__write_begin(pl_store *s, int *owned, pl_err *err)
{
    assert(s);
    *owned = 0;
    if (s->flags & PL_STORE_READONLY)
        return pl__err(err, PL_EDB, "%s: store is open read-only", s->path);
    if (sqlite3_get_autocommit(s->db)) {
        int rc = pl_store__exec(s, "BEGIN IMMEDIATE", err);
        if (rc)
            return rc;
        *owned = 1;
    }
    int rc = pl_store__exec(s, "SAVEPOINT pl_write", err);
    if (rc && *owned) {
        sqlite3_exec(s->db, "ROLLBACK", NULL, NULL, NULL);
        *owned = 0;
    }
    return rc;
}

int pl_store__write_end(pl_store *s, int owned, int rc, pl_err *err)
{
    if (rc == PL_OK) {
        if (sqlite3_exec(s->db, "RELEASE pl_write", NULL, NULL, NULL) != SQLITE_OK) {
            rc = pl_store__fail(s, err, NULL);
        } else if (owned && sqlite3_exec(s->db, "COMMIT", NULL, NULL, NULL) != SQLITE_OK) {
            rc = pl_store__fail(s, err, NULL);
            if (!sqlite3_get_autocommit(s->db))
                sqlite3_exec(s->db, "ROLLBACK", NULL, NULL, NULL);
            return rc;
        } else {
            return PL_OK;
        }
    }
    /* Either may fail harmlessly when SQLite already rolled back. */
    sqlite3_exec(s->db, "ROLLBACK TO pl_write; RELEASE pl_write", NULL, NULL, NULL);
    if (owned && !sqlite3_get_autocommit(s->db))
        sqlite3_exec(s->db, "ROLLBACK", NULL, NULL, NULL);
    return rc;
}

PL_EXPORT int pl_store_begin(pl_store *s, pl_err *err)
{
    assert(s);
    if (s->flags & PL_STORE_READONLY)
        return pl__err(err, PL_EDB, "%s: store is open read-only", s->path);
    if (sqlite3_exec(s->db, "BEGIN IMMEDIATE", NULL, NULL, NULL) != SQLITE_OK)
        return pl__err(err, PL_EDB, "%s: cannot begin a transaction: %s", s->path,
                       sqlite3_errmsg(s->db));
    return PL_OK;
}

PL_EXPORT int pl_store_commit(pl_store *s, pl_err *err)
{
    assert(s);
    if (sqlite3_exec(s->db, "COMMIT", NULL, NULL, NULL) != SQLITE_OK) {
        int rc = pl__err(err, PL_EDB, "%s: cannot commit: %s", s->path, sqlite3_errmsg(s->db));
        if (!sqlite3_get_autocommit(s->db))
            sqlite3_exec(s->db, "ROLLBACK", NULL, NULL, NULL);
        return rc;
    }
    return PL_OK;
}

PL_EXPORT void pl_store_rollback(pl_store *s)
{
    if (s && s->db && !sqlite3_get_autocommit(s->db))
        sqlite3_exec(s->db, "ROLLBACK", NULL, NULL, NULL);
}

/* ---- life -------------------------------------------------------------------- */

PL_EXPORT void pl_store_close(pl_store *s)
{
    if (!s)
        return;
    if (s->db) {
        pl_store_rollback(s);
        for (int t = 0; t < PL_TABLE_COUNT; t++)
            sqlite3_finalize(s->insert[t]);
        sqlite3_close(s->db);
    }
    free(s->path);
    free(s);
}

PL_EXPORT int pl_store_schema_version(const pl_store *s)
{
    assert(s);
    return s->schema_version;
}

static int info_insert(pl_store *s, const char *name, const char *value, pl_err *err)
{
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st, "INSERT INTO store_info (name, value) VALUES (?1, ?2)", err);
    if (rc)
        return rc;
    sqlite3_bind_text(st, 1, name, -1, SQLITE_STATIC);
    sqlite3_bind_text(st, 2, value, -1, SQLITE_STATIC);
    rc = (sqlite3_step(st) == SQLITE_DONE ? PL_OK : pl_store__fail(s, err, NULL));
    sqlite3_finalize(st);
    return rc;
}

/* Give a store its identity (random id, creation time and version) once. */
static int ensure_identity(pl_store *s, pl_err *err)
{
    int rc = pl_store__exec(s, "BEGIN IMMEDIATE", err);
    if (rc)
        return rc;
    sqlite3_stmt *st;
    int found = 0;
    rc = pl_store__prepare(s, &st, "SELECT 1 FROM store_info WHERE name = 'store_id'", err);
    if (!rc)
        rc = pl_store__finish_int(s, st, &found, NULL, err, s->path);
    if (!rc && !found) {
        unsigned char rnd[16];
        char id[33], now[PL_DATE_SIZE];
        randombytes_buf(rnd, sizeof rnd);
        for (size_t i = 0; i < sizeof rnd; i++)
            snprintf(id + 2 * i, 3, "%02x", rnd[i]);
        pl_store__now(now);
        rc = info_insert(s, "store_id", id, err);
        if (!rc)
            rc = info_insert(s, "created_at", now, err);
        if (!rc)
            rc = info_insert(s, "created_by", pl_version(), err);
    }
    if (!rc)
        rc = pl_store__exec(s, "COMMIT", err);
    if (rc)
        sqlite3_exec(s->db, "ROLLBACK", NULL, NULL, NULL);
    return rc;
}

/*
 * Bring the store to PL_STORE_SCHEMA_VERSION, one migration per transaction.
 * The version is read again under the write lock, so two processes opening
 * the same old store cannot apply a migration twice.
 */
static int migrate(pl_store *s, pl_err *err)
{
    for (int i = 0; i < pl__migration_count; i++) {
        const pl_migration *m = &pl__migrations[i];
        int rc = pl_store__exec(s, "BEGIN IMMEDIATE", err);
        if (rc)
            return rc;
        int64_t uv = 0;
        rc = pl_store__query_int(s, "PRAGMA user_version", &uv, err);
        if (!rc && uv < m->version) {
            if (uv != m->version - 1) {
                rc = pl__err(err, PL_EDB, "%s: store schema version %lld cannot take migration %s",
                             s->path, (long long)uv, m->name);
            } else if (sqlite3_exec(s->db, m->sql, NULL, NULL, NULL) != SQLITE_OK) {
                rc = pl__err(err, PL_EDB, "%s: migration %s failed: %s", s->path, m->name,
                             sqlite3_errmsg(s->db));
            } else {
                char name[32], value[160], now[PL_DATE_SIZE], sql[64];
                pl_store__now(now);
                snprintf(name, sizeof name, "schema.%04d", m->version);
                snprintf(value, sizeof value, "%s applied %s by plyledger %s", m->name, now,
                         pl_version());
                rc = info_insert(s, name, value, err);
                snprintf(sql, sizeof sql, "PRAGMA user_version = %d", m->version);
                if (!rc)
                    rc = pl_store__exec(s, sql, err);
            }
        }
        if (!rc)
            rc = pl_store__exec(s, "COMMIT", err);
        if (rc) {
            if (!sqlite3_get_autocommit(s->db))
                sqlite3_exec(s->db, "ROLLBACK", NULL, NULL, NULL);
            return rc;
        }
    }
    s->schema_version = PL_STORE_SCHEMA_VERSION;
    return ensure_identity(s, err);
}

static int store_new(pl_store **out, const char *path, unsigned flags, pl_err *err)
{
    pl_store *s = calloc(1, sizeof *s);
    if (!s || !(s->path = pl__strdup(path))) {
        free(s);
        return pl__err(err, PL_ENOMEM, "%s: out of memory", path);
    }
    s->flags = flags;
    int oflags = (flags & PL_STORE_READONLY) ? SQLITE_OPEN_READONLY : SQLITE_OPEN_READWRITE;
    int r = sqlite3_open_v2(path, &s->db, oflags, NULL);
    if (r != SQLITE_OK) {
        int code = r == SQLITE_NOMEM ? PL_ENOMEM : PL_EIO;
        pl__err(err, code, "%s: cannot open: %s", path,
                s->db ? sqlite3_errmsg(s->db) : sqlite3_errstr(r));
        pl_store_close(s);
        return code;
    }
    sqlite3_extended_result_codes(s->db, 1);
    sqlite3_busy_timeout(s->db, 5000);
    int rc = pl_store__exec(s, "PRAGMA foreign_keys = ON", err);
    if (rc) {
        pl_store_close(s);
        return rc;
    }
    *out = s;
    return PL_OK;
}

static void remove_store_files(const char *path)
{
    size_t n = strlen(path) + 5;
    char *p = malloc(n);
    unlink(path);
    if (p) {
        snprintf(p, n, "%s-wal", path);
        unlink(p);
        snprintf(p, n, "%s-shm", path);
        unlink(p);
        free(p);
    }
}

PL_EXPORT int pl_store_create(pl_store **out, const char *path, pl_err *err)
{
    assert(out && path);
    *out = NULL;
    if (sodium_init() < 0)
        return pl__err(err, PL_EIO, "%s: cannot initialise the random source", path);
    /* O_EXCL: refuse an existing path without a window for a race. */
    int fd = open(path, O_WRONLY | O_CREAT | O_EXCL, 0666);
    if (fd < 0) {
        if (errno == EEXIST)
            return pl__err(err, PL_EEXISTS, "%s: already exists", path);
        return pl__err(err, PL_EIO, "%s: cannot create: %s", path, strerror(errno));
    }
    close(fd);
    pl_store *s = NULL;
    int rc = store_new(&s, path, 0, err);
    if (!rc) {
        char sql[64];
        snprintf(sql, sizeof sql, "PRAGMA application_id = %d", PL_STORE_APPLICATION_ID);
        rc = pl_store__exec(s, "PRAGMA journal_mode = WAL", err);
        if (!rc)
            rc = pl_store__exec(s, sql, err);
        if (!rc)
            rc = migrate(s, err);
    }
    if (rc) {
        pl_store_close(s);
        remove_store_files(path);
        return rc;
    }
    *out = s;
    return PL_OK;
}

/*
 * Decide whether an opened file is a plyledger store before writing
 * anything to it. An empty file is an empty SQLite database; it is not
 * ours either (a store is stamped with the application id first thing).
 */
static int identify(pl_store *s, int64_t *user_version, pl_err *err)
{
    int64_t app = 0, tables = 0;
    sqlite3_stmt *st;
    if (sqlite3_prepare_v2(s->db, "PRAGMA application_id", -1, &st, NULL) != SQLITE_OK) {
        int x = sqlite3_errcode(s->db);
        if (x == SQLITE_NOTADB)
            return pl__err(err, PL_ENOTSTORE, "%s: not a plyledger store (%s)", s->path,
                           sqlite3_errmsg(s->db));
        return pl_store__fail(s, err, NULL);
    }
    int found = 0;
    int rc = pl_store__finish_int(s, st, &found, &app, err, s->path);
    if (rc == PL_ENOTSTORE)
        return pl__err(err, PL_ENOTSTORE, "%s: not a plyledger store (file is not a database)",
                       s->path);
    if (rc)
        return rc;
    rc = pl_store__query_int(s, "PRAGMA user_version", user_version, err);
    if (!rc)
        rc = pl_store__query_int(s, "SELECT count(*) FROM sqlite_master", &tables, err);
    if (rc)
        return rc;
    if (app == PL_STORE_APPLICATION_ID)
        return PL_OK;
    if (app == 0 && *user_version == 0 && tables == 0)
        return pl__err(err, PL_ENOTSTORE, "%s: not a plyledger store (an empty database)",
                       s->path);
    return pl__err(err, PL_ENOTSTORE,
                   "%s: not a plyledger store (another application's SQLite database, "
                   "application_id 0x%08llx)", s->path, (unsigned long long)(uint32_t)app);
}

PL_EXPORT int pl_store_open(pl_store **out, const char *path, unsigned flags, pl_err *err)
{
    assert(out && path);
    *out = NULL;
    struct stat sb;
    if (stat(path, &sb) != 0) {
        if (errno == ENOENT || errno == ENOTDIR)
            return pl__err(err, PL_ENOTFOUND, "%s: no such file", path);
        return pl__err(err, PL_EIO, "%s: cannot open: %s", path, strerror(errno));
    }
    if (!S_ISREG(sb.st_mode))
        return pl__err(err, PL_ENOTFOUND, "%s: not a file", path);
    if (sodium_init() < 0)
        return pl__err(err, PL_EIO, "%s: cannot initialise the random source", path);
    pl_store *s = NULL;
    int rc = store_new(&s, path, flags & PL_STORE_READONLY, err);
    if (rc)
        return rc;
    int64_t uv = 0;
    rc = identify(s, &uv, err);
    if (!rc && uv > PL_STORE_SCHEMA_VERSION)
        rc = pl__err(err, PL_EVERSION,
                     "%s: store schema version %lld is newer than this plyledger (%s, schema %d);"
                     " use a newer plyledger", path, (long long)uv, pl_version(),
                     PL_STORE_SCHEMA_VERSION);
    if (!rc && uv < PL_STORE_SCHEMA_VERSION && (flags & PL_STORE_READONLY))
        rc = pl__err(err, PL_EVERSION,
                     "%s: store schema version %lld is older than this plyledger's (%d); open "
                     "it once for writing to migrate it", path, (long long)uv,
                     PL_STORE_SCHEMA_VERSION);
    if (!rc && uv < 0)
        rc = pl__err(err, PL_ENOTSTORE, "%s: not a plyledger store (schema version %lld)", path,
                     (long long)uv);
    if (!rc) {
        s->schema_version = (int)uv;
        if (uv < PL_STORE_SCHEMA_VERSION)
            rc = migrate(s, err);
    }
    if (rc) {
        pl_store_close(s);
        return rc;
    }
    *out = s;
    return PL_OK;
}


/* ---- lookups ------------------------------------------------------------------- */

/* The id and key of the current row `sql` (one parameter, `arg`) finds;
 * PL_ENOTFOUND with `missing` when none. */
static int current_key(pl_store *s, const char *sql, const pl_value *args, int nargs,
                       pl_id *key, pl_id *current, pl_err *err, const char *label,
                       const char *missing)
{
    sqlite3_stmt *st;
    int rc = pl_store__prepare_args(s, &st, sql, args, nargs, err);
    if (rc)
        return rc;
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW) {
        *key = sqlite3_column_int64(st, 0);
        if (current)
            *current = sqlite3_column_int64(st, 1);
    } else if (r == SQLITE_DONE) {
        rc = pl__err(err, PL_ENOTFOUND, "%s: %s", label, missing);
    } else {
        rc = pl_store__fail(s, err, label);
    }
    sqlite3_finalize(st);
    return rc;
}

int pl_store__airframe_key(pl_store *s, const char *serial, pl_id *key, pl_id *current,
                           pl_err *err, const char *label)
{
    char missing[PL_NAME_SIZE + 32];
    snprintf(missing, sizeof missing, "no airframe with serial %.*s", PL_NAME_SIZE, serial);
    pl_value arg = pl_store__arg_text(serial);
    return current_key(s, "SELECT stable_key, id FROM airframe_current WHERE serial = ?1", &arg,
                       1, key, current, err, label, missing);
}

int pl_store__site_key(pl_store *s, pl_id af_key, const char *code, pl_id *key, pl_id *current,
                       pl_err *err, const char *label)
{
    pl_value args[2] = { pl_store__arg_id(af_key), pl_store__arg_text(code) };
    return current_key(s, "SELECT stable_key, id FROM site_current WHERE airframe_key = ?1 AND "
                       "code = ?2", args, 2, key, current, err, label, "no such site");
}

/* ---- airframes ------------------------------------------------------------------- */

static int insert_airframe(pl_store *s, const pl_airframe *af, pl_id key, pl_id supersedes,
                           const char *reason, pl_id *id, pl_err *err, const char *label)
{
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_AIRFRAME), af);
    pl_row__set_correction(&row, key, supersedes, reason);
    return pl_store__insert(s, &row, id, err, label);
}

static int insert_operator(pl_store *s, pl_id af_key, const char *name, const char *since,
                           pl_err *err, const char *label)
{
    pl_operator op;
    memset(&op, 0, sizeof op);
    op.airframe_key = af_key;
    snprintf(op.operator_name, sizeof op.operator_name, "%s", name);
    snprintf(op.since, sizeof op.since, "%s", since);
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_OPERATOR), &op);
    return pl_store__insert(s, &row, NULL, err, label);
}

PL_EXPORT int pl_store_add_airframe(pl_store *s, const pl_airframe *af, pl_id *id, pl_err *err)
{
    assert(s && af);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "airframe %.*s", FLD(af->serial));
    int rc = pl_row__check(pl_row__table(PL_TABLE_AIRFRAME), af, label, err);
    if (!rc)
        rc = pl_row__check_name(err, label, "operator_name", af->operator_name,
                                sizeof af->operator_name, 0);
    if (!rc)
        rc = pl_row__check_date(err, label, "operator_since", af->operator_since,
                                sizeof af->operator_since, 0);
    if (rc)
        return rc;
    const char *since = af->operator_since[0] ? af->operator_since : af->manufactured;
    if (af->operator_name[0] && !since[0])
        return pl__err(err, PL_EINVAL,
                       "%s: operator %s needs operator_since (or the date of manufacture)",
                       label, af->operator_name);
    if (!af->operator_name[0] && af->operator_since[0])
        return pl__err(err, PL_EINVAL, "%s: operator_since is given without operator_name",
                       label);
    if (af->operator_name[0] && af->manufactured[0] && strcmp(since, af->manufactured) < 0)
        return pl__err(err, PL_EINVAL, "%s: operator_since %s is before the date of manufacture %s",
                       label, since, af->manufactured);

    int owned;
    rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    sqlite3_stmt *st;
    int found = 0;
    pl_id newid = 0;
    rc = pl_store__prepare(s, &st, "SELECT 1 FROM airframe WHERE serial = ?1", err);
    if (!rc) {
        sqlite3_bind_text(st, 1, af->serial, -1, SQLITE_STATIC);
        rc = pl_store__finish_int(s, st, &found, NULL, err, label);
    }
    if (!rc && found)
        rc = pl__err(err, PL_EEXISTS, "%s: serial already registered", label);
    if (!rc)
        rc = insert_airframe(s, af, 0, 0, NULL, &newid, err, label);
    if (!rc && af->operator_name[0])
        rc = insert_operator(s, newid, af->operator_name, since, err, label);
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_EXPORT int pl_store_get_airframe(pl_store *s, const char *serial, pl_airframe *af,
                                    pl_err *err)
{
    assert(s && af);
    if (!serial)
        serial = "";
    pl_value arg = pl_store__arg_text(serial);
    int found = 0;
    int rc = pl_store__get(s, PL_TABLE_AIRFRAME, "WHERE t.serial = ?1", &arg, 1, af, &found,
                           err, NULL);
    if (!rc && !found)
        rc = pl__err(err, PL_ENOTFOUND, "airframe %s: not registered", serial);
    return rc;
}

PL_EXPORT int pl_store_add_operator(pl_store *s, const char *serial, const char *operator_name,
                                    const char *since, pl_err *err)
{
    assert(s);
    if (!serial)
        serial = "";
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "airframe %.*s", PL_NAME_SIZE, serial);
    pl_operator op;
    memset(&op, 0, sizeof op);
    int rc = pl_row__check_name(err, label, "operator_name", operator_name,
                                sizeof op.operator_name, 1);
    if (!rc)
        rc = pl_row__check_date(err, label, "since", since, sizeof op.since, 1);
    if (rc)
        return rc;
    int owned;
    rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    pl_id key = 0;
    rc = pl_store__airframe_key(s, serial, &key, NULL, err, label);
    sqlite3_stmt *st = NULL;
    if (!rc)
        rc = pl_store__prepare(s, &st,
                               "SELECT (SELECT max(since) FROM airframe_operator "
                               "WHERE airframe_key = ?1), "
                               "(SELECT manufactured FROM airframe_current WHERE stable_key = ?1)",
                               err);
    if (!rc) {
        sqlite3_bind_int64(st, 1, key);
        if (sqlite3_step(st) != SQLITE_ROW) {
            rc = pl_store__fail(s, err, label);
        } else {
            /* the later of the current operator's start and the manufacture */
            const char *latest = "";
            for (int i = 0; i < 2; i++) {
                const char *d = (const char *)sqlite3_column_text(st, i);
                if (d && strcmp(d, latest) > 0)
                    latest = d;
            }
            if (strcmp(since, latest) < 0)
                rc = pl__err(err, PL_EINVAL,
                             "%s: operator since %s goes back before %s (the current operator's "
                             "start or the date of manufacture)", label, since, latest);
        }
        sqlite3_finalize(st);
    }
    if (!rc)
        rc = insert_operator(s, key, operator_name, since, err, label);
    return pl_store__write_end(s, owned, rc, err);
}

typedef struct operator_cb {
    pl_operator_fn fn;
    void *ud;
} operator_cb;

static int call_operator(void *ud, void *rec)
{
    operator_cb *c = ud;
    const pl_operator *op = rec;
    return c->fn(c->ud, op->operator_name, op->since, op->recorded_at) ? 1 : 0;
}

PL_EXPORT int pl_store_list_operators(pl_store *s, const char *serial, pl_operator_fn fn,
                                      void *ud, pl_err *err)
{
    assert(s && fn);
    if (!serial)
        serial = "";
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "airframe %.*s", PL_NAME_SIZE, serial);
    pl_id key = 0;
    int rc = pl_store__airframe_key(s, serial, &key, NULL, err, label);
    if (rc)
        return rc;
    operator_cb cb = { fn, ud };
    pl_value arg = pl_store__arg_id(key);
    return pl_store__list(s, PL_TABLE_OPERATOR, "WHERE t.airframe_key = ?1 ORDER BY t.since, t.id",
                          &arg, 1, call_operator, &cb, err, label);
}

PL_STORE_CALLBACK(airframe, pl_airframe_fn)

PL_EXPORT int pl_store_list_airframes(pl_store *s, const pl_airframe_filter *filter,
                                      pl_airframe_fn fn, void *ud, pl_err *err)
{
    assert(s && fn);
    pl_value args[2] = { pl_store__arg_text(filter ? filter->aircraft_type : NULL),
                         pl_store__arg_text(filter ? filter->operator_name : NULL) };
    airframe_cb cb = { fn, ud };
    return pl_store__list(s, PL_TABLE_AIRFRAME,
                          "WHERE (?1 IS NULL OR t.aircraft_type = ?1) AND (?2 IS NULL OR "
                          "?2 = " PL_STORE_LATEST_OPERATOR("operator_name") ") ORDER BY t.serial",
                          args, 2, call_airframe, &cb, err, NULL);
}

PL_EXPORT int pl_store_correct_airframe(pl_store *s, const pl_airframe *af, const char *reason,
                                        pl_id *id, pl_err *err)
{
    assert(s && af);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "airframe %.*s", FLD(af->serial));
    int rc = pl_row__check(pl_row__table(PL_TABLE_AIRFRAME), af, label, err);
    if (!rc)
        rc = pl_row__check_text(err, label, "correction reason", reason, PL_TEXT_SIZE, 1);
    if (rc)
        return rc;
    int owned;
    rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    pl_id key = 0, current = 0, newid = 0;
    rc = pl_store__airframe_key(s, af->serial, &key, &current, err, label);
    if (!rc)
        rc = insert_airframe(s, af, key, current, reason, &newid, err, label);
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

/* ---- sites ------------------------------------------------------------------------- */

static void site_label(char *label, const pl_site *site)
{
    if (strnlen(site->airframe_serial, sizeof site->airframe_serial))
        snprintf(label, STORE_LABEL_SIZE, "site %.*s on %.*s", FLD(site->code),
                 FLD(site->airframe_serial));
    else
        snprintf(label, STORE_LABEL_SIZE, "site %.*s", FLD(site->code));
}

static int check_site(const pl_site *site, const char *label, pl_err *err)
{
    int rc = pl_row__check(pl_row__table(PL_TABLE_SITE), site, label, err);
    if (rc)
        return rc;
    pl_err e = { 0 };
    if (pl_placement_check(&site->map_frame, &e))
        return pl__err(err, PL_EINVAL, "%s: %s", label, e.msg);
    if (site->width_px > PL_MAP_MAX_SIDE || site->height_px > PL_MAP_MAX_SIDE)
        return pl__err(err, PL_EINVAL, "%s: expected map size %ux%u exceeds %u pixels a side",
                       label, site->width_px, site->height_px, PL_MAP_MAX_SIDE);
    return PL_OK;
}

PL_EXPORT int pl_site_check(const pl_site *site, pl_err *err)
{
    assert(site);
    char label[STORE_LABEL_SIZE];
    site_label(label, site);
    return check_site(site, label, err);
}

/* A site to add or correct: checked, with its airframe named. */
static int check_named_site(const pl_site *site, const char *label, pl_err *err)
{
    int rc = check_site(site, label, err);
    if (!rc && !site->airframe_serial[0])
        rc = pl__err(err, PL_EINVAL, "%s: airframe_serial is required", label);
    return rc;
}

static int insert_site(pl_store *s, const pl_site *site, pl_id af_key, pl_id key,
                       pl_id supersedes, const char *reason, pl_id *id, pl_err *err,
                       const char *label)
{
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_SITE), site);
    pl_row__set_id(&row, "airframe_key", af_key);
    pl_row__set_correction(&row, key, supersedes, reason);
    return pl_store__insert(s, &row, id, err, label);
}

PL_EXPORT int pl_store_add_site(pl_store *s, const pl_site *site, pl_id *id, pl_err *err)
{
    assert(s && site);
    char label[STORE_LABEL_SIZE];
    site_label(label, site);
    int rc = check_named_site(site, label, err);
    if (rc)
        return rc;
    int owned;
    rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    pl_id af = 0, newid = 0;
    rc = pl_store__airframe_key(s, site->airframe_serial, &af, NULL, err, label);
    if (!rc) {
        sqlite3_stmt *st;
        int found = 0;
        rc = pl_store__prepare(s, &st, "SELECT 1 FROM site WHERE airframe_key = ?1 AND code = ?2",
                               err);
        if (!rc) {
            sqlite3_bind_int64(st, 1, af);
            sqlite3_bind_text(st, 2, site->code, -1, SQLITE_STATIC);
            rc = pl_store__finish_int(s, st, &found, NULL, err, label);
        }
        if (!rc && found)
            rc = pl__err(err, PL_EEXISTS, "%s: code already exists on this airframe", label);
    }
    if (!rc)
        rc = insert_site(s, site, af, 0, 0, NULL, &newid, err, label);
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_EXPORT int pl_store_get_site(pl_store *s, const char *serial, const char *code, pl_site *site,
                                pl_err *err)
{
    assert(s && site);
    if (!serial)
        serial = "";
    if (!code)
        code = "";
    pl_value args[2] = { pl_store__arg_text(serial), pl_store__arg_text(code) };
    int found = 0;
    int rc = pl_store__get(s, PL_TABLE_SITE, "WHERE a.serial = ?1 AND t.code = ?2", args, 2,
                           site, &found, err, NULL);
    if (!rc && !found)
        rc = pl__err(err, PL_ENOTFOUND, "site %s on %s: no such site", code, serial);
    return rc;
}

PL_EXPORT int pl_store_correct_site(pl_store *s, const pl_site *site, const char *reason,
                                    pl_id *id, pl_err *err)
{
    assert(s && site);
    char label[STORE_LABEL_SIZE];
    site_label(label, site);
    int rc = check_named_site(site, label, err);
    if (!rc)
        rc = pl_row__check_text(err, label, "correction reason", reason, PL_TEXT_SIZE, 1);
    if (rc)
        return rc;
    int owned;
    rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    pl_id af = 0, key = 0, current = 0, newid = 0;
    rc = pl_store__airframe_key(s, site->airframe_serial, &af, NULL, err, label);
    if (!rc)
        rc = pl_store__site_key(s, af, site->code, &key, &current, err, label);
    if (!rc)
        rc = insert_site(s, site, af, key, current, reason, &newid, err, label);
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_STORE_CALLBACK(site, pl_site_fn)

PL_EXPORT int pl_store_list_sites(pl_store *s, const pl_site_filter *filter, pl_site_fn fn,
                                  void *ud, pl_err *err)
{
    assert(s && fn);
    pl_value args[3] = { pl_store__arg_text(filter ? filter->airframe_serial : NULL),
                         pl_store__arg_text(filter ? filter->zone : NULL),
                         pl_store__arg_text(filter ? filter->method : NULL) };
    site_cb cb = { fn, ud };
    return pl_store__list(s, PL_TABLE_SITE,
                          "WHERE (?1 IS NULL OR a.serial = ?1) AND (?2 IS NULL OR t.zone = ?2) "
                          "AND (?3 IS NULL OR t.method = ?3) ORDER BY a.serial, t.code",
                          args, 3, call_site, &cb, err, NULL);
}

/* ---- inspections ------------------------------------------------------------------- */

/* Pitches of a map and its site agree within this fraction. */
#define PITCH_TOLERANCE 1e-3

PL_EXPORT void pl_inspection_clear(pl_inspection *insp)
{
    if (!insp)
        return;
    pl_row__release(pl_row__table(PL_TABLE_INSPECTION), insp);
    memset(insp, 0, sizeof *insp);
}

static int insert_inspection(pl_store *s, const pl_inspection *in, pl_id site, pl_id key,
                             pl_id supersedes, const char *reason, pl_id *id, pl_err *err,
                             const char *label)
{
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_INSPECTION), in);
    pl_row__set_id(&row, "site_key", site);
    pl_row__set_correction(&row, key, supersedes, reason);
    return pl_store__insert(s, &row, id, err, label);
}

/* Refuse a second current baseline of a site, naming the one that exists. */
static int check_baseline(pl_store *s, pl_id site, pl_id replacing, pl_err *err,
                          const char *label)
{
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st,
                               "SELECT stable_key, performed_on FROM inspection_current WHERE "
                               "site_key = ?1 AND kind = 'baseline' AND id IS DISTINCT FROM ?2",
                               err);
    if (rc)
        return rc;
    pl_value args[2] = { pl_store__arg_id(site), pl_store__arg_id(replacing) };
    pl_store__bind(st, 1, &args[0]);
    if (replacing)
        pl_store__bind(st, 2, &args[1]);
    else
        sqlite3_bind_null(st, 2);
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW)
        rc = pl__err(err, PL_EEXISTS,
                     "%s: site already has a baseline inspection (key %lld, performed on %s)",
                     label, (long long)sqlite3_column_int64(st, 0),
                     (const char *)sqlite3_column_text(st, 1));
    else if (r != SQLITE_DONE)
        rc = pl_store__fail(s, err, label);
    sqlite3_finalize(st);
    return rc;
}

PL_EXPORT int pl_store_add_inspection(pl_store *s, const pl_inspection *in, pl_id *id,
                                      pl_err *err)
{
    assert(s && in);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "inspection of site %.*s on %.*s", FLD(in->site_code),
             FLD(in->airframe_serial));
    int rc = pl_row__check(pl_row__table(PL_TABLE_INSPECTION), in, label, err);
    if (rc)
        return rc;
    int owned;
    rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    pl_id af = 0, site = 0, newid = 0;
    rc = pl_store__airframe_key(s, in->airframe_serial, &af, NULL, err, label);
    if (!rc)
        rc = pl_store__site_key(s, af, in->site_code, &site, NULL, err, label);
    if (!rc && strcmp(in->kind, "baseline") == 0)
        rc = check_baseline(s, site, 0, err, label);
    if (!rc)
        rc = insert_inspection(s, in, site, 0, 0, NULL, &newid, err, label);
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_EXPORT int pl_store_get_inspection(pl_store *s, pl_id key, pl_inspection *in, pl_err *err)
{
    assert(s && in);
    pl_value arg = pl_store__arg_id(key);
    int found = 0;
    int rc = pl_store__get(s, PL_TABLE_INSPECTION, "WHERE t.stable_key = ?1", &arg, 1, in,
                           &found, err, NULL);
    if (!rc && !found)
        rc = pl__err(err, PL_ENOTFOUND, "inspection %lld: no such inspection", (long long)key);
    return rc;
}

PL_EXPORT int pl_store_correct_inspection(pl_store *s, pl_id key, const pl_inspection *in,
                                          const char *reason, pl_id *id, pl_err *err)
{
    assert(s && in);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "inspection %lld", (long long)key);
    int rc = pl_row__check(pl_row__table(PL_TABLE_INSPECTION), in, label, err);
    if (!rc)
        rc = pl_row__check_text(err, label, "correction reason", reason, PL_TEXT_SIZE, 1);
    if (rc)
        return rc;
    int owned;
    rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    pl_id current = 0, site = 0, af = 0, named_site = 0, newid = 0;
    sqlite3_stmt *st;
    rc = pl_store__row_by_id(s, &st, "SELECT id, site_key FROM inspection_current WHERE "
                             "stable_key = ?1", key, err, label, "no such inspection");
    if (!rc) {
        current = sqlite3_column_int64(st, 0);
        site = sqlite3_column_int64(st, 1);
        sqlite3_finalize(st);
    }
    if (!rc)
        rc = pl_store__airframe_key(s, in->airframe_serial, &af, NULL, err, label);
    if (!rc)
        rc = pl_store__site_key(s, af, in->site_code, &named_site, NULL, err, label);
    if (!rc && named_site != site)
        rc = pl__err(err, PL_EINVAL, "%s: a correction cannot move the inspection to another "
                     "site (%s on %s)", label, in->site_code, in->airframe_serial);
    if (!rc && strcmp(in->kind, "baseline") == 0)
        rc = check_baseline(s, site, current, err, label);
    if (!rc)
        rc = insert_inspection(s, in, site, key, current, reason, &newid, err, label);
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

PL_STORE_CALLBACK(inspection, pl_inspection_fn)

PL_EXPORT int pl_store_list_inspections(pl_store *s, const pl_inspection_filter *filter,
                                        pl_inspection_fn fn, void *ud, pl_err *err)
{
    assert(s && fn);
    if (filter) {
        const char *label = "inspection filter";
        int rc = pl_row__check_date(err, label, "from", filter->from, PL_DATE_SIZE, 0);
        if (!rc)
            rc = pl_row__check_date(err, label, "to", filter->to, PL_DATE_SIZE, 0);
        if (!rc && filter->kind && *filter->kind) {
            pl_err e = { 0 };
            if (pl_inspection_kind_check(filter->kind, &e))
                rc = pl__err(err, PL_EINVAL, "%s: %s", label, e.msg);
        }
        if (rc)
            return rc;
    }
    pl_value args[5] = {
        pl_store__arg_text(filter ? filter->airframe_serial : NULL),
        pl_store__arg_text(filter ? filter->site_code : NULL),
        pl_store__arg_text(filter ? filter->kind : NULL),
        pl_store__arg_text(filter ? filter->from : NULL),
        pl_store__arg_text(filter ? filter->to : NULL),
    };
    inspection_cb cb = { fn, ud };
    return pl_store__list(s, PL_TABLE_INSPECTION,
                          "WHERE (?1 IS NULL OR a.serial = ?1) AND (?2 IS NULL OR s.code = ?2) "
                          "AND (?3 IS NULL OR t.kind = ?3) "
                          "AND (?4 IS NULL OR t.performed_on >= ?4) "
                          "AND (?5 IS NULL OR t.performed_on <= ?5) "
                          "ORDER BY t.performed_on, t.stable_key", args, 5, call_inspection, &cb,
                          err, NULL);
}

/* ---- maps -------------------------------------------------------------------------- */

/* Inspection `key` and the current version of its site. */
static int inspection_site(pl_store *s, pl_id key, pl_site *site, pl_err *err,
                           const char *label)
{
    pl_value arg = pl_store__arg_id(key);
    int found = 0;
    int rc = pl_store__get(s, PL_TABLE_SITE,
                           "JOIN inspection_current i ON i.site_key = t.stable_key "
                           "WHERE i.stable_key = ?1", &arg, 1, site, &found, err, label);
    if (!rc && !found)
        rc = pl__err(err, PL_ENOTFOUND, "%s: no inspection with key %lld", label, (long long)key);
    return rc;
}

static int check_map(const pl_map_record *rec, const pl_map *map, const char *label, pl_err *err)
{
    int rc = pl_row__check(pl_row__table(PL_TABLE_MAP), rec, label, err);
    if (rc)
        return rc;
    if (!map->data || !map->channels || map->width == 0 || map->height == 0 ||
        map->nchannels == 0 || map->width > PL_MAP_MAX_SIDE || map->height > PL_MAP_MAX_SIDE ||
        map->nchannels > PL_MAP_MAX_CHANNELS)
        return pl__err(err, PL_EINVAL, "%s: map has no data or an impossible size (%ux%u, %u "
                       "channels)", label, map->width, map->height, map->nchannels);
    if (!(isfinite(map->pitch_u) && map->pitch_u > 0 && isfinite(map->pitch_v) &&
          map->pitch_v > 0))
        return pl__err(err, PL_EINVAL, "%s: map pitches must be > 0 (got %g, %g)", label,
                       map->pitch_u, map->pitch_v);
    pl_err e = { 0 };
    if (strnlen(map->placement.system, PL_SYSTEM_SIZE) == PL_SYSTEM_SIZE ||
        strnlen(map->placement.unit, PL_UNIT_SIZE) == PL_UNIT_SIZE ||
        pl_placement_check(&map->placement, &e))
        return pl__err(err, PL_EINVAL, "%s: placement: %s", label,
                       e.msg[0] ? e.msg : "system or unit is not terminated");
    for (uint32_t c = 0; c < map->nchannels; c++) {
        const pl_channel *ch = &map->channels[c];
        if (strnlen(ch->quantity, PL_QUANTITY_SIZE) == PL_QUANTITY_SIZE ||
            strnlen(ch->unit, PL_UNIT_SIZE) == PL_UNIT_SIZE ||
            strnlen(ch->label, PL_LABEL_SIZE) == PL_LABEL_SIZE)
            return pl__err(err, PL_EINVAL,
                           "%s: channel %u: quantity, unit or label is not terminated", label, c);
        if (pl_quantity_check(ch->quantity, ch->unit, &e))
            return pl__err(err, PL_EINVAL, "%s: channel %u: %s", label, c, e.msg);
    }
    return PL_OK;
}

/* A map must be what its site expects: same size when set, pitch within 0.1 %. */
static int check_map_fits_site(const pl_map *map, const pl_site *site, const char *label,
                               pl_err *err)
{
    if (site->width_px && map->width != site->width_px)
        return pl__err(err, PL_ENOMATCH, "%s: map width %u px differs from the site's %u px",
                       label, map->width, site->width_px);
    if (site->height_px && map->height != site->height_px)
        return pl__err(err, PL_ENOMATCH, "%s: map height %u px differs from the site's %u px",
                       label, map->height, site->height_px);
    if (fabs(map->pitch_u - site->pitch_u) > PITCH_TOLERANCE * site->pitch_u)
        return pl__err(err, PL_ENOMATCH, "%s: map pitch_u %g mm differs from the site's %g mm by "
                       "more than 0.1 %%", label, map->pitch_u, site->pitch_u);
    if (fabs(map->pitch_v - site->pitch_v) > PITCH_TOLERANCE * site->pitch_v)
        return pl__err(err, PL_ENOMATCH, "%s: map pitch_v %g mm differs from the site's %g mm by "
                       "more than 0.1 %%", label, map->pitch_v, site->pitch_v);
    return PL_OK;
}

/* The map record as stored: the caller's fields, the map's geometry and
 * channels, the source's base name and the content digest. */
static int insert_map(pl_store *s, const pl_map_record *rec, const pl_map *map,
                      const unsigned char *blob, size_t blob_len, const char *hex, pl_id *id,
                      pl_err *err, const char *label)
{
    pl_map_record r = *rec;
    snprintf(r.source, sizeof r.source, "%s", rec->source[0] ? pl__basename(rec->source) : "");
    r.width = map->width;
    r.height = map->height;
    r.nchannels = map->nchannels;
    r.pitch_u = map->pitch_u;
    r.pitch_v = map->pitch_v;
    r.placement = map->placement;
    r.channels = map->channels;
    snprintf(r.sha256, sizeof r.sha256, "%s", hex);
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_MAP), &r);
    pl_row__set_text(&row, "encoding", "zlib-f32le");
    pl_row__set_blob(&row, "data", blob, blob_len);
    return pl_store__insert(s, &row, id, err, label);
}

PL_EXPORT int pl_store_add_map(pl_store *s, const pl_map_record *rec, const pl_map *map,
                               pl_id *id, pl_err *err)
{
    assert(s && rec && map);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "map for inspection %lld", (long long)rec->inspection_key);
    int rc = check_map(rec, map, label, err);
    if (rc)
        return rc;
    int owned;
    rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    pl_site site;
    unsigned char *blob = NULL;
    size_t blob_len = 0;
    unsigned char digest[PL_SHA256_SIZE];
    char hex[PL_SHA256_HEX_SIZE];
    pl_id newid = 0;
    rc = inspection_site(s, rec->inspection_key, &site, err, label);
    if (!rc) {
        snprintf(label, sizeof label, "map for inspection %lld (site %s on %s)",
                 (long long)rec->inspection_key, site.code, site.airframe_serial);
        rc = check_map_fits_site(map, &site, label, err);
    }
    if (!rc) {
        pl_err e = { 0 };
        rc = pl_map_encode(&blob, &blob_len, digest, map, &e);
        if (rc)
            pl__err(err, rc, "%s: %s", label, e.msg);
    }
    if (!rc) {
        pl_sha256_hex(hex, digest);
        sqlite3_stmt *st;
        rc = pl_store__prepare(s, &st, "SELECT id FROM map WHERE inspection_key = ?1 AND "
                               "sha256 = ?2", err);
        if (!rc) {
            int found = 0;
            int64_t other = 0;
            sqlite3_bind_int64(st, 1, rec->inspection_key);
            sqlite3_bind_text(st, 2, hex, -1, SQLITE_STATIC);
            rc = pl_store__finish_int(s, st, &found, &other, err, label);
            if (!rc && found)
                rc = pl__err(err, PL_EEXISTS, "%s: the same content is already stored as map %lld",
                             label, (long long)other);
        }
    }
    if (!rc)
        rc = insert_map(s, rec, map, blob, blob_len, hex, &newid, err, label);
    free(blob);
    return pl_store__write_end_id(s, owned, rc, newid, id, err);
}

/* Channels of map `id` into `ch` (room for n), checking they are 0..n-1. */
static int read_channels(pl_store *s, pl_id id, pl_channel *ch, uint32_t n, pl_err *err,
                         const char *label)
{
    const pl_table_desc *t = pl_row__table(PL_TABLE_MAP_CHANNEL);
    char sql[1024];
    pl_row__select(sql, sizeof sql, t, "t.idx");
    size_t len = strlen(sql);
    snprintf(sql + len, sizeof sql - len, "WHERE t.map_id = ?1 ORDER BY t.idx");
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st, sql, err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, id);
    int idx_col = pl_row__select_count(t);
    uint32_t got = 0;
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        if (sqlite3_column_int64(st, idx_col) != got || got >= n) {
            rc = pl__err(err, PL_EFORMAT, "%s: channel list does not match its %u channels",
                         label, n);
            break;
        }
        pl_row__read(t, st, &ch[got++]);
    }
    rc = pl_store__finish_listing(s, st, r, rc, err, label);
    if (!rc && got != n)
        rc = pl__err(err, PL_EFORMAT, "%s: %u channel records for %u channels", label, got, n);
    return rc;
}

PL_EXPORT int pl_store_load_map(pl_store *s, pl_id id, pl_map **out, pl_map_record *rec,
                                pl_err *err)
{
    assert(s && out);
    *out = NULL;
    const pl_table_desc *t = pl_row__table(PL_TABLE_MAP);
    char label[STORE_LABEL_SIZE], sql[2048];
    snprintf(label, sizeof label, "%s: map %lld", s->path, (long long)id);
    /* only a load reads the blob; a listing leaves it on disk */
    pl_row__select(sql, sizeof sql, t, "t.data");
    size_t len = strlen(sql);
    snprintf(sql + len, sizeof sql - len, "WHERE t.id = ?1");
    sqlite3_stmt *st;
    int rc = pl_store__row_by_id(s, &st, sql, id, err, label, "no such map");
    if (rc)
        return rc;
    pl_map_record tmp;
    pl_map *map = NULL;
    pl_err e = { 0 };
    unsigned char digest[PL_SHA256_SIZE];
    rc = pl_row__read(t, st, &tmp);
    if (rc)
        pl__err(err, rc, "%s: out of memory", label);
    if (!rc && (rc = pl_map_new(&map, tmp.width, tmp.height, tmp.nchannels, &e)))
        pl__err(err, rc == PL_ENOMEM ? PL_ENOMEM : PL_EFORMAT, "%s: %s", label, e.msg);
    if (!rc) {
        map->pitch_u = tmp.pitch_u;
        map->pitch_v = tmp.pitch_v;
        map->placement = tmp.placement;
        rc = read_channels(s, id, map->channels, map->nchannels, err, label);
    }
    if (!rc && pl_sha256_from_hex(digest, tmp.sha256) != PL_OK)
        rc = pl__err(err, PL_EFORMAT, "%s: stored digest is not SHA-256 hex", label);
    if (!rc) {
        int data = pl_row__select_count(t);
        const void *blob = sqlite3_column_blob(st, data);
        size_t blob_len = (size_t)sqlite3_column_bytes(st, data);
        rc = pl_map_decode(map, blob, blob_len, digest, &e);
        if (rc == PL_ENOMATCH)
            pl__err(err, rc, "%s: content does not match its stored SHA-256 (%s)", label, e.msg);
        else if (rc)
            pl__err(err, rc, "%s: %s", label, e.msg);
    }
    sqlite3_finalize(st);
    if (rc || !rec)
        free(tmp.parameters_json);
    if (rc) {
        pl_map_free(map);
        return rc;
    }
    if (rec) {
        tmp.channels = map->channels;
        *rec = tmp;
    }
    *out = map;
    return PL_OK;
}

typedef struct map_cb {
    pl_store *s;
    pl_map_fn fn;
    void *ud;
    pl_err *err;
    const char *label;
} map_cb;

/* A listed map with its channels (freed with the record after the call). */
static int call_map(void *ud, void *rec)
{
    map_cb *c = ud;
    pl_map_record *m = rec;
    pl_channel *ch = calloc(m->nchannels ? m->nchannels : 1, sizeof *ch);
    if (!ch)
        return pl__err(c->err, PL_ENOMEM, "%s: out of memory", c->label);
    m->channels = ch;
    int rc = read_channels(c->s, m->id, ch, m->nchannels, c->err, c->label);
    if (rc)
        return rc;
    return c->fn(c->ud, m) ? 1 : 0;
}

PL_EXPORT int pl_store_list_maps(pl_store *s, pl_id inspection_key, pl_map_fn fn, void *ud,
                                 pl_err *err)
{
    assert(s && fn);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "maps of inspection %lld", (long long)inspection_key);
    map_cb cb = { s, fn, ud, err, label };
    pl_value arg = pl_store__arg_id(inspection_key);
    return pl_store__list(s, PL_TABLE_MAP,
                          "WHERE t.inspection_key = ?1 AND NOT EXISTS "
                          "(SELECT 1 FROM map n WHERE n.supersedes = t.id) ORDER BY t.id",
                          &arg, 1, call_map, &cb, err, label);
}

/* ---- registrations ---------------------------------------------------------------- */

/* Where a map stands in its site's history: the site, and the key, kind and
 * date of the inspection it belongs to. */
typedef struct map_owner {
    pl_id site, inspection;
    char kind[PL_WORD_SIZE];
    char performed_on[PL_DATE_SIZE];
} map_owner;

static int find_map_owner(pl_store *s, pl_id map_id, map_owner *o, const char *label,
                          pl_err *err)
{
    sqlite3_stmt *st;
    char missing[48];
    snprintf(missing, sizeof missing, "no map %lld", (long long)map_id);
    int rc = pl_store__row_by_id(s, &st,
                                 "SELECT i.site_key, i.stable_key, i.kind, i.performed_on FROM "
                                 "map m JOIN inspection_current i ON i.stable_key = "
                                 "m.inspection_key WHERE m.id = ?1", map_id, err, label, missing);
    if (rc)
        return rc;
    o->site = sqlite3_column_int64(st, 0);
    o->inspection = sqlite3_column_int64(st, 1);
    pl_store__col_text(st, 2, o->kind, sizeof o->kind);
    pl_store__col_text(st, 3, o->performed_on, sizeof o->performed_on);
    sqlite3_finalize(st);
    return PL_OK;
}

/* Whether inspection `a` comes before `b` in a site's history: by date,
 * then as recorded (the order of pl_store_list_inspections()). */
static int inspected_before(const map_owner *a, const map_owner *b)
{
    int d = strcmp(a->performed_on, b->performed_on);
    return d < 0 || (d == 0 && a->inspection < b->inspection);
}

static int finite_all(const double *v, size_t n)
{
    for (size_t i = 0; i < n; i++)
        if (!isfinite(v[i]))
            return 0;
    return 1;
}

static int check_registration(const pl_registration_record *r, const char *label, pl_err *err)
{
    int rc = pl_row__check(pl_row__table(PL_TABLE_REGISTRATION), r, label, err);
    if (rc)
        return rc;
    int manual = strcmp(r->status, "manual") == 0;
    int refused = strcmp(r->status, "refused") == 0;
    if (refused && !r->refusal[0])
        return pl__err(err, PL_EINVAL, "%s: a refused registration needs its reason", label);
    if (manual && (!r->supplied_by[0] || !r->supplied_reason[0]))
        return pl__err(err, PL_EINVAL,
                       "%s: a manual registration needs who supplied it and why", label);
    if (!refused) {
        double t[] = { r->shift_col_px, r->shift_row_px, r->shift_u_mm, r->shift_v_mm,
                       r->rotation_deg, r->scale, r->overlap_fraction, r->overlap_mm2 };
        if (!finite_all(t, sizeof t / sizeof t[0]) || !(r->scale > 0))
            return pl__err(err, PL_EINVAL,
                           "%s: an applied registration needs a finite transform (scale > 0) "
                           "and its overlap", label);
        if (r->overlap_fraction < 0 || r->overlap_fraction > 1 || r->overlap_mm2 < 0)
            return pl__err(err, PL_EINVAL, "%s: overlap out of range", label);
    }
    return PL_OK;
}

PL_EXPORT int pl_store_add_registration(pl_store *s, const pl_registration_record *r, pl_id *id,
                                        pl_err *err)
{
    assert(s && r);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "registration of map %lld onto map %lld",
             (long long)r->current_map_id, (long long)r->baseline_map_id);
    int rc = check_registration(r, label, err);
    if (rc)
        return rc;
    map_owner base, cur;
    if ((rc = find_map_owner(s, r->baseline_map_id, &base, label, err)) ||
        (rc = find_map_owner(s, r->current_map_id, &cur, label, err)))
        return rc;
    if (base.site != cur.site)
        return pl__err(err, PL_ENOMATCH, "%s: the maps belong to different sites", label);
    if (r->baseline_map_id == r->current_map_id)
        return pl__err(err, PL_EINVAL, "%s: a map cannot be registered onto itself", label);
    if (strcmp(base.kind, "baseline") != 0 && !inspected_before(&base, &cur))
        return pl__err(err, PL_EINVAL,
                       "%s: map %lld is of a %s inspection (%s) that is not earlier than map "
                       "%lld's (%s)", label, (long long)r->baseline_map_id, base.kind,
                       base.performed_on, (long long)r->current_map_id, cur.performed_on);
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_REGISTRATION), r);
    return pl_store__write_row(s, &row, id, err, label);
}

/* The rows of `table` that `where` selects with `id` as ?1, oldest first. */
static int list_for(pl_store *s, pl_table table, const char *where, pl_id id, pl_row_fn fn,
                    void *cb, pl_err *err)
{
    pl_value arg = pl_store__arg_id(id);
    return pl_store__list(s, table, where, &arg, 1, fn, cb, err, NULL);
}

PL_STORE_CALLBACK(registration, pl_registration_fn)

PL_EXPORT int pl_store_list_registrations(pl_store *s, pl_id current_map_id,
                                          pl_registration_fn fn, void *ud, pl_err *err)
{
    assert(s && fn);
    registration_cb cb = { fn, ud };
    return list_for(s, PL_TABLE_REGISTRATION, "WHERE ?1 = 0 OR t.current_map_id = ?1 "
                    "ORDER BY t.id", current_map_id, call_registration, &cb, err);
}

/* ---- comparisons --------------------------------------------------------------------- */

/* The site key of an inspection (by key). */
static int inspection_site_key(pl_store *s, pl_id key, pl_id *site, const char *label,
                               pl_err *err)
{
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st, "SELECT site_key FROM inspection_current WHERE "
                               "stable_key = ?1", err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, key);
    int found = 0;
    int64_t v = 0;
    rc = pl_store__finish_int(s, st, &found, &v, err, label);
    if (!rc && !found)
        rc = pl__err(err, PL_ENOTFOUND, "%s: no inspection with key %lld", label, (long long)key);
    *site = v;
    return rc;
}

static int check_comparison(const pl_comparison_record *c, const char *label, pl_err *err)
{
    int rc = pl_row__check(pl_row__table(PL_TABLE_COMPARISON), c, label, err);
    if (rc)
        return rc;
    if (strcmp(c->status, "not-done") == 0 && !c->not_done_reason[0])
        return pl__err(err, PL_EINVAL, "%s: a comparison not done needs its reason", label);
    if (c->baseline_inspection == c->current_inspection)
        return pl__err(err, PL_EINVAL, "%s: an inspection cannot be compared with itself", label);
    return PL_OK;
}

PL_EXPORT int pl_store_add_comparison(pl_store *s, const pl_comparison_record *c, pl_id *id,
                                      pl_err *err)
{
    assert(s && c);
    char label[STORE_LABEL_SIZE];
    snprintf(label, sizeof label, "comparison of inspection %lld with %lld",
             (long long)c->current_inspection, (long long)c->baseline_inspection);
    int rc = check_comparison(c, label, err);
    pl_id bsite = 0, csite = 0;
    if (!rc)
        rc = inspection_site_key(s, c->baseline_inspection, &bsite, label, err);
    if (!rc)
        rc = inspection_site_key(s, c->current_inspection, &csite, label, err);
    if (rc)
        return rc;
    if (bsite != csite)
        return pl__err(err, PL_ENOMATCH, "%s: the inspections are of different sites", label);
    pl_row row;
    pl_row__from_record(&row, pl_row__table(PL_TABLE_COMPARISON), c);
    pl_row__set_id(&row, "site_key", bsite);
    return pl_store__write_row(s, &row, id, err, label);
}

PL_STORE_CALLBACK(comparison, pl_comparison_fn)

PL_EXPORT int pl_store_list_comparisons(pl_store *s, pl_id current_inspection,
                                        pl_comparison_fn fn, void *ud, pl_err *err)
{
    assert(s && fn);
    comparison_cb cb = { fn, ud };
    return list_for(s, PL_TABLE_COMPARISON, "WHERE ?1 = 0 OR t.current_inspection = ?1 "
                    "ORDER BY t.id", current_inspection, call_comparison, &cb, err);
}

/* ---- summary ----------------------------------------------------------------------- */

static int info_value(pl_store *s, const char *name, char *dst, size_t cap, pl_err *err)
{
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st, "SELECT value FROM store_info WHERE name = ?1", err);
    if (rc)
        return rc;
    sqlite3_bind_text(st, 1, name, -1, SQLITE_STATIC);
    int r = sqlite3_step(st);
    dst[0] = '\0';
    if (r == SQLITE_ROW)
        pl_store__col_text(st, 0, dst, cap);
    else if (r != SQLITE_DONE)
        rc = pl_store__fail(s, err, NULL);
    sqlite3_finalize(st);
    return rc;
}

/* Current inspections counted by kind, in the vocabulary's order. */
static int count_kinds(pl_store *s, int64_t *by_kind, pl_err *err)
{
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st, "SELECT kind, count(*) FROM inspection_current "
                               "GROUP BY kind", err);
    if (rc)
        return rc;
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        int k = pl_vocabulary_index(PL_VOCAB_INSPECTION_KIND,
                                    (const char *)sqlite3_column_text(st, 0));
        if (k >= 0)
            by_kind[k] = sqlite3_column_int64(st, 1);
    }
    return pl_store__finish_listing(s, st, r, rc, err, NULL);
}

PL_EXPORT int pl_store_summarize(pl_store *s, pl_store_summary *sum, pl_err *err)
{
    assert(s && sum);
    memset(sum, 0, sizeof *sum);
    sum->schema_version = s->schema_version;
    int rc = info_value(s, "store_id", sum->store_id, sizeof sum->store_id, err);
    if (!rc)
        rc = info_value(s, "created_at", sum->created_at, sizeof sum->created_at, err);
    if (!rc)
        rc = info_value(s, "created_by", sum->created_by, sizeof sum->created_by, err);
    const struct {
        const char *sql;
        int64_t *out;
    } counts[] = {
        { "SELECT count(*) FROM airframe_current", &sum->airframes },
        { "SELECT count(*) FROM site_current", &sum->sites },
        { "SELECT count(*) FROM inspection_current", &sum->inspections },
        { "SELECT count(*) FROM map_current", &sum->maps },
        { "SELECT (SELECT count(supersedes) FROM airframe) + (SELECT count(supersedes) FROM site)"
          " + (SELECT count(supersedes) FROM inspection) + (SELECT count(supersedes) FROM map)"
          " + (SELECT count(supersedes) FROM criteria)"
          " + (SELECT count(supersedes) FROM disposition)", &sum->corrections },
        { "SELECT count(*) FROM indication", &sum->indications },
        { "SELECT count(*) FROM comparison", &sum->comparisons },
        { "SELECT count(*) FROM disposition d WHERE NOT EXISTS "
          "(SELECT 1 FROM disposition e WHERE e.supersedes = d.id)", &sum->dispositions },
        { "SELECT count(*) FROM ledger", &sum->ledger_links },
        { "SELECT count(*) FROM registration", &sum->registrations },
        { "SELECT coalesce(sum(length(data)), 0) FROM map", &sum->map_bytes },
    };
    for (size_t i = 0; !rc && i < sizeof counts / sizeof counts[0]; i++)
        rc = pl_store__query_int(s, counts[i].sql, counts[i].out, err);
    if (!rc)
        rc = count_kinds(s, sum->inspections_by_kind, err);
    if (rc)
        return rc;
    sqlite3_stmt *st;
    rc = pl_store__prepare(s, &st, "SELECT min(performed_on), max(performed_on) FROM "
                           "inspection_current", err);
    if (rc)
        return rc;
    if (sqlite3_step(st) == SQLITE_ROW) {
        pl_store__col_text(st, 0, sum->first_inspection, sizeof sum->first_inspection);
        pl_store__col_text(st, 1, sum->last_inspection, sizeof sum->last_inspection);
    } else {
        rc = pl_store__fail(s, err, NULL);
    }
    sqlite3_finalize(st);
    return rc;
}
