/*
 * cmd_register.c - plyledger register: align a site's reinspection map onto
 * its baseline, record how well that worked, and show it.
 */
#include "cli.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

static const char usage[] = "--airframe SERIAL --site CODE [options]";
static const char help[] =
    "usage: plyledger register --airframe SERIAL --site CODE [options]\n"
    "\n"
    "Align a site's reinspection map onto its baseline map: phase correlation with\n"
    "sub-pixel refinement for the shift, a log-polar Fourier method for rotation,\n"
    "starting from what the two maps' recorded placements imply. The transform and\n"
    "its quality (correlation over the overlap, peak-to-sidelobe ratio) are recorded\n"
    "with the two maps. Below the quality limits the registration is refused: the\n"
    "refusal is recorded, the comparison that needed it is recorded as not done,\n"
    "and the exit status is 1. A person may supply the transform instead (--manual,\n"
    "with --by and --why).\n"
    "\n"
    "What to align:\n"
    "      --airframe SERIAL    the airframe (required)\n"
    "      --site CODE          the site (required)\n"
    "      --inspection ID      the reinspection (default: the latest after the baseline)\n"
    "      --map ID             its map (default: its first)\n"
    "      --baseline-map ID    the baseline's map (default: its first)\n"
    "      --quantity Q         register on this channel (default: phase, else\n"
    "                           temperature-contrast, else the first)\n"
    "      --label L            ... with this label, e.g. \"f=0.1011 Hz\"\n"
    "How:\n"
    "      --upsample N         sub-pixel refinement factor (default 100)\n"
    "      --no-rotation        search the shift only\n"
    "      --scale              estimate a scale too\n"
    "      --max-rotation DEG   largest rotation believed (default %g; 180: any)\n"
    "      --window W           hann (default), tukey or none\n"
    "      --interp I           bicubic (default) or bilinear resampling\n"
    "      --min-ncc X          refuse below this correlation (default %g)\n"
    "      --min-psr X          refuse below this peak-to-sidelobe ratio (default %g)\n"
    "      --manual DX,DY,ROT[,SCALE]  a transform supplied by a person (baseline\n"
    "                           pixels, degrees); needs --by and --why\n"
    "      --by NAME            who supplied the manual transform\n"
    "      --why TEXT           why\n"
    "Output:\n"
    "      --aligned FILE.npy   the current map resampled onto the baseline grid\n"
    "      --view FILE.png      a picture of the alignment\n"
    "      --view-mode M        checkerboard (default) or blend\n"
    "  -s, --store PATH         the store (default $PLYLEDGER_STORE)\n"
    "      --json               print the result as JSON\n"
    "  -q, --quiet              print nothing on success\n"
    "  -h, --help               show this help\n";

enum {
    O_AIRFRAME = 0x100, O_SITE, O_INSPECTION, O_MAP, O_BASELINE_MAP, O_QUANTITY, O_LABEL,
    O_UPSAMPLE, O_NO_ROTATION, O_SCALE, O_WINDOW, O_INTERP, O_MIN_NCC, O_MIN_PSR, O_MANUAL,
    O_BY, O_WHY, O_ALIGNED, O_VIEW, O_VIEW_MODE, O_MAX_ROTATION,
};
static const struct option opts[] = {
    { "airframe", required_argument, NULL, O_AIRFRAME },
    { "site", required_argument, NULL, O_SITE },
    { "inspection", required_argument, NULL, O_INSPECTION },
    { "map", required_argument, NULL, O_MAP },
    { "baseline-map", required_argument, NULL, O_BASELINE_MAP },
    { "quantity", required_argument, NULL, O_QUANTITY },
    { "label", required_argument, NULL, O_LABEL },
    { "upsample", required_argument, NULL, O_UPSAMPLE },
    { "no-rotation", no_argument, NULL, O_NO_ROTATION },
    { "scale", no_argument, NULL, O_SCALE },
    { "max-rotation", required_argument, NULL, O_MAX_ROTATION },
    { "window", required_argument, NULL, O_WINDOW },
    { "interp", required_argument, NULL, O_INTERP },
    { "min-ncc", required_argument, NULL, O_MIN_NCC },
    { "min-psr", required_argument, NULL, O_MIN_PSR },
    { "manual", required_argument, NULL, O_MANUAL },
    { "by", required_argument, NULL, O_BY },
    { "why", required_argument, NULL, O_WHY },
    { "aligned", required_argument, NULL, O_ALIGNED },
    { "view", required_argument, NULL, O_VIEW },
    { "view-mode", required_argument, NULL, O_VIEW_MODE },
    { NULL, 0, NULL, 0 },
};

