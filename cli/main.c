/*
 * main.c - the plyledger command: dispatch to one subcommand per task.
 */
#include "cli.h"

#include <string.h>

const cli_command cli_commands[] = {
    { "create", cmd_create, "create a new, empty store" },
    { "add-airframe", cmd_add_airframe, "register an airframe by its serial" },
    { "set-operator", cmd_set_operator, "record that an airframe changed operator" },
    { "import-plan", cmd_import_plan, "add a site plan (CSV) to an airframe" },
    { "simulate", cmd_simulate, "simulate a flash-thermography sequence of a described site" },
    { "reduce", cmd_reduce, "reduce a thermal sequence to maps, or record them as an inspection" },
    { "record", cmd_record, "record inspections of one or many sites with their maps" },
    { "register", cmd_register, "align a site's reinspection map onto its baseline and record it" },
    { "compare", cmd_compare, "what changed at a site or a whole check against its baseline, under written criteria" },
    { "new-key", cmd_new_key, "make a signing key pair in a file only you can read" },
    { "people", cmd_people, "the register of people: roles, keys, qualifications, procedures" },
    { "interpret", cmd_interpret, "interpret a change's indication: false, nonrelevant or relevant (signed)" },
    { "dispose", cmd_dispose, "record a signed disposition of relevant changes of a comparison" },
    { "dispositions", cmd_dispositions, "list dispositions, with who signed and what was decided" },
    { "seal", cmd_seal, "seal an older store: sign every link with a new seal key" },
    { "package", cmd_package, "hand an airframe's whole record over in one file, check one, receive one" },
    { "verify", cmd_verify, "check that the record is as it was written (hash chain, maps, triggers)" },
    { "correct", cmd_correct, "correct a recorded inspection or site, with a reason" },
    { "airframes", cmd_airframes, "list airframes" },
    { "sites", cmd_sites, "list inspection sites" },
    { "inspections", cmd_inspections, "list inspections" },
    { "criteria", cmd_criteria, "import, list and show criteria sets for indication growth" },
    { "history", cmd_history, "show every inspection of one site, oldest first" },
    { "coverage", cmd_coverage, "which sites of the plan a check inspected and compared, and the area covered" },
    { "report", cmd_report, "the disposition report of a site comparison or a whole check, as one HTML file" },
    { "tracks", cmd_tracks, "follow each indication of a site through its inspections; growth and forecast" },
    { "export-map", cmd_export_map, "write a stored map as PNG, .npy or a colour rendering" },
    { "summary", cmd_summary, "show what the store holds" },
    { "quantities", cmd_quantities, "list the map quantities and their units" },
    { "version", cmd_version, "print the program and library versions" },
    { "help", cmd_help, "show help for plyledger or one command" },
};
const size_t cli_command_count = sizeof cli_commands / sizeof cli_commands[0];

static void print_overview(FILE *out)
{
    fprintf(out,
            "usage: plyledger <command> [options] [arguments]\n"
            "\n"
            "plyledger keeps the lifetime inspection record of composite airframes:\n"
            "reduced inspection maps by airframe serial, site and part coordinates, in\n"
            "one SQLite store (give it with --store PATH or PLYLEDGER_STORE).\n"
            "\n"
            "Commands:\n");
    for (size_t i = 0; i < cli_command_count; i++)
        fprintf(out, "  %-13s %s\n", cli_commands[i].name, cli_commands[i].summary);
    fprintf(out,
            "\n"
            "Every command takes --help. Listing commands take --json.\n"
            "A store made by create is sealed: every command that records something needs\n"
            "its seal key file, STORE.seal-key unless --seal-key FILE or\n"
            "PLYLEDGER_SEAL_KEY names another (verify and the listings do not).\n"
            "Exit status: 0 success, 1 error, 2 usage.\n"
            "\n"
            "plyledger supports qualified NDT personnel and engineering; it does not\n"
            "replace the approved inspection procedure, the design holder's data or the\n"
            "judgment of certified staff. Local regulations govern.\n");
}

static const cli_command *find_command(const char *name)
{
    for (size_t i = 0; i < cli_command_count; i++)
        if (strcmp(cli_commands[i].name, name) == 0)
            return &cli_commands[i];
    return NULL;
}

int cmd_help(int argc, char **argv)
{
    if (argc < 2 || strcmp(argv[1], "--help") == 0 || strcmp(argv[1], "-h") == 0) {
        print_overview(stdout);
        return CLI_OK;
    }
    const cli_command *cmd = find_command(argv[1]);
    if (!cmd)
        return cli_fail("unknown command '%s'; see 'plyledger help'", argv[1]);
    char help_opt[] = "--help";
    char *help_argv[] = { argv[1], help_opt, NULL };
    cli_current = cmd->name;
    return cmd->run(2, help_argv);
}

int cmd_version(int argc, char **argv)
{
    (void)argv;
    if (argc > 1 && (strcmp(argv[1], "--help") == 0 || strcmp(argv[1], "-h") == 0)) {
        puts("usage: plyledger version\n\nPrint the program's and the library's versions "
             "and the store schema version they write.");
        return CLI_OK;
    }
    printf("plyledger %s (library %s, store schema %d)\n", PL_VERSION_STRING, pl_version(),
           PL_STORE_SCHEMA_VERSION);
    return CLI_OK;
}

int main(int argc, char **argv)
{
    if (argc < 2) {
        print_overview(stderr);
        return CLI_USAGE;
    }
    const char *name = argv[1];
    if (strcmp(name, "--help") == 0 || strcmp(name, "-h") == 0) {
        print_overview(stdout);
        return CLI_OK;
    }
    if (strcmp(name, "--version") == 0 || strcmp(name, "-V") == 0)
        return cmd_version(1, argv);
    const cli_command *cmd = find_command(name);
    if (!cmd) {
        fprintf(stderr, "plyledger: unknown command '%s'; see 'plyledger help'\n", name);
        return CLI_USAGE;
    }
    cli_current = cmd->name;
    return cmd->run(argc - 1, argv + 1);
}
