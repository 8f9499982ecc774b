/*
 * cmd_tracks.c - plyledger tracks: every indication of one site followed
 * through its inspections, its growth rate and when it would reach its
 * limit.
 */
#include "cli.h"

#include <stdlib.h>
#include <string.h>

static const char usage[] =
    "--airframe SERIAL --site CODE [--quantity Q [--label L]] [--json | --csv TABLE] "
    "[--output FILE]";
static const char help[] =
    "usage: plyledger tracks --airframe SERIAL --site CODE [--quantity Q [--label L]]\n"
    "                        [--json | --csv points|growth] [--output FILE]\n"
    "\n"
    "Follow every indication of a site through its inspections (a track), from\n"
    "the comparisons recorded against the site's baseline: at each inspection its\n"
    "area, length, contrast and depth against the date, flight hours and cycles,\n"
    "with the changes it took part in, splits and merges, and the dispositions\n"
    "that cover it. Then its growth rate, by weighted least squares of area\n"
    "against cycles, hours and time, with its standard uncertainty, and when the\n"
    "growth would reach the criteria limit (cycles, hours and date, with an\n"
    "interval), or 'not growing' when the slope is within its uncertainty.\n"
    "\n"
    "The model assumes linear growth between inspections. A forecast supports,\n"
    "and does not replace, the engineer's judgement and the design holder's data.\n"
    "A post-repair baseline starts new tracks; the earlier ones end there.\n"
    "\n"
    "The text lists the tracks that reached the minimum reportable size; --json\n"
    "and --csv hold every track. --csv points gives one row per track and\n"
    "inspection, --csv growth one row per track (README.md, \"Tables\", names the\n"
    "columns).\n"
    "\n"
    "Options:\n"
    "      --airframe SERIAL  the airframe (required)\n"
    "      --site CODE        the site (required)\n"
    "      --quantity Q       the compared quantity (default: that of the site's\n"
    "                         latest comparison)\n"
    "      --label L          its channel label (with --quantity)\n"
    "      --csv TABLE        points or growth, as CSV\n"
    "  -o, --output FILE      write there (a temporary file renamed into place)\n"
    "                         instead of standard output\n"
    "  -s, --store PATH       the store (default $PLYLEDGER_STORE)\n"
    "      --json             print JSON\n"
    "  -h, --help             show this help\n";

enum { O_AIRFRAME = 0x100, O_SITE, O_QUANTITY, O_LABEL, O_CSV };
static const struct option opts[] = {
    { "airframe", required_argument, NULL, O_AIRFRAME },
    { "site", required_argument, NULL, O_SITE },
    { "quantity", required_argument, NULL, O_QUANTITY },
    { "label", required_argument, NULL, O_LABEL },
    { "csv", required_argument, NULL, O_CSV },
    { "output", required_argument, NULL, 'o' },
    { NULL, 0, NULL, 0 },
};

typedef struct tracks_args {
    const char *airframe, *site, *quantity, *label, *csv, *output;
} tracks_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    tracks_args *a = ctx;
    switch (opt) {
    case O_AIRFRAME: a->airframe = arg; break;
    case O_SITE: a->site = arg; break;
    case O_QUANTITY: a->quantity = arg; break;
    case O_LABEL: a->label = arg; break;
    case O_CSV: a->csv = arg; break;
    default: a->output = arg; break;
    }
    return 0;
}

int cmd_tracks(int argc, char **argv)
{
    cli_common common;
    tracks_args a = { 0 };
    int rc = cli_parse(argc, argv, "o:", opts, &common, take_opt, &a, usage, help, NULL);
    if (rc >= 0)
        return rc;
    if (!a.airframe || !a.site)
        return cli_usage_error(usage, "--airframe and --site are required");
    if (a.label && !a.quantity)
        return cli_usage_error(usage, "--label needs --quantity");
    pl_track_table table = PL_TRACK_TABLE_POINTS;
    if (a.csv) {
        if (common.json)
            return cli_usage_error(usage, "--csv and --json: choose one");
        if (strcmp(a.csv, "points") == 0)
            table = PL_TRACK_TABLE_POINTS;
        else if (strcmp(a.csv, "growth") == 0)
            table = PL_TRACK_TABLE_GROWTH;
        else
            return cli_usage_error(usage, "--csv takes points or growth, not \"%s\"", a.csv);
    }
    if (cli_check_text(a.quantity, CLI_NAME, "--quantity") ||
        cli_check_text(a.label, CLI_NAME, "--label"))
        return CLI_ERROR;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, PL_STORE_READONLY)))
        return rc;
    pl_err err = { 0 };
    pl_track_options to = PL_TRACK_OPTIONS_INIT;
    to.quantity = a.quantity;
    to.label = a.label;
    pl_site_tracks *t = NULL;
    int st = pl_tracks_load(&t, store, a.airframe, a.site, &to, &err);
    pl_store_close(store);
    if (st)
        return cli_fail_err(st, &err);
    char *text = NULL;
    if (common.json)
        st = pl_site_tracks_json(&text, t, &err);
    else if (a.csv)
        st = pl_site_tracks_csv(&text, t, table, &err);
    else
        st = pl_site_tracks_text(&text, t, &err);
    pl_site_tracks_free(t);
    if (st)
        return cli_fail_err(st, &err);
    rc = cli_write_text(&common, a.output, text);
    free(text);
    return rc;
}
