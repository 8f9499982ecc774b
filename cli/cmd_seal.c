/*
 * cmd_seal.c - plyledger seal: seal a store made before stores were sealed.
 */
#include "cli.h"

#include <unistd.h>

static const char usage[] = "[--seal-key FILE]";
static const char help[] =
    "usage: plyledger seal [--seal-key FILE]\n"
    "\n"
    "Seal a store that is not sealed yet (one made before plyledger sealed every\n"
    "new store): make a new seal key, write its secret half to a key file only you\n"
    "can read (mode 0600; STORE.seal-key unless --seal-key or $PLYLEDGER_SEAL_KEY\n"
    "says otherwise; it must not exist yet), record its public half in the store\n"
    "and sign every link of the ledger with it. From then on every command that\n"
    "records something needs the key file, and verify holds every link to a valid\n"
    "seal. Verify the store first: sealing vouches for the links as they are now.\n"
    "\n"
    "Options:\n"
    "      --seal-key FILE  where to write the seal key (default STORE.seal-key)\n"
    "  -s, --store PATH     the store (default $PLYLEDGER_STORE)\n"
    "  -q, --quiet          print nothing on success\n"
    "  -h, --help           show this help\n"
    "\n"
    "Exit status: 0 sealed; 1 the store is sealed already, or the work failed;\n"
    "2 the command line is wrong.\n";

int cmd_seal(int argc, char **argv)
{
    cli_common common;
    int rc = cli_parse(argc, argv, "", NULL, &common, NULL, NULL, usage, help, NULL);
    if (rc >= 0)
        return rc;
    char keypath[4096];
    if (!common.store)
        return cli_usage_error(usage, "no store given: use --store PATH or set PLYLEDGER_STORE");
    if (!cli_seal_key_path(&common, keypath, sizeof keypath))
        return cli_fail("the seal key's path is too long");
    if ((rc = cli_guard_output(&common, keypath)))
        return rc;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, CLI_STORE_NO_SEAL_KEY)))
        return rc;
    pl_err err = { 0 };
    char fp[PL_SIGN_FINGERPRINT_SIZE];
    if (pl_store_sealed(store, fp)) {
        pl_store_close(store);
        return cli_fail("%s is sealed already, with seal key %s", common.store, fp);
    }
    pl_sign_key key;
    int st = pl_key_create(keypath, &key, &err);
    if (st) {
        pl_store_close(store);
        return cli_fail_err(st, &err);
    }
    st = pl_store_seal(store, &key, &err);
    pl_sign_key_wipe(&key);
    pl_store_summary sum;
    if (!st)
        st = pl_store_summarize(store, &sum, &err);
    pl_store_close(store);
    if (st) {
        unlink(keypath); /* the store is as it was: its key must not stay */
        return cli_fail_err(st, &err);
    }
    if (!common.quiet)
        printf("sealed %s: %lld links signed with seal key %s, kept in %s\n", common.store,
               (long long)sum.ledger_links, sum.seal_key, keypath);
    return CLI_OK;
}
