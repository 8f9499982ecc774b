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
    "      --view FILE.png      a picture of the alignment, named by airframe, site,\n"
    "                           dates, maps and quantity\n"
    "      --view-mode M        checkerboard (default) or blend\n"
    "  -s, --store PATH         the store (default $PLYLEDGER_STORE)\n"
    "      --wait SECONDS       @WAIT@\n"
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
        if (n < 1 || n > PL_REGISTER_MAX_UPSAMPLE)
            return cli_usage_error(usage, "--upsample must be 1 to %u", PL_REGISTER_MAX_UPSAMPLE);
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

static int print_result(const pl_registration_summary *sum, const cli_common *common)
{
    if (common->json) {
        char *text = NULL;
        pl_err err = { 0 };
        return cli_print_json_text(pl_registration_summary_json(&text, sum, &err), &text, &err);
    }
    if (common->quiet)
        return CLI_OK;
    const pl_registration_record *g = &sum->registration;
    const pl_record_pair *pair = &sum->pair;
    printf("registration %lld of %s site %s: %s\n", (long long)g->id, sum->airframe_serial,
           sum->site_code, g->status);
    printf("  current map %lld (inspection %lld) onto baseline map %lld (inspection %lld)\n",
           (long long)pair->current_map, (long long)pair->current_inspection,
           (long long)pair->baseline_map, (long long)pair->baseline_inspection);
    if (sum->simulated)
        printf("  data       SIMULATED\n");
    if (strcmp(g->status, "refused") == 0) {
        printf("  refused: %s\n", g->refusal);
        printf("  comparison %lld recorded as not done\n", (long long)sum->comparison_not_done);
        cli_print_caution();
        return CLI_OK;
    }
    printf("  shift      %+.3f, %+.3f px  (%+.3f mm along u, %+.3f mm along v)\n",
           g->shift_col_px, g->shift_row_px, g->shift_u_mm, g->shift_v_mm);
    printf("  rotation   %+.3f deg   scale %.4f\n", g->rotation_deg, g->scale);
    printf("  quality    ncc %.3f", g->ncc);
    if (isfinite(g->peak_sidelobe))
        printf(", peak-to-sidelobe %.1f", g->peak_sidelobe);
    printf("\n  overlap    %.1f %% (%.0f mm^2)\n", 100.0 * g->overlap_fraction, g->overlap_mm2);
    if (sum->aligned)
        printf("  wrote %s\n", sum->aligned);
    if (sum->view)
        printf("  wrote %s\n", sum->view);
    cli_print_caution();
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
    int rc = cli_parse(argc, argv, "", opts, &common, take_opt, &a, usage, helptext, NULL);
    if (rc >= 0)
        return rc;
    if (!a.airframe || !a.site)
        return cli_usage_error(usage, "--airframe and --site are required");
    if (a.manual && (!a.by || !*a.by || !a.why || !*a.why))
        return cli_usage_error(usage, "--manual needs --by and --why");
    if (!a.manual && (a.by || a.why))
        return cli_usage_error(usage, "--by and --why go with --manual");
    if ((rc = cli_check_text(a.airframe, CLI_KEY, "--airframe"))
        || (rc = cli_check_text(a.site, CLI_KEY, "--site"))
        || (rc = cli_check_text(a.by, CLI_NAME, "--by"))
        || (rc = cli_check_text(a.why, CLI_FREE, "--why")))
        return rc;

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
    pl_registration_summary sum;
    memset(&sum, 0, sizeof sum);
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
    if (!st)
        st = pl_record_registration_parameters(&params, a.quantity, a.label, &a.ro, &err);
    if (!st && !res.refused && aligned_out)
        st = pl_map_write_npy(aligned, aligned_out, &err);
    if (!st && !res.refused && view_out) {
        pl_image *img = NULL;
        pl_render_options ropts = PL_RENDER_OPTIONS_INIT;
        int cb = 0, cc = 0; /* the channels registered on */
        st = pl_register_channels(&cb, &cc, base, aligned, a.quantity, a.label, &err);
        /* named like a rendering of the current map, with the baseline map it
         * was laid onto */
        char ident[PL_RENDER_IDENTIFICATION_SIZE];
        int simulated = 0;
        if (!st)
            st = pl_history_identification(ident, sizeof ident, &simulated, store,
                                           pair.current_map, pair.baseline_map,
                                           aligned->channels[cc].quantity, &err);
        ropts.identification = ident;
        ropts.simulated = simulated;
        if (!st)
            st = pl_render_pair(&img, base, (uint32_t)cb, aligned, (uint32_t)cc, a.view_mode, 0,
                                &ropts, &err);
        if (!st)
            st = pl_image_write_png(img, view_out, &err);
        pl_image_free(img);
    }
    if (!st)
        st = pl_record_registration(store, &pair, &res, a.manual,
                                    a.manual ? "manual" : "phase-correlation log-polar",
                                    a.by, a.why, params, &rid, &cid, &err);
    if (!st)
        st = pl_registration_summary_load(&sum, store, a.airframe, a.site, &pair, rid, cid,
                                          &err);
    pl_store_close(store);
    free(params);
    if (st || res.refused) { /* a refusal writes no outputs */
        pl_outfile_abort(aligned_out);
        pl_outfile_abort(view_out);
    } else {
        st = pl_outfile_commit(aligned_out, &err);
        st = pl_outfile_finish(view_out, st, &err);
        sum.aligned = aligned_out ? a.aligned : NULL;
        sum.view = view_out ? a.view : NULL;
    }
    pl_map_free(base);
    pl_map_free(cur);
    pl_map_free(aligned);
    if (st) {
        pl_registration_summary_clear(&sum);
        return cli_fail_err(st, &err);
    }
    rc = print_result(&sum, &common);
    pl_registration_summary_clear(&sum);
    if (res.refused) {
        fprintf(stderr, "plyledger: %s site %s: registration refused: %s\n", a.airframe, a.site,
                res.reason);
        return CLI_ERROR;
    }
    return rc;
}
