-- plyledger schema, migration 1: the whole record model.
--
-- Conventions
--  * Rows are never updated or deleted: the triggers at the end refuse it.
--  * A correctable record has `id` (this version) and `key` (the id of its
--    first version; NULL on a first version, meaning "my own id"). A
--    correction inserts a new row with `supersedes` = the current version's
--    id, the same `key`, and a `reason`. The current version of a record is
--    the row that no other row supersedes; the views *_current give them,
--    with `key` filled in.
--  * Children refer to a parent's key (the id of its first version), which
--    never changes.
--  * A CHECK passes when its expression is NULL, so checks on columns that
--    may be NULL say what NULL means (reason: coalesce to '').
--  * Times are ISO 8601 UTC text; dates YYYY-MM-DD. A date column checks
--    date(x, '+0 days') IS x: SQLite normalises an impossible day such as
--    2021-02-30 to another date, so only a real calendar date passes.

CREATE TABLE store_info (
    name  TEXT PRIMARY KEY,
    value TEXT NOT NULL
) WITHOUT ROWID;

CREATE TABLE airframe (
    id            INTEGER PRIMARY KEY,
    key           INTEGER REFERENCES airframe(id),
    supersedes    INTEGER UNIQUE REFERENCES airframe(id),
    reason        TEXT,
    serial        TEXT NOT NULL CHECK (length(serial) > 0),
    aircraft_type TEXT NOT NULL CHECK (length(aircraft_type) > 0),
    manufactured  TEXT CHECK (manufactured IS NULL OR date(manufactured, '+0 days') IS manufactured),
    notes         TEXT,
    recorded_at   TEXT NOT NULL,
    CHECK ((supersedes IS NULL) = (key IS NULL)),
    CHECK (supersedes IS NULL OR length(coalesce(reason, '')) > 0)
);
CREATE INDEX airframe_serial ON airframe(serial);

CREATE TABLE airframe_operator (
    id            INTEGER PRIMARY KEY,
    airframe_key  INTEGER NOT NULL REFERENCES airframe(id),
    operator_name TEXT NOT NULL CHECK (length(operator_name) > 0),
    since         TEXT NOT NULL CHECK (date(since, '+0 days') IS since),
    recorded_at   TEXT NOT NULL
);
CREATE INDEX airframe_operator_airframe ON airframe_operator(airframe_key, since);

CREATE TABLE site (
    id                INTEGER PRIMARY KEY,
    key               INTEGER REFERENCES site(id),
    supersedes        INTEGER UNIQUE REFERENCES site(id),
    reason            TEXT,
    airframe_key      INTEGER NOT NULL REFERENCES airframe(id),
    code              TEXT NOT NULL CHECK (length(code) > 0),
    zone              TEXT,
    description       TEXT,
    frame             TEXT,
    stringer          TEXT,
    method            TEXT NOT NULL,
    material          TEXT,
    thickness_mm      REAL CHECK (thickness_mm IS NULL OR thickness_mm > 0),
    diffusivity_mm2_s REAL CHECK (diffusivity_mm2_s IS NULL OR diffusivity_mm2_s > 0),
    coord_system      TEXT NOT NULL,
    coord_unit        TEXT NOT NULL,
    origin_x REAL NOT NULL, origin_y REAL NOT NULL, origin_z REAL NOT NULL,
    u_x REAL NOT NULL, u_y REAL NOT NULL, u_z REAL NOT NULL,
    v_x REAL NOT NULL, v_y REAL NOT NULL, v_z REAL NOT NULL,
    width_px          INTEGER NOT NULL CHECK (width_px >= 0),
    height_px         INTEGER NOT NULL CHECK (height_px >= 0),
    pitch_u_mm        REAL NOT NULL CHECK (pitch_u_mm > 0),
    pitch_v_mm        REAL NOT NULL CHECK (pitch_v_mm > 0),
    recorded_at       TEXT NOT NULL,
    CHECK ((supersedes IS NULL) = (key IS NULL)),
    CHECK (supersedes IS NULL OR length(coalesce(reason, '')) > 0)
);
CREATE INDEX site_airframe_code ON site(airframe_key, code);

