/*
 * store.c - the inspection record over SQLite: life and migrations,
 * transactions, airframes, sites, inspections, maps, registrations,
 * comparisons and the summary.
 *
 * Every statement is prepared with bound parameters. Every writing call runs
 * inside a savepoint (pl_store__write_begin/_end) so it lands whole or not
 * at all, alone or inside a caller's transaction. Inputs are checked here
 * first, for messages that name the record and the field; the schema's
 * CHECK constraints and triggers stay behind as the last word, and their
 * refusals are mapped to status codes by pl_store__status().
 */
#include "record/store_int.h"

#include "common/common_int.h"
#include "plyledger/hash.h"

#include <assert.h>
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <sodium.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

struct pl_store {
    sqlite3 *db;
    char *path;          /* as given, for messages */
    int schema_version;
    unsigned flags;
};

/* A fixed text field as printf arguments: "%.*s" never reads past it. */
#define FLD(x) (int)sizeof(x), (x)

/* Room for "site <code> on <serial>" and the like. */
#define LABEL_SIZE 256

/* Pitches of a map and its site agree within this fraction. */
#define PITCH_TOLERANCE 1e-3

static const char *const inspection_kinds[4] = {
    "baseline", "scheduled", "unscheduled", "post-repair"
};

static const char *const methods[] = {
    "flash-thermography", "ultrasound-pulse-echo", "ultrasound-through-transmission",
    "eddy-current"
};

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

/* Report the connection's last error as "<label>: <sqlite message>". Call it
 * before anything else touches the connection (the message is overwritten). */
static int db_fail(pl_store *s, pl_err *err, const char *label)
{
    const char *msg = sqlite3_errmsg(s->db);
    return pl__err(err, pl_store__status(sqlite3_extended_errcode(s->db), msg), "%s: %s",
                   label ? label : s->path, msg);
}

static int exec(pl_store *s, const char *sql, pl_err *err)
{
    if (sqlite3_exec(s->db, sql, NULL, NULL, NULL) != SQLITE_OK)
        return db_fail(s, err, s->path);
    return PL_OK;
}

static int prepare(pl_store *s, sqlite3_stmt **st, const char *sql, pl_err *err)
{
    if (sqlite3_prepare_v2(s->db, sql, -1, st, NULL) != SQLITE_OK) {
        *st = NULL;
        return db_fail(s, err, s->path);
    }
    return PL_OK;
}

/* ---- small helpers ----------------------------------------------------------- */

/* UTC now as 2024-05-01T12:34:56.789Z. */
static void now_utc(char out[PL_DATE_SIZE])
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

/*
 * A name (serial, code, reference, person) is one line of text without
 * leading or trailing blanks, so that it prints and compares as typed.
 * Fixed buffers from the caller must be NUL terminated inside their size.
 */
static int check_name(pl_err *err, const char *label, const char *field, const char *v,
                      size_t cap, int required)
{
    if (!v)
        v = "";
    size_t n = strnlen(v, cap);
    if (n == cap)
        return pl__err(err, PL_EINVAL, "%s: %s is too long (at most %zu characters)", label,
                       field, cap - 1);
    if (n == 0)
        return required ? pl__err(err, PL_EINVAL, "%s: %s is required", label, field) : PL_OK;
    for (size_t i = 0; i < n; i++) {
        unsigned char c = (unsigned char)v[i];
        if (c < 0x20 || c == 0x7f)
            return pl__err(err, PL_EINVAL, "%s: %s contains a control character", label, field);
    }
    if (v[0] == ' ' || v[n - 1] == ' ')
        return pl__err(err, PL_EINVAL, "%s: %s '%s' has leading or trailing spaces", label,
                       field, v);
    return PL_OK;
}

/* Free text (notes, descriptions): any characters but NUL, within its buffer. */
static int check_text(pl_err *err, const char *label, const char *field, const char *v,
                      size_t cap, int required)
{
    size_t n = v ? strnlen(v, cap) : 0;
    if (n == cap)
        return pl__err(err, PL_EINVAL, "%s: %s is too long (at most %zu characters)", label,
                       field, cap - 1);
    if (n == 0 && required)
        return pl__err(err, PL_EINVAL, "%s: %s is required", label, field);
    return PL_OK;
}

static int check_date(pl_err *err, const char *label, const char *field, const char *v,
                      size_t cap, int required)
{
    int rc = check_text(err, label, field, v, cap, required);
    if (rc)
        return rc;
    if (v && *v && !pl_store__valid_date(v))
        return pl__err(err, PL_EINVAL, "%s: %s '%s' is not a calendar date YYYY-MM-DD", label,
                       field, v);
    return PL_OK;
}

/* NaN (unknown) or a finite number > 0. */
static int check_positive_or_nan(pl_err *err, const char *label, const char *field, double v)
{
    if (isnan(v) || (isfinite(v) && v > 0))
        return PL_OK;
    return pl__err(err, PL_EINVAL, "%s: %s must be > 0 or unknown (got %g)", label, field, v);
}

/* JSON text must be an object; SQLite decides, as its CHECK will. */
static int check_json_object(pl_store *s, pl_err *err, const char *label, const char *field,
                             const char *json)
{
    if (!json)
        return PL_OK;
    sqlite3_stmt *st;
    int rc = prepare(s, &st, "SELECT CASE WHEN json_valid(?1) THEN json_type(?1) = 'object' ELSE 0 END", err);
    if (rc)
        return rc;
    sqlite3_bind_text(st, 1, json, -1, SQLITE_STATIC);
    if (sqlite3_step(st) != SQLITE_ROW)
        rc = db_fail(s, err, label);
    else if (sqlite3_column_int(st, 0) != 1)
        rc = pl__err(err, PL_EINVAL, "%s: %s is not a JSON object", label, field);
    sqlite3_finalize(st);
    return rc;
}

static int bind_opt_text(sqlite3_stmt *st, int i, const char *v)
{
    if (v && *v)
        return sqlite3_bind_text(st, i, v, -1, SQLITE_STATIC);
    return sqlite3_bind_null(st, i);
}

static int bind_opt_real(sqlite3_stmt *st, int i, double v)
{
    return isnan(v) ? sqlite3_bind_null(st, i) : sqlite3_bind_double(st, i, v);
}

static int bind_opt_id(sqlite3_stmt *st, int i, pl_id v)
{
    return v > 0 ? sqlite3_bind_int64(st, i, v) : sqlite3_bind_null(st, i);
}

static void col_text(sqlite3_stmt *st, int i, char *dst, size_t cap)
{
    const unsigned char *t = sqlite3_column_text(st, i);
    snprintf(dst, cap, "%s", t ? (const char *)t : "");
}

static double col_real(sqlite3_stmt *st, int i)
{
    return sqlite3_column_type(st, i) == SQLITE_NULL ? NAN : sqlite3_column_double(st, i);
}

/* A malloc'd copy of a text column, NULL for NULL; *oom set on failure. */
static char *col_dup(sqlite3_stmt *st, int i, int *oom)
{
    const unsigned char *t = sqlite3_column_text(st, i);
    if (!t)
        return NULL;
    char *d = pl__strdup((const char *)t);
    if (!d)
        *oom = 1;
    return d;
}

/*
 * Run a statement that returns at most one row holding one integer, and
 * finalize it. Returns PL_OK with *found set (and *value when found), or the
 * failure.
 */
static int finish_int(pl_store *s, sqlite3_stmt *st, int *found, int64_t *value,
                      pl_err *err, const char *label)
{
    int r = sqlite3_step(st), rc = PL_OK;
    *found = r == SQLITE_ROW;
    if (*found && value)
        *value = sqlite3_column_int64(st, 0);
    else if (r != SQLITE_ROW && r != SQLITE_DONE)
        rc = db_fail(s, err, label);
    sqlite3_finalize(st);
    return rc;
}

/* Run an INSERT; *id (may be NULL) gets the new rowid. */
static int step_insert(pl_store *s, sqlite3_stmt *st, pl_id *id, pl_err *err, const char *label)
{
    if (sqlite3_step(st) != SQLITE_DONE)
        return db_fail(s, err, label);
    if (id)
        *id = sqlite3_last_insert_rowid(s->db);
    return PL_OK;
}

/* Run a one-row INSERT whose bind calls' results, OR-ed together, are
 * `bound`; *id (may be NULL) gets the new rowid. Finalizes the statement. */
static int finish_insert(pl_store *s, sqlite3_stmt *st, int bound, pl_id *id, pl_err *err,
                         const char *label)
{
    int rc = bound != SQLITE_OK ? db_fail(s, err, label) : step_insert(s, st, id, err, label);
    sqlite3_finalize(st);
    return rc;
}

/* End a listing whose last sqlite3_step() gave `r`: unless `rc` already
 * holds a failure, a step that neither gave a row nor finished is one.
 * Finalizes the statement. */
static int finish_listing(pl_store *s, sqlite3_stmt *st, int r, int rc, pl_err *err,
                          const char *label)
{
    if (!rc && r != SQLITE_ROW && r != SQLITE_DONE)
        rc = db_fail(s, err, label);
    sqlite3_finalize(st);
    return rc;
}

/* The software version a record names: the one given, or this library's. */
static const char *software_version(const char *given)
{
    return given[0] ? given : pl_version();
}

/* ---- transactions ------------------------------------------------------------ */

