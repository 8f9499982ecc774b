/*
 * cli.h - what every plyledger subcommand shares: exit codes, failure and
 * usage helpers, opening the store, progress, tables and JSON output.
 *
 * The CLI is thin: it parses options, calls the library and prints. No
 * computation lives here.
 */
#ifndef PLYLEDGER_CLI_H
#define PLYLEDGER_CLI_H

#include <plyledger.h>

#include <cjson/cJSON.h>
#include <getopt.h>
#include <stdio.h>

/* Exit codes. */
enum {
    CLI_OK = 0,     /* success */
    CLI_ERROR = 1,  /* the work failed: bad input, missing record, I/O */
    CLI_USAGE = 2,  /* the command line itself is wrong */
};

/* One subcommand: its name, entry point, one-line summary and usage text
 * (the part after "plyledger NAME"). */
typedef struct cli_command {
    const char *name;
    int (*run)(int argc, char **argv);
    const char *summary;
} cli_command;

/* The table of subcommands (main.c). */
extern const cli_command cli_commands[];
extern const size_t cli_command_count;

/* Options every command understands, filled by cli_parse(). */
typedef struct cli_common {
    const char *store;  /* --store, else $PLYLEDGER_STORE */
    int json;           /* --json */
    int quiet;          /* -q / --quiet */
    double wait_s;      /* --wait: how long a write waits for another writer; NaN: the
                           library's default */
    const char *seal_key; /* --seal-key, else $PLYLEDGER_SEAL_KEY; NULL: STORE.seal-key */
} cli_common;

/* The command being run, for messages ("plyledger record: ..."). */
extern const char *cli_current;

/* Print "plyledger: <message>" to stderr; returns CLI_ERROR. */
int cli_fail(const char *fmt, ...) __attribute__((format(printf, 1, 2)));

/* Print the library's message for a failed call; returns CLI_ERROR. */
int cli_fail_err(int code, const pl_err *err);

/* Print "plyledger: <problem>" and the command's short usage to stderr;
 * returns CLI_USAGE. */
int cli_usage_error(const char *usage, const char *fmt, ...) __attribute__((format(printf, 2, 3)));

/* Print help text to stdout, "@KINDS@" and "@METHODS@" replaced by the
 * inspection kinds and methods of the library's vocabularies, "@LEVELS@" by
 * the qualification levels and "@WAIT@" by what --wait does; returns
 * CLI_OK. */
int cli_help(const char *text);

/*
 * getopt_long over argv with the command's options plus --store/-s,
 * --json, --quiet/-q, --wait and --help/-h. Calls `on_opt` for the command's own
 * options; it returns 0, or CLI_USAGE after printing a problem. Returns -1
 * to go on, or an exit code (help printed, usage error). On return
 * *first_arg is the index of the first operand; with first_arg NULL the
 * command takes none, and an operand is a usage error.
 */
typedef int (*cli_opt_fn)(void *ctx, int opt, const char *arg);
int cli_parse(int argc, char **argv, const char *shortopts, const struct option *longopts,
              cli_common *common, cli_opt_fn on_opt, void *ctx, const char *usage,
              const char *help, int *first_arg);


/* Open the store named by common->store, with the wait of --wait; prints
 * the failure itself. A sealed store opened for writing gets its seal key
 * (cli_seal_key_path()) unless flags hold CLI_STORE_NO_SEAL_KEY (a command
 * that writes nothing but a migration). Returns CLI_OK with *out set, or
 * CLI_ERROR / CLI_USAGE. */
#define CLI_STORE_NO_SEAL_KEY 0x10000u
int cli_open_store(pl_store **out, const cli_common *common, unsigned flags);

/* The seal key file of the store: --seal-key, $PLYLEDGER_SEAL_KEY, else
 * the store's path with ".seal-key" appended. Into buf; returns buf, or
 * NULL when it does not fit. */
const char *cli_seal_key_path(const cli_common *common, char *buf, size_t cap);

/* Today's local calendar date, YYYY-MM-DD ("" when the clock fails). */
void cli_today(char *buf, size_t cap);

/* Remove a store that a failed command made, with its -wal and -shm. */
void cli_remove_store(const char *path);

/* Refuse an output file that is the store named by common->store (from
 * --store or $PLYLEDGER_STORE, opened or not) or one of its SQLite files;
 * prints the failure. A NULL path passes. Returns 0 or CLI_ERROR. */
