/*
 * record.c - batches of inspections with their map files, from a JSON
 * sidecar or from calls, written into the store all or nothing.
 */
#include "plyledger/record.h"

#include "common/common_int.h"
#include "record/record_int.h"

#include <cjson/cJSON.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

PL_EXPORT int pl_record_new(pl_record **out, pl_err *err)
{
    *out = calloc(1, sizeof **out);
    if (!*out)
        return pl__err(err, PL_ENOMEM, "out of memory");
    return PL_OK;
}

static void free_map_entry(pl_record_map *m)
{
    free(m->path);
    free(m->channels);
}

PL_EXPORT void pl_record_free(pl_record *rec)
{
    if (!rec)
        return;
    for (size_t i = 0; i < rec->nsites; i++) {
        pl_record_site *s = &rec->sites[i];
        for (size_t j = 0; j < s->nmaps; j++)
            free_map_entry(&s->maps[j]);
        free(s->maps);
        free(s->insp.parameters_json);
    }
    free(rec->sites);
    free(rec->source);
    free(rec);
}

PL_EXPORT int pl_record_add_site(pl_record *rec, const pl_inspection *insp, size_t *index,
                                 pl_err *err)
{
    pl_record_site *grown = realloc(rec->sites, (rec->nsites + 1) * sizeof *grown);
    if (!grown)
        return pl__err(err, PL_ENOMEM, "out of memory");
    rec->sites = grown;
    pl_record_site *s = &rec->sites[rec->nsites];
    memset(s, 0, sizeof *s);
    s->insp = *insp;
    s->insp.parameters_json = NULL;
    if (insp->parameters_json && !(s->insp.parameters_json = pl__strdup(insp->parameters_json)))
        return pl__err(err, PL_ENOMEM, "out of memory");
    if (index)
        *index = rec->nsites;
    rec->nsites++;
    return PL_OK;
}

/* Split a comma separated list into at most `cap` trimmed items written
 * into fixed buffers of `size` bytes each; returns the count or -1. */
static int split_list(const char *list, char *items, size_t size, int cap)
{
    int n = 0;
    const char *p = list;
    while (*p) {
        const char *end = strchr(p, ',');
        size_t len = end ? (size_t)(end - p) : strlen(p);
        while (len && (*p == ' ' || *p == '\t')) {
            p++;
            len--;
        }
        while (len && (p[len - 1] == ' ' || p[len - 1] == '\t'))
            len--;
        if (n >= cap || len >= size)
            return -1;
        memcpy(items + (size_t)n * size, p, len);
        items[(size_t)n * size + len] = '\0';
        n++;
        if (!end)
            break;
        p = end + 1;
    }
    return n;
}

static int append_map(pl_record_site *s, pl_record_map **out, pl_err *err)
{
    pl_record_map *grown = realloc(s->maps, (s->nmaps + 1) * sizeof *grown);
    if (!grown)
        return pl__err(err, PL_ENOMEM, "out of memory");
    s->maps = grown;
    pl_record_map *m = &s->maps[s->nmaps++];
    memset(m, 0, sizeof *m);
    m->pitch_u = m->pitch_v = NAN;
    *out = m;
    return PL_OK;
}

/* Append a map file with its channel descriptions (n may be 0: from the
 * file), each checked, a missing unit taking the quantity's default. The
 * two ways in (comma lists, a sidecar's channel objects) both end here. */
static int add_map(pl_record *rec, size_t site, const char *path, pl_channel *ch, uint32_t n,
                   double pitch_u, double pitch_v, pl_err *err)
{
    if (site >= rec->nsites)
        return pl__err(err, PL_EINVAL, "site index %zu out of range", site);
    if (!path || !*path)
        return pl__err(err, PL_EINVAL, "map file name is empty");
    for (uint32_t i = 0; i < n; i++) {
        if (!ch[i].unit[0]) {
            const char *unit = pl_quantity_default_unit(ch[i].quantity);
            if (!unit)
                return pl__err(err, PL_EINVAL, "%s: quantity %s needs a unit", path,
                               ch[i].quantity);
            snprintf(ch[i].unit, sizeof ch[i].unit, "%s", unit);
        }
        int rc = pl_quantity_check(ch[i].quantity, ch[i].unit, err);
        if (rc)
            return rc;
    }
    if ((!isnan(pitch_u) && !(pitch_u > 0 && isfinite(pitch_u)))
        || (!isnan(pitch_v) && !(pitch_v > 0 && isfinite(pitch_v))))
        return pl__err(err, PL_EINVAL, "%s: pitch must be a positive number of mm", path);
    char what[PL_ERR_MSG_SIZE / 2];
    snprintf(what, sizeof what, "%s: pitch", path);
    for (int k = 0; k < 2; k++) {
        double p = k ? pitch_v : pitch_u;
        int rc = isnan(p) ? PL_OK : pl_bound_check(PL_BOUND_PITCH, p, what, err);
        if (rc)
            return rc;
    }
    pl_record_map *m = NULL;
    int rc = append_map(&rec->sites[site], &m, err);
    if (rc)
        return rc;
    m->pitch_u = pitch_u;
    m->pitch_v = pitch_v;
    if (!(m->path = pl__strdup(path)))
        return pl__err(err, PL_ENOMEM, "out of memory");
    if (n) {
        if (!(m->channels = calloc(n, sizeof *m->channels)))
            return pl__err(err, PL_ENOMEM, "out of memory");
        memcpy(m->channels, ch, n * sizeof *ch);
        m->nchannels = n;
    }
    return PL_OK;
}

enum { MAX_LISTED_CHANNELS = 32 };

