/*
 * cli.c - shared helpers of the subcommands: messages, option parsing,
 * opening the store, progress and tables.
 */
#include "cli.h"

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

const char *cli_current = "plyledger";

/* "plyledger: <message>" and a newline on stderr. */
static void say(const char *fmt, va_list ap)
{
    fputs("plyledger: ", stderr);
    vfprintf(stderr, fmt, ap);
    fputc('\n', stderr);
}

int cli_fail(const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    say(fmt, ap);
    va_end(ap);
    return CLI_ERROR;
}

int cli_fail_err(int code, const pl_err *err)
{
    return cli_fail("%s", pl_err_message(err, code));
}

int cli_usage_error(const char *usage, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    say(fmt, ap);
    va_end(ap);
    if (usage)
        fprintf(stderr, "usage: plyledger %s %s\n", cli_current, usage);
    fprintf(stderr, "Try 'plyledger %s --help' for more.\n", cli_current);
    return CLI_USAGE;
}

/* The words help text names by a placeholder: they come from the library's
 * vocabularies, so help never lists words the library does not take. */
static const struct {
    const char *token;
    pl_vocab vocab;
} help_words[] = {
    { "@KINDS@", PL_VOCAB_INSPECTION_KIND },
    { "@METHODS@", PL_VOCAB_METHOD },
    { "@LEVELS@", PL_VOCAB_INSPECTOR_LEVEL },
    { "@ROLES@", PL_VOCAB_ROLE },
    { "@DECISIONS@", PL_VOCAB_DECISION },
    { "@INTERPRETATIONS@", PL_VOCAB_INTERPRETATION },
};

#define WAIT_TOKEN "@WAIT@"

int cli_help(const char *text)
{
    for (const char *p = text; *p;) {
        const char *at = strchr(p, '@');
        size_t i = 0, n = sizeof help_words / sizeof help_words[0];
        while (at && i < n && strncmp(at, help_words[i].token, strlen(help_words[i].token)))
            i++;
        if (at && i == n && strncmp(at, WAIT_TOKEN, strlen(WAIT_TOKEN)) == 0) {
            const char *line = at;
            while (line > text && line[-1] != '\n')
                line--;
            fwrite(p, 1, (size_t)(at - p), stdout);
            printf("wait up to SECONDS while another process writes to the\n"
                   "%*sstore (default %g)", (int)(at - line), "", PL_STORE_WAIT_DEFAULT_S);
            p = at + strlen(WAIT_TOKEN);
            continue;
        }
        if (!at || i == n) {
            size_t len = at ? (size_t)(at - p) + 1 : strlen(p);
            fwrite(p, 1, len, stdout);
            p += len;
            continue;
        }
        fwrite(p, 1, (size_t)(at - p), stdout);
        char words[256];
        pl_vocabulary_text(words, sizeof words, help_words[i].vocab, " or ");
        fputs(words, stdout);
        p = at + strlen(help_words[i].token);
    }
    return CLI_OK;
}

/* The options every command takes, appended after the command's own. */
enum { OPT_JSON = 0x1001, OPT_HELP_LONG, OPT_WAIT, OPT_SEAL_KEY };
static const struct option common_options[] = {
    { "store", required_argument, NULL, 's' },
    { "seal-key", required_argument, NULL, OPT_SEAL_KEY },
    { "json", no_argument, NULL, OPT_JSON },
    { "wait", required_argument, NULL, OPT_WAIT },
    { "quiet", no_argument, NULL, 'q' },
    { "help", no_argument, NULL, 'h' },
};

