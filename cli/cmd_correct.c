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
    "  --inspector NAME  --level LEVEL  --notes TEXT\n"
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
    "      --json             print the corrected record as JSON\n"
    "  -q, --quiet            print nothing on success\n"
    "  -h, --help             show this help\n";

enum {
    O_INSPECTION = 0x100, O_AIRFRAME, O_SITE, O_REASON, O_KIND, O_DATE, O_TASK, O_HOURS,
    O_CYCLES, O_PROCEDURE, O_PROCEDURE_REV, O_EQUIPMENT, O_CALIBRATION, O_INSPECTOR, O_LEVEL,
    O_NOTES, O_ZONE, O_DESCRIPTION, O_FRAME, O_STRINGER, O_MATERIAL, O_THICKNESS,
    O_DIFFUSIVITY, O_METHOD, O_ORIGIN, O_U, O_V, O_WIDTH, O_HEIGHT, O_PITCH,
};
static const struct option opts[] = {
    { "inspection", required_argument, NULL, O_INSPECTION },
    { "airframe", required_argument, NULL, O_AIRFRAME },
    { "site", required_argument, NULL, O_SITE },
    { "reason", required_argument, NULL, O_REASON },
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

/* Options are kept by code until we know which record they apply to. */
#define NOPTS (O_PITCH - O_INSPECTION + 1)
typedef struct correct_args {
    const char *val[NOPTS];
    int insp_fields, site_fields;
} correct_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    correct_args *a = ctx;
    if (opt < O_INSPECTION || opt > O_PITCH)
        return CLI_USAGE;
    a->val[opt - O_INSPECTION] = arg;
    if (opt >= O_KIND && opt <= O_NOTES)
        a->insp_fields++;
    else if (opt >= O_ZONE)
        a->site_fields++;
    return 0;
}

#define V(a, o) ((a)->val[(o) - O_INSPECTION])

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
    if (cli_count("--inspection", V(a, O_INSPECTION), &key, usage))
        return CLI_USAGE;
    pl_err err = { 0 };
    pl_inspection in;
    memset(&in, 0, sizeof in);
    int st = pl_store_get_inspection(store, (pl_id)key, &in, &err);
    if (st)
        return cli_fail_err(st, &err);
    int rc;
    double hours = NAN;
    long long cycles = -1;
    if ((rc = cli_text(in.kind, sizeof in.kind, V(a, O_KIND), "--kind"))
        || (rc = cli_text(in.performed_on, sizeof in.performed_on, V(a, O_DATE), "--date"))
        || (rc = cli_text(in.task_ref, sizeof in.task_ref, V(a, O_TASK), "--task"))
        || (rc = cli_text(in.procedure, sizeof in.procedure, V(a, O_PROCEDURE), "--procedure"))
        || (rc = cli_text(in.procedure_rev, sizeof in.procedure_rev, V(a, O_PROCEDURE_REV),
                          "--procedure-rev"))
        || (rc = cli_text(in.equipment, sizeof in.equipment, V(a, O_EQUIPMENT), "--equipment"))
        || (rc = cli_text(in.calibration_ref, sizeof in.calibration_ref, V(a, O_CALIBRATION),
                          "--calibration"))
        || (rc = cli_text(in.inspector, sizeof in.inspector, V(a, O_INSPECTOR), "--inspector"))
        || (rc = cli_text(in.inspector_level, sizeof in.inspector_level, V(a, O_LEVEL), "--level"))
        || (rc = cli_text(in.notes, sizeof in.notes, V(a, O_NOTES), "--notes"))
        || (V(a, O_HOURS) && (rc = cli_number("--hours", V(a, O_HOURS), &hours, usage)))
        || (V(a, O_CYCLES) && (rc = cli_count("--cycles", V(a, O_CYCLES), &cycles, usage)))) {
        pl_inspection_clear(&in);
        return rc;
    }
    if (V(a, O_HOURS))
        in.aircraft_hours = hours;
    if (V(a, O_CYCLES))
        in.aircraft_cycles = cycles;
    st = pl_store_correct_inspection(store, (pl_id)key, &in, V(a, O_REASON), NULL, &err);
    pl_inspection_clear(&in);
    if (!st)
        st = pl_store_get_inspection(store, (pl_id)key, &in, &err);
    if (st)
        return cli_fail_err(st, &err);
    if (common->json)
        rc = cli_print_json(cli_json_inspection(&in));
    else if (!common->quiet)
        printf("corrected inspection %lld (now version %lld): %s\n", key, (long long)in.id,
               V(a, O_REASON));
    pl_inspection_clear(&in);
    return rc;
}