PL_EXPORT int pl_record_add_map(pl_record *rec, size_t site, const char *path,
                                const char *quantities, const char *units,
                                double pitch_u, double pitch_v, pl_err *err)
{
    const char *name = path && *path ? path : "map";
    char q[MAX_LISTED_CHANNELS][PL_QUANTITY_SIZE], u[MAX_LISTED_CHANNELS][PL_UNIT_SIZE];
    int nq = quantities && *quantities
                 ? split_list(quantities, q[0], PL_QUANTITY_SIZE, MAX_LISTED_CHANNELS) : 0;
    int nu = units && *units ? split_list(units, u[0], PL_UNIT_SIZE, MAX_LISTED_CHANNELS) : 0;
    if (nq < 0 || nu < 0)
        return pl__err(err, PL_EINVAL, "%s: too many or too long quantities or units", name);
    if (nu && nq != nu)
        return pl__err(err, PL_EINVAL, "%s: %d quantities but %d units", name, nq, nu);
    pl_channel ch[MAX_LISTED_CHANNELS];
    memset(ch, 0, sizeof ch);
    for (int i = 0; i < nq; i++) {
        memcpy(ch[i].quantity, q[i], sizeof q[i]);
        if (nu)
            memcpy(ch[i].unit, u[i], sizeof u[i]);
    }
    return add_map(rec, site, path, ch, (uint32_t)nq, pitch_u, pitch_v, err);
}

/* ---- sidecar ----------------------------------------------------------- */

/* The inspection fields a sidecar may give, at the top or per site, and
 * what their text is: a key, a name (one line) or free text. */
enum { KEY, NAME, FREE };
typedef struct text_field {
    const char *key;
    size_t offset;
    size_t size;
    int kind;
} text_field;

#define TEXT_FIELD(k, member, kind) \
    { k, offsetof(pl_inspection, member), sizeof(((pl_inspection *)0)->member), kind }
static const text_field text_fields[] = {
    TEXT_FIELD("airframe", airframe_serial, KEY),
    TEXT_FIELD("site", site_code, KEY),
    TEXT_FIELD("kind", kind, NAME),
    TEXT_FIELD("task", task_ref, NAME),
    TEXT_FIELD("date", performed_on, NAME),
    TEXT_FIELD("procedure", procedure, NAME),
    TEXT_FIELD("procedure_revision", procedure_rev, NAME),
    TEXT_FIELD("equipment", equipment, FREE),
    TEXT_FIELD("calibration", calibration_ref, NAME),
    TEXT_FIELD("inspector", inspector, NAME),
    TEXT_FIELD("inspector_level", inspector_level, NAME),
    TEXT_FIELD("software_version", software_version, NAME),
    TEXT_FIELD("notes", notes, FREE),
    TEXT_FIELD("hours_reason", hours_reason, FREE),
};

/* The text of a sidecar string as it can be stored (valid UTF-8, control
 * characters only in free text, a key in the key alphabet), named by
 * `what` ("c.json: site A1: \"inspector\""). */
static int check_string(const char *v, int kind, const char *what, pl_err *err)
{
    if (kind == KEY)
        return pl_key_check(v, what, err);
    return pl_text_check(v, kind == FREE ? PL_TEXT_LINES : 0, what, err);
}

/*
 * A JSON number that must be a whole count inside its bound. cJSON reads
 * every number as a double, which holds whole numbers exactly only below
 * 2^53; a larger one is refused rather than taken as a neighbour of what
 * the file says (2^53 + 1 would read as 2^53).
 */
static int take_whole(int64_t *out, const cJSON *it, pl_bound b, const char *what, pl_err *err)
{
    if (!cJSON_IsNumber(it))
        return pl__err(err, PL_EFORMAT, "%s must be a whole number", what);
    double v = it->valuedouble;
    if (!(fabs(v) < 9007199254740992.0))
        return pl__err(err, PL_ERANGE, "%s: %g is 2^53 or more, beyond what a JSON number "
                       "holds exactly", what, v);
    if (v != floor(v))
        return pl__err(err, PL_EFORMAT, "%s must be a whole number (got %.17g)", what, v);
    if (v < 0)
        return pl__err(err, PL_ERANGE, "%s must not be negative (got %.0f)", what, v);
    int rc = pl_bound_check(b, v, what, err);
    if (!rc)
        *out = (int64_t)v;
    return rc;
}

/* Apply the inspection keys of JSON object `obj` onto `insp`; `where`
 * names the object in messages. Keys in `extra` are allowed and skipped. */
static int take_inspection_fields(pl_inspection *insp, const cJSON *obj, const char *file,
                                  const char *where, const char *const *extra, pl_err *err)
{
    for (const cJSON *it = obj->child; it; it = it->next) {
        const char *k = it->string;
        int known = 0;
        for (size_t i = 0; i < sizeof text_fields / sizeof text_fields[0]; i++) {
            if (strcmp(k, text_fields[i].key) != 0)
                continue;
            known = 1;
            if (!cJSON_IsString(it))
                return pl__err(err, PL_EFORMAT, "%s: %s: \"%s\" must be a string", file, where, k);
            char what[PL_ERR_MSG_SIZE / 2];
            snprintf(what, sizeof what, "%s: %s: \"%s\"", file, where, k);
            int rc = check_string(it->valuestring, text_fields[i].kind, what, err);
            if (!rc)
                rc = pl__copy_text((char *)insp + text_fields[i].offset, text_fields[i].size,
                                   it->valuestring, what, err);
            if (rc)
                return rc;
        }
        if (known)
            continue;
        char what[PL_ERR_MSG_SIZE / 2];
        snprintf(what, sizeof what, "%s: %s: \"%s\"", file, where, k);
        if (strcmp(k, "hours") == 0) {
            if (!cJSON_IsNumber(it))
                return pl__err(err, PL_EFORMAT, "%s must be a number of flight hours", what);
            int rc = pl_bound_check(PL_BOUND_HOURS, it->valuedouble, what, err);
            if (rc)
                return rc;
            insp->aircraft_hours = it->valuedouble;
        } else if (strcmp(k, "cycles") == 0) {
            int rc = take_whole(&insp->aircraft_cycles, it, PL_BOUND_CYCLES, what, err);
            if (rc)
                return rc;
        } else if (strcmp(k, "simulated") == 0) {
            if (!cJSON_IsBool(it))
                return pl__err(err, PL_EFORMAT, "%s: %s: \"simulated\" must be true (the data "
                               "come from a simulation) or false", file, where);
            insp->simulated = cJSON_IsTrue(it);
        } else if (strcmp(k, "parameters") == 0) {
            if (!cJSON_IsObject(it))
                return pl__err(err, PL_EFORMAT, "%s: %s: \"parameters\" must be an object", file, where);
            char *txt = cJSON_PrintUnformatted(it);
            if (!txt)
                return pl__err(err, PL_ENOMEM, "out of memory");
            free(insp->parameters_json);
            insp->parameters_json = pl__strdup(txt);
            cJSON_free(txt);
            if (!insp->parameters_json)
                return pl__err(err, PL_ENOMEM, "out of memory");
        } else {
            int allowed = 0;
            for (const char *const *e = extra; e && *e; e++)
                if (strcmp(k, *e) == 0)
                    allowed = 1;
            if (!allowed)
                return pl__err(err, PL_EFORMAT, "%s: %s: unknown key \"%s\"", file, where, k);
        }
    }
    return PL_OK;
}

