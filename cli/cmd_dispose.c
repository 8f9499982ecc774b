/*
 * cmd_dispose.c - plyledger interpret, dispose and dispositions: what the
 * people of the register decide about the changes a comparison found
 * (plyledger/disposition.h).
 */
#include "cli.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

enum {
    O_COMPARISON = 0x600, O_CHANGE, O_AS, O_BY, O_KEY, O_DATE, O_NOTE, O_SUPERSEDES, O_REASON,
    O_DECISION, O_DUE_DATE, O_DUE_HOURS, O_DUE_CYCLES, O_REPAIR, O_QUERY, O_RATIONALE,
    O_AIRFRAME, O_SITE, O_TASK
};

static const struct option opts[] = {
    { "comparison", required_argument, NULL, O_COMPARISON },
    { "change", required_argument, NULL, O_CHANGE },
    { "changes", required_argument, NULL, O_CHANGE },
    { "as", required_argument, NULL, O_AS },
    { "by", required_argument, NULL, O_BY },
    { "key", required_argument, NULL, O_KEY },
    { "date", required_argument, NULL, O_DATE },
    { "note", required_argument, NULL, O_NOTE },
    { "supersedes", required_argument, NULL, O_SUPERSEDES },
    { "reason", required_argument, NULL, O_REASON },
    { "decision", required_argument, NULL, O_DECISION },
    { "due-date", required_argument, NULL, O_DUE_DATE },
    { "due-hours", required_argument, NULL, O_DUE_HOURS },
    { "due-cycles", required_argument, NULL, O_DUE_CYCLES },
    { "repair-ref", required_argument, NULL, O_REPAIR },
    { "query-ref", required_argument, NULL, O_QUERY },
    { "rationale", required_argument, NULL, O_RATIONALE },
    { "airframe", required_argument, NULL, O_AIRFRAME },
    { "site", required_argument, NULL, O_SITE },
    { "task", required_argument, NULL, O_TASK },
    { NULL, 0, NULL, 0 },
};

typedef struct args {
    const char *usage;
    const char *comparison, *change, *as, *by, *key, *date, *note, *supersedes, *reason,
        *decision, *due_date, *due_hours, *due_cycles, *repair, *query, *rationale, *airframe,
        *site, *task;
} args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    args *a = ctx;
    switch (opt) {
    case O_COMPARISON: a->comparison = arg; break;
    case O_CHANGE: a->change = arg; break;
    case O_AS: a->as = arg; break;
    case O_BY: a->by = arg; break;
    case O_KEY: a->key = arg; break;
    case O_DATE: a->date = arg; break;
    case O_NOTE: a->note = arg; break;
    case O_SUPERSEDES: a->supersedes = arg; break;
    case O_REASON: a->reason = arg; break;
    case O_DECISION: a->decision = arg; break;
    case O_DUE_DATE: a->due_date = arg; break;
    case O_DUE_HOURS: a->due_hours = arg; break;
    case O_DUE_CYCLES: a->due_cycles = arg; break;
    case O_REPAIR: a->repair = arg; break;
    case O_QUERY: a->query = arg; break;
    case O_RATIONALE: a->rationale = arg; break;
    case O_AIRFRAME: a->airframe = arg; break;
    case O_SITE: a->site = arg; break;
    case O_TASK: a->task = arg; break;
    default: return cli_usage_error(a->usage, "unexpected option");
    }
    return 0;
}

/* Which options a command takes: one meant for another is a slip. */
static int only(const args *a, const char *cmd, const char *allowed)
{
    const struct {
        const char *name, *value;
    } given[] = {
        { "comparison", a->comparison }, { "change", a->change }, { "as", a->as },
        { "by", a->by }, { "key", a->key }, { "date", a->date }, { "note", a->note },
        { "supersedes", a->supersedes }, { "reason", a->reason }, { "decision", a->decision },
        { "due-date", a->due_date }, { "due-hours", a->due_hours },
        { "due-cycles", a->due_cycles }, { "repair-ref", a->repair }, { "query-ref", a->query },
        { "rationale", a->rationale }, { "airframe", a->airframe }, { "site", a->site },
        { "task", a->task },
    };
    for (size_t i = 0; i < sizeof given / sizeof given[0]; i++) {
        char word[32];
        snprintf(word, sizeof word, " %s ", given[i].name);
        if (given[i].value && !strstr(allowed, word))
            return cli_usage_error(a->usage, "%s does not take --%s", cmd, given[i].name);
    }
    return 0;
}

