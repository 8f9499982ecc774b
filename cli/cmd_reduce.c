/*
 * cmd_reduce.c - plyledger reduce: a raw flash-thermography sequence to
 * reduced maps, written to a file or recorded straight into an inspection.
 */
#include "cli.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

static const char usage[] =
    "SEQ.json (--output MAP.npy | --airframe SERIAL --site CODE ...) [options]";
static const char help_head[] =
    "usage: plyledger reduce SEQ.json --output MAP.npy [reduction options]\n"
    "       plyledger reduce SEQ.json --airframe SERIAL --site CODE --kind KIND\n"
    "                        --date DATE [traceability options] [reduction options]\n"
    "\n"
    "Reduce a flash-thermography sequence (its manifest, see README \"Sequences\")\n"
    "to maps: per pixel, a log-log polynomial fit of the cooling curve (thermographic\n"
    "signal reconstruction), its first and second log-derivatives, the time of the\n"
    "peak second log-derivative and the depth it gives, contrast against a sound\n"
    "reference, and pulse-phase maps. Frames are read one at a time, so a sequence of\n"
    "any length fits in memory. With --airframe and --site the maps are recorded as a\n"
    "new inspection of that site, with the reduction's parameters and the\n"
    "sequence's acquisition details; the site's material gives the diffusivity.\n"
    "\n"
    "Output:\n"
    "  -o, --output FILE         write the maps as float32 .npy (channels x rows x cols)\n"
    "Reduction:\n"
    "      --start S             fit window start, s after the flash (default 0.05)\n"
    "      --end S               fit window end (default 20, or the last frame)\n"
    "      --samples N           log-spaced samples (default 64)\n"
    "      --degree N            polynomial degree (default 10)\n"
    "      --at T[,T...]         times (s) for the rise, contrast and derivative maps\n"
    "      --products LIST       which maps at those times: rise, contrast,\n"
    "                            normalised, d1, d2 (default all)\n"
    "      --diffusivity MM2_S   through-thickness diffusivity for depth maps\n"
    "                            (default: the site's, when recording)\n"
    "      --depth-method M      peak-d2 (default), slab-fit or both\n"
    "      --peak-rule R         first-significant (default): the earliest peak of the\n"
    "                            second log-derivative above the noise; or largest\n"
    "      --reference X,Y,W,H   sound reference region in pixels (default: automatic)\n"
    "      --frequencies N       pulse-phase frequencies (default 4; 0 for none)\n"
    "      --phase-samples N     uniform samples for pulse phase (default 64)\n"
    "      --phase-end S         pulse-phase truncation time (default: window end)\n"
    "      --threads N           worker threads (default: one per processor)\n";
static const char help_tail[] =
    "Common:\n"
    "  -s, --store PATH          the store, when recording (default $PLYLEDGER_STORE)\n"
    "      --wait SECONDS        @WAIT@\n"
    "      --json                print the result as JSON\n"
    "  -q, --quiet               no progress, nothing printed on success\n"
    "  -h, --help                show this help\n";

enum {
    O_START = 0x100, O_END, O_SAMPLES, O_DEGREE, O_AT, O_PRODUCTS, O_DIFFUSIVITY,
    O_DEPTH_METHOD, O_PEAK_RULE, O_REFERENCE, O_FREQUENCIES, O_PHASE_SAMPLES, O_PHASE_END, O_THREADS,
};
static const struct option opts[] = {
    { "output", required_argument, NULL, 'o' },
    { "start", required_argument, NULL, O_START },
    { "end", required_argument, NULL, O_END },
    { "samples", required_argument, NULL, O_SAMPLES },
    { "degree", required_argument, NULL, O_DEGREE },
    { "at", required_argument, NULL, O_AT },
    { "products", required_argument, NULL, O_PRODUCTS },
    { "diffusivity", required_argument, NULL, O_DIFFUSIVITY },
    { "depth-method", required_argument, NULL, O_DEPTH_METHOD },
    { "peak-rule", required_argument, NULL, O_PEAK_RULE },
    { "reference", required_argument, NULL, O_REFERENCE },
    { "frequencies", required_argument, NULL, O_FREQUENCIES },
    { "phase-samples", required_argument, NULL, O_PHASE_SAMPLES },
    { "phase-end", required_argument, NULL, O_PHASE_END },
    { "threads", required_argument, NULL, O_THREADS },
    CLI_INSPECTION_OPTIONS,
    { NULL, 0, NULL, 0 },
};

