/*
 * package.c - the hand-over package (plyledger/package.h): one airframe's
 * record exported to a file of its own, checked, and received into
 * another store.
 *
 * Rows travel between two SQLite connections, value by value, with the
 * ids they have: a row's hash and its link cover its id and its
 * references, so a row can only move as it is. They travel in the
 * ledger's order, which is the order they were first recorded in, so
 * every foreign key and every insert trigger meets the state it met then.
 * Which tables to copy comes from the schema itself: a table described
 * as a recorded table without a parent (plyledger/store_row.h) is chained
 * and copied by its links; an unchained table with a reference to a
 * chained one (a map's channels) is copied with the rows it refers to.
 */
#include "record/store_int.h"

#include "common/common_int.h"
#include "common/outfile_int.h"
#include "common/strbuf_int.h"
#include "plyledger/hash.h"
#include "plyledger/ledger.h"
#include "plyledger/outfile.h"
#include "plyledger/package.h"
#include "plyledger/sign.h"

#include <assert.h>
#include <errno.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/stat.h>
#include <unistd.h>

/* The first line of the manifest text the signature covers. */
#define MANIFEST_HEADER "plyledger-package-manifest 1\n"

/* The manifest's table; the checker's reference schema has it too. */
static const char manifest_ddl[] =
    "CREATE TABLE package_manifest (\n"
    "    name  TEXT PRIMARY KEY,\n"
    "    value TEXT NOT NULL\n"
    ") WITHOUT ROWID";

/* The names of the manifest besides rows.<table>. */
static const char *const manifest_names[] = {
    "format",          "format_version",     "schema_version",      "airframe.serial",
    "airframe.key",    "source.store_id",    "exported_at",         "exported_by",
    "seal_key",        "chain.airframe.seq", "chain.airframe.link", "chain.store.seq",
    "chain.store.link", "maps.count",        "maps.sha256",         "manifest_signature",
};
#define MANIFEST_NAMES (sizeof manifest_names / sizeof manifest_names[0])

#define IDENT_SIZE 64  /* a table's or column's name */
#define MAX_FKEYS 8

PL_EXPORT const char *pl_package_fault_name(pl_package_fault fault)
{
    static const char *const names[] = { "none", "file", "manifest", "record", "content" };
    return (unsigned)fault < sizeof names / sizeof names[0] ? names[fault] : NULL;
}

/* Count a fault; the first one is kept in words. */
static void fault(pl_package_result *r, pl_package_fault kind, const char *fmt, ...)
    PL_PRINTF(3, 4);
static void fault(pl_package_result *r, pl_package_fault kind, const char *fmt, ...)
{
    if (r->faults++ == 0) {
        r->fault = kind;
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(r->message, sizeof r->message, fmt, ap);
        va_end(ap);
    }
}

static int take_options(pl_package_options *o, const pl_package_options *opts, pl_err *err)
{
    pl_package_options d = PL_PACKAGE_OPTIONS_INIT;
    *o = d;
    if (!opts)
        return PL_OK;
    if (opts->version != PL_PACKAGE_OPTIONS_VERSION)
        return pl__err(err, PL_EINVAL, "package options: version %u is not %u", opts->version,
                       PL_PACKAGE_OPTIONS_VERSION);
    if (opts->sender_key && opts->sender_key[0] &&
        (strlen(opts->sender_key) != PL_SIGN_FINGERPRINT_SIZE - 1 ||
         strspn(opts->sender_key, "0123456789abcdef") != PL_SIGN_FINGERPRINT_SIZE - 1))
        return pl__err(err, PL_EINVAL,
                       "package options: sender key '%.40s' is not a key fingerprint (32 "
                       "lower-case hex digits)",
                       opts->sender_key);
    *o = *opts;
    return PL_OK;
}

static int progress(const pl_package_options *o, double fraction, pl_err *err, const char *what)
{
    if (o->progress && o->progress(o->userdata, fraction))
        return pl__err(err, PL_ECANCELED, "%s stopped", what);
    return PL_OK;
}

/* ---- SQLite on a connection of our own --------------------------------------------- */

static int db_fail(sqlite3 *db, pl_err *err, const char *label)
{
    const char *msg = sqlite3_errmsg(db);
    int code = pl_store__status(sqlite3_extended_errcode(db), msg);
    if (code == PL_EBUSY)
        return pl__err(err, code, "%s: another process held the file longer than the wait "
                       "allowed; nothing was written", label);
    return pl__err(err, code, "%s: %s", label, msg);
}

static int db_prepare(sqlite3 *db, sqlite3_stmt **st, const char *sql, pl_err *err,
                      const char *label)
{
    if (sqlite3_prepare_v2(db, sql, -1, st, NULL) != SQLITE_OK) {
        *st = NULL;
        return db_fail(db, err, label);
    }
    return PL_OK;
}

static int db_exec(sqlite3 *db, const char *sql, pl_err *err, const char *label)
{
    return sqlite3_exec(db, sql, NULL, NULL, NULL) == SQLITE_OK ? PL_OK
                                                                 : db_fail(db, err, label);
}

/* The integer the one-value statement `sql` gives with ?1 = arg (when it
 * has a parameter); *found 0 and *out 0 for no row. */
static int db_int(sqlite3 *db, const char *sql, int64_t arg, int64_t *out, int *found,
                  pl_err *err, const char *label)
{
    sqlite3_stmt *st;
    int rc = db_prepare(db, &st, sql, err, label);
    if (rc)
        return rc;
    if (sqlite3_bind_parameter_count(st) > 0)
        sqlite3_bind_int64(st, 1, arg);
    int r = sqlite3_step(st);
    *out = r == SQLITE_ROW ? sqlite3_column_int64(st, 0) : 0;
    if (found)
        *found = r == SQLITE_ROW;
    if (r != SQLITE_ROW && r != SQLITE_DONE)
        rc = db_fail(db, err, label);
    sqlite3_finalize(st);
    return rc;
}

/* A quoted SQL name; our schema's names hold no double quote, and the
 * package's names are compared with the schema's before any is used. */
static void append_ident(pl_strbuf *b, const char *name)
{
    pl_strbuf__printf(b, "\"%s\"", name);
}

static void to_hex(char *out, const unsigned char *p, size_t n)
{
    static const char digits[] = "0123456789abcdef";
    for (size_t i = 0; i < n; i++) {
        out[2 * i] = digits[p[i] >> 4];
        out[2 * i + 1] = digits[p[i] & 15];
    }
    out[2 * n] = '\0';
}

static int from_hex(unsigned char *out, const char *hex, size_t n)
{
    if (!hex || strlen(hex) != 2 * n)
        return -1;
    for (size_t i = 0; i < 2 * n; i++) {
        char c = hex[i];
        int v = c >= '0' && c <= '9' ? c - '0' : c >= 'a' && c <= 'f' ? c - 'a' + 10 : -1;
        if (v < 0)
            return -1;
        if (i % 2 == 0)
            out[i / 2] = (unsigned char)(v << 4);
        else
            out[i / 2] |= (unsigned char)v;
    }
    return 0;
}

/* ---- which tables travel, and how ------------------------------------------------- */

/* The recorded table of `name` that has links of its own (one without a
 * parent record), or -1. */
static int chained_table(const char *name)
{
    for (int t = 0; t < PL_TABLE_COUNT; t++)
        if (!pl_row__table((pl_table)t)->parent_column && name &&
            strcmp(pl_table_name((pl_table)t), name) == 0)
            return t;
    return -1;
}

/* The tables of the store's own bookkeeping, copied by their own rules. */
static int bookkeeping(const char *name)
{
    static const char *const names[] = { "store_info", "ledger", "ledger_seal", "seal_key",
                                         "package_manifest" };
    for (size_t i = 0; i < sizeof names / sizeof names[0]; i++)
        if (strcmp(names[i], name) == 0)
            return 1;
    return 0;
}

/* A reference from a column to another table. */
typedef struct fkey {
    int col;                 /* the column's index */
    char table[IDENT_SIZE];  /* the table it refers to */
    char to[IDENT_SIZE];     /* the column there ("" for its rowid) */
    sqlite3_stmt *sel;       /* source: the rows whose column is ?1 */
    sqlite3_stmt *exists;    /* target: does the row referred to exist? */
} fkey;

/* A table of the schema, with the statements that copy its rows. */
typedef struct tinfo {
    char name[IDENT_SIZE];
    int ncols;
    char (*cols)[IDENT_SIZE];
    int dependent;           /* unchained, with a reference to a chained table */
    int nfk;
    fkey fk[MAX_FKEYS];
    sqlite3_stmt *ins;       /* target: INSERT of every column */
    sqlite3_stmt *sel;       /* source: SELECT of every column ... */
    char sel_col[IDENT_SIZE]; /* ... WHERE this column = ?1 ("": every row) */
} tinfo;

/* Copying rows from one connection to another with the same schema. */
typedef struct copier {
    sqlite3 *from, *to;
    const char *from_name, *to_name;  /* for messages */
    tinfo *t;
    size_t nt;
    int64_t rows;                     /* rows inserted */
} copier;

static void copier_close(copier *c)
{
    for (size_t i = 0; i < c->nt; i++) {
        tinfo *t = &c->t[i];
        for (int k = 0; k < t->nfk; k++) {
            sqlite3_finalize(t->fk[k].sel);
            sqlite3_finalize(t->fk[k].exists);
        }
        sqlite3_finalize(t->ins);
        sqlite3_finalize(t->sel);
        free(t->cols);
    }
    free(c->t);
    c->t = NULL;
    c->nt = 0;
}

/* The columns and references of table t (its name set), from the target's
 * schema. */
static int describe_table(copier *c, tinfo *t, pl_err *err)
{
    sqlite3_stmt *st;
    int rc = db_prepare(c->to, &st, "SELECT name FROM pragma_table_info(?1) ORDER BY cid", err,
                        c->to_name);
    if (rc)
        return rc;
    sqlite3_bind_text(st, 1, t->name, -1, SQLITE_STATIC);
    int cap = 0, r;
    while (!rc && (r = sqlite3_step(st)) == SQLITE_ROW) {
        const char *col = (const char *)sqlite3_column_text(st, 0);
        if (t->ncols == cap) {
            int nc = cap ? 2 * cap : 16;
            char(*p)[IDENT_SIZE] = realloc(t->cols, (size_t)nc * sizeof *p);
            if (!p) {
                rc = pl__err(err, PL_ENOMEM, "%s: out of memory", c->to_name);
                break;
            }
            t->cols = p;
            cap = nc;
        }
        if (!col || strlen(col) >= IDENT_SIZE)
            rc = pl__err(err, PL_EFORMAT, "%s: table %s has a column without a usable name",
                         c->to_name, t->name);
        else
            snprintf(t->cols[t->ncols++], IDENT_SIZE, "%s", col);
    }
    if (!rc && r != SQLITE_DONE)
        rc = db_fail(c->to, err, c->to_name);
    sqlite3_finalize(st);
    if (rc)
        return rc;
    if ((rc = db_prepare(c->to, &st,
                         "SELECT \"from\", \"table\", \"to\" FROM pragma_foreign_key_list(?1)",
                         err, c->to_name)))
        return rc;
    sqlite3_bind_text(st, 1, t->name, -1, SQLITE_STATIC);
    int refers_to_chained = 0;
    while (!rc && (r = sqlite3_step(st)) == SQLITE_ROW) {
        const char *from = (const char *)sqlite3_column_text(st, 0);
        const char *table = (const char *)sqlite3_column_text(st, 1);
        const char *to = (const char *)sqlite3_column_text(st, 2);
        int col = -1;
        for (int i = 0; from && i < t->ncols; i++)
            if (strcmp(t->cols[i], from) == 0)
                col = i;
        if (col < 0 || !table || strlen(table) >= IDENT_SIZE || (to && strlen(to) >= IDENT_SIZE) ||
            t->nfk == MAX_FKEYS) {
            rc = pl__err(err, PL_EFORMAT, "%s: table %s has a reference this plyledger cannot "
                         "follow", c->to_name, t->name);
            break;
        }
        fkey *f = &t->fk[t->nfk++];
        memset(f, 0, sizeof *f);
        f->col = col;
        snprintf(f->table, sizeof f->table, "%s", table);
        snprintf(f->to, sizeof f->to, "%s", to ? to : "");
        refers_to_chained |= chained_table(table) >= 0;
    }
    if (!rc && r != SQLITE_DONE)
        rc = db_fail(c->to, err, c->to_name);
    sqlite3_finalize(st);
    t->dependent = refers_to_chained && chained_table(t->name) < 0 && !bookkeeping(t->name);
    return rc;
}