int pl_store__write_begin(pl_store *s, int *owned, pl_err *err)
{
    assert(s);
    *owned = 0;
    if (s->flags & PL_STORE_READONLY)
        return pl__err(err, PL_EDB, "%s: store is open read-only", s->path);
    if (sqlite3_get_autocommit(s->db)) {
        int rc = exec(s, "BEGIN IMMEDIATE", err);
        if (rc)
            return rc;
        *owned = 1;
    }
    int rc = exec(s, "SAVEPOINT pl_write", err);
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
            rc = db_fail(s, err, s->path);
        } else if (owned && sqlite3_exec(s->db, "COMMIT", NULL, NULL, NULL) != SQLITE_OK) {
            rc = db_fail(s, err, s->path);
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

PL_EXPORT void *pl_store_db(pl_store *s)
{
    assert(s);
    return s->db;
}

/* The integer a one-value statement (a PRAGMA, a count) gives; 0 for no row. */
static int query_int(pl_store *s, const char *sql, int64_t *value, pl_err *err)
{
    sqlite3_stmt *st;
    int rc = prepare(s, &st, sql, err);
    if (rc)
        return rc;
    int found = 0;
    rc = finish_int(s, st, &found, value, err, s->path);
    if (!rc && !found)
        *value = 0;
    return rc;
}

static int info_insert(pl_store *s, const char *name, const char *value, pl_err *err)
{
    sqlite3_stmt *st;
    int rc = prepare(s, &st, "INSERT INTO store_info (name, value) VALUES (?1, ?2)", err);
    if (rc)
        return rc;
    sqlite3_bind_text(st, 1, name, -1, SQLITE_STATIC);
    sqlite3_bind_text(st, 2, value, -1, SQLITE_STATIC);
    rc = step_insert(s, st, NULL, err, s->path);
    sqlite3_finalize(st);
    return rc;
}

/* Give a store its identity (random id, creation time and version) once. */
static int ensure_identity(pl_store *s, pl_err *err)
{
    int rc = exec(s, "BEGIN IMMEDIATE", err);
    if (rc)
        return rc;
    sqlite3_stmt *st;
    int found = 0;
    rc = prepare(s, &st, "SELECT 1 FROM store_info WHERE name = 'store_id'", err);
    if (!rc)
        rc = finish_int(s, st, &found, NULL, err, s->path);
    if (!rc && !found) {
        unsigned char rnd[16];
        char id[33], now[PL_DATE_SIZE];
        randombytes_buf(rnd, sizeof rnd);
        for (size_t i = 0; i < sizeof rnd; i++)
            snprintf(id + 2 * i, 3, "%02x", rnd[i]);
        now_utc(now);
        rc = info_insert(s, "store_id", id, err);
        if (!rc)
            rc = info_insert(s, "created_at", now, err);
        if (!rc)
            rc = info_insert(s, "created_by", pl_version(), err);
    }
    if (!rc)
        rc = exec(s, "COMMIT", err);
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
        int rc = exec(s, "BEGIN IMMEDIATE", err);
        if (rc)
            return rc;
        int64_t uv = 0;
        rc = query_int(s, "PRAGMA user_version", &uv, err);
        if (!rc && uv < m->version) {
            if (uv != m->version - 1) {
                rc = pl__err(err, PL_EDB, "%s: store schema version %lld cannot take migration %s",
                             s->path, (long long)uv, m->name);
            } else if (sqlite3_exec(s->db, m->sql, NULL, NULL, NULL) != SQLITE_OK) {
                rc = pl__err(err, PL_EDB, "%s: migration %s failed: %s", s->path, m->name,
                             sqlite3_errmsg(s->db));
            } else {
                char name[32], value[160], now[PL_DATE_SIZE], sql[64];
                now_utc(now);
                snprintf(name, sizeof name, "schema.%04d", m->version);
                snprintf(value, sizeof value, "%s applied %s by plyledger %s", m->name, now,
                         pl_version());
                rc = info_insert(s, name, value, err);
                snprintf(sql, sizeof sql, "PRAGMA user_version = %d", m->version);
                if (!rc)
                    rc = exec(s, sql, err);
            }
        }
        if (!rc)
            rc = exec(s, "COMMIT", err);
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
    int rc = exec(s, "PRAGMA foreign_keys = ON", err);
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
        rc = exec(s, "PRAGMA journal_mode = WAL", err);
        if (!rc)
            rc = exec(s, sql, err);
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
        return db_fail(s, err, s->path);
    }
    int found = 0;
    int rc = finish_int(s, st, &found, &app, err, s->path);
    if (rc == PL_ENOTSTORE)
        return pl__err(err, PL_ENOTSTORE, "%s: not a plyledger store (file is not a database)",
                       s->path);
    if (rc)
        return rc;
    rc = query_int(s, "PRAGMA user_version", user_version, err);
    if (!rc)
        rc = query_int(s, "SELECT count(*) FROM sqlite_master", &tables, err);
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

/* Key of the airframe with this serial; PL_ENOTFOUND names the record. */
static int airframe_key(pl_store *s, const char *serial, pl_id *key, pl_id *current,
                        pl_err *err, const char *label)
{
    sqlite3_stmt *st;
    int rc = prepare(s, &st, "SELECT stable_key, id FROM airframe_current WHERE serial = ?1",
                     err);
    if (rc)
        return rc;
    sqlite3_bind_text(st, 1, serial, -1, SQLITE_STATIC);
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW) {
        *key = sqlite3_column_int64(st, 0);
        if (current)
            *current = sqlite3_column_int64(st, 1);
    } else if (r == SQLITE_DONE) {
        rc = pl__err(err, PL_ENOTFOUND, "%s: no airframe with serial %s", label, serial);
    } else {
        rc = db_fail(s, err, label);
    }
    sqlite3_finalize(st);
    return rc;
}

/* Key and current row of the site `code` on airframe `af_key`. */
static int site_key(pl_store *s, pl_id af_key, const char *code, pl_id *key, pl_id *current,
                    pl_err *err, const char *label)
{
    sqlite3_stmt *st;
    int rc = prepare(s, &st,
                     "SELECT stable_key, id FROM site_current WHERE airframe_key = ?1 AND code = ?2",
                     err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, af_key);
    sqlite3_bind_text(st, 2, code, -1, SQLITE_STATIC);
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW) {
        *key = sqlite3_column_int64(st, 0);
        if (current)
            *current = sqlite3_column_int64(st, 1);
    } else if (r == SQLITE_DONE) {
        rc = pl__err(err, PL_ENOTFOUND, "%s: no such site", label);
    } else {
        rc = db_fail(s, err, label);
    }
    sqlite3_finalize(st);
    return rc;
}

/* ---- airframes ------------------------------------------------------------------- */

#define AIRFRAME_SELECT                                                                    \
    "SELECT a.id, a.stable_key, a.serial, a.aircraft_type, a.manufactured, a.notes, "     \
    "a.recorded_at, "                                                                      \
    "(SELECT o.operator_name FROM airframe_operator o WHERE o.airframe_key = a.stable_key " \
    " ORDER BY o.since DESC, o.id DESC LIMIT 1) AS operator_name, "                        \
    "(SELECT o.since FROM airframe_operator o WHERE o.airframe_key = a.stable_key "        \
    " ORDER BY o.since DESC, o.id DESC LIMIT 1) AS operator_since "                        \
    "FROM airframe_current a "

static void read_airframe(sqlite3_stmt *st, pl_airframe *af)
{
    memset(af, 0, sizeof *af);
    af->id = sqlite3_column_int64(st, 0);
    af->key = sqlite3_column_int64(st, 1);
    col_text(st, 2, af->serial, sizeof af->serial);
    col_text(st, 3, af->aircraft_type, sizeof af->aircraft_type);
    col_text(st, 4, af->manufactured, sizeof af->manufactured);
    col_text(st, 5, af->notes, sizeof af->notes);
    col_text(st, 6, af->recorded_at, sizeof af->recorded_at);
    col_text(st, 7, af->operator_name, sizeof af->operator_name);
    col_text(st, 8, af->operator_since, sizeof af->operator_since);
}

static int check_airframe(const pl_airframe *af, const char *label, pl_err *err)
{
    int rc = check_name(err, label, "serial", af->serial, sizeof af->serial, 1);
    if (!rc)
        rc = check_name(err, label, "aircraft_type", af->aircraft_type,
                        sizeof af->aircraft_type, 1);
    if (!rc)
        rc = check_date(err, label, "manufactured", af->manufactured, sizeof af->manufactured, 0);
    if (!rc)
        rc = check_text(err, label, "notes", af->notes, sizeof af->notes, 0);
    return rc;
}

static int insert_airframe(pl_store *s, const pl_airframe *af, pl_id key, pl_id supersedes,
                           const char *reason, pl_id *id, pl_err *err, const char *label)
{
    sqlite3_stmt *st;
    char now[PL_DATE_SIZE];
    int rc = prepare(s, &st,
                     "INSERT INTO airframe (key, supersedes, reason, serial, aircraft_type, "
                     "manufactured, notes, recorded_at) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)",
                     err);
    if (rc)
        return rc;
    now_utc(now);
    int b = bind_opt_id(st, 1, key) | bind_opt_id(st, 2, supersedes) |
            bind_opt_text(st, 3, reason) |
            sqlite3_bind_text(st, 4, af->serial, -1, SQLITE_STATIC) |
            sqlite3_bind_text(st, 5, af->aircraft_type, -1, SQLITE_STATIC) |
            bind_opt_text(st, 6, af->manufactured) | bind_opt_text(st, 7, af->notes) |
            sqlite3_bind_text(st, 8, now, -1, SQLITE_STATIC);
    return finish_insert(s, st, b, id, err, label);
}

static int insert_operator(pl_store *s, pl_id af_key, const char *name, const char *since,
                           pl_err *err, const char *label)
{
    sqlite3_stmt *st;
    char now[PL_DATE_SIZE];
    int rc = prepare(s, &st,
                     "INSERT INTO airframe_operator (airframe_key, operator_name, since, "
                     "recorded_at) VALUES (?1, ?2, ?3, ?4)", err);
    if (rc)
        return rc;
    now_utc(now);
    sqlite3_bind_int64(st, 1, af_key);
    sqlite3_bind_text(st, 2, name, -1, SQLITE_STATIC);
    sqlite3_bind_text(st, 3, since, -1, SQLITE_STATIC);
    sqlite3_bind_text(st, 4, now, -1, SQLITE_STATIC);
    rc = step_insert(s, st, NULL, err, label);
    sqlite3_finalize(st);
    return rc;
}