typedef struct reduce_args {
    cli_inspection_args insp;
    const char *output;
    pl_reduce_options ro;
    double times[PL_REDUCE_MAX_TIMES];
    int has_diffusivity;
} reduce_args;

static int take_count(const char *opt, const char *arg, uint32_t *out, long long lo, long long hi)
{
    long long v;
    if (cli_count(opt, arg, &v, usage))
        return CLI_USAGE;
    if (v < lo || v > hi)
        return cli_usage_error(usage, "%s must be %lld to %lld", opt, lo, hi);
    *out = (uint32_t)v;
    return 0;
}

/* "a,b,c" into numbers; at most `cap`. */
static int take_list(const char *opt, const char *arg, double *out, uint32_t cap, uint32_t *n)
{
    char buf[512];
    if (cli_text(buf, sizeof buf, arg, opt))
        return CLI_USAGE;
    *n = 0;
    char *save = NULL;
    for (char *tok = strtok_r(buf, ",", &save); tok; tok = strtok_r(NULL, ",", &save)) {
        if (*n == cap)
            return cli_usage_error(usage, "%s: at most %u values", opt, cap);
        if (cli_number(opt, tok, &out[*n], usage))
            return CLI_USAGE;
        (*n)++;
    }
    if (!*n)
        return cli_usage_error(usage, "%s needs at least one value", opt);
    return 0;
}

static int take_products(const char *arg, unsigned *bits)
{
    char buf[128];
    if (cli_text(buf, sizeof buf, arg, "--products"))
        return CLI_USAGE;
    static const struct { const char *name; unsigned bit; } names[] = {
        { "rise", PL_REDUCE_AT_RISE }, { "contrast", PL_REDUCE_AT_CONTRAST },
        { "normalised", PL_REDUCE_AT_NORMALISED }, { "d1", PL_REDUCE_AT_D1 },
        { "d2", PL_REDUCE_AT_D2 },
    };
    *bits = 0;
    char *save = NULL;
    for (char *tok = strtok_r(buf, ",", &save); tok; tok = strtok_r(NULL, ",", &save)) {
        unsigned bit = 0;
        for (size_t i = 0; i < sizeof names / sizeof names[0]; i++)
            if (strcmp(tok, names[i].name) == 0)
                bit = names[i].bit;
        if (!bit)
            return cli_usage_error(usage, "--products: unknown product '%s' "
                                          "(rise, contrast, normalised, d1, d2)", tok);
        *bits |= bit;
    }
    return 0;
}