static int copier_open(copier *c, sqlite3 *from, const char *from_name, sqlite3 *to,
                       const char *to_name, pl_err *err)
{
    memset(c, 0, sizeof *c);
    c->from = from;
    c->to = to;
    c->from_name = from_name;
    c->to_name = to_name;
    sqlite3_stmt *st;
    int rc = db_prepare(to, &st,
                        "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE "
                        "'sqlite!_%' ESCAPE '!' AND name <> 'package_manifest' ORDER BY name",
                        err, to_name);
    if (rc)
        return rc;
    size_t cap = 0;
    int r;
    while (!rc && (r = sqlite3_step(st)) == SQLITE_ROW) {
        const char *name = (const char *)sqlite3_column_text(st, 0);
        if (c->nt == cap) {
            size_t nc = cap ? 2 * cap : 32;
            tinfo *p = realloc(c->t, nc * sizeof *p);
            if (!p) {
                rc = pl__err(err, PL_ENOMEM, "%s: out of memory", to_name);
                break;
            }
            c->t = p;
            cap = nc;
        }
        tinfo *t = &c->t[c->nt];
        memset(t, 0, sizeof *t);
        if (!name || strlen(name) >= IDENT_SIZE) {
            rc = pl__err(err, PL_EFORMAT, "%s: a table without a usable name", to_name);
            break;
        }
        snprintf(t->name, sizeof t->name, "%s", name);
        c->nt++;
        rc = describe_table(c, t, err);
    }
    if (!rc && r != SQLITE_DONE)
        rc = db_fail(to, err, to_name);
    sqlite3_finalize(st);
    if (rc)
        copier_close(c);
    return rc;
}

static tinfo *find_table(copier *c, const char *name)
{
    for (size_t i = 0; i < c->nt; i++)
        if (strcmp(c->t[i].name, name) == 0)
            return &c->t[i];
    return NULL;
}

/* "SELECT <every column> FROM <table>" and `tail`, prepared on the source. */
static int prepare_select(copier *c, const tinfo *t, const char *tail, sqlite3_stmt **st,
                          pl_err *err)
{
    pl_strbuf b = PL_STRBUF_INIT;
    pl_strbuf__append(&b, "SELECT ");
    for (int i = 0; i < t->ncols; i++) {
        if (i)
            pl_strbuf__append(&b, ", ");
        append_ident(&b, t->cols[i]);
    }
    pl_strbuf__append(&b, " FROM ");
    append_ident(&b, t->name);
    pl_strbuf__append(&b, tail);
    int rc = pl_strbuf__failed(&b) ? pl__err(err, PL_ENOMEM, "out of memory")
                                   : db_prepare(c->from, st, pl_strbuf__str(&b), err,
                                                c->from_name);
    pl_strbuf__release(&b);
    return rc;
}

/* Insert the row `sel` stands on into the target. */
static int insert_row(copier *c, tinfo *t, sqlite3_stmt *sel, pl_err *err, const char *label)
{
    if (!t->ins) {
        pl_strbuf b = PL_STRBUF_INIT;
        pl_strbuf__append(&b, "INSERT INTO ");
        append_ident(&b, t->name);
        pl_strbuf__append(&b, " (");
        for (int i = 0; i < t->ncols; i++) {
            if (i)
                pl_strbuf__append(&b, ", ");
            append_ident(&b, t->cols[i]);
        }
        pl_strbuf__append(&b, ") VALUES (");
        for (int i = 0; i < t->ncols; i++)
            pl_strbuf__printf(&b, "%s?%d", i ? ", " : "", i + 1);
        pl_strbuf__append(&b, ")");
        int rc = pl_strbuf__failed(&b) ? pl__err(err, PL_ENOMEM, "out of memory")
                                       : db_prepare(c->to, &t->ins, pl_strbuf__str(&b), err,
                                                    c->to_name);
        pl_strbuf__release(&b);
        if (rc)
            return rc;
    }
    for (int i = 0; i < t->ncols; i++)
        sqlite3_bind_value(t->ins, i + 1, sqlite3_column_value(sel, i));
    int r = sqlite3_step(t->ins);
    int rc = r == SQLITE_DONE ? PL_OK : db_fail(c->to, err, label);
    sqlite3_reset(t->ins);
    sqlite3_clear_bindings(t->ins);
    if (!rc)
        c->rows++;
    return rc;
}

/* Whether the row a reference of the source's current row leads to is in
 * the target. */
static int target_has(copier *c, fkey *f, sqlite3_value *v, int *has, pl_err *err)
{
    if (!f->exists) {
        char sql[256];
        snprintf(sql, sizeof sql, "SELECT 1 FROM \"%s\" WHERE \"%s\" = ?1 LIMIT 1", f->table,
                 f->to[0] ? f->to : "rowid");
        int rc = db_prepare(c->to, &f->exists, sql, err, c->to_name);
        if (rc)
            return rc;
    }
    sqlite3_bind_value(f->exists, 1, v);
    int r = sqlite3_step(f->exists);
    *has = r == SQLITE_ROW;
    int rc = r == SQLITE_ROW || r == SQLITE_DONE ? PL_OK : db_fail(c->to, err, c->to_name);
    sqlite3_reset(f->exists);
    return rc;
}

static int refers_to(const fkey *f, const char *table)
{
    return strcmp(f->table, table) == 0 && (!f->to[0] || strcmp(f->to, "id") == 0);
}

/*
 * After row `id` of chained table `parent` entered the target: the rows of
 * unchained tables that refer to it and whose every other reference leads
 * to a row the target holds (a map's channels). A row that refers to the
 * parent twice is taken by its first such reference only.
 */
static int copy_dependents(copier *c, const char *parent, pl_id id, pl_err *err,
                           const char *label)
{
    int rc = PL_OK;
    for (size_t k = 0; !rc && k < c->nt; k++) {
        tinfo *d = &c->t[k];
        if (!d->dependent)
            continue;
        for (int i = 0; !rc && i < d->nfk; i++) {
            fkey *f = &d->fk[i];
            if (!refers_to(f, parent))
                continue;
            if (!f->sel) {
                char tail[128];
                snprintf(tail, sizeof tail, " WHERE \"%s\" = ?1", d->cols[f->col]);
                if ((rc = prepare_select(c, d, tail, &f->sel, err)))
                    break;
            }
            sqlite3_bind_int64(f->sel, 1, id);
            int r;
            while (!rc && (r = sqlite3_step(f->sel)) == SQLITE_ROW) {
                int take = 1;
                for (int j = 0; !rc && take && j < d->nfk; j++) {
                    fkey *g = &d->fk[j];
                    sqlite3_value *v = sqlite3_column_value(f->sel, g->col);
                    if (j == i || sqlite3_value_type(v) == SQLITE_NULL)
                        continue;
                    if (refers_to(g, parent) && sqlite3_value_int64(v) == id) {
                        take = j > i;
                        continue;
                    }
                    rc = target_has(c, g, v, &take, err);
                }
                if (!rc && take)
                    rc = insert_row(c, d, f->sel, err, label);
            }
            if (!rc && r != SQLITE_DONE)
                rc = db_fail(c->from, err, c->from_name);
            sqlite3_reset(f->sel);
        }
    }
    return rc;
}

/* Copy the rows of `table` whose `col` is `value` (col NULL: every row)
 * with their dependent rows; *n gets how many rows of the table. */
static int copy_rows(copier *c, const char *table, const char *col, pl_id value, int64_t *n,
                     pl_err *err, const char *label)
{
    *n = 0;
    tinfo *t = find_table(c, table);
    if (!t)
        return pl__err(err, PL_EFORMAT, "%s: has no table %s", c->to_name, table);
    if (!t->sel || strcmp(t->sel_col, col ? col : "") != 0) {
        sqlite3_finalize(t->sel);
        t->sel = NULL;
        char tail[128] = "";
        if (col)
            snprintf(tail, sizeof tail, " WHERE \"%s\" = ?1", col);
        int rc = prepare_select(c, t, tail, &t->sel, err);
        if (rc)
            return rc;
        snprintf(t->sel_col, sizeof t->sel_col, "%s", col ? col : "");
    }
    if (col)
        sqlite3_bind_int64(t->sel, 1, value);
    int chained = chained_table(table) >= 0, rc = PL_OK, r;
    while (!rc && (r = sqlite3_step(t->sel)) == SQLITE_ROW) {
        rc = insert_row(c, t, t->sel, err, label);
        (*n)++;
        if (!rc && chained)
            rc = copy_dependents(c, table, value, err, label);
    }
    if (!rc && r != SQLITE_DONE)
        rc = db_fail(c->from, err, c->from_name);
    sqlite3_reset(t->sel);
    return rc;
}

/* ---- the manifest ------------------------------------------------------------------ */

/* The text the manifest's signature covers (see plyledger/package.h). */
static int manifest_text(sqlite3 *db, char **out, size_t *len, pl_err *err, const char *label)
{
    sqlite3_stmt *st;
    int rc = db_prepare(db, &st,
                        "SELECT name, value FROM package_manifest WHERE name <> "
                        "'manifest_signature' ORDER BY name COLLATE BINARY",
                        err, label);
    if (rc)
        return rc;
    pl_strbuf b = PL_STRBUF_INIT;
    pl_strbuf__append(&b, MANIFEST_HEADER);
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        pl_strbuf__append_n(&b, (const char *)sqlite3_column_text(st, 0),
                            (size_t)sqlite3_column_bytes(st, 0));
        pl_strbuf__append(&b, "=");
        pl_strbuf__append_n(&b, (const char *)sqlite3_column_text(st, 1),
                            (size_t)sqlite3_column_bytes(st, 1));
        pl_strbuf__append(&b, "\n");
    }
    if (r != SQLITE_DONE)
        rc = db_fail(db, err, label);
    sqlite3_finalize(st);
    *len = pl_strbuf__len(&b);
    *out = rc ? NULL : pl_strbuf__detach(&b);
    pl_strbuf__release(&b);
    if (!rc && !*out)
        rc = pl__err(err, PL_ENOMEM, "%s: out of memory for the manifest", label);
    return rc;
}