typedef struct reg_args {
    const char *airframe, *site, *quantity, *label, *by, *why, *aligned, *view;
    long long inspection, map, baseline_map;
    pl_register_options ro;
    int manual;
    pl_transform t;
    pl_pair_mode view_mode;
} reg_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    reg_args *a = ctx;
    long long n;
    switch (opt) {
    case O_AIRFRAME: a->airframe = arg; break;
    case O_SITE: a->site = arg; break;
    case O_QUANTITY: a->quantity = arg; break;
    case O_LABEL: a->label = arg; break;
    case O_BY: a->by = arg; break;
    case O_WHY: a->why = arg; break;
    case O_ALIGNED: a->aligned = arg; break;
    case O_VIEW: a->view = arg; break;
    case O_INSPECTION: return cli_count("--inspection", arg, &a->inspection, usage);
    case O_MAP: return cli_count("--map", arg, &a->map, usage);
    case O_BASELINE_MAP: return cli_count("--baseline-map", arg, &a->baseline_map, usage);
    case O_UPSAMPLE:
        if (cli_count("--upsample", arg, &n, usage))
            return CLI_USAGE;
        if (n < 1 || n > 1000)
            return cli_usage_error(usage, "--upsample must be 1 to 1000");
        a->ro.upsample = (unsigned)n;
        break;
    case O_NO_ROTATION: a->ro.rotation = 0; break;
    case O_SCALE: a->ro.scale = 1; break;
    case O_WINDOW:
        if (strcmp(arg, "hann") == 0) a->ro.window = PL_WINDOW_HANN;
        else if (strcmp(arg, "tukey") == 0) a->ro.window = PL_WINDOW_TUKEY;
        else if (strcmp(arg, "none") == 0) a->ro.window = PL_WINDOW_NONE;
        else return cli_usage_error(usage, "--window must be hann, tukey or none");
        break;
    case O_INTERP:
        if (strcmp(arg, "bicubic") == 0) a->ro.interp = PL_INTERP_BICUBIC;
        else if (strcmp(arg, "bilinear") == 0) a->ro.interp = PL_INTERP_BILINEAR;
        else return cli_usage_error(usage, "--interp must be bicubic or bilinear");
        break;
    case O_VIEW_MODE:
        if (strcmp(arg, "checkerboard") == 0) a->view_mode = PL_PAIR_CHECKERBOARD;
        else if (strcmp(arg, "blend") == 0) a->view_mode = PL_PAIR_BLEND;
        else return cli_usage_error(usage, "--view-mode must be checkerboard or blend");
        break;
    case O_MIN_NCC: return cli_number("--min-ncc", arg, &a->ro.min_ncc, usage);
    case O_MIN_PSR: return cli_number("--min-psr", arg, &a->ro.min_psr, usage);
    case O_MAX_ROTATION:
        if (cli_number("--max-rotation", arg, &a->ro.max_rotation_deg, usage))
            return CLI_USAGE;
        if (!(a->ro.max_rotation_deg >= 0 && a->ro.max_rotation_deg <= 180))
            return cli_usage_error(usage, "--max-rotation must be 0 to 180 degrees");
        break;
    case O_MANUAL: {
        char buf[128];
        if (cli_text(buf, sizeof buf, arg, "--manual"))
            return CLI_USAGE;
        double v[4] = { 0, 0, 0, 1 };
        int k = 0;
        char *save = NULL;
        for (char *tok = strtok_r(buf, ",", &save); tok; tok = strtok_r(NULL, ",", &save)) {
            if (k == 4 || cli_number("--manual", tok, &v[k], usage))
                return k == 4 ? cli_usage_error(usage, "--manual takes DX,DY,ROT[,SCALE]")
                              : CLI_USAGE;
            k++;
        }
        if (k < 3 || !(v[3] > 0))
            return cli_usage_error(usage, "--manual takes DX,DY,ROT[,SCALE] with SCALE > 0");
        a->manual = 1;
        a->t.dx = v[0];
        a->t.dy = v[1];
        a->t.rotation_deg = v[2];
        a->t.scale = v[3];
        break;
    }
    default: return CLI_USAGE;
    }
    return 0;
}

/* The channel a picture shows: the one registered on, chosen as
 * pl_register_maps() chooses it. */
static uint32_t view_channel(const pl_map *m, const char *quantity, const char *label)
{
    static const char *const defaults[] = { "phase", "temperature-contrast" };
    for (int k = 0; k < (quantity ? 1 : 2); k++) {
        const char *q = quantity ? quantity : defaults[k];
        for (uint32_t c = 0; c < m->nchannels; c++)
            if (strcmp(m->channels[c].quantity, q) == 0
                && (!label || strcmp(m->channels[c].label, label) == 0))
                return c;
    }
    return 0;
}

