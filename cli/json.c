/*
 * json.c - the --json forms of the records. Field names are plyledger's
 * own and stable: scripts rely on them.
 */
#include "cli.h"

#include <math.h>
#include <stdlib.h>

int cli_print_json(cJSON *value)
{
    if (!value)
        return cli_fail("out of memory");
    char *text = cJSON_Print(value);
    cJSON_Delete(value);
    if (!text)
        return cli_fail("out of memory");
    puts(text);
    cJSON_free(text);
    return CLI_OK;
}

void cli_json_num(cJSON *o, const char *key, double v)
{
    if (isfinite(v))
        cJSON_AddNumberToObject(o, key, v);
    else
        cJSON_AddNullToObject(o, key);
}

/* Empty optional text becomes null, so "not recorded" reads as such. */
static void add_text(cJSON *o, const char *key, const char *s)
{
    if (s && *s)
        cJSON_AddStringToObject(o, key, s);
    else
        cJSON_AddNullToObject(o, key);
}

static cJSON *vec3(const double v[3])
{
    return cJSON_CreateDoubleArray(v, 3);
}

cJSON *cli_json_placement(const pl_placement *p)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddItemToObject(o, "origin", vec3(p->origin));
    cJSON_AddItemToObject(o, "u", vec3(p->u));
    cJSON_AddItemToObject(o, "v", vec3(p->v));
    cJSON_AddStringToObject(o, "system", p->system);
    cJSON_AddStringToObject(o, "unit", p->unit);
    return o;
}

cJSON *cli_json_airframe(const pl_airframe *af)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddStringToObject(o, "serial", af->serial);
    cJSON_AddStringToObject(o, "aircraft_type", af->aircraft_type);
    add_text(o, "manufactured", af->manufactured);
    add_text(o, "operator", af->operator_name);
    add_text(o, "operator_since", af->operator_since);
    add_text(o, "notes", af->notes);
    cJSON_AddNumberToObject(o, "key", (double)af->key);
    cJSON_AddNumberToObject(o, "version_id", (double)af->id);
    cJSON_AddStringToObject(o, "recorded_at", af->recorded_at);
    return o;
}

cJSON *cli_json_site(const pl_site *s)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddStringToObject(o, "airframe", s->airframe_serial);
    cJSON_AddStringToObject(o, "site", s->code);
    add_text(o, "zone", s->zone);
    add_text(o, "description", s->description);
    add_text(o, "frame", s->frame);
    add_text(o, "stringer", s->stringer);
    cJSON_AddStringToObject(o, "method", s->method);
    add_text(o, "material", s->material);
    cli_json_num(o, "thickness_mm", s->thickness_mm);
    cli_json_num(o, "diffusivity_mm2_s", s->diffusivity_mm2_s);
    cJSON_AddItemToObject(o, "map_frame", cli_json_placement(&s->map_frame));
    if (s->width_px)
        cJSON_AddNumberToObject(o, "width_px", s->width_px);
    else
        cJSON_AddNullToObject(o, "width_px");
    if (s->height_px)
        cJSON_AddNumberToObject(o, "height_px", s->height_px);
    else
        cJSON_AddNullToObject(o, "height_px");
    cJSON_AddNumberToObject(o, "pitch_u_mm", s->pitch_u);
    cJSON_AddNumberToObject(o, "pitch_v_mm", s->pitch_v);
    cJSON_AddNumberToObject(o, "key", (double)s->key);
    cJSON_AddNumberToObject(o, "version_id", (double)s->id);
    cJSON_AddStringToObject(o, "recorded_at", s->recorded_at);
    return o;
}

cJSON *cli_json_inspection(const pl_inspection *in)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddNumberToObject(o, "inspection", (double)in->key);
    cJSON_AddNumberToObject(o, "version_id", (double)in->id);
    cJSON_AddStringToObject(o, "airframe", in->airframe_serial);
    cJSON_AddStringToObject(o, "site", in->site_code);
    cJSON_AddStringToObject(o, "kind", in->kind);
    cJSON_AddStringToObject(o, "date", in->performed_on);
    add_text(o, "task", in->task_ref);
    cli_json_num(o, "hours", in->aircraft_hours);
    if (in->aircraft_cycles >= 0)
        cJSON_AddNumberToObject(o, "cycles", (double)in->aircraft_cycles);
    else
        cJSON_AddNullToObject(o, "cycles");
    cJSON_AddStringToObject(o, "procedure", in->procedure);
    cJSON_AddStringToObject(o, "procedure_revision", in->procedure_rev);
    cJSON_AddStringToObject(o, "equipment", in->equipment);
    cJSON_AddStringToObject(o, "calibration", in->calibration_ref);
    cJSON_AddStringToObject(o, "inspector", in->inspector);
    cJSON_AddStringToObject(o, "inspector_level", in->inspector_level);
    cJSON_AddStringToObject(o, "software_version", in->software_version);
    add_text(o, "notes", in->notes);
    cJSON *params = in->parameters_json ? cJSON_Parse(in->parameters_json) : NULL;
    if (params)
        cJSON_AddItemToObject(o, "parameters", params);
    else
        cJSON_AddNullToObject(o, "parameters");
    cJSON_AddStringToObject(o, "recorded_at", in->recorded_at);
    return o;
}

cJSON *cli_json_map(const pl_map_record *m)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddNumberToObject(o, "map", (double)m->id);
    cJSON_AddNumberToObject(o, "inspection", (double)m->inspection_key);
    add_text(o, "source", m->source);
    cJSON_AddStringToObject(o, "made_by", m->origin);
    cJSON_AddNumberToObject(o, "width", m->width);
    cJSON_AddNumberToObject(o, "height", m->height);
    cJSON_AddNumberToObject(o, "pitch_u_mm", m->pitch_u);
    cJSON_AddNumberToObject(o, "pitch_v_mm", m->pitch_v);
    cJSON *chs = cJSON_AddArrayToObject(o, "channels");
    for (uint32_t c = 0; c < m->nchannels && m->channels; c++) {
        cJSON *ch = cJSON_CreateObject();
        cJSON_AddStringToObject(ch, "quantity", m->channels[c].quantity);
        cJSON_AddStringToObject(ch, "unit", m->channels[c].unit);
        add_text(ch, "label", m->channels[c].label);
        cJSON_AddItemToArray(chs, ch);
    }
    cJSON_AddItemToObject(o, "placement", cli_json_placement(&m->placement));
    cJSON_AddStringToObject(o, "sha256", m->sha256);
    cJSON_AddNumberToObject(o, "stored_bytes", (double)m->stored_bytes);
    cJSON_AddStringToObject(o, "software_version", m->software_version);
    cJSON *params = m->parameters_json ? cJSON_Parse(m->parameters_json) : NULL;
    if (params)
        cJSON_AddItemToObject(o, "parameters", params);
    else
        cJSON_AddNullToObject(o, "parameters");
    cJSON_AddStringToObject(o, "recorded_at", m->recorded_at);
    return o;
}
