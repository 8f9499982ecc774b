/*
 * cmd_simulate.c - plyledger simulate: a physical flash-thermography
 * sequence of a described site, with its ground truth.
 */
#include "cli.h"

#include <stdlib.h>
#include <string.h>
#include <time.h>

static const char usage[] = "SCENE.json --output SEQ.json [--truth FILE] [--threads N]";
static const char help[] =
    "usage: plyledger simulate SCENE.json --output SEQ.json [--truth FILE] [--threads N]\n"
    "\n"
    "Simulate the flash thermography of one site: heat conduction after the flash\n"
    "in an orthotropic laminate with its delaminations, disbonds, impact damage,\n"
    "porosity and substructure, seen by a camera with noise, dead pixels and a\n"
    "placement error. Writes the sequence (a manifest SEQ.json with its data beside\n"
    "it, readable by 'plyledger reduce') and the ground truth: every defect's\n"
    "outline, depth and area. The scene format is in the README (\"Simulation\").\n"
    "\n"
    "Options:\n"
    "  -o, --output SEQ.json  the sequence manifest to write (required)\n"
    "      --truth FILE       ground truth JSON (default: SEQ-truth.json beside it)\n"
    "      --no-truth         do not write the ground truth\n"
    "      --threads N        worker threads (default: one per processor)\n"
    "  -s, --store PATH       the store, which no output may overwrite\n"
    "                         (default $PLYLEDGER_STORE)\n"
    "      --json             print what was written as JSON\n"
    "  -q, --quiet            no progress, nothing printed on success\n"
    "  -h, --help             show this help\n";

enum { O_TRUTH = 0x100, O_NO_TRUTH, O_THREADS };
static const struct option opts[] = {
    { "output", required_argument, NULL, 'o' },
    { "truth", required_argument, NULL, O_TRUTH },
    { "no-truth", no_argument, NULL, O_NO_TRUTH },
    { "threads", required_argument, NULL, O_THREADS },
    { NULL, 0, NULL, 0 },
};

typedef struct sim_args {
    const char *output, *truth;
    int no_truth;
    long long threads;
} sim_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    sim_args *a = ctx;
    switch (opt) {
    case 'o': a->output = arg; break;
    case O_TRUTH: a->truth = arg; break;
    case O_NO_TRUTH: a->no_truth = 1; break;
    case O_THREADS:
        if (cli_count("--threads", arg, &a->threads, usage))
            return CLI_USAGE;
        if (a->threads > 64)
            return cli_usage_error(usage, "--threads: at most 64");
        break;
    default: return CLI_USAGE;
    }
    return 0;
}

/* SEQ.json -> SEQ-truth.json */
static char *default_truth(const char *output)
{
    size_t n = strlen(output);
    const char *stem_end = n > 5 && strcmp(output + n - 5, ".json") == 0 ? output + n - 5 : output + n;
    size_t stem = (size_t)(stem_end - output);
    char *p = malloc(stem + sizeof "-truth.json");
    if (p) {
        memcpy(p, output, stem);
        strcpy(p + stem, "-truth.json");
    }
    return p;
}

/* Every file the run may write: the manifest, the data beside it in
 * either storage, the ground truth. */
static int guard_outputs(const cli_common *common, const char *manifest, const char *truth)
{
    static const pl_seq_storage storages[] = { PL_SEQ_NPY_FLOAT32, PL_SEQ_PNG16 };
    if (cli_guard_output(common, manifest) || cli_guard_output(common, truth))
        return CLI_ERROR;
    for (size_t k = 0; k < sizeof storages / sizeof storages[0]; k++) {
        char *data;
        pl_err err = { 0 };
        int st = pl_seq_data_path(&data, manifest, storages[k], &err);
        if (st)
            return cli_fail_err(st, &err);
        int rc = cli_guard_output(common, data);
        free(data);
        if (rc)
            return rc;
    }
    return 0;
}

int cmd_simulate(int argc, char **argv)
{
    cli_common common;
    sim_args a = { 0 };
    int first;
    int rc = cli_parse(argc, argv, "o:", opts, &common, take_opt, &a, usage, help, &first);
    if (rc >= 0)
        return rc;
    if (argc - first != 1)
        return cli_usage_error(usage, "give exactly one scene file");
    if (!a.output)
        return cli_usage_error(usage, "--output is required");
    if (a.truth && a.no_truth)
        return cli_usage_error(usage, "--truth and --no-truth contradict each other");
    const char *scene_path = argv[first];
    char *truth = NULL;
    if (!a.no_truth && !(truth = a.truth ? strdup(a.truth) : default_truth(a.output)))
        return cli_fail("out of memory");
    if ((rc = guard_outputs(&common, a.output, truth))) {
        free(truth);
        return rc;
    }
    pl_err err = { 0 };
    pl_sim_scene *scene;
    int st = pl_sim_scene_load(&scene, scene_path, &err);
    if (st) {
        free(truth);
        return cli_fail_err(st, &err);
    }
    if (a.threads)
        pl_sim_scene_set_threads(scene, (unsigned)a.threads);
    pl_sim_info info;
    pl_sim_scene_info(scene, &info);
    cli_progress prog;
    cli_progress_init(&prog, "simulating", &common);
    struct timespec t0, t1;
    clock_gettime(CLOCK_MONOTONIC, &t0);
    st = pl_sim_run(scene, a.output, truth, cli_progress_fn, &prog, &err);
    clock_gettime(CLOCK_MONOTONIC, &t1);
    cli_progress_done(&prog);
    pl_sim_scene_free(scene);
    if (st) {
        free(truth);
        return cli_fail_err(st, &err);
    }
    double secs = (double)(t1.tv_sec - t0.tv_sec) + 1e-9 * (double)(t1.tv_nsec - t0.tv_nsec);
    if (common.json) {
        cJSON *o = cJSON_CreateObject();
        cJSON_AddStringToObject(o, "scene", scene_path);
        cJSON_AddStringToObject(o, "sequence", a.output);
        if (truth)
            cJSON_AddStringToObject(o, "truth", truth);
        else
            cJSON_AddNullToObject(o, "truth");
        cJSON_AddNumberToObject(o, "width", info.width);
        cJSON_AddNumberToObject(o, "height", info.height);
        cJSON_AddNumberToObject(o, "frames", info.frame_count);
        cJSON_AddNumberToObject(o, "frame_rate_hz", info.frame_rate_hz);
        cJSON_AddNumberToObject(o, "defects", (double)info.defect_count);
        cJSON_AddNumberToObject(o, "seconds", secs);
        free(truth);
        return cli_print_json(o);
    }
    if (!common.quiet)
        printf("simulated %s: %ux%u px, %u frames at %g Hz, %zu defect(s), in %.2f s -> %s%s%s\n",
               scene_path, info.width, info.height, info.frame_count, info.frame_rate_hz,
               info.defect_count, secs, a.output, truth ? ", truth " : "", truth ? truth : "");
    free(truth);
    return CLI_OK;
}
