/*
 * cmd_criteria.c - plyledger criteria import, list and show: criteria sets
 * for indication growth (plyledger/criteria.h) into and out of the record.
 * Every output of a set marked as example values says so.
 */
#include "cli.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

static const char caution[] =
    "Criteria support certified staff applying approved data; the design holder's data\n"
    "and local regulations govern.\n";

static const char group_usage[] = "import FILE | list | show NAME [--revision R]";
static const char group_help[] =
    "usage: plyledger criteria import FILE\n"
    "       plyledger criteria list [--name NAME]\n"
    "       plyledger criteria show NAME [--revision R]\n"
    "\n"
    "Criteria sets hold the written limits of indication growth, rule by rule,\n"
    "selected by method, quantity and site or zone pattern (README.md, \"Criteria\n"
    "sets\", describes the file). Revisions are kept: a new revision is a new\n"
    "record; the same name and revision with other content is refused.\n"
    "\n"
    "Each subcommand takes --help, --store PATH and --json.\n";

/* The marking line of an example-values set (nothing for approved data). */
static void print_marking(int64_t example_values)
{
    if (example_values)
        printf("*** %s ***\n", PL_CRITERIA_EXAMPLE_MARKING);
}

/* ---- import -------------------------------------------------------------------------- */

static const char import_usage[] = "FILE";
static const char import_help[] =
    "usage: plyledger criteria import FILE\n"
    "\n"
    "Check a criteria file and record it in the store. The whole file is\n"
    "refused, with the field that is wrong, or recorded whole. Importing the\n"
    "same content again changes nothing and says so.\n"
    "\n"
    "Options:\n"
    "  -s, --store PATH      the store (default $PLYLEDGER_STORE)\n"
    "      --wait SECONDS    @WAIT@\n"
    "      --json            print the recorded set's header as JSON, with\n"
    "                        \"already_recorded\"\n"
    "  -q, --quiet           print nothing on success\n"
    "  -h, --help            show this help\n";

static int criteria_import(int argc, char **argv)
{
    cli_common common;
    int first = 0;
    int rc = cli_parse(argc, argv, "", NULL, &common, NULL, NULL, import_usage, import_help,
                       &first);
    if (rc >= 0)
        return rc;
    if (argc - first != 1)
        return cli_usage_error(import_usage, argc - first ? "one FILE only" : "FILE is required");
    pl_err err = { 0 };
    pl_criteria *c = NULL;
    int st = pl_criteria_load(&c, argv[first], &err);
    if (st)
        return cli_fail_err(st, &err);
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, 0))) {
        pl_criteria_free(c);
        return rc;
    }
    pl_id id = 0;
    int already = 0;
    pl_criteria_record rec = { 0 };
    st = pl_store_add_criteria(store, c, &id, &already, &err);
    if (!st)
        st = pl_store_get_criteria(store, id, &rec, &err);
    pl_store_close(store);
    pl_criteria_free(c);
    if (st)
        return cli_fail_err(st, &err);
    if (common.json) {
        char *text = NULL;
        rc = cli_print_json_text(pl_criteria_record_json(&text, &rec, 0, already, &err), &text,
                                 &err);
    } else if (!common.quiet) {
        print_marking(rec.example_values);
        if (already)
            printf("criteria %s revision %s is already recorded with this content (row %lld); "
                   "nothing changed\n", rec.name, rec.revision, (long long)rec.id);
        else
            printf("recorded criteria %s revision %s (row %lld, %lld rules, from %s)\n",
                   rec.name, rec.revision, (long long)rec.id, (long long)rec.rule_count,
                   rec.source_document);
    }
    pl_criteria_record_clear(&rec);
    return rc;
}

/* ---- list ------------------------------------------------------------------------------- */

static const char list_usage[] = "[--name NAME] [--json]";
static const char list_help[] =
    "usage: plyledger criteria list [--name NAME] [--json]\n"
    "\n"
    "List the recorded criteria sets, every revision, by name and then in the\n"
    "order recorded.\n"
    "\n"
    "Options:\n"
    "      --name NAME       only the revisions of this set\n"
    "  -s, --store PATH      the store (default $PLYLEDGER_STORE)\n"
    "      --json            print JSON\n"
    "  -h, --help            show this help\n";

enum { O_NAME = 0x100, O_REVISION };

static const struct option list_opts[] = {
    { "name", required_argument, NULL, O_NAME },
    { NULL, 0, NULL, 0 },
};

