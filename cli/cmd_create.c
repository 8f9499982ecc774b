/*
 * cmd_create.c - plyledger create: a new, empty store.
 */
#include "cli.h"

#include <unistd.h>

static const char usage[] = "[--store] PATH [--seal-key FILE]";
static const char help[] =
    "usage: plyledger create [--store] PATH [--seal-key FILE]\n"
    "\n"
    "Create a new, empty plyledger store (one SQLite file) at PATH. The file must\n"
    "not exist yet. The store is sealed: a new seal key is made and its secret\n"
    "half written to a key file only you can read (mode 0600), PATH.seal-key\n"
    "unless --seal-key or $PLYLEDGER_SEAL_KEY says otherwise; the key file must not\n"
    "exist yet either. Every link of the store's hash chains is signed with it, so\n"
    "verify can tell a row written outside plyledger. Every command that records\n"
    "something needs the key file; verify and the listings do not. Keep it apart\n"
    "from copies of the store, and back it up: without it the store can still be\n"
    "read and verified, but nothing more recorded.\n"
    "\n"
    "Options:\n"
    "  -s, --store PATH   the store to create (or give PATH as the operand)\n"
    "      --seal-key FILE  where to write the seal key (default PATH.seal-key)\n"
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
    char keypath[4096];
    if (!cli_seal_key_path(&common, keypath, sizeof keypath))
        return cli_fail("the seal key's path is too long");
    if ((rc = cli_guard_output(&common, keypath)))
        return rc;
    pl_store *store;
    pl_err err = { 0 };
    int st = pl_store_create(&store, common.store, &err);
    if (st)
        return cli_fail_err(st, &err);
    if (access(keypath, F_OK) == 0) {
        pl_store_close(store);
        cli_remove_store(common.store);
        return cli_fail("%s: a key file is already there; a new store gets a new seal key "
                        "(remove it, or give --seal-key FILE)", keypath);
    }
    pl_sign_key key;
    st = pl_key_create(keypath, &key, &err);
    if (!st)
        st = pl_store_seal(store, &key, &err);
    pl_sign_key_wipe(&key);
    if (st) {
        /* nothing half made: neither the store nor its key stays */
        pl_store_close(store);
        cli_remove_store(common.store);
        if (st != PL_EEXISTS)
            unlink(keypath);
        return cli_fail_err(st, &err);
    }
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
        printf("created store %s (id %s, schema %d), sealed with seal key %s in %s\n",
               common.store, sum.store_id, sum.schema_version, sum.seal_key, keypath);
    return CLI_OK;
}
