/*
 * cmd_verify.c - plyledger verify: is the record as it was written?
 */
#include "cli.h"

#include <stdlib.h>
#include <string.h>

static const char usage[] = "[--heads FILE] [--keep-heads FILE] [--json]";
static const char help[] =
    "usage: plyledger verify [--heads FILE] [--keep-heads FILE] [--json]\n"
    "\n"
    "Check that the record is as it was written. Every recorded row is a link of\n"
    "its airframe's hash chain (criteria sets: of the store's own chain): verify\n"
    "hashes every row again, recomputes every link from the one before it,\n"
    "decodes every map and compares it with its recorded SHA-256, checks that\n"
    "every row has exactly one link and that the append-only triggers are in\n"
    "place, and names the first fault it finds: which airframe, which record,\n"
    "what differs. A store written before the hash chain existed is migrated\n"
    "first: its rows are chained in the order they were recorded, and verify\n"
    "says so.\n"
    "\n"
    "A sealed store (every store made by plyledger create; an older one after\n"
    "plyledger seal) signs every link with its seal key, whose secret half is a\n"
    "key file outside the store: verify holds every link to a valid seal, so a\n"
    "row appended outside plyledger with a correctly computed link is a fault.\n"
    "Verify needs no key. Against a chain cut together with its rows, or a store\n"
    "resealed with another key, keep the heads of the chains and the seal key's\n"
    "fingerprint outside the store (--keep-heads, for example after each check or\n"
    "with a hand-over) and verify against them later (--heads).\n"
    "\n"
    "Options:\n"
    "      --heads FILE       also check the chains against heads kept earlier\n"
    "      --keep-heads FILE  write the chains' heads to FILE (JSON) when the\n"
    "                         record is intact\n"
    "  -s, --store PATH       the store (default $PLYLEDGER_STORE)\n"
    "      --json             print the result as JSON\n"
    "  -q, --quiet            print nothing but the fault\n"
    "  -h, --help             show this help\n"
    "\n"
    "Exit status: 0 the record is intact; 1 a fault was found (named on stderr)\n"
    "or the command failed; 2 the command line is wrong.\n";

enum { O_HEADS = 0x400, O_KEEP };

static const struct option opts[] = {
    { "heads", required_argument, NULL, O_HEADS },
    { "keep-heads", required_argument, NULL, O_KEEP },
    { NULL, 0, NULL, 0 },
};

typedef struct verify_args {
    const char *heads, *keep;
} verify_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    verify_args *a = ctx;
    if (opt == O_HEADS)
        a->heads = arg;
    else if (opt == O_KEEP)
        a->keep = arg;
    return 0;
}

/* Read the whole of a small text file (a heads file). */
static int read_text(const char *path, char **out)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return cli_fail("%s: cannot open", path);
    size_t cap = 1 << 16, n = 0;
    char *buf = malloc(cap + 1);
    while (buf) {
        size_t got = fread(buf + n, 1, cap - n, f);
        n += got;
        if (n < cap)
            break;
        if (cap >= (64u << 20)) {
            free(buf);
            fclose(f);
            return cli_fail("%s: too large for a heads file", path);
        }
        char *nb = realloc(buf, 2 * cap + 1);
        if (!nb)
            free(buf);
        buf = nb;
        cap *= 2;
    }
    fclose(f);
    if (!buf)
        return cli_fail("out of memory");
    buf[n] = '\0';
    if (strlen(buf) != n) {
        free(buf);
        return cli_fail("%s: holds a NUL byte: not a heads file", path);
    }
    *out = buf;
    return CLI_OK;
}

