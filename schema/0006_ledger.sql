-- plyledger schema, migration 6: the hash chain over every recorded row
-- (plyledger/ledger.h).
--
-- Migration 1 gave every ledger link an airframe; criteria sets belong to
-- no airframe, and a link must name the encoding version its row hash was
-- made with. No earlier version of plyledger wrote the ledger, so it is
-- recreated; the guard below refuses the migration, and leaves the store
-- as it was, if it holds a row all the same. The rows recorded before this
-- migration are chained by the library in the same transaction, in the
-- order they were recorded (the store's summary says how many).

CREATE TEMP TABLE migration_6_guard (
    rows INTEGER CONSTRAINT ledger_must_be_empty CHECK (rows = 0)
);
INSERT INTO migration_6_guard SELECT count(*) FROM ledger;
DROP TABLE migration_6_guard;

DROP TRIGGER ledger_no_update;
DROP TRIGGER ledger_no_delete;
DROP TABLE ledger;

-- One link of a chain. chain: the airframe's stable key for every row of
-- that airframe (the airframe, its operators, sites, inspections, maps,
-- registrations, comparisons, indications and changes); NULL for the
-- store's own chain (criteria sets). seq counts from 1 in each chain.
-- row_sha256 is the SHA-256 of the row's canonical encoding (version
-- `encoding`, plyledger/store_row.h); link = SHA-256 of the link encoding
-- over the previous link (64 zeros for the first), seq, table, row id and
-- row hash (plyledger/ledger.h). Hashes in lower-case hex.
CREATE TABLE ledger (
    id          INTEGER PRIMARY KEY,
    chain       INTEGER REFERENCES airframe(id),
    seq         INTEGER NOT NULL CHECK (seq >= 1),
    table_name  TEXT NOT NULL,
    row_id      INTEGER NOT NULL,
    encoding    INTEGER NOT NULL CHECK (encoding >= 1),
    row_sha256  TEXT NOT NULL CHECK (length(row_sha256) = 64),
    prev_link   TEXT NOT NULL CHECK (length(prev_link) = 64),
    link        TEXT NOT NULL CHECK (length(link) = 64),
    recorded_at TEXT NOT NULL,
    UNIQUE (table_name, row_id)
);
CREATE UNIQUE INDEX ledger_chain_seq ON ledger (coalesce(chain, 0), seq);

CREATE TRIGGER ledger_no_update BEFORE UPDATE ON ledger
BEGIN SELECT RAISE(ABORT, 'ledger is append-only'); END;
CREATE TRIGGER ledger_no_delete BEFORE DELETE ON ledger
BEGIN SELECT RAISE(ABORT, 'ledger is append-only'); END;