/* The SHA-256 (hex) of the lines "map <id> <sha256>\n", maps by id. */
static int maps_digest(sqlite3 *db, char hex[PL_SHA256_HEX_SIZE], int64_t *count, pl_err *err,
                       const char *label)
{
    sqlite3_stmt *st;
    int rc = db_prepare(db, &st, "SELECT id, sha256 FROM map ORDER BY id", err, label);
    if (rc)
        return rc;
    pl_sha256_ctx ctx;
    pl_sha256_init(&ctx);
    *count = 0;
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW) {
        char line[128];
        const unsigned char *sha = sqlite3_column_text(st, 1);
        int n = snprintf(line, sizeof line, "map %lld %.64s\n",
                         (long long)sqlite3_column_int64(st, 0), sha ? (const char *)sha : "");
        pl_sha256_update(&ctx, line, (size_t)n);
        (*count)++;
    }
    if (r != SQLITE_DONE)
        rc = db_fail(db, err, label);
    sqlite3_finalize(st);
    unsigned char d[PL_SHA256_SIZE];
    pl_sha256_final(&ctx, d);
    pl_sha256_hex(hex, d);
    return rc;
}

/* The last link of chain `chain` (0: the store's own): *seq 0 and link ""
 * when it is empty. */
static int chain_head(sqlite3 *db, pl_id chain, int64_t *seq, char link[PL_SHA256_HEX_SIZE],
                      pl_err *err, const char *label)
{
    sqlite3_stmt *st;
    int rc = db_prepare(db, &st,
                        "SELECT seq, link FROM ledger WHERE coalesce(chain, 0) = ?1 "
                        "ORDER BY seq DESC LIMIT 1",
                        err, label);
    if (rc)
        return rc;
    sqlite3_bind_int64(st, 1, chain);
    int r = sqlite3_step(st);
    *seq = 0;
    link[0] = '\0';
    if (r == SQLITE_ROW) {
        *seq = sqlite3_column_int64(st, 0);
        const unsigned char *l = sqlite3_column_text(st, 1);
        snprintf(link, PL_SHA256_HEX_SIZE, "%s", l ? (const char *)l : "");
    } else if (r != SQLITE_DONE) {
        rc = db_fail(db, err, label);
    }
    sqlite3_finalize(st);
    return rc;
}

/* The row count of every table but the manifest, each handed to fn. */
typedef int (*count_fn)(void *ud, const char *table, int64_t count, pl_err *err);

static int count_tables(sqlite3 *db, count_fn fn, void *ud, pl_err *err, const char *label)
{
    sqlite3_stmt *st;
    int rc = db_prepare(db, &st,
                        "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE "
                        "'sqlite!_%' ESCAPE '!' AND name <> 'package_manifest' ORDER BY name",
                        err, label);
    if (rc)
        return rc;
    int r;
    while (!rc && (r = sqlite3_step(st)) == SQLITE_ROW) {
        const char *name = (const char *)sqlite3_column_text(st, 0);
        char sql[IDENT_SIZE + 64];
        if (!name || strlen(name) >= IDENT_SIZE || strchr(name, '"')) {
            rc = pl__err(err, PL_EFORMAT, "%s: a table without a usable name", label);
            break;
        }
        snprintf(sql, sizeof sql, "SELECT count(*) FROM \"%s\"", name);
        int64_t n = 0;
        rc = db_int(db, sql, 0, &n, NULL, err, label);
        if (!rc)
            rc = fn(ud, name, n, err);
    }
    if (!rc && r != SQLITE_DONE)
        rc = db_fail(db, err, label);
    sqlite3_finalize(st);
    return rc;
}

typedef struct manifest_writer {
    sqlite3 *db;
    sqlite3_stmt *ins;
    const char *label;
} manifest_writer;

static int put(manifest_writer *w, const char *name, const char *value, pl_err *err)
{
    sqlite3_bind_text(w->ins, 1, name, -1, SQLITE_TRANSIENT);
    sqlite3_bind_text(w->ins, 2, value, -1, SQLITE_TRANSIENT);
    int rc = sqlite3_step(w->ins) == SQLITE_DONE ? PL_OK : db_fail(w->db, err, w->label);
    sqlite3_reset(w->ins);
    return rc;
}

static int put_int(manifest_writer *w, const char *name, int64_t v, pl_err *err)
{
    char buf[32];
    snprintf(buf, sizeof buf, "%lld", (long long)v);
    return put(w, name, buf, err);
}

static int put_count(void *ud, const char *table, int64_t count, pl_err *err)
{
    char name[IDENT_SIZE + 8];
    snprintf(name, sizeof name, "rows.%s", table);
    return put_int(ud, name, count, err);
}

/* The manifest of the package being written on `db`, signed with the
 * sending store's seal key. */
static int write_manifest(sqlite3 *db, pl_store *s, pl_id key, const char *serial,
                          const char *label, pl_err *err)
{
    manifest_writer w = { db, NULL, label };
    int rc = db_prepare(db, &w.ins, "INSERT INTO package_manifest (name, value) VALUES (?1, ?2)",
                        err, label);
    if (rc)
        return rc;
    char now[PL_DATE_SIZE], by[PL_NAME_SIZE], pub[PL_SHA256_HEX_SIZE], store_id[64] = "";
    pl_store__now(now);
    snprintf(by, sizeof by, "plyledger %s", pl_version());
    to_hex(pub, s->seal_public, PL_SIGN_PUBLIC_SIZE);
    sqlite3_stmt *st = NULL;
    if (!(rc = db_prepare(db, &st, "SELECT value FROM store_info WHERE name = 'store_id'", err,
                          label))) {
        if (sqlite3_step(st) == SQLITE_ROW && sqlite3_column_text(st, 0))
            snprintf(store_id, sizeof store_id, "%s", (const char *)sqlite3_column_text(st, 0));
        sqlite3_finalize(st);
    }
    int64_t af_seq = 0, st_seq = 0, nmaps = 0;
    char af_link[PL_SHA256_HEX_SIZE], st_link[PL_SHA256_HEX_SIZE], maps[PL_SHA256_HEX_SIZE];
    if (!rc)
        rc = chain_head(db, key, &af_seq, af_link, err, label);
    if (!rc)
        rc = chain_head(db, 0, &st_seq, st_link, err, label);
    if (!rc)
        rc = maps_digest(db, maps, &nmaps, err, label);
    if (!rc && !store_id[0])
        rc = pl__err(err, PL_EFORMAT, "%s: has no store id (store_info)", s->path);
    if (!rc)
        rc = put(&w, "format", "plyledger-package", err);
    if (!rc)
        rc = put_int(&w, "format_version", PL_PACKAGE_FORMAT_VERSION, err);
    if (!rc)
        rc = put_int(&w, "schema_version", PL_STORE_SCHEMA_VERSION, err);
    if (!rc)
        rc = put(&w, "airframe.serial", serial, err);
    if (!rc)
        rc = put_int(&w, "airframe.key", key, err);
    if (!rc)
        rc = put(&w, "source.store_id", store_id, err);
    if (!rc)
        rc = put(&w, "exported_at", now, err);
    if (!rc)
        rc = put(&w, "exported_by", by, err);
    if (!rc)
        rc = put(&w, "seal_key", pub, err);
    if (!rc)
        rc = put_int(&w, "chain.airframe.seq", af_seq, err);
    if (!rc)
        rc = put(&w, "chain.airframe.link", af_link, err);
    if (!rc)
        rc = put_int(&w, "chain.store.seq", st_seq, err);
    if (!rc)
        rc = put(&w, "chain.store.link", st_link, err);
    if (!rc)
        rc = put_int(&w, "maps.count", nmaps, err);
    if (!rc)
        rc = put(&w, "maps.sha256", maps, err);
    if (!rc)
        rc = count_tables(db, put_count, &w, err, label);
    char *text = NULL;
    size_t len = 0;
    if (!rc)
        rc = manifest_text(db, &text, &len, err, label);
    if (!rc) {
        unsigned char sig[PL_SIGN_SIZE];
        char hex[2 * PL_SIGN_SIZE + 1];
        pl_sign(sig, text, len, &s->seal_secret);
        to_hex(hex, sig, sizeof sig);
        rc = put(&w, "manifest_signature", hex, err);
    }
    free(text);
    sqlite3_finalize(w.ins);
    return rc;
}

/* ---- checking a package ------------------------------------------------------------ */

static uint32_t be32(const unsigned char *p)
{
    return (uint32_t)p[0] << 24 | (uint32_t)p[1] << 16 | (uint32_t)p[2] << 8 | (uint32_t)p[3];
}

static int side_file_exists(const char *path, const char *suffix)
{
    size_t n = strlen(path) + strlen(suffix) + 1;
    char *p = malloc(n);
    if (!p)
        return 0;
    snprintf(p, n, "%s%s", path, suffix);
    struct stat st;
    int there = lstat(p, &st) == 0;
    free(p);
    return there;
}

/* The file as a file: an SQLite database in rollback mode with the
 * package's application id, as long as its header says, of this schema,
 * with no journal beside it. */
static int check_file(const char *path, const char *name, int64_t size, pl_package_result *res,
                      pl_err *err)
{
    unsigned char h[100];
    FILE *f = fopen(path, "rb");
    if (!f)
        return pl__err(err, PL_EIO, "%s: cannot read: %s", name, strerror(errno));
    size_t got = fread(h, 1, sizeof h, f);
    fclose(f);
    if (got < sizeof h) {
        fault(res, PL_PACKAGE_FAULT_FILE, "the file is %lld bytes long: too short for an SQLite "
              "database (cut short, or not a package)", (long long)size);
        return PL_OK;
    }
    uint32_t app = be32(h + 68);
    if (memcmp(h, "SQLite format 3", 16) != 0) {
        fault(res, PL_PACKAGE_FAULT_FILE, "the file is not an SQLite database, so not a "
              "hand-over package");
        return PL_OK;
    }
    if (app == PL_STORE_APPLICATION_ID) {
        fault(res, PL_PACKAGE_FAULT_FILE, "the file is a plyledger store, not a hand-over "
              "package (plyledger package export makes one from a store)");
        return PL_OK;
    }
    if (app != PL_PACKAGE_APPLICATION_ID) {
        fault(res, PL_PACKAGE_FAULT_FILE, "the file is not a hand-over package (SQLite "
              "application_id 0x%08lx, not 0x%08lx)", (unsigned long)app,
              (unsigned long)PL_PACKAGE_APPLICATION_ID);
        return PL_OK;
    }
    if (h[18] != 1 || h[19] != 1) {
        fault(res, PL_PACKAGE_FAULT_FILE, "the file is in %s: a package is one file in "
              "rollback-journal mode (it was changed after export)",
              h[18] == 2 || h[19] == 2 ? "WAL mode" : "an unknown SQLite file format");
        return PL_OK;
    }
    int64_t page = (int64_t)h[16] << 8 | h[17];
    if (page == 1)
        page = 65536;
    if (page < 512 || (page & (page - 1))) {
        fault(res, PL_PACKAGE_FAULT_FILE, "the file's SQLite header is damaged (page size "
              "%lld)", (long long)page);
        return PL_OK;
    }
    int64_t pages = be32(h + 28);
    if (pages > 0 && be32(h + 24) == be32(h + 92) && size < pages * page) {
        fault(res, PL_PACKAGE_FAULT_FILE, "the file is cut short: %lld bytes of the %lld its "
              "header gives (a truncated copy)", (long long)size, (long long)(pages * page));
        return PL_OK;
    }
    if (size % page) {
        fault(res, PL_PACKAGE_FAULT_FILE, "the file is cut short: %lld bytes are not a whole "
              "number of its %lld-byte pages (a truncated copy)", (long long)size,
              (long long)page);
        return PL_OK;
    }
    int64_t uv = (int32_t)be32(h + 60);
    if (uv != PL_STORE_SCHEMA_VERSION) {
        fault(res, PL_PACKAGE_FAULT_FILE, "the package was made with store schema %lld; this "
              "plyledger (%s) reads packages of schema %d only (%s)", (long long)uv,
              pl_version(), PL_STORE_SCHEMA_VERSION,
              uv > PL_STORE_SCHEMA_VERSION ? "use a newer plyledger"
                                           : "export it again with this plyledger");
        return PL_OK;
    }
    if (side_file_exists(path, "-journal"))
        fault(res, PL_PACKAGE_FAULT_FILE, "a rollback journal lies beside the file (%s-journal): "
              "the package was changed, or copied while it was being written", name);
    else if (side_file_exists(path, "-wal"))
        fault(res, PL_PACKAGE_FAULT_FILE, "a write-ahead log lies beside the file (%s-wal): the "
              "package was changed after export", name);
    return PL_OK;
}