CREATE TABLE inspection (
    id               INTEGER PRIMARY KEY,
    key              INTEGER REFERENCES inspection(id),
    supersedes       INTEGER UNIQUE REFERENCES inspection(id),
    reason           TEXT,
    site_key         INTEGER NOT NULL REFERENCES site(id),
    kind             TEXT NOT NULL
                     CHECK (kind IN ('baseline', 'scheduled', 'unscheduled', 'post-repair')),
    task_ref         TEXT,
    performed_on     TEXT NOT NULL CHECK (date(performed_on, '+0 days') IS performed_on),
    aircraft_hours   REAL CHECK (aircraft_hours IS NULL OR aircraft_hours >= 0),
    aircraft_cycles  INTEGER CHECK (aircraft_cycles IS NULL OR aircraft_cycles >= 0),
    procedure        TEXT NOT NULL CHECK (length(procedure) > 0),
    procedure_rev    TEXT NOT NULL CHECK (length(procedure_rev) > 0),
    equipment        TEXT NOT NULL CHECK (length(equipment) > 0),
    calibration_ref  TEXT NOT NULL CHECK (length(calibration_ref) > 0),
    inspector        TEXT NOT NULL CHECK (length(inspector) > 0),
    inspector_level  TEXT NOT NULL CHECK (length(inspector_level) > 0),
    software_version TEXT NOT NULL,
    parameters_json  TEXT CHECK (parameters_json IS NULL OR json_type(parameters_json) = 'object'),
    notes            TEXT,
    recorded_at      TEXT NOT NULL,
    CHECK ((supersedes IS NULL) = (key IS NULL)),
    CHECK (supersedes IS NULL OR length(coalesce(reason, '')) > 0)
);
CREATE INDEX inspection_site ON inspection(site_key, performed_on);

-- One reduced or imported map. Channels' data is one zlib-compressed blob of
-- little-endian float32 (channel-major, row-major), sha256 over the decoded
-- bytes.
CREATE TABLE map (
    id               INTEGER PRIMARY KEY,
    supersedes       INTEGER UNIQUE REFERENCES map(id),
    reason           TEXT,
    inspection_key   INTEGER NOT NULL REFERENCES inspection(id),
    source           TEXT,
    made_by          TEXT NOT NULL,
    software_version TEXT NOT NULL,
    parameters_json  TEXT CHECK (parameters_json IS NULL OR json_type(parameters_json) = 'object'),
    width            INTEGER NOT NULL CHECK (width > 0),
    height           INTEGER NOT NULL CHECK (height > 0),
    nchannels        INTEGER NOT NULL CHECK (nchannels > 0),
    pitch_u_mm       REAL NOT NULL CHECK (pitch_u_mm > 0),
    pitch_v_mm       REAL NOT NULL CHECK (pitch_v_mm > 0),
    coord_system     TEXT NOT NULL,
    coord_unit       TEXT NOT NULL,
    origin_x REAL NOT NULL, origin_y REAL NOT NULL, origin_z REAL NOT NULL,
    u_x REAL NOT NULL, u_y REAL NOT NULL, u_z REAL NOT NULL,
    v_x REAL NOT NULL, v_y REAL NOT NULL, v_z REAL NOT NULL,
    encoding         TEXT NOT NULL CHECK (encoding = 'zlib-f32le'),
    data             BLOB NOT NULL,
    sha256           TEXT NOT NULL CHECK (length(sha256) = 64 AND sha256 NOT GLOB '*[^0-9a-f]*'),
    recorded_at      TEXT NOT NULL,
    CHECK (supersedes IS NULL OR length(coalesce(reason, '')) > 0)
);
CREATE INDEX map_inspection ON map(inspection_key);

