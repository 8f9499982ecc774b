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
static const char help[] =
    "usage: plyledger record --airframe SERIAL --site CODE --kind KIND --date DATE\n"
    "                        [traceability options] --map FILE [--map FILE...]\n"
    "       plyledger record --sidecar FILE.json [options that override it]\n"
    "\n"
    "Record an inspection of a site with the maps it produced, or inspections of\n"
    "many sites at once from a JSON sidecar (see README, \"Recording\"). Everything\n"
    "is recorded, or nothing: a bad map leaves the store as it was.\n"
    "\n"
    "What was inspected:\n"
    "      --sidecar FILE        JSON describing one or many sites and their maps\n"
    "      --airframe SERIAL     the airframe\n"
    "      --site CODE           the site (one site; use a sidecar for several)\n"
    "      --kind KIND           baseline, scheduled, unscheduled or post-repair\n"
    "      --date DATE           date performed, YYYY-MM-DD\n"
    "      --task REF            maintenance task or check reference\n"
    "      --hours N             aircraft flight hours at the inspection\n"
    "      --cycles N            aircraft flight cycles at the inspection\n"
    "Traceability (required, from options or the sidecar):\n"
    "      --procedure REF       approved inspection procedure\n"
    "      --procedure-rev REV   its revision\n"
    "      --equipment TEXT      equipment used\n"
    "      --calibration REF     calibration or reference standard\n"
    "      --inspector NAME      who performed it\n"
    "      --level LEVEL         the inspector's qualification level\n"
    "      --notes TEXT          free notes\n"
    "      --parameters FILE     processing parameters, a JSON object\n"
    "Maps:\n"
    "      --map FILE            a map file (.png, .npy, .csv); repeat for more\n"
    "      --quantity LIST       quantities of the channels, comma separated\n"
    "                            (see 'plyledger quantities'); needed for .npy/.csv\n"
    "      --unit LIST           their units (default: each quantity's usual unit)\n"
    "      --pitch MM[,MM]       mm per pixel along u[,v] (default: file, else site)\n"
    "Common:\n"
    "  -s, --store PATH          the store (default $PLYLEDGER_STORE)\n"
    "      --json                print what was recorded as JSON\n"
    "  -q, --quiet               no progress, nothing printed on success\n"
    "  -h, --help                show this help\n";

enum {
    O_SIDECAR = 0x100, O_AIRFRAME, O_SITE, O_KIND, O_DATE, O_TASK, O_HOURS, O_CYCLES,
    O_PROCEDURE, O_PROCEDURE_REV, O_EQUIPMENT, O_CALIBRATION, O_INSPECTOR, O_LEVEL,
    O_NOTES, O_PARAMETERS, O_MAP, O_QUANTITY, O_UNIT, O_PITCH,
};

static const struct option opts[] = {
    { "sidecar", required_argument, NULL, O_SIDECAR },
    { "airframe", required_argument, NULL, O_AIRFRAME },
    { "site", required_argument, NULL, O_SITE },
    { "kind", required_argument, NULL, O_KIND },
    { "date", required_argument, NULL, O_DATE },
    { "task", required_argument, NULL, O_TASK },
    { "hours", required_argument, NULL, O_HOURS },
    { "cycles", required_argument, NULL, O_CYCLES },
    { "procedure", required_argument, NULL, O_PROCEDURE },
    { "procedure-rev", required_argument, NULL, O_PROCEDURE_REV },
    { "equipment", required_argument, NULL, O_EQUIPMENT },
    { "calibration", required_argument, NULL, O_CALIBRATION },
    { "inspector", required_argument, NULL, O_INSPECTOR },
    { "level", required_argument, NULL, O_LEVEL },
    { "notes", required_argument, NULL, O_NOTES },
    { "parameters", required_argument, NULL, O_PARAMETERS },
    { "map", required_argument, NULL, O_MAP },
    { "quantity", required_argument, NULL, O_QUANTITY },
    { "unit", required_argument, NULL, O_UNIT },
    { "pitch", required_argument, NULL, O_PITCH },
    { NULL, 0, NULL, 0 },
};

#define MAX_MAPS 256

typedef struct record_args {
    const char *sidecar, *airframe, *site, *kind, *date, *task, *procedure, *procedure_rev,
        *equipment, *calibration, *inspector, *level, *notes, *parameters, *quantity, *unit;
    double hours, pitch_u, pitch_v;
    long long cycles;
    int has_hours, has_cycles;
    const char *maps[MAX_MAPS];
    int nmaps;
} record_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    record_args *a = ctx;
    switch (opt) {
    case O_SIDECAR: a->sidecar = arg; break;
    case O_AIRFRAME: a->airframe = arg; break;
    case O_SITE: a->site = arg; break;
    case O_KIND: a->kind = arg; break;
    case O_DATE: a->date = arg; break;
    case O_TASK: a->task = arg; break;
    case O_PROCEDURE: a->procedure = arg; break;
    case O_PROCEDURE_REV: a->procedure_rev = arg; break;
    case O_EQUIPMENT: a->equipment = arg; break;
    case O_CALIBRATION: a->calibration = arg; break;
    case O_INSPECTOR: a->inspector = arg; break;
    case O_LEVEL: a->level = arg; break;
    case O_NOTES: a->notes = arg; break;
    case O_PARAMETERS: a->parameters = arg; break;
    case O_QUANTITY: a->quantity = arg; break;
    case O_UNIT: a->unit = arg; break;
    case O_HOURS:
        a->has_hours = 1;
        return cli_number("--hours", arg, &a->hours, usage);
    case O_CYCLES:
        a->has_cycles = 1;
        return cli_count("--cycles", arg, &a->cycles, usage);
    case O_PITCH: {
        char buf[64];
        if (cli_text(buf, sizeof buf, arg, "--pitch"))
            return CLI_USAGE;
        char *comma = strchr(buf, ',');
        if (comma)
            *comma = '\0';
        if (cli_number("--pitch", buf, &a->pitch_u, usage))
            return CLI_USAGE;
        a->pitch_v = a->pitch_u;
        if (comma && cli_number("--pitch", comma + 1, &a->pitch_v, usage))
            return CLI_USAGE;
        if (!(a->pitch_u > 0) || !(a->pitch_v > 0))
            return cli_usage_error(usage, "--pitch must be positive");
        break;
    }
    case O_MAP:
        if (a->nmaps == MAX_MAPS)
            return cli_usage_error(usage, "at most %d --map files", MAX_MAPS);
        a->maps[a->nmaps++] = arg;
        break;
    default:
        return cli_usage_error(usage, "unexpected option");
    }
    return 0;
}

