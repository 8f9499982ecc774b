/*
 * cmd_import_plan.c - plyledger import-plan: add a site plan to an airframe.
 */
#include <stdio.h>
#include "cli.h"

static const char usage[] = "--airframe SERIAL PLAN.csv";
static const char help[] =
    "usage: plyledger import-plan --airframe SERIAL PLAN.csv\n"
    "\n"
    "Add every site of a site plan (CSV with a header row) to an airframe, all or\n"
    "none. Columns:\n"
    "  required: site, method, origin_x, origin_y, origin_z, u_x, u_y, u_z,\n"
    "            v_x, v_y, v_z, pitch_mm\n"
    "  optional: zone, description, frame, stringer, material, thickness_mm,\n"
    "            diffusivity_mm2_s, width_px, height_px, pitch_v_mm,\n"
    "            coord_system (default STA/BL/WL), coord_unit (default mm)\n"
    "origin is the centre of map pixel (0,0) on the part; u and v are the unit\n"
    "vectors along map columns and rows. Methods: @METHODS@.\n"
    "\n"
    "Options:\n"
    "      --airframe SERIAL  the airframe (required)\n"
    "  -s, --store PATH       the store (default $PLYLEDGER_STORE)\n"
    "      --wait SECONDS     @WAIT@\n"
    "      --json             print the sites added as JSON\n"
    "  -q, --quiet            print nothing on success\n"
    "  -h, --help             show this help\n";

enum { O_AIRFRAME = 0x100 };
static const struct option opts[] = {
    { "airframe", required_argument, NULL, O_AIRFRAME },
    { NULL, 0, NULL, 0 },
};

static int take_opt(void *ctx, int opt, const char *arg)
{
    (void)opt;
    *(const char **)ctx = arg;
    return 0;
}

int cmd_import_plan(int argc, char **argv)
{
    cli_common common;
    const char *serial = NULL;
    int first;
    int rc = cli_parse(argc, argv, "", opts, &common, take_opt, &serial, usage, help, &first);
    if (rc >= 0)
        return rc;
    if (!serial)
        return cli_usage_error(usage, "--airframe is required");
    if ((rc = cli_check_text(serial, CLI_KEY, "--airframe")))
        return rc;
    if (argc - first != 1)
        return cli_usage_error(usage, "give exactly one plan file");
    const char *path = argv[first];
    pl_err err = { 0 };
    pl_plan *plan;
    int st = pl_plan_load(&plan, path, &err);
    if (st)
        return cli_fail_err(st, &err);
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, 0))) {
        pl_plan_free(plan);
        return rc;
    }
    size_t added = 0;
    st = pl_plan_apply(store, plan, serial, &added, &err);
    pl_store_close(store);
    if (st) {
        /* the store names the site; the plan file it came from is named here */
        pl_err named = err;
        snprintf(named.msg, sizeof named.msg, "%.200s: %.300s", path, err.msg);
        pl_plan_free(plan);
        return cli_fail_err(st, &named);
    }
    if (common.json) {
        cJSON *o = cJSON_CreateObject();
        cJSON_AddStringToObject(o, "airframe", serial);
        cJSON *codes = cJSON_AddArrayToObject(o, "sites");
        for (size_t i = 0; i < plan->nsites; i++)
            cJSON_AddItemToArray(codes, cJSON_CreateString(plan->sites[i].code));
        pl_plan_free(plan);
        return cli_print_json(o);
    }
    if (!common.quiet)
        printf("added %zu sites from %s to airframe %s\n", added, path, serial);
    pl_plan_free(plan);
    return CLI_OK;
}
