/*
 * cmd_record.c - plyledger record: inspections with their traceability and
 * maps, for one site from options or many from a JSON sidecar.
 */
#include "cli.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

static const char usage[] =
    "(--sidecar FILE | --airframe SERIAL --site CODE --map FILE...) [options]";
static const char help_head[] =
    "usage: plyledger record --airframe SERIAL --site CODE --kind KIND --date DATE\n"
    "                        [traceability options] --map FILE [--map FILE...]\n"
    "       plyledger record --sidecar FILE.json [options that override it]\n"
    "\n"
    "Record an inspection of a site with the maps it produced, or inspections of\n"
    "many sites at once from a JSON sidecar (see README, \"Recording sidecar\").\n"
    "Everything is recorded, or nothing: a bad map leaves the store as it was.\n"
    "\n"
    "      --sidecar FILE        JSON describing one or many sites and their maps\n";
static const char help_tail[] =
    "Maps:\n"
    "      --map FILE            a map file (.png, .npy, .csv); repeat for more\n"
    "      --quantity LIST       quantities of the channels, comma separated\n"
    "                            (see 'plyledger quantities'); needed for .npy/.csv\n"
    "      --unit LIST           their units (default: each quantity's usual unit)\n"
    "      --pitch MM[,MM]       mm per pixel along u[,v] (default: file, else site)\n"
    "      --infinite-as-no-data an infinite value in a map becomes no data instead of\n"
    "                            refusing the file; the option and the count are\n"
    "                            recorded with the map\n"
    "Common:\n"
    "  -s, --store PATH          the store (default $PLYLEDGER_STORE)\n"
    "      --wait SECONDS        @WAIT@\n"
    "      --json                print what was recorded as JSON\n"
    "  -q, --quiet               no progress, nothing printed on success\n"
    "  -h, --help                show this help\n";

enum { O_SIDECAR = 0x100, O_MAP, O_QUANTITY, O_UNIT, O_PITCH, O_INFINITE };

static const struct option opts[] = {
    { "sidecar", required_argument, NULL, O_SIDECAR },
    CLI_INSPECTION_OPTIONS,
    { "map", required_argument, NULL, O_MAP },
    { "quantity", required_argument, NULL, O_QUANTITY },
    { "unit", required_argument, NULL, O_UNIT },
    { "pitch", required_argument, NULL, O_PITCH },
    { "infinite-as-no-data", no_argument, NULL, O_INFINITE },
    { NULL, 0, NULL, 0 },
};

#define MAX_MAPS 256

typedef struct record_args {
    cli_inspection_args insp;
    const char *sidecar, *quantity, *unit;
    double pitch_u, pitch_v;
    const char *maps[MAX_MAPS];
    int nmaps;
    int infinite_as_nodata;
} record_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    record_args *a = ctx;
    switch (opt) {
    case O_SIDECAR: a->sidecar = arg; break;
    case O_QUANTITY: a->quantity = arg; break;
    case O_UNIT: a->unit = arg; break;
    case O_PITCH: return cli_pitch("--pitch", arg, &a->pitch_u, &a->pitch_v, usage);
    case O_INFINITE: a->infinite_as_nodata = 1; break;
    case O_MAP:
        if (a->nmaps == MAX_MAPS)
            return cli_usage_error(usage, "at most %d --map files", MAX_MAPS);
        a->maps[a->nmaps++] = arg;
        break;
    default:
        return cli_inspection_take(&a->insp, opt, arg, usage);
    }
    return 0;
}

static int report(const pl_record *rec, const cli_common *common)
{
    size_t nmaps = 0;
    for (size_t i = 0; i < rec->nsites; i++)
        nmaps += rec->sites[i].nmaps;
    if (common->json) {
        cJSON *arr = cJSON_CreateArray();
        for (size_t i = 0; i < rec->nsites; i++) {
            const pl_record_site *s = &rec->sites[i];
            cJSON *o = cJSON_CreateObject();
            cJSON_AddStringToObject(o, "airframe", s->insp.airframe_serial);
            cJSON_AddStringToObject(o, "site", s->insp.site_code);
            cJSON_AddStringToObject(o, "kind", s->insp.kind);
            cJSON_AddStringToObject(o, "date", s->insp.performed_on);
            cJSON_AddBoolToObject(o, "simulated", s->insp.simulated == 1);
            cJSON_AddNumberToObject(o, "inspection", (double)s->inspection_key);
            cJSON *maps = cJSON_AddArrayToObject(o, "maps");
            for (size_t j = 0; j < s->nmaps; j++)
                cJSON_AddItemToArray(maps, cJSON_CreateNumber((double)s->maps[j].map_id));
            cJSON_AddItemToArray(arr, o);
        }
        return cli_print_json(arr);
    }
    if (common->quiet)
        return CLI_OK;
    const char *hdr[] = { "AIRFRAME", "SITE", "KIND", "DATE", "DATA", "INSPECTION", "MAPS" };
    cli_table *t = cli_table_new(7, hdr);
    for (size_t i = 0; i < rec->nsites; i++) {
        const pl_record_site *s = &rec->sites[i];
        char id[32], maps[256] = "";
        snprintf(id, sizeof id, "%lld", (long long)s->inspection_key);
        for (size_t j = 0; j < s->nmaps; j++) {
            size_t len = strlen(maps);
            snprintf(maps + len, sizeof maps - len, "%s%lld", j ? "," : "",
                     (long long)s->maps[j].map_id);
        }
        const char *row[] = { s->insp.airframe_serial, s->insp.site_code, s->insp.kind,
                              s->insp.performed_on, pl_history_data_word(s->insp.simulated), id,
                              s->nmaps ? maps : "-" };
        cli_table_row(t, row);
    }
    cli_table_print(t, stdout);
    cli_table_free(t);
    printf("recorded %zu inspection(s) with %zu map(s)\n", rec->nsites, nmaps);
    return CLI_OK;
}

