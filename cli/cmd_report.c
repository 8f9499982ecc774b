/*
 * cmd_report.c - plyledger report: the disposition report of a site
 * comparison or of a whole check, as one self-contained HTML file.
 */
#include "cli.h"

#include <stdlib.h>
#include <string.h>

static const char usage[] =
    "(--comparison ID | --airframe SERIAL --site CODE [--task REF] |\n"
    "                          --airframe SERIAL --task REF) --output FILE.html [--no-verify]";
static const char help[] =
    "usage: plyledger report --comparison ID --output FILE.html\n"
    "       plyledger report --airframe SERIAL --site CODE [--task REF] --output FILE.html\n"
    "       plyledger report --airframe SERIAL --task REF --output FILE.html\n"
    "\n"
    "Write the disposition report of one recorded site comparison (by its id, or\n"
    "the latest done comparison of the site, of the inspection under --task when\n"
    "given), or of a whole check (--airframe and --task without --site), as one\n"
    "HTML file that any browser shows and prints on A4, without a network and\n"
    "without scripts: every picture is embedded.\n"
    "\n"
    "A site report holds the site and where it is on the airframe; the baseline\n"
    "map, the current map on the baseline grid, their difference and the overlay\n"
    "with numbered outlines; the changes with their limits and margins; each\n"
    "track's history plot and growth forecast; the registration's quality; the\n"
    "criteria revision; the traceability of both inspections; the\n"
    "interpretations and dispositions with who signed them; and whether the\n"
    "record verifies. A check report adds the check's coverage, with any site\n"
    "not inspected first, a line per site, and the sections of the sites with\n"
    "something to decide.\n"
    "\n"
    "The report is built from the record alone and shows what was recorded. It\n"
    "supports certified staff and approved data, and does not replace them.\n"
    "\n"
    "Options:\n"
    "      --comparison ID    the recorded comparison\n"
    "      --airframe SERIAL  the airframe\n"
    "      --site CODE        the site (with --airframe)\n"
    "      --task REF         the check's task reference (case is ignored)\n"
    "  -o, --output FILE      the HTML file to write (required; a temporary file\n"
    "                         renamed into place)\n"
    "      --no-verify        do not verify the record first (the report says so)\n"
    "  -s, --store PATH       the store (default $PLYLEDGER_STORE)\n"
    "  -q, --quiet            print nothing on success\n"
    "      --json             print what was written as JSON\n"
    "  -h, --help             show this help\n";

enum { O_COMPARISON = 0x100, O_AIRFRAME, O_SITE, O_TASK, O_NO_VERIFY };
static const struct option opts[] = {
    { "comparison", required_argument, NULL, O_COMPARISON },
    { "airframe", required_argument, NULL, O_AIRFRAME },
    { "site", required_argument, NULL, O_SITE },
    { "task", required_argument, NULL, O_TASK },
    { "output", required_argument, NULL, 'o' },
    { "no-verify", no_argument, NULL, O_NO_VERIFY },
    { NULL, 0, NULL, 0 },
};

typedef struct report_args {
    const char *comparison, *airframe, *site, *task, *output;
    int no_verify;
} report_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    report_args *a = ctx;
    switch (opt) {
    case O_COMPARISON: a->comparison = arg; break;
    case O_AIRFRAME: a->airframe = arg; break;
    case O_SITE: a->site = arg; break;
    case O_TASK: a->task = arg; break;
    case O_NO_VERIFY: a->no_verify = 1; break;
    default: a->output = arg; break;
    }
    return 0;
}

int cmd_report(int argc, char **argv)
{
    cli_common common;
    report_args a = { 0 };
    int rc = cli_parse(argc, argv, "o:", opts, &common, take_opt, &a, usage, help, NULL);
    if (rc >= 0)
        return rc;
    long long cid = 0;
    if (a.comparison) {
        if (a.airframe || a.site || a.task)
            return cli_usage_error(usage, "--comparison names the comparison: leave out "
                                          "--airframe, --site and --task");
        if ((rc = cli_count("--comparison", a.comparison, &cid, usage)))
            return rc;
    } else if (!a.airframe || (!a.site && !a.task)) {
        return cli_usage_error(usage, "give --comparison, or --airframe with --site or --task");
    }
    if (!a.output)
        return cli_usage_error(usage, "--output FILE.html is required");
    if (cli_check_text(a.task, CLI_NAME, "--task"))
        return CLI_ERROR;
    pl_outfile *of = NULL;
    if ((rc = cli_open_output(&of, &common, a.output)))
        return rc;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, PL_STORE_READONLY))) {
        pl_outfile_abort(of);
        return rc;
    }
    pl_err err = { 0 };
    pl_report_options ro = PL_REPORT_OPTIONS_INIT;
    ro.verify = !a.no_verify;
    char *html = NULL;
    size_t len = 0;
    int st = PL_OK;
    if (!cid && a.site) {
        pl_id id = 0;
        st = pl_store_find_comparison(store, a.airframe, a.site, a.task, &id, &err);
        cid = (long long)id;
    }
    if (!st && cid) {
        st = pl_report_site(&html, &len, store, (pl_id)cid, &ro, &err);
    } else if (!st) {
        cli_progress prog;
        cli_progress_init(&prog, "report", &common);
        st = pl_report_check(&html, &len, store, a.airframe, a.task, &ro, cli_progress_fn, &prog,
                             &err);
        cli_progress_done(&prog);
    }
    pl_store_close(store);
    if (st) {
        pl_outfile_abort(of);
        return cli_fail_err(st, &err);
    }
    if (fwrite(html, 1, len, pl_outfile_stream(of)) != len) {
        st = PL_EIO;
        snprintf(err.msg, sizeof err.msg, "%s: cannot write", a.output);
    }
    free(html);
    st = pl_outfile_finish(of, st, &err);
    if (st)
        return cli_fail_err(st, &err);
    if (common.json) {
        cJSON *j = cJSON_CreateObject();
        cJSON_AddStringToObject(j, "report", a.output);
        cJSON_AddNumberToObject(j, "bytes", (double)len);
        if (cid)
            cJSON_AddNumberToObject(j, "comparison", (double)cid);
        else
            cJSON_AddNullToObject(j, "comparison");
        return cli_print_json(j);
    }
    if (!common.quiet)
        printf("report written to %s (%.1f KiB)\n", a.output, (double)len / 1024.0);
    return CLI_OK;
}