PL_EXPORT int pl_store_add_airframe(pl_store *s, const pl_airframe *af, pl_id *id, pl_err *err)
{
    assert(s && af);
    char label[LABEL_SIZE];
    snprintf(label, sizeof label, "airframe %.*s", FLD(af->serial));
    int rc = check_airframe(af, label, err);
    if (!rc)
        rc = check_name(err, label, "operator_name", af->operator_name,
                        sizeof af->operator_name, 0);
    if (!rc)
        rc = check_date(err, label, "operator_since", af->operator_since,
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
    rc = prepare(s, &st, "SELECT 1 FROM airframe WHERE serial = ?1", err);
    if (!rc) {
        sqlite3_bind_text(st, 1, af->serial, -1, SQLITE_STATIC);
        rc = finish_int(s, st, &found, NULL, err, label);
    }
    if (!rc && found)
        rc = pl__err(err, PL_EEXISTS, "%s: serial already registered", label);
    if (!rc)
        rc = insert_airframe(s, af, 0, 0, NULL, &newid, err, label);
    if (!rc && af->operator_name[0])
        rc = insert_operator(s, newid, af->operator_name, since, err, label);
    rc = pl_store__write_end(s, owned, rc, err);
    if (!rc && id)
        *id = newid;
    return rc;
}

PL_EXPORT int pl_store_get_airframe(pl_store *s, const char *serial, pl_airframe *af,
                                    pl_err *err)
{
    assert(s && af);
    if (!serial)
        serial = "";
    sqlite3_stmt *st;
    int rc = prepare(s, &st, AIRFRAME_SELECT "WHERE a.serial = ?1", err);
    if (rc)
        return rc;
    sqlite3_bind_text(st, 1, serial, -1, SQLITE_STATIC);
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW)
        read_airframe(st, af);
    else if (r == SQLITE_DONE)
        rc = pl__err(err, PL_ENOTFOUND, "airframe %s: not registered", serial);
    else
        rc = db_fail(s, err, s->path);
    sqlite3_finalize(st);
    return rc;
}

PL_EXPORT int pl_store_add_operator(pl_store *s, const char *serial, const char *operator_name,
                                    const char *since, pl_err *err)
{
    assert(s);
    if (!serial)
        serial = "";
    char label[LABEL_SIZE];
    snprintf(label, sizeof label, "airframe %.*s", PL_NAME_SIZE, serial);
    int rc = check_name(err, label, "operator_name", operator_name, PL_TEXT_SIZE, 1);
    if (!rc)
        rc = check_date(err, label, "since", since, PL_DATE_SIZE, 1);
    if (rc)
        return rc;
    int owned;
    rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    pl_id key = 0;
    rc = airframe_key(s, serial, &key, NULL, err, label);
    sqlite3_stmt *st = NULL;
    if (!rc)
        rc = prepare(s, &st,
                     "SELECT max(coalesce((SELECT max(since) FROM airframe_operator "
                     "WHERE airframe_key = ?1), ''), "
                     "coalesce((SELECT manufactured FROM airframe_current WHERE stable_key = ?1), ''))",
                     err);
    if (!rc) {
        sqlite3_bind_int64(st, 1, key);
        if (sqlite3_step(st) != SQLITE_ROW) {
            rc = db_fail(s, err, label);
        } else {
            const char *latest = (const char *)sqlite3_column_text(st, 0);
            if (latest && strcmp(since, latest) < 0)
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

PL_EXPORT int pl_store_list_operators(pl_store *s, const char *serial, pl_operator_fn fn,
                                      void *ud, pl_err *err)
{
    assert(s && fn);
    if (!serial)
        serial = "";
    char label[LABEL_SIZE];
    snprintf(label, sizeof label, "airframe %.*s", PL_NAME_SIZE, serial);
    pl_id key = 0;
    int rc = airframe_key(s, serial, &key, NULL, err, label);
    if (rc)
        return rc;
    sqlite3_stmt *st;
    rc = prepare(s, &st,
                 "SELECT operator_name, since, recorded_at FROM airframe_operator "
                 "WHERE airframe_key = ?1 ORDER BY since, id", err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, key);
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        if (fn(ud, (const char *)sqlite3_column_text(st, 0),
               (const char *)sqlite3_column_text(st, 1),
               (const char *)sqlite3_column_text(st, 2)))
            break;
    }
    return finish_listing(s, st, r, rc, err, label);
}

PL_EXPORT int pl_store_list_airframes(pl_store *s, const pl_airframe_filter *filter,
                                      pl_airframe_fn fn, void *ud, pl_err *err)
{
    assert(s && fn);
    sqlite3_stmt *st;
    int rc = prepare(s, &st,
                     "SELECT * FROM (" AIRFRAME_SELECT ") "
                     "WHERE (?1 IS NULL OR aircraft_type = ?1) "
                     "AND (?2 IS NULL OR operator_name = ?2) ORDER BY serial", err);
    if (rc)
        return rc;
    if (filter) {
        bind_opt_text(st, 1, filter->aircraft_type);
        bind_opt_text(st, 2, filter->operator_name);
    }
    pl_airframe af;
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        read_airframe(st, &af);
        if (fn(ud, &af))
            break;
    }
    return finish_listing(s, st, r, rc, err, s->path);
}

PL_EXPORT int pl_store_correct_airframe(pl_store *s, const pl_airframe *af, const char *reason,
                                        pl_id *id, pl_err *err)
{
    assert(s && af);
    char label[LABEL_SIZE];
    snprintf(label, sizeof label, "airframe %.*s", FLD(af->serial));
    int rc = check_airframe(af, label, err);
    if (!rc)
        rc = check_text(err, label, "correction reason", reason, PL_TEXT_SIZE, 1);
    if (rc)
        return rc;
    int owned;
    rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    pl_id key = 0, current = 0, newid = 0;
    rc = airframe_key(s, af->serial, &key, &current, err, label);
    if (!rc)
        rc = insert_airframe(s, af, key, current, reason, &newid, err, label);
    rc = pl_store__write_end(s, owned, rc, err);
    if (!rc && id)
        *id = newid;
    return rc;
}

/* ---- sites ------------------------------------------------------------------------- */

PL_EXPORT int pl_method_check(const char *method, pl_err *err)
{
    if (method)
        for (size_t i = 0; i < sizeof methods / sizeof methods[0]; i++)
            if (strcmp(method, methods[i]) == 0)
                return PL_OK;
    return pl__err(err, PL_EINVAL,
                   "method '%s' is not one of flash-thermography, ultrasound-pulse-echo, "
                   "ultrasound-through-transmission, eddy-current", method ? method : "");
}

static void site_label(char *label, const pl_site *site)
{
    if (strnlen(site->airframe_serial, sizeof site->airframe_serial))
        snprintf(label, LABEL_SIZE, "site %.*s on %.*s", FLD(site->code),
                 FLD(site->airframe_serial));
    else
        snprintf(label, LABEL_SIZE, "site %.*s", FLD(site->code));
}

static int check_site(const pl_site *site, const char *label, pl_err *err)
{
    int rc = check_name(err, label, "code", site->code, sizeof site->code, 1);
    if (!rc)
        rc = check_name(err, label, "airframe_serial", site->airframe_serial,
                        sizeof site->airframe_serial, 0);
    if (!rc)
        rc = check_name(err, label, "zone", site->zone, sizeof site->zone, 0);
    if (!rc)
        rc = check_text(err, label, "description", site->description,
                        sizeof site->description, 0);
    if (!rc)
        rc = check_name(err, label, "frame", site->frame, sizeof site->frame, 0);
    if (!rc)
        rc = check_name(err, label, "stringer", site->stringer, sizeof site->stringer, 0);
    if (!rc)
        rc = check_name(err, label, "material", site->material, sizeof site->material, 0);
    if (!rc)
        rc = check_name(err, label, "method", site->method, sizeof site->method, 1);
    if (rc)
        return rc;
    pl_err e = { 0 };
    if (pl_method_check(site->method, &e))
        return pl__err(err, PL_EINVAL, "%s: %s", label, e.msg);
    rc = check_name(err, label, "coordinate system", site->map_frame.system,
                    sizeof site->map_frame.system, 1);
    if (!rc)
        rc = check_name(err, label, "coordinate unit", site->map_frame.unit,
                        sizeof site->map_frame.unit, 1);
    if (rc)
        return rc;
    if (pl_placement_check(&site->map_frame, &e))
        return pl__err(err, PL_EINVAL, "%s: %s", label, e.msg);
    if (!(isfinite(site->pitch_u) && site->pitch_u > 0))
        return pl__err(err, PL_EINVAL, "%s: pitch_u must be > 0 (got %g)", label, site->pitch_u);
    if (!(isfinite(site->pitch_v) && site->pitch_v > 0))
        return pl__err(err, PL_EINVAL, "%s: pitch_v must be > 0 (got %g)", label, site->pitch_v);
    rc = check_positive_or_nan(err, label, "thickness_mm", site->thickness_mm);
    if (!rc)
        rc = check_positive_or_nan(err, label, "diffusivity_mm2_s", site->diffusivity_mm2_s);
    if (rc)
        return rc;
    if (site->width_px > PL_MAP_MAX_SIDE || site->height_px > PL_MAP_MAX_SIDE)
        return pl__err(err, PL_EINVAL, "%s: expected map size %ux%u exceeds %u pixels a side",
                       label, site->width_px, site->height_px, PL_MAP_MAX_SIDE);
    return PL_OK;
}

PL_EXPORT int pl_site_check(const pl_site *site, pl_err *err)
{
    assert(site);
    char label[LABEL_SIZE];
    site_label(label, site);
    return check_site(site, label, err);
}

#define SITE_SELECT                                                                         \
    "SELECT s.id, s.stable_key, a.serial, s.code, s.zone, s.description, s.frame, "        \
    "s.stringer, s.method, s.material, s.thickness_mm, s.diffusivity_mm2_s, "              \
    "s.coord_system, s.coord_unit, s.origin_x, s.origin_y, s.origin_z, s.u_x, s.u_y, "     \
    "s.u_z, s.v_x, s.v_y, s.v_z, s.width_px, s.height_px, s.pitch_u_mm, s.pitch_v_mm, "    \
    "s.recorded_at FROM site_current s JOIN airframe a ON a.id = s.airframe_key "

static void read_site(sqlite3_stmt *st, pl_site *site)
{
    memset(site, 0, sizeof *site);
    site->id = sqlite3_column_int64(st, 0);
    site->key = sqlite3_column_int64(st, 1);
    col_text(st, 2, site->airframe_serial, sizeof site->airframe_serial);
    col_text(st, 3, site->code, sizeof site->code);
    col_text(st, 4, site->zone, sizeof site->zone);
    col_text(st, 5, site->description, sizeof site->description);
    col_text(st, 6, site->frame, sizeof site->frame);
    col_text(st, 7, site->stringer, sizeof site->stringer);
    col_text(st, 8, site->method, sizeof site->method);
    col_text(st, 9, site->material, sizeof site->material);
    site->thickness_mm = col_real(st, 10);
    site->diffusivity_mm2_s = col_real(st, 11);
    col_text(st, 12, site->map_frame.system, sizeof site->map_frame.system);
    col_text(st, 13, site->map_frame.unit, sizeof site->map_frame.unit);
    for (int k = 0; k < 3; k++) {
        site->map_frame.origin[k] = sqlite3_column_double(st, 14 + k);
        site->map_frame.u[k] = sqlite3_column_double(st, 17 + k);
        site->map_frame.v[k] = sqlite3_column_double(st, 20 + k);
    }
    site->width_px = (uint32_t)sqlite3_column_int64(st, 23);
    site->height_px = (uint32_t)sqlite3_column_int64(st, 24);
    site->pitch_u = sqlite3_column_double(st, 25);
    site->pitch_v = sqlite3_column_double(st, 26);
    col_text(st, 27, site->recorded_at, sizeof site->recorded_at);
}

static int insert_site(pl_store *s, const pl_site *site, pl_id af_key, pl_id key,
                       pl_id supersedes, const char *reason, pl_id *id, pl_err *err,
                       const char *label)
{
    sqlite3_stmt *st;
    char now[PL_DATE_SIZE];
    int rc = prepare(s, &st,
                     "INSERT INTO site (key, supersedes, reason, airframe_key, code, zone, "
                     "description, frame, stringer, method, material, thickness_mm, "
                     "diffusivity_mm2_s, coord_system, coord_unit, origin_x, origin_y, origin_z, "
                     "u_x, u_y, u_z, v_x, v_y, v_z, width_px, height_px, pitch_u_mm, pitch_v_mm, "
                     "recorded_at) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, "
                     "?13, ?14, ?15, ?16, ?17, ?18, ?19, ?20, ?21, ?22, ?23, ?24, ?25, ?26, "
                     "?27, ?28, ?29)", err);
    if (rc)
        return rc;
    now_utc(now);
    const pl_placement *p = &site->map_frame;
    int b = bind_opt_id(st, 1, key) | bind_opt_id(st, 2, supersedes) |
            bind_opt_text(st, 3, reason) | sqlite3_bind_int64(st, 4, af_key) |
            sqlite3_bind_text(st, 5, site->code, -1, SQLITE_STATIC) |
            bind_opt_text(st, 6, site->zone) | bind_opt_text(st, 7, site->description) |
            bind_opt_text(st, 8, site->frame) | bind_opt_text(st, 9, site->stringer) |
            sqlite3_bind_text(st, 10, site->method, -1, SQLITE_STATIC) |
            bind_opt_text(st, 11, site->material) | bind_opt_real(st, 12, site->thickness_mm) |
            bind_opt_real(st, 13, site->diffusivity_mm2_s) |
            sqlite3_bind_text(st, 14, p->system, -1, SQLITE_STATIC) |
            sqlite3_bind_text(st, 15, p->unit, -1, SQLITE_STATIC);
    for (int k = 0; k < 3; k++)
        b |= sqlite3_bind_double(st, 16 + k, p->origin[k]) |
             sqlite3_bind_double(st, 19 + k, p->u[k]) | sqlite3_bind_double(st, 22 + k, p->v[k]);
    b |= sqlite3_bind_int64(st, 25, site->width_px) | sqlite3_bind_int64(st, 26, site->height_px) |
         sqlite3_bind_double(st, 27, site->pitch_u) | sqlite3_bind_double(st, 28, site->pitch_v) |
         sqlite3_bind_text(st, 29, now, -1, SQLITE_STATIC);
    return finish_insert(s, st, b, id, err, label);
}

PL_EXPORT int pl_store_add_site(pl_store *s, const pl_site *site, pl_id *id, pl_err *err)
{
    assert(s && site);
    char label[LABEL_SIZE];
    site_label(label, site);
    int rc = check_site(site, label, err);
    if (!rc && !site->airframe_serial[0])
        rc = pl__err(err, PL_EINVAL, "%s: airframe_serial is required", label);
    if (rc)
        return rc;
    int owned;
    rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    pl_id af = 0, newid = 0;
    rc = airframe_key(s, site->airframe_serial, &af, NULL, err, label);
    if (!rc) {
        sqlite3_stmt *st;
        int found = 0;
        rc = prepare(s, &st, "SELECT 1 FROM site WHERE airframe_key = ?1 AND code = ?2", err);
        if (!rc) {
            sqlite3_bind_int64(st, 1, af);
            sqlite3_bind_text(st, 2, site->code, -1, SQLITE_STATIC);
            rc = finish_int(s, st, &found, NULL, err, label);
        }
        if (!rc && found)
            rc = pl__err(err, PL_EEXISTS, "%s: code already exists on this airframe", label);
    }
    if (!rc)
        rc = insert_site(s, site, af, 0, 0, NULL, &newid, err, label);
    rc = pl_store__write_end(s, owned, rc, err);
    if (!rc && id)
        *id = newid;
    return rc;
}

PL_EXPORT int pl_store_get_site(pl_store *s, const char *serial, const char *code, pl_site *site,
                                pl_err *err)
{
    assert(s && site);
    if (!serial)
        serial = "";
    if (!code)
        code = "";
    sqlite3_stmt *st;
    int rc = prepare(s, &st, SITE_SELECT "WHERE a.serial = ?1 AND s.code = ?2", err);
    if (rc)
        return rc;
    sqlite3_bind_text(st, 1, serial, -1, SQLITE_STATIC);
    sqlite3_bind_text(st, 2, code, -1, SQLITE_STATIC);
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW)
        read_site(st, site);
    else if (r == SQLITE_DONE)
        rc = pl__err(err, PL_ENOTFOUND, "site %s on %s: no such site", code, serial);
    else
        rc = db_fail(s, err, s->path);
    sqlite3_finalize(st);
    return rc;
}

