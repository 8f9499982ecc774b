/*
 * cmd_airframe.c - plyledger add-airframe and set-operator.
 */
#include "cli.h"

#include <string.h>

/* ---- add-airframe ------------------------------------------------------- */

static const char add_usage[] = "--serial SERIAL --type TYPE [options]";
static const char add_help[] =
    "usage: plyledger add-airframe --serial SERIAL --type TYPE [options]\n"
    "\n"
    "Register an airframe in the store by its manufacturer serial number.\n"
    "\n"
    "Options:\n"
    "      --serial SERIAL      manufacturer serial number (required)\n"
    "      --type TYPE          aircraft type designation (required)\n"
    "      --manufactured DATE  date of manufacture, YYYY-MM-DD\n"
    "      --operator NAME      first operator\n"
    "      --since DATE         date the operator took it over (default: manufacture)\n"
    "      --notes TEXT         free notes\n"
    "  -s, --store PATH         the store (default $PLYLEDGER_STORE)\n"
    "      --wait SECONDS       @WAIT@\n"
    "      --json               print the registered airframe as JSON\n"
    "  -q, --quiet              print nothing on success\n"
    "  -h, --help               show this help\n";

enum { O_SERIAL = 0x100, O_TYPE, O_MANUFACTURED, O_OPERATOR, O_SINCE, O_NOTES };

static const struct option add_opts[] = {
    { "serial", required_argument, NULL, O_SERIAL },
    { "type", required_argument, NULL, O_TYPE },
    { "manufactured", required_argument, NULL, O_MANUFACTURED },
    { "operator", required_argument, NULL, O_OPERATOR },
    { "since", required_argument, NULL, O_SINCE },
    { "notes", required_argument, NULL, O_NOTES },
    { NULL, 0, NULL, 0 },
};

typedef struct airframe_args {
    const char *serial, *type, *manufactured, *operator_name, *since, *notes;
} airframe_args;

static int take_airframe_opt(void *ctx, int opt, const char *arg)
{
    airframe_args *a = ctx;
    switch (opt) {
    case O_SERIAL: a->serial = arg; break;
    case O_TYPE: a->type = arg; break;
    case O_MANUFACTURED: a->manufactured = arg; break;
    case O_OPERATOR: a->operator_name = arg; break;
    case O_SINCE: a->since = arg; break;
    case O_NOTES: a->notes = arg; break;
    default: return cli_usage_error(add_usage, "unexpected option");
    }
    return 0;
}

int cmd_add_airframe(int argc, char **argv)
{
    cli_common common;
    airframe_args a = { 0 };
    int rc = cli_parse(argc, argv, "", add_opts, &common, take_airframe_opt, &a, add_usage,
                       add_help, NULL);
    if (rc >= 0)
        return rc;
    if (!a.serial || !a.type)
        return cli_usage_error(add_usage, "--serial and --type are required");
    if (a.since && !a.operator_name)
        return cli_usage_error(add_usage, "--since goes with --operator");
    pl_airframe af;
    memset(&af, 0, sizeof af);
    if ((rc = cli_key(af.serial, sizeof af.serial, a.serial, "--serial"))
        || (rc = cli_text(af.aircraft_type, sizeof af.aircraft_type, a.type, "--type"))
        || (rc = cli_text(af.manufactured, sizeof af.manufactured, a.manufactured, "--manufactured"))
        || (rc = cli_text(af.operator_name, sizeof af.operator_name, a.operator_name, "--operator"))
        || (rc = cli_text(af.operator_since, sizeof af.operator_since, a.since, "--since"))
        || (rc = cli_free(af.notes, sizeof af.notes, a.notes, "--notes")))
        return rc;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, 0)))
        return rc;
    pl_err err = { 0 };
    int st = pl_store_add_airframe(store, &af, NULL, &err);
    if (!st)
        st = pl_store_get_airframe(store, af.serial, &af, &err);
    pl_store_close(store);
    if (st)
        return cli_fail_err(st, &err);
    if (common.json) {
        char *text = NULL;
        return cli_print_json_text(pl_row_json(&text, PL_TABLE_AIRFRAME, &af, &err), &text, &err);
    }
    if (!common.quiet)
        printf("registered airframe %s (%s)\n", af.serial, af.aircraft_type);
    return CLI_OK;
}

/* ---- set-operator ------------------------------------------------------- */

static const char op_usage[] = "--serial SERIAL --operator NAME --since DATE";
static const char op_help[] =
    "usage: plyledger set-operator --serial SERIAL --operator NAME --since DATE\n"
    "\n"
    "Record that an airframe passed to another operator on DATE. The operator\n"
    "history is kept; dates must not go backwards.\n"
    "\n"
    "Options:\n"
    "      --serial SERIAL   the airframe (required)\n"
    "      --operator NAME   the new operator (required)\n"
    "      --since DATE      YYYY-MM-DD (required)\n"
    "  -s, --store PATH      the store (default $PLYLEDGER_STORE)\n"
    "      --wait SECONDS    @WAIT@\n"
    "      --json            print the operator history as JSON\n"
    "  -q, --quiet           print nothing on success\n"
    "  -h, --help            show this help\n";

static int on_operator(void *ud, const char *name, const char *since, const char *recorded_at)
{
    (void)recorded_at;
    const char *row[] = { since, name };
    cli_table_row(ud, row);
    return 0;
}

int cmd_set_operator(int argc, char **argv)
{
    cli_common common;
    airframe_args a = { 0 };
    int rc = cli_parse(argc, argv, "", add_opts, &common, take_airframe_opt, &a, op_usage,
                       op_help, NULL);
    if (rc >= 0)
        return rc;
    if (a.type || a.manufactured || a.notes)
        return cli_usage_error(op_usage, "only --serial, --operator and --since apply here");
    if (!a.serial || !a.operator_name || !a.since)
        return cli_usage_error(op_usage, "--serial, --operator and --since are required");
    if ((rc = cli_check_text(a.serial, CLI_KEY, "--serial"))
        || (rc = cli_check_text(a.operator_name, CLI_NAME, "--operator"))
        || (rc = cli_check_text(a.since, CLI_NAME, "--since")))
        return rc;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, 0)))
        return rc;
    pl_err err = { 0 };
    int st = pl_store_add_operator(store, a.serial, a.operator_name, a.since, &err);
    if (!st && common.json) {
        char *text = NULL;
        st = pl_operators_json(&text, store, a.serial, &err);
        pl_store_close(store);
        return cli_print_json_text(st, &text, &err);
    }
    cli_table *table = NULL;
    if (!st && !common.quiet) {
        const char *hdr[] = { "SINCE", "OPERATOR" };
        table = cli_table_new(2, hdr);
        st = pl_store_list_operators(store, a.serial, on_operator, table, &err);
    }
    pl_store_close(store);
    if (st) {
        cli_table_free(table);
        return cli_fail_err(st, &err);
    }
    if (table) {
        printf("operator history of %s:\n", a.serial);
        cli_table_print(table, stdout);
        cli_table_free(table);
    }
    return CLI_OK;
}