CREATE TABLE map_channel (
    map_id   INTEGER NOT NULL REFERENCES map(id),
    idx      INTEGER NOT NULL CHECK (idx >= 0),
    quantity TEXT NOT NULL CHECK (length(quantity) > 0),
    unit     TEXT NOT NULL CHECK (length(unit) > 0),
    label    TEXT NOT NULL DEFAULT '',
    PRIMARY KEY (map_id, idx)
) WITHOUT ROWID;

-- ---- filled by later work: detection, registration, comparison ----------

-- Acceptance criteria for growth, by name and revision (approved data).
CREATE TABLE criteria (
    id                 INTEGER PRIMARY KEY,
    key                INTEGER REFERENCES criteria(id),
    supersedes         INTEGER UNIQUE REFERENCES criteria(id),
    reason             TEXT,
    name               TEXT NOT NULL,
    revision           TEXT NOT NULL,
    source_document    TEXT,
    min_area_mm2       REAL,
    area_growth_mm2    REAL,
    area_growth_ratio  REAL,
    contrast_growth    REAL,
    depth_change_mm    REAL,
    parameters_json    TEXT,
    approved_by        TEXT,
    recorded_at        TEXT NOT NULL,
    UNIQUE (name, revision),
    CHECK ((supersedes IS NULL) = (key IS NULL)),
    CHECK (supersedes IS NULL OR length(coalesce(reason, '')) > 0)
);

-- One indication found in one map channel.
CREATE TABLE indication (
    id              INTEGER PRIMARY KEY,
    map_id          INTEGER NOT NULL REFERENCES map(id),
    channel         INTEGER NOT NULL,
    label           INTEGER NOT NULL,
    area_px         INTEGER NOT NULL,
    area_mm2        REAL NOT NULL,
    centroid_col    REAL NOT NULL,
    centroid_row    REAL NOT NULL,
    bbox_col0 INTEGER, bbox_row0 INTEGER, bbox_col1 INTEGER, bbox_row1 INTEGER,
    part_x REAL, part_y REAL, part_z REAL,
    length_mm       REAL,
    width_mm        REAL,
    peak_value      REAL,
    mean_value      REAL,
    depth_mm        REAL,
    outline_json    TEXT,
    parameters_json TEXT,
    recorded_at     TEXT NOT NULL,
    UNIQUE (map_id, channel, label)
);

-- Alignment of a current map onto a baseline map.
CREATE TABLE registration (
    id               INTEGER PRIMARY KEY,
    baseline_map_id  INTEGER NOT NULL REFERENCES map(id),
    current_map_id   INTEGER NOT NULL REFERENCES map(id),
    method           TEXT NOT NULL,
    status           TEXT NOT NULL CHECK (status IN ('aligned', 'refused', 'manual')),
    refusal          TEXT,
    shift_col_px     REAL, shift_row_px REAL,
    shift_u_mm       REAL, shift_v_mm REAL,
    rotation_deg     REAL,
    scale            REAL,
    ncc              REAL,
    peak_sidelobe    REAL,
    overlap_fraction REAL,
    overlap_mm2      REAL,
    supplied_by      TEXT,
    supplied_reason  TEXT,
    parameters_json  TEXT,
    software_version TEXT NOT NULL,
    recorded_at      TEXT NOT NULL
);

-- A comparison of a site's current inspection with its baseline.
CREATE TABLE comparison (
    id                     INTEGER PRIMARY KEY,
    site_key               INTEGER NOT NULL REFERENCES site(id),
    baseline_inspection    INTEGER NOT NULL REFERENCES inspection(id),
    current_inspection     INTEGER NOT NULL REFERENCES inspection(id),
    criteria_id            INTEGER REFERENCES criteria(id),
    registration_id        INTEGER REFERENCES registration(id),
    status                 TEXT NOT NULL CHECK (status IN ('done', 'not-done')),
    not_done_reason        TEXT,
    uncompared_mm2         REAL,
    uncompared_fraction    REAL,
    parameters_json        TEXT,
    software_version       TEXT NOT NULL,
    recorded_at            TEXT NOT NULL
);