/* SQLite's own check of the file's structure. */
static int check_integrity(pl_store *p, pl_package_result *res, pl_err *err)
{
    sqlite3_stmt *st;
    if (sqlite3_prepare_v2(p->db, "PRAGMA integrity_check(1)", -1, &st, NULL) != SQLITE_OK) {
        fault(res, PL_PACKAGE_FAULT_FILE, "the file is damaged: %s", sqlite3_errmsg(p->db));
        return PL_OK;
    }
    int r = sqlite3_step(st), rc = PL_OK;
    const unsigned char *what = r == SQLITE_ROW ? sqlite3_column_text(st, 0) : NULL;
    if (r == SQLITE_ROW) {
        if (!what || strcmp((const char *)what, "ok") != 0)
            fault(res, PL_PACKAGE_FAULT_FILE, "the file is damaged: SQLite's integrity check "
                  "says: %.300s", what ? (const char *)what : "?");
    } else {
        int code = pl_store__status(sqlite3_extended_errcode(p->db), NULL);
        if (code == PL_ENOMEM || code == PL_EIO || code == PL_EBUSY)
            rc = db_fail(p->db, err, p->path);
        else
            fault(res, PL_PACKAGE_FAULT_FILE, "the file is damaged: %s", sqlite3_errmsg(p->db));
    }
    sqlite3_finalize(st);
    return rc;
}

/* The package's schema against the schema's own, made in memory by the
 * same migrations: every table, index, view and trigger, by its SQL. */
static int check_schema(pl_store *p, pl_package_result *res, pl_err *err)
{
    sqlite3 *ref = NULL;
    int rc = PL_OK;
    if (sqlite3_open_v2(":memory:", &ref, SQLITE_OPEN_READWRITE | SQLITE_OPEN_CREATE, NULL) !=
        SQLITE_OK) {
        sqlite3_close(ref);
        return pl__err(err, PL_ENOMEM, "out of memory for the schema's reference copy");
    }
    for (int i = 0; i < pl__migration_count && !rc; i++)
        if (sqlite3_exec(ref, pl__migrations[i].sql, NULL, NULL, NULL) != SQLITE_OK)
            rc = pl__err(err, PL_EDB, "the schema's reference copy: %s", sqlite3_errmsg(ref));
    if (!rc && sqlite3_exec(ref, manifest_ddl, NULL, NULL, NULL) != SQLITE_OK)
        rc = pl__err(err, PL_EDB, "the schema's reference copy: %s", sqlite3_errmsg(ref));
    static const char sql[] =
        "SELECT type, name, tbl_name, sql FROM sqlite_master ORDER BY type, name";
    sqlite3_stmt *a = NULL, *b = NULL;
    if (!rc && sqlite3_prepare_v2(ref, sql, -1, &a, NULL) != SQLITE_OK)
        rc = pl__err(err, PL_EDB, "the schema's reference copy: %s", sqlite3_errmsg(ref));
    if (!rc && sqlite3_prepare_v2(p->db, sql, -1, &b, NULL) != SQLITE_OK)
        fault(res, PL_PACKAGE_FAULT_FILE, "the file's schema cannot be read: %s",
              sqlite3_errmsg(p->db));
    int ra = a ? sqlite3_step(a) : SQLITE_DONE, rb = b ? sqlite3_step(b) : SQLITE_DONE;
    while (!rc && b && !res->faults && (ra == SQLITE_ROW || rb == SQLITE_ROW)) {
        int cmp;
        if (ra != SQLITE_ROW)
            cmp = 1;
        else if (rb != SQLITE_ROW)
            cmp = -1;
        else if ((cmp = strcmp((const char *)sqlite3_column_text(a, 0),
                               (const char *)sqlite3_column_text(b, 0))) == 0)
            cmp = strcmp((const char *)sqlite3_column_text(a, 1),
                         (const char *)sqlite3_column_text(b, 1));
        sqlite3_stmt *on = cmp > 0 ? b : a;
        const char *type = (const char *)sqlite3_column_text(on, 0);
        const char *name = (const char *)sqlite3_column_text(on, 1);
        if (cmp < 0) {
            fault(res, PL_PACKAGE_FAULT_FILE, "the package's schema is not plyledger's (schema "
                  "%d): its %s %.64s is missing", PL_STORE_SCHEMA_VERSION, type, name);
        } else if (cmp > 0) {
            fault(res, PL_PACKAGE_FAULT_FILE, "the package's schema is not plyledger's (schema "
                  "%d): it has a %s %.64s the schema has not (added after export)",
                  PL_STORE_SCHEMA_VERSION, type, name);
        } else {
            const unsigned char *ta = sqlite3_column_text(a, 2), *tb = sqlite3_column_text(b, 2);
            const unsigned char *sa = sqlite3_column_text(a, 3), *sb = sqlite3_column_text(b, 3);
            if (!ta || !tb || strcmp((const char *)ta, (const char *)tb) != 0 || !sa != !sb ||
                (sa && strcmp((const char *)sa, (const char *)sb) != 0))
                fault(res, PL_PACKAGE_FAULT_FILE, "the package's schema is not plyledger's "
                      "(schema %d): its %s %.64s differs from the schema's (changed after "
                      "export)", PL_STORE_SCHEMA_VERSION, type, name);
            ra = sqlite3_step(a);
            rb = sqlite3_step(b);
            continue;
        }
        break;
    }
    if (!rc && b && !res->faults && rb != SQLITE_DONE)
        fault(res, PL_PACKAGE_FAULT_FILE, "the file's schema cannot be read: %s",
              sqlite3_errmsg(p->db));
    sqlite3_finalize(a);
    sqlite3_finalize(b);
    sqlite3_close(ref);
    return rc;
}

/* The manifest as read: names in bytewise order and their values. */
typedef struct manifest {
    size_t n;
    char **name, **value;
} manifest;

static void manifest_free(manifest *m)
{
    for (size_t i = 0; i < m->n; i++) {
        free(m->name[i]);
        free(m->value[i]);
    }
    free(m->name);
    free(m->value);
    memset(m, 0, sizeof *m);
}

static const char *mget(const manifest *m, const char *name)
{
    for (size_t i = 0; i < m->n; i++)
        if (strcmp(m->name[i], name) == 0)
            return m->value[i];
    return NULL;
}

/* A whole number written in decimal digits alone, 0 to 2^62. */
static int parse_count(const char *s, int64_t *out)
{
    if (!s || !*s || strlen(s) > 18 || strspn(s, "0123456789") != strlen(s) ||
        (s[0] == '0' && s[1]))
        return -1;
    *out = strtoll(s, NULL, 10);
    return 0;
}

/* Read every row of the manifest, each name and value a text without line
 * breaks (and no '=' in a name). */
static int read_manifest(pl_store *p, manifest *m, pl_package_result *res, pl_err *err)
{
    sqlite3_stmt *st;
    if (sqlite3_prepare_v2(p->db,
                           "SELECT name, value, typeof(name), typeof(value) FROM "
                           "package_manifest ORDER BY name COLLATE BINARY",
                           -1, &st, NULL) != SQLITE_OK) {
        fault(res, PL_PACKAGE_FAULT_MANIFEST, "the package has no manifest: %s",
              sqlite3_errmsg(p->db));
        return PL_OK;
    }
    int rc = PL_OK, r;
    size_t cap = 0;
    while (!rc && !res->faults && (r = sqlite3_step(st)) == SQLITE_ROW) {
        const char *name = (const char *)sqlite3_column_text(st, 0);
        const char *value = (const char *)sqlite3_column_text(st, 1);
        size_t nlen = (size_t)sqlite3_column_bytes(st, 0), vlen = (size_t)sqlite3_column_bytes(st, 1);
        if (!name || !value || strcmp((const char *)sqlite3_column_text(st, 2), "text") != 0 ||
            strcmp((const char *)sqlite3_column_text(st, 3), "text") != 0 ||
            strlen(name) != nlen || strlen(value) != vlen) {
            fault(res, PL_PACKAGE_FAULT_MANIFEST, "the manifest holds a row that is not a "
                  "name and a text value (%.64s)", name ? name : "?");
            break;
        }
        if (!nlen || strpbrk(name, "=\n\r") || strpbrk(value, "\n\r")) {
            fault(res, PL_PACKAGE_FAULT_MANIFEST, "the manifest's row %.64s holds a line break "
                  "or an '=' where none may be", name);
            break;
        }
        if (m->n == cap) {
            size_t nc = cap ? 2 * cap : 64;
            char **a = realloc(m->name, nc * sizeof *a);
            if (a)
                m->name = a;
            char **b = a ? realloc(m->value, nc * sizeof *b) : NULL;
            if (b)
                m->value = b;
            if (!a || !b) {
                rc = pl__err(err, PL_ENOMEM, "out of memory for the manifest");
                break;
            }
            cap = nc;
        }
        m->name[m->n] = pl__strdup(name);
        m->value[m->n] = pl__strdup(value);
        if (!m->name[m->n] || !m->value[m->n]) {
            free(m->name[m->n]);
            free(m->value[m->n]);
            rc = pl__err(err, PL_ENOMEM, "out of memory for the manifest");
            break;
        }
        m->n++;
    }
    if (!rc && !res->faults && r != SQLITE_DONE)
        fault(res, PL_PACKAGE_FAULT_MANIFEST, "the manifest cannot be read: %s",
              sqlite3_errmsg(p->db));
    sqlite3_finalize(st);
    return rc;
}

/* Every name the manifest must hold, nothing else, its format, the fields
 * it gives, and its signature by the package's own seal key. */
