/*
 * cmd_compare.c - plyledger compare: what changed at a site, or at every
 * site of a check, against the baseline under a recorded criteria revision.
 */
#include "cli.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

static const char usage[] =
    "--airframe SERIAL (--site CODE | --task REF) --criteria NAME [options]";
static const char help[] =
    "usage: plyledger compare --airframe SERIAL (--site CODE | --task REF)\n"
    "                         --criteria NAME [options]\n"
    "\n"
    "Compare a site's inspection (--site), or every site inspected under one check's\n"
    "task reference (--task), with the site's governing baseline (the latest\n"
    "baseline or post-repair inspection before it) or, with --against previous,\n"
    "with the inspection before it. The current map is registered onto the\n"
    "reference, indications are found in both, matched (overlap, then centroid\n"
    "distance), and each is classified: new, grown, stable, vanished, not compared\n"
    "(mostly outside the overlap), or a changed region of the difference map. The\n"
    "limits come from the named criteria set (see 'plyledger criteria'): each change\n"
    "shows its measured deltas, the limit applied and the margin (limit - measured;\n"
    "negative: exceeded). Maps of different quantities or units are not compared;\n"
    "a different procedure, equipment, reduction, pitch or map size is a warning.\n"
    "Each comparison is recorded with its registration and the criteria revision;\n"
    "a refused registration is recorded as a comparison not done.\n"
    "\n"
    "What to compare:\n"
    "      --airframe SERIAL    the airframe (required)\n"
    "      --site CODE          one site ...\n"
    "      --inspection ID      ... this inspection of it (default: its latest)\n"
    "      --task REF           ... or every site of the check with this task reference\n"
    "      --against WHAT       baseline (default) or previous\n"
    "      --quantity Q         the channel compared (default: temperature-contrast for\n"
    "                           flash thermography, ultrasonic-amplitude for ultrasound)\n"
    "      --label L            ... the channel with this label (default: the first)\n"
    "      --criteria NAME      the recorded criteria set (required)\n"
    "      --revision R         its revision (default: the latest recorded)\n"
    "Output:\n"
    "      --pictures DIR       (one site) write four PNGs into DIR: the reference, the\n"
    "                           aligned current map, the difference and the overlay\n"
    "                           with the changes' numbered outlines\n"
    "      --dry-run            compare and show, record nothing\n"
    "  -s, --store PATH         the store (default $PLYLEDGER_STORE)\n"
    "      --wait SECONDS       @WAIT@\n"
    "      --json               print the result as JSON\n"
    "  -q, --quiet              print nothing but errors\n"
    "  -h, --help               show this help\n"
    "\n"
    "Exit status:\n"
    "  0  every site compared, no change beyond its limit\n"
    "  3  at least one change beyond its limit (a finding for the engineer)\n"
    "  4  no change beyond a limit, but a site could not be compared (its\n"
    "     registration was refused, or it was refused before: see the message),\n"
    "     or a site of the airframe's plan was not inspected under --task (the\n"
    "     output names it first: plyledger coverage gives the whole picture)\n"
    "  1  the command failed (nothing recorded); 2  the command line is wrong\n"
    "A script learns that a limit was exceeded from status 3, or from\n"
    "\"counts\".\"exceeding\" in --json.\n";

enum { EXIT_FINDING = 3, EXIT_NOT_COMPARED = 4 };

enum {
    O_AIRFRAME = 0x100, O_SITE, O_INSPECTION, O_TASK, O_AGAINST, O_QUANTITY, O_LABEL,
    O_CRITERIA, O_REVISION, O_PICTURES, O_DRY_RUN,
};
static const struct option opts[] = {
    { "airframe", required_argument, NULL, O_AIRFRAME },
    { "site", required_argument, NULL, O_SITE },
    { "inspection", required_argument, NULL, O_INSPECTION },
    { "task", required_argument, NULL, O_TASK },
    { "against", required_argument, NULL, O_AGAINST },
    { "quantity", required_argument, NULL, O_QUANTITY },
    { "label", required_argument, NULL, O_LABEL },
    { "criteria", required_argument, NULL, O_CRITERIA },
    { "revision", required_argument, NULL, O_REVISION },
    { "pictures", required_argument, NULL, O_PICTURES },
    { "dry-run", no_argument, NULL, O_DRY_RUN },
    { NULL, 0, NULL, 0 },
};

