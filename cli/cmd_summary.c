/*
 * cmd_summary.c - plyledger summary and plyledger quantities.
 */
#include "cli.h"

#include <string.h>

static const char usage[] = "[--json]";
static const char help[] =
    "usage: plyledger summary [--json]\n"
    "\n"
    "Show what the store holds: its identity and schema, how many airframes,\n"
    "sites, inspections (by kind, and how many are of simulated data) and maps, the\n"
    "span of inspection dates, and how many records were corrected.\n"
    "\n"
    "Options:\n"
    "  -s, --store PATH   the store (default $PLYLEDGER_STORE)\n"
    "      --json         print JSON\n"
    "  -h, --help         show this help\n";

int cmd_summary(int argc, char **argv)
{
    cli_common common;
    int rc = cli_parse(argc, argv, "", NULL, &common, NULL, NULL, usage, help, NULL);
    if (rc >= 0)
        return rc;
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, PL_STORE_READONLY)))
        return rc;
    pl_store_summary s;
    pl_err err = { 0 };
    const pl_vocabulary *kinds = pl_vocabulary_get(PL_VOCAB_INSPECTION_KIND);
    int st = pl_store_summarize(store, &s, &err);
    pl_store_close(store);
    if (st)
        return cli_fail_err(st, &err);
    if (common.json) {
        char *text = NULL;
        return cli_print_json_text(pl_summary_json(&text, &s, common.store, &err), &text, &err);
    }
    printf("store        %s\n", common.store);
    printf("store id     %s (schema %d, created %s by plyledger %s)\n", s.store_id,
           s.schema_version, s.created_at, s.created_by);
    printf("airframes    %lld\n", (long long)s.airframes);
    printf("sites        %lld\n", (long long)s.sites);
    printf("inspections  %lld (", (long long)s.inspections);
    for (size_t i = 0; i < kinds->count; i++)
        printf("%s%s %lld", i ? ", " : "", kinds->words[i], (long long)s.inspections_by_kind[i]);
    printf(")\n");
    if (s.simulated_inspections || s.unknown_inspections)
        printf("             %lld of simulated data%s", (long long)s.simulated_inspections,
               s.unknown_inspections ? "" : "\n");
    if (s.unknown_inspections)
        printf(", %lld recorded before the store said\n", (long long)s.unknown_inspections);
    if (s.first_inspection[0])
        printf("performed    %s to %s\n", s.first_inspection, s.last_inspection);
    printf("maps         %lld (%.1f MiB stored)\n", (long long)s.maps,
           (double)s.map_bytes / (1024.0 * 1024.0));
    printf("corrections  %lld\n", (long long)s.corrections);
    printf("registrations %lld\n", (long long)s.registrations);
    printf("indications  %lld, comparisons %lld, dispositions %lld\n", (long long)s.indications,
           (long long)s.comparisons, (long long)s.dispositions);
    printf("ledger       %lld links (plyledger verify checks them)\n", (long long)s.ledger_links);
    printf("people       %lld in the register\n", (long long)s.people);
    if (s.received)
        printf("received     %lld hand-over package(s)\n", (long long)s.received);
    if (s.seal_key[0])
        printf("sealed       with seal key %s\n", s.seal_key);
    else
        printf("sealed       NO (plyledger seal seals it)\n");
    cli_print_caution();
    return CLI_OK;
}

static const char q_help[] =
    "usage: plyledger quantities [--json]\n"
    "\n"
    "List the map quantities plyledger knows, with their accepted units (the\n"
    "first is the default). Other quantity names are accepted as free quantities\n"
    "when a unit is given.\n"
    "\n"
    "Options:\n"
    "      --json    print JSON\n"
    "  -h, --help    show this help\n";

int cmd_quantities(int argc, char **argv)
{
    cli_common common;
    int rc = cli_parse(argc, argv, "", NULL, &common, NULL, NULL, usage, q_help, NULL);
    if (rc >= 0)
        return rc;
    size_t n = pl_quantity_count();
    if (common.json) {
        cJSON *arr = cJSON_CreateArray();
        for (size_t i = 0; i < n; i++) {
            const pl_quantity_info *q = pl_quantity_at(i);
            cJSON *o = cJSON_CreateObject();
            cJSON_AddStringToObject(o, "quantity", q->name);
            cJSON *units = cJSON_AddArrayToObject(o, "units");
            char buf[256];
            snprintf(buf, sizeof buf, "%s", q->units);
            for (char *save = NULL, *u = strtok_r(buf, " ", &save); u; u = strtok_r(NULL, " ", &save))
                cJSON_AddItemToArray(units, cJSON_CreateString(u));
            cJSON_AddStringToObject(o, "description", q->description);
            cJSON_AddItemToArray(arr, o);
        }
        return cli_print_json(arr);
    }
    const char *hdr[] = { "QUANTITY", "UNITS", "DESCRIPTION" };
    cli_table *t = cli_table_new(3, hdr);
    for (size_t i = 0; i < n; i++) {
        const pl_quantity_info *q = pl_quantity_at(i);
        const char *row[] = { q->name, q->units, q->description };
        cli_table_row(t, row);
    }
    cli_table_print(t, stdout);
    cli_table_free(t);
    return CLI_OK;
}