/* Make a failure's message start with `at` (the sidecar, and where in it),
 * unless it already does. */
static int located(int rc, const char *at, pl_err *err)
{
    if (rc && err && strncmp(err->msg, at, strlen(at)) != 0) {
        char msg[PL_ERR_MSG_SIZE];
        snprintf(msg, sizeof msg, "%s", err->msg);
        pl__err(err, rc, "%s: %.400s", at, msg);
    }
    return rc;
}

/* Three numbers; with `coordinates`, each a part coordinate in its bound. */
static int take_vec3(double out[3], const cJSON *arr, const char *at, const char *what,
                     int coordinates, pl_err *err)
{
    if (!cJSON_IsArray(arr) || cJSON_GetArraySize(arr) != 3)
        return pl__err(err, PL_EFORMAT, "%s: %s must be an array of 3 numbers", at, what);
    for (int i = 0; i < 3; i++) {
        const cJSON *v = cJSON_GetArrayItem(arr, i);
        if (!cJSON_IsNumber(v))
            return pl__err(err, PL_EFORMAT, "%s: %s must be an array of 3 numbers", at, what);
        char name[PL_ERR_MSG_SIZE / 2];
        snprintf(name, sizeof name, "%s: %s %c", at, what, "xyz"[i]);
        int rc = coordinates ? pl_bound_check(PL_BOUND_COORDINATE, v->valuedouble, name, err)
                             : PL_OK;
        if (rc)
            return rc;
        out[i] = v->valuedouble;
    }
    return PL_OK;
}

/* A map's "placement" object; `at` names the map in the sidecar. */
static int take_placement(pl_placement *p, const cJSON *obj, const char *at, pl_err *err)
{
    if (!cJSON_IsObject(obj))
        return pl__err(err, PL_EFORMAT, "%s: \"placement\" must be an object", at);
    snprintf(p->system, sizeof p->system, "STA/BL/WL");
    snprintf(p->unit, sizeof p->unit, "mm");
    int have = 0;
    for (const cJSON *it = obj->child; it; it = it->next) {
        int rc = PL_OK;
        if (strcmp(it->string, "origin") == 0)
            rc = take_vec3(p->origin, it, at, "placement origin", 1, err), have |= 1;
        else if (strcmp(it->string, "u") == 0)
            rc = take_vec3(p->u, it, at, "placement u", 0, err), have |= 2;
        else if (strcmp(it->string, "v") == 0)
            rc = take_vec3(p->v, it, at, "placement v", 0, err), have |= 4;
        else if ((strcmp(it->string, "system") == 0 || strcmp(it->string, "unit") == 0) &&
                 cJSON_IsString(it)) {
            int sys = it->string[0] == 's';
            char what[PL_ERR_MSG_SIZE];
            snprintf(what, sizeof what, "%.400s: placement %.16s", at, it->string);
            rc = pl_text_check(it->valuestring, 0, what, err);
            if (!rc)
                rc = pl__copy_text(sys ? p->system : p->unit, sys ? sizeof p->system
                                                                   : sizeof p->unit,
                                   it->valuestring, what, err);
        }
        else
            return pl__err(err, PL_EFORMAT, "%s: placement: unknown or malformed key \"%s\"", at,
                           it->string);
        if (rc)
            return located(rc, at, err);
    }
    if (have != 7)
        return pl__err(err, PL_EFORMAT, "%s: placement needs \"origin\", \"u\" and \"v\"", at);
    return located(pl_placement_check(p, err), at, err);
}

