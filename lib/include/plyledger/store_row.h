/*
 * plyledger/store_row.h - the recorded rows as the outside world sees them:
 * their JSON form and their canonical byte encoding.
 *
 * Every recorded table's columns are described once, inside the library:
 * name, SQL type, where the value lives in the public struct, whether it may
 * be absent, and whether it is part of the row's canonical content. That one
 * description drives binding on insert, reading rows into the structs of
 * store.h, the JSON form below and the canonical encoding, so the four can
 * never disagree.
 *
 * JSON. pl_row_json() gives one record (a pl_airframe, pl_site, ...) as a
 * JSON object; a pl_json_list gathers records into one JSON array. Field
 * names are plyledger's own and stable. A value that is absent (empty
 * optional text, NaN, a count of -1, an id of 0, an expected size of 0) is
 * null. Parameters recorded as JSON objects are embedded as objects.
 *
 * Canonical encoding. pl_store_row_encode() gives the bytes that stand for
 * one stored row: what the hash chain and signatures cover. The encoding is
 * deterministic on every platform and versioned:
 *
 *   row      = "PLRW" version:u32 table:text body
 *   body     = count:u32 entry*            entries sorted by name (bytewise)
 *   entry    = name:text value
 *   value    = 0x00                         null
 *            | 0x01 i64                     INTEGER column
 *            | 0x02 u64                     REAL column: the IEEE-754 binary64
 *                                           bits; -0.0 is written as +0.0; NaN
 *                                           is refused (the store keeps none)
 *            | 0x03 text                    TEXT column, valid UTF-8 (refused
 *                                           otherwise)
 *            | 0x04 bytes                   BLOB column
 *            | 0x05 count:u32 body*         the record's child rows (a map's
 *                                           channels), in their index order
 *   text     = bytes
 *   bytes    = length:u32 byte*
 *
 * All integers are little-endian (u32: 4 bytes, i64 and u64: 8 bytes,
 * two's complement). The type of a value is the declared type of its column,
 * not the type SQLite happens to hold. `version` is PL_ROW_ENCODING_VERSION;
 * a change to these rules gives a new version, and old rows keep the version
 * they were encoded with. The content of a row is every stored column of it
 * (its id, correction key, supersedes and reason, its references, recorded_at
 * included), except a map's data blob, for which its sha256 column (the
 * SHA-256 of the decoded content) stands; a map and its channels are one
 * record: the map's body holds an entry named "map_channel" with the channel
 * rows. README.md ("Canonical row encoding") has a worked example.
 */
#ifndef PLYLEDGER_STORE_ROW_H
#define PLYLEDGER_STORE_ROW_H

#include "plyledger/common.h"
#include "plyledger/store.h"

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif

/** The recorded tables, with the public struct each is read into. Values
 * are fixed: later tables (criteria, indications, changes, people,
 * dispositions) are appended. */
typedef enum pl_table {
    PL_TABLE_AIRFRAME = 0,      /**< pl_airframe */
    PL_TABLE_OPERATOR = 1,      /**< pl_operator */
    PL_TABLE_SITE = 2,          /**< pl_site */
    PL_TABLE_INSPECTION = 3,    /**< pl_inspection */
    PL_TABLE_MAP = 4,           /**< pl_map_record, with its channels */
    PL_TABLE_MAP_CHANNEL = 5,   /**< pl_channel (a part of a map record) */
    PL_TABLE_REGISTRATION = 6,  /**< pl_registration_record */
    PL_TABLE_COMPARISON = 7,    /**< pl_comparison_record */
    PL_TABLE_CRITERIA = 8,      /**< pl_criteria_record (plyledger/criteria.h) */
    PL_TABLE_INDICATION = 9,    /**< pl_indication_record */
    PL_TABLE_CHANGE = 10,       /**< pl_change_record (table indication_change) */
    PL_TABLE_PERSON = 11,       /**< pl_person (plyledger/people.h) */
    PL_TABLE_PERSON_KEY = 12,   /**< pl_person_key */
    PL_TABLE_QUALIFICATION = 13, /**< pl_qualification (table person_qualification) */
    PL_TABLE_PROCEDURE_LEVELS = 14, /**< pl_procedure_levels (table procedure_level) */
    PL_TABLE_INTERPRETATION = 15, /**< pl_interpretation (plyledger/disposition.h) */
    PL_TABLE_DISPOSITION = 16,  /**< pl_disposition */
    PL_TABLE_COUNT
} pl_table;

/** The version of the canonical encoding this library writes. */
#define PL_ROW_ENCODING_VERSION 1

/** SQL name of a table ("airframe", "site", ...); NULL out of range. */
PL_EXPORT const char *pl_table_name(pl_table table);

/**
 * One record as a JSON object (formatted text).
 * @param[out] out  free with free()
 * @param record    the struct of `table` (see pl_table)
 * @return PL_OK, PL_ENOMEM.
 */
PL_EXPORT int pl_row_json(char **out, pl_table table, const void *record, pl_err *err);

/** Records gathered into one JSON array. */
typedef struct pl_json_list pl_json_list;

/** An empty list. @param[out] out  free with pl_json_list_free(). @return PL_OK, PL_ENOMEM. */
PL_EXPORT int pl_json_list_new(pl_json_list **out, pl_err *err);
/** Append a record of `table` (copied). @return PL_OK, PL_ENOMEM. */
PL_EXPORT int pl_json_list_add(pl_json_list *list, pl_table table, const void *record,
                               pl_err *err);
/** The list as a JSON array (formatted text). @param[out] out  free with free().
 * @return PL_OK, PL_ENOMEM. */
PL_EXPORT int pl_json_list_text(char **out, const pl_json_list *list, pl_err *err);
/** Release a list; NULL is accepted. */
PL_EXPORT void pl_json_list_free(pl_json_list *list);

/**
 * The canonical encoding (see the introduction) of row `id` of `table` as
 * stored, a map with its channels.
 * @param[out] out  free with free()
 * @param[out] len  its length in bytes
 * @param table     any but PL_TABLE_MAP_CHANNEL (channels belong to their map)
 * @return PL_OK, PL_ENOTFOUND (no such row), PL_EINVAL (a value that has no
 *         canonical form: NaN, text that is not UTF-8), PL_EDB, PL_ENOMEM.
 */
PL_EXPORT int pl_store_row_encode(unsigned char **out, size_t *len, pl_store *store,
                                  pl_table table, pl_id id, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
