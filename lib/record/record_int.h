/*
 * record/record_int.h - what the record module shares with the other
 * modules of lib/record (not installed).
 */
#ifndef PLYLEDGER_RECORD_INT_H
#define PLYLEDGER_RECORD_INT_H

#include "plyledger/record.h"

/* pl_record_registration() inside the caller's transaction. */
int pl_record__add_registration(pl_store *store, const pl_record_pair *pair,
                                const pl_register_result *res, int manual, const char *method,
                                const char *supplied_by, const char *supplied_reason,
                                const char *parameters_json, pl_id *registration_id,
                                pl_id *comparison_id, pl_err *err);

#endif