static int check_manifest(pl_store *p, const manifest *m, const pl_package_options *o,
                          pl_package_result *res, pl_err *err)
{
    for (size_t i = 0; i < MANIFEST_NAMES; i++)
        if (!mget(m, manifest_names[i])) {
            fault(res, PL_PACKAGE_FAULT_MANIFEST, "the manifest has no %s", manifest_names[i]);
            return PL_OK;
        }
    for (size_t i = 0; i < m->n; i++) {
        int known = strncmp(m->name[i], "rows.", 5) == 0 && m->name[i][5];
        for (size_t k = 0; !known && k < MANIFEST_NAMES; k++)
            known = strcmp(m->name[i], manifest_names[k]) == 0;
        if (!known) {
            fault(res, PL_PACKAGE_FAULT_MANIFEST, "the manifest holds a name this format has "
                  "not: %.64s", m->name[i]);
            return PL_OK;
        }
    }
    const char *format = mget(m, "format"), *version = mget(m, "format_version");
    if (strcmp(format, "plyledger-package") != 0) {
        fault(res, PL_PACKAGE_FAULT_MANIFEST, "the manifest's format is \"%.64s\", not "
              "\"plyledger-package\"", format);
        return PL_OK;
    }
    int64_t v = 0, key = 0;
    if (parse_count(version, &v) || v != PL_PACKAGE_FORMAT_VERSION) {
        fault(res, PL_PACKAGE_FAULT_MANIFEST, "the manifest's format_version is \"%.32s\"; this "
              "plyledger reads version %d", version, PL_PACKAGE_FORMAT_VERSION);
        return PL_OK;
    }
    const char *serial = mget(m, "airframe.serial"), *store = mget(m, "source.store_id");
    const char *at = mget(m, "exported_at"), *by = mget(m, "exported_by");
    if (parse_count(mget(m, "airframe.key"), &key) || key < 1 ||
        pl_key_check(serial, "airframe.serial", NULL) != PL_OK ||
        strlen(serial) >= sizeof res->serial || !store[0] ||
        strlen(store) >= sizeof res->source_store || strlen(at) >= sizeof res->exported_at ||
        strlen(by) >= sizeof res->exported_by) {
        fault(res, PL_PACKAGE_FAULT_MANIFEST, "the manifest's airframe.key, airframe.serial, "
              "source.store_id, exported_at or exported_by is not what it should be");
        return PL_OK;
    }
    snprintf(res->serial, sizeof res->serial, "%s", serial);
    res->airframe_key = key;
    snprintf(res->source_store, sizeof res->source_store, "%s", store);
    snprintf(res->exported_at, sizeof res->exported_at, "%s", at);
    snprintf(res->exported_by, sizeof res->exported_by, "%s", by);
    unsigned char pub[PL_SIGN_PUBLIC_SIZE], sig[PL_SIGN_SIZE];
    if (from_hex(pub, mget(m, "seal_key"), sizeof pub)) {
        fault(res, PL_PACKAGE_FAULT_MANIFEST, "the manifest's seal_key is not 64 lower-case hex "
              "digits");
        return PL_OK;
    }
    pl_sign_fingerprint(res->seal_key, pub);
    char own[PL_SIGN_FINGERPRINT_SIZE];
    if (!pl_store_sealed(p, own)) {
        fault(res, PL_PACKAGE_FAULT_MANIFEST, "the package holds no seal key of its own: a "
              "package is sealed by the store that made it");
        return PL_OK;
    }
    if (memcmp(pub, p->seal_public, sizeof pub) != 0) {
        fault(res, PL_PACKAGE_FAULT_MANIFEST, "the manifest names seal key %s, but the package "
              "is sealed with seal key %s", res->seal_key, own);
        return PL_OK;
    }
    if (from_hex(sig, mget(m, "manifest_signature"), sizeof sig)) {
        fault(res, PL_PACKAGE_FAULT_MANIFEST, "the manifest's signature is not 128 lower-case "
              "hex digits");
        return PL_OK;
    }
    char *text = NULL;
    size_t len = 0;
    int rc = manifest_text(p->db, &text, &len, err, p->path);
    if (rc)
        return rc;
    int ok = pl_sign_check(sig, text, len, pub);
    free(text);
    if (!ok) {
        fault(res, PL_PACKAGE_FAULT_MANIFEST, "the manifest's signature by seal key %s does not "
              "hold: the manifest was changed after export", res->seal_key);
        return PL_OK;
    }
    if (o->sender_key && o->sender_key[0] && strcmp(o->sender_key, res->seal_key) != 0)
        fault(res, PL_PACKAGE_FAULT_MANIFEST, "the package is sealed with seal key %s, not with "
              "%s as its sender said: it comes from another store", res->seal_key,
              o->sender_key);
    return PL_OK;
}

/* A count of the manifest against the table's: the first that differs. */
typedef struct count_check {
    const manifest *m;
    pl_package_result *res;
    size_t tables;     /* tables counted */
} count_check;

static int check_count(void *ud, const char *table, int64_t count, pl_err *err)
{
    (void)err;
    count_check *cc = ud;
    char name[IDENT_SIZE + 8];
    snprintf(name, sizeof name, "rows.%s", table);
    const char *v = mget(cc->m, name);
    int64_t want = 0;
    cc->tables++;
    cc->res->rows += count;
    if (cc->res->faults)
        return PL_OK;
    if (!v || parse_count(v, &want))
        fault(cc->res, PL_PACKAGE_FAULT_CONTENT, "the manifest gives no row count of table %s "
              "(a table filled after export?)", table);
    else if (want != count)
        fault(cc->res, PL_PACKAGE_FAULT_CONTENT, "table %s holds %lld rows, but the manifest "
              "says %lld: rows were %s after export", table, (long long)count, (long long)want,
              count < want ? "removed" : "added");
    return PL_OK;
}

/* One chain's head against the manifest's. */
static int check_head(pl_store *p, const manifest *m, pl_id chain, const char *prefix,
                      const char *words, int64_t *links, pl_package_result *res, pl_err *err)
{
    char n_seq[40], n_link[40], link[PL_SHA256_HEX_SIZE];
    snprintf(n_seq, sizeof n_seq, "%s.seq", prefix);
    snprintf(n_link, sizeof n_link, "%s.link", prefix);
    int64_t seq = 0, want = 0;
    int rc = chain_head(p->db, chain, &seq, link, err, p->path);
    if (rc)
        return rc;
    *links = seq;
    if (parse_count(mget(m, n_seq), &want))
        fault(res, PL_PACKAGE_FAULT_MANIFEST, "the manifest's %s is not a whole number", n_seq);
    else if (seq < want)
        fault(res, PL_PACKAGE_FAULT_CONTENT, "%s ends at link %lld, but the manifest says "
              "%lld: links were removed after export (the package was cut short)", words,
              (long long)seq, (long long)want);
    else if (seq > want)
        fault(res, PL_PACKAGE_FAULT_CONTENT, "%s runs to link %lld, but the manifest says "
              "%lld: links were added after export", words, (long long)seq, (long long)want);
    else if (strcmp(link, mget(m, n_link)) != 0)
        fault(res, PL_PACKAGE_FAULT_CONTENT, "%s: link %lld is not the one the manifest names: "
              "the chain was rewritten after export", words, (long long)seq);
    return PL_OK;
}

/* What the package holds against what its manifest says. */
static int check_content(pl_store *p, const manifest *m, pl_package_result *res, pl_err *err)
{
    int64_t v = 0;
    if (parse_count(mget(m, "schema_version"), &v) || v != PL_STORE_SCHEMA_VERSION) {
        fault(res, PL_PACKAGE_FAULT_CONTENT, "the manifest's schema_version %.16s is not the "
              "file's (%d)", mget(m, "schema_version"), PL_STORE_SCHEMA_VERSION);
        return PL_OK;
    }
    sqlite3_stmt *st;
    int rc = db_prepare(p->db, &st, "SELECT DISTINCT coalesce(chain, 0) FROM ledger ORDER BY 1",
                        err, p->path);
    if (rc)
        return rc;
    int r;
    while ((r = sqlite3_step(st)) == SQLITE_ROW && !res->faults) {
        pl_id chain = sqlite3_column_int64(st, 0);
        if (chain && chain != res->airframe_key)
            fault(res, PL_PACKAGE_FAULT_CONTENT, "the package holds links of another chain "
                  "(airframe key %lld) besides airframe %s's and the store's own",
                  (long long)chain, res->serial);
    }
    if (r != SQLITE_ROW && r != SQLITE_DONE)
        rc = db_fail(p->db, err, p->path);
    sqlite3_finalize(st);
    if (rc || res->faults)
        return rc;
    if ((rc = db_prepare(p->db, &st, "SELECT serial FROM airframe_current WHERE stable_key = ?1",
                         err, p->path)))
        return rc;
    sqlite3_bind_int64(st, 1, res->airframe_key);
    r = sqlite3_step(st);
    if (r == SQLITE_ROW) {
        const char *serial = (const char *)sqlite3_column_text(st, 0);
        if (!serial || strcmp(serial, res->serial) != 0)
            fault(res, PL_PACKAGE_FAULT_CONTENT, "the package's airframe is %.64s, but the "
                  "manifest says %s", serial ? serial : "?", res->serial);
    } else if (r == SQLITE_DONE) {
        fault(res, PL_PACKAGE_FAULT_CONTENT, "the package does not hold airframe %s (key %lld), "
              "which its manifest names", res->serial, (long long)res->airframe_key);
    } else {
        rc = db_fail(p->db, err, p->path);
    }
    sqlite3_finalize(st);
    if (rc || res->faults)
        return rc;
    char words[PL_NAME_SIZE + 32];
    snprintf(words, sizeof words, "airframe %s's chain", res->serial);
    if ((rc = check_head(p, m, res->airframe_key, "chain.airframe", words, &res->airframe_links,
                         res, err)))
        return rc;
    if (!res->faults && (rc = check_head(p, m, 0, "chain.store",
                                         "the store's own chain (criteria sets, people)",
                                         &res->store_links, res, err)))
        return rc;
    count_check cc = { m, res, 0 };
    if ((rc = count_tables(p->db, check_count, &cc, err, p->path)))
        return rc;
    size_t counts = 0;
    for (size_t i = 0; i < m->n; i++)
        counts += strncmp(m->name[i], "rows.", 5) == 0;
    if (!res->faults && counts != cc.tables)
        fault(res, PL_PACKAGE_FAULT_CONTENT, "the manifest counts the rows of %lu tables, the "
              "package has %lu", (unsigned long)counts, (unsigned long)cc.tables);
    char digest[PL_SHA256_HEX_SIZE];
    int64_t maps = 0, want = 0;
    if ((rc = maps_digest(p->db, digest, &maps, err, p->path)))
        return rc;
    res->maps = maps;
    if (!res->faults && (parse_count(mget(m, "maps.count"), &want) || want != maps))
        fault(res, PL_PACKAGE_FAULT_CONTENT, "the package holds %lld maps, but the manifest "
              "says %.20s", (long long)maps, mget(m, "maps.count"));
    else if (!res->faults && strcmp(digest, mget(m, "maps.sha256")) != 0)
        fault(res, PL_PACKAGE_FAULT_CONTENT, "the maps' digest is not the manifest's: a map's "
              "recorded SHA-256 was changed after export");
    int64_t n = 0;
    if ((rc = db_int(p->db, "SELECT count(*) FROM ledger_seal", 0, &n, NULL, err, p->path)))
        return rc;
    res->seals = n;
    if ((rc = db_int(p->db, "SELECT count(*) FROM seal_key", 0, &n, NULL, err, p->path)))
        return rc;
    res->seal_keys = n;
    return PL_OK;
}

