-- plyledger schema, migration 5: the indications and changes of a
-- comparison, as plyledger/change.h makes them.
--
-- Migration 1 keyed an indication by (map, channel, label) and gave a
-- change a vocabulary the comparison does not use. An indication belongs to
-- the comparison that detected it: a current map's indications are
-- measured on the baseline's grid through that comparison's registration,
-- and the same baseline map is detected once per comparison. No earlier
-- version of plyledger wrote either table, so both are recreated; the
-- guard below refuses the migration, and leaves the store as it was, if
-- either holds a row all the same.

CREATE TEMP TABLE migration_5_guard (
    rows INTEGER CONSTRAINT indication_tables_must_be_empty CHECK (rows = 0)
);
INSERT INTO migration_5_guard
SELECT (SELECT count(*) FROM indication) + (SELECT count(*) FROM indication_change)
     + (SELECT count(*) FROM disposition_change);
DROP TABLE migration_5_guard;

DROP TABLE disposition_change;
DROP TABLE indication_change;
DROP TABLE indication;

-- One indication of one map channel, found by one comparison. role says
-- which side: 'baseline' is the comparison's baseline_inspection (its
-- reference: the baseline, or the previous inspection for a trend), on its
-- own grid; 'current' is the current inspection's map carried onto that
-- grid by the comparison's registration, so its pixel positions are the
-- baseline map's. label is the indication's number in its detection (1..n).
-- Sizes under both sizing rules: above the detection threshold, and above
-- half of the indication's own peak (half-maximum). part_x/y/z: the
-- centroid on the airframe through the site frame (NULL without one).
-- outline: the boundary's chain code (plyledger/detect.h).
CREATE TABLE indication (
    id                       INTEGER PRIMARY KEY,
    comparison_id            INTEGER NOT NULL REFERENCES comparison(id),
    role                     TEXT NOT NULL CHECK (role IN ('baseline', 'current')),
    map_id                   INTEGER NOT NULL REFERENCES map(id),
    channel                  INTEGER NOT NULL CHECK (channel >= 0),
    label                    INTEGER NOT NULL CHECK (label > 0),
    area_px                  INTEGER NOT NULL CHECK (area_px > 0),
    area_mm2                 REAL NOT NULL CHECK (area_mm2 > 0),
    equivalent_diameter_mm   REAL NOT NULL CHECK (equivalent_diameter_mm > 0),
    area_halfmax_px          INTEGER NOT NULL CHECK (area_halfmax_px > 0),
    area_halfmax_mm2         REAL NOT NULL CHECK (area_halfmax_mm2 > 0),
    equivalent_diameter_halfmax_mm REAL NOT NULL CHECK (equivalent_diameter_halfmax_mm > 0),
    centroid_col             REAL NOT NULL,
    centroid_row             REAL NOT NULL,
    part_x REAL, part_y REAL, part_z REAL,
    bbox_col0 INTEGER NOT NULL, bbox_row0 INTEGER NOT NULL,
    bbox_col1 INTEGER NOT NULL, bbox_row1 INTEGER NOT NULL,
    major_axis_mm            REAL,
    minor_axis_mm            REAL,
    orientation_deg          REAL CHECK (orientation_deg > -90 AND orientation_deg <= 90),
    peak_contrast            REAL NOT NULL,
    peak_snr                 REAL,
    peak_col INTEGER NOT NULL, peak_row INTEGER NOT NULL,
    mean_contrast            REAL NOT NULL,
    depth_mm                 REAL,
    perimeter_mm             REAL,
    outline                  TEXT,
    recorded_at              TEXT NOT NULL,
    UNIQUE (comparison_id, role, label),
    CHECK (bbox_col0 <= bbox_col1 AND bbox_row0 <= bbox_row1)
);
CREATE INDEX indication_map ON indication(map_id);

