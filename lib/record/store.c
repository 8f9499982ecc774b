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
#include "plyledger/ledger.h"
#include "plyledger/package.h" /* PL_PACKAGE_APPLICATION_ID */

#include "common/common_int.h"

#include <assert.h>
#include <errno.h>
#include <fcntl.h>
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
    case SQLITE_BUSY:
    case SQLITE_LOCKED: return PL_EBUSY;
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
    int code = pl_store__status(sqlite3_extended_errcode(s->db), msg);
    if (code == PL_EBUSY)
        return pl__err(err, code, "%s: another process is writing to the store and was still "
                       "writing after %g s of waiting; nothing was recorded", s->path, s->wait_s);
    return pl__err(err, code, "%s: %s", label ? label : s->path, msg);
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

int pl_store__not_after_today(pl_store *s, const char *date, const char *what, pl_err *err,
                              const char *label)
{
    if (s->today[0] && date && *date && strcmp(date, s->today) > 0)
        return pl__err(err, PL_EINVAL, "%s: %s %s is after today (%s)", label, what, date,
                       s->today);
    return PL_OK;
}

int pl_store__check_changes(const pl_table_desc *t, const void *current, const void *corrected,
                            pl_err *err, const char *label)
{
    if (pl_row__same_input(t, current, corrected))
        return pl__err(err, PL_EINVAL, "%s: nothing to correct: the correction gives every field "
                       "the value it has", label);
    return PL_OK;
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

int pl_store__correction_begin(pl_store *s, const char *reason, int *owned, pl_err *err,
                               const char *label)
{
    int rc = pl_row__check_text(err, label, "correction reason", reason, PL_TEXT_SIZE, 1);
    return rc ? rc : pl_store__write_begin(s, owned, err);
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
    if (sqlite3_exec(s->db, "BEGIN IMMEDIATE", NULL, NULL, NULL) != SQLITE_OK) {
        if (pl_store__status(sqlite3_extended_errcode(s->db), NULL) == PL_EBUSY)
            return pl_store__fail(s, err, NULL);
        return pl__err(err, PL_EDB, "%s: cannot begin a transaction: %s", s->path,
                       sqlite3_errmsg(s->db));
    }
    return PL_OK;
}

PL_EXPORT int pl_store_commit(pl_store *s, pl_err *err)
{
    assert(s);
    if (sqlite3_exec(s->db, "COMMIT", NULL, NULL, NULL) != SQLITE_OK) {
        int rc = pl_store__status(sqlite3_extended_errcode(s->db), NULL) == PL_EBUSY
                     ? pl_store__fail(s, err, NULL)
                     : pl__err(err, PL_EDB, "%s: cannot commit: %s", s->path,
                               sqlite3_errmsg(s->db));
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

/* ---- waiting for another writer ------------------------------------------------ */

static double since(const struct timespec *t0)
{
    struct timespec now;
    clock_gettime(CLOCK_MONOTONIC, &now);
    return (double)(now.tv_sec - t0->tv_sec) + 1e-9 * (double)(now.tv_nsec - t0->tv_nsec);
}

/*
 * SQLite's busy handler: called while another connection holds the lock a
 * statement needs, `count` times for the same wait (0 first). Sleep with a
 * back-off that doubles from 1 ms to 100 ms, each sleep drawn at random
 * between half and all of it so that writers waiting together do not wake
 * in step, until s->wait_s seconds have passed since the wait began; then
 * give up (SQLITE_BUSY, which pl_store__fail() words plainly).
 */
static int busy_wait(void *ud, int count)
{
    pl_store *s = ud;
    if (count == 0)
        clock_gettime(CLOCK_MONOTONIC, &s->busy_since);
    double left = s->wait_s - since(&s->busy_since);
    if (left <= 0)
        return 0;
    double step = count < 7 ? 1e-3 * (double)(1 << count) : 0.1;
    step *= 0.5 + 0.5 * (double)randombytes_uniform(1000) / 1000.0;
    if (step > left)
        step = left;
    struct timespec ts = { 0, (long)(step * 1e9) };
    nanosleep(&ts, NULL);
    return 1;
}

PL_EXPORT int pl_store_set_wait(pl_store *s, double seconds, pl_err *err)
{
    assert(s);
    if (!(seconds >= 0 && seconds <= PL_STORE_WAIT_MAX_S))
        return pl__err(err, PL_EINVAL, "%s: a wait for another writer of %g s is not 0 to %g s",
                       s->path, seconds, PL_STORE_WAIT_MAX_S);
    s->wait_s = seconds;
    return PL_OK;
}

PL_EXPORT double pl_store_wait(const pl_store *s)
{
    assert(s);
    return s->wait_s;
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
    pl_sign_key_wipe(&s->seal_secret);
    free(s->path);
    free(s);
}

PL_EXPORT int pl_store_set_today(pl_store *s, const char *today, pl_err *err)
{
    assert(s);
    if (today && *today && !pl_store__valid_date(today))
        return pl__err(err, PL_EINVAL, "today '%.32s' is not a calendar date YYYY-MM-DD", today);
    snprintf(s->today, sizeof s->today, "%s", today ? today : "");
    return PL_OK;
}

PL_EXPORT const char *pl_store_migration_note(const pl_store *s)
{
    return s ? s->migration_note : "";
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
static int has_identity(pl_store *s, int *found, pl_err *err)
{
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st, "SELECT 1 FROM store_info WHERE name = 'store_id'", err);
    return rc ? rc : pl_store__finish_int(s, st, found, NULL, err, s->path);
}

static int ensure_identity(pl_store *s, pl_err *err)
{
    int found = 0;
    /* look first without the write lock: an opened store nearly always has it */
    int rc = has_identity(s, &found, err);
    if (rc || found)
        return rc;
    if ((rc = pl_store__exec(s, "BEGIN IMMEDIATE", err)))
        return rc;
    rc = has_identity(s, &found, err);
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
 * the same old store cannot apply a migration twice; a migration already
 * applied takes no lock at all, so that opening a store does not wait for
 * another process's write.
 */
static int migrate(pl_store *s, pl_err *err)
{
    for (int i = 0; i < pl__migration_count; i++) {
        const pl_migration *m = &pl__migrations[i];
        int64_t uv = 0;
        /* a store already migrated is not locked for writing just to say so */
        int rc = pl_store__query_int(s, "PRAGMA user_version", &uv, err);
        if (rc)
            return rc;
        if (uv >= m->version)
            continue;
        if ((rc = pl_store__exec(s, "BEGIN IMMEDIATE", err)))
            return rc;
        rc = pl_store__query_int(s, "PRAGMA user_version", &uv, err);
        if (!rc && uv < m->version) {
            if (uv != m->version - 1) {
                rc = pl__err(err, PL_EDB, "%s: store schema version %lld cannot take migration %s",
                             s->path, (long long)uv, m->name);
            } else if (sqlite3_exec(s->db, m->sql, NULL, NULL, NULL) != SQLITE_OK) {
                rc = pl__err(err, PL_EDB, "%s: migration %s failed: %s", s->path, m->name,
                             sqlite3_errmsg(s->db));
            } else {
                char name[32], value[256], now[PL_DATE_SIZE], sql[64], chained[96] = "";
                int64_t n = 0;
                /* the hash chain's migration chains the rows already recorded */
                if (m->version == PL_STORE_LEDGER_SCHEMA &&
                    !(rc = pl_ledger__chain_all(s, &n, err)) && n > 0) {
                    snprintf(chained, sizeof chained,
                             "; chained the %lld rows recorded before the hash chain existed",
                             (long long)n);
                    snprintf(s->migration_note, sizeof s->migration_note,
                             "%s: migrated to schema %d: chained the %lld rows recorded "
                             "before the hash chain existed",
                             s->path, m->version, (long long)n);
                }
                pl_store__now(now);
                snprintf(name, sizeof name, "schema.%04d", m->version);
                snprintf(value, sizeof value, "%s applied %s by plyledger %s%s", m->name, now,
                         pl_version(), chained);
                if (!rc)
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
    s->wait_s = PL_STORE_WAIT_DEFAULT_S;
    sqlite3_busy_handler(s->db, busy_wait, s);
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
    /* a hand-over package is a store that is only ever read */
    if (app == PL_PACKAGE_APPLICATION_ID && (s->flags & PL_STORE_READONLY))
        return PL_OK;
    if (app == PL_PACKAGE_APPLICATION_ID)
        return pl__err(err, PL_ENOTSTORE,
                       "%s: a hand-over package, which is only read: check it with plyledger "
                       "package check, receive it with plyledger package import", s->path);
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
    if (!rc)
        rc = pl_ledger__load_seal(s, err);
    if (rc) {
        pl_store_close(s);
        return rc;
    }
    *out = s;
    return PL_OK;
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
        { "SELECT count(*) FROM person", &sum->people },
        { "SELECT count(DISTINCT source) FROM seal_key WHERE origin = 'received'",
          &sum->received },
        { "SELECT coalesce(sum(length(data)), 0) FROM map", &sum->map_bytes },
        { "SELECT count(*) FROM inspection_current WHERE simulated = 1",
          &sum->simulated_inspections },
        { "SELECT count(*) FROM inspection_current WHERE simulated IS NULL",
          &sum->unknown_inspections },
    };
    for (size_t i = 0; !rc && i < sizeof counts / sizeof counts[0]; i++)
        rc = pl_store__query_int(s, counts[i].sql, counts[i].out, err);
    if (!rc)
        rc = count_kinds(s, sum->inspections_by_kind, err);
    if (rc)
        return rc;
    pl_store_sealed(s, sum->seal_key);
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
