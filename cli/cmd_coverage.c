/*
 * cmd_coverage.c - plyledger coverage: which sites of an airframe's plan
 * one check inspected and compared, and how much of the plan that covers.
 */
#include "cli.h"

#include <stdlib.h>
#include <string.h>

static const char usage[] = "--airframe SERIAL --task REF [--json | --csv] [--output FILE]";
static const char help[] =
    "usage: plyledger coverage --airframe SERIAL --task REF [--json | --csv]\n"
    "                          [--output FILE]\n"
    "\n"
    "What one check of an airframe covered: the sites of its plan that were not\n"
    "inspected under the check's task reference, listed first and in capitals;\n"
    "then every site with its inspection, the registration's overlap with the\n"
    "baseline, the fraction and area compared, refusals with their reason, and\n"
    "the changes beyond their limits; then the plan's area inspected and\n"
    "compared, in mm2 and percent. --csv gives one row per site (README.md,\n"
    "\"Tables\", names the columns).\n"
    "\n"
    "Exit status: 0 when every site of the plan was inspected and compared; 4\n"
    "when a site was missed, refused or not compared (the output says which);\n"
    "1 on an error; 2 on a usage error.\n"
    "\n"
    "Options:\n"
    "      --airframe SERIAL  the airframe (required)\n"
    "      --task REF         the check's task reference, as recorded (required;\n"
    "                         case is ignored)\n"
    "      --csv              print CSV\n"
    "  -o, --output FILE      write there (a temporary file renamed into place)\n"
    "  -s, --store PATH       the store (default $PLYLEDGER_STORE)\n"
    "      --json             print JSON\n"
    "  -h, --help             show this help\n";

enum { O_AIRFRAME = 0x100, O_TASK, O_CSV };
static const struct option opts[] = {
    { "airframe", required_argument, NULL, O_AIRFRAME },
    { "task", required_argument, NULL, O_TASK },
    { "csv", no_argument, NULL, O_CSV },
    { "output", required_argument, NULL, 'o' },
    { NULL, 0, NULL, 0 },
};

enum { EXIT_NOT_COVERED = 4 };

typedef struct coverage_args {
    const char *airframe, *task, *output;
    int csv;
} coverage_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    coverage_args *a = ctx;
    switch (opt) {
    case O_AIRFRAME: a->airframe = arg; break;
    case O_TASK: a->task = arg; break;
    case O_CSV: a->csv = 1; break;
    default: a->output = arg; break;
    }
    return 0;
}

int cmd_coverage(int argc, char **argv)
{
    cli_common common;
    coverage_args a = { 0 };
    int rc = cli_parse(argc, argv, "o:", opts, &common, take_opt, &a, usage, help, NULL);
    if (rc >= 0)
        return rc;
    if (!a.airframe || !a.task)
        return cli_usage_error(usage, "--airframe and --task are required");
    if (a.csv && common.json)
        return cli_usage_error(usage, "--csv and --json: choose one");
    if (cli_check_text(a.task, CLI_NAME, "--task"))
        return CLI_ERROR;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, PL_STORE_READONLY)))
        return rc;
    pl_err err = { 0 };
    pl_coverage *c = NULL;
    int st = pl_coverage_load(&c, store, a.airframe, a.task, &err);
    pl_store_close(store);
    if (st)
        return cli_fail_err(st, &err);
    char *text = NULL;
    if (common.json)
        st = pl_coverage_json(&text, c, &err);
    else if (a.csv)
        st = pl_coverage_csv(&text, c, &err);
    else
        st = pl_coverage_text(&text, c, &err);
    int short_of_plan = c->missed || c->refused || c->not_compared;
    char line[1024];
    /* a missed site is said on stderr too, whatever the format */
    if (pl_coverage_missed_line(line, sizeof line, c) && (common.json || a.csv || a.output))
        fprintf(stderr, "plyledger: %s\n", line);
    pl_coverage_free(c);
    if (st)
        return cli_fail_err(st, &err);
    rc = cli_write_text(&common, a.output, text);
    free(text);
    if (rc)
        return rc;
    return short_of_plan ? EXIT_NOT_COVERED : CLI_OK;
}