typedef struct cmp_args {
    const char *airframe, *site, *task, *pictures;
    long long inspection;
    pl_compare_options o;
} cmp_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    cmp_args *a = ctx;
    switch (opt) {
    case O_AIRFRAME: a->airframe = arg; break;
    case O_SITE: a->site = arg; break;
    case O_TASK: a->task = arg; break;
    case O_QUANTITY: a->o.quantity = arg; break;
    case O_LABEL: a->o.label = arg; break;
    case O_CRITERIA: a->o.criteria_name = arg; break;
    case O_REVISION: a->o.criteria_revision = arg; break;
    case O_PICTURES: a->pictures = arg; break;
    case O_DRY_RUN: a->o.dry_run = 1; break;
    case O_INSPECTION: return cli_count("--inspection", arg, &a->inspection, usage);
    case O_AGAINST:
        if (strcmp(arg, "baseline") == 0) a->o.against = PL_AGAINST_BASELINE;
        else if (strcmp(arg, "previous") == 0) a->o.against = PL_AGAINST_PREVIOUS;
        else return cli_usage_error(usage, "--against must be baseline or previous");
        break;
    default: return CLI_USAGE;
    }
    return 0;
}

/* ---- text ------------------------------------------------------------------ */

/* v with `digits` decimals (signed when `sign`), or "-" when not a number. */
static void fmt(char *buf, size_t n, int sign, int digits, double v)
{
    if (!isfinite(v))
        snprintf(buf, n, "-");
    else if (sign)
        snprintf(buf, n, "%+.*f", digits, v);
    else
        snprintf(buf, n, "%.*f", digits, v);
}

/* v to 3 significant digits, or "-". */
static void fmt_g(char *buf, size_t n, int sign, double v)
{
    if (!isfinite(v))
        snprintf(buf, n, "-");
    else if (sign)
        snprintf(buf, n, "%+.3g", v);
    else
        snprintf(buf, n, "%.3g", v);
}

static void print_site(const pl_site_comparison *sc)
{
    const pl_criteria_limits *l = &sc->limits;
    printf("\n%s site %s (zone %s, %s)%s\n", sc->site.airframe_serial, sc->site.code,
           sc->site.zone[0] ? sc->site.zone : "-", sc->site.description,
           sc->current.simulated == 1 ? "  SIMULATED DATA" : "");
    printf("  inspection %lld of %s (%s) against %s inspection %lld of %s\n",
           (long long)sc->current.key, sc->current.performed_on, sc->current.task_ref,
           pl_compare_against_name(sc->against), (long long)sc->reference.key,
           sc->reference.performed_on);
    printf("  %s%s%s [%s]; criteria %s rev %s, rule \"%s\" (%s)%s\n", sc->quantity,
           sc->label[0] ? " " : "", sc->label, sc->unit, l->criteria_name, l->criteria_revision,
           l->rule_name, pl_criteria_kind_name(l->kind),
           l->example_values ? "  -- " PL_CRITERIA_EXAMPLE_MARKING : "");
    for (size_t i = 0; i < sc->nwarnings; i++)
        printf("  warning: %s\n", sc->warnings[i]);
    if (!sc->done) {
        printf("  NOT COMPARED: %s\n", sc->not_done_reason);
        return;
    }
    const pl_comparison *c = sc->cmp;
    printf("  registration shift %+.2f, %+.2f px, rotation %+.2f deg, ncc %.3f; not compared "
           "%.0f mm^2 (%.1f %%)\n", sc->reg.transform.dx, sc->reg.transform.dy,
           sc->reg.transform.rotation_deg, sc->reg.ncc, c->not_compared_mm2,
           100.0 * c->not_compared_fraction);
    if (!c->count) {
        printf("  no indications in either map, no changed region\n");
        return;
    }
    const char *hdr[] = { "#", "CHANGE", "REF mm2", "NOW mm2", "GROWTH mm2", "GROWTH %",
                          "AREA LIMIT", "MARGIN", "CONTRAST +", "LIMIT", "MARGIN", "FINDING",
                          "AT (x, y, z mm)" };
    cli_table *t = cli_table_new(13, hdr);
    for (size_t i = 0; i < c->count; i++) {
        const pl_change *ch = &c->changes[i];
        int r = (int)c->limits.sizing;
        char num[24], a0[24], a1[24], d[24], pc[24], al[24], am[24], cd[24], cl[24], cm[24],
            at[64];
        snprintf(num, sizeof num, "%zu", i + 1);
        fmt(a0, sizeof a0, 0, 1, ch->area_baseline_mm2[r]);
        fmt(a1, sizeof a1, 0, 1, ch->area_current_mm2[r]);
        fmt(d, sizeof d, 1, 1, ch->area_delta_mm2[r]);
        fmt(pc, sizeof pc, 1, 0, ch->area_delta_percent[r]);
        fmt(al, sizeof al, 0, 1, ch->area_limit_mm2);
        fmt(am, sizeof am, 1, 1, ch->area_margin_mm2);
        fmt_g(cd, sizeof cd, 1, ch->contrast_delta);
        fmt_g(cl, sizeof cl, 0, ch->contrast_limit);
        fmt_g(cm, sizeof cm, 1, ch->contrast_margin);
        const pl_map *g = sc->reference_data;
        if (isfinite(ch->centroid_col)) {
            double xyz[3];
            for (int k = 0; k < 3; k++)
                xyz[k] = g->placement.origin[k] + g->placement.u[k] * ch->centroid_col * g->pitch_u
                         + g->placement.v[k] * ch->centroid_row * g->pitch_v;
            snprintf(at, sizeof at, "%.0f, %.0f, %.0f", xyz[0], xyz[1], xyz[2]);
        } else {
            snprintf(at, sizeof at, "-");
        }
        const char *row[] = { num, pl_change_kind_name(ch->kind), a0, a1, d, pc, al, am, cd, cl,
                              cm, ch->exceeds ? "EXCEEDS" : ch->reportable ? "within" : "below min",
                              at };
        cli_table_row(t, row);
    }
    cli_table_print(t, stdout);
    cli_table_free(t);
}