/* Change numbers of a comparison to their ids. */
typedef struct numbers {
    long long want[64];
    pl_id id[64];
    size_t n;
} numbers;

static int note_change(void *ud, const pl_change_record *c)
{
    numbers *m = ud;
    for (size_t i = 0; i < m->n; i++)
        if (m->want[i] == c->number)
            m->id[i] = c->id;
    return 0;
}

static int parse_numbers(const char *text, numbers *m, const char *usage)
{
    m->n = 0;
    const char *p = text;
    while (*p) {
        char *end;
        errno = 0;
        long long v = strtoll(p, &end, 10);
        if (end == p || errno || v < 1 || (*end && *end != ','))
            return cli_usage_error(usage, "--change: '%s' is not change numbers such as 1 or "
                                   "1,3", text);
        if (m->n == 64)
            return cli_usage_error(usage, "--change: at most 64 changes");
        m->want[m->n] = v;
        m->id[m->n++] = 0;
        p = *end ? end + 1 : end;
    }
    return m->n ? 0 : cli_usage_error(usage, "--change: give change numbers");
}

static int resolve(pl_store *store, pl_id comparison, numbers *m)
{
    pl_err err = { 0 };
    int st = pl_store_list_changes(store, comparison, note_change, m, &err);
    if (st)
        return cli_fail_err(st, &err);
    for (size_t i = 0; i < m->n; i++)
        if (!m->id[i])
            return cli_fail("comparison %lld has no change number %lld (plyledger compare "
                            "--json lists them)", (long long)comparison, m->want[i]);
    return 0;
}

static int parse_id(const char *opt, const char *text, pl_id *out, const char *usage)
{
    long long v;
    if (cli_count(opt, text, &v, usage))
        return CLI_USAGE;
    if (v < 1)
        return cli_usage_error(usage, "%s: expected an id from 1", opt);
    *out = v;
    return 0;
}

/* The comparison: --comparison ID, or the latest of --airframe/--site
 * (--task: of that check). Needs the store open; 0 or the exit code. */
static int which_comparison(pl_store *store, const args *a, pl_id *out)
{
    if (a->comparison)
        return 0; /* parsed already */
    pl_err err = { 0 };
    int st = pl_store_find_comparison(store, a->airframe, a->site, a->task, out, &err);
    return st ? cli_fail_err(st, &err) : 0;
}

static int comparison_options(const args *a, pl_id *out, const char *usage)
{
    if (a->comparison && (a->airframe || a->site || a->task))
        return cli_usage_error(usage, "give --comparison ID or --airframe and --site, not both");
    if (a->comparison)
        return parse_id("--comparison", a->comparison, out, usage);
    if (!a->airframe || !a->site)
        return cli_usage_error(usage, "which comparison? give --comparison ID, or --airframe "
                               "and --site (and --task for a check's)");
    return 0;
}

static int load_key(const char *path, pl_sign_key *key)
{
    pl_err err = { 0 };
    int st = pl_key_load(path, key, &err);
    return st ? cli_fail_err(st, &err) : 0;
}

/* ---- interpret ---------------------------------------------------------- */

static const char interpret_usage[] =
    "(--comparison ID | --airframe SERIAL --site CODE [--task REF]) --change N --as CLASS "
    "--by HANDLE --key FILE [options]";
