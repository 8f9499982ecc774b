/*
 * json.c - printing JSON. The records' JSON forms come from the library
 * (plyledger/store_row.h, plyledger/history.h); what is built here is only
 * the outcome of a command that is not a record (a summary, a file written).
 */
#include "cli.h"

#include <math.h>
#include <stdlib.h>

int cli_print_json(cJSON *value)
{
    if (!value)
        return cli_fail("out of memory");
    char *text = cJSON_Print(value);
    cJSON_Delete(value);
    if (!text)
        return cli_fail("out of memory");
    puts(text);
    cJSON_free(text);
    return CLI_OK;
}

int cli_print_json_text(int rc, char **text, const pl_err *err)
{
    if (!rc)
        puts(*text);
    free(*text);
    *text = NULL;
    return rc ? cli_fail_err(rc, err) : CLI_OK;
}