-- One classified change inside a comparison.
CREATE TABLE indication_change (
    id                  INTEGER PRIMARY KEY,
    comparison_id       INTEGER NOT NULL REFERENCES comparison(id),
    class               TEXT NOT NULL
                        CHECK (class IN ('new', 'grown', 'unchanged', 'not-found', 'merged')),
    baseline_indication INTEGER REFERENCES indication(id),
    current_indication  INTEGER REFERENCES indication(id),
    area_change_mm2     REAL,
    area_change_ratio   REAL,
    contrast_change     REAL,
    exceeds_criteria    INTEGER NOT NULL DEFAULT 0 CHECK (exceeds_criteria IN (0, 1)),
    detail_json         TEXT,
    recorded_at         TEXT NOT NULL
);

-- The engineer's decision about a comparison; signed.
CREATE TABLE disposition (
    id                INTEGER PRIMARY KEY,
    supersedes        INTEGER UNIQUE REFERENCES disposition(id),
    reason            TEXT,
    comparison_id     INTEGER NOT NULL REFERENCES comparison(id),
    decision          TEXT NOT NULL
                      CHECK (decision IN ('accept', 'monitor', 'repair', 'refer-to-design-holder')),
    interval_text     TEXT,
    interval_hours    REAL,
    interval_cycles   INTEGER,
    interval_days     INTEGER,
    engineer          TEXT NOT NULL,
    authorisation     TEXT,
    rationale         TEXT,
    reference_docs    TEXT,
    signature         BLOB,
    public_key        BLOB,
    recorded_at       TEXT NOT NULL,
    CHECK (supersedes IS NULL OR length(coalesce(reason, '')) > 0)
);

CREATE TABLE disposition_change (
    disposition_id INTEGER NOT NULL REFERENCES disposition(id),
    change_id      INTEGER NOT NULL REFERENCES indication_change(id),
    PRIMARY KEY (disposition_id, change_id)
) WITHOUT ROWID;

-- Per-airframe hash chain over every row that enters the record.
CREATE TABLE ledger (
    id           INTEGER PRIMARY KEY,
    airframe_key INTEGER NOT NULL REFERENCES airframe(id),
    seq          INTEGER NOT NULL,
    table_name   TEXT NOT NULL,
    row_id       INTEGER NOT NULL,
    row_sha256   TEXT NOT NULL,
    prev_link    TEXT NOT NULL,
    link         TEXT NOT NULL,
    recorded_at  TEXT NOT NULL,
    UNIQUE (airframe_key, seq)
);

-- ---- current versions ----------------------------------------------------

CREATE VIEW airframe_current AS
    SELECT a.*, coalesce(a.key, a.id) AS stable_key FROM airframe a
    WHERE NOT EXISTS (SELECT 1 FROM airframe b WHERE b.supersedes = a.id);
CREATE VIEW site_current AS
    SELECT s.*, coalesce(s.key, s.id) AS stable_key FROM site s
    WHERE NOT EXISTS (SELECT 1 FROM site t WHERE t.supersedes = s.id);
CREATE VIEW inspection_current AS
    SELECT i.*, coalesce(i.key, i.id) AS stable_key FROM inspection i
    WHERE NOT EXISTS (SELECT 1 FROM inspection j WHERE j.supersedes = i.id);
CREATE VIEW map_current AS
    SELECT m.* FROM map m
    WHERE NOT EXISTS (SELECT 1 FROM map n WHERE n.supersedes = m.id);

-- ---- integrity of corrections ---------------------------------------------

-- A correction must carry the key of the row it supersedes (and what names
-- the record: an airframe's serial, a site's airframe and code).
CREATE TRIGGER airframe_correction_key BEFORE INSERT ON airframe
WHEN NEW.supersedes IS NOT NULL
 AND (NEW.key IS NOT (SELECT coalesce(key, id) FROM airframe WHERE id = NEW.supersedes)
      OR NEW.serial IS NOT (SELECT serial FROM airframe WHERE id = NEW.supersedes))