static const char *window_name(pl_window w)
{
    return w == PL_WINDOW_TUKEY ? "tukey" : w == PL_WINDOW_NONE ? "none" : "hann";
}

/* The options used, as the parameters recorded with the registration. */
static char *parameters(const reg_args *a)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddStringToObject(o, "quantity", a->quantity ? a->quantity : "(default)");
    if (a->label)
        cJSON_AddStringToObject(o, "label", a->label);
    cJSON_AddNumberToObject(o, "upsample", a->ro.upsample);
    cJSON_AddBoolToObject(o, "rotation", a->ro.rotation);
    cJSON_AddBoolToObject(o, "scale", a->ro.scale);
    cJSON_AddStringToObject(o, "window", window_name(a->ro.window));
    if (a->ro.window == PL_WINDOW_TUKEY)
        cJSON_AddNumberToObject(o, "tukey_alpha", a->ro.tukey_alpha);
    cJSON_AddStringToObject(o, "interp", a->ro.interp == PL_INTERP_BILINEAR ? "bilinear" : "bicubic");
    cJSON_AddNumberToObject(o, "min_ncc", a->ro.min_ncc);
    cJSON_AddNumberToObject(o, "min_psr", a->ro.min_psr);
    cJSON_AddNumberToObject(o, "max_rotation_deg", a->ro.max_rotation_deg);
    char *s = cJSON_PrintUnformatted(o);
    cJSON_Delete(o);
    return s;
}

static int print_result(const reg_args *a, const pl_record_pair *pair, const pl_register_result *r,
                        pl_id rid, pl_id cid, const cli_common *common)
{
    const char *status = a->manual ? "manual" : r->refused ? "refused" : "aligned";
    if (common->json) {
        cJSON *o = cJSON_CreateObject();
        cJSON_AddStringToObject(o, "airframe", a->airframe);
        cJSON_AddStringToObject(o, "site", a->site);
        cJSON_AddNumberToObject(o, "registration", (double)rid);
        cJSON_AddStringToObject(o, "status", status);
        if (r->refused)
            cJSON_AddStringToObject(o, "refusal", r->reason);
        cJSON_AddNumberToObject(o, "baseline_inspection", (double)pair->baseline_inspection);
        cJSON_AddNumberToObject(o, "baseline_map", (double)pair->baseline_map);
        cJSON_AddNumberToObject(o, "current_inspection", (double)pair->current_inspection);
        cJSON_AddNumberToObject(o, "current_map", (double)pair->current_map);
        cJSON *t = cJSON_AddObjectToObject(o, "transform");
        cli_json_num(t, "shift_col_px", r->transform.dx);
        cli_json_num(t, "shift_row_px", r->transform.dy);
        cli_json_num(t, "shift_u_mm", r->shift_u_mm);
        cli_json_num(t, "shift_v_mm", r->shift_v_mm);
        cli_json_num(t, "rotation_deg", r->transform.rotation_deg);
        cli_json_num(t, "scale", r->transform.scale);
        cJSON *q = cJSON_AddObjectToObject(o, "quality");
        cli_json_num(q, "ncc", r->ncc);
        cli_json_num(q, "peak_sidelobe", r->psr);
        cli_json_num(q, "overlap_fraction", r->overlap_fraction);
        cli_json_num(q, "overlap_mm2", r->overlap_mm2);
        if (cid)
            cJSON_AddNumberToObject(o, "comparison_not_done", (double)cid);
        if (a->aligned && !r->refused)
            cJSON_AddStringToObject(o, "aligned", a->aligned);
        if (a->view && !r->refused)
            cJSON_AddStringToObject(o, "view", a->view);
        return cli_print_json(o);
    }
    if (common->quiet)
        return CLI_OK;
    printf("registration %lld of %s site %s: %s\n", (long long)rid, a->airframe, a->site, status);
    printf("  current map %lld (inspection %lld) onto baseline map %lld (inspection %lld)\n",
           (long long)pair->current_map, (long long)pair->current_inspection,
           (long long)pair->baseline_map, (long long)pair->baseline_inspection);
    if (r->refused) {
        printf("  refused: %s\n", r->reason);
        printf("  comparison %lld recorded as not done\n", (long long)cid);
        return CLI_OK;
    }
    printf("  shift      %+.3f, %+.3f px  (%+.3f mm along u, %+.3f mm along v)\n",
           r->transform.dx, r->transform.dy, r->shift_u_mm, r->shift_v_mm);
    printf("  rotation   %+.3f deg   scale %.4f\n", r->transform.rotation_deg, r->transform.scale);
    printf("  quality    ncc %.3f", r->ncc);
    if (isfinite(r->psr))
        printf(", peak-to-sidelobe %.1f", r->psr);
    printf("\n  overlap    %.1f %% (%.0f mm^2)\n", 100.0 * r->overlap_fraction, r->overlap_mm2);
    if (a->aligned)
        printf("  wrote %s\n", a->aligned);
    if (a->view)
        printf("  wrote %s\n", a->view);
    return CLI_OK;
}