/* One entry of a site's "maps"; `at` names it ("FILE: site CODE: map N"). */
static int take_map(pl_record *rec, size_t site, const cJSON *obj, const char *at,
                    const char *dir, pl_err *err)
{
    if (!cJSON_IsObject(obj))
        return pl__err(err, PL_EFORMAT, "%s: each entry of \"maps\" must be an object", at);
    const cJSON *jfile = NULL, *jch = NULL, *jpitch = NULL, *jplace = NULL, *jinf = NULL;
    for (const cJSON *it = obj->child; it; it = it->next) {
        if (strcmp(it->string, "file") == 0) jfile = it;
        else if (strcmp(it->string, "channels") == 0) jch = it;
        else if (strcmp(it->string, "pitch_mm") == 0) jpitch = it;
        else if (strcmp(it->string, "placement") == 0) jplace = it;
        else if (strcmp(it->string, "infinite_as_no_data") == 0) jinf = it;
        else
            return pl__err(err, PL_EFORMAT, "%s: unknown key \"%s\"", at, it->string);
    }
    if (jinf && !cJSON_IsBool(jinf))
        return pl__err(err, PL_EFORMAT, "%s: \"infinite_as_no_data\" must be true or false",
                       at);
    if (!cJSON_IsString(jfile) || !*jfile->valuestring)
        return pl__err(err, PL_EFORMAT, "%s: a map needs \"file\" (a file name)", at);
    char what[PL_ERR_MSG_SIZE];
    snprintf(what, sizeof what, "%.400s: \"file\"", at);
    /* its name is recorded with the map */
    int trc = pl_text_check(jfile->valuestring, 0, what, err);
    if (trc)
        return trc;
    double pu = NAN, pv = NAN;
    if (jpitch) {
        if (cJSON_IsNumber(jpitch)) {
            pu = pv = jpitch->valuedouble;
        } else if (cJSON_IsArray(jpitch) && cJSON_GetArraySize(jpitch) == 2
                   && cJSON_IsNumber(cJSON_GetArrayItem(jpitch, 0))
                   && cJSON_IsNumber(cJSON_GetArrayItem(jpitch, 1))) {
            pu = cJSON_GetArrayItem(jpitch, 0)->valuedouble;
            pv = cJSON_GetArrayItem(jpitch, 1)->valuedouble;
        } else {
            return pl__err(err, PL_EFORMAT, "%s: \"pitch_mm\" must be a number or [u, v]", at);
        }
        if (!(pu > 0) || !(pv > 0))
            return pl__err(err, PL_EINVAL, "%s: \"pitch_mm\" must be positive", at);
        snprintf(what, sizeof what, "%.400s: \"pitch_mm\"", at);
        int rc = pl_bound_check(PL_BOUND_PITCH, pu, what, err);
        if (!rc)
            rc = pl_bound_check(PL_BOUND_PITCH, pv, what, err);
        if (rc)
            return rc;
    }
    pl_channel ch[MAX_LISTED_CHANNELS];
    memset(ch, 0, sizeof ch);
    uint32_t n = 0;
    if (jch) {
        if (!cJSON_IsArray(jch))
            return pl__err(err, PL_EFORMAT, "%s: \"channels\" must be an array", at);
        for (const cJSON *c = jch->child; c; c = c->next) {
            const cJSON *q = cJSON_GetObjectItemCaseSensitive(c, "quantity");
            const cJSON *u = cJSON_GetObjectItemCaseSensitive(c, "unit");
            if (!cJSON_IsString(q) || (u && !cJSON_IsString(u)) || cJSON_GetArraySize(c) != (u ? 2 : 1))
                return pl__err(err, PL_EFORMAT,
                               "%s: each channel is {\"quantity\": text, \"unit\": text}", at);
            if (n == MAX_LISTED_CHANNELS)
                return pl__err(err, PL_EINVAL, "%s: too many channels (at most %d)", at,
                               MAX_LISTED_CHANNELS);
            int rc = pl__copy_text(ch[n].quantity, sizeof ch[n].quantity, q->valuestring,
                                   "channel quantity", err);
            if (!rc && u)
                rc = pl__copy_text(ch[n].unit, sizeof ch[n].unit, u->valuestring, "channel unit",
                                   err);
            if (rc)
                return located(rc, at, err);
            n++;
        }
    }
    const char *name = jfile->valuestring;
    char path[4096];
    if (name[0] == '/' || !dir[0])
        snprintf(path, sizeof path, "%s", name);
    else
        snprintf(path, sizeof path, "%s/%s", dir, name);
    int rc = located(add_map(rec, site, path, ch, n, pu, pv, err), at, err);
    if (rc)
        return rc;
    rec->sites[site].maps[rec->sites[site].nmaps - 1].infinite_as_nodata = cJSON_IsTrue(jinf);
    if (jplace) {
        pl_record_site *s = &rec->sites[site];
        pl_record_map *m = &s->maps[s->nmaps - 1];
        if ((rc = take_placement(&m->placement, jplace, at, err)))
            return rc;
        m->has_placement = 1;
    }
    return PL_OK;
}

static void blank_inspection(pl_inspection *insp)
{
    memset(insp, 0, sizeof *insp);
    insp->aircraft_hours = NAN;
    insp->aircraft_cycles = -1;
}

/* The entry of the batch before `n` that names the same airframe and site
 * (keys compare without regard to case), or n. */
static size_t earlier_entry(const pl_record *rec, size_t n)
{
    const pl_inspection *in = &rec->sites[n].insp;
    for (size_t i = 0; i < n; i++)
        if (strcasecmp(rec->sites[i].insp.airframe_serial, in->airframe_serial) == 0
            && strcasecmp(rec->sites[i].insp.site_code, in->site_code) == 0)
            return i;
    return n;
}

/* One entry of "sites": its inspection fields over the top level's, then
 * its maps; `file` names the sidecar in messages. */
static int take_site(pl_record *rec, const cJSON *s, const pl_inspection *top, const char *file,
                     const char *dir, pl_err *err)
{
    if (!cJSON_IsObject(s))
        return pl__err(err, PL_EFORMAT, "%s: each entry of \"sites\" must be an object", file);
    const cJSON *code = cJSON_GetObjectItemCaseSensitive(s, "site");
    char where[96], at[PL_ERR_MSG_SIZE];
    snprintf(where, sizeof where, "site %.80s", cJSON_IsString(code) ? code->valuestring : "?");
    snprintf(at, sizeof at, "%.400s: %s", file, where);
    pl_inspection insp = *top;
    insp.parameters_json = top->parameters_json ? pl__strdup(top->parameters_json) : NULL;
    if (top->parameters_json && !insp.parameters_json)
        return pl__err(err, PL_ENOMEM, "out of memory");
    static const char *const site_extra[] = { "maps", NULL };
    int rc = take_inspection_fields(&insp, s, file, where, site_extra, err);
    if (!rc && !insp.site_code[0])
        rc = pl__err(err, PL_EFORMAT, "%s: a site entry has no \"site\" code", file);
    size_t idx = 0;
    if (!rc)
        rc = pl_record_add_site(rec, &insp, &idx, err);
    free(insp.parameters_json);
    if (rc)
        return rc;
    size_t first = earlier_entry(rec, idx);
    if (first != idx)
        return pl__err(err, PL_EINVAL, "%s: site %s of %s appears twice in the batch (entries %zu "
                       "and %zu of \"sites\"); record each site once", at, insp.site_code,
                       insp.airframe_serial, first + 1, idx + 1);
    const cJSON *maps = cJSON_GetObjectItemCaseSensitive(s, "maps");
    if (maps && !cJSON_IsArray(maps))
        return pl__err(err, PL_EFORMAT, "%s: \"maps\" must be an array", at);
    size_t k = 0;
    for (const cJSON *m = maps ? maps->child : NULL; m; m = m->next) {
        char map_at[PL_ERR_MSG_SIZE];
        snprintf(map_at, sizeof map_at, "%.440s: map %zu", at, ++k);
        if ((rc = take_map(rec, idx, m, map_at, dir, err)))
            return rc;
    }
    if (!k)
        return pl__err(err, PL_EINVAL, "%s: no map given: \"maps\" must list the map files of "
                       "the inspection", at);
    return PL_OK;
}