BEGIN SELECT RAISE(ABORT, 'airframe correction must keep the key and serial of the row it supersedes'); END;

CREATE TRIGGER site_correction_key BEFORE INSERT ON site
WHEN NEW.supersedes IS NOT NULL
 AND (NEW.key IS NOT (SELECT coalesce(key, id) FROM site WHERE id = NEW.supersedes)
      OR NEW.airframe_key IS NOT (SELECT airframe_key FROM site WHERE id = NEW.supersedes)
      OR NEW.code IS NOT (SELECT code FROM site WHERE id = NEW.supersedes))
BEGIN SELECT RAISE(ABORT, 'site correction must keep the key, airframe and code of the row it supersedes'); END;

CREATE TRIGGER inspection_correction_key BEFORE INSERT ON inspection
WHEN NEW.supersedes IS NOT NULL
 AND (NEW.key IS NOT (SELECT coalesce(key, id) FROM inspection WHERE id = NEW.supersedes)
      OR NEW.site_key IS NOT (SELECT site_key FROM inspection WHERE id = NEW.supersedes))
BEGIN SELECT RAISE(ABORT, 'inspection correction must keep the key and site of the row it supersedes'); END;

CREATE TRIGGER criteria_correction_key BEFORE INSERT ON criteria
WHEN NEW.supersedes IS NOT NULL
 AND NEW.key IS NOT (SELECT coalesce(key, id) FROM criteria WHERE id = NEW.supersedes)
BEGIN SELECT RAISE(ABORT, 'criteria correction must keep the key of the row it supersedes'); END;

-- Serials and site codes are unique among current records.
CREATE TRIGGER airframe_serial_unique BEFORE INSERT ON airframe
WHEN NEW.supersedes IS NULL AND EXISTS (SELECT 1 FROM airframe WHERE serial = NEW.serial)
BEGIN SELECT RAISE(ABORT, 'airframe serial already registered'); END;

CREATE TRIGGER site_code_unique BEFORE INSERT ON site
WHEN NEW.supersedes IS NULL
 AND EXISTS (SELECT 1 FROM site WHERE airframe_key = NEW.airframe_key AND code = NEW.code)
BEGIN SELECT RAISE(ABORT, 'site code already exists on this airframe'); END;

-- A site has at most one current baseline inspection.
CREATE TRIGGER inspection_one_baseline BEFORE INSERT ON inspection
WHEN NEW.kind = 'baseline'
 AND EXISTS (SELECT 1 FROM inspection_current c
             WHERE c.site_key = NEW.site_key AND c.kind = 'baseline'
               AND c.id IS NOT NEW.supersedes)
BEGIN SELECT RAISE(ABORT, 'site already has a baseline inspection'); END;

-- ---- append-only ------------------------------------------------------------

