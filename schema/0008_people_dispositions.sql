-- plyledger schema, migration 8: the register of people, the
-- interpretation of indications and signed dispositions
-- (plyledger/people.h, plyledger/disposition.h).
--
-- Migration 1's disposition table held a signature but no signer it could
-- be checked against; no earlier plyledger wrote it. It is recreated, with
-- disposition_change (the changes a disposition covers are now part of its
-- signed content); the guard refuses the migration, and leaves the store as
-- it was, if either holds a row all the same.

CREATE TEMP TABLE migration_8_guard (
    rows INTEGER CONSTRAINT dispositions_must_be_empty CHECK (rows = 0)
);
INSERT INTO migration_8_guard
    SELECT (SELECT count(*) FROM disposition) + (SELECT count(*) FROM disposition_change);
DROP TABLE migration_8_guard;

DROP TRIGGER disposition_change_no_update;
DROP TRIGGER disposition_change_no_delete;
DROP TABLE disposition_change;
DROP TRIGGER disposition_no_update;
DROP TRIGGER disposition_no_delete;
DROP TABLE disposition;

-- A person who inspects, interprets, decides or reviews. handle: a short
-- name of our key alphabet, unique in the store regardless of case.
CREATE TABLE person (
    id           INTEGER PRIMARY KEY,
    handle       TEXT NOT NULL UNIQUE COLLATE NOCASE CHECK (length(handle) > 0),
    name         TEXT NOT NULL CHECK (length(name) > 0),
    role         TEXT NOT NULL CHECK (role IN ('inspector', 'engineer', 'reviewer')),
    organisation TEXT,
    recorded_at  TEXT NOT NULL
);

-- A person's public signing key (Ed25519, 64 hex digits), held from
-- valid_from: a signature made on a date is checked against the key its
-- signer held that day, so a key replaced later leaves older signatures good.
CREATE TABLE person_key (
    id          INTEGER PRIMARY KEY,
    person_id   INTEGER NOT NULL REFERENCES person(id),
    public_key  TEXT NOT NULL UNIQUE CHECK (length(public_key) = 64),
    valid_from  TEXT NOT NULL,
    reason      TEXT,
    recorded_at TEXT NOT NULL,
    UNIQUE (person_id, valid_from)
);

-- A certification: method, level (EN 4179 / NAS 410 / ISO 9712 levels) and
-- the dates it is valid between, both included.
CREATE TABLE person_qualification (
    id          INTEGER PRIMARY KEY,
    person_id   INTEGER NOT NULL REFERENCES person(id),
    method      TEXT NOT NULL,
    level       TEXT NOT NULL CHECK (level IN ('1-limited', '1', '2', '3')),
    valid_from  TEXT NOT NULL,
    valid_until TEXT NOT NULL,
    certificate TEXT,
    recorded_at TEXT NOT NULL,
    CHECK (valid_until >= valid_from)
);

-- The levels a written procedure lets perform it (the latest row of a
-- procedure governs; procedure_rev NULL: every revision).
CREATE TABLE procedure_level (
    id            INTEGER PRIMARY KEY,
    procedure     TEXT NOT NULL,
    procedure_rev TEXT,
    levels        TEXT NOT NULL CHECK (length(levels) > 0),
    recorded_at   TEXT NOT NULL
);

-- The interpretation of one change's indication (ASTM E1316 terms):
-- false, nonrelevant or relevant; signed by the person who made it.
CREATE TABLE interpretation (
    id          INTEGER PRIMARY KEY,
    change_id   INTEGER NOT NULL REFERENCES indication_change(id),
    class       TEXT NOT NULL CHECK (class IN ('false', 'nonrelevant', 'relevant')),
    note        TEXT,
    supersedes  INTEGER UNIQUE REFERENCES interpretation(id),
    reason      TEXT,
    person_id   INTEGER NOT NULL REFERENCES person(id),
    signed_on   TEXT NOT NULL,
    signature   BLOB NOT NULL CHECK (length(signature) = 64),
    recorded_at TEXT NOT NULL,
    CHECK (supersedes IS NULL OR length(coalesce(reason, '')) > 0)
);