PL_EXPORT int pl_store_correct_site(pl_store *s, const pl_site *site, const char *reason,
                                    pl_id *id, pl_err *err)
{
    assert(s && site);
    char label[LABEL_SIZE];
    site_label(label, site);
    int rc = check_site(site, label, err);
    if (!rc && !site->airframe_serial[0])
        rc = pl__err(err, PL_EINVAL, "%s: airframe_serial is required", label);
    if (!rc)
        rc = check_text(err, label, "correction reason", reason, PL_TEXT_SIZE, 1);
    if (rc)
        return rc;
    int owned;
    rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    pl_id af = 0, key = 0, current = 0, newid = 0;
    rc = airframe_key(s, site->airframe_serial, &af, NULL, err, label);
    if (!rc)
        rc = site_key(s, af, site->code, &key, &current, err, label);
    if (!rc)
        rc = insert_site(s, site, af, key, current, reason, &newid, err, label);
    rc = pl_store__write_end(s, owned, rc, err);
    if (!rc && id)
        *id = newid;
    return rc;
}

PL_EXPORT int pl_store_list_sites(pl_store *s, const pl_site_filter *filter, pl_site_fn fn,
                                  void *ud, pl_err *err)
{
    assert(s && fn);
    sqlite3_stmt *st;
    int rc = prepare(s, &st,
                     SITE_SELECT "WHERE (?1 IS NULL OR a.serial = ?1) "
                     "AND (?2 IS NULL OR s.zone = ?2) AND (?3 IS NULL OR s.method = ?3) "
                     "ORDER BY a.serial, s.code", err);
    if (rc)
        return rc;
    if (filter) {
        bind_opt_text(st, 1, filter->airframe_serial);
        bind_opt_text(st, 2, filter->zone);
        bind_opt_text(st, 3, filter->method);
    }
    pl_site site;
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        read_site(st, &site);
        if (fn(ud, &site))
            break;
    }
    return finish_listing(s, st, r, rc, err, s->path);
}

/* ---- inspections ------------------------------------------------------------------- */

PL_EXPORT void pl_inspection_clear(pl_inspection *insp)
{
    if (!insp)
        return;
    free(insp->parameters_json);
    memset(insp, 0, sizeof *insp);
}

PL_EXPORT int pl_inspection_kind_check(const char *kind, pl_err *err)
{
    if (kind)
        for (size_t i = 0; i < 4; i++)
            if (strcmp(kind, inspection_kinds[i]) == 0)
                return PL_OK;
    return pl__err(err, PL_EINVAL,
                   "inspection kind '%s' is not one of baseline, scheduled, unscheduled, "
                   "post-repair", kind ? kind : "");
}

