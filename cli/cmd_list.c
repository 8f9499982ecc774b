/*
 * cmd_list.c - plyledger airframes, sites and inspections: listings with
 * filters, as a table or --json.
 */
#include "cli.h"

#include <string.h>

enum {
    O_TYPE = 0x100, O_OPERATOR, O_AIRFRAME, O_ZONE, O_METHOD, O_SITE, O_KIND, O_FROM, O_TO,
};

typedef struct list_args {
    const char *type, *operator_name, *airframe, *zone, *method, *site, *kind, *from, *to;
} list_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    list_args *a = ctx;
    switch (opt) {
    case O_TYPE: a->type = arg; break;
    case O_OPERATOR: a->operator_name = arg; break;
    case O_AIRFRAME: a->airframe = arg; break;
    case O_ZONE: a->zone = arg; break;
    case O_METHOD: a->method = arg; break;
    case O_SITE: a->site = arg; break;
    case O_KIND: a->kind = arg; break;
    case O_FROM: a->from = arg; break;
    case O_TO: a->to = arg; break;
    default: return CLI_USAGE;
    }
    return 0;
}

/* What a listing collects into: the records as JSON, or a table. */
typedef struct sink {
    pl_json_list *list;
    cli_table *table;
    size_t count;
    int failed;
    pl_err err;
} sink;

/* A sink for --json or for a table with these headers. */
static void sink_init(sink *s, const cli_common *common, int ncols, const char *const *headers)
{
    memset(s, 0, sizeof *s);
    if (!common->json)
        s->table = cli_table_new(ncols, headers);
    else if (pl_json_list_new(&s->list, &s->err))
        s->failed = PL_ENOMEM;
}

/* Take a record for JSON; 1 (stop) on failure. */
static int sink_json(sink *s, pl_table table, const void *record)
{
    if (pl_json_list_add(s->list, table, record, &s->err)) {
        s->failed = PL_ENOMEM;
        return 1;
    }
    return 0;
}

static int finish(pl_store *store, int st, pl_err *err, sink *s, const char *noun,
                  const cli_common *common)
{
    pl_store_close(store);
    if (!st && s->failed) {
        st = s->failed;
        *err = s->err;
    }
    char *text = NULL;
    if (!st && common->json)
        st = pl_json_list_text(&text, s->list, err);
    pl_json_list_free(s->list);
    if (st || common->json) {
        cli_table_free(s->table);
        return cli_print_json_text(st, &text, err);
    }
    if (s->count)
        cli_table_print(s->table, stdout);
    else if (!common->quiet)
        printf("no %s match\n", noun);
    cli_table_free(s->table);
    return CLI_OK;
}

/* ---- airframes ------------------------------------------------------------ */

static const char af_usage[] = "[--type TYPE] [--operator NAME] [--json]";
static const char af_help[] =
    "usage: plyledger airframes [--type TYPE] [--operator NAME] [--json]\n"
    "\n"
    "List the airframes in the store, by serial.\n"
    "\n"
    "Options:\n"
    "      --type TYPE       only this aircraft type\n"
    "      --operator NAME   only airframes this operator operates now\n"
    "  -s, --store PATH      the store (default $PLYLEDGER_STORE)\n"
    "      --json            print JSON\n"
    "  -h, --help            show this help\n";

static const struct option af_opts[] = {
    { "type", required_argument, NULL, O_TYPE },
    { "operator", required_argument, NULL, O_OPERATOR },
    { NULL, 0, NULL, 0 },
};

static int on_airframe(void *ud, const pl_airframe *af)
{
    sink *s = ud;
    s->count++;
    if (s->list)
        return sink_json(s, PL_TABLE_AIRFRAME, af);
    else {
        const char *row[] = { af->serial, af->aircraft_type,
                              af->manufactured[0] ? af->manufactured : "-",
                              af->operator_name[0] ? af->operator_name : "-",
                              af->operator_since[0] ? af->operator_since : "-" };
        cli_table_row(s->table, row);
    }
    return 0;
}

