/*
 * cmd_history.c - plyledger history: every inspection of one site, oldest
 * first, with its traceability and maps.
 */
#include "cli.h"

#include <stdlib.h>
#include <string.h>

static const char usage[] = "--airframe SERIAL --site CODE [--json]";
static const char help[] =
    "usage: plyledger history --airframe SERIAL --site CODE [--json]\n"
    "\n"
    "Show a site's whole record: where it is on the airframe, then every\n"
    "inspection of it, oldest first, with who did it, how, and the maps it\n"
    "produced (size, pitch, quantities and content digest).\n"
    "\n"
    "Options:\n"
    "      --airframe SERIAL  the airframe (required)\n"
    "      --site CODE        the site (required)\n"
    "  -s, --store PATH       the store (default $PLYLEDGER_STORE)\n"
    "      --json             print JSON\n"
    "  -h, --help             show this help\n";

enum { O_AIRFRAME = 0x100, O_SITE };
static const struct option opts[] = {
    { "airframe", required_argument, NULL, O_AIRFRAME },
    { "site", required_argument, NULL, O_SITE },
    { NULL, 0, NULL, 0 },
};

typedef struct hist_args {
    const char *airframe, *site;
} hist_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    hist_args *a = ctx;
    if (opt == O_AIRFRAME)
        a->airframe = arg;
    else
        a->site = arg;
    return 0;
}

typedef struct insp_list {
    pl_inspection *items;
    size_t n, cap;
    int oom;
} insp_list;

static int collect(void *ud, const pl_inspection *in)
{
    insp_list *l = ud;
    if (l->n == l->cap) {
        size_t cap = l->cap ? l->cap * 2 : 8;
        pl_inspection *grown = realloc(l->items, cap * sizeof *grown);
        if (!grown) {
            l->oom = 1;
            return 1;
        }
        l->items = grown;
        l->cap = cap;
    }
    pl_inspection *copy = &l->items[l->n++];
    *copy = *in;
    copy->parameters_json = in->parameters_json ? strdup(in->parameters_json) : NULL;
    return 0;
}

typedef struct map_out {
    pl_store *store;
    cJSON *array;  /* JSON mode */
    int printed;   /* text mode */
    int failed;    /* a registration listing failed */
    pl_err err;
} map_out;

/* One registration of a map onto its baseline, under the map. */
static int on_registration(void *ud, const pl_registration_record *g)
{
    cJSON *array = ud;
    if (array) {
        cJSON *o = cJSON_CreateObject();
        cJSON_AddNumberToObject(o, "registration", (double)g->id);
        cJSON_AddNumberToObject(o, "baseline_map", (double)g->baseline_map_id);
        cJSON_AddStringToObject(o, "status", g->status);
        cJSON_AddStringToObject(o, "method", g->method);
        if (g->refusal[0])
            cJSON_AddStringToObject(o, "refusal", g->refusal);
        cli_json_num(o, "shift_col_px", g->shift_col_px);
        cli_json_num(o, "shift_row_px", g->shift_row_px);
        cli_json_num(o, "shift_u_mm", g->shift_u_mm);
        cli_json_num(o, "shift_v_mm", g->shift_v_mm);
        cli_json_num(o, "rotation_deg", g->rotation_deg);
        cli_json_num(o, "scale", g->scale);
        cli_json_num(o, "ncc", g->ncc);
        cli_json_num(o, "peak_sidelobe", g->peak_sidelobe);
        cli_json_num(o, "overlap_fraction", g->overlap_fraction);
        if (g->supplied_by[0]) {
            cJSON_AddStringToObject(o, "supplied_by", g->supplied_by);
            cJSON_AddStringToObject(o, "supplied_reason", g->supplied_reason);
        }
        cJSON_AddStringToObject(o, "recorded_at", g->recorded_at);
        cJSON_AddItemToArray(array, o);
        return 0;
    }
    if (strcmp(g->status, "refused") == 0)
        printf("        registration %lld onto map %lld refused: %s\n", (long long)g->id,
               (long long)g->baseline_map_id, g->refusal);
    else
        printf("        registration %lld onto map %lld (%s): shift %+.2f, %+.2f mm, rotation "
               "%+.2f deg, ncc %.3f, overlap %.0f %%%s%s\n",
               (long long)g->id, (long long)g->baseline_map_id, g->status, g->shift_u_mm,
               g->shift_v_mm, g->rotation_deg, g->ncc, 100.0 * g->overlap_fraction,
               g->supplied_by[0] ? ", supplied by " : "", g->supplied_by);
    return 0;
}

static int on_map(void *ud, const pl_map_record *m)
{
    map_out *o = ud;
    if (o->array) {
        cJSON *jm = cli_json_map(m);
        cJSON *regs = cJSON_AddArrayToObject(jm, "registrations");
        cJSON_AddItemToArray(o->array, jm);
        if (pl_store_list_registrations(o->store, m->id, on_registration, regs, &o->err)) {
            o->failed = 1;
            return 1;
        }
        return 0;
    }
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
    o->printed++;
    if (pl_store_list_registrations(o->store, m->id, on_registration, NULL, &o->err)) {
        o->failed = 1;
        return 1;
    }
    return 0;
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
    printf("\n  %s  %-11s inspection %lld  task %s  FH %s  FC %s\n", in->performed_on, in->kind,
           (long long)in->key, in->task_ref[0] ? in->task_ref : "-", hours, cycles);
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
    int first;
    int rc = cli_parse(argc, argv, "", opts, &common, take_opt, &a, usage, help, &first);
    if (rc >= 0)
        return rc;
    if ((rc = cli_no_operands(argc, argv, first, usage)))
        return rc;
    if (!a.airframe || !a.site)
        return cli_usage_error(usage, "--airframe and --site are required");
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, PL_STORE_READONLY)))
        return rc;
    pl_err err = { 0 };
    pl_site site;
    insp_list list = { 0 };
    int st = pl_store_get_site(store, a.airframe, a.site, &site, &err);
    if (!st) {
        pl_inspection_filter f = { a.airframe, a.site, NULL, NULL, NULL };
        st = pl_store_list_inspections(store, &f, collect, &list, &err);
        if (!st && list.oom)
            st = PL_ENOMEM;
    }
    cJSON *root = NULL, *jinsp = NULL;
    if (!st && common.json) {
        root = cJSON_CreateObject();
        cJSON_AddItemToObject(root, "site", cli_json_site(&site));
        jinsp = cJSON_AddArrayToObject(root, "inspections");
    } else if (!st) {
        print_site(&site);
        if (!list.n)
            printf("\n  no inspections recorded\n");
    }
    for (size_t i = 0; !st && i < list.n; i++) {
        map_out mo = { 0 };
        mo.store = store;
        if (jinsp) {
            cJSON *o = cli_json_inspection(&list.items[i]);
            mo.array = cJSON_AddArrayToObject(o, "maps");
            cJSON_AddItemToArray(jinsp, o);
        } else {
            print_inspection(&list.items[i]);
        }
        st = pl_store_list_maps(store, list.items[i].key, on_map, &mo, &err);
        if (!st && mo.failed) {
            st = mo.err.code ? mo.err.code : PL_EDB;
            err = mo.err;
        }
        if (!st && !jinsp && !mo.printed)
            printf("      no maps\n");
    }
    pl_store_close(store);
    for (size_t i = 0; i < list.n; i++)
        free(list.items[i].parameters_json);
    free(list.items);
    if (st) {
        cJSON_Delete(root);
        return cli_fail_err(st, &err);
    }
    if (root)
        return cli_print_json(root);
    return CLI_OK;
}
