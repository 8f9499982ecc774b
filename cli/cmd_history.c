/*
 * cmd_history.c - plyledger history: every inspection of one site, oldest
 * first, with its traceability and maps.
 */
#include "cli.h"

#include <stdlib.h>
#include <string.h>

static const char usage[] = "--airframe SERIAL --site CODE [--json | --csv] [--output FILE]";
static const char help[] =
    "usage: plyledger history --airframe SERIAL --site CODE [--json | --csv]\n"
    "                         [--output FILE]\n"
    "\n"
    "Show a site's whole record: where it is on the airframe, then every\n"
    "inspection of it, oldest first, with who did it, how, the maps it produced\n"
    "(size, pitch, quantities and content digest), each map's registrations onto\n"
    "the baseline and the inspection's comparisons. An inspection of simulated data\n"
    "says SIMULATED DATA. --json gives the same record, each registration in the\n"
    "shape 'plyledger register --json' prints. --csv gives one row per inspection\n"
    "with its latest comparison's counts (README.md, \"Tables\", names the\n"
    "columns).\n"
    "\n"
    "Options:\n"
    "      --airframe SERIAL  the airframe (required)\n"
    "      --site CODE        the site (required)\n"
    "  -s, --store PATH       the store (default $PLYLEDGER_STORE)\n"
    "      --json             print JSON\n"
    "      --csv              print CSV\n"
    "  -o, --output FILE      write there (a temporary file renamed into place)\n"
    "  -h, --help             show this help\n";

enum { O_AIRFRAME = 0x100, O_SITE, O_CSV };
static const struct option opts[] = {
    { "airframe", required_argument, NULL, O_AIRFRAME },
    { "site", required_argument, NULL, O_SITE },
    { "csv", no_argument, NULL, O_CSV },
    { "output", required_argument, NULL, 'o' },
    { NULL, 0, NULL, 0 },
};

typedef struct hist_args {
    const char *airframe, *site, *output;
    int csv;
} hist_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    hist_args *a = ctx;
    switch (opt) {
    case O_AIRFRAME: a->airframe = arg; break;
    case O_SITE: a->site = arg; break;
    case O_CSV: a->csv = 1; break;
    default: a->output = arg; break;
    }
    return 0;
}

/* One registration of a map onto its baseline, under the map. */
static void print_registration(const pl_registration_record *g)
{
    if (strcmp(g->status, "refused") == 0)
        printf("        registration %lld onto map %lld refused: %s\n", (long long)g->id,
               (long long)g->baseline_map_id, g->refusal);
    else
        printf("        registration %lld onto map %lld (%s): shift %+.2f, %+.2f mm, rotation "
               "%+.2f deg, ncc %.3f, overlap %.0f %%%s%s\n",
               (long long)g->id, (long long)g->baseline_map_id, g->status, g->shift_u_mm,
               g->shift_v_mm, g->rotation_deg, g->ncc, 100.0 * g->overlap_fraction,
               g->supplied_by[0] ? ", supplied by " : "", g->supplied_by);
}

static void print_map(const pl_history_map *hm)
{
    const pl_map_record *m = &hm->map;
    printf("      map %lld: %ux%u px at %g x %g mm, %s from %s, sha256 %.16s...\n",
           (long long)m->id, m->width, m->height, m->pitch_u, m->pitch_v, m->origin,
           m->source[0] ? m->source : "-", m->sha256);
    /* channels, wrapped to keep lines readable */
    int col = printf("        ");
    for (uint32_t c = 0; c < m->nchannels; c++) {
        char item[160];
        int n = snprintf(item, sizeof item, "%s%s%s [%s]%s", m->channels[c].quantity,
                         m->channels[c].label[0] ? " " : "", m->channels[c].label,
                         m->channels[c].unit, c + 1 < m->nchannels ? ";" : "");
        if (col > 8 && col + 1 + n > 96) {
            printf("\n");
            col = printf("        ");
        }
        col += printf("%s%s", col > 8 ? " " : "", item);
    }
    printf("\n");
    for (size_t k = 0; k < hm->nregistrations; k++)
        print_registration(&hm->registrations[k]);
}

/* A comparison of the inspection with a baseline. */
static void print_comparison(const pl_comparison_record *c)
{
    if (strcmp(c->status, "not-done") == 0)
        printf("      comparison %lld with inspection %lld not done: %s\n", (long long)c->id,
               (long long)c->baseline_inspection, c->not_done_reason);
    else {
        printf("      comparison %lld with inspection %lld done\n", (long long)c->id,
               (long long)c->baseline_inspection);
        char *text = NULL;
        pl_err err = { 0 };
        if (!pl_comparison_text(&text, c, "        ", &err))
            fputs(text, stdout);
        free(text);
    }
}