int cmd_airframes(int argc, char **argv)
{
    cli_common common;
    list_args a = { 0 };
    int rc = cli_parse(argc, argv, "", af_opts, &common, take_opt, &a, af_usage, af_help, NULL);
    if (rc >= 0)
        return rc;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, PL_STORE_READONLY)))
        return rc;
    const char *hdr[] = { "SERIAL", "TYPE", "MANUFACTURED", "OPERATOR", "SINCE" };
    sink s;
    sink_init(&s, &common, 5, hdr);
    pl_airframe_filter f = { a.type, a.operator_name };
    pl_err err = { 0 };
    int st = pl_store_list_airframes(store, &f, on_airframe, &s, &err);
    return finish(store, st, &err, &s, "airframes", &common);
}

/* ---- sites ------------------------------------------------------------------ */

static const char site_usage[] = "[--airframe SERIAL] [--zone ZONE] [--method METHOD] [--json]";
static const char site_help[] =
    "usage: plyledger sites [--airframe SERIAL] [--zone ZONE] [--method METHOD] [--json]\n"
    "\n"
    "List inspection sites with their structural location and map frame.\n"
    "\n"
    "Options:\n"
    "      --airframe SERIAL  only this airframe's sites\n"
    "      --zone ZONE        only this zone\n"
    "      --method METHOD    only sites inspected by this method\n"
    "  -s, --store PATH       the store (default $PLYLEDGER_STORE)\n"
    "      --json             print JSON (with the full map frame)\n"
    "  -h, --help             show this help\n";

static const struct option site_opts[] = {
    { "airframe", required_argument, NULL, O_AIRFRAME },
    { "zone", required_argument, NULL, O_ZONE },
    { "method", required_argument, NULL, O_METHOD },
    { NULL, 0, NULL, 0 },
};

static int on_site(void *ud, const pl_site *site)
{
    sink *s = ud;
    s->count++;
    if (s->list)
        return sink_json(s, PL_TABLE_SITE, site);
    char origin[96], size[48], pitch[48];
    snprintf(origin, sizeof origin, "%g/%g/%g", site->map_frame.origin[0],
             site->map_frame.origin[1], site->map_frame.origin[2]);
    if (site->width_px)
        snprintf(size, sizeof size, "%ux%u", site->width_px, site->height_px);
    else
        snprintf(size, sizeof size, "any");
    if (site->pitch_u == site->pitch_v)
        snprintf(pitch, sizeof pitch, "%g", site->pitch_u);
    else
        snprintf(pitch, sizeof pitch, "%g,%g", site->pitch_u, site->pitch_v);
    const char *row[] = { site->airframe_serial, site->code, site->zone[0] ? site->zone : "-",
                          site->frame[0] ? site->frame : "-",
                          site->stringer[0] ? site->stringer : "-", site->method, origin, size,
                          pitch };
    cli_table_row(s->table, row);
    return 0;
}

int cmd_sites(int argc, char **argv)
{
    cli_common common;
    list_args a = { 0 };
    int rc = cli_parse(argc, argv, "", site_opts, &common, take_opt, &a, site_usage, site_help,
                       NULL);
    if (rc >= 0)
        return rc;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, PL_STORE_READONLY)))
        return rc;
    const char *hdr[] = { "AIRFRAME", "SITE", "ZONE", "FRAME", "STRINGER", "METHOD",
                          "ORIGIN (STA/BL/WL)", "SIZE PX", "PITCH MM" };
    sink s;
    sink_init(&s, &common, 9, hdr);
    pl_site_filter f = { a.airframe, a.zone, a.method };
    pl_err err = { 0 };
    int st = PL_OK;
    if (a.airframe) {
        pl_airframe af;
        st = pl_store_get_airframe(store, a.airframe, &af, &err);
    }
    if (!st)
        st = pl_store_list_sites(store, &f, on_site, &s, &err);
    return finish(store, st, &err, &s, "sites", &common);
}

