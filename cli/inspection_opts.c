/*
 * inspection_opts.c - the command-line options that describe an inspection
 * (what, when, who, how), shared by the commands that record one.
 */
#include "cli.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

const char cli_inspection_help[] =
    "What was inspected:\n"
    "      --airframe SERIAL     the airframe\n"
    "      --site CODE           the site\n"
    "      --kind KIND           @KINDS@\n"
    "      --date DATE           date performed, YYYY-MM-DD\n"
    "      --task REF            maintenance task or check reference\n"
    "      --hours N             aircraft flight hours at the inspection\n"
    "      --cycles N            aircraft flight cycles at the inspection\n"
    "Traceability (required):\n"
    "      --procedure REF       approved inspection procedure\n"
    "      --procedure-rev REV   its revision\n"
    "      --equipment TEXT      equipment used\n"
    "      --calibration REF     calibration or reference standard\n"
    "      --inspector NAME      who performed it\n"
    "      --level LEVEL         the inspector's level: 1-limited, 1, 2 or 3\n"
    "      --notes TEXT          free notes\n"
    "      --parameters FILE     processing parameters, a JSON object\n"
    "      --simulated           the data come from a simulation, not from the part\n"
    "                            (a simulated inspection is never a real one's baseline)\n"
    "      --hours-reason TEXT   why the hours or cycles are fewer than an earlier\n"
    "                            inspection's (a documented records correction)\n";

void cli_inspection_init(cli_inspection_args *a)
{
    memset(a, 0, sizeof *a);
    a->hours = NAN;
    a->simulated = -1;
}

int cli_inspection_take(cli_inspection_args *a, int opt, const char *arg, const char *usage)
{
    switch (opt) {
    case CLI_O_AIRFRAME: a->airframe = arg; break;
    case CLI_O_SITE: a->site = arg; break;
    case CLI_O_KIND: a->kind = arg; break;
    case CLI_O_DATE: a->date = arg; break;
    case CLI_O_TASK: a->task = arg; break;
    case CLI_O_PROCEDURE: a->procedure = arg; break;
    case CLI_O_PROCEDURE_REV: a->procedure_rev = arg; break;
    case CLI_O_EQUIPMENT: a->equipment = arg; break;
    case CLI_O_CALIBRATION: a->calibration = arg; break;
    case CLI_O_INSPECTOR: a->inspector = arg; break;
    case CLI_O_LEVEL: a->level = arg; break;
    case CLI_O_NOTES: a->notes = arg; break;
    case CLI_O_PARAMETERS: a->parameters = arg; break;
    case CLI_O_HOURS_REASON: a->hours_reason = arg; break;
    case CLI_O_SIMULATED: a->simulated = 1; break;
    case CLI_O_HOURS:
        a->has_hours = 1;
        if (cli_number("--hours", arg, &a->hours, usage))
            return CLI_USAGE;
        return cli_bound(PL_BOUND_HOURS, a->hours, "--hours");
    case CLI_O_CYCLES:
        a->has_cycles = 1;
        if (cli_count("--cycles", arg, &a->cycles, usage))
            return CLI_USAGE;
        return cli_bound(PL_BOUND_CYCLES, (double)a->cycles, "--cycles");
    default:
        return cli_usage_error(usage, "unexpected option");
    }
    return 0;
}

int cli_inspection_given(const cli_inspection_args *a)
{
    return a->airframe || a->site || a->kind || a->date || a->task || a->procedure
           || a->procedure_rev || a->equipment || a->calibration || a->inspector || a->level
           || a->notes || a->parameters || a->has_hours || a->has_cycles || a->hours_reason
           || a->simulated >= 0;
}

int cli_read_json_object(const char *path, char **out)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return cli_fail("%s: cannot open", path);
    char *buf = NULL;
    size_t cap = 0, n = 0;
    for (;;) {
        if (n + 4096 + 1 > cap) {
            cap = cap ? cap * 2 : 8192;
            char *nb = cap <= (16u << 20) ? realloc(buf, cap) : NULL;
            if (!nb) {
                free(buf);
                fclose(f);
                return cli_fail("%s: too large", path);
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
        return cli_fail("%s: not a JSON object", path);
    }
    *out = cJSON_PrintUnformatted(j);
    cJSON_Delete(j);
    return *out ? CLI_OK : cli_fail("out of memory");
}

int cli_inspection_apply(const cli_inspection_args *a, pl_inspection *in, const char *params)
{
    int rc;
    if ((rc = cli_key(in->airframe_serial, sizeof in->airframe_serial, a->airframe, "--airframe"))
        || (rc = cli_key(in->site_code, sizeof in->site_code, a->site, "--site"))
        || (rc = cli_text(in->kind, sizeof in->kind, a->kind, "--kind"))
        || (rc = cli_text(in->performed_on, sizeof in->performed_on, a->date, "--date"))
        || (rc = cli_text(in->task_ref, sizeof in->task_ref, a->task, "--task"))
        || (rc = cli_text(in->procedure, sizeof in->procedure, a->procedure, "--procedure"))
        || (rc = cli_text(in->procedure_rev, sizeof in->procedure_rev, a->procedure_rev,
                          "--procedure-rev"))
        || (rc = cli_free(in->equipment, sizeof in->equipment, a->equipment, "--equipment"))
        || (rc = cli_text(in->calibration_ref, sizeof in->calibration_ref, a->calibration,
                          "--calibration"))
        || (rc = cli_text(in->inspector, sizeof in->inspector, a->inspector, "--inspector"))
        || (rc = cli_text(in->inspector_level, sizeof in->inspector_level, a->level, "--level"))
        || (rc = cli_free(in->notes, sizeof in->notes, a->notes, "--notes"))
        || (rc = cli_free(in->hours_reason, sizeof in->hours_reason, a->hours_reason,
                          "--hours-reason")))
        return rc;
    if (a->simulated >= 0)
        in->simulated = a->simulated;
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
