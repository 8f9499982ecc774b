-- plyledger schema, migration 7: seals on the ledger's links
-- (plyledger/ledger.h, "Seals").
--
-- A chain alone cannot tell a forged row appended with a correctly
-- recomputed link from a true one. A sealed store signs every link it
-- appends with its own seal key (Ed25519), whose secret half lives in a key
-- file outside the store; a link without a valid seal is then a fault.
-- Links received with a hand-over package keep the seals of the store that
-- made them: that store's public key is kept here as a received key, for
-- the chain it sealed and up to the link it sealed last, endorsed (signed)
-- by this store's own key when the package was imported.

CREATE TABLE seal_key (
    id          INTEGER PRIMARY KEY,
    public_key  TEXT NOT NULL CHECK (length(public_key) = 64),
    origin      TEXT NOT NULL CHECK (origin IN ('own', 'received')),
    chain       INTEGER REFERENCES airframe(id),   -- received: NULL is the store's chain
    through_seq INTEGER CHECK (through_seq IS NULL OR through_seq >= 1),
    source      TEXT,                              -- received: where from (store id, file)
    endorsement BLOB CHECK (endorsement IS NULL OR length(endorsement) = 64),
    recorded_at TEXT NOT NULL,
    CHECK ((origin = 'own') = (endorsement IS NULL)),
    CHECK ((origin = 'own') = (through_seq IS NULL))
);
CREATE UNIQUE INDEX seal_key_own ON seal_key (origin) WHERE origin = 'own';
CREATE UNIQUE INDEX seal_key_received ON seal_key (public_key, coalesce(chain, 0))
    WHERE origin = 'received';

-- The seal of one link: Ed25519 by key `key_id` over "PLSL" version:u32
-- link:32 bytes (plyledger/ledger.h).
CREATE TABLE ledger_seal (
    ledger_id INTEGER PRIMARY KEY REFERENCES ledger(id),
    key_id    INTEGER NOT NULL REFERENCES seal_key(id),
    seal      BLOB NOT NULL CHECK (length(seal) = 64)
);

CREATE TRIGGER seal_key_no_update BEFORE UPDATE ON seal_key
BEGIN SELECT RAISE(ABORT, 'seal_key is append-only'); END;
CREATE TRIGGER seal_key_no_delete BEFORE DELETE ON seal_key
BEGIN SELECT RAISE(ABORT, 'seal_key is append-only'); END;
CREATE TRIGGER ledger_seal_no_update BEFORE UPDATE ON ledger_seal
BEGIN SELECT RAISE(ABORT, 'ledger_seal is append-only'); END;
CREATE TRIGGER ledger_seal_no_delete BEFORE DELETE ON ledger_seal
BEGIN SELECT RAISE(ABORT, 'ledger_seal is append-only'); END;