static void print_counts(const pl_compare_counts *k)
{
    printf("  %zu site(s): %zu compared, %zu not compared or refused; changes: %zu new, %zu "
           "grown, %zu stable, %zu vanished, %zu not compared, %zu changed region(s) (and %zu "
           "below the minimum reportable size); %zu beyond their limits\n", k->sites, k->compared,
           k->refused, k->kinds[PL_CHANGE_NEW], k->kinds[PL_CHANGE_GROWN],
           k->kinds[PL_CHANGE_STABLE], k->kinds[PL_CHANGE_VANISHED],
           k->kinds[PL_CHANGE_NOT_COMPARED], k->kinds[PL_CHANGE_REGION], k->below_min,
           k->exceeding);
}

static int status_of(const pl_compare_counts *k)
{
    if (k->exceeding)
        return EXIT_FINDING;
    return k->refused ? EXIT_NOT_COMPARED : CLI_OK;
}

/* ---- pictures ----------------------------------------------------------------- */

enum { NPICTURES = 4 };
static const char *const picture_names[NPICTURES] = { "reference", "aligned", "difference",
                                                      "overlay" };

static int write_pictures(pl_outfile *const *outs, const pl_site_comparison *sc, pl_store *store,
                          pl_err *err)
{
    pl_map *diff = NULL;
    uint32_t *marks = NULL;
    int st = pl_site_comparison_difference(&diff, sc, err);
    if (!st)
        st = pl_site_comparison_marks(&marks, sc, err);
    for (int i = 0; i < NPICTURES && !st; i++) {
        pl_render_options ro = PL_RENDER_OPTIONS_INIT;
        char ident[PL_RENDER_IDENTIFICATION_SIZE];
        int simulated = 0;
        pl_id map = i == 0 ? sc->reference_map : sc->current_map;
        st = pl_history_identification(ident, sizeof ident, &simulated, store, map,
                                       i == 0 ? 0 : sc->reference_map, sc->quantity, err);
        if (st)
            break;
        if (i == 2) {
            size_t n = strlen(ident);
            snprintf(ident + n, sizeof ident - n, " difference");
        }
        ro.identification = ident;
        ro.simulated = simulated;
        pl_image *img = NULL;
        if (i == 0)
            st = pl_render_map(&img, sc->reference_data, sc->reference_channel, &ro, err);
        else if (i == 1)
            st = pl_render_map(&img, sc->aligned, sc->aligned_channel, &ro, err);
        else if (i == 2)
            st = pl_render_map(&img, diff, 0, &ro, err);
        else
            st = pl_render_outlined(&img, sc->aligned, sc->aligned_channel, marks,
                                    (uint32_t)sc->cmp->count, &ro, err);
        if (!st)
            st = pl_image_write_png(img, outs[i], err);
        pl_image_free(img);
    }
    pl_map_free(diff);
    free(marks);
    return st;
}