int cli_guard_output(const cli_common *common, const char *path);

/* Guard `path` as above and start writing it (pl_outfile_open); prints the
 * failure. A NULL path gives *out NULL. Returns 0 or CLI_ERROR. */
int cli_open_output(pl_outfile **out, const cli_common *common, const char *path);

/* Write `text` whole, and a line end when it has none, to `path` through a
 * pl_outfile (a temporary file renamed into place, never the store:
 * cli_guard_output()), or to stdout when path is NULL; prints the failure.
 * Returns CLI_OK or CLI_ERROR. */
int cli_write_text(const cli_common *common, const char *path, const char *text);

/* What an option's text is, for the library's checks: a name (one line,
 * no control characters), free text (line breaks and tabs allowed) or a
 * key (an airframe serial or site code, pl_key_check()). All are UTF-8. */
typedef enum cli_text_kind { CLI_NAME, CLI_FREE, CLI_KEY } cli_text_kind;

/* Check an option's text (NULL passes); prints the refusal naming the
 * option. Returns 0 or CLI_ERROR. */
int cli_check_text(const char *src, cli_text_kind kind, const char *opt);

/* Copy an option's text into a fixed record field after cli_check_text();
 * NULL leaves it alone. cli_text takes a name, cli_free free text, cli_key
 * a key. Returns 0, CLI_USAGE (printed) when it does not fit, or
 * CLI_ERROR (printed) when the text is refused. */
int cli_text(char *dst, size_t cap, const char *src, const char *opt);
int cli_free(char *dst, size_t cap, const char *src, const char *opt);
int cli_key(char *dst, size_t cap, const char *src, const char *opt);

/* Parse a number option strictly; prints a usage error naming `opt`.
 * cli_count takes decimal digits only (no sign, no blanks) that fit. */
int cli_number(const char *opt, const char *arg, double *out, const char *usage);
int cli_count(const char *opt, const char *arg, long long *out, const char *usage);

/* Check an option's number against the library's bound for it
 * (pl_bound_check()); prints the refusal. Returns 0 or CLI_ERROR. */
int cli_bound(pl_bound bound, double value, const char *opt);

/* Progress on stderr when it is a terminal and not quiet. A pl_progress_fn. */
typedef struct cli_progress {
    const char *label;
    int enabled;
    int last_percent;
} cli_progress;
void cli_progress_init(cli_progress *p, const char *label, const cli_common *common);
int cli_progress_fn(void *ud, double fraction);
void cli_progress_done(cli_progress *p);

/* A simple text table: add a header, then rows; printed with aligned
 * columns. Cells are copied. */
typedef struct cli_table cli_table;
cli_table *cli_table_new(int ncols, const char *const *headers);
void cli_table_row(cli_table *t, const char *const *cells);
void cli_table_print(cli_table *t, FILE *out);
void cli_table_free(cli_table *t);

/* Print a cJSON value (formatted) to stdout and delete it. Returns CLI_OK,
 * or CLI_ERROR when it is NULL (out of memory). */
int cli_print_json(cJSON *value);

/* Print the JSON text the library built into *text (rc its status) and
 * free it, or, when rc is a failure, print its message: CLI_OK or
 * CLI_ERROR. A pointer to the text, so a call may build it in the same
 * expression: cli_print_json_text(pl_row_json(&text, ...), &text, &err). */
int cli_print_json_text(int rc, char **text, const pl_err *err);

/* "%g" of a double, or "-" when NaN; returns buf. */
const char *cli_fmt_num(char *buf, size_t size, double v);

/* Parse "MM" or "MM,MM" (a pitch along u[,v]) strictly; both > 0. */
int cli_pitch(const char *opt, const char *arg, double *pu, double *pv, const char *usage);

/* Read a file holding one JSON object; returns it compact in *out
 * (malloc'd). Prints the failure itself. */
int cli_read_json_object(const char *path, char **out);

/* ---- the options that describe an inspection (record, reduce) ------------ */

enum {
    CLI_O_AIRFRAME = 0x300, CLI_O_SITE, CLI_O_KIND, CLI_O_DATE, CLI_O_TASK, CLI_O_HOURS,
    CLI_O_CYCLES, CLI_O_PROCEDURE, CLI_O_PROCEDURE_REV, CLI_O_EQUIPMENT, CLI_O_CALIBRATION,
    CLI_O_INSPECTOR, CLI_O_LEVEL, CLI_O_NOTES, CLI_O_PARAMETERS, CLI_O_SIMULATED,
    CLI_O_HOURS_REASON, CLI_O_INSPECTION_END,
};