CREATE TRIGGER store_info_no_update BEFORE UPDATE ON store_info
BEGIN SELECT RAISE(ABORT, 'store_info is append-only'); END;
CREATE TRIGGER store_info_no_delete BEFORE DELETE ON store_info
BEGIN SELECT RAISE(ABORT, 'store_info is append-only'); END;
CREATE TRIGGER airframe_no_update BEFORE UPDATE ON airframe
BEGIN SELECT RAISE(ABORT, 'airframe is append-only: record a correction instead'); END;
CREATE TRIGGER airframe_no_delete BEFORE DELETE ON airframe
BEGIN SELECT RAISE(ABORT, 'airframe is append-only: record a correction instead'); END;
CREATE TRIGGER airframe_operator_no_update BEFORE UPDATE ON airframe_operator
BEGIN SELECT RAISE(ABORT, 'airframe_operator is append-only'); END;
CREATE TRIGGER airframe_operator_no_delete BEFORE DELETE ON airframe_operator
BEGIN SELECT RAISE(ABORT, 'airframe_operator is append-only'); END;
CREATE TRIGGER site_no_update BEFORE UPDATE ON site
BEGIN SELECT RAISE(ABORT, 'site is append-only: record a correction instead'); END;
CREATE TRIGGER site_no_delete BEFORE DELETE ON site
BEGIN SELECT RAISE(ABORT, 'site is append-only: record a correction instead'); END;
CREATE TRIGGER inspection_no_update BEFORE UPDATE ON inspection
BEGIN SELECT RAISE(ABORT, 'inspection is append-only: record a correction instead'); END;
CREATE TRIGGER inspection_no_delete BEFORE DELETE ON inspection
BEGIN SELECT RAISE(ABORT, 'inspection is append-only: record a correction instead'); END;
CREATE TRIGGER map_no_update BEFORE UPDATE ON map
BEGIN SELECT RAISE(ABORT, 'map is append-only'); END;
CREATE TRIGGER map_no_delete BEFORE DELETE ON map
BEGIN SELECT RAISE(ABORT, 'map is append-only'); END;
CREATE TRIGGER map_channel_no_update BEFORE UPDATE ON map_channel
BEGIN SELECT RAISE(ABORT, 'map_channel is append-only'); END;
CREATE TRIGGER map_channel_no_delete BEFORE DELETE ON map_channel
BEGIN SELECT RAISE(ABORT, 'map_channel is append-only'); END;
CREATE TRIGGER criteria_no_update BEFORE UPDATE ON criteria
BEGIN SELECT RAISE(ABORT, 'criteria is append-only: record a new revision instead'); END;
CREATE TRIGGER criteria_no_delete BEFORE DELETE ON criteria
BEGIN SELECT RAISE(ABORT, 'criteria is append-only: record a new revision instead'); END;
CREATE TRIGGER indication_no_update BEFORE UPDATE ON indication
BEGIN SELECT RAISE(ABORT, 'indication is append-only'); END;
CREATE TRIGGER indication_no_delete BEFORE DELETE ON indication
BEGIN SELECT RAISE(ABORT, 'indication is append-only'); END;
CREATE TRIGGER registration_no_update BEFORE UPDATE ON registration
BEGIN SELECT RAISE(ABORT, 'registration is append-only'); END;
CREATE TRIGGER registration_no_delete BEFORE DELETE ON registration
BEGIN SELECT RAISE(ABORT, 'registration is append-only'); END;
CREATE TRIGGER comparison_no_update BEFORE UPDATE ON comparison
BEGIN SELECT RAISE(ABORT, 'comparison is append-only'); END;
CREATE TRIGGER comparison_no_delete BEFORE DELETE ON comparison
BEGIN SELECT RAISE(ABORT, 'comparison is append-only'); END;
CREATE TRIGGER indication_change_no_update BEFORE UPDATE ON indication_change
BEGIN SELECT RAISE(ABORT, 'indication_change is append-only'); END;
CREATE TRIGGER indication_change_no_delete BEFORE DELETE ON indication_change
BEGIN SELECT RAISE(ABORT, 'indication_change is append-only'); END;
CREATE TRIGGER disposition_no_update BEFORE UPDATE ON disposition
BEGIN SELECT RAISE(ABORT, 'disposition is append-only: record a new disposition instead'); END;
CREATE TRIGGER disposition_no_delete BEFORE DELETE ON disposition
BEGIN SELECT RAISE(ABORT, 'disposition is append-only: record a new disposition instead'); END;
CREATE TRIGGER disposition_change_no_update BEFORE UPDATE ON disposition_change
BEGIN SELECT RAISE(ABORT, 'disposition_change is append-only'); END;
CREATE TRIGGER disposition_change_no_delete BEFORE DELETE ON disposition_change
BEGIN SELECT RAISE(ABORT, 'disposition_change is append-only'); END;
CREATE TRIGGER ledger_no_update BEFORE UPDATE ON ledger
BEGIN SELECT RAISE(ABORT, 'ledger is append-only'); END;
CREATE TRIGGER ledger_no_delete BEFORE DELETE ON ledger
BEGIN SELECT RAISE(ABORT, 'ledger is append-only'); END;
