/*
 * cmd_correct.c - plyledger correct: a recorded inspection or site gets a
 * corrected version with a reason; the original stays in the record.
 */
#include "cli.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

static const char usage[] =
    "(--inspection ID | --airframe SERIAL --site CODE) --reason TEXT [fields to change]";
static const char help[] =
    "usage: plyledger correct --inspection ID --reason TEXT [inspection fields]\n"
    "       plyledger correct --airframe SERIAL --site CODE --reason TEXT [site fields]\n"
    "\n"
    "Nothing recorded is ever changed in place: a correction adds a new version of\n"
    "the record that supersedes the current one, with the reason, and listings show\n"
    "the new version from then on. Only the fields given change.\n"
    "\n"
    "Inspection fields:\n"
    "  --kind KIND  --date DATE  --task REF  --hours N  --cycles N\n"
    "  --procedure REF  --procedure-rev REV  --equipment TEXT  --calibration REF\n"
    "  --inspector NAME  --level LEVEL  --notes TEXT  --parameters FILE\n"
    "  --hours-reason TEXT (\"\" clears it)  --simulated  --not-simulated\n"
    "Site fields:\n"
    "  --zone Z  --description TEXT  --frame F  --stringer S  --material M\n"
    "  --thickness MM  --diffusivity MM2_S  --method METHOD\n"
    "  --origin X,Y,Z  --u X,Y,Z  --v X,Y,Z    (the map frame on the part)\n"
    "  --width PX  --height PX  --pitch MM[,MM]\n"
    "\n"
    "Options:\n"
    "      --inspection ID    the inspection to correct (see 'plyledger inspections')\n"
    "      --airframe SERIAL  with --site: the site to correct\n"
    "      --site CODE\n"
    "      --reason TEXT      why (required)\n"
    "  -s, --store PATH       the store (default $PLYLEDGER_STORE)\n"
    "      --wait SECONDS     @WAIT@\n"
    "      --json             print the corrected record as JSON\n"
    "  -q, --quiet            print nothing on success\n"
    "  -h, --help             show this help\n";

enum {
    O_INSPECTION = 0x100, O_REASON, O_NOT_SIMULATED, O_ZONE, O_DESCRIPTION, O_FRAME, O_STRINGER, O_MATERIAL,
    O_THICKNESS, O_DIFFUSIVITY, O_METHOD, O_ORIGIN, O_U, O_V, O_WIDTH, O_HEIGHT, O_PITCH,
};
static const struct option opts[] = {
    { "inspection", required_argument, NULL, O_INSPECTION },
    { "reason", required_argument, NULL, O_REASON },
    { "not-simulated", no_argument, NULL, O_NOT_SIMULATED },
    CLI_INSPECTION_OPTIONS,
    { "zone", required_argument, NULL, O_ZONE },
    { "description", required_argument, NULL, O_DESCRIPTION },
    { "frame", required_argument, NULL, O_FRAME },
    { "stringer", required_argument, NULL, O_STRINGER },
    { "material", required_argument, NULL, O_MATERIAL },
    { "thickness", required_argument, NULL, O_THICKNESS },
    { "diffusivity", required_argument, NULL, O_DIFFUSIVITY },
    { "method", required_argument, NULL, O_METHOD },
    { "origin", required_argument, NULL, O_ORIGIN },
    { "u", required_argument, NULL, O_U },
    { "v", required_argument, NULL, O_V },
    { "width", required_argument, NULL, O_WIDTH },
    { "height", required_argument, NULL, O_HEIGHT },
    { "pitch", required_argument, NULL, O_PITCH },
    { NULL, 0, NULL, 0 },
};

/* The inspection fields share their options with record and reduce; the
 * site fields are kept by code until we know which record is corrected. */