static int parse_sidecar(pl_record *rec, const cJSON *root, const char *file, const char *dir,
                         pl_err *err)
{
    if (!cJSON_IsObject(root))
        return pl__err(err, PL_EFORMAT, "%s: the sidecar must be a JSON object", file);
    pl_inspection top;
    blank_inspection(&top);
    static const char *const top_extra[] = { "sites", NULL };
    int rc = take_inspection_fields(&top, root, file, "top level", top_extra, err);
    const cJSON *sites = cJSON_GetObjectItemCaseSensitive(root, "sites");
    if (!rc && (!cJSON_IsArray(sites) || cJSON_GetArraySize(sites) == 0))
        rc = pl__err(err, PL_EFORMAT, "%s: \"sites\" must be a non-empty array", file);
    for (const cJSON *s = sites ? sites->child : NULL; !rc && s; s = s->next)
        rc = take_site(rec, s, &top, file, dir, err);
    free(top.parameters_json);
    return rc;
}

PL_EXPORT int pl_record_load_sidecar(pl_record **out, const char *path, pl_err *err)
{
    *out = NULL;
    char *buf;
    size_t n;
    int rrc = pl__read_text(&buf, &n, path, (size_t)64 << 20, err);
    if (rrc)
        return rrc;
    const char *end = NULL;
    cJSON *root = cJSON_ParseWithOpts(buf, &end, 1);
    if (!root) {
        size_t at = end && end >= buf ? (size_t)(end - buf) : 0;
        size_t line = 1;
        for (size_t i = 0; i < at && i < n; i++)
            line += buf[i] == '\n';
        free(buf);
        return pl__err(err, PL_EFORMAT, "%s line %zu: not valid JSON", path, line);
    }
    free(buf);
    char dir[4096];
    snprintf(dir, sizeof dir, "%s", path);
    char *slash = strrchr(dir, '/');
    if (slash)
        *slash = '\0';
    else
        dir[0] = '\0';
    pl_record *rec;
    int rc = pl_record_new(&rec, err);
    if (!rc && !(rec->source = pl__strdup(path)))
        rc = pl__err(err, PL_ENOMEM, "out of memory");
    if (!rc)
        rc = parse_sidecar(rec, root, path, dir, err);
    cJSON_Delete(root);
    if (rc) {
        pl_record_free(rec);
        return rc;
    }
    *out = rec;
    return PL_OK;
}

/* ---- apply ------------------------------------------------------------- */

/* Make sure a failure names the map file it happened with. */
static int name_file(int rc, const char *path, pl_err *err)
{
    if (rc && err && !strstr(err->msg, path)) {
        char msg[PL_ERR_MSG_SIZE];
        snprintf(msg, sizeof msg, "%s", err->msg);
        pl__err(err, rc, "%s: %.400s", path, msg);
    }
    return rc;
}

/* Make sure a failure names the airframe and site it happened at. */
static int name_site(int rc, const pl_inspection *insp, pl_err *err)
{
    if (rc && err && !strstr(err->msg, insp->site_code)) {
        char msg[PL_ERR_MSG_SIZE];
        snprintf(msg, sizeof msg, "%s", err->msg);
        pl__err(err, rc, "%s site %s: %.400s", insp->airframe_serial, insp->site_code, msg);
    }
    return rc;
}

static const char *made_by_for(const char *path)
{
    const char *dot = strrchr(path, '.');
    if (dot && strcasecmp(dot, ".png") == 0) return "import-png";
    if (dot && strcasecmp(dot, ".npy") == 0) return "import-npy";
    if (dot && strcasecmp(dot, ".csv") == 0) return "import-csv";
    return "import";
}

/* Complete a loaded map from the request and the site, refusing a request
 * that contradicts what the file itself says. */
static int complete_map(pl_map *map, const pl_record_map *req, const pl_site *site, pl_err *err)
{
    if (req->nchannels && req->nchannels != map->nchannels)
        return pl__err(err, PL_ENOMATCH, "%s: the file has %u channel(s) but %u quantities were given",
                       req->path, map->nchannels, req->nchannels);
    for (uint32_t c = 0; c < map->nchannels; c++) {
        pl_channel *ch = &map->channels[c];
        if (req->nchannels) {
            const pl_channel *want = &req->channels[c];
            if (ch->quantity[0] && (strcmp(ch->quantity, want->quantity) != 0
                                    || strcmp(ch->unit, want->unit) != 0))
                return pl__err(err, PL_ENOMATCH,
                               "%s: the file says channel %u is %s [%s] but %s [%s] was given",
                               req->path, c, ch->quantity, ch->unit, want->quantity, want->unit);
            int rc = pl_map_set_channel(map, c, want->quantity, want->unit, err);
            if (rc)
                return rc;
        } else if (!ch->quantity[0]) {
            return pl__err(err, PL_EINVAL,
                           "%s: the file does not say what channel %u holds; give its quantity and unit",
                           req->path, c);
        }
    }
    double pu = req->pitch_u, pv = req->pitch_v;
    if (isnan(pu) && isnan(pv)) {
        /* Loaders leave the pitch NaN when the file does not carry one
         * (npy, csv, a PNG without the chunk); the site's is then the truth. */
        pu = isnan(map->pitch_u) ? site->pitch_u : map->pitch_u;
        pv = isnan(map->pitch_v) ? site->pitch_v : map->pitch_v;
    }
    if (isnan(pu)) pu = pv;
    if (isnan(pv)) pv = pu;
    int rc = pl_map_set_pitch(map, pu, pv, err);
    if (rc)
        return rc;
    map->placement = req->has_placement ? req->placement : site->map_frame;
    return PL_OK;
}

/* Drop what apply wrote into the batch when it failed. */
static void forget_ids(pl_record *rec)
{
    for (size_t i = 0; i < rec->nsites; i++) {
        rec->sites[i].inspection_key = 0;
        for (size_t j = 0; j < rec->sites[i].nmaps; j++)
            rec->sites[i].maps[j].map_id = 0;
    }
}