static int take_opt(void *ctx, int opt, const char *arg)
{
    reduce_args *a = ctx;
    pl_reduce_options *o = &a->ro;
    switch (opt) {
    case 'o': a->output = arg; break;
    case O_START: return cli_number("--start", arg, &o->start_s, usage);
    case O_END: return cli_number("--end", arg, &o->end_s, usage);
    case O_PHASE_END: return cli_number("--phase-end", arg, &o->phase_end_s, usage);
    case O_SAMPLES: return take_count("--samples", arg, &o->samples, 4, PL_REDUCE_MAX_SAMPLES);
    case O_DEGREE:
        return take_count("--degree", arg, &o->degree, PL_REDUCE_MIN_DEGREE, PL_REDUCE_MAX_DEGREE);
    case O_FREQUENCIES: return take_count("--frequencies", arg, &o->phase_frequencies, 0, 1024);
    case O_PHASE_SAMPLES:
        return take_count("--phase-samples", arg, &o->phase_samples, 4, PL_REDUCE_MAX_PHASE_SAMPLES);
    case O_THREADS: return take_count("--threads", arg, &o->threads, 0, 64);
    case O_AT: {
        int rc = take_list("--at", arg, a->times, PL_REDUCE_MAX_TIMES, &o->ntimes);
        o->times_s = a->times;
        return rc;
    }
    case O_PRODUCTS: return take_products(arg, &o->time_products);
    case O_DIFFUSIVITY:
        a->has_diffusivity = 1;
        if (cli_number("--diffusivity", arg, &o->diffusivity_mm2_s, usage))
            return CLI_USAGE;
        if (!(o->diffusivity_mm2_s > 0))
            return cli_usage_error(usage, "--diffusivity must be positive");
        return cli_bound(PL_BOUND_DIFFUSIVITY, o->diffusivity_mm2_s, "--diffusivity");
    case O_DEPTH_METHOD:
        if (strcmp(arg, "peak-d2") == 0)
            o->depth_method = PL_DEPTH_PEAK_D2;
        else if (strcmp(arg, "slab-fit") == 0)
            o->depth_method = PL_DEPTH_SLAB_FIT;
        else if (strcmp(arg, "both") == 0)
            o->depth_method = PL_DEPTH_BOTH;
        else
            return cli_usage_error(usage, "--depth-method must be peak-d2, slab-fit or both");
        break;
    case O_PEAK_RULE:
        if (strcmp(arg, "first-significant") == 0)
            o->peak_rule = PL_PEAK_FIRST_SIGNIFICANT;
        else if (strcmp(arg, "largest") == 0)
            o->peak_rule = PL_PEAK_LARGEST;
        else
            return cli_usage_error(usage, "--peak-rule must be first-significant or largest");
        break;
    case O_REFERENCE: {
        double v[4];
        uint32_t n;
        if (take_list("--reference", arg, v, 4, &n))
            return CLI_USAGE;
        if (n != 4)
            return cli_usage_error(usage, "--reference needs X,Y,W,H");
        for (int i = 0; i < 4; i++)
            if (v[i] < 0 || v[i] != floor(v[i]) || v[i] > 65536 || (i >= 2 && v[i] < 1))
                return cli_usage_error(usage, "--reference: X,Y,W,H are whole pixels, W,H >= 1");
        o->ref_x = (uint32_t)v[0];
        o->ref_y = (uint32_t)v[1];
        o->ref_w = (uint32_t)v[2];
        o->ref_h = (uint32_t)v[3];
        break;
    }
    default:
        return cli_inspection_take(&a->insp, opt, arg, usage);
    }
    return 0;
}

static int print_result(const pl_reduction_summary *r, const reduce_args *a,
                        const cli_common *common)
{
    if (common->json) {
        char *text = NULL;
        pl_err err = { 0 };
        return cli_print_json_text(pl_reduction_json(&text, r, &err), &text, &err);
    }
    if (common->quiet)
        return CLI_OK;
    const pl_map *map = r->map;
    const pl_reduce_stats *st = &r->stats;
    printf("reduced %s: %ux%u px, %u frames in %u samples; %u px masked, %u fitted on part of "
           "the curve, %llu saturated values\n",
           r->sequence, map->width, map->height, st->frames_used, st->samples_used,
           st->pixels_masked, st->pixels_partial, (unsigned long long)st->saturated_values);
    printf("  %u channels:", map->nchannels);
    for (uint32_t c = 0; c < map->nchannels; c++)
        printf("%s %s%s%s", c ? "," : "", map->channels[c].quantity,
               map->channels[c].label[0] ? " " : "", map->channels[c].label);
    printf("\n");
    if (r->output)
        printf("  wrote %s\n", r->output);
    if (r->map_id)
        printf("  recorded inspection %lld of %s site %s with map %lld\n",
               (long long)r->inspection_key, a->insp.airframe, a->insp.site,
               (long long)r->map_id);
    return CLI_OK;
}