static const char interpret_help[] =
    "usage: plyledger interpret (--comparison ID | --airframe SERIAL --site CODE\n"
    "                           [--task REF]) --change N --as CLASS --by HANDLE\n"
    "                           --key FILE [options]\n"
    "\n"
    "Interpret the indication of change N of a comparison, in the terms of ASTM\n"
    "E1316: false (not caused by a discontinuity), nonrelevant (caused by a\n"
    "condition of the design) or relevant (caused by a discontinuity; only a\n"
    "relevant indication is evaluated against the criteria and disposed of).\n"
    "CLASS is one of @INTERPRETATIONS@. The interpretation is signed with\n"
    "the key in FILE, which must be the key HANDLE (an inspector or an engineer of\n"
    "the register) holds on the date. It is never edited: a later one supersedes it.\n"
    "\n"
    "Options:\n"
    "      --comparison ID   the comparison (plyledger compare and history print it)\n"
    "      --airframe SERIAL, --site CODE [--task REF]\n"
    "                        instead: the site's latest comparison (of that check)\n"
    "      --change N        the change's number in it\n"
    "      --as CLASS        @INTERPRETATIONS@\n"
    "      --by HANDLE       who interprets (plyledger people list)\n"
    "      --key FILE        their key file (plyledger new-key; mode 0600)\n"
    "      --date DATE       the signing date, YYYY-MM-DD (default today)\n"
    "      --note TEXT       what the indication is taken to be\n"
    "      --supersedes ID   the interpretation this one replaces (with --reason)\n"
    "      --reason TEXT     why it is replaced\n"
    "  -s, --store PATH      the store (default $PLYLEDGER_STORE)\n"
    "      --wait SECONDS    @WAIT@\n"
    "      --json            print the interpretation as JSON\n"
    "  -q, --quiet           print nothing on success\n"
    "  -h, --help            show this help\n";

int cmd_interpret(int argc, char **argv)
{
    cli_common common;
    args a;
    memset(&a, 0, sizeof a);
    a.usage = interpret_usage;
    int rc = cli_parse(argc, argv, "", opts, &common, take_opt, &a, interpret_usage,
                       interpret_help, NULL);
    if (rc >= 0)
        return rc;
    if ((rc = only(&a, "interpret",
                   " comparison airframe site task change as by key date note supersedes "
                   "reason ")))
        return rc;
    if (!a.change || !a.as || !a.by || !a.key)
        return cli_usage_error(interpret_usage, "--change, --as, --by and --key are required");
    pl_interpretation in;
    memset(&in, 0, sizeof in);
    pl_id comparison = 0;
    numbers m;
    char today[PL_DATE_SIZE];
    cli_today(today, sizeof today);
    if ((rc = comparison_options(&a, &comparison, interpret_usage)) ||
        (rc = parse_numbers(a.change, &m, interpret_usage)))
        return rc;
    if (m.n != 1)
        return cli_usage_error(interpret_usage, "--change: interpret one change at a time");
    if (a.supersedes && (rc = parse_id("--supersedes", a.supersedes, &in.supersedes,
                                       interpret_usage)))
        return rc;
    if ((rc = cli_text(in.class_, sizeof in.class_, a.as, "--as")) ||
        (rc = cli_key(in.handle, sizeof in.handle, a.by, "--by")) ||
        (rc = cli_text(in.signed_on, sizeof in.signed_on, a.date ? a.date : today, "--date")) ||
        (rc = cli_free(in.note, sizeof in.note, a.note, "--note")) ||
        (rc = cli_free(in.reason, sizeof in.reason, a.reason, "--reason")))
        return rc;
    pl_sign_key key;
    if ((rc = load_key(a.key, &key)))
        return rc;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, 0))) {
        pl_sign_key_wipe(&key);
        return rc;
    }
    if ((rc = which_comparison(store, &a, &comparison)) || (rc = resolve(store, comparison, &m))) {
        pl_sign_key_wipe(&key);
        pl_store_close(store);
        return rc;
    }
    in.change_id = m.id[0];
    pl_err err = { 0 };
    pl_id id = 0;
    int st = pl_store_add_interpretation(store, &in, &key, &id, &err);
    pl_sign_key_wipe(&key);
    pl_store_close(store);
    if (st)
        return cli_fail_err(st, &err);
    if (common.json) {
        cJSON *j = cJSON_CreateObject();
        if (j) {
            cJSON_AddNumberToObject(j, "interpretation", (double)id);
            cJSON_AddNumberToObject(j, "comparison", (double)comparison);
            cJSON_AddNumberToObject(j, "change_number", (double)m.want[0]);
            cJSON_AddStringToObject(j, "class", in.class_);
            cJSON_AddStringToObject(j, "signed_by", in.handle);
            cJSON_AddStringToObject(j, "signed_on", in.signed_on);
        }
        return cli_print_json(j);
    }
    if (!common.quiet)
        printf("interpretation %lld: change %lld of comparison %lld is %s (signed by %s on "
               "%s)\n",
               (long long)id, m.want[0], (long long)comparison, in.class_, in.handle,
               in.signed_on);
    return CLI_OK;
}