/* ---- the command ----------------------------------------------------------------- */

static int compare_one(cmp_args *a, cli_common *common)
{
    pl_outfile *outs[NPICTURES] = { NULL };
    char paths[NPICTURES][4096];
    int rc;
    if (a->pictures) {
        for (int i = 0; i < NPICTURES; i++) {
            snprintf(paths[i], sizeof paths[i], "%s/%s-%s-%s.png", a->pictures, a->airframe,
                     a->site, picture_names[i]);
            if ((rc = cli_open_output(&outs[i], common, paths[i]))) {
                for (int k = 0; k < i; k++)
                    pl_outfile_abort(outs[k]);
                return rc;
            }
        }
    }
    pl_store *store;
    if ((rc = cli_open_store(&store, common, a->o.dry_run ? PL_STORE_READONLY : 0))) {
        for (int k = 0; k < NPICTURES; k++)
            pl_outfile_abort(outs[k]);
        return rc;
    }
    pl_err err = { 0 };
    pl_site_comparison *sc = NULL;
    pl_compare_options o = a->o;
    o.dry_run = 1; /* pictures first, then the record */
    int st = pl_compare_site(&sc, store, a->airframe, a->site, (pl_id)a->inspection, &o, &err);
    if (!st && a->pictures && sc->done)
        st = write_pictures(outs, sc, store, &err);
    if (!st && !a->o.dry_run)
        st = pl_compare_record(store, sc, &a->o, &err);
    pl_store_close(store);
    for (int i = 0; i < NPICTURES; i++)
        if (st || !sc->done) /* a comparison not done has no pictures */
            pl_outfile_abort(outs[i]);
        else
            st = pl_outfile_finish(outs[i], st, &err);
    if (st) {
        pl_site_comparison_free(sc);
        return cli_fail_err(st, &err);
    }
    pl_compare_counts k;
    pl_compare_counts_of(&k, sc);
    if (common->json) {
        char *text = NULL;
        rc = cli_print_json_text(pl_site_comparison_json(&text, sc, &err), &text, &err);
    } else if (!common->quiet) {
        if (sc->comparison_id)
            printf("comparison %lld recorded\n", (long long)sc->comparison_id);
        else if (a->o.dry_run)
            printf("dry run: nothing recorded\n");
        print_site(sc);
        printf("\n");
        print_counts(&k);
        if (a->pictures && sc->done)
            for (int i = 0; i < NPICTURES; i++)
                printf("  wrote %s\n", paths[i]);
        cli_print_caution();
        rc = CLI_OK;
    } else {
        rc = CLI_OK;
    }
    if (!sc->done)
        fprintf(stderr, "plyledger: %s site %s: not compared: %s\n", a->airframe, a->site,
                sc->not_done_reason);
    pl_site_comparison_free(sc);
    return rc ? rc : status_of(&k);
}