#define NSITE (O_PITCH - O_ZONE + 1)
typedef struct correct_args {
    cli_inspection_args insp;  /* also --airframe and --site, which name a site */
    const char *inspection, *reason;
    const char *site[NSITE];
    int site_fields;
} correct_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    correct_args *a = ctx;
    if (opt == O_INSPECTION)
        a->inspection = arg;
    else if (opt == O_REASON)
        a->reason = arg;
    else if (opt == O_NOT_SIMULATED)
        a->insp.simulated = 0;
    else if (opt >= O_ZONE && opt <= O_PITCH) {
        a->site[opt - O_ZONE] = arg;
        a->site_fields++;
    } else
        return cli_inspection_take(&a->insp, opt, arg, usage);
    return 0;
}

/* Whether an inspection field (not the airframe and site that name a
 * site) was given. */
static int inspection_fields(const cli_inspection_args *i)
{
    cli_inspection_args rest = *i;
    rest.airframe = rest.site = NULL;
    return cli_inspection_given(&rest);
}

#define V(a, o) ((a)->site[(o) - O_ZONE])

static int vec3(const char *opt, const char *arg, double out[3])
{
    char buf[128];
    if (cli_text(buf, sizeof buf, arg, opt))
        return CLI_USAGE;
    char *save = NULL, *tok = strtok_r(buf, ",", &save);
    for (int i = 0; i < 3; i++, tok = strtok_r(NULL, ",", &save))
        if (!tok || cli_number(opt, tok, &out[i], usage))
            return tok ? CLI_USAGE : cli_usage_error(usage, "%s needs X,Y,Z", opt);
    if (tok)
        return cli_usage_error(usage, "%s needs X,Y,Z", opt);
    return 0;
}

static int correct_inspection(const correct_args *a, pl_store *store, const cli_common *common)
{
    long long key;
    if (cli_count("--inspection", a->inspection, &key, usage))
        return CLI_USAGE;
    pl_err err = { 0 };
    pl_inspection in;
    memset(&in, 0, sizeof in);
    int st = pl_store_get_inspection(store, (pl_id)key, &in, &err);
    if (st)
        return cli_fail_err(st, &err);
    char *params = NULL;
    int rc = a->insp.parameters ? cli_read_json_object(a->insp.parameters, &params) : 0;
    if (!rc)
        rc = cli_inspection_apply(&a->insp, &in, params);
    free(params);
    if (rc) {
        pl_inspection_clear(&in);
        return rc;
    }
    st = pl_store_correct_inspection(store, (pl_id)key, &in, a->reason, NULL, &err);
    pl_inspection_clear(&in);
    if (!st)
        st = pl_store_get_inspection(store, (pl_id)key, &in, &err);
    if (st)
        return cli_fail_err(st, &err);
    if (common->json) {
        char *text = NULL;
        rc = cli_print_json_text(pl_row_json(&text, PL_TABLE_INSPECTION, &in, &err), &text, &err);
    } else if (!common->quiet)
        printf("corrected inspection %lld (now version %lld): %s\n", key, (long long)in.id,
               a->reason);
    pl_inspection_clear(&in);
    return rc;
}