int cmd_record(int argc, char **argv)
{
    cli_common common;
    record_args a;
    memset(&a, 0, sizeof a);
    cli_inspection_init(&a.insp);
    a.pitch_u = a.pitch_v = NAN;
    char help[4096];
    snprintf(help, sizeof help, "%s%s%s", help_head, cli_inspection_help, help_tail);
    int first;
    int rc = cli_parse(argc, argv, "", opts, &common, take_opt, &a, usage, help, &first);
    if (rc >= 0)
        return rc;
    if (first < argc)
        return cli_usage_error(usage, "unexpected operand '%s' (maps are given with --map)",
                               argv[first]);
    if (!a.sidecar && (!a.insp.airframe || !a.insp.site))
        return cli_usage_error(usage, "give --sidecar, or --airframe and --site");
    if (a.sidecar && (a.insp.site || a.nmaps))
        return cli_usage_error(usage, "--site and --map go without --sidecar; "
                                      "list sites and maps in the sidecar instead");
    if (!a.sidecar && !a.nmaps)
        return cli_usage_error(usage, "give at least one --map FILE: an inspection is recorded "
                                      "with the maps it produced");
    if (!a.nmaps && (a.quantity || a.unit || !isnan(a.pitch_u) || a.infinite_as_nodata))
        return cli_usage_error(usage, "--quantity, --unit, --pitch and --infinite-as-no-data "
                                      "describe --map files (a sidecar says them per map)");

    pl_err err = { 0 };
    pl_record *rec = NULL;
    char *params = NULL;
    int st;
    if (a.insp.parameters && (rc = cli_read_json_object(a.insp.parameters, &params)))
        return rc;
    if (a.sidecar) {
        st = pl_record_load_sidecar(&rec, a.sidecar, &err);
        if (st) {
            free(params);
            return cli_fail_err(st, &err);
        }
    } else {
        pl_inspection in;
        memset(&in, 0, sizeof in);
        in.aircraft_hours = NAN;
        in.aircraft_cycles = -1;
        if ((rc = cli_key(in.site_code, sizeof in.site_code, a.insp.site, "--site"))) {
            free(params);
            return rc;
        }
        size_t idx;
        st = pl_record_new(&rec, &err);
        if (!st)
            st = pl_record_add_site(rec, &in, &idx, &err);
        for (int i = 0; !st && i < a.nmaps; i++) {
            st = pl_record_add_map(rec, idx, a.maps[i], a.quantity, a.unit, a.pitch_u,
                                   a.pitch_v, &err);
            if (!st)
                rec->sites[idx].maps[i].infinite_as_nodata = a.infinite_as_nodata;
        }
        if (st) {
            free(params);
            pl_record_free(rec);
            return cli_fail_err(st, &err);
        }
    }
    for (size_t i = 0; i < rec->nsites; i++)
        if ((rc = cli_inspection_apply(&a.insp, &rec->sites[i].insp, params))) {
            free(params);
            pl_record_free(rec);
            return rc;
        }
    free(params);

    pl_store *store;
    if ((rc = cli_open_store(&store, &common, 0))) {
        pl_record_free(rec);
        return rc;
    }
    cli_progress prog;
    cli_progress_init(&prog, "recording", &common);
    st = pl_record_apply(store, rec, cli_progress_fn, &prog, &err);
    cli_progress_done(&prog);
    pl_store_close(store);
    if (st) {
        pl_record_free(rec);
        return cli_fail_err(st, &err);
    }
    rc = report(rec, &common);
    pl_record_free(rec);
    return rc;
}