/* A batch records each site once, each with at least one map. */
static int check_batch(const pl_record *rec, pl_err *err)
{
    for (size_t i = 0; i < rec->nsites; i++) {
        const pl_inspection *in = &rec->sites[i].insp;
        if (!rec->sites[i].nmaps)
            return pl__err(err, PL_EINVAL, "%.64s site %.64s: no map given: an inspection is "
                           "recorded with the maps it produced", in->airframe_serial,
                           in->site_code);
        size_t first = earlier_entry(rec, i);
        if (first != i)
            return pl__err(err, PL_EINVAL, "%.64s site %.64s: the site appears twice in the batch "
                           "(entries %zu and %zu); record each site once", in->airframe_serial,
                           in->site_code, first + 1, i + 1);
    }
    return PL_OK;
}

/* A failure of a batch read from a sidecar names the sidecar first. */
static int name_source(int rc, const pl_record *rec, pl_err *err)
{
    return rec->source ? located(rc, rec->source, err) : rc;
}

/* Read, complete, check and encode one map of a site (all before any lock);
 * what the load did to the values goes into `params` (recorded with the map). */
static int prepare_map(pl_prepared_map **out, char *params, size_t cap,
                       const pl_record_map *req, const pl_site *site, pl_err *err)
{
    pl_map *map = NULL;
    pl_map_load_options lo = PL_MAP_LOAD_OPTIONS_INIT;
    lo.infinite = req->infinite_as_nodata ? PL_MAP_INFINITE_TO_NAN : PL_MAP_INFINITE_REFUSE;
    pl_map_load_info info;
    memset(&info, 0, sizeof info);
    int rc = pl_map_load_v2(&map, &info, req->path, &lo, err);
    if (!rc)
        rc = complete_map(map, req, site, err);
    if (!rc)
        rc = pl_site_check_map(site, map, err);
    if (!rc && pl_map_load_info_json(params, cap, &info) >= (int)cap)
        rc = pl__err(err, PL_ENOMEM, "%s: the load's record does not fit", req->path);
    if (!rc) {
        pl_err e = { 0 };
        if ((rc = pl_prepared_map_new(out, map, &e)))
            pl__err(err, rc, "%s", e.msg + (strncmp(e.msg, "map: ", 5) ? 0 : 5));
    }
    pl_map_free(map);
    return rc;
}

/*
 * Write a batch in two steps so that the write lock is held only for the
 * inserts: first every map is read, completed from its site, checked and
 * compressed and hashed (the costly part, told to `progress`), with no lock
 * taken; then one transaction adds the inspections and the prepared maps,
 * the store checking each against its site once more under the lock (a
 * site corrected meanwhile by another writer is noticed). The prepared
 * maps, compressed, are held in memory until the commit.
 */
PL_EXPORT int pl_record_apply(pl_store *store, pl_record *rec, pl_progress_fn progress,
                              void *userdata, pl_err *err)
{
    size_t total = 0, done = 0;
    for (size_t i = 0; i < rec->nsites; i++)
        total += rec->sites[i].nmaps;
    int rc = check_batch(rec, err);
    if (rc)
        return name_source(rc, rec, err);
    enum { PARAMS_SIZE = 160 };
    pl_prepared_map **prep = calloc(total ? total : 1, sizeof *prep);
    char *params = calloc(total ? total : 1, PARAMS_SIZE);
    if (!prep || !params) {
        free(prep);
        free(params);
        return pl__err(err, PL_ENOMEM, "out of memory");
    }
    for (size_t i = 0; i < rec->nsites && !rc; i++) {
        pl_record_site *s = &rec->sites[i];
        pl_site site;
        rc = name_site(pl_store_get_site(store, s->insp.airframe_serial, s->insp.site_code,
                                         &site, err), &s->insp, err);
        for (size_t j = 0; j < s->nmaps && !rc; j++) {
            rc = prepare_map(&prep[done], params + done * PARAMS_SIZE, PARAMS_SIZE, &s->maps[j],
                             &site, err);
            name_site(name_file(rc, s->maps[j].path, err), &s->insp, err);
            done++;
            if (!rc && progress && progress(userdata, total ? (double)done / (double)total : 1.0))
                rc = pl__err(err, PL_ECANCELED, "recording canceled");
        }
    }
    if (!rc)
        rc = pl_store_begin(store, err);
    if (!rc) {
        done = 0;
        for (size_t i = 0; i < rec->nsites && !rc; i++) {
            pl_record_site *s = &rec->sites[i];
            pl_id id = 0;
            rc = name_site(pl_store_add_inspection(store, &s->insp, &id, err), &s->insp, err);
            /* The key of a first version is its own id. */
            s->inspection_key = id;
            for (size_t j = 0; j < s->nmaps && !rc; j++) {
                pl_record_map *req = &s->maps[j];
                pl_map_record mr;
                memset(&mr, 0, sizeof mr);
                mr.inspection_key = s->inspection_key;
                snprintf(mr.source, sizeof mr.source, "%s", pl__basename(req->path));
                snprintf(mr.origin, sizeof mr.origin, "%s", made_by_for(req->path));
                mr.parameters_json = params + done * PARAMS_SIZE;
                rc = pl_store_add_prepared_map(store, &mr, prep[done++], &req->map_id, err);
                name_site(name_file(rc, req->path, err), &s->insp, err);
            }
        }
        if (rc)
            pl_store_rollback(store);
        else
            rc = pl_store_commit(store, err);
    }
    for (size_t k = 0; k < total; k++)
        pl_prepared_map_free(prep[k]);
    free(prep);
    free(params);
    if (rc)
        forget_ids(rec);
    return name_source(rc, rec, err);
}

/* Whether a making's parameters say the data were simulated: the
 * simulator writes a "simulation" object into the sequence manifest's
 * acquisition, which a reduction records as its "acquisition". */
static int parameters_simulated(const char *parameters_json)
{
    cJSON *j = parameters_json ? cJSON_Parse(parameters_json) : NULL;
    const cJSON *acq = cJSON_GetObjectItemCaseSensitive(j, "acquisition");
    int sim = cJSON_IsObject(cJSON_GetObjectItemCaseSensitive(acq, "simulation"));
    cJSON_Delete(j);
    return sim;
}