static int check_inspection(pl_store *s, const pl_inspection *in, const char *label,
                            pl_err *err)
{
    int rc = check_name(err, label, "airframe_serial", in->airframe_serial,
                        sizeof in->airframe_serial, 1);
    if (!rc)
        rc = check_name(err, label, "site_code", in->site_code, sizeof in->site_code, 1);
    if (!rc)
        rc = check_name(err, label, "kind", in->kind, sizeof in->kind, 1);
    if (rc)
        return rc;
    pl_err e = { 0 };
    if (pl_inspection_kind_check(in->kind, &e))
        return pl__err(err, PL_EINVAL, "%s: %s", label, e.msg);
    static const struct {
        const char *name;
        size_t off, size;
        int required;
    } names[] = {
        { "task_ref", offsetof(pl_inspection, task_ref), PL_NAME_SIZE, 0 },
        { "procedure", offsetof(pl_inspection, procedure), PL_NAME_SIZE, 1 },
        { "procedure_rev", offsetof(pl_inspection, procedure_rev), PL_WORD_SIZE, 1 },
        { "calibration_ref", offsetof(pl_inspection, calibration_ref), PL_TEXT_SIZE, 1 },
        { "inspector", offsetof(pl_inspection, inspector), PL_NAME_SIZE, 1 },
        { "inspector_level", offsetof(pl_inspection, inspector_level), PL_WORD_SIZE, 1 },
        { "software_version", offsetof(pl_inspection, software_version), PL_WORD_SIZE, 0 },
    };
    for (size_t i = 0; i < sizeof names / sizeof names[0]; i++) {
        rc = check_name(err, label, names[i].name, (const char *)in + names[i].off,
                        names[i].size, names[i].required);
        if (rc)
            return rc;
    }
    rc = check_text(err, label, "equipment", in->equipment, sizeof in->equipment, 1);
    if (!rc)
        rc = check_text(err, label, "notes", in->notes, sizeof in->notes, 0);
    if (!rc)
        rc = check_date(err, label, "performed_on", in->performed_on, sizeof in->performed_on,
                        1);
    if (rc)
        return rc;
    if (!isnan(in->aircraft_hours) && !(isfinite(in->aircraft_hours) && in->aircraft_hours >= 0))
        return pl__err(err, PL_EINVAL, "%s: aircraft_hours must be >= 0 or unknown (got %g)",
                       label, in->aircraft_hours);
    if (in->aircraft_cycles < -1)
        return pl__err(err, PL_EINVAL, "%s: aircraft_cycles must be >= 0 or -1 for unknown "
                       "(got %lld)", label, (long long)in->aircraft_cycles);
    return check_json_object(s, err, label, "parameters_json", in->parameters_json);
}

#define INSPECTION_SELECT                                                                   \
    "SELECT i.id, i.stable_key, a.serial, s.code, i.kind, i.task_ref, i.performed_on, "    \
    "i.aircraft_hours, i.aircraft_cycles, i.procedure, i.procedure_rev, i.equipment, "     \
    "i.calibration_ref, i.inspector, i.inspector_level, i.software_version, i.notes, "     \
    "i.parameters_json, i.recorded_at FROM inspection_current i "                          \
    "JOIN site s ON s.id = i.site_key JOIN airframe a ON a.id = s.airframe_key "

/* Fill `in` from a row of INSPECTION_SELECT; parameters_json is malloc'd. */
static int read_inspection(sqlite3_stmt *st, pl_inspection *in)
{
    memset(in, 0, sizeof *in);
    in->id = sqlite3_column_int64(st, 0);
    in->key = sqlite3_column_int64(st, 1);
    col_text(st, 2, in->airframe_serial, sizeof in->airframe_serial);
    col_text(st, 3, in->site_code, sizeof in->site_code);
    col_text(st, 4, in->kind, sizeof in->kind);
    col_text(st, 5, in->task_ref, sizeof in->task_ref);
    col_text(st, 6, in->performed_on, sizeof in->performed_on);
    in->aircraft_hours = col_real(st, 7);
    in->aircraft_cycles = sqlite3_column_type(st, 8) == SQLITE_NULL
                              ? -1 : sqlite3_column_int64(st, 8);
    col_text(st, 9, in->procedure, sizeof in->procedure);
    col_text(st, 10, in->procedure_rev, sizeof in->procedure_rev);
    col_text(st, 11, in->equipment, sizeof in->equipment);
    col_text(st, 12, in->calibration_ref, sizeof in->calibration_ref);
    col_text(st, 13, in->inspector, sizeof in->inspector);
    col_text(st, 14, in->inspector_level, sizeof in->inspector_level);
    col_text(st, 15, in->software_version, sizeof in->software_version);
    col_text(st, 16, in->notes, sizeof in->notes);
    int oom = 0;
    in->parameters_json = col_dup(st, 17, &oom);
    col_text(st, 18, in->recorded_at, sizeof in->recorded_at);
    return oom ? PL_ENOMEM : PL_OK;
}

static int insert_inspection(pl_store *s, const pl_inspection *in, pl_id site, pl_id key,
                             pl_id supersedes, const char *reason, pl_id *id, pl_err *err,
                             const char *label)
{
    sqlite3_stmt *st;
    char now[PL_DATE_SIZE];
    int rc = prepare(s, &st,
                     "INSERT INTO inspection (key, supersedes, reason, site_key, kind, task_ref, "
                     "performed_on, aircraft_hours, aircraft_cycles, procedure, procedure_rev, "
                     "equipment, calibration_ref, inspector, inspector_level, software_version, "
                     "parameters_json, notes, recorded_at) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, "
                     "?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17, ?18, ?19)", err);
    if (rc)
        return rc;
    now_utc(now);
    const char *sw = software_version(in->software_version);
    int b = bind_opt_id(st, 1, key) | bind_opt_id(st, 2, supersedes) |
            bind_opt_text(st, 3, reason) | sqlite3_bind_int64(st, 4, site) |
            sqlite3_bind_text(st, 5, in->kind, -1, SQLITE_STATIC) |
            bind_opt_text(st, 6, in->task_ref) |
            sqlite3_bind_text(st, 7, in->performed_on, -1, SQLITE_STATIC) |
            bind_opt_real(st, 8, in->aircraft_hours) |
            (in->aircraft_cycles >= 0 ? sqlite3_bind_int64(st, 9, in->aircraft_cycles)
                                      : sqlite3_bind_null(st, 9)) |
            sqlite3_bind_text(st, 10, in->procedure, -1, SQLITE_STATIC) |
            sqlite3_bind_text(st, 11, in->procedure_rev, -1, SQLITE_STATIC) |
            sqlite3_bind_text(st, 12, in->equipment, -1, SQLITE_STATIC) |
            sqlite3_bind_text(st, 13, in->calibration_ref, -1, SQLITE_STATIC) |
            sqlite3_bind_text(st, 14, in->inspector, -1, SQLITE_STATIC) |
            sqlite3_bind_text(st, 15, in->inspector_level, -1, SQLITE_STATIC) |
            sqlite3_bind_text(st, 16, sw, -1, SQLITE_STATIC) |
            bind_opt_text(st, 17, in->parameters_json) |
            bind_opt_text(st, 18, in->notes) | sqlite3_bind_text(st, 19, now, -1, SQLITE_STATIC);
    return finish_insert(s, st, b, id, err, label);
}

/* Refuse a second current baseline of a site, naming the one that exists. */
static int check_baseline(pl_store *s, pl_id site, pl_id replacing, pl_err *err,
                          const char *label)
{
    sqlite3_stmt *st;
    int rc = prepare(s, &st,
                     "SELECT stable_key, performed_on FROM inspection_current WHERE site_key = ?1"
                     " AND kind = 'baseline' AND id IS NOT ?2", err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, site);
    bind_opt_id(st, 2, replacing);
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW)
        rc = pl__err(err, PL_EEXISTS,
                     "%s: site already has a baseline inspection (key %lld, performed on %s)",
                     label, (long long)sqlite3_column_int64(st, 0),
                     (const char *)sqlite3_column_text(st, 1));
    else if (r != SQLITE_DONE)
        rc = db_fail(s, err, label);
    sqlite3_finalize(st);
    return rc;
}

PL_EXPORT int pl_store_add_inspection(pl_store *s, const pl_inspection *in, pl_id *id,
                                      pl_err *err)
{
    assert(s && in);
    char label[LABEL_SIZE];
    snprintf(label, sizeof label, "inspection of site %.*s on %.*s", FLD(in->site_code),
             FLD(in->airframe_serial));
    int rc = check_inspection(s, in, label, err);
    if (rc)
        return rc;
    int owned;
    rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    pl_id af = 0, site = 0, newid = 0;
    rc = airframe_key(s, in->airframe_serial, &af, NULL, err, label);
    if (!rc)
        rc = site_key(s, af, in->site_code, &site, NULL, err, label);
    if (!rc && strcmp(in->kind, "baseline") == 0)
        rc = check_baseline(s, site, 0, err, label);
    if (!rc)
        rc = insert_inspection(s, in, site, 0, 0, NULL, &newid, err, label);
    rc = pl_store__write_end(s, owned, rc, err);
    if (!rc && id)
        *id = newid;
    return rc;
}

PL_EXPORT int pl_store_get_inspection(pl_store *s, pl_id key, pl_inspection *in, pl_err *err)
{
    assert(s && in);
    sqlite3_stmt *st;
    int rc = prepare(s, &st, INSPECTION_SELECT "WHERE i.stable_key = ?1", err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, key);
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW) {
        if (read_inspection(st, in)) {
            pl_inspection_clear(in);
            rc = pl__err(err, PL_ENOMEM, "inspection %lld: out of memory", (long long)key);
        }
    } else if (r == SQLITE_DONE) {
        rc = pl__err(err, PL_ENOTFOUND, "inspection %lld: no such inspection", (long long)key);
    } else {
        rc = db_fail(s, err, s->path);
    }
    sqlite3_finalize(st);
    return rc;
}

PL_EXPORT int pl_store_correct_inspection(pl_store *s, pl_id key, const pl_inspection *in,
                                          const char *reason, pl_id *id, pl_err *err)
{
    assert(s && in);
    char label[LABEL_SIZE];
    snprintf(label, sizeof label, "inspection %lld", (long long)key);
    int rc = check_inspection(s, in, label, err);
    if (!rc)
        rc = check_text(err, label, "correction reason", reason, PL_TEXT_SIZE, 1);
    if (rc)
        return rc;
    int owned;
    rc = pl_store__write_begin(s, &owned, err);
    if (rc)
        return rc;
    pl_id current = 0, site = 0, af = 0, named_site = 0, newid = 0;
    sqlite3_stmt *st;
    rc = prepare(s, &st, "SELECT id, site_key FROM inspection_current WHERE stable_key = ?1",
                 err);
    if (!rc) {
        sqlite3_bind_int64(st, 1, key);
        int r = sqlite3_step(st);
        if (r == SQLITE_ROW) {
            current = sqlite3_column_int64(st, 0);
            site = sqlite3_column_int64(st, 1);
        } else if (r == SQLITE_DONE) {
            rc = pl__err(err, PL_ENOTFOUND, "%s: no such inspection", label);
        } else {
            rc = db_fail(s, err, label);
        }
        sqlite3_finalize(st);
    }
    if (!rc)
        rc = airframe_key(s, in->airframe_serial, &af, NULL, err, label);
    if (!rc)
        rc = site_key(s, af, in->site_code, &named_site, NULL, err, label);
    if (!rc && named_site != site)
        rc = pl__err(err, PL_EINVAL, "%s: a correction cannot move the inspection to another "
                     "site (%s on %s)", label, in->site_code, in->airframe_serial);
    if (!rc && strcmp(in->kind, "baseline") == 0)
        rc = check_baseline(s, site, current, err, label);
    if (!rc)
        rc = insert_inspection(s, in, site, key, current, reason, &newid, err, label);
    rc = pl_store__write_end(s, owned, rc, err);
    if (!rc && id)
        *id = newid;
    return rc;
}