typedef struct criteria_args {
    const char *name, *revision;
} criteria_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    criteria_args *a = ctx;
    switch (opt) {
    case O_NAME: a->name = arg; break;
    case O_REVISION: a->revision = arg; break;
    default: return CLI_USAGE;
    }
    return 0;
}

typedef struct listing {
    cli_table *table;
    size_t count, examples;
} listing;

static int on_criteria(void *ud, const pl_criteria_record *rec)
{
    listing *l = ud;
    char id[24], rules[24];
    snprintf(id, sizeof id, "%lld", (long long)rec->id);
    snprintf(rules, sizeof rules, "%lld", (long long)rec->rule_count);
    const char *row[] = { id, rec->name, rec->revision, rules, rec->source_document,
                          rec->recorded_at, rec->example_values ? PL_CRITERIA_EXAMPLE_MARKING
                                                                : "-" };
    cli_table_row(l->table, row);
    l->count++;
    l->examples += rec->example_values != 0;
    return 0;
}

static int criteria_list(int argc, char **argv)
{
    cli_common common;
    criteria_args a = { 0 };
    int rc = cli_parse(argc, argv, "", list_opts, &common, take_opt, &a, list_usage, list_help,
                       NULL);
    if (rc >= 0)
        return rc;
    if ((rc = cli_check_text(a.name, CLI_NAME, "--name")))
        return rc;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, PL_STORE_READONLY)))
        return rc;
    pl_err err = { 0 };
    if (common.json) {
        char *text = NULL;
        int st = pl_criteria_list_json(&text, store, a.name, &err);
        pl_store_close(store);
        return cli_print_json_text(st, &text, &err);
    }
    const char *hdr[] = { "ID", "NAME", "REVISION", "RULES", "SOURCE DOCUMENT", "RECORDED",
                          "MARKING" };
    listing l = { cli_table_new(7, hdr), 0, 0 };
    int st = pl_store_list_criteria(store, a.name, on_criteria, &l, &err);
    pl_store_close(store);
    if (st) {
        cli_table_free(l.table);
        return cli_fail_err(st, &err);
    }
    if (l.count) {
        cli_table_print(l.table, stdout);
        if (l.examples)
            printf("\nSets marked %s hold invented values, for demonstration only.\n",
                   PL_CRITERIA_EXAMPLE_MARKING);
        printf("%s", caution);
    } else if (!common.quiet) {
        printf("no criteria sets recorded%s%s\n", a.name ? " named " : "", a.name ? a.name : "");
    }
    cli_table_free(l.table);
    return CLI_OK;
}

/* ---- show ------------------------------------------------------------------------------- */

static const char show_usage[] = "NAME [--revision R] [--json]";
static const char show_help[] =
    "usage: plyledger criteria show NAME [--revision R] [--json]\n"
    "\n"
    "Show one recorded criteria set and its rules: the latest revision recorded,\n"
    "or revision R. Areas are in mm^2, contrasts in each rule's unit; \"-\" is a\n"
    "limit the rule does not give. A no-growth rule's limit is its repeatability.\n"
    "\n"
    "Options:\n"
    "      --revision R      this revision (default: the latest recorded)\n"
    "  -s, --store PATH      the store (default $PLYLEDGER_STORE)\n"
    "      --json            print the record with the whole set under \"content\"\n"
    "  -h, --help            show this help\n";

static const struct option show_opts[] = {
    { "revision", required_argument, NULL, O_REVISION },
    { NULL, 0, NULL, 0 },
};