int cli_parse(int argc, char **argv, const char *shortopts, const struct option *longopts,
              cli_common *common, cli_opt_fn on_opt, void *ctx, const char *usage,
              const char *help, int *first_arg)
{
    size_t nown = 0;
    while (longopts && longopts[nown].name)
        nown++;
    size_t ncommon = sizeof common_options / sizeof common_options[0];
    struct option *all = calloc(nown + ncommon + 1, sizeof *all);
    char shorts[128];
    if (!all)
        return cli_fail("out of memory");
    if (nown)
        memcpy(all, longopts, nown * sizeof *all);
    memcpy(all + nown, common_options, sizeof common_options);
    snprintf(shorts, sizeof shorts, ":s:qh%s", shortopts ? shortopts : "");

    memset(common, 0, sizeof *common);
    common->wait_s = NAN;
    common->store = getenv("PLYLEDGER_STORE");
    if (common->store && !*common->store)
        common->store = NULL;
    common->seal_key = getenv("PLYLEDGER_SEAL_KEY");
    if (common->seal_key && !*common->seal_key)
        common->seal_key = NULL;
    optind = 1;
    opterr = 0;
    int rc = -1, opt, li = -1;
    while (rc < 0 && (li = -1, opt = getopt_long(argc, argv, shorts, all, &li)) != -1) {
        /* No option takes an empty value: '' is a slip (an unset shell
         * variable), never a date, a path or a name. */
        if (optarg && !*optarg && opt != ':' && opt != '?') {
            if (li >= 0)
                rc = cli_usage_error(usage, "option '--%s' needs a value, not an empty one",
                                     all[li].name);
            else
                rc = cli_usage_error(usage, "option '-%c' needs a value, not an empty one", opt);
            break;
        }
        switch (opt) {
        case 's': common->store = optarg; break;
        case 'q': common->quiet = 1; break;
        case OPT_SEAL_KEY: common->seal_key = optarg; break;
        case OPT_JSON: common->json = 1; break;
        case OPT_WAIT:
            if (cli_number("--wait", optarg, &common->wait_s, usage))
                rc = CLI_USAGE;
            else if (!(common->wait_s >= 0 && common->wait_s <= PL_STORE_WAIT_MAX_S))
                rc = cli_usage_error(usage, "--wait: %s is not 0 to %g seconds", optarg,
                                     PL_STORE_WAIT_MAX_S);
            break;
        case 'h': rc = cli_help(help); break;
        case ':':
            rc = cli_usage_error(usage, "option '%s' needs a value", argv[optind - 1]);
            break;
        case '?':
            if (optopt)
                rc = cli_usage_error(usage, "unknown option '-%c'", optopt);
            else
                rc = cli_usage_error(usage, "unknown option '%s'", argv[optind - 1]);
            break;
        default:
            if (on_opt) {
                int r = on_opt(ctx, opt, optarg);
                if (r)
                    rc = r;
            }
        }
    }
    free(all);
    if (first_arg)
        *first_arg = optind;
    else if (rc < 0 && optind < argc)
        rc = cli_usage_error(usage, "unexpected operand '%s'", argv[optind]);
    return rc;
}

int cli_open_store(pl_store **out, const cli_common *common, unsigned flags)
{
    if (!common->store)
        return cli_usage_error(NULL, "no store given: use --store PATH or set PLYLEDGER_STORE");
    pl_err err = { 0 };
    int no_key = (flags & CLI_STORE_NO_SEAL_KEY) != 0;
    flags &= ~CLI_STORE_NO_SEAL_KEY;
    int rc = pl_store_open(out, common->store, flags, &err);
    if (!rc && !isnan(common->wait_s) && (rc = pl_store_set_wait(*out, common->wait_s, &err))) {
        pl_store_close(*out);
        *out = NULL;
    }
    if (rc)
        return cli_fail_err(rc, &err);
    /* a sealed store records nothing without its seal key */
    if (!no_key && !(flags & PL_STORE_READONLY) && pl_store_sealed(*out, NULL)) {
        char path[4096];
        pl_sign_key key;
        if (!cli_seal_key_path(common, path, sizeof path)) {
            pl_store_close(*out);
            *out = NULL;
            return cli_fail("the seal key's path is too long");
        }
        rc = pl_key_load(path, &key, &err);
        if (rc == PL_ENOTFOUND) {
            pl_store_close(*out);
            *out = NULL;
            return cli_fail("%s is sealed, and writing to it needs its seal key: %s is not "
                            "there (give --seal-key FILE or set PLYLEDGER_SEAL_KEY)",
                            common->store, path);
        }
        if (!rc)
            rc = pl_store_set_seal_key(*out, &key, &err);
        pl_sign_key_wipe(&key);
        if (rc) {
            pl_store_close(*out);
            *out = NULL;
            return cli_fail_err(rc, &err);
        }
    }
    /* a migration a person should hear of (the hash chain's, for one) */
    const char *note = pl_store_migration_note(*out);
    if (note[0] && !common->quiet)
        fprintf(stderr, "plyledger: %s\n", note);
    /* the library reads no clock: today is the local calendar date here */
    char today[16];
    time_t now = time(NULL);
    struct tm tm;
    if (!localtime_r(&now, &tm) || !strftime(today, sizeof today, "%Y-%m-%d", &tm) ||
        (rc = pl_store_set_today(*out, today, &err))) {
        pl_store_close(*out);
        *out = NULL;
        return rc ? cli_fail_err(rc, &err) : cli_fail("cannot read today's date from the clock");
    }
    return CLI_OK;
}