typedef struct span {
    const pl_package_options *o;
    double p0, p1;
} span;

static int span_progress(void *ud, double f)
{
    const span *sp = ud;
    return sp->o->progress(sp->o->userdata, sp->p0 + f * (sp->p1 - sp->p0));
}

/*
 * Check the package at `path` (`name` in messages), the verify's progress
 * mapped onto p0..p1 of the caller's. With `keep` not NULL, a sound
 * package stays open there (read-only) for the caller.
 */
static int check_package(const char *path, const char *name, const pl_package_options *o,
                         double p0, double p1, pl_package_result *res, pl_store **keep,
                         pl_err *err)
{
    if (keep)
        *keep = NULL;
    struct stat sb;
    if (stat(path, &sb) != 0) {
        if (errno == ENOENT || errno == ENOTDIR)
            return pl__err(err, PL_ENOTFOUND, "%s: no such file", name);
        return pl__err(err, PL_EIO, "%s: cannot read: %s", name, strerror(errno));
    }
    if (!S_ISREG(sb.st_mode)) {
        fault(res, PL_PACKAGE_FAULT_FILE, "%s is not a regular file", name);
        return PL_OK;
    }
    res->bytes = (int64_t)sb.st_size;
    int rc = check_file(path, name, (int64_t)sb.st_size, res, err);
    if (rc || res->faults)
        return rc;
    pl_store *p = NULL;
    pl_err e = { 0 };
    rc = pl_store_open(&p, path, PL_STORE_READONLY, &e);
    if (rc == PL_ENOMEM)
        return pl__err(err, rc, "%s", e.msg);
    if (rc) {
        fault(res, PL_PACKAGE_FAULT_FILE, "the file cannot be read as a package: %s", e.msg);
        return PL_OK;
    }
    manifest m = { 0 };
    rc = check_integrity(p, res, err);
    if (!rc && !res->faults)
        rc = check_schema(p, res, err);
    if (!rc && !res->faults)
        rc = read_manifest(p, &m, res, err);
    if (!rc && !res->faults)
        rc = check_manifest(p, &m, o, res, err);
    if (!rc && !res->faults) {
        pl_verify_result vr;
        pl_verify_options vo = PL_VERIFY_OPTIONS_INIT;
        span sp = { o, p0, p1 };
        if (o->progress) {
            vo.progress = span_progress;
            vo.userdata = &sp;
        }
        rc = pl_store_verify(p, &vr, &vo, err);
        if (!rc && vr.faults) {
            res->faults = vr.faults;
            res->fault = PL_PACKAGE_FAULT_RECORD;
            res->record_fault = vr.first;
            snprintf(res->message, sizeof res->message, "%s", vr.message);
        }
    }
    if (!rc && !res->faults)
        rc = check_content(p, &m, res, err);
    manifest_free(&m);
    if (!rc && !res->faults && keep)
        *keep = p;
    else
        pl_store_close(p);
    return rc;
}

PL_EXPORT int pl_package_check(const char *path, const pl_package_options *opts,
                               pl_package_result *res, pl_err *err)
{
    assert(path && res);
    memset(res, 0, sizeof *res);
    pl_package_options o;
    int rc = take_options(&o, opts, err);
    if (!rc)
        rc = check_package(path, path, &o, 0, 1, res, NULL, err);
    return rc;
}

/* ---- export -------------------------------------------------------------------------- */

/* Refuse to replace a plyledger store with a package, whichever store. */
static int refuse_store_target(const char *path, pl_err *err)
{
    struct stat sb;
    if (stat(path, &sb) != 0 || !S_ISREG(sb.st_mode))
        return PL_OK;
    unsigned char h[100];
    FILE *f = fopen(path, "rb");
    if (!f)
        return PL_OK;
    size_t got = fread(h, 1, sizeof h, f);
    fclose(f);
    if (got == sizeof h && memcmp(h, "SQLite format 3", 16) == 0 &&
        be32(h + 68) == PL_STORE_APPLICATION_ID)
        return pl__err(err, PL_EREFUSED, "%s: is a plyledger store; a package never replaces "
                       "one: give another file name", path);
    return PL_OK;
}

/* Copy ledger row `lid` of the store into the package with its seal, the
 * seal's key first when the package has it not yet. */
static int copy_link(copier *c, pl_store *s, pl_id lid, pl_err *err, const char *label)
{
    int64_t n = 0, key = 0, there = 0;
    int found = 0, has = 0;
    int rc = copy_rows(c, "ledger", "id", lid, &n, err, label);
    if (!rc)
        rc = db_int(s->db, "SELECT key_id FROM ledger_seal WHERE ledger_id = ?1", lid, &key,
                    &found, err, label);
    if (!rc && !found)
        return pl__err(err, PL_EREFUSED, "%s carries no seal: run plyledger verify on %s",
                       label, s->path);
    if (!rc)
        rc = db_int(c->to, "SELECT 1 FROM seal_key WHERE id = ?1", key, &there, &has, err,
                    c->to_name);
    if (!rc && !has)
        rc = copy_rows(c, "seal_key", "id", key, &n, err, label);
    if (!rc)
        rc = copy_rows(c, "ledger_seal", "ledger_id", lid, &n, err, label);
    return rc;
}

/* Fill the package at `tmp` with the record of airframe `key`: schema,
 * rows in the ledger's order, store_info, manifest; one transaction. */
static int build(pl_store *s, pl_id key, const char *serial, const char *tmp, const char *name,
                 const pl_package_options *o, pl_err *err)
{
    sqlite3 *db = NULL;
    if (sqlite3_open_v2(tmp, &db, SQLITE_OPEN_READWRITE, NULL) != SQLITE_OK) {
        int rc = pl__err(err, PL_EIO, "%s: cannot write: %s", name,
                         db ? sqlite3_errmsg(db) : "out of memory");
        sqlite3_close(db);
        return rc;
    }
    sqlite3_extended_result_codes(db, 1);
    char sql[96];
    snprintf(sql, sizeof sql, "PRAGMA application_id = %d", PL_PACKAGE_APPLICATION_ID);
    int rc = db_exec(db, "PRAGMA journal_mode = DELETE", err, name);
    if (!rc)
        rc = db_exec(db, "PRAGMA foreign_keys = ON", err, name);
    if (!rc)
        rc = db_exec(db, "BEGIN IMMEDIATE", err, name);
    if (!rc)
        rc = db_exec(db, sql, err, name);
    for (int i = 0; !rc && i < pl__migration_count; i++)
        if (sqlite3_exec(db, pl__migrations[i].sql, NULL, NULL, NULL) != SQLITE_OK)
            rc = pl__err(err, PL_EDB, "%s: migration %s failed: %s", name,
                         pl__migrations[i].name, sqlite3_errmsg(db));
    snprintf(sql, sizeof sql, "PRAGMA user_version = %d", PL_STORE_SCHEMA_VERSION);
    if (!rc)
        rc = db_exec(db, sql, err, name);
    /* one read transaction of the store: the record does not change under
     * the copy (inside a caller's transaction, that one) */
    int owned = !rc && sqlite3_get_autocommit(s->db);
    if (owned && (rc = pl_store__exec(s, "BEGIN", err)))
        owned = 0;
    copier c;
    memset(&c, 0, sizeof c);
    if (!rc)
        rc = copier_open(&c, s->db, s->path, db, name, err);
    int64_t total = 0, done = 0, n = 0;
    if (!rc)
        rc = db_int(s->db, "SELECT count(*) FROM ledger WHERE chain IS NULL OR chain = ?1", key,
                    &total, NULL, err, s->path);
    /* the store's own key first: every link it sealed needs it */
    if (!rc)
        rc = copy_rows(&c, "seal_key", "id", s->seal_key_id, &n, err, s->path);
    sqlite3_stmt *st = NULL;
    if (!rc)
        rc = pl_store__prepare(s, &st,
                               "SELECT id, table_name, row_id, seq, coalesce(chain, 0) FROM ledger "
                               "WHERE chain IS NULL OR chain = ?1 ORDER BY id",
                               err);
    if (st)
        sqlite3_bind_int64(st, 1, key);
    int r = SQLITE_DONE;
    while (!rc && (r = sqlite3_step(st)) == SQLITE_ROW) {
        const char *table = (const char *)sqlite3_column_text(st, 1);
        pl_id row = sqlite3_column_int64(st, 2);
        char label[STORE_LABEL_SIZE];
        snprintf(label, sizeof label, "%s: %s link %lld (%s %lld)", s->path,
                 sqlite3_column_int64(st, 4) ? serial : "the store's own chain's",
                 (long long)sqlite3_column_int64(st, 3), table ? table : "?", (long long)row);
        if (chained_table(table) < 0) {
            rc = pl__err(err, PL_EREFUSED, "%s names a table that holds no recorded rows: run "
                         "plyledger verify", label);
            break;
        }
        rc = copy_rows(&c, table, "id", row, &n, err, label);
        if (!rc && n != 1)
            rc = pl__err(err, PL_EREFUSED, "%s: the row is gone: run plyledger verify", label);
        if (!rc)
            rc = copy_link(&c, s, sqlite3_column_int64(st, 0), err, label);
        done++;
        if (!rc && (done % 64 == 0 || done == total))
            rc = progress(o, 0.5 * (double)done / (double)(total ? total : 1), err,
                          "package export");
    }
    if (!rc && r != SQLITE_DONE)
        rc = pl_store__fail(s, err, NULL);
    sqlite3_finalize(st);
    if (!rc)
        rc = copy_rows(&c, "store_info", NULL, 0, &n, err, s->path);
    copier_close(&c);
    if (!rc)
        rc = db_exec(db, manifest_ddl, err, name);
    if (!rc)
        rc = write_manifest(db, s, key, serial, name, err);
    if (owned)
        sqlite3_exec(s->db, "COMMIT", NULL, NULL, NULL);
    if (!rc)
        rc = db_exec(db, "COMMIT", err, name);
    if (rc && !sqlite3_get_autocommit(db))
        sqlite3_exec(db, "ROLLBACK", NULL, NULL, NULL);
    if (sqlite3_close(db) != SQLITE_OK && !rc)
        rc = pl__err(err, PL_EIO, "%s: cannot close the package", name);
    return rc;
}