/* ---- inspections -------------------------------------------------------------- */

static const char insp_usage[] =
    "[--airframe SERIAL] [--site CODE] [--kind KIND] [--from DATE] [--to DATE] [--json]";
static const char insp_help[] =
    "usage: plyledger inspections [--airframe SERIAL] [--site CODE] [--kind KIND]\n"
    "                             [--from DATE] [--to DATE] [--json]\n"
    "\n"
    "List recorded inspections, oldest first. DATA says whether an inspection's data\n"
    "come from a simulation (simulated) or from the part (real).\n"
    "\n"
    "Options:\n"
    "      --airframe SERIAL  only this airframe\n"
    "      --site CODE        only this site (with --airframe)\n"
    "      --kind KIND        @KINDS@\n"
    "      --from DATE        performed on or after DATE (YYYY-MM-DD)\n"
    "      --to DATE          performed on or before DATE\n"
    "  -s, --store PATH       the store (default $PLYLEDGER_STORE)\n"
    "      --json             print JSON (with all traceability fields)\n"
    "  -h, --help             show this help\n";

static const struct option insp_opts[] = {
    { "airframe", required_argument, NULL, O_AIRFRAME },
    { "site", required_argument, NULL, O_SITE },
    { "kind", required_argument, NULL, O_KIND },
    { "from", required_argument, NULL, O_FROM },
    { "to", required_argument, NULL, O_TO },
    { NULL, 0, NULL, 0 },
};

static int on_inspection(void *ud, const pl_inspection *in)
{
    sink *s = ud;
    s->count++;
    if (s->list)
        return sink_json(s, PL_TABLE_INSPECTION, in);
    char id[32], hours[32], cycles[32];
    snprintf(id, sizeof id, "%lld", (long long)in->key);
    cli_fmt_num(hours, sizeof hours, in->aircraft_hours);
    if (in->aircraft_cycles >= 0)
        snprintf(cycles, sizeof cycles, "%lld", (long long)in->aircraft_cycles);
    else
        snprintf(cycles, sizeof cycles, "-");
    const char *row[] = { id, in->performed_on, in->airframe_serial, in->site_code, in->kind,
                          pl_history_data_word(in->simulated),
                          in->task_ref[0] ? in->task_ref : "-", hours, cycles, in->inspector };
    cli_table_row(s->table, row);
    return 0;
}

int cmd_inspections(int argc, char **argv)
{
    cli_common common;
    list_args a = { 0 };
    int rc = cli_parse(argc, argv, "", insp_opts, &common, take_opt, &a, insp_usage, insp_help,
                       NULL);
    if (rc >= 0)
        return rc;
    if (a.site && !a.airframe)
        return cli_usage_error(insp_usage, "--site needs --airframe (site codes are per airframe)");
    pl_err err = { 0 };
    if (a.kind && pl_inspection_kind_check(a.kind, &err))
        return cli_usage_error(insp_usage, "%s", pl_err_message(&err, PL_EINVAL));
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, PL_STORE_READONLY)))
        return rc;
    const char *hdr[] = { "INSPECTION", "DATE", "AIRFRAME", "SITE", "KIND", "DATA", "TASK",
                          "HOURS", "CYCLES", "INSPECTOR" };
    sink s;
    sink_init(&s, &common, 10, hdr);
    pl_inspection_filter f = { a.airframe, a.site, a.kind, a.from, a.to };
    int st = PL_OK;
    if (a.airframe && a.site) {
        pl_site site;
        st = pl_store_get_site(store, a.airframe, a.site, &site, &err);
    } else if (a.airframe) {
        pl_airframe af;
        st = pl_store_get_airframe(store, a.airframe, &af, &err);
    }
    if (!st)
        st = pl_store_list_inspections(store, &f, on_inspection, &s, &err);
    return finish(store, st, &err, &s, "inspections", &common);
}