void cli_today(char *buf, size_t cap)
{
    time_t now = time(NULL);
    struct tm tm;
    if (!localtime_r(&now, &tm) || !strftime(buf, cap, "%Y-%m-%d", &tm))
        snprintf(buf, cap, "%s", "");
}

void cli_remove_store(const char *path)
{
    char buf[4200];
    unlink(path);
    if (snprintf(buf, sizeof buf, "%s-wal", path) < (int)sizeof buf)
        unlink(buf);
    if (snprintf(buf, sizeof buf, "%s-shm", path) < (int)sizeof buf)
        unlink(buf);
}

const char *cli_seal_key_path(const cli_common *common, char *buf, size_t cap)
{
    int n = common->seal_key ? snprintf(buf, cap, "%s", common->seal_key)
                             : snprintf(buf, cap, "%s.seal-key", common->store ? common->store : "");
    return n >= 0 && (size_t)n < cap ? buf : NULL;
}

int cli_guard_output(const cli_common *common, const char *path)
{
    pl_err err = { 0 };
    int rc = pl_outfile_guard(path, common->store, &err);
    return rc ? cli_fail_err(rc, &err) : 0;
}

int cli_open_output(pl_outfile **out, const cli_common *common, const char *path)
{
    *out = NULL;
    if (!path)
        return 0;
    if (cli_guard_output(common, path))
        return CLI_ERROR;
    pl_err err = { 0 };
    int rc = pl_outfile_open(out, path, &err);
    return rc ? cli_fail_err(rc, &err) : 0;
}

int cli_write_text(const cli_common *common, const char *path, const char *text)
{
    /* text ends with a line end (JSON from cJSON has none) */
    size_t n = strlen(text);
    const char *end = n && text[n - 1] == '\n' ? "" : "\n";
    if (!path) {
        fputs(text, stdout);
        fputs(end, stdout);
        return fflush(stdout) == 0 ? CLI_OK : cli_fail("cannot write to standard output");
    }
    pl_outfile *of = NULL;
    if (cli_open_output(&of, common, path))
        return CLI_ERROR;
    pl_err err = { 0 };
    FILE *fp = pl_outfile_stream(of);
    int rc = fputs(text, fp) < 0 || fputs(end, fp) < 0 ? PL_EIO : PL_OK;
    if (rc)
        snprintf(err.msg, sizeof err.msg, "%s: cannot write", path);
    rc = pl_outfile_finish(of, rc, &err);
    return rc ? cli_fail_err(rc, &err) : CLI_OK;
}

int cli_check_text(const char *src, cli_text_kind kind, const char *opt)
{
    if (!src)
        return 0;
    pl_err err = { 0 };
    int rc = kind == CLI_KEY ? pl_key_check(src, opt, &err)
                             : pl_text_check(src, kind == CLI_FREE ? PL_TEXT_LINES : 0, opt, &err);
    return rc ? cli_fail_err(rc, &err) : 0;
}

static int copy_text(char *dst, size_t cap, const char *src, const char *opt, cli_text_kind kind)
{
    if (!src)
        return 0;
    size_t n = strlen(src);
    if (n >= cap)
        return cli_usage_error(NULL, "%s: too long (at most %zu characters)", opt, cap - 1);
    if (cli_check_text(src, kind, opt))
        return CLI_ERROR;
    memcpy(dst, src, n + 1);
    return 0;
}

int cli_text(char *dst, size_t cap, const char *src, const char *opt)
{
    return copy_text(dst, cap, src, opt, CLI_NAME);
}

int cli_free(char *dst, size_t cap, const char *src, const char *opt)
{
    return copy_text(dst, cap, src, opt, CLI_FREE);
}

int cli_key(char *dst, size_t cap, const char *src, const char *opt)
{
    return copy_text(dst, cap, src, opt, CLI_KEY);
}

int cli_pitch(const char *opt, const char *arg, double *pu, double *pv, const char *usage)
{
    char buf[64];
    if (cli_text(buf, sizeof buf, arg, opt))
        return CLI_USAGE;
    char *comma = strchr(buf, ',');
    if (comma)
        *comma = '\0';
    if (cli_number(opt, buf, pu, usage))
        return CLI_USAGE;
    *pv = *pu;
    if (comma && cli_number(opt, comma + 1, pv, usage))
        return CLI_USAGE;
    if (!(*pu > 0) || !(*pv > 0))
        return cli_usage_error(usage, "%s must be positive", opt);
    if (cli_bound(PL_BOUND_PITCH, *pu, opt) || cli_bound(PL_BOUND_PITCH, *pv, opt))
        return CLI_ERROR;
    return 0;
}