PL_EXPORT int pl_store_list_inspections(pl_store *s, const pl_inspection_filter *filter,
                                        pl_inspection_fn fn, void *ud, pl_err *err)
{
    assert(s && fn);
    if (filter) {
        const char *label = "inspection filter";
        int rc = check_date(err, label, "from", filter->from, PL_DATE_SIZE, 0);
        if (!rc)
            rc = check_date(err, label, "to", filter->to, PL_DATE_SIZE, 0);
        if (!rc && filter->kind && *filter->kind) {
            pl_err e = { 0 };
            if (pl_inspection_kind_check(filter->kind, &e))
                rc = pl__err(err, PL_EINVAL, "%s: %s", label, e.msg);
        }
        if (rc)
            return rc;
    }
    sqlite3_stmt *st;
    int rc = prepare(s, &st,
                     INSPECTION_SELECT "WHERE (?1 IS NULL OR a.serial = ?1) "
                     "AND (?2 IS NULL OR s.code = ?2) AND (?3 IS NULL OR i.kind = ?3) "
                     "AND (?4 IS NULL OR i.performed_on >= ?4) "
                     "AND (?5 IS NULL OR i.performed_on <= ?5) "
                     "ORDER BY i.performed_on, i.stable_key", err);
    if (rc)
        return rc;
    if (filter) {
        bind_opt_text(st, 1, filter->airframe_serial);
        bind_opt_text(st, 2, filter->site_code);
        bind_opt_text(st, 3, filter->kind);
        bind_opt_text(st, 4, filter->from);
        bind_opt_text(st, 5, filter->to);
    }
    pl_inspection in;
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        if (read_inspection(st, &in)) {
            pl_inspection_clear(&in);
            rc = pl__err(err, PL_ENOMEM, "%s: out of memory", s->path);
            break;
        }
        int stop = fn(ud, &in);
        pl_inspection_clear(&in);
        if (stop)
            break;
    }
    return finish_listing(s, st, r, rc, err, s->path);
}

/* ---- maps -------------------------------------------------------------------------- */

/* Inspection `key` and the current version of its site. */
static int inspection_site(pl_store *s, pl_id key, pl_site *site, pl_err *err,
                           const char *label)
{
    sqlite3_stmt *st;
    int rc = prepare(s, &st,
                     SITE_SELECT "JOIN inspection_current i ON i.site_key = s.stable_key "
                     "WHERE i.stable_key = ?1", err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, key);
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW)
        read_site(st, site);
    else if (r == SQLITE_DONE)
        rc = pl__err(err, PL_ENOTFOUND, "%s: no inspection with key %lld", label, (long long)key);
    else
        rc = db_fail(s, err, label);
    sqlite3_finalize(st);
    return rc;
}

static int check_map(pl_store *s, const pl_map_record *rec, const pl_map *map,
                     const char *label, pl_err *err)
{
    int rc = check_text(err, label, "source", rec->source, sizeof rec->source, 0);
    if (!rc)
        rc = check_name(err, label, "origin", rec->origin, sizeof rec->origin, 1);
    if (!rc)
        rc = check_name(err, label, "software_version", rec->software_version,
                        sizeof rec->software_version, 0);
    if (!rc)
        rc = check_json_object(s, err, label, "parameters_json", rec->parameters_json);
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

static int insert_map(pl_store *s, const pl_map_record *rec, const pl_map *map,
                      const unsigned char *blob, size_t blob_len, const char *hex, pl_id *id,
                      pl_err *err, const char *label)
{
    sqlite3_stmt *st;
    char now[PL_DATE_SIZE];
    int rc = prepare(s, &st,
                     "INSERT INTO map (inspection_key, source, made_by, software_version, "
                     "parameters_json, width, height, nchannels, pitch_u_mm, pitch_v_mm, "
                     "coord_system, coord_unit, origin_x, origin_y, origin_z, u_x, u_y, u_z, "
                     "v_x, v_y, v_z, encoding, data, sha256, recorded_at) VALUES (?1, ?2, ?3, "
                     "?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17, ?18, ?19, "
                     "?20, ?21, 'zlib-f32le', ?22, ?23, ?24)", err);
    if (rc)
        return rc;
    now_utc(now);
    const pl_placement *p = &map->placement;
    const char *sw = software_version(rec->software_version);
    int b = sqlite3_bind_int64(st, 1, rec->inspection_key) |
            bind_opt_text(st, 2, rec->source[0] ? pl__basename(rec->source) : NULL) |
            sqlite3_bind_text(st, 3, rec->origin, -1, SQLITE_STATIC) |
            sqlite3_bind_text(st, 4, sw, -1, SQLITE_STATIC) |
            bind_opt_text(st, 5, rec->parameters_json) |
            sqlite3_bind_int64(st, 6, map->width) | sqlite3_bind_int64(st, 7, map->height) |
            sqlite3_bind_int64(st, 8, map->nchannels) |
            sqlite3_bind_double(st, 9, map->pitch_u) | sqlite3_bind_double(st, 10, map->pitch_v) |
            sqlite3_bind_text(st, 11, p->system, -1, SQLITE_STATIC) |
            sqlite3_bind_text(st, 12, p->unit, -1, SQLITE_STATIC);
    for (int k = 0; k < 3; k++)
        b |= sqlite3_bind_double(st, 13 + k, p->origin[k]) |
             sqlite3_bind_double(st, 16 + k, p->u[k]) | sqlite3_bind_double(st, 19 + k, p->v[k]);
    b |= sqlite3_bind_blob64(st, 22, blob, blob_len, SQLITE_STATIC) |
         sqlite3_bind_text(st, 23, hex, -1, SQLITE_STATIC) |
         sqlite3_bind_text(st, 24, now, -1, SQLITE_STATIC);
    rc = finish_insert(s, st, b, id, err, label);
    if (rc)
        return rc;
    rc = prepare(s, &st, "INSERT INTO map_channel (map_id, idx, quantity, unit, label) "
                 "VALUES (?1, ?2, ?3, ?4, ?5)", err);
    if (rc)
        return rc;
    for (uint32_t c = 0; c < map->nchannels && !rc; c++) {
        sqlite3_reset(st);
        sqlite3_bind_int64(st, 1, *id);
        sqlite3_bind_int64(st, 2, c);
        sqlite3_bind_text(st, 3, map->channels[c].quantity, -1, SQLITE_STATIC);
        sqlite3_bind_text(st, 4, map->channels[c].unit, -1, SQLITE_STATIC);
        sqlite3_bind_text(st, 5, map->channels[c].label, -1, SQLITE_STATIC);
        rc = step_insert(s, st, NULL, err, label);
    }
    sqlite3_finalize(st);
    return rc;
}

PL_EXPORT int pl_store_add_map(pl_store *s, const pl_map_record *rec, const pl_map *map,
                               pl_id *id, pl_err *err)
{
    assert(s && rec && map);
    char label[LABEL_SIZE];
    snprintf(label, sizeof label, "map for inspection %lld", (long long)rec->inspection_key);
    int rc = check_map(s, rec, map, label, err);
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
        rc = prepare(s, &st, "SELECT id FROM map WHERE inspection_key = ?1 AND sha256 = ?2", err);
        if (!rc) {
            int found = 0;
            int64_t other = 0;
            sqlite3_bind_int64(st, 1, rec->inspection_key);
            sqlite3_bind_text(st, 2, hex, -1, SQLITE_STATIC);
            rc = finish_int(s, st, &found, &other, err, label);
            if (!rc && found)
                rc = pl__err(err, PL_EEXISTS, "%s: the same content is already stored as map %lld",
                             label, (long long)other);
        }
    }
    if (!rc)
        rc = insert_map(s, rec, map, blob, blob_len, hex, &newid, err, label);
    free(blob);
    rc = pl_store__write_end(s, owned, rc, err);
    if (!rc && id)
        *id = newid;
    return rc;
}

#define MAP_SELECT                                                                          \
    "SELECT m.id, m.inspection_key, m.source, m.made_by, m.software_version, "             \
    "m.parameters_json, m.width, m.height, m.nchannels, m.pitch_u_mm, m.pitch_v_mm, "      \
    "m.coord_system, m.coord_unit, m.origin_x, m.origin_y, m.origin_z, m.u_x, m.u_y, "     \
    "m.u_z, m.v_x, m.v_y, m.v_z, m.sha256, length(m.data), m.recorded_at "

/* Column of the data blob in a MAP_SELECT ", m.data" row: only a load reads
 * the blob, a listing leaves it on disk. */
#define MAP_DATA_COLUMN 25

/* The record part of a MAP_SELECT row (channels and parameters left alone). */
static void read_map_record(sqlite3_stmt *st, pl_map_record *rec)
{
    memset(rec, 0, sizeof *rec);
    rec->id = sqlite3_column_int64(st, 0);
    rec->inspection_key = sqlite3_column_int64(st, 1);
    col_text(st, 2, rec->source, sizeof rec->source);
    col_text(st, 3, rec->origin, sizeof rec->origin);
    col_text(st, 4, rec->software_version, sizeof rec->software_version);
    rec->width = (uint32_t)sqlite3_column_int64(st, 6);
    rec->height = (uint32_t)sqlite3_column_int64(st, 7);
    rec->nchannels = (uint32_t)sqlite3_column_int64(st, 8);
    rec->pitch_u = sqlite3_column_double(st, 9);
    rec->pitch_v = sqlite3_column_double(st, 10);
    col_text(st, 11, rec->placement.system, sizeof rec->placement.system);
    col_text(st, 12, rec->placement.unit, sizeof rec->placement.unit);
    for (int k = 0; k < 3; k++) {
        rec->placement.origin[k] = sqlite3_column_double(st, 13 + k);
        rec->placement.u[k] = sqlite3_column_double(st, 16 + k);
        rec->placement.v[k] = sqlite3_column_double(st, 19 + k);
    }
    col_text(st, 22, rec->sha256, sizeof rec->sha256);
    rec->stored_bytes = (size_t)sqlite3_column_int64(st, 23);
    col_text(st, 24, rec->recorded_at, sizeof rec->recorded_at);
}