/* ---- dispose ------------------------------------------------------------ */

static const char dispose_usage[] =
    "(--comparison ID | --airframe SERIAL --site CODE [--task REF]) --change N[,N...] "
    "--decision DECISION --by HANDLE --key FILE [options]";
static const char dispose_help[] =
    "usage: plyledger dispose (--comparison ID | --airframe SERIAL --site CODE\n"
    "                         [--task REF]) --change N[,N...] --decision DECISION\n"
    "                         --by HANDLE --key FILE [options]\n"
    "\n"
    "Record the engineer's disposition of changes of one comparison, each of them\n"
    "interpreted as relevant first (plyledger interpret). DECISION is one of\n"
    "@DECISIONS@:\n"
    "  accept                  the indication may stay as it is\n"
    "  monitor                 reinspect by --due-date, --due-hours or --due-cycles\n"
    "                          (at least one; the earliest reached governs)\n"
    "  repair                  repair under --repair-ref; the site's next inspection\n"
    "                          must be recorded as its post-repair baseline (kind\n"
    "                          post-repair)\n"
    "  refer-to-design-holder  ask the design holder, under --query-ref\n"
    "The disposition names the criteria revision the comparison used, and is signed\n"
    "with the key in FILE, which must be the key HANDLE (an engineer or a reviewer of\n"
    "the register) holds on the date. It is never edited: a later disposition\n"
    "supersedes it (--supersedes ID --reason TEXT), and both stay in the record.\n"
    "\n"
    "plyledger supports certified NDT staff and approved data; it does not replace\n"
    "them. Local regulations and the design holder's data govern.\n"
    "\n"
    "Options:\n"
    "      --comparison ID     the comparison (plyledger compare and history print it)\n"
    "      --airframe SERIAL, --site CODE [--task REF]\n"
    "                          instead: the site's latest comparison (of that check)\n"
    "      --change N[,N...]   the numbers of the changes it covers\n"
    "      --decision WORD     @DECISIONS@\n"
    "      --by HANDLE         who decides (plyledger people list)\n"
    "      --key FILE          their key file (plyledger new-key; mode 0600)\n"
    "      --date DATE         the signing date, YYYY-MM-DD (default today)\n"
    "      --due-date DATE     monitor: the next inspection is due by this date\n"
    "      --due-hours H       monitor: ... by these aircraft flight hours\n"
    "      --due-cycles N      monitor: ... by these aircraft cycles\n"
    "      --repair-ref REF    repair: the repair reference\n"
    "      --query-ref REF     refer-to-design-holder: the query reference\n"
    "      --rationale TEXT    the engineer's reasoning\n"
    "      --supersedes ID     the disposition this one replaces (with --reason)\n"
    "      --reason TEXT       why it is replaced\n"
    "  -s, --store PATH        the store (default $PLYLEDGER_STORE)\n"
    "      --wait SECONDS      @WAIT@\n"
    "      --json              print the disposition as JSON\n"
    "  -q, --quiet             print nothing on success\n"
    "  -h, --help              show this help\n";