/* The entries to put in a command's struct option table. */
#define CLI_INSPECTION_OPTIONS \
    { "airframe", required_argument, NULL, CLI_O_AIRFRAME }, \
    { "site", required_argument, NULL, CLI_O_SITE }, \
    { "kind", required_argument, NULL, CLI_O_KIND }, \
    { "date", required_argument, NULL, CLI_O_DATE }, \
    { "task", required_argument, NULL, CLI_O_TASK }, \
    { "hours", required_argument, NULL, CLI_O_HOURS }, \
    { "cycles", required_argument, NULL, CLI_O_CYCLES }, \
    { "procedure", required_argument, NULL, CLI_O_PROCEDURE }, \
    { "procedure-rev", required_argument, NULL, CLI_O_PROCEDURE_REV }, \
    { "equipment", required_argument, NULL, CLI_O_EQUIPMENT }, \
    { "calibration", required_argument, NULL, CLI_O_CALIBRATION }, \
    { "inspector", required_argument, NULL, CLI_O_INSPECTOR }, \
    { "level", required_argument, NULL, CLI_O_LEVEL }, \
    { "notes", required_argument, NULL, CLI_O_NOTES }, \
    { "parameters", required_argument, NULL, CLI_O_PARAMETERS }, \
    { "simulated", no_argument, NULL, CLI_O_SIMULATED }, \
    { "hours-reason", required_argument, NULL, CLI_O_HOURS_REASON }

typedef struct cli_inspection_args {
    const char *airframe, *site, *kind, *date, *task, *procedure, *procedure_rev, *equipment,
        *calibration, *inspector, *level, *notes, *parameters, *hours_reason;
    double hours;
    long long cycles;
    int has_hours, has_cycles;
    int simulated;  /* -1 not given, else the value to record */
} cli_inspection_args;

/* Help text for those options. */
extern const char cli_inspection_help[];

void cli_inspection_init(cli_inspection_args *a);
/* Take option `opt` (one of CLI_O_...); 0 or CLI_USAGE (printed). */
int cli_inspection_take(cli_inspection_args *a, int opt, const char *arg, const char *usage);
/* Whether any inspection option was given. */
int cli_inspection_given(const cli_inspection_args *a);
/* Write the given options over `in`; params (may be NULL) replaces the
 * parameters. 0, or CLI_USAGE / CLI_ERROR (printed). */
int cli_inspection_apply(const cli_inspection_args *a, pl_inspection *in, const char *params);

/* Print the caution (pl_caution()) as the last line of a text output that
 * shows a record supporting a decision. */
void cli_print_caution(void);

/* Subcommands. */
int cmd_create(int argc, char **argv);
int cmd_add_airframe(int argc, char **argv);
int cmd_set_operator(int argc, char **argv);
int cmd_import_plan(int argc, char **argv);
int cmd_record(int argc, char **argv);
int cmd_correct(int argc, char **argv);
int cmd_airframes(int argc, char **argv);
int cmd_sites(int argc, char **argv);
int cmd_inspections(int argc, char **argv);
int cmd_history(int argc, char **argv);
int cmd_tracks(int argc, char **argv);
int cmd_coverage(int argc, char **argv);
int cmd_report(int argc, char **argv);
int cmd_criteria(int argc, char **argv);
int cmd_export_map(int argc, char **argv);
int cmd_summary(int argc, char **argv);
int cmd_quantities(int argc, char **argv);
int cmd_simulate(int argc, char **argv);
int cmd_reduce(int argc, char **argv);
int cmd_register(int argc, char **argv);
int cmd_compare(int argc, char **argv);
int cmd_verify(int argc, char **argv);
int cmd_seal(int argc, char **argv);
int cmd_package(int argc, char **argv);
int cmd_new_key(int argc, char **argv);
int cmd_people(int argc, char **argv);
int cmd_interpret(int argc, char **argv);
int cmd_dispose(int argc, char **argv);
int cmd_dispositions(int argc, char **argv);
int cmd_version(int argc, char **argv);
int cmd_help(int argc, char **argv);

#endif