PL_EXPORT int pl_record_map_inspection(pl_store *store, const pl_inspection *given, pl_map *map,
                                       const char *made_by, const char *source,
                                       const char *parameters_json, pl_id *inspection_key,
                                       pl_id *map_id, pl_err *err)
{
    pl_inspection marked = *given;
    if (parameters_simulated(parameters_json))
        marked.simulated = 1;
    const pl_inspection *insp = &marked;
    pl_site site;
    int rc = pl_store_get_site(store, insp->airframe_serial, insp->site_code, &site, err);
    if (rc)
        return rc;
    double pu = isnan(map->pitch_u) ? site.pitch_u : map->pitch_u;
    double pv = isnan(map->pitch_v) ? site.pitch_v : map->pitch_v;
    if ((rc = pl_map_set_pitch(map, pu, pv, err)))
        return rc;
    map->placement = site.map_frame;
    /* compress and hash before the write lock, as pl_record_apply() does */
    pl_prepared_map *prep = NULL;
    if ((rc = name_site(pl_site_check_map(&site, map, err), insp, err)))
        return rc;
    pl_err e = { 0 };
    if ((rc = pl_prepared_map_new(&prep, map, &e)))
        return name_site(pl__err(err, rc, "%s", e.msg), insp, err);
    pl_map_record mr;
    memset(&mr, 0, sizeof mr);
    snprintf(mr.source, sizeof mr.source, "%s", source ? pl__basename(source) : "");
    snprintf(mr.origin, sizeof mr.origin, "%s", made_by ? made_by : "import");
    /* the record holds a writable pointer (reads hand out owned text) */
    mr.parameters_json = parameters_json ? pl__strdup(parameters_json) : NULL;
    if (parameters_json && !mr.parameters_json) {
        pl_prepared_map_free(prep);
        return pl__err(err, PL_ENOMEM, "out of memory");
    }
    pl_id key = 0, id = 0;
    rc = pl_store_begin(store, err);
    if (!rc) {
        rc = name_site(pl_store_add_inspection(store, insp, &key, err), insp, err);
        mr.inspection_key = key;
        if (!rc)
            rc = name_site(pl_store_add_prepared_map(store, &mr, prep, &id, err), insp, err);
        if (rc)
            pl_store_rollback(store);
        else
            rc = pl_store_commit(store, err);
    }
    free(mr.parameters_json);
    pl_prepared_map_free(prep);
    if (rc)
        return rc;
    if (inspection_key)
        *inspection_key = key;
    if (map_id)
        *map_id = id;
    return PL_OK;
}

/* ---- registration ------------------------------------------------------- */

typedef struct pair_scan {
    pl_id baseline, latest;
    int baseline_simulated, latest_simulated;
    char latest_date[PL_DATE_SIZE];
} pair_scan;

static int scan_inspection(void *ud, const pl_inspection *in)
{
    pair_scan *p = ud;
    if (strcmp(in->kind, "baseline") == 0) {
        p->baseline = in->key;
        p->baseline_simulated = in->simulated;
    } else if (strcmp(in->performed_on, p->latest_date) >= 0) {
        p->latest = in->key;
        p->latest_simulated = in->simulated;
        snprintf(p->latest_date, sizeof p->latest_date, "%s", in->performed_on);
    }
    return 0;
}

typedef struct first_map {
    pl_id first;
    pl_id want;
    int has_want;
} first_map;

static int scan_map(void *ud, const pl_map_record *m)
{
    first_map *f = ud;
    if (!f->first)
        f->first = m->id;
    if (m->id == f->want)
        f->has_want = 1;
    return 0;
}

/* The first map of an inspection, or check that `want` belongs to it. */
static int inspection_map(pl_store *store, pl_id insp, pl_id *map, const char *what,
                          pl_err *err)
{
    first_map f = { 0, *map, 0 };
    int rc = pl_store_list_maps(store, insp, scan_map, &f, err);
    if (rc)
        return rc;
    if (*map) {
        if (!f.has_want)
            return pl__err(err, PL_ENOMATCH, "map %lld is not a map of the %s inspection %lld",
                           (long long)*map, what, (long long)insp);
        return PL_OK;
    }
    if (!f.first)
        return pl__err(err, PL_ENOTFOUND, "the %s inspection %lld has no maps", what,
                       (long long)insp);
    *map = f.first;
    return PL_OK;
}

PL_EXPORT int pl_record_find_pair(pl_store *store, const char *serial, const char *code,
                                  pl_record_pair *pair, pl_err *err)
{
    pl_site site;
    int rc = pl_store_get_site(store, serial, code, &site, err);
    if (rc)
        return rc;
    pair_scan p;
    memset(&p, 0, sizeof p);
    pl_inspection_filter f = { site.airframe_serial, site.code, NULL, NULL, NULL };
    if ((rc = pl_store_list_inspections(store, &f, scan_inspection, &p, err)))
        return rc;
    if (!p.baseline)
        return pl__err(err, PL_ENOTFOUND, "%s site %s has no baseline inspection", serial, code);
    pair->baseline_inspection = p.baseline;
    int current_simulated = p.latest_simulated;
    if (pair->current_inspection) {
        pl_inspection in;
        memset(&in, 0, sizeof in);
        if ((rc = pl_store_get_inspection(store, pair->current_inspection, &in, err)))
            return rc;
        /* the site as stored: keys are looked up without regard to case */
        int same = strcmp(in.airframe_serial, site.airframe_serial) == 0 &&
                   strcmp(in.site_code, site.code) == 0;
        int base = strcmp(in.kind, "baseline") == 0;
        current_simulated = in.simulated;
        pl_inspection_clear(&in);
        if (!same)
            return pl__err(err, PL_ENOMATCH, "inspection %lld is not of %s site %s",
                           (long long)pair->current_inspection, serial, code);
        if (base)
            return pl__err(err, PL_EINVAL, "inspection %lld is the baseline itself",
                           (long long)pair->current_inspection);
    } else if (p.latest) {
        pair->current_inspection = p.latest;
    } else {
        return pl__err(err, PL_ENOTFOUND, "%s site %s has no inspection after its baseline",
                       serial, code);
    }
    if (p.baseline_simulated == 1 && current_simulated == 0)
        return pl__err(err, PL_EINVAL, "%s site %s: the baseline (inspection %lld) is simulated "
                       "and cannot be the baseline of inspection %lld, which is real", serial,
                       code, (long long)p.baseline, (long long)pair->current_inspection);
    if ((rc = inspection_map(store, pair->baseline_inspection, &pair->baseline_map, "baseline",
                             err)))
        return rc;
    return inspection_map(store, pair->current_inspection, &pair->current_map, "current", err);
}