static void print_disposition(const pl_disposition *d)
{
    printf("disposition %lld of %s site %s (comparison %lld, change ids %s): %s", (long long)d->id,
           d->airframe_serial, d->site_code, (long long)d->comparison_id, d->changes,
           d->decision);
    if (d->due_date[0] || !isnan(d->due_hours) || d->due_cycles >= 0) {
        printf(", next inspection due by");
        const char *sep = " ";
        if (d->due_date[0])
            printf("%s%s", sep, d->due_date), sep = " or ";
        if (!isnan(d->due_hours))
            printf("%s%g flight hours", sep, d->due_hours), sep = " or ";
        if (d->due_cycles >= 0)
            printf("%s%lld cycles", sep, (long long)d->due_cycles);
        int many = (d->due_date[0] != 0) + !isnan(d->due_hours) + (d->due_cycles >= 0);
        if (many > 1)
            printf(", whichever comes first");
    }
    if (d->repair_ref[0])
        printf(" under %s; the next inspection is the site's post-repair baseline",
               d->repair_ref);
    if (d->query_ref[0])
        printf(" (query %s)", d->query_ref);
    printf("\n  signed by %s on %s", d->handle, d->signed_on);
    if (d->criteria_id)
        printf(", under criteria record %lld", (long long)d->criteria_id);
    if (d->supersedes)
        printf("; supersedes disposition %lld: %s", (long long)d->supersedes, d->reason);
    if (d->superseded)
        printf("; SUPERSEDED by a later disposition");
    printf("\n");
    if (d->rationale[0])
        printf("  rationale: %s\n", d->rationale);
}

int cmd_dispose(int argc, char **argv)
{
    cli_common common;
    args a;
    memset(&a, 0, sizeof a);
    a.usage = dispose_usage;
    int rc = cli_parse(argc, argv, "", opts, &common, take_opt, &a, dispose_usage, dispose_help,
                       NULL);
    if (rc >= 0)
        return rc;
    if ((rc = only(&a, "dispose",
                   " comparison airframe site task change decision by key date due-date "
                   "due-hours due-cycles repair-ref query-ref rationale supersedes reason ")))
        return rc;
    if (!a.change || !a.decision || !a.by || !a.key)
        return cli_usage_error(dispose_usage, "--change, --decision, --by and --key are "
                               "required");
    pl_disposition d;
    memset(&d, 0, sizeof d);
    d.due_hours = NAN;
    d.due_cycles = -1;
    numbers m;
    char today[PL_DATE_SIZE];
    cli_today(today, sizeof today);
    if ((rc = comparison_options(&a, &d.comparison_id, dispose_usage)) ||
        (rc = parse_numbers(a.change, &m, dispose_usage)))
        return rc;
    if (a.supersedes &&
        (rc = parse_id("--supersedes", a.supersedes, &d.supersedes, dispose_usage)))
        return rc;
    if (a.due_hours) {
        if (cli_number("--due-hours", a.due_hours, &d.due_hours, dispose_usage))
            return CLI_USAGE;
        if (!(d.due_hours > 0) || isinf(d.due_hours))
            return cli_usage_error(dispose_usage, "--due-hours: expected flight hours above 0");
    }
    if (a.due_cycles) {
        long long c;
        if (cli_count("--due-cycles", a.due_cycles, &c, dispose_usage))
            return CLI_USAGE;
        if (c < 1)
            return cli_usage_error(dispose_usage, "--due-cycles: expected cycles from 1");
        d.due_cycles = c;
    }
    if ((rc = cli_text(d.decision, sizeof d.decision, a.decision, "--decision")) ||
        (rc = cli_key(d.handle, sizeof d.handle, a.by, "--by")) ||
        (rc = cli_text(d.signed_on, sizeof d.signed_on, a.date ? a.date : today, "--date")) ||
        (rc = cli_text(d.due_date, sizeof d.due_date, a.due_date, "--due-date")) ||
        (rc = cli_text(d.repair_ref, sizeof d.repair_ref, a.repair, "--repair-ref")) ||
        (rc = cli_text(d.query_ref, sizeof d.query_ref, a.query, "--query-ref")) ||
        (rc = cli_free(d.rationale, sizeof d.rationale, a.rationale, "--rationale")) ||
        (rc = cli_free(d.reason, sizeof d.reason, a.reason, "--reason")))
        return rc;
    pl_sign_key key;
    if ((rc = load_key(a.key, &key)))
        return rc;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, 0))) {
        pl_sign_key_wipe(&key);
        return rc;
    }
    pl_err err = { 0 };
    pl_id id = 0;
    int st = 0;
    if (!(rc = which_comparison(store, &a, &d.comparison_id)) &&
        !(rc = resolve(store, d.comparison_id, &m)))
        st = pl_store_add_disposition(store, &d, m.id, m.n, &key, &id, &err);
    pl_sign_key_wipe(&key);
    pl_disposition rec;
    if (!rc && !st)
        st = pl_store_get_disposition(store, id, &rec, &err);
    pl_store_close(store);
    if (rc || st)
        return rc ? rc : cli_fail_err(st, &err);
    if (common.json) {
        char *text = NULL;
        if ((st = pl_row_json(&text, PL_TABLE_DISPOSITION, &rec, &err)))
            return cli_fail_err(st, &err);
        cJSON *j = cJSON_CreateObject(), *o = cJSON_Parse(text);
        free(text);
        if (j) {
            cJSON_AddStringToObject(j, "caution", pl_caution());
            if (o)
                cJSON_AddItemToObject(j, "disposition", o);
        } else {
            cJSON_Delete(o);
        }
        return cli_print_json(j);
    }
    if (!common.quiet) {
        print_disposition(&rec);
        printf("%s\n", pl_caution());
    }
    return CLI_OK;
}