int cmd_register(int argc, char **argv)
{
    cli_common common;
    reg_args a;
    memset(&a, 0, sizeof a);
    pl_register_options init = PL_REGISTER_OPTIONS_INIT;
    a.ro = init;
    char helptext[sizeof help + 64];
    snprintf(helptext, sizeof helptext, help, PL_REGISTER_DEFAULT_MAX_ROTATION,
             PL_REGISTER_DEFAULT_MIN_NCC, PL_REGISTER_DEFAULT_MIN_PSR);
    int first;
    int rc = cli_parse(argc, argv, "", opts, &common, take_opt, &a, usage, helptext, &first);
    if (rc >= 0)
        return rc;
    if ((rc = cli_no_operands(argc, argv, first, usage)))
        return rc;
    if (!a.airframe || !a.site)
        return cli_usage_error(usage, "--airframe and --site are required");
    if (a.manual && (!a.by || !*a.by || !a.why || !*a.why))
        return cli_usage_error(usage, "--manual needs --by and --why");
    if (!a.manual && (a.by || a.why))
        return cli_usage_error(usage, "--by and --why go with --manual");

    /* The outputs are written before the registration is recorded and put
     * in place after: a file that cannot be written records nothing. */
    pl_outfile *aligned_out = NULL, *view_out = NULL;
    if ((rc = cli_open_output(&aligned_out, &common, a.aligned)) ||
        (rc = cli_open_output(&view_out, &common, a.view))) {
        pl_outfile_abort(aligned_out);
        return rc;
    }
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, 0))) {
        pl_outfile_abort(aligned_out);
        pl_outfile_abort(view_out);
        return rc;
    }
    pl_err err = { 0 };
    pl_record_pair pair = { 0, (pl_id)a.inspection, (pl_id)a.baseline_map, (pl_id)a.map };
    pl_map *base = NULL, *cur = NULL, *aligned = NULL;
    pl_register_result res;
    memset(&res, 0, sizeof res);
    char *params = NULL;
    pl_id rid = 0, cid = 0;
    int st = pl_record_find_pair(store, a.airframe, a.site, &pair, &err);
    if (!st)
        st = pl_store_load_map(store, pair.baseline_map, &base, NULL, &err);
    if (!st)
        st = pl_store_load_map(store, pair.current_map, &cur, NULL, &err);
    if (!st && a.manual)
        st = pl_register_apply(&res, &aligned, base, cur, a.quantity, a.label, &a.t,
                               a.ro.interp, &err);
    else if (!st)
        st = pl_register_maps(&res, &aligned, base, cur, a.quantity, a.label, &a.ro, &err);
    if (!st && !(params = parameters(&a)))
        st = PL_ENOMEM;
    if (!st && !res.refused && aligned_out)
        st = pl_map_write_npy(aligned, aligned_out, &err);
    if (!st && !res.refused && view_out) {
        pl_image *img = NULL;
        pl_render_options ropts = PL_RENDER_OPTIONS_INIT;
        st = pl_render_pair(&img, base, view_channel(base, a.quantity, a.label), aligned,
                            view_channel(aligned, a.quantity, a.label), a.view_mode, 0, &ropts,
                            &err);
        if (!st)
            st = pl_image_write_png(img, view_out, &err);
        pl_image_free(img);
    }
    if (!st)
        st = pl_record_registration(store, &pair, &res, a.manual,
                                    a.manual ? "manual" : "phase-correlation log-polar",
                                    a.by, a.why, params, &rid, &cid, &err);
    pl_store_close(store);
    free(params);
    if (st || res.refused) { /* a refusal writes no outputs */
        pl_outfile_abort(aligned_out);
        pl_outfile_abort(view_out);
    } else {
        st = pl_outfile_commit(aligned_out, &err);
        st = pl_outfile_finish(view_out, st, &err);
    }
    pl_map_free(base);
    pl_map_free(cur);
    pl_map_free(aligned);
    if (st)
        return cli_fail_err(st, &err);
    rc = print_result(&a, &pair, &res, rid, cid, &common);
    if (res.refused) {
        fprintf(stderr, "plyledger: %s site %s: registration refused: %s\n", a.airframe, a.site,
                res.reason);
        return CLI_ERROR;
    }
    return rc;
}