-- One change of a comparison: a group of matched indications, or a changed
-- region of the difference map. number is its position in the comparison
-- (1..n, as the outputs number it). baseline_labels and current_labels are
-- JSON arrays of the member indications' labels (rows of `indication` with
-- this comparison and role); a split or merge has several. Deltas are
-- current - baseline; a margin is limit - measured (negative: beyond the
-- limit). touches: the number of the change a changed region borders.
CREATE TABLE indication_change (
    id                    INTEGER PRIMARY KEY,
    comparison_id         INTEGER NOT NULL REFERENCES comparison(id),
    number                INTEGER NOT NULL CHECK (number > 0),
    class                 TEXT NOT NULL CHECK (class IN ('new', 'grown', 'stable',
                          'vanished', 'not-compared', 'changed-region')),
    matched_by            TEXT NOT NULL CHECK (matched_by IN ('none', 'overlap', 'distance',
                          'signal')),
    baseline_labels       TEXT NOT NULL CHECK (json_type(baseline_labels) = 'array'),
    current_labels        TEXT NOT NULL CHECK (json_type(current_labels) = 'array'),
    sizing                TEXT NOT NULL CHECK (sizing IN ('threshold', 'half-maximum')),
    area_baseline_mm2     REAL,
    area_current_mm2      REAL,
    area_delta_mm2        REAL,
    area_delta_percent    REAL,
    area_baseline_halfmax_mm2 REAL,
    area_current_halfmax_mm2  REAL,
    area_delta_halfmax_mm2    REAL,
    contrast_baseline     REAL,
    contrast_current      REAL,
    contrast_delta        REAL,
    centroid_col          REAL,
    centroid_row          REAL,
    distance_px           REAL,
    area_limit_mm2        REAL,
    area_measured_mm2     REAL,
    area_margin_mm2       REAL,
    area_exceeds          INTEGER NOT NULL CHECK (area_exceeds IN (0, 1)),
    contrast_limit        REAL,
    contrast_margin       REAL,
    contrast_exceeds      INTEGER NOT NULL CHECK (contrast_exceeds IN (0, 1)),
    reportable            INTEGER NOT NULL CHECK (reportable IN (0, 1)),
    exceeds               INTEGER NOT NULL CHECK (exceeds IN (0, 1)),
    region_pixels         INTEGER,
    touches               INTEGER CHECK (touches IS NULL OR touches > 0),
    recorded_at           TEXT NOT NULL,
    UNIQUE (comparison_id, number)
);

-- Which changes a disposition covers (as migration 1).
CREATE TABLE disposition_change (
    disposition_id INTEGER NOT NULL REFERENCES disposition(id),
    change_id      INTEGER NOT NULL REFERENCES indication_change(id),
    PRIMARY KEY (disposition_id, change_id)
) WITHOUT ROWID;

CREATE TRIGGER indication_no_update BEFORE UPDATE ON indication
BEGIN SELECT RAISE(ABORT, 'indication is append-only'); END;
CREATE TRIGGER indication_no_delete BEFORE DELETE ON indication
BEGIN SELECT RAISE(ABORT, 'indication is append-only'); END;
CREATE TRIGGER indication_change_no_update BEFORE UPDATE ON indication_change
BEGIN SELECT RAISE(ABORT, 'indication_change is append-only'); END;
CREATE TRIGGER indication_change_no_delete BEFORE DELETE ON indication_change
BEGIN SELECT RAISE(ABORT, 'indication_change is append-only'); END;
CREATE TRIGGER disposition_change_no_update BEFORE UPDATE ON disposition_change
BEGIN SELECT RAISE(ABORT, 'disposition_change is append-only'); END;
CREATE TRIGGER disposition_change_no_delete BEFORE DELETE ON disposition_change
BEGIN SELECT RAISE(ABORT, 'disposition_change is append-only'); END;

-- An indication's comparison must be done, and its map must be the map of
-- the comparison's inspection on its side.
CREATE TRIGGER indication_of_its_comparison BEFORE INSERT ON indication
WHEN NOT EXISTS (
    SELECT 1 FROM comparison c JOIN map m ON m.id = NEW.map_id
    WHERE c.id = NEW.comparison_id AND c.status = 'done'
      AND m.inspection_key = CASE NEW.role WHEN 'baseline' THEN c.baseline_inspection
                                           ELSE c.current_inspection END)
BEGIN SELECT RAISE(ABORT, 'an indication belongs to a comparison that was done, and to the map of that comparison''s inspection on its side'); END;

CREATE TRIGGER indication_change_of_done_comparison BEFORE INSERT ON indication_change
WHEN NOT EXISTS (SELECT 1 FROM comparison c WHERE c.id = NEW.comparison_id
                 AND c.status = 'done')
BEGIN SELECT RAISE(ABORT, 'a change belongs to a comparison that was done'); END;
