/*
 * cmd_package.c - plyledger package export, check and import: one
 * airframe's whole record handed over in one file (plyledger/package.h).
 */
#include "cli.h"

#include <string.h>

static const char group_usage[] =
    "export --airframe SERIAL --output FILE | check FILE | import FILE";
static const char group_help[] =
    "usage: plyledger package export --airframe SERIAL --output FILE\n"
    "       plyledger package check FILE [--sender-key FINGERPRINT]\n"
    "       plyledger package import FILE [--sender-key FINGERPRINT]\n"
    "\n"
    "A hand-over package is one airframe's whole record in one SQLite file of its\n"
    "own: every row of its chain with its maps, the sending store's own chain\n"
    "(criteria sets, the people who signed and their keys), the ledger and its\n"
    "seals, and a manifest of counts and hashes signed with the sending store's\n"
    "seal key. Any SQLite tool reads it; README.md (\"Hand-over package\") says\n"
    "how to check it without plyledger. A receiving store takes it only after\n"
    "checking every link, hash and signature, and never merges two histories.\n"
    "\n"
    "Each subcommand takes --help and --json.\n";

/* The fields every subcommand prints as JSON. */
static cJSON *result_json(const pl_package_result *r)
{
    cJSON *j = cJSON_CreateObject();
    if (!j)
        return NULL;
    cJSON_AddBoolToObject(j, "sound", r->faults == 0);
    cJSON_AddNumberToObject(j, "faults", (double)r->faults);
    if (r->faults) {
        cJSON_AddStringToObject(j, "first_fault", pl_package_fault_name(r->fault));
        if (r->fault == PL_PACKAGE_FAULT_RECORD)
            cJSON_AddStringToObject(j, "record_fault", pl_fault_name(r->record_fault));
        else
            cJSON_AddNullToObject(j, "record_fault");
        cJSON_AddStringToObject(j, "message", r->message);
    } else {
        cJSON_AddNullToObject(j, "first_fault");
        cJSON_AddNullToObject(j, "record_fault");
        cJSON_AddNullToObject(j, "message");
    }
    cJSON_AddStringToObject(j, "airframe", r->serial);
    cJSON_AddNumberToObject(j, "airframe_key", (double)r->airframe_key);
    cJSON_AddStringToObject(j, "source_store", r->source_store);
    cJSON_AddStringToObject(j, "exported_at", r->exported_at);
    cJSON_AddStringToObject(j, "exported_by", r->exported_by);
    cJSON_AddStringToObject(j, "seal_key", r->seal_key);
    cJSON_AddNumberToObject(j, "bytes", (double)r->bytes);
    cJSON_AddNumberToObject(j, "airframe_links", (double)r->airframe_links);
    cJSON_AddNumberToObject(j, "store_links", (double)r->store_links);
    cJSON_AddNumberToObject(j, "rows", (double)r->rows);
    cJSON_AddNumberToObject(j, "maps", (double)r->maps);
    cJSON_AddNumberToObject(j, "seals", (double)r->seals);
    cJSON_AddNumberToObject(j, "seal_keys", (double)r->seal_keys);
    return j;
}

/* "81920 bytes (80.0 KiB)". */
static const char *size_words(char *buf, size_t cap, int64_t bytes)
{
    if (bytes < 1024)
        snprintf(buf, cap, "%lld bytes", (long long)bytes);
    else if (bytes < 1024 * 1024)
        snprintf(buf, cap, "%lld bytes (%.1f KiB)", (long long)bytes, (double)bytes / 1024.0);
    else
        snprintf(buf, cap, "%lld bytes (%.1f MiB)", (long long)bytes,
                 (double)bytes / (1024.0 * 1024.0));
    return buf;
}

static void print_contents(const pl_package_result *r)
{
    char size[64];
    printf("  %lld links of its chain and %lld of the store's own chain (criteria sets, "
           "people), %lld rows in all, %lld map%s, %lld seals; %s\n",
           (long long)r->airframe_links, (long long)r->store_links, (long long)r->rows,
           (long long)r->maps, r->maps == 1 ? "" : "s", (long long)r->seals,
           size_words(size, sizeof size, r->bytes));
}

enum { O_AIRFRAME = 0x500, O_OUTPUT, O_SENDER_KEY };