-- The engineer's decision about relevant indications of one comparison;
-- signed. changes_json: the ids of the changes it covers, a JSON array in
-- ascending order. A later disposition supersedes it, with a reason.
CREATE TABLE disposition (
    id            INTEGER PRIMARY KEY,
    comparison_id INTEGER NOT NULL REFERENCES comparison(id),
    changes_json  TEXT NOT NULL,
    criteria_id   INTEGER REFERENCES criteria(id),
    decision      TEXT NOT NULL
                  CHECK (decision IN ('accept', 'monitor', 'repair', 'refer-to-design-holder')),
    due_date      TEXT,
    due_hours     REAL CHECK (due_hours IS NULL OR due_hours > 0),
    due_cycles    INTEGER CHECK (due_cycles IS NULL OR due_cycles > 0),
    repair_ref    TEXT,
    query_ref     TEXT,
    rationale     TEXT,
    supersedes    INTEGER UNIQUE REFERENCES disposition(id),
    reason        TEXT,
    person_id     INTEGER NOT NULL REFERENCES person(id),
    signed_on     TEXT NOT NULL,
    signature     BLOB NOT NULL CHECK (length(signature) = 64),
    recorded_at   TEXT NOT NULL,
    CHECK (decision <> 'monitor' OR due_date IS NOT NULL OR due_hours IS NOT NULL
           OR due_cycles IS NOT NULL),
    CHECK (decision <> 'repair' OR length(coalesce(repair_ref, '')) > 0),
    CHECK (decision <> 'refer-to-design-holder' OR length(coalesce(query_ref, '')) > 0),
    CHECK (supersedes IS NULL OR length(coalesce(reason, '')) > 0)
);
CREATE INDEX disposition_comparison ON disposition (comparison_id);
CREATE INDEX interpretation_change ON interpretation (change_id);

CREATE TRIGGER person_no_update BEFORE UPDATE ON person
BEGIN SELECT RAISE(ABORT, 'person is append-only'); END;
CREATE TRIGGER person_no_delete BEFORE DELETE ON person
BEGIN SELECT RAISE(ABORT, 'person is append-only'); END;
CREATE TRIGGER person_key_no_update BEFORE UPDATE ON person_key
BEGIN SELECT RAISE(ABORT, 'person_key is append-only'); END;
CREATE TRIGGER person_key_no_delete BEFORE DELETE ON person_key
BEGIN SELECT RAISE(ABORT, 'person_key is append-only'); END;
CREATE TRIGGER person_qualification_no_update BEFORE UPDATE ON person_qualification
BEGIN SELECT RAISE(ABORT, 'person_qualification is append-only'); END;
CREATE TRIGGER person_qualification_no_delete BEFORE DELETE ON person_qualification
BEGIN SELECT RAISE(ABORT, 'person_qualification is append-only'); END;
CREATE TRIGGER procedure_level_no_update BEFORE UPDATE ON procedure_level
BEGIN SELECT RAISE(ABORT, 'procedure_level is append-only'); END;
CREATE TRIGGER procedure_level_no_delete BEFORE DELETE ON procedure_level
BEGIN SELECT RAISE(ABORT, 'procedure_level is append-only'); END;
CREATE TRIGGER interpretation_no_update BEFORE UPDATE ON interpretation
BEGIN SELECT RAISE(ABORT, 'interpretation is append-only: record a new interpretation instead'); END;
CREATE TRIGGER interpretation_no_delete BEFORE DELETE ON interpretation
BEGIN SELECT RAISE(ABORT, 'interpretation is append-only: record a new interpretation instead'); END;
CREATE TRIGGER disposition_no_update BEFORE UPDATE ON disposition
BEGIN SELECT RAISE(ABORT, 'disposition is append-only: record a new disposition instead'); END;
CREATE TRIGGER disposition_no_delete BEFORE DELETE ON disposition
BEGIN SELECT RAISE(ABORT, 'disposition is append-only: record a new disposition instead'); END;