static int correct_site(const correct_args *a, pl_store *store, const cli_common *common)
{
    pl_err err = { 0 };
    pl_site s;
    int st = pl_store_get_site(store, V(a, O_AIRFRAME), V(a, O_SITE), &s, &err);
    if (st)
        return cli_fail_err(st, &err);
    int rc;
    if ((rc = cli_text(s.zone, sizeof s.zone, V(a, O_ZONE), "--zone"))
        || (rc = cli_text(s.description, sizeof s.description, V(a, O_DESCRIPTION), "--description"))
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
    long long n;
    if (V(a, O_WIDTH)) {
        if ((rc = cli_count("--width", V(a, O_WIDTH), &n, usage)))
            return rc;
        s.width_px = (uint32_t)n;
    }
    if (V(a, O_HEIGHT)) {
        if ((rc = cli_count("--height", V(a, O_HEIGHT), &n, usage)))
            return rc;
        s.height_px = (uint32_t)n;
    }
    if (V(a, O_PITCH) && (rc = cli_pitch("--pitch", V(a, O_PITCH), &s.pitch_u, &s.pitch_v, usage)))
        return rc;
    st = pl_store_correct_site(store, &s, V(a, O_REASON), NULL, &err);
    if (!st)
        st = pl_store_get_site(store, V(a, O_AIRFRAME), V(a, O_SITE), &s, &err);
    if (st)
        return cli_fail_err(st, &err);
    if (common->json)
        return cli_print_json(cli_json_site(&s));
    if (!common->quiet)
        printf("corrected site %s on %s (now version %lld): %s\n", s.code, s.airframe_serial,
               (long long)s.id, V(a, O_REASON));
    return CLI_OK;
}

int cmd_correct(int argc, char **argv)
{
    cli_common common;
    correct_args a;
    memset(&a, 0, sizeof a);
    int first;
    int rc = cli_parse(argc, argv, "", opts, &common, take_opt, &a, usage, help, &first);
    if (rc >= 0)
        return rc;
    if (first < argc)
        return cli_usage_error(usage, "unexpected operand '%s'", argv[first]);
    int is_insp = V(&a, O_INSPECTION) != NULL;
    int is_site = V(&a, O_SITE) != NULL || V(&a, O_AIRFRAME) != NULL;
    if (is_insp == is_site)
        return cli_usage_error(usage, "give --inspection ID, or --airframe and --site");
    if (is_site && (!V(&a, O_SITE) || !V(&a, O_AIRFRAME)))
        return cli_usage_error(usage, "a site is named by --airframe and --site together");
    if (!V(&a, O_REASON) || !*V(&a, O_REASON))
        return cli_usage_error(usage, "--reason is required: say why the record is corrected");
    if (is_insp && a.site_fields)
        return cli_usage_error(usage, "site fields cannot correct an inspection");
    if (is_site && a.insp_fields)
        return cli_usage_error(usage, "inspection fields cannot correct a site");
    if (!a.insp_fields && !a.site_fields)
        return cli_usage_error(usage, "nothing to correct: give the fields that change");
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, 0)))
        return rc;
    rc = is_insp ? correct_inspection(&a, store, &common) : correct_site(&a, store, &common);
    pl_store_close(store);
    return rc;
}