typedef struct package_args {
    const char *airframe, *output, *sender_key;
} package_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    package_args *a = ctx;
    switch (opt) {
    case O_AIRFRAME: a->airframe = arg; break;
    case O_OUTPUT: a->output = arg; break;
    case O_SENDER_KEY: a->sender_key = arg; break;
    default: return CLI_USAGE;
    }
    return 0;
}

/* ---- export ------------------------------------------------------------------------- */

static const char export_usage[] = "--airframe SERIAL --output FILE";
static const char export_help[] =
    "usage: plyledger package export --airframe SERIAL --output FILE\n"
    "\n"
    "Write the whole record of one airframe to a new hand-over package FILE: every\n"
    "row of the airframe's chain (its operators, sites, inspections, maps,\n"
    "registrations, comparisons, indications, changes, interpretations and\n"
    "dispositions), every row of the store's own chain (criteria sets, the\n"
    "register of people, their keys and qualifications), the ledger links of both\n"
    "chains with their seals and seal keys, and a manifest of counts and hashes\n"
    "signed with the store's seal key. The package is written beside FILE,\n"
    "checked as 'package check' does, and only then put in place: a failure\n"
    "leaves no file, and an existing FILE as it was. FILE may not be the store,\n"
    "one of its SQLite files, or any plyledger store.\n"
    "\n"
    "The store must be sealed, and the export needs its seal key file (as every\n"
    "command that records does). It prints the package's size and the seal key's\n"
    "fingerprint: give the receiver that fingerprint apart from the package\n"
    "(read aloud, on paper), so they can tell the package comes from this store.\n"
    "\n"
    "Options:\n"
    "      --airframe SERIAL  the airframe to hand over\n"
    "      --output FILE      the package to write\n"
    "  -s, --store PATH       the store (default $PLYLEDGER_STORE)\n"
    "      --seal-key FILE    the store's seal key (default STORE.seal-key)\n"
    "      --json             print what the package holds as JSON\n"
    "  -q, --quiet            print nothing on success\n"
    "  -h, --help             show this help\n"
    "\n"
    "Exit status: 0 the package was written; 1 it was not (the reason on stderr);\n"
    "2 the command line is wrong.\n";

static const struct option export_opts[] = {
    { "airframe", required_argument, NULL, O_AIRFRAME },
    { "output", required_argument, NULL, O_OUTPUT },
    { NULL, 0, NULL, 0 },
};

static int package_export(int argc, char **argv)
{
    cli_common common;
    package_args a = { NULL, NULL, NULL };
    int rc = cli_parse(argc, argv, "", export_opts, &common, take_opt, &a, export_usage,
                       export_help, NULL);
    if (rc >= 0)
        return rc;
    if (!a.airframe)
        return cli_usage_error(export_usage, "--airframe SERIAL is required");
    if (!a.output)
        return cli_usage_error(export_usage, "--output FILE is required");
    if (cli_check_text(a.airframe, CLI_KEY, "--airframe") ||
        cli_guard_output(&common, a.output))
        return CLI_ERROR;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, 0)))
        return rc;
    cli_progress prog;
    cli_progress_init(&prog, "exporting", &common);
    pl_package_options o = PL_PACKAGE_OPTIONS_INIT;
    o.progress = cli_progress_fn;
    o.userdata = &prog;
    pl_package_result res;
    pl_err err = { 0 };
    int st = pl_package_export(store, a.airframe, a.output, &o, &res, &err);
    cli_progress_done(&prog);
    pl_store_close(store);
    if (st)
        return cli_fail_err(st, &err);
    if (common.json)
        return cli_print_json(result_json(&res));
    if (!common.quiet) {
        printf("exported airframe %s to %s\n", res.serial, a.output);
        print_contents(&res);
        printf("  sealed with seal key %s: give the receiver this fingerprint apart from the "
               "package\n", res.seal_key);
    }
    return CLI_OK;
}

/* ---- check -------------------------------------------------------------------------- */