/* Read --parameters FILE: a JSON object, returned compact and malloc'd. */
static int read_parameters(const char *path, char **out)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return cli_fail("%s: cannot open the parameters file", path);
    char *buf = NULL;
    size_t cap = 0, n = 0;
    for (;;) {
        if (n + 4096 + 1 > cap) {
            cap = cap ? cap * 2 : 8192;
            char *nb = cap <= (16u << 20) ? realloc(buf, cap) : NULL;
            if (!nb) {
                free(buf);
                fclose(f);
                return cli_fail("%s: parameters file too large", path);
            }
            buf = nb;
        }
        size_t got = fread(buf + n, 1, 4096, f);
        n += got;
        if (got < 4096)
            break;
    }
    fclose(f);
    buf[n] = '\0';
    cJSON *j = cJSON_Parse(buf);
    free(buf);
    if (!cJSON_IsObject(j)) {
        cJSON_Delete(j);
        return cli_fail("%s: parameters must be a JSON object", path);
    }
    *out = cJSON_PrintUnformatted(j);
    cJSON_Delete(j);
    return *out ? CLI_OK : cli_fail("out of memory");
}

/* Apply what the command line says onto one site's inspection. */
static int override(pl_inspection *in, const record_args *a, const char *params)
{
    int rc;
    if ((rc = cli_text(in->airframe_serial, sizeof in->airframe_serial, a->airframe, "--airframe"))
        || (rc = cli_text(in->kind, sizeof in->kind, a->kind, "--kind"))
        || (rc = cli_text(in->performed_on, sizeof in->performed_on, a->date, "--date"))
        || (rc = cli_text(in->task_ref, sizeof in->task_ref, a->task, "--task"))
        || (rc = cli_text(in->procedure, sizeof in->procedure, a->procedure, "--procedure"))
        || (rc = cli_text(in->procedure_rev, sizeof in->procedure_rev, a->procedure_rev,
                          "--procedure-rev"))
        || (rc = cli_text(in->equipment, sizeof in->equipment, a->equipment, "--equipment"))
        || (rc = cli_text(in->calibration_ref, sizeof in->calibration_ref, a->calibration,
                          "--calibration"))
        || (rc = cli_text(in->inspector, sizeof in->inspector, a->inspector, "--inspector"))
        || (rc = cli_text(in->inspector_level, sizeof in->inspector_level, a->level, "--level"))
        || (rc = cli_text(in->notes, sizeof in->notes, a->notes, "--notes")))
        return rc;
    if (a->has_hours)
        in->aircraft_hours = a->hours;
    if (a->has_cycles)
        in->aircraft_cycles = a->cycles;
    if (params) {
        free(in->parameters_json);
        in->parameters_json = strdup(params);
        if (!in->parameters_json)
            return cli_fail("out of memory");
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
    const char *hdr[] = { "AIRFRAME", "SITE", "KIND", "DATE", "INSPECTION", "MAPS" };
    cli_table *t = cli_table_new(6, hdr);
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
                              s->insp.performed_on, id, s->nmaps ? maps : "-" };
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
    a.pitch_u = a.pitch_v = NAN;
    int first;
    int rc = cli_parse(argc, argv, "", opts, &common, take_opt, &a, usage, help, &first);
    if (rc >= 0)
        return rc;
    if (first < argc)
        return cli_usage_error(usage, "unexpected operand '%s' (maps are given with --map)",
                               argv[first]);
    if (!a.sidecar && (!a.airframe || !a.site))
        return cli_usage_error(usage, "give --sidecar, or --airframe and --site");
    if (a.sidecar && (a.site || a.nmaps))
        return cli_usage_error(usage, "--site and --map go without --sidecar; "
                                      "list sites and maps in the sidecar instead");
    if (!a.nmaps && (a.quantity || a.unit || !isnan(a.pitch_u)))
        return cli_usage_error(usage, "--quantity, --unit and --pitch describe --map files");

    pl_err err = { 0 };
    pl_record *rec = NULL;
    char *params = NULL;
    int st;
    if (a.parameters && (rc = read_parameters(a.parameters, &params)))
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
        if ((rc = cli_text(in.site_code, sizeof in.site_code, a.site, "--site"))) {
            free(params);
            return rc;
        }
        size_t idx;
        st = pl_record_new(&rec, &err);
        if (!st)
            st = pl_record_add_site(rec, &in, &idx, &err);
        for (int i = 0; !st && i < a.nmaps; i++)
            st = pl_record_add_map(rec, idx, a.maps[i], a.quantity, a.unit, a.pitch_u,
                                   a.pitch_v, &err);
        if (st) {
            free(params);
            pl_record_free(rec);
            return cli_fail_err(st, &err);
        }
    }
    for (size_t i = 0; i < rec->nsites; i++)
        if ((rc = override(&rec->sites[i].insp, &a, params))) {
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