int pl_record__add_registration(pl_store *store, const pl_record_pair *pair,
                                const pl_register_result *res, int manual, const char *method,
                                const char *supplied_by, const char *supplied_reason,
                                const char *parameters_json, pl_id *registration_id,
                                pl_id *comparison_id, pl_err *err)
{
    pl_registration_record g;
    memset(&g, 0, sizeof g);
    g.baseline_map_id = pair->baseline_map;
    g.current_map_id = pair->current_map;
    snprintf(g.method, sizeof g.method, "%s", method ? method : "");
    snprintf(g.status, sizeof g.status, "%s",
             manual ? "manual" : res->refused ? "refused" : "aligned");
    snprintf(g.refusal, sizeof g.refusal, "%s", res->refused ? res->reason : "");
    if (res->refused) {
        /* a refused transform is not one: only the figures that refused it */
        g.shift_col_px = g.shift_row_px = g.shift_u_mm = g.shift_v_mm = NAN;
        g.rotation_deg = g.scale = g.overlap_fraction = g.overlap_mm2 = NAN;
    } else {
        g.shift_col_px = res->transform.dx;
        g.shift_row_px = res->transform.dy;
        g.shift_u_mm = res->shift_u_mm;
        g.shift_v_mm = res->shift_v_mm;
        g.rotation_deg = res->transform.rotation_deg;
        g.scale = res->transform.scale;
        g.overlap_fraction = res->overlap_fraction;
        g.overlap_mm2 = res->overlap_mm2;
    }
    g.ncc = res->ncc;
    g.peak_sidelobe = res->psr;
    snprintf(g.supplied_by, sizeof g.supplied_by, "%s", supplied_by ? supplied_by : "");
    snprintf(g.supplied_reason, sizeof g.supplied_reason, "%s",
             supplied_reason ? supplied_reason : "");
    g.parameters_json = parameters_json ? pl__strdup(parameters_json) : NULL;
    if (parameters_json && !g.parameters_json)
        return pl__err(err, PL_ENOMEM, "out of memory");
    pl_id rid = 0, cid = 0;
    int rc = pl_store_add_registration(store, &g, &rid, err);
    if (!rc && res->refused) {
        pl_comparison_record c;
        memset(&c, 0, sizeof c);
        c.baseline_inspection = pair->baseline_inspection;
        c.current_inspection = pair->current_inspection;
        c.registration_id = rid;
        snprintf(c.status, sizeof c.status, "not-done");
        snprintf(c.not_done_reason, sizeof c.not_done_reason, "registration refused: %.200s",
                 res->reason);
        c.uncompared_mm2 = c.uncompared_fraction = NAN;
        rc = pl_store_add_comparison(store, &c, &cid, err);
    }
    free(g.parameters_json);
    if (rc)
        return rc;
    if (registration_id)
        *registration_id = rid;
    if (comparison_id)
        *comparison_id = cid;
    return PL_OK;
}

PL_EXPORT int pl_record_registration(pl_store *store, const pl_record_pair *pair,
                                     const pl_register_result *res, int manual,
                                     const char *method, const char *supplied_by,
                                     const char *supplied_reason, const char *parameters_json,
                                     pl_id *registration_id, pl_id *comparison_id, pl_err *err)
{
    pl_id rid = 0, cid = 0;
    int rc = pl_store_begin(store, err);
    if (!rc)
        rc = pl_record__add_registration(store, pair, res, manual, method, supplied_by,
                                         supplied_reason, parameters_json, &rid, &cid, err);
    if (rc) {
        pl_store_rollback(store);
        return rc;
    }
    if ((rc = pl_store_commit(store, err)))
        return rc;
    if (registration_id)
        *registration_id = rid;
    if (comparison_id)
        *comparison_id = cid;
    return PL_OK;
}

static const char *window_name(pl_window w)
{
    return w == PL_WINDOW_TUKEY ? "tukey" : w == PL_WINDOW_NONE ? "none" : "hann";
}

PL_EXPORT int pl_record_registration_parameters(char **out, const char *quantity,
                                                const char *label,
                                                const pl_register_options *opts, pl_err *err)
{
    pl_register_options defaults = PL_REGISTER_OPTIONS_INIT;
    const pl_register_options *o = opts ? opts : &defaults;
    cJSON *j = cJSON_CreateObject();
    int ok = j && cJSON_AddStringToObject(j, "quantity", quantity ? quantity : "(default)");
    if (ok && label)
        ok = cJSON_AddStringToObject(j, "label", label) != NULL;
    ok = ok && cJSON_AddNumberToObject(j, "upsample", o->upsample)
         && cJSON_AddBoolToObject(j, "rotation", o->rotation)
         && cJSON_AddBoolToObject(j, "scale", o->scale)
         && cJSON_AddStringToObject(j, "window", window_name(o->window));
    if (ok && o->window == PL_WINDOW_TUKEY)
        ok = cJSON_AddNumberToObject(j, "tukey_alpha", o->tukey_alpha) != NULL;
    ok = ok && cJSON_AddStringToObject(j, "interp",
                                       o->interp == PL_INTERP_BILINEAR ? "bilinear" : "bicubic")
         && cJSON_AddNumberToObject(j, "min_ncc", o->min_ncc)
         && cJSON_AddNumberToObject(j, "min_psr", o->min_psr)
         && cJSON_AddNumberToObject(j, "max_rotation_deg", o->max_rotation_deg);
    *out = ok ? cJSON_PrintUnformatted(j) : NULL;
    cJSON_Delete(j);
    return *out ? PL_OK : pl__err(err, PL_ENOMEM, "out of memory");
}