static int correct_site(const correct_args *a, pl_store *store, const cli_common *common)
{
    pl_err err = { 0 };
    pl_site s;
    int st = pl_store_get_site(store, a->insp.airframe, a->insp.site, &s, &err);
    if (st)
        return cli_fail_err(st, &err);
    int rc;
    if ((rc = cli_text(s.zone, sizeof s.zone, V(a, O_ZONE), "--zone"))
        || (rc = cli_free(s.description, sizeof s.description, V(a, O_DESCRIPTION), "--description"))
        || (rc = cli_text(s.frame, sizeof s.frame, V(a, O_FRAME), "--frame"))
        || (rc = cli_text(s.stringer, sizeof s.stringer, V(a, O_STRINGER), "--stringer"))
        || (rc = cli_text(s.material, sizeof s.material, V(a, O_MATERIAL), "--material"))
        || (rc = cli_text(s.method, sizeof s.method, V(a, O_METHOD), "--method"))
        || (V(a, O_THICKNESS) && (rc = cli_number("--thickness", V(a, O_THICKNESS), &s.thickness_mm, usage)))
        || (V(a, O_DIFFUSIVITY)
            && (rc = cli_number("--diffusivity", V(a, O_DIFFUSIVITY), &s.diffusivity_mm2_s, usage)))
        || (V(a, O_ORIGIN) && (rc = vec3("--origin", V(a, O_ORIGIN), s.map_frame.origin)))
        || (V(a, O_U) && (rc = vec3("--u", V(a, O_U), s.map_frame.u)))
        || (V(a, O_V) && (rc = vec3("--v", V(a, O_V), s.map_frame.v))))
        return rc;
    if ((V(a, O_THICKNESS) && (rc = cli_bound(PL_BOUND_THICKNESS, s.thickness_mm, "--thickness")))
        || (V(a, O_DIFFUSIVITY)
            && (rc = cli_bound(PL_BOUND_DIFFUSIVITY, s.diffusivity_mm2_s, "--diffusivity"))))
        return rc;
    for (int k = 0; V(a, O_ORIGIN) && k < 3; k++)
        if ((rc = cli_bound(PL_BOUND_COORDINATE, s.map_frame.origin[k], "--origin")))
            return rc;
    long long n;
    if (V(a, O_WIDTH)) {
        /* 0 is "any size"; anything else is a map side */
        if ((rc = cli_count("--width", V(a, O_WIDTH), &n, usage))
            || (n && (rc = cli_bound(PL_BOUND_MAP_SIDE, (double)n, "--width"))))
            return rc;
        s.width_px = (uint32_t)n;
    }
    if (V(a, O_HEIGHT)) {
        if ((rc = cli_count("--height", V(a, O_HEIGHT), &n, usage))
            || (n && (rc = cli_bound(PL_BOUND_MAP_SIDE, (double)n, "--height"))))
            return rc;
        s.height_px = (uint32_t)n;
    }
    if (V(a, O_PITCH) && (rc = cli_pitch("--pitch", V(a, O_PITCH), &s.pitch_u, &s.pitch_v, usage)))
        return rc;
    st = pl_store_correct_site(store, &s, a->reason, NULL, &err);
    if (!st)
        st = pl_store_get_site(store, a->insp.airframe, a->insp.site, &s, &err);
    if (st)
        return cli_fail_err(st, &err);
    if (common->json) {
        char *text = NULL;
        return cli_print_json_text(pl_row_json(&text, PL_TABLE_SITE, &s, &err), &text, &err);
    }
    if (!common->quiet)
        printf("corrected site %s on %s (now version %lld): %s\n", s.code, s.airframe_serial,
               (long long)s.id, a->reason);
    return CLI_OK;
}

int cmd_correct(int argc, char **argv)
{
    cli_common common;
    correct_args a;
    memset(&a, 0, sizeof a);
    cli_inspection_init(&a.insp);
    int rc = cli_parse(argc, argv, "", opts, &common, take_opt, &a, usage, help, NULL);
    if (rc >= 0)
        return rc;
    int is_insp = a.inspection != NULL;
    int is_site = a.insp.site != NULL || a.insp.airframe != NULL;
    int insp_fields = inspection_fields(&a.insp);
    if (is_insp == is_site)
        return cli_usage_error(usage, "give --inspection ID, or --airframe and --site");
    if (is_site && (!a.insp.site || !a.insp.airframe))
        return cli_usage_error(usage, "a site is named by --airframe and --site together");
    if (!a.reason || !*a.reason)
        return cli_usage_error(usage, "--reason is required: say why the record is corrected");
    if (is_insp && a.site_fields)
        return cli_usage_error(usage, "site fields cannot correct an inspection");
    if (is_site && insp_fields)
        return cli_usage_error(usage, "inspection fields cannot correct a site");
    if (!insp_fields && !a.site_fields)
        return cli_usage_error(usage, "nothing to correct: give the fields that change");
    if ((rc = cli_check_text(a.insp.airframe, CLI_KEY, "--airframe"))
        || (rc = cli_check_text(a.insp.site, CLI_KEY, "--site"))
        || (rc = cli_check_text(a.reason, CLI_FREE, "--reason")))
        return rc;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, 0)))
        return rc;
    rc = is_insp ? correct_inspection(&a, store, &common) : correct_site(&a, store, &common);
    pl_store_close(store);
    return rc;
}