int cmd_reduce(int argc, char **argv)
{
    cli_common common;
    reduce_args a;
    memset(&a, 0, sizeof a);
    cli_inspection_init(&a.insp);
    pl_reduce_options init = PL_REDUCE_OPTIONS_INIT;
    a.ro = init;
    char help[8192];
    snprintf(help, sizeof help, "%s%s%s", help_head, cli_inspection_help, help_tail);
    int first;
    int rc = cli_parse(argc, argv, "o:", opts, &common, take_opt, &a, usage, help, &first);
    if (rc >= 0)
        return rc;
    if (argc - first != 1)
        return cli_usage_error(usage, "give exactly one sequence manifest");
    int recording = cli_inspection_given(&a.insp);
    if (!a.output && !recording)
        return cli_usage_error(usage, "give --output, or --airframe and --site to record");
    if (recording && (!a.insp.airframe || !a.insp.site))
        return cli_usage_error(usage, "recording needs --airframe and --site");
    if ((rc = cli_guard_output(&common, a.output)))
        return rc;
    if (a.output) {
        const char *dot = strrchr(a.output, '.');
        if (!dot || strcasecmp(dot, ".npy") != 0)
            return cli_usage_error(usage, "--output must name a .npy file");
    }
    const char *seq_path = argv[first];

    /* Check what recording needs before the work: the site and its
     * diffusivity, the traceability (refused by the store otherwise). */
    pl_err err = { 0 };
    pl_store *store = NULL;
    pl_inspection insp;
    memset(&insp, 0, sizeof insp);
    insp.aircraft_hours = NAN;
    insp.aircraft_cycles = -1;
    int st;
    if (recording) {
        if (a.insp.parameters)
            return cli_usage_error(usage, "--parameters: the reduction records its own parameters");
        if ((rc = cli_inspection_apply(&a.insp, &insp, NULL)))
            return rc;
        if ((rc = cli_open_store(&store, &common, 0)))
            return rc;
        pl_site site;
        st = pl_store_get_site(store, insp.airframe_serial, insp.site_code, &site, &err);
        if (st) {
            pl_store_close(store);
            return cli_fail_err(st, &err);
        }
        if (!a.has_diffusivity)
            a.ro.diffusivity_mm2_s = site.diffusivity_mm2_s;
    }

    /* The output is written before anything is recorded and put in place
     * after: a file that cannot be written leaves the store as it was. */
    pl_outfile *out = NULL;
    if ((rc = cli_open_output(&out, &common, a.output))) {
        pl_store_close(store);
        return rc;
    }
    pl_seq *seq;
    st = pl_seq_open(&seq, seq_path, &err);
    if (st) {
        pl_store_close(store);
        pl_outfile_abort(out);
        return cli_fail_err(st, &err);
    }
    cli_progress prog;
    cli_progress_init(&prog, "reducing", &common);
    a.ro.progress = cli_progress_fn;
    a.ro.progress_data = &prog;
    pl_map *map = NULL;
    char *params = NULL;
    pl_reduce_stats stats;
    memset(&stats, 0, sizeof stats);
    st = pl_reduce_sequence(&map, &params, seq, &a.ro, &stats, &err);
    cli_progress_done(&prog);
    double pu, pv;
    pl_seq_pitch(seq, &pu, &pv);
    pl_seq_close(seq);
    if (!st) {
        map->pitch_u = pu;
        map->pitch_v = pv;
    }
    if (!st && out)
        st = pl_map_write_npy(map, out, &err);
    pl_id insp_key = 0, map_id = 0;
    if (!st && recording && params && !(insp.parameters_json = strdup(params)))
        st = PL_ENOMEM;
    if (!st && recording)
        st = pl_record_map_inspection(store, &insp, map, "reduce", seq_path, params, &insp_key,
                                      &map_id, &err);
    pl_store_close(store);
    st = pl_outfile_finish(out, st, &err);
    if (!st) {
        pl_reduction_summary sum = { seq_path, map, stats, params, a.output, insp_key, map_id };
        rc = print_result(&sum, &a, &common);
    }
    pl_map_free(map);
    free(params);
    pl_inspection_clear(&insp);
    return st ? cli_fail_err(st, &err) : rc;
}