/* ---- dispositions ------------------------------------------------------- */

static const char list_usage[] = "[--airframe SERIAL] [--site CODE] [--comparison ID] [--json]";
static const char list_help[] =
    "usage: plyledger dispositions [--airframe SERIAL] [--site CODE] [--comparison ID]\n"
    "                              [--json]\n"
    "\n"
    "List dispositions, oldest first: what was decided about which changes, who\n"
    "signed and when, the criteria revision, and which were superseded (and why).\n"
    "Run plyledger verify to check every signature.\n"
    "\n"
    "plyledger supports certified NDT staff and approved data; it does not replace\n"
    "them. Local regulations and the design holder's data govern.\n"
    "\n"
    "Options:\n"
    "      --airframe SERIAL  only this airframe's\n"
    "      --site CODE        only this site's (with --airframe)\n"
    "      --comparison ID    only this comparison's\n"
    "  -s, --store PATH       the store (default $PLYLEDGER_STORE)\n"
    "      --json             print them as JSON\n"
    "  -q, --quiet            print nothing but the list\n"
    "  -h, --help             show this help\n";

typedef struct collect {
    pl_json_list *json;
    int n;
    int err;
} collect;

static int show(void *ud, const pl_disposition *d)
{
    collect *c = ud;
    c->n++;
    if (c->json) {
        pl_err e = { 0 };
        if (pl_json_list_add(c->json, PL_TABLE_DISPOSITION, d, &e))
            return 1;
        return 0;
    }
    print_disposition(d);
    return 0;
}

int cmd_dispositions(int argc, char **argv)
{
    cli_common common;
    args a;
    memset(&a, 0, sizeof a);
    a.usage = list_usage;
    int rc = cli_parse(argc, argv, "", opts, &common, take_opt, &a, list_usage, list_help, NULL);
    if (rc >= 0)
        return rc;
    if ((rc = only(&a, "dispositions", " airframe site comparison ")))
        return rc;
    if (a.site && !a.airframe)
        return cli_usage_error(list_usage, "--site goes with --airframe");
    pl_id comparison = 0;
    if (a.comparison && (rc = parse_id("--comparison", a.comparison, &comparison, list_usage)))
        return rc;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, PL_STORE_READONLY)))
        return rc;
    pl_err err = { 0 };
    collect c = { NULL, 0, 0 };
    int st = common.json ? pl_json_list_new(&c.json, &err) : 0;
    if (!st)
        st = pl_store_list_dispositions(store, a.airframe, a.site, comparison, show, &c, &err);
    pl_store_close(store);
    if (st) {
        pl_json_list_free(c.json);
        return cli_fail_err(st, &err);
    }
    if (common.json) {
        char *text = NULL;
        st = pl_json_list_text(&text, c.json, &err);
        pl_json_list_free(c.json);
        if (st)
            return cli_fail_err(st, &err);
        cJSON *arr = cJSON_Parse(text);
        free(text);
        cJSON *j = cJSON_CreateObject();
        if (j) {
            cJSON_AddStringToObject(j, "caution", pl_caution());
            if (arr)
                cJSON_AddItemToObject(j, "dispositions", arr);
        } else {
            cJSON_Delete(arr);
        }
        return cli_print_json(j);
    }
    if (!c.n && !common.quiet)
        printf("no dispositions\n");
    printf("%s\n", pl_caution());
    return CLI_OK;
}