PL_EXPORT int pl_package_export(pl_store *s, const char *serial, const char *path,
                                const pl_package_options *opts, pl_package_result *res,
                                pl_err *err)
{
    assert(s && serial && path && res);
    memset(res, 0, sizeof *res);
    pl_package_options o;
    int rc = take_options(&o, opts, err);
    if (rc)
        return rc;
    o.sender_key = NULL;
    char fp[PL_SIGN_FINGERPRINT_SIZE];
    if (!pl_store_sealed(s, fp))
        return pl__err(err, PL_EREFUSED, "%s: the store is not sealed: a hand-over package is "
                       "signed with the sending store's seal key (seal the store first: "
                       "plyledger seal)", s->path);
    if (!s->has_seal_secret)
        return pl__err(err, PL_EREFUSED, "%s: exporting a package needs the store's seal key "
                       "(key file of seal key %s): its manifest is signed with it", s->path, fp);
    pl_id key = 0;
    char label[STORE_LABEL_SIZE], stored[PL_NAME_SIZE] = "";
    snprintf(label, sizeof label, "%s: package of airframe %.64s", s->path, serial);
    rc = pl_store__airframe_key(s, serial, &key, NULL, err, label);
    sqlite3_stmt *st = NULL;
    if (!rc)
        rc = pl_store__prepare(s, &st, "SELECT serial FROM airframe_current WHERE stable_key = ?1",
                               err);
    if (!rc) {
        sqlite3_bind_int64(st, 1, key);
        if (sqlite3_step(st) == SQLITE_ROW)
            pl_store__col_text(st, 0, stored, sizeof stored);
        else
            rc = pl_store__fail(s, err, label);
        sqlite3_finalize(st);
    }
    if (!rc)
        rc = pl_outfile_guard(path, s->path, err);
    if (!rc)
        rc = refuse_store_target(path, err);
    pl_outfile *of = NULL;
    if (!rc)
        rc = pl_outfile_open(&of, path, err);
    if (rc)
        return rc;
    const char *tmp = pl_outfile__temp_path(of);
    if (!tmp) {
        pl_outfile_abort(of);
        return pl__err(err, PL_EREFUSED, "%s: a package is a file of its own, not a device or "
                       "a pipe: give a file name", path);
    }
    rc = build(s, key, stored, tmp, path, &o, err);
    if (!rc)
        rc = check_package(tmp, path, &o, 0.5, 1, res, NULL, err);
    if (!rc && res->faults)
        rc = pl__err(err, PL_EREFUSED, "%s: the package of airframe %s did not check, so it "
                     "was not written: %s", path, stored, res->message);
    if (rc) {
        pl_outfile_abort(of);
        return rc;
    }
    return pl_outfile_commit(of, err);
}

/* ---- import -------------------------------------------------------------------------- */

/* A read transaction on the package on a connection of its own, held from
 * before its check to the end of the import: no SQLite writer changes the
 * file in between. NULL when the file cannot be opened (its check names
 * why). */
static sqlite3 *hold_package(const char *path)
{
    sqlite3 *db = NULL;
    if (sqlite3_open_v2(path, &db, SQLITE_OPEN_READONLY, NULL) != SQLITE_OK ||
        sqlite3_exec(db, "BEGIN; SELECT count(*) FROM sqlite_master", NULL, NULL, NULL) !=
            SQLITE_OK) {
        sqlite3_close(db);
        return NULL;
    }
    return db;
}

static void release_package(sqlite3 *db)
{
    if (db) {
        sqlite3_exec(db, "ROLLBACK", NULL, NULL, NULL);
        sqlite3_close(db);
    }
}

/* A seal key of the package and the receiving store's row for it. */
typedef struct key_map {
    pl_id chain;
    unsigned char pub[PL_SIGN_PUBLIC_SIZE];
    pl_id id;
} key_map;

typedef struct receiver {
    pl_store *s;               /* the receiving store */
    pl_store *p;               /* the package, read-only */
    const char *path;          /* the package, for messages */
    pl_package_result *res;
    pl_err *err;
    key_map *keys;
    size_t nkeys;
} receiver;

/* "airframe CR7-0107" or "the store's own chain (criteria sets, people)". */
static void chain_words(const receiver *rv, pl_id chain, char *out, size_t cap)
{
    if (chain)
        snprintf(out, cap, "airframe %s", rv->res->serial);
    else
        snprintf(out, cap, "the store's own chain (criteria sets, people)");
}

/*
 * The receiving store's chain `chain` against the package's, link by
 * link: *have the links both hold (refused when one differs), *more the
 * package's links beyond the store's.
 */
static int compare_chain(receiver *rv, pl_id chain, int64_t *have, int64_t *more)
{
    static const char sql[] =
        "SELECT seq, table_name, row_id, encoding, row_sha256, link FROM ledger "
        "WHERE coalesce(chain, 0) = ?1 ORDER BY seq";
    sqlite3_stmt *a = NULL, *b = NULL;
    int rc = pl_store__prepare(rv->s, &a, sql, rv->err);
    if (!rc)
        rc = db_prepare(rv->p->db, &b, sql, rv->err, rv->path);
    if (rc) {
        sqlite3_finalize(a);
        return rc;
    }
    sqlite3_bind_int64(a, 1, chain);
    sqlite3_bind_int64(b, 1, chain);
    *have = *more = 0;
    int ra, rb = SQLITE_DONE;
    while ((ra = sqlite3_step(a)) == SQLITE_ROW && (rb = sqlite3_step(b)) == SQLITE_ROW) {
        const char *ta = (const char *)sqlite3_column_text(a, 1);
        const char *tb = (const char *)sqlite3_column_text(b, 1);
        const char *ha = (const char *)sqlite3_column_text(a, 4);
        const char *hb = (const char *)sqlite3_column_text(b, 4);
        const char *la = (const char *)sqlite3_column_text(a, 5);
        const char *lb = (const char *)sqlite3_column_text(b, 5);
        int same_row = ta && tb && strcmp(ta, tb) == 0 &&
                       sqlite3_column_int64(a, 2) == sqlite3_column_int64(b, 2);
        int same = same_row && sqlite3_column_int64(a, 0) == sqlite3_column_int64(b, 0) &&
                   sqlite3_column_int64(a, 3) == sqlite3_column_int64(b, 3) && ha && hb &&
                   strcmp(ha, hb) == 0 && la && lb && strcmp(la, lb) == 0;
        if (!same) {
            int64_t seq = *have + 1;
            char detail[256];
            snprintf(detail, sizeof detail, "link %lld here records %s %lld, in the package %s "
                     "%lld%s", (long long)seq, ta ? ta : "?", (long long)sqlite3_column_int64(a, 2),
                     tb ? tb : "?", (long long)sqlite3_column_int64(b, 2),
                     same_row ? " with other content" : "");
            if (chain)
                rc = pl__err(rv->err, PL_EREFUSED, "%s: airframe %s already exists in this "
                             "store with a different history from link %lld: refused, not "
                             "merged (%s)", rv->path, rv->res->serial, (long long)seq, detail);
            else
                rc = pl__err(rv->err, PL_EREFUSED, "%s: the store's own chain (criteria sets, "
                             "people) differs from the package's from link %lld: refused, not "
                             "merged (%s; a store takes another's own chain only when one is "
                             "the beginning of the other)", rv->path, (long long)seq, detail);
            break;
        }
        (*have)++;
    }
    if (!rc && ra == SQLITE_DONE)
        while ((rb = sqlite3_step(b)) == SQLITE_ROW)
            (*more)++;
    if (!rc && ra != SQLITE_ROW && ra != SQLITE_DONE)
        rc = pl_store__fail(rv->s, rv->err, NULL);
    else if (!rc && rb != SQLITE_ROW && rb != SQLITE_DONE)
        rc = db_fail(rv->p->db, rv->err, rv->path);
    sqlite3_finalize(a);
    sqlite3_finalize(b);
    return rc;
}

/* The receiving store holds no other airframe of this serial, and no
 * other airframe where this one's record begins. */
static int check_airframe(receiver *rv)
{
    pl_store *s = rv->s;
    sqlite3_stmt *st;
    int rc = pl_store__prepare(s, &st,
                               "SELECT coalesce(key, id), serial FROM airframe "
                               "WHERE upper(serial) = upper(?1) OR id = ?2 ORDER BY id",
                               rv->err);
    if (rc)
        return rc;
    sqlite3_bind_text(st, 1, rv->res->serial, -1, SQLITE_STATIC);
    sqlite3_bind_int64(st, 2, rv->res->airframe_key);
    int r;
    while (!rc && (r = sqlite3_step(st)) == SQLITE_ROW) {
        pl_id key = sqlite3_column_int64(st, 0);
        char serial[PL_NAME_SIZE];
        pl_store__col_text(st, 1, serial, sizeof serial);
        int same_serial = strcasecmp(serial, rv->res->serial) == 0;
        if (same_serial && key != rv->res->airframe_key)
            rc = pl__err(rv->err, PL_EREFUSED, "%s: airframe %s already exists in this store "
                         "with a different history (its record begins at row %lld here, at "
                         "row %lld in the package): refused, not merged", rv->path,
                         rv->res->serial, (long long)key, (long long)rv->res->airframe_key);
        else if (!same_serial)
            rc = pl__err(rv->err, PL_EREFUSED, "%s: airframe %s cannot be received: row %lld, "
                         "where its record begins, is airframe %s in this store, a different "
                         "history from link 1: refused, not merged", rv->path, rv->res->serial,
                         (long long)rv->res->airframe_key, serial);
    }
    if (!rc && r != SQLITE_DONE)
        rc = pl_store__fail(s, rv->err, NULL);
    sqlite3_finalize(st);
    return rc;
}

/*
 * The receiving store's seal key row for public key `pub`, which sealed
 * links of chain `chain` in the package: its own key when it is that,
 * else a received key of that chain through the highest link `pub` sealed
 * there, endorsed with the store's own key (or one recorded earlier that
 * reaches as far). Looked up when the chain's first new link is appended,
 * so the airframe a received key names is in the store by then.
 */