static const char check_usage[] = "FILE [--sender-key FINGERPRINT]";
static const char check_help[] =
    "usage: plyledger package check FILE [--sender-key FINGERPRINT]\n"
    "\n"
    "Check a hand-over package on its own, without a store: that it is a whole\n"
    "package file (SQLite, rollback journal, not cut short, plyledger's schema),\n"
    "that its manifest is signed by the seal key it carries, that its record\n"
    "verifies (every row hash, link, seal, map digest and signature, as verify\n"
    "does), and that what it holds is what its manifest says (every chain's\n"
    "head, every table's row count, the maps' digest). Names the first fault.\n"
    "\n"
    "A package signs itself with its sender's key, so a check shows it is as its\n"
    "sender sealed it; that the sender is who you think, only the fingerprint\n"
    "they gave you shows: give it with --sender-key.\n"
    "\n"
    "Options:\n"
    "      --sender-key FINGERPRINT  refuse a package sealed with another key\n"
    "      --json             print the result as JSON\n"
    "  -q, --quiet            print nothing but the fault\n"
    "  -h, --help             show this help\n"
    "\n"
    "Exit status: 0 the package is sound; 1 it is not (the first fault on stderr)\n"
    "or it cannot be read; 2 the command line is wrong.\n";

static const struct option check_opts[] = {
    { "sender-key", required_argument, NULL, O_SENDER_KEY },
    { NULL, 0, NULL, 0 },
};

/* The one FILE operand of check and import. */
static int one_file(int argc, char **argv, int first, const char *usage, const char **file)
{
    if (argc - first != 1)
        return cli_usage_error(usage, argc - first ? "one FILE only" : "FILE is required");
    *file = argv[first];
    return 0;
}

static int package_check(int argc, char **argv)
{
    cli_common common;
    package_args a = { NULL, NULL, NULL };
    int first = 0;
    int rc = cli_parse(argc, argv, "", check_opts, &common, take_opt, &a, check_usage,
                       check_help, &first);
    if (rc >= 0)
        return rc;
    const char *file = NULL;
    if ((rc = one_file(argc, argv, first, check_usage, &file)))
        return rc;
    cli_progress prog;
    cli_progress_init(&prog, "checking", &common);
    pl_package_options o = PL_PACKAGE_OPTIONS_INIT;
    o.sender_key = a.sender_key;
    o.progress = cli_progress_fn;
    o.userdata = &prog;
    pl_package_result res;
    pl_err err = { 0 };
    int st = pl_package_check(file, &o, &res, &err);
    cli_progress_done(&prog);
    if (st)
        return cli_fail_err(st, &err);
    if (common.json) {
        int prc = cli_print_json(result_json(&res));
        if (res.faults)
            fprintf(stderr, "plyledger package check: %s: %s\n", file, res.message);
        return prc ? prc : res.faults ? CLI_ERROR : CLI_OK;
    }
    if (res.faults) {
        fprintf(stderr, "plyledger package check: %s: %s\n", file, res.message);
        fprintf(stderr, "plyledger package check: %s is NOT a sound hand-over package\n", file);
        return CLI_ERROR;
    }
    if (!common.quiet) {
        printf("%s is a sound hand-over package of airframe %s\n", file, res.serial);
        printf("  from store %s, exported %s by %s\n", res.source_store, res.exported_at,
               res.exported_by);
        print_contents(&res);
        if (a.sender_key)
            printf("  sealed with seal key %s, as its sender said\n", res.seal_key);
        else
            printf("  sealed with seal key %s: compare it with the fingerprint the sender "
                   "gave you\n", res.seal_key);
    }
    return CLI_OK;
}

/* ---- import ------------------------------------------------------------------------- */