/* Channels of map `id` into `ch` (room for n). */
static int read_channels(pl_store *s, pl_id id, pl_channel *ch, uint32_t n, pl_err *err,
                         const char *label)
{
    sqlite3_stmt *st;
    int rc = prepare(s, &st, "SELECT idx, quantity, unit, label FROM map_channel WHERE map_id = ?1 "
                     "ORDER BY idx", err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, id);
    uint32_t got = 0;
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        int64_t idx = sqlite3_column_int64(st, 0);
        if (idx != got || got >= n) {
            rc = pl__err(err, PL_EFORMAT, "%s: channel list does not match its %u channels",
                         label, n);
            break;
        }
        col_text(st, 1, ch[got].quantity, sizeof ch[got].quantity);
        col_text(st, 2, ch[got].unit, sizeof ch[got].unit);
        col_text(st, 3, ch[got].label, sizeof ch[got].label);
        got++;
    }
    rc = finish_listing(s, st, r, rc, err, label);
    if (!rc && got != n)
        rc = pl__err(err, PL_EFORMAT, "%s: %u channel records for %u channels", label, got, n);
    return rc;
}

PL_EXPORT int pl_store_load_map(pl_store *s, pl_id id, pl_map **out, pl_map_record *rec,
                                pl_err *err)
{
    assert(s && out);
    *out = NULL;
    char label[LABEL_SIZE];
    snprintf(label, sizeof label, "%s: map %lld", s->path, (long long)id);
    sqlite3_stmt *st;
    int rc = prepare(s, &st, MAP_SELECT ", m.data FROM map m WHERE m.id = ?1", err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, id);
    int r = sqlite3_step(st);
    if (r != SQLITE_ROW) {
        rc = r == SQLITE_DONE ? pl__err(err, PL_ENOTFOUND, "%s: no such map", label)
                              : db_fail(s, err, label);
        sqlite3_finalize(st);
        return rc;
    }
    pl_map_record tmp;
    read_map_record(st, &tmp);
    pl_map *map = NULL;
    pl_err e = { 0 };
    unsigned char digest[PL_SHA256_SIZE];
    rc = pl_map_new(&map, tmp.width, tmp.height, tmp.nchannels, &e);
    if (rc)
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
        const void *blob = sqlite3_column_blob(st, MAP_DATA_COLUMN);
        size_t len = (size_t)sqlite3_column_bytes(st, MAP_DATA_COLUMN);
        rc = pl_map_decode(map, blob, len, digest, &e);
        if (rc == PL_ENOMATCH)
            pl__err(err, rc, "%s: content does not match its stored SHA-256 (%s)", label, e.msg);
        else if (rc)
            pl__err(err, rc, "%s: %s", label, e.msg);
    }
    if (!rc && rec) {
        int oom = 0;
        tmp.parameters_json = col_dup(st, 5, &oom);
        if (oom)
            rc = pl__err(err, PL_ENOMEM, "%s: out of memory", label);
        tmp.channels = map->channels;
        *rec = tmp;
    }
    sqlite3_finalize(st);
    if (rc) {
        pl_map_free(map);
        return rc;
    }
    *out = map;
    return PL_OK;
}

PL_EXPORT int pl_store_list_maps(pl_store *s, pl_id inspection_key, pl_map_fn fn, void *ud,
                                 pl_err *err)
{
    assert(s && fn);
    char label[LABEL_SIZE];
    snprintf(label, sizeof label, "maps of inspection %lld", (long long)inspection_key);
    sqlite3_stmt *st;
    int rc = prepare(s, &st, MAP_SELECT "FROM map_current m WHERE m.inspection_key = ?1 "
                     "ORDER BY m.id", err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, inspection_key);
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        pl_map_record rec;
        read_map_record(st, &rec);
        pl_channel *ch = calloc(rec.nchannels ? rec.nchannels : 1, sizeof *ch);
        int oom = !ch;
        rec.parameters_json = oom ? NULL : col_dup(st, 5, &oom);
        if (oom) {
            free(ch);
            rc = pl__err(err, PL_ENOMEM, "%s: out of memory", label);
            break;
        }
        rc = read_channels(s, rec.id, ch, rec.nchannels, err, label);
        int stop = 0;
        if (!rc) {
            rec.channels = ch;
            stop = fn(ud, &rec);
        }
        free(rec.parameters_json);
        free(ch);
        if (rc || stop)
            break;
    }
    return finish_listing(s, st, r, rc, err, label);
}

/* ---- registrations and comparisons --------------------------------------------- */

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
    int rc = prepare(s, &st,
                     "SELECT i.site_key, i.stable_key, i.kind, i.performed_on FROM map m "
                     "JOIN inspection_current i ON i.stable_key = m.inspection_key "
                     "WHERE m.id = ?1", err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, map_id);
    int r = sqlite3_step(st);
    if (r == SQLITE_ROW) {
        o->site = sqlite3_column_int64(st, 0);
        o->inspection = sqlite3_column_int64(st, 1);
        col_text(st, 2, o->kind, sizeof o->kind);
        col_text(st, 3, o->performed_on, sizeof o->performed_on);
    } else if (r == SQLITE_DONE) {
        rc = pl__err(err, PL_ENOTFOUND, "%s: no map %lld", label, (long long)map_id);
    } else {
        rc = db_fail(s, err, label);
    }
    sqlite3_finalize(st);
    return rc;
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

static int check_registration(pl_store *s, const pl_registration_record *r, const char *label,
                              pl_err *err)
{
    int aligned = strcmp(r->status, "aligned") == 0;
    int manual = strcmp(r->status, "manual") == 0;
    int refused = strcmp(r->status, "refused") == 0;
    if (!aligned && !manual && !refused)
        return pl__err(err, PL_EINVAL, "%s: status '%.*s' is not aligned, refused or manual",
                       label, FLD(r->status));
    int rc = check_name(err, label, "method", r->method, sizeof r->method, 1);
    if (!rc)
        rc = check_text(err, label, "refusal", r->refusal, sizeof r->refusal, 0);
    if (!rc)
        rc = check_name(err, label, "supplied_by", r->supplied_by, sizeof r->supplied_by, 0);
    if (!rc)
        rc = check_text(err, label, "supplied_reason", r->supplied_reason,
                        sizeof r->supplied_reason, 0);
    if (!rc)
        rc = check_name(err, label, "software_version", r->software_version,
                        sizeof r->software_version, 0);
    if (rc)
        return rc;
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
    return check_json_object(s, err, label, "parameters_json", r->parameters_json);
}

PL_EXPORT int pl_store_add_registration(pl_store *s, const pl_registration_record *r, pl_id *id,
                                        pl_err *err)
{
    assert(s && r);
    char label[LABEL_SIZE];
    snprintf(label, sizeof label, "registration of map %lld onto map %lld",
             (long long)r->current_map_id, (long long)r->baseline_map_id);
    int rc = check_registration(s, r, label, err);
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
    int owned;
    if ((rc = pl_store__write_begin(s, &owned, err)))
        return rc;
    sqlite3_stmt *st;
    pl_id newid = 0;
    rc = prepare(s, &st,
                 "INSERT INTO registration (baseline_map_id, current_map_id, method, status, "
                 "refusal, shift_col_px, shift_row_px, shift_u_mm, shift_v_mm, rotation_deg, "
                 "scale, ncc, peak_sidelobe, overlap_fraction, overlap_mm2, supplied_by, "
                 "supplied_reason, parameters_json, software_version, recorded_at) VALUES "
                 "(?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17, "
                 "?18, ?19, ?20)", err);
    if (!rc) {
        char now[PL_DATE_SIZE];
        now_utc(now);
        int b = sqlite3_bind_int64(st, 1, r->baseline_map_id)
                | sqlite3_bind_int64(st, 2, r->current_map_id)
                | sqlite3_bind_text(st, 3, r->method, -1, SQLITE_STATIC)
                | sqlite3_bind_text(st, 4, r->status, -1, SQLITE_STATIC)
                | bind_opt_text(st, 5, r->refusal)
                | bind_opt_real(st, 6, r->shift_col_px) | bind_opt_real(st, 7, r->shift_row_px)
                | bind_opt_real(st, 8, r->shift_u_mm) | bind_opt_real(st, 9, r->shift_v_mm)
                | bind_opt_real(st, 10, r->rotation_deg) | bind_opt_real(st, 11, r->scale)
                | bind_opt_real(st, 12, r->ncc) | bind_opt_real(st, 13, r->peak_sidelobe)
                | bind_opt_real(st, 14, r->overlap_fraction)
                | bind_opt_real(st, 15, r->overlap_mm2) | bind_opt_text(st, 16, r->supplied_by)
                | bind_opt_text(st, 17, r->supplied_reason)
                | bind_opt_text(st, 18, r->parameters_json)
                | sqlite3_bind_text(st, 19, software_version(r->software_version), -1,
                                    SQLITE_STATIC)
                | sqlite3_bind_text(st, 20, now, -1, SQLITE_STATIC);
        rc = finish_insert(s, st, b, &newid, err, label);
    }
    rc = pl_store__write_end(s, owned, rc, err);
    if (!rc && id)
        *id = newid;
    return rc;
}

#define REGISTRATION_SELECT                                                                 \
    "SELECT id, baseline_map_id, current_map_id, method, status, refusal, shift_col_px, "  \
    "shift_row_px, shift_u_mm, shift_v_mm, rotation_deg, scale, ncc, peak_sidelobe, "      \
    "overlap_fraction, overlap_mm2, supplied_by, supplied_reason, parameters_json, "       \
    "software_version, recorded_at FROM registration "

