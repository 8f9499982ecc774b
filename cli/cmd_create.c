/*
 * cmd_create.c - plyledger create: a new, empty store.
 */
#include "cli.h"

static const char usage[] = "[--store] PATH";
static const char help[] =
    "usage: plyledger create [--store] PATH\n"
    "\n"
    "Create a new, empty plyledger store (one SQLite file) at PATH. The file must\n"
    "not exist yet.\n"
    "\n"
    "Options:\n"
    "  -s, --store PATH   the store to create (or give PATH as the operand)\n"
    "  -q, --quiet        print nothing on success\n"
    "      --json         print the new store's summary as JSON\n"
    "  -h, --help         show this help\n";

int cmd_create(int argc, char **argv)
{
    cli_common common;
    int first;
    int rc = cli_parse(argc, argv, "", NULL, &common, NULL, NULL, usage, help, &first);
    if (rc >= 0)
        return rc;
    if (first < argc) {
        if (argc - first > 1)
            return cli_usage_error(usage, "too many operands");
        common.store = argv[first];
    } else if (!common.store) {
        return cli_usage_error(usage, "which store? give PATH");
    }
    pl_store *store;
    pl_err err = { 0 };
    int st = pl_store_create(&store, common.store, &err);
    if (st)
        return cli_fail_err(st, &err);
    pl_store_summary sum;
    st = pl_store_summarize(store, &sum, &err);
    pl_store_close(store);
    if (st)
        return cli_fail_err(st, &err);
    if (common.json) {
        char *text = NULL;
        return cli_print_json_text(pl_summary_json(&text, &sum, common.store, &err), &text,
                                   &err);
    }
    if (!common.quiet)
        printf("created store %s (id %s, schema %d)\n", common.store, sum.store_id,
               sum.schema_version);
    return CLI_OK;
}