static const char import_usage[] = "FILE [--sender-key FINGERPRINT]";
static const char import_help[] =
    "usage: plyledger package import FILE [--sender-key FINGERPRINT]\n"
    "\n"
    "Receive a hand-over package into the store, in one transaction. The package\n"
    "is checked first as 'package check' does; one fault and it is refused, with\n"
    "the fault named, and nothing is imported. Then each of its chains (the\n"
    "airframe's, and the sending store's own) is compared link by link with the\n"
    "store's chain of the same key: the links both hold must be the same, and\n"
    "only links beyond the store's are added, with their rows (same ids), their\n"
    "maps and their makers' seals. An airframe this store already holds with a\n"
    "different history (another record of the same serial, a link that\n"
    "differs, a row id taken) is refused, never merged; so is a store whose own\n"
    "chain (criteria sets, people) is not the beginning of the package's, nor\n"
    "the package's of its own. Importing the same package again changes nothing\n"
    "and says so. Every key that sealed links received is kept as a received\n"
    "seal key of that chain, endorsed with this store's seal key, so the store\n"
    "must be sealed and its seal key file given.\n"
    "\n"
    "Options:\n"
    "      --sender-key FINGERPRINT  refuse a package sealed with another key than\n"
    "                         the one its sender gave you\n"
    "  -s, --store PATH       the receiving store (default $PLYLEDGER_STORE)\n"
    "      --seal-key FILE    its seal key (default STORE.seal-key)\n"
    "      --wait SECONDS     @WAIT@\n"
    "      --json             print what was received as JSON\n"
    "  -q, --quiet            print nothing on success\n"
    "  -h, --help             show this help\n"
    "\n"
    "Exit status: 0 received, or already received (nothing to import); 1 refused\n"
    "or failed (the reason on stderr; the store is as it was); 2 the command line\n"
    "is wrong.\n";

static int package_import(int argc, char **argv)
{
    cli_common common;
    package_args a = { NULL, NULL, NULL };
    int first = 0;
    int rc = cli_parse(argc, argv, "", check_opts, &common, take_opt, &a, import_usage,
                       import_help, &first);
    if (rc >= 0)
        return rc;
    const char *file = NULL;
    if ((rc = one_file(argc, argv, first, import_usage, &file)))
        return rc;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, 0)))
        return rc;
    cli_progress prog;
    cli_progress_init(&prog, "importing", &common);
    pl_package_options o = PL_PACKAGE_OPTIONS_INIT;
    o.sender_key = a.sender_key;
    o.progress = cli_progress_fn;
    o.userdata = &prog;
    pl_package_result res;
    pl_err err = { 0 };
    int st = pl_package_import(store, file, &o, &res, &err);
    cli_progress_done(&prog);
    pl_store_close(store);
    if (st)
        return cli_fail_err(st, &err);
    if (common.json) {
        cJSON *j = result_json(&res);
        if (j) {
            cJSON_AddBoolToObject(j, "already_received", res.already);
            cJSON_AddNumberToObject(j, "imported_airframe_links",
                                    (double)res.imported_airframe_links);
            cJSON_AddNumberToObject(j, "imported_store_links", (double)res.imported_store_links);
            cJSON_AddNumberToObject(j, "imported_rows", (double)res.imported_rows);
            cJSON_AddNumberToObject(j, "received_keys", (double)res.received_keys);
        }
        return cli_print_json(j);
    }
    if (common.quiet)
        return CLI_OK;
    if (res.already) {
        printf("%s: already received: nothing to import (this store holds every link of "
               "airframe %s and of the store's own chain that the package carries)\n",
               file, res.serial);
        return CLI_OK;
    }
    printf("received airframe %s from %s (store %s, seal key %s)\n", res.serial, file,
           res.source_store, res.seal_key);
    printf("  %lld new links of its chain and %lld of the store's own chain, %lld rows, "
           "%lld seal keys recorded as received\n",
           (long long)res.imported_airframe_links, (long long)res.imported_store_links,
           (long long)res.imported_rows, (long long)res.received_keys);
    return CLI_OK;
}

int cmd_package(int argc, char **argv)
{
    if (argc < 2)
        return cli_usage_error(group_usage, "a subcommand is required: export, check or import");
    const char *sub = argv[1];
    if (strcmp(sub, "--help") == 0 || strcmp(sub, "-h") == 0)
        return cli_help(group_help);
    static const struct {
        const char *name, *current;
        int (*run)(int, char **);
    } subs[] = {
        { "export", "package export", package_export },
        { "check", "package check", package_check },
        { "import", "package import", package_import },
    };
    for (size_t i = 0; i < sizeof subs / sizeof subs[0]; i++)
        if (strcmp(sub, subs[i].name) == 0) {
            cli_current = subs[i].current;
            return subs[i].run(argc - 1, argv + 1);
        }
    return cli_usage_error(group_usage, "unknown subcommand '%s' (export, check or import)", sub);
}