int cli_number(const char *opt, const char *arg, double *out, const char *usage)
{
    char *end;
    errno = 0;
    double v = strtod(arg, &end);
    if (end == arg || *end || errno || !isfinite(v))
        return cli_usage_error(usage, "%s: '%s' is not a number", opt, arg);
    *out = v;
    return 0;
}

int cli_count(const char *opt, const char *arg, long long *out, const char *usage)
{
    char *end;
    errno = 0;
    /* strtoll alone would take blanks and a sign before the digits */
    long long v = arg[0] >= '0' && arg[0] <= '9' ? strtoll(arg, &end, 10) : -1;
    if (errno == ERANGE)
        return cli_usage_error(usage, "%s: '%s' is too large a number", opt, arg);
    if (v < 0 || *end)
        return cli_usage_error(usage, "%s: '%s' is not a whole number >= 0", opt, arg);
    *out = v;
    return 0;
}

int cli_bound(pl_bound bound, double value, const char *opt)
{
    pl_err err = { 0 };
    int rc = pl_bound_check(bound, value, opt, &err);
    return rc ? cli_fail_err(rc, &err) : 0;
}

void cli_progress_init(cli_progress *p, const char *label, const cli_common *common)
{
    p->label = label;
    p->enabled = !common->quiet && isatty(STDERR_FILENO);
    p->last_percent = -1;
}

int cli_progress_fn(void *ud, double fraction)
{
    cli_progress *p = ud;
    if (!p->enabled)
        return 0;
    int pct = (int)(fraction * 100.0 + 0.5);
    if (pct != p->last_percent) {
        fprintf(stderr, "\r%s %3d%%", p->label, pct);
        fflush(stderr);
        p->last_percent = pct;
    }
    return 0;
}

void cli_progress_done(cli_progress *p)
{
    if (p->enabled && p->last_percent >= 0)
        fprintf(stderr, "\r%*s\r", (int)strlen(p->label) + 6, "");
}

/* ---- tables ------------------------------------------------------------ */

struct cli_table {
    int ncols;
    size_t nrows, cap;
    char **cells;  /* (nrows + 1) * ncols, header first */
};

static char *dup_cell(const char *s)
{
    if (!s)
        s = "";
    size_t n = strlen(s) + 1;
    char *d = malloc(n);
    if (d)
        memcpy(d, s, n);
    return d;
}

cli_table *cli_table_new(int ncols, const char *const *headers)
{
    cli_table *t = calloc(1, sizeof *t);
    if (!t)
        return NULL;
    t->ncols = ncols;
    cli_table_row(t, headers);
    return t;
}

void cli_table_row(cli_table *t, const char *const *cells)
{
    if (!t)
        return;
    if (t->nrows == t->cap) {
        size_t cap = t->cap ? t->cap * 2 : 16;
        char **grown = realloc(t->cells, cap * (size_t)t->ncols * sizeof *grown);
        if (!grown)
            return;
        t->cells = grown;
        t->cap = cap;
    }
    for (int c = 0; c < t->ncols; c++)
        t->cells[t->nrows * (size_t)t->ncols + (size_t)c] = dup_cell(cells[c]);
    t->nrows++;
}

void cli_table_print(cli_table *t, FILE *out)
{
    if (!t)
        return;
    size_t width[64] = { 0 };
    int ncols = t->ncols < 64 ? t->ncols : 64;
    for (size_t r = 0; r < t->nrows; r++)
        for (int c = 0; c < ncols; c++) {
            const char *s = t->cells[r * (size_t)t->ncols + (size_t)c];
            size_t n = s ? strlen(s) : 0;
            if (n > width[c])
                width[c] = n;
        }
    for (size_t r = 0; r < t->nrows; r++) {
        for (int c = 0; c < ncols; c++) {
            const char *s = t->cells[r * (size_t)t->ncols + (size_t)c];
            if (c == ncols - 1)
                fprintf(out, "%s", s ? s : "");
            else
                fprintf(out, "%-*s  ", (int)width[c], s ? s : "");
        }
        fputc('\n', out);
    }
}

void cli_table_free(cli_table *t)
{
    if (!t)
        return;
    for (size_t i = 0; i < t->nrows * (size_t)t->ncols; i++)
        free(t->cells[i]);
    free(t->cells);
    free(t);
}

const char *cli_fmt_num(char *buf, size_t size, double v)
{
    if (isnan(v))
        snprintf(buf, size, "-");
    else
        snprintf(buf, size, "%g", v);
    return buf;
}

void cli_print_caution(void)
{
    printf("\nCaution: %s\n", pl_caution());
}