static int map_key(receiver *rv, pl_id chain, const unsigned char pub[PL_SIGN_PUBLIC_SIZE],
                   pl_id *id)
{
    pl_store *s = rv->s;
    for (size_t i = 0; i < rv->nkeys; i++)
        if (rv->keys[i].chain == chain && memcmp(rv->keys[i].pub, pub, PL_SIGN_PUBLIC_SIZE) == 0) {
            *id = rv->keys[i].id;
            return PL_OK;
        }
    key_map km = { chain, { 0 }, 0 };
    memcpy(km.pub, pub, sizeof km.pub);
    char hex[PL_SHA256_HEX_SIZE], fp[PL_SIGN_FINGERPRINT_SIZE], where[PL_NAME_SIZE + 64];
    to_hex(hex, pub, PL_SIGN_PUBLIC_SIZE);
    pl_sign_fingerprint(fp, pub);
    chain_words(rv, chain, where, sizeof where);
    int rc = PL_OK;
    if (memcmp(pub, s->seal_public, PL_SIGN_PUBLIC_SIZE) == 0) {
        km.id = s->seal_key_id;
    } else {
        sqlite3_stmt *st;
        int64_t through = 0;
        if ((rc = db_prepare(rv->p->db, &st,
                             "SELECT max(l.seq) FROM ledger l JOIN ledger_seal x "
                             "ON x.ledger_id = l.id JOIN seal_key k ON k.id = x.key_id "
                             "WHERE coalesce(l.chain, 0) = ?1 AND k.public_key = ?2",
                             rv->err, rv->path)))
            return rc;
        sqlite3_bind_int64(st, 1, chain);
        sqlite3_bind_text(st, 2, hex, -1, SQLITE_STATIC);
        if (sqlite3_step(st) == SQLITE_ROW)
            through = sqlite3_column_int64(st, 0);
        else
            rc = db_fail(rv->p->db, rv->err, rv->path);
        sqlite3_finalize(st);
        if (rc)
            return rc;
        if ((rc = pl_store__prepare(s, &st,
                                    "SELECT id, through_seq FROM seal_key WHERE origin = "
                                    "'received' AND public_key = ?1 AND coalesce(chain, 0) = ?2",
                                    rv->err)))
            return rc;
        sqlite3_bind_text(st, 1, hex, -1, SQLITE_STATIC);
        sqlite3_bind_int64(st, 2, chain);
        int r = sqlite3_step(st);
        int64_t kept = r == SQLITE_ROW ? sqlite3_column_int64(st, 1) : 0;
        km.id = r == SQLITE_ROW ? sqlite3_column_int64(st, 0) : 0;
        if (r != SQLITE_ROW && r != SQLITE_DONE)
            rc = pl_store__fail(s, rv->err, NULL);
        sqlite3_finalize(st);
        if (rc)
            return rc;
        if (r == SQLITE_ROW && kept < through)
            return pl__err(rv->err, PL_EREFUSED, "%s: %s: seal key %s was received for links "
                           "up to %lld, and the package holds links it sealed up to %lld: this "
                           "store keeps one received row per key and chain, so it cannot take "
                           "the later links; nothing was imported", rv->path, where, fp,
                           (long long)kept, (long long)through);
        if (r == SQLITE_DONE) {
            unsigned char msg[56], sig[PL_SIGN_SIZE];
            char source[PL_TEXT_SIZE], now[PL_DATE_SIZE];
            pl_ledger__endorsement_message(msg, pub, chain, through);
            pl_sign(sig, msg, sizeof msg, &s->seal_secret);
            snprintf(source, sizeof source, "package %.120s from store %s",
                     pl__basename(rv->path), rv->res->source_store);
            pl_store__now(now);
            if ((rc = pl_store__prepare(s, &st,
                                        "INSERT INTO seal_key (public_key, origin, chain, "
                                        "through_seq, source, endorsement, recorded_at) "
                                        "VALUES (?1, 'received', ?2, ?3, ?4, ?5, ?6)",
                                        rv->err)))
                return rc;
            sqlite3_bind_text(st, 1, hex, -1, SQLITE_STATIC);
            if (chain)
                sqlite3_bind_int64(st, 2, chain);
            sqlite3_bind_int64(st, 3, through);
            sqlite3_bind_text(st, 4, source, -1, SQLITE_STATIC);
            sqlite3_bind_blob(st, 5, sig, sizeof sig, SQLITE_STATIC);
            sqlite3_bind_text(st, 6, now, -1, SQLITE_STATIC);
            if (sqlite3_step(st) == SQLITE_DONE) {
                km.id = sqlite3_last_insert_rowid(s->db);
                rv->res->received_keys++;
            } else {
                rc = pl_store__fail(s, rv->err, NULL);
            }
            sqlite3_finalize(st);
            if (rc)
                return rc;
        }
    }
    key_map *p = realloc(rv->keys, (rv->nkeys + 1) * sizeof *p);
    if (!p)
        return pl__err(rv->err, PL_ENOMEM, "out of memory");
    rv->keys = p;
    rv->keys[rv->nkeys++] = km;
    *id = km.id;
    return PL_OK;
}

/* Append the package's links past the store's (have_*) in the ledger's
 * order, each with its row, the rows that belong to it, and its seal. */
static int append_links(receiver *rv, copier *c, int64_t have_store, int64_t have_af,
                        int64_t total, const pl_package_options *o)
{
    pl_store *s = rv->s;
    sqlite3_stmt *st = NULL, *ins = NULL, *seal = NULL;
    int rc = db_prepare(rv->p->db, &st,
                        "SELECT coalesce(l.chain, 0), l.seq, l.table_name, l.row_id, l.encoding, "
                        "l.row_sha256, l.prev_link, l.link, l.recorded_at, k.public_key, x.seal "
                        "FROM ledger l JOIN ledger_seal x ON x.ledger_id = l.id "
                        "JOIN seal_key k ON k.id = x.key_id "
                        "WHERE (l.chain IS NULL AND l.seq > ?1) OR (l.chain = ?2 AND l.seq > ?3) "
                        "ORDER BY l.id",
                        rv->err, rv->path);
    if (!rc)
        rc = pl_store__prepare(s, &ins,
                               "INSERT INTO ledger (chain, seq, table_name, row_id, encoding, "
                               "row_sha256, prev_link, link, recorded_at) "
                               "VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
                               rv->err);
    if (!rc)
        rc = pl_store__prepare(s, &seal,
                               "INSERT INTO ledger_seal (ledger_id, key_id, seal) "
                               "VALUES (?1, ?2, ?3)",
                               rv->err);
    if (rc) {
        sqlite3_finalize(st);
        sqlite3_finalize(ins);
        return rc;
    }
    sqlite3_bind_int64(st, 1, have_store);
    sqlite3_bind_int64(st, 2, rv->res->airframe_key);
    sqlite3_bind_int64(st, 3, have_af);
    int64_t done = 0;
    int r = SQLITE_DONE;
    while (!rc && (r = sqlite3_step(st)) == SQLITE_ROW) {
        pl_id chain = sqlite3_column_int64(st, 0);
        int64_t seq = sqlite3_column_int64(st, 1);
        const char *table = (const char *)sqlite3_column_text(st, 2);
        pl_id row = sqlite3_column_int64(st, 3);
        char where[PL_NAME_SIZE + 64], label[STORE_LABEL_SIZE + 128];
        chain_words(rv, chain, where, sizeof where);
        snprintf(label, sizeof label, "%s: %s, link %lld (%s %lld)", rv->path, where,
                 (long long)seq, table ? table : "?", (long long)row);
        if (chained_table(table) < 0) {
            rc = pl__err(rv->err, PL_EREFUSED, "%s names a table that holds no recorded rows",
                         label);
            break;
        }
        char sql[IDENT_SIZE + 48];
        snprintf(sql, sizeof sql, "SELECT 1 FROM \"%s\" WHERE id = ?1", table);
        int64_t one = 0;
        int taken = 0;
        rc = db_int(s->db, sql, row, &one, &taken, rv->err, s->path);
        if (!rc && taken)
            rc = pl__err(rv->err, PL_EREFUSED, "%s: its row needs id %lld of table %s, which "
                         "this store holds for another record: refused, not merged", label,
                         (long long)row, table);
        int64_t n = 0;
        if (!rc)
            rc = copy_rows(c, table, "id", row, &n, rv->err, label);
        if (!rc && n != 1)
            rc = pl__err(rv->err, PL_EREFUSED, "%s: the package lacks the row", label);
        if (rc)
            break;
        if (chain)
            sqlite3_bind_int64(ins, 1, chain);
        else
            sqlite3_bind_null(ins, 1);
        for (int i = 1; i < 9; i++)
            sqlite3_bind_value(ins, i + 1, sqlite3_column_value(st, i));
        if (sqlite3_step(ins) != SQLITE_DONE) {
            rc = pl_store__fail(s, rv->err, label);
            break;
        }
        sqlite3_reset(ins);
        pl_id lid = sqlite3_last_insert_rowid(s->db);
        unsigned char pub[PL_SIGN_PUBLIC_SIZE];
        pl_id kid = 0;
        if (from_hex(pub, (const char *)sqlite3_column_text(st, 9), sizeof pub) ||
            sqlite3_column_bytes(st, 10) != PL_SIGN_SIZE) {
            rc = pl__err(rv->err, PL_EREFUSED, "%s: its seal cannot be received", label);
            break;
        }
        if ((rc = map_key(rv, chain, pub, &kid)))
            break;
        sqlite3_bind_int64(seal, 1, lid);
        sqlite3_bind_int64(seal, 2, kid);
        sqlite3_bind_value(seal, 3, sqlite3_column_value(st, 10));
        if (sqlite3_step(seal) != SQLITE_DONE) {
            rc = pl_store__fail(s, rv->err, label);
            break;
        }
        sqlite3_reset(seal);
        if (chain)
            rv->res->imported_airframe_links++;
        else
            rv->res->imported_store_links++;
        done++;
        if (done % 64 == 0 || done == total)
            rc = progress(o, 0.8 + 0.2 * (double)done / (double)(total ? total : 1), rv->err,
                          "package import");
    }
    if (!rc && r != SQLITE_DONE)
        rc = db_fail(rv->p->db, rv->err, rv->path);
    sqlite3_finalize(st);
    sqlite3_finalize(ins);
    sqlite3_finalize(seal);
    return rc;
}

/* Everything the import writes, inside the store's write scope. */
static int receive(receiver *rv, const pl_package_options *o)
{
    int64_t have_store = 0, more_store = 0, have_af = 0, more_af = 0;
    int rc = check_airframe(rv);
    if (!rc)
        rc = compare_chain(rv, 0, &have_store, &more_store);
    if (!rc)
        rc = compare_chain(rv, rv->res->airframe_key, &have_af, &more_af);
    if (rc)
        return rc;
    if (!more_store && !more_af) {
        rv->res->already = 1;
        return PL_OK;
    }
    copier c;
    rc = copier_open(&c, rv->p->db, rv->path, rv->s->db, rv->s->path, rv->err);
    if (!rc)
        rc = append_links(rv, &c, have_store, have_af, more_store + more_af, o);
    rv->res->imported_rows = c.rows;
    copier_close(&c);
    return rc;
}

PL_EXPORT int pl_package_import(pl_store *s, const char *path, const pl_package_options *opts,
                                pl_package_result *res, pl_err *err)
{
    assert(s && path && res);
    memset(res, 0, sizeof *res);
    pl_package_options o;
    int rc = take_options(&o, opts, err);
    if (rc)
        return rc;
    char fp[PL_SIGN_FINGERPRINT_SIZE];
    if (s->flags & PL_STORE_READONLY)
        return pl__err(err, PL_EDB, "%s: store is open read-only", s->path);
    if (!pl_store_sealed(s, fp))
        return pl__err(err, PL_EREFUSED, "%s: the store is not sealed: a store receives a "
                       "package only when sealed, for it endorses the sender's seal key with "
                       "its own (seal it first: plyledger seal); nothing was imported", s->path);
    if (!s->has_seal_secret)
        return pl__err(err, PL_EREFUSED, "%s: receiving a package needs the store's seal key "
                       "(key file of seal key %s): nothing was imported", s->path, fp);
    sqlite3 *hold = hold_package(path);
    pl_store *p = NULL;
    rc = check_package(path, path, &o, 0, 0.8, res, &p, err);
    if (!rc && res->faults)
        rc = pl__err(err, PL_EREFUSED, "%s: refused: %s; nothing was imported", path,
                     res->message);
    int owned = 0;
    if (!rc)
        rc = pl_store__write_begin(s, &owned, err);
    if (!rc) {
        receiver rv = { s, p, path, res, err, NULL, 0 };
        rc = pl_store__exec(p, "BEGIN", err);
        if (!rc) {
            rc = receive(&rv, &o);
            sqlite3_exec(p->db, "COMMIT", NULL, NULL, NULL);
        }
        free(rv.keys);
        rc = pl_store__write_end(s, owned, rc, err);
    }
    pl_store_close(p);
    release_package(hold);
    if (rc) {
        res->imported_airframe_links = res->imported_store_links = 0;
        res->imported_rows = res->received_keys = 0;
        res->already = 0;
    }
    return rc;
}