static void print_site(const pl_site *s)
{
    printf("site %s on airframe %s\n", s->code, s->airframe_serial);
    printf("  zone %s, frame %s, stringer %s; %s\n", s->zone[0] ? s->zone : "-",
           s->frame[0] ? s->frame : "-", s->stringer[0] ? s->stringer : "-",
           s->description[0] ? s->description : "(no description)");
    printf("  method %s; material %s", s->method, s->material[0] ? s->material : "-");
    if (s->thickness_mm == s->thickness_mm)
        printf(", %g mm thick", s->thickness_mm);
    printf("\n  map frame: origin %g, %g, %g %s (%s); u (%g, %g, %g); v (%g, %g, %g)\n",
           s->map_frame.origin[0], s->map_frame.origin[1], s->map_frame.origin[2],
           s->map_frame.unit, s->map_frame.system, s->map_frame.u[0], s->map_frame.u[1],
           s->map_frame.u[2], s->map_frame.v[0], s->map_frame.v[1], s->map_frame.v[2]);
}

static void print_inspection(const pl_inspection *in)
{
    char hours[32], cycles[32];
    cli_fmt_num(hours, sizeof hours, in->aircraft_hours);
    if (in->aircraft_cycles >= 0)
        snprintf(cycles, sizeof cycles, "%lld", (long long)in->aircraft_cycles);
    else
        snprintf(cycles, sizeof cycles, "-");
    printf("\n  %s  %-11s inspection %lld  task %s  FH %s  FC %s%s\n", in->performed_on,
           in->kind, (long long)in->key, in->task_ref[0] ? in->task_ref : "-", hours, cycles,
           in->simulated == 1 ? "  SIMULATED DATA"
           : in->simulated < 0 ? "  (simulated or real: not recorded)" : "");
    if (in->hours_reason[0])
        printf("      hours and cycles out of order: %s\n", in->hours_reason);
    printf("      procedure %s rev %s; inspector %s (level %s)\n", in->procedure,
           in->procedure_rev, in->inspector, in->inspector_level);
    printf("      equipment: %s\n", in->equipment);
    printf("      calibration: %s; software %s\n", in->calibration_ref, in->software_version);
    if (in->id != in->key)
        printf("      (corrected record: version %lld)\n", (long long)in->id);
    if (in->notes[0])
        printf("      notes: %s\n", in->notes);
}

int cmd_history(int argc, char **argv)
{
    cli_common common;
    hist_args a = { 0 };
    int rc = cli_parse(argc, argv, "o:", opts, &common, take_opt, &a, usage, help, NULL);
    if (rc >= 0)
        return rc;
    if (!a.airframe || !a.site)
        return cli_usage_error(usage, "--airframe and --site are required");
    if (a.csv && common.json)
        return cli_usage_error(usage, "--csv and --json: choose one");
    if (a.output && !a.csv && !common.json)
        return cli_usage_error(usage, "--output writes --json or --csv");
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, PL_STORE_READONLY)))
        return rc;
    pl_err err = { 0 };
    pl_history *h = NULL;
    int st = pl_history_load(&h, store, a.airframe, a.site, &err);
    pl_store_close(store);
    if (st)
        return cli_fail_err(st, &err);
    if (common.json || a.csv) {
        char *text = NULL;
        st = common.json ? pl_history_json(&text, h, &err) : pl_history_csv(&text, h, &err);
        pl_history_free(h);
        if (st)
            return cli_fail_err(st, &err);
        rc = cli_write_text(&common, a.output, text);
        free(text);
        return rc;
    }
    print_site(&h->site);
    if (!h->ninspections)
        printf("\n  no inspections recorded\n");
    for (size_t i = 0; i < h->ninspections; i++) {
        const pl_history_inspection *hi = &h->inspections[i];
        print_inspection(&hi->inspection);
        for (size_t j = 0; j < hi->nmaps; j++)
            print_map(&hi->maps[j]);
        if (!hi->nmaps)
            printf("      no maps\n");
        for (size_t j = 0; j < hi->ncomparisons; j++)
            print_comparison(&hi->comparisons[j]);
    }
    pl_history_free(h);
    cli_print_caution();
    return CLI_OK;
}