/* Fill `g` from a row of REGISTRATION_SELECT; parameters_json is malloc'd. */
static int read_registration(sqlite3_stmt *st, pl_registration_record *g)
{
    memset(g, 0, sizeof *g);
    g->id = sqlite3_column_int64(st, 0);
    g->baseline_map_id = sqlite3_column_int64(st, 1);
    g->current_map_id = sqlite3_column_int64(st, 2);
    col_text(st, 3, g->method, sizeof g->method);
    col_text(st, 4, g->status, sizeof g->status);
    col_text(st, 5, g->refusal, sizeof g->refusal);
    double *nums[] = { &g->shift_col_px, &g->shift_row_px, &g->shift_u_mm, &g->shift_v_mm,
                       &g->rotation_deg, &g->scale, &g->ncc, &g->peak_sidelobe,
                       &g->overlap_fraction, &g->overlap_mm2 };
    for (int k = 0; k < 10; k++)
        *nums[k] = col_real(st, 6 + k);
    col_text(st, 16, g->supplied_by, sizeof g->supplied_by);
    col_text(st, 17, g->supplied_reason, sizeof g->supplied_reason);
    int oom = 0;
    g->parameters_json = col_dup(st, 18, &oom);
    col_text(st, 19, g->software_version, sizeof g->software_version);
    col_text(st, 20, g->recorded_at, sizeof g->recorded_at);
    return oom ? PL_ENOMEM : PL_OK;
}

PL_EXPORT int pl_store_list_registrations(pl_store *s, pl_id current_map_id,
                                          pl_registration_fn fn, void *ud, pl_err *err)
{
    assert(s && fn);
    sqlite3_stmt *st;
    int rc = prepare(s, &st, REGISTRATION_SELECT "WHERE ?1 = 0 OR current_map_id = ?1 "
                     "ORDER BY id", err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, current_map_id);
    pl_registration_record g;
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        if (read_registration(st, &g)) {
            rc = pl__err(err, PL_ENOMEM, "%s: out of memory", s->path);
            break;
        }
        int stop = fn(ud, &g);
        free(g.parameters_json);
        if (stop)
            break;
    }
    return finish_listing(s, st, r, rc, err, s->path);
}

/* The site key of an inspection (by key). */
static int inspection_site_key(pl_store *s, pl_id key, pl_id *site, const char *label,
                               pl_err *err)
{
    sqlite3_stmt *st;
    int rc = prepare(s, &st, "SELECT site_key FROM inspection_current WHERE stable_key = ?1", err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, key);
    int found = 0;
    int64_t v = 0;
    rc = finish_int(s, st, &found, &v, err, label);
    if (!rc && !found)
        rc = pl__err(err, PL_ENOTFOUND, "%s: no inspection with key %lld", label, (long long)key);
    *site = v;
    return rc;
}

static int check_comparison(pl_store *s, const pl_comparison_record *c, const char *label,
                            pl_err *err)
{
    int done = strcmp(c->status, "done") == 0, not_done = strcmp(c->status, "not-done") == 0;
    if (!done && !not_done)
        return pl__err(err, PL_EINVAL, "%s: status '%.*s' is not done or not-done", label,
                       FLD(c->status));
    int rc = check_text(err, label, "not_done_reason", c->not_done_reason,
                        sizeof c->not_done_reason, 0);
    if (!rc)
        rc = check_name(err, label, "software_version", c->software_version,
                        sizeof c->software_version, 0);
    if (rc)
        return rc;
    if (not_done && !c->not_done_reason[0])
        return pl__err(err, PL_EINVAL, "%s: a comparison not done needs its reason", label);
    if (c->baseline_inspection == c->current_inspection)
        return pl__err(err, PL_EINVAL, "%s: an inspection cannot be compared with itself", label);
    return check_json_object(s, err, label, "parameters_json", c->parameters_json);
}

PL_EXPORT int pl_store_add_comparison(pl_store *s, const pl_comparison_record *c, pl_id *id,
                                      pl_err *err)
{
    assert(s && c);
    char label[LABEL_SIZE];
    snprintf(label, sizeof label, "comparison of inspection %lld with %lld",
             (long long)c->current_inspection, (long long)c->baseline_inspection);
    int rc = check_comparison(s, c, label, err);
    pl_id bsite = 0, csite = 0;
    if (!rc)
        rc = inspection_site_key(s, c->baseline_inspection, &bsite, label, err);
    if (!rc)
        rc = inspection_site_key(s, c->current_inspection, &csite, label, err);
    if (rc)
        return rc;
    if (bsite != csite)
        return pl__err(err, PL_ENOMATCH, "%s: the inspections are of different sites", label);
    int owned;
    if ((rc = pl_store__write_begin(s, &owned, err)))
        return rc;
    sqlite3_stmt *st;
    pl_id newid = 0;
    rc = prepare(s, &st,
                 "INSERT INTO comparison (site_key, baseline_inspection, current_inspection, "
                 "registration_id, status, not_done_reason, uncompared_mm2, uncompared_fraction, "
                 "parameters_json, software_version, recorded_at) VALUES (?1, ?2, ?3, ?4, ?5, "
                 "?6, ?7, ?8, ?9, ?10, ?11)", err);
    if (!rc) {
        char now[PL_DATE_SIZE];
        now_utc(now);
        int b = sqlite3_bind_int64(st, 1, bsite) | sqlite3_bind_int64(st, 2, c->baseline_inspection)
                | sqlite3_bind_int64(st, 3, c->current_inspection)
                | bind_opt_id(st, 4, c->registration_id)
                | sqlite3_bind_text(st, 5, c->status, -1, SQLITE_STATIC)
                | bind_opt_text(st, 6, c->not_done_reason)
                | bind_opt_real(st, 7, c->uncompared_mm2)
                | bind_opt_real(st, 8, c->uncompared_fraction)
                | bind_opt_text(st, 9, c->parameters_json)
                | sqlite3_bind_text(st, 10, software_version(c->software_version), -1,
                                    SQLITE_STATIC)
                | sqlite3_bind_text(st, 11, now, -1, SQLITE_STATIC);
        rc = finish_insert(s, st, b, &newid, err, label);
    }
    rc = pl_store__write_end(s, owned, rc, err);
    if (!rc && id)
        *id = newid;
    return rc;
}

#define COMPARISON_SELECT                                                                   \
    "SELECT id, baseline_inspection, current_inspection, registration_id, status, "        \
    "not_done_reason, uncompared_mm2, uncompared_fraction, parameters_json, "              \
    "software_version, recorded_at FROM comparison "

/* Fill `c` from a row of COMPARISON_SELECT; parameters_json is malloc'd. */
static int read_comparison(sqlite3_stmt *st, pl_comparison_record *c)
{
    memset(c, 0, sizeof *c);
    c->id = sqlite3_column_int64(st, 0);
    c->baseline_inspection = sqlite3_column_int64(st, 1);
    c->current_inspection = sqlite3_column_int64(st, 2);
    c->registration_id = sqlite3_column_int64(st, 3);
    col_text(st, 4, c->status, sizeof c->status);
    col_text(st, 5, c->not_done_reason, sizeof c->not_done_reason);
    c->uncompared_mm2 = col_real(st, 6);
    c->uncompared_fraction = col_real(st, 7);
    int oom = 0;
    c->parameters_json = col_dup(st, 8, &oom);
    col_text(st, 9, c->software_version, sizeof c->software_version);
    col_text(st, 10, c->recorded_at, sizeof c->recorded_at);
    return oom ? PL_ENOMEM : PL_OK;
}

PL_EXPORT int pl_store_list_comparisons(pl_store *s, pl_id current_inspection,
                                        pl_comparison_fn fn, void *ud, pl_err *err)
{
    assert(s && fn);
    sqlite3_stmt *st;
    int rc = prepare(s, &st, COMPARISON_SELECT "WHERE ?1 = 0 OR current_inspection = ?1 "
                     "ORDER BY id", err);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, current_inspection);
    pl_comparison_record c;
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        if (read_comparison(st, &c)) {
            rc = pl__err(err, PL_ENOMEM, "%s: out of memory", s->path);
            break;
        }
        int stop = fn(ud, &c);
        free(c.parameters_json);
        if (stop)
            break;
    }
    return finish_listing(s, st, r, rc, err, s->path);
}

/* ---- summary ----------------------------------------------------------------------- */

static int info_value(pl_store *s, const char *name, char *dst, size_t cap, pl_err *err)
{
    sqlite3_stmt *st;
    int rc = prepare(s, &st, "SELECT value FROM store_info WHERE name = ?1", err);
    if (rc)
        return rc;
    sqlite3_bind_text(st, 1, name, -1, SQLITE_STATIC);
    int r = sqlite3_step(st);
    dst[0] = '\0';
    if (r == SQLITE_ROW)
        col_text(st, 0, dst, cap);
    else if (r != SQLITE_DONE)
        rc = db_fail(s, err, s->path);
    sqlite3_finalize(st);
    return rc;
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
        { "SELECT count(*) FROM inspection_current WHERE kind = 'baseline'",
          &sum->inspections_by_kind[0] },
        { "SELECT count(*) FROM inspection_current WHERE kind = 'scheduled'",
          &sum->inspections_by_kind[1] },
        { "SELECT count(*) FROM inspection_current WHERE kind = 'unscheduled'",
          &sum->inspections_by_kind[2] },
        { "SELECT count(*) FROM inspection_current WHERE kind = 'post-repair'",
          &sum->inspections_by_kind[3] },
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
        rc = query_int(s, counts[i].sql, counts[i].out, err);
    if (rc)
        return rc;
    sqlite3_stmt *st;
    rc = prepare(s, &st, "SELECT min(performed_on), max(performed_on) FROM inspection_current",
                 err);
    if (rc)
        return rc;
    if (sqlite3_step(st) == SQLITE_ROW) {
        col_text(st, 0, sum->first_inspection, sizeof sum->first_inspection);
        col_text(st, 1, sum->last_inspection, sizeof sum->last_inspection);
    } else {
        rc = db_fail(s, err, s->path);
    }
    sqlite3_finalize(st);
    return rc;
}