static int compare_check(cmp_args *a, cli_common *common)
{
    pl_store *store;
    int rc = cli_open_store(&store, common, a->o.dry_run ? PL_STORE_READONLY : 0);
    if (rc)
        return rc;
    pl_err err = { 0 };
    pl_check_comparison *cc = NULL;
    cli_progress prog;
    cli_progress_init(&prog, "comparing", common);
    int st = pl_compare_check(&cc, store, a->airframe, a->task, &a->o, cli_progress_fn, &prog,
                              &err);
    cli_progress_done(&prog);
    pl_store_close(store);
    if (st)
        return cli_fail_err(st, &err);
    if (common->json) {
        char *text = NULL;
        rc = cli_print_json_text(pl_check_comparison_json(&text, cc, &err), &text, &err);
    } else if (!common->quiet) {
        if (cc->missed)
            printf("%s\n\n", cc->missed_warning);
        printf("check %s of %s against %s: %zu site(s)%s\n", cc->task, cc->serial,
               pl_compare_against_name(cc->against), cc->nsites,
               a->o.dry_run ? " (dry run: nothing recorded)" : "");
        /* a line a site, then the details of the sites with findings */
        const char *hdr[] = { "SITE", "INSPECTION", "STATUS", "NEW", "GROWN", "STABLE",
                              "VANISHED", "NOT COMPARED", "REGIONS", "BEYOND LIMITS",
                              "WARNINGS" };
        cli_table *t = cli_table_new(11, hdr);
        for (size_t i = 0; i < cc->nsites; i++) {
            const pl_check_site *cs = &cc->sites[i];
            pl_compare_counts k;
            pl_compare_counts_of(&k, cs->sc);
            char v[9][24];
            snprintf(v[0], sizeof v[0], "%lld", (long long)cs->current_inspection);
            const int kinds[6] = { PL_CHANGE_NEW, PL_CHANGE_GROWN, PL_CHANGE_STABLE,
                                   PL_CHANGE_VANISHED, PL_CHANGE_NOT_COMPARED, PL_CHANGE_REGION };
            for (int j = 0; j < 6; j++)
                snprintf(v[1 + j], sizeof v[1 + j], "%zu", k.kinds[kinds[j]]);
            snprintf(v[7], sizeof v[7], "%zu", k.exceeding);
            snprintf(v[8], sizeof v[8], "%zu", cs->sc ? cs->sc->nwarnings : 0);
            const char *status = !cs->sc ? "REFUSED" : cs->sc->done ? "compared" : "NOT COMPARED";
            const char *row[] = { cs->code, v[0], status, v[1], v[2], v[3], v[4], v[5], v[6], v[7],
                                  v[8] };
            cli_table_row(t, row);
        }
        printf("\n");
        cli_table_print(t, stdout);
        cli_table_free(t);
        for (size_t i = 0; i < cc->nsites; i++) {
            const pl_check_site *cs = &cc->sites[i];
            if (!cs->sc)
                printf("\n%s site %s: REFUSED: %s\n", cc->serial, cs->code, cs->refusal);
            else if (!cs->sc->done || (cs->sc->cmp && cs->sc->cmp->exceeding))
                print_site(cs->sc);
        }
        printf("\nsummary of check %s of %s (%.2f s, %.3f s a site)\n", cc->task, cc->serial,
               cc->seconds, cc->nsites ? cc->seconds / (double)cc->nsites : 0.0);
        print_counts(&cc->counts);
        if (cc->missed)
            printf("%s\n", cc->missed_warning);
        cli_print_caution();
        rc = CLI_OK;
    }
    if (cc->missed && (common->json || common->quiet))
        fprintf(stderr, "plyledger: %s\n", cc->missed_warning);
    for (size_t i = 0; i < cc->nsites; i++)
        if (!cc->sites[i].sc)
            fprintf(stderr, "plyledger: %s site %s: refused: %s\n", cc->serial,
                    cc->sites[i].code, cc->sites[i].refusal);
    int status = status_of(&cc->counts);
    if (status == CLI_OK && cc->missed)
        status = EXIT_NOT_COMPARED;
    pl_check_comparison_free(cc);
    return rc ? rc : status;
}

int cmd_compare(int argc, char **argv)
{
    cli_common common;
    cmp_args a;
    memset(&a, 0, sizeof a);
    pl_compare_options init = PL_COMPARE_OPTIONS_INIT;
    a.o = init;
    int rc = cli_parse(argc, argv, "", opts, &common, take_opt, &a, usage, help, NULL);
    if (rc >= 0)
        return rc;
    if (!a.airframe)
        return cli_usage_error(usage, "--airframe is required");
    if (!a.site == !a.task)
        return cli_usage_error(usage, "give one of --site and --task");
    if (!a.o.criteria_name)
        return cli_usage_error(usage, "--criteria is required (see 'plyledger criteria list')");
    if (a.task && (a.inspection || a.pictures))
        return cli_usage_error(usage, "--inspection and --pictures go with --site");
    if ((rc = cli_check_text(a.airframe, CLI_KEY, "--airframe"))
        || (rc = cli_check_text(a.site, CLI_KEY, "--site"))
        || (rc = cli_check_text(a.task, CLI_NAME, "--task"))
        || (rc = cli_check_text(a.o.criteria_name, CLI_NAME, "--criteria"))
        || (rc = cli_check_text(a.o.criteria_revision, CLI_NAME, "--revision"))
        || (rc = cli_check_text(a.o.quantity, CLI_NAME, "--quantity"))
        || (rc = cli_check_text(a.o.label, CLI_NAME, "--label")))
        return rc;
    return a.site ? compare_one(&a, &common) : compare_check(&a, &common);
}