static void print_set(const pl_criteria_record *rec, const pl_criteria *c)
{
    print_marking(rec->example_values);
    printf("criteria %s revision %s (row %lld, recorded %s)\n", c->name, c->revision,
           (long long)rec->id, rec->recorded_at);
    printf("source document: %s\n", c->source_document);
    char num[32];
    printf("area repeatability: %s mm^2\n",
           cli_fmt_num(num, sizeof num, c->repeatability_area_mm2));
    if (c->repeatability_basis[0])
        printf("repeatability basis: %s\n", c->repeatability_basis);
    if (c->note[0])
        printf("note: %s\n", c->note);
    printf("sha256: %s\n\n", rec->sha256);
    const char *hdr[] = { "#", "RULE", "KIND", "METHOD", "QUANTITY", "SITES", "UNIT",
                          "REPEAT MM2", "REPEAT CONTRAST", "MIN MM2", "NEW MM2",
                          "GROWTH MM2", "GROWTH %", "GROWTH CONTRAST", "VANISHED" };
    cli_table *t = cli_table_new(15, hdr);
    for (size_t i = 0; i < c->nrules; i++) {
        const pl_criteria_rule *u = &c->rules[i];
        char idx[24], sites[96], v[8][32];
        snprintf(idx, sizeof idx, "%zu", i);
        if (u->scope == PL_CRITERIA_ANY_SITE)
            snprintf(sites, sizeof sites, "every site");
        else
            snprintf(sites, sizeof sites, "%s %s", pl_criteria_scope_name(u->scope), u->pattern);
        double rep_area = isnan(u->repeatability_area_mm2) ? c->repeatability_area_mm2
                                                           : u->repeatability_area_mm2;
        int none = u->kind == PL_CRITERIA_NO_GROWTH;
        const double vals[] = { rep_area, u->repeatability_contrast, u->min_reportable_area_mm2,
                                u->new_reportable_area_mm2,
                                none ? rep_area : u->area_growth_mm2, u->area_growth_percent,
                                none ? u->repeatability_contrast : u->contrast_growth };
        for (int k = 0; k < 7; k++)
            cli_fmt_num(v[k], sizeof v[k], vals[k]);
        /* a no-growth rule's limits are its repeatability: marked so */
        if (none) {
            size_t n = strlen(v[4]);
            snprintf(v[4] + n, sizeof v[4] - n, "*");
            n = strlen(v[6]);
            snprintf(v[6] + n, sizeof v[6] - n, "*");
        }
        const char *row[] = { idx, u->name, pl_criteria_kind_name(u->kind), u->method,
                              u->quantity, sites, u->contrast_unit, v[0], v[1], v[2], v[3],
                              v[4], v[5], v[6], pl_criteria_vanished_name(u->vanished) };
        cli_table_row(t, row);
    }
    cli_table_print(t, stdout);
    cli_table_free(t);
    printf("\n* no-growth: any growth beyond the measurement's repeatability is a finding.\n"
           "A site no rule covers is not assessed against these criteria.\n%s", caution);
    print_marking(rec->example_values);
}

static int criteria_show(int argc, char **argv)
{
    cli_common common;
    criteria_args a = { 0 };
    int first = 0;
    int rc = cli_parse(argc, argv, "", show_opts, &common, take_opt, &a, show_usage, show_help,
                       &first);
    if (rc >= 0)
        return rc;
    if (argc - first != 1)
        return cli_usage_error(show_usage, argc - first ? "one NAME only" : "NAME is required");
    const char *name = argv[first];
    if ((rc = cli_check_text(name, CLI_NAME, "NAME")) ||
        (rc = cli_check_text(a.revision, CLI_NAME, "--revision")))
        return rc;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, PL_STORE_READONLY)))
        return rc;
    pl_err err = { 0 };
    pl_criteria_record rec = { 0 };
    int st = pl_store_find_criteria(store, name, a.revision, &rec, &err);
    pl_store_close(store);
    if (st)
        return cli_fail_err(st, &err);
    pl_criteria *c = NULL;
    st = pl_criteria_from_record(&c, &rec, &err);
    if (!st && common.json) {
        char *text = NULL;
        rc = cli_print_json_text(pl_criteria_record_json(&text, &rec, 1, -1, &err), &text, &err);
    } else if (!st) {
        print_set(&rec, c);
    } else {
        rc = cli_fail_err(st, &err);
    }
    pl_criteria_free(c);
    pl_criteria_record_clear(&rec);
    return rc;
}

/* ---- the group ---------------------------------------------------------------------------- */

int cmd_criteria(int argc, char **argv)
{
    if (argc < 2)
        return cli_usage_error(group_usage, "a subcommand is required: import, list or show");
    const char *sub = argv[1];
    if (strcmp(sub, "--help") == 0 || strcmp(sub, "-h") == 0)
        return cli_help(group_help);
    static const struct {
        const char *name, *current;
        int (*run)(int, char **);
    } subs[] = {
        { "import", "criteria import", criteria_import },
        { "list", "criteria list", criteria_list },
        { "show", "criteria show", criteria_show },
    };
    for (size_t i = 0; i < sizeof subs / sizeof subs[0]; i++)
        if (strcmp(sub, subs[i].name) == 0) {
            cli_current = subs[i].current;
            return subs[i].run(argc - 1, argv + 1);
        }
    return cli_usage_error(group_usage, "unknown subcommand '%s' (import, list or show)", sub);
}