int cmd_verify(int argc, char **argv)
{
    cli_common common;
    verify_args a = { NULL, NULL };
    int first;
    int rc = cli_parse(argc, argv, "", opts, &common, take_opt, &a, usage, help, &first);
    if (rc >= 0)
        return rc;
    if (first < argc)
        return cli_usage_error(usage, "verify takes no operands");
    if (a.keep && (rc = cli_guard_output(&common, a.keep)))
        return rc;
    pl_err err = { 0 };
    pl_chain_head *kept = NULL;
    size_t nkept = 0;
    char kept_key[PL_SIGN_FINGERPRINT_SIZE] = "";
    if (a.heads) {
        char *text = NULL;
        if ((rc = read_text(a.heads, &text)))
            return rc;
        int st = pl_heads_parse(&kept, &nkept, kept_key, text, a.heads, &err);
        free(text);
        if (st)
            return cli_fail_err(st, &err);
    }
    /* opened for writing so that a store older than the hash chain is
     * migrated (and chained, which the migration says) before it is checked */
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, CLI_STORE_NO_SEAL_KEY))) {
        free(kept);
        return rc;
    }
    cli_progress prog;
    cli_progress_init(&prog, "verifying", &common);
    pl_verify_options o = PL_VERIFY_OPTIONS_INIT;
    o.heads = kept;
    o.nheads = nkept;
    o.seal_key = kept_key;
    o.progress = cli_progress_fn;
    o.userdata = &prog;
    pl_verify_result res;
    int st = pl_store_verify(store, &res, &o, &err);
    cli_progress_done(&prog);
    free(kept);
    pl_chain_head *heads = NULL;
    size_t nheads = 0;
    pl_store_summary sum;
    if (!st)
        st = pl_store_heads(store, &heads, &nheads, &err);
    if (!st)
        st = pl_store_summarize(store, &sum, &err);
    pl_store_close(store);
    if (st) {
        free(heads);
        return cli_fail_err(st, &err);
    }
    if (a.keep && res.faults == 0) {
        char *text = NULL;
        pl_outfile *of = NULL;
        if ((st = pl_heads_json(&text, sum.store_id, res.seal_key, heads, nheads, &err)) == 0 &&
            (rc = cli_open_output(&of, &common, a.keep)) == 0) {
            fputs(text, pl_outfile_stream(of));
            fputc('\n', pl_outfile_stream(of));
            st = pl_outfile_finish(of, PL_OK, &err);
        }
        free(text);
        if (st || rc) {
            free(heads);
            return st ? cli_fail_err(st, &err) : rc;
        }
    }
    if (common.json) {
        cJSON *j = cJSON_CreateObject();
        if (j) {
            cJSON_AddBoolToObject(j, "intact", res.faults == 0);
            cJSON_AddNumberToObject(j, "faults", (double)res.faults);
            if (res.faults) {
                cJSON_AddStringToObject(j, "first_fault", pl_fault_name(res.first));
                cJSON_AddStringToObject(j, "message", res.message);
            } else {
                cJSON_AddNullToObject(j, "first_fault");
                cJSON_AddNullToObject(j, "message");
            }
            cJSON_AddNumberToObject(j, "chains", (double)res.chains);
            cJSON_AddNumberToObject(j, "links", (double)res.links);
            cJSON_AddNumberToObject(j, "rows", (double)res.rows);
            cJSON_AddNumberToObject(j, "maps", (double)res.maps);
            cJSON_AddBoolToObject(j, "sealed", res.sealed);
            if (res.sealed)
                cJSON_AddStringToObject(j, "seal_key", res.seal_key);
            else
                cJSON_AddNullToObject(j, "seal_key");
            cJSON_AddNumberToObject(j, "seals", (double)res.seals);
            cJSON_AddNumberToObject(j, "signatures", (double)res.signatures);
            cJSON *list = cJSON_AddArrayToObject(j, "heads");
            for (size_t i = 0; list && i < nheads; i++) {
                cJSON *h = cJSON_CreateObject();
                if (!h)
                    break;
                if (heads[i].chain)
                    cJSON_AddStringToObject(h, "airframe", heads[i].serial);
                else
                    cJSON_AddNullToObject(h, "airframe");
                cJSON_AddNumberToObject(h, "seq", (double)heads[i].seq);
                cJSON_AddStringToObject(h, "link", heads[i].link);
                cJSON_AddItemToArray(list, h);
            }
        }
        free(heads);
        int prc = cli_print_json(j);
        if (res.faults)
            fprintf(stderr, "plyledger verify: %s\n", res.message);
        return prc ? prc : res.faults ? CLI_ERROR : CLI_OK;
    }
    if (res.faults) {
        free(heads);
        fprintf(stderr, "plyledger verify: %s\n", res.message);
        if (res.faults > 1)
            fprintf(stderr, "plyledger verify: %lu faults in all; the first is named above\n",
                    (unsigned long)res.faults);
        fprintf(stderr, "plyledger verify: the record of %s is NOT intact\n", common.store);
        return CLI_ERROR;
    }
    if (!common.quiet) {
        printf("the record of %s is intact: %lu chains, %lu links, %lu rows hashed, %lu maps "
               "decoded and compared\n",
               common.store, (unsigned long)res.chains, (unsigned long)res.links,
               (unsigned long)res.rows, (unsigned long)res.maps);
        if (res.sealed)
            printf("sealed with seal key %s: %lu seals checked; %lu signatures checked\n",
                   res.seal_key, (unsigned long)res.seals, (unsigned long)res.signatures);
        else
            printf("NOT sealed: a row appended outside plyledger with a correctly computed "
                   "link cannot be told from a true one (seal it: plyledger seal)\n");
        for (size_t i = 0; i < nheads; i++)
            printf("  %-24s link %-6lld %s\n",
                   heads[i].chain ? heads[i].serial : "(store: criteria sets)",
                   (long long)heads[i].seq, heads[i].seq ? heads[i].link : "-");
        if (a.keep)
            printf("heads kept in %s\n", a.keep);
    }
    free(heads);
    return CLI_OK;
}
